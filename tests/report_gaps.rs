//! Measurement gaps are shaded on every time plot of `compare`'s report (issue: "measurement
//! gaps shaded on every time plot"): a sensor outage is the first thing a reader of a time plot
//! must see, since every estimate inside it is a pure prediction.

mod common_cli;
use common_cli::{expect, s, simulated};

#[test]
fn an_outage_is_shaded_on_every_time_plot() {
    let tmp = tempfile::tempdir().unwrap();
    let data = simulated(&tmp.path().join("data.csv"), "cv", 300, 5);
    // A 60-row outage of the only sensor (rows 100..160): far longer than twice the regular
    // interval, so it is a gap in the sense of `report::measurement_gaps`.
    let text = std::fs::read_to_string(&data).unwrap();
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    let column = lines[0].split(',').position(|c| c == "y.pos").unwrap();
    for line in &mut lines[101..161] {
        let mut cells: Vec<&str> = line.split(',').collect();
        cells[column] = "";
        *line = cells.join(",");
    }
    std::fs::write(&data, lines.join("\n") + "\n").unwrap();
    let out = tmp.path().join("out");
    expect(
        &[
            "compare",
            "cv",
            s(&data),
            "-f",
            "kf",
            "-f",
            "ukf",
            "-o",
            s(&out),
        ],
        0,
    );
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    let mut time_plots = 0;
    for figure in html.split("<figure").skip(1) {
        let id = figure
            .split("data-plot=\"")
            .nth(1)
            .and_then(|rest| rest.split('"').next())
            .unwrap_or("");
        let over_time = [
            "state-",
            "error-",
            "smoothed-",
            "measurement-",
            "nees",
            "nis",
        ]
        .iter()
        .any(|p| id.starts_with(p));
        if over_time {
            time_plots += 1;
            assert!(
                figure.contains("no measurement"),
                "plot {id} does not shade the outage"
            );
        }
    }
    // pos and vel, each with its own plot and one error panel per filter, plus NEES and NIS.
    assert!(time_plots >= 8, "only {time_plots} time plots found");
}
