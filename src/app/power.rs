//! `construe power MODEL.yaml SPEC.yaml --n 300,600,1000 --replicates 500 --out DIR`: a design
//! study. For each sample size, draw replicates from the model and run the spec's analyses on
//! each (no resampling or sensitivity unless asked); report how often the truth is recovered.
//! Central function: `power`. Each replicate's summary is cached under a content key (model
//! bytes, the analysis steps with their versions and parameters, n, replicate index, seed), so
//! a rerun or an enlarged study reuses what exists and `--shard K/N` can compute a share of the
//! replicates elsewhere (a cluster's job array) into a shared cache. Replicates run in parallel;
//! each is deterministic and results are gathered in replicate order, so nothing depends on
//! the thread count or on which process computed which replicate.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};

use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};
use thiserror::Error;

use super::Exit;
use crate::data::Column;
use crate::data::table::ColumnBuilder;
use crate::model::{ModelFile, ModelFileError};
use crate::pipeline::cache::{Cache, Lookup};
use crate::pipeline::chain::{Compute, NoProgress, run_chain};
use crate::pipeline::key::{CACHE_FORMAT, Key};
use crate::report::ReportError;
use crate::spec::validate::{ColumnsRead, SourceColumns, validate};
use crate::spec::{Report, SpecFile};
use crate::steps::{Artifact, LoadStep, Step, StepKind, build_steps, read_exact, write_exact};
use construe_stats::bootstrap::replicate_seed;
use construe_stats::search::EdgeKind;
use construe_stats::simulate::{Model, Truth};

/// Bump when a replicate's summary changes for the same inputs (or its encoding changes).
pub const REPLICATE_VERSION: u32 = 1;

/// Most sample sizes in one study.
pub const MAX_SIZES: usize = 20;
/// Smallest sample size: below this no analysis has the rows it needs.
pub const MIN_N: usize = 20;
/// Largest sample size of a study (each replicate holds its table in memory).
pub const MAX_N: usize = 1_000_000;
/// Most replicates per sample size.
pub const MAX_REPLICATES: usize = 100_000;
/// Most replicates over all sizes.
pub const MAX_TOTAL: usize = 1_000_000;
/// Most shards a study is split into.
pub const MAX_SHARDS: usize = 100_000;
/// Failure reasons kept for the report.
const MAX_FAILURES_SHOWN: usize = 5;

#[derive(Debug, Error)]
pub enum PowerError {
    #[error("cannot read model file `{}`\n  caused by: {source}", path.display())]
    ModelRead { path: PathBuf, source: std::io::Error },
    #[error("{0}")]
    Invalid(Report),
    #[error("cannot draw from model `{}`: {reason}", path.display())]
    Truth { path: PathBuf, reason: String },
    #[error("spec `{}` analyses a summary matrix; a design study draws respondent rows", path.display())]
    MatrixSpec { path: PathBuf },
    #[error("spec `{}` asks for no analysis after `load`; a design study has nothing to count", path.display())]
    NoAnalysis { path: PathBuf },
    #[error("`--n {text}`: {reason}")]
    Sizes { text: String, reason: String },
    #[error("`--replicates {text}`: {reason}")]
    Replicates { text: String, reason: String },
    #[error("`--seed {text}`: expected a whole number from 0 to {}", u64::MAX)]
    Seed { text: String },
    #[error("`--target {text}`: expected a share between 0 and 1 (exclusive), such as 0.8")]
    Target { text: String },
    #[error("`--shard {text}`: {reason}")]
    Shard { text: String, reason: String },
    #[error("{sizes} sizes x {replicates} replicates is {total} replicates, more than a study runs (at most {max})")]
    TooMany { sizes: usize, replicates: usize, total: usize, max: usize },
    #[error(
        "{threads} replicates of n = {n} at once ({columns} columns) need about {needed_mb} MB of memory, but only {available_mb} MB are available"
    )]
    NotEnoughMemory { n: usize, columns: usize, threads: usize, needed_mb: u64, available_mb: u64 },
    #[error("cannot store replicate {replicate} of n = {n} in the cache `{}`\n  caused by: {source}", cache.display())]
    Cache { cache: PathBuf, n: usize, replicate: usize, source: std::io::Error },
    #[error(transparent)]
    Report(#[from] ReportError),
}

impl PowerError {
    pub fn exit(&self) -> Exit {
        match self {
            PowerError::Cache { .. } | PowerError::Report(_) => Exit::Failed,
            _ => Exit::Invalid,
        }
    }

    pub fn hint(&self) -> Option<String> {
        match self {
            PowerError::Sizes { .. } => Some(format!(
                "list sample sizes separated by commas, e.g. `--n 300,600,1000` (each {MIN_N} to {MAX_N}, at most {MAX_SIZES})"
            )),
            PowerError::Replicates { .. } => {
                Some(format!("a whole number from 1 to {MAX_REPLICATES}, e.g. `--replicates 500`"))
            }
            PowerError::Shard { .. } => Some(format!(
                "`--shard K/N` computes the K-th of N shares, 1 <= K <= N <= {MAX_SHARDS} (in a Slurm array: `--shard $((SLURM_ARRAY_TASK_ID + 1))/$SLURM_ARRAY_TASK_COUNT`)"
            )),
            PowerError::Target { .. } => {
                Some("the share of replicates that must recover the structure, e.g. `--target 0.9` for 90%".into())
            }
            PowerError::Seed { .. } => Some("any whole number; the same seed gives the same study".into()),
            PowerError::TooMany { .. } => Some("use fewer sizes or replicates, or run several studies".into()),
            PowerError::NotEnoughMemory { .. } => Some(
                "use smaller sizes, or fewer threads at once (RAYON_NUM_THREADS=1; results do not depend on it)".into(),
            ),
            PowerError::MatrixSpec { .. } => Some("give the spec `data.waves`; the waves' files need not exist".into()),
            _ => None,
        }
    }
}

/// `--shard K/N`: this process computes replicate g (0-based, over all sizes in order) when
/// g % N == K - 1.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Shard {
    pub k: usize,
    pub of: usize,
}

impl Shard {
    pub fn parse(text: &str) -> Result<Shard, PowerError> {
        let bad = |reason: &str| PowerError::Shard { text: text.into(), reason: reason.into() };
        let (k, n) = text.trim().split_once('/').ok_or_else(|| bad("expected K/N, such as 2/4"))?;
        let k: usize = k.trim().parse().map_err(|_| bad("K is not a whole number"))?;
        let n: usize = n.trim().parse().map_err(|_| bad("N is not a whole number"))?;
        if n == 0 || n > MAX_SHARDS {
            return Err(bad(&format!("N must be 1 to {MAX_SHARDS}")));
        }
        if k == 0 || k > n {
            return Err(bad(&format!("K must be 1 to N = {n}")));
        }
        Ok(Shard { k, of: n })
    }

    fn owns(&self, global: usize) -> bool {
        global % self.of == self.k - 1
    }
}

/// Parses `--n 300,600,1000`: sorted ascending, duplicates removed, each bounded.
pub fn parse_sizes(text: &str) -> Result<Vec<usize>, PowerError> {
    let bad = |reason: String| PowerError::Sizes { text: text.into(), reason };
    let mut sizes = Vec::new();
    for part in text.split(',') {
        let part = part.trim();
        if part.is_empty() {
            return Err(bad("an empty size between commas".into()));
        }
        let n: usize = part.replace('_', "").parse().map_err(|_| bad(format!("`{part}` is not a whole number")))?;
        if !(MIN_N..=MAX_N).contains(&n) {
            return Err(bad(format!("{n} is outside {MIN_N} to {MAX_N}")));
        }
        sizes.push(n);
    }
    sizes.sort_unstable();
    sizes.dedup();
    if sizes.len() > MAX_SIZES {
        return Err(bad(format!("{} sizes, at most {MAX_SIZES}", sizes.len())));
    }
    Ok(sizes)
}

pub fn parse_replicates(text: &str) -> Result<usize, PowerError> {
    let bad = |reason: &str| PowerError::Replicates { text: text.into(), reason: reason.into() };
    let r: usize = text.trim().replace('_', "").parse().map_err(|_| bad("not a whole number"))?;
    if r == 0 || r > MAX_REPLICATES {
        return Err(bad(&format!("must be 1 to {MAX_REPLICATES}")));
    }
    Ok(r)
}

pub fn parse_target(text: &str) -> Result<f64, PowerError> {
    match text.trim().parse::<f64>() {
        Ok(t) if t > 0.0 && t < 1.0 => Ok(t),
        _ => Err(PowerError::Target { text: text.into() }),
    }
}

/// Replicates done so far, reported from any thread (the CLI draws a bar or prints lines).
pub trait StudyProgress: Sync {
    fn start(&self, _total: usize) {}
    fn advance(&self, _by: usize) {}
    fn finish(&self) {}
}

pub struct NoStudyProgress;

impl StudyProgress for NoStudyProgress {}

pub struct PowerRequest<'a> {
    pub model: &'a Path,
    pub spec: &'a Path,
    pub sizes: Vec<usize>,
    pub replicates: usize,
    /// Default: the model's `seed`.
    pub seed: Option<u64>,
    pub out: &'a Path,
    pub target: f64,
    pub shard: Option<Shard>,
    pub with_resampling: bool,
    pub with_sensitivity: bool,
}

/// What a study did.
pub struct PowerSummary {
    pub computed: usize,
    pub reused: usize,
    /// `None` for a shard (which writes no report).
    pub outcome: Option<crate::report::WriteOutcome>,
    pub warnings: Vec<String>,
    /// Seconds (summed over threads) computed replicates spent drawing and loading their data,
    /// and in the analysis steps.
    pub drawing_seconds: f64,
    pub analysis_seconds: f64,
}

/// What one replicate's analysis found: the cached unit of a study.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ReplicateSummary {
    /// Why the replicate's draw or analysis failed (then nothing else is filled).
    pub failure: Option<String>,
    /// Whether every fit converged.
    pub converged: bool,
    /// Whether `purify` ran; then `kept` lists the items it kept and `dropped` those it dropped.
    pub purified: bool,
    pub kept: Vec<String>,
    pub dropped: Vec<String>,
    /// Whether `structure` ran; then `edges` lists what it found.
    pub searched: bool,
    pub edges: Vec<(String, String, EdgeKind)>,
    pub effects: Vec<EffectEstimate>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EffectEstimate {
    pub from: String,
    pub to: String,
    pub est: f64,
    pub se: Option<f64>,
    pub ci: [Option<f64>; 2],
    pub std: Option<f64>,
}

/// Time spent in computed replicates (summed over threads), in nanoseconds: drawing and
/// loading the data, and the analysis steps. Reported, never part of a result.
#[derive(Default)]
struct Timing {
    drawing: std::sync::atomic::AtomicU64,
    analysis: std::sync::atomic::AtomicU64,
}

impl Timing {
    fn add(&self, slot: &std::sync::atomic::AtomicU64, d: std::time::Duration) {
        slot.fetch_add(u64::try_from(d.as_nanos()).unwrap_or(u64::MAX), Ordering::Relaxed);
    }
}

/// Everything fixed for a study: the model, its truth, the steps, and how keys are made.
struct Study {
    model: Model,
    truth: Truth,
    model_hash: Key,
    load: LoadStep,
    chain: Vec<Box<dyn Step>>,
    /// For each spec item, its column in the drawn table.
    columns: Vec<usize>,
    /// Columns the model draws.
    model_columns: usize,
    seed: u64,
}

impl Study {
    fn key(&self, n: usize, replicate: usize) -> Key {
        let chain: Vec<Value> = self
            .chain
            .iter()
            .map(|s| json!({"kind": s.kind(), "version": s.version(), "params": s.params()}))
            .collect();
        Key::of_json(&json!({
            "cache_format": CACHE_FORMAT,
            "kind": "power_replicate",
            "version": REPLICATE_VERSION,
            "model": self.model_hash,
            "load": {"version": self.load.version(), "params": self.load.params()},
            "chain": chain,
            "n": n,
            "replicate": replicate,
            "seed": self.seed,
        }))
    }

    fn compute(&self, n: usize, replicate: usize, timing: &Timing) -> ReplicateSummary {
        match self.analyse(n, replicate, timing) {
            Ok(s) => s,
            Err(reason) => ReplicateSummary {
                failure: Some(reason),
                converged: false,
                purified: false,
                kept: Vec::new(),
                dropped: Vec::new(),
                searched: false,
                edges: Vec::new(),
                effects: Vec::new(),
            },
        }
    }

    fn analyse(&self, n: usize, replicate: usize, timing: &Timing) -> Result<ReplicateSummary, String> {
        let started = std::time::Instant::now();
        let table = self.model.draw(n, replicate_seed(self.seed, n as u64, replicate)).map_err(|e| e.to_string())?;
        let columns: Vec<Column> = self
            .columns
            .iter()
            .map(|&c| {
                let mut b = ColumnBuilder::new();
                table.values[c].iter().for_each(|v| b.push(v.unwrap_or(f64::NAN)));
                b.finish()
            })
            .collect();
        drop(table);
        let load = self.load.load_drawn("simulated", "simulated replicate", columns).map_err(|e| e.to_string())?;
        let mut artifacts = BTreeMap::new();
        artifacts.insert(StepKind::Load, Artifact::Load(Box::new(load)));
        let drawn = std::time::Instant::now();
        timing.add(&timing.drawing, drawn - started);
        let chain = run_chain(self.chain.iter().map(|s| s.as_ref()), &mut artifacts, &mut Compute, &NoProgress);
        timing.add(&timing.analysis, drawn.elapsed());
        chain.map_err(|e| e.to_string())?;
        let mut out = ReplicateSummary {
            failure: None,
            converged: true,
            purified: false,
            kept: Vec::new(),
            dropped: Vec::new(),
            searched: false,
            edges: Vec::new(),
            effects: Vec::new(),
        };
        if let Some(Artifact::Purify(p)) = artifacts.get(&StepKind::Purify) {
            out.purified = true;
            out.kept = p.constructs.values().flat_map(|c| c.kept.iter().cloned()).collect();
            out.dropped = p.constructs.values().flat_map(|c| c.dropped.iter().map(|d| d.item.clone())).collect();
        }
        if let Some(Artifact::Measure(m)) = artifacts.get(&StepKind::Measure) {
            out.converged &= m.converged;
        }
        if let Some(Artifact::Structure(s)) = artifacts.get(&StepKind::Structure) {
            out.searched = true;
            out.edges = s.edges.iter().map(|e| (e.from.clone(), e.to.clone(), e.kind)).collect();
            out.effects = s
                .effects
                .iter()
                .map(|f| EffectEstimate {
                    from: f.from.clone(),
                    to: f.to.clone(),
                    est: f.est,
                    se: f.se,
                    ci: f.ci,
                    std: f.std,
                })
                .collect();
            out.converged &= s.members.iter().all(|m| m.converged);
        }
        Ok(out)
    }
}

/// Bytes held per drawn cell while a replicate is drawn and loaded (the drawn value as
/// `Option<f64>`, the latent draws behind it, the table's column); as for `simulate`.
const BYTES_PER_CELL: u64 = 48;

/// Refuses a study whose largest replicates, one per thread at once, would not fit in memory.
fn check_memory(n: usize, columns: usize) -> Result<(), PowerError> {
    let threads = rayon::current_num_threads().max(1);
    let needed =
        (n as u64).saturating_mul(columns.max(1) as u64).saturating_mul(BYTES_PER_CELL).saturating_mul(threads as u64);
    let available = std::fs::read_to_string("/proc/meminfo").ok().and_then(|text| {
        let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?.to_string();
        line.split_whitespace().nth(1)?.parse::<u64>().ok().map(|kb| kb * 1024)
    });
    match available {
        Some(available) if needed > available => Err(PowerError::NotEnoughMemory {
            n,
            columns,
            threads,
            needed_mb: needed >> 20,
            available_mb: available >> 20,
        }),
        _ => Ok(()),
    }
}

fn read_model(path: &Path) -> Result<(ModelFile, Model), PowerError> {
    let file = ModelFile::read(path).map_err(|e| match e {
        ModelFileError::Read { path, source } => PowerError::ModelRead { path, source },
        ModelFileError::Invalid(report) => PowerError::Invalid(report),
    })?;
    let model = file.check().map_err(PowerError::Invalid)?;
    Ok((file, model))
}

/// Reads and checks the spec against the model's columns (in place of its data files, which
/// a study does not need).
fn read_spec(path: &Path, columns: &[String]) -> Result<SpecFile, PowerError> {
    let spec = SpecFile::read(path).map_err(PowerError::Invalid)?;
    if spec.spec.data.matrix.is_some() {
        return Err(PowerError::MatrixSpec { path: path.into() });
    }
    let sources: Vec<SourceColumns> = spec
        .spec
        .data
        .waves
        .iter()
        .enumerate()
        .map(|(index, w)| SourceColumns {
            wave: Some(w.id.clone()),
            index,
            path: spec.resolve(&w.file),
            columns: ColumnsRead::Columns(columns.to_vec()),
        })
        .collect();
    let mut findings = spec.early.clone();
    findings.extend(validate(&spec.spec, &sources));
    let report = spec.diagnose(findings);
    if report.has_errors() {
        return Err(PowerError::Invalid(report));
    }
    Ok(spec)
}

fn setup(req: &PowerRequest<'_>, warnings: &mut Vec<String>) -> Result<(Study, SpecFile, ModelFile), PowerError> {
    let (file, model) = read_model(req.model)?;
    let truth = model.truth().map_err(|e| PowerError::Truth { path: req.model.into(), reason: e.to_string() })?;
    let names =
        model.draw(MIN_N, 0).map_err(|e| PowerError::Truth { path: req.model.into(), reason: e.to_string() })?.columns;
    let spec = read_spec(req.spec, &names)?;
    let a = &spec.spec.analyses;
    if req.with_resampling && a.resample.is_none() {
        warnings
            .push("`--with-resampling`: the spec has no `analyses.resample`, so there is nothing to resample".into());
    }
    if req.with_sensitivity && a.sensitivity.is_none() {
        warnings.push("`--with-sensitivity`: the spec has no `analyses.sensitivity`".into());
    }
    let chain: Vec<Box<dyn Step>> = build_steps(&spec)
        .into_iter()
        .filter(|s| match s.kind() {
            // A drawn replicate is one wave with no grouping or id column to compare.
            StepKind::Load | StepKind::Invariance => false,
            StepKind::Resample => req.with_resampling,
            StepKind::Sensitivity => req.with_sensitivity,
            _ => true,
        })
        .collect();
    if chain.is_empty() {
        return Err(PowerError::NoAnalysis { path: req.spec.into() });
    }
    let load = LoadStep::from_spec(&spec);
    let columns =
        load.items().iter().map(|i| names.iter().position(|c| c == i)).collect::<Option<Vec<usize>>>().ok_or_else(
            || PowerError::Truth { path: req.model.into(), reason: "an item of the spec is not drawn".into() },
        )?;
    let study = Study {
        model,
        truth,
        model_hash: Key::of_bytes(file.source.as_bytes()),
        load,
        chain,
        columns,
        model_columns: names.len(),
        seed: req.seed.unwrap_or(file.model.seed),
    };
    Ok((study, spec, file))
}

/// Runs (or completes from the cache) a design study; unsharded, writes a report version
/// under `req.out`.
pub fn power(req: &PowerRequest<'_>, cache: &Cache, progress: &dyn StudyProgress) -> Result<PowerSummary, PowerError> {
    let (summary, study) = compute_study(req, cache, progress)?;
    match study {
        Some((info, table)) => {
            let outcome = crate::report::power::write_study(req.out, &info, &table)?;
            Ok(PowerSummary { outcome: Some(outcome), ..summary })
        }
        None => Ok(summary),
    }
}

/// Computes (or finds in the cache) the request's replicates; unsharded, also aggregates them.
fn compute_study(
    req: &PowerRequest<'_>,
    cache: &Cache,
    progress: &dyn StudyProgress,
) -> Result<(PowerSummary, Option<(StudyInfo, PowerTable)>), PowerError> {
    let total = req.sizes.len() * req.replicates;
    if total > MAX_TOTAL {
        return Err(PowerError::TooMany { sizes: req.sizes.len(), replicates: req.replicates, total, max: MAX_TOTAL });
    }
    let mut warnings = Vec::new();
    let (study, spec, file) = setup(req, &mut warnings)?;
    check_memory(req.sizes.last().copied().unwrap_or(0), study.model_columns)?;
    let jobs: Vec<(usize, usize)> = req
        .sizes
        .iter()
        .flat_map(|&n| (0..req.replicates).map(move |r| (n, r)))
        .enumerate()
        .filter(|(g, _)| req.shard.is_none_or(|s| s.owns(*g)))
        .map(|(_, job)| job)
        .collect();
    let computed = AtomicUsize::new(0);
    let timing = Timing::default();
    let damaged = std::sync::Mutex::new(Vec::new());
    progress.start(jobs.len());
    let results: Vec<Result<(Key, ReplicateSummary), PowerError>> = jobs
        .par_iter()
        .map(|&(n, r)| {
            let key = study.key(n, r);
            let cached = match cache.get(&key) {
                Lookup::Hit(bytes) => read_exact::<ReplicateSummary>(&bytes),
                Lookup::Damaged { path, reason } => {
                    if let Ok(mut d) = damaged.lock() {
                        d.push(format!("damaged cache entry `{}` recomputed: {reason}", path.display()));
                    }
                    None
                }
                Lookup::Miss => None,
            };
            let summary = match cached {
                Some(s) => {
                    tracing::info!(n, replicate = r, "replicate reused");
                    s
                }
                None => {
                    let s = study.compute(n, r, &timing);
                    let mut bytes = Vec::new();
                    write_exact(&mut bytes, &s).map_err(|source| PowerError::Cache {
                        cache: cache.root().unwrap_or(Path::new("")).into(),
                        n,
                        replicate: r,
                        source,
                    })?;
                    cache.put(&key, &bytes).map_err(|source| PowerError::Cache {
                        cache: cache.root().unwrap_or(Path::new("")).into(),
                        n,
                        replicate: r,
                        source,
                    })?;
                    computed.fetch_add(1, Ordering::Relaxed);
                    tracing::info!(n, replicate = r, failed = s.failure.is_some(), "replicate computed");
                    s
                }
            };
            progress.advance(1);
            Ok((key, summary))
        })
        .collect();
    progress.finish();
    warnings.extend(damaged.into_inner().unwrap_or_default());
    let results = results.into_iter().collect::<Result<Vec<_>, _>>()?;
    let computed = computed.into_inner();
    let reused = results.len() - computed;
    let seconds = |slot: &std::sync::atomic::AtomicU64| slot.load(Ordering::Relaxed) as f64 * 1e-9;
    let (drawing_seconds, analysis_seconds) = (seconds(&timing.drawing), seconds(&timing.analysis));
    let summary = PowerSummary { computed, reused, outcome: None, warnings, drawing_seconds, analysis_seconds };
    if req.shard.is_some() {
        return Ok((summary, None));
    }
    let summaries: Vec<&ReplicateSummary> = results.iter().map(|(_, s)| s).collect();
    let table = aggregate(&study.truth, &req.sizes, req.replicates, &summaries, req.target, &study.load.items());
    let mut digest = blake3::Hasher::new();
    for (key, s) in &results {
        let mut bytes = Vec::new();
        let _ = write_exact(&mut bytes, s);
        digest.update(&key.0);
        digest.update(blake3::hash(&bytes).as_bytes());
    }
    let study_info = StudyInfo {
        model_path: req.model.display().to_string(),
        model_hash: study.model_hash,
        spec_path: req.spec.display().to_string(),
        spec_content: super::run::spec_info(&spec).content_hash,
        title: file.model.title.clone().unwrap_or_else(|| spec.spec.title.clone()),
        seed: study.seed,
        chain: study.chain.iter().map(|s| s.kind().name().to_string()).collect(),
        replicates_digest: Key(*digest.finalize().as_bytes()),
        with_resampling: req.with_resampling,
        with_sensitivity: req.with_sensitivity,
        model_from_report: None,
        spec_from_report: None,
    };
    Ok((summary, Some((study_info, table))))
}

/// `construe verify` of a study version: recomputes every replicate without the cache from the
/// model and spec the manifest names (found relative to the version folder first, then as
/// recorded), checks the inputs' hashes and the fingerprint, renders every file again and
/// compares bytes.
pub fn verify_study(
    dir: &Path,
    manifest: &crate::report::power::PowerManifest,
) -> Result<super::verify::Verification, PowerError> {
    use super::verify::Check;
    let locate = |record: &crate::report::power::InputRecord| -> PathBuf {
        record
            .from_report
            .as_ref()
            .map(|r| crate::spec::lexical_clean(&dir.join(r)))
            .filter(|p| p.exists())
            .unwrap_or_else(|| PathBuf::from(&record.path))
    };
    let (model, spec) = (locate(&manifest.model), locate(&manifest.spec));
    let s = &manifest.settings;
    let sizes: Vec<usize> = s["sizes"]
        .as_array()
        .map(|a| a.iter().filter_map(|v| v.as_u64()).map(|v| v as usize).collect())
        .unwrap_or_default();
    let flag = |k: &str| s[k].as_bool().unwrap_or(false);
    let req = PowerRequest {
        model: &model,
        spec: &spec,
        sizes,
        replicates: s["replicates"].as_u64().unwrap_or(0) as usize,
        seed: s["seed"].as_u64(),
        out: dir,
        target: s["target"].as_f64().unwrap_or(0.8),
        shard: None,
        with_resampling: flag("with_resampling"),
        with_sensitivity: flag("with_sensitivity"),
    };
    let mut checks = Vec::new();
    let mut check = |what: &str, ok: bool, detail: String| checks.push(Check { what: what.into(), ok, detail });
    let (_, study) = compute_study(&req, &Cache::disabled(), &NoStudyProgress)?;
    let Some((mut info, table)) = study else { return Ok(super::verify::Verification { checks }) };
    check(
        "model",
        info.model_hash == manifest.model.hash,
        format!("{} ({})", model.display(), info.model_hash.short()),
    );
    check(
        "spec",
        info.spec_content == manifest.spec.hash,
        format!("{} ({})", spec.display(), info.spec_content.short()),
    );
    check(
        "replicates",
        info.replicates_digest == manifest.replicates_digest,
        format!("{} recomputed without the cache", table.sizes.len() * table.replicates),
    );
    info.model_path = manifest.model.path.clone();
    info.spec_path = manifest.spec.path.clone();
    let fingerprint = crate::report::power::fingerprint(&info, &table);
    check("fingerprint", fingerprint == manifest.fingerprint, fingerprint.short());
    let files = crate::report::power::render_study(&info, &table, manifest)?;
    for (name, text) in &files {
        let on_disk = std::fs::read(dir.join(name)).ok();
        let recorded = manifest.files.get(*name);
        let ok = on_disk.as_deref() == Some(text.as_bytes()) && recorded == Some(&Key::of_bytes(text.as_bytes()));
        let detail = match on_disk {
            None => "missing".into(),
            Some(_) if ok => "identical".into(),
            Some(_) => "differs from the recomputed file".into(),
        };
        check(name, ok, detail);
    }
    for name in manifest.files.keys().filter(|k| files.iter().all(|(n, _)| n != *k)) {
        check(name, false, "listed in the manifest but not produced by this study".into());
    }
    Ok(super::verify::Verification { checks })
}

/// What the report and manifest say about the study's inputs.
pub struct StudyInfo {
    pub model_path: String,
    pub model_hash: Key,
    pub spec_path: String,
    pub spec_content: Key,
    pub title: String,
    pub seed: u64,
    pub chain: Vec<String>,
    /// BLAKE3 over every replicate's key and summary bytes, in replicate order.
    pub replicates_digest: Key,
    pub with_resampling: bool,
    pub with_sensitivity: bool,
    /// The model and spec relative to the version folder (set when the folder is known).
    pub model_from_report: Option<String>,
    pub spec_from_report: Option<String>,
}

/// A share with its Monte Carlo standard error, sqrt(p (1 - p) / m).
fn share(count: usize, of: usize) -> (Option<f64>, Option<f64>) {
    if of == 0 {
        return (None, None);
    }
    let p = count as f64 / of as f64;
    (Some(p), Some((p * (1.0 - p) / of as f64).sqrt()))
}

/// The study's results: `power` in results.json.
#[derive(Debug, Clone, Serialize)]
pub struct PowerTable {
    /// Sample sizes, ascending.
    pub sizes: Vec<usize>,
    /// Replicates per size.
    pub replicates: usize,
    /// The recovery target (share of replicates) for `min_n`.
    pub target: f64,
    /// Per size: replicates whose draw and analysis ran through.
    pub succeeded: Vec<usize>,
    /// Per size: replicates that failed (they count as recovering nothing).
    pub failed: Vec<usize>,
    /// Per size: replicates with a fit that did not converge.
    pub not_converged: Vec<usize>,
    /// The first few failure reasons.
    pub failures: Vec<String>,
    /// Every true path: share of all replicates with the two constructs adjacent (`found`) and
    /// with the edge directed as in the model (`oriented`), each with its Monte Carlo SE.
    pub edges: Vec<EdgePower>,
    /// Per size: share of replicates that found every true adjacency, and oriented every one.
    pub all_found: Vec<Option<f64>>,
    pub all_found_se: Vec<Option<f64>>,
    pub all_oriented: Vec<Option<f64>>,
    pub all_oriented_se: Vec<Option<f64>>,
    /// Per size: share of replicates with at least one edge the model does not have.
    pub any_false_edge: Vec<Option<f64>>,
    pub any_false_edge_se: Vec<Option<f64>>,
    /// Every edge not in the model that some replicate found, with its share per size.
    pub false_edges: Vec<FalseEdge>,
    /// Per item (when `purify` ran): share of successful replicates that kept it.
    pub items: Vec<ItemPower>,
    /// Per planted impurity (an item with a cross loading or correlated error): share of
    /// successful replicates that dropped it.
    pub impurities: Vec<ImpurityPower>,
    /// Per true path: bias, RMSE and 95% interval coverage of its estimate, over the
    /// replicates whose fitted model has the path (`estimated`).
    pub effects: Vec<EffectPower>,
    /// Smallest size at which every true adjacency was found (and oriented) in at least
    /// `target` of the replicates; `null` when no size reached it.
    pub min_n_all_found: Option<usize>,
    pub min_n_all_oriented: Option<usize>,
}

#[derive(Debug, Clone, Serialize)]
pub struct EdgePower {
    pub from: String,
    pub to: String,
    /// The model's standardized coefficient.
    pub true_std: f64,
    pub found: Vec<Option<f64>>,
    pub found_se: Vec<Option<f64>>,
    pub oriented: Vec<Option<f64>>,
    pub oriented_se: Vec<Option<f64>>,
    /// Smallest size where `found` (`oriented`) reaches the target.
    pub min_n_found: Option<usize>,
    pub min_n_oriented: Option<usize>,
}

#[derive(Debug, Clone, Serialize)]
pub struct FalseEdge {
    pub from: String,
    pub to: String,
    pub found: Vec<Option<f64>>,
}

#[derive(Debug, Clone, Serialize)]
pub struct ItemPower {
    pub item: String,
    /// Whether the model plants an impurity in this item.
    pub impure: bool,
    pub kept: Vec<Option<f64>>,
    pub kept_se: Vec<Option<f64>>,
}

#[derive(Debug, Clone, Serialize)]
pub struct ImpurityPower {
    /// The impure item (a cross loading), or both items of a correlated error joined by ` ~ `.
    pub item: String,
    /// `cross_loading` or `correlated_errors`.
    pub kind: String,
    /// The items; the impurity counts as caught when purification drops any of them.
    pub items: Vec<String>,
    pub caught: Vec<Option<f64>>,
    pub caught_se: Vec<Option<f64>>,
    pub min_n: Option<usize>,
}

#[derive(Debug, Clone, Serialize)]
pub struct EffectPower {
    pub from: String,
    pub to: String,
    /// The true coefficient on the scale the fit reports it: exogenous constructs with
    /// variance 1, endogenous constructs with residual variance 1 (the true model's).
    pub truth: f64,
    /// The true standardized coefficient.
    pub true_std: f64,
    /// Per size: share of successful replicates whose fitted model has this path.
    pub estimated: Vec<Option<f64>>,
    pub bias: Vec<Option<f64>>,
    pub bias_se: Vec<Option<f64>>,
    pub rmse: Vec<Option<f64>>,
    /// Share of 95% intervals holding `truth`.
    pub coverage: Vec<Option<f64>>,
    pub coverage_se: Vec<Option<f64>>,
    /// Bias of the standardized estimate against `true_std`.
    pub std_bias: Vec<Option<f64>>,
}

/// The true coefficients on the fit's scale (see `EffectPower::truth`), from the model's latent
/// covariance: unit u_j = sd of construct j for an exogenous one, sd of its residual for an
/// endogenous one; b' = b u_from / u_to.
fn identified_truth(truth: &Truth) -> Vec<f64> {
    let index = |name: &str| truth.constructs.iter().position(|c| c == name);
    let cov = &truth.latent_covariance;
    let unit = |j: usize| {
        let parents: Vec<(usize, f64)> = truth
            .paths
            .iter()
            .filter(|p| index(&p.to) == Some(j))
            .filter_map(|p| Some((index(&p.from)?, p.coefficient)))
            .collect();
        let explained: f64 =
            parents.iter().flat_map(|&(a, ba)| parents.iter().map(move |&(b, bb)| ba * bb * cov[(a, b)])).sum();
        (cov[(j, j)] - explained).max(0.0).sqrt()
    };
    truth
        .paths
        .iter()
        .map(|p| match (index(&p.from), index(&p.to)) {
            (Some(f), Some(t)) if unit(t) > 0.0 => p.coefficient * unit(f) / unit(t),
            _ => f64::NAN,
        })
        .collect()
}

fn first_reaching(sizes: &[usize], shares: &[Option<f64>], target: f64) -> Option<usize> {
    sizes.iter().zip(shares).find(|(_, s)| s.is_some_and(|s| s >= target)).map(|(n, _)| *n)
}

fn adjacent<'s>(s: &'s ReplicateSummary, a: &str, b: &str) -> Option<&'s (String, String, EdgeKind)> {
    s.edges.iter().find(|(f, t, _)| (f == a && t == b) || (f == b && t == a))
}

/// Aggregates the replicates (in order: size by size, replicate by replicate).
pub fn aggregate(
    truth: &Truth,
    sizes: &[usize],
    replicates: usize,
    summaries: &[&ReplicateSummary],
    target: f64,
    spec_items: &[String],
) -> PowerTable {
    let per_size: Vec<&[&ReplicateSummary]> = summaries.chunks(replicates).collect();
    let ok = |reps: &[&ReplicateSummary]| reps.iter().filter(|s| s.failure.is_none()).count();
    let succeeded: Vec<usize> = per_size.iter().map(|r| ok(r)).collect();
    let failed: Vec<usize> = per_size.iter().map(|r| r.len() - ok(r)).collect();
    let not_converged =
        per_size.iter().map(|r| r.iter().filter(|s| s.failure.is_none() && !s.converged).count()).collect();
    let failures = summaries
        .iter()
        .zip(sizes.iter().flat_map(|&n| (0..replicates).map(move |r| (n, r))))
        .filter_map(|(s, (n, r))| s.failure.as_ref().map(|f| format!("n = {n}, replicate {}: {f}", r + 1)))
        .take(MAX_FAILURES_SHOWN)
        .collect();
    let searched = summaries.iter().any(|s| s.searched);
    let purified = summaries.iter().any(|s| s.purified);
    let column = |f: &dyn Fn(&[&ReplicateSummary]) -> (usize, usize)| -> (Vec<Option<f64>>, Vec<Option<f64>>) {
        per_size
            .iter()
            .map(|reps| {
                let (c, of) = f(reps);
                share(c, of)
            })
            .unzip()
    };
    let mut edges = Vec::new();
    if searched {
        for p in &truth.paths {
            let (found, found_se) =
                column(&|reps| (reps.iter().filter(|s| adjacent(s, &p.from, &p.to).is_some()).count(), reps.len()));
            let (oriented, oriented_se) = column(&|reps| {
                let c = reps
                    .iter()
                    .filter(
                        |s| matches!(adjacent(s, &p.from, &p.to), Some((f, _, k)) if k.is_directed() && *f == p.from),
                    )
                    .count();
                (c, reps.len())
            });
            edges.push(EdgePower {
                from: p.from.clone(),
                to: p.to.clone(),
                true_std: p.standardized,
                min_n_found: first_reaching(sizes, &found, target),
                min_n_oriented: first_reaching(sizes, &oriented, target),
                found,
                found_se,
                oriented,
                oriented_se,
            });
        }
    }
    let is_true =
        |a: &str, b: &str| truth.paths.iter().any(|p| (p.from == a && p.to == b) || (p.from == b && p.to == a));
    let all = |s: &ReplicateSummary, oriented: bool| {
        s.failure.is_none()
            && truth.paths.iter().all(|p| match adjacent(s, &p.from, &p.to) {
                Some((f, _, k)) => !oriented || (k.is_directed() && *f == p.from),
                None => false,
            })
    };
    let (mut all_found, mut all_found_se, mut all_oriented, mut all_oriented_se) = Default::default();
    let (mut any_false_edge, mut any_false_edge_se) = Default::default();
    let mut false_edges = Vec::new();
    if searched {
        (all_found, all_found_se) = column(&|reps| (reps.iter().filter(|s| all(s, false)).count(), reps.len()));
        (all_oriented, all_oriented_se) = column(&|reps| (reps.iter().filter(|s| all(s, true)).count(), reps.len()));
        (any_false_edge, any_false_edge_se) = column(&|reps| {
            let c = reps.iter().filter(|s| s.edges.iter().any(|(f, t, _)| !is_true(f, t))).count();
            (c, reps.len())
        });
        let mut pairs: Vec<(String, String)> = summaries
            .iter()
            .flat_map(|s| s.edges.iter())
            .filter(|(f, t, _)| !is_true(f, t))
            .map(|(f, t, _)| if f <= t { (f.clone(), t.clone()) } else { (t.clone(), f.clone()) })
            .collect();
        pairs.sort();
        pairs.dedup();
        for (a, b) in pairs {
            let (found, _) =
                column(&|reps| (reps.iter().filter(|s| adjacent(s, &a, &b).is_some()).count(), reps.len()));
            false_edges.push(FalseEdge { from: a.clone(), to: b.clone(), found });
        }
    }
    let mut items = Vec::new();
    let mut impurities = Vec::new();
    if purified {
        // The items purification judged (kept or dropped in some replicate), in spec order.
        let names: Vec<String> = spec_items
            .iter()
            .filter(|i| summaries.iter().any(|s| s.kept.contains(i) || s.dropped.contains(i)))
            .cloned()
            .collect();
        for item in names {
            let kept_count = |reps: &[&ReplicateSummary]| {
                let ran: Vec<_> = reps.iter().filter(|s| s.purified).collect();
                (ran.iter().filter(|s| s.kept.contains(&item)).count(), ran.len())
            };
            let (kept, kept_se) = column(&kept_count);
            let impure = truth.impure.contains(&item);
            items.push(ItemPower { item, impure, kept, kept_se });
        }
    }
    if purified {
        let mut planted: Vec<(String, &str, Vec<String>)> = Vec::new();
        for l in truth.loadings.iter().filter(|l| !l.main) {
            if !planted.iter().any(|(_, _, i)| i == std::slice::from_ref(&l.variable)) {
                planted.push((l.variable.clone(), "cross_loading", vec![l.variable.clone()]));
            }
        }
        for e in &truth.error_covariances {
            planted.push((format!("{} ~ {}", e.a, e.b), "correlated_errors", vec![e.a.clone(), e.b.clone()]));
        }
        for (item, kind, members) in planted.into_iter().filter(|(_, _, m)| m.iter().all(|i| spec_items.contains(i))) {
            let (caught, caught_se) = column(&|reps| {
                let ran: Vec<_> = reps.iter().filter(|s| s.purified).collect();
                (ran.iter().filter(|s| members.iter().any(|m| s.dropped.contains(m))).count(), ran.len())
            });
            impurities.push(ImpurityPower {
                item,
                kind: kind.into(),
                items: members,
                min_n: first_reaching(sizes, &caught, target),
                caught,
                caught_se,
            });
        }
    }
    let scaled = identified_truth(truth);
    let mut effects = Vec::new();
    if searched {
        for (p, &t) in truth.paths.iter().zip(&scaled) {
            let mut row = EffectPower {
                from: p.from.clone(),
                to: p.to.clone(),
                truth: t,
                true_std: p.standardized,
                estimated: Vec::new(),
                bias: Vec::new(),
                bias_se: Vec::new(),
                rmse: Vec::new(),
                coverage: Vec::new(),
                coverage_se: Vec::new(),
                std_bias: Vec::new(),
            };
            for reps in &per_size {
                let ran = reps.iter().filter(|s| s.failure.is_none()).count();
                let est: Vec<&EffectEstimate> = reps
                    .iter()
                    .filter(|s| s.failure.is_none())
                    .filter_map(|s| s.effects.iter().find(|e| e.from == p.from && e.to == p.to && e.est.is_finite()))
                    .collect();
                row.estimated.push(share(est.len(), ran).0);
                let m = est.len() as f64;
                let errors: Vec<f64> = est.iter().map(|e| e.est - t).collect();
                let mean = (!errors.is_empty()).then(|| errors.iter().sum::<f64>() / m);
                row.bias.push(mean.filter(|v| v.is_finite()));
                row.bias_se.push(
                    mean.filter(|_| errors.len() > 1)
                        .map(|b| (errors.iter().map(|e| (e - b).powi(2)).sum::<f64>() / (m - 1.0)).sqrt() / m.sqrt()),
                );
                row.rmse.push((!errors.is_empty()).then(|| (errors.iter().map(|e| e * e).sum::<f64>() / m).sqrt()));
                let with_ci: Vec<&&EffectEstimate> =
                    est.iter().filter(|e| e.ci[0].is_some() && e.ci[1].is_some()).collect();
                let covered =
                    with_ci.iter().filter(|e| matches!(e.ci, [Some(lo), Some(hi)] if lo <= t && t <= hi)).count();
                let (c, c_se) = share(covered, with_ci.len());
                row.coverage.push(c);
                row.coverage_se.push(c_se);
                let stds: Vec<f64> = est.iter().filter_map(|e| e.std).collect();
                row.std_bias.push(
                    (!stds.is_empty())
                        .then(|| stds.iter().map(|s| s - p.standardized).sum::<f64>() / stds.len() as f64),
                );
            }
            effects.push(row);
        }
    }
    PowerTable {
        sizes: sizes.to_vec(),
        replicates,
        target,
        succeeded,
        failed,
        not_converged,
        failures,
        min_n_all_found: first_reaching(sizes, &all_found, target),
        min_n_all_oriented: first_reaching(sizes, &all_oriented, target),
        edges,
        all_found,
        all_found_se,
        all_oriented,
        all_oriented_se,
        any_false_edge,
        any_false_edge_se,
        false_edges,
        items,
        impurities,
        effects,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use construe_stats::simulate::{Item, LatentVariance};

    /// a -> b (0.6), b -> c (0.5), a with variance 2; item b3 also loads on a (planted impurity).
    fn truth() -> Truth {
        let mut b3 = Item::new("b3", "b", 0.7, 0.3);
        b3.cross_loadings = vec![construe_stats::simulate::CrossLoading { construct: "a".into(), loading: 0.3 }];
        Model::default()
            .construct("a", LatentVariance::Own(2.0))
            .construct("b", LatentVariance::Own(0.5))
            .construct("c", LatentVariance::Own(1.0))
            .path("a", "b", 0.6)
            .path("b", "c", 0.5)
            .item(Item::new("a1", "a", 0.8, 0.3))
            .item(Item::new("b1", "b", 0.8, 0.3))
            .item(Item::new("b2", "b", 0.8, 0.3))
            .item(b3)
            .item(Item::new("c1", "c", 0.8, 0.3))
            .truth()
            .unwrap()
    }

    fn rep(edges: &[(&str, &str, bool)], dropped: &[&str], effect: Option<(f64, f64, f64)>) -> ReplicateSummary {
        let items = ["b1", "b2", "b3"];
        ReplicateSummary {
            failure: None,
            converged: true,
            purified: true,
            kept: items.iter().filter(|i| !dropped.contains(i)).map(|i| i.to_string()).collect(),
            dropped: dropped.iter().map(|i| i.to_string()).collect(),
            searched: true,
            edges: edges.iter().map(|(f, t, d)| (f.to_string(), t.to_string(), EdgeKind::from_directed(*d))).collect(),
            effects: effect
                .map(|(est, lo, hi)| EffectEstimate {
                    from: "a".into(),
                    to: "b".into(),
                    est,
                    se: Some(0.1),
                    ci: [Some(lo), Some(hi)],
                    std: None,
                })
                .into_iter()
                .collect(),
        }
    }

    // The fit's scale: a is exogenous (unit = sd 2^0.5), b's residual variance is 0.5 (unit
    // 0.5^0.5), c's 1; so a -> b is 0.6 * 2^0.5 / 0.5^0.5 = 1.2 and b -> c is 0.5 * 0.5^0.5 / 1.
    #[test]
    fn truth_on_the_fit_scale() {
        let t = identified_truth(&truth());
        assert!((t[0] - 1.2).abs() < 1e-12, "{t:?}");
        assert!((t[1] - 0.5 * 0.5f64.sqrt()).abs() < 1e-12, "{t:?}");
    }

    // Two sizes, four replicates each, counted by hand.
    #[test]
    fn aggregate_counts_by_hand() {
        let t = truth();
        let ab = ("a", "b", true);
        let bc = ("b", "c", true);
        let bc_open = ("b", "c", false);
        let ca = ("a", "c", false);
        let failed = ReplicateSummary {
            failure: Some("singular".into()),
            purified: false,
            kept: Vec::new(),
            searched: false,
            ..rep(&[], &[], None)
        };
        let reps = [
            // n = 100: one replicate failed; a -> b found in 2 of 4, b - c found 3 times, oriented once.
            rep(&[ab, bc], &["b3"], Some((1.1, 1.0, 1.3))),
            rep(&[bc_open], &[], None),
            rep(&[ab, bc_open, ca], &["b1"], Some((1.5, 1.3, 1.7))),
            failed,
            // n = 200: everything found and oriented, b3 always dropped, one false edge.
            rep(&[ab, bc], &["b3"], Some((1.2, 1.0, 1.4))),
            rep(&[ab, bc], &["b3"], Some((1.3, 1.25, 1.35))),
            rep(&[ab, bc, ca], &["b3"], Some((1.0, 0.9, 1.25))),
            rep(&[ab, bc], &["b3", "b2"], Some((1.3, 1.1, 1.5))),
        ];
        let refs: Vec<&ReplicateSummary> = reps.iter().collect();
        let items: Vec<String> = ["a1", "b1", "b2", "b3", "c1"].map(String::from).to_vec();
        let p = aggregate(&t, &[100, 200], 4, &refs, 0.8, &items);
        assert_eq!((p.succeeded.clone(), p.failed.clone()), (vec![3, 4], vec![1, 0]));
        assert_eq!(p.edges[0].found, vec![Some(0.5), Some(1.0)]);
        assert_eq!(p.edges[1].found, vec![Some(0.75), Some(1.0)]);
        assert_eq!(p.edges[1].oriented, vec![Some(0.25), Some(1.0)]);
        assert_eq!(p.edges[1].found_se[0], Some((0.75f64 * 0.25 / 4.0).sqrt()));
        assert_eq!((p.edges[0].min_n_found, p.edges[1].min_n_oriented), (Some(200), Some(200)));
        assert_eq!(p.all_found, vec![Some(0.5), Some(1.0)]);
        assert_eq!(p.all_oriented, vec![Some(0.25), Some(1.0)]);
        assert_eq!(p.any_false_edge, vec![Some(0.25), Some(0.25)]);
        assert_eq!(p.min_n_all_found, Some(200));
        assert_eq!(p.false_edges.len(), 1);
        assert_eq!((p.false_edges[0].from.as_str(), p.false_edges[0].to.as_str()), ("a", "c"));
        // Items: only the judged ones (b1-b3), shares of the replicates whose purification ran.
        assert_eq!(p.items.iter().map(|i| i.item.as_str()).collect::<Vec<_>>(), ["b1", "b2", "b3"]);
        assert_eq!(p.items[2].kept, vec![Some(2.0 / 3.0), Some(0.0)]);
        assert!(p.items[2].impure && !p.items[0].impure);
        assert_eq!(p.impurities.len(), 1);
        assert_eq!(p.impurities[0].caught, vec![Some(1.0 / 3.0), Some(1.0)]);
        assert_eq!(p.impurities[0].min_n, Some(200));
        // a -> b at n = 200: errors 0, 0.1, -0.2, 0.1 around the truth 1.2; the third interval
        // [0.9, 1.25] and the first [1.0, 1.4] hold 1.2, the second [1.25, 1.35] does not.
        let e = &p.effects[0];
        assert!((e.truth - 1.2).abs() < 1e-12);
        assert_eq!(e.estimated, vec![Some(2.0 / 3.0), Some(1.0)]);
        assert!((e.bias[1].unwrap() - 0.0).abs() < 1e-12, "{:?}", e.bias);
        assert!((e.rmse[1].unwrap() - (0.06f64 / 4.0).sqrt()).abs() < 1e-12);
        assert_eq!(e.coverage[1], Some(0.75));
        // n = 100: errors -0.1 and 0.3 (bias 0.1), both intervals miss? [1.0, 1.3] holds 1.2, [1.3, 1.7] does not.
        assert!((e.bias[0].unwrap() - 0.1).abs() < 1e-12);
        assert_eq!(e.coverage[0], Some(0.5));
        assert_eq!(p.effects[1].estimated, vec![Some(0.0), Some(0.0)]);
        assert_eq!(p.effects[1].bias, vec![None, None]);
    }

    #[test]
    fn arguments_are_parsed_and_bounded() {
        assert_eq!(parse_sizes("600, 300,600,1_000").unwrap(), vec![300, 600, 1000]);
        assert!(parse_sizes("19").is_err() && parse_sizes("").is_err() && parse_sizes("3e2").is_err());
        let many: Vec<String> = (0..21).map(|k| (100 + k).to_string()).collect();
        assert!(matches!(parse_sizes(&many.join(",")), Err(PowerError::Sizes { .. })));
        assert_eq!(Shard::parse("2/4").unwrap(), Shard { k: 2, of: 4 });
        for bad in ["0/4", "5/4", "1/0", "x/2", "2", "1/100001"] {
            assert!(Shard::parse(bad).is_err(), "{bad}");
        }
        // Shards partition the replicates.
        let shards: Vec<Shard> = (1..=3).map(|k| Shard { k, of: 3 }).collect();
        for g in 0..30 {
            assert_eq!(shards.iter().filter(|s| s.owns(g)).count(), 1);
        }
        assert!(parse_replicates("0").is_err() && parse_replicates("100001").is_err());
        assert_eq!(parse_replicates("500").unwrap(), 500);
        assert!(parse_target("1").is_err() && parse_target("0").is_err() && parse_target("nan").is_err());
    }
}
