//! Report versions under `<report.dir>/<slug>/`: numbering, the latest manifest, clean-up of
//! folders left by an interrupted run. Central type: `WriteOutcome`.

use std::path::{Path, PathBuf};

use crate::pipeline::manifest::Manifest;

#[derive(Debug, Clone, PartialEq, Eq)]
pub enum WriteOutcome {
    Written {
        version: u32,
        dir: PathBuf,
    },
    /// The latest version already has these results; nothing was written.
    Unchanged {
        version: u32,
        dir: PathBuf,
    },
}

/// A folder name from a title: lowercase ASCII letters and digits, runs of anything else as `-`.
pub fn slug(title: &str) -> String {
    let mut out = String::new();
    for c in title.chars() {
        if c.is_ascii_alphanumeric() {
            out.push(c.to_ascii_lowercase());
        } else if !out.ends_with('-') && !out.is_empty() {
            out.push('-');
        }
    }
    let out = out.trim_end_matches('-').to_string();
    if out.is_empty() { "untitled".into() } else { out }
}

/// The highest complete version (one whose manifest parses) and its manifest.
pub fn latest(root: &Path) -> Option<(u32, Manifest)> {
    let mut versions: Vec<u32> = std::fs::read_dir(root)
        .ok()?
        .filter_map(|e| e.ok()?.file_name().to_str()?.strip_prefix('v')?.parse().ok())
        .collect();
    versions.sort_unstable();
    versions.into_iter().rev().find_map(|n| {
        let text = std::fs::read_to_string(root.join(format!("v{n}")).join("manifest.json")).ok()?;
        Some((n, serde_json::from_str(&text).ok()?))
    })
}

/// Removes staging folders of runs that died before publishing (safe: the caller holds the
/// run lock, so no live run owns them).
pub fn remove_stale_partials(root: &Path) {
    let Ok(entries) = std::fs::read_dir(root) else { return };
    for e in entries.flatten() {
        if e.file_name().to_string_lossy().starts_with(".partial-v") {
            let _ = std::fs::remove_dir_all(e.path());
        }
    }
}

#[cfg(test)]
mod tests {
    use super::slug;

    #[test]
    fn slugs() {
        assert_eq!(slug("Transit rider panel"), "transit-rider-panel");
        assert_eq!(slug("  Wave 2: α & β!"), "wave-2");
        assert_eq!(slug("!!!"), "untitled");
    }
}
