//! The simulator: datasets with ground truth drawn from a plant's own stochastic model.
//!
//! Row k (k = 0..steps) is at t = k·dt: the truth x(k), the input u, and y(k) = h(x(k)) + v(k).
//! The initial truth is drawn from the prior (the prior mean with `noise_free`), and
//! x(k+1) = f(x(k), u, t, dt) + w(k), w ~ N(0, Q(x(k), dt)). All draws come from one
//! [`sightline_core::rng::Stream`] seeded from the seed, in a fixed order (x(0), then per row
//! v(k) and w(k)), so a seed gives the same dataset on every machine; dropout draws come from a
//! separate stream so that enabling it leaves the noise realisation unchanged.

use nalgebra::{Cholesky, DefaultAllocator, Dim, OMatrix, OVector, U1};
use rand::RngExt;
use rand_distr::StandardNormal;
use sightline_core::rng::{Stream, stream};
use sightline_core::{Alloc, Gaussian, Model};

use crate::dataset::{Dataset, Layout, Record};
use crate::error::{Error, Result};

/// Key of the simulator's noise stream under the seed.
const NOISE_STREAM: u64 = 0x5349_4d55;
/// Key of the dropout stream under the seed.
const DROPOUT_STREAM: u64 = 0x4452_4f50;

/// Options of `sightline simulate`.
#[derive(Debug, Clone, PartialEq)]
pub struct SimOptions {
    /// No process or measurement noise, and the truth starts at the prior mean.
    pub noise_free: bool,
    /// Keep the measurement only on every `every`-th row (1 keeps all).
    pub every: usize,
    /// Probability that a measurement component is independently dropped (left empty).
    pub dropout: f64,
}

impl Default for SimOptions {
    fn default() -> Self {
        SimOptions {
            noise_free: false,
            every: 1,
            dropout: 0.0,
        }
    }
}

/// Lower-triangular factor L with L Lᵀ = `cov`, tolerating a positive semi-definite `cov` by a
/// relative jitter of 1e-12 on the diagonal.
fn noise_factor<N: Dim>(cov: &OMatrix<f64, N, N>, what: &str) -> Result<OMatrix<f64, N, N>>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N, N>,
{
    if cov.iter().all(|v| *v == 0.0) {
        return Ok(cov.clone());
    }
    if let Some(c) = Cholesky::new(cov.clone()) {
        return Ok(c.l());
    }
    let (n, _) = cov.shape_generic();
    let jitter = 1e-12 * cov.abs().max().max(f64::MIN_POSITIVE);
    let bumped = cov + OMatrix::<f64, N, N>::identity_generic(n, n) * jitter;
    Cholesky::new(bumped).map(|c| c.l()).ok_or_else(|| {
        Error::Run(format!(
            "{what} is not positive semi-definite; cannot draw noise from it"
        ))
    })
}

fn draw<N: Dim>(rng: &mut Stream, factor: &OMatrix<f64, N, N>) -> OVector<f64, N>
where
    DefaultAllocator: nalgebra::allocator::Allocator<N> + nalgebra::allocator::Allocator<N, N>,
{
    let (n, _) = factor.shape_generic();
    let z = OVector::<f64, N>::from_fn_generic(n, U1, |_, _| rng.sample(StandardNormal));
    factor * z
}

/// The dataset layout of a simulation of `model` (truth included).
pub fn layout<M: Model>(model: &M) -> Layout
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    let declaration = model.declare();
    let names = |vars: &[sightline_core::Variable]| vars.iter().map(|v| v.name.clone()).collect();
    Layout {
        inputs: names(declaration.inputs()),
        measurements: names(declaration.measurements()),
        states: names(declaration.states()),
    }
}

/// Simulates `steps` rows of `model` from `prior` under the constant input `u`, in memory.
pub fn simulate<M: Model>(
    model: &M,
    prior: &Gaussian<M::State>,
    u: &[f64],
    steps: usize,
    seed: u64,
    options: &SimOptions,
) -> Result<Dataset>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    // Grows as rows arrive: a huge `steps` fails for lack of memory row by row, not up front.
    let mut records = Vec::with_capacity(steps.min(1 << 16));
    simulate_each(model, prior, u, steps, seed, options, &mut |r| {
        records.push(r.clone());
        Ok(())
    })?;
    Ok(Dataset {
        layout: layout(model),
        records,
    })
}

/// Simulates `steps` rows like [`simulate`] and hands each to `sink` as it is drawn, so that a
/// long simulation streams to a file in constant memory. The rows are the same as
/// [`simulate`]'s, bit for bit.
pub fn simulate_each<M: Model>(
    model: &M,
    prior: &Gaussian<M::State>,
    u: &[f64],
    steps: usize,
    seed: u64,
    options: &SimOptions,
    sink: &mut dyn FnMut(&Record) -> Result<()>,
) -> Result<()>
where
    DefaultAllocator: Alloc<M::State, M::Meas>,
{
    if !(0.0..=1.0).contains(&options.dropout) {
        return Err(Error::Usage(format!(
            "--dropout must be a probability in [0, 1], got {}",
            options.dropout
        )));
    }
    if options.every == 0 {
        return Err(Error::Usage("--every must be at least 1".into()));
    }
    let declaration = model.declare();
    let dt = declaration.dt();
    let mut rng = stream(seed, &[NOISE_STREAM]);
    let mut dropout_rng = stream(seed, &[DROPOUT_STREAM]);
    let r_factor = noise_factor(
        &model.measurement_noise(0.0),
        "measurement noise covariance R",
    )?;
    let mut x = if options.noise_free {
        prior.mean.clone()
    } else {
        &prior.mean + draw(&mut rng, &noise_factor(&prior.cov, "prior covariance")?)
    };
    model.project(&mut x);
    let mut record = Record::empty();
    for k in 0..steps {
        crate::interrupt::check(|| format!("while simulating row {k}"))?;
        let t = k as f64 * dt;
        let mut y = model.measure(&x, u, t);
        if !options.noise_free {
            y += draw(&mut rng, &r_factor);
        }
        for yi in y.iter_mut() {
            let scheduled = k % options.every == 0;
            let dropped = options.dropout > 0.0 && dropout_rng.random::<f64>() < options.dropout;
            if !scheduled || dropped {
                *yi = f64::NAN;
            }
        }
        if x.iter().any(|v| !v.is_finite()) || !t.is_finite() {
            return Err(Error::Run(format!(
                "simulation of '{}' left the finite range at t = {t} s (row {k}); check the parameters",
                declaration.name()
            )));
        }
        record.t = t;
        record.u.clear();
        record.u.extend_from_slice(u);
        record.y.clear();
        record.y.extend_from_slice(y.as_slice());
        let truth = record.x.get_or_insert_with(Vec::new);
        truth.clear();
        truth.extend_from_slice(x.as_slice());
        sink(&record)?;
        let mut next = model.transition(&x, u, t, dt);
        if !options.noise_free {
            let q = model.process_noise(&x, u, t, dt);
            next += draw(&mut rng, &noise_factor(&q, "process noise covariance Q")?);
        }
        model.project(&mut next);
        x = next;
    }
    Ok(())
}
