//! Seeded data for tests, calibration runs and benchmarks: the one place that draws
//! multivariate normal samples and builds population covariances. Central functions:
//! `draw_normal`, `sample_cov`, `sample_cov_of_draws`, `factor_cov`. Never used by the analysis
//! itself; public so the crate's integration tests and benchmarks share it with unit tests.

use nalgebra::{DMatrix, DVector};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};

/// The seeded generator every test and calibration uses (ChaCha8).
pub fn seeded(seed: u64) -> ChaCha8Rng {
    ChaCha8Rng::seed_from_u64(seed)
}

/// A matrix from its rows (as fixtures store them); panics on ragged rows.
pub fn matrix(rows: &[Vec<f64>]) -> DMatrix<f64> {
    let cols = rows.first().map_or(0, Vec::len);
    assert!(rows.iter().all(|r| r.len() == cols), "ragged matrix rows");
    DMatrix::from_fn(rows.len(), cols, |i, j| rows[i][j])
}

/// Population covariance Λ Φ Λ' + Θ of a linear factor model (Bollen 1989, ch. 7).
pub fn factor_cov(lambda: &DMatrix<f64>, phi: &DMatrix<f64>, theta: &DMatrix<f64>) -> DMatrix<f64> {
    lambda * phi * lambda.transpose() + theta
}

/// `n` rows of N(0, Σ), drawn as Z L' with L the Cholesky factor of Σ (standard normals
/// drawn column by column of Z).
pub fn draw_normal<R: Rng>(sigma: &DMatrix<f64>, n: usize, rng: &mut R) -> DMatrix<f64> {
    let l = sigma.clone().cholesky().expect("a positive definite covariance").l();
    let z: DMatrix<f64> = DMatrix::from_fn(n, sigma.nrows(), |_, _| StandardNormal.sample(rng));
    z * l.transpose()
}

/// Unbiased sample covariance (divisor n − 1) of the rows of `x`.
pub fn sample_cov(x: &DMatrix<f64>) -> DMatrix<f64> {
    let n = x.nrows();
    let mean = x.row_mean();
    let mut c = x.clone();
    for mut row in c.row_iter_mut() {
        row -= &mean;
    }
    c.tr_mul(&c) / (n as f64 - 1.0)
}

/// Sample covariance (divisor n − 1) of `n` draws from N(0, Σ), drawn one observation at a
/// time (L z for each column z), without keeping the rows.
pub fn sample_cov_of_draws<R: Rng>(sigma: &DMatrix<f64>, n: usize, rng: &mut R) -> DMatrix<f64> {
    let m = sigma.nrows();
    let l = sigma.clone().cholesky().expect("a positive definite covariance").l();
    let z = DMatrix::from_fn(m, n, |_, _| rng.sample::<f64, _>(StandardNormal));
    let x = l * z;
    let mean = x.column_mean();
    let xc = DMatrix::from_fn(m, n, |r, c| x[(r, c)] - mean[r]);
    &xc * xc.transpose() / (n as f64 - 1.0)
}

/// `k` correlated latents (correlations from a random rank-2-plus-diagonal matrix, so that
/// no tetrad among four latents vanishes by accident) with `size` pure items each, then the
/// impure extras: item k*size loads on latents 0 and 1, item k*size + 1 on latents 1 and 2.
/// Loadings uniform in [0.55, 0.85]; unit item variances.
pub fn cluster_pool(k: usize, size: usize, impure: usize, rng: &mut impl Rng) -> DMatrix<f64> {
    let p = k * size + impure;
    let mut lambda = DMatrix::zeros(p, k);
    for f in 0..k {
        for j in 0..size {
            lambda[(f * size + j, f)] = rng.random_range(0.55..0.85);
        }
    }
    for e in 0..impure {
        lambda[(k * size + e, e % k)] = 0.55;
        lambda[(k * size + e, (e + 1) % k)] = 0.45;
    }
    let w: DMatrix<f64> =
        DMatrix::from_fn(k, 2, |_, c| if c == 0 { rng.random_range(0.3..0.7) } else { rng.random_range(-0.5..0.5) });
    let raw = &w * w.transpose() + DMatrix::identity(k, k) * 0.8;
    let phi = DMatrix::from_fn(k, k, |a, b| raw[(a, b)] / (raw[(a, a)] * raw[(b, b)]).sqrt());
    let common = &lambda * &phi * lambda.transpose();
    let theta = DMatrix::from_diagonal(&DVector::from_fn(p, |i, _| 1.0 - common[(i, i)]));
    factor_cov(&lambda, &phi, &theta)
}

/// A one-factor population: item = λ·F + √(1-λ²)·e, the first `continuous` columns kept
/// continuous, the rest cut at `cuts`; each value missing with probability `missing`.
pub fn one_factor_columns(
    n: usize,
    items: usize,
    continuous: usize,
    missing: f64,
    seed: u64,
) -> Vec<crate::mixed::Column<'static>> {
    let mut rng = seeded(seed);
    let cuts = [-1.5, -0.5, 0.4, 1.3];
    let loadings: Vec<f64> = (0..items).map(|k| 0.5 + 0.4 * (k % 5) as f64 / 4.0).collect();
    let mut cont = vec![Vec::with_capacity(n); continuous];
    let mut ord = vec![Vec::with_capacity(n); items - continuous];
    for _ in 0..n {
        let f: f64 = StandardNormal.sample(&mut rng);
        for (k, &l) in loadings.iter().enumerate() {
            let e: f64 = StandardNormal.sample(&mut rng);
            let v = l * f + (1.0 - l * l).sqrt() * e;
            let absent = rng.random::<f64>() < missing;
            if k < continuous {
                cont[k].push(if absent { f64::NAN } else { 10.0 + 2.0 * v });
            } else {
                let code = cuts.iter().filter(|&&c| v > c).count() as u8;
                ord[k - continuous].push(if absent { crate::mixed::MISSING_CODE } else { code });
            }
        }
    }
    cont.into_iter()
        .map(|v| crate::mixed::Column::Continuous(v.into()))
        .chain(ord.into_iter().map(|codes| crate::mixed::Column::Ordinal { codes: codes.into(), levels: 5 }))
        .collect()
}

/// Population covariance of the linear Gaussian model x = B x + e on a DAG, with
/// coefficients ±U(0.5, 1.5) and error variances U(0.5, 1.5):
/// Sigma = (I - B)^-1 Omega (I - B)^-T (Wright 1921; Bollen 1989, ch. 4).
pub fn linear_gaussian_cov(dag: &crate::search::Graph, seed: u64) -> DMatrix<f64> {
    let n = dag.n();
    let mut rng = seeded(seed);
    let mut b = DMatrix::zeros(n, n);
    for e in dag.edges() {
        let mag = rng.random_range(0.5..1.5);
        let sign = if rng.random::<bool>() { 1.0 } else { -1.0 };
        b[(e.to, e.from)] = sign * mag;
    }
    let omega = DMatrix::from_diagonal(&DVector::from_fn(n, |_, _| rng.random_range(0.5..1.5)));
    let a = (DMatrix::identity(n, n) - b).try_inverse().unwrap();
    &a * omega * a.transpose()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Both samplers converge on Σ (law of large numbers; common practice): at n = 20,000 the
    /// entries are within 0.05 of a unit-variance Σ with correlation 0.6.
    #[test]
    fn samplers_recover_the_population_covariance() {
        let sigma = DMatrix::from_row_slice(2, 2, &[1.0, 0.6, 0.6, 1.0]);
        let a = sample_cov(&draw_normal(&sigma, 20_000, &mut seeded(1)));
        let b = sample_cov_of_draws(&sigma, 20_000, &mut seeded(2));
        for s in [a, b] {
            assert!((s - &sigma).abs().max() < 0.05);
        }
    }
}
