//! Everything that can be wrong with a simulation model file, as typed values with the path of
//! the node they blame (`ModelFinding`), the way `spec::validate` does it for specs.
//! Central function: `validate`, which reports every problem of the file at once; what only the
//! numbers show (a cycle, a total variance below what the paths explain, an error covariance
//! that is not positive definite) comes from `stats::simulate` and is positioned here too.

use std::fmt;

use thiserror::Error;

use super::types::{ConstantValue, CorrelatedError, MODEL_FORMAT_VERSION, SimulationModel};
use crate::spec::diagnostic::{plural, suggest};
use crate::spec::positions::{child, element};
use construe_stats::simulate::ModelError;

/// Most constructs in one model.
pub const MAX_CONSTRUCTS: usize = 1_000;
/// Most columns (id, constants, items, observed variables) in one model.
pub const MAX_COLUMNS: usize = 10_000;
/// Most structural paths, and most correlated errors.
pub const MAX_PAIRS: usize = 100_000;
/// Most thresholds of one item (answer categories minus one).
pub const MAX_THRESHOLDS: usize = 100;

/// What a problem is about, named the way the model file names it.
#[derive(Debug, Clone, PartialEq)]
pub enum Subject {
    Model,
    Construct(String),
    Constant(String),
    Item(String),
    Observed(String),
    Path { from: String, to: String },
    CorrelatedError { a: String, b: String },
}

impl fmt::Display for Subject {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Subject::Model => write!(f, "model"),
            Subject::Construct(n) => write!(f, "construct `{n}`"),
            Subject::Constant(n) => write!(f, "constant `{n}`"),
            Subject::Item(n) => write!(f, "item `{n}`"),
            Subject::Observed(n) => write!(f, "observed variable `{n}`"),
            Subject::Path { from, to } => write!(f, "path `{from}` -> `{to}`"),
            Subject::CorrelatedError { a, b } => write!(f, "correlated error `{a}` ~ `{b}`"),
        }
    }
}

/// The kinds of named entry a model declares, for "has an empty name".
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Entry {
    Construct,
    IdColumn,
    Constant,
    Item,
    Observed,
}

impl fmt::Display for Entry {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Entry::Construct => "a construct",
            Entry::IdColumn => "the id column",
            Entry::Constant => "a constant column",
            Entry::Item => "an item",
            Entry::Observed => "an observed variable",
        })
    }
}

#[derive(Debug, Clone, PartialEq, Error)]
pub enum ModelProblem {
    #[error("the model is not valid YAML: {message}")]
    Syntax { message: String },
    #[error("{message}")]
    Type { message: String },
    #[error("key `{key}` appears twice in {} (first on line {first_line})", place(parent))]
    DuplicateKey { parent: String, key: String, first_line: usize },
    #[error("model format version {found} is not supported (this build reads version {supported})")]
    WrongVersion { found: u32, supported: u32 },
    #[error("the model declares no construct")]
    NoConstruct,
    #[error("the model declares no item and no observed variable")]
    NoVariable,
    #[error("the model declares {}; at most {max} are allowed", plural(*count, what))]
    TooMany { what: &'static str, count: usize, max: usize },
    #[error("{entry} has an empty name")]
    EmptyName { entry: Entry },
    #[error("construct `{name}` is declared twice")]
    DuplicateConstruct { name: String },
    #[error("column `{name}` is declared twice")]
    DuplicateColumn { name: String },
    #[error("{subject}: give `variance` or `total_variance`, not both")]
    BothVariances { subject: Subject },
    #[error("{subject}: {quantity} is not a finite number")]
    NotFinite { subject: Subject, quantity: &'static str },
    #[error("{subject}: {quantity} {value} is negative")]
    Negative { subject: Subject, quantity: &'static str, value: f64 },
    #[error("{subject}: missing rate {rate} is outside [0, 1)")]
    MissingRate { subject: Subject, rate: f64 },
    #[error("{subject} names unknown construct `{name}`")]
    UnknownConstruct { subject: Subject, name: String, suggestion: Option<String> },
    #[error("{subject} is declared twice")]
    DuplicatePair { subject: Subject },
    #[error("{subject} loads on construct `{construct}` twice")]
    LoadsTwice { subject: Subject, construct: String },
    #[error("{subject}: `thresholds` is empty (give at least one cut point)")]
    EmptyThresholds { subject: Subject },
    #[error("{subject}: thresholds must increase strictly, but {before} is followed by {after}")]
    ThresholdsNotIncreasing { subject: Subject, before: f64, after: f64 },
    #[error("{subject}: loading is zero")]
    ZeroLoading { subject: Subject },
    #[error("{subject}: reliability {value} is outside (0, 1]")]
    Reliability { subject: Subject, value: f64 },
    #[error("a correlated error names unknown item `{name}`")]
    UnknownVariable { name: String, suggestion: Option<String> },
    #[error("{subject} pairs an item with itself")]
    SelfPair { subject: Subject },
    /// What drawing found (a cycle, a variance the paths overrun, an error covariance).
    #[error("{0}")]
    Drawing(ModelError),
}

impl ModelProblem {
    /// The hint shown under the problem, if any.
    pub fn help(&self) -> Option<String> {
        use ModelProblem::*;
        match self {
            UnknownConstruct { suggestion, .. } | UnknownVariable { suggestion, .. } => suggestion.clone(),
            DuplicateKey { .. } => Some("keep one copy; YAML does not say which of two copies counts".into()),
            WrongVersion { .. } => Some(format!("write `simulate: {MODEL_FORMAT_VERSION}` (docs/simulate.md)")),
            ThresholdsNotIncreasing { .. } => Some("list the cut points from lowest to highest, each once".into()),
            TooMany { .. } => {
                Some("the bound keeps a draw within memory; split the model or draw several files".into())
            }
            Drawing(ModelError::Cycle { .. }) => Some("causes must come before their effects: drop one path".into()),
            Drawing(ModelError::TotalBelowExplained { .. }) => {
                Some("raise `total_variance`, or make the paths into it weaker".into())
            }
            Drawing(ModelError::ErrorCovarianceTooLarge { .. } | ModelError::NotPositiveDefinite { .. }) => {
                Some("make the covariances smaller, or the error variances larger".into())
            }
            _ => None,
        }
    }
}

fn place(parent: &str) -> String {
    if parent.is_empty() { "the model's top level".into() } else { format!("`{parent}`") }
}

/// A problem and the path of the node it blames (`on_key`: underline the key, not its value).
#[derive(Debug, Clone, PartialEq)]
pub struct ModelFinding {
    pub problem: ModelProblem,
    pub path: String,
    pub on_key: bool,
}

impl ModelFinding {
    fn value(problem: ModelProblem, path: impl Into<String>) -> Self {
        ModelFinding { problem, path: path.into(), on_key: false }
    }

    fn key(problem: ModelProblem, path: impl Into<String>) -> Self {
        ModelFinding { problem, path: path.into(), on_key: true }
    }
}

struct Checker {
    out: Vec<ModelFinding>,
}

impl Checker {
    fn push(&mut self, problem: ModelProblem, path: impl Into<String>) {
        self.out.push(ModelFinding::value(problem, path));
    }

    fn finite(&mut self, subject: &Subject, quantity: &'static str, v: f64, path: String) {
        if !v.is_finite() {
            self.push(ModelProblem::NotFinite { subject: subject.clone(), quantity }, path);
        }
    }

    fn non_negative(&mut self, subject: &Subject, quantity: &'static str, v: f64, path: String) {
        if !v.is_finite() {
            self.push(ModelProblem::NotFinite { subject: subject.clone(), quantity }, path);
        } else if v < 0.0 {
            self.push(ModelProblem::Negative { subject: subject.clone(), quantity, value: v }, path);
        }
    }

    fn rate(&mut self, subject: &Subject, rate: f64, path: String) {
        if !(0.0..1.0).contains(&rate) {
            self.push(ModelProblem::MissingRate { subject: subject.clone(), rate }, path);
        }
    }

    fn bound(&mut self, what: &'static str, count: usize, max: usize, path: &str) {
        if count > max {
            self.out.push(ModelFinding::key(ModelProblem::TooMany { what, count, max }, path));
        }
    }
}

/// Every problem of `model`, each with the path it blames. When the file itself is sound, the
/// numerics check what only the numbers show.
pub fn validate(model: &SimulationModel) -> Vec<ModelFinding> {
    let mut c = Checker { out: Vec::new() };
    if model.simulate != MODEL_FORMAT_VERSION {
        c.push(ModelProblem::WrongVersion { found: model.simulate, supported: MODEL_FORMAT_VERSION }, "simulate");
    }
    if model.constructs.is_empty() {
        c.out.push(ModelFinding::key(ModelProblem::NoConstruct, "constructs"));
    }
    if model.items.is_empty() && model.observed.is_empty() {
        let at = if model.observed.is_empty() { "items" } else { "observed" };
        c.out.push(ModelFinding::key(ModelProblem::NoVariable, at));
    }
    c.bound("construct", model.constructs.len(), MAX_CONSTRUCTS, "constructs");
    c.bound("column", model.column_count(), MAX_COLUMNS, "items");
    c.bound("path", model.paths.len(), MAX_PAIRS, "paths");
    c.bound("correlated error", model.correlated_errors.len(), MAX_PAIRS, "correlated_errors");
    if !c.out.is_empty() && c.out.iter().any(|f| matches!(f.problem, ModelProblem::TooMany { .. })) {
        // Checking a model past the bounds pair by pair would take as long as the bounds prevent.
        return c.out;
    }
    c.rate(&Subject::Model, model.missing, "missing".into());

    check_constructs(model, &mut c);
    check_columns(model, &mut c);
    check_paths(model, &mut c);
    check_items(model, &mut c);
    check_observed(model, &mut c);
    check_correlated_errors(model, &mut c);

    if c.out.is_empty()
        && let Err(e) = model.plain().check()
    {
        let path = drawing_path(model, &e);
        c.push(ModelProblem::Drawing(e), path);
    }
    c.out
}

fn check_constructs(model: &SimulationModel, c: &mut Checker) {
    for (k, con) in model.constructs.iter().enumerate() {
        let at = element("constructs", k);
        if con.name.is_empty() {
            c.push(ModelProblem::EmptyName { entry: Entry::Construct }, child(&at, "name"));
        } else if model.constructs[..k].iter().any(|o| o.name == con.name) {
            c.push(ModelProblem::DuplicateConstruct { name: con.name.clone() }, child(&at, "name"));
        }
        let subject = Subject::Construct(con.name.clone());
        match (con.variance, con.total_variance) {
            (Some(_), Some(_)) => c.push(ModelProblem::BothVariances { subject }, child(&at, "total_variance")),
            (Some(v), None) => c.non_negative(&subject, "variance", v, child(&at, "variance")),
            (None, Some(v)) => c.non_negative(&subject, "variance", v, child(&at, "total_variance")),
            (None, None) => {}
        }
    }
}

fn check_columns(model: &SimulationModel, c: &mut Checker) {
    let mut columns: Vec<(&str, Entry, String)> = Vec::new();
    if let Some(id) = &model.id {
        columns.push((&id.name, Entry::IdColumn, "id.name".into()));
    }
    for (k, con) in model.constants.iter().enumerate() {
        let at = element("constants", k);
        columns.push((&con.name, Entry::Constant, child(&at, "name")));
        if let ConstantValue::Number(v) = con.value {
            c.finite(&Subject::Constant(con.name.clone()), "value", v, child(&at, "value"));
        }
    }
    for (k, it) in model.items.iter().enumerate() {
        columns.push((&it.name, Entry::Item, child(&element("items", k), "name")));
    }
    for (k, o) in model.observed.iter().enumerate() {
        columns.push((&o.name, Entry::Observed, child(&element("observed", k), "name")));
    }
    for (k, (name, entry, path)) in columns.iter().enumerate() {
        if name.is_empty() {
            c.push(ModelProblem::EmptyName { entry: *entry }, path.clone());
        } else if columns[..k].iter().any(|(other, _, _)| other == name) {
            c.push(ModelProblem::DuplicateColumn { name: name.to_string() }, path.clone());
        }
    }
}

/// `UnknownConstruct` with a suggestion, when `name` is not declared.
fn known(model: &SimulationModel, c: &mut Checker, subject: &Subject, name: &str, path: String) {
    if !model.constructs.iter().any(|k| k.name == name) {
        let suggestion = suggest(name, model.constructs.iter().map(|k| k.name.as_str()));
        c.push(ModelProblem::UnknownConstruct { subject: subject.clone(), name: name.into(), suggestion }, path);
    }
}

fn check_paths(model: &SimulationModel, c: &mut Checker) {
    for (k, path) in model.paths.iter().enumerate() {
        let at = element("paths", k);
        let subject = Subject::Path { from: path.from.clone(), to: path.to.clone() };
        known(model, c, &subject, &path.from, child(&at, "from"));
        known(model, c, &subject, &path.to, child(&at, "to"));
        c.finite(&subject, "coefficient", path.coefficient, child(&at, "coefficient"));
        if model.paths[..k].iter().any(|q| q.from == path.from && q.to == path.to) {
            c.push(ModelProblem::DuplicatePair { subject }, at);
        }
    }
}

fn check_items(model: &SimulationModel, c: &mut Checker) {
    for (k, it) in model.items.iter().enumerate() {
        let at = element("items", k);
        let subject = Subject::Item(it.name.clone());
        known(model, c, &subject, &it.construct, child(&at, "construct"));
        c.finite(&subject, "loading", it.loading, child(&at, "loading"));
        c.finite(&subject, "mean", it.mean, child(&at, "mean"));
        c.non_negative(&subject, "error variance", it.error_variance, child(&at, "error_variance"));
        for (j, cl) in it.cross_loadings.iter().enumerate() {
            let cat = element(&child(&at, "cross_loadings"), j);
            known(model, c, &subject, &cl.construct, child(&cat, "construct"));
            c.finite(&subject, "cross loading", cl.loading, child(&cat, "loading"));
            if cl.construct == it.construct || it.cross_loadings[..j].iter().any(|q| q.construct == cl.construct) {
                c.push(
                    ModelProblem::LoadsTwice { subject: subject.clone(), construct: cl.construct.clone() },
                    child(&cat, "construct"),
                );
            }
        }
        if let Some(t) = &it.thresholds {
            let tat = child(&at, "thresholds");
            if t.is_empty() {
                c.push(ModelProblem::EmptyThresholds { subject: subject.clone() }, tat.clone());
            }
            c.bound("threshold", t.len(), MAX_THRESHOLDS, &tat);
            if let Some(j) = t.iter().position(|v| !v.is_finite()) {
                c.push(ModelProblem::NotFinite { subject: subject.clone(), quantity: "threshold" }, element(&tat, j));
            } else if let Some(j) = (1..t.len()).find(|&j| t[j] <= t[j - 1]) {
                c.push(
                    ModelProblem::ThresholdsNotIncreasing { subject: subject.clone(), before: t[j - 1], after: t[j] },
                    element(&tat, j),
                );
            }
        }
        if let Some(r) = it.missing {
            c.rate(&subject, r, child(&at, "missing"));
        }
    }
}

fn check_observed(model: &SimulationModel, c: &mut Checker) {
    for (k, o) in model.observed.iter().enumerate() {
        let at = element("observed", k);
        let subject = Subject::Observed(o.name.clone());
        known(model, c, &subject, &o.construct, child(&at, "construct"));
        c.finite(&subject, "loading", o.loading, child(&at, "loading"));
        c.finite(&subject, "mean", o.mean, child(&at, "mean"));
        if o.loading == 0.0 {
            c.push(ModelProblem::ZeroLoading { subject: subject.clone() }, child(&at, "loading"));
        }
        if !(o.reliability > 0.0 && o.reliability <= 1.0) {
            c.push(
                ModelProblem::Reliability { subject: subject.clone(), value: o.reliability },
                child(&at, "reliability"),
            );
        }
        if let Some(r) = o.missing {
            c.rate(&subject, r, child(&at, "missing"));
        }
    }
}

fn check_correlated_errors(model: &SimulationModel, c: &mut Checker) {
    let variables: Vec<&str> =
        model.items.iter().map(|it| it.name.as_str()).chain(model.observed.iter().map(|o| o.name.as_str())).collect();
    for (k, ce) in model.correlated_errors.iter().enumerate() {
        let at = element("correlated_errors", k);
        let [a, b] = &ce.items;
        for (j, name) in [a, b].into_iter().enumerate() {
            if !variables.contains(&name.as_str()) {
                let suggestion = suggest(name, variables.iter().copied());
                c.push(
                    ModelProblem::UnknownVariable { name: name.clone(), suggestion },
                    element(&child(&at, "items"), j),
                );
            }
        }
        let subject = Subject::CorrelatedError { a: a.clone(), b: b.clone() };
        if a == b {
            c.push(ModelProblem::SelfPair { subject: subject.clone() }, child(&at, "items"));
        }
        c.finite(&subject, "covariance", ce.covariance, child(&at, "covariance"));
        let same =
            |q: &CorrelatedError| (q.items[0] == *a && q.items[1] == *b) || (q.items[0] == *b && q.items[1] == *a);
        if model.correlated_errors[..k].iter().any(same) {
            c.push(ModelProblem::DuplicatePair { subject }, at);
        }
    }
}

/// The node a drawing problem is about.
fn drawing_path(model: &SimulationModel, e: &ModelError) -> String {
    match e {
        ModelError::Cycle { path, .. } => element("paths", *path),
        ModelError::TotalBelowExplained { construct, .. } => {
            child(&element("constructs", *construct), "total_variance")
        }
        ModelError::ZeroVariance { construct, .. } => element("constructs", *construct),
        ModelError::ErrorCovarianceTooLarge { index, .. } => child(&element("correlated_errors", *index), "covariance"),
        ModelError::NotPositiveDefinite { first, .. } => element("correlated_errors", *first),
        ModelError::ConstantVariable { name } => match model.items.iter().position(|it| &it.name == name) {
            Some(k) => element("items", k),
            None => element("observed", model.observed.iter().position(|o| &o.name == name).unwrap_or(0)),
        },
        ModelError::UnknownConstruct { .. } | ModelError::UnknownVariable { .. } | ModelError::NoRows => String::new(),
    }
}
