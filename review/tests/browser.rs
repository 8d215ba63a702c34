//! The review page in a real browser: runs `tests/browser/review.mjs` (Node with
//! playwright-core, driving Debian's headless Chromium) against a server started
//! here on a synthetic site. With `CI=true` a missing Node, Chromium or
//! `npm ci` is a failure; elsewhere the test prints why it skipped.

mod common;

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};
use symtrust_labels::store::LabelStore;
use symtrust_review::{ReviewServer, ReviewSettings};

/// The browser test folder at the workspace root.
fn browser_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../tests/browser")
}

/// Why the browser test cannot run here, if it cannot.
fn missing_tools() -> Option<String> {
    let chromium = std::env::var("CHROMIUM").unwrap_or_else(|_| "/usr/bin/chromium".into());
    if !Path::new(&chromium).exists() {
        return Some(format!(
            "{chromium} not found (apt-get install -y chromium chromium-driver)"
        ));
    }
    if Command::new("node").arg("--version").output().is_err() {
        return Some("node not found (apt-get install -y nodejs npm)".into());
    }
    if !browser_dir().join("node_modules/playwright-core").is_dir() {
        return Some(format!(
            "playwright-core not installed (npm ci --prefix {})",
            browser_dir().display()
        ));
    }
    None
}

/// Returns false (after a notice) when the tools are missing outside CI.
pub fn tools_or_skip(test: &str) -> bool {
    match missing_tools() {
        None => true,
        Some(why) if std::env::var("CI").as_deref() == Ok("true") => {
            panic!("{test}: {why}; .ci/run installs it")
        }
        Some(why) => {
            eprintln!("NOTICE: {test} skipped: {why}");
            false
        }
    }
}

#[test]
fn review_flow_in_headless_chromium() {
    if !tools_or_skip("review_flow_in_headless_chromium") {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let (site, sheet) = common::fixture_site(dir.path(), 5);
    let store = LabelStore::new(&site);
    let server = ReviewServer::start(site, ReviewSettings::loopback("browser-reviewer")).unwrap();
    let shots = Path::new(env!("CARGO_TARGET_TMPDIR")).join("review-browser");
    let started = Instant::now();
    let mut child = Command::new("node")
        .arg(browser_dir().join("review.mjs"))
        .current_dir(browser_dir())
        .env("REVIEW_URL", server.url())
        .env("REVIEW_SITE", dir.path())
        .env("REVIEW_SHEET", &sheet)
        .env("SCREENSHOT_DIR", &shots)
        .spawn()
        .expect("node starts");
    let status = loop {
        if let Some(s) = child.try_wait().unwrap() {
            break s;
        }
        if started.elapsed() > Duration::from_secs(120) {
            let _ = child.kill();
            panic!("the browser flow took over 120 s");
        }
        std::thread::sleep(Duration::from_millis(100));
    };
    server.stop();
    assert!(
        status.success(),
        "browser flow failed: {status}; screenshots in {}",
        shots.display()
    );
    // The documents on disk after the whole flow: every decision the page made.
    let doc = store.load(&sheet).unwrap();
    let states: Vec<_> = doc
        .symbols
        .iter()
        .filter(|s| s.by == "browser-reviewer")
        .map(|s| (s.id.clone(), s.state))
        .collect();
    assert!(states.len() >= 5, "{states:?}");
    doc.check_structure(&store.path(&sheet)).unwrap();
    eprintln!(
        "browser flow: {:.1} s, screenshots in {}",
        started.elapsed().as_secs_f64(),
        shots.display()
    );
}
