//! Writing datasets in the contract's CSV layout: `t`, then `u.<input>`, `y.<measurement>` and
//! `x.<state>` columns; a missing measurement is an empty cell. Numbers are written in Rust's
//! shortest round-trip form, so reading a file back gives the same bits.

use std::io::Write;

use super::{Dataset, Layout, Record};
use crate::error::{Error, Result};

/// The header row for a layout.
pub fn header(layout: &Layout) -> Vec<String> {
    let mut h = vec!["t".to_string()];
    h.extend(layout.inputs.iter().map(|n| format!("u.{n}")));
    h.extend(layout.measurements.iter().map(|n| format!("y.{n}")));
    h.extend(layout.states.iter().map(|n| format!("x.{n}")));
    h
}

fn cell(v: f64) -> String {
    if v.is_nan() {
        String::new()
    } else {
        format!("{v}")
    }
}

/// Writes a dataset row by row (the simulator streams into it, so a long simulation never holds
/// its rows in memory): the header on creation, then one [`Record`] per call.
pub struct CsvRecordWriter<'a> {
    csv: csv::Writer<&'a mut dyn Write>,
    with_truth: bool,
    row: Vec<String>,
}

fn csv_err(e: csv::Error) -> Error {
    Error::Run(format!("writing CSV: {e}"))
}

impl<'a> CsvRecordWriter<'a> {
    /// Starts a file with the header of `layout`.
    pub fn new(out: &'a mut dyn Write, layout: &Layout) -> Result<Self> {
        let mut csv = csv::Writer::from_writer(out);
        csv.write_record(header(layout)).map_err(csv_err)?;
        Ok(CsvRecordWriter {
            csv,
            with_truth: !layout.states.is_empty(),
            row: Vec::new(),
        })
    }

    /// Writes one row.
    pub fn write(&mut self, record: &Record) -> Result<()> {
        let Record { t, u, y, x } = record;
        self.row.clear();
        self.row.push(cell(*t));
        self.row.extend(u.iter().map(|v| cell(*v)));
        self.row.extend(y.iter().map(|v| cell(*v)));
        if self.with_truth {
            if let Some(x) = x {
                self.row.extend(x.iter().map(|v| cell(*v)));
            }
        }
        self.csv.write_record(&self.row).map_err(csv_err)
    }

    /// Flushes the rows written.
    pub fn finish(mut self) -> Result<()> {
        self.csv
            .flush()
            .map_err(|e| Error::Run(format!("writing CSV: {e}")))
    }
}

/// Writes a whole dataset as CSV.
pub fn write_csv(data: &Dataset, out: &mut dyn Write) -> Result<()> {
    let mut w = CsvRecordWriter::new(out, &data.layout)?;
    for record in &data.records {
        w.write(record)?;
    }
    w.finish()
}
