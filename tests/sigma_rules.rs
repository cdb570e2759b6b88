//! Sigma-point rules against closed forms and reference tables: Gauss–Hermite nodes and
//! weights, polynomial exactness of the unscented, cubature and Gauss–Hermite rules, and the
//! filters' predicted means for a cubic map of a Gaussian.

mod common;

use sightline::core::SigmaRule;
use sightline::core::nalgebra::{Matrix1, Matrix2, U1, U2, Vector1, Vector2};
use sightline::core::sigma::gauss_hermite;
use sightline::filters::build;
use sightline::prelude::*;
use sightline::{FilterSpec, Gaussian, Model, Real};

/// E[ξᵏ] for ξ ~ N(0, 1): (k−1)!! for even k, 0 for odd k (closed form).
fn standard_normal_moment(k: u32) -> f64 {
    if k % 2 == 1 {
        0.0
    } else {
        (1..k).step_by(2).map(|v| v as f64).product()
    }
}

fn binomial(n: u32, k: u32) -> f64 {
    (0..k).fold(1.0, |acc, i| acc * (n - i) as f64 / (i + 1) as f64)
}

/// E[(m + σξ)ᵏ] = Σⱼ C(k, j) m^{k−j} σʲ E[ξʲ] (closed form).
fn gaussian_moment(m: f64, sigma: f64, k: u32) -> f64 {
    (0..=k)
        .map(|j| {
            binomial(k, j)
                * m.powi((k - j) as i32)
                * sigma.powi(j as i32)
                * standard_normal_moment(j)
        })
        .sum()
}

#[test]
fn gauss_hermite_nodes_and_weights_match_numpy_hermegauss() {
    // Reference: numpy.polynomial.hermite_e.hermegauss (probabilists' Hermite, weight
    // e^{−x²/2}), weights divided by √(2π) (fixture from tests/reference/make_fixtures.py).
    let fixture = common::fixture("gauss_hermite.json");
    for rule in fixture["rules"].as_array().unwrap() {
        let p = rule["order"].as_u64().unwrap() as usize;
        let (nodes, weights) = gauss_hermite(p);
        let want_nodes = common::numbers(&rule["nodes"]);
        let want_weights = common::numbers(&rule["weights"]);
        for i in 0..p {
            assert!(
                (nodes[i] - want_nodes[i]).abs() <= 1e-13,
                "p={p} node {i}: {} vs {}",
                nodes[i],
                want_nodes[i]
            );
            assert!(
                (weights[i] - want_weights[i]).abs() <= 1e-14,
                "p={p} weight {i}: {} vs {}",
                weights[i],
                want_weights[i]
            );
        }
    }
}

#[test]
fn gauss_hermite_matches_abramowitz_and_stegun_table_25_10() {
    // Abramowitz & Stegun, Handbook of Mathematical Functions, Table 25.10 (physicists' weight
    // e^{−x²}; positive abscissas xᵢ and weights wᵢ, values recalled from memory and agreeing
    // with the numpy.polynomial.hermite.hermgauss fixture). The probabilists' rule used by the
    // filters is ξ = √2·x, W = w/√π.
    let table: [(usize, &[(f64, f64)]); 3] = [
        (
            3,
            &[
                (0.0, 1.181_635_900_603_677),
                (1.224_744_871_391_589, 0.295_408_975_150_919),
            ],
        ),
        (
            4,
            &[
                (0.524_647_623_275_290, 0.804_914_090_005_513),
                (1.650_680_123_885_785, 0.081_312_835_447_245),
            ],
        ),
        (
            5,
            &[
                (0.0, 0.945_308_720_482_942),
                (0.958_572_464_613_819, 0.393_619_323_152_241),
                (2.020_182_870_456_086, 0.019_953_242_059_046),
            ],
        ),
    ];
    let fixture = common::fixture("gauss_hermite.json");
    for (p, entries) in table {
        let (nodes, weights) = gauss_hermite(p);
        let rule = fixture["rules"]
            .as_array()
            .unwrap()
            .iter()
            .find(|r| r["order"].as_u64() == Some(p as u64))
            .unwrap();
        let phys_nodes = common::numbers(&rule["physicists_nodes"]);
        let phys_weights = common::numbers(&rule["physicists_weights"]);
        for &(x, w) in entries {
            // The rule is symmetric; find the node ξ = √2·x.
            let i = nodes
                .iter()
                .position(|&xi| (xi - 2f64.sqrt() * x).abs() < 1e-9)
                .unwrap_or_else(|| panic!("p={p}: no node at √2·{x}"));
            assert!(
                (nodes[i] - 2f64.sqrt() * x).abs() <= 1e-14,
                "p={p} node {}",
                nodes[i]
            );
            assert!(
                (weights[i] - w / std::f64::consts::PI.sqrt()).abs() <= 1e-14,
                "p={p} weight {} vs {}",
                weights[i],
                w / std::f64::consts::PI.sqrt()
            );
            // The table values as recalled agree with hermgauss to the table's 15 digits.
            assert!((phys_nodes[i] - x).abs() <= 1e-15 && (phys_weights[i] - w).abs() <= 1e-15);
        }
    }
}

#[test]
fn gauss_hermite_of_order_p_is_exact_to_degree_2p_minus_1_and_no_further() {
    // Gaussian quadrature with p nodes integrates polynomials of degree ≤ 2p − 1 exactly and not
    // degree 2p (closed form: Golub & Welsch, Math. Comp. 23, 1969; E[(m+σξ)ᵏ] by the binomial
    // theorem and the standard normal moments).
    let (m, sigma) = (0.8, 1.7);
    for p in 1..=7usize {
        let (nodes, weights) = gauss_hermite(p);
        let quad = |k: u32| -> f64 {
            nodes
                .iter()
                .zip(&weights)
                .map(|(x, w)| w * (m + sigma * x).powi(k as i32))
                .sum()
        };
        for k in 0..=(2 * p as u32 - 1) {
            let exact = gaussian_moment(m, sigma, k);
            assert!(
                (quad(k) - exact).abs() <= 1e-11 * exact.abs().max(1.0),
                "p={p} degree {k}: {} vs {exact}",
                quad(k)
            );
        }
        let k = 2 * p as u32;
        let exact = gaussian_moment(m, sigma, k);
        assert!(
            (quad(k) - exact).abs() > 1e-6 * exact.abs(),
            "p={p} should not be exact at degree {k}"
        );
    }
    // The tensor-product rule in two dimensions: exact for ξ₁ᵃξ₂ᵇ with a, b ≤ 2p − 1.
    let p = 3;
    let sp = SigmaRule::GaussHermite { order: p }.points(2).unwrap();
    for a in 0..=(2 * p as u32 - 1) {
        for b in 0..=(2 * p as u32 - 1) {
            let quad: f64 = (0..sp.unit.ncols())
                .map(|j| sp.wm[j] * sp.unit[(0, j)].powi(a as i32) * sp.unit[(1, j)].powi(b as i32))
                .sum();
            let exact = standard_normal_moment(a) * standard_normal_moment(b);
            assert!(
                (quad - exact).abs() <= 1e-11 * exact.max(1.0),
                "ξ₁^{a}ξ₂^{b}: {quad} vs {exact}"
            );
        }
    }
}

/// A cubic map of the state, x ↦ f(x), with no process noise: the predicted mean is E[f(x)].
#[derive(Debug, Clone, Parameters)]
struct CubicMap {
    mean: Vector2<f64>,
    cov: Matrix2<f64>,
}

impl Model for CubicMap {
    type State = U2;
    type Meas = U1;
    fn declare(&self) -> Declaration {
        Declaration::new("cubic-map", 1.0)
            .state("a", "-", 0.0, 1.0)
            .state("b", "-", 0.0, 1.0)
            .measurement("a", "-")
    }
    fn transition<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64, _dt: f64) -> Vector2<S> {
        let (a, b) = (x[0], x[1]);
        Vector2::new(
            a * a * a - a * b * b * 2.0 + a * b * 0.5 + b - S::from(1.0),
            b * b * b * 3.0 + a * a * b - a + S::from(2.0),
        )
    }
    fn measure<S: Real>(&self, x: &Vector2<S>, _u: &[f64], _t: f64) -> Vector1<S> {
        Vector1::new(x[0])
    }
    fn process_noise(&self, _x: &Vector2<f64>, _u: &[f64], _t: f64, _dt: f64) -> Matrix2<f64> {
        Matrix2::zeros()
    }
    fn measurement_noise(&self, _t: f64) -> Matrix1<f64> {
        Matrix1::new(1.0)
    }
    fn prior(&self) -> Gaussian<U2> {
        Gaussian::new(self.mean, self.cov)
    }
}

#[test]
fn unscented_cubature_and_gauss_hermite_means_are_exact_for_cubic_maps() {
    let model = CubicMap {
        mean: Vector2::new(0.7, -1.2),
        cov: Matrix2::new(0.5, 0.2, 0.2, 0.3),
    };
    let (m, p) = (model.mean, model.cov);
    // Gaussian moments (closed form, Isserlis' theorem): E[xᵢxⱼ] = mᵢmⱼ + Pᵢⱼ,
    // E[xᵢxⱼxₖ] = mᵢmⱼmₖ + mᵢPⱼₖ + mⱼPᵢₖ + mₖPᵢⱼ.
    let e2 = |i: usize, j: usize| m[i] * m[j] + p[(i, j)];
    let e3 = |i: usize, j: usize, k: usize| {
        m[i] * m[j] * m[k] + m[i] * p[(j, k)] + m[j] * p[(i, k)] + m[k] * p[(i, j)]
    };
    let exact = [
        e3(0, 0, 0) - 2.0 * e3(0, 1, 1) + 0.5 * e2(0, 1) + m[1] - 1.0,
        3.0 * e3(1, 1, 1) + e3(0, 0, 1) - m[0] + 2.0,
    ];
    // The rules are exact to degree 3: the scaled unscented transform for any α, β, κ (Julier,
    // ACC 2002), the spherical-radial cubature rule (Arasaratnam & Haykin, IEEE TAC 2009) and
    // Gauss–Hermite of order ≥ 2 (Ito & Xiong, IEEE TAC 2000).
    let exact_specs = [
        "ukf",
        "ukf:kappa=1",
        "ukf:alpha=0.5,beta=2,kappa=1",
        "ukf:alpha=0.3",
        "ckf",
        "ghkf:order=2",
        "ghkf:order=3",
        "srukf",
        "srukf:kappa=1",
    ];
    for spec in exact_specs {
        let mut f = build(&model, &model.prior(), &FilterSpec::parse(spec).unwrap(), 0).unwrap();
        f.predict(&[], 0.0, 1.0).unwrap();
        for (got, want) in f.mean().iter().zip(exact) {
            assert!(
                (got - want).abs() <= 1e-12 * (1.0 + want.abs()),
                "{spec}: mean {got} vs E[f] {want}"
            );
        }
    }
    // Linearisation is not: the EKF's mean f(m) misses the second- and third-order terms.
    let mut ekf = build(
        &model,
        &model.prior(),
        &FilterSpec::parse("ekf").unwrap(),
        0,
    )
    .unwrap();
    ekf.predict(&[], 0.0, 1.0).unwrap();
    assert!(
        (ekf.mean()[1] - exact[1]).abs() > 0.1,
        "ekf {} vs {}",
        ekf.mean()[1],
        exact[1]
    );
}
