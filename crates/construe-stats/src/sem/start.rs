//! Starting values for the ML fit: a one-factor approximation per latent from its own
//! indicators, error variances at half the observed variances, latent covariances from
//! signed unit-weight sum scores, paths and correlated errors at zero. Central function:
//! `start_values`. Never looks beyond the sample covariance; never clamps a fitted value.

use nalgebra::DMatrix;

use super::model::{Matrix, Param, ParamLayout, SemModel};

/// Starting values indexed as `layout`. Loadings of latent k: the leading eigenvector of its
/// indicators' covariance submatrix with communalities s_ii - theta_ii on the diagonal
/// (one principal-axis step, Thurstone 1947), theta_ii = s_ii / 2 unless fixed. The scale
/// follows the model: divided by a fixed loading or by the square root of a fixed latent variance.
/// Latent correlations start at the correlations of signed unit-weight sum scores, which are
/// attenuated and so keep the starting Psi positive definite; if not, they start at zero.
/// Entries sharing a label start at the mean of their individual starts.
pub fn start_values(model: &SemModel, layout: &ParamLayout, s: &DMatrix<f64>) -> Vec<f64> {
    let (p, m) = (model.p(), model.m());
    let theta0: Vec<f64> = (0..p)
        .map(|i| match model.param(Matrix::Theta, i, i) {
            Param::Fixed(v) => *v,
            Param::Free(_) => s[(i, i)] / 2.0,
        })
        .collect();
    let mut loading = DMatrix::zeros(p, m);
    let mut scale = vec![1.0; m];
    let mut weights: Vec<Vec<(usize, f64)>> = vec![Vec::new(); m];
    for k in 0..m {
        let items: Vec<usize> = (0..p).filter(|&i| !model.param(Matrix::Lambda, i, k).is_zero()).collect();
        if items.is_empty() {
            continue;
        }
        let mut l = one_factor_loadings(&items, s, &theta0);
        let fixed = items.iter().enumerate().find_map(|(pos, &i)| match model.param(Matrix::Lambda, i, k) {
            Param::Fixed(v) => Some((pos, *v)),
            Param::Free(_) => None,
        });
        let sk = match (fixed, model.param(Matrix::Psi, k, k)) {
            (Some((pos, v)), _) if l[pos].abs() > 1e-8 => {
                if l[pos] / v < 0.0 {
                    l.iter_mut().for_each(|x| *x = -*x);
                }
                l[pos] / v
            }
            (_, Param::Fixed(c)) if *c > 0.0 => c.sqrt(),
            _ => 1.0,
        };
        scale[k] = sk;
        for (pos, &i) in items.iter().enumerate() {
            loading[(i, k)] = l[pos] / sk;
            weights[k].push((i, if l[pos] < 0.0 { -1.0 } else { 1.0 }));
        }
    }
    let sum_cov = |a: &[(usize, f64)], b: &[(usize, f64)]| -> f64 {
        a.iter().map(|&(i, wi)| b.iter().map(|&(j, wj)| wi * wj * s[(i, j)]).sum::<f64>()).sum()
    };
    let latent0 = DMatrix::from_fn(m, m, |k, l| {
        if k == l {
            return scale[k] * scale[k];
        }
        let (vk, vl) = (sum_cov(&weights[k], &weights[k]), sum_cov(&weights[l], &weights[l]));
        if vk <= 0.0 || vl <= 0.0 {
            return 0.0;
        }
        sum_cov(&weights[k], &weights[l]) / (vk * vl).sqrt() * scale[k] * scale[l]
    });
    let psi_pd = latent0.clone().cholesky().is_some();
    // Paths start at each latent's regression on its parents in `latent0` (when that is
    // positive definite): at zero, a latent measured by two items whose only link to the rest is
    // a path (all its covariances fixed, as in `SemModel::dag`) has loadings the information
    // cannot separate, and the first step fails.
    let mut beta0 = DMatrix::<f64>::zeros(m, m);
    if psi_pd {
        for j in 0..m {
            let parents: Vec<usize> = (0..m).filter(|&k| model.param(Matrix::Beta, j, k).is_free()).collect();
            if parents.is_empty() {
                continue;
            }
            let spp = DMatrix::from_fn(parents.len(), parents.len(), |a, b| latent0[(parents[a], parents[b])]);
            let spj = DMatrix::from_fn(parents.len(), 1, |a, _| latent0[(parents[a], j)]);
            if let Some(b) = spp.cholesky().map(|c| c.solve(&spj)) {
                for (a, &k) in parents.iter().enumerate() {
                    beta0[(j, k)] = b[(a, 0)];
                }
            }
        }
    }
    let mut sums = vec![0.0; layout.len()];
    let mut counts = vec![0usize; layout.len()];
    for e in &layout.entries {
        let v = match e.matrix {
            Matrix::Lambda => loading[(e.row, e.col)],
            Matrix::Theta if e.row == e.col => theta0[e.row],
            Matrix::Psi if e.row == e.col || psi_pd => latent0[(e.row, e.col)],
            Matrix::Beta => beta0[(e.row, e.col)],
            Matrix::Theta | Matrix::Psi => 0.0,
        };
        sums[e.index] += v;
        counts[e.index] += 1;
    }
    sums.iter().zip(&counts).map(|(s, &c)| s / c.max(1) as f64).collect()
}

/// Loadings of one factor measured by `items` in the unit-latent-variance metric: leading
/// eigenpair of the reduced covariance matrix (communalities s_ii - theta_ii on the diagonal);
/// one indicator gets sqrt(s_ii - theta_ii), floored at 5% of its variance so it starts inside
/// the admissible region. Signs make the loadings sum to a positive number.
fn one_factor_loadings(items: &[usize], s: &DMatrix<f64>, theta0: &[f64]) -> Vec<f64> {
    if let [i] = items {
        return vec![(s[(*i, *i)] - theta0[*i]).max(0.05 * s[(*i, *i)]).sqrt()];
    }
    let k = items.len();
    let reduced = DMatrix::from_fn(k, k, |a, b| {
        let (i, j) = (items[a], items[b]);
        if a == b { (s[(i, i)] - theta0[i]).max(0.05 * s[(i, i)]) } else { s[(i, j)] }
    });
    let eig = reduced.symmetric_eigen();
    let (mut best, mut ev) = (0, f64::NEG_INFINITY);
    for (idx, &v) in eig.eigenvalues.iter().enumerate() {
        if v > ev {
            best = idx;
            ev = v;
        }
    }
    let floor = 1e-3 * items.iter().map(|&i| s[(i, i)]).sum::<f64>() / k as f64;
    let root = ev.max(floor).sqrt();
    let v = eig.eigenvectors.column(best);
    let sign = if v.sum() < 0.0 { -1.0 } else { 1.0 };
    v.iter().map(|x| sign * x * root).collect()
}
