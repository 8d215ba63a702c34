//! What the nightly retrain keeps in the site folder: the run lock, the
//! champion pointer, the record of accepted labels at the last finished run,
//! and `history.csv`. Every file here is written atomically, so a run killed
//! at any moment leaves each of them either as it was or as it should be.
//!
//! Layout (all under the site root):
//! - `champion.json`: the model in service ([`champion`]);
//! - `nightly/lock`: held (flock) by a running job, with its pid, host and start
//!   time inside ([`lock`]);
//! - `nightly/labels-seen.json`: accepted labels per sheet at the last finished run ([`changes`]);
//! - `nightly/runs/<run id>/`: each run's files, never deleted;
//! - `history.csv`: one row per finished run ([`history`]).

pub mod champion;
pub mod changes;
pub mod history;
pub mod lock;

use crate::site::Site;
use std::path::PathBuf;

/// `<site>/nightly`.
pub fn nightly_dir(site: &Site) -> PathBuf {
    site.root.join("nightly")
}

/// `<site>/nightly/runs`.
pub fn runs_dir(site: &Site) -> PathBuf {
    nightly_dir(site).join("runs")
}
