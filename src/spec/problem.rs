//! Everything that can be wrong with a spec, as typed values. Central type: `SpecProblem`.
//! Only `Display` writes words; `help` gives the optional hint line. Each problem is found
//! together with the key path it blames (`Finding`), which `positions` turns into line:col.

use std::path::PathBuf;

use thiserror::Error;

use crate::data::MatrixProblem;

#[derive(Debug, Clone, PartialEq, Error)]
pub enum SpecProblem {
    #[error("the spec is not valid YAML: {message}")]
    Syntax { message: String },
    #[error("unknown key `{key}` in {}", place(parent))]
    UnknownKey { parent: String, key: String, suggestion: Option<String> },
    #[error("{message}")]
    Type { message: String },
    #[error("key `{key}` appears twice in {} (first on line {first_line})", place(parent))]
    DuplicateKey { parent: String, key: String, first_line: usize },
    #[error("the title is {length} characters long; at most {max} are allowed")]
    TitleTooLong { length: usize, max: usize },
    #[error("summary matrix `{}` {problem}", path.display())]
    BadMatrix { path: PathBuf, problem: MatrixProblem },
    #[error(
        "`n` = {n} is too small for a matrix of {}: the sample must be larger than the number of items (at least {})",
        crate::spec::diagnostic::plural(*items, "item"), items + 1
    )]
    MatrixTooFewCases { n: usize, items: usize },
    #[error("`n` = {n} is more respondents than construe accepts for a summary matrix (at most {max})")]
    MatrixTooManyCases { n: usize, max: usize },
    #[error(
        "construct `{construct}` has {} but `purify.min_items` is {min_items}, so purification cannot test it",
        crate::spec::diagnostic::plural(*count, "item")
    )]
    BelowMinItems { construct: String, count: usize, min_items: usize },
    #[error("construct `{construct}` has 1 item and no `reliability`, so the measurement model cannot identify it")]
    Unidentified { construct: String },
    #[error("{what} is {value}; at most {max} are allowed")]
    TooMany { what: String, value: u64, max: u64 },
    #[error("{what} must be a finite number, found {value}")]
    NotFinite { what: String, value: f64 },
    #[error("spec format version {found} is not supported; this build reads version {supported}")]
    WrongVersion { found: u32, supported: u32 },
    #[error("`data` needs either `waves` or `matrix`")]
    NoData,
    #[error("`data` has both `waves` and `matrix`; use one")]
    WavesAndMatrix,
    #[error("wave id `{wave}` is used twice")]
    DuplicateWave { wave: String },
    #[error("data file `{}` of {} does not exist", path.display(), source_name(wave))]
    MissingFile { wave: Option<String>, path: PathBuf },
    #[error("truth model `{}` does not exist", path.display())]
    MissingTruthModel { path: PathBuf },
    #[error("cannot read truth model `{}`: {reason}", path.display())]
    UnreadableTruthModel { path: PathBuf, reason: String, hint: Option<String> },
    #[error(
        "truth model `{}` is not a valid model: {first}{}",
        path.display(),
        if *problems > 1 { format!(" (and {} more)", crate::spec::diagnostic::plural(problems - 1, "problem")) } else { String::new() }
    )]
    InvalidTruthModel { path: PathBuf, first: String, problems: usize },
    #[error("cannot read the columns of `{}`: {reason}", path.display())]
    UnreadableFile { path: PathBuf, reason: String },
    #[error("data file `{}` has unsupported extension; use .csv or .parquet", path.display())]
    UnsupportedFormat { path: PathBuf },
    #[error("item `{item}` of construct `{construct}` is not a column of any data file")]
    UnknownItem { construct: String, item: String, suggestion: Option<String> },
    #[error("wave `{wave}` has no column `{column}` (file `{}`)", path.display())]
    MissingColumn { wave: String, column: String, path: PathBuf, suggestion: Option<String> },
    #[error("item `{item}` is in two constructs, `{first}` and `{second}`")]
    ItemInTwoConstructs { item: String, first: String, second: String },
    #[error("item `{item}` is listed twice in construct `{construct}`")]
    DuplicateItem { construct: String, item: String },
    #[error("construct `{construct}` has no items")]
    EmptyConstruct { construct: String },
    #[error("facet `{facet}` of construct `{construct}` lists `{item}`, which is not an item of `{construct}`")]
    FacetItemNotInConstruct { construct: String, facet: String, item: String, suggestion: Option<String> },
    #[error("facet `{facet}` of construct `{construct}` has no items")]
    EmptyFacet { construct: String, facet: String },
    #[error("{place} names `{name}`, which is not a declared construct")]
    UnknownConstruct { place: String, name: String, suggestion: Option<String> },
    #[error("construct `{construct}` is in two tiers ({first} and {second})")]
    ConstructInTwoTiers { construct: String, first: usize, second: usize },
    #[error("required edge `{from}` -> `{to}` {reason}")]
    ImpossibleRequirement { from: String, to: String, reason: String },
    #[error("edge `{from}` -> `{to}` joins a construct to itself")]
    SelfEdge { from: String, to: String },
    #[error("{what} must lie in {range}, found {value}")]
    OutOfRange { what: String, range: String, value: f64 },
    #[error("`{item}` in {place} is not an item of the data")]
    UnknownDataItem { place: String, item: String, suggestion: Option<String> },
    #[error("reverse range of `{item}` must be [lowest, highest] with lowest < highest")]
    BadReverseRange { item: String },
    #[error("id column `{column}` is not in {}", path.display())]
    MissingIdColumn { column: String, path: PathBuf },
    #[error("id column `{column}` is also listed as an item")]
    IdColumnIsItem { column: String },
    #[error("analysis `{analysis}` needs respondent rows, but the data is a summary matrix")]
    NeedsRows { analysis: String },
    #[error("`standard_errors: information` has no meaning for `method: dwls`")]
    DwlsInformation,
    #[error("`{analysis}` with `test: wishart` assumes normally distributed answers, but these items are ordinal: {}", .items.join(", "))]
    NormalTheoryOnOrdinal { analysis: String, items: Vec<String> },
    #[error("`report.formats` is empty; nothing would be written")]
    NoReportFormats,
    #[error("analysis `{analysis}` needs `{needs}` in the spec")]
    MissingPrerequisite { analysis: String, needs: String },
    #[error("`sensitivity` has nothing to vary: {why}")]
    NothingToVary { why: String },
    #[error(
        "sensitivity to the reliability of `{construct}` needs a single-indicator construct; it has {count} items, whose measurement error the model estimates"
    )]
    NotSingleIndicator { construct: String, count: usize },
    #[error(
        "item `{item}` equals the {how} of the items of `{construct}` in every row: it is a scale score, not an indicator"
    )]
    ScaleScore { item: String, construct: String, how: String },
    #[error(
        "construct `{construct}` sits between other constructs but its single indicator `{item}` has only {levels} categories"
    )]
    CoarsenedSingleIndicator { construct: String, item: String, levels: usize },
    #[error("{what} = {value} is unusual for a significance level")]
    UnusualAlpha { what: String, value: f64 },
    #[error("construct `{construct}` has {} and no `reliability`, so it is not identified as a latent variable", crate::spec::diagnostic::plural(*count, "item"))]
    TooFewItems { construct: String, count: usize },
    #[error("`{}` column `{column}`: {} ({examples})", path.display(), if *count == 1 { "1 value is not a number".to_string() } else { format!("{count} values are not numbers") })]
    DataNotNumber { path: PathBuf, column: String, count: usize, examples: String },
    #[error("`{}`: {} not have the header's {expected} fields ({examples})", path.display(), if *count == 1 { "1 row does".to_string() } else { format!("{count} rows do") })]
    DataFieldCount { path: PathBuf, count: usize, expected: usize, examples: String },
    #[error("`{}` cannot be read to its end: {reason}", path.display())]
    DataUnreadable { path: PathBuf, reason: String },
    #[error("item `{item}` has {} outside its reverse range [{lo}, {hi}] ({examples})", crate::spec::diagnostic::plural(*count, "value"))]
    DataOutsideReverse { item: String, lo: f64, hi: f64, count: usize, examples: String },
    #[error("item `{item}` is constant ({value} in every row with a value), so it carries no information")]
    DataConstant { item: String, value: f64 },
    #[error("item `{item}` has no values at all")]
    DataEmpty { item: String },
    #[error("item `{item}` is listed as ordinal but has non-integer value {value}")]
    DataOrdinalNonInteger { item: String, value: f64 },
    #[error("item `{item}` is listed as ordinal but has more than {max} distinct values")]
    DataOrdinalLevels { item: String, max: usize },
    #[error("item `{item}` is missing in {percent}% of rows ({waves})")]
    DataMostlyMissing { item: String, percent: usize, waves: String },
    #[error(
        "items `{first}` and `{second}` are never answered by the same respondent, so no method can estimate their covariance"
    )]
    DataNeverTogether { first: String, second: String },
    #[error("`{item}` in {place} is not an item of any construct")]
    ImpurityItemNotInConstruct { place: String, item: String, suggestion: Option<String> },
    #[error("a correlated error needs two different items, but both are `{item}`")]
    ErrorWithItself { item: String },
    #[error("{what} is declared twice")]
    DuplicateImpurity { what: String },
    #[error("item `{item}` belongs to construct `{construct}` already; `also` must name another construct")]
    CrossLoadingOnOwnConstruct { item: String, construct: String },
    #[error("method factor `{factor}` has {}; it needs at least 2", crate::spec::diagnostic::plural(*count, "item"))]
    MethodFactorTooSmall { factor: String, count: usize },
    #[error("method factor `{factor}` has the name of a construct")]
    MethodFactorIsConstruct { factor: String },
    #[error(
        "method factor `{factor}` holds every item of construct `{construct}`, so the two factors cannot be told apart"
    )]
    MethodFactorCoversConstruct { factor: String, construct: String },
    #[error("`sensitivity` refits the structural model, but `structure.search: fci` fits none")]
    SensitivityWithoutModel,
    #[error("`invariance` across waves needs at least two waves; the spec has {waves}")]
    InvarianceOneGroup { waves: usize },
    #[error("`invariance.reference` names `{reference}`, which is not one of the waves")]
    UnknownReferenceGroup { reference: String, suggestion: Option<String> },
    #[error("`invariance.across` names `{column}`, which is {what}")]
    BadGroupColumn { column: String, what: &'static str },
    #[error(
        "wave `{group}` has {}; `invariance` needs at least {min} per group",
        crate::spec::diagnostic::plural(*rows, "row")
    )]
    InvarianceSmallGroup { group: String, rows: usize, min: usize },
}

impl SpecProblem {
    /// The hint shown under the problem, if any.
    pub fn help(&self) -> Option<String> {
        use SpecProblem::*;
        match self {
            UnknownKey { suggestion, .. }
            | UnknownItem { suggestion, .. }
            | MissingColumn { suggestion, .. }
            | UnknownConstruct { suggestion, .. }
            | UnknownDataItem { suggestion, .. }
            | ImpurityItemNotInConstruct { suggestion, .. }
            | FacetItemNotInConstruct { suggestion, .. } => suggestion.clone(),
            UnreadableTruthModel { hint, .. } => hint.clone(),
            InvalidTruthModel { path, .. } => Some(format!(
                "`construe simulate {} --out FILE` shows every problem with its position",
                path.display()
            )),
            MissingFile { .. } | MissingTruthModel { .. } => {
                Some("paths are relative to the folder of the spec file".into())
            }
            NoData => Some("list survey files under `data.waves`, or a published matrix under `data.matrix`".into()),
            NeedsRows { .. } => Some("remove the analysis, or supply the respondent-level waves".into()),
            DwlsInformation => Some("weighted least squares has no information matrix of its own; use `standard_errors: sandwich` (or `auto`)".into()),
            NormalTheoryOnOrdinal { .. } => Some("drop `test: wishart` (the default, `auto`, tests the polychoric matrix by the delta method with its sampling covariance from the respondents' answers)".into()),
            MissingPrerequisite { .. } => Some("add the analysis it needs under `analyses`".into()),
            SensitivityWithoutModel => Some("use `search: both` (PC's fitted model, with FCI's graph beside it), or drop `sensitivity`".into()),
            NothingToVary { .. } => Some("add `leave_one_out: true` (constructs with 3 or more items), an `alpha` list, or a `reliability` grid or `prior` for a single-indicator construct; or remove `sensitivity`".into()),
            ScaleScore { .. } => Some("conditioning on a sum or mean of noisy items does not screen off what they measure; model the construct from its items instead, and drop the score".into()),
            CoarsenedSingleIndicator { .. } => Some("a coarse measure of a construct in the middle of a causal chain cannot screen off what it transmits; add indicators or state a reliability with care".into()),
            UnusualAlpha { .. } => Some("levels between 0.001 and 0.2 are usual; a very small one hides real dependence, a large one admits chance findings".into()),
            TooFewItems { .. } | Unidentified { .. } => Some("add items (at least 3), or give the single indicator a `reliability`".into()),
            DuplicateKey { .. } => Some("keep one copy; YAML does not say which of two copies counts".into()),
            TitleTooLong { .. } => Some("the title names the report folder; put longer text elsewhere".into()),
            BadMatrix { problem, .. } => problem.help(),
            MatrixTooFewCases { .. } | MatrixTooManyCases { .. } => Some("check `n` against the publication: it is the number of respondents".into()),
            BelowMinItems { .. } => Some("add items to the construct, or lower `purify.min_items` (at least 3)".into()),
            TooMany { .. } => Some("the bound keeps a run within memory and a working day; split the work or lower the count".into()),
            DataNotNumber { .. } => {
                Some("fix the values, leave the cells empty, or list their code under `data.missing_codes`".into())
            }
            DataFieldCount { .. } => {
                Some("check the separators and quotes on those lines; a field with a comma must be in double quotes".into())
            }
            DataOutsideReverse { .. } => {
                Some("check the `[lowest, highest]` range under `data.reverse`, or declare the codes as missing".into())
            }
            DataConstant { .. } | DataEmpty { .. } => {
                Some("remove the item from its construct; a constant answer cannot indicate anything".into())
            }
            DataOrdinalNonInteger { .. } | DataOrdinalLevels { .. } => {
                Some("remove the item from `data.ordinal`, so it is read as continuous".into())
            }
            DataMostlyMissing { .. } => Some(
                "estimates involving the item rest on few answers; with `covariance: {missing: fiml}` the other answers of its respondents help, if values are missing at random".into(),
            ),
            DataNeverTogether { .. } => Some(
                "with a planned-missing design, make sure every pair of items is asked of some respondents together; otherwise drop one of the two".into(),
            ),
            InvarianceOneGroup { .. } => Some(
                "add a wave, or compare groups within the data with `across: COLUMN` (for example a region column)".into(),
            ),
            UnknownReferenceGroup { suggestion, .. } => suggestion.clone(),
            BadGroupColumn { .. } => Some("name a column that sorts respondents into groups, such as region or age band".into()),
            InvarianceSmallGroup { .. } => Some(
                "a multi-group model needs a stable covariance matrix per group; merge small groups or drop the analysis".into(),
            ),
            ItemInTwoConstructs { .. } => {
                Some("an item can indicate only one declared construct; purification looks for cross-loadings".into())
            }
            ImpossibleRequirement { .. } => Some("drop the requirement, or change the tiers or `forbid`".into()),
            ErrorWithItself { .. } => Some("an item's error variance is always estimated; name the two items whose errors covary".into()),
            DuplicateImpurity { .. } => Some("keep one declaration of each impurity".into()),
            CrossLoadingOnOwnConstruct { .. } => {
                Some("a cross-loading adds a loading on a second construct; the item's own loading is always estimated".into())
            }
            MethodFactorTooSmall { .. } => Some(
                "a factor shared by one item is only its error variance; list at least 2 items (with exactly 2, their loadings are held equal)".into(),
            ),
            MethodFactorIsConstruct { .. } => Some("give the method factor a name of its own".into()),
            MethodFactorCoversConstruct { .. } => Some(
                "a method factor must leave some of the construct's items out; for a construct of reverse-worded items alone, declare no method factor".into(),
            ),
            EmptyFacet { .. } => Some("list the construct's items that share this content, or remove the facet".into()),
            _ => None,
        }
    }

    /// Problems that do not stop a run.
    pub fn is_warning(&self) -> bool {
        matches!(
            self,
            SpecProblem::TooFewItems { .. }
                | SpecProblem::UnusualAlpha { .. }
                | SpecProblem::ScaleScore { .. }
                | SpecProblem::CoarsenedSingleIndicator { .. }
                | SpecProblem::DataMostlyMissing { .. }
        )
    }
}

/// A problem and the spec path it blames (`on_key`: underline the key rather than its value).
#[derive(Debug, Clone, PartialEq)]
pub struct Finding {
    pub problem: SpecProblem,
    pub path: String,
    pub on_key: bool,
}

impl Finding {
    pub fn value(problem: SpecProblem, path: impl Into<String>) -> Self {
        Finding { problem, path: path.into(), on_key: false }
    }

    pub fn key(problem: SpecProblem, path: impl Into<String>) -> Self {
        Finding { problem, path: path.into(), on_key: true }
    }
}

fn place(parent: &str) -> String {
    if parent.is_empty() { "the spec's top level".into() } else { format!("`{parent}`") }
}

fn source_name(wave: &Option<String>) -> String {
    match wave {
        Some(w) => format!("wave `{w}`"),
        None => "the summary matrix".into(),
    }
}
