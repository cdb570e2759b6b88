//! The arithmetic no particle filter can avoid on `pendulum`, as a tight sequential loop: per
//! particle, draw the process noise (two standard normals), apply one transition (the model's
//! RK4 step), add the noise through the factor of Q, and evaluate one Gaussian log-likelihood of
//! the measurement (the model's `measure`), storing it as the log-weight. Shared by the
//! `sampling_filters` bench and the `scaling_plot` example.

use rand::RngExt;
use rand_distr::StandardNormal;
use sightline::Model;
use sightline::core::rng::stream;
use sightline::eval::dataset::Record;
use sightline::models::Pendulum;
use sightline::nalgebra::{Cholesky, Vector2};

/// A cloud of `count` particles drawn from the prior (never resampled: the arithmetic per
/// particle does not depend on where the particles are).
pub struct BareCloud {
    model: Pendulum,
    cloud: Vec<f64>,
    log_weights: Vec<f64>,
}

impl BareCloud {
    /// `count` particles from the pendulum's prior.
    pub fn new(count: usize) -> Self {
        let model = Pendulum::default();
        let prior = model.prior();
        let mut rng = stream(3, &[1]);
        let sd = prior.cov.map_diagonal(f64::sqrt);
        let cloud = (0..count)
            .flat_map(|_| {
                let e0: f64 = rng.sample(StandardNormal);
                let e1: f64 = rng.sample(StandardNormal);
                [prior.mean[0] + sd[0] * e0, prior.mean[1] + sd[1] * e1]
            })
            .collect();
        BareCloud {
            model,
            cloud,
            log_weights: vec![0.0; count],
        }
    }

    /// One sweep from row `prev` to row `r`: the factor of Q once (as the filter does; it takes
    /// Q at the cloud's mean, here at the first particle, which costs the same), then noise,
    /// transition and log-likelihood per particle. Returns the sum of the log-weights so that
    /// nothing is optimised away.
    pub fn sweep(&mut self, prev: &Record, r: &Record, step: u64) -> f64 {
        let model = &self.model;
        let u = [prev.u[0]];
        let (t, dt) = (prev.t, r.t - prev.t);
        let q = model.process_noise(&Vector2::new(self.cloud[0], self.cloud[1]), &u, t, dt);
        let factor = Cholesky::new(q).map(|c| c.l()).unwrap_or_default();
        let y = r.y[0];
        let inv_r = 1.0 / model.r;
        let log_norm = -0.5 * (model.r.ln() + (2.0 * std::f64::consts::PI).ln());
        let mut rng = stream(3, &[2, step]);
        let mut total = 0.0;
        for (x, lw) in self
            .cloud
            .chunks_exact_mut(2)
            .zip(self.log_weights.iter_mut())
        {
            let mut next = model.transition(&Vector2::new(x[0], x[1]), &u, t, dt);
            let e0: f64 = rng.sample(StandardNormal);
            let e1: f64 = rng.sample(StandardNormal);
            next += factor * Vector2::new(e0, e1);
            let z = model.measure(&next, &u, r.t);
            let e = y - z[0];
            let l = log_norm - 0.5 * e * e * inv_r;
            *lw = l;
            total += l;
            x.copy_from_slice(next.as_slice());
        }
        total
    }
}
