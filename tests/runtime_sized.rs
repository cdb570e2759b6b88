//! A plant whose size is chosen at run time (nalgebra `Dyn`) runs through every Gaussian filter,
//! and — being linear and Gaussian — every filter reproduces the Kalman filter on it (the Kalman
//! filter is exact there and every rule of degree ≥ 3 integrates it exactly: common practice).

use sightline::core::nalgebra::{DMatrix, DVector, Dyn};
use sightline::eval::simulate::SimOptions;
use sightline::prelude::*;
use sightline::{FilterSpec, Gaussian, Model, Real};

/// `n` random walks, each nudged by its neighbours, each measured directly.
#[derive(Debug, Clone, Parameters)]
struct CoupledWalks {
    n: usize,
}

impl CoupledWalks {
    fn coupling(&self) -> DMatrix<f64> {
        DMatrix::from_fn(self.n, self.n, |i, j| {
            match (i as isize - j as isize).abs() {
                0 => 0.95,
                1 => 0.05,
                _ => 0.0,
            }
        })
    }
}

impl Model for CoupledWalks {
    type State = Dyn;
    type Meas = Dyn;
    fn state_dim(&self) -> Dyn {
        Dyn(self.n)
    }
    fn meas_dim(&self) -> Dyn {
        Dyn(self.n)
    }
    fn declare(&self) -> Declaration {
        (0..self.n).fold(Declaration::new("coupled-walks", 1.0), |d, i| {
            d.state(format!("w{i}"), "-", 0.0, 1.0)
                .measurement(format!("w{i}"), "-")
        })
    }
    fn transition<S: Real>(&self, x: &DVector<S>, _u: &[f64], _t: f64, _dt: f64) -> DVector<S> {
        let a = self.coupling();
        DVector::from_fn(self.n, |i, _| {
            (0..self.n).fold(S::from(0.0), |acc, j| acc + x[j] * a[(i, j)])
        })
    }
    fn measure<S: Real>(&self, x: &DVector<S>, _u: &[f64], _t: f64) -> DVector<S> {
        x.clone()
    }
    fn process_noise(&self, _x: &DVector<f64>, _u: &[f64], _t: f64, dt: f64) -> DMatrix<f64> {
        DMatrix::from_fn(
            self.n,
            self.n,
            |i, j| if i == j { 0.02 * dt } else { 0.005 * dt },
        )
    }
    fn measurement_noise(&self, _t: f64) -> DMatrix<f64> {
        DMatrix::from_fn(self.n, self.n, |i, j| if i == j { 0.1 } else { 0.0 })
    }
    fn prior(&self) -> Gaussian<Dyn> {
        Gaussian::new(DVector::zeros(self.n), DMatrix::identity(self.n, self.n))
    }
    fn is_linear(&self) -> bool {
        true
    }
}

#[test]
fn every_gaussian_filter_runs_on_a_runtime_sized_plant_and_agrees_with_kf() {
    let plant = sightline::plant(CoupledWalks { n: 4 });
    let mut data = plant.simulate(300, 8, &SimOptions::default()).unwrap();
    // One component missing on most rows, all missing on some: the masked update must hold.
    for (k, r) in data.records.iter_mut().enumerate() {
        if k % 3 != 0 {
            r.y[k % 4] = f64::NAN;
        }
        if k % 11 == 5 {
            r.y.iter_mut().for_each(|v| *v = f64::NAN);
        }
    }
    let specs = ["kf", "ekf", "iekf", "ukf", "ckf", "ghkf", "srukf"];
    let mut filters: Vec<_> = specs
        .iter()
        .map(|s| {
            plant
                .build_filter(&FilterSpec::parse(s).unwrap(), 0)
                .unwrap()
        })
        .collect();
    let mut previous: Option<(f64, Vec<f64>)> = None;
    let mut worst = 0.0f64;
    for r in &data.records {
        for f in filters.iter_mut() {
            if let Some((t0, u0)) = &previous {
                f.predict(u0, *t0, r.t - t0).unwrap();
            }
            f.update(&r.y, &r.u, r.t).unwrap();
        }
        let (kf_mean, kf_cov) = (filters[0].mean().to_vec(), filters[0].covariance().to_vec());
        let n = kf_mean.len();
        for f in &filters[1..] {
            for (i, (a, b)) in f.mean().iter().zip(&kf_mean).enumerate() {
                let rel = (a - b).abs() / (b.abs() + kf_cov[i * n + i].sqrt());
                worst = worst.max(rel);
                assert!(
                    rel <= 1e-7,
                    "{} at t={}: mean {a} vs kf {b}",
                    f.label(),
                    r.t
                );
            }
            for (idx, (a, b)) in f.covariance().iter().zip(&kf_cov).enumerate() {
                let (i, j) = (idx % n, idx / n);
                let rel = (a - b).abs() / (kf_cov[i * n + i] * kf_cov[j * n + j]).sqrt();
                worst = worst.max(rel);
                assert!(rel <= 1e-7, "{} at t={}: cov {a} vs kf {b}", f.label(), r.t);
            }
            let (a, b) = (
                f.log_likelihood_increment(),
                filters[0].log_likelihood_increment(),
            );
            assert!(
                (a - b).abs() <= 1e-7 * (1.0 + b.abs()),
                "{} log-lik {a} vs {b}",
                f.label()
            );
            match (f.innovation(), filters[0].innovation()) {
                (Some(a), Some(b)) => {
                    assert_eq!(a.present, b.present);
                    assert!(
                        (a.nis - b.nis).abs() <= 1e-7 * (1.0 + b.nis),
                        "{} NIS",
                        f.label()
                    );
                }
                (None, None) => {}
                _ => panic!("{}: innovation presence differs from kf", f.label()),
            }
        }
        previous = Some((r.t, r.u.clone()));
    }
    eprintln!("worst relative difference to kf: {worst:.2e}");
}
