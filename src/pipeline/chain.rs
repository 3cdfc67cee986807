//! The one way steps are run: in order, over an artifact map, each step seeing what the steps
//! before it produced. Central function: `run_chain`. The executor (with the cache, through
//! `ChainHooks`), `resample` (on every bootstrap sample) and `sensitivity` (refits under other
//! reliabilities) all call it, so a step behaves the same wherever it runs.

use std::collections::BTreeMap;

use crate::steps::{Artifact, Inputs, Step, StepError, StepKind};

/// Progress of long steps (bootstrap replicates, prior draws), reported from any thread.
/// Drawing is the caller's business (the CLI draws a bar on a terminal); reporting never
/// changes results.
pub trait Progress: Sync {
    fn start(&self, _step: StepKind, _total: usize) {}
    fn advance(&self, _step: StepKind, _by: usize) {}
    fn finish(&self, _step: StepKind) {}
}

/// Where a step with independent replicates (the bootstrap) keeps each finished replicate, so
/// a rerun, or a run after `--shard K/N` processes, reuses them. The executor provides one
/// backed by the cache (`executor::CachedReplicates`); bytes are the step's own encoding.
pub trait ReplicateStore: Send + Sync {
    fn get(&self, replicate: usize) -> Option<Vec<u8>>;
    fn put(&self, replicate: usize, bytes: &[u8]);
    /// Whether this process computes `replicate` (always, unless sharded).
    fn owns(&self, replicate: usize) -> bool;
}

/// Progress that goes nowhere (tests, `verify`, nested chains).
pub struct NoProgress;

impl Progress for NoProgress {}

/// What the caller of a chain may add around each step.
pub trait ChainHooks {
    /// An artifact for `step` from elsewhere (the cache), or `None` to compute it.
    fn reuse(&mut self, _step: &dyn Step) -> Option<Artifact> {
        None
    }

    /// Called once `step` has its artifact, computed (`reused` false) or not.
    fn finished(&mut self, _step: &dyn Step, _artifact: &Artifact, _reused: bool) -> Result<(), ChainError> {
        Ok(())
    }
}

/// No hooks: every step is computed.
pub struct Compute;

impl ChainHooks for Compute {}

/// Why a chain stopped.
#[derive(Debug, thiserror::Error)]
pub enum ChainError {
    #[error("{kind}: {source}")]
    Step { kind: StepKind, source: StepError },
    #[error(transparent)]
    Hook(#[from] crate::pipeline::PipelineError),
}

impl ChainError {
    /// The step's own error, if a step (not a hook) failed.
    pub fn into_pipeline(self) -> crate::pipeline::PipelineError {
        match self {
            ChainError::Step { source, .. } => crate::pipeline::PipelineError::Step(source),
            ChainError::Hook(e) => e,
        }
    }
}

/// Runs `steps` in order; each step's artifact is added to `artifacts` under its kind.
pub fn run_chain<'s>(
    steps: impl IntoIterator<Item = &'s dyn Step>,
    artifacts: &mut BTreeMap<StepKind, Artifact>,
    hooks: &mut dyn ChainHooks,
    progress: &dyn Progress,
) -> Result<(), ChainError> {
    for step in steps {
        let kind = step.kind();
        // One span per step; its events are debug level, so `construe -v` shows only the
        // executor's one line per planned step, and `-vv` every step of every replicate.
        let _span = tracing::info_span!("step", kind = kind.name()).entered();
        let started = std::time::Instant::now();
        let (artifact, reused) = match hooks.reuse(step) {
            Some(a) => (a, true),
            None => {
                let inputs = Inputs { step: kind, artifacts, progress };
                match step.run(&inputs) {
                    Ok(a) => (a, false),
                    Err(source) => {
                        tracing::debug!(error = %source, "step failed");
                        return Err(ChainError::Step { kind, source });
                    }
                }
            }
        };
        hooks.finished(step, &artifact, reused)?;
        tracing::debug!(seconds = started.elapsed().as_secs_f64(), cached = reused, "step done");
        artifacts.insert(kind, artifact);
    }
    Ok(())
}
