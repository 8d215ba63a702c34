//! What every command shares: the site folder, `--quiet`, `--json`, progress bars.

use crate::cli::GlobalArgs;
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use std::fs::File;
use std::io::{IsTerminal, Write};
use std::path::PathBuf;
use std::sync::{Arc, Mutex};
use symtrust_labels::site::Site;

/// An error in how the command was called (exit code 2).
#[derive(Debug)]
pub struct UsageError(pub String);

impl std::fmt::Display for UsageError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for UsageError {}

/// Returns a usage error (exit code 2) with this message.
pub fn usage<T>(message: impl Into<String>) -> anyhow::Result<T> {
    Err(UsageError(message.into()).into())
}

/// Options shared by every command.
#[derive(Debug, Clone)]
pub struct Ctx {
    /// The site folder (`--site`, default the current folder).
    pub site_dir: PathBuf,
    /// No progress bars or chatter.
    pub quiet: bool,
    /// Print the result as JSON on standard output.
    pub json: bool,
    /// A log file that receives every line [`Ctx::say`] prints, even when quiet.
    pub log: Option<Arc<Mutex<File>>>,
}

impl Ctx {
    /// Builds the context from the global flags.
    pub fn new(global: &GlobalArgs) -> Self {
        Self {
            site_dir: global.site.clone().unwrap_or_else(|| PathBuf::from(".")),
            quiet: global.quiet,
            json: global.json,
            log: None,
        }
    }

    /// The same context, also appending every message to `path` (created if absent).
    pub fn with_log(&self, path: &std::path::Path) -> anyhow::Result<Self> {
        let file = std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(path)
            .map_err(|e| anyhow::anyhow!("{}: cannot open the log file: {e}", path.display()))?;
        Ok(Self {
            log: Some(Arc::new(Mutex::new(file))),
            ..self.clone()
        })
    }

    /// Opens the site, failing with a clear message when the folder is not one.
    pub fn open_site(&self) -> anyhow::Result<Site> {
        Ok(Site::open(&self.site_dir)?)
    }

    /// Prints a line for people on standard error, unless `--quiet`.
    /// Lines also go to the log file, when there is one, with a UTC time stamp.
    pub fn say(&self, line: impl AsRef<str>) {
        if !self.quiet {
            eprintln!("{}", line.as_ref());
        }
        if let Some(log) = &self.log
            && let Ok(mut f) = log.lock()
        {
            let now = symtrust_labels::clock::now_rfc3339();
            for l in line.as_ref().lines() {
                let _ = writeln!(f, "{now} {l}");
            }
            let _ = f.flush();
        }
    }

    /// A progress bar of `len` steps, hidden when quiet or not on a terminal.
    pub fn progress(&self, len: u64, what: &str) -> ProgressBar {
        let bar = ProgressBar::new(len);
        if self.quiet || !std::io::stderr().is_terminal() {
            bar.set_draw_target(ProgressDrawTarget::hidden());
        }
        bar.set_style(
            ProgressStyle::with_template(
                "{prefix:>12} [{bar:30}] {pos}/{len} {msg} ({elapsed}, eta {eta})",
            )
            .expect("static template")
            .progress_chars("=> "),
        );
        bar.set_prefix(what.to_string());
        bar
    }

    /// Prints a serialisable result as pretty JSON on standard output.
    pub fn print_json<T: serde::Serialize>(&self, value: &T) -> anyhow::Result<()> {
        println!("{}", serde_json::to_string_pretty(value)?);
        Ok(())
    }
}
