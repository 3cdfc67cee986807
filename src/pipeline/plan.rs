//! The plan: the spec's steps in order, each with its content key, computed from parameters
//! and input keys without running anything. Central type: `Plan`. `load`'s inputs are the
//! bytes of its data files, so replacing a wave changes `load` and everything downstream.

use std::collections::BTreeMap;
use std::path::PathBuf;

use serde_json::{Value, json};

use super::PipelineError;
use super::key::{CACHE_FORMAT, Key, hash_file};
use crate::spec::SpecFile;
use crate::steps::{Step, StepKind, build_steps};

/// A data file the plan depends on, by content.
#[derive(Debug, Clone)]
pub struct InputFile {
    pub wave: Option<String>,
    pub path: PathBuf,
    /// The path as written in the spec.
    pub shown: String,
    pub hash: Key,
    pub size: u64,
}

pub struct PlannedStep {
    pub step: Box<dyn Step>,
    pub key: Key,
    pub params: Value,
    pub input_keys: BTreeMap<StepKind, Key>,
}

pub struct Plan {
    pub steps: Vec<PlannedStep>,
    pub files: Vec<InputFile>,
}

impl Plan {
    pub fn new(spec: &SpecFile) -> Result<Plan, PipelineError> {
        let data = &spec.spec.data;
        let mut files = Vec::new();
        let sources =
            data.waves.iter().map(|w| (Some(w.id.clone()), &w.file)).chain(data.matrix.iter().map(|m| (None, &m.file)));
        for (wave, rel) in sources {
            let path = spec.resolve(rel);
            let (hash, size) = hash_file(&path).map_err(|source| PipelineError::Io {
                action: "read data file",
                path: path.clone(),
                source,
            })?;
            files.push(InputFile { wave, path, shown: rel.display().to_string(), hash, size });
        }
        let mut keys: BTreeMap<StepKind, Key> = BTreeMap::new();
        let mut steps = Vec::new();
        for step in build_steps(spec) {
            let params = step.params();
            let input_keys: BTreeMap<StepKind, Key> = step
                .inputs()
                .into_iter()
                .map(|k| {
                    keys.get(&k).map(|key| (k, *key)).ok_or(PipelineError::Internal(format!(
                        "step `{}` planned before its input `{k}`",
                        step.kind()
                    )))
                })
                .collect::<Result<_, _>>()?;
            let file_hashes: Vec<String> = step
                .files()
                .iter()
                .map(|p| files.iter().find(|f| &f.path == p).map(|f| f.hash.hex()).unwrap_or_default())
                .collect();
            let key = Key::of_json(&json!({
                "cache_format": CACHE_FORMAT,
                "kind": step.kind(),
                "version": step.version(),
                "params": params,
                "inputs": input_keys.iter().map(|(k, v)| (k.name().to_string(), Value::String(v.hex()))).collect::<serde_json::Map<_, _>>(),
                "files": file_hashes,
            }));
            keys.insert(step.kind(), key);
            steps.push(PlannedStep { step, key, params, input_keys });
        }
        Ok(Plan { steps, files })
    }
}
