//! A truth value whose square overflows (|x| > √(max double) ≈ 1.34e154, IEEE 754 binary64)
//! makes every filter's error unmeasurable: that is a fault of the truth, reported once, and the
//! dataset is judged as one without truth — not every filter marked as failed.

mod common_cli;

use common_cli::{json, s, sightline};

#[test]
fn an_overflowing_truth_marks_the_truth_bad_not_the_filters() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("data.csv");
    common_cli::expect(
        &[
            "simulate",
            "cv",
            "--steps",
            "200",
            "--seed",
            "5",
            "-o",
            s(&data),
        ],
        0,
    );
    // Row 120 (line 122): x.pos = 1e300, finite but beyond √(max double).
    let text = std::fs::read_to_string(&data).unwrap();
    let mut lines: Vec<String> = text.lines().map(String::from).collect();
    let header: Vec<&str> = lines[0].split(',').collect();
    let col = header.iter().position(|h| *h == "x.pos").unwrap();
    let mut cells: Vec<String> = lines[121].split(',').map(String::from).collect();
    cells[col] = "1e300".into();
    lines[121] = cells.join(",");
    std::fs::write(&data, lines.join("\n") + "\n").unwrap();

    let out_dir = dir.path().join("out");
    let out = sightline(&[
        "compare",
        "cv",
        s(&data),
        "-f",
        "kf",
        "-f",
        "ukf",
        "-o",
        s(&out_dir),
    ]);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{stdout}{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(
        stdout
            .matches("the truth x.pos = 1e300 is too large")
            .count(),
        1,
        "one clear message: {stdout}"
    );
    assert!(stdout.contains("row 120"), "{stdout}");
    let summary = json(&out_dir.join("summary.json"));
    assert_eq!(summary["truth"], false);
    for f in summary["filters"].as_array().unwrap() {
        assert_eq!(f["status"], "ok", "{f}");
        assert!(f["rmse_all"].is_null() && f["anees"].is_null(), "{f}");
        assert!(
            f["log_likelihood"].is_number(),
            "the innovations are still judged: {f}"
        );
    }
    // 1e150 squared is finite (1e300): such a truth is measured as usual.
    let edited = std::fs::read_to_string(&data)
        .unwrap()
        .replace("1e300", "1e150");
    std::fs::write(&data, edited).unwrap();
    let out_dir = dir.path().join("out2");
    let out = sightline(&["compare", "cv", s(&data), "-f", "kf", "-o", s(&out_dir)]);
    assert!(!String::from_utf8_lossy(&out.stdout).contains("too large"));
    assert_eq!(json(&out_dir.join("summary.json"))["truth"], true);
}
