"""What a practitioner would otherwise write: a numpy UKF step loop and a vectorised numpy
bootstrap particle filter for the `pendulum` plant, and the same bootstrap filter for the
growth model `ungm`, written from the published equations.

Plant (the same equations as models/src/pendulum.rs):
    dθ/dt = ω,  dω/dt = −(g/L)·sin θ − c·ω + u + w(t),  E[w w] = qc δ(t − s)
    one classical RK4 step per sample (Hairer, Nørsett & Wanner, Solving ODEs I, §II.1);
    Q = Van Loan's integral (IEEE TAC 23(3), 1978) of the dynamics linearised at the step's
    starting mean, e^{[[−A, Qc], [0, Aᵀ]]·dt} by scipy.linalg.expm;
    y = L·sin θ + v,  v ~ N(0, r).

UKF: the additive-noise unscented Kalman filter of Wan & van der Merwe ("The unscented Kalman
filter for nonlinear estimation", AS-SPCC 2000, Alg. 3.1) with the scaled unscented transform
(λ = α²(n+κ) − n), sigma points redrawn from the predicted Gaussian for the update.

PF: the bootstrap filter of Gordon, Salmond & Smith ("Novel approach to nonlinear/non-Gaussian
Bayesian state estimation", IEE Proc. F 140(2), 1993): particles drawn through the transition
density, weighted by the likelihood (kept as logarithms), systematic resampling (Kitagawa, JCGS
5(1), 1996) when the effective sample size 1/Σw² falls below N/2; Q evaluated once per step at
the weighted mean of the cloud.

UNGM (the example of Gordon, Salmond & Smith 1993, §4.1, as in models/src/ungm.rs):
    x(k) = x/2 + 25x/(1 + x²) + 8 cos(1.2 k) + w,  w ~ N(0, 10);  y = x²/20 + v,  v ~ N(0, 1);
    prior N(0.1, 2); the same bootstrap filter (no Q to evaluate: it is constant).

Every function works on the whole cloud of points at once (one column per point), so the only
Python-level loop is over time steps.
"""

import math

import numpy as np
from scipy.linalg import expm


class Pendulum:
    """Default parameters of models/src/pendulum.rs."""

    g = 9.80665
    length = 1.0
    damping = 0.05
    dt = 0.01
    qc = 0.01
    r = 4e-4
    x0 = np.array([0.6, 0.0])
    sd0 = np.array([0.1, 0.2])

    def derivative(self, x, torque):
        """dx/dt of every column of x (2 × N)."""
        return np.stack(
            (x[1], -(self.g / self.length) * np.sin(x[0]) - self.damping * x[1] + torque)
        )

    def transition(self, x, torque, dt):
        """One RK4 step of every column."""
        k1 = self.derivative(x, torque)
        k2 = self.derivative(x + (dt / 2) * k1, torque)
        k3 = self.derivative(x + (dt / 2) * k2, torque)
        k4 = self.derivative(x + dt * k3, torque)
        return x + (dt / 6) * (k1 + 2 * (k2 + k3) + k4)

    def measure(self, x):
        """Bob's horizontal position L·sin θ of every column (a 1-D array)."""
        return self.length * np.sin(x[0])

    def process_noise(self, x, dt):
        """Van Loan's Q over dt for the dynamics linearised at the state x (a 2-vector)."""
        a = np.array([[0.0, 1.0], [-(self.g / self.length) * math.cos(x[0]), -self.damping]])
        qc = np.array([[0.0, 0.0], [0.0, self.qc]])
        c = np.zeros((4, 4))
        c[:2, :2] = -a
        c[:2, 2:] = qc
        c[2:, 2:] = a.T
        e = expm(c * dt)
        phi = e[2:, 2:].T
        q = phi @ e[:2, 2:]
        return 0.5 * (q + q.T)


def ukf(plant, t, u, y, alpha=1.0, beta=2.0, kappa=0.0):
    """Posterior means and standard deviations (steps × 2 each) of the UKF over the rows."""
    n = 2
    lam = alpha * alpha * (n + kappa) - n
    c = n + lam
    wm = np.full(2 * n + 1, 1.0 / (2.0 * c))
    wm[0] = lam / c
    wc = wm.copy()
    wc[0] += 1.0 - alpha * alpha + beta
    spread = math.sqrt(c)

    def sigma_points(m, p):
        s = np.linalg.cholesky(p) * spread
        return np.hstack((m[:, None], m[:, None] + s, m[:, None] - s))

    m = plant.x0.copy()
    p = np.diag(plant.sd0**2)
    steps = len(t)
    means = np.empty((steps, n))
    sds = np.empty((steps, n))
    for k in range(steps):
        if k > 0:
            dt = t[k] - t[k - 1]
            x = plant.transition(sigma_points(m, p), u[k - 1], dt)
            q = plant.process_noise(m, dt)
            m = x @ wm
            d = x - m[:, None]
            p = (d * wc) @ d.T + q
            p = 0.5 * (p + p.T)
        if not math.isnan(y[k]):
            x = sigma_points(m, p)
            z = plant.measure(x)
            zhat = z @ wm
            e = z - zhat
            s = (e * wc) @ e + plant.r
            cross = ((x - m[:, None]) * wc) @ e
            gain = cross / s
            m = m + gain * (y[k] - zhat)
            p = p - np.outer(gain, cross)
            p = 0.5 * (p + p.T)
        means[k] = m
        sds[k] = np.sqrt(np.diag(p))
    return means, sds


def weigh(log_w, e, r):
    """Adds the Gaussian log-likelihood of residuals e (variance r) to the log-weights and
    normalises by log-sum-exp; returns the new log-weights and weights."""
    log_w = log_w + (-0.5 * (math.log(r) + math.log(2.0 * math.pi)) - 0.5 / r * e * e)
    top = log_w.max()
    w = np.exp(log_w - top)
    total = w.sum()
    return log_w - (top + math.log(total)), w / total


def systematic_ancestors(w, rng):
    """Systematic resampling (Kitagawa 1996): ancestor indices for len(w) offspring."""
    count = len(w)
    positions = (np.arange(count) + rng.random()) / count
    return np.minimum(np.searchsorted(np.cumsum(w), positions), count - 1)


def bootstrap_pf(plant, t, u, y, particles, seed):
    """Weighted posterior means and standard deviations (steps × 2 each) of the bootstrap PF."""
    rng = np.random.default_rng(seed)
    count = particles
    x = plant.x0[:, None] + plant.sd0[:, None] * rng.standard_normal((2, count))
    log_w = np.full(count, -math.log(count))
    w = np.full(count, 1.0 / count)
    mean = x @ w
    steps = len(t)
    means = np.empty((steps, 2))
    sds = np.empty((steps, 2))
    for k in range(steps):
        if k > 0:
            dt = t[k] - t[k - 1]
            factor = np.linalg.cholesky(plant.process_noise(mean, dt))
            x = plant.transition(x, u[k - 1], dt) + factor @ rng.standard_normal((2, count))
        if not math.isnan(y[k]):
            log_w, w = weigh(log_w, y[k] - plant.measure(x), plant.r)
        mean = x @ w
        d = x - mean[:, None]
        cov = (d * w) @ d.T
        means[k] = mean
        sds[k] = np.sqrt(np.diag(cov))
        if 1.0 / (w @ w) < 0.5 * count:
            x = x[:, systematic_ancestors(w, rng)]
            log_w = np.full(count, -math.log(count))
            w = np.full(count, 1.0 / count)
    return means, sds


class Ungm:
    """Default parameters of models/src/ungm.rs."""

    q = 10.0
    r = 1.0
    x0 = 0.1
    p0 = 2.0

    def transition(self, x, k):
        """x(k) from x(k − 1) for every particle (noise-free part)."""
        return 0.5 * x + 25.0 * x / (1.0 + x * x) + 8.0 * math.cos(1.2 * k)

    def measure(self, x):
        return x * x / 20.0


def bootstrap_pf_ungm(plant, t, y, particles, seed):
    """Weighted posterior means and standard deviations (steps × 1 each) of the bootstrap PF on
    the growth model; t are the sample times (the model's k), y the measurements."""
    rng = np.random.default_rng(seed)
    count = particles
    x = plant.x0 + math.sqrt(plant.p0) * rng.standard_normal(count)
    log_w = np.full(count, -math.log(count))
    w = np.full(count, 1.0 / count)
    noise_sd = math.sqrt(plant.q)
    steps = len(t)
    means = np.empty((steps, 1))
    sds = np.empty((steps, 1))
    for k in range(steps):
        if k > 0:
            x = plant.transition(x, t[k]) + noise_sd * rng.standard_normal(count)
        if not math.isnan(y[k]):
            log_w, w = weigh(log_w, y[k] - plant.measure(x), plant.r)
        mean = x @ w
        d = x - mean
        means[k, 0] = mean
        sds[k, 0] = math.sqrt((d * w) @ d)
        if 1.0 / (w @ w) < 0.5 * count:
            x = x[systematic_ancestors(w, rng)]
            log_w = np.full(count, -math.log(count))
            w = np.full(count, 1.0 / count)
    return means, sds
