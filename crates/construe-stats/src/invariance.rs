//! The measurement-invariance ladder across groups (Meredith 1993; Vandenberg & Lance 2000),
//! independent of the item scale: the shared types (`Level`, `Constraints`, `LevelFit`,
//! `ConstraintTest`, `Ladder`), the `GroupEngine` trait a multi-group estimator implements
//! (continuous items: `groups_continuous`; ordinal items: `groups_ordinal`), and the driver
//! `run_ladder` that walks configural -> metric -> scalar (-> strict), tests each step,
//! frees constraints one at a time for partial invariance and reports latent means.
//! Never fits anything itself and knows no engine: every number comes through the trait.

use std::fmt;

use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF, Normal};

use crate::StatsError;

/// A rung of the ladder: which parameter kinds are held equal across groups.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Level {
    /// Same pattern of loadings, every parameter free per group.
    Configural,
    /// Equal loadings ("weak" invariance).
    Metric,
    /// Equal loadings and intercepts (continuous) or thresholds (ordinal) ("strong").
    Scalar,
    /// Scalar plus equal residual variances.
    Strict,
}

impl Level {
    /// The ladder in order.
    pub const ALL: [Level; 4] = [Level::Configural, Level::Metric, Level::Scalar, Level::Strict];

    /// Lower-case name as in results.json.
    pub fn name(self) -> &'static str {
        match self {
            Level::Configural => "configural",
            Level::Metric => "metric",
            Level::Scalar => "scalar",
            Level::Strict => "strict",
        }
    }

    /// Parameter kinds held equal at this level for continuous items (the default of
    /// `GroupEngine::level_kinds`).
    pub fn continuous_kinds(self) -> Vec<ParamKind> {
        match self {
            Level::Configural => vec![],
            Level::Metric => vec![ParamKind::Loading],
            Level::Scalar => vec![ParamKind::Loading, ParamKind::Intercept],
            Level::Strict => vec![ParamKind::Loading, ParamKind::Intercept, ParamKind::Residual],
        }
    }
}

impl fmt::Display for Level {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// A kind of measurement parameter an equality constraint can bind.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ParamKind {
    Loading,
    Intercept,
    /// All thresholds of an ordinal item together (a release frees every threshold of the
    /// item in that group; its score test has one df per threshold).
    Threshold,
    /// Residual (unique) variance.
    Residual,
}

impl ParamKind {
    /// Lower-case name as in results.json.
    pub fn name(self) -> &'static str {
        match self {
            ParamKind::Loading => "loading",
            ParamKind::Intercept => "intercept",
            ParamKind::Threshold => "threshold",
            ParamKind::Residual => "residual",
        }
    }

    /// Whether the kind belongs to the measurement part that latent-mean comparisons rest on
    /// (loadings and intercepts or thresholds), as opposed to residual variances.
    pub fn is_structural(self) -> bool {
        !matches!(self, ParamKind::Residual)
    }
}

impl fmt::Display for ParamKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// One released equality: the `kind` parameter(s) of `item` in `group` are estimated freely,
/// while the other groups keep sharing one value. With two groups the release is always in the
/// non-reference group, which frees the parameter entirely.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
pub struct Release {
    /// Index into `GroupDesign::items`.
    pub item: usize,
    pub kind: ParamKind,
    /// Index into `GroupDesign::groups`, never the reference group.
    pub group: usize,
}

/// What a multi-group fit holds equal: the kinds equal across groups at this level, minus the
/// released (item, kind, group) triples (partial invariance, Byrne, Shavelson & Muthén 1989).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Constraints {
    pub level: Level,
    /// Kinds equal across groups (from `GroupEngine::level_kinds`).
    pub kinds: Vec<ParamKind>,
    /// Releases, in the order they were made.
    pub released: Vec<Release>,
}

impl Constraints {
    /// Whether `kind` of `item` in `group` is bound to the common value.
    pub fn is_equal(&self, item: usize, kind: ParamKind, group: usize) -> bool {
        self.kinds.contains(&kind)
            && !self.released.iter().any(|r| r.item == item && r.kind == kind && r.group == group)
    }
}

/// Items, constructs and groups of a multi-group model, by index; names for messages only.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GroupDesign {
    pub items: Vec<String>,
    pub constructs: Vec<String>,
    /// The construct each item loads on (one per item: simple structure).
    pub item_construct: Vec<usize>,
    pub groups: Vec<String>,
    /// Observations per group.
    pub n: Vec<usize>,
    /// The group whose latent means are 0 and latent variances 1.
    pub reference: usize,
}

impl GroupDesign {
    /// Checks the indices agree with each other: every construct has at least two items, at
    /// least two groups, the reference is a group.
    pub fn validate(&self) -> Result<(), StatsError> {
        if self.item_construct.len() != self.items.len() {
            return Err(StatsError::SizeMismatch {
                what: "item constructs",
                expected: self.items.len(),
                found: self.item_construct.len(),
            });
        }
        if self.n.len() != self.groups.len() {
            return Err(StatsError::SizeMismatch {
                what: "group sizes",
                expected: self.groups.len(),
                found: self.n.len(),
            });
        }
        if self.groups.len() < 2 {
            return Err(StatsError::NotEnoughData {
                what: "a multi-group comparison (groups)".into(),
                needed: 2,
                found: self.groups.len(),
            });
        }
        if self.reference >= self.groups.len() {
            return Err(StatsError::OutOfRange {
                what: "reference group",
                index: self.reference,
                len: self.groups.len(),
            });
        }
        for (c, name) in self.constructs.iter().enumerate() {
            let k = self.item_construct.iter().filter(|&&x| x == c).count();
            if k < 2 {
                return Err(StatsError::NotEnoughData {
                    what: format!("construct {name} (items)"),
                    needed: 2,
                    found: k,
                });
            }
        }
        if let Some(&bad) = self.item_construct.iter().find(|&&c| c >= self.constructs.len()) {
            return Err(StatsError::OutOfRange { what: "construct", index: bad, len: self.constructs.len() });
        }
        Ok(())
    }

    /// Total observations over groups.
    pub fn total_n(&self) -> usize {
        self.n.iter().sum()
    }
}

/// A scaled or adjusted test statistic beside the normal-theory one.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScaledStatistic {
    pub chisq: f64,
    /// Degrees of freedom it is referred to (may be fractional for mean-and-variance
    /// adjusted statistics).
    pub df: f64,
    pub p: f64,
    /// Scaling correction c with chisq = naive / c (Satorra & Bentler 1994); the scaled
    /// difference test needs it.
    pub correction: f64,
}

/// One estimated parameter of one group.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ItemEstimate {
    pub item: usize,
    pub group: usize,
    pub kind: ParamKind,
    /// Threshold number (0-based) for `Threshold`; 0 otherwise.
    pub index: usize,
    pub est: f64,
    /// `None` for a fixed parameter (an identification constraint).
    pub se: Option<f64>,
}

/// A construct's mean and variance in one group, in the reference group's latent metric
/// (reference mean 0, variance 1).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LatentEstimate {
    pub construct: usize,
    pub group: usize,
    pub mean: f64,
    /// `None` when fixed (reference group) or not identified at this level.
    pub mean_se: Option<f64>,
    pub variance: f64,
    pub variance_se: Option<f64>,
}

/// A multi-group fit at one set of constraints.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelFit {
    pub constraints: Constraints,
    /// Minimised discrepancy, summed over groups with weights n_g / N (ML: F = sum_g (n_g / N)
    /// F_g).
    pub discrepancy: f64,
    /// Normal-theory statistic (N - G) F or N F as the engine documents.
    pub chisq: f64,
    pub df: usize,
    pub p: f64,
    pub cfi: f64,
    pub rmsea: f64,
    /// Robust statistic when the engine has one; the driver then uses the scaled difference.
    pub scaled: Option<ScaledStatistic>,
    pub converged: bool,
    pub iterations: usize,
    pub items: Vec<ItemEstimate>,
    pub latent: Vec<LatentEstimate>,
    /// The engine's own parameter vector (for its score tests); opaque to the driver.
    pub raw: Vec<f64>,
}

impl LevelFit {
    /// The latent estimate of `construct` in `group`, if reported.
    pub fn latent(&self, construct: usize, group: usize) -> Option<&LatentEstimate> {
        self.latent.iter().find(|l| l.construct == construct && l.group == group)
    }
}

/// A score (Lagrange multiplier) test of one equality constraint: how much the statistic
/// would drop if `release` were freed (Sörbom 1989; Bentler 1990 for multi-group equality
/// constraints).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ConstraintTest {
    pub release: Release,
    pub statistic: f64,
    pub df: usize,
    pub p: f64,
}

/// A test of a restricted model against a freer one nested in it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DiffTest {
    pub chisq: f64,
    pub df: usize,
    pub p: f64,
    /// Whether the Satorra-Bentler (2001) scaled difference was used.
    pub scaled: bool,
    /// The difference's scaling correction c_d when scaled.
    pub correction: Option<f64>,
}

/// The chi-square difference between nested fits: T_r - T_f on df_r - df_f (Steiger, Shapiro &
/// Browne 1985); when both carry a scaled statistic, the scaled difference of Satorra & Bentler
/// (2001): T_d = (T_r - T_f) / c_d with c_d = (df_r c_r - df_f c_f) / (df_r - df_f), T the
/// normal-theory statistics and c the scaling corrections. A non-positive c_d (possible in small
/// samples) falls back to the unscaled difference, marked `scaled = false`.
pub fn chisq_difference(restricted: &LevelFit, free: &LevelFit) -> DiffTest {
    let df = restricted.df.saturating_sub(free.df);
    let raw = (restricted.chisq - free.chisq).max(0.0);
    let (chisq, scaled, correction) = match (&restricted.scaled, &free.scaled) {
        (Some(r), Some(f)) if df > 0 => {
            let cd = (restricted.df as f64 * r.correction - free.df as f64 * f.correction) / df as f64;
            if cd > 0.0 && cd.is_finite() { (raw / cd, true, Some(cd)) } else { (raw, false, None) }
        }
        _ => (raw, false, None),
    };
    DiffTest { chisq, df, p: chisq_upper(chisq, df), scaled, correction }
}

/// Upper-tail chi-square probability; 1 for df = 0.
pub fn chisq_upper(x: f64, df: usize) -> f64 {
    if df == 0 || !x.is_finite() {
        return 1.0;
    }
    ChiSquared::new(df as f64).map(|d| d.sf(x.max(0.0))).unwrap_or(f64::NAN)
}

/// A multi-group estimator for one item scale. `fit` must honour `Constraints::is_equal` for
/// every kind its items have; kinds an engine has not (thresholds for continuous items) are
/// ignored.
pub trait GroupEngine {
    /// Items, constructs, groups and the reference group.
    fn design(&self) -> &GroupDesign;

    /// Parameter kinds held equal at `level`. Continuous default: loadings (metric), plus
    /// intercepts (scalar), plus residual variances (strict).
    fn level_kinds(&self, level: Level) -> Vec<ParamKind> {
        level.continuous_kinds()
    }

    /// Fit the multi-group model under `c`. `start` is a fit whose `raw` vector may seed the
    /// optimiser (the previous rung), if the engine can use it.
    fn fit(&self, c: &Constraints, start: Option<&LevelFit>) -> Result<LevelFit, StatsError>;

    /// Score tests at `fit` (fitted under `c`) for freeing each of `candidates`, one at a
    /// time, in the order given.
    fn score_tests(
        &self,
        c: &Constraints,
        fit: &LevelFit,
        candidates: &[Release],
    ) -> Result<Vec<ConstraintTest>, StatsError>;

    /// Difference test of `restricted` against `free`; default `chisq_difference`.
    fn difference(&self, restricted: &LevelFit, free: &LevelFit) -> DiffTest {
        chisq_difference(restricted, free)
    }
}

/// Controls of `run_ladder`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LadderOptions {
    /// A step holds when its difference test has p >= alpha.
    pub alpha: f64,
    /// Whether to test strict invariance (equal residual variances) after scalar.
    pub strict: bool,
    /// Whether to search for partial invariance when a step fails.
    pub partial: bool,
    /// Most releases per step before the step is declared failed.
    pub max_releases: usize,
    /// Confidence level of the latent-mean intervals.
    pub level: f64,
}

impl Default for LadderOptions {
    fn default() -> Self {
        LadderOptions { alpha: 0.05, strict: false, partial: true, max_releases: 10, level: 0.95 }
    }
}

/// Published guidance on the change in fit from one rung to the next, reported beside the
/// test, never used for the verdict: Cheung & Rensvold (2002) ΔCFI <= -0.01, Chen (2007)
/// ΔRMSEA >= 0.015 suggest non-invariance.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Guidance {
    /// CFI of this rung minus CFI of the previous one.
    pub delta_cfi: f64,
    /// RMSEA of this rung minus RMSEA of the previous one.
    pub delta_rmsea: f64,
    /// ΔCFI <= -0.01 (Cheung & Rensvold 2002).
    pub cfi_flags: bool,
    /// ΔRMSEA >= 0.015 (Chen 2007).
    pub rmsea_flags: bool,
}

/// ΔCFI threshold of Cheung & Rensvold (2002).
pub const DELTA_CFI_GUIDANCE: f64 = -0.01;
/// ΔRMSEA threshold of Chen (2007).
pub const DELTA_RMSEA_GUIDANCE: f64 = 0.015;

impl Guidance {
    pub fn between(restricted: &LevelFit, free: &LevelFit) -> Guidance {
        let delta_cfi = restricted.cfi - free.cfi;
        let delta_rmsea = restricted.rmsea - free.rmsea;
        Guidance {
            delta_cfi,
            delta_rmsea,
            cfi_flags: delta_cfi <= DELTA_CFI_GUIDANCE,
            rmsea_flags: delta_rmsea >= DELTA_RMSEA_GUIDANCE,
        }
    }
}

/// One rung as tested.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelResult {
    pub level: Level,
    /// The final fit of this rung (with the releases made for it).
    pub fit: LevelFit,
    /// The rung's verdict: configural holds when it converged; the others when the difference
    /// test against the previous rung's final fit has p >= alpha (after releases, if any).
    pub holds: bool,
    /// Whether `holds` needed releases (partial invariance).
    pub partial: bool,
    /// Test against the previous rung (none for configural), after releases.
    pub diff: Option<DiffTest>,
    /// The test before any release of this rung, when releases were made.
    pub diff_full: Option<DiffTest>,
    pub guidance: Option<Guidance>,
    /// Releases made at this rung, each with the score test that chose it.
    pub released: Vec<ConstraintTest>,
}

/// A latent mean (and variance) of one group relative to the reference group.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LatentMean {
    pub construct: usize,
    pub group: usize,
    /// Mean minus the reference group's (0), in reference-group SD units.
    pub diff: f64,
    pub se: f64,
    pub ci: (f64, f64),
    /// Two-sided Wald p-value for diff = 0.
    pub p: f64,
    /// Variance relative to the reference group's (1).
    pub variance: f64,
    pub variance_se: Option<f64>,
    pub variance_ci: Option<(f64, f64)>,
}

/// Why the ladder said something other than numbers.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum LadderNote {
    /// A rung's fit did not converge; the ladder stops there.
    NotConverged { level: Level },
    /// A rung failed and no constraint could be released without leaving a construct with
    /// fewer than two invariant items (or partial search is off, or the release budget ran out).
    Failed { level: Level },
    /// Latent means are not compared because scalar invariance (even partial) does not hold.
    NoMeanComparison { failed: Level },
    /// A construct keeps only `invariant` fully invariant items in some group.
    FewInvariant { construct: usize, group: usize, invariant: usize },
    /// A fit failed with an error (the text of the `StatsError`).
    FitError { level: Level, message: String },
}

impl fmt::Display for LadderNote {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            LadderNote::NotConverged { level } => {
                write!(f, "the {level} model did not converge; the ladder stops there")
            }
            LadderNote::Failed { level } => {
                write!(f, "{level} invariance does not hold, even after freeing constraints")
            }
            LadderNote::NoMeanComparison { failed } => write!(
                f,
                "latent means are not compared: {failed} invariance does not hold, so differences in item means cannot be told apart from differences in the constructs"
            ),
            LadderNote::FewInvariant { construct, group, invariant } => {
                write!(f, "construct {construct} keeps {invariant} invariant items in group {group}")
            }
            LadderNote::FitError { level, message } => write!(f, "the {level} model could not be fitted: {message}"),
        }
    }
}

/// The whole ladder.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Ladder {
    pub design: GroupDesign,
    pub options: LadderOptions,
    /// Rungs tested, in order; stops at the first failed one.
    pub levels: Vec<LevelResult>,
    /// Every release of the final accepted model, with the test that chose it.
    pub noninvariant: Vec<ConstraintTest>,
    /// Latent means of non-reference groups (empty when no (partial) scalar invariance).
    pub latent_means: Vec<LatentMean>,
    /// The rung the latent means come from (scalar), if any.
    pub means_from: Option<Level>,
    pub notes: Vec<LadderNote>,
}

impl Ladder {
    /// The highest rung that holds, if any.
    pub fn highest(&self) -> Option<Level> {
        self.levels.iter().filter(|l| l.holds).map(|l| l.level).max()
    }
}

/// Whether releasing `r` (on top of `released`) keeps at least two items of r's construct with
/// every structural parameter (loadings, intercepts, thresholds) equal in r's group (Byrne,
/// Shavelson & Muthén 1989); for residual variances, at least two with equal residuals.
pub fn may_release(design: &GroupDesign, released: &[Release], r: Release) -> bool {
    invariant_items(design, released, r.item, r.kind, r.group, Some(r)) >= 2
}

fn invariant_items(
    design: &GroupDesign,
    released: &[Release],
    item: usize,
    kind: ParamKind,
    group: usize,
    extra: Option<Release>,
) -> usize {
    let construct = design.item_construct[item];
    let hit = |x: &Release, i: usize| {
        x.item == i && x.group == group && if kind.is_structural() { x.kind.is_structural() } else { x.kind == kind }
    };
    (0..design.items.len())
        .filter(|&i| design.item_construct[i] == construct)
        .filter(|&i| !released.iter().any(|x| hit(x, i)) && !extra.is_some_and(|x| hit(&x, i)))
        .count()
}

/// Walk the ladder (Vandenberg & Lance 2000): configural, metric, scalar and, if asked, strict.
/// Each rung is tested against the previous rung's final fit with `GroupEngine::difference`;
/// ΔCFI and ΔRMSEA are computed beside it as guidance. When a rung fails and
/// `options.partial`, the constraint of the rung's new kinds with the largest score test is
/// released, the rung refitted and retested, until it holds, no eligible constraint is left
/// (`may_release`), the largest score test is not significant at `alpha` on its own, or
/// `max_releases` is reached (Byrne, Shavelson & Muthén 1989). Releases
/// carry over to later rungs. The ladder stops at the first rung that fails. Latent means and
/// variances come from the scalar rung when it holds (fully or partially), with Wald intervals
/// at `options.level`.
pub fn run_ladder<E: GroupEngine + ?Sized>(engine: &E, options: &LadderOptions) -> Result<Ladder, StatsError> {
    let design = engine.design().clone();
    design.validate()?;
    let mut notes = Vec::new();
    let mut levels: Vec<LevelResult> = Vec::new();
    let mut released: Vec<Release> = Vec::new();
    let mut released_tests: Vec<ConstraintTest> = Vec::new();
    let rungs: Vec<Level> = Level::ALL.into_iter().filter(|&l| l != Level::Strict || options.strict).collect();

    for level in rungs {
        let kinds = engine.level_kinds(level);
        let mut c = Constraints { level, kinds: kinds.clone(), released: released.clone() };
        let start = levels.last().map(|l| &l.fit);
        let mut fit = match engine.fit(&c, start) {
            Ok(f) => f,
            Err(e) => {
                notes.push(LadderNote::FitError { level, message: e.to_string() });
                break;
            }
        };
        if !fit.converged {
            notes.push(LadderNote::NotConverged { level });
            levels.push(LevelResult {
                level,
                fit,
                holds: false,
                partial: false,
                diff: None,
                diff_full: None,
                guidance: None,
                released: vec![],
            });
            break;
        }
        let Some(prev) = levels.last() else {
            levels.push(LevelResult {
                level,
                fit,
                holds: true,
                partial: false,
                diff: None,
                diff_full: None,
                guidance: None,
                released: vec![],
            });
            continue;
        };
        let prev_fit = prev.fit.clone();
        let prev_kinds = prev.fit.constraints.kinds.clone();
        let new_kinds: Vec<ParamKind> = kinds.iter().copied().filter(|k| !prev_kinds.contains(k)).collect();
        let mut diff = engine.difference(&fit, &prev_fit);
        let diff_full = diff.clone();
        let mut rung_releases: Vec<ConstraintTest> = Vec::new();
        let mut failed_fit = false;
        while diff.p < options.alpha && options.partial && rung_releases.len() < options.max_releases {
            let candidates: Vec<Release> = candidates(&design, &c, &new_kinds);
            if candidates.is_empty() {
                break;
            }
            let tests = engine.score_tests(&c, &fit, &candidates)?;
            let Some(best) = tests
                .iter()
                .filter(|t| t.statistic.is_finite())
                .max_by(|a, b| a.statistic.total_cmp(&b.statistic).then(b.release.cmp(&a.release)))
            else {
                break;
            };
            // A largest score test that is not significant on its own points at no single
            // constraint: releasing it would only spend a degree of freedom.
            if best.p >= options.alpha {
                break;
            }
            let best = best.clone();
            c.released.push(best.release);
            match engine.fit(&c, Some(&fit)) {
                Ok(f) if f.converged => fit = f,
                Ok(_) => {
                    notes.push(LadderNote::NotConverged { level });
                    failed_fit = true;
                    break;
                }
                Err(e) => {
                    notes.push(LadderNote::FitError { level, message: e.to_string() });
                    failed_fit = true;
                    break;
                }
            }
            rung_releases.push(best);
            diff = engine.difference(&fit, &prev_fit);
        }
        if failed_fit {
            c.released.pop();
        }
        let holds = !failed_fit && diff.p >= options.alpha;
        let guidance = Some(Guidance::between(&fit, &prev_fit));
        let partial = !rung_releases.is_empty();
        if holds {
            released = c.released.clone();
            released_tests.extend(rung_releases.iter().cloned());
        } else {
            notes.push(LadderNote::Failed { level });
        }
        levels.push(LevelResult {
            level,
            fit,
            holds,
            partial,
            diff: Some(diff),
            diff_full: partial.then_some(diff_full),
            guidance,
            released: rung_releases,
        });
        if !holds {
            break;
        }
    }

    let scalar = levels.iter().find(|l| l.level == Level::Scalar && l.holds);
    let mut latent_means = Vec::new();
    let means_from = scalar.map(|l| l.level);
    if let Some(rung) = scalar {
        latent_means = latent_means_of(&design, &rung.fit, options.level);
    } else {
        let failed = levels.iter().find(|l| !l.holds).map_or(Level::Scalar, |l| l.level);
        notes.push(LadderNote::NoMeanComparison { failed });
    }
    for c in 0..design.constructs.len() {
        for g in (0..design.groups.len()).filter(|&g| g != design.reference) {
            let Some(item) = design.item_construct.iter().position(|&x| x == c) else { continue };
            let k = invariant_items(&design, &released, item, ParamKind::Loading, g, None);
            if k < design.item_construct.iter().filter(|&&x| x == c).count() && k < 3 {
                notes.push(LadderNote::FewInvariant { construct: c, group: g, invariant: k });
            }
        }
    }
    Ok(Ladder {
        design,
        options: options.clone(),
        levels,
        noninvariant: released_tests,
        latent_means,
        means_from,
        notes,
    })
}

/// Constraints of `new_kinds` still equal under `c` whose release `may_release` allows, for
/// every non-reference group, ordered by item, kind, group.
fn candidates(design: &GroupDesign, c: &Constraints, new_kinds: &[ParamKind]) -> Vec<Release> {
    let mut out = Vec::new();
    for item in 0..design.items.len() {
        for &kind in new_kinds {
            for group in (0..design.groups.len()).filter(|&g| g != design.reference) {
                let r = Release { item, kind, group };
                if c.is_equal(item, kind, group) && may_release(design, &c.released, r) {
                    out.push(r);
                }
            }
        }
    }
    out
}

/// Latent means and variances of the non-reference groups with Wald intervals at `level`
/// (estimate ± z SE); the reference group's are fixed at 0 and 1, so each estimate is the
/// difference from the reference group in its SD units.
pub fn latent_means_of(design: &GroupDesign, fit: &LevelFit, level: f64) -> Vec<LatentMean> {
    let z = Normal::standard().inverse_cdf(0.5 + level / 2.0);
    let normal = Normal::standard();
    let mut out = Vec::new();
    for c in 0..design.constructs.len() {
        for g in (0..design.groups.len()).filter(|&g| g != design.reference) {
            let Some(l) = fit.latent(c, g) else { continue };
            let se = l.mean_se.unwrap_or(f64::NAN);
            let p = 2.0 * normal.sf((l.mean / se).abs());
            out.push(LatentMean {
                construct: c,
                group: g,
                diff: l.mean,
                se,
                ci: (l.mean - z * se, l.mean + z * se),
                p,
                variance: l.variance,
                variance_se: l.variance_se,
                variance_ci: l.variance_se.map(|s| (l.variance - z * s, l.variance + z * s)),
            });
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A fake engine: the statistic is a base value plus, for every equality still bound, a
    /// cost per (item, kind) from a table; score tests report that cost. Lets the driver's
    /// logic be checked without any estimation.
    struct Fake {
        design: GroupDesign,
        cost: Vec<(usize, ParamKind, f64)>,
    }

    impl Fake {
        fn new(cost: Vec<(usize, ParamKind, f64)>) -> Fake {
            Fake {
                design: GroupDesign {
                    items: (0..6).map(|i| format!("x{i}")).collect(),
                    constructs: vec!["a".into(), "b".into()],
                    item_construct: vec![0, 0, 0, 1, 1, 1],
                    groups: vec!["g0".into(), "g1".into()],
                    n: vec![500, 500],
                    reference: 0,
                },
                cost,
            }
        }
        fn params(&self, kinds: &[ParamKind]) -> usize {
            kinds.len() * 6
        }
    }

    impl GroupEngine for Fake {
        fn design(&self) -> &GroupDesign {
            &self.design
        }
        fn fit(&self, c: &Constraints, _start: Option<&LevelFit>) -> Result<LevelFit, StatsError> {
            let mut chisq = 10.0;
            for &(item, kind, cost) in &self.cost {
                if c.is_equal(item, kind, 1) {
                    chisq += cost;
                }
            }
            let df = 16 + self.params(&c.kinds) - c.released.len();
            let latent = (0..2)
                .flat_map(|k| {
                    (0..2).map(move |g| LatentEstimate {
                        construct: k,
                        group: g,
                        mean: if g == 0 { 0.0 } else { 0.3 },
                        mean_se: (g == 1).then_some(0.05),
                        variance: 1.0,
                        variance_se: (g == 1).then_some(0.1),
                    })
                })
                .collect();
            Ok(LevelFit {
                constraints: c.clone(),
                discrepancy: chisq / 1000.0,
                chisq,
                df,
                p: chisq_upper(chisq, df),
                cfi: 1.0 - chisq / 10000.0,
                rmsea: chisq / 10000.0,
                scaled: None,
                converged: true,
                iterations: 1,
                items: vec![],
                latent,
                raw: vec![],
            })
        }
        fn score_tests(
            &self,
            _c: &Constraints,
            _fit: &LevelFit,
            candidates: &[Release],
        ) -> Result<Vec<ConstraintTest>, StatsError> {
            Ok(candidates
                .iter()
                .map(|&r| {
                    let s = self.cost.iter().find(|x| x.0 == r.item && x.1 == r.kind).map_or(0.0, |x| x.2);
                    ConstraintTest { release: r, statistic: s, df: 1, p: chisq_upper(s, 1) }
                })
                .collect())
        }
    }

    #[test]
    fn invariant_data_climb_every_rung_without_releases() {
        let ladder =
            run_ladder(&Fake::new(vec![]), &LadderOptions { strict: true, ..LadderOptions::default() }).unwrap();
        assert_eq!(ladder.levels.len(), 4);
        assert!(ladder.levels.iter().all(|l| l.holds && !l.partial));
        assert!(ladder.noninvariant.is_empty());
        assert_eq!(ladder.means_from, Some(Level::Scalar));
        assert_eq!(ladder.latent_means.len(), 2);
        let m = &ladder.latent_means[0];
        // 0.3 ± 1.959964 * 0.05
        assert!((m.ci.0 - (0.3 - 1.959_963_984_540_054 * 0.05)).abs() < 1e-12);
        assert!((m.p - 2.0 * Normal::standard().sf(6.0)).abs() < 1e-15);
    }

    #[test]
    fn the_largest_score_test_is_released_first_and_only_as_needed() {
        // Item 1's loading costs 40 and item 4's 12: after freeing item 1 the difference is
        // still 12.5 on 5 df (p = 0.03), so item 4 goes too; item 2's 0.5 must stay.
        let engine =
            Fake::new(vec![(1, ParamKind::Loading, 40.0), (4, ParamKind::Loading, 12.0), (2, ParamKind::Loading, 0.5)]);
        let ladder = run_ladder(&engine, &LadderOptions::default()).unwrap();
        let metric = &ladder.levels[1];
        assert!(metric.holds && metric.partial);
        let freed: Vec<usize> = metric.released.iter().map(|t| t.release.item).collect();
        assert_eq!(freed, vec![1, 4]);
        assert!(metric.diff_full.as_ref().unwrap().p < 0.05);
        assert_eq!(ladder.noninvariant.len(), 2);
        // Releases carry into the scalar rung.
        assert_eq!(ladder.levels[2].fit.constraints.released.len(), 2);
    }

    #[test]
    fn a_construct_keeps_two_invariant_items() {
        // Every loading of construct a is expensive: only one can be released, then the rung fails.
        let engine = Fake::new(vec![
            (0, ParamKind::Loading, 50.0),
            (1, ParamKind::Loading, 40.0),
            (2, ParamKind::Loading, 30.0),
        ]);
        let ladder = run_ladder(&engine, &LadderOptions::default()).unwrap();
        let metric = &ladder.levels[1];
        assert!(!metric.holds);
        assert_eq!(metric.released.len(), 1);
        assert_eq!(metric.released[0].release.item, 0);
        assert!(ladder.latent_means.is_empty());
        assert!(ladder.notes.contains(&LadderNote::Failed { level: Level::Metric }));
        assert!(ladder.notes.contains(&LadderNote::NoMeanComparison { failed: Level::Metric }));
        assert_eq!(ladder.levels.len(), 2);
    }

    #[test]
    fn may_release_counts_structural_releases_together() {
        let d = Fake::new(vec![]).design;
        let r = |item, kind| Release { item, kind, group: 1 };
        // Item 0's loading already free: freeing item 1's intercept leaves only item 2 intact.
        assert!(!may_release(&d, &[r(0, ParamKind::Loading)], r(1, ParamKind::Intercept)));
        assert!(may_release(&d, &[r(0, ParamKind::Loading)], r(0, ParamKind::Intercept)));
        assert!(may_release(&d, &[r(0, ParamKind::Loading)], r(1, ParamKind::Residual)));
    }

    #[test]
    fn scaled_difference_follows_satorra_bentler_2001() {
        // Satorra & Bentler (2001), eq. for c_d, by hand: T0 = 50 on 10 df with c0 = 1.2; T1 = 30
        // on 6 df with c1 = 1.1: c_d = (12 - 6.6) / 4 = 1.35, T_d = 20 / 1.35.
        let mut r = Fake::new(vec![])
            .fit(&Constraints { level: Level::Metric, kinds: vec![], released: vec![] }, None)
            .unwrap();
        let mut f = r.clone();
        r.chisq = 50.0;
        r.df = 10;
        r.scaled = Some(ScaledStatistic { chisq: 50.0 / 1.2, df: 10.0, p: 0.0, correction: 1.2 });
        f.chisq = 30.0;
        f.df = 6;
        f.scaled = Some(ScaledStatistic { chisq: 30.0 / 1.1, df: 6.0, p: 0.0, correction: 1.1 });
        let d = chisq_difference(&r, &f);
        assert!(d.scaled);
        assert_eq!(d.df, 4);
        assert!((d.correction.unwrap() - 1.35).abs() < 1e-12);
        assert!((d.chisq - 20.0 / 1.35).abs() < 1e-12);
        // Unscaled: plain difference; chi-square(4) survival at 20 is exp(-10) (1 + 10) = 4.99e-4.
        r.scaled = None;
        let d = chisq_difference(&r, &f);
        assert!(!d.scaled);
        assert!((d.p - (-10.0_f64).exp() * 11.0).abs() < 1e-12);
    }

    #[test]
    fn guidance_uses_the_published_cutoffs() {
        let mut r = Fake::new(vec![])
            .fit(&Constraints { level: Level::Metric, kinds: vec![], released: vec![] }, None)
            .unwrap();
        let mut f = r.clone();
        r.cfi = 0.94;
        f.cfi = 0.95;
        r.rmsea = 0.064;
        f.rmsea = 0.05;
        let g = Guidance::between(&r, &f);
        assert!(g.cfi_flags);
        assert!(!g.rmsea_flags);
    }
}
