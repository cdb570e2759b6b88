//! The time column: numeric clocks in a unit, or RFC 3339 / ISO 8601 date-times, read exactly.
//!
//! Every row's time becomes **seconds since the first row** (the filters' clock starts at 0 on
//! row 0), computed without passing through large floating-point values:
//! - a numeric `t` is read as an exact decimal; t(k) − t(0) is taken exactly (bigdecimal), scaled
//!   exactly by the unit (`--time-unit s|ms|us|ns|min|h`) and rounded once to `f64`. A file that
//!   starts at t = 0 in seconds (what `sightline simulate` writes) gives each row exactly the
//!   `f64` its text parses to, as before;
//! - a date-time (`2026-03-01T10:00:00Z`, `…+02:00`, fractional seconds, a space instead of `T`;
//!   parsed by jiff) becomes an instant with nanosecond resolution, and t(k) − t(0) is taken in
//!   integer nanoseconds. A date-time without offset is refused unless a time zone is given
//!   (`--timezone`), and one that the zone's daylight-saving change makes ambiguous or
//!   non-existent is refused.
//!
//! At today's epoch (≈1.8·10⁹ s) an `f64` resolves 2⁻²² s ≈ 0.24 µs (IEEE 754 binary64: 52
//! fraction bits), which would jitter the intervals of a 1 kHz log by 0.02 %; relative to the
//! first row they keep full precision.
//!
//! The format is decided by the first row; a column that mixes numbers and date-times (or
//! date-times with and without offsets) is refused at the first row that differs. The [`Clock`]
//! maps seconds since the first row back to the data's own time for plots.

use std::fmt;
use std::str::FromStr;

use bigdecimal::BigDecimal;
use jiff::fmt::temporal::{DateTimeParser, Pieces};
use jiff::tz::TimeZone;
use jiff::{SignedDuration, Timestamp, civil};
use sightline_core::Domain;

use super::read::quoted;

/// The unit of a numeric time column (`--time-unit`).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Hash)]
pub enum TimeUnit {
    /// Seconds (the default).
    #[default]
    Seconds,
    /// Milliseconds.
    Milliseconds,
    /// Microseconds.
    Microseconds,
    /// Nanoseconds.
    Nanoseconds,
    /// Minutes.
    Minutes,
    /// Hours.
    Hours,
}

impl TimeUnit {
    /// Every unit, smallest first.
    pub const ALL: [TimeUnit; 6] = [
        TimeUnit::Nanoseconds,
        TimeUnit::Microseconds,
        TimeUnit::Milliseconds,
        TimeUnit::Seconds,
        TimeUnit::Minutes,
        TimeUnit::Hours,
    ];

    /// The name used on the command line and in `settings`.
    pub fn name(self) -> &'static str {
        match self {
            TimeUnit::Seconds => "s",
            TimeUnit::Milliseconds => "ms",
            TimeUnit::Microseconds => "us",
            TimeUnit::Nanoseconds => "ns",
            TimeUnit::Minutes => "min",
            TimeUnit::Hours => "h",
        }
    }

    /// Seconds in one unit.
    pub fn seconds(self) -> f64 {
        match self {
            TimeUnit::Seconds => 1.0,
            TimeUnit::Milliseconds => 1e-3,
            TimeUnit::Microseconds => 1e-6,
            TimeUnit::Nanoseconds => 1e-9,
            TimeUnit::Minutes => 60.0,
            TimeUnit::Hours => 3600.0,
        }
    }

    /// Seconds in one unit, exactly: (integer, power of ten).
    fn exact_seconds(self) -> (i64, i64) {
        match self {
            TimeUnit::Seconds => (1, 0),
            TimeUnit::Milliseconds => (1, 3),
            TimeUnit::Microseconds => (1, 6),
            TimeUnit::Nanoseconds => (1, 9),
            TimeUnit::Minutes => (60, 0),
            TimeUnit::Hours => (3600, 0),
        }
    }

    /// The unit 1000 times smaller or larger, if there is one.
    fn thousandfold(self, larger: bool) -> Option<TimeUnit> {
        let decimal = [
            TimeUnit::Nanoseconds,
            TimeUnit::Microseconds,
            TimeUnit::Milliseconds,
            TimeUnit::Seconds,
        ];
        let i = decimal.iter().position(|u| *u == self)?;
        if larger {
            decimal.get(i + 1).copied()
        } else {
            i.checked_sub(1).and_then(|j| decimal.get(j).copied())
        }
    }
}

impl fmt::Display for TimeUnit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for TimeUnit {
    type Err = String;

    /// Parses `s`, `ms`, `us` (or `µs`), `ns`, `min` or `h`.
    ///
    /// ```
    /// use sightline_eval::dataset::time::TimeUnit;
    /// assert_eq!("ms".parse::<TimeUnit>().unwrap(), TimeUnit::Milliseconds);
    /// assert!("sec".parse::<TimeUnit>().is_err());
    /// ```
    fn from_str(text: &str) -> Result<Self, String> {
        let unit = match text.trim() {
            "s" => TimeUnit::Seconds,
            "ms" => TimeUnit::Milliseconds,
            "us" | "µs" => TimeUnit::Microseconds,
            "ns" => TimeUnit::Nanoseconds,
            "min" => TimeUnit::Minutes,
            "h" => TimeUnit::Hours,
            other => {
                return Err(format!(
                    "time unit '{other}' is not one of s, ms, us, ns, min, h"
                ));
            }
        };
        Ok(unit)
    }
}

/// Parses a `--timezone` value: an IANA name (`Europe/Berlin`, `UTC`), a fixed offset
/// (`+02:00`) or a POSIX rule, looked up in the system's zone database (or jiff's bundled copy).
///
/// ```
/// use sightline_eval::dataset::time::parse_timezone;
/// assert!(parse_timezone("UTC").is_ok());
/// assert!(parse_timezone("+02:00").is_ok());
/// assert!(parse_timezone("Mars/Olympus").is_err());
/// ```
pub fn parse_timezone(name: &str) -> Result<TimeZone, String> {
    static PARSER: DateTimeParser = DateTimeParser::new();
    PARSER.parse_time_zone(name.trim()).map_err(|e| {
        format!(
            "--timezone '{}': not a time zone ({e}); expected an IANA name such as UTC or \
             Europe/Berlin, or a fixed offset such as +02:00",
            name.trim()
        )
    })
}

/// How a time column is written, decided by its first row.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TimeFormat {
    /// Numbers in a [`TimeUnit`].
    Number,
    /// Date-times with an offset (or a bracketed zone).
    DateTime,
    /// Date-times without offset, read in the zone given with `--timezone`.
    NaiveDateTime,
}

impl TimeFormat {
    fn describe(self) -> &'static str {
        match self {
            TimeFormat::Number => "numbers",
            TimeFormat::DateTime => "date-times with an offset",
            TimeFormat::NaiveDateTime => "date-times without offset",
        }
    }
}

/// The data's own clock: how a time in seconds since the first row reads in the data's terms,
/// for plot axes and notes.
#[derive(Debug, Clone, PartialEq)]
pub enum Clock {
    /// A numeric time column in `unit` whose first row reads `origin`.
    Number {
        /// Unit of the column.
        unit: TimeUnit,
        /// First row's value, in `unit`.
        origin: f64,
        /// First row's text.
        origin_text: String,
    },
    /// A date-time column whose first row is `origin`, shown in `zone`.
    DateTime {
        /// First row's instant.
        origin: Timestamp,
        /// Zone the clock is shown in (the `--timezone`, else the first row's offset).
        zone: TimeZone,
    },
}

impl Default for Clock {
    /// Seconds from 0 (simulated data).
    fn default() -> Self {
        Clock::Number {
            unit: TimeUnit::Seconds,
            origin: 0.0,
            origin_text: "0".into(),
        }
    }
}

fn zone_name(zone: &TimeZone, at: Timestamp) -> String {
    match zone.iana_name() {
        Some(name) => name.to_string(),
        None => format!("UTC{}", zone.to_offset(at)),
    }
}

impl Clock {
    /// Whether the data's time is a date-time.
    pub fn is_date_time(&self) -> bool {
        matches!(self, Clock::DateTime { .. })
    }

    /// The label of a time axis in the data's own terms.
    ///
    /// ```
    /// use sightline_eval::dataset::time::Clock;
    /// assert_eq!(Clock::default().axis_label(), "t [s]");
    /// ```
    pub fn axis_label(&self) -> String {
        match self {
            Clock::Number {
                unit, origin_text, ..
            } => {
                if self.origin_is_zero() {
                    format!("t [{unit}]")
                } else {
                    format!("t − {origin_text} [{unit}]")
                }
            }
            Clock::DateTime { origin, zone } => {
                let start = origin.to_zoned(zone.clone());
                format!(
                    "clock time, {} (from {})",
                    zone_name(zone, *origin),
                    start.strftime("%Y-%m-%d %H:%M:%S")
                )
            }
        }
    }

    fn origin_is_zero(&self) -> bool {
        matches!(self, Clock::Number { origin, .. } if *origin == 0.0)
    }

    /// A tick of a time axis at `elapsed` seconds since the first row, on an axis spanning
    /// `span` seconds; `None` to let the caller format the number.
    pub fn tick(&self, elapsed: f64, span: f64) -> Option<String> {
        match self {
            Clock::Number { unit, .. } => (*unit != TimeUnit::Seconds)
                .then(|| crate::verdict::sig(elapsed / unit.seconds(), 3)),
            Clock::DateTime { origin, zone } => {
                let shift = SignedDuration::try_from_secs_f64(elapsed).ok()?;
                let at = origin.checked_add(shift).ok()?.to_zoned(zone.clone());
                let pattern = if span < 10.0 {
                    "%H:%M:%S%.3f"
                } else if span < 86_400.0 {
                    "%H:%M:%S"
                } else {
                    "%m-%d %H:%M"
                };
                Some(at.strftime(pattern).to_string())
            }
        }
    }
}

/// The first row's time, against which every row is measured.
#[derive(Debug, Clone)]
enum Origin {
    /// A numeric column: the first value, exactly in `decimal` (`None` when it is absurd, see
    /// [`MAX_EXACT_EXPONENT`]); `zero_seconds` when it is 0 in seconds, where each row's own
    /// `f64` is already its exact time since the first row.
    Number {
        value: f64,
        decimal: Option<BigDecimal>,
        zero_seconds: bool,
        text: String,
    },
    /// A date-time column.
    Instant {
        at: Timestamp,
        format: TimeFormat,
        display: TimeZone,
    },
}

/// One cell of a time column, parsed.
enum Parsed {
    Number(f64),
    Instant(Timestamp, TimeFormat, TimeZone),
}

/// Reads a time column row by row into seconds since the first row (see the module docs).
#[derive(Debug, Clone)]
pub struct TimeParser {
    unit: TimeUnit,
    unit_given: bool,
    zone: Option<TimeZone>,
    origin: Option<Origin>,
}

/// Largest power of ten an exact numeric time may carry; beyond it (`1e-400`) the value is taken
/// through `f64` (the exact path would have to build a number with that many digits).
const MAX_EXACT_EXPONENT: i64 = 400;

impl TimeParser {
    /// A parser for a column in `unit` (`unit_given`: set by `--time-unit`, which only applies
    /// to numbers) with naive date-times read in `zone`.
    pub fn new(unit: TimeUnit, unit_given: bool, zone: Option<TimeZone>) -> Self {
        TimeParser {
            unit,
            unit_given,
            zone,
            origin: None,
        }
    }

    /// The format decided by the first row (`None` before it).
    pub fn format(&self) -> Option<TimeFormat> {
        self.origin.as_ref().map(|o| match o {
            Origin::Number { .. } => TimeFormat::Number,
            Origin::Instant { format, .. } => *format,
        })
    }

    /// The data's clock (the default clock before the first row).
    pub fn clock(&self) -> Clock {
        match &self.origin {
            None => Clock::default(),
            Some(Origin::Number { value, text, .. }) => Clock::Number {
                unit: self.unit,
                origin: *value,
                origin_text: text.clone(),
            },
            Some(Origin::Instant { at, display, .. }) => Clock::DateTime {
                origin: *at,
                zone: display.clone(),
            },
        }
    }

    /// Seconds since the first row for the cell `text` of the time column `name`, or what is
    /// wrong and what was expected (the caller adds the location).
    ///
    /// ```
    /// use sightline_eval::dataset::time::{TimeParser, TimeUnit};
    /// let mut t = TimeParser::new(TimeUnit::Seconds, false, None);
    /// assert_eq!(t.elapsed("t", "2026-03-01T10:00:00Z").unwrap(), 0.0);
    /// assert_eq!(t.elapsed("t", "2026-03-01T12:00:00.25+02:00").unwrap(), 0.25);
    /// assert!(t.elapsed("t", "12.5").is_err(), "one column, one format");
    /// ```
    pub fn elapsed(&mut self, name: &str, text: &str) -> Result<f64, String> {
        let format = self.format();
        if text.is_empty() {
            let expected = match format {
                None | Some(TimeFormat::Number) => "a number",
                Some(_) => "a date-time",
            };
            return Err(format!("time '{name}' is empty; expected {expected}"));
        }
        let parsed = self.parse(name, text, format)?;
        match (&self.origin, parsed) {
            (None, Parsed::Number(value)) => {
                if self.zone.is_some() {
                    return Err(format!(
                        "time '{name}' is {}, a number, so --timezone does not apply (it reads \
                         date-times without offset); drop --timezone",
                        quoted(text)
                    ));
                }
                let zero_seconds = value == 0.0 && self.unit == TimeUnit::Seconds;
                let decimal = if zero_seconds { None } else { exact(text) };
                self.origin = Some(Origin::Number {
                    value,
                    decimal,
                    zero_seconds,
                    text: text.to_string(),
                });
                // Row 0 of a numeric column is the clock's zero.
                Ok(if zero_seconds { value } else { 0.0 })
            }
            (None, Parsed::Instant(at, format, display)) => {
                if self.unit_given {
                    return Err(format!(
                        "time '{name}' is {}, a date-time, so --time-unit {} does not apply (it \
                         scales numeric times); drop --time-unit",
                        quoted(text),
                        self.unit
                    ));
                }
                self.origin = Some(Origin::Instant {
                    at,
                    format,
                    display: self.zone.clone().unwrap_or(display),
                });
                Ok(0.0)
            }
            (
                Some(Origin::Number {
                    value,
                    decimal,
                    zero_seconds,
                    ..
                }),
                Parsed::Number(v),
            ) => Ok(if *zero_seconds {
                // First row 0 s: the row's own value is exactly its time since the first row.
                v
            } else {
                self.numeric_elapsed(*value, decimal.as_ref(), v, text)
            }),
            (Some(Origin::Instant { at, .. }), Parsed::Instant(t, ..)) => {
                let ns = t.as_nanosecond() - at.as_nanosecond();
                // Exact below 2⁵³ ns (104 days), then one correctly rounded division.
                Ok(ns as f64 / 1e9)
            }
            // `parse` refuses a format that differs from the first row's.
            _ => Err(format!(
                "time '{name}' is {}; mixed time formats",
                quoted(text)
            )),
        }
    }

    /// t − t(0) in seconds for a numeric column whose first value is `origin`.
    fn numeric_elapsed(
        &self,
        origin: f64,
        origin_decimal: Option<&BigDecimal>,
        value: f64,
        text: &str,
    ) -> f64 {
        let (Some(origin_decimal), Some(decimal)) = (origin_decimal, exact(text)) else {
            return (value - origin) * self.unit.seconds();
        };
        let (multiplier, shift) = self.unit.exact_seconds();
        let difference = (decimal - origin_decimal) * BigDecimal::from(multiplier);
        let (digits, scale) = difference.into_bigint_and_scale();
        // The exact value digits·10^−(scale+shift), rounded once by Rust's correctly rounded
        // decimal parser.
        format!("{digits}e{}", -(scale + shift))
            .parse::<f64>()
            .unwrap_or((value - origin) * self.unit.seconds())
    }

    fn parse(&self, name: &str, text: &str, format: Option<TimeFormat>) -> Result<Parsed, String> {
        let shown = quoted(text);
        if let Ok(v) = text.parse::<f64>() {
            if !v.is_finite() {
                return Err(format!(
                    "time '{name}' is {shown}; expected a finite number"
                ));
            }
            return match format {
                None | Some(TimeFormat::Number) => Ok(Parsed::Number(v)),
                Some(f) => Err(mixed(name, &shown, TimeFormat::Number, f)),
            };
        }
        let Ok(pieces) = Pieces::parse(text) else {
            return Err(match format {
                Some(TimeFormat::Number) => format!("time '{name}' is {shown}; expected a number"),
                Some(_) => format!(
                    "time '{name}' is {shown}; expected a date-time like the rows above (RFC 3339, \
                     e.g. 2026-03-01T10:00:00Z)"
                ),
                None => format!(
                    "time '{name}' is {shown}; expected a number (seconds, or the unit of \
                     --time-unit) or an RFC 3339 date-time such as 2026-03-01T10:00:00Z"
                ),
            });
        };
        let civil = pieces
            .date()
            .to_datetime(pieces.time().unwrap_or(civil::Time::midnight()));
        let (at, this, display) = if let Some(offset) = pieces.offset() {
            let offset = offset.to_numeric_offset();
            let at = offset
                .to_timestamp(civil)
                .map_err(|e| format!("time '{name}' is {shown}; {e}"))?;
            (at, TimeFormat::DateTime, TimeZone::fixed(offset))
        } else if let Some(annotation) = pieces.time_zone_annotation() {
            let zone = annotation
                .to_time_zone()
                .map_err(|e| format!("time '{name}' is {shown}; {e}"))?;
            let at = in_zone(name, &shown, civil, &zone)?;
            (at, TimeFormat::DateTime, zone)
        } else {
            if let Some(f @ (TimeFormat::Number | TimeFormat::DateTime)) = format {
                return Err(mixed(name, &shown, TimeFormat::NaiveDateTime, f));
            }
            let Some(zone) = &self.zone else {
                return Err(format!(
                    "time '{name}' is {shown}, a date-time without offset; add --timezone TZ \
                     (e.g. --timezone UTC or --timezone Europe/Berlin) or write the offset \
                     (…Z, …+01:00)"
                ));
            };
            let at = in_zone(name, &shown, civil, zone)?;
            (at, TimeFormat::NaiveDateTime, zone.clone())
        };
        match format {
            Some(f) if f != this => Err(mixed(name, &shown, this, f)),
            _ => Ok(Parsed::Instant(at, this, display)),
        }
    }
}

/// The exact decimal of a numeric cell, unless its exponent is absurd.
fn exact(text: &str) -> Option<BigDecimal> {
    let d = BigDecimal::from_str(text).ok()?;
    (d.fractional_digit_count().abs() <= MAX_EXACT_EXPONENT).then_some(d)
}

fn in_zone(
    name: &str,
    shown: &str,
    civil: civil::DateTime,
    zone: &TimeZone,
) -> Result<Timestamp, String> {
    let ambiguous = zone.to_ambiguous_timestamp(civil);
    if ambiguous.is_ambiguous() {
        let what = match ambiguous.offset() {
            jiff::tz::AmbiguousOffset::Gap { .. } => "does not exist (the clocks skip it)",
            _ => "occurs twice (the clocks go back there)",
        };
        return Err(format!(
            "time '{name}' is {shown}, which in {} {what}; write the offset for such rows (…+01:00)",
            zone_name(zone, Timestamp::UNIX_EPOCH)
        ));
    }
    ambiguous
        .unambiguous()
        .map_err(|e| format!("time '{name}' is {shown}; {e}"))
}

fn mixed(name: &str, shown: &str, this: TimeFormat, above: TimeFormat) -> String {
    let article = match this {
        TimeFormat::Number => "a number",
        TimeFormat::DateTime => "a date-time with an offset",
        TimeFormat::NaiveDateTime => "a date-time without offset",
    };
    format!(
        "time '{name}' is {shown}, {article}, but the rows above hold {}; write one time format \
         in the whole column",
        above.describe()
    )
}

/// Rows whose intervals the time-base check looks at (the first 1000 intervals).
pub const TIME_BASE_ROWS: usize = 1001;

/// Ratios of the data's interval to the plant's dt that count as the ×1000 slip of a time
/// unit (milliseconds read as seconds, or seconds read as milliseconds).
pub const SLIP_RATIO: (f64, f64) = (500.0, 2000.0);

/// The median of the positive intervals between successive `times` (seconds), if any.
///
/// ```
/// use sightline_eval::dataset::time::median_interval;
/// assert_eq!(median_interval(&[0.0, 1.0, 2.0, 10.0]), Some(1.0));
/// assert_eq!(median_interval(&[0.0]), None);
/// ```
pub fn median_interval(times: &[f64]) -> Option<f64> {
    let mut steps: Vec<f64> = times
        .windows(2)
        .map(|w| w[1] - w[0])
        .filter(|d| *d > 0.0 && d.is_finite())
        .collect();
    if steps.is_empty() {
        return None;
    }
    steps.sort_by(f64::total_cmp);
    let mid = steps.len() / 2;
    Some(if steps.len() % 2 == 1 {
        steps[mid]
    } else {
        0.5 * (steps[mid - 1] + steps[mid])
    })
}

/// A time base the plant cannot have: what is wrong and which flag would fit.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TimeBaseProblem {
    /// What is wrong, naming the factor (e.g. "the median interval between rows is 10 s,
    /// 1000× longer than the plant's dt = 0.01 s (factor 1000)").
    pub what: String,
    /// What to do (e.g. "if t is in milliseconds, add --time-unit ms").
    pub hint: String,
}

impl fmt::Display for TimeBaseProblem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}; {}", self.what, self.hint)
    }
}

/// A number to three significant digits in plain form (10, 0.01, 1000).
fn short(v: f64) -> String {
    format!("{:.2e}", v)
        .parse::<f64>()
        .map_or_else(|_| v.to_string(), |r| r.to_string())
}

/// What is wrong with a data interval of `median` seconds (the median over `rows` rows) for a
/// plant whose nominal step is `dt` with allowed range `range` (its `dt` parameter's domain), or
/// `None` when it fits.
///
/// The rule: refused when the median lies outside `range`, or when median/dt lies in
/// [500, 2000] or dt/median does ([`SLIP_RATIO`]: the ×1000 slip of a unit). The message names
/// the factor and the `--time-unit` that would fit (`unit` is the one in force; `numeric` says
/// whether the column holds numbers, to which `--time-unit` applies).
///
/// ```
/// use sightline_eval::dataset::time::{TimeUnit, time_base_problem};
/// let p = time_base_problem(10.0, 50, 0.01, None, TimeUnit::Seconds, true).unwrap();
/// assert!(p.what.contains("1000×") && p.hint.contains("--time-unit ms"), "{p}");
/// assert!(time_base_problem(0.01, 50, 0.01, None, TimeUnit::Milliseconds, true).is_none());
/// ```
pub fn time_base_problem(
    median: f64,
    rows: usize,
    dt: f64,
    range: Option<Domain>,
    unit: TimeUnit,
    numeric: bool,
) -> Option<TimeBaseProblem> {
    let ratio = median / dt;
    let (lo, hi) = SLIP_RATIO;
    let slow = (lo..=hi).contains(&ratio);
    let fast = (lo..=hi).contains(&(1.0 / ratio));
    let outside = range.filter(|d| !d.contains(median));
    if !slow && !fast && outside.is_none() {
        return None;
    }
    let mut what = format!(
        "the median interval between the first {rows} rows is {} s",
        short(median)
    );
    if let Some(d) = outside {
        what.push_str(&format!(
            ", outside the plant's dt range ({} s)",
            d.describe()
        ));
    }
    if slow {
        what.push_str(&format!(
            ", {}× the plant's dt = {} s",
            short(ratio.round()),
            short(dt)
        ));
    } else if fast {
        what.push_str(&format!(
            ", 1/{} of the plant's dt = {} s",
            short((1.0 / ratio).round()),
            short(dt)
        ));
    }
    let better = if slow || fast {
        unit.thousandfold(fast)
    } else {
        None
    };
    let hint = match (numeric, better) {
        (true, Some(b)) => format!(
            "if t is in {}, add --time-unit {b}",
            match b {
                TimeUnit::Seconds => "seconds",
                TimeUnit::Milliseconds => "milliseconds",
                TimeUnit::Microseconds => "microseconds",
                TimeUnit::Nanoseconds => "nanoseconds",
                TimeUnit::Minutes => "minutes",
                TimeUnit::Hours => "hours",
            }
        ),
        (true, None) => format!(
            "check the unit of t (--time-unit, now {unit}) and the plant's dt (--set dt=...)"
        ),
        (false, _) => "check the time column and the plant's dt (--set dt=...)".to_string(),
    };
    Some(TimeBaseProblem { what, hint })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parser() -> TimeParser {
        TimeParser::new(TimeUnit::Seconds, false, None)
    }

    #[test]
    fn rfc3339_examples_give_their_instants() {
        // RFC 3339 §5.8: 1996-12-19T16:39:57-08:00 is 1996-12-20T00:39:57Z.
        let mut t = parser();
        assert_eq!(t.elapsed("t", "1996-12-19T16:39:57-08:00").unwrap(), 0.0);
        assert_eq!(t.elapsed("t", "1996-12-20T00:39:58Z").unwrap(), 1.0);
        // §5.8 also: 1985-04-12T23:20:50.52Z — fractional seconds; a space may replace 'T'
        // (RFC 3339 §5.6 note, as pandas writes).
        let mut t = parser();
        t.elapsed("t", "1985-04-12T23:20:50.52Z").unwrap();
        assert_eq!(t.elapsed("t", "1985-04-12 23:20:51.02+00:00").unwrap(), 0.5);
    }

    #[test]
    fn a_kilohertz_log_at_todays_epoch_keeps_exact_intervals() {
        // In f64, 1772359200.001 − 1772359200.000 is off by up to 2⁻²² s (IEEE 754 spacing at
        // 2³⁰..2³¹); relative to the first row the interval is the exact 1 ms, rounded once.
        let naive = "1772359200.001".parse::<f64>().unwrap() - 1772359200.0;
        assert_ne!(
            naive, 0.001,
            "the float path jitters (the reason for the exact path)"
        );
        let mut t = parser();
        t.elapsed("t", "1772359200.000").unwrap();
        for k in 1..2000u32 {
            let text = format!("1772359200.{k:03}");
            let text = if k >= 1000 {
                format!("1772359201.{:03}", k - 1000)
            } else {
                text
            };
            assert_eq!(
                t.elapsed("t", &text).unwrap(),
                f64::from(k) / 1000.0,
                "{text}"
            );
        }
        let mut t = parser();
        t.elapsed("t", "2026-03-01T10:00:00Z").unwrap();
        assert_eq!(t.elapsed("t", "2026-03-01T10:00:00.001Z").unwrap(), 0.001);
        assert_eq!(
            t.elapsed("t", "2026-03-01T10:00:00.000000007Z").unwrap(),
            7e-9
        );
    }

    #[test]
    fn numeric_units_scale_exactly_and_a_zero_start_keeps_each_rows_value() {
        let mut t = TimeParser::new(TimeUnit::Milliseconds, true, None);
        t.elapsed("t", "1772359200000").unwrap();
        assert_eq!(t.elapsed("t", "1772359200010").unwrap(), 0.01);
        let mut t = TimeParser::new(TimeUnit::Minutes, true, None);
        t.elapsed("t", "1.5").unwrap();
        assert_eq!(t.elapsed("t", "2").unwrap(), 30.0);
        // What `simulate` writes: t = k·dt from 0, each row's own f64.
        let mut t = parser();
        assert_eq!(t.elapsed("t", "0").unwrap(), 0.0);
        let v = 0.30000000000000004_f64;
        assert_eq!(
            t.elapsed("t", &v.to_string()).unwrap().to_bits(),
            v.to_bits()
        );
    }

    #[test]
    fn naive_date_times_need_a_zone_and_daylight_saving_changes_are_refused() {
        let e = parser().elapsed("t", "2026-03-01T10:00:00").unwrap_err();
        assert!(e.contains("--timezone"), "{e}");
        let berlin = parse_timezone("Europe/Berlin").unwrap();
        let mut t = TimeParser::new(TimeUnit::Seconds, false, Some(berlin.clone()));
        t.elapsed("t", "2026-03-29T01:59:59").unwrap();
        // Europe/Berlin goes from 02:00 CET to 03:00 CEST on the last Sunday of March (EU
        // summer-time rule, Directive 2000/84/EC): 03:00:00 is one second after 01:59:59.
        assert_eq!(t.elapsed("t", "2026-03-29T03:00:00").unwrap(), 1.0);
        let e = t.elapsed("t", "2026-03-29T02:30:00").unwrap_err();
        assert!(e.contains("does not exist"), "{e}");
        let mut t = TimeParser::new(TimeUnit::Seconds, false, Some(berlin));
        let e = t.elapsed("t", "2026-10-25T02:30:00").unwrap_err();
        assert!(e.contains("occurs twice"), "{e}");
    }

    #[test]
    fn one_column_holds_one_format() {
        let mut t = parser();
        t.elapsed("t", "0").unwrap();
        let e = t.elapsed("t", "2026-03-01T10:00:00Z").unwrap_err();
        assert!(e.contains("rows above hold numbers"), "{e}");
        let mut t = parser();
        t.elapsed("t", "2026-03-01T10:00:00Z").unwrap();
        let e = t.elapsed("t", "5").unwrap_err();
        assert!(e.contains("date-times with an offset"), "{e}");
        let e = TimeParser::new(TimeUnit::Milliseconds, true, None)
            .elapsed("t", "2026-03-01T10:00:00Z")
            .unwrap_err();
        assert!(e.contains("--time-unit ms does not apply"), "{e}");
    }

    #[test]
    fn the_time_base_rule() {
        let quadtank = Some(Domain::Interval(0.001, 600.0));
        // A 1 s log read as milliseconds-as-seconds: 1000 s intervals, outside and ×1000.
        let p = time_base_problem(1000.0, 9, 1.0, quadtank, TimeUnit::Seconds, true)
            .unwrap()
            .to_string();
        assert!(p.contains("outside") && p.contains("1000×"), "{p}");
        assert!(p.contains("--time-unit ms"), "{p}");
        // Seconds given --time-unit ms: 1/1000 of dt, the cure is --time-unit s.
        let p = time_base_problem(0.001, 9, 1.0, quadtank, TimeUnit::Milliseconds, true)
            .unwrap()
            .to_string();
        assert!(p.contains("1/1000") && p.contains("--time-unit s"), "{p}");
        // Factors of 10 or 100 are legitimate resampling, not a slip.
        assert!(time_base_problem(100.0, 9, 1.0, quadtank, TimeUnit::Seconds, true).is_none());
        assert!(time_base_problem(0.001, 9, 0.01, None, TimeUnit::Seconds, true).is_none());
        assert!(time_base_problem(4.99, 9, 0.01, None, TimeUnit::Seconds, true).is_none());
        assert!(time_base_problem(5.0, 9, 0.01, None, TimeUnit::Seconds, true).is_some());
    }

    #[test]
    fn the_clock_reads_back_in_the_datas_terms() {
        let mut t = parser();
        t.elapsed("t", "2026-03-01T10:00:00+02:00").unwrap();
        let clock = t.clock();
        assert_eq!(clock.tick(65.0, 3600.0).unwrap(), "10:01:05");
        assert!(
            clock.axis_label().contains("2026-03-01 10:00:00"),
            "{}",
            clock.axis_label()
        );
        let mut t = TimeParser::new(TimeUnit::Milliseconds, true, None);
        t.elapsed("t", "0").unwrap();
        assert_eq!(t.clock().tick(0.25, 1.0).unwrap(), "250");
        assert_eq!(t.clock().axis_label(), "t [ms]");
        assert_eq!(Clock::default().tick(0.25, 1.0), None);
    }
}
