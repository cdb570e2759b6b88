#!/usr/bin/env python3
"""Instructions per step of every `benches/filter_step` case, counted by valgrind's callgrind.

Instruction counts do not move with the load of the machine the way wall-clock medians do, so
two builds (e.g. before and after a change) compare reliably on a busy machine. Each case runs
`examples/step_counts.rs` under callgrind with collection on only inside its timed loop, on one
rayon thread (the particle filters then run in the calling thread, deterministically).

    cargo build --release --example step_counts
    python3 benches/callgrind.py target/release/examples/step_counts --out /tmp/new
    python3 benches/callgrind.py OLD/target/release/examples/step_counts --out /tmp/old
    python3 benches/callgrind.py --compare /tmp/old /tmp/new      # markdown table of ratios

`--only pendulum` (a substring of the case name) runs a subset. Each case leaves its
`callgrind.out.*` in `--out` for `callgrind_annotate --inclusive=yes FILE`.
"""

import argparse
import json
import math
import os
import re
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor

FILTERS = ["ekf", "iekf", "ukf", "ckf", "ghkf", "srukf", "pf", "enkf"]
PLANTS = ["pendulum", "quadtank", "tracking", "tankchain-8", "tankchain-16", "tankchain-32",
          "tankchain-64"]


def steps_for(plant, spec):
    """Steps per case: enough to average over the data, few enough for callgrind's ~50x."""
    heavy = spec in ("pf", "enkf", "ghkf")
    if plant in ("tankchain-32", "tankchain-64"):
        return 10 if heavy else 40
    if plant.startswith("tankchain"):
        return 10 if heavy else 200
    return 50 if heavy else 400


def cases():
    """(name, arguments of step_counts, steps) of every case."""
    out = []
    for plant in PLANTS:
        for spec in FILTERS:
            if spec == "ghkf" and plant in ("tankchain-16", "tankchain-32", "tankchain-64"):
                continue  # not applicable (more than 10^6 points), as in the bench
            n = steps_for(plant, spec)
            out.append((f"step/{plant}/{spec}", ["step", plant, spec, str(n)], n))
    for plant in ["pendulum", "quadtank"]:
        for label, spec in [("step hand-written", "ekf"), ("step ad", "ekf:jacobian=ad")]:
            out.append((f"ekf_jacobians/{plant}/{label}", ["step", plant, spec, "400"], 400))
        for label, source in [("F hand-written", "model"), ("F ad", "ad")]:
            out.append((f"ekf_jacobians/{plant}/{label}", ["jacobian", plant, source, "2000"],
                        2000))
    return out


def run_case(binary, out_dir, case):
    name, args, steps = case
    stem = re.sub(r"[^A-Za-z0-9]+", "_", name)
    target = os.path.join(out_dir, f"callgrind.out.{stem}")
    env = dict(os.environ, RAYON_NUM_THREADS="1")
    subprocess.run(
        ["valgrind", "--tool=callgrind", "--toggle-collect=*step_counts*timed_*",
         f"--callgrind-out-file={target}", binary, *args],
        check=True, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    with open(target) as f:
        for line in f:
            if line.startswith("summary:") or line.startswith("totals:"):
                total = int(line.split()[1])
    return name, total / steps


def measure(binary, out_dir, only, jobs):
    os.makedirs(out_dir, exist_ok=True)
    todo = [c for c in cases() if only in c[0]]
    with ThreadPoolExecutor(jobs) as pool:
        results = dict(pool.map(lambda c: run_case(binary, out_dir, c), todo))
    with open(os.path.join(out_dir, "instructions.json"), "w") as f:
        json.dump(results, f, indent=1)
    for name, per_step in results.items():
        print(f"{name}\t{per_step:.0f}")


def compare(old_dir, new_dir):
    load = lambda d: json.load(open(os.path.join(d, "instructions.json")))
    old, new = load(old_dir), load(new_dir)
    print("| case | before | after | after / before |")
    print("|---|---|---|---|")
    ratios = []
    for name in old:
        if name not in new:
            continue
        r = new[name] / old[name]
        ratios.append(r)
        print(f"| {name} | {old[name]:.0f} | {new[name]:.0f} | {r:.3f} |")
    geo = math.exp(sum(map(math.log, ratios)) / len(ratios))
    print(f"\n{len(ratios)} cases: geometric mean {geo:.3f}, min {min(ratios):.3f}, "
          f"max {max(ratios):.3f}")


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("binary", nargs="?", help="a built examples/step_counts")
    p.add_argument("--out", help="directory for callgrind files and instructions.json")
    p.add_argument("--only", default="", help="run the cases whose name contains this")
    p.add_argument("--jobs", type=int, default=1, help="cases run at once")
    p.add_argument("--compare", nargs=2, metavar=("BEFORE", "AFTER"))
    a = p.parse_args()
    if a.compare:
        compare(*a.compare)
    elif a.binary and a.out:
        measure(a.binary, a.out, a.only, a.jobs)
    else:
        p.error("give BINARY --out DIR, or --compare BEFORE AFTER")


if __name__ == "__main__":
    sys.exit(main())
