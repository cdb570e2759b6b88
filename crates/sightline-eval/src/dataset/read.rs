//! Reading datasets as a validated stream of records, with errors located at file:line:column.
//!
//! The header is mapped to the plant's names by name, in any column order: the time column
//! (`t`, or the one named by [`ReadOptions::time_column`]), `u.<input>`, `y.<measurement>` and
//! optional `x.<state>` (all of the truth columns or none). A log's own column names are mapped
//! with [`ReadOptions::map`] (`--map sensor_a=y.level1`). The reader accepts what loggers,
//! spreadsheets and pandas write:
//! - CRLF line ends, a UTF-8 byte-order mark, blanks around cells, quoted cells;
//! - lines starting with `#` before the header or between rows (comments, metadata);
//! - columns the model does not read (notes, operator, other sensors), skipped and reported by
//!   [`DatasetReader::ignored_columns`] — unless [`ReadOptions::strict_columns`] refuses them. A
//!   `u.`/`y.`/`x.` column with a name the model lacks is refused when a quantity of that kind
//!   is missing (it is then most likely that quantity under another name: the message suggests
//!   the `--map`);
//! - an unnamed first column (the index `pandas.DataFrame.to_csv` writes), ignored with a note;
//! - a time column of numbers in any [`TimeUnit`] or of RFC 3339 date-times (see
//!   [`super::time`]): each record's `t` is in seconds since the first row.
//!
//! An empty `y.` cell, or one equal to a [`ReadOptions::missing`] token (`NA`, `null`, ...), is
//! a missing measurement component (NaN in the record); a non-finite `y.` cell (`nan`, `inf`) is
//! an error unless [`ReadOptions::nonfinite_as_missing`] is set. An input or truth cell must hold
//! a finite number. An input column may be absent only when its value was given with
//! `--set u.<input>=VALUE` (the constant is then used on every row); giving both is refused.
//!
//! Validation is layered so that it can grow without touching the parser: the header is checked
//! by [`ColumnMap::from_header`], each cell by the cell parser, and each parsed row by a list of
//! [`RowCheck`]s (the built-in one requires `t` to increase strictly). Adding a rule is one more
//! `RowCheck` pushed with [`DatasetReader::with_check`].

use std::cell::RefCell;
use std::collections::VecDeque;
use std::fs::File;
use std::io::{BufRead, BufReader, Read};
use std::path::{Path, PathBuf};
use std::rc::Rc;

use super::time::{
    Clock, TIME_BASE_ROWS, TimeFormat, TimeParser, TimeUnit, median_interval, parse_timezone,
    time_base_problem,
};
use super::{Dataset, Layout, Record};
use crate::error::{Error, Result};
use crate::plant::AnyPlant;

/// The name under which standard input appears in messages (a dataset path of `-`).
pub const STDIN_NAME: &str = "<stdin>";

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
    /// The constant of an input given with `--set u.<input>`, `None` when the input must come
    /// from the data. An input with a constant must not also be a column (which one was meant?).
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

/// Reader options: the dataset-reading flags of the command line.
#[derive(Debug, Clone, PartialEq)]
pub struct ReadOptions {
    /// Treat non-finite `y.` cells (`nan`, `inf`) as missing instead of rejecting them.
    pub nonfinite_as_missing: bool,
    /// Name of the time column (`--time`, default `t`; empty for an unnamed first column).
    pub time_column: String,
    /// Unit of a numeric time column (`--time-unit`); `None` is seconds, not given.
    pub time_unit: Option<TimeUnit>,
    /// Time zone of date-times without offset (`--timezone`), also the zone plots show.
    pub timezone: Option<String>,
    /// Columns read as model quantities (`--map SOURCE=y.<name>`): (source column, target).
    pub map: Vec<(String, String)>,
    /// Cell texts that mark a missing measurement (`--missing TOKEN`), besides the empty cell.
    pub missing: Vec<String>,
    /// Refuse columns the model does not read instead of ignoring them.
    pub strict_columns: bool,
}

impl Default for ReadOptions {
    fn default() -> Self {
        ReadOptions {
            nonfinite_as_missing: false,
            time_column: "t".into(),
            time_unit: None,
            timezone: None,
            map: Vec::new(),
            missing: Vec::new(),
            strict_columns: false,
        }
    }
}

/// Parses one `--map SOURCE=TARGET` item into (source column, target quantity).
///
/// ```
/// use sightline_eval::dataset::read::parse_mapping;
/// assert_eq!(
///     parse_mapping("sensor_a=y.level1").unwrap(),
///     ("sensor_a".to_string(), "y.level1".to_string())
/// );
/// assert!(parse_mapping("sensor_a").is_err());
/// assert!(parse_mapping("sensor_a=level1").is_err());
/// ```
pub fn parse_mapping(item: &str) -> Result<(String, String)> {
    let bad = |why: &str| {
        Error::Usage(format!(
            "--map '{item}': {why}; expected SOURCE=y.<measurement> (or u.<input>, x.<state>), \
             e.g. --map sensor_a=y.level1"
        ))
    };
    let Some((source, target)) = item.rsplit_once('=') else {
        return Err(bad("no '='"));
    };
    let (source, target) = (source.trim(), target.trim());
    if source.is_empty() {
        return Err(bad("the column before '=' is empty"));
    }
    if !["y.", "u.", "x."].iter().any(|p| target.starts_with(p)) {
        let why = if target == "t" {
            "the time column is named with --time, not --map".to_string()
        } else {
            format!("'{target}' is not a y., u. or x. name")
        };
        return Err(bad(&why));
    }
    Ok((source.to_string(), target.to_string()))
}

/// Where each of the plant's quantities sits in the file (0-based field indices).
#[derive(Debug, Clone, PartialEq)]
pub struct ColumnMap {
    /// Field of the time column.
    pub t: usize,
    /// Field of each input, or its constant when the column is absent.
    pub inputs: Vec<InputSource>,
    /// Field of each measurement.
    pub measurements: Vec<usize>,
    /// Fields of the truth, if present.
    pub states: Option<Vec<usize>>,
    /// Header names, trimmed, for messages.
    pub names: Vec<String>,
    /// Fields no quantity is read from (columns the model does not read), in file order; the
    /// unnamed index column is not among them.
    pub ignored: Vec<usize>,
    /// The unnamed first column (an index, as pandas writes), if the file has one.
    pub index: Option<usize>,
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
    format!("'{}'", escaped(text))
}

/// `text` for a message without quotes (e.g. inside a suggested flag): control characters
/// escaped and long text cut to its first 40 characters, as in [`quoted`].
pub fn escaped(text: &str) -> String {
    const SHOWN: usize = 40;
    let mut out = String::new();
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

/// The three kinds of model quantity a column can hold.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Kind {
    Input,
    Measurement,
    State,
}

impl Kind {
    fn of(name: &str) -> Option<(Kind, &str)> {
        if let Some(rest) = name.strip_prefix("u.") {
            Some((Kind::Input, rest))
        } else if let Some(rest) = name.strip_prefix("y.") {
            Some((Kind::Measurement, rest))
        } else {
            name.strip_prefix("x.").map(|rest| (Kind::State, rest))
        }
    }
    fn prefix(self) -> &'static str {
        match self {
            Kind::Input => "u.",
            Kind::Measurement => "y.",
            Kind::State => "x.",
        }
    }
    fn word(self) -> &'static str {
        match self {
            Kind::Input => "input",
            Kind::Measurement => "measurement",
            Kind::State => "state",
        }
    }
    fn names(self, schema: &Schema) -> &[String] {
        match self {
            Kind::Input => &schema.inputs,
            Kind::Measurement => &schema.measurements,
            Kind::State => &schema.states,
        }
    }
}

/// Whether a column name looks like a time column (a hint for `--time`).
fn looks_like_time(name: &str) -> bool {
    let lower = name.to_lowercase();
    ["time", "stamp", "date", "clock", "epoch", "seconds"]
        .iter()
        .any(|w| lower.contains(w))
        || ["ts", "t_s", "t [s]", "t(s)", "sec", "s", "ms"].contains(&lower.as_str())
}

/// The header being mapped, for the messages of [`ColumnMap::from_header`].
struct Header<'a> {
    path: &'a Path,
    line: u64,
    names: &'a [String],
    schema: &'a Schema,
    time: &'a str,
}

impl Header<'_> {
    fn at(&self, column: usize, message: String) -> Error {
        Error::data(self.path, self.line, column as u64, message)
    }

    fn expected(&self) -> String {
        format!(
            "expected '{}', {}, {} and optionally {}",
            self.time,
            list("u.", &self.schema.inputs),
            list("y.", &self.schema.measurements),
            list("x.", &self.schema.states)
        )
    }

    fn columns(&self) -> String {
        self.names
            .iter()
            .take(12)
            .map(|n| quoted(n))
            .collect::<Vec<_>>()
            .join(", ")
            + if self.names.len() > 12 { ", …" } else { "" }
    }

    /// The message for column `field`, whose name the model lacks; `missing` lists the
    /// quantities of its kind that no column gives.
    fn unknown(&self, field: usize, missing: &[String], strict: bool) -> String {
        let raw = &self.names[field];
        let shown = quoted(raw);
        let name = escaped(raw);
        let Some((kind, _)) = Kind::of(raw) else {
            return format!(
                "unexpected column {shown}; {}; --strict-columns refuses columns the model does \
                 not read: read it with --map {name}=y.<measurement> (or u., x.), or drop \
                 --strict-columns to ignore it",
                self.expected()
            );
        };
        let mut message = format!(
            "unknown {} column {shown}; model '{}' has {}s: {}",
            kind.word(),
            self.schema.model,
            kind.word(),
            list(kind.prefix(), kind.names(self.schema))
        );
        match missing {
            [one] => message.push_str(&format!(
                "; to read it as {p}{one}, add --map {name}={p}{one}",
                p = kind.prefix()
            )),
            [] if strict => message.push_str(
                "; --strict-columns refuses columns the model does not read: drop it, or drop \
                 --strict-columns to ignore it",
            ),
            _ => message.push_str(&format!(
                "; to read it as one of them, add --map {name}={}<{}>",
                kind.prefix(),
                kind.word()
            )),
        }
        message
    }
}

impl ColumnMap {
    /// Maps a header row to the schema under `options` (time column, `--map`,
    /// `--strict-columns`). Errors are located at line `line` of `path`, column = 1-based field
    /// number.
    pub fn from_header(
        path: &Path,
        line: u64,
        header: &[&str],
        schema: &Schema,
        options: &ReadOptions,
    ) -> Result<Self> {
        let names: Vec<String> = header.iter().map(|h| h.trim().to_string()).collect();
        let time = options.time_column.trim();
        let h = Header {
            path,
            line,
            names: &names,
            schema,
            time,
        };
        if let [only] = names.as_slice() {
            if let Some(separator) = [';', '\t', '|'].into_iter().find(|c| only.contains(*c)) {
                return Err(h.at(
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
        // --map: every source is a header column and every target one of the model's names.
        let mut targets: Vec<Option<&str>> = vec![None; names.len()];
        for (source, target) in &options.map {
            let item = format!("--map {}={}", escaped(source), escaped(target));
            let Some(field) = names.iter().position(|n| n == source) else {
                return Err(h.at(
                    names.len() + 1,
                    format!(
                        "{item}: the header has no column {}; its columns: {}",
                        quoted(source),
                        h.columns()
                    ),
                ));
            };
            let (kind, rest) = Kind::of(target).unwrap_or((Kind::Measurement, target));
            if !kind.names(schema).iter().any(|n| n == rest) {
                return Err(h.at(
                    field + 1,
                    format!(
                        "column {} is read by {item}, but model '{}' has no {} '{rest}'; its \
                         {}s: {}",
                        quoted(source),
                        schema.model,
                        kind.word(),
                        kind.word(),
                        list(kind.prefix(), kind.names(schema))
                    ),
                ));
            }
            if let Some(earlier) = targets[field] {
                return Err(h.at(
                    field + 1,
                    format!(
                        "column {} is mapped twice, to {earlier} and by {item}; map each column \
                         once",
                        quoted(source)
                    ),
                ));
            }
            targets[field] = Some(target.as_str());
        }
        let mut t: Option<usize> = None;
        let mut inputs: Vec<Option<usize>> = vec![None; schema.inputs.len()];
        let mut measurements = vec![None; schema.measurements.len()];
        let mut states = vec![None; schema.states.len()];
        let mut unknown: Vec<usize> = Vec::new();
        let mut index = None;
        for (field, name) in names.iter().enumerate() {
            let column = field + 1;
            let target = targets[field];
            if name.is_empty() && target.is_none() && !(field == 0 && time.is_empty()) {
                if field == 0 {
                    index = Some(field);
                    continue;
                }
                return Err(h.at(
                    column,
                    format!(
                        "header column {column} has no name (a stray comma?); {}",
                        h.expected()
                    ),
                ));
            }
            let effective = target.unwrap_or(name);
            let slot = if target.is_none() && name == time {
                &mut t
            } else {
                let known = Kind::of(effective).and_then(|(kind, rest)| {
                    let i = kind.names(schema).iter().position(|n| n == rest)?;
                    Some((kind, i))
                });
                match known {
                    Some((Kind::Input, i)) => &mut inputs[i],
                    Some((Kind::Measurement, i)) => &mut measurements[i],
                    Some((Kind::State, i)) => &mut states[i],
                    None => {
                        unknown.push(field);
                        continue;
                    }
                }
            };
            if let Some(first) = *slot {
                let message = match (targets[first], target) {
                    (None, None) => format!(
                        "column {} appears twice (also column {})",
                        quoted(name),
                        first + 1
                    ),
                    _ => format!(
                        "column {column} ({}{}) and column {} ({}{}) both give {effective}; read \
                         it from one column only",
                        quoted(name),
                        if target.is_some() {
                            ", read by --map"
                        } else {
                            ""
                        },
                        first + 1,
                        quoted(&names[first]),
                        if targets[first].is_some() {
                            ", read by --map"
                        } else {
                            ""
                        },
                    ),
                };
                return Err(h.at(column, message));
            }
            *slot = Some(field);
        }
        let missing_of = |kind: Kind| -> Vec<String> {
            let (found, names): (Vec<bool>, &[String]) = match kind {
                Kind::Input => (
                    inputs
                        .iter()
                        .zip(&schema.input_fallback)
                        .map(|(c, f)| c.is_some() || f.is_some())
                        .collect(),
                    &schema.inputs,
                ),
                Kind::Measurement => (
                    measurements.iter().map(Option::is_some).collect(),
                    &schema.measurements,
                ),
                Kind::State => (states.iter().map(Option::is_some).collect(), &schema.states),
            };
            names
                .iter()
                .zip(found)
                .filter(|(_, f)| !f)
                .map(|(n, _)| n.clone())
                .collect()
        };
        if options.strict_columns {
            if let Some(&field) = unknown.first() {
                let missing = Kind::of(&names[field]).map_or(Vec::new(), |(k, _)| missing_of(k));
                return Err(h.at(field + 1, h.unknown(field, &missing, true)));
            }
        }
        let end = names.len() + 1;
        let Some(t) = t else {
            let what = if time == "t" {
                "the header has no 't' column (time: numbers in seconds or RFC 3339 date-times, \
                 strictly increasing)"
                    .to_string()
            } else {
                format!(
                    "the header has no time column {} (--time {}); its columns: {}",
                    quoted(time),
                    escaped(time),
                    h.columns()
                )
            };
            let candidate = unknown.iter().find(|&&f| looks_like_time(&names[f]));
            let hint = match (candidate, index) {
                (Some(&f), _) => format!(
                    "; if {} holds the time, add --time {}",
                    quoted(&names[f]),
                    escaped(&names[f])
                ),
                (None, Some(_)) => {
                    "; if the unnamed first column holds the time, add --time ''".to_string()
                }
                (None, None) if time == "t" && unknown.is_empty() => {
                    "; name the time column with --time COLUMN".into()
                }
                (None, None) if time == "t" => format!(
                    "; its columns: {}; name the time column with --time COLUMN",
                    h.columns()
                ),
                (None, None) => String::new(),
            };
            return Err(h.at(1, format!("{what}{hint}")));
        };
        // A column with a model name the model lacks is most likely a quantity of that kind
        // under another name when one of that kind is missing: refuse it then, with the --map.
        let refuse_unknown = |kind: Kind, missing: &[String]| -> Option<Error> {
            unknown
                .iter()
                .find(|&&f| Kind::of(&names[f]).is_some_and(|(k, _)| k == kind))
                .map(|&f| h.at(f + 1, h.unknown(f, missing, false)))
        };
        let other_columns = || -> Vec<String> {
            unknown
                .iter()
                .filter(|&&f| Kind::of(&names[f]).is_none())
                .map(|&f| names[f].clone())
                .collect()
        };
        let map_hint = |target: String| -> String {
            match other_columns().as_slice() {
                [] => String::new(),
                [one] => format!(
                    " (if column {} holds it, add --map {}={target})",
                    quoted(one),
                    escaped(one)
                ),
                _ => format!(" (if one of the other columns holds it, add --map COLUMN={target})"),
            }
        };
        let mut input_sources = Vec::with_capacity(inputs.len());
        let missing_inputs = missing_of(Kind::Input);
        if !missing_inputs.is_empty() {
            if let Some(e) = refuse_unknown(Kind::Input, &missing_inputs) {
                return Err(e);
            }
        }
        for (i, field) in inputs.iter().enumerate() {
            let name = &schema.inputs[i];
            match (field, schema.input_fallback.get(i).copied().flatten()) {
                (Some(f), Some(_)) => {
                    return Err(h.at(
                        f + 1,
                        format!(
                            "input 'u.{name}' is both column {} ({}) and the constant of --set \
                             u.{name}; which one did you mean? Drop the --set to use the column, \
                             or the column to use the constant",
                            f + 1,
                            quoted(&names[*f])
                        ),
                    ));
                }
                (Some(f), None) => input_sources.push(InputSource::Column(*f)),
                (None, Some(value)) => input_sources.push(InputSource::Constant(value)),
                (None, None) => {
                    return Err(h.at(
                        end,
                        format!(
                            "missing input column 'u.{name}'; add it to the data or give a \
                             constant with --set u.{name}=VALUE{}",
                            map_hint(format!("u.{name}"))
                        ),
                    ));
                }
            }
        }
        let missing_measurements = missing_of(Kind::Measurement);
        if let Some(name) = missing_measurements.first() {
            if let Some(e) = refuse_unknown(Kind::Measurement, &missing_measurements) {
                return Err(e);
            }
            return Err(h.at(
                end,
                format!(
                    "missing measurement column 'y.{name}' (leave cells empty where it was not \
                     measured){}",
                    map_hint(format!("y.{name}"))
                ),
            ));
        }
        let meas_fields: Vec<usize> = measurements.iter().flatten().copied().collect();
        let present = states.iter().filter(|s| s.is_some()).count();
        let unknown_states = unknown
            .iter()
            .any(|&f| Kind::of(&names[f]).is_some_and(|(k, _)| k == Kind::State));
        let states = if present == states.len() && !states.is_empty() {
            Some(states.iter().flatten().copied().collect())
        } else if present == 0 && !unknown_states {
            None
        } else {
            let missing = missing_of(Kind::State);
            if let Some(e) = refuse_unknown(Kind::State, &missing) {
                return Err(e);
            }
            return Err(h.at(
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
            ignored: unknown,
            index,
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
    /// The time cell as written.
    pub time_text: &'a str,
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
    previous_text: String,
}

impl RowCheck for StrictlyIncreasingTime {
    fn check(&mut self, row: &Row<'_>) -> Result<(), Problem> {
        let t = row.record.t;
        let name = match row.columns.names.get(row.columns.t).map(String::as_str) {
            None | Some("") => "t".to_string(),
            Some(name) => escaped(name),
        };
        if let Some((prev, line)) = self.previous {
            if t <= prev {
                return Err(Problem {
                    column: row.columns.t + 1,
                    message: format!(
                        "{name} = {} does not increase (line {line} has {name} = {}); times \
                         must be strictly increasing",
                        row.time_text, self.previous_text
                    ),
                });
            }
        }
        self.previous = Some((t, row.line));
        self.previous_text.clear();
        self.previous_text.push_str(row.time_text);
        Ok(())
    }
}

/// A row read ahead by [`DatasetReader::check_time_base`], served before the file goes on.
#[derive(Debug, Clone)]
struct Ahead {
    record: Record,
    time_text: String,
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
    time: TimeParser,
    time_text: String,
    ahead: VecDeque<Ahead>,
    starts: LineQueue,
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

/// Where the content lines of the file start, shared between [`LineStarts`] (which sees the bytes
/// as the CSV parser pulls them) and the reader (which asks for a record's line).
type LineQueue = Rc<RefCell<VecDeque<(u64, u64)>>>;

/// Observes the bytes the CSV parser reads and notes (byte offset, line number) of every line
/// that holds content — not blank, not a `#` comment. The parser reports a record at the
/// position where it began consuming, which lies before any blank or comment lines it skipped;
/// the record's own line is the first content line at or after that position. The queue only
/// holds the lines read ahead of the parser (its buffer), so memory stays bounded.
struct LineStarts<R> {
    inner: R,
    offset: u64,
    line: u64,
    line_start: u64,
    decided: bool,
    starts: LineQueue,
}

impl<R: Read> Read for LineStarts<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.inner.read(buf)?;
        let mut starts = self.starts.borrow_mut();
        for &b in &buf[..n] {
            if b == b'\n' {
                self.line += 1;
                self.line_start = self.offset + 1;
                self.decided = false;
            } else if !self.decided && b != b'\r' {
                self.decided = true;
                if b != b'#' {
                    starts.push_back((self.line_start, self.line));
                }
            }
            self.offset += 1;
        }
        Ok(n)
    }
}

/// The line of the record the CSV parser began reading at byte `byte` (see [`LineStarts`]),
/// dropping the lines before it; `fallback` when unknown.
fn line_at(starts: &LineQueue, byte: u64, fallback: u64) -> u64 {
    let mut starts = starts.borrow_mut();
    while let Some(&(offset, line)) = starts.front() {
        if offset >= byte {
            return line;
        }
        starts.pop_front();
    }
    fallback
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
    /// Opens `path` and reads its header; a path of `-` reads standard input (streaming, named
    /// [`STDIN_NAME`] in messages). Standard input and any path that is not a regular file (a
    /// FIFO, `/dev/stdin`, a terminal) may wait for data indefinitely: they are read through
    /// [`crate::interrupt::StoppableRead`], so that a signal still stops the command.
    pub fn open(path: &Path, schema: &Schema, options: ReadOptions) -> Result<Self> {
        if path == Path::new("-") {
            let stdin = crate::interrupt::StoppableRead::stdin()
                .map_err(|source| read_error(Path::new(STDIN_NAME), source))?;
            return Self::from_reader(Path::new(STDIN_NAME), stdin, schema, options);
        }
        let regular = std::fs::metadata(path)
            .map_err(|source| read_error(path, source))?
            .is_file();
        if regular {
            let file = File::open(path).map_err(|source| read_error(path, source))?;
            return Self::from_reader(path, file, schema, options);
        }
        let owned = path.to_path_buf();
        let stream = crate::interrupt::StoppableRead::spawn(move || File::open(owned))
            .map_err(|source| read_error(path, source))?;
        Self::from_reader(path, stream, schema, options)
    }

    /// Reads a dataset from any byte source; `path` names it in messages.
    pub fn from_reader(
        path: &Path,
        input: impl Read + 'static,
        schema: &Schema,
        options: ReadOptions,
    ) -> Result<Self> {
        let zone = options
            .timezone
            .as_deref()
            .map(parse_timezone)
            .transpose()
            .map_err(Error::Usage)?;
        let read_err = |source| read_error(path, source);
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
        let starts: LineQueue = Rc::default();
        let boxed: Box<dyn Read> = Box::new(LineStarts {
            inner: buffered,
            offset: 0,
            line: 1,
            line_start: 0,
            decided: false,
            starts: Rc::clone(&starts),
        });
        let mut csv = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .trim(csv::Trim::All)
            // Loggers write comment and metadata lines; they may come before the header and
            // between rows.
            .comment(Some(b'#'))
            .from_reader(boxed);
        let mut header = csv::StringRecord::new();
        let got = csv
            .read_record(&mut header)
            .map_err(|e| csv_error(path, &starts, e))?;
        if !got {
            return Err(Error::data(
                path,
                1,
                1,
                "the file has no header row (it is empty or blank); expected a header row with \
                 't', the y. columns and the u. columns",
            ));
        }
        let line = header
            .position()
            .map_or(1, |p| line_at(&starts, p.byte(), p.line()));
        let fields: Vec<&str> = header.iter().collect();
        let columns = ColumnMap::from_header(path, line, &fields, schema, &options)?;
        let layout = columns.layout(schema);
        // `--time-unit s` (what settings record by default) says nothing a date-time contradicts.
        let time = TimeParser::new(
            options.time_unit.unwrap_or_default(),
            options.time_unit.is_some_and(|u| u != TimeUnit::Seconds),
            zone,
        );
        Ok(DatasetReader {
            path: path.to_path_buf(),
            csv,
            raw: csv::StringRecord::new(),
            columns,
            layout,
            options,
            time,
            time_text: String::new(),
            ahead: VecDeque::new(),
            starts,
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

    /// Header names of the columns the model does not read (ignored), in file order.
    pub fn ignored_columns(&self) -> Vec<String> {
        self.columns
            .ignored
            .iter()
            .map(|&f| self.columns.names[f].clone())
            .collect()
    }

    /// What a user should know about how the file was read: the columns ignored (one warning
    /// listing them) and an unnamed index column. Each begins with `warning:` or `note:`.
    pub fn messages(&self) -> Vec<String> {
        let mut out = Vec::new();
        let ignored = self.ignored_columns();
        if !ignored.is_empty() {
            out.push(format!(
                "warning: {}: ignoring {} {} the model does not read: {} (--strict-columns \
                 refuses them; --map SOURCE=y.<name> reads one as a model quantity)",
                self.path.display(),
                ignored.len(),
                if ignored.len() == 1 {
                    "column"
                } else {
                    "columns"
                },
                ignored
                    .iter()
                    .map(|n| quoted(n))
                    .collect::<Vec<_>>()
                    .join(", ")
            ));
        }
        if self.columns.index.is_some() {
            out.push(format!(
                "note: {}: the first column has no name: taken for an index (as pandas writes) \
                 and ignored",
                self.path.display()
            ));
        }
        out
    }

    /// The data's clock (how `t` reads in the data's own terms), known after the first row.
    pub fn clock(&self) -> Clock {
        self.time.clock()
    }

    /// The time cell of the row last returned by [`DatasetReader::next_into`], as written.
    pub fn time_text(&self) -> &str {
        &self.time_text
    }

    /// Checks the data's time base against `plant` before any row is used: the median interval
    /// of the first [`TIME_BASE_ROWS`] rows (read ahead, then served as usual) must lie in the
    /// plant's allowed dt range (the domain of its `dt` parameter) and not differ from its
    /// nominal dt by the ×1000 slip of a time unit (see [`time_base_problem`]). A misfit is an
    /// error located at the time column's header, unless `accept` (`--accept-dt`), when it is
    /// returned as a note.
    pub fn check_time_base(
        &mut self,
        plant: &dyn AnyPlant,
        accept: bool,
    ) -> Result<Option<String>> {
        let mut times = Vec::with_capacity(TIME_BASE_ROWS);
        times.extend(self.ahead.iter().map(|a| a.record.t));
        let mut record = Record::empty();
        let mut text = String::new();
        while times.len() < TIME_BASE_ROWS && self.read_row(&mut record, &mut text)? {
            times.push(record.t);
            self.ahead.push_back(Ahead {
                record: record.clone(),
                time_text: text.clone(),
            });
        }
        let Some(median) = median_interval(&times) else {
            return Ok(None);
        };
        let range = plant
            .parameters()
            .into_iter()
            .find(|p| p.name == "dt")
            .map(|p| p.domain);
        let numeric = self.time.format() == Some(TimeFormat::Number);
        let unit = self.options.time_unit.unwrap_or_default();
        let Some(problem) =
            time_base_problem(median, times.len(), plant.dt(), range, unit, numeric)
        else {
            return Ok(None);
        };
        if accept {
            return Ok(Some(format!(
                "--accept-dt: {}; accepted as asked",
                problem.what
            )));
        }
        Err(Error::data(
            self.path.as_path(),
            self.header_line,
            (self.columns.t + 1) as u64,
            format!(
                "{}: a time base model '{}' cannot have; {}, or pass --accept-dt to run with it",
                problem.what,
                plant.name(),
                problem.hint
            ),
        ))
    }

    /// Reads the next row into `record`, reusing its buffers; `Ok(false)` at the end of the file.
    pub fn next_into(&mut self, record: &mut Record) -> Result<bool> {
        if let Some(ahead) = self.ahead.pop_front() {
            record.clone_from(&ahead.record);
            self.time_text = ahead.time_text;
            return Ok(true);
        }
        let mut text = std::mem::take(&mut self.time_text);
        let got = self.read_row(record, &mut text);
        self.time_text = text;
        got
    }

    /// Parses and checks the next row of the file into `record` and its time cell into
    /// `time_text`.
    fn read_row(&mut self, record: &mut Record, time_text: &mut String) -> Result<bool> {
        let got = self
            .csv
            .read_record(&mut self.raw)
            .map_err(|e| csv_error(&self.path, &self.starts, e))?;
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
        let line = self
            .raw
            .position()
            .map_or(0, |p| line_at(&self.starts, p.byte(), p.line()));
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
        let missing = &self.options.missing;
        let cell = |field: usize| raw.get(field).unwrap_or("");
        let number = |field: usize, what: &str| -> Result<f64> {
            let text = cell(field);
            let shown = quoted(text);
            let name = escaped(&columns.names[field]);
            match text.parse::<f64>() {
                Ok(v) if v.is_finite() => Ok(v),
                Ok(_) => Err(at(
                    field + 1,
                    format!("{what} '{name}' is {shown}; expected a finite number"),
                )),
                Err(_) if text.is_empty() => Err(at(
                    field + 1,
                    format!("{what} '{name}' is empty; expected a number"),
                )),
                Err(_) if missing.iter().any(|m| m == text) => Err(at(
                    field + 1,
                    format!(
                        "{what} '{name}' is {shown}; expected a number (--missing marks \
                         measurements only: every row needs its {what})"
                    ),
                )),
                Err(_) => Err(at(
                    field + 1,
                    format!(
                        "{what} '{name}' is {shown}; expected a number{}",
                        spans_lines(text)
                    ),
                )),
            }
        };
        let time_cell = cell(columns.t);
        let time_name = match columns.names[columns.t].as_str() {
            "" => "t".to_string(),
            name => escaped(name),
        };
        record.t = self
            .time
            .elapsed(&time_name, time_cell)
            .map_err(|m| at(columns.t + 1, format!("{m}{}", spans_lines(time_cell))))?;
        time_text.clear();
        time_text.push_str(time_cell);
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
            let value = if text.is_empty() || missing.iter().any(|m| m == text) {
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
                                escaped(&columns.names[field])
                            ),
                        ));
                    }
                    Err(_) => {
                        return Err(at(
                            field + 1,
                            format!(
                                "measurement '{}' is {shown}; expected a number or an empty \
                                 cell{}{}",
                                escaped(&columns.names[field]),
                                spans_lines(text),
                                if text.is_empty()
                                    || text.chars().count() > 12
                                    || text.contains(|c: char| c.is_ascii_digit() || c.is_control())
                                {
                                    String::new()
                                } else {
                                    format!(
                                        " (if {shown} marks a missing value, pass --missing {text})"
                                    )
                                }
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
            time_text: time_cell,
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

/// An I/O error reading the dataset `path`, or the stop that came while the read waited for
/// data ([`crate::interrupt::is_stop`]).
fn read_error(path: &Path, source: std::io::Error) -> Error {
    if crate::interrupt::is_stop(&source) {
        return Error::Interrupted(format!(
            "{} while waiting for data from {}",
            crate::interrupt::describe(),
            path.display()
        ));
    }
    Error::Read {
        path: path.to_path_buf(),
        source,
    }
}

fn csv_error(path: &Path, starts: &LineQueue, e: csv::Error) -> Error {
    let (line, column) = match e.position() {
        Some(p) => (line_at(starts, p.byte(), p.line()), 1),
        None => (0, 0),
    };
    match e.into_kind() {
        csv::ErrorKind::Io(source) => read_error(path, source),
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
    /// The time cell of the row last read, as written in the data (`None` when the rows were
    /// not read from text, e.g. simulated in memory: the time is then written from `t`).
    fn time_text(&self) -> Option<&str> {
        None
    }
    /// The data's clock (how `t`, seconds since the first row, reads in the data's terms).
    fn clock(&self) -> Clock {
        Clock::default()
    }
}

impl RecordSource for DatasetReader {
    fn layout(&self) -> &Layout {
        &self.layout
    }
    fn next_into(&mut self, record: &mut Record) -> Result<bool> {
        DatasetReader::next_into(self, record)
    }
    fn time_text(&self) -> Option<&str> {
        Some(DatasetReader::time_text(self))
    }
    fn clock(&self) -> Clock {
        DatasetReader::clock(self)
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
        // An extra u. column when every input is there is ignored, unless strict.
        let e = err("t,u.torque,y.position,y.speed,u.force\n");
        assert!(e.contains("no data rows"), "{e}");
        let strict = ReadOptions {
            strict_columns: true,
            ..ReadOptions::default()
        };
        let e = read("t,u.torque,y.position,y.speed,u.force\n", &schema(), strict)
            .unwrap_err()
            .to_string();
        assert!(
            e.starts_with("data.csv:1:5:") && e.contains("u.torque"),
            "{e}"
        );
        // ... but with an input missing, it is most likely that input: refused, with the --map.
        let e = err("t,u.force,y.position,y.speed\n");
        assert!(
            e.starts_with("data.csv:1:2:") && e.contains("--map u.force=u.torque"),
            "{e}"
        );
        let e = err("t,y.position,y.speed\n0,1,2\n");
        assert!(
            e.contains("u.torque") && e.contains("--set u.torque"),
            "{e}"
        );
        let e = err("t,u.torque,y.position,y.speed,x.angle\n");
        assert!(e.contains("x.rate"), "{e}");
        let e = err("t,u.torque,y.position,y.speed,y.speed\n");
        assert!(e.contains("twice"), "{e}");
        let strict = ReadOptions {
            strict_columns: true,
            ..ReadOptions::default()
        };
        let e = read(
            "t,u.torque,y.position,y.speed,notes\n0,0,1,2,x\n",
            &schema(),
            strict,
        )
        .unwrap_err()
        .to_string();
        assert!(
            e.starts_with("data.csv:1:5:") && e.contains("--strict-columns"),
            "{e}"
        );
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
                ..ReadOptions::default()
            },
        )
        .unwrap();
        assert!(d.records[0].y[0].is_nan() && d.records[1].y[1].is_nan());
        // Time and inputs must always be finite.
        let e = err("t,u.torque,y.position,y.speed\ninf,0,1,2\n");
        assert!(e.starts_with("data.csv:2:1:"), "{e}");
    }

    fn reader(text: &str, options: ReadOptions) -> Result<DatasetReader> {
        DatasetReader::from_reader(
            Path::new("data.csv"),
            std::io::Cursor::new(text.as_bytes().to_vec()),
            &schema(),
            options,
        )
    }

    #[test]
    fn real_logs_read_as_they_are() {
        // Comments before the header and between rows, an unnamed index column (pandas), an
        // extra column, a renamed one, a missing-value token.
        let text = "# logger 1.2\n,t,u.torque,sensor,y.speed,operator\n0,0,0,0.5,NA,ann\n\
                    # pause\n1,0.1,0,0.6,2.5,ann\n";
        let options = ReadOptions {
            map: vec![("sensor".into(), "y.position".into())],
            missing: vec!["NA".into()],
            ..ReadOptions::default()
        };
        let mut r = reader(text, options).unwrap();
        assert_eq!(r.ignored_columns(), vec!["operator"]);
        let messages = r.messages();
        assert!(
            messages[0].contains("'operator'") && messages[1].contains("index"),
            "{messages:?}"
        );
        let mut rec = Record::empty();
        assert!(r.next_into(&mut rec).unwrap());
        assert_eq!(rec.y[0], 0.5);
        assert!(rec.y[1].is_nan(), "NA is missing");
        assert!(r.next_into(&mut rec).unwrap());
        assert_eq!(
            (rec.t, rec.y.clone(), r.time_text()),
            (0.1, vec![0.6, 2.5], "0.1")
        );
        // Errors after comment lines name the line in the file.
        let e = read(
            "# a\n# b\nt,u.torque,y.position,y.speed\n0,0,1,2\n# c\n\n0.1,0,x,2\n",
            &schema(),
            ReadOptions::default(),
        )
        .unwrap_err()
        .to_string();
        assert!(e.starts_with("data.csv:7:3:"), "{e}");
    }

    #[test]
    fn a_set_input_that_is_also_a_column_is_refused() {
        let mut s = schema();
        s.input_fallback = vec![Some(0.75)];
        let e = read(
            "t,u.torque,y.position,y.speed\n0,0,1,2\n",
            &s,
            ReadOptions::default(),
        )
        .unwrap_err()
        .to_string();
        assert!(
            e.starts_with("data.csv:1:2:") && e.contains("which one"),
            "{e}"
        );
    }

    #[test]
    fn date_times_become_seconds_since_the_first_row_and_keep_their_text() {
        let text = "t,u.torque,y.position,y.speed\n2026-03-01T10:00:00+01:00,0,1,2\n\
                    2026-03-01T09:00:00.5Z,0,1,2\n";
        let mut r = reader(text, ReadOptions::default()).unwrap();
        let mut rec = Record::empty();
        r.next_into(&mut rec).unwrap();
        assert_eq!(rec.t, 0.0);
        r.next_into(&mut rec).unwrap();
        assert_eq!((rec.t, r.time_text()), (0.5, "2026-03-01T09:00:00.5Z"));
        assert!(r.clock().is_date_time());
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
