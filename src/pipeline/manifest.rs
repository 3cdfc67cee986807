//! The audit trail of one report version: tool, spec, input files, every step's key and
//! artifact hash, whether it was cached, its time, and the seeds. Central type: `Manifest`.
//! `fingerprint` covers only what determines the results (not times, cache hits, the folder
//! shown or the previous version), so an identical rerun is recognised and writes no new version.
//! `files` holds the hash of every other published file, so an edited report shows in `verify`.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use super::executor::Outcome;
use super::key::Key;
use super::plan::Plan;

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ToolInfo {
    pub name: String,
    pub version: String,
    pub commit: Option<String>,
    pub platform: String,
    pub threads: usize,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SpecInfo {
    pub path: String,
    /// BLAKE3 of the spec file's bytes (changes with comments).
    pub file_hash: Key,
    /// BLAKE3 of the parsed spec in canonical JSON (comments and key order do not matter).
    pub content_hash: Key,
    /// The spec's path relative to the report version folder, so `verify` finds it from
    /// anywhere while the repository layout is kept.
    #[serde(default)]
    pub from_report: Option<String>,
    /// The parsed spec as canonical JSON (what `content_hash` hashes), so `diff` can name the
    /// values that changed between versions. Absent in manifests written before it was added.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub content: Option<Value>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InputInfo {
    pub wave: Option<String>,
    pub path: String,
    pub size: u64,
    pub blake3: Key,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StepInfo {
    pub kind: String,
    pub version: u32,
    pub key: Key,
    pub params: Value,
    pub inputs: BTreeMap<String, Key>,
    pub artifact: Key,
    pub cached: bool,
    pub seconds: f64,
}

/// The version a report compares itself with ("changes since the previous version").
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PreviousVersion {
    pub version: u32,
    pub fingerprint: Key,
}

/// The manifest layout `verify` can check; older manifests are refused with a hint to rerun.
pub const MANIFEST_FORMAT: u32 = 2;

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Manifest {
    pub manifest_format: u32,
    pub tool: ToolInfo,
    pub created: String,
    pub report_version: u32,
    pub spec: SpecInfo,
    pub inputs: Vec<InputInfo>,
    pub steps: Vec<StepInfo>,
    pub seeds: BTreeMap<String, u64>,
    pub fingerprint: Key,
    /// The version folder as the run showed it (the `construe verify` line in the report).
    #[serde(default)]
    pub report_dir: String,
    /// The version this one was compared with, if any.
    #[serde(default)]
    pub previous: Option<PreviousVersion>,
    /// BLAKE3 of every other file published in the version folder, by name.
    #[serde(default)]
    pub files: BTreeMap<String, Key>,
}

impl Manifest {
    pub fn new(
        spec: SpecInfo,
        plan: &Plan,
        outcomes: &[Outcome],
        seeds: BTreeMap<String, u64>,
        report_settings: Value,
    ) -> Manifest {
        let inputs: Vec<InputInfo> = plan
            .files
            .iter()
            .map(|f| InputInfo { wave: f.wave.clone(), path: f.shown.clone(), size: f.size, blake3: f.hash })
            .collect();
        let steps: Vec<StepInfo> = plan
            .steps
            .iter()
            .zip(outcomes)
            .map(|(p, o)| StepInfo {
                kind: o.kind.name().to_string(),
                version: p.step.version(),
                key: o.key,
                params: p.params.clone(),
                inputs: p.input_keys.iter().map(|(k, v)| (k.name().to_string(), *v)).collect(),
                artifact: o.artifact_hash,
                cached: o.cached,
                seconds: o.seconds,
            })
            .collect();
        let tool = ToolInfo {
            name: "construe".into(),
            version: env!("CARGO_PKG_VERSION").into(),
            commit: option_env!("CONSTRUE_GIT_COMMIT").map(str::to_string),
            platform: format!("{}-{}", std::env::consts::ARCH, std::env::consts::OS),
            threads: rayon::current_num_threads(),
        };
        let mut manifest = Manifest {
            manifest_format: MANIFEST_FORMAT,
            tool,
            created: now_utc(),
            report_version: 0,
            spec,
            inputs,
            steps,
            seeds,
            fingerprint: Key([0; 32]),
            report_dir: String::new(),
            previous: None,
            files: BTreeMap::new(),
        };
        manifest.fingerprint = fingerprint(&manifest, &report_settings);
        manifest
    }
}

/// What determines a version's results: tool version, parsed spec, report settings, input
/// hashes, each step's key and artifact hash. Not times, cache hits, folders or file hashes.
pub fn fingerprint(m: &Manifest, report_settings: &Value) -> Key {
    Key::of_json(&json!({
        "tool": m.tool.version,
        "spec": m.spec.content_hash,
        "report": report_settings,
        "inputs": m.inputs.iter().map(|i| json!([i.wave, i.blake3])).collect::<Vec<_>>(),
        "steps": m.steps.iter().map(|s| json!([s.kind, s.key, s.artifact])).collect::<Vec<_>>(),
    }))
}

/// The current time as an RFC 3339 UTC timestamp (civil-from-days, Hinnant 2013).
pub fn now_utc() -> String {
    let secs = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).map_or(0, |d| d.as_secs()) as i64;
    let (days, rem) = (secs.div_euclid(86_400), secs.rem_euclid(86_400));
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = doy - (153 * mp + 2) / 5 + 1;
    let month = if mp < 10 { mp + 3 } else { mp - 9 };
    let year = yoe + era * 400 + i64::from(month <= 2);
    format!("{year:04}-{month:02}-{day:02}T{:02}:{:02}:{:02}Z", rem / 3600, rem % 3600 / 60, rem % 60)
}

#[cfg(test)]
mod tests {
    #[test]
    fn timestamp_shape() {
        let t = super::now_utc();
        assert_eq!(t.len(), 20);
        assert!(t.starts_with("20") && t.ends_with('Z'));
    }
}
