//! Calibration of the robust estimators' decisions (issue 15), on seeded simulations of a
//! screened-off pair X <- Z -> Y (three constructs, three items each, no X - Y edge):
//! - size of the corrected statistic on the correct CFA (rejections at 0.05 in [0.03, 0.08]);
//! - coverage of 95% intervals (estimate +- 1.96 robust SE) for loadings and structural
//!   effects (>= 0.93), against the values the same model takes on the population matrix;
//! - false X - Y edges: the PC search at alpha 0.05 on Wald tests of latent partial
//!   correlations with the robust latent covariance (delta method, `search::WaldPartial`),
//!   as `structure` runs it (in [0.03, 0.07]); power: the true Z - X and Z - Y dependences
//!   rejected given the other.
//!
//! Cells: continuous normal items (DWLS on Pearson correlations and ML with sandwich SEs and
//! the scaled statistic), continuous skewed items (ML, scaled statistic), and DWLS on the
//! polychoric correlations (two-step, Olsson 1979) of 5-point symmetric, 5-point skewed (about
//! 80% of answers in the top two categories) and binary 80/20 items, with the correlations'
//! sampling covariance from respondents' contributions (`acov::Contributions`).
//! Short versions run always (< 10 s); the long ones (>= 500 replicates) are `#[ignore]`d:
//! `cargo test --release -p construe-stats --test robust_calibration -- --ignored --nocapture`.
//! Acceptance bands are from the issue; the short bands are about +-2.5 binomial SDs.

use nalgebra::DMatrix;
use rand::Rng;
use rand_distr::{ChiSquared, Distribution, StandardNormal};

use construe_stats::acov::{Contributions, Dense, SamplingCovariance, adf_covariances, all_elements};
use construe_stats::mixed::{Column, mixed_correlation};
use construe_stats::polychoric::OrdinalFit;
use construe_stats::search::{CiTest, ColliderRule, Knowledge, PcOptions, WaldPartial, pc};
use construe_stats::sem::{FitOptions, Identification, Matrix, RobustFit, SemModel, fit_dwls, ml_sandwich};
use construe_stats::testkit;

const LOADINGS: [f64; 9] = [0.8, 0.7, 0.6, 0.75, 0.65, 0.55, 0.8, 0.6, 0.7];
/// Latents Z, X, Y: Z -> X 0.6, Z -> Y 0.5 (standardized), so corr(X, Y) = 0.3 and
/// rho(X, Y | Z) = 0.
const Z_X: f64 = 0.6;
const Z_Y: f64 = 0.5;
const Z975: f64 = 1.959_963_984_540_054;

#[derive(Debug, Clone, Copy, PartialEq)]
enum Cell {
    /// Normal items, DWLS on Pearson correlations with their distribution-free V.
    DwlsContinuous,
    /// Normal items, ML with sandwich SEs and the scaled statistic.
    MlNormal,
    /// Items with chi-square(3) errors (skewness 1.6), ML with sandwich SEs, scaled statistic.
    MlSkewed,
    /// Normal responses cut into 5 symmetric categories; DWLS on polychoric correlations.
    Symmetric5,
    /// Cut into 5 categories with about 80% of answers in the top two.
    Skewed5,
    /// Cut into yes/no at 80/20.
    Binary,
}

impl Cell {
    fn thresholds(self) -> Option<&'static [f64]> {
        match self {
            Cell::Symmetric5 => Some(&[-1.5, -0.5, 0.5, 1.5]),
            Cell::Skewed5 => Some(&[-2.0, -1.5, -0.8, 0.2]),
            Cell::Binary => Some(&[0.8416]),
            _ => None,
        }
    }
}

fn groups() -> Vec<Vec<usize>> {
    vec![vec![0, 1, 2], vec![3, 4, 5], vec![6, 7, 8]]
}

fn latent_corr() -> DMatrix<f64> {
    DMatrix::from_row_slice(3, 3, &[1.0, Z_X, Z_Y, Z_X, 1.0, Z_X * Z_Y, Z_Y, Z_X * Z_Y, 1.0])
}

fn population() -> DMatrix<f64> {
    let c = latent_corr();
    DMatrix::from_fn(9, 9, |i, j| if i == j { 1.0 } else { LOADINGS[i] * LOADINGS[j] * c[(i / 3, j / 3)] })
}

fn draw(cell: Cell, n: usize, rng: &mut impl Rng) -> DMatrix<f64> {
    let chol = latent_corr().cholesky().unwrap().l();
    let chi = ChiSquared::new(3.0).unwrap();
    let mut x = DMatrix::zeros(n, 9);
    for r in 0..n {
        let z: Vec<f64> = (0..3).map(|_| StandardNormal.sample(rng)).collect();
        let f: Vec<f64> = (0..3).map(|k| (0..=k).map(|j| chol[(k, j)] * z[j]).sum()).collect();
        for i in 0..9 {
            let e: f64 = match cell {
                Cell::MlSkewed => (chi.sample(rng) - 3.0) / 6f64.sqrt(),
                _ => StandardNormal.sample(rng),
            };
            x[(r, i)] = LOADINGS[i] * f[i / 3] + (1.0 - LOADINGS[i].powi(2)).sqrt() * e;
        }
    }
    x
}

/// Pearson correlations of complete rows and their distribution-free sampling covariance:
/// Browne's (1984) covariance of the covariances carried to r_jl = s_jl / sqrt(s_jj s_ll) by
/// the delta method (dr = ds_jl / sd - r (ds_jj / s_jj + ds_ll / s_ll) / 2).
fn correlations_with_acov(x: &DMatrix<f64>) -> (DMatrix<f64>, Dense) {
    let p = x.ncols();
    let gamma = adf_covariances(x).unwrap();
    let cov_el = all_elements(p, false);
    let g = gamma.block(&cov_el).unwrap();
    let n = x.nrows() as f64;
    let means: Vec<f64> = (0..p).map(|j| x.column(j).sum() / n).collect();
    let s = DMatrix::from_fn(p, p, |j, l| {
        (0..x.nrows()).map(|r| (x[(r, j)] - means[j]) * (x[(r, l)] - means[l])).sum::<f64>() / n
    });
    let r = DMatrix::from_fn(p, p, |j, l| s[(j, l)] / (s[(j, j)] * s[(l, l)]).sqrt());
    let cor_el = all_elements(p, true);
    let pos = |e: (usize, usize)| cov_el.iter().position(|&x| x == e).unwrap();
    let mut jac = DMatrix::zeros(cor_el.len(), cov_el.len());
    for (a, &(j, l)) in cor_el.iter().enumerate() {
        let sd = (s[(j, j)] * s[(l, l)]).sqrt();
        jac[(a, pos((j, l)))] = 1.0 / sd;
        jac[(a, pos((j, j)))] = -0.5 * r[(j, l)] / s[(j, j)];
        jac[(a, pos((l, l)))] = -0.5 * r[(j, l)] / s[(l, l)];
    }
    let v = &jac * g * jac.transpose();
    (r, Dense::new(p, x.nrows(), true, &cor_el, v).unwrap())
}

/// What one replicate decided.
#[derive(Debug, Default, Clone, Copy)]
struct Outcome {
    reject_cfa: bool,
    covered: usize,
    intervals: usize,
    false_edge: bool,
    found_true: usize,
}

fn fit(cell: Cell, model: &SemModel, x: &DMatrix<f64>) -> RobustFit {
    match cell {
        Cell::DwlsContinuous => {
            let (r, v) = correlations_with_acov(x);
            fit_dwls(model, &r, &v, &FitOptions::default()).unwrap()
        }
        Cell::Symmetric5 | Cell::Skewed5 | Cell::Binary => {
            let cuts = cell.thresholds().unwrap();
            let columns: Vec<Column<'static>> = (0..x.ncols())
                .map(|j| Column::Ordinal {
                    codes: (0..x.nrows()).map(|r| cuts.iter().filter(|&&c| x[(r, j)] > c).count() as u8).collect(),
                    levels: cuts.len() + 1,
                })
                .collect();
            let estimate = mixed_correlation(&columns, OrdinalFit::TwoStep).unwrap();
            let v = Contributions::correlations(&columns, &estimate).unwrap();
            fit_dwls(model, &estimate.matrix, &v, &FitOptions::default()).unwrap()
        }
        Cell::MlNormal | Cell::MlSkewed => {
            let s = testkit::sample_cov(x);
            let v = adf_covariances(x).unwrap();
            let ml = model.fit(&s, x.nrows(), &FitOptions::default()).unwrap();
            ml_sandwich(&ml, &s, &v).unwrap()
        }
    }
}

/// The values the SEM Z -> X, Z -> Y takes on the population (the estimand of each estimator:
/// on correlations for DWLS, on covariances for ML; the population has unit item variances, so
/// both are the same numbers).
fn truth(sem: &SemModel) -> Vec<f64> {
    sem.fit(&population(), 1_000_000, &FitOptions::default()).unwrap().values
}

fn replicate(cell: Cell, n: usize, seed: u64, cfa: &SemModel, sem: &SemModel, true_sem: &[f64]) -> Outcome {
    let mut rng = testkit::seeded(seed);
    let x = draw(cell, n, &mut rng);
    let measured = fit(cell, cfa, &x);
    let mut out = Outcome { reject_cfa: measured.fit.indices.p_value < 0.05, ..Outcome::default() };
    // The structure search's test: rho(X, Y | Z) on the robust latent covariance.
    let moments = measured.fit.latent_moments();
    let wald = WaldPartial::new(moments.covariance.clone(), moments.covariance_acov.clone()).unwrap();
    // The PC search at alpha 0.05 (no knowledge) keeps X - Y only if every test rejects.
    let options = PcOptions { alpha: 0.05, max_cond: None, colliders: ColliderRule::Standard };
    let found = pc(&wald, &Knowledge::new(3), &options).unwrap();
    out.false_edge = found.edges.iter().any(|e| (e.from.min(e.to), e.from.max(e.to)) == (1, 2));
    out.found_true =
        [(0, 1, 2), (0, 2, 1)].iter().filter(|&&(a, b, c)| wald.test(a, b, &[c]).unwrap().p < 0.05).count();
    if out.found_true < 2 {
        let tests: Vec<_> = [(0, 1, 2), (0, 2, 1)].iter().map(|&(a, b, c)| wald.test(a, b, &[c]).unwrap()).collect();
        println!(
            "seed {seed}: a true dependence missed: {tests:?}; converged {}, {} Heywood cases, latent correlation {:?}",
            measured.fit.converged,
            measured.fit.heywood.len(),
            moments.correlation.as_slice()
        );
    }
    let structural = fit(cell, sem, &x);
    for e in &structural.fit.parameters {
        let Some(t) = e.free else { continue };
        if !matches!(e.matrix, Matrix::Lambda | Matrix::Beta) {
            continue;
        }
        let se = e.se.unwrap();
        out.intervals += 1;
        if (e.est - true_sem[t]).abs() <= Z975 * se {
            out.covered += 1;
        }
    }
    out
}

#[derive(Debug)]
struct Rates {
    reject_cfa: f64,
    coverage: f64,
    false_edge: f64,
    power: f64,
}

fn calibrate(cell: Cell, n: usize, replicates: u64, base_seed: u64) -> Rates {
    let cfa = SemModel::cfa(&groups(), 9, Identification::UnitLatentVariance).unwrap();
    let sem = SemModel::sem(&groups(), 9, Identification::UnitLatentVariance, &[(0, 1), (0, 2)]).unwrap();
    let true_sem = truth(&sem);
    let outs: Vec<Outcome> =
        (0..replicates).map(|r| replicate(cell, n, base_seed + r, &cfa, &sem, &true_sem)).collect();
    let share = |k: usize| k as f64 / replicates as f64;
    let rates = Rates {
        reject_cfa: share(outs.iter().filter(|o| o.reject_cfa).count()),
        coverage: outs.iter().map(|o| o.covered).sum::<usize>() as f64
            / outs.iter().map(|o| o.intervals).sum::<usize>() as f64,
        false_edge: share(outs.iter().filter(|o| o.false_edge).count()),
        power: outs.iter().map(|o| o.found_true).sum::<usize>() as f64 / (2 * replicates) as f64,
    };
    println!("{cell:?}, n = {n}, {replicates} replicates: {rates:?}");
    rates
}

fn check_short(rates: &Rates) {
    assert!((0.01..=0.12).contains(&rates.reject_cfa), "{rates:?}");
    assert!(rates.coverage >= 0.91, "{rates:?}");
    assert!((0.01..=0.11).contains(&rates.false_edge), "{rates:?}");
    assert!(rates.power == 1.0, "{rates:?}");
}

// Power: the true dependences (partial correlations 0.53 and 0.42) are found in every
// replicate except, for binary 80/20 items, 2 of 2,000 tests (seeds 60204, 60781: the sample's
// latent Z - Y correlation came out 0.30 and 0.41 against 0.5, and the partial given X at 1.2
// and 1.9 robust SEs). A normal-theory SE 10-45% too small (issue 15) would call those
// significant; the correct SE does not, so the long bound is 0.99, not 1.
fn check_long(rates: &Rates) {
    assert!((0.03..=0.08).contains(&rates.reject_cfa), "{rates:?}");
    assert!(rates.coverage >= 0.93, "{rates:?}");
    assert!((0.03..=0.07).contains(&rates.false_edge), "{rates:?}");
    assert!(rates.power >= 0.99, "{rates:?}");
}

#[test]
fn dwls_continuous_short() {
    check_short(&calibrate(Cell::DwlsContinuous, 1000, 150, 1_000));
}

#[test]
fn ml_skewed_short() {
    check_short(&calibrate(Cell::MlSkewed, 1000, 150, 2_000));
}

#[test]
fn symmetric_5_point_short() {
    check_short(&calibrate(Cell::Symmetric5, 1000, 100, 3_000));
}

#[test]
fn skewed_5_point_short() {
    check_short(&calibrate(Cell::Skewed5, 1000, 100, 4_000));
}

#[test]
fn binary_short() {
    check_short(&calibrate(Cell::Binary, 1000, 100, 5_000));
}

#[test]
#[ignore]
fn symmetric_5_point_long() {
    check_long(&calibrate(Cell::Symmetric5, 1000, 1000, 40_000));
}

#[test]
#[ignore]
fn skewed_5_point_long() {
    check_long(&calibrate(Cell::Skewed5, 1000, 1000, 50_000));
}

#[test]
#[ignore]
fn binary_long() {
    check_long(&calibrate(Cell::Binary, 1000, 1000, 60_000));
}

#[test]
#[ignore]
fn dwls_continuous_long() {
    check_long(&calibrate(Cell::DwlsContinuous, 1000, 1000, 10_000));
}

#[test]
#[ignore]
fn ml_normal_long() {
    check_long(&calibrate(Cell::MlNormal, 1000, 1000, 20_000));
}

#[test]
#[ignore]
fn ml_skewed_long() {
    check_long(&calibrate(Cell::MlSkewed, 1000, 1000, 30_000));
}
