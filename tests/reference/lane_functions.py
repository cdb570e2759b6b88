#!/usr/bin/env python3
"""Correctly rounded values of the elementary functions the lane scalar vectorises, for
crates/sightline-core/tests/lane_accuracy.rs (tests/reference/lane_functions.json).

General-purpose reference library only (mpmath; `pip install mpmath`), evaluated with 60
significant digits and rounded once to the nearest double. The tests never run this script:
its output is committed. Re-run it after changing the points here.

    python3 tests/reference/lane_functions.py
"""

import json
from pathlib import Path

import mpmath

mpmath.mp.dps = 60
OUT = Path(__file__).resolve().parent / "lane_functions.json"

# Arguments are doubles written exactly (repr round-trips); a spread over each function's
# range, including points near the ends of the argument reductions.
ONE_ARG = {
    "sin": [1e-300, 1e-8, 0.1, 0.5, 0.7853981633974483, 1.0, 1.5707963267948966, 2.0,
            3.141592653589793, -3.0, 6.283185307179586, 10.0, 100.0, 1000.0, -9999.5],
    "cos": [0.0, 1e-8, 0.1, 0.5, 0.7853981633974483, 1.0, 1.5707963267948966, 2.0,
            3.141592653589793, -3.0, 10.0, 100.0, -1000.0, 9999.5],
    "exp": [-700.0, -100.5, -10.0, -1.0, -1e-10, 1e-10, 0.5, 1.0, 0.6931471805599453,
            2.302585092994046, 10.0, 88.7, 300.25, 700.0],
    "ln": [1e-300, 1e-10, 0.001, 0.5, 0.9999999, 1.0000001, 1.5, 2.0,
           2.718281828459045, 10.0, 1e10, 1e300],
    "sqrt": [1e-300, 1e-10, 0.5, 2.0, 3.0, 10.0, 1e10, 1e300],
}
TWO_ARGS = {
    "atan2": [(1.0, 1.0), (1.0, -1.0), (-1.0, -1.0), (-1.0, 1.0), (0.5, 2.0), (2.0, 0.5),
              (1e-5, 1.0), (1.0, 1e-5), (-300.0, 7.0), (123.456, -654.321)],
    "powf": [(2.0, 0.5), (10.0, -3.0), (0.5, 2.5), (1.5, 7.3), (1000.0, 0.1),
             (0.001, -2.0), (3.0, 8.0), (7.0, -0.25)],
}


def rounded(x):
    """The double nearest to the mpmath value: through 40 significant decimal digits, which
    Python's float() rounds correctly (mpmath's own float() truncates)."""
    return repr(float(mpmath.nstr(x, 40, min_fixed=1, max_fixed=0)))


def main():
    cases = []
    f1 = {"sin": mpmath.sin, "cos": mpmath.cos, "exp": mpmath.exp, "ln": mpmath.log,
          "sqrt": mpmath.sqrt}
    for name, points in ONE_ARG.items():
        for x in points:
            cases.append({"function": name, "args": [repr(x)],
                          "value": rounded(f1[name](mpmath.mpf(x)))})
    for y, x in TWO_ARGS["atan2"]:
        cases.append({"function": "atan2", "args": [repr(y), repr(x)],
                      "value": rounded(mpmath.atan2(mpmath.mpf(y), mpmath.mpf(x)))})
    for x, p in TWO_ARGS["powf"]:
        cases.append({"function": "powf", "args": [repr(x), repr(p)],
                      "value": rounded(mpmath.power(mpmath.mpf(x), mpmath.mpf(p)))})
    payload = {"generator": "tests/reference/lane_functions.py", "mpmath": mpmath.__version__,
               "digits": mpmath.mp.dps, "cases": cases}
    OUT.write_text(json.dumps(payload, indent=1) + "\n")


if __name__ == "__main__":
    main()
