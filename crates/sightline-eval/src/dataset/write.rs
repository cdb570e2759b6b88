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

/// Writes a whole dataset as CSV.
pub fn write_csv(data: &Dataset, out: &mut dyn Write) -> Result<()> {
    let mut w = csv::Writer::from_writer(out);
    let run = |e: csv::Error| Error::Run(format!("writing CSV: {e}"));
    w.write_record(header(&data.layout)).map_err(run)?;
    let with_truth = !data.layout.states.is_empty();
    for Record { t, u, y, x } in &data.records {
        let mut row = Vec::with_capacity(1 + u.len() + y.len() + x.as_ref().map_or(0, |x| x.len()));
        row.push(cell(*t));
        row.extend(u.iter().map(|v| cell(*v)));
        row.extend(y.iter().map(|v| cell(*v)));
        if with_truth {
            if let Some(x) = x {
                row.extend(x.iter().map(|v| cell(*v)));
            }
        }
        w.write_record(&row).map_err(run)?;
    }
    w.flush()
        .map_err(|e| Error::Run(format!("writing CSV: {e}")))?;
    Ok(())
}
