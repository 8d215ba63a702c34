//! The HTML report in a real browser: headless Chromium (Debian's `chromium`)
//! loads `index.html` with no console messages (the page has no script, so any
//! message is a fault) and every image resolves; a screenshot and a printed PDF
//! are kept under the test's target folder for people to look at.
//!
//! Under CI (`CI=true`) a missing Chromium fails the test; elsewhere it is
//! skipped with a notice.

mod common;

use std::path::{Path, PathBuf};
use std::process::Command;
use symtrust_reports::{EvaluationInput, ReportRequest};

const CHROMIUM: &str = "/usr/bin/chromium";

fn chromium(profile: &Path, args: &[String]) -> (String, String) {
    let mut cmd = Command::new(CHROMIUM);
    cmd.args([
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        "--enable-logging=stderr",
        "--v=0",
    ])
    .arg(format!("--user-data-dir={}", profile.display()))
    .args(args);
    let out = cmd.output().expect("chromium runs");
    assert!(
        out.status.success(),
        "chromium failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    (
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// Reads `name="..."` from the first tag holding it.
fn attribute(dom: &str, name: &str) -> Option<String> {
    let k = dom.find(&format!("{name}=\""))? + name.len() + 2;
    Some(dom[k..].split('"').next()?.replace("&quot;", "\""))
}

#[test]
fn report_loads_in_chromium_with_every_image() {
    if !Path::new(CHROMIUM).is_file() {
        if std::env::var("CI").as_deref() == Ok("true") {
            panic!("{CHROMIUM} is missing; .ci/run must install Debian's chromium package");
        }
        eprintln!(
            "notice: {CHROMIUM} not found, browser test skipped (install: apt-get install -y chromium)"
        );
        return;
    }
    let f = common::fixture();
    let keep = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("report-browser");
    let out = keep.join("report");
    let mut req = ReportRequest::new(
        EvaluationInput {
            dir: f.eval_dir.clone(),
            site_root: f.site.clone(),
            title: Some("style-a model on style-a sheets".into()),
        },
        out.clone(),
    );
    req.command_line = vec!["symtrust".into(), "report".into(), "evals/first".into()];
    let rendered = symtrust_reports::render(&req, &|_| {}).unwrap();
    let html = std::fs::read_to_string(&rendered.index_html).unwrap();
    // A copy with a checker script, in the same folder so relative links resolve.
    let probe = r#"<script>
window.addEventListener('load', function () {
  var imgs = Array.prototype.slice.call(document.images);
  var bad = imgs.filter(function (i) { return !(i.complete && i.naturalWidth > 0); });
  document.body.setAttribute('data-images', String(imgs.length));
  document.body.setAttribute('data-broken', String(bad.length));
  document.body.setAttribute('data-svgs', String(document.querySelectorAll('svg').length));
});
</script></body>"#;
    let check = out.join("browser-check.html");
    std::fs::write(&check, html.replace("</body>", probe)).unwrap();
    let profile = tempfile::tempdir().unwrap();
    let url = |p: &Path| format!("file://{}", p.display());
    let (dom, log) = chromium(
        profile.path(),
        &[
            "--virtual-time-budget=10000".into(),
            "--dump-dom".into(),
            url(&check),
        ],
    );
    std::fs::remove_file(&check).unwrap();
    let consoles: Vec<&str> = log.lines().filter(|l| l.contains("CONSOLE")).collect();
    assert!(consoles.is_empty(), "console messages: {consoles:#?}");
    let images: usize = attribute(&dom, "data-images")
        .expect("the probe ran")
        .parse()
        .unwrap();
    let broken: usize = attribute(&dom, "data-broken").unwrap().parse().unwrap();
    let svgs: usize = attribute(&dom, "data-svgs").unwrap().parse().unwrap();
    // Sheets and gallery crops are images; figures and legend swatches are SVG.
    let expected_images = f.record.sheets.len();
    assert!(images >= expected_images, "{images} images");
    assert_eq!(broken, 0, "{broken} of {images} images did not load");
    assert!(svgs >= 6, "{svgs} inline SVG figures");
    // Take the pictures people look at.
    let shot = keep.join("screenshot.png");
    let _ = std::fs::remove_file(&shot);
    chromium(
        profile.path(),
        &[
            "--window-size=1280,3200".into(),
            "--hide-scrollbars".into(),
            format!("--screenshot={}", shot.display()),
            url(&rendered.index_html),
        ],
    );
    assert!(
        std::fs::metadata(&shot).unwrap().len() > 10_000,
        "screenshot taken"
    );
    let pdf = keep.join("printed.pdf");
    let _ = std::fs::remove_file(&pdf);
    chromium(
        profile.path(),
        &[
            "--no-pdf-header-footer".into(),
            format!("--print-to-pdf={}", pdf.display()),
            url(&rendered.index_html),
        ],
    );
    assert!(std::fs::metadata(&pdf).unwrap().len() > 10_000, "printed");
    eprintln!("screenshot: {}\nprinted: {}", shot.display(), pdf.display());
}
