//! The dataset reader on arbitrary bytes: never a panic, and every dataset error is located
//! (line and column at least 1) and names the file.
#![no_main]

use std::path::Path;

use libfuzzer_sys::fuzz_target;
use sightline_eval::Error;
use sightline_eval::dataset::Record;
use sightline_eval::dataset::read::{DatasetReader, ReadOptions, Schema};

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

fuzz_target!(|data: &[u8]| {
    for schema in schemas() {
        for nonfinite_as_missing in [false, true] {
            let options = ReadOptions {
                nonfinite_as_missing,
                ..ReadOptions::default()
            };
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
