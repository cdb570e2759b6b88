"""Writes binomial_points.csv: scipy.stats.binom.ppf(0.95, n, 0.05), the count of lags outside
the 95 % band that a white innovation sequence exceeds only 5 % of the time (whiteness test).

Run from this directory with scipy installed: python3 binomial_points.py
"""
import csv

from scipy.stats import binom

with open("binomial_points.csv", "w", newline="") as out:
    w = csv.writer(out, lineterminator="\n")
    w.writerow(["trials", "p", "level", "point"])
    for n in [1, 5, 20, 40, 100, 250, 1000, 5000]:
        w.writerow([n, 0.05, 0.95, int(binom.ppf(0.95, n, 0.05))])
