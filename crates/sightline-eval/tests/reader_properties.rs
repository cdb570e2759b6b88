//! Property tests of the dataset reader: on arbitrary bytes and on structured mutations of a
//! valid file it never panics, every error is a located dataset error (file, line ≥ 1,
//! column ≥ 1, and the line exists in the input), and whatever it accepts satisfies the
//! contract (finite, strictly increasing time; finite inputs and truth; measurements finite or
//! missing).

use std::path::Path;

use proptest::prelude::*;
use sightline_eval::Error;
use sightline_eval::dataset::Record;
use sightline_eval::dataset::read::{DatasetReader, ReadOptions, Schema};

fn schema(fallback: bool) -> Schema {
    Schema {
        model: "toy".into(),
        inputs: vec!["torque".into()],
        measurements: vec!["position".into(), "speed".into()],
        states: vec!["angle".into(), "rate".into()],
        input_fallback: vec![fallback.then_some(0.25)],
    }
}

/// Reads `bytes` to the end; checks an accepted file's records and an error's location.
fn read_checked(
    bytes: &[u8],
    fallback: bool,
    nonfinite_as_missing: bool,
) -> Result<usize, TestCaseError> {
    let outcome = DatasetReader::from_reader(
        Path::new("prop.csv"),
        std::io::Cursor::new(bytes.to_vec()),
        &schema(fallback),
        ReadOptions {
            nonfinite_as_missing,
            ..ReadOptions::default()
        },
    )
    .and_then(|mut reader| {
        let mut record = Record::empty();
        let mut rows = Vec::new();
        while reader.next_into(&mut record)? {
            rows.push(record.clone());
        }
        Ok(rows)
    });
    match outcome {
        Ok(rows) => {
            prop_assert!(!rows.is_empty(), "an accepted file has rows");
            for (i, r) in rows.iter().enumerate() {
                prop_assert!(r.t.is_finite());
                if i > 0 {
                    prop_assert!(r.t > rows[i - 1].t, "time must increase");
                }
                prop_assert_eq!(r.u.len(), 1);
                prop_assert!(r.u[0].is_finite());
                prop_assert_eq!(r.y.len(), 2);
                prop_assert!(r.y.iter().all(|v| v.is_finite() || v.is_nan()));
                if let Some(x) = &r.x {
                    prop_assert!(x.len() == 2 && x.iter().all(|v| v.is_finite()));
                }
            }
            Ok(rows.len())
        }
        Err(Error::Data {
            path,
            line,
            column,
            message,
        }) => {
            prop_assert_eq!(path, Path::new("prop.csv"));
            prop_assert!(
                line >= 1 && column >= 1,
                "unlocated: {}:{}: {}",
                line,
                column,
                message
            );
            // The line exists (one past the end for "no data rows below the header").
            let lines = bytes.split(|b| *b == b'\n').count() as u64;
            prop_assert!(line <= lines + 1, "line {} of {}: {}", line, lines, message);
            prop_assert!(!message.is_empty());
            prop_assert!(
                !message.chars().any(|c| c.is_control() && c != '\n'),
                "raw control characters in {:?}",
                message
            );
            Ok(0)
        }
        Err(other) => Err(TestCaseError::fail(format!("not a dataset error: {other}"))),
    }
}

const VALID: &str = "t,u.torque,y.position,y.speed,x.angle,x.rate\n\
                     0,0.5,0.1,,0.2,0.0\n\
                     0.01,0.5,0.12,1.5,0.21,0.01\n\
                     0.02,0.5,,1.4,0.22,0.02\n\
                     0.03,0.5,0.15,1.3,0.23,0.03\n";

/// One structured edit of a text file.
#[derive(Debug, Clone)]
enum Edit {
    Delete(usize),
    Insert(usize, &'static str),
    Replace(usize, u8),
    Truncate(usize),
    SwapLines(usize, usize),
    DuplicateLine(usize),
}

fn edit() -> impl Strategy<Value = Edit> {
    let token = prop::sample::select(vec![
        ",", "\"", "\n", "\r\n", "\0", "nan", "inf", "-", "e999", " ", "\u{feff}", "1e-320",
        "x.angle", "t", ";", "\t", "y.speed", "0x1", "+",
    ]);
    prop_oneof![
        any::<usize>().prop_map(Edit::Delete),
        (any::<usize>(), token).prop_map(|(at, t)| Edit::Insert(at, t)),
        (any::<usize>(), any::<u8>()).prop_map(|(at, b)| Edit::Replace(at, b)),
        any::<usize>().prop_map(Edit::Truncate),
        (any::<usize>(), any::<usize>()).prop_map(|(a, b)| Edit::SwapLines(a, b)),
        any::<usize>().prop_map(Edit::DuplicateLine),
    ]
}

fn apply(bytes: &mut Vec<u8>, e: &Edit) {
    if bytes.is_empty() {
        return;
    }
    let n = bytes.len();
    match *e {
        Edit::Delete(at) => {
            bytes.remove(at % n);
        }
        Edit::Insert(at, t) => {
            bytes.splice(at % n..at % n, t.bytes());
        }
        Edit::Replace(at, b) => bytes[at % n] = b,
        Edit::Truncate(at) => bytes.truncate(at % n),
        Edit::SwapLines(a, b) => {
            let mut lines: Vec<Vec<u8>> =
                bytes.split(|c| *c == b'\n').map(<[u8]>::to_vec).collect();
            let len = lines.len();
            lines.swap(a % len, b % len);
            *bytes = lines.join(&b'\n');
        }
        Edit::DuplicateLine(a) => {
            let mut lines: Vec<Vec<u8>> =
                bytes.split(|c| *c == b'\n').map(<[u8]>::to_vec).collect();
            let len = lines.len();
            let line = lines[a % len].clone();
            lines.insert(a % len, line);
            *bytes = lines.join(&b'\n');
        }
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(2000))]

    /// Arbitrary bytes: never a panic; an error is always located.
    #[test]
    fn arbitrary_bytes_never_panic(bytes in prop::collection::vec(any::<u8>(), 0..600), fallback: bool, lax: bool) {
        read_checked(&bytes, fallback, lax)?;
    }

    /// Arbitrary text built from the file's own alphabet reaches deeper than random bytes.
    #[test]
    fn csv_like_text_never_panics(text in "[tuyx.,0-9a-z \\-+e\"\r\n]{0,300}", fallback: bool) {
        read_checked(text.as_bytes(), fallback, false)?;
    }

    /// A valid file with up to four structured edits: never a panic, errors located, accepted
    /// files sound.
    #[test]
    fn mutations_of_a_valid_file_never_panic(edits in prop::collection::vec(edit(), 1..5), lax: bool) {
        let mut bytes = VALID.as_bytes().to_vec();
        for e in &edits {
            apply(&mut bytes, e);
        }
        read_checked(&bytes, false, lax)?;
    }
}

/// The valid file's lines with `#` comment lines (and blank lines) inserted after the lines
/// marked in `after` (index into the file's lines; `usize::MAX` for before the header).
fn with_comments(after: &[(usize, bool)]) -> (String, Vec<u64>) {
    let mut out = String::new();
    let mut line_of = Vec::new();
    let mut line = 1u64;
    fn put(text: &str, out: &mut String, line: &mut u64) {
        out.push_str(text);
        out.push('\n');
        *line += 1;
    }
    for (i, text) in std::iter::once("").chain(VALID.lines()).enumerate() {
        for &(_, blank) in after.iter().filter(|(a, _)| *a == i) {
            put(
                if blank {
                    ""
                } else {
                    "# logger note, with, commas"
                },
                &mut out,
                &mut line,
            );
        }
        if i > 0 {
            line_of.push(line);
            put(text, &mut out, &mut line);
        }
    }
    (out, line_of)
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(300))]

    /// Comment lines before the header and between rows (common practice for loggers) change
    /// nothing read, and an error after them names the line it is on in the file.
    #[test]
    fn comment_lines_are_skipped_and_errors_keep_their_line(
        after in prop::collection::vec((0usize..5, any::<bool>()), 0..8),
        bad_row in 1usize..5,
    ) {
        let (text, line_of) = with_comments(&after);
        let read = |text: &str| {
            DatasetReader::from_reader(
                Path::new("prop.csv"),
                std::io::Cursor::new(text.as_bytes().to_vec()),
                &schema(false),
                ReadOptions::default(),
            )
            .and_then(|r| r.read_all())
        };
        let plain = read(VALID).unwrap();
        // Compared as text: a missing measurement is NaN, which is never == itself.
        prop_assert_eq!(
            format!("{:?}", read(&text).unwrap().records),
            format!("{:?}", plain.records)
        );
        // Spoil the measurement of data row `bad_row` (line `bad_row` of VALID, 0 = header).
        let spoiled: String = text
            .lines()
            .enumerate()
            .map(|(i, l)| {
                if i as u64 + 1 == line_of[bad_row] {
                    let mut cells: Vec<&str> = l.split(',').collect();
                    cells[2] = "oops";
                    cells.join(",")
                } else {
                    l.to_string()
                }
            })
            .collect::<Vec<_>>()
            .join("\n");
        match read(&spoiled) {
            Err(Error::Data { line, column, .. }) => {
                prop_assert_eq!((line, column), (line_of[bad_row], 3));
            }
            other => prop_assert!(false, "expected a located error, got {:?}", other.map(|d| d.records.len())),
        }
    }
}

#[test]
fn the_valid_file_reads_back() {
    assert_eq!(read_checked(VALID.as_bytes(), false, false).unwrap(), 4);
}
