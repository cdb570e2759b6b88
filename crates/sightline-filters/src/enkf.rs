//! `enkf`: the stochastic ensemble Kalman filter with perturbed observations (Evensen,
//! J. Geophys. Res. 99(C5), 1994; Burgers, van Leeuwen & Evensen, Mon. Weather Rev. 126, 1998),
//! with optional multiplicative inflation (Anderson & Anderson, Mon. Weather Rev. 127, 1999).
//!
//! **Forecast.** Every member is drawn from the transition density, xᵢ ← f(xᵢ) + wᵢ,
//! wᵢ ~ N(0, Q), and projected onto the feasible set. With `inflation=λ` the members are then
//! spread about the ensemble mean, xᵢ ← x̄ + λ·(xᵢ − x̄), which multiplies the ensemble
//! covariance by λ² and counters the spread the finite ensemble loses to sampling error.
//!
//! **Analysis.** With zᵢ = h(xᵢ), ẑ the ensemble measurement mean (`measurement_mean` hook),
//! dᵢ = xᵢ − x̄ and eᵢ = zᵢ − ẑ (the model's residual hooks), the sample covariances
//! P_xz = Σ dᵢeᵢᵀ/(N−1) and P_zz = Σ eᵢeᵢᵀ/(N−1) give S = P_zz + R and K = P_xz S⁻¹. Each member
//! assimilates its own perturbed observation: xᵢ ← xᵢ + K (r(y, zᵢ) + vᵢ), vᵢ ~ N(0, R). The
//! perturbations give the analysis ensemble the Kalman posterior covariance in expectation
//! (Burgers et al. 1998, §2). Missing components of `y` get a zero gain column (the masked S of
//! the Gaussian filters).
//!
//! **Outputs.** The estimate is the ensemble mean and sample covariance (N − 1 denominator). The
//! innovation is r(y, ẑ) with covariance S, and the log-likelihood increment is that of the
//! ensemble's Gaussian predictive, ln N(r(y, ẑ); 0, S) — exact only for a linear-Gaussian plant
//! as N → ∞, an approximation otherwise.
//!
//! **Smoothing.** When recording ([`crate::Filter::record_for_smoothing`]) the forecast keeps a
//! copy of the members it started from and records the ensemble's filtered and forecast moments
//! with their sample cross-covariance Σ (xᵢ(k−1) − x̄(k−1))(xᵢ(k) − x̄(k))ᵀ/(N−1); the Gaussian
//! RTS pass of [`crate::smoother`] on these moments is the moment form of the ensemble RTS
//! smoother (Raanes, Q. J. R. Meteorol. Soc. 142, 2016). Its gain carries the ensemble's
//! sampling error, so it is a good smoother for large ensembles and a rough one for small.
//!
//! **Parallel and reproducible.** As for the particle filter: blocks of 1024 members, a random
//! stream per (seed, step, block), partial sums combined in block order — bit-identical output
//! for any thread count, no heap allocation in a step for static plant sizes on a one-thread
//! pool.

use nalgebra::{DefaultAllocator, Dim, Dyn, OMatrix, OVector};
use rayon::prelude::*;
use sightline_core::linalg::{cholesky, ensure_finite, symmetrise};
use sightline_core::rng::stream;
use sightline_core::{Alloc, Gaussian, Model, NumericError};

use crate::cloud::{
    self, BLOCK, NoiseAt, Propagation, Weights, add_gaussian, block_count, lower_factor,
    min_blocks_per_job, purpose, square, vector,
};
use crate::filter::{Filter, FilterError, Innovation, Tag};
use crate::registry::KindInfo;
use crate::smoother::{GaussianRecord, SmoothedTrack, SmootherKind};
use crate::spec::{FilterSpec, OptionInfo, SpecError};
use crate::update::{InnovationStore, LN_2PI, mask_missing, present_mask};

/// Registry entry for `enkf`.
pub const INFO: KindInfo = KindInfo {
    kind: "enkf",
    about: "stochastic ensemble Kalman filter with perturbed observations",
    options: &[
        OptionInfo {
            key: "members",
            default: "100",
            about: "ensemble size N",
        },
        OptionInfo {
            key: "inflation",
            default: "1",
            about: "multiplicative inflation of the forecast spread (>= 1; 1 = off)",
        },
        OptionInfo {
            key: "noise",
            default: "mean",
            about: "process noise Q at the ensemble mean | each member",
        },
        cloud::LANES_OPTION,
    ],
    linear_only: false,
    sampling: true,
};

/// Settings of an [`EnsembleKalmanFilter`]; `Default` gives the spec defaults.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EnkfConfig {
    /// Ensemble size N (at least 2).
    pub members: usize,
    /// Factor λ ≥ 1 on the forecast members' deviations from the mean.
    pub inflation: f64,
    /// Where Q is evaluated.
    pub noise: NoiseAt,
    /// Evaluate the plant's transition and measurement over four members per call
    /// (`lanes=on`; see [`sightline_core::lanes`]).
    pub lanes: bool,
}

impl Default for EnkfConfig {
    fn default() -> Self {
        EnkfConfig {
            members: 100,
            inflation: 1.0,
            noise: NoiseAt::Mean,
            lanes: false,
        }
    }
}

/// A stochastic ensemble Kalman filter over plant `M`; see the module docs.
#[derive(Debug, Clone)]
pub struct EnsembleKalmanFilter<M: Model>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    model: M,
    tag: Tag,
    config: EnkfConfig,
    seed: u64,
    /// The ensemble, one member per column.
    members: OMatrix<f64, M::State, Dyn>,
    /// h(xᵢ) of the last analysis.
    predicted_meas: OMatrix<f64, M::Meas, Dyn>,
    /// 1/N for every member, for the mean hooks.
    equal: Vec<f64>,
    /// Per-block partial sums, `stride` values per block.
    partials: Vec<f64>,
    stride: usize,
    mean: OVector<f64, M::State>,
    cov: OMatrix<f64, M::State, M::State>,
    innov: InnovationStore<M::Meas>,
    /// Ensemble moments for the smoother, when recording.
    record: Option<GaussianRecord<M::State>>,
    /// The members before the last forecast (allocated only when recording).
    before: OMatrix<f64, M::State, Dyn>,
}

impl<M: Model> EnsembleKalmanFilter<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    /// An ensemble labelled `label` drawn from `prior` (stream `(seed, initial)`).
    ///
    /// Fails, naming the setting, if the config is out of range (fewer than 2 members, inflation
    /// below 1 or not finite), if the plant has no state or no measurement, or if the prior
    /// covariance is not positive semi-definite.
    pub fn new(
        model: M,
        prior: Gaussian<M::State>,
        config: EnkfConfig,
        label: &str,
        seed: u64,
    ) -> Result<Self, SpecError> {
        let nd = model.state_dim();
        let md = model.meas_dim();
        let (n, m) = (nd.value(), md.value());
        let count = config.members;
        let bad = |key: &str, value: String, expected: &str| SpecError::BadValue {
            spec: label.to_string(),
            key: key.to_string(),
            value,
            expected: expected.to_string(),
        };
        if count < 2 {
            return Err(bad("members", count.to_string(), "at least 2"));
        }
        cloud::check_cloud_size(label, "members", count, n)?;
        if !(config.inflation.is_finite() && config.inflation >= 1.0) {
            return Err(bad(
                "inflation",
                config.inflation.to_string(),
                "a factor >= 1 (1 = no inflation)",
            ));
        }
        let not_applicable = |reason: String| SpecError::NotApplicable {
            spec: label.to_string(),
            reason,
        };
        if n == 0 || m == 0 {
            return Err(not_applicable(format!(
                "the ensemble Kalman filter needs at least one state and one measurement; '{}' has {n} and {m}",
                model.declare().name()
            )));
        }
        let stride = (n * m + m * m).max(n * n).max(2);
        let factor = lower_factor(&prior.cov, "prior covariance")
            .map_err(|e| not_applicable(format!("cannot draw the initial ensemble: {e}")))?;
        let mut enkf = EnsembleKalmanFilter {
            tag: Tag::new(label, &model),
            config,
            seed,
            members: cloud::cloud_matrix(nd, count),
            predicted_meas: cloud::cloud_matrix(md, count),
            equal: vec![1.0 / count as f64; count],
            partials: vec![0.0; block_count(count) * stride],
            stride,
            mean: prior.mean.clone(),
            cov: prior.cov.clone(),
            innov: InnovationStore::new(md),
            record: None,
            before: cloud::cloud_matrix(nd, 0),
            model,
        };
        cloud::scatter(
            &enkf.model,
            enkf.members.as_mut_slice(),
            Some(prior.mean.as_slice()),
            factor.as_slice(),
            seed,
            purpose::INITIAL,
            0,
        );
        enkf.estimate()
            .map_err(|e| not_applicable(format!("the initial ensemble: {e}")))?;
        Ok(enkf)
    }

    /// The members, one per column (state order).
    pub fn members(&self) -> &OMatrix<f64, M::State, Dyn> {
        &self.members
    }

    /// The settings.
    pub fn config(&self) -> &EnkfConfig {
        &self.config
    }

    /// Ensemble mean and sample covariance into `mean`, `cov`.
    fn estimate(&mut self) -> Result<(), FilterError> {
        let mut mean = self.model.state_mean(&self.members, &self.equal);
        ensure_finite(mean.iter(), "ensemble mean").map_err(|e| self.tag.numeric(e))?;
        let unbiased = 1.0 / (self.config.members as f64 - 1.0);
        self.cov = cloud::covariance(
            &self.model,
            self.members.as_slice(),
            Weights::Equal(unbiased),
            &mean,
            &mut self.partials,
            self.stride,
        );
        ensure_finite(self.cov.iter(), "ensemble covariance").map_err(|e| self.tag.numeric(e))?;
        self.model.project(&mut mean);
        self.mean = mean;
        Ok(())
    }

    /// xᵢ ← x̄ + λ·(xᵢ − x̄) about the current mean, then projection.
    fn inflate(&mut self) {
        let lambda = self.config.inflation;
        let model = &self.model;
        let nd = model.state_dim();
        let n = nd.value();
        let centre = self.mean.as_slice();
        self.members
            .as_mut_slice()
            .par_chunks_mut(n * BLOCK)
            .with_min_len(min_blocks_per_job())
            .for_each(|chunk| {
                let centre = vector(nd, centre);
                for x in chunk.chunks_exact_mut(n) {
                    let d = model.state_residual(&vector(nd, x), &centre);
                    let mut inflated = &centre + d * lambda;
                    model.project(&mut inflated);
                    x.copy_from_slice(inflated.as_slice());
                }
            });
    }
}

/// Reads the `enkf` options of a spec.
pub fn config_from_spec(spec: &FilterSpec) -> Result<EnkfConfig, SpecError> {
    let o = spec.options(INFO.options)?;
    let defaults = EnkfConfig::default();
    let members = o.count("members", defaults.members, 2, 100_000_000)?;
    let inflation = o.real(
        "inflation",
        defaults.inflation,
        |l| l >= 1.0,
        "a factor >= 1 (1 = no inflation)",
    )?;
    let noise = match o.choice("noise", "mean", &["mean", "each"])? {
        "each" => NoiseAt::Each,
        _ => NoiseAt::Mean,
    };
    let lanes = o.switch("lanes", defaults.lanes)?;
    Ok(EnkfConfig {
        members,
        inflation,
        noise,
        lanes,
    })
}

/// Builds an `enkf` from a spec.
pub fn build<M: Model>(
    model: &M,
    prior: &Gaussian<M::State>,
    spec: &FilterSpec,
    seed: u64,
) -> Result<Box<dyn Filter>, SpecError>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let config = config_from_spec(spec)?;
    let enkf = EnsembleKalmanFilter::new(model.clone(), prior.clone(), config, &spec.label, seed)?;
    Ok(Box::new(enkf))
}

impl<M: Model> Filter for EnsembleKalmanFilter<M>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    fn label(&self) -> &str {
        &self.tag.label
    }

    fn kind(&self) -> &'static str {
        INFO.kind
    }

    fn predict(&mut self, u: &[f64], t: f64, dt: f64) -> Result<(), FilterError> {
        self.tag.step += 1;
        let input = self.tag.input(u)?;
        let nd = self.model.state_dim();
        let factor = match self.config.noise {
            NoiseAt::Mean => {
                let q = self.model.process_noise(&self.mean, input, t, dt);
                lower_factor(&q, "process noise covariance Q").map_err(|e| self.tag.numeric(e))?
            }
            NoiseAt::Each => OMatrix::<f64, M::State, M::State>::zeros_generic(nd, nd),
        };
        let filtered = self.record.is_some().then(|| {
            self.before.copy_from(&self.members);
            (self.mean.clone(), self.cov.clone())
        });
        let how = Propagation {
            input: u,
            t,
            dt,
            factor: factor.as_slice(),
            noise: self.config.noise,
            anchors: None,
            previous: None,
            ancestors: None,
            key: purpose::PREDICT,
            step: self.tag.step as u64,
            lanes: self.config.lanes,
        };
        let lost = cloud::propagate(
            &self.model,
            self.members.as_mut_slice(),
            &how,
            self.seed,
            &mut self.partials,
            self.stride,
        )
        .map_err(|e| self.tag.numeric(e))?;
        if lost > 0 {
            return Err(self.tag.numeric(NumericError::NonFinite {
                quantity: "forecast ensemble member",
            }));
        }
        if self.config.inflation != 1.0 {
            self.estimate()?;
            self.inflate();
        }
        self.estimate()?;
        if let (Some(record), Some((mean, cov))) = (&mut self.record, filtered) {
            // Sample Cov(x(k−1), x(k)) of the members before and after the forecast: the
            // ensemble RTS cross-covariance (Raanes 2016), about the same sample means and with
            // the same N − 1 denominator as the ensemble covariances.
            let before_mean = self.model.state_mean(&self.before, &self.equal);
            let after_mean = self.model.state_mean(&self.members, &self.equal);
            let cross = cloud::cross_covariance(
                &self.model,
                (self.before.as_slice(), &before_mean),
                (self.members.as_slice(), &after_mean),
                1.0 / (self.config.members as f64 - 1.0),
                &mut self.partials,
                self.stride,
            );
            record.begin(&mean, &cov, cross);
            record.complete(&self.mean, &self.cov);
        }
        Ok(())
    }

    fn update(&mut self, y: &[f64], u: &[f64], t: f64) -> Result<(), FilterError> {
        let input = self.tag.input(u)?;
        let y = self.tag.vector(self.model.meas_dim(), y, "measurement")?;
        let present = present_mask(&y).map_err(|e| self.tag.numeric(e))?;
        if present == 0 {
            self.innov.clear();
            return Ok(());
        }
        let model = &self.model;
        let nd = model.state_dim();
        let md = model.meas_dim();
        let (n, m) = (nd.value(), md.value());
        let count = self.config.members;
        let blocks = block_count(count);

        // Predicted measurements of the members.
        let members = self.members.as_slice();
        let us = input;
        let lanes = self.config.lanes;
        self.predicted_meas
            .as_mut_slice()
            .par_chunks_mut(m * BLOCK)
            .zip(members.par_chunks(n * BLOCK))
            .with_min_len(min_blocks_per_job())
            .for_each(|(meas, xs)| {
                cloud::measure_each(model, xs, lanes, us, t, |k, z| {
                    meas[k * m..(k + 1) * m].copy_from_slice(z.as_slice());
                });
            });
        ensure_finite(
            self.predicted_meas.iter(),
            "predicted measurement of a member",
        )
        .map_err(|e| self.tag.numeric(e))?;
        let predicted = model.measurement_mean(&self.predicted_meas, &self.equal);

        // Sample cross- and measurement covariances, per block then in block order.
        let x_mean = self.mean.as_slice();
        let z_mean = predicted.as_slice();
        let meas = self.predicted_meas.as_slice();
        (
            members.par_chunks(n * BLOCK),
            self.partials.par_chunks_mut(self.stride),
        )
            .into_par_iter()
            .enumerate()
            .with_min_len(min_blocks_per_job())
            .for_each(|(b, (xs, slot))| {
                let x_mean = vector(nd, x_mean);
                let z_mean = vector(md, z_mean);
                let mut cross = OMatrix::<f64, M::State, M::Meas>::zeros_generic(nd, md);
                let mut szz = OMatrix::<f64, M::Meas, M::Meas>::zeros_generic(md, md);
                for (k, x) in xs.chunks_exact(n).enumerate() {
                    let i = b * BLOCK + k;
                    let d = model.state_residual(&vector(nd, x), &x_mean);
                    let e =
                        model.measurement_residual(&vector(md, &meas[i * m..(i + 1) * m]), &z_mean);
                    cross.ger(1.0, &d, &e, 1.0);
                    szz.ger(1.0, &e, &e, 1.0);
                }
                slot[..n * m].copy_from_slice(cross.as_slice());
                slot[n * m..n * m + m * m].copy_from_slice(szz.as_slice());
            });
        let mut cross = OMatrix::<f64, M::State, M::Meas>::zeros_generic(nd, md);
        let mut s = OMatrix::<f64, M::Meas, M::Meas>::zeros_generic(md, md);
        for slot in self.partials.chunks_exact(self.stride).take(blocks) {
            for (t, v) in cross.iter_mut().zip(&slot[..n * m]) {
                *t += v;
            }
            for (t, v) in s.iter_mut().zip(&slot[n * m..n * m + m * m]) {
                *t += v;
            }
        }
        let unbiased = 1.0 / (count as f64 - 1.0);
        cross *= unbiased;
        s *= unbiased;
        let r = model.measurement_noise(t);
        s += &r;
        symmetrise(&mut s);

        // Gain over the present components; missing ones get a zero column.
        let mut residual = model.measurement_residual(&y, &predicted);
        mask_missing(&y, &mut residual, &mut s, Some(&mut cross));
        let chol = cholesky(&s, "innovation covariance").map_err(|e| self.tag.numeric(e))?;
        let gain = chol.solve(&cross.transpose()).transpose();
        let r_factor =
            lower_factor(&r, "measurement noise covariance R").map_err(|e| self.tag.numeric(e))?;

        // Each member assimilates its own perturbed observation (Burgers et al. 1998).
        let (gain_s, r_factor_s, ys) = (gain.as_slice(), r_factor.as_slice(), y.as_slice());
        let (seed, step) = (self.seed, self.tag.step as u64);
        (
            self.members.as_mut_slice().par_chunks_mut(n * BLOCK),
            meas.par_chunks(m * BLOCK),
        )
            .into_par_iter()
            .enumerate()
            .with_min_len(min_blocks_per_job())
            .for_each(|(b, (xs, zs))| {
                let mut rng = stream(seed, &[purpose::PERTURB, step, b as u64]);
                let gain =
                    OMatrix::<f64, M::State, M::Meas>::from_column_slice_generic(nd, md, gain_s);
                let r_factor = square(md, r_factor_s);
                let y = vector(md, ys);
                for (x, z) in xs.chunks_exact_mut(n).zip(zs.chunks_exact(m)) {
                    let mut innovation = model.measurement_residual(&y, &vector(md, z));
                    add_gaussian(&mut innovation, &r_factor, &mut rng);
                    for c in 0..m {
                        if y[c].is_nan() {
                            innovation[c] = 0.0;
                        }
                    }
                    let mut analysed = vector(nd, x) + &gain * innovation;
                    model.project(&mut analysed);
                    x.copy_from_slice(analysed.as_slice());
                }
            });

        self.innov.nis = residual.dot(&chol.solve(&residual));
        self.innov.log_likelihood =
            -0.5 * (self.innov.nis + chol.ln_determinant() + present as f64 * LN_2PI);
        self.innov.present = present;
        self.innov.residual = residual;
        self.innov.covariance = s;
        ensure_finite(self.members.iter(), "analysed ensemble member")
            .map_err(|e| self.tag.numeric(e))?;
        self.estimate()
    }

    fn mean(&self) -> &[f64] {
        self.mean.as_slice()
    }

    fn covariance(&self) -> &[f64] {
        self.cov.as_slice()
    }

    fn innovation(&self) -> Option<Innovation<'_>> {
        self.innov.view()
    }

    fn log_likelihood_increment(&self) -> f64 {
        if self.innov.present > 0 {
            self.innov.log_likelihood
        } else {
            0.0
        }
    }

    fn record_for_smoothing(&mut self) -> bool {
        if self.record.is_none() {
            self.record = Some(GaussianRecord::new(SmootherKind::EnsembleRts));
            self.before = self.members.clone();
        }
        true
    }

    fn smooth(&self) -> Option<Result<SmoothedTrack, FilterError>> {
        let record = self.record.as_ref()?;
        Some(record.smooth(&self.model, &self.tag, &self.mean, &self.cov))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spec_options_are_read_and_checked() {
        let c = config_from_spec(
            &FilterSpec::parse("enkf:members=500,inflation=1.02,noise=each").unwrap(),
        )
        .unwrap();
        assert_eq!(
            c,
            EnkfConfig {
                members: 500,
                inflation: 1.02,
                noise: NoiseAt::Each,
                lanes: false,
            }
        );
        for (bad, word) in [
            ("enkf:members=1", "members"),
            ("enkf:inflation=0.9", "inflation"),
            ("enkf:particles=10", "members"),
        ] {
            let e = config_from_spec(&FilterSpec::parse(bad).unwrap())
                .unwrap_err()
                .to_string();
            assert!(e.contains(word), "{bad}: {e}");
        }
    }
}
