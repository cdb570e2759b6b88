"""Sightline against the numpy baseline, on one dataset, in one run.

    pip install numpy scipy          # not part of CI
    python3 benches/baseline/compare.py [--steps 500] [--particles 100000] [--out DIR]
                                        [--pf-options lanes=on]

1. builds the `sightline` binary and the `time_filter` example (release);
2. simulates one `pendulum` and one `ungm` dataset with `sightline simulate`;
3. runs Sightline's `ukf` and `pf:particles=N` on the pendulum (the PF on 1 and on 2 threads)
   and the numpy UKF and bootstrap PF of numpy_filters.py, and both sides' PF on the growth
   model (the bootstrap filter's own published example), each several times, keeping each
   side's fastest run (the least disturbed by other load on the machine);
4. checks that both sides estimate the same thing: the UKFs agree to rounding (the same
   deterministic equations), the PFs to their Monte Carlo error (independent random numbers);
5. prints the per-step costs and their ratios against the goals, and writes them to
   DIR/baseline.json.

Exits 1 if the estimates disagree.
"""

import argparse
import json
import math
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

# BLAS on one thread: numpy's matrices here are 2×2 to 4×4 (and 2×N products), where extra BLAS
# threads only add synchronisation; on a busy machine they made scipy's expm ~4× slower. This is
# numpy's faster setting here, so the ratios below are conservative.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from numpy_filters import Pendulum, Ungm, bootstrap_pf, bootstrap_pf_ungm, ukf  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]


def run(cmd, env=None):
    out = subprocess.run(cmd, cwd=ROOT, env=env, check=True, capture_output=True, text=True)
    return out.stdout


def read_dataset(path, measurement="position"):
    with open(path) as f:
        header = f.readline().strip().split(",")
        rows = [line.rstrip("\n").split(",") for line in f]
    col = {h: i for i, h in enumerate(header)}

    def column(name):
        return np.array([float(r[col[name]]) if r[col[name]] else math.nan for r in rows])

    u = column("u.torque") if "u.torque" in col else np.zeros(len(rows))
    return column("t"), u, column(f"y.{measurement}")


def read_estimates(path, n=2):
    data = np.loadtxt(path, delimiter=",", skiprows=1, ndmin=2)
    return data[:, 1 : 1 + n], data[:, 1 + n : 1 + 2 * n]


def sightline(data, spec, repeat, threads, out, model="pendulum", n=2):
    env = dict(os.environ, RAYON_NUM_THREADS=str(threads))
    line = run(
        [str(ROOT / "target/release/examples/time_filter"), model, str(data), spec,
         "--repeat", str(repeat), "-o", str(out)],
        env=env,
    )
    return json.loads(line)["seconds_per_step"], read_estimates(out, n)


def pf_agreement(ours, theirs, sd, particles):
    """RMS and largest difference of two independent PF means in posterior standard deviations.
    Each estimate with ~N/2 effective particles has standard deviation about sd·√(2/N), so the
    difference has about 2·sd/√N; its RMS over the steps must stay within a small multiple."""
    z = (ours - theirs) / sd
    return float(np.sqrt(np.mean(z**2))), float(np.max(np.abs(z))), 5.0 * 2.0 / math.sqrt(particles)


def numpy_side(fn, repeat, *args):
    best, result = math.inf, None
    for _ in range(repeat):
        start = time.perf_counter()
        result = fn(*args)
        best = min(best, time.perf_counter() - start)
    return best, result


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--steps", type=int, default=500)
    ap.add_argument("--particles", type=int, default=100_000)
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--ukf-repeat", type=int, default=20)
    ap.add_argument("--pf-repeat", type=int, default=3)
    ap.add_argument("--out", type=Path, default=None, help="where baseline.json goes")
    ap.add_argument("--pf-options", default="",
                    help="extra options of Sightline's pf, e.g. lanes=on (comma-separated)")
    a = ap.parse_args()

    run(["cargo", "build", "--release", "--quiet", "--bin", "sightline",
         "--example", "time_filter"])
    work = Path(tempfile.mkdtemp(prefix="sightline-baseline-"))
    data = work / "pendulum.csv"
    run([str(ROOT / "target/release/sightline"), "simulate", "pendulum", "--steps",
         str(a.steps), "--seed", str(a.seed), "-o", str(data)])
    t, u, y = read_dataset(data)
    steps = len(t)
    plant = Pendulum()
    pf_spec = f"pf:particles={a.particles}"
    # With --pf-options the PF also runs as `pf_spec,OPTIONS` on both models, timed against
    # the same numpy runs.
    alt_spec = f"{pf_spec},{a.pf_options}" if a.pf_options else None

    rs_ukf, (rs_ukf_m, rs_ukf_sd) = sightline(data, "ukf", a.ukf_repeat, 1, work / "ukf.csv")
    rs_pf1, (rs_pf_m, rs_pf_sd) = sightline(data, pf_spec, a.pf_repeat, 1, work / "pf1.csv")
    rs_pf2, (rs_pf2_m, _) = sightline(data, pf_spec, a.pf_repeat, 2, work / "pf2.csv")
    np_ukf, (np_ukf_m, np_ukf_sd) = numpy_side(ukf, a.ukf_repeat, plant, t, u, y)
    np_pf, (np_pf_m, np_pf_sd) = numpy_side(
        bootstrap_pf, a.pf_repeat, plant, t, u, y, a.particles, a.seed
    )
    np_ukf /= steps
    np_pf /= steps

    # Same estimates. UKF: identical deterministic equations, so rounding only (Q by a different
    # matrix exponential, expm's Padé against Sightline's Taylor series, both to rounding).
    ukf_dev = float(np.max(np.abs(rs_ukf_m - np_ukf_m) / rs_ukf_sd))
    ukf_sd_dev = float(np.max(np.abs(rs_ukf_sd / np_ukf_sd - 1.0)))
    # PF: independent random numbers; the difference of two estimates with ~N/2 effective
    # particles each has standard deviation about 2·sd/√N per step, so its RMS over steps in
    # units of the posterior sd must be a small multiple of 2/√N, and no step far off.
    pf_rms, pf_max, pf_bound = pf_agreement(rs_pf_m, np_pf_m, rs_pf_sd, a.particles)
    threads_same = bool(np.array_equal(rs_pf_m, rs_pf2_m))

    # The growth model: the bootstrap filter's published example, no transcendental function
    # per particle but the cosine of the time index.
    growth = work / "ungm.csv"
    run([str(ROOT / "target/release/sightline"), "simulate", "ungm", "--steps",
         str(a.steps), "--seed", str(a.seed), "-o", str(growth)])
    gt, _, gy = read_dataset(growth, "y")
    g_steps = len(gt)
    rs_g1, (rs_g_m, rs_g_sd) = sightline(growth, pf_spec, a.pf_repeat, 1, work / "g1.csv",
                                         "ungm", 1)
    rs_g2, (rs_g2_m, _) = sightline(growth, pf_spec, a.pf_repeat, 2, work / "g2.csv", "ungm", 1)
    np_g, (np_g_m, _) = numpy_side(bootstrap_pf_ungm, a.pf_repeat, Ungm(), gt, gy, a.particles,
                                   a.seed)
    np_g /= g_steps
    g_rms, g_max, _ = pf_agreement(rs_g_m, np_g_m, rs_g_sd, a.particles)
    threads_same = threads_same and bool(np.array_equal(rs_g_m, rs_g2_m))
    alt = {}
    if alt_spec:
        for key, dataset, model, n in [("pf", data, "pendulum", 2), ("ungm_pf", growth, "ungm", 1)]:
            for threads in (1, 2):
                seconds, (means, _) = sightline(dataset, alt_spec, a.pf_repeat, threads,
                                                work / f"alt_{key}_{threads}.csv", model, n)
                alt[f"{key}_{threads}"] = (seconds, means)
        threads_same = threads_same and all(
            np.array_equal(alt[f"{k}_1"][1], alt[f"{k}_2"][1]) for k in ("pf", "ungm_pf"))
    checks = {
        "ukf_max_mean_difference_in_sd": ukf_dev,
        "ukf_max_relative_sd_difference": ukf_sd_dev,
        "pf_rms_mean_difference_in_sd": pf_rms,
        "pf_max_mean_difference_in_sd": pf_max,
        "pf_rms_bound": pf_bound,
        "ungm_pf_rms_mean_difference_in_sd": g_rms,
        "ungm_pf_max_mean_difference_in_sd": g_max,
        "pf_one_and_two_threads_identical": threads_same,
    }
    if alt_spec:
        # Same seed, same draws: the alternative PF (e.g. lanes=on) differs by rounding only.
        checks["alternative_pf_max_mean_difference_in_sd"] = float(
            np.max(np.abs(alt["pf_1"][1] - rs_pf_m) / rs_pf_sd))
    ok = (ukf_dev < 1e-6 and ukf_sd_dev < 1e-6 and pf_rms < pf_bound and g_rms < pf_bound
          and threads_same)

    rows = [
        ("ukf step", rs_ukf, np_ukf, 50.0),
        (f"pf N={a.particles} step, 1 thread", rs_pf1, np_pf, 6.0),
        (f"pf N={a.particles} step, 2 threads", rs_pf2, np_pf, 6.0),
        (f"ungm pf N={a.particles}, 1 thread", rs_g1, np_g, 6.0),
        (f"ungm pf N={a.particles}, 2 threads", rs_g2, np_g, 6.0),
    ]
    if alt_spec:
        rows += [
            (f"pf {a.pf_options}, 1 thread", alt["pf_1"][0], np_pf, 6.0),
            (f"pf {a.pf_options}, 2 threads", alt["pf_2"][0], np_pf, 6.0),
            (f"ungm pf {a.pf_options}, 1 thread", alt["ungm_pf_1"][0], np_g, 6.0),
            (f"ungm pf {a.pf_options}, 2 threads", alt["ungm_pf_2"][0], np_g, 6.0),
        ]
    load = os.getloadavg()
    print(f"pendulum, {steps} rows, numpy {np.__version__}, Python {platform.python_version()}, "
          f"load average {load[0]:.2f} {load[1]:.2f} {load[2]:.2f}")
    print(f"{'':34} {'sightline':>12} {'numpy':>12} {'ratio':>8} {'goal':>6}")
    for name, rs, nps, goal in rows:
        ratio = nps / rs
        mark = "met" if ratio >= goal else "MISSED"
        print(f"{name:34} {rs * 1e6:10.2f}µs {nps * 1e6:10.2f}µs {ratio:7.1f}× {goal:5.0f}× {mark}")
    print(f"PF 2 threads / 1 thread speed-up: pendulum {rs_pf1 / rs_pf2:.2f}×, "
          f"ungm {rs_g1 / rs_g2:.2f}×")
    for k, v in checks.items():
        print(f"  {k}: {v:.3g}" if isinstance(v, float) else f"  {k}: {v}")
    print("estimates agree" if ok else "ESTIMATES DISAGREE")

    result = {
        "models": ["pendulum", "ungm"],
        "steps": steps,
        "particles": a.particles,
        "numpy": np.__version__,
        "python": platform.python_version(),
        "load_average": load,
        "seconds_per_step": {
            "sightline_ukf": rs_ukf,
            "numpy_ukf": np_ukf,
            "sightline_pf_1_thread": rs_pf1,
            "sightline_pf_2_threads": rs_pf2,
            "numpy_pf": np_pf,
            "sightline_ungm_pf_1_thread": rs_g1,
            "sightline_ungm_pf_2_threads": rs_g2,
            "numpy_ungm_pf": np_g,
        },
        "ratios": {
            "ukf": np_ukf / rs_ukf,
            "pf_1_thread": np_pf / rs_pf1,
            "pf_2_threads": np_pf / rs_pf2,
            "ungm_pf_1_thread": np_g / rs_g1,
            "ungm_pf_2_threads": np_g / rs_g2,
        },
        "checks": checks,
        "agree": ok,
    }
    if alt_spec:
        result["alternative_pf_spec"] = alt_spec
        result["alternative_seconds_per_step"] = {
            f"sightline_{k.replace('_1', '_1_thread').replace('_2', '_2_threads')}": v[0]
            for k, v in alt.items()
        }
        result["alternative_ratios"] = {
            k: (np_pf if k.startswith("pf") else np_g) / v[0] for k, v in alt.items()
        }
    out = a.out or work
    out.mkdir(parents=True, exist_ok=True)
    (out / "baseline.json").write_text(json.dumps(result, indent=2) + "\n")
    print(f"wrote {out / 'baseline.json'}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
