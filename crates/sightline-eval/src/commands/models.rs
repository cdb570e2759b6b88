//! `sightline models`: every plant with its states, measurements, inputs and parameters.

use comfy_table::{Table, presets::UTF8_FULL_CONDENSED};

use crate::error::Result;
use crate::plant::AnyPlant;

/// Longest list of states printed in full; longer ones (runtime-sized plants) are elided.
const FULL_LIST: usize = 8;

/// A number as a user would type it: plain for ordinary magnitudes, exponent form for very
/// large or small ones (`7.2e10`, not `72000000000`), at most six significant digits unless
/// `exact` (parameter defaults are shown exactly; computed prior means are rounded).
fn number(v: f64, exact: bool) -> String {
    let v = if exact || v == 0.0 || !v.is_finite() {
        v
    } else {
        format!("{v:.5e}").parse().unwrap_or(v)
    };
    let magnitude = v.abs();
    if magnitude != 0.0 && !(1e-4..1e7).contains(&magnitude) {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

/// `a, b, c, ..., z (n in all)` for long lists, the whole list otherwise.
fn elide(items: Vec<String>) -> String {
    if items.len() <= FULL_LIST {
        return items.join(", ");
    }
    let n = items.len();
    format!(
        "{}, ..., {} ({n} in all)",
        items[..3].join(", "),
        items[n - 1]
    )
}

/// Text listing of every plant, as printed by `sightline models`.
pub fn listing(plants: &[Box<dyn AnyPlant>]) -> String {
    let mut out = String::new();
    for p in plants {
        let vars = |v: Vec<sightline_core::Variable>| {
            if v.is_empty() {
                "(none)".to_string()
            } else {
                elide(
                    v.iter()
                        .map(|v| format!("{} [{}]", v.name, v.unit))
                        .collect(),
                )
            }
        };
        out.push_str(&format!("{}: {}\n", p.name(), p.description()));
        out.push_str(&format!("  states:       {}\n", vars(p.states())));
        out.push_str(&format!("  measurements: {}\n", vars(p.measurements())));
        let inputs = p.inputs();
        let constant = p.constant_input();
        let inputs_text = if inputs.is_empty() {
            "(none)".to_string()
        } else {
            inputs
                .iter()
                .zip(&constant)
                .map(|(v, c)| format!("{} [{}] = {}", v.name, v.unit, number(*c, true)))
                .collect::<Vec<_>>()
                .join(", ")
        };
        out.push_str(&format!("  inputs:       {inputs_text}\n"));
        let params = p.parameters();
        let (prior, model_params): (Vec<_>, Vec<_>) = params
            .iter()
            .partition(|q| q.name.starts_with("x0.") || q.name.starts_with("sd0."));
        let value = |name: &str| {
            prior
                .iter()
                .find(|q| q.name == name)
                .map_or(f64::NAN, |q| q.value)
        };
        out.push_str(&format!(
            "  prior:        {}\n",
            elide(
                p.states()
                    .iter()
                    .map(|v| {
                        let (mean, sd) = (format!("x0.{}", v.name), format!("sd0.{}", v.name));
                        let (m, s) = (number(value(&mean), false), number(value(&sd), false));
                        format!("{mean}={m} {sd}={s}")
                    })
                    .collect()
            )
        ));
        let mut table = Table::new();
        table.load_style(UTF8_FULL_CONDENSED);
        table.set_header(vec!["parameter", "default", "unit", "allowed", "meaning"]);
        for param in model_params {
            table.add_row(vec![
                param.name.to_string(),
                number(param.value, true),
                param.unit.to_string(),
                param.domain.describe(),
                param.about.to_string(),
            ]);
        }
        out.push_str(&format!("{table}\n\n"));
    }
    let kinds: Vec<String> = sightline_filters::KINDS
        .iter()
        .map(|k| {
            let opts: Vec<String> = k
                .options
                .iter()
                .map(|o| format!("{}={}", o.key, o.default))
                .collect();
            if opts.is_empty() {
                format!("  {:<6} {}", k.kind, k.about)
            } else {
                format!("  {:<6} {} [{}]", k.kind, k.about, opts.join(", "))
            }
        })
        .collect();
    out.push_str("filters (-f KIND[:key=value,...]):\n");
    out.push_str(&kinds.join("\n"));
    out.push('\n');
    out.push_str(
        "\nWhich states a model's measurements can see, and how well: sightline observe MODEL \
         [DATA.csv] [--sensors NAME,...] [--compare-sensors 'A|B,C'] -o DIR (sensor names are \
         the measurement names above).\n",
    );
    out
}

/// Prints the listing.
pub fn run(plants: &[Box<dyn AnyPlant>]) -> Result<()> {
    print!("{}", listing(plants));
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_read_as_typed() {
        assert_eq!(number(7.2e10, true), "7.2e10");
        assert_eq!(number(1e-5, true), "1e-5");
        assert_eq!(number(0.001, true), "0.001");
        assert_eq!(number(-50000.0, true), "-50000");
        assert_eq!(number(10.090560158989865, false), "10.0906");
        assert_eq!(number(0.0, false), "0");
    }

    #[test]
    fn long_lists_are_elided() {
        let items: Vec<String> = (1..=64).map(|i| format!("h{i}")).collect();
        assert_eq!(elide(items), "h1, h2, h3, ..., h64 (64 in all)");
        assert_eq!(elide(vec!["a".into(), "b".into()]), "a, b");
    }
}
