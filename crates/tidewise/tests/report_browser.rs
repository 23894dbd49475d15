//! Every kind of report page (a training run, a sweep, a bit-width estimate), as `tidewise
//! report` writes it, loaded in a real browser (headless Chromium): no console errors, and
//! every inline figure laid out at a non-zero size. A small script, added to a copy of each
//! page (the pages themselves run none), writes the figures' `getBoundingClientRect()` sizes
//! into the DOM that `--dump-dom` prints; console messages come from `--enable-logging`.
//! Skips with a message when `chromium-headless-shell` is missing (`bash ci/chromium.sh`
//! installs it), fails instead when `TIDEWISE_REQUIRE_CHROMIUM` is set.

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

const BROWSER: &str = "chromium-headless-shell";

/// The invented pump scenario, small enough for a few seconds of runs.
const SPEC: &str = "[data]\nsource = \"pump\"\nsamples = 200\n[net]\nhidden = [6]\n\
                    [rule]\nname = \"dtp\"\n[run]\nepochs = 3\n";
const GRID: &str = "\"fixed.forward_weights\" = [\"Q1.6\", \"Q2.9\"]\n\
                    \"fixed.rounding\" = [\"nearest\", \"stochastic\"]\n";

fn browser_or_skip() -> bool {
    let there = Command::new(BROWSER)
        .arg("--version")
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .is_ok_and(|s| s.success());
    if there {
        return true;
    }
    let msg = format!(
        "report_browser: skipped: `{BROWSER}` is not installed (run `bash ci/chromium.sh`)"
    );
    if std::env::var_os("TIDEWISE_REQUIRE_CHROMIUM").is_some_and(|v| !v.is_empty() && v != "0") {
        panic!("{msg}; TIDEWISE_REQUIRE_CHROMIUM is set, so this is a failure");
    }
    eprintln!("{msg}");
    false
}

fn tidewise(args: &[&str]) {
    let out = Command::new(env!("CARGO_BIN_EXE_tidewise"))
        .args(args)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "tidewise {args:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
}

/// What the browser saw: the DOM after the scripts ran, and its log (both through files, so
/// a large page cannot fill a pipe).
fn load(page: &Path) -> (String, String) {
    let (dom, log) = (page.with_extension("dom"), page.with_extension("log"));
    let mut child = Command::new(BROWSER)
        .args([
            "--no-sandbox",
            "--disable-gpu",
            "--enable-logging=stderr",
            "--v=0",
            "--window-size=1300,2400",
            "--dump-dom",
        ])
        .arg(format!("file://{}", page.display()))
        .stdout(std::fs::File::create(&dom).unwrap())
        .stderr(std::fs::File::create(&log).unwrap())
        .spawn()
        .unwrap();
    let start = Instant::now();
    while child.try_wait().unwrap().is_none() {
        if start.elapsed() > Duration::from_secs(90) {
            let _ = child.kill();
            panic!("{BROWSER} did not finish {} in 90 s", page.display());
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    (
        std::fs::read_to_string(&dom).unwrap(),
        std::fs::read_to_string(&log).unwrap(),
    )
}

/// Console messages other than the measuring script's own. Chromium logs every console
/// message at INFO, whatever its level, so this counts them all: the pages run no script, so
/// any other message (a resource that failed to load, a refused style) is a problem.
fn console_errors(log: &str) -> Vec<&str> {
    log.lines()
        .filter(|l| l.contains(":CONSOLE") && !l.contains("\"measured "))
        .collect()
}

const MEASURE: &str = "<script>(function(){var s=[].slice.call(document.querySelectorAll('svg'))\
.filter(function(e){return !e.parentElement.closest('svg')}).map(function(e){var r=e.getBoundingClientRect();\
return r.width.toFixed(1)+'x'+r.height.toFixed(1)});var p=document.createElement('pre');p.id='measured';\
p.textContent='FIGURES '+s.join(' ')+' END';document.body.appendChild(p);\
console.log('measured '+s.length)})();</script>";

/// Loads a copy of `page` with the measuring script; the figures' sizes and the log.
fn measure(page: &Path, extra: &str) -> (Vec<(f64, f64)>, String) {
    let html = std::fs::read_to_string(page).unwrap();
    let probe = page.with_file_name("measured.html");
    let body_end = html.rfind("</body>").expect("the page has a </body>");
    let copy = format!("{}{extra}{MEASURE}{}", &html[..body_end], &html[body_end..]);
    std::fs::write(&probe, copy).unwrap();
    let (dom, log) = load(&probe);
    let text = dom
        .split("<pre id=\"measured\">FIGURES")
        .nth(1)
        .and_then(|t| t.split("END</pre>").next())
        .unwrap_or_else(|| {
            panic!(
                "{}: the measuring script did not run; log:\n{log}",
                page.display()
            )
        });
    let sizes = text
        .split_whitespace()
        .map(|s| {
            let (w, h) = s.split_once('x').unwrap();
            (w.parse().unwrap(), h.parse().unwrap())
        })
        .collect();
    (sizes, log)
}

fn folders(root: &Path) -> Vec<(&'static str, PathBuf, usize)> {
    let spec = root.join("pump.toml");
    std::fs::write(&spec, SPEC).unwrap();
    let grid = root.join("grid.toml");
    std::fs::write(&grid, GRID).unwrap();
    let s = |p: &Path| p.to_str().unwrap().to_string();
    let (train, sweep, bits) = (root.join("train"), root.join("sweep"), root.join("bits"));
    tidewise(&["train", &s(&spec), "--out", &s(&train)]);
    tidewise(&[
        "sweep",
        &s(&spec),
        "--grid",
        &s(&grid),
        "--out",
        &s(&sweep),
        "--jobs",
        "1",
    ]);
    tidewise(&[
        "bits",
        &s(&spec),
        "--out",
        &s(&bits),
        "--search-seeds",
        "2",
        "--confirm-seeds",
        "3",
        "--rounds",
        "1",
        "--scan-step",
        "4",
        "--jobs",
        "1",
        "--quiet",
    ]);
    for d in [&train, &sweep, &bits] {
        tidewise(&["report", &s(d)]);
    }
    // Figures each page must show: the curves; two heatmaps and the curves; bits.svg.
    vec![
        ("training", train, 1),
        ("sweep", sweep, 3),
        ("bits", bits, 1),
    ]
}

#[test]
fn report_pages_load_cleanly_in_a_browser() {
    if !browser_or_skip() {
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path().canonicalize().unwrap();
    for (kind, dir, expected) in folders(&root) {
        let page = dir.join("report.html");
        let (sizes, log) = measure(&page, "");
        assert!(
            log.contains("measured"),
            "{kind}: the browser's log shows no console output at all, so errors could not be seen:\n{log}"
        );
        let errors = console_errors(&log);
        assert!(
            errors.is_empty(),
            "{kind}: console errors:\n{}",
            errors.join("\n")
        );
        assert_eq!(sizes.len(), expected, "{kind}: figures laid out: {sizes:?}");
        for (w, h) in &sizes {
            assert!(
                *w > 100.0 && *h > 50.0,
                "{kind}: a figure is laid out at {w} × {h}"
            );
        }
    }
    // The check can fail: a console error on a page is caught.
    let control = root.join("train").join("report.html");
    let (_, log) = measure(&control, "<script>console.error('control error')</script>");
    assert!(
        console_errors(&log)
            .iter()
            .any(|l| l.contains("control error")),
        "a console error went unnoticed; log:\n{log}"
    );
}
