//! Survey data drawn from a declared latent-variable model (demo data, power checks).
//! Central types: `Model` (a plain description of what to draw: constructs, paths, items,
//! observed variables, correlated errors, missing rates, extra columns), `SimulatedTable` (the
//! drawn columns) and `Truth` (the population values an analysis should recover).
//! The model-file format, its checks and their positioned diagnostics live in the main crate
//! (`construe::model`); writing a table is `construe::data::write`. This module only draws and
//! computes, and reports what only the numbers show (a cycle, a total variance below what the
//! paths explain, an error covariance that is not positive definite) as typed `ModelError`s.
//! Deterministic: one seed gives the same table bit for bit, run after run, from a fixed draw
//! order on ChaCha8 streams; nothing here iterates a hash map, reads a file, clock or environment.

use nalgebra::DMatrix;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use serde::{Serialize, Serializer};
use thiserror::Error;

/// ChaCha stream of the model values (latent disturbances and item errors).
const VALUE_STREAM: u64 = 0;
/// ChaCha stream of the missingness draws: kept apart so that changing a missing rate never
/// changes a drawn value, and changing a loading never moves the holes.
const MISSING_STREAM: u64 = 1;

/// What to draw. Names refer to each other (items to constructs, paths to constructs,
/// correlated errors to items or observed variables); the caller is expected to have checked
/// the names, ranges and uniqueness (the model file's checks do), and anything left over comes
/// back as a `ModelError`.
///
/// Columns come out in this order: the id column, the constants, the items, the observed
/// variables, each list in declaration order.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Model {
    /// Probability that any analysed value is missing, independently of everything (missing
    /// completely at random); an item's own `missing` overrides it.
    pub missing: f64,
    /// Optional respondent id column, never missing and never analysed.
    pub id: Option<IdColumn>,
    /// Optional constant columns (a wave label, a country code), never missing.
    pub constants: Vec<ConstantColumn>,
    /// The latent constructs.
    pub constructs: Vec<Construct>,
    /// Linear structural paths among the constructs.
    pub paths: Vec<StructuralPath>,
    /// Multiple-indicator items.
    pub items: Vec<Item>,
    /// Single observed variables, each a construct plus error of a given reliability.
    pub observed: Vec<ObservedVariable>,
    /// Pairs of analysed variables whose errors covary.
    pub correlated_errors: Vec<CorrelatedError>,
}

/// An id column numbered `start`, `start + 1`, ... in row order.
#[derive(Debug, Clone, PartialEq)]
pub struct IdColumn {
    pub name: String,
    pub start: i64,
}

/// A column holding the same value in every row.
#[derive(Debug, Clone, PartialEq)]
pub struct ConstantColumn {
    pub name: String,
    pub value: ConstantValue,
}

/// The value of a constant column: a number or a text label.
#[derive(Debug, Clone, PartialEq)]
pub enum ConstantValue {
    Number(f64),
    Text(String),
}

/// How a construct's variance is given.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum LatentVariance {
    /// Variance of an exogenous construct, or the disturbance (residual) variance of a
    /// construct with incoming paths.
    Own(f64),
    /// The construct's total variance; its disturbance variance is this minus the variance its
    /// parents explain (an error if they explain more).
    Total(f64),
}

/// A latent construct.
#[derive(Debug, Clone, PartialEq)]
pub struct Construct {
    pub name: String,
    pub variance: LatentVariance,
}

/// A linear structural path: `to` gains `coefficient * from`.
#[derive(Debug, Clone, PartialEq)]
pub struct StructuralPath {
    pub from: String,
    pub to: String,
    pub coefficient: f64,
}

/// An indicator item: `mean + loading * construct + sum(cross loadings) + error`, optionally
/// coarsened into ordered categories.
#[derive(Debug, Clone, PartialEq)]
pub struct Item {
    pub name: String,
    pub construct: String,
    /// Unstandardised loading on `construct` (negative for a reverse-worded item).
    pub loading: f64,
    /// Variance of the item's own error.
    pub error_variance: f64,
    /// Extra loadings on other constructs: a planted impurity.
    pub cross_loadings: Vec<CrossLoading>,
    /// Cut points on the item's continuous value, strictly increasing; k - 1 thresholds give
    /// codes 1..k, code c meaning threshold[c-2] < value <= threshold[c-1]. `None`: continuous.
    pub thresholds: Option<Vec<f64>>,
    /// Added to the continuous value before coarsening.
    pub mean: f64,
    /// This item's missing rate, overriding the model's global `missing`.
    pub missing: Option<f64>,
}

impl Item {
    /// A continuous item with mean 0, no cross loading and the model's missing rate.
    pub fn new(name: &str, construct: &str, loading: f64, error_variance: f64) -> Item {
        Item {
            name: name.into(),
            construct: construct.into(),
            loading,
            error_variance,
            cross_loadings: Vec::new(),
            thresholds: None,
            mean: 0.0,
            missing: None,
        }
    }
}

/// An extra loading of an item on a second construct.
#[derive(Debug, Clone, PartialEq)]
pub struct CrossLoading {
    pub construct: String,
    pub loading: f64,
}

/// A single continuous measure of a construct: `mean + loading * construct + error`, the error
/// variance set so that the share of the variance due to the construct equals `reliability`.
#[derive(Debug, Clone, PartialEq)]
pub struct ObservedVariable {
    pub name: String,
    pub construct: String,
    /// In (0, 1]: loading^2 var(construct) / var(variable).
    pub reliability: f64,
    /// Scale of the variable.
    pub loading: f64,
    pub mean: f64,
    pub missing: Option<f64>,
}

impl ObservedVariable {
    /// Loading 1, mean 0 and the model's missing rate.
    pub fn new(name: &str, construct: &str, reliability: f64) -> ObservedVariable {
        ObservedVariable {
            name: name.into(),
            construct: construct.into(),
            reliability,
            loading: 1.0,
            mean: 0.0,
            missing: None,
        }
    }
}

/// A covariance between the errors of two analysed variables: a planted impurity.
#[derive(Debug, Clone, PartialEq)]
pub struct CorrelatedError {
    pub items: [String; 2],
    pub covariance: f64,
}

impl Model {
    /// Adds a construct (builder style, for tests and programs that declare a model in code).
    pub fn construct(mut self, name: &str, variance: LatentVariance) -> Model {
        self.constructs.push(Construct { name: name.into(), variance });
        self
    }

    /// Adds a structural path `from` -> `to`.
    pub fn path(mut self, from: &str, to: &str, coefficient: f64) -> Model {
        self.paths.push(StructuralPath { from: from.into(), to: to.into(), coefficient });
        self
    }

    /// Adds an item.
    pub fn item(mut self, item: Item) -> Model {
        self.items.push(item);
        self
    }

    /// Adds an observed variable.
    pub fn observed(mut self, variable: ObservedVariable) -> Model {
        self.observed.push(variable);
        self
    }

    /// Adds a covariance between the errors of `a` and `b`.
    pub fn correlated_error(mut self, a: &str, b: &str, covariance: f64) -> Model {
        self.correlated_errors.push(CorrelatedError { items: [a.into(), b.into()], covariance });
        self
    }
}

/// What drawing finds wrong with a model. The indices point into the model's lists, so the
/// caller can show where the problem is.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ModelError {
    #[error("unknown construct `{name}`")]
    UnknownConstruct { name: String },
    #[error("unknown item `{name}`")]
    UnknownVariable { name: String },
    /// `constructs` in causal order, the first repeated at the end; `path` is the index of the
    /// path from the first construct to the second.
    #[error("structural paths form a cycle: {}", cycle_text(constructs))]
    Cycle { constructs: Vec<String>, path: usize },
    #[error("construct `{name}`: total variance {total} is less than the {explained:.4} its paths explain")]
    TotalBelowExplained { construct: usize, name: String, total: f64, explained: f64 },
    #[error("construct `{name}` has zero variance")]
    ZeroVariance { construct: usize, name: String },
    #[error(
        "correlated error `{a}` ~ `{b}`: covariance {covariance} must be smaller in size than {bound:.4}, the root of the product of their error variances"
    )]
    ErrorCovarianceTooLarge { index: usize, a: String, b: String, covariance: f64, bound: f64 },
    /// `first` is the index of the first correlated error of the group.
    #[error("the error covariance of {} is not positive definite", names(variables))]
    NotPositiveDefinite { variables: Vec<String>, first: usize },
    #[error("variable `{name}` has zero variance")]
    ConstantVariable { name: String },
    #[error("a simulated table needs at least one row")]
    NoRows,
}

fn names(list: &[String]) -> String {
    list.iter().map(|n| format!("`{n}`")).collect::<Vec<_>>().join(", ")
}

fn cycle_text(list: &[String]) -> String {
    list.iter().map(|n| format!("`{n}`")).collect::<Vec<_>>().join(" -> ")
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

impl SimulatedTable {
    /// Number of rows.
    pub fn rows(&self) -> usize {
        self.values.first().map_or(0, Vec::len)
    }
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

impl Model {
    /// Checks what only the numbers show: a cycle among the paths, a total variance below what
    /// the paths explain, an error covariance too large or not positive definite, a variable
    /// with zero variance. Names, ranges and uniqueness are the caller's checks.
    pub fn check(&self) -> Result<(), ModelError> {
        self.truth().map(|_| ())
    }

    fn construct_index(&self, name: &str) -> Option<usize> {
        self.constructs.iter().position(|c| c.name == name)
    }

    /// Kahn's algorithm, always taking the ready construct declared first, so the order (and
    /// with it the draw order) depends on the file only. On a cycle, names one.
    fn topological_order(&self, parents: &[Vec<(usize, f64)>]) -> Result<Vec<usize>, ModelError> {
        let m = self.constructs.len();
        let mut remaining: Vec<usize> = parents.iter().map(Vec::len).collect();
        let mut done = vec![false; m];
        let mut order = Vec::with_capacity(m);
        while order.len() < m {
            let Some(next) = (0..m).find(|&j| !done[j] && remaining[j] == 0) else {
                return Err(self.find_cycle(parents, &done));
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
    fn find_cycle(&self, parents: &[Vec<(usize, f64)>], done: &[bool]) -> ModelError {
        let start = (0..done.len()).find(|&j| !done[j]).unwrap_or(0);
        let mut walk = vec![start];
        let mut at = start;
        let mut cycle: Vec<usize> = vec![start, start];
        while let Some(&(p, _)) = parents[at].iter().find(|(p, _)| !done[*p]) {
            if let Some(pos) = walk.iter().position(|&w| w == p) {
                // The walk runs against the arrows (child to parent); reverse it to read causes first.
                cycle = walk[pos..].to_vec();
                cycle.reverse();
                // Start at the construct declared first, so a cycle always reads the same way.
                let first = cycle.iter().enumerate().min_by_key(|&(_, &j)| j).map_or(0, |(k, _)| k);
                cycle.rotate_left(first);
                cycle.push(cycle[0]);
                break;
            }
            walk.push(p);
            at = p;
        }
        let (from, to) = (&self.constructs[cycle[0]].name, &self.constructs[cycle[1]].name);
        let path = self.paths.iter().position(|q| &q.from == from && &q.to == to).unwrap_or(0);
        ModelError::Cycle { constructs: cycle.iter().map(|&j| self.constructs[j].name.clone()).collect(), path }
    }

    fn resolve(&self) -> Result<Resolved, ModelError> {
        let m = self.constructs.len();
        let idx =
            |name: &str| self.construct_index(name).ok_or_else(|| ModelError::UnknownConstruct { name: name.into() });

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
            let psi = match c.variance {
                LatentVariance::Total(total) => {
                    if total < explained {
                        return Err(ModelError::TotalBelowExplained {
                            construct: j,
                            name: c.name.clone(),
                            total,
                            explained,
                        });
                    }
                    total - explained
                }
                LatentVariance::Own(v) => v,
            };
            disturbance_sd[j] = psi.sqrt();
            cov[(j, j)] = explained + psi;
            if cov[(j, j)] <= 0.0 {
                return Err(ModelError::ZeroVariance { construct: j, name: c.name.clone() });
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
            variables
                .iter()
                .position(|v| v.name == name)
                .ok_or_else(|| ModelError::UnknownVariable { name: name.into() })
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
        for (index, ce) in self.correlated_errors.iter().enumerate() {
            let (a, b) = (var_idx(&ce.items[0])?, var_idx(&ce.items[1])?);
            let bound = (theta[(a, a)] * theta[(b, b)]).sqrt();
            if ce.covariance.abs() >= bound {
                return Err(ModelError::ErrorCovarianceTooLarge {
                    index,
                    a: ce.items[0].clone(),
                    b: ce.items[1].clone(),
                    covariance: ce.covariance,
                    bound,
                });
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
            let chol = nalgebra::Cholesky::new(sub).ok_or_else(|| {
                let variables: Vec<String> = members.iter().map(|&i| variables[i].name.clone()).collect();
                let first = self
                    .correlated_errors
                    .iter()
                    .position(|ce| ce.items.iter().any(|n| variables.contains(n)))
                    .unwrap_or(0);
                ModelError::NotPositiveDefinite { variables, first }
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
    pub fn draw(&self, n: usize, seed: u64) -> Result<SimulatedTable, ModelError> {
        let r = self.resolve()?;
        if n == 0 {
            return Err(ModelError::NoRows);
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
    /// Errors as drawing does, or `ConstantVariable` for a variable with zero variance.
    pub fn truth(&self) -> Result<Truth, ModelError> {
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
            return Err(ModelError::ConstantVariable { name: r.variables[i].name.clone() });
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

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::DMatrix;
    use statrs::distribution::{ContinuousCDF, Normal};

    use LatentVariance::{Own, Total};

    fn coarse(mut item: Item, thresholds: &[f64]) -> Item {
        item.thresholds = Some(thresholds.to_vec());
        item
    }

    /// Two constructs, a path, an id and two constant columns, a coarsened item, an observed
    /// variable and a global missing rate.
    fn small() -> Model {
        let mut m = Model { missing: 0.1, ..Model::default() }
            .construct("a", Own(1.0))
            .construct("b", Total(1.0))
            .path("a", "b", 0.6)
            .item(coarse(Item::new("a1", "a", 0.8, 0.36), &[-0.5, 0.5]))
            .item(Item::new("a2", "a", 0.7, 0.51))
            .item(Item::new("b1", "b", 0.9, 0.19))
            .observed(ObservedVariable::new("s", "b", 0.5));
        m.id = Some(IdColumn { name: "id".into(), start: 101 });
        m.constants = vec![
            ConstantColumn { name: "wave".into(), value: ConstantValue::Text("spring".into()) },
            ConstantColumn { name: "round".into(), value: ConstantValue::Number(2.0) },
        ];
        m
    }

    /// A model with every feature: an endogenous construct given by its disturbance variance and
    /// one by its total variance, a cross loading, a group of three correlated errors (a 3x3
    /// Cholesky), an observed variable with scale and mean, coarsened items, and a per-item
    /// missing rate.
    fn rich() -> Model {
        let b2 = Item {
            cross_loadings: vec![CrossLoading { construct: "a".into(), loading: 0.4 }],
            ..Item::new("b2", "b", 1.2, 0.5)
        };
        let b3 =
            Item { mean: 0.5, missing: Some(0.2), ..coarse(Item::new("b3", "b", 0.9, 0.6), &[-1.5, -0.5, 0.5, 1.5]) };
        Model { missing: 0.05, ..Model::default() }
            .construct("a", Own(1.5))
            .construct("b", Own(0.6))
            .construct("c", Total(1.0))
            .path("a", "b", 0.5)
            .path("b", "c", -0.4)
            .path("a", "c", 0.3)
            .item(Item { mean: 3.0, ..Item::new("a1", "a", 1.0, 0.5) })
            .item(Item::new("a2", "a", 0.8, 0.6))
            .item(coarse(Item::new("a3", "a", -0.6, 0.7), &[-1.0, 0.0, 0.8]))
            .item(Item::new("b1", "b", 1.0, 0.4))
            .item(b2)
            .item(b3)
            .item(Item::new("c1", "c", 0.8, 0.36))
            .item(Item::new("c2", "c", 0.7, 0.51))
            .item(coarse(Item::new("c3", "c", 0.6, 0.64), &[0.0]))
            .observed(ObservedVariable { loading: 2.0, mean: 10.0, ..ObservedVariable::new("s", "c", 0.7) })
            .correlated_error("a2", "c1", 0.2)
            .correlated_error("c1", "c2", -0.15)
            .correlated_error("a1", "s", 0.3)
    }

    /// Row `row` as text, six decimals for non-integer columns: a compact pin of drawn values.
    fn row_text(t: &SimulatedTable, row: usize) -> String {
        (0..t.columns.len())
            .map(|j| match (&t.text_labels[j], t.values[j][row]) {
                (Some(label), _) => label.clone(),
                (None, None) => String::new(),
                (None, Some(v)) if t.integer_columns[j] => format!("{v:.0}"),
                (None, Some(v)) => format!("{v:.6}"),
            })
            .collect::<Vec<_>>()
            .join(",")
    }

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
    fn same_seed_gives_identical_tables_and_other_seeds_differ() {
        let model = small();
        let first = model.draw(200, 42).unwrap();
        let second = model.draw(200, 42).unwrap();
        assert_eq!(first, second);
        assert_ne!(first, model.draw(200, 43).unwrap());
        // Rows are drawn one after another: a longer draw starts with the shorter one.
        let longer = model.draw(300, 42).unwrap();
        assert!((0..200).all(|row| row_text(&longer, row) == row_text(&first, row)));
    }

    #[test]
    fn draw_follows_the_documented_order() {
        // Replays the draw order documented on `draw` for SMALL by hand: a then b (topological
        // order), then one normal per variable, then one uniform per variable from stream 1.
        let model = small();
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
        let rows: Vec<String> = (0..4).map(|row| row_text(&table, row)).collect();
        assert_eq!(
            rows,
            [
                "101,spring,2,2,,-1.288120,-0.501899",
                "102,spring,2,3,0.740167,-0.851907,-0.797478",
                "103,spring,2,1,-2.085643,-1.098435,0.729545",
                "104,spring,2,3,0.969570,0.240455,-1.439642",
            ]
        );
    }

    #[test]
    fn missing_rate_moves_holes_but_never_values() {
        let mut model = small();
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
    fn table_layout() {
        let t = small().draw(5, 3).unwrap();
        assert_eq!(t.columns, ["id", "wave", "round", "a1", "a2", "b1", "s"]);
        assert_eq!(t.integer_columns, [true, false, true, true, false, false, false]);
        assert_eq!(t.analysed_columns, [false, false, false, true, true, true, true]);
        assert_eq!(t.text_labels[1].as_deref(), Some("spring"));
        assert_eq!(t.rows(), 5);
        assert_eq!(t.values[0], [Some(101.0), Some(102.0), Some(103.0), Some(104.0), Some(105.0)]);
        assert!(t.values[3].iter().flatten().all(|v| [1.0, 2.0, 3.0].contains(v)));
    }

    #[test]
    fn a_cycle_is_named_with_the_path_that_starts_it() {
        let base = || {
            Model::default()
                .construct("a", Own(1.0))
                .construct("b", Own(1.0))
                .construct("c", Own(1.0))
                .construct("d", Own(1.0))
                .item(Item::new("x", "a", 1.0, 1.0))
        };
        let m = base().path("d", "a", 1.0).path("a", "b", 1.0).path("b", "c", 1.0).path("c", "a", 1.0);
        let e = m.check().unwrap_err();
        assert_eq!(e, ModelError::Cycle { constructs: vec!["a".into(), "b".into(), "c".into(), "a".into()], path: 1 });
        assert_eq!(e.to_string(), "structural paths form a cycle: `a` -> `b` -> `c` -> `a`");
        let e = base().path("b", "b", 0.5).check().unwrap_err();
        assert_eq!(e, ModelError::Cycle { constructs: vec!["b".into(), "b".into()], path: 0 });
    }

    #[test]
    fn derived_quantities_are_checked() {
        let m = Model::default()
            .construct("a", Own(1.0))
            .construct("b", Total(0.5))
            .path("a", "b", 0.9)
            .item(Item::new("x", "b", 1.0, 1.0));
        let e = m.check().unwrap_err();
        assert!(matches!(e, ModelError::TotalBelowExplained { construct: 1, total: 0.5, .. }), "{e:?}");
        assert_eq!(e.to_string(), "construct `b`: total variance 0.5 is less than the 0.8100 its paths explain");

        let two = Model::default()
            .construct("a", Own(1.0))
            .item(Item::new("x", "a", 1.0, 0.25))
            .item(Item::new("y", "a", 1.0, 1.0))
            .item(Item::new("z", "a", 1.0, 1.0));
        let e = two.clone().correlated_error("x", "y", 0.5).check().unwrap_err();
        assert!(matches!(e, ModelError::ErrorCovarianceTooLarge { index: 0, bound, .. } if bound == 0.5), "{e:?}");
        // Pairwise-admissible covariances whose 3x3 matrix is not positive definite.
        let e = two
            .correlated_error("x", "y", 0.4)
            .correlated_error("y", "z", 0.9)
            .correlated_error("x", "z", -0.4)
            .check()
            .unwrap_err();
        assert_eq!(
            e,
            ModelError::NotPositiveDefinite { variables: vec!["x".into(), "y".into(), "z".into()], first: 0 }
        );
        assert_eq!(small().draw(0, 1), Err(ModelError::NoRows));
    }

    #[test]
    fn truth_matches_path_tracing_by_hand() {
        let t = rich().truth().unwrap();
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
        let model = rich();
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
}
