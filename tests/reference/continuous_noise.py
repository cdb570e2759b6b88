#!/usr/bin/env python3
"""Discrete process noise of a nonlinear continuous-time plant, for tests/continuous_time.rs.

The plant is the Van der Pol oscillator of examples/van_der_pol.rs,
dx/dt = v, dv/dt = mu (1 - x^2) v - x + w, w white with spectral density q. Linearised at a
state (x, v) its Jacobian is A = [[0, 1], [-2 mu x v - 1, mu (1 - x^2)]] (closed form), and the
process noise over a step dt is Qd = int_0^dt expm(A s) Qc expm(A s)^T ds with Qc = diag(0, q),
computed by Van Loan's block exponential (C. F. Van Loan, IEEE TAC 23(3), 1978) with
scipy.linalg.expm, as make_fixtures.py does for its own cases. General-purpose reference
libraries only (`pip install numpy scipy`); the tests never run this script, its output is
committed:

    python3 tests/reference/continuous_noise.py
"""

import json
from pathlib import Path

import numpy as np
import scipy
from make_fixtures import van_loan_case

OUT = Path(__file__).resolve().parent


def main():
    cases = []
    for mu, q in ((1.0, 0.05), (2.5, 0.4)):
        for dt in (0.05, 0.5):
            for x, v in ((2.0, 0.0), (-1.2, 1.5), (0.3, -2.0), (0.0, 0.0), (1.0, 3.0)):
                a = np.array([[0.0, 1.0], [-2.0 * mu * x * v - 1.0, mu * (1.0 - x * x)]])
                qc = np.array([[0.0, 0.0], [0.0, q]])
                qd = van_loan_case("van der pol", a, qc, dt)["Qd"]
                cases.append(
                    {
                        "mu": mu,
                        "q": q,
                        "dt": dt,
                        "state": [x, v],
                        "Qd": qd,
                    }
                )
    payload = {
        "generator": "tests/reference/continuous_noise.py",
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "cases": cases,
    }
    (OUT / "continuous_noise.json").write_text(json.dumps(payload, indent=1) + "\n")


if __name__ == "__main__":
    main()
