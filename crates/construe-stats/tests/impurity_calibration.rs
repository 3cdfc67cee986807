//! Declared impurities modelled rather than dropped, and the diagnosis of what was not
//! declared (issue 16, acceptance bullets 2 and 3), on seeded simulations:
//! - recovery: a correlated error across two constructs and, separately, a method factor shared
//!   by three reverse-worded items of two constructs, declared in the model, are within 2 SEs
//!   of the value the same model takes on the population in >= 90% of replicates (per
//!   parameter), for continuous normal items (ML, information SEs) and for 5-point items
//!   (DWLS on polychoric correlations, sandwich SEs);
//! - structure: Z -> X, Z -> Y with a correlated error between an item of X and one of Y. Left
//!   undeclared it leaks into the X - Y latent covariance and the PC search (Wald tests on the
//!   latent partial correlations, alpha 0.05) keeps a false X - Y edge; declared, the search
//!   finds the true skeleton (Z - X, Z - Y only);
//! - diagnosis: with the correlated error undeclared, its modification index is the largest of
//!   all candidates in most replicates; with nothing planted, the robust (DWLS) score test of a
//!   fixed candidate rejects at about its 0.05 level (the decision rule's size).
//!
//! Short versions run always (< 10 s each); the long ones (>= 200 replicates) are `#[ignore]`d:
//! `cargo test --release -p construe-stats --test impurity_calibration -- --ignored --nocapture`.

use nalgebra::DMatrix;
use rand::Rng;

use construe_stats::acov::Contributions;
use construe_stats::mixed::{Column, mixed_correlation};
use construe_stats::polychoric::OrdinalFit;
use construe_stats::search::{ColliderRule, Knowledge, PcOptions, WaldPartial, pc};
use construe_stats::sem::modification::{Discrepancy, candidates, modification_indices};
use construe_stats::sem::{FitOptions, Identification, Matrix, Param, SemFit, SemModel, fit_dwls};
use construe_stats::testkit;

const CUTS_5: [f64; 4] = [-1.5, -0.5, 0.5, 1.5];

#[derive(Debug, Clone, Copy, PartialEq)]
enum Cell {
    /// Normal items, ML on covariances, information SEs.
    Ml,
    /// Normal responses cut into 5 symmetric categories, DWLS on polychoric correlations.
    Dwls5,
}

/// A population: loadings on every latent (constructs, then method factors), the latents'
/// correlations, and error covariances beyond the diagonal (the diagonal is set so every item
/// has unit variance).
struct Population {
    lambda: DMatrix<f64>,
    phi: DMatrix<f64>,
    errors: Vec<(usize, usize, f64)>,
}

impl Population {
    fn sigma(&self) -> DMatrix<f64> {
        let common = &self.lambda * &self.phi * self.lambda.transpose();
        let p = common.nrows();
        let mut s = DMatrix::from_fn(p, p, |i, j| if i == j { 1.0 } else { common[(i, j)] });
        for &(i, j, v) in &self.errors {
            s[(i, j)] += v;
            s[(j, i)] += v;
        }
        s
    }
}

/// One sample's moments, ready for either estimator.
enum Sample {
    Ml { s: DMatrix<f64>, n: usize },
    Dwls { r: DMatrix<f64>, v: Contributions },
}

fn draw(cell: Cell, sigma: &DMatrix<f64>, n: usize, rng: &mut impl Rng) -> Sample {
    let x = testkit::draw_normal(sigma, n, rng);
    match cell {
        Cell::Ml => Sample::Ml { s: testkit::sample_cov(&x), n },
        Cell::Dwls5 => {
            let columns: Vec<Column<'static>> = (0..x.ncols())
                .map(|j| Column::Ordinal {
                    codes: (0..n).map(|r| CUTS_5.iter().filter(|&&c| x[(r, j)] > c).count() as u8).collect(),
                    levels: CUTS_5.len() + 1,
                })
                .collect();
            let estimate = mixed_correlation(&columns, OrdinalFit::TwoStep).unwrap();
            let v = Contributions::correlations(&columns, &estimate).unwrap();
            Sample::Dwls { r: estimate.matrix, v }
        }
    }
}

fn fit(model: &SemModel, sample: &Sample) -> Option<SemFit> {
    match sample {
        Sample::Ml { s, n } => model.fit(s, *n, &FitOptions::default()).ok(),
        Sample::Dwls { r, v } => fit_dwls(model, r, v, &FitOptions::default()).ok().map(|f| f.fit),
    }
    .filter(|f| f.converged)
}

fn discrepancy(sample: &Sample) -> Discrepancy<'_> {
    match sample {
        Sample::Ml { s, n } => Discrepancy::Ml { s, n: *n },
        Sample::Dwls { r, v } => Discrepancy::Dwls { r, v },
    }
}

/// The estimand: the model fitted to the population matrix.
fn truth(model: &SemModel, sigma: &DMatrix<f64>) -> SemFit {
    model.fit(sigma, 1_000_000, &FitOptions::default()).unwrap()
}

/// Per parameter of `entries`, the share of replicates whose estimate lies within 2 SEs of the
/// estimand (a replicate whose fit fails counts as a miss).
fn recovery(
    cell: Cell,
    pop: &Population,
    model: &SemModel,
    entries: &[(Matrix, usize, usize)],
    n: usize,
    replicates: u64,
    seed: u64,
) -> Vec<f64> {
    let sigma = pop.sigma();
    let t = truth(model, &sigma);
    let want: Vec<f64> = entries.iter().map(|&(m, r, c)| t.entry(m, r, c).unwrap().est).collect();
    let mut hits = vec![0usize; entries.len()];
    for k in 0..replicates {
        let mut rng = testkit::seeded(seed + k);
        let sample = draw(cell, &sigma, n, &mut rng);
        let Some(f) = fit(model, &sample) else { continue };
        for (h, (&(m, r, c), w)) in hits.iter_mut().zip(entries.iter().zip(&want)) {
            let e = f.entry(m, r, c).unwrap();
            if (e.est - w).abs() <= 2.0 * e.se.unwrap() {
                *h += 1;
            }
        }
    }
    let rates: Vec<f64> = hits.iter().map(|&h| h as f64 / replicates as f64).collect();
    println!("{cell:?}, n = {n}, {replicates} replicates: within 2 SEs {rates:?} (estimands {want:?})");
    rates
}

/// Two constructs of four items (loadings 0.75, 0.7, 0.65, 0.6; correlation 0.4) and a
/// correlated error of 0.2 between item 2 of the first and item 2 of the second.
fn correlated_error_population() -> Population {
    let l = [0.75, 0.7, 0.65, 0.6];
    let lambda = DMatrix::from_fn(8, 2, |i, k| if i / 4 == k { l[i % 4] } else { 0.0 });
    let phi = DMatrix::from_row_slice(2, 2, &[1.0, 0.4, 0.4, 1.0]);
    Population { lambda, phi, errors: vec![(5, 1, 0.2)] }
}

fn two_constructs(p_each: usize) -> SemModel {
    let groups: Vec<Vec<usize>> = (0..2).map(|k| (k * p_each..(k + 1) * p_each).collect()).collect();
    SemModel::cfa(&groups, 2 * p_each, Identification::UnitLatentVariance).unwrap()
}

fn correlated_error_recovery(cell: Cell, n: usize, replicates: u64, seed: u64) -> Vec<f64> {
    let mut model = two_constructs(4);
    model.free_error_covariance(5, 1);
    recovery(cell, &correlated_error_population(), &model, &[(Matrix::Theta, 5, 1)], n, replicates, seed)
}

/// Two constructs of five items (loadings 0.7, 0.65, 0.6, 0.7, 0.65; correlation 0.3) and a
/// method factor (loadings 0.4) shared by the reverse-worded items 3 and 4 of the first and
/// item 3 of the second.
const REVERSED: [usize; 3] = [2, 3, 7];

fn method_factor_population() -> Population {
    let l = [0.7, 0.65, 0.6, 0.7, 0.65];
    let lambda = DMatrix::from_fn(10, 3, |i, k| {
        if k < 2 && i / 5 == k {
            l[i % 5]
        } else if k == 2 && REVERSED.contains(&i) {
            0.4
        } else {
            0.0
        }
    });
    let phi = DMatrix::from_row_slice(3, 3, &[1.0, 0.3, 0.0, 0.3, 1.0, 0.0, 0.0, 0.0, 1.0]);
    Population { lambda, phi, errors: Vec::new() }
}

fn method_factor_recovery(cell: Cell, n: usize, replicates: u64, seed: u64) -> Vec<f64> {
    let mut model = two_constructs(5);
    let k = model.add_latent("reversed");
    model.set_latent_covariance(k, k, Param::Fixed(1.0));
    for &i in &REVERSED {
        model.set_loading(i, k, Param::free());
    }
    let entries: Vec<(Matrix, usize, usize)> = REVERSED.iter().map(|&i| (Matrix::Lambda, i, k)).collect();
    recovery(cell, &method_factor_population(), &model, &entries, n, replicates, seed)
}

#[test]
fn declared_correlated_error_is_recovered_short() {
    for (cell, seed) in [(Cell::Ml, 100), (Cell::Dwls5, 200)] {
        let rates = correlated_error_recovery(cell, 500, 60, seed);
        assert!(rates.iter().all(|&r| r >= 0.85), "{cell:?}: {rates:?}");
    }
}

#[test]
fn declared_method_factor_is_recovered_short() {
    for (cell, seed) in [(Cell::Ml, 300), (Cell::Dwls5, 400)] {
        let rates = method_factor_recovery(cell, 500, 50, seed);
        assert!(rates.iter().all(|&r| r >= 0.84), "{cell:?}: {rates:?}");
    }
}

#[test]
#[ignore]
fn declared_impurities_are_recovered_long() {
    for (cell, seed) in [(Cell::Ml, 10_000), (Cell::Dwls5, 20_000)] {
        let rates = correlated_error_recovery(cell, 500, 300, seed);
        assert!(rates.iter().all(|&r| r >= 0.9), "{cell:?}: {rates:?}");
        let rates = method_factor_recovery(cell, 500, 300, seed + 5_000);
        assert!(rates.iter().all(|&r| r >= 0.9), "{cell:?}: {rates:?}");
    }
}

/// Z, X, Y (latents 0, 1, 2) with Z -> X and Z -> Y (correlations 0.6, 0.5, so X and Y are
/// independent given Z), three items each (loadings 0.8, 0.7, 0.6), and a correlated error of
/// `planted` between the first item of X and the first item of Y.
fn fork_population(planted: f64) -> Population {
    let l = [0.8, 0.7, 0.6];
    let lambda = DMatrix::from_fn(9, 3, |i, k| if i / 3 == k { l[i % 3] } else { 0.0 });
    let phi = DMatrix::from_row_slice(3, 3, &[1.0, 0.6, 0.5, 0.6, 1.0, 0.3, 0.5, 0.3, 1.0]);
    Population { lambda, phi, errors: vec![(6, 3, planted)] }
}

#[derive(Debug, Default)]
struct StructureRates {
    /// Share of replicates whose skeleton has the false X - Y edge.
    false_edge: f64,
    /// Share of replicates whose skeleton is exactly Z - X, Z - Y.
    true_skeleton: f64,
}

fn structure(cell: Cell, declared: bool, n: usize, replicates: u64, seed: u64) -> StructureRates {
    let sigma = fork_population(0.25).sigma();
    let mut model =
        SemModel::cfa(&[vec![0, 1, 2], vec![3, 4, 5], vec![6, 7, 8]], 9, Identification::UnitLatentVariance).unwrap();
    if declared {
        model.free_error_covariance(6, 3);
    }
    let options = PcOptions { alpha: 0.05, max_cond: None, colliders: ColliderRule::Standard };
    let (mut false_edge, mut true_skeleton) = (0usize, 0usize);
    for k in 0..replicates {
        let mut rng = testkit::seeded(seed + k);
        let sample = draw(cell, &sigma, n, &mut rng);
        let Some(f) = fit(&model, &sample) else { continue };
        let moments = f.latent_moments();
        let wald = WaldPartial::new(moments.covariance.clone(), moments.covariance_acov.clone()).unwrap();
        let found = pc(&wald, &Knowledge::new(3), &options).unwrap();
        let mut skeleton: Vec<(usize, usize)> =
            found.edges.iter().map(|e| (e.from.min(e.to), e.from.max(e.to))).collect();
        skeleton.sort_unstable();
        false_edge += usize::from(skeleton.contains(&(1, 2)));
        true_skeleton += usize::from(skeleton == [(0, 1), (0, 2)]);
    }
    let share = |k: usize| k as f64 / replicates as f64;
    let rates = StructureRates { false_edge: share(false_edge), true_skeleton: share(true_skeleton) };
    println!("{cell:?}, declared {declared}, n = {n}, {replicates} replicates: {rates:?}");
    rates
}

#[test]
fn declared_correlated_error_keeps_the_structure_short() {
    let undeclared = structure(Cell::Ml, false, 2000, 60, 500);
    let declared = structure(Cell::Ml, true, 2000, 60, 500);
    assert!(undeclared.false_edge >= 0.5, "undeclared: {undeclared:?}");
    assert!(declared.false_edge <= 0.12, "declared: {declared:?}");
    assert!(declared.true_skeleton >= 0.85, "declared: {declared:?}");
}

#[test]
#[ignore]
fn declared_correlated_error_keeps_the_structure_long() {
    for (cell, seed) in [(Cell::Ml, 30_000), (Cell::Dwls5, 40_000)] {
        let undeclared = structure(cell, false, 2000, 300, seed);
        let declared = structure(cell, true, 2000, 300, seed);
        assert!(undeclared.false_edge >= 0.5, "{cell:?} undeclared: {undeclared:?}");
        assert!(declared.false_edge <= 0.08, "{cell:?} declared: {declared:?}");
        assert!(declared.true_skeleton >= 0.9, "{cell:?} declared: {declared:?}");
    }
}

/// Share of replicates in which the undeclared correlated error has the largest modification
/// index among every error covariance and cross-loading.
fn planted_mi_is_largest(cell: Cell, n: usize, replicates: u64, seed: u64) -> f64 {
    let sigma = correlated_error_population().sigma();
    let model = two_constructs(4);
    let cands = candidates(&model, &[0, 1]);
    let mut largest = 0usize;
    for k in 0..replicates {
        let mut rng = testkit::seeded(seed + k);
        let sample = draw(cell, &sigma, n, &mut rng);
        let Some(f) = fit(&model, &sample) else { continue };
        let mods = modification_indices(&model, &f, discrepancy(&sample), &cands).unwrap();
        let top = mods.iter().max_by(|a, b| a.mi.total_cmp(&b.mi)).unwrap();
        largest += usize::from((top.matrix, top.row, top.col) == (Matrix::Theta, 5, 1));
    }
    let share = largest as f64 / replicates as f64;
    println!("{cell:?}, n = {n}, {replicates} replicates: planted MI largest in {share}");
    share
}

#[test]
fn undeclared_correlated_error_has_the_largest_mi_short() {
    for (cell, seed) in [(Cell::Ml, 600), (Cell::Dwls5, 700)] {
        let share = planted_mi_is_largest(cell, 1000, 40, seed);
        assert!(share >= 0.75, "{cell:?}: {share}");
    }
}

/// Share of replicates of a correctly specified model (the correlated-error population without
/// its correlated error) in which the MI of the cross-construct error covariance (5, 1) exceeds
/// the 0.05 critical value: the size of the score test.
fn mi_size(cell: Cell, n: usize, replicates: u64, seed: u64) -> f64 {
    let mut pop = correlated_error_population();
    pop.errors.clear();
    let sigma = pop.sigma();
    let model = two_constructs(4);
    let mut rejected = 0usize;
    let mut fitted = 0usize;
    for k in 0..replicates {
        let mut rng = testkit::seeded(seed + k);
        let sample = draw(cell, &sigma, n, &mut rng);
        let Some(f) = fit(&model, &sample) else { continue };
        fitted += 1;
        let mods = modification_indices(&model, &f, discrepancy(&sample), &[(Matrix::Theta, 5, 1)]).unwrap();
        rejected += usize::from(mods[0].mi > construe_stats::sem::modification::CHI2_1_95);
    }
    let rate = rejected as f64 / fitted as f64;
    println!("{cell:?}, n = {n}, {fitted} fitted replicates: MI size {rate}");
    rate
}

#[test]
fn mi_has_its_size_short() {
    for (cell, seed) in [(Cell::Ml, 800), (Cell::Dwls5, 900)] {
        let rate = mi_size(cell, 500, 120, seed);
        assert!((0.0..=0.12).contains(&rate), "{cell:?}: {rate}");
    }
}

#[test]
#[ignore]
fn mi_has_its_size_and_finds_the_planted_error_long() {
    for (cell, seed) in [(Cell::Ml, 50_000), (Cell::Dwls5, 60_000)] {
        let rate = mi_size(cell, 500, 1000, seed);
        assert!((0.03..=0.075).contains(&rate), "{cell:?}: {rate}");
        let share = planted_mi_is_largest(cell, 1000, 200, seed + 5_000);
        assert!(share >= 0.8, "{cell:?}: {share}");
    }
}
