//! Derivatives of the ML discrepancy: the analytic gradient and the expected (Fisher)
//! information of the free parameters, plus the delta-method covariance of the implied latent
//! covariances. Central type: `Derivatives`, which writes every dSigma/dtheta_t as a sum of
//! symmetric rank-two terms c (v_a v_b' + v_b v_a') with v taken from V = [I_p | Lambda C | Lambda A].
//! Never forms a p^2 x p^2 Kronecker product: every trace reduces to entries of V' M V.

use nalgebra::{DMatrix, DVector};

use super::implied::Implied;
use super::model::{Matrix, ParamLayout};

/// One symmetric rank-two term c (v_a v_b' + v_b v_a') of dSigma/dtheta_t; a and b index the
/// columns of V = [I_p | Lambda C | Lambda A].
#[derive(Debug, Clone, Copy, PartialEq)]
struct Term {
    coef: f64,
    a: usize,
    b: usize,
}

/// The structure of dSigma/dtheta for every free parameter of a model.
#[derive(Debug, Clone, PartialEq)]
pub struct Derivatives {
    terms: Vec<Vec<Term>>,
    p: usize,
    m: usize,
}

impl Derivatives {
    /// Derive the rank-two terms of every free parameter (Neudecker & Satorra 1991 give the
    /// same derivatives in Kronecker form). With C = A Psi A':
    /// d/dLambda_ik: e_i (Lambda C e_k)' + sym;  d/dTheta_ii: e_i e_i';  d/dTheta_ij: e_i e_j' + sym;
    /// d/dPsi_kk: (Lambda A e_k)(Lambda A e_k)';  d/dPsi_kl: (Lambda A e_k)(Lambda A e_l)' + sym;
    /// d/dB_ij: (Lambda A e_i)(Lambda C e_j)' + sym (from dA = A dB A).
    pub fn new(layout: &ParamLayout, p: usize, m: usize) -> Self {
        let mut terms = vec![Vec::new(); layout.len()];
        let (lc, la) = (p, p + m);
        for e in &layout.entries {
            let (r, c) = (e.row, e.col);
            let term = match e.matrix {
                Matrix::Lambda => Term { coef: 1.0, a: r, b: lc + c },
                Matrix::Theta if r == c => Term { coef: 0.5, a: r, b: r },
                Matrix::Theta => Term { coef: 1.0, a: r, b: c },
                Matrix::Psi if r == c => Term { coef: 0.5, a: la + r, b: la + r },
                Matrix::Psi => Term { coef: 1.0, a: la + r, b: la + c },
                Matrix::Beta => Term { coef: 1.0, a: la + r, b: lc + c },
            };
            terms[e.index].push(term);
        }
        Derivatives { terms, p, m }
    }

    /// Number of free parameters.
    pub fn len(&self) -> usize {
        self.terms.len()
    }

    /// Whether there is no free parameter.
    pub fn is_empty(&self) -> bool {
        self.terms.is_empty()
    }

    /// V' M V for V = [I_p | U], U = [Lambda C | Lambda A], from the blocks M, M U and U' M U,
    /// so no product with the identity block is ever formed.
    fn sandwich(&self, mmat: &DMatrix<f64>, u: &DMatrix<f64>) -> DMatrix<f64> {
        let p = self.p;
        let w = u.ncols();
        let mu = mmat * u;
        let umu = u.transpose() * &mu;
        // Exactly symmetric, so the Hessian below may read either triangle.
        let umu = (&umu + umu.transpose()) * 0.5;
        let mut out = DMatrix::zeros(p + w, p + w);
        out.view_mut((0, 0), (p, p)).copy_from(mmat);
        out.view_mut((0, p), (p, w)).copy_from(&mu);
        out.view_mut((p, 0), (w, p)).copy_from(&mu.transpose());
        out.view_mut((p, p), (w, w)).copy_from(&umu);
        out
    }

    /// U = [Lambda C | Lambda A], the non-identity columns of V.
    fn u(&self, imp: &Implied) -> DMatrix<f64> {
        let (p, m) = (self.p, self.m);
        let mut u = DMatrix::zeros(p, 2 * m);
        u.view_mut((0, 0), (p, m)).copy_from(&imp.lambda_c);
        u.view_mut((0, m), (p, m)).copy_from(&imp.lambda_a);
        u
    }

    /// Gradient of F = ln|Sigma| + tr(S Sigma^-1) - ln|S| - p and the expected Hessian of F,
    /// given K = Sigma^-1; see `gradient` and `hessian`.
    pub fn gradient_and_hessian(
        &self,
        imp: &Implied,
        k: &DMatrix<f64>,
        s: &DMatrix<f64>,
    ) -> (DVector<f64>, DMatrix<f64>) {
        (self.gradient(imp, k, s), self.hessian(imp, k))
    }

    /// dF/dtheta_t = tr(W dSigma_t) with W = K (Sigma - S) K = K - K S K (Joreskog 1969).
    pub fn gradient(&self, imp: &Implied, k: &DMatrix<f64>, s: &DMatrix<f64>) -> DVector<f64> {
        let w = k - k * s * k;
        let vwv = self.sandwich(&w, &self.u(imp));
        let mut g = DVector::zeros(self.len());
        for (t, terms) in self.terms.iter().enumerate() {
            g[t] = terms.iter().map(|x| 2.0 * x.coef * vwv[(x.a, x.b)]).sum();
        }
        g
    }

    /// E[d2F/dtheta_t dtheta_u] = tr(K dSigma_t K dSigma_u) (Browne 1974), which for rank-two
    /// terms is 2 c c' [(a'Kc)(b'Kd) + (a'Kd)(b'Kc)]. The Fisher information of the sample is
    /// (n - 1)/2 times this matrix.
    pub fn hessian(&self, imp: &Implied, k: &DMatrix<f64>) -> DMatrix<f64> {
        let vkv = self.sandwich(k, &self.u(imp));
        let q = self.len();
        let mut h = DMatrix::zeros(q, q);
        if self.terms.iter().all(|x| x.len() == 1) {
            single_term_hessian(&self.terms, &vkv, &mut h);
            return h;
        }
        for t in 0..q {
            for u in 0..=t {
                let mut sum = 0.0;
                for x in &self.terms[t] {
                    for y in &self.terms[u] {
                        sum += 2.0
                            * x.coef
                            * y.coef
                            * (vkv[(x.a, y.a)] * vkv[(x.b, y.b)] + vkv[(x.a, y.b)] * vkv[(x.b, y.a)]);
                    }
                }
                h[(t, u)] = sum;
                h[(u, t)] = sum;
            }
        }
        h
    }
}

/// The expected Hessian when every free parameter has one rank-two term (no shared labels),
/// the usual case: the same formula as the general loop, with column t of H read from the two
/// contiguous columns a_t and b_t of the symmetric V'KV, and the upper triangle mirrored.
fn single_term_hessian(terms: &[Vec<Term>], vkv: &DMatrix<f64>, h: &mut DMatrix<f64>) {
    let (n, q) = (vkv.nrows(), terms.len());
    let single: Vec<Term> = terms.iter().map(|x| x[0]).collect();
    let v = vkv.as_slice();
    for (t, x) in single.iter().enumerate() {
        let (ca, cb) = (&v[x.a * n..(x.a + 1) * n], &v[x.b * n..(x.b + 1) * n]);
        let column = &mut h.as_mut_slice()[t * q..t * q + t + 1];
        for (entry, y) in column.iter_mut().zip(&single) {
            *entry = 2.0 * x.coef * y.coef * (ca[y.a] * cb[y.b] + ca[y.b] * cb[y.a]);
        }
    }
    h.fill_lower_triangle_with_upper_triangle();
}

/// Jacobian of the implied latent covariances C = A Psi A' (pairs (i, j), i >= j, in the order
/// given) with respect to the free parameters: dC/dPsi_kl = A (E_kl + E_lk) A' (halved on the
/// diagonal), dC/dB_ij = A E_ij C + C E_ji A' (from dA = A dB A); loadings and errors do not
/// enter C. Rows = pairs, columns = free parameters.
pub fn latent_cov_jacobian(layout: &ParamLayout, imp: &Implied, pairs: &[(usize, usize)]) -> DMatrix<f64> {
    let (a, c) = (&imp.a, &imp.latent_cov);
    let mut jac = DMatrix::zeros(pairs.len(), layout.len());
    for e in &layout.entries {
        for (row, &(i, j)) in pairs.iter().enumerate() {
            let d = match e.matrix {
                Matrix::Psi if e.row == e.col => a[(i, e.row)] * a[(j, e.row)],
                Matrix::Psi => a[(i, e.row)] * a[(j, e.col)] + a[(i, e.col)] * a[(j, e.row)],
                Matrix::Beta => a[(i, e.row)] * c[(e.col, j)] + c[(i, e.col)] * a[(j, e.row)],
                Matrix::Lambda | Matrix::Theta => 0.0,
            };
            jac[(row, e.index)] += d;
        }
    }
    jac
}
