//! The champion pointer `champion.json`: which model is in service, since
//! when and by which run. Switching it is one atomic rename; no model folder
//! is ever touched.

use crate::atomic::write_atomic;
use crate::error::{LabelError, Result};
use crate::site::Site;
use serde::{Deserialize, Serialize};
use std::path::PathBuf;

/// File name of the pointer at the site root.
pub const CHAMPION_FILE: &str = "champion.json";

/// The model in service.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Champion {
    /// Model id (folder name under `models/`).
    pub model: String,
    /// When it was promoted, RFC 3339 UTC.
    pub promoted_at: String,
    /// The nightly run (or person) that promoted it.
    pub promoted_by: String,
    /// The model it replaced, if any.
    pub previous: Option<String>,
}

/// Path of the pointer.
pub fn champion_path(site: &Site) -> PathBuf {
    site.root.join(CHAMPION_FILE)
}

/// Reads the pointer; `None` when the site has no champion yet.
pub fn read_champion(site: &Site) -> Result<Option<Champion>> {
    let path = champion_path(site);
    match std::fs::read_to_string(&path) {
        Ok(text) => {
            let c: Champion =
                serde_json::from_str(&text).map_err(|e| LabelError::json(&path, &e))?;
            if !site.models_dir().join(&c.model).is_dir() {
                return Err(LabelError::invalid(
                    &path,
                    format!(
                        "names model {:?}, which is not under {}",
                        c.model,
                        site.models_dir().display()
                    ),
                ));
            }
            Ok(Some(c))
        }
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(None),
        Err(e) => Err(LabelError::io(&path, e)),
    }
}

/// Switches the pointer atomically.
pub fn write_champion(site: &Site, champion: &Champion) -> Result<()> {
    let mut bytes = serde_json::to_vec_pretty(champion).expect("the pointer serialises");
    bytes.push(b'\n');
    write_atomic(&champion_path(site), &bytes)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::site::{ClassSpec, SiteConfig};

    #[test]
    fn round_trip_and_a_dangling_pointer_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let config = SiteConfig::new(
            "t",
            vec![ClassSpec {
                name: "pump".into(),
                description: "a pump".into(),
                nominal_mm: 8.0,
                rotatable: false,
            }],
        );
        let site = Site::create(dir.path(), config).unwrap();
        assert_eq!(read_champion(&site).unwrap(), None);
        let c = Champion {
            model: "m1".into(),
            promoted_at: "2026-12-02T01:00:00Z".into(),
            promoted_by: "nightly run r1".into(),
            previous: None,
        };
        write_champion(&site, &c).unwrap();
        let err = read_champion(&site).unwrap_err();
        assert!(err.to_string().contains("m1"), "{err}");
        std::fs::create_dir_all(site.models_dir().join("m1")).unwrap();
        assert_eq!(read_champion(&site).unwrap(), Some(c));
    }
}
