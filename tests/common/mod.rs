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
