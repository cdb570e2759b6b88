//! The dataset reader on arbitrary bytes, under the plain options and those of a real log:
//! never a panic, and every dataset error is located (line and column at least 1) and names
//! the file.
#![no_main]

use std::path::Path;

use libfuzzer_sys::fuzz_target;
use sightline_eval::Error;
use sightline_eval::dataset::Record;
use sightline_eval::dataset::read::{DatasetReader, ReadOptions, Schema};
use sightline_eval::dataset::time::TimeUnit;

fn schemas() -> Vec<Schema> {
    let with_input = Schema {
        model: "fuzz".into(),
        inputs: vec!["torque".into()],
        measurements: vec!["position".into(), "speed".into()],
        states: vec!["angle".into(), "rate".into()],
        input_fallback: vec![None],
    };
    let with_fallback = Schema {
        input_fallback: vec![Some(0.5)],
        ..with_input.clone()
    };
    vec![with_input, with_fallback]
}

/// The plain options, the lax ones, and those of a real log (its own names, a ms clock,
/// missing-value tokens, naive date-times in a zone, refused extra columns).
fn options() -> Vec<ReadOptions> {
    vec![
        ReadOptions::default(),
        ReadOptions {
            nonfinite_as_missing: true,
            ..ReadOptions::default()
        },
        ReadOptions {
            time_column: "stamp".into(),
            time_unit: Some(TimeUnit::Milliseconds),
            map: vec![
                ("sensor".into(), "y.position".into()),
                ("drive".into(), "u.torque".into()),
            ],
            missing: vec!["NA".into(), "-".into()],
            ..ReadOptions::default()
        },
        ReadOptions {
            timezone: Some("Europe/Berlin".into()),
            strict_columns: true,
            ..ReadOptions::default()
        },
    ]
}

fuzz_target!(|data: &[u8]| {
    for schema in schemas() {
        for options in options() {
            let outcome = DatasetReader::from_reader(
                Path::new("fuzz.csv"),
                std::io::Cursor::new(data.to_vec()),
                &schema,
                options,
            )
            .and_then(|mut reader| {
                let mut record = Record::empty();
                while reader.next_into(&mut record)? {
                    assert!(record.t.is_finite());
                    assert_eq!(record.u.len(), 1);
                    assert_eq!(record.y.len(), 2);
                    assert!(record.y.iter().all(|v| !v.is_infinite()));
                }
                Ok(())
            });
            match outcome {
                Ok(()) => {}
                Err(Error::Data {
                    path, line, column, ..
                }) => {
                    assert_eq!(path, Path::new("fuzz.csv"));
                    assert!(line >= 1 && column >= 1, "unlocated error at {line}:{column}");
                }
                Err(other) => panic!("unexpected error kind: {other}"),
            }
        }
    }
});
