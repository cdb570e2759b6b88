//! `sightline models`: every plant with its states, measurements, inputs and parameters.

use comfy_table::{Table, presets::UTF8_FULL_CONDENSED};

use crate::error::Result;
use crate::plant::AnyPlant;

/// Text listing of every plant, as printed by `sightline models`.
pub fn listing(plants: &[Box<dyn AnyPlant>]) -> String {
    let mut out = String::new();
    for p in plants {
        let vars = |v: Vec<sightline_core::Variable>| {
            if v.is_empty() {
                "(none)".to_string()
            } else {
                v.iter()
                    .map(|v| format!("{} [{}]", v.name, v.unit))
                    .collect::<Vec<_>>()
                    .join(", ")
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
                .map(|(v, c)| format!("{} [{}] = {c}", v.name, v.unit))
                .collect::<Vec<_>>()
                .join(", ")
        };
        out.push_str(&format!("  inputs:       {inputs_text}\n"));
        let (mean, _) = p.prior();
        out.push_str(&format!(
            "  prior mean:   {}\n",
            p.states()
                .iter()
                .zip(&mean)
                .map(|(v, m)| format!("x0.{}={m}", v.name))
                .collect::<Vec<_>>()
                .join(", ")
        ));
        let mut table = Table::new();
        table.load_style(UTF8_FULL_CONDENSED);
        table.set_header(vec!["parameter", "default", "unit", "allowed", "meaning"]);
        for param in p.parameters() {
            table.add_row(vec![
                param.name.to_string(),
                format!("{}", param.value),
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
    out
}

/// Prints the listing.
pub fn run(plants: &[Box<dyn AnyPlant>]) -> Result<()> {
    print!("{}", listing(plants));
    Ok(())
}
