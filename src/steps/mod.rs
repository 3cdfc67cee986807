//! One file per step kind: turn the step's parameters and input artifacts into its artifact by
//! calling `stats/`. Central trait: `Step`; central enum: `Artifact`. Steps are thin: no
//! numerics of their own, no cache or report logic. Adding a kind = one file here, one variant
//! in `StepKind` and `Artifact`, one line in `build_steps`.

pub mod constructs;
pub mod covariance;
pub mod discover;
pub mod group_structure;
pub mod impurities;
pub mod invariance;
pub mod load;
pub mod measure;
pub mod missing_data;
pub mod purify;
pub mod resample;
pub mod sampling;
pub mod sensitivity;
pub mod stats_schema;
pub mod structure;
pub mod structure_checks;
pub mod structure_fci;
pub mod tetrads;

use std::collections::BTreeMap;
use std::path::PathBuf;

use serde::{Deserialize, Serialize};
use serde_json::Value;
use thiserror::Error;

use crate::data::DataError;
use crate::spec::SpecFile;
use construe_stats::StatsError;

pub use covariance::{CovarianceOutput, CovarianceStep};
pub use discover::{DiscoverOutput, DiscoverStep};
pub use invariance::{InvarianceOutput, InvarianceStep};
pub use load::{LoadOutput, LoadStep};
pub use measure::{MeasureOutput, MeasureStep};
pub use purify::{PurifyOutput, PurifyStep};
pub use resample::{ResampleOutput, ResampleStep};
pub use sensitivity::{SensitivityOutput, SensitivityStep};
pub use structure::{StructureOutput, StructureStep};

/// The kinds of step, in plan order. One name everywhere: spec key, file, variant, report block.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum StepKind {
    Load,
    Covariance,
    Purify,
    Discover,
    Measure,
    Structure,
    Sensitivity,
    Resample,
    Invariance,
}

impl StepKind {
    pub fn name(self) -> &'static str {
        match self {
            StepKind::Load => "load",
            StepKind::Covariance => "covariance",
            StepKind::Purify => "purify",
            StepKind::Discover => "discover",
            StepKind::Measure => "measure",
            StepKind::Structure => "structure",
            StepKind::Sensitivity => "sensitivity",
            StepKind::Resample => "resample",
            StepKind::Invariance => "invariance",
        }
    }
}

impl std::fmt::Display for StepKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// Why a step could not produce its artifact.
#[derive(Debug, Error)]
pub enum StepError {
    #[error(transparent)]
    Data(#[from] DataError),
    #[error("{context}: {source}")]
    Stats { context: String, source: StatsError },
    #[error("step `{step}` needs the output of `{needs}`, which is not in the plan")]
    MissingInput { step: StepKind, needs: StepKind },
    /// An item of a model is not among the covariance matrix's items.
    #[error("item `{item}` of the model is not in the covariance matrix")]
    ItemNotInMatrix { item: String },
    /// A one-item construct with no stated reliability: its error variance cannot be fixed.
    #[error("construct `{construct}` has one item and no reliability")]
    NoReliability { construct: String },
    /// The estimation the spec asks for cannot be done with these data.
    #[error("{what} is not available for these data: {hint}")]
    EstimationUnavailable { what: &'static str, hint: &'static str },
    /// A sampling covariance was asked for under a theory or of moments the data do not
    /// support (`steps::sampling`).
    #[error("{what} is not available: {reason}")]
    SamplingUnavailable { what: &'static str, reason: &'static str, hint: &'static str },
    /// Background knowledge names a construct the model does not have.
    #[error("background knowledge names `{construct}`, which is not a construct of the model")]
    UnknownConstruct { construct: String },
    /// `test: wishart` asked for on data with ordinal items (found by `load`, so not at check).
    #[error(
        "`{step}` with `test: wishart` assumes normally distributed answers, but these items are ordinal: {}; drop `test: wishart` (the default, `auto`, tests the polychoric matrix by the delta method with its sampling covariance from the respondents' answers)",
        .items.join(", ")
    )]
    NormalTheoryOnOrdinal { step: StepKind, items: Vec<String> },
    /// The groups of `invariance` cannot be compared (too few, too small, shared respondents).
    #[error(transparent)]
    Invariance(#[from] invariance::InvarianceError),
}

impl StepError {
    /// Whether the user's data or spec (not construe) is at fault: exit code 1 rather than 2.
    /// A sampling theory the data do not support comes from the spec's choice of test or
    /// estimator.
    pub fn is_input_problem(&self) -> bool {
        matches!(
            self,
            StepError::Data(_)
                | StepError::EstimationUnavailable { .. }
                | StepError::NormalTheoryOnOrdinal { .. }
                | StepError::SamplingUnavailable { .. }
                | StepError::Invariance(_)
        )
    }
}

/// The typed result of a step; its bytes are what the cache stores and the manifest hashes.
#[derive(Debug, Clone)]
pub enum Artifact {
    Load(Box<LoadOutput>),
    Covariance(Box<CovarianceOutput>),
    Purify(Box<PurifyOutput>),
    Discover(Box<DiscoverOutput>),
    Measure(Box<MeasureOutput>),
    Structure(Box<StructureOutput>),
    Resample(Box<ResampleOutput>),
    Sensitivity(Box<SensitivityOutput>),
    Invariance(Box<InvarianceOutput>),
}

/// The artifacts' byte encoding: postcard (serde, compact, little-endian). Every `f64` is
/// written as its IEEE 754 bits, so decode(encode(x)) is x bit for bit, NaN payloads, signed
/// zeros and subnormals included. A step computed from a cached input therefore sees exactly
/// what a fresh run sees (issue 13: text floats read back one unit in the last place off, and
/// `verify` rejected genuine reports).
pub fn write_exact<T: Serialize>(out: &mut dyn std::io::Write, value: &T) -> std::io::Result<()> {
    postcard::to_io(value, out).map(|_| ()).map_err(std::io::Error::other)
}

/// Reads what `write_exact` wrote; `None` unless the bytes are exactly one value of `T`.
pub fn read_exact<T: serde::de::DeserializeOwned>(bytes: &[u8]) -> Option<T> {
    match postcard::take_from_bytes(bytes) {
        Ok((value, [])) => Some(value),
        _ => None,
    }
}

impl Artifact {
    pub fn encode(&self) -> Vec<u8> {
        let mut out = Vec::new();
        self.write_to(&mut out).unwrap_or_default();
        out
    }

    /// Streams the bytes `encode` returns (the cache writes large artifacts this way).
    pub fn write_to(&self, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        match self {
            Artifact::Load(a) => a.write_to(out),
            Artifact::Covariance(a) => write_exact(out, a.as_ref()),
            Artifact::Purify(a) => write_exact(out, a.as_ref()),
            Artifact::Discover(a) => write_exact(out, a.as_ref()),
            Artifact::Measure(a) => write_exact(out, a.as_ref()),
            Artifact::Structure(a) => write_exact(out, a.as_ref()),
            Artifact::Resample(a) => write_exact(out, a.as_ref()),
            Artifact::Sensitivity(a) => write_exact(out, a.as_ref()),
            Artifact::Invariance(a) => write_exact(out, a.as_ref()),
        }
    }

    /// Decodes cached bytes; `None` if they do not parse (then the step is recomputed).
    pub fn decode(kind: StepKind, bytes: &[u8]) -> Option<Artifact> {
        match kind {
            StepKind::Load => LoadOutput::decode(bytes).map(|a| Artifact::Load(Box::new(a))),
            StepKind::Covariance => read_exact(bytes).map(|a| Artifact::Covariance(Box::new(a))),
            StepKind::Purify => read_exact(bytes).map(|a| Artifact::Purify(Box::new(a))),
            StepKind::Discover => read_exact(bytes).map(|a| Artifact::Discover(Box::new(a))),
            StepKind::Measure => read_exact(bytes).map(|a| Artifact::Measure(Box::new(a))),
            StepKind::Structure => read_exact(bytes).map(|a| Artifact::Structure(Box::new(a))),
            StepKind::Resample => read_exact(bytes).map(|a| Artifact::Resample(Box::new(a))),
            StepKind::Sensitivity => read_exact(bytes).map(|a| Artifact::Sensitivity(Box::new(a))),
            StepKind::Invariance => read_exact(bytes).map(|a| Artifact::Invariance(Box::new(a))),
        }
    }
}

/// The artifacts computed so far, handed to a step for its inputs.
pub struct Inputs<'a> {
    pub step: StepKind,
    pub artifacts: &'a BTreeMap<StepKind, Artifact>,
    /// Where a long step reports how far it is (see `pipeline::chain::Progress`).
    pub progress: &'a dyn crate::pipeline::chain::Progress,
}

impl Inputs<'_> {
    pub fn load(&self) -> Result<&LoadOutput, StepError> {
        match self.artifacts.get(&StepKind::Load) {
            Some(Artifact::Load(a)) => Ok(a),
            _ => Err(StepError::MissingInput { step: self.step, needs: StepKind::Load }),
        }
    }

    pub fn purify(&self) -> Result<&PurifyOutput, StepError> {
        match self.artifacts.get(&StepKind::Purify) {
            Some(Artifact::Purify(a)) => Ok(a),
            _ => Err(StepError::MissingInput { step: self.step, needs: StepKind::Purify }),
        }
    }

    pub fn measure(&self) -> Result<&MeasureOutput, StepError> {
        match self.artifacts.get(&StepKind::Measure) {
            Some(Artifact::Measure(a)) => Ok(a),
            _ => Err(StepError::MissingInput { step: self.step, needs: StepKind::Measure }),
        }
    }

    pub fn covariance(&self) -> Result<&CovarianceOutput, StepError> {
        match self.artifacts.get(&StepKind::Covariance) {
            Some(Artifact::Covariance(a)) => Ok(a),
            _ => Err(StepError::MissingInput { step: self.step, needs: StepKind::Covariance }),
        }
    }
}

/// A unit of cached work. Its key is BLAKE3 over kind, `VERSION`, `params` and its inputs' keys.
pub trait Step: Send + Sync {
    fn kind(&self) -> StepKind;
    /// Bumped whenever the step's results change for the same inputs.
    fn version(&self) -> u32;
    /// Everything that determines the result besides the inputs, as JSON (canonicalised later).
    fn params(&self) -> Value;
    fn inputs(&self) -> Vec<StepKind>;
    /// Files whose bytes are inputs (only `load` has any).
    fn files(&self) -> Vec<PathBuf> {
        Vec::new()
    }
    fn run(&self, inputs: &Inputs<'_>) -> Result<Artifact, StepError>;
    /// One line saying what the step did, for the run log.
    fn describe(&self, artifact: &Artifact) -> String;
    /// Gives a step with independent replicates (the bootstrap) the store to keep them in;
    /// other steps ignore it.
    fn attach_replicates(&self, _store: std::sync::Arc<dyn crate::pipeline::chain::ReplicateStore>) {}
    /// `run --shard K/N`: computes this process's share of the step's replicates into the
    /// attached store, returning (computed, reused); `None` for a step without replicates.
    fn compute_share(&self, _inputs: &Inputs<'_>) -> Option<Result<(usize, usize), StepError>> {
        None
    }
}

/// The steps a spec asks for, in plan order.
pub fn build_steps(spec: &SpecFile) -> Vec<Box<dyn Step>> {
    let mut steps: Vec<Box<dyn Step>> = vec![Box::new(LoadStep::from_spec(spec))];
    steps.extend(analysis_steps(spec));
    let a = &spec.spec.analyses;
    if let (Some(sens), Some(st)) = (&a.sensitivity, &a.structure) {
        let measure = MeasureStep::from_spec(spec, &a.measure.clone().unwrap_or_default());
        steps.push(Box::new(SensitivityStep::new(
            sens,
            measure,
            StructureStep::from_spec(spec, st),
            a.purify.is_some(),
        )));
    }
    if let Some(r) = &spec.spec.analyses.resample {
        steps.push(Box::new(ResampleStep::new(r, analysis_steps(spec))));
    }
    if let Some(inv) = &spec.spec.analyses.invariance {
        steps.push(Box::new(InvarianceStep::from_spec(spec, inv)));
    }
    steps
}

/// The analyses after `load` (covariance to structure): what a bootstrap replicate reruns.
pub fn analysis_steps(spec: &SpecFile) -> Vec<Box<dyn Step>> {
    let mut steps: Vec<Box<dyn Step>> = Vec::new();
    let a = &spec.spec.analyses;
    // Every analysis after `load` starts from the item covariances, so they run whenever any
    // analysis is requested, with default settings if `covariance` itself is absent.
    // `structure` needs the measurement model, so it brings `measure` with defaults too.
    let measure = a.measure.clone().or_else(|| a.structure.as_ref().map(|_| Default::default()));
    let needs_covariance = a.covariance.is_some() || a.purify.is_some() || a.discover.is_some() || measure.is_some();
    if needs_covariance {
        steps.push(Box::new(CovarianceStep::from_spec(&a.covariance.clone().unwrap_or_default())));
    }
    if let Some(p) = &a.purify {
        steps.push(Box::new(PurifyStep::from_spec(spec, p)));
    }
    if let Some(d) = &a.discover {
        steps.push(Box::new(DiscoverStep::from_spec(spec, d)));
    }
    if let Some(m) = &measure {
        steps.push(Box::new(MeasureStep::from_spec(spec, m)));
    }
    if let Some(st) = &a.structure {
        steps.push(Box::new(StructureStep::from_spec(spec, st)));
    }
    steps
}

#[cfg(test)]
mod tests {
    use super::{read_exact, write_exact};
    use indexmap::IndexMap;
    use rand::{Rng, SeedableRng};
    use serde::{Deserialize, Serialize};

    /// The shapes artifacts are made of: plain, optional, nested and keyed floats.
    #[derive(Debug, Serialize, Deserialize)]
    struct Shape {
        plain: f64,
        optional: Option<f64>,
        rows: Vec<Vec<f64>>,
        named: IndexMap<String, f64>,
        pair: (f64, Option<f64>),
    }

    fn bits(v: &[f64]) -> Vec<u64> {
        v.iter().map(|x| x.to_bits()).collect()
    }

    fn extremes() -> Vec<f64> {
        vec![
            0.0,
            -0.0,
            1.0,
            f64::MIN_POSITIVE,
            f64::MIN_POSITIVE / 2.0, // subnormal
            f64::from_bits(1),       // smallest subnormal
            f64::MAX,
            f64::MIN,
            f64::EPSILON,
            f64::INFINITY,
            f64::NEG_INFINITY,
            f64::NAN,
            f64::from_bits(0x7ff8_0000_dead_beef), // NaN with a payload
            f64::from_bits(0xfff0_0000_0000_0001), // signalling negative NaN
            0.1 + 0.2,
            1.0 / 3.0,
        ]
    }

    /// decode(encode(x)) == x bit for bit, for extreme values and 20,000 random bit patterns.
    #[test]
    fn exact_encoding_round_trips_every_float_bit_for_bit() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(13);
        let mut values = extremes();
        values.extend((0..20_000).map(|_| f64::from_bits(rng.random::<u64>())));
        values.extend((0..5_000).map(|_| rng.random::<f64>() * 2.0 - 1.0));
        for chunk in values.chunks(17) {
            let shape = Shape {
                plain: chunk[0],
                optional: chunk.get(1).copied(),
                rows: chunk.chunks(4).map(<[f64]>::to_vec).collect(),
                named: chunk.iter().enumerate().map(|(i, v)| (format!("item{i}"), *v)).collect(),
                pair: (chunk[chunk.len() - 1], None),
            };
            let mut bytes = Vec::new();
            write_exact(&mut bytes, &shape).unwrap();
            let back: Shape = read_exact(&bytes).unwrap();
            assert_eq!(shape.plain.to_bits(), back.plain.to_bits());
            assert_eq!(shape.optional.map(f64::to_bits), back.optional.map(f64::to_bits));
            assert_eq!(
                shape.rows.iter().map(|r| bits(r)).collect::<Vec<_>>(),
                back.rows.iter().map(|r| bits(r)).collect::<Vec<_>>()
            );
            assert_eq!(
                bits(&shape.named.values().copied().collect::<Vec<_>>()),
                bits(&back.named.values().copied().collect::<Vec<_>>())
            );
            assert_eq!(shape.named.keys().collect::<Vec<_>>(), back.named.keys().collect::<Vec<_>>());
            assert_eq!(shape.pair.0.to_bits(), back.pair.0.to_bits());
            // Encoding is deterministic: the same value gives the same bytes (the manifest hashes them).
            let mut again = Vec::new();
            write_exact(&mut again, &back).unwrap();
            assert_eq!(bytes, again);
        }
    }

    #[test]
    fn trailing_or_truncated_bytes_are_refused() {
        let mut bytes = Vec::new();
        write_exact(&mut bytes, &vec![1.5f64, 2.5]).unwrap();
        assert!(read_exact::<Vec<f64>>(&bytes).is_some());
        let mut longer = bytes.clone();
        longer.push(0);
        assert!(read_exact::<Vec<f64>>(&longer).is_none());
        assert!(read_exact::<Vec<f64>>(&bytes[..bytes.len() - 1]).is_none());
    }
}
