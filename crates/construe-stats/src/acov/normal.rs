//! `NormalTheory`: the sampling covariance of sample covariances or correlations of n
//! multivariate-normal rows, from the summary matrix alone (no rows needed).

use nalgebra::DMatrix;

use super::{Element, SamplingCovariance, check_element};
use crate::StatsError;

/// Normal-theory sampling covariance from a covariance or correlation matrix and n. Blocks are
/// computed entry by entry from the matrix (O(1) each).
#[derive(Debug, Clone, PartialEq)]
pub struct NormalTheory {
    matrix: DMatrix<f64>,
    n: usize,
    correlation: bool,
}

impl NormalTheory {
    /// Covariances (elements j <= l): cov(s_jl, s_mr) = (s_jm s_lr + s_jr s_lm) / n
    /// (Anderson 2003, th. 3.4.4; the Wishart distribution's second moments).
    pub fn covariances(s: &DMatrix<f64>, n: usize) -> Result<NormalTheory, StatsError> {
        Self::new(s, n, false)
    }

    /// Correlations (elements j < l), the large-sample covariance of sample correlations of
    /// normal rows (Pearson & Filon 1898; Hsu 1949; Olkin & Siotani 1976):
    /// n cov(r_jl, r_mr) = ½ r_jl r_mr (r_jm² + r_jr² + r_lm² + r_lr²) + r_jm r_lr + r_jr r_lm
    /// − r_jl (r_jm r_jr + r_lm r_lr) − r_mr (r_jm r_lm + r_jr r_lr), which gives
    /// var(r) = (1 - r²)² / n.
    pub fn correlations(r: &DMatrix<f64>, n: usize) -> Result<NormalTheory, StatsError> {
        Self::new(r, n, true)
    }

    fn new(m: &DMatrix<f64>, n: usize, correlation: bool) -> Result<NormalTheory, StatsError> {
        if m.nrows() != m.ncols() {
            return Err(StatsError::SizeMismatch { what: "matrix columns", expected: m.nrows(), found: m.ncols() });
        }
        if n < 2 {
            return Err(StatsError::NotEnoughData { what: "a sampling covariance".into(), needed: 2, found: n });
        }
        if m.iter().any(|v| !v.is_finite()) {
            return Err(StatsError::InvalidInput("the summary matrix has a value that is not finite".into()));
        }
        Ok(NormalTheory { matrix: m.clone(), n, correlation })
    }

    fn entry(&self, (j, l): Element, (m, r): Element) -> f64 {
        let s = |a: usize, b: usize| self.matrix[(a, b)];
        let n = self.n as f64;
        if !self.correlation {
            return (s(j, m) * s(l, r) + s(j, r) * s(l, m)) / n;
        }
        let (rjl, rmr) = (s(j, l), s(m, r));
        let (rjm, rjr, rlm, rlr) = (s(j, m), s(j, r), s(l, m), s(l, r));
        (0.5 * rjl * rmr * (rjm * rjm + rjr * rjr + rlm * rlm + rlr * rlr) + rjm * rlr + rjr * rlm
            - rjl * (rjm * rjr + rlm * rlr)
            - rmr * (rjm * rlm + rjr * rlr))
            / n
    }
}

impl SamplingCovariance for NormalTheory {
    fn n_items(&self) -> usize {
        self.matrix.nrows()
    }

    fn n_obs(&self) -> usize {
        self.n
    }

    fn is_correlation(&self) -> bool {
        self.correlation
    }

    fn block(&self, elements: &[Element]) -> Result<DMatrix<f64>, StatsError> {
        for &e in elements {
            check_element(self.matrix.nrows(), self.correlation, e)?;
        }
        let b = elements.len();
        let mut v = DMatrix::zeros(b, b);
        for a in 0..b {
            for c in a..b {
                let x = self.entry(elements[a], elements[c]);
                v[(a, c)] = x;
                v[(c, a)] = x;
            }
        }
        Ok(v)
    }

    /// A' V A without V: with Ã the symmetric p x p matrix of a column of A (a_jl / 2 off the
    /// diagonal, in both triangles; a_jj on it), a' V b = (2/n) tr(Ã S B̃ S) for covariances;
    /// correlations first map each column through the Jacobian of r_jl = s_jl / √(s_jj s_ll) at
    /// S = R (∂r_jl/∂s_jj = -r_jl/2), since the normal-theory covariance of correlations is
    /// that of the covariances carried through it (Olkin & Siotani 1976). O(m p³ + m² p²) for m
    /// columns, whatever the number of elements.
    fn sandwich(&self, elements: &[Element], a: &DMatrix<f64>) -> Result<DMatrix<f64>, StatsError> {
        if a.nrows() != elements.len() {
            return Err(StatsError::SizeMismatch {
                what: "sandwich weights",
                expected: elements.len(),
                found: a.nrows(),
            });
        }
        let p = self.matrix.nrows();
        for &e in elements {
            check_element(p, self.correlation, e)?;
        }
        let m = a.ncols();
        // X_c = Ã_c S for every column c.
        let products: Vec<DMatrix<f64>> = (0..m)
            .map(|c| {
                let mut t = DMatrix::zeros(p, p);
                for (row, &(j, l)) in elements.iter().enumerate() {
                    let w = a[(row, c)];
                    if j == l {
                        t[(j, j)] += w;
                    } else {
                        t[(j, l)] += w / 2.0;
                        t[(l, j)] += w / 2.0;
                        if self.correlation {
                            let r = self.matrix[(j, l)];
                            t[(j, j)] -= w * r / 2.0;
                            t[(l, l)] -= w * r / 2.0;
                        }
                    }
                }
                t * &self.matrix
            })
            .collect();
        let n = self.n as f64;
        let mut out = DMatrix::zeros(m, m);
        for c in 0..m {
            for d in c..m {
                // tr(X_c X_d) = Σ_jk X_c[j,k] X_d[k,j].
                let x = products[c].component_mul(&products[d].transpose()).sum() * 2.0 / n;
                out[(c, d)] = x;
                out[(d, c)] = x;
            }
        }
        Ok(out)
    }
}
