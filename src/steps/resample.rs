//! `resample`: the nonparametric bootstrap of the whole analysis (Efron 1979). Each replicate
//! draws respondents with replacement within each wave and reruns every analysis step after
//! `load` with the spec's settings. Central type: `ResampleOutput`: how often each item is kept,
//! each cluster found, each edge present and oriented, and percentile intervals of effects.
//! Replicate r uses its own seeded stream, and results are collected in replicate order, so
//! the output is identical whatever the thread count.

use std::collections::BTreeMap;

use indexmap::IndexMap;
use rayon::prelude::*;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use super::{Artifact, Inputs, LoadOutput, Step, StepError, StepKind};
use crate::data::Table;
use crate::pipeline::chain::{Compute, NoProgress, ReplicateStore, run_chain};
use crate::spec::types::ResampleSpec;
use construe_stats::bootstrap::{percentile_interval, replicate_rng, stratified_rows};
use construe_stats::search::EdgeKind;

/// Bump when bootstrap results change for the same inputs and parameters.
/// v3: replicates rerun measure and structure with their robust estimators.
pub const VERSION: u32 = 3;

/// How often the bootstrap found two constructs adjacent, and in which direction.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct EdgeFrequency {
    /// One construct (the pair in name order).
    pub from: String,
    /// The other.
    pub to: String,
    /// Share of successful replicates with the two constructs adjacent.
    pub present: f64,
    /// Share oriented `from -> to`, and `to -> from`.
    pub forward: f64,
    /// See `forward`.
    pub backward: f64,
}

/// A bootstrap interval of a path coefficient.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct EffectInterval {
    /// Cause.
    pub from: String,
    /// Effect.
    pub to: String,
    /// Percentile 95% interval of the estimate over the replicates that fitted this path.
    pub ci: [f64; 2],
    /// The same for the standardized coefficient.
    pub std_ci: [f64; 2],
    /// Replicates that fitted this path.
    pub replicates: usize,
}

/// The bootstrap of the whole analysis (replicates resampled within waves).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct ResampleOutput {
    /// Replicates drawn.
    pub replicates: usize,
    /// Seed of the resampling.
    pub seed: u64,
    /// Replicates whose analysis ran through.
    pub succeeded: usize,
    /// Replicates whose analysis failed (non-convergence is counted, not dropped silently).
    pub failed: usize,
    /// The first few reasons.
    pub failures: Vec<String>,
    /// Replicates with a fit that did not converge.
    pub not_converged: usize,
    /// Item -> share of successful replicates that kept it.
    pub items_kept: IndexMap<String, f64>,
    /// Discovered clusters and how often each recurred.
    pub clusters: Vec<ClusterFrequency>,
    /// Adjacent pairs and how often each was found, and oriented which way.
    pub edges: Vec<EdgeFrequency>,
    /// Bootstrap percentile intervals of the paths.
    pub effects: Vec<EffectInterval>,
}

/// A discovered cluster and how often the bootstrap found it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct ClusterFrequency {
    /// The cluster's items.
    pub items: Vec<String>,
    /// Share of replicates that found it.
    pub frequency: f64,
}

pub struct ResampleStep {
    params: ResampleSpec,
    chain: Vec<Box<dyn Step>>,
    /// Where finished replicates are kept (set by the executor; none in nested chains).
    store: std::sync::Mutex<Option<std::sync::Arc<dyn ReplicateStore>>>,
}

impl ResampleStep {
    pub fn new(params: &ResampleSpec, chain: Vec<Box<dyn Step>>) -> ResampleStep {
        ResampleStep { params: params.clone(), chain, store: std::sync::Mutex::new(None) }
    }
}

/// What one replicate found (kept in the replicate store, postcard-encoded, `Err` = failure).
#[derive(Default, Serialize, Deserialize)]
struct Replicate {
    kept: Vec<String>,
    clusters: Vec<Vec<String>>,
    /// (from, to, kind) with from < to for undirected ones.
    edges: Vec<(String, String, EdgeKind)>,
    effects: Vec<(String, String, f64, Option<f64>)>,
    converged: bool,
}

fn resampled(load: &LoadOutput, rows: &[usize]) -> Option<LoadOutput> {
    let table = load.table.as_ref()?;
    // Coded items resample their one-byte codes, not floats.
    let columns = table.columns.iter().map(|c| c.pick(rows)).collect();
    let wave_of_row = rows.iter().map(|&r| table.wave_of_row[r]).collect();
    let table = Table { items: table.items.clone(), waves: table.waves.clone(), wave_of_row, columns };
    Some(LoadOutput { summary: load.summary.clone(), table: Some(table), matrix: None })
}

impl ResampleStep {
    fn store(&self) -> Option<std::sync::Arc<dyn ReplicateStore>> {
        self.store.lock().ok().and_then(|s| s.clone())
    }

    /// Replicate `r` from the store, or computed (and then stored); `true` when computed.
    fn stored_replicate(
        &self,
        load: &LoadOutput,
        r: usize,
        store: Option<&dyn ReplicateStore>,
    ) -> (Result<Replicate, String>, bool) {
        if let Some(found) =
            store.and_then(|s| s.get(r)).and_then(|b| super::read_exact::<Result<Replicate, String>>(&b))
        {
            return (found, false);
        }
        let out = self.replicate(load, r);
        if let Some(s) = store {
            let mut bytes = Vec::new();
            if super::write_exact(&mut bytes, &out).is_ok() {
                s.put(r, &bytes);
            }
        }
        (out, true)
    }

    fn replicate(&self, load: &LoadOutput, r: usize) -> Result<Replicate, String> {
        let table = load.table.as_ref().ok_or("no respondent rows")?;
        let rows = stratified_rows(&table.wave_of_row, table.waves.len(), &mut replicate_rng(self.params.seed, r));
        let sample = resampled(load, &rows).ok_or("no respondent rows")?;
        let mut artifacts = BTreeMap::new();
        artifacts.insert(StepKind::Load, Artifact::Load(Box::new(sample)));
        run_chain(self.chain.iter().map(|s| s.as_ref()), &mut artifacts, &mut Compute, &NoProgress)
            .map_err(|e| e.to_string())?;
        let mut rep = Replicate { converged: true, ..Replicate::default() };
        if let Some(Artifact::Purify(p)) = artifacts.get(&StepKind::Purify) {
            rep.kept = p.constructs.values().flat_map(|c| c.kept.iter().cloned()).collect();
        }
        if let Some(Artifact::Discover(d)) = artifacts.get(&StepKind::Discover) {
            rep.clusters = d
                .clusters
                .iter()
                .map(|c| {
                    let mut c = c.clone();
                    c.sort();
                    c
                })
                .collect();
        }
        if let Some(Artifact::Measure(m)) = artifacts.get(&StepKind::Measure) {
            rep.converged &= m.converged;
        }
        if let Some(Artifact::Structure(s)) = artifacts.get(&StepKind::Structure) {
            rep.edges = s.edges.iter().map(|e| (e.from.clone(), e.to.clone(), e.kind)).collect();
            rep.effects = s.effects.iter().map(|f| (f.from.clone(), f.to.clone(), f.est, f.std)).collect();
            rep.converged &= s.members.iter().all(|m| m.converged);
        }
        Ok(rep)
    }
}

impl Step for ResampleStep {
    fn kind(&self) -> StepKind {
        StepKind::Resample
    }

    fn version(&self) -> u32 {
        VERSION
    }

    fn params(&self) -> Value {
        let chain: Vec<Value> = self
            .chain
            .iter()
            .map(|s| json!({"kind": s.kind(), "version": s.version(), "params": s.params()}))
            .collect();
        json!({"replicates": self.params.replicates, "seed": self.params.seed, "chain": chain})
    }

    fn inputs(&self) -> Vec<StepKind> {
        vec![StepKind::Load]
    }

    fn run(&self, inputs: &Inputs<'_>) -> Result<Artifact, StepError> {
        let load = inputs.load()?;
        let store = self.store();
        inputs.progress.start(StepKind::Resample, self.params.replicates);
        let results: Vec<Result<Replicate, String>> = (0..self.params.replicates)
            .into_par_iter()
            .map(|r| {
                let (out, _) = self.stored_replicate(load, r, store.as_deref());
                inputs.progress.advance(StepKind::Resample, 1);
                out
            })
            .collect();
        inputs.progress.finish(StepKind::Resample);
        let ok: Vec<&Replicate> = results.iter().filter_map(|r| r.as_ref().ok()).collect();
        let failures: Vec<String> = results
            .iter()
            .enumerate()
            .filter_map(|(i, r)| r.as_ref().err().map(|e| format!("replicate {}: {e}", i + 1)))
            .collect();
        let share = |count: usize| if ok.is_empty() { 0.0 } else { count as f64 / ok.len() as f64 };
        let items_kept = load
            .summary
            .items
            .iter()
            .map(|i| (i.name.clone(), share(ok.iter().filter(|r| r.kept.contains(&i.name)).count())))
            .collect();
        let mut cluster_counts: BTreeMap<Vec<String>, usize> = BTreeMap::new();
        for r in &ok {
            for c in &r.clusters {
                *cluster_counts.entry(c.clone()).or_default() += 1;
            }
        }
        let mut clusters: Vec<ClusterFrequency> =
            cluster_counts.into_iter().map(|(items, k)| ClusterFrequency { items, frequency: share(k) }).collect();
        clusters.sort_by(|a, b| b.frequency.total_cmp(&a.frequency).then(a.items.cmp(&b.items)));
        clusters.truncate(20);
        let mut pairs: BTreeMap<(String, String), (usize, usize, usize)> = BTreeMap::new();
        for r in &ok {
            for (from, to, kind) in &r.edges {
                let (a, b) = if from < to { (from.clone(), to.clone()) } else { (to.clone(), from.clone()) };
                let e = pairs.entry((a.clone(), b)).or_default();
                e.0 += 1;
                if kind.is_directed() {
                    if *from == a { e.1 += 1 } else { e.2 += 1 }
                }
            }
        }
        let edges = pairs
            .into_iter()
            .map(|((a, b), (p, f, bk))| EdgeFrequency {
                from: a,
                to: b,
                present: share(p),
                forward: share(f),
                backward: share(bk),
            })
            .collect();
        let mut paths: BTreeMap<(String, String), (Vec<f64>, Vec<f64>)> = BTreeMap::new();
        for r in &ok {
            for (from, to, est, std) in &r.effects {
                let e = paths.entry((from.clone(), to.clone())).or_default();
                e.0.push(*est);
                if let Some(s) = std {
                    e.1.push(*s);
                }
            }
        }
        let effects = paths
            .into_iter()
            .map(|((from, to), (mut est, mut std))| EffectInterval {
                replicates: est.len(),
                ci: percentile_interval(&mut est),
                std_ci: percentile_interval(&mut std),
                from,
                to,
            })
            .collect();
        Ok(Artifact::Resample(Box::new(ResampleOutput {
            replicates: self.params.replicates,
            seed: self.params.seed,
            succeeded: ok.len(),
            failed: failures.len(),
            not_converged: ok.iter().filter(|r| !r.converged).count(),
            failures: failures.into_iter().take(10).collect(),
            items_kept,
            clusters,
            edges,
            effects,
        })))
    }

    fn attach_replicates(&self, store: std::sync::Arc<dyn ReplicateStore>) {
        if let Ok(mut slot) = self.store.lock() {
            *slot = Some(store);
        }
    }

    fn compute_share(&self, inputs: &Inputs<'_>) -> Option<Result<(usize, usize), StepError>> {
        let store = self.store()?;
        let load = match inputs.load() {
            Ok(l) => l,
            Err(e) => return Some(Err(e)),
        };
        let mine: Vec<usize> = (0..self.params.replicates).filter(|&r| store.owns(r)).collect();
        inputs.progress.start(StepKind::Resample, mine.len());
        let computed: usize = mine
            .par_iter()
            .map(|&r| {
                let (_, computed) = self.stored_replicate(load, r, Some(store.as_ref()));
                inputs.progress.advance(StepKind::Resample, 1);
                usize::from(computed)
            })
            .sum();
        inputs.progress.finish(StepKind::Resample);
        Some(Ok((computed, mine.len() - computed)))
    }

    fn describe(&self, artifact: &Artifact) -> String {
        let Artifact::Resample(r) = artifact else { return String::new() };
        format!(
            "{} replicates: {} succeeded, {} failed, {} not converged",
            r.replicates, r.succeeded, r.failed, r.not_converged
        )
    }
}
