//! The audit stamp (`audit.json`, and the last section of every report): which
//! tool, model, crop library, sheets and label documents produced the figures,
//! with the SHA-256 of each file, and [`verify`], which re-hashes them later.
//!
//! Paths of site files are kept relative to their site folder (listed once in
//! [`AuditStamp::sites`]), so a site that moved can be verified with
//! `--site NEW_PLACE`; the first site is the one `--site` replaces.

use crate::error::{ReportError, Result};
use crate::load::{LoadedEvaluation, TRAINING_LOG_FILE};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};
use symtrust_eval::record::{DetectorInfo, METRICS_FILE};
use symtrust_labels::hash::sha256_file;

/// File name of the stamp inside a report folder.
pub const AUDIT_FILE: &str = "audit.json";

/// Version of the `audit.json` layout.
pub const AUDIT_SCHEMA_VERSION: u32 = 1;

/// Weights file name inside a model folder (as `symtrust train` writes it).
pub const WEIGHTS_FILE: &str = "weights.safetensors";

/// Model card file name inside a model folder.
pub const CARD_FILE: &str = "card.json";

/// What an audited file is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Role {
    /// An evaluation record.
    Metrics,
    /// A held-out sheet image.
    Sheet,
    /// A label document.
    Labels,
    /// Model weights.
    Weights,
    /// A model card.
    ModelCard,
    /// A crop library manifest.
    CropManifest,
    /// A model's training log.
    TrainingLog,
    /// A detections file from another system.
    Detections,
    /// A champion-challenger comparison (`comparison.json`).
    Comparison,
}

/// One input file and its hash.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AuditedFile {
    /// What it is.
    pub role: Role,
    /// Index into [`AuditStamp::sites`] when the path is relative to a site.
    pub site: Option<usize>,
    /// The path: relative to the site, or absolute.
    pub path: String,
    /// SHA-256 the figures were made from.
    pub sha256: String,
    /// False when the file could not be found while rendering (the hash is the
    /// one the evaluation recorded, unchecked).
    pub checked_at_render: bool,
}

/// One evaluation the report describes.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AuditedEvaluation {
    /// Title in the report.
    pub title: String,
    /// Evaluation folder, absolute.
    pub dir: String,
    /// Version of symtrust that evaluated.
    pub tool_version: String,
    /// The evaluation's command line.
    pub command_line: Vec<String>,
    /// When it ran.
    pub created: String,
    /// Where it ran.
    pub host: String,
    /// Who ran it.
    pub user: String,
    /// What produced the detections.
    pub detector: DetectorInfo,
    /// Held-out sheets as listed in the site configuration.
    pub held_out: Vec<String>,
}

/// A file of the report itself and its hash.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ReportFile {
    /// Path relative to the report folder.
    pub path: String,
    /// SHA-256.
    pub sha256: String,
}

/// Everything in `audit.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AuditStamp {
    /// [`AUDIT_SCHEMA_VERSION`].
    pub schema_version: u32,
    /// Version of symtrust that wrote the report.
    pub tool_version: String,
    /// When the report was written, RFC 3339 UTC.
    pub created: String,
    /// The report's command line, one argument per entry.
    pub command_line: Vec<String>,
    /// Machine the report was written on.
    pub host: String,
    /// User who wrote it.
    pub user: String,
    /// Site folders, absolute, as found while rendering.
    pub sites: Vec<String>,
    /// The evaluations described, the main one first.
    pub evaluations: Vec<AuditedEvaluation>,
    /// Every input file and its hash.
    pub inputs: Vec<AuditedFile>,
    /// Every file of the report but `audit.json`, and its hash.
    pub report_files: Vec<ReportFile>,
}

/// Host name of this machine.
pub fn host_name() -> String {
    std::fs::read_to_string("/proc/sys/kernel/hostname")
        .map(|s| s.trim().to_string())
        .ok()
        .filter(|s| !s.is_empty())
        .or_else(|| std::env::var("HOSTNAME").ok())
        .unwrap_or_else(|| "unknown".into())
}

fn absolute(p: &Path) -> PathBuf {
    std::fs::canonicalize(p)
        .or_else(|_| std::path::absolute(p))
        .unwrap_or_else(|_| p.to_path_buf())
}

/// Hashes `path` now and, when `expected` is given, insists it matches.
fn hash_checked(path: &Path, expected: Option<&str>) -> Result<String> {
    let found = sha256_file(path)?;
    match expected {
        Some(e) if e != found => Err(ReportError::Changed {
            path: path.to_path_buf(),
            expected: e.to_string(),
            found,
        }),
        _ => Ok(found),
    }
}

/// Collects and checks the inputs of the evaluations: every sheet and label
/// document must still have the hash the evaluation recorded (else
/// [`ReportError::Changed`]); model files are checked when they can be found.
pub fn collect_inputs(evals: &[LoadedEvaluation]) -> Result<(Vec<String>, Vec<AuditedFile>)> {
    let mut sites: Vec<String> = Vec::new();
    let mut files = Vec::new();
    for e in evals {
        let root = absolute(&e.input.site_root);
        let root_s = root.to_string_lossy().into_owned();
        let site = match sites.iter().position(|s| *s == root_s) {
            Some(i) => i,
            None => {
                sites.push(root_s);
                sites.len() - 1
            }
        };
        let metrics = absolute(&e.input.dir.join(METRICS_FILE));
        files.push(AuditedFile {
            role: Role::Metrics,
            site: None,
            path: metrics.to_string_lossy().into_owned(),
            sha256: e.metrics_sha256.clone(),
            checked_at_render: true,
        });
        for s in &e.record.sheets {
            for (role, rel, sha) in [
                (Role::Sheet, &s.file, &s.sheet_sha256),
                (Role::Labels, &s.labels_file, &s.labels_sha256),
            ] {
                let path = root.join(rel);
                if !path.is_file() {
                    return Err(ReportError::input(
                        &path,
                        format!(
                            "sheet {} of the evaluation is not in the site folder {}: pass the site the evaluation read with --site",
                            s.sheet,
                            root.display()
                        ),
                    ));
                }
                hash_checked(&path, Some(sha))?;
                files.push(AuditedFile {
                    role,
                    site: Some(site),
                    path: rel.clone(),
                    sha256: sha.clone(),
                    checked_at_render: true,
                });
            }
        }
        let mut optional = |role: Role, path: PathBuf, recorded: Option<&str>| -> Result<()> {
            let rel = path
                .strip_prefix(&root)
                .ok()
                .map(|p| (Some(site), p.to_string_lossy().into_owned()));
            let (site_ix, shown) = rel.unwrap_or((None, path.to_string_lossy().into_owned()));
            if path.is_file() {
                let sha = hash_checked(&path, recorded)?;
                files.push(AuditedFile {
                    role,
                    site: site_ix,
                    path: shown,
                    sha256: sha,
                    checked_at_render: true,
                });
            } else if let Some(r) = recorded {
                files.push(AuditedFile {
                    role,
                    site: site_ix,
                    path: shown,
                    sha256: r.to_string(),
                    checked_at_render: false,
                });
            }
            Ok(())
        };
        match &e.record.detector {
            DetectorInfo::Model {
                id,
                weights_sha256,
                card_sha256,
                crop_library,
                crop_manifest_sha256,
                ..
            } => {
                let dir = e
                    .model_dir
                    .as_ref()
                    .map(|d| absolute(d))
                    .unwrap_or_else(|| root.join("models").join(id));
                optional(Role::Weights, dir.join(WEIGHTS_FILE), Some(weights_sha256))?;
                optional(Role::ModelCard, dir.join(CARD_FILE), Some(card_sha256))?;
                optional(Role::TrainingLog, dir.join(TRAINING_LOG_FILE), None)?;
                optional(
                    Role::CropManifest,
                    root.join("crops").join(crop_library).join("manifest.json"),
                    Some(crop_manifest_sha256),
                )?;
            }
            DetectorInfo::File { path, sha256, .. } => {
                let p = PathBuf::from(path);
                let p = if p.is_absolute() || p.is_file() {
                    absolute(&p)
                } else {
                    root.join(p)
                };
                optional(Role::Detections, p, Some(sha256))?;
            }
        }
    }
    Ok((sites, files))
}

/// The evaluation part of the stamp.
pub fn audited_evaluation(e: &LoadedEvaluation) -> AuditedEvaluation {
    let st = &e.record.stamp;
    AuditedEvaluation {
        title: e.title.clone(),
        dir: absolute(&e.input.dir).to_string_lossy().into_owned(),
        tool_version: st.tool_version.clone(),
        command_line: st.command_line.clone(),
        created: st.created.clone(),
        host: st.host.clone(),
        user: st.user.clone(),
        detector: e.record.detector.clone(),
        held_out: e.record.held_out.clone(),
    }
}

/// One difference [`verify`] found.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Mismatch {
    /// What the file is (`sheet`, `labels`, ..., or `report` for a file of the report).
    pub role: String,
    /// The file as looked for.
    pub path: String,
    /// SHA-256 in the stamp.
    pub expected: String,
    /// SHA-256 now; `None` when the file is missing.
    pub found: Option<String>,
}

/// What [`verify`] found.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Verification {
    /// Files re-hashed.
    pub checked: usize,
    /// Files whose hash differs or that are missing.
    pub mismatches: Vec<Mismatch>,
    /// Files not found now that were not found while rendering either (their
    /// recorded hash could never be checked).
    pub unchecked: Vec<String>,
}

impl Verification {
    /// True when every checked file matches.
    pub fn all_match(&self) -> bool {
        self.mismatches.is_empty()
    }
}

/// Reads a report's `audit.json`.
pub fn read_stamp(report_dir: &Path) -> Result<AuditStamp> {
    let path = report_dir.join(AUDIT_FILE);
    if !path.is_file() {
        return Err(ReportError::input(
            report_dir,
            format!(
                "not a report folder: it has no {AUDIT_FILE} (write one with `symtrust report EVAL_DIR`)"
            ),
        ));
    }
    let text = std::fs::read_to_string(&path).map_err(|e| ReportError::io(&path, e))?;
    let stamp: AuditStamp = serde_json::from_str(&text)
        .map_err(|e| ReportError::input(&path, format!("not an audit stamp: {e}")))?;
    if stamp.schema_version != AUDIT_SCHEMA_VERSION {
        return Err(ReportError::input(
            &path,
            format!(
                "audit stamp version {}; this symtrust reads version {AUDIT_SCHEMA_VERSION}",
                stamp.schema_version
            ),
        ));
    }
    Ok(stamp)
}

/// Re-hashes every input of the report at `report_dir`, and every file of the
/// report itself. `site` replaces the first recorded site folder (where the
/// main evaluation's sheets and labels live); `None` uses the recorded one.
pub fn verify(report_dir: &Path, site: Option<&Path>) -> Result<Verification> {
    let stamp = read_stamp(report_dir)?;
    let mut v = Verification {
        checked: 0,
        mismatches: Vec::new(),
        unchecked: Vec::new(),
    };
    let mut check = |role: String, path: PathBuf, expected: &str, was_checked: bool| {
        if !path.is_file() {
            if was_checked {
                v.mismatches.push(Mismatch {
                    role,
                    path: path.to_string_lossy().into_owned(),
                    expected: expected.to_string(),
                    found: None,
                });
            } else {
                v.unchecked.push(path.to_string_lossy().into_owned());
            }
            return;
        }
        v.checked += 1;
        let found = sha256_file(&path).ok();
        if found.as_deref() != Some(expected) {
            v.mismatches.push(Mismatch {
                role,
                path: path.to_string_lossy().into_owned(),
                expected: expected.to_string(),
                found,
            });
        }
    };
    for f in &stamp.inputs {
        let path = match f.site {
            Some(0) if site.is_some() => site.unwrap_or(Path::new(".")).join(&f.path),
            Some(i) => PathBuf::from(stamp.sites.get(i).cloned().unwrap_or_default()).join(&f.path),
            None => PathBuf::from(&f.path),
        };
        let role = serde_json::to_value(f.role)
            .ok()
            .and_then(|r| r.as_str().map(str::to_string))
            .unwrap_or_default();
        check(role, path, &f.sha256, f.checked_at_render);
    }
    for f in &stamp.report_files {
        check("report".into(), report_dir.join(&f.path), &f.sha256, true);
    }
    Ok(v)
}
