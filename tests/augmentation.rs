//! Parameter estimation by state augmentation recovers the generating constant.

#[allow(dead_code)]
#[path = "../examples/augmented_outlet.rs"]
mod augmented_outlet;

/// With the unknown outlet area as a random-walk state, the EKF and UKF estimates converge on the
/// generating area, within three of their own standard deviations (a consistent estimator's error
/// is about Gaussian with its reported spread: common practice), and the spread shrinks far below
/// the prior's 4 cm² — the data identify the parameter.
#[test]
fn augmented_filters_recover_the_outlet_area() {
    for (seed, area) in [(1, 5e-4), (2, 3e-4), (3, 7e-4)] {
        let mut filters = augmented_outlet::cistern_filters();
        let results = augmented_outlet::run(area, seed, &mut filters);
        for (f, (estimate, sd)) in filters.iter().zip(results) {
            assert!(
                (estimate - area).abs() < 3.0 * sd,
                "{}: area {estimate} ± {sd}, true {area}",
                f.label()
            );
            assert!(
                sd < 0.05 * 4e-4,
                "{}: spread {sd} barely below the prior",
                f.label()
            );
        }
    }
}
