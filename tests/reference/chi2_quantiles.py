"""Writes chi2_quantiles.csv: scipy.stats.chi2.ppf(p, dof) reference values for the χ² band tests.

Run from this directory with scipy installed: python3 chi2_quantiles.py
The tests read the committed CSV; they never run Python.
"""
import csv

import scipy
from scipy.stats import chi2

DOFS = list(range(1, 11)) + [20, 50, 100, 400, 1000, 2000, 10_000, 100_000, 1_000_000]
PROBS = [0.025, 0.5, 0.975]
EXTRA = [(1, 0.001), (1, 0.999), (3, 0.05), (3, 0.95), (7, 0.01), (7, 0.99)]

with open("chi2_quantiles.csv", "w", newline="") as out:
    w = csv.writer(out, lineterminator="\n")
    w.writerow(["dof", "p", "quantile"])
    for dof in DOFS:
        for p in PROBS:
            w.writerow([dof, p, repr(float(chi2.ppf(p, dof)))])
    for dof, p in EXTRA:
        w.writerow([dof, p, repr(float(chi2.ppf(p, dof)))])
print("scipy", scipy.__version__)
