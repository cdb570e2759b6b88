//! Van Loan's discretisation against scipy.linalg.expm of the same block matrix (C. F. Van Loan,
//! IEEE TAC 23(3), 1978; fixture from tests/reference/make_fixtures.py).

mod common;

use sightline::core::van_loan;
use sightline::nalgebra::{DMatrix, Matrix2};

fn relative(a: &DMatrix<f64>, b: &DMatrix<f64>) -> f64 {
    (a - b).abs().max() / b.abs().max()
}

#[test]
fn van_loan_matches_scipy_expm() {
    let fixture = common::fixture("van_loan.json");
    let cases = fixture["cases"].as_array().unwrap();
    assert!(cases.len() >= 5);
    for case in cases {
        let name = case["name"].as_str().unwrap();
        let dt = case["dt"].as_f64().unwrap();
        let a = common::matrix(&case["A"]);
        let qc = common::matrix(&case["Qc"]);
        let phi_ref = common::matrix(&case["Phi"]);
        let qd_ref = common::matrix(&case["Qd"]);
        // Van Loan's Φ is e^{A dt} itself (scipy.linalg.expm(A dt)).
        assert!(
            relative(&phi_ref, &common::matrix(&case["Phi_expm"])) < 1e-12,
            "{name}: fixture"
        );
        let (phi, qd) = van_loan(&a, &qc, dt);
        let (e_phi, e_qd) = (relative(&phi, &phi_ref), relative(&qd, &qd_ref));
        eprintln!("{name}: relative error Φ {e_phi:.1e}, Q_d {e_qd:.1e}");
        assert!(e_phi <= 1e-12, "{name}: Φ {phi} vs scipy {phi_ref}");
        assert!(e_qd <= 1e-12, "{name}: Q_d {qd} vs scipy {qd_ref}");
        // The static-size path gives the same numbers.
        if a.nrows() == 2 {
            let a2 = Matrix2::from_iterator(a.iter().copied());
            let q2 = Matrix2::from_iterator(qc.iter().copied());
            let (phi2, qd2) = van_loan(&a2, &q2, dt);
            assert!(
                (DMatrix::from_column_slice(2, 2, phi2.as_slice()) - &phi)
                    .abs()
                    .max()
                    < 1e-15
            );
            assert!(
                (DMatrix::from_column_slice(2, 2, qd2.as_slice()) - &qd)
                    .abs()
                    .max()
                    < 1e-15
            );
        }
    }
}
