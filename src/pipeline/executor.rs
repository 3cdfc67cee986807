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
    attach_replicate_stores(plan, cache, None);
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

impl<F: FnMut(Event<'_>)> Caching<'_, F> {
    /// The planned step of `step`'s kind (each kind is planned once), so a chain may run a
    /// subset of the plan (`execute_share`).
    fn position(&self, step: &dyn Step) -> usize {
        self.plan.steps.iter().position(|p| p.step.kind() == step.kind()).unwrap_or(self.index)
    }
}

impl<F: FnMut(Event<'_>)> ChainHooks for Caching<'_, F> {
    fn reuse(&mut self, step: &dyn Step) -> Option<Artifact> {
        let kind = step.kind();
        self.index = self.position(step);
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
        self.index = self.position(step);
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
        Ok(())
    }
}

/// `run --shard K/N`: K is 1-based.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ReplicateShard {
    pub k: usize,
    pub of: usize,
}

/// Keeps a step's finished replicates in the cache, each under a key made of the step's kind,
/// version, parameters without the replicate count (so a larger bootstrap reuses a smaller
/// one's replicates) and its inputs' keys, and the replicate's index.
pub struct CachedReplicates {
    cache: Cache,
    base: serde_json::Value,
    shard: Option<ReplicateShard>,
}

impl CachedReplicates {
    fn key(&self, replicate: usize) -> Key {
        Key::of_json(&serde_json::json!({"replicate_of": self.base, "replicate": replicate}))
    }
}

impl super::chain::ReplicateStore for CachedReplicates {
    fn get(&self, replicate: usize) -> Option<Vec<u8>> {
        match self.cache.get(&self.key(replicate)) {
            Lookup::Hit(bytes) => Some(bytes),
            _ => None,
        }
    }

    fn put(&self, replicate: usize, bytes: &[u8]) {
        // A replicate that cannot be stored is only recomputed next time.
        if let Err(e) = self.cache.put(&self.key(replicate), bytes) {
            tracing::warn!(replicate, error = %e, "could not store a replicate in the cache");
        }
    }

    fn owns(&self, replicate: usize) -> bool {
        self.shard.is_none_or(|s| replicate % s.of == s.k - 1)
    }
}

fn attach_replicate_stores(plan: &Plan, cache: &Cache, shard: Option<ReplicateShard>) {
    for p in &plan.steps {
        let mut params = p.params.clone();
        if let serde_json::Value::Object(map) = &mut params {
            map.remove("replicates");
        }
        let base = serde_json::json!({
            "cache_format": super::key::CACHE_FORMAT,
            "kind": p.step.kind(),
            "version": p.step.version(),
            "params": params,
            "inputs": p.input_keys,
        });
        p.step.attach_replicates(std::sync::Arc::new(CachedReplicates { cache: cache.clone(), base, shard }));
    }
}

/// `run --shard K/N`: runs (or reuses) the steps the replicated step needs, then computes this
/// process's share of its replicates into the cache; no other step runs and nothing else is
/// written. Returns the step and (computed, reused), or `None` when no planned step has
/// replicates.
pub fn execute_share(
    plan: &Plan,
    cache: &Cache,
    shard: ReplicateShard,
    progress: &dyn Progress,
    mut observe: impl FnMut(Event<'_>),
) -> Result<Option<(StepKind, usize, usize)>, PipelineError> {
    attach_replicate_stores(plan, cache, Some(shard));
    let mut artifacts = BTreeMap::new();
    for p in &plan.steps {
        let inputs = crate::steps::Inputs { step: p.step.kind(), artifacts: &artifacts, progress };
        // Only a step with replicates answers; its inputs must be there first.
        let needs = p.step.inputs();
        if needs.iter().all(|k| artifacts.contains_key(k))
            && let Some(done) = p.step.compute_share(&inputs)
        {
            let (computed, reused) = done.map_err(PipelineError::Step)?;
            return Ok(Some((p.step.kind(), computed, reused)));
        }
        // Compute (or reuse) this step only if a later step with replicates needs it.
        let needed =
            plan.steps.iter().any(|q| q.step.inputs().contains(&p.step.kind()) && q.params.get("replicates").is_some());
        if needed {
            let mut hooks = Caching {
                plan,
                cache,
                observe: &mut observe,
                index: 0,
                started: Instant::now(),
                hash: None,
                outcomes: Vec::new(),
            };
            run_chain(std::iter::once(p.step.as_ref()), &mut artifacts, &mut hooks, progress)
                .map_err(ChainError::into_pipeline)?;
        }
    }
    Ok(None)
}
