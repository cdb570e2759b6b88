//! Helpers shared by the integration tests: reference fixtures and a stepping loop.
#![allow(dead_code)]

use std::path::Path;

use sightline::filters::{Filter, FilterError};
use sightline::nalgebra::DMatrix;

/// Reads a committed fixture written by `tests/reference/make_fixtures.py`.
pub fn fixture(name: &str) -> serde_json::Value {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/reference")
        .join(name);
    let text = std::fs::read_to_string(&path)
        .unwrap_or_else(|e| panic!("cannot read fixture {}: {e}", path.display()));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("bad fixture {}: {e}", path.display()))
}

/// A JSON array of rows as a matrix.
pub fn matrix(value: &serde_json::Value) -> DMatrix<f64> {
    let rows: Vec<Vec<f64>> = serde_json::from_value(value.clone()).expect("matrix rows");
    let (r, c) = (rows.len(), rows.first().map_or(0, Vec::len));
    DMatrix::from_fn(r, c, |i, j| rows[i][j])
}

/// A JSON array of numbers.
pub fn numbers(value: &serde_json::Value) -> Vec<f64> {
    serde_json::from_value(value.clone()).expect("number array")
}

/// One dataset row for a filter: predict from the previous row (skipped for the first), then
/// update — the runner's time line (see the `Filter` docs).
pub fn step(
    filter: &mut dyn Filter,
    previous: Option<(f64, &[f64])>,
    t: f64,
    y: &[f64],
    u: &[f64],
) -> Result<(), FilterError> {
    if let Some((t0, u0)) = previous {
        filter.predict(u0, t0, t - t0)?;
    }
    filter.update(y, u, t)
}

/// Filtered means (one per row) of `filter` over `records` with recording for smoothing on,
/// and the smoothed track (`None` if the filter does not smooth).
pub fn run_and_smooth(
    filter: &mut dyn Filter,
    records: &[sightline::eval::dataset::Record],
) -> (Vec<Vec<f64>>, Option<sightline::filters::SmoothedTrack>) {
    let smooths = filter.record_for_smoothing();
    let mut filtered = Vec::with_capacity(records.len());
    for (k, r) in records.iter().enumerate() {
        let previous = (k > 0).then(|| (records[k - 1].t, records[k - 1].u.as_slice()));
        step(filter, previous, r.t, &r.y, &r.u).unwrap();
        filtered.push(filter.mean().to_vec());
    }
    let track = filter.smooth().map(|s| s.unwrap());
    assert_eq!(
        track.is_some(),
        smooths,
        "{}: smooth() vs record_for_smoothing()",
        filter.label()
    );
    (filtered, track)
}

/// Sum over rows and state components of the squared error of `estimates` against the truth.
pub fn squared_error(estimates: &[Vec<f64>], records: &[sightline::eval::dataset::Record]) -> f64 {
    estimates
        .iter()
        .zip(records)
        .map(|(m, r)| {
            let x = r.x.as_ref().expect("dataset with truth");
            m.iter().zip(x).map(|(a, b)| (a - b).powi(2)).sum::<f64>()
        })
        .sum()
}
