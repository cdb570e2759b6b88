#!/usr/bin/env python3
"""Observability of the constant-velocity plant, for tests/observability.rs.

cv: x(k+1) = A x(k), A = [[1, dt], [0, 1]], y(k) = C x(k) + v, C = [1, 0], v ~ N(0, r). The
sensitivity of the k-th measurement to the first state is C A^k = [1, k dt] (closed form), so the
information of K measurements k = 0..K-1 about x(0) is J = sum_k (C A^k)^T (C A^k) / r. This
script builds J with numpy from matrix powers (independently of the closed form and of Sightline),
and writes sqrt(diag(inv(J))) and the singular values of S J S, S = diag(prior sd), for each case.
General-purpose reference library only (`pip install numpy`); the tests never run this script,
its output is committed:

    python3 tests/reference/observability_cv.py
"""

import json
from pathlib import Path

import numpy as np

OUT = Path(__file__).resolve().parent / "observability_cv.json"


def case(dt, r, steps, sd0):
    a = np.array([[1.0, dt], [0.0, 1.0]])
    c = np.array([[1.0, 0.0]])
    j = np.zeros((2, 2))
    for k in range(steps):
        h = c @ np.linalg.matrix_power(a, k)
        j += h.T @ h / r
    s = np.diag(sd0)
    return {
        "dt": dt,
        "r": r,
        "steps": steps,
        "sd0": list(sd0),
        "sd_bound": np.sqrt(np.diag(np.linalg.inv(j))).tolist(),
        "singular_values": np.linalg.svd(s @ j @ s, compute_uv=False).tolist(),
    }


def main():
    cases = [
        case(0.1, 0.25, 100, (1.0, 1.0)),
        case(0.1, 0.25, 2, (1.0, 1.0)),
        case(0.5, 4.0, 1000, (1.0, 1.0)),
        case(0.05, 0.01, 20, (2.0, 0.5)),
    ]
    OUT.write_text(json.dumps({"cases": cases}, indent=1) + "\n")


if __name__ == "__main__":
    main()
