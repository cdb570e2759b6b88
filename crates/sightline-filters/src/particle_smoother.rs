//! The particle smoother of `pf`: forward filtering–backward simulation (FFBSi; Godsill, Doucet
//! & West, "Monte Carlo smoothing for nonlinear time series", JASA 99(465), 2004, §3).
//!
//! **Forward.** While recording, the particle filter keeps at every epoch k its weighted cloud
//! {xᵢ(k), wᵢ(k)} — the particles it is about to propagate, i.e. after any resampling and
//! jitter — and the input, time, step and process-noise factor of the prediction that follows.
//!
//! **Backward.** Each of M trajectories starts from a draw x̃(K) from the final cloud by its
//! weights, then for k = K−1, ..., 0 draws x̃(k) = xᵢ(k) with probability
//!
//! ```text
//! wᵢ(k|k+1) ∝ wᵢ(k) · N(r(x̃(k+1), f(xᵢ(k))); 0, Q)          r = Model::state_residual
//! ```
//!
//! (Godsill et al. 2004, eq. 4), Q being the process noise the forward pass used (at the cloud's
//! mean, or at each particle with `noise=each`). The smoothed mean and covariance of epoch k are
//! the sample mean (the model's `state_mean` hook) and the sample covariance (M − 1 denominator)
//! of the M trajectories. The Gaussian kernel ignores the forward pass's projection onto the
//! feasible set, an approximation only for particles pressed against a bound. A noise-free state
//! makes the kernel a point mass, so FFBSi needs Q positive-definite.
//!
//! **Cost and memory.** Each backward step costs M·N kernel evaluations and N transitions
//! (measured: N = 5000, M = 100 over 2,000 steps of `pendulum` takes about 30 s on one core,
//! ~15 times the forward pass); the record holds N·(n + 1) numbers per epoch. The record is capped at [`RECORD_LIMIT`] numbers
//! (2 GiB); past that, recording stops and [`crate::Filter::smooth`] reports it.
//!
//! **Reproducible.** Trajectory p draws at epoch k from `rng::stream(seed, &[smooth, k, p])` and
//! trajectories run in parallel, each writing only its own state, so the result is bit-identical
//! for any thread count.

use std::sync::atomic::{AtomicBool, Ordering};

use nalgebra::{DefaultAllocator, Dim, Dyn, OMatrix, OVector};
use rand::RngExt;
use rayon::prelude::*;
use sightline_core::rng::stream;
use sightline_core::{Alloc, Model};

use crate::cloud::{self, NoiseAt, lower_factor, purpose, vector};
use crate::filter::{FilterError, Tag};
use crate::smoother::{SmoothedTrack, SmootherKind, smoothing_error};

/// Most numbers (f64) a particle record may hold: 2²⁸, i.e. 2 GiB.
pub const RECORD_LIMIT: usize = 1 << 28;

/// The prediction that follows a recorded epoch.
#[derive(Debug, Clone)]
struct Step<N: Dim>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N, N>,
{
    input: Vec<f64>,
    t: f64,
    dt: f64,
    /// Lower factor of Q at the cloud's mean (used with `noise=mean`).
    q_factor: OMatrix<f64, N, N>,
}

/// What the particle filter records for FFBSi.
#[derive(Debug, Clone)]
pub(crate) struct ParticleRecord<N: Dim>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N, N>,
{
    paths: usize,
    noise: NoiseAt,
    /// Clouds of the recorded epochs, epoch after epoch, `n·N` each (column-major particles).
    particles: Vec<f64>,
    /// Normalised weights of the recorded epochs, `N` each.
    weights: Vec<f64>,
    steps: Vec<Step<N>>,
    /// Whether recording stopped at [`RECORD_LIMIT`].
    overflow: bool,
}

impl<N: Dim> ParticleRecord<N>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N, N>,
{
    pub fn new(paths: usize, noise: NoiseAt) -> Self {
        ParticleRecord {
            paths,
            noise,
            particles: Vec::new(),
            weights: Vec::new(),
            steps: Vec::new(),
            overflow: false,
        }
    }

    /// Records the cloud about to be propagated by the prediction (`input`, `t`, `dt`, factor of
    /// Q at the mean).
    pub fn push(
        &mut self,
        particles: &[f64],
        weights: &[f64],
        (input, t, dt): (&[f64], f64, f64),
        q_factor: &OMatrix<f64, N, N>,
    ) {
        if self.overflow {
            return;
        }
        let size = self.particles.len() + self.weights.len() + particles.len() + weights.len();
        if size > RECORD_LIMIT {
            self.overflow = true;
            return;
        }
        self.particles.extend_from_slice(particles);
        self.weights.extend_from_slice(weights);
        self.steps.push(Step {
            input: input.to_vec(),
            t,
            dt,
            q_factor: q_factor.clone(),
        });
    }

    /// FFBSi over the record, the current cloud (`particles`, `weights`) being the last epoch's.
    pub fn smooth<M: Model<State = N>>(
        &self,
        model: &M,
        tag: &Tag,
        seed: u64,
        particles: &[f64],
        weights: &[f64],
    ) -> Result<SmoothedTrack, FilterError>
    where
        DefaultAllocator: Alloc<N, M::Meas>,
    {
        let epochs = self.steps.len() + 1;
        if self.overflow {
            return Err(smoothing_error(
                tag,
                epochs,
                format!(
                    "the particle record outgrew its limit of {RECORD_LIMIT} numbers (2 GiB) \
                     at N·(n+1) = {} numbers per step; use fewer particles or a shorter dataset",
                    particles.len() + weights.len()
                ),
            ));
        }
        let nd = model.state_dim();
        let n = nd.value();
        let count = weights.len();
        let paths = self.paths;
        let mut track = SmoothedTrack {
            kind: SmootherKind::BackwardSimulation { paths },
            means: vec![Vec::new(); epochs],
            covariances: vec![Vec::new(); epochs],
        };
        // Trajectory states at the epoch being drawn, one per `n` values.
        let mut current = vec![0.0; paths * n];
        let last = epochs - 1;
        current.par_chunks_mut(n).enumerate().for_each(|(p, x)| {
            let mut rng = stream(seed, &[purpose::SMOOTH, last as u64, p as u64]);
            let i = draw(weights, rng.random::<f64>());
            x.copy_from_slice(&particles[i * n..(i + 1) * n]);
        });
        moments(model, &current, paths, &mut track, last);

        let mut mapped = vec![0.0; count * n];
        let mut log_w = vec![0.0; count];
        let mut inverse = vec![0.0; n * n];
        let mut log_det = vec![0.0; 1];
        for k in (0..last).rev() {
            let fail = |reason: String| smoothing_error(tag, k, reason);
            let step = &self.steps[k];
            let cloud = &self.particles[k * count * n..(k + 1) * count * n];
            let w = &self.weights[k * count..(k + 1) * count];
            // ln wᵢ once per step rather than once per trajectory (−∞ for a zero weight).
            for (l, &wi) in log_w.iter_mut().zip(w) {
                *l = if wi > 0.0 { wi.ln() } else { f64::NEG_INFINITY };
            }
            cloud::transition_means(model, cloud, &mut mapped, &step.input, step.t, step.dt);
            // Kernel N(·; f(xᵢ), Q): inverse factors L⁻¹ and ln det Q, shared or per particle.
            match self.noise {
                NoiseAt::Mean => {
                    inverse_factor(&step.q_factor, &mut inverse, &mut log_det[0]).map_err(fail)?;
                }
                NoiseAt::Each => {
                    inverse.resize(count * n * n, 0.0);
                    log_det.resize(count, 0.0);
                    let u = step.input.as_slice();
                    for i in 0..count {
                        let x = vector(nd, &cloud[i * n..(i + 1) * n]);
                        let q = model.process_noise(&x, u, step.t, step.dt);
                        let l = lower_factor(&q, "process noise covariance Q at a particle")
                            .map_err(|e| fail(e.to_string()))?;
                        inverse_factor(
                            &l,
                            &mut inverse[i * n * n..(i + 1) * n * n],
                            &mut log_det[i],
                        )
                        .map_err(fail)?;
                    }
                }
            }
            let shared = self.noise == NoiseAt::Mean;
            let (inverse, log_det, mapped, log_w) = (&inverse, &log_det, &mapped, &log_w);
            let lost = AtomicBool::new(false);
            current.par_chunks_mut(n).enumerate().for_each_init(
                || vec![0.0; count],
                |log_weights, (p, x)| {
                    let next = vector(nd, x);
                    let mut max = f64::NEG_INFINITY;
                    for i in 0..count {
                        log_weights[i] = if log_w[i] > f64::NEG_INFINITY {
                            let (inv, ld) = if shared {
                                (&inverse[..], log_det[0])
                            } else {
                                (&inverse[i * n * n..(i + 1) * n * n], log_det[i])
                            };
                            let r = model
                                .state_residual(&next, &vector(nd, &mapped[i * n..(i + 1) * n]));
                            log_w[i] - 0.5 * (mahalanobis(inv, r.as_slice()) + ld)
                        } else {
                            f64::NEG_INFINITY
                        };
                        max = max.max(log_weights[i]);
                    }
                    if !max.is_finite() {
                        lost.store(true, Ordering::Relaxed);
                        return;
                    }
                    for l in log_weights.iter_mut() {
                        *l = (*l - max).exp();
                    }
                    let mut rng = stream(seed, &[purpose::SMOOTH, k as u64, p as u64]);
                    let i = draw(log_weights, rng.random::<f64>());
                    x.copy_from_slice(&cloud[i * n..(i + 1) * n]);
                },
            );
            if lost.into_inner() {
                return Err(fail(
                    "every backward weight vanished: no particle of this step can reach the \
                     trajectory's next state under the process noise Q"
                        .into(),
                ));
            }
            moments(model, &current, paths, &mut track, k);
        }
        Ok(track)
    }
}

/// The index i with Σ_{j<i} wⱼ ≤ u·Σw < Σ_{j≤i} wⱼ among non-negative weights (inverse CDF);
/// never a zero weight unless all are zero.
fn draw(weights: &[f64], u: f64) -> usize {
    let total: f64 = weights.iter().sum();
    let target = u * total;
    let mut cumulative = 0.0;
    let mut chosen = 0;
    for (i, &w) in weights.iter().enumerate() {
        if w > 0.0 {
            chosen = i;
            cumulative += w;
            if cumulative > target {
                break;
            }
        }
    }
    chosen
}

/// L⁻¹ (column-major into `inverse`) and ln det(L Lᵀ) of a lower-triangular factor `l`.
fn inverse_factor<N: Dim>(
    l: &OMatrix<f64, N, N>,
    inverse: &mut [f64],
    log_det: &mut f64,
) -> Result<(), String>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N, N>,
{
    let (nd, _) = l.shape_generic();
    let singular = || {
        "the process noise Q is singular (a noise-free state): the backward kernel is a point \
         mass, so forward filtering–backward simulation cannot weigh the particles"
            .to_string()
    };
    let pivots = (0..nd.value()).map(|i| l[(i, i)]);
    if pivots.clone().any(|d| d.is_nan() || d <= 0.0) {
        return Err(singular());
    }
    let inv = l
        .solve_lower_triangular(&OMatrix::<f64, N, N>::identity_generic(nd, nd))
        .ok_or_else(singular)?;
    inverse.copy_from_slice(inv.as_slice());
    *log_det = 2.0 * pivots.map(f64::ln).sum::<f64>();
    Ok(())
}

/// ‖L⁻¹ r‖² for lower-triangular L⁻¹ given column-major.
fn mahalanobis(inverse: &[f64], r: &[f64]) -> f64 {
    let n = r.len();
    let mut sum = 0.0;
    for row in 0..n {
        let mut z = 0.0;
        for (c, rc) in r.iter().enumerate().take(row + 1) {
            z += inverse[row + c * n] * rc;
        }
        sum += z * z;
    }
    sum
}

/// Sample mean and covariance (M − 1 denominator) of the trajectories into epoch `k` of `track`.
fn moments<M: Model>(model: &M, current: &[f64], paths: usize, track: &mut SmoothedTrack, k: usize)
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let nd = model.state_dim();
    let cloud = OMatrix::<f64, M::State, Dyn>::from_column_slice_generic(nd, Dyn(paths), current);
    let equal = vec![1.0 / paths as f64; paths];
    let mean = model.state_mean(&cloud, &equal);
    let mut cov = OMatrix::<f64, M::State, M::State>::zeros_generic(nd, nd);
    for column in cloud.column_iter() {
        let x: OVector<f64, M::State> = column.into_owned();
        let d = model.state_residual(&x, &mean);
        cov.ger(1.0 / (paths as f64 - 1.0), &d, &d, 1.0);
    }
    sightline_core::linalg::symmetrise(&mut cov);
    track.means[k] = mean.as_slice().to_vec();
    track.covariances[k] = cov.as_slice().to_vec();
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn draw_inverts_the_cumulative_weights() {
        // Inverse-CDF sampling (common practice): cumulative sums 0.25, 0.25, 0.75, 1.0.
        let w = [0.25, 0.0, 0.5, 0.25];
        assert_eq!(draw(&w, 0.0), 0);
        assert_eq!(draw(&w, 0.2), 0);
        assert_eq!(draw(&w, 0.25), 2);
        assert_eq!(draw(&w, 0.74), 2);
        assert_eq!(draw(&w, 0.76), 3);
        assert_eq!(draw(&w, 0.999_999), 3);
    }

    #[test]
    fn mahalanobis_matches_the_quadratic_form() {
        // For L = [[2, 0], [1, 1]], Q = L Lᵀ = [[4, 2], [2, 2]] and Q⁻¹ = [[0.5, -0.5], [-0.5, 1]],
        // so rᵀQ⁻¹r at r = (1, 1) is 0.5 (closed form).
        let l = nalgebra::Matrix2::new(2.0, 0.0, 1.0, 1.0);
        let mut inv = [0.0; 4];
        let mut log_det = 0.0;
        inverse_factor(&l, &mut inv, &mut log_det).unwrap();
        assert!((mahalanobis(&inv, &[1.0, 1.0]) - 0.5).abs() < 1e-14);
        assert!((log_det - 4.0f64.ln()).abs() < 1e-14);
        assert!(
            inverse_factor(
                &nalgebra::Matrix2::new(1.0, 0.0, 1.0, 0.0),
                &mut inv,
                &mut log_det
            )
            .is_err()
        );
    }
}
