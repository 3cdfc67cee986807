//! Runs a plan: each step is taken from the cache when a sound entry exists under its key,
//! otherwise computed and stored. Central type: `Execution` (artifacts plus per-step outcome).
//! A damaged or undecodable entry is reported through the observer and recomputed.

use std::collections::BTreeMap;
use std::time::Instant;

use super::PipelineError;
use super::cache::{Cache, Lookup};
use super::chain::{ChainError, ChainHooks, Progress, run_chain};
use super::key::Key;
use super::plan::Plan;
use crate::steps::{Artifact, Step, StepKind};

/// What happened to one step.
#[derive(Debug, Clone)]
pub struct Outcome {
    pub kind: StepKind,
    pub key: Key,
    pub cached: bool,
    pub seconds: f64,
    /// BLAKE3 of the artifact's bytes: what `verify` compares.
    pub artifact_hash: Key,
    pub description: String,
}

/// Things the executor tells the user about while it runs.
pub enum Event<'a> {
    Warning(String),
    Done(&'a Outcome),
}

pub struct Execution {
    pub outcomes: Vec<Outcome>,
    pub artifacts: BTreeMap<StepKind, Artifact>,
}

pub fn execute(
    plan: &Plan,
    cache: &Cache,
    progress: &dyn Progress,
    mut observe: impl FnMut(Event<'_>),
) -> Result<Execution, PipelineError> {
    let mut artifacts = BTreeMap::new();
    let mut hooks = Caching {
        plan,
        cache,
        observe: &mut observe,
        index: 0,
        started: Instant::now(),
        hash: None,
        outcomes: Vec::new(),
    };
    run_chain(plan.steps.iter().map(|p| p.step.as_ref()), &mut artifacts, &mut hooks, progress)
        .map_err(ChainError::into_pipeline)?;
    Ok(Execution { outcomes: hooks.outcomes, artifacts })
}

/// The executor's part of the chain: take a sound cache entry, or store what was computed,
/// and record each step's outcome.
struct Caching<'a, F: FnMut(Event<'_>)> {
    plan: &'a Plan,
    cache: &'a Cache,
    observe: &'a mut F,
    /// The plan position of the step being run.
    index: usize,
    started: Instant,
    /// The cached entry's hash, when the current step was taken from the cache.
    hash: Option<Key>,
    outcomes: Vec<Outcome>,
}

impl<F: FnMut(Event<'_>)> ChainHooks for Caching<'_, F> {
    fn reuse(&mut self, step: &dyn Step) -> Option<Artifact> {
        let kind = step.kind();
        let key = self.plan.steps[self.index].key;
        self.started = Instant::now();
        self.hash = None;
        match self.cache.get(&key) {
            Lookup::Hit(bytes) => match Artifact::decode(kind, &bytes) {
                // The bytes go out of scope here, before the next step runs.
                Some(a) => {
                    self.hash = Some(Key::of_bytes(&bytes));
                    Some(a)
                }
                None => {
                    (self.observe)(Event::Warning(format!(
                        "cache entry for `{kind}` ({}) could not be decoded; recomputing",
                        key.short()
                    )));
                    None
                }
            },
            Lookup::Miss => None,
            Lookup::Damaged { path, reason } => {
                (self.observe)(Event::Warning(format!(
                    "cache entry {} for `{kind}` is damaged ({reason}); recomputing",
                    path.display()
                )));
                None
            }
        }
    }

    fn finished(&mut self, step: &dyn Step, artifact: &Artifact, reused: bool) -> Result<(), ChainError> {
        let key = self.plan.steps[self.index].key;
        let artifact_hash = match self.hash.take() {
            Some(hash) if reused => hash,
            _ => self.cache.put_with(&key, |w| artifact.write_to(w)).map_err(|source| PipelineError::Io {
                action: "write cache entry",
                path: self.cache.root().map(|p| p.to_path_buf()).unwrap_or_default(),
                source,
            })?,
        };
        let outcome = Outcome {
            kind: step.kind(),
            key,
            cached: reused,
            // Milliseconds: the manifest records this and the report shows it, and a short
            // decimal reads back exactly, so `verify` re-renders the same report.
            seconds: (self.started.elapsed().as_secs_f64() * 1000.0).round() / 1000.0,
            artifact_hash,
            description: step.describe(artifact),
        };
        tracing::info!(
            step = outcome.kind.name(),
            key = %outcome.key.short(),
            cached = outcome.cached,
            seconds = outcome.seconds,
            "{}",
            outcome.description
        );
        (self.observe)(Event::Done(&outcome));
        self.outcomes.push(outcome);
        self.index += 1;
        Ok(())
    }
}
