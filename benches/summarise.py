"""Tables of the criterion results, for the README's performance section.

    cargo bench --bench filter_step && cargo bench --bench sampling_filters
    python3 benches/summarise.py [-o benches/results/criterion.md]

Reads every `target/criterion/**/new/{benchmark,estimates}.json` and prints Markdown tables of
the median time of each benchmark (criterion's point estimate of the median sample): the step
cost of every filter on every plant, the EKF with AD against hand-written Jacobians, and the
particle filter against particle count, thread count and its own bare arithmetic. Standard
library only.

`--baselines BEFORE AFTER` instead compares two saved baselines (`cargo bench --bench
filter_step -- --save-baseline NAME`, e.g. the same bench built from two commits and run
against one `CRITERION_HOME`) and prints each median of both with their ratio.
"""

import argparse
import json
import math
import os
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
FILTERS = ["ekf", "iekf", "ukf", "ckf", "ghkf", "srukf", "pf", "enkf"]
PLANTS = ["pendulum", "quadtank", "tracking", "tankchain-8", "tankchain-16", "tankchain-32",
          "tankchain-64"]
COUNTS = ["1000", "10000", "100000", "1000000"]


def load(criterion_dir, baseline="new"):
    medians = {}
    for dirpath, _, files in os.walk(criterion_dir):
        if Path(dirpath).name != baseline or "benchmark.json" not in files:
            continue
        bench = json.loads((Path(dirpath) / "benchmark.json").read_text())
        est = json.loads((Path(dirpath) / "estimates.json").read_text())
        medians[bench["full_id"]] = est["median"]["point_estimate"] * 1e-9
    return medians


def human(seconds):
    if seconds is None:
        return "n/a"
    for unit, scale in (("s", 1.0), ("ms", 1e-3), ("µs", 1e-6), ("ns", 1e-9)):
        if seconds >= scale:
            return f"{seconds / scale:.3g} {unit}"
    return f"{seconds / 1e-9:.3g} ns"


def table(header, rows):
    lines = ["| " + " | ".join(header) + " |", "|" + "---|" * len(header)]
    lines += ["| " + " | ".join(r) + " |" for r in rows]
    return "\n".join(lines)


def compare(criterion_dir, before, after):
    """Markdown table of the medians of two baselines and their ratio, with the geometric mean."""
    old, new = load(criterion_dir, before), load(criterion_dir, after)
    rows, logs = [], []
    for name in sorted(set(old) & set(new)):
        ratio = new[name] / old[name]
        logs.append(math.log(ratio))
        rows.append([name, human(old[name]), human(new[name]), f"{ratio:.3f}"])
    text = table(["benchmark", before, after, f"{after} / {before}"], rows)
    if logs:
        text += (f"\n\n{len(logs)} medians: geometric mean {math.exp(sum(logs) / len(logs)):.3f}, "
                 f"min {math.exp(min(logs)):.3f}, max {math.exp(max(logs)):.3f}")
    return text + "\n"


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--criterion", type=Path, default=ROOT / "target" / "criterion")
    ap.add_argument("-o", "--output", type=Path, default=None)
    ap.add_argument("--baselines", nargs=2, metavar=("BEFORE", "AFTER"))
    a = ap.parse_args()
    if a.baselines:
        text = compare(a.criterion, *a.baselines)
        print(text)
        if a.output:
            a.output.write_text(text)
        return
    m = load(a.criterion)
    out = []

    out.append("**One predict + update step, median** (`cargo bench --bench filter_step`; "
               "n/a: the 3ⁿ-point Gauss–Hermite rule exceeds 10⁶ points)\n")
    header = ["filter"] + [p.replace("tankchain-", "tankchain n=") for p in PLANTS]
    rows = [[f"`{f}`"] + [human(m.get(f"step/{p}/{f}")) for p in PLANTS] for f in FILTERS]
    out.append(table(header, rows))

    out.append("\n**EKF: AD against hand-written Jacobians, median** "
               "(`ekf_jacobians` group)\n")
    rows = []
    for plant in ["pendulum", "quadtank"]:
        for what, hand, ad in [("step", "step hand-written", "step ad"),
                               ("F alone", "F hand-written", "F ad")]:
            h, d = m.get(f"ekf_jacobians/{plant}/{hand}"), m.get(f"ekf_jacobians/{plant}/{ad}")
            ratio = f"{d / h:.2f}×" if h and d else "n/a"
            rows.append([plant, what, human(h), human(d), ratio])
    out.append(table(["plant", "", "hand-written", "AD", "AD / hand"], rows))

    out.append("\n**Particle filter on `pendulum`, one step, median** "
               "(`sampling_filters`: `pf_particles`, `pf_bare`)\n")
    rows = []
    for n in COUNTS:
        one, two = m.get(f"pf_particles/1t/{n}"), m.get(f"pf_particles/2t/{n}")
        bare = m.get(f"pf_bare/{n}")
        per = f"{one / int(n) * 1e9:.1f} ns" if one else "n/a"
        speed = f"{one / two:.2f}×" if one and two else "n/a"
        over = f"{one / bare:.2f}×" if one and bare else "n/a"
        rows.append([f"{int(n):.0e}".replace("e+0", "e"), human(one), human(two), speed, per,
                     human(bare), over])
    out.append(table(["N", "1 thread", "2 threads", "speed-up", "per particle (1 thread)",
                      "bare arithmetic", "PF / bare"], rows))

    extra = sorted(k for k in m if k.startswith("step_1e5/"))
    if extra:
        out.append("\n**Sampling-filter variants at 10⁵, default pool, median** "
                   "(`step_1e5` group)\n")
        out.append(table(["plant and spec", "step"],
                         [[f"`{k.split('/', 1)[1]}`", human(m[k])] for k in extra]))

    text = "\n".join(out) + "\n"
    print(text)
    if a.output:
        a.output.parent.mkdir(parents=True, exist_ok=True)
        a.output.write_text(text)


if __name__ == "__main__":
    main()
