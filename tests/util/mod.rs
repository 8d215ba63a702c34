//! Helpers for the end-to-end tests: run the built binary in a temporary folder.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::OnceLock;

/// The result of one run of `symtrust`.
pub struct Run {
    /// Exit code.
    pub code: i32,
    /// Standard output.
    pub stdout: String,
    /// Standard error.
    pub stderr: String,
}

impl Run {
    fn from(out: Output) -> Self {
        Self {
            code: out.status.code().unwrap_or(-1),
            stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
            stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
        }
    }

    /// Panics with both streams unless the exit code is `code`.
    pub fn expect_code(self, code: i32) -> Self {
        assert_eq!(
            self.code, code,
            "expected exit {code}, got {}\n--- stdout\n{}\n--- stderr\n{}",
            self.code, self.stdout, self.stderr
        );
        self
    }

    /// Parses standard output as JSON.
    pub fn json(&self) -> serde_json::Value {
        serde_json::from_str(&self.stdout)
            .unwrap_or_else(|e| panic!("stdout is not JSON ({e}):\n{}", self.stdout))
    }
}

/// Runs `symtrust` with `args` in `dir`.
pub fn symtrust(dir: &Path, args: &[&str]) -> Run {
    let out = Command::new(env!("CARGO_BIN_EXE_symtrust"))
        .args(args)
        .current_dir(dir)
        .env("SYMTRUST_USER", "tester")
        .output()
        .expect("the symtrust binary runs");
    Run::from(out)
}

/// A small synthetic site (3 A3 sheets, style a, seed 5), generated once per test
/// binary and copied for each test that needs one.
pub fn synthetic_site(dest: &Path) -> PathBuf {
    static TEMPLATE: OnceLock<tempfile::TempDir> = OnceLock::new();
    let template = TEMPLATE.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        symtrust(
            dir.path(),
            &[
                "synth", "--out", "site", "--sheets", "3", "--seed", "5", "--quiet",
            ],
        )
        .expect_code(0);
        dir
    });
    let site = dest.join("site");
    copy_dir(&template.path().join("site"), &site);
    site
}

/// Recursively copies a folder.
pub fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for entry in std::fs::read_dir(from).unwrap() {
        let entry = entry.unwrap();
        let target = to.join(entry.file_name());
        if entry.file_type().unwrap().is_dir() {
            copy_dir(&entry.path(), &target);
        } else {
            std::fs::copy(entry.path(), &target).unwrap();
        }
    }
}

/// Every file under `dir` with its bytes, sorted by path: a snapshot to prove a
/// failed command changed nothing.
pub fn snapshot(dir: &Path) -> Vec<(PathBuf, Vec<u8>)> {
    let mut out = Vec::new();
    fn walk(d: &Path, out: &mut Vec<(PathBuf, Vec<u8>)>) {
        let mut entries: Vec<_> = std::fs::read_dir(d).unwrap().map(|e| e.unwrap()).collect();
        entries.sort_by_key(|e| e.file_name());
        for e in entries {
            if e.file_type().unwrap().is_dir() {
                walk(&e.path(), out);
            } else {
                out.push((e.path(), std::fs::read(e.path()).unwrap()));
            }
        }
    }
    walk(dir, &mut out);
    out
}

/// A small grayscale drawing: a ring and a line on paper.
pub fn drawing(w: u32, h: u32) -> image::GrayImage {
    image::GrayImage::from_fn(w, h, |x, y| {
        let d = ((x as f64 - 50.0).powi(2) + (y as f64 - 50.0).powi(2)).sqrt();
        image::Luma([if (d - 20.0).abs() < 2.0 || y == h / 2 {
            0
        } else {
            255
        }])
    })
}
