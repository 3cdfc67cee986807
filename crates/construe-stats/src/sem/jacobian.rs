//! The Jacobian Delta = d sigma(theta) / d theta' of a model's implied moments, one row per
//! moment `Element` (j, l), one column per free parameter, and the product W Delta with the
//! normal-theory ML weight. Central function: `moment_jacobian`. Robust standard errors and
//! corrected statistics (`sem::robust`) are built from these matrices.
//! Each dSigma/dtheta_t is a sum of symmetric rank-two terms c (v_a v_b' + v_b v_a') with v
//! taken from V = [I_p | Lambda C | Lambda A] (the same derivatives as `information`, written
//! element by element); never forms a p^2 x p^2 product.

use nalgebra::DMatrix;

use super::implied::Implied;
use super::model::{Matrix, ParamLayout};
use crate::acov::Element;

/// One term c (v_a v_b' + v_b v_a') of dSigma/dtheta_t; a and b index the columns of
/// V = [I_p | Lambda C | Lambda A].
#[derive(Debug, Clone, Copy)]
struct Term {
    coef: f64,
    a: usize,
    b: usize,
}

/// The rank-two terms of every free parameter (Neudecker & Satorra 1991, in element form):
/// dLambda_ik: e_i (Lambda C e_k)' + sym; dTheta_ii: e_i e_i'; dTheta_ij: e_i e_j' + sym;
/// dPsi_kk: (Lambda A e_k)(Lambda A e_k)'; dPsi_kl: (Lambda A e_k)(Lambda A e_l)' + sym;
/// dB_ij: (Lambda A e_i)(Lambda C e_j)' + sym (from dA = A dB A).
fn terms(layout: &ParamLayout, p: usize, m: usize) -> Vec<Vec<Term>> {
    let mut terms = vec![Vec::new(); layout.len()];
    let (lc, la) = (p, p + m);
    for e in &layout.entries {
        let (r, c) = (e.row, e.col);
        terms[e.index].push(match e.matrix {
            Matrix::Lambda => Term { coef: 1.0, a: r, b: lc + c },
            Matrix::Theta if r == c => Term { coef: 0.5, a: r, b: r },
            Matrix::Theta => Term { coef: 1.0, a: r, b: c },
            Matrix::Psi if r == c => Term { coef: 0.5, a: la + r, b: la + r },
            Matrix::Psi => Term { coef: 1.0, a: la + r, b: la + c },
            Matrix::Beta => Term { coef: 1.0, a: la + r, b: lc + c },
        });
    }
    terms
}

/// `left` [I_p | Lambda C | Lambda A] as one dense p x (p + 2m) matrix (`left` = I gives V).
fn columns(imp: &Implied, left: Option<&DMatrix<f64>>) -> DMatrix<f64> {
    let (p, m) = (imp.lambda_c.nrows(), imp.lambda_c.ncols());
    let mut v = DMatrix::zeros(p, p + 2 * m);
    match left {
        Some(k) => {
            v.view_mut((0, 0), (p, p)).copy_from(k);
            v.view_mut((0, p), (p, m)).copy_from(&(k * &imp.lambda_c));
            v.view_mut((0, p + m), (p, m)).copy_from(&(k * &imp.lambda_a));
        }
        None => {
            v.view_mut((0, 0), (p, p)).fill_with_identity();
            v.view_mut((0, p), (p, m)).copy_from(&imp.lambda_c);
            v.view_mut((0, p + m), (p, m)).copy_from(&imp.lambda_a);
        }
    }
    v
}

/// Entry (j, l) of sum_terms c (v_a v_b' + v_b v_a') for every element and parameter, times
/// `diagonal` on elements j == l.
fn rank_two(terms: &[Vec<Term>], v: &DMatrix<f64>, elements: &[Element], diagonal: f64) -> DMatrix<f64> {
    let mut out = DMatrix::zeros(elements.len(), terms.len());
    for (t, ts) in terms.iter().enumerate() {
        for (row, &(j, l)) in elements.iter().enumerate() {
            let mut sum = 0.0;
            for x in ts {
                sum += x.coef * (v[(j, x.a)] * v[(l, x.b)] + v[(j, x.b)] * v[(l, x.a)]);
            }
            out[(row, t)] = if j == l { diagonal * sum } else { sum };
        }
    }
    out
}

/// Delta: row e = (j, l), column t = d Sigma_jl / d theta_t at the implied moments `imp`
/// (Bollen 1989, ch. 4 appendix; Neudecker & Satorra 1991). Equality-constrained entries
/// (shared labels) add into their one column.
pub fn moment_jacobian(layout: &ParamLayout, imp: &Implied, elements: &[Element]) -> DMatrix<f64> {
    let (p, m) = (imp.lambda_c.nrows(), imp.lambda_c.ncols());
    rank_two(&terms(layout, p, m), &columns(imp, None), elements, 1.0)
}

/// W Delta for the normal-theory ML weight over vech(S) (elements j <= l): with K = Sigma^-1,
/// s' W s = tr((K S)^2) / 2 for the symmetric matrix S of the elements, so
/// (W Delta)_(jl),t = (K dSigma_t K)_jl off the diagonal and half of it on the diagonal
/// (Browne 1974; Satorra & Bentler 1994 write W = D'(K (x) K)D / 2). Rows follow `elements`.
pub fn ml_weighted_jacobian(
    layout: &ParamLayout,
    imp: &Implied,
    k: &DMatrix<f64>,
    elements: &[Element],
) -> DMatrix<f64> {
    let (p, m) = (imp.lambda_c.nrows(), imp.lambda_c.ncols());
    rank_two(&terms(layout, p, m), &columns(imp, Some(k)), elements, 0.5)
}

/// Entry (e, f) of the normal-theory ML weight W over vech elements e = (j, l), f = (m, r):
/// mult_e mult_f (K_jm K_lr + K_jr K_lm) / 4 with mult = 2 off the diagonal, 1 on it
/// (the elementwise form of D'(K (x) K)D / 2, D the duplication matrix; Magnus & Neudecker 1988).
pub fn ml_weight(k: &DMatrix<f64>, (j, l): Element, (m, r): Element) -> f64 {
    let mult = |a: usize, b: usize| if a == b { 1.0 } else { 2.0 };
    mult(j, l) * mult(m, r) * (k[(j, m)] * k[(l, r)] + k[(j, r)] * k[(l, m)]) / 4.0
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::acov::all_elements;
    use crate::sem::implied::implied;
    use crate::sem::model::{Identification, SemModel};

    fn example() -> (SemModel, ParamLayout, Vec<f64>) {
        let mut model =
            SemModel::sem(&[vec![0, 1, 2], vec![3, 4], vec![5, 6]], 7, Identification::UnitLatentVariance, &[(0, 1)])
                .unwrap();
        model.free_error_covariance(2, 4);
        let layout = model.layout().unwrap();
        let values: Vec<f64> = (0..layout.len()).map(|t| 0.3 + 0.05 * (t % 7) as f64).collect();
        (model, layout, values)
    }

    // Delta against central differences of Sigma(theta) (the definition of a derivative).
    #[test]
    fn jacobian_matches_central_differences() {
        let (model, layout, values) = example();
        let elements = all_elements(7, false);
        let imp = implied(&model.matrices(&layout, &values)).unwrap();
        let delta = moment_jacobian(&layout, &imp, &elements);
        let h = 1e-6;
        for t in 0..layout.len() {
            let at = |s: f64| {
                let mut v = values.clone();
                v[t] += s * h;
                implied(&model.matrices(&layout, &v)).unwrap().sigma
            };
            let (up, down) = (at(1.0), at(-1.0));
            for (e, &(j, l)) in elements.iter().enumerate() {
                let num = (up[(j, l)] - down[(j, l)]) / (2.0 * h);
                assert!((num - delta[(e, t)]).abs() < 1e-8, "param {t} element ({j},{l}): {num} vs {}", delta[(e, t)]);
            }
        }
    }

    // W Delta from the rank-two form equals the explicit weight matrix times Delta, and
    // Delta' W Delta is half the expected Hessian of F_ML the fit uses (Browne 1974).
    #[test]
    fn weighted_jacobian_matches_the_explicit_weight() {
        let (model, layout, values) = example();
        let elements = all_elements(7, false);
        let imp = implied(&model.matrices(&layout, &values)).unwrap();
        let k = imp.sigma.clone().try_inverse().unwrap();
        let delta = moment_jacobian(&layout, &imp, &elements);
        let wd = ml_weighted_jacobian(&layout, &imp, &k, &elements);
        let w = DMatrix::from_fn(elements.len(), elements.len(), |a, b| ml_weight(&k, elements[a], elements[b]));
        let explicit = &w * &delta;
        assert!((&explicit - &wd).amax() < 1e-12);
        let derivs = crate::sem::information::Derivatives::new(&layout, 7, 3);
        let h = derivs.hessian(&imp, &k);
        assert!((delta.transpose() * &wd * 2.0 - h).amax() < 1e-10);
    }
}
