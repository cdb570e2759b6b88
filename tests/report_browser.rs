//! The report renders in a real browser: headless Chromium (Debian package `chromium`, installed
//! by `.ci/run`) loads each report.html and the page's own check marks every plot whose SVG the
//! browser laid out with a non-empty bounding box and drawn elements. The test fails — it does
//! not skip — when Chromium is missing.

mod common_cli;
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use common_cli::{expect, s};

/// Loads `page` in headless Chromium and returns the DOM after its scripts ran.
fn dump_dom(page: &Path, profile: &Path) -> String {
    let dom_path = profile.join("dom.html");
    let dom_file = std::fs::File::create(&dom_path).unwrap();
    let url = format!("file://{}", page.canonicalize().unwrap().display());
    let mut child = Command::new("chromium")
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-background-networking",
            "--no-first-run",
            &format!("--user-data-dir={}", profile.display()),
            "--dump-dom",
            &url,
        ])
        .stdout(Stdio::from(dom_file))
        .stderr(Stdio::null())
        .spawn()
        .unwrap_or_else(|e| {
            panic!(
                "headless Chromium is required for the report test and could not be started \
                 ({e}); install it with `apt-get install -y chromium` (.ci/run does)"
            )
        });
    let started = Instant::now();
    loop {
        if let Some(status) = child.try_wait().unwrap() {
            assert!(status.success(), "chromium exited with {status}");
            break;
        }
        if started.elapsed() > Duration::from_secs(180) {
            let _ = child.kill();
            panic!("chromium did not finish loading {url} within 180 s");
        }
        std::thread::sleep(Duration::from_millis(100));
    }
    std::fs::read_to_string(&dom_path).unwrap()
}

fn attribute(dom: &str, name: &str) -> Option<usize> {
    let key = format!("{name}=\"");
    let body = &dom[dom.find("<body")?..];
    let start = body.find(&key)? + key.len();
    let end = start + body[start..].find('"')?;
    body[start..end].parse().ok()
}

fn check_page(page: &Path, profile: &Path, expected_plots: &[&str]) {
    let html = std::fs::read_to_string(page).unwrap();
    let figures = html.matches("<figure class=\"plot\"").count();
    for id in expected_plots {
        assert!(
            html.contains(&format!("data-plot=\"{id}\"")),
            "no plot '{id}'"
        );
    }
    assert!(figures >= expected_plots.len());
    assert!(
        !html.contains("src=\"http") && !html.contains("href=\"http"),
        "the report must not load anything from the network"
    );
    let dom = dump_dom(page, profile);
    assert_eq!(
        attribute(&dom, "data-plots"),
        Some(figures),
        "the page script did not run"
    );
    assert_eq!(
        attribute(&dom, "data-rendered"),
        Some(figures),
        "not every plot rendered in {}",
        page.display()
    );
    assert!(!dom.contains("data-rendered=\"no\""));
}

#[test]
fn every_plot_renders_in_headless_chromium() {
    let dir = tempfile::tempdir().unwrap();
    let data = dir.path().join("pend.csv");
    expect(
        &[
            "simulate",
            "pendulum",
            "--steps",
            "400",
            "--seed",
            "3",
            "--dropout",
            "0.1",
            "-o",
            s(&data),
        ],
        0,
    );
    let compare = dir.path().join("compare");
    expect(
        &[
            "compare",
            "pendulum",
            s(&data),
            "-f",
            "ekf",
            "-f",
            "ukf",
            "-f",
            "pf:particles=300",
            "-o",
            s(&compare),
        ],
        0,
    );
    let profile = tempfile::tempdir().unwrap();
    check_page(
        &compare.join("report.html"),
        profile.path(),
        &[
            "state-angle",
            "state-rate",
            "measurement-position",
            "nees",
            "nis",
            "whiteness-position",
            "rmse",
            "cost",
        ],
    );
    let mc = dir.path().join("mc");
    expect(
        &[
            "montecarlo",
            "cv",
            "--runs",
            "12",
            "--steps",
            "60",
            "-f",
            "kf",
            "-f",
            "ckf",
            "-o",
            s(&mc),
        ],
        0,
    );
    let profile = tempfile::tempdir().unwrap();
    check_page(
        &mc.join("report.html"),
        profile.path(),
        &["nees", "nis", "rmse", "cost"],
    );
}
