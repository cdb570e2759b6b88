#!/usr/bin/env python3
"""Generates the reference fixtures the Rust tests read (tests/reference/*.json).

General-purpose reference libraries only (numpy, scipy; `pip install numpy scipy`). The tests
never run this script: its output is committed. Re-run it after changing a scenario here, and
keep the scenarios in step with the tests that read them.

    python3 tests/reference/make_fixtures.py
"""

import json
import math
from pathlib import Path

import numpy as np
import scipy
from numpy.polynomial import hermite, hermite_e
from scipy.linalg import expm, solve_discrete_are

OUT = Path(__file__).resolve().parent


def write(name, payload):
    payload = {
        "generator": "tests/reference/make_fixtures.py",
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        **payload,
    }
    (OUT / name).write_text(json.dumps(payload, indent=1) + "\n")


def rows(m):
    return [[float(v) for v in row] for row in np.atleast_2d(m)]


def dare_cv():
    """Steady-state covariances of the `cv` plant at its default parameters
    (dt = 0.1 s, q = 0.5 m^2/s^3, r = 0.25 m^2; models/src/cv.rs)."""
    dt, q, r = 0.1, 0.5, 0.25
    f = np.array([[1.0, dt], [0.0, 1.0]])
    h = np.array([[1.0, 0.0]])
    qd = q * np.array([[dt**3 / 3, dt**2 / 2], [dt**2 / 2, dt]])
    rm = np.array([[r]])
    # Filtering DARE: the dual of the control DARE, a = F^T, b = H^T.
    p_pred = solve_discrete_are(f.T, h.T, qd, rm)
    s = h @ p_pred @ h.T + rm
    k = p_pred @ h.T @ np.linalg.inv(s)
    p_filt = p_pred - k @ s @ k.T
    write(
        "dare_cv.json",
        {
            "dt": dt,
            "q": q,
            "r": r,
            "F": rows(f),
            "H": rows(h),
            "Q": rows(qd),
            "R": rows(rm),
            "P_pred": rows(p_pred),
            "P_filt": rows(p_filt),
            "K": rows(k),
        },
    )


def gauss_hermite():
    """Probabilists' Gauss-Hermite rules (weight exp(-x^2/2)/sqrt(2 pi)) from hermegauss, with
    weights normalised to sum to one; and the physicists' rules (weight exp(-x^2)) from hermgauss,
    the form tabulated by Abramowitz & Stegun, Table 25.10."""
    rules = []
    for p in range(1, 9):
        x, w = hermite_e.hermegauss(p)
        xp, wp = hermite.hermgauss(p)
        rules.append(
            {
                "order": p,
                "nodes": [float(v) for v in x],
                "weights": [float(v) for v in w / math.sqrt(2 * math.pi)],
                "physicists_nodes": [float(v) for v in xp],
                "physicists_weights": [float(v) for v in wp],
            }
        )
    write("gauss_hermite.json", {"rules": rules})


def van_loan_case(name, a, qc, dt):
    n = a.shape[0]
    c = np.zeros((2 * n, 2 * n))
    c[:n, :n] = -a
    c[:n, n:] = qc
    c[n:, n:] = a.T
    e = expm(c * dt)
    phi = e[n:, n:].T
    qd = phi @ e[:n, n:]
    return {
        "name": name,
        "dt": dt,
        "A": rows(a),
        "Qc": rows(qc),
        "Phi": rows(phi),
        "Phi_expm": rows(expm(a * dt)),
        "Qd": rows(0.5 * (qd + qd.T)),
    }


def van_loan():
    """Phi = expm(A dt) and Qd = int_0^dt expm(A s) Qc expm(A s)^T ds by Van Loan's block
    exponential, computed with scipy.linalg.expm."""
    cases = []
    # Damped oscillator: natural frequency 2 rad/s, damping ratio 0.1, white force on the rate.
    w, zeta = 2.0, 0.1
    a = np.array([[0.0, 1.0], [-(w**2), -2 * zeta * w]])
    qc = np.array([[0.0, 0.0], [0.0, 0.3]])
    for dt in (0.01, 0.5, 3.0):
        cases.append(van_loan_case(f"damped oscillator dt={dt}", a, qc, dt))
    # A six-state chain of first-order lags with strong coupling and full noise: large norm,
    # so the exponential needs several squarings.
    n = 6
    a = np.zeros((n, n))
    for i in range(n):
        a[i, i] = -1.5 - 0.5 * i
        if i + 1 < n:
            a[i, i + 1] = 2.5
            a[i + 1, i] = 1.0
    g = np.array([[1.0 / (1 + i + j) for j in range(n)] for i in range(n)])
    qc = g @ g.T
    for dt in (0.2, 2.0):
        cases.append(van_loan_case(f"coupled lag chain dt={dt}", a, qc, dt))
    # Twenty states with dense, equal coupling: every entry is small but the matrix norm is not,
    # which catches a scaling rule that looks at entries rather than at a norm.
    n = 20
    a = 0.6 * np.ones((n, n)) - np.eye(n)
    qc = 0.1 * np.eye(n) + 0.05 * np.ones((n, n))
    cases.append(van_loan_case("dense 20-state coupling dt=1.0", a, qc, 1.0))
    write("van_loan.json", {"cases": cases})


if __name__ == "__main__":
    dare_cv()
    gauss_hermite()
    van_loan()
