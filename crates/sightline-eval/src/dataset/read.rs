//! Reading datasets as a validated stream of records, with errors located at file:line:column.
//!
//! The header is mapped to the plant's names by name, in any column order: `t`, `u.<input>`,
//! `y.<measurement>` and optional `x.<state>` (all of the truth columns or none). The reader
//! accepts CRLF line ends, a UTF-8 byte-order mark and blanks around cells. An empty `y.` cell is
//! a missing measurement component (NaN in the record); a non-finite `y.` cell (`nan`, `inf`) is
//! an error unless [`ReadOptions::nonfinite_as_missing`] is set. An input column may be absent
//! only when its value was given with `--set u.<input>=VALUE`; the constant is then used on every
//! row.
//!
//! Validation is layered so that it can grow without touching the parser: the header is checked
//! by [`ColumnMap::from_header`], each cell by the cell parser, and each parsed row by a list of
//! [`RowCheck`]s (the built-in one requires `t` to increase strictly). Adding a rule is one more
//! `RowCheck` pushed with [`DatasetReader::with_check`].

use std::fs::File;
use std::io::{BufRead, BufReader, Read};
use std::path::{Path, PathBuf};

use super::{Dataset, Layout, Record};
use crate::error::{Error, Result};
use crate::plant::AnyPlant;

/// What the reader expects: the plant's names and the inputs it may substitute.
#[derive(Debug, Clone, PartialEq)]
pub struct Schema {
    /// Model name (for messages).
    pub model: String,
    /// Input names in model order.
    pub inputs: Vec<String>,
    /// Measurement names in model order.
    pub measurements: Vec<String>,
    /// State names in model order.
    pub states: Vec<String>,
    /// The value used for an input whose column is absent, `None` when the input must come from
    /// the data (it was not given with `--set u.<input>`).
    pub input_fallback: Vec<Option<f64>>,
}

impl Schema {
    /// The schema of `plant`; `set_inputs` names the inputs given with `--set u.<input>=VALUE`,
    /// whose constant (from [`AnyPlant::constant_input`]) replaces an absent column.
    pub fn of(plant: &dyn AnyPlant, set_inputs: &[String]) -> Self {
        let inputs: Vec<String> = plant.inputs().into_iter().map(|v| v.name).collect();
        let constant = plant.constant_input();
        let input_fallback = inputs
            .iter()
            .enumerate()
            .map(|(i, name)| {
                if set_inputs.iter().any(|s| s == name) {
                    constant.get(i).copied()
                } else {
                    None
                }
            })
            .collect();
        Schema {
            model: plant.name().to_string(),
            inputs,
            measurements: plant.measurements().into_iter().map(|v| v.name).collect(),
            states: plant.states().into_iter().map(|v| v.name).collect(),
            input_fallback,
        }
    }
}

/// Reader options.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct ReadOptions {
    /// Treat non-finite `y.` cells (`nan`, `inf`) as missing instead of rejecting them.
    pub nonfinite_as_missing: bool,
}

/// Where each of the plant's quantities sits in the file (0-based field indices).
#[derive(Debug, Clone, PartialEq)]
pub struct ColumnMap {
    /// Field of `t`.
    pub t: usize,
    /// Field of each input, or its constant when the column is absent.
    pub inputs: Vec<InputSource>,
    /// Field of each measurement.
    pub measurements: Vec<usize>,
    /// Fields of the truth, if present.
    pub states: Option<Vec<usize>>,
    /// Header names, trimmed, for messages.
    pub names: Vec<String>,
}

/// Where an input's value comes from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum InputSource {
    /// A column (0-based field index).
    Column(usize),
    /// A constant given with `--set u.<input>`.
    Constant(f64),
}

/// `text` in single quotes for a message: control characters escaped (so junk never reaches
/// the terminal raw) and long text cut to its first 40 characters.
pub fn quoted(text: &str) -> String {
    const SHOWN: usize = 40;
    let mut out = String::from("'");
    for (i, c) in text.chars().enumerate() {
        if i == SHOWN {
            out.push('…');
            break;
        }
        if c.is_control() {
            out.extend(c.escape_debug());
        } else {
            out.push(c);
        }
    }
    out.push('\'');
    out
}

/// A hint for a cell that runs over several lines: a quote opened in it was never closed.
fn spans_lines(text: &str) -> &'static str {
    if text.contains('\n') {
        " (the cell spans lines: a '\"' opened in it is never closed)"
    } else {
        ""
    }
}

fn list(prefix: &str, names: &[String]) -> String {
    if names.is_empty() {
        "(none)".into()
    } else {
        names
            .iter()
            .map(|n| format!("{prefix}{n}"))
            .collect::<Vec<_>>()
            .join(", ")
    }
}

impl ColumnMap {
    /// Maps a header row to the schema. Errors are located at line `line` of `path`, column =
    /// 1-based field number.
    pub fn from_header(path: &Path, line: u64, header: &[&str], schema: &Schema) -> Result<Self> {
        let at = |column: usize, message: String| Error::data(path, line, column as u64, message);
        let names: Vec<String> = header.iter().map(|h| h.trim().to_string()).collect();
        let mut t = None;
        let mut inputs = vec![None; schema.inputs.len()];
        let mut measurements = vec![None; schema.measurements.len()];
        let mut states = vec![None; schema.states.len()];
        if let [only] = names.as_slice() {
            if let Some(separator) = [';', '\t', '|'].into_iter().find(|c| only.contains(*c)) {
                return Err(at(
                    1,
                    format!(
                        "the header is a single column {}; expected comma-separated columns (the \
                         file looks separated by {:?})",
                        quoted(only),
                        separator
                    ),
                ));
            }
        }
        for (field, name) in names.iter().enumerate() {
            let column = field + 1;
            let shown = quoted(name);
            if name.is_empty() {
                return Err(at(
                    column,
                    format!(
                        "header column {column} has no name (a stray comma?); expected 't', {}, \
                         {} and optionally {}",
                        list("u.", &schema.inputs),
                        list("y.", &schema.measurements),
                        list("x.", &schema.states)
                    ),
                ));
            }
            let slot = if name == "t" {
                &mut t
            } else if let Some(rest) = name.strip_prefix("u.") {
                let Some(i) = schema.inputs.iter().position(|n| n == rest) else {
                    return Err(at(
                        column,
                        format!(
                            "unknown input column {shown}; model '{}' has inputs: {}",
                            schema.model,
                            list("u.", &schema.inputs)
                        ),
                    ));
                };
                &mut inputs[i]
            } else if let Some(rest) = name.strip_prefix("y.") {
                let Some(i) = schema.measurements.iter().position(|n| n == rest) else {
                    return Err(at(
                        column,
                        format!(
                            "unknown measurement column {shown}; model '{}' has measurements: {}",
                            schema.model,
                            list("y.", &schema.measurements)
                        ),
                    ));
                };
                &mut measurements[i]
            } else if let Some(rest) = name.strip_prefix("x.") {
                let Some(i) = schema.states.iter().position(|n| n == rest) else {
                    return Err(at(
                        column,
                        format!(
                            "unknown state column {shown}; model '{}' has states: {}",
                            schema.model,
                            list("x.", &schema.states)
                        ),
                    ));
                };
                &mut states[i]
            } else {
                return Err(at(
                    column,
                    format!(
                        "unexpected column {shown}; expected 't', {}, {} and optionally {}",
                        list("u.", &schema.inputs),
                        list("y.", &schema.measurements),
                        list("x.", &schema.states)
                    ),
                ));
            };
            if let Some(first) = *slot {
                return Err(at(
                    column,
                    format!("column {shown} appears twice (also column {})", first + 1),
                ));
            }
            *slot = Some(field);
        }
        let end = names.len() + 1;
        let Some(t) = t else {
            return Err(at(
                1,
                "the header has no 't' column (time in seconds, strictly increasing)".into(),
            ));
        };
        let mut input_sources = Vec::with_capacity(inputs.len());
        for (i, field) in inputs.iter().enumerate() {
            match (field, schema.input_fallback.get(i).copied().flatten()) {
                (Some(f), _) => input_sources.push(InputSource::Column(*f)),
                (None, Some(value)) => input_sources.push(InputSource::Constant(value)),
                (None, None) => {
                    let name = &schema.inputs[i];
                    return Err(at(
                        end,
                        format!(
                            "missing input column 'u.{name}'; add it to the data or give a \
                             constant with --set u.{name}=VALUE"
                        ),
                    ));
                }
            }
        }
        let mut meas_fields = Vec::with_capacity(measurements.len());
        for (i, field) in measurements.iter().enumerate() {
            match field {
                Some(f) => meas_fields.push(*f),
                None => {
                    return Err(at(
                        end,
                        format!(
                            "missing measurement column 'y.{}' (leave cells empty where it was \
                             not measured)",
                            schema.measurements[i]
                        ),
                    ));
                }
            }
        }
        let present = states.iter().filter(|s| s.is_some()).count();
        let states = if present == 0 {
            None
        } else if present == states.len() {
            Some(states.into_iter().flatten().collect())
        } else {
            let missing: Vec<String> = schema
                .states
                .iter()
                .zip(&states)
                .filter(|(_, s)| s.is_none())
                .map(|(n, _)| n.clone())
                .collect();
            return Err(at(
                end,
                format!(
                    "truth columns must be all present or all absent; missing {}",
                    list("x.", &missing)
                ),
            ));
        };
        Ok(ColumnMap {
            t,
            inputs: input_sources,
            measurements: meas_fields,
            states,
            names,
        })
    }

    /// The layout of datasets read with this map.
    pub fn layout(&self, schema: &Schema) -> Layout {
        Layout {
            inputs: schema.inputs.clone(),
            measurements: schema.measurements.clone(),
            states: if self.states.is_some() {
                schema.states.clone()
            } else {
                Vec::new()
            },
        }
    }
}

/// A problem a [`RowCheck`] found in a parsed row.
#[derive(Debug, Clone, PartialEq)]
pub struct Problem {
    /// 1-based field number the problem is located at.
    pub column: usize,
    /// What is wrong and what was expected.
    pub message: String,
}

/// A parsed row handed to the row checks.
#[derive(Debug, Clone, Copy)]
pub struct Row<'a> {
    /// 1-based line of the row in the file.
    pub line: u64,
    /// 0-based index of the data row (the header not counted).
    pub index: u64,
    /// The parsed record.
    pub record: &'a Record,
    /// Where each quantity came from.
    pub columns: &'a ColumnMap,
}

/// One validation rule over parsed rows. Checks keep whatever state they need (e.g. the
/// previous time) and run in the order they were added.
pub trait RowCheck {
    /// Checks one row.
    fn check(&mut self, row: &Row<'_>) -> Result<(), Problem>;
}

/// `t` must increase strictly from row to row.
#[derive(Debug, Clone, Default)]
pub struct StrictlyIncreasingTime {
    previous: Option<(f64, u64)>,
}

impl RowCheck for StrictlyIncreasingTime {
    fn check(&mut self, row: &Row<'_>) -> Result<(), Problem> {
        let t = row.record.t;
        if let Some((prev, line)) = self.previous {
            if t <= prev {
                return Err(Problem {
                    column: row.columns.t + 1,
                    message: format!(
                        "t = {t} does not increase (line {line} has t = {prev}); times must be \
                         strictly increasing"
                    ),
                });
            }
        }
        self.previous = Some((t, row.line));
        Ok(())
    }
}

/// A validated, streaming reader of one dataset file: one [`Record`] at a time, never the whole
/// file in memory.
pub struct DatasetReader {
    path: PathBuf,
    csv: csv::Reader<Box<dyn Read>>,
    raw: csv::StringRecord,
    columns: ColumnMap,
    layout: Layout,
    options: ReadOptions,
    checks: Vec<Box<dyn RowCheck>>,
    rows: u64,
    header_line: u64,
}

impl std::fmt::Debug for DatasetReader {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("DatasetReader")
            .field("path", &self.path)
            .field("columns", &self.columns)
            .field("rows", &self.rows)
            .finish()
    }
}

/// Skips a UTF-8 byte-order mark at the start of `input`.
fn skip_bom<R: Read>(input: R) -> std::io::Result<BufReader<R>> {
    let mut buffered = BufReader::with_capacity(1 << 16, input);
    let starts_with_bom = buffered.fill_buf()?.starts_with(b"\xEF\xBB\xBF");
    if starts_with_bom {
        buffered.consume(3);
    }
    Ok(buffered)
}

impl DatasetReader {
    /// Opens `path` and reads its header.
    pub fn open(path: &Path, schema: &Schema, options: ReadOptions) -> Result<Self> {
        let file = File::open(path).map_err(|source| Error::Read {
            path: path.to_path_buf(),
            source,
        })?;
        Self::from_reader(path, file, schema, options)
    }

    /// Reads a dataset from any byte source; `path` names it in messages.
    pub fn from_reader(
        path: &Path,
        input: impl Read + 'static,
        schema: &Schema,
        options: ReadOptions,
    ) -> Result<Self> {
        let read_err = |source| Error::Read {
            path: path.to_path_buf(),
            source,
        };
        let mut buffered = skip_bom(input).map_err(read_err)?;
        let start = buffered.fill_buf().map_err(read_err)?;
        if start.starts_with(b"\xFF\xFE") || start.starts_with(b"\xFE\xFF") {
            return Err(Error::data(
                path,
                1,
                1,
                "the file is UTF-16 text (it starts with a UTF-16 byte-order mark); expected \
                 UTF-8: save it as UTF-8 CSV",
            ));
        }
        let boxed: Box<dyn Read> = Box::new(buffered);
        let mut csv = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .trim(csv::Trim::All)
            .from_reader(boxed);
        let mut header = csv::StringRecord::new();
        let got = csv
            .read_record(&mut header)
            .map_err(|e| csv_error(path, e))?;
        if !got {
            return Err(Error::data(
                path,
                1,
                1,
                "the file has no header row (it is empty or blank); expected a header row with \
                 't', the y. columns and the u. columns",
            ));
        }
        let line = header.position().map_or(1, |p| p.line());
        let fields: Vec<&str> = header.iter().collect();
        let columns = ColumnMap::from_header(path, line, &fields, schema)?;
        let layout = columns.layout(schema);
        Ok(DatasetReader {
            path: path.to_path_buf(),
            csv,
            raw: csv::StringRecord::new(),
            columns,
            layout,
            options,
            checks: vec![Box::new(StrictlyIncreasingTime::default())],
            rows: 0,
            header_line: line,
        })
    }

    /// Adds a row check, run after the built-in ones.
    pub fn with_check(mut self, check: Box<dyn RowCheck>) -> Self {
        self.checks.push(check);
        self
    }

    /// The layout of the records (truth states empty when the file has no `x.` columns).
    pub fn layout(&self) -> &Layout {
        &self.layout
    }

    /// The column map read from the header.
    pub fn columns(&self) -> &ColumnMap {
        &self.columns
    }

    /// The file being read.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Data rows read so far.
    pub fn rows_read(&self) -> u64 {
        self.rows
    }

    /// Reads the next row into `record`, reusing its buffers; `Ok(false)` at the end of the file.
    pub fn next_into(&mut self, record: &mut Record) -> Result<bool> {
        let got = self
            .csv
            .read_record(&mut self.raw)
            .map_err(|e| csv_error(&self.path, e))?;
        if !got {
            if self.rows == 0 {
                return Err(Error::data(
                    self.path.as_path(),
                    self.header_line + 1,
                    1,
                    "the file has a header but no data rows; expected at least one row of \
                     values below the header",
                ));
            }
            return Ok(false);
        }
        let line = self.raw.position().map_or(0, |p| p.line());
        let at = |column: usize, message: String| {
            Error::data(self.path.as_path(), line, column as u64, message)
        };
        let width = self.columns.names.len();
        if self.raw.len() != width {
            // A blank line inside the data reads as one empty field.
            let (column, message) = if self.raw.len() == 1 && self.raw.get(0) == Some("") {
                (1, format!("empty row; expected {width} fields"))
            } else {
                (
                    self.raw.len().min(width) + 1,
                    format!(
                        "row has {} fields but the header has {width}",
                        self.raw.len()
                    ),
                )
            };
            return Err(at(column, message));
        }
        let columns = &self.columns;
        let raw = &self.raw;
        let cell = |field: usize| raw.get(field).unwrap_or("");
        let number = |field: usize, what: &str| -> Result<f64> {
            let text = cell(field);
            let shown = quoted(text);
            match text.parse::<f64>() {
                Ok(v) if v.is_finite() => Ok(v),
                Ok(_) => Err(at(
                    field + 1,
                    format!(
                        "{what} '{}' is {shown}; expected a finite number",
                        columns.names[field]
                    ),
                )),
                Err(_) if text.is_empty() => Err(at(
                    field + 1,
                    format!(
                        "{what} '{}' is empty; expected a number",
                        columns.names[field]
                    ),
                )),
                Err(_) => Err(at(
                    field + 1,
                    format!(
                        "{what} '{}' is {shown}; expected a number{}",
                        columns.names[field],
                        spans_lines(text)
                    ),
                )),
            }
        };
        record.t = number(columns.t, "time")?;
        record.u.clear();
        for source in &columns.inputs {
            record.u.push(match *source {
                InputSource::Column(f) => number(f, "input")?,
                InputSource::Constant(v) => v,
            });
        }
        record.y.clear();
        for &field in &columns.measurements {
            let text = cell(field);
            let shown = quoted(text);
            let value = if text.is_empty() {
                f64::NAN
            } else {
                match text.parse::<f64>() {
                    Ok(v) if v.is_finite() => v,
                    Ok(_) if self.options.nonfinite_as_missing => f64::NAN,
                    Ok(_) => {
                        return Err(at(
                            field + 1,
                            format!(
                                "measurement '{}' is {shown}; expected a finite number or an \
                                 empty cell for a missing value (or pass --nonfinite-as-missing)",
                                columns.names[field]
                            ),
                        ));
                    }
                    Err(_) => {
                        return Err(at(
                            field + 1,
                            format!(
                                "measurement '{}' is {shown}; expected a number or an empty \
                                 cell{}",
                                columns.names[field],
                                spans_lines(text)
                            ),
                        ));
                    }
                }
            };
            record.y.push(value);
        }
        match &columns.states {
            Some(fields) => {
                let x = record.x.get_or_insert_with(Vec::new);
                x.clear();
                for &field in fields {
                    x.push(number(field, "truth")?);
                }
            }
            None => record.x = None,
        }
        let row = Row {
            line,
            index: self.rows,
            record,
            columns,
        };
        for check in &mut self.checks {
            check
                .check(&row)
                .map_err(|p| Error::data(self.path.as_path(), line, p.column as u64, p.message))?;
        }
        self.rows += 1;
        Ok(true)
    }

    /// Reads every remaining row into memory.
    pub fn read_all(mut self) -> Result<Dataset> {
        let mut records = Vec::new();
        let mut record = Record::empty();
        while self.next_into(&mut record)? {
            records.push(record.clone());
        }
        Ok(Dataset {
            layout: self.layout,
            records,
        })
    }
}

fn csv_error(path: &Path, e: csv::Error) -> Error {
    let (line, column) = match e.position() {
        Some(p) => (p.line(), 1),
        None => (0, 0),
    };
    match e.into_kind() {
        csv::ErrorKind::Io(source) => Error::Read {
            path: path.to_path_buf(),
            source,
        },
        csv::ErrorKind::Utf8 { err, .. } => Error::data(
            path,
            line,
            (err.field() + 1) as u64,
            "the cell is not valid UTF-8 text; expected a UTF-8 file (save it as UTF-8 CSV)",
        ),
        other => Error::data(path, line, column, format!("malformed CSV: {other:?}")),
    }
}

/// A stream of dataset rows, from a file or from memory — what the runner consumes.
pub trait RecordSource {
    /// The layout of the records.
    fn layout(&self) -> &Layout;
    /// Reads the next row into `record`; `Ok(false)` at the end.
    fn next_into(&mut self, record: &mut Record) -> Result<bool>;
}

impl RecordSource for DatasetReader {
    fn layout(&self) -> &Layout {
        &self.layout
    }
    fn next_into(&mut self, record: &mut Record) -> Result<bool> {
        DatasetReader::next_into(self, record)
    }
}

/// A [`RecordSource`] over a dataset held in memory.
#[derive(Debug, Clone)]
pub struct MemorySource<'a> {
    data: &'a Dataset,
    next: usize,
}

impl<'a> MemorySource<'a> {
    /// Streams `data` from its first row.
    pub fn new(data: &'a Dataset) -> Self {
        MemorySource { data, next: 0 }
    }
}

impl RecordSource for MemorySource<'_> {
    fn layout(&self) -> &Layout {
        &self.data.layout
    }
    fn next_into(&mut self, record: &mut Record) -> Result<bool> {
        let Some(r) = self.data.records.get(self.next) else {
            return Ok(false);
        };
        record.clone_from(r);
        self.next += 1;
        Ok(true)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn schema() -> Schema {
        Schema {
            model: "toy".into(),
            inputs: vec!["torque".into()],
            measurements: vec!["position".into(), "speed".into()],
            states: vec!["angle".into(), "rate".into()],
            input_fallback: vec![None],
        }
    }

    fn read(text: &str, schema: &Schema, options: ReadOptions) -> Result<Dataset> {
        DatasetReader::from_reader(
            Path::new("data.csv"),
            std::io::Cursor::new(text.as_bytes().to_vec()),
            schema,
            options,
        )?
        .read_all()
    }

    fn err(text: &str) -> String {
        read(text, &schema(), ReadOptions::default())
            .unwrap_err()
            .to_string()
    }

    #[test]
    fn maps_columns_by_name_in_any_order_with_bom_crlf_and_blanks() {
        let text = "\u{feff} y.speed , x.rate,t,u.torque,y.position,x.angle\r\n\
                    2.5, 0.1 ,0, 1,0.5,0.2\r\n\
                    ,0.2,0.1,1,0.6,0.3\r\n";
        let d = read(text, &schema(), ReadOptions::default()).unwrap();
        assert_eq!(d.layout.states, vec!["angle", "rate"]);
        assert_eq!(d.records.len(), 2);
        let r = &d.records[0];
        assert_eq!((r.t, r.u.clone()), (0.0, vec![1.0]));
        assert_eq!(r.y, vec![0.5, 2.5]);
        assert_eq!(r.x, Some(vec![0.2, 0.1]));
        assert!(d.records[1].y[1].is_nan(), "empty cell is missing");
    }

    #[test]
    fn without_truth_columns_the_layout_has_no_states() {
        let d = read(
            "t,u.torque,y.position,y.speed\n0,0,1,2\n",
            &schema(),
            ReadOptions::default(),
        )
        .unwrap();
        assert!(d.layout.states.is_empty());
        assert_eq!(d.records[0].x, None);
    }

    #[test]
    fn errors_are_located_and_say_what_was_expected() {
        let e = err("u.torque,y.position,y.speed\n0,1,2\n");
        assert!(e.starts_with("data.csv:1:1:") && e.contains("'t'"), "{e}");
        let e = err("t,u.torque,y.position,y.speed\n0,0,1,2\n0.1,0,abc,2\n");
        assert!(e.starts_with("data.csv:3:3:") && e.contains("abc"), "{e}");
        let e = err("t,u.torque,y.position,y.speed\n0,0,1,2\n0.1,0,1\n");
        assert!(
            e.starts_with("data.csv:3:4:") && e.contains("3 fields"),
            "{e}"
        );
        let e = err("t,u.torque,y.position,y.speed\n0,0,1,2\n0,0,1,2\n");
        assert!(
            e.starts_with("data.csv:3:1:") && e.contains("increas"),
            "{e}"
        );
        let e = err("t,u.torque,y.position,y.height\n");
        assert!(
            e.starts_with("data.csv:1:4:") && e.contains("y.position, y.speed"),
            "{e}"
        );
        let e = err("t,u.torque,y.position,y.speed,x.angle,x.tilt\n");
        assert!(e.contains("x.angle, x.rate"), "{e}");
        let e = err("t,u.torque,y.position,y.speed,u.force\n");
        assert!(e.contains("u.torque"), "{e}");
        let e = err("t,y.position,y.speed\n0,1,2\n");
        assert!(
            e.contains("u.torque") && e.contains("--set u.torque"),
            "{e}"
        );
        let e = err("t,u.torque,y.position,y.speed,x.angle\n");
        assert!(e.contains("x.rate"), "{e}");
        let e = err("t,u.torque,y.position,y.speed,y.speed\n");
        assert!(e.contains("twice"), "{e}");
        let e = err("t,u.torque,y.position,y.speed,notes\n");
        assert!(e.starts_with("data.csv:1:5:"), "{e}");
        let e = err("");
        assert!(e.contains("empty"), "{e}");
    }

    #[test]
    fn an_absent_input_column_uses_the_set_constant() {
        let mut s = schema();
        s.input_fallback = vec![Some(0.75)];
        let d = read(
            "t,y.position,y.speed\n0,1,2\n1,1,2\n",
            &s,
            ReadOptions::default(),
        )
        .unwrap();
        assert!(d.records.iter().all(|r| r.u == vec![0.75]));
    }

    #[test]
    fn non_finite_measurements_are_errors_unless_allowed() {
        let text = "t,u.torque,y.position,y.speed\n0,0,nan,2\n1,0,1,inf\n";
        let e = read(text, &schema(), ReadOptions::default())
            .unwrap_err()
            .to_string();
        assert!(
            e.starts_with("data.csv:2:3:") && e.contains("--nonfinite-as-missing"),
            "{e}"
        );
        let d = read(
            text,
            &schema(),
            ReadOptions {
                nonfinite_as_missing: true,
            },
        )
        .unwrap();
        assert!(d.records[0].y[0].is_nan() && d.records[1].y[1].is_nan());
        // Time and inputs must always be finite.
        let e = err("t,u.torque,y.position,y.speed\ninf,0,1,2\n");
        assert!(e.starts_with("data.csv:2:1:"), "{e}");
    }

    #[test]
    fn round_trips_the_writer() {
        let data = Dataset {
            layout: Layout {
                inputs: vec!["torque".into()],
                measurements: vec!["position".into(), "speed".into()],
                states: vec!["angle".into(), "rate".into()],
            },
            records: vec![
                Record {
                    t: 0.0,
                    u: vec![0.1],
                    y: vec![f64::NAN, 1.0 / 3.0],
                    x: Some(vec![1e-300, -2.5]),
                },
                Record {
                    t: 0.01,
                    u: vec![0.2],
                    y: vec![0.7, f64::NAN],
                    x: Some(vec![3.0, 4.0]),
                },
            ],
        };
        let mut bytes = Vec::new();
        super::super::write::write_csv(&data, &mut bytes).unwrap();
        let back = read(
            std::str::from_utf8(&bytes).unwrap(),
            &schema(),
            ReadOptions::default(),
        )
        .unwrap();
        assert_eq!(back.records.len(), 2);
        for (a, b) in back.records.iter().zip(&data.records) {
            assert_eq!(a.t.to_bits(), b.t.to_bits());
            assert_eq!(a.x, b.x);
            for (p, q) in a.y.iter().zip(&b.y) {
                assert!(p.to_bits() == q.to_bits() || (p.is_nan() && q.is_nan()));
            }
        }
    }
}
