//! Survey data drawn from a declared latent-variable model (demo data, power checks).
//! Central types: `SimulationModel` (the model file, deserialised with serde), `SimulatedTable`
//! (the drawn columns) and `Truth` (the population values an analysis should recover).
//! Deterministic: one seed gives the same table bit for bit, run after run, from a fixed draw
//! order on ChaCha8 streams; nothing here iterates a hash map, reads a file, clock or environment.

use nalgebra::DMatrix;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use serde::{Deserialize, Serialize, Serializer};

use super::StatsError;

/// The only model-file format version this module reads (the `simulate:` key).
pub const MODEL_FORMAT_VERSION: u32 = 1;

/// ChaCha stream of the model values (latent disturbances and item errors).
const VALUE_STREAM: u64 = 0;
/// ChaCha stream of the missingness draws: kept apart so that changing a missing rate never
/// changes a drawn value, and changing a loading never moves the holes.
const MISSING_STREAM: u64 = 1;

fn default_n() -> usize {
    500
}

fn default_seed() -> u64 {
    1
}

fn default_one() -> f64 {
    1.0
}

fn default_id_start() -> i64 {
    1
}

/// A simulation model file (YAML, format version 1). Unknown keys are errors.
///
/// ```yaml
/// simulate: 1                 # format version (required)
/// title: two-construct toy    # optional free text
/// n: 600                      # default number of rows (the caller may override); default 500
/// seed: 7                     # default seed (the caller may override); default 1
/// missing: 0.05               # global rate of values missing at random, in [0, 1); default 0
/// id: {name: rider_id, start: 1}          # optional respondent id column: start, start+1, ...
/// constants: [{name: wave, value: spring}] # optional constant columns (number or text)
/// constructs:                 # latent variables; `variance` of an exogenous construct, or the
///   - {name: a, variance: 1}  # disturbance variance of one with parents; or `total_variance`
///   - {name: b, total_variance: 1}        # (the disturbance is then total minus explained)
/// paths:                      # linear structural paths; must form no cycle
///   - {from: a, to: b, coefficient: 0.5}
/// items:                      # value = mean + loading * construct (+ cross loadings) + error
///   - {name: a1, construct: a, loading: 0.8, error_variance: 0.36}
///   - {name: a2, construct: a, loading: 0.7, error_variance: 0.51,
///      thresholds: [-1.5, -0.5, 0.5, 1.5]} # coarsened to codes 1..5
///   - {name: b1, construct: b, loading: 0.7, error_variance: 0.4,
///      cross_loadings: [{construct: a, loading: 0.3}], missing: 0.1}
/// observed:                   # single continuous measures, each given by its reliability
///   - {name: b_score, construct: b, reliability: 0.7, loading: 1, mean: 0}
/// correlated_errors:          # error covariance between two items (or observed variables)
///   - {items: [a1, b1], covariance: 0.1}
/// ```
///
/// Columns come out in this order: the id column, the constants, the items, the observed
/// variables, each list in file order.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimulationModel {
    /// Model-file format version; must equal [`MODEL_FORMAT_VERSION`].
    pub simulate: u32,
    /// Free text describing the model.
    #[serde(default)]
    pub title: Option<String>,
    /// Default number of rows when the caller gives none.
    #[serde(default = "default_n")]
    pub n: usize,
    /// Default seed when the caller gives none.
    #[serde(default = "default_seed")]
    pub seed: u64,
    /// Probability that any analysed value is missing, independently of everything (missing
    /// completely at random); an item's own `missing` overrides it.
    #[serde(default)]
    pub missing: f64,
    /// Optional respondent id column, never missing and never analysed.
    #[serde(default)]
    pub id: Option<IdColumn>,
    /// Optional constant columns (a wave label, a country code), never missing.
    #[serde(default)]
    pub constants: Vec<ConstantColumn>,
    /// The latent constructs.
    pub constructs: Vec<Construct>,
    /// Linear structural paths among the constructs.
    #[serde(default)]
    pub paths: Vec<StructuralPath>,
    /// Multiple-indicator items.
    #[serde(default)]
    pub items: Vec<Item>,
    /// Single observed variables, each a construct plus error of a given reliability.
    #[serde(default)]
    pub observed: Vec<ObservedVariable>,
    /// Pairs of analysed variables whose errors covary.
    #[serde(default)]
    pub correlated_errors: Vec<CorrelatedError>,
}

/// An id column numbered `start`, `start + 1`, ... in row order.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct IdColumn {
    pub name: String,
    #[serde(default = "default_id_start")]
    pub start: i64,
}

/// A column holding the same value in every row.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ConstantColumn {
    pub name: String,
    pub value: ConstantValue,
}

/// The value of a constant column: a number (`wave: 2`) or a text label (`wave: spring`).
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(untagged)]
pub enum ConstantValue {
    Number(f64),
    Text(String),
}

/// A latent construct. Give at most one of `variance` and `total_variance`; neither means
/// `variance: 1`.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Construct {
    pub name: String,
    /// Variance of an exogenous construct, or the disturbance (residual) variance of a
    /// construct with incoming paths.
    #[serde(default)]
    pub variance: Option<f64>,
    /// The construct's total variance; its disturbance variance is this minus the variance its
    /// parents explain (an error if they explain more).
    #[serde(default)]
    pub total_variance: Option<f64>,
}

/// A linear structural path: `to` gains `coefficient * from`.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StructuralPath {
    pub from: String,
    pub to: String,
    pub coefficient: f64,
}

/// An indicator item: `mean + loading * construct + sum(cross loadings) + error`, optionally
/// coarsened into ordered categories.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Item {
    pub name: String,
    pub construct: String,
    /// Unstandardised loading on `construct` (negative for a reverse-worded item).
    pub loading: f64,
    /// Variance of the item's own error.
    pub error_variance: f64,
    /// Extra loadings on other constructs: a planted impurity.
    #[serde(default)]
    pub cross_loadings: Vec<CrossLoading>,
    /// Cut points on the item's continuous value, strictly increasing; k - 1 thresholds give
    /// codes 1..k, code c meaning threshold[c-2] < value <= threshold[c-1]. Absent: continuous.
    #[serde(default)]
    pub thresholds: Option<Vec<f64>>,
    /// Added to the continuous value before coarsening.
    #[serde(default)]
    pub mean: f64,
    /// This item's missing rate, overriding the model's global `missing`.
    #[serde(default)]
    pub missing: Option<f64>,
}

/// An extra loading of an item on a second construct.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CrossLoading {
    pub construct: String,
    pub loading: f64,
}

/// A single continuous measure of a construct: `mean + loading * construct + error`, the error
/// variance set so that the share of the variance due to the construct equals `reliability`.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ObservedVariable {
    pub name: String,
    pub construct: String,
    /// In (0, 1]: loading^2 var(construct) / var(variable).
    pub reliability: f64,
    /// Scale of the variable (default 1).
    #[serde(default = "default_one")]
    pub loading: f64,
    #[serde(default)]
    pub mean: f64,
    #[serde(default)]
    pub missing: Option<f64>,
}

/// A covariance between the errors of two analysed variables: a planted impurity.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CorrelatedError {
    pub items: [String; 2],
    pub covariance: f64,
}

/// Drawn data, column-major.
#[derive(Debug, Clone, PartialEq)]
pub struct SimulatedTable {
    /// Column names in output order: id, constants, items, observed variables.
    pub columns: Vec<String>,
    /// One vector per column, each `rows()` long; `None` is a missing value. A text constant
    /// column holds `None` in every row here and its label in `text_labels`.
    pub values: Vec<Vec<Option<f64>>>,
    /// Whether each column holds whole numbers only (id, coarsened items, whole constants).
    pub integer_columns: Vec<bool>,
    /// `Some(label)` for a constant text column, `None` for every numeric column.
    pub text_labels: Vec<Option<String>>,
    /// Whether each column is a model variable (item or observed) rather than an extra column.
    pub analysed_columns: Vec<bool>,
}

/// Population values of a model, for comparison with what an analysis recovered.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Truth {
    /// Construct names, in file order (the order of the latent matrices).
    pub constructs: Vec<String>,
    #[serde(serialize_with = "matrix_rows")]
    pub latent_covariance: DMatrix<f64>,
    #[serde(serialize_with = "matrix_rows")]
    pub latent_correlation: DMatrix<f64>,
    /// Analysed variables in output order (the order of `implied_covariance`).
    pub variables: Vec<String>,
    /// Covariance of the variables' continuous values (before coarsening and missingness).
    #[serde(serialize_with = "matrix_rows")]
    pub implied_covariance: DMatrix<f64>,
    /// Every non-zero loading, main loadings and cross loadings, in variable order.
    pub loadings: Vec<TrueLoading>,
    /// Every structural path, in file order.
    pub paths: Vec<TruePath>,
    /// Every correlated error, in file order.
    pub error_covariances: Vec<TrueErrorCovariance>,
    /// Share of each variable's continuous variance due to the constructs.
    pub reliabilities: Vec<TrueReliability>,
    /// Variables with a cross loading or a correlated error, in variable order.
    pub impure: Vec<String>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TrueLoading {
    pub variable: String,
    pub construct: String,
    /// Whether this is the variable's main loading (false: a cross loading).
    pub main: bool,
    pub loading: f64,
    /// loading * sd(construct) / sd(variable), on the continuous value.
    pub standardized: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TruePath {
    pub from: String,
    pub to: String,
    pub coefficient: f64,
    /// coefficient * sd(from) / sd(to).
    pub standardized: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TrueErrorCovariance {
    pub a: String,
    pub b: String,
    pub covariance: f64,
    /// covariance / sqrt(error variance a * error variance b).
    pub correlation: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TrueReliability {
    pub variable: String,
    /// 1 - error variance / total variance of the continuous value.
    pub reliability: f64,
}

fn matrix_rows<S: Serializer>(m: &DMatrix<f64>, s: S) -> Result<S::Ok, S::Error> {
    let rows: Vec<Vec<f64>> = m.row_iter().map(|r| r.iter().copied().collect()).collect();
    rows.serialize(s)
}

/// One analysed variable after validation: loadings by construct index.
#[derive(Debug, Clone)]
struct Variable {
    name: String,
    loadings: Vec<(usize, f64, bool)>,
    mean: f64,
    thresholds: Option<Vec<f64>>,
    missing: f64,
}

/// The model in index form, ready to draw from.
#[derive(Debug, Clone)]
struct Resolved {
    /// Construct indices in topological order.
    order: Vec<usize>,
    /// For each construct, its (parent, coefficient) pairs in path order.
    parents: Vec<Vec<(usize, f64)>>,
    disturbance_sd: Vec<f64>,
    latent_cov: DMatrix<f64>,
    variables: Vec<Variable>,
    /// Error covariance matrix Theta.
    theta: DMatrix<f64>,
    /// Row i of a lower-triangular factor L with L L' = Theta, as (column, value) non-zeros.
    error_factor: Vec<Vec<(usize, f64)>>,
}

fn err(msg: String) -> StatsError {
    StatsError::InvalidInput(msg)
}

fn check_rate(problems: &mut Vec<String>, what: &str, rate: f64) {
    if !(0.0..1.0).contains(&rate) {
        problems.push(format!("{what}: missing rate {rate} is outside [0, 1)"));
    }
}

fn check_finite(problems: &mut Vec<String>, what: &str, v: f64) {
    if !v.is_finite() {
        problems.push(format!("{what} is not a finite number"));
    }
}

impl SimulationModel {
    /// Check the model: format version, unique non-empty names, known constructs in items, paths
    /// and cross loadings, an acyclic path graph (the error names one cycle), non-negative
    /// variances, strictly increasing thresholds, reliabilities in (0, 1], missing rates in
    /// [0, 1), and a positive-definite error covariance for every group of correlated errors.
    /// All first-stage problems are reported together, separated by `; `.
    pub fn validate(&self) -> Result<(), StatsError> {
        self.resolve().map(|_| ())
    }

    fn construct_index(&self, name: &str) -> Option<usize> {
        self.constructs.iter().position(|c| c.name == name)
    }

    fn basic_problems(&self) -> Vec<String> {
        let mut p = Vec::new();
        if self.simulate != MODEL_FORMAT_VERSION {
            p.push(format!(
                "model format version {} is not supported (this build reads version {MODEL_FORMAT_VERSION})",
                self.simulate
            ));
        }
        if self.constructs.is_empty() {
            p.push("the model declares no construct".into());
        }
        if self.items.is_empty() && self.observed.is_empty() {
            p.push("the model declares no item and no observed variable".into());
        }
        check_rate(&mut p, "model", self.missing);

        let mut seen: Vec<&str> = Vec::new();
        for c in &self.constructs {
            if c.name.is_empty() {
                p.push("a construct has an empty name".into());
            } else if seen.contains(&c.name.as_str()) {
                p.push(format!("construct `{}` is declared twice", c.name));
            }
            seen.push(&c.name);
            let what = format!("construct `{}`", c.name);
            match (c.variance, c.total_variance) {
                (Some(_), Some(_)) => p.push(format!("{what}: give `variance` or `total_variance`, not both")),
                (Some(v), None) | (None, Some(v)) => {
                    check_finite(&mut p, &format!("{what}: variance"), v);
                    if v < 0.0 {
                        p.push(format!("{what}: variance {v} is negative"));
                    }
                }
                (None, None) => {}
            }
        }

        let mut columns: Vec<(&str, &str)> = Vec::new();
        if let Some(id) = &self.id {
            columns.push((&id.name, "the id column"));
        }
        for c in &self.constants {
            columns.push((&c.name, "a constant column"));
            if let ConstantValue::Number(v) = c.value {
                check_finite(&mut p, &format!("constant `{}`", c.name), v);
            }
        }
        columns.extend(self.items.iter().map(|it| (it.name.as_str(), "an item")));
        columns.extend(self.observed.iter().map(|o| (o.name.as_str(), "an observed variable")));
        for (k, &(name, kind)) in columns.iter().enumerate() {
            if name.is_empty() {
                p.push(format!("{kind} has an empty name"));
            } else if columns[..k].iter().any(|&(other, _)| other == name) {
                p.push(format!("column `{name}` is declared twice"));
            }
        }
        let variable_names: Vec<&str> =
            self.items.iter().map(|it| it.name.as_str()).chain(self.observed.iter().map(|o| o.name.as_str())).collect();

        let known = |p: &mut Vec<String>, what: &str, name: &str| {
            if self.construct_index(name).is_none() {
                p.push(format!("{what} names unknown construct `{name}`"));
            }
        };
        for (k, path) in self.paths.iter().enumerate() {
            known(&mut p, "a path", &path.from);
            known(&mut p, "a path", &path.to);
            check_finite(&mut p, &format!("path `{}` -> `{}`: coefficient", path.from, path.to), path.coefficient);
            if self.paths[..k].iter().any(|q| q.from == path.from && q.to == path.to) {
                p.push(format!("path `{}` -> `{}` is declared twice", path.from, path.to));
            }
        }
        for it in &self.items {
            let what = format!("item `{}`", it.name);
            known(&mut p, &what, &it.construct);
            check_finite(&mut p, &format!("{what}: loading"), it.loading);
            check_finite(&mut p, &format!("{what}: mean"), it.mean);
            check_finite(&mut p, &format!("{what}: error variance"), it.error_variance);
            if it.error_variance < 0.0 {
                p.push(format!("{what}: error variance {} is negative", it.error_variance));
            }
            for (k, cl) in it.cross_loadings.iter().enumerate() {
                known(&mut p, &what, &cl.construct);
                check_finite(&mut p, &format!("{what}: cross loading on `{}`", cl.construct), cl.loading);
                if cl.construct == it.construct || it.cross_loadings[..k].iter().any(|q| q.construct == cl.construct) {
                    p.push(format!("{what} loads on construct `{}` twice", cl.construct));
                }
            }
            if let Some(t) = &it.thresholds {
                if t.is_empty() {
                    p.push(format!("{what}: `thresholds` is empty (give at least one cut point)"));
                }
                if t.iter().any(|v| !v.is_finite()) {
                    p.push(format!("{what}: a threshold is not a finite number"));
                } else if let Some(w) = t.windows(2).find(|w| w[1] <= w[0]) {
                    p.push(format!("{what}: thresholds must increase strictly, but {} is followed by {}", w[0], w[1]));
                }
            }
            if let Some(r) = it.missing {
                check_rate(&mut p, &what, r);
            }
        }
        for o in &self.observed {
            let what = format!("observed variable `{}`", o.name);
            known(&mut p, &what, &o.construct);
            check_finite(&mut p, &format!("{what}: loading"), o.loading);
            check_finite(&mut p, &format!("{what}: mean"), o.mean);
            if o.loading == 0.0 {
                p.push(format!("{what}: loading is zero"));
            }
            if !(o.reliability > 0.0 && o.reliability <= 1.0) {
                p.push(format!("{what}: reliability {} is outside (0, 1]", o.reliability));
            }
            if let Some(r) = o.missing {
                check_rate(&mut p, &what, r);
            }
        }
        for (k, ce) in self.correlated_errors.iter().enumerate() {
            let [a, b] = &ce.items;
            for name in [a, b] {
                if !variable_names.contains(&name.as_str()) {
                    p.push(format!("a correlated error names unknown item `{name}`"));
                }
            }
            if a == b {
                p.push(format!("correlated error `{a}` ~ `{b}` pairs an item with itself"));
            }
            check_finite(&mut p, &format!("correlated error `{a}` ~ `{b}`: covariance"), ce.covariance);
            let same =
                |q: &CorrelatedError| (q.items[0] == *a && q.items[1] == *b) || (q.items[0] == *b && q.items[1] == *a);
            if self.correlated_errors[..k].iter().any(same) {
                p.push(format!("correlated error `{a}` ~ `{b}` is declared twice"));
            }
        }
        p
    }

    /// Kahn's algorithm, always taking the ready construct declared first, so the order (and
    /// with it the draw order) depends on the file only. On a cycle, names one.
    fn topological_order(&self, parents: &[Vec<(usize, f64)>]) -> Result<Vec<usize>, StatsError> {
        let m = self.constructs.len();
        let mut remaining: Vec<usize> = parents.iter().map(Vec::len).collect();
        let mut done = vec![false; m];
        let mut order = Vec::with_capacity(m);
        while order.len() < m {
            let Some(next) = (0..m).find(|&j| !done[j] && remaining[j] == 0) else {
                return Err(err(format!("structural paths form a cycle: {}", self.find_cycle(parents, &done))));
            };
            done[next] = true;
            order.push(next);
            for (j, ps) in parents.iter().enumerate() {
                remaining[j] -= ps.iter().filter(|(p, _)| *p == next).count();
            }
        }
        Ok(order)
    }

    /// Among constructs left over by Kahn's algorithm every one has a parent that is left over
    /// too, so walking to such a parent repeatedly must revisit a construct: that loop is a cycle.
    fn find_cycle(&self, parents: &[Vec<(usize, f64)>], done: &[bool]) -> String {
        let Some(start) = (0..done.len()).find(|&j| !done[j]) else {
            return String::new();
        };
        let mut walk = vec![start];
        let mut at = start;
        while let Some(&(p, _)) = parents[at].iter().find(|(p, _)| !done[*p]) {
            if let Some(pos) = walk.iter().position(|&w| w == p) {
                // The walk runs against the arrows (child to parent); reverse it to read causes first.
                let mut cycle: Vec<usize> = walk[pos..].to_vec();
                cycle.reverse();
                // Start at the construct declared first, so a cycle always reads the same way.
                let first = cycle.iter().enumerate().min_by_key(|&(_, &j)| j).map_or(0, |(k, _)| k);
                cycle.rotate_left(first);
                cycle.push(cycle[0]);
                return cycle
                    .iter()
                    .map(|&j| format!("`{}`", self.constructs[j].name))
                    .collect::<Vec<_>>()
                    .join(" -> ");
            }
            walk.push(p);
            at = p;
        }
        format!("`{}`", self.constructs[start].name)
    }

    fn resolve(&self) -> Result<Resolved, StatsError> {
        let problems = self.basic_problems();
        if !problems.is_empty() {
            return Err(err(problems.join("; ")));
        }
        let m = self.constructs.len();
        let idx = |name: &str| self.construct_index(name).ok_or_else(|| err(format!("unknown construct `{name}`")));

        let mut parents: Vec<Vec<(usize, f64)>> = vec![Vec::new(); m];
        for path in &self.paths {
            parents[idx(&path.to)?].push((idx(&path.from)?, path.coefficient));
        }
        let order = self.topological_order(&parents)?;

        // Latent covariances by the path recursion in topological order (Wright 1921; Bollen
        // 1989, ch. 4): cov(eta_j, eta_k) = sum_p b_jp cov(eta_p, eta_k) for k drawn before j,
        // var(eta_j) = sum_p sum_q b_jp b_jq cov(eta_p, eta_q) + psi_j.
        let mut cov = DMatrix::<f64>::zeros(m, m);
        let mut disturbance_sd = vec![0.0; m];
        for (pos, &j) in order.iter().enumerate() {
            for &k in &order[..pos] {
                let c: f64 = parents[j].iter().map(|&(p, b)| b * cov[(p, k)]).sum();
                // `+ 0.0` turns a -0.0 (a negative coefficient times a zero covariance) into 0.0,
                // which reads better in reports.
                let c = c + 0.0;
                cov[(j, k)] = c;
                cov[(k, j)] = c;
            }
            let explained: f64 = parents[j]
                .iter()
                .flat_map(|&(p, bp)| parents[j].iter().map(move |&(q, bq)| (p, q, bp * bq)))
                .map(|(p, q, w)| w * cov[(p, q)])
                .sum();
            let c = &self.constructs[j];
            let psi = match c.total_variance {
                Some(total) => {
                    if total < explained {
                        return Err(err(format!(
                            "construct `{}`: total variance {total} is less than the {explained:.4} its paths explain",
                            c.name
                        )));
                    }
                    total - explained
                }
                None => c.variance.unwrap_or(1.0),
            };
            disturbance_sd[j] = psi.sqrt();
            cov[(j, j)] = explained + psi;
            if cov[(j, j)] <= 0.0 {
                return Err(err(format!("construct `{}` has zero variance", c.name)));
            }
        }

        let mut variables = Vec::with_capacity(self.items.len() + self.observed.len());
        let mut error_var = Vec::with_capacity(variables.capacity());
        let global = self.missing;
        for it in &self.items {
            let mut loadings = vec![(idx(&it.construct)?, it.loading, true)];
            for cl in &it.cross_loadings {
                loadings.push((idx(&cl.construct)?, cl.loading, false));
            }
            variables.push(Variable {
                name: it.name.clone(),
                loadings,
                mean: it.mean,
                thresholds: it.thresholds.clone(),
                missing: it.missing.unwrap_or(global),
            });
            error_var.push(it.error_variance);
        }
        for o in &self.observed {
            let k = idx(&o.construct)?;
            // reliability = l^2 var / (l^2 var + theta)  =>  theta = l^2 var (1 - r) / r.
            let common = o.loading * o.loading * cov[(k, k)];
            error_var.push(common * (1.0 - o.reliability) / o.reliability);
            variables.push(Variable {
                name: o.name.clone(),
                loadings: vec![(k, o.loading, true)],
                mean: o.mean,
                thresholds: None,
                missing: o.missing.unwrap_or(global),
            });
        }

        let p = variables.len();
        let var_idx = |name: &str| {
            variables.iter().position(|v| v.name == name).ok_or_else(|| err(format!("unknown item `{name}`")))
        };
        let mut theta = DMatrix::from_diagonal(&nalgebra::DVector::from_vec(error_var));
        // Union-find over correlated-error pairs: each group is factored on its own, so items
        // without correlated errors keep error = sqrt(theta_ii) * z_i exactly.
        let mut group: Vec<usize> = (0..p).collect();
        fn root(group: &mut [usize], mut i: usize) -> usize {
            while group[i] != i {
                group[i] = group[group[i]];
                i = group[i];
            }
            i
        }
        for ce in &self.correlated_errors {
            let (a, b) = (var_idx(&ce.items[0])?, var_idx(&ce.items[1])?);
            let bound = (theta[(a, a)] * theta[(b, b)]).sqrt();
            if ce.covariance.abs() >= bound {
                return Err(err(format!(
                    "correlated error `{}` ~ `{}`: covariance {} must be smaller in size than {bound:.4}, the root of the product of their error variances",
                    ce.items[0], ce.items[1], ce.covariance
                )));
            }
            theta[(a, b)] = ce.covariance;
            theta[(b, a)] = ce.covariance;
            let (ra, rb) = (root(&mut group, a), root(&mut group, b));
            group[ra.max(rb)] = ra.min(rb);
        }
        let mut error_factor: Vec<Vec<(usize, f64)>> = (0..p).map(|i| vec![(i, theta[(i, i)].sqrt())]).collect();
        for g in 0..p {
            let members: Vec<usize> = (0..p).filter(|&i| root(&mut group, i) == g).collect();
            if members.len() < 2 {
                continue;
            }
            let sub = DMatrix::from_fn(members.len(), members.len(), |r, c| theta[(members[r], members[c])]);
            let chol = nalgebra::Cholesky::new(sub).ok_or_else(|| StatsError::Singular {
                what: format!(
                    "error covariance of {}",
                    members.iter().map(|&i| format!("`{}`", variables[i].name)).collect::<Vec<_>>().join(", ")
                ),
            })?;
            let l = chol.l();
            for (r, &i) in members.iter().enumerate() {
                error_factor[i] = (0..=r).map(|c| (members[c], l[(r, c)])).filter(|&(_, v)| v != 0.0).collect();
            }
        }

        Ok(Resolved { order, parents, disturbance_sd, latent_cov: cov, variables, theta, error_factor })
    }

    /// Draw `n` rows with `seed` (the file's `n` and `seed` are defaults for the caller).
    ///
    /// Model (Bollen 1989, ch. 8, all-y form): eta = B eta + zeta with zeta ~ N(0, diag(psi));
    /// x = mu + Lambda eta + e with e ~ N(0, Theta). Coarsened items report
    /// 1 + #{thresholds < x}; then each analysed value is dropped with its missing rate.
    ///
    /// Draw order (fixed; part of the format's promise): two ChaCha8 generators seeded with
    /// `ChaCha8Rng::seed_from_u64(seed)`, stream 0 for values and stream 1 for missingness.
    /// For each row in turn: one `StandardNormal` per construct in topological order (ties
    /// broken by file order), eta_j = sum over paths into j in file order of b * eta_parent, plus
    /// sqrt(psi_j) * z; then one `StandardNormal` per analysed variable in column order, errors
    /// e = L z with L the Cholesky factor of each group of correlated errors (sqrt(theta_ii) for
    /// an item with none); then, from stream 1, one uniform [0, 1) per analysed variable in
    /// column order, missing when below the rate (drawn even at rate 0). Rows are drawn one
    /// after the other, so the first rows of a larger `n` equal a smaller draw with the same seed.
    ///
    /// Arithmetic is plain IEEE (no fused operations), so results agree across platforms as
    /// far as rand_distr's ziggurat does: it calls `exp` and `ln` in rare rejection and tail
    /// steps, where a libm differing in the last bit could flip a comparison with probability
    /// of order 1e-16 per draw.
    pub fn draw(&self, n: usize, seed: u64) -> Result<SimulatedTable, StatsError> {
        let r = self.resolve()?;
        if n == 0 {
            return Err(StatsError::NotEnoughData { what: "a simulated table".into(), needed: 1, found: 0 });
        }
        let mut values_rng = ChaCha8Rng::seed_from_u64(seed);
        values_rng.set_stream(VALUE_STREAM);
        let mut missing_rng = ChaCha8Rng::seed_from_u64(seed);
        missing_rng.set_stream(MISSING_STREAM);

        let m = self.constructs.len();
        let p = r.variables.len();
        let mut eta = vec![0.0; m];
        let mut z = vec![0.0; p];
        let mut drawn: Vec<Vec<Option<f64>>> = vec![Vec::with_capacity(n); p];
        for row in 0..n {
            for &j in &r.order {
                let zj: f64 = values_rng.sample(StandardNormal);
                let mut v = 0.0;
                for &(parent, b) in &r.parents[j] {
                    v += b * eta[parent];
                }
                eta[j] = v + r.disturbance_sd[j] * zj;
            }
            for zi in z.iter_mut() {
                *zi = values_rng.sample(StandardNormal);
            }
            for (i, var) in r.variables.iter().enumerate() {
                let mut x = var.mean;
                for &(k, l, _) in &var.loadings {
                    x += l * eta[k];
                }
                for &(c, l) in &r.error_factor[i] {
                    x += l * z[c];
                }
                if let Some(t) = &var.thresholds {
                    x = (1 + t.iter().filter(|&&cut| x > cut).count()) as f64;
                }
                drawn[i].push(Some(x));
            }
            for (i, var) in r.variables.iter().enumerate() {
                let u: f64 = missing_rng.random();
                if u < var.missing {
                    drawn[i][row] = None;
                }
            }
        }

        let mut table = SimulatedTable {
            columns: Vec::new(),
            values: Vec::new(),
            integer_columns: Vec::new(),
            text_labels: Vec::new(),
            analysed_columns: Vec::new(),
        };
        if let Some(id) = &self.id {
            table.columns.push(id.name.clone());
            table.values.push((0..n).map(|row| Some((id.start + row as i64) as f64)).collect());
            table.integer_columns.push(true);
            table.text_labels.push(None);
            table.analysed_columns.push(false);
        }
        for c in &self.constants {
            table.columns.push(c.name.clone());
            match &c.value {
                ConstantValue::Number(v) => {
                    table.values.push(vec![Some(*v); n]);
                    table.integer_columns.push(v.fract() == 0.0);
                    table.text_labels.push(None);
                }
                ConstantValue::Text(s) => {
                    table.values.push(vec![None; n]);
                    table.integer_columns.push(false);
                    table.text_labels.push(Some(s.clone()));
                }
            }
            table.analysed_columns.push(false);
        }
        for (var, col) in r.variables.iter().zip(drawn) {
            table.columns.push(var.name.clone());
            table.values.push(col);
            table.integer_columns.push(var.thresholds.is_some());
            table.text_labels.push(None);
            table.analysed_columns.push(true);
        }
        Ok(table)
    }

    /// Population values: latent covariance and correlation (path recursion, Wright 1921);
    /// implied covariance of the continuous values Sigma = Lambda C Lambda' + Theta with C the
    /// latent covariance (Joreskog 1973; Bollen 1989, ch. 8); standardized loadings
    /// l * sd(eta) / sd(x) and paths b * sd(from) / sd(to) (Bollen 1989, ch. 8); error
    /// correlations; reliabilities 1 - theta_ii / sigma_ii. For a coarsened item these refer to
    /// its continuous value, which is what polychoric and polyserial correlations estimate.
    /// Errors as `validate` does, or `Constant` for a variable with zero variance.
    pub fn truth(&self) -> Result<Truth, StatsError> {
        let r = self.resolve()?;
        let m = self.constructs.len();
        let p = r.variables.len();
        let mut lambda = DMatrix::<f64>::zeros(p, m);
        for (i, v) in r.variables.iter().enumerate() {
            for &(k, l, _) in &v.loadings {
                lambda[(i, k)] += l;
            }
        }
        let mut sigma = &lambda * &r.latent_cov * lambda.transpose() + &r.theta;
        sigma = (&sigma + sigma.transpose()) * 0.5;
        if let Some(i) = (0..p).find(|&i| sigma[(i, i)] <= 0.0) {
            return Err(StatsError::Constant { what: format!("variable `{}`", r.variables[i].name) });
        }
        let sd_eta: Vec<f64> = (0..m).map(|k| r.latent_cov[(k, k)].sqrt()).collect();
        let sd_x: Vec<f64> = (0..p).map(|i| sigma[(i, i)].sqrt()).collect();
        let latent_correlation = DMatrix::from_fn(m, m, |a, b| r.latent_cov[(a, b)] / (sd_eta[a] * sd_eta[b]));

        let mut loadings = Vec::new();
        for (i, v) in r.variables.iter().enumerate() {
            for &(k, l, main) in &v.loadings {
                loadings.push(TrueLoading {
                    variable: v.name.clone(),
                    construct: self.constructs[k].name.clone(),
                    main,
                    loading: l,
                    standardized: l * sd_eta[k] / sd_x[i],
                });
            }
        }
        let idx = |name: &str| self.construct_index(name).unwrap_or(0);
        let paths = self
            .paths
            .iter()
            .map(|path| TruePath {
                from: path.from.clone(),
                to: path.to.clone(),
                coefficient: path.coefficient,
                standardized: path.coefficient * sd_eta[idx(&path.from)] / sd_eta[idx(&path.to)],
            })
            .collect();
        let vidx = |name: &str| r.variables.iter().position(|v| v.name == name).unwrap_or(0);
        let error_covariances = self
            .correlated_errors
            .iter()
            .map(|ce| {
                let (a, b) = (vidx(&ce.items[0]), vidx(&ce.items[1]));
                TrueErrorCovariance {
                    a: ce.items[0].clone(),
                    b: ce.items[1].clone(),
                    covariance: ce.covariance,
                    correlation: ce.covariance / (r.theta[(a, a)] * r.theta[(b, b)]).sqrt(),
                }
            })
            .collect();
        let reliabilities = (0..p)
            .map(|i| TrueReliability {
                variable: r.variables[i].name.clone(),
                reliability: 1.0 - r.theta[(i, i)] / sigma[(i, i)],
            })
            .collect();
        let impure = (0..p)
            .filter(|&i| r.variables[i].loadings.len() > 1 || (0..p).any(|j| j != i && r.theta[(i, j)] != 0.0))
            .map(|i| r.variables[i].name.clone())
            .collect();
        Ok(Truth {
            constructs: self.constructs.iter().map(|c| c.name.clone()).collect(),
            latent_covariance: r.latent_cov,
            latent_correlation,
            variables: r.variables.iter().map(|v| v.name.clone()).collect(),
            implied_covariance: sigma,
            loadings,
            paths,
            error_covariances,
            reliabilities,
            impure,
        })
    }
}

fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) { format!("\"{}\"", s.replace('"', "\"\"")) } else { s.to_string() }
}

impl SimulatedTable {
    /// Number of rows.
    pub fn rows(&self) -> usize {
        self.values.first().map_or(0, Vec::len)
    }

    /// The table as CSV (RFC 4180 quoting): a header line, then one line per row, each ending
    /// in `\n`. Integer columns print without decimals, other numbers with `{:.6}` (six digits
    /// after the point, `-0.000000` written `0.000000`), missing values as empty fields. The
    /// text depends on the values only, so equal tables always give equal bytes.
    pub fn csv_string(&self) -> String {
        let mut out = String::new();
        out.push_str(&self.columns.iter().map(|c| csv_field(c)).collect::<Vec<_>>().join(","));
        out.push('\n');
        let text: Vec<Option<String>> = self.text_labels.iter().map(|t| t.as_deref().map(csv_field)).collect();
        for row in 0..self.rows() {
            for (j, col) in self.values.iter().enumerate() {
                if j > 0 {
                    out.push(',');
                }
                if let Some(Some(label)) = text.get(j) {
                    out.push_str(label);
                    continue;
                }
                let Some(v) = col[row] else { continue };
                if self.integer_columns.get(j).copied().unwrap_or(false) {
                    out.push_str(&format!("{v:.0}"));
                } else {
                    let s = format!("{v:.6}");
                    out.push_str(if s == "-0.000000" { "0.000000" } else { &s });
                }
            }
            out.push('\n');
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::DMatrix;
    use statrs::distribution::{ContinuousCDF, Normal};

    fn parse(yaml: &str) -> SimulationModel {
        serde_yaml::from_str(yaml).unwrap()
    }

    fn invalid(yaml: &str) -> String {
        match parse(yaml).validate() {
            Err(StatsError::InvalidInput(msg)) => msg,
            other => panic!("expected an invalid-input error, got {other:?}"),
        }
    }

    const SMALL: &str = "
simulate: 1
missing: 0.1
id: {name: id, start: 101}
constants: [{name: wave, value: spring}, {name: round, value: 2}]
constructs: [{name: a}, {name: b, total_variance: 1}]
paths: [{from: a, to: b, coefficient: 0.6}]
items:
  - {name: a1, construct: a, loading: 0.8, error_variance: 0.36, thresholds: [-0.5, 0.5]}
  - {name: a2, construct: a, loading: 0.7, error_variance: 0.51}
  - {name: b1, construct: b, loading: 0.9, error_variance: 0.19}
observed: [{name: s, construct: b, reliability: 0.5}]
";

    // A model with every feature: an endogenous construct given by its disturbance variance and
    // one by its total variance, a cross loading, a group of three correlated errors (a 3x3
    // Cholesky), an observed variable with scale and mean, coarsened items, and a per-item
    // missing rate.
    const RICH: &str = "
simulate: 1
missing: 0.05
constructs:
  - {name: a, variance: 1.5}
  - {name: b, variance: 0.6}
  - {name: c, total_variance: 1.0}
paths:
  - {from: a, to: b, coefficient: 0.5}
  - {from: b, to: c, coefficient: -0.4}
  - {from: a, to: c, coefficient: 0.3}
items:
  - {name: a1, construct: a, loading: 1.0, error_variance: 0.5, mean: 3}
  - {name: a2, construct: a, loading: 0.8, error_variance: 0.6}
  - {name: a3, construct: a, loading: -0.6, error_variance: 0.7, thresholds: [-1.0, 0.0, 0.8]}
  - {name: b1, construct: b, loading: 1.0, error_variance: 0.4}
  - {name: b2, construct: b, loading: 1.2, error_variance: 0.5, cross_loadings: [{construct: a, loading: 0.4}]}
  - {name: b3, construct: b, loading: 0.9, error_variance: 0.6, mean: 0.5, thresholds: [-1.5, -0.5, 0.5, 1.5], missing: 0.2}
  - {name: c1, construct: c, loading: 0.8, error_variance: 0.36}
  - {name: c2, construct: c, loading: 0.7, error_variance: 0.51}
  - {name: c3, construct: c, loading: 0.6, error_variance: 0.64, thresholds: [0.0]}
observed:
  - {name: s, construct: c, reliability: 0.7, loading: 2.0, mean: 10}
correlated_errors:
  - {items: [a2, c1], covariance: 0.2}
  - {items: [c1, c2], covariance: -0.15}
  - {items: [a1, s], covariance: 0.3}
";

    /// Sigma = Lambda (I-B)^-1 Psi (I-B)^-T Lambda' + Theta (Joreskog 1973; Bollen 1989,
    /// ch. 8) for RICH, with the matrices written out by hand here rather than taken from
    /// the module, plus the means of the ten variables.
    fn rich_sigma() -> (DMatrix<f64>, Vec<f64>) {
        let mut b = DMatrix::<f64>::zeros(3, 3);
        b[(1, 0)] = 0.5;
        b[(2, 1)] = -0.4;
        b[(2, 0)] = 0.3;
        let inv = (DMatrix::<f64>::identity(3, 3) - &b).try_inverse().unwrap();
        // psi_c makes var(c) = 1: the variance explained with psi_c = 0, subtracted from 1.
        let psi0 = DMatrix::from_diagonal(&nalgebra::DVector::from_vec(vec![1.5, 0.6, 0.0]));
        let explained_c = (&inv * &psi0 * inv.transpose())[(2, 2)];
        let psi = DMatrix::from_diagonal(&nalgebra::DVector::from_vec(vec![1.5, 0.6, 1.0 - explained_c]));
        #[rustfmt::skip]
        let lambda = DMatrix::from_row_slice(10, 3, &[
            1.0, 0.0, 0.0,
            0.8, 0.0, 0.0,
            -0.6, 0.0, 0.0,
            0.0, 1.0, 0.0,
            0.4, 1.2, 0.0,
            0.0, 0.9, 0.0,
            0.0, 0.0, 0.8,
            0.0, 0.0, 0.7,
            0.0, 0.0, 0.6,
            0.0, 0.0, 2.0,
        ]);
        // s: reliability 0.7 with loading 2 on var(c) = 1 gives theta = 4 (1 - 0.7) / 0.7.
        let theta_s = 4.0 * 0.3 / 0.7;
        let mut theta = DMatrix::from_diagonal(&nalgebra::DVector::from_vec(vec![
            0.5, 0.6, 0.7, 0.4, 0.5, 0.6, 0.36, 0.51, 0.64, theta_s,
        ]));
        for (i, j, c) in [(1, 6, 0.2), (6, 7, -0.15), (0, 9, 0.3)] {
            theta[(i, j)] = c;
            theta[(j, i)] = c;
        }
        let sigma = &lambda * &inv * &psi * inv.transpose() * lambda.transpose() + theta;
        (sigma, vec![3.0, 0.0, 0.0, 0.0, 0.0, 0.5, 0.0, 0.0, 0.0, 10.0])
    }

    #[test]
    fn same_seed_gives_identical_csv_and_other_seeds_differ() {
        let model = parse(SMALL);
        let first = model.draw(200, 42).unwrap().csv_string();
        let second = model.draw(200, 42).unwrap().csv_string();
        assert_eq!(first, second);
        assert_ne!(first, model.draw(200, 43).unwrap().csv_string());
        // Rows are drawn one after another: a longer draw starts with the shorter one.
        let longer = model.draw(300, 42).unwrap().csv_string();
        assert!(longer.starts_with(&first));
    }

    #[test]
    fn draw_follows_the_documented_order() {
        // Replays the draw order documented on `draw` for SMALL by hand: a then b (topological
        // order), then one normal per variable, then one uniform per variable from stream 1.
        let model = parse(SMALL);
        let table = model.draw(4, 1).unwrap();
        let mut values = ChaCha8Rng::seed_from_u64(1);
        values.set_stream(0);
        let mut holes = ChaCha8Rng::seed_from_u64(1);
        holes.set_stream(1);
        for row in 0..4 {
            let a: f64 = values.sample::<f64, _>(StandardNormal);
            let zb: f64 = values.sample(StandardNormal);
            // var(b) = 1 = 0.6^2 + psi, so psi = 0.64; s has loading 1 and reliability 0.5, so
            // its error variance is 1 (1 - 0.5) / 0.5 = 1.
            let b = 0.6 * a + 0.64f64.sqrt() * zb;
            let z: Vec<f64> = (0..4).map(|_| values.sample(StandardNormal)).collect();
            let a1 = 0.8 * a + 0.36f64.sqrt() * z[0];
            let expected = [
                1.0 + [-0.5, 0.5].iter().filter(|&&t| a1 > t).count() as f64,
                0.7 * a + 0.51f64.sqrt() * z[1],
                0.9 * b + 0.19f64.sqrt() * z[2],
                b + z[3],
            ];
            for (k, e) in expected.iter().enumerate() {
                let u: f64 = holes.random();
                let want = (u >= 0.1).then_some(*e);
                assert_eq!(table.values[3 + k][row], want, "row {row}, column {}", table.columns[3 + k]);
            }
        }
        // Pinned output of this implementation (rand_chacha 0.9, rand_distr 0.5), not a
        // correctness check: a change here means every seeded data file changes, which needs a
        // changelog line.
        assert_eq!(
            table.csv_string(),
            "id,wave,round,a1,a2,b1,s\n\
             101,spring,2,2,,-1.288120,-0.501899\n\
             102,spring,2,3,0.740167,-0.851907,-0.797478\n\
             103,spring,2,1,-2.085643,-1.098435,0.729545\n\
             104,spring,2,3,0.969570,0.240455,-1.439642\n"
        );
    }

    #[test]
    fn missing_rate_moves_holes_but_never_values() {
        let mut model = parse(SMALL);
        let with_holes = model.draw(500, 9).unwrap();
        model.missing = 0.0;
        let full = model.draw(500, 9).unwrap();
        for (a, b) in with_holes.values.iter().zip(&full.values) {
            for (x, y) in a.iter().zip(b) {
                assert!(x.is_none() || x == y);
            }
        }
        assert!(full.values.iter().all(|c| c.iter().all(Option::is_some) || c.iter().all(Option::is_none)));
    }

    #[test]
    fn table_layout_and_csv_format() {
        let t = parse(SMALL).draw(5, 3).unwrap();
        assert_eq!(t.columns, ["id", "wave", "round", "a1", "a2", "b1", "s"]);
        assert_eq!(t.integer_columns, [true, false, true, true, false, false, false]);
        assert_eq!(t.analysed_columns, [false, false, false, true, true, true, true]);
        assert_eq!(t.text_labels[1].as_deref(), Some("spring"));
        assert_eq!(t.rows(), 5);
        let csv = t.csv_string();
        let lines: Vec<&str> = csv.lines().collect();
        assert_eq!(lines[0], "id,wave,round,a1,a2,b1,s");
        assert!(lines[1].starts_with("101,spring,2,"));
        assert!(lines[5].starts_with("105,spring,2,"));
        for line in &lines[1..] {
            let f: Vec<&str> = line.split(',').collect();
            assert_eq!(f.len(), 7);
            assert!(f[3].is_empty() || ["1", "2", "3"].contains(&f[3]));
            for v in &f[4..] {
                // `{:.6}`: six digits after the point, or an empty field.
                assert!(v.is_empty() || v.split('.').nth(1).is_some_and(|d| d.len() == 6), "{v}");
            }
        }

        let hand = SimulatedTable {
            columns: vec!["x".into(), "label, quoted".into(), "k".into()],
            values: vec![vec![Some(-1e-9), None], vec![None, None], vec![Some(3.0), None]],
            integer_columns: vec![false, false, true],
            text_labels: vec![None, Some("say \"hi\"".into()), None],
            analysed_columns: vec![true, false, true],
        };
        assert_eq!(hand.csv_string(), "x,\"label, quoted\",k\n0.000000,\"say \"\"hi\"\"\",3\n,\"say \"\"hi\"\"\",\n");
    }

    #[test]
    fn validation_names_the_cycle() {
        let base = "simulate: 1\nitems: [{name: x, construct: a, loading: 1, error_variance: 1}]\n\
                    constructs: [{name: a}, {name: b}, {name: c}, {name: d}]\n";
        let msg = invalid(&format!(
            "{base}paths: [{{from: d, to: a, coefficient: 1}}, {{from: a, to: b, coefficient: 1}}, \
             {{from: b, to: c, coefficient: 1}}, {{from: c, to: a, coefficient: 1}}]"
        ));
        assert_eq!(msg, "structural paths form a cycle: `a` -> `b` -> `c` -> `a`");
        let msg = invalid(&format!("{base}paths: [{{from: b, to: b, coefficient: 0.5}}]"));
        assert_eq!(msg, "structural paths form a cycle: `b` -> `b`");
    }

    #[test]
    fn validation_reports_every_basic_problem() {
        let msg = invalid(
            "simulate: 1
missing: 1.0
constructs: [{name: a, variance: -1}, {name: b, variance: 1, total_variance: 1}]
paths: [{from: a, to: zz, coefficient: 1}]
items:
  - {name: x, construct: nope, loading: 1, error_variance: -0.5, thresholds: [0, 0]}
  - {name: y, construct: a, loading: 1, error_variance: 1, thresholds: [], missing: -0.1,
     cross_loadings: [{construct: a, loading: 0.2}, {construct: other, loading: 0.1}]}
  - {name: x, construct: a, loading: 1, error_variance: 1, thresholds: [1, 0.5]}
observed: [{name: s, construct: a, reliability: 1.5}]
correlated_errors: [{items: [x, ghost], covariance: 0.1}]
",
        );
        let expected = [
            "model: missing rate 1 is outside [0, 1)",
            "construct `a`: variance -1 is negative",
            "construct `b`: give `variance` or `total_variance`, not both",
            "column `x` is declared twice",
            "a path names unknown construct `zz`",
            "item `x` names unknown construct `nope`",
            "item `x`: error variance -0.5 is negative",
            "item `x`: thresholds must increase strictly, but 0 is followed by 0",
            "item `y` loads on construct `a` twice",
            "item `y` names unknown construct `other`",
            "item `y`: `thresholds` is empty (give at least one cut point)",
            "item `y`: missing rate -0.1 is outside [0, 1)",
            "item `x`: thresholds must increase strictly, but 1 is followed by 0.5",
            "observed variable `s`: reliability 1.5 is outside (0, 1]",
            "a correlated error names unknown item `ghost`",
        ];
        assert_eq!(msg, expected.join("; "));
    }

    #[test]
    fn validation_of_derived_quantities() {
        let msg = invalid(
            "simulate: 1
constructs: [{name: a, variance: 1}, {name: b, total_variance: 0.5}]
paths: [{from: a, to: b, coefficient: 0.9}]
items: [{name: x, construct: b, loading: 1, error_variance: 1}]
",
        );
        assert_eq!(msg, "construct `b`: total variance 0.5 is less than the 0.8100 its paths explain");
        let msg = invalid(
            "simulate: 1
constructs: [{name: a}]
items: [{name: x, construct: a, loading: 1, error_variance: 0.25}, {name: y, construct: a, loading: 1, error_variance: 1}]
correlated_errors: [{items: [x, y], covariance: 0.5}]
",
        );
        assert!(
            msg.starts_with("correlated error `x` ~ `y`: covariance 0.5 must be smaller in size than 0.5000"),
            "{msg}"
        );
        // Pairwise-admissible covariances whose 3x3 matrix is not positive definite.
        let model = parse(
            "simulate: 2
constructs: [{name: a}]
items:
  - {name: x, construct: a, loading: 1, error_variance: 1}
  - {name: y, construct: a, loading: 1, error_variance: 1}
  - {name: z, construct: a, loading: 1, error_variance: 1}
correlated_errors: [{items: [x, y], covariance: 0.9}, {items: [y, z], covariance: 0.9}, {items: [x, z], covariance: -0.9}]
",
        );
        assert!(
            matches!(model.validate(), Err(StatsError::InvalidInput(m)) if m.starts_with("model format version 2"))
        );
        let mut model = model;
        model.simulate = 1;
        assert_eq!(model.validate(), Err(StatsError::Singular { what: "error covariance of `x`, `y`, `z`".into() }));
        assert!(matches!(parse(SMALL).draw(0, 1), Err(StatsError::NotEnoughData { .. })));
    }

    #[test]
    fn unknown_keys_are_rejected() {
        let r: Result<SimulationModel, _> = serde_yaml::from_str(
            "simulate: 1\nconstructs: [{name: a, varience: 1}]\nitems: [{name: x, construct: a, loading: 1, error_variance: 1}]",
        );
        assert!(r.unwrap_err().to_string().contains("unknown field `varience`"));
        let r: Result<SimulationModel, _> = serde_yaml::from_str("simulate: 1\nconstructs: []\nsamples: 3");
        assert!(r.is_err());
    }

    #[test]
    fn truth_matches_path_tracing_by_hand() {
        let t = parse(RICH).truth().unwrap();
        // Path tracing (Wright 1921): var(b) = 0.5^2 1.5 + 0.6 = 0.975, cov(a, b) = 0.75,
        // cov(a, c) = 0.3 1.5 - 0.4 0.75 = 0.15, cov(b, c) = 0.3 0.75 - 0.4 0.975 = -0.165.
        let c = &t.latent_covariance;
        assert!((c[(1, 1)] - 0.975).abs() < 1e-12);
        assert!((c[(0, 1)] - 0.75).abs() < 1e-12);
        assert!((c[(0, 2)] - 0.15).abs() < 1e-12);
        assert!((c[(1, 2)] + 0.165).abs() < 1e-12);
        assert!((c[(2, 2)] - 1.0).abs() < 1e-12);
        assert!((t.latent_correlation[(0, 1)] - 0.75 / (1.5f64 * 0.975).sqrt()).abs() < 1e-12);
        // Standardized path b -> c: -0.4 sd(b) / sd(c).
        let bc = t.paths.iter().find(|p| p.from == "b" && p.to == "c").unwrap();
        assert!((bc.standardized + 0.4 * 0.975f64.sqrt()).abs() < 1e-12);
        // c1 = 0.8 c + e with var(e) = 0.36 and var(c) = 1: standardized loading 0.8.
        let c1 = t.loadings.iter().find(|l| l.variable == "c1").unwrap();
        assert!((c1.standardized - 0.8).abs() < 1e-12);
        let s = t.reliabilities.iter().find(|r| r.variable == "s").unwrap();
        assert!((s.reliability - 0.7).abs() < 1e-12);
        let e = &t.error_covariances[0];
        assert!((e.correlation - 0.2 / (0.6f64 * 0.36).sqrt()).abs() < 1e-12);
        assert_eq!(t.impure, ["a1", "a2", "b2", "c1", "c2", "s"]);
        // The module's recursion agrees with the matrix formula computed independently.
        let (sigma, _) = rich_sigma();
        assert!((&t.implied_covariance - &sigma).abs().max() < 1e-12);
        assert!(serde_json::to_string(&t).unwrap().contains("\"latent_correlation\":[["));
    }

    #[test]
    fn large_sample_recovers_covariance_proportions_and_missing_rate() {
        let model = parse(RICH);
        let n = 50_000;
        let table = model.draw(n, 20_250_101).unwrap();
        let (sigma, means) = rich_sigma();
        let col = |name: &str| table.columns.iter().position(|c| c == name).unwrap();
        let names = ["a1", "a2", "a3", "b1", "b2", "b3", "c1", "c2", "c3", "s"];

        // Sample covariances of the continuous variables over pairwise-complete rows, dividing
        // by n - 1 (common practice), against Sigma; the tolerance is on the correlation scale
        // (0.02 is about three standard errors of a correlation at n = 47,500).
        let continuous = [0usize, 1, 3, 4, 6, 7, 9];
        for &i in &continuous {
            for &j in &continuous {
                let (x, y) = (&table.values[col(names[i])], &table.values[col(names[j])]);
                let pairs: Vec<(f64, f64)> = x.iter().zip(y).filter_map(|(a, b)| Some(((*a)?, (*b)?))).collect();
                let k = pairs.len() as f64;
                let (mx, my) = (pairs.iter().map(|p| p.0).sum::<f64>() / k, pairs.iter().map(|p| p.1).sum::<f64>() / k);
                let cov = pairs.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum::<f64>() / (k - 1.0);
                let scale = (sigma[(i, i)] * sigma[(j, j)]).sqrt();
                assert!(
                    (cov - sigma[(i, j)]).abs() / scale < 0.02,
                    "{} {}: {cov} vs {}",
                    names[i],
                    names[j],
                    sigma[(i, j)]
                );
                if i == j {
                    assert!((mx - means[i]).abs() / scale.sqrt() < 0.02, "mean of {}", names[i]);
                }
            }
        }

        // Category shares of the coarsened items against P(t_{c-1} < x <= t_c) for
        // x ~ N(mean, sigma_ii), from statrs' normal CDF.
        for (i, cuts) in [(2usize, vec![-1.0, 0.0, 0.8]), (5, vec![-1.5, -0.5, 0.5, 1.5]), (8, vec![0.0])] {
            let normal = Normal::new(means[i], sigma[(i, i)].sqrt()).unwrap();
            let values: Vec<f64> = table.values[col(names[i])].iter().flatten().copied().collect();
            let mut edges = vec![f64::NEG_INFINITY];
            edges.extend(&cuts);
            edges.push(f64::INFINITY);
            for code in 1..=cuts.len() + 1 {
                let expected = normal.cdf(edges[code]) - normal.cdf(edges[code - 1]);
                let share = values.iter().filter(|&&v| v == code as f64).count() as f64 / values.len() as f64;
                assert!((share - expected).abs() < 0.01, "{} code {code}: {share} vs {expected}", names[i]);
            }
            assert!(values.iter().all(|&v| v >= 1.0 && v <= (cuts.len() + 1) as f64 && v.fract() == 0.0));
        }

        // Missing shares: 0.2 for b3 (its own rate), 0.05 for the rest.
        for (i, name) in names.iter().enumerate() {
            let rate = if i == 5 { 0.2 } else { 0.05 };
            let missing = table.values[col(name)].iter().filter(|v| v.is_none()).count() as f64 / n as f64;
            assert!((missing - rate).abs() < 0.005, "{name}: {missing}");
        }
    }

    #[test]
    fn documented_examples_parse_and_validate() {
        let docs = [include_str!("../../../docs/simulate.md"), include_str!("simulate.rs")];
        for (k, text) in docs.iter().enumerate() {
            // The first YAML block of each: the user guide's minimal model, then the one in the
            // doc comment of `SimulationModel` (with its `/// ` prefixes removed).
            let text = if k == 1 {
                text.lines()
                    .filter_map(|l| l.strip_prefix("/// ").or(l.strip_prefix("///")))
                    .collect::<Vec<_>>()
                    .join("\n")
            } else {
                text.to_string()
            };
            let start = text.find("```yaml\n").unwrap() + 8;
            let end = start + text[start..].find("```").unwrap();
            let model = parse(&text[start..end]);
            model.validate().unwrap();
            assert_eq!(model.draw(20, 1).unwrap().rows(), 20);
        }
    }

    #[test]
    fn demo_model_parses_validates_and_draws() {
        let model = parse(include_str!("../../../pipelines/transit/model.yaml"));
        model.validate().unwrap();
        let truth = model.truth().unwrap();
        let items = truth.variables.len();
        assert!((21..=25).contains(&items));
        for l in truth.loadings.iter().filter(|l| l.main) {
            assert!((0.6 - 1e-9..=0.85 + 1e-9).contains(&l.standardized.abs()), "{}: {}", l.variable, l.standardized);
        }
        assert_eq!(truth.impure, ["cr5", "tr6", "in2"]);
        let fare = truth.reliabilities.iter().find(|r| r.variable == "fare_share").unwrap();
        assert!((fare.reliability - 0.7).abs() < 1e-12);
        // Standardized constructs: every latent variance is 1.
        assert!((0..5).all(|k| (truth.latent_covariance[(k, k)] - 1.0).abs() < 1e-12));

        let table = model.draw(model.n, model.seed).unwrap();
        assert_eq!(table.rows(), 600);
        assert_eq!(&table.columns[..2], ["rider_id", "wave"]);
        assert_eq!(table.values[0][599], Some(600.0));
        for (j, name) in table.columns.iter().enumerate().skip(2) {
            let present = table.values[j].iter().flatten();
            if table.integer_columns[j] {
                assert!(present.clone().all(|&v| (1.0..=5.0).contains(&v) && v.fract() == 0.0), "{name}");
            }
        }
    }
}
