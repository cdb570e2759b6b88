//! The square-root UKF is the UKF computed on Cholesky factors (van der Merwe & Wan, ICASSP
//! 2001): on a nonlinear plant, with missing measurements and with a negative centre weight (the
//! downdate path), it must reproduce the covariance-form filter to rounding, and its factor must
//! stay lower-triangular with P = S Sᵀ.

use sightline::core::nalgebra::Matrix2;
use sightline::eval::simulate::SimOptions;
use sightline::filters::{Filter, SquareRootUkf};
use sightline::models::Pendulum;
use sightline::{FilterSpec, Model, shipped};

#[test]
fn square_root_ukf_reproduces_the_ukf_on_the_pendulum() {
    let plants = shipped();
    let pendulum = plants.iter().find(|p| p.name() == "pendulum").unwrap();
    let mut data = pendulum
        .simulate(1_000, 21, &SimOptions::default())
        .unwrap();
    for (k, r) in data.records.iter_mut().enumerate() {
        if k % 9 == 4 {
            r.y[0] = f64::NAN;
        }
    }
    // α = 0.5 makes the centre covariance weight negative (W₀ᶜ = −0.25 for n = 2), so the
    // square-root form takes its downdate branch at every step.
    for options in ["", ":alpha=0.5", ":alpha=1,beta=0,kappa=1"] {
        let build = |kind: &str| -> Box<dyn Filter> {
            pendulum
                .build_filter(&FilterSpec::parse(&format!("{kind}{options}")).unwrap(), 0)
                .unwrap()
        };
        let (mut ukf, mut srukf) = (build("ukf"), build("srukf"));
        let mut previous: Option<(f64, Vec<f64>)> = None;
        let mut worst = 0.0f64;
        for r in &data.records {
            for f in [&mut ukf, &mut srukf] {
                if let Some((t0, u0)) = &previous {
                    f.predict(u0, *t0, r.t - t0).unwrap();
                }
                f.update(&r.y, &r.u, r.t).unwrap();
            }
            let p = ukf.covariance();
            for i in 0..2 {
                let rel = (srukf.mean()[i] - ukf.mean()[i]).abs()
                    / (ukf.mean()[i].abs() + p[3 * i].sqrt());
                worst = worst.max(rel);
            }
            for (idx, (a, b)) in srukf.covariance().iter().zip(p).enumerate() {
                let (i, j) = (idx % 2, idx / 2);
                worst = worst.max((a - b).abs() / (p[3 * i] * p[3 * j]).sqrt());
            }
            let (a, b) = (
                srukf.log_likelihood_increment(),
                ukf.log_likelihood_increment(),
            );
            assert!(
                (a - b).abs() <= 1e-8 * (1.0 + b.abs()),
                "{options}: log-lik {a} vs {b}"
            );
            previous = Some((r.t, r.u.clone()));
        }
        eprintln!("srukf{options}: worst relative difference to ukf {worst:.2e}");
        assert!(worst <= 1e-9, "srukf{options} vs ukf: {worst:e}");
    }
}

#[test]
fn the_factor_is_lower_triangular_and_squares_to_the_covariance() {
    let model = Pendulum::default();
    let rule = sightline::core::SigmaRule::Unscented {
        alpha: 0.5,
        beta: 2.0,
        kappa: 0.0,
    };
    let mut f = SquareRootUkf::new(model.clone(), model.prior(), rule, "srukf").unwrap();
    let mut t = 0.0;
    for k in 0..200 {
        if k > 0 {
            f.predict(&[0.0], t, model.dt).unwrap();
            t += model.dt;
        }
        f.update(&[0.5 * (k as f64 * 0.05).sin()], &[0.0], t)
            .unwrap();
        let s = *f.factor();
        assert_eq!(s[(0, 1)], 0.0);
        assert!(s[(0, 0)] > 0.0 && s[(1, 1)] > 0.0);
        let p = Matrix2::from_column_slice(f.covariance());
        assert!((s * s.transpose() - p).abs().max() <= 1e-15 * p.abs().max().max(1.0));
    }
}
