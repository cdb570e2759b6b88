//! Simulated datasets carry the noise their models declare, and the shipped plants run through
//! the simulator and the filters end to end.

use sightline::FilterSpec;
use sightline::eval::simulate::SimOptions;
use sightline::models::Cv;
use sightline::models::quadtank::QuadTank;
use sightline::nalgebra::Vector2;
use sightline::shipped;

/// Sample mean and covariance of the rows of `samples` (each of length d).
fn moments(samples: &[Vec<f64>]) -> (Vec<f64>, Vec<Vec<f64>>) {
    let n = samples.len() as f64;
    let d = samples[0].len();
    let mean: Vec<f64> = (0..d)
        .map(|i| samples.iter().map(|s| s[i]).sum::<f64>() / n)
        .collect();
    let cov = (0..d)
        .map(|i| {
            (0..d)
                .map(|j| {
                    samples
                        .iter()
                        .map(|s| (s[i] - mean[i]) * (s[j] - mean[j]))
                        .sum::<f64>()
                        / (n - 1.0)
                })
                .collect()
        })
        .collect();
    (mean, cov)
}

#[test]
fn cv_process_and_measurement_noise_have_the_declared_covariances() {
    let plants = shipped();
    let cv = plants.iter().find(|p| p.name() == "cv").unwrap();
    let steps = 100_000;
    let data = cv.simulate(steps, 11, &SimOptions::default()).unwrap();
    let model = Cv::default();
    let f = Cv::transition_matrix(model.dt);
    let q = Cv::noise_matrix(model.q, model.dt);
    let r = model.r;
    // w(k) = x(k+1) − F x(k) and v(k) = y(k) − pos(k), recovered from the truth columns.
    let mut w = Vec::with_capacity(steps);
    let mut v = Vec::with_capacity(steps);
    for pair in data.records.windows(2) {
        let x0 = pair[0].x.as_ref().unwrap();
        let x1 = pair[1].x.as_ref().unwrap();
        let predicted = f * Vector2::new(x0[0], x0[1]);
        w.push(vec![x1[0] - predicted[0], x1[1] - predicted[1]]);
    }
    for rec in &data.records {
        let x = rec.x.as_ref().unwrap();
        v.push(vec![rec.y[0] - x[0]]);
    }
    let n = w.len() as f64;
    // Sampling error of a Gaussian sample covariance: Var(Sᵢⱼ) = (Σᵢᵢ Σⱼⱼ + Σᵢⱼ²)/n (second
    // moments of the Wishart distribution), and of a sample mean Σᵢᵢ/n. Four standard errors.
    let (w_mean, w_cov) = moments(&w);
    for i in 0..2 {
        assert!(
            w_mean[i].abs() < 4.0 * (q[(i, i)] / n).sqrt(),
            "mean w{i} = {}",
            w_mean[i]
        );
        for j in 0..2 {
            let se = ((q[(i, i)] * q[(j, j)] + q[(i, j)].powi(2)) / n).sqrt();
            assert!(
                (w_cov[i][j] - q[(i, j)]).abs() < 4.0 * se,
                "Q[{i}][{j}]: sample {} vs {} (se {se})",
                w_cov[i][j],
                q[(i, j)]
            );
        }
    }
    let (v_mean, v_cov) = moments(&v);
    let n = v.len() as f64;
    assert!(v_mean[0].abs() < 4.0 * (r / n).sqrt());
    let se = (2.0 * r * r / n).sqrt();
    assert!(
        (v_cov[0][0] - r).abs() < 4.0 * se,
        "R: {} vs {r}",
        v_cov[0][0]
    );
    // White and mutually independent: lag-1 autocorrelation of v and correlation of v(k) with
    // w(k) vanish within 4/√n (standard error 1/√n of a sample correlation of independent
    // series, Bartlett's formula; Box & Jenkins, *Time Series Analysis*).
    let lag1: f64 = v.windows(2).map(|p| p[0][0] * p[1][0]).sum::<f64>() / (n * r);
    assert!(lag1.abs() < 4.0 / n.sqrt(), "lag-1 autocorrelation {lag1}");
    let cross: f64 =
        w.iter().zip(&v).map(|(w, v)| w[0] * v[0]).sum::<f64>() / (n * (q[(0, 0)] * r).sqrt());
    assert!(cross.abs() < 4.0 / n.sqrt(), "w-v correlation {cross}");
}

#[test]
fn noise_free_quadtank_simulation_settles_at_the_balance_levels() {
    // Mass balances of Johansson (2000, eq. 1) at P−, solved in closed form, against the
    // simulator's noise-free path (20 000 s ≫ the slowest time constant, about 90 s).
    let plants = shipped();
    let plant = plants.iter().find(|p| p.name() == "quadtank").unwrap();
    let options = SimOptions {
        noise_free: true,
        ..SimOptions::default()
    };
    let data = plant.simulate(20_000, 0, &options).unwrap();
    let last = data.records.last().unwrap().x.clone().unwrap();
    let model = QuadTank::default();
    let balance = model.steady_state(&Vector2::new(3.0, 3.0));
    for i in 0..4 {
        assert!(
            (last[i] / balance[i] - 1.0).abs() < 1e-3,
            "h{}: {} vs {}",
            i + 1,
            last[i],
            balance[i]
        );
    }
}

#[test]
fn every_shipped_plant_runs_through_the_extended_and_unscented_filters() {
    // End to end on each plant's own simulated data (including the runtime-sized chain, whose
    // EKF Jacobian takes the column-by-column dual path): the filters finish, and their state
    // estimates are finite with a positive covariance diagonal.
    for plant in shipped() {
        let data = plant.simulate(200, 5, &SimOptions::default()).unwrap();
        for spec in ["ekf", "ukf"] {
            let mut filter = plant
                .build_filter(&FilterSpec::parse(spec).unwrap(), 0)
                .unwrap();
            let n = plant.states().len();
            let mut prev: Option<(f64, Vec<f64>)> = None;
            for rec in &data.records {
                if let Some((t0, u0)) = &prev {
                    filter.predict(u0, *t0, rec.t - t0).unwrap();
                }
                filter
                    .update(&rec.y, &rec.u, rec.t)
                    .unwrap_or_else(|e| panic!("{} {spec}: {e}", plant.name()));
                prev = Some((rec.t, rec.u.clone()));
            }
            assert!(filter.mean().iter().all(|m| m.is_finite()));
            let cov = filter.covariance();
            assert!(
                (0..n).all(|i| cov[i * n + i] > 0.0),
                "{} {spec}",
                plant.name()
            );
        }
    }
}
