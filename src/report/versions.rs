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

/// What is in a report root: the highest number any `v<N>` entry takes (file or folder, sound
/// or not), the newest sound version with its manifest, and the entries that were skipped.
#[derive(Debug, Default)]
pub struct Survey {
    pub highest: u32,
    pub latest: Option<(u32, Manifest)>,
    /// `v<N>` entries that are not a readable version, with the reason, newest first.
    pub skipped: Vec<(String, String)>,
}

/// Looks at every `v<N>` entry under `root`. A run never depends on an earlier version being
/// intact: a version folder whose manifest is missing, unreadable or not a manifest, or a `v<N>`
/// that is a file, is skipped with a reason, and new versions are numbered past every name
/// in use, so nothing is overwritten and no stray entry blocks the next run (issue 13).
pub fn survey(root: &Path) -> Survey {
    let mut numbered: Vec<(u32, String)> = match std::fs::read_dir(root) {
        Ok(entries) => entries
            .filter_map(|e| {
                let name = e.ok()?.file_name().to_str()?.to_string();
                let n = name.strip_prefix('v')?.parse::<u32>().ok()?;
                // `v01` and `v1` would collide as numbers; only canonical names are versions.
                (format!("v{n}") == name).then_some((n, name))
            })
            .collect(),
        Err(_) => Vec::new(),
    };
    numbered.sort_unstable();
    let mut survey = Survey { highest: numbered.last().map_or(0, |(n, _)| *n), ..Survey::default() };
    for (n, name) in numbered.into_iter().rev() {
        match read_manifest(&root.join(&name)) {
            Ok(m) if m.report_version == n => {
                survey.latest = Some((n, m));
                break;
            }
            Ok(m) => survey.skipped.push((name, format!("its manifest says version {}", m.report_version))),
            Err(reason) => survey.skipped.push((name, reason)),
        }
    }
    survey
}

/// The manifest of a version folder, or why there is none.
pub fn read_manifest(dir: &Path) -> Result<Manifest, String> {
    let meta = std::fs::symlink_metadata(dir).map_err(|e| e.to_string())?;
    if !meta.is_dir() {
        return Err("it is not a folder".into());
    }
    let path = dir.join("manifest.json");
    let text =
        crate::fsguard::read_regular_text(&path, crate::fsguard::MAX_TEXT_BYTES).map_err(|e| match e.kind() {
            std::io::ErrorKind::NotFound => "it has no manifest.json".to_string(),
            _ => format!("its manifest.json cannot be read: {e}"),
        })?;
    serde_json::from_str(&text).map_err(|e| format!("its manifest.json is not a construe manifest ({e})"))
}

/// The highest sound version and its manifest.
pub fn latest(root: &Path) -> Option<(u32, Manifest)> {
    survey(root).latest
}

/// Removes staging folders of runs that died before publishing (safe: the caller holds the
/// run lock, so no live run owns them).
pub fn remove_stale_partials(root: &Path) {
    let Ok(entries) = std::fs::read_dir(root) else { return };
    for e in entries.flatten() {
        if e.file_name().to_string_lossy().starts_with(".partial-v") {
            let path = e.path();
            let _ = if path.is_dir() { std::fs::remove_dir_all(&path) } else { std::fs::remove_file(&path) };
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
