//! Specification of a linear structural equation model in LISREL-style matrices (Joreskog 1973;
//! Bollen 1989, ch. 8): loadings Lambda (p x m), latent paths B (m x m), latent (residual)
//! covariances Psi and error covariances Theta. Central type: `SemModel`; every entry is a
//! `Param` (free, optionally labelled for equality constraints, or fixed).
//! This module only describes models; it never looks at data and never fits anything.

use std::collections::HashMap;

use nalgebra::DMatrix;

use crate::StatsError;

/// One entry of a parameter matrix.
#[derive(Debug, Clone, PartialEq)]
pub enum Param {
    /// Estimated. Entries that share a label are one parameter (an equality constraint); an
    /// entry without a label is a parameter of its own.
    Free(Option<String>),
    /// Held at this value.
    Fixed(f64),
}

impl Param {
    /// A free entry without an equality constraint.
    pub fn free() -> Self {
        Param::Free(None)
    }

    /// A free entry constrained equal to every other entry with the same label.
    pub fn labelled(label: &str) -> Self {
        Param::Free(Some(label.to_string()))
    }

    /// Whether the entry is estimated.
    pub fn is_free(&self) -> bool {
        matches!(self, Param::Free(_))
    }

    /// Whether the entry is structurally absent (fixed at exactly zero).
    pub fn is_zero(&self) -> bool {
        matches!(self, Param::Fixed(v) if *v == 0.0)
    }
}

/// How the scale of each latent variable is set in `SemModel::cfa` (Bollen 1989, pp. 238-246).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Identification {
    /// Every latent (residual) variance is fixed at 1; all loadings are free.
    UnitLatentVariance,
    /// The first indicator's loading of each latent is fixed at 1; latent variances are free.
    UnitFirstLoading,
}

/// The four parameter matrices of the model.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Matrix {
    /// Lambda, p x m: entry (i, k) is the loading of observed i on latent k.
    Lambda,
    /// B, m x m: entry (i, j) is the direct effect of latent j on latent i.
    Beta,
    /// Psi, m x m symmetric: latent variances and covariances (residual ones for endogenous latents).
    Psi,
    /// Theta, p x p symmetric: error variances and error covariances of the observed variables.
    Theta,
}

/// What one model entry means, for reports.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum ParameterKind {
    /// Lambda entry; row = observed variable, col = latent.
    Loading,
    /// Theta diagonal; row = col = observed variable.
    ErrorVariance,
    /// Theta off-diagonal; row > col, both observed variables.
    ErrorCovariance,
    /// Psi diagonal; row = col = latent. For a latent with incoming paths, its residual variance.
    LatentVariance,
    /// Psi off-diagonal; row > col, both latents (residual covariance for endogenous latents).
    LatentCovariance,
    /// B entry; row = affected latent, col = causing latent.
    Path,
}

impl ParameterKind {
    /// Kind of entry (row, col) of `matrix` (for symmetric matrices, row >= col).
    pub fn of(matrix: Matrix, row: usize, col: usize) -> Self {
        match matrix {
            Matrix::Lambda => ParameterKind::Loading,
            Matrix::Beta => ParameterKind::Path,
            Matrix::Psi if row == col => ParameterKind::LatentVariance,
            Matrix::Psi => ParameterKind::LatentCovariance,
            Matrix::Theta if row == col => ParameterKind::ErrorVariance,
            Matrix::Theta => ParameterKind::ErrorCovariance,
        }
    }
}

/// A model entry that is estimated: where it sits and which free parameter it is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct FreeEntry {
    pub matrix: Matrix,
    pub row: usize,
    pub col: usize,
    /// Index into the free-parameter vector (entries sharing a label share it).
    pub index: usize,
}

/// The free parameters of a model: their labels (or a generated name) and the entries each one
/// fills. Symmetric matrices list only their lower triangle (row >= col).
#[derive(Debug, Clone, PartialEq)]
pub struct ParamLayout {
    /// One name per free parameter, in index order.
    pub names: Vec<String>,
    /// Every free entry, in the order Lambda, B, Psi, Theta, each row-major.
    pub entries: Vec<FreeEntry>,
}

impl ParamLayout {
    /// Number of distinct free parameters.
    pub fn len(&self) -> usize {
        self.names.len()
    }

    /// Whether the model has no free parameter.
    pub fn is_empty(&self) -> bool {
        self.names.is_empty()
    }
}

/// A structural equation model: Sigma = Lambda (I - B)^-1 Psi (I - B)^-T Lambda' + Theta
/// (Joreskog 1973; Bollen 1989, eq. 8.24 with exogenous and endogenous latents in one vector).
/// Entries are stored row-major; Psi and Theta are kept symmetric by the setters.
#[derive(Debug, Clone, PartialEq)]
pub struct SemModel {
    observed_names: Vec<String>,
    latent_names: Vec<String>,
    lambda: Vec<Param>,
    beta: Vec<Param>,
    psi: Vec<Param>,
    theta: Vec<Param>,
}

impl SemModel {
    /// An empty model with p observed and m latent variables: no loadings, no paths, free latent
    /// and error variances, all covariances zero. Names default to `x1..xp` and `f1..fm`.
    pub fn new(p: usize, m: usize) -> Self {
        let mut psi = vec![Param::Fixed(0.0); m * m];
        for k in 0..m {
            psi[k * m + k] = Param::free();
        }
        let mut theta = vec![Param::Fixed(0.0); p * p];
        for i in 0..p {
            theta[i * p + i] = Param::free();
        }
        SemModel {
            observed_names: (1..=p).map(|i| format!("x{i}")).collect(),
            latent_names: (1..=m).map(|k| format!("f{k}")).collect(),
            lambda: vec![Param::Fixed(0.0); p * m],
            beta: vec![Param::Fixed(0.0); m * m],
            psi,
            theta,
        }
    }

    /// Confirmatory factor model (Joreskog 1969): latent k is measured by the observed variables
    /// `groups[k]` (indices into 0..p, each variable in exactly one group), latent covariances
    /// free (correlated factors), error covariances zero, scale set by `identification`.
    /// A one-indicator group is allowed, but is identified only once its error variance is fixed
    /// (`fix_error_variance`, e.g. to (1 - reliability) x variance).
    pub fn cfa(groups: &[Vec<usize>], p: usize, identification: Identification) -> Result<Self, StatsError> {
        let m = groups.len();
        if m == 0 {
            return Err(StatsError::InvalidInput("a factor model needs at least one latent variable".into()));
        }
        let mut seen = vec![false; p];
        for (k, group) in groups.iter().enumerate() {
            if group.is_empty() {
                return Err(StatsError::InvalidInput(format!("latent {k} has no indicators")));
            }
            for &i in group {
                if i >= p {
                    return Err(StatsError::OutOfRange { what: "indicator (observed variable)", index: i, len: p });
                }
                if seen[i] {
                    return Err(StatsError::InvalidInput(format!(
                        "observed variable {i} is listed in more than one group"
                    )));
                }
                seen[i] = true;
            }
        }
        if let Some(i) = seen.iter().position(|s| !s) {
            return Err(StatsError::InvalidInput(format!("observed variable {i} belongs to no group")));
        }
        let mut model = SemModel::new(p, m);
        for (k, group) in groups.iter().enumerate() {
            for (pos, &i) in group.iter().enumerate() {
                let param = match identification {
                    Identification::UnitFirstLoading if pos == 0 => Param::Fixed(1.0),
                    _ => Param::free(),
                };
                model.set_loading(i, k, param);
            }
            if identification == Identification::UnitLatentVariance {
                model.set_latent_covariance(k, k, Param::Fixed(1.0));
            }
            for l in 0..k {
                model.set_latent_covariance(k, l, Param::free());
            }
        }
        Ok(model)
    }

    /// Full recursive SEM: the `cfa` measurement model plus the latent paths `paths`, each
    /// `(from, to)` meaning latent `from` affects latent `to`. Covariances are free among the
    /// exogenous latents (no incoming path) only (`dag` fixes those too); disturbances of endogenous latents are
    /// uncorrelated with each other and with the exogenous latents (Bollen 1989, ch. 4 defaults).
    /// Under `UnitLatentVariance` an endogenous latent's *residual* variance is the one fixed at 1.
    pub fn sem(
        groups: &[Vec<usize>],
        p: usize,
        identification: Identification,
        paths: &[(usize, usize)],
    ) -> Result<Self, StatsError> {
        let mut model = SemModel::cfa(groups, p, identification)?;
        let m = groups.len();
        let mut endogenous = vec![false; m];
        for &(from, to) in paths {
            if from >= m || to >= m || from == to {
                return Err(StatsError::InvalidInput(format!(
                    "path {from} -> {to} needs two distinct latents below {m}"
                )));
            }
            model.add_path(from, to);
            endogenous[to] = true;
        }
        for k in 0..m {
            for l in 0..k {
                if endogenous[k] || endogenous[l] {
                    model.set_latent_covariance(k, l, Param::Fixed(0.0));
                }
            }
        }
        Ok(model)
    }

    /// Append a latent variable named `name` with no loadings, no paths, a free variance and
    /// zero covariances with every other latent; returns its index (the old m). Used for
    /// method factors, which load on named items and are uncorrelated with the constructs.
    pub fn add_latent(&mut self, name: &str) -> usize {
        let (p, m) = (self.p(), self.m());
        let k = m + 1;
        let zero = Param::Fixed(0.0);
        let mut lambda = vec![zero.clone(); p * k];
        for i in 0..p {
            lambda[i * k..i * k + m].clone_from_slice(&self.lambda[i * m..(i + 1) * m]);
        }
        let grow = |old: &[Param]| {
            let mut out = vec![zero.clone(); k * k];
            for r in 0..m {
                out[r * k..r * k + m].clone_from_slice(&old[r * m..(r + 1) * m]);
            }
            out
        };
        let (beta, mut psi) = (grow(&self.beta), grow(&self.psi));
        psi[m * k + m] = Param::free();
        self.lambda = lambda;
        self.beta = beta;
        self.psi = psi;
        self.latent_names.push(name.to_string());
        m
    }

    /// The structural model a DAG among the latents implies: `sem` with the paths `paths`
    /// (which must form a DAG), and every latent covariance fixed at zero, those among exogenous
    /// latents included. In a DAG two latents without parents are not adjacent, so the graph
    /// says they are independent; `sem` leaves their covariances free and so never tests those
    /// missing edges. Here every non-adjacent pair of latents is one restriction: the model's
    /// df are those of the `cfa` measurement model plus the number of non-adjacent pairs (the
    /// m(m - 1)/2 free covariances are replaced by one path per edge, whatever the
    /// identification: a unit variance of an exogenous latent becomes a unit residual variance
    /// of an endogenous one). A latent without paths (isolated in the DAG) is uncorrelated with
    /// all others. Paths must not repeat a pair; a cycle is refused.
    pub fn dag(
        groups: &[Vec<usize>],
        p: usize,
        identification: Identification,
        paths: &[(usize, usize)],
    ) -> Result<Self, StatsError> {
        let m = groups.len();
        let mut seen = std::collections::BTreeSet::new();
        for &(from, to) in paths {
            if from < m && to < m && !seen.insert((from.min(to), from.max(to))) {
                return Err(StatsError::InvalidInput(format!("latents {from} and {to} are joined by two paths")));
            }
        }
        if has_cycle(m, paths) {
            return Err(StatsError::InvalidInput("the latent paths form a cycle".into()));
        }
        let mut model = SemModel::sem(groups, p, identification, paths)?;
        for k in 0..m {
            for l in 0..k {
                model.set_latent_covariance(k, l, Param::Fixed(0.0));
            }
        }
        Ok(model)
    }

    /// Replace the default names (`x1..`, `f1..`); lengths must match p and m.
    pub fn with_names(mut self, observed: Vec<String>, latent: Vec<String>) -> Result<Self, StatsError> {
        if observed.len() != self.p() {
            return Err(StatsError::SizeMismatch {
                what: "observed variable names",
                expected: self.p(),
                found: observed.len(),
            });
        }
        if latent.len() != self.m() {
            return Err(StatsError::SizeMismatch {
                what: "latent variable names",
                expected: self.m(),
                found: latent.len(),
            });
        }
        self.observed_names = observed;
        self.latent_names = latent;
        Ok(self)
    }

    /// Number of observed variables.
    pub fn p(&self) -> usize {
        self.observed_names.len()
    }

    /// Number of latent variables.
    pub fn m(&self) -> usize {
        self.latent_names.len()
    }

    /// Names of the observed variables.
    pub fn observed_names(&self) -> &[String] {
        &self.observed_names
    }

    /// Names of the latent variables.
    pub fn latent_names(&self) -> &[String] {
        &self.latent_names
    }

    /// Set the loading of observed `item` on latent `latent`. Panics on out-of-range indices
    /// (a caller bug, like slice indexing).
    pub fn set_loading(&mut self, item: usize, latent: usize, param: Param) -> &mut Self {
        let m = self.m();
        self.lambda[item * m + latent] = param;
        self
    }

    /// Set the direct effect of latent `from` on latent `to` (entry B[to][from]).
    pub fn set_path(&mut self, from: usize, to: usize, param: Param) -> &mut Self {
        let m = self.m();
        self.beta[to * m + from] = param;
        self
    }

    /// Free the direct effect of latent `from` on latent `to`.
    pub fn add_path(&mut self, from: usize, to: usize) -> &mut Self {
        self.set_path(from, to, Param::free())
    }

    /// Set Psi[i][j] and Psi[j][i] (i == j: a latent (residual) variance).
    pub fn set_latent_covariance(&mut self, i: usize, j: usize, param: Param) -> &mut Self {
        let m = self.m();
        self.psi[i * m + j] = param.clone();
        self.psi[j * m + i] = param;
        self
    }

    /// Free the covariance of latents i and j.
    pub fn free_latent_covariance(&mut self, i: usize, j: usize) -> &mut Self {
        self.set_latent_covariance(i, j, Param::free())
    }

    /// Set Theta[i][j] and Theta[j][i] (i == j: an error variance).
    pub fn set_error_covariance(&mut self, i: usize, j: usize, param: Param) -> &mut Self {
        let p = self.p();
        self.theta[i * p + j] = param.clone();
        self.theta[j * p + i] = param;
        self
    }

    /// Free a correlated error between observed i and j.
    pub fn free_error_covariance(&mut self, i: usize, j: usize) -> &mut Self {
        self.set_error_covariance(i, j, Param::free())
    }

    /// Fix the error variance of observed `item`; for a single-indicator construct with
    /// reliability r and observed variance s, pass (1 - r) s (Bollen 1989, pp. 168-170).
    pub fn fix_error_variance(&mut self, item: usize, value: f64) -> &mut Self {
        self.set_error_covariance(item, item, Param::Fixed(value))
    }

    /// Entry (row, col) of one of the parameter matrices.
    pub fn param(&self, matrix: Matrix, row: usize, col: usize) -> &Param {
        let (p, m) = (self.p(), self.m());
        match matrix {
            Matrix::Lambda => &self.lambda[row * m + col],
            Matrix::Beta => &self.beta[row * m + col],
            Matrix::Psi => &self.psi[row * m + col],
            Matrix::Theta => &self.theta[row * p + col],
        }
    }

    /// Shape of a parameter matrix.
    pub fn shape(&self, matrix: Matrix) -> (usize, usize) {
        let (p, m) = (self.p(), self.m());
        match matrix {
            Matrix::Lambda => (p, m),
            Matrix::Beta | Matrix::Psi => (m, m),
            Matrix::Theta => (p, p),
        }
    }

    /// The distinct free parameters and the entries they fill (labels shared = one parameter).
    /// Errors if B has a free diagonal entry (a latent cannot cause itself).
    pub fn layout(&self) -> Result<ParamLayout, StatsError> {
        let mut names: Vec<String> = Vec::new();
        let mut by_label: HashMap<String, usize> = HashMap::new();
        let mut entries = Vec::new();
        for matrix in [Matrix::Lambda, Matrix::Beta, Matrix::Psi, Matrix::Theta] {
            let (rows, cols) = self.shape(matrix);
            let symmetric = matches!(matrix, Matrix::Psi | Matrix::Theta);
            for row in 0..rows {
                let last = if symmetric { row + 1 } else { cols };
                for col in 0..last {
                    let Param::Free(label) = self.param(matrix, row, col) else {
                        continue;
                    };
                    if matrix == Matrix::Beta && row == col {
                        return Err(StatsError::InvalidInput(format!("latent {row} cannot have a path to itself")));
                    }
                    let index = match label {
                        Some(l) => *by_label.entry(l.clone()).or_insert_with(|| {
                            names.push(l.clone());
                            names.len() - 1
                        }),
                        None => {
                            names.push(self.entry_name(matrix, row, col));
                            names.len() - 1
                        }
                    };
                    entries.push(FreeEntry { matrix, row, col, index });
                }
            }
        }
        Ok(ParamLayout { names, entries })
    }

    /// A readable name for an unlabelled entry, e.g. `f1=~x3`, `f2~f1`, `x1~~x2`.
    fn entry_name(&self, matrix: Matrix, row: usize, col: usize) -> String {
        let (o, l) = (&self.observed_names, &self.latent_names);
        match matrix {
            Matrix::Lambda => format!("{}->{}", l[col], o[row]),
            Matrix::Beta => format!("{}->{}", l[col], l[row]),
            Matrix::Psi => format!("{}<->{}", l[row], l[col]),
            Matrix::Theta => format!("{}<->{}", o[row], o[col]),
        }
    }

    /// Numeric matrices with the free entries taken from `values` (indexed as in `layout`).
    pub fn matrices(&self, layout: &ParamLayout, values: &[f64]) -> ModelMatrices {
        let (p, m) = (self.p(), self.m());
        let fixed = |v: &[Param], rows: usize, cols: usize| {
            DMatrix::from_fn(rows, cols, |r, c| match v[r * cols + c] {
                Param::Fixed(x) => x,
                Param::Free(_) => 0.0,
            })
        };
        let mut mm = ModelMatrices {
            lambda: fixed(&self.lambda, p, m),
            beta: fixed(&self.beta, m, m),
            psi: fixed(&self.psi, m, m),
            theta: fixed(&self.theta, p, p),
        };
        for e in &layout.entries {
            let v = values[e.index];
            let target = mm.get_mut(e.matrix);
            target[(e.row, e.col)] = v;
            if matches!(e.matrix, Matrix::Psi | Matrix::Theta) {
                target[(e.col, e.row)] = v;
            }
        }
        mm
    }
}

/// Numeric parameter matrices of a model at one parameter value.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelMatrices {
    pub lambda: DMatrix<f64>,
    pub beta: DMatrix<f64>,
    pub psi: DMatrix<f64>,
    pub theta: DMatrix<f64>,
}

impl ModelMatrices {
    /// The matrix of one kind.
    pub fn get(&self, matrix: Matrix) -> &DMatrix<f64> {
        match matrix {
            Matrix::Lambda => &self.lambda,
            Matrix::Beta => &self.beta,
            Matrix::Psi => &self.psi,
            Matrix::Theta => &self.theta,
        }
    }

    fn get_mut(&mut self, matrix: Matrix) -> &mut DMatrix<f64> {
        match matrix {
            Matrix::Lambda => &mut self.lambda,
            Matrix::Beta => &mut self.beta,
            Matrix::Psi => &mut self.psi,
            Matrix::Theta => &mut self.theta,
        }
    }
}

/// Whether the directed edges `paths` among `m` nodes contain a cycle (Kahn's algorithm).
fn has_cycle(m: usize, paths: &[(usize, usize)]) -> bool {
    let mut indegree = vec![0usize; m];
    for &(_, to) in paths.iter().filter(|(f, t)| *f < m && *t < m) {
        indegree[to] += 1;
    }
    let mut ready: Vec<usize> = (0..m).filter(|&k| indegree[k] == 0).collect();
    let mut done = 0;
    while let Some(k) = ready.pop() {
        done += 1;
        for &(_, to) in paths.iter().filter(|(f, t)| *f == k && *t < m) {
            indegree[to] -= 1;
            if indegree[to] == 0 {
                ready.push(to);
            }
        }
    }
    done < m
}
