//! Datasets in the contract's CSV layout: a header row; a time column `t` (numbers in seconds or
//! another unit, or RFC 3339 date-times; strictly increasing); `u.<input>`, `y.<measurement>` and
//! optional `x.<state>` (truth) columns in any order; an empty `y.` cell is a missing
//! measurement. Real logs are read as they are: see [`read`] for renamed and extra columns,
//! missing-value tokens, comment lines and standard input, and [`time`] for the time column.
//!
//! In memory a dataset is a [`Layout`] and a list of [`Record`]s; large files are read as a
//! stream of records so that filtering never holds the whole file.

pub mod read;
pub mod time;
pub mod write;

/// Column names of a dataset, in model order (without the `u.`/`y.`/`x.` prefixes).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Layout {
    /// Input names.
    pub inputs: Vec<String>,
    /// Measurement names.
    pub measurements: Vec<String>,
    /// State names (truth columns), empty when the data carries no truth.
    pub states: Vec<String>,
}

/// One row: time, inputs, measurements (NaN = missing) and, when known, the true state.
#[derive(Debug, Clone, PartialEq)]
pub struct Record {
    /// Time in seconds since the first row, whatever the data's clock (see [`time`]).
    pub t: f64,
    /// Inputs in model order.
    pub u: Vec<f64>,
    /// Measurements in model order; NaN marks a missing component.
    pub y: Vec<f64>,
    /// True state in model order, if the dataset has truth columns.
    pub x: Option<Vec<f64>>,
}

impl Record {
    /// A record with no values, to be filled by a reader (its buffers are reused row to row).
    pub fn empty() -> Self {
        Record {
            t: 0.0,
            u: Vec::new(),
            y: Vec::new(),
            x: None,
        }
    }
}

/// A dataset held in memory.
#[derive(Debug, Clone, PartialEq)]
pub struct Dataset {
    /// Column names.
    pub layout: Layout,
    /// Rows in time order.
    pub records: Vec<Record>,
}
