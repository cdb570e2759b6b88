//! Property tests of the filter-spec parser: any input gives a spec or an error, never a panic,
//! and well-formed specs round-trip.

use proptest::prelude::*;
use sightline_filters::{FilterSpec, OptionInfo};

const OPTIONS: &[OptionInfo] = &[
    OptionInfo {
        key: "alpha",
        default: "1",
        about: "",
    },
    OptionInfo {
        key: "particles",
        default: "1000",
        about: "",
    },
    OptionInfo {
        key: "resample",
        default: "systematic",
        about: "",
    },
];

proptest! {
    /// Arbitrary text never panics the parser or the typed option readers.
    #[test]
    fn arbitrary_text_never_panics(text in ".{0,64}") {
        if let Ok(spec) = FilterSpec::parse(&text) {
            if let Ok(opts) = spec.options(OPTIONS) {
                let _ = opts.real("alpha", 1.0, |a| a > 0.0, "> 0");
                let _ = opts.count("particles", 1000, 1, 1_000_000);
                let _ = opts.choice("resample", "systematic", &["systematic", "stratified"]);
                let _ = opts.switch("alpha", false);
            }
        }
    }

    /// A spec assembled from a kind and key=value pairs parses back to the same parts, and its
    /// label is the text as given (trimmed).
    #[test]
    fn well_formed_specs_round_trip(
        kind in "[a-z][a-z0-9_]{0,7}",
        pairs in proptest::collection::btree_map("[a-z][a-z0-9]{0,6}", "[a-zA-Z0-9.+-]{1,8}", 0..4),
    ) {
        let options: Vec<(String, String)> = pairs.into_iter().collect();
        let text = if options.is_empty() {
            kind.clone()
        } else {
            format!(
                "{kind}:{}",
                options.iter().map(|(k, v)| format!("{k}={v}")).collect::<Vec<_>>().join(",")
            )
        };
        let spec = FilterSpec::parse(&text).unwrap();
        prop_assert_eq!(&spec.kind, &kind);
        prop_assert_eq!(&spec.options, &options);
        prop_assert_eq!(&spec.label, &text);
    }

    /// Numbers outside the accepted range are rejected with the option named.
    #[test]
    fn out_of_range_counts_are_rejected(n in 1_000_001u64..u64::MAX) {
        let spec = FilterSpec::parse(&format!("pf:particles={n}")).unwrap();
        let opts = spec.options(OPTIONS).unwrap();
        let err = opts.count("particles", 1000, 1, 1_000_000).unwrap_err().to_string();
        prop_assert!(err.contains("particles"));
    }
}
