//! `symtrust nightly` end to end on the synthetic site: promotion, nothing to
//! do, better labels promoted, damaged labels rejected, and runs killed at
//! several points leaving the champion in place for the next run to recover.

mod util;

use serde_json::Value;
use std::path::Path;
use std::process::Command;
use util::{symtrust, synthetic_site};

const HELD: &str = "fp-a-0002";
const FAST: [&str; 4] = ["--epochs", "2", "--resamples", "100"];

fn nightly(dir: &Path, extra: &[&str]) -> util::Run {
    let mut args = vec!["nightly", "--site", "site", "--quiet", "--json"];
    args.extend_from_slice(&FAST);
    args.extend_from_slice(extra);
    symtrust(dir, &args)
}

fn champion(site: &Path) -> Option<String> {
    let text = std::fs::read_to_string(site.join("champion.json")).ok()?;
    let v: Value = serde_json::from_str(&text).unwrap();
    Some(v["model"].as_str().unwrap().to_string())
}

fn history(site: &Path) -> Vec<csv::StringRecord> {
    let Ok(mut r) = csv::Reader::from_path(site.join("history.csv")) else {
        return Vec::new();
    };
    r.records().map(|r| r.unwrap()).collect()
}

/// Swaps two classes on every training sheet (a damaged label set).
fn swap_classes(site: &Path, a: &str, b: &str) {
    for entry in std::fs::read_dir(site.join("labels")).unwrap() {
        let path = entry.unwrap().path();
        let name = path.file_name().unwrap().to_string_lossy().into_owned();
        if !name.ends_with(".json") || name.starts_with(HELD) {
            continue;
        }
        let mut doc: Value =
            serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
        for s in doc["symbols"].as_array_mut().unwrap() {
            let c = s["class"].as_str().unwrap().to_string();
            if c == a {
                s["class"] = b.into();
            } else if c == b {
                s["class"] = a.into();
            }
        }
        doc["revision"] = (doc["revision"].as_u64().unwrap() + 1).into();
        std::fs::write(&path, serde_json::to_vec_pretty(&doc).unwrap()).unwrap();
    }
}

#[test]
fn promotes_better_labels_and_rejects_damaged_ones() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    // Start from a damaged label set: control valves and field bubbles swapped.
    swap_classes(&site, "control_valve", "bubble_field");
    let first = nightly(tmp.path(), &[]).expect_code(0).json();
    assert_eq!(first["outcome"], "promoted");
    let m1 = champion(&site).expect("the first run promotes");
    assert_eq!(first["challenger"], m1.as_str());

    // Nothing changed: nothing to do, exit 4, nothing written.
    let again = nightly(tmp.path(), &[]).expect_code(4).json();
    assert_eq!(again["outcome"], "nothing_to_do");
    assert_eq!(history(&site).len(), 1);

    // The labels are corrected: the challenger is better and replaces the champion.
    swap_classes(&site, "control_valve", "bubble_field");
    let fixed = nightly(tmp.path(), &[]).expect_code(0).json();
    assert_eq!(fixed["outcome"], "promoted", "{fixed}");
    let m2 = champion(&site).unwrap();
    assert_ne!(m2, m1);
    assert_eq!(fixed["champion_before"], m1.as_str());

    // Damaged again: the challenger is rejected with a reason naming a damaged class.
    swap_classes(&site, "control_valve", "bubble_field");
    let damaged = nightly(tmp.path(), &[]).expect_code(3).json();
    assert_eq!(damaged["outcome"], "rejected");
    let reason = damaged["reason"].as_str().unwrap();
    assert!(
        reason.contains("control_valve") || reason.contains("bubble_field"),
        "{reason}"
    );
    assert_eq!(
        champion(&site).unwrap(),
        m2,
        "a rejected challenger is not promoted"
    );

    // History: one row per run, and no model was deleted.
    let rows = history(&site);
    let outcomes: Vec<&str> = rows.iter().map(|r| &r[9]).collect();
    assert_eq!(outcomes, ["promoted", "promoted", "rejected"]);
    assert_eq!(&rows[0][3], "first run");
    assert_eq!(&rows[1][3], "labels changed");
    for m in [
        &m1,
        &m2,
        &damaged["challenger"].as_str().unwrap().to_string(),
    ] {
        assert!(
            site.join("models")
                .join(m)
                .join("weights.safetensors")
                .is_file()
        );
    }
}

/// Runs nightly with the abort hook at `point`; the process dies by SIGABRT.
fn killed_at(dir: &Path, point: &str) {
    let mut args = vec!["nightly", "--site", "site", "--quiet", "--force"];
    args.extend_from_slice(&FAST);
    let status = Command::new(env!("CARGO_BIN_EXE_symtrust"))
        .args(&args)
        .current_dir(dir)
        .env("SYMTRUST_NIGHTLY_ABORT_AT", point)
        .env("SYMTRUST_USER", "tester")
        .output()
        .unwrap()
        .status;
    assert!(!status.success(), "the run at {point} was meant to die");
}

#[test]
fn killed_runs_leave_the_site_valid_and_the_next_run_recovers() {
    let tmp = tempfile::tempdir().unwrap();
    let site = synthetic_site(tmp.path());
    nightly(tmp.path(), &["--no-hard-negatives"]).expect_code(0);
    let m1 = champion(&site).unwrap();

    // Killed before the decision: nothing switched, nothing recorded.
    for point in ["crops", "trained"] {
        killed_at(tmp.path(), point);
        assert_eq!(champion(&site).unwrap(), m1, "killed at {point}");
        assert_eq!(history(&site).len(), 1, "killed at {point}");
    }

    // A real kill -9 in the middle of training.
    let mut child = Command::new(env!("CARGO_BIN_EXE_symtrust"))
        .args([
            "nightly", "--site", "site", "--force", "--epochs", "50", "--log", "kill.log",
        ])
        .current_dir(tmp.path())
        .env("SYMTRUST_USER", "tester")
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    let log = tmp.path().join("kill.log");
    let deadline = std::time::Instant::now() + std::time::Duration::from_secs(300);
    loop {
        let text = std::fs::read_to_string(&log).unwrap_or_default();
        if text.contains("epoch   1/50") {
            break;
        }
        assert!(
            std::time::Instant::now() < deadline,
            "training never started:\n{text}"
        );
        std::thread::sleep(std::time::Duration::from_millis(200));
    }
    child.kill().unwrap();
    child.wait().unwrap();
    assert_eq!(champion(&site).unwrap(), m1);
    assert_eq!(history(&site).len(), 1);

    // Killed after deciding, and after promoting: the next run finishes the bookkeeping.
    killed_at(tmp.path(), "decided");
    assert_eq!(history(&site).len(), 1);
    killed_at(tmp.path(), "promoted");

    // The site is still valid, and the next run recovers and completes.
    symtrust(
        tmp.path(),
        &["labels", "check", "--site", "site", "--quiet"],
    )
    .expect_code(0);
    let next = symtrust(
        tmp.path(),
        &[
            "nightly",
            "--site",
            "site",
            "--force",
            "--epochs",
            "2",
            "--resamples",
            "100",
        ],
    );
    assert!(
        next.code == 0 || next.code == 3,
        "exit {}: {}",
        next.code,
        next.stderr
    );
    assert!(
        next.stderr.contains("ended without finishing"),
        "the interrupted run is reported:\n{}",
        next.stderr
    );
    assert!(next.stderr.contains("finishing run"), "{}", next.stderr);
    // The three runs killed before deciding were marked abandoned, their files kept.
    let abandoned = std::fs::read_dir(site.join("nightly/runs"))
        .unwrap()
        .filter(|e| e.as_ref().unwrap().path().join("abandoned").is_file())
        .count();
    assert_eq!(abandoned, 3);
    // Rows: the first run, the two decided-then-killed runs, and this one; each once.
    let rows = history(&site);
    assert_eq!(rows.len(), 4, "{rows:?}");
    let mut runs: Vec<&str> = rows.iter().map(|r| &r[0]).collect();
    runs.dedup();
    assert_eq!(runs.len(), 4);
    // The champion is a model that exists, and every model folder is intact.
    let c = champion(&site).unwrap();
    assert!(site.join("models").join(&c).join("card.json").is_file());
    for e in std::fs::read_dir(site.join("models")).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            assert!(p.join("weights.safetensors").is_file(), "{}", p.display());
        }
    }
    // A second concurrent run is refused while one holds the lock.
    let lock = site.join("nightly/lock");
    let held = std::fs::OpenOptions::new().write(true).open(&lock).unwrap();
    held.lock().unwrap();
    let refused = nightly(tmp.path(), &["--force"]);
    assert_eq!(refused.code, 1, "{}", refused.stderr);
    assert!(
        refused.stderr.contains("still running"),
        "{}",
        refused.stderr
    );
}
