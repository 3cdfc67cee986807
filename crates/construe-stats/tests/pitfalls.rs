//! Simulation checks of the measurement-error pitfalls the tool exists to avoid, and of how well
//! the latent route (CFA, latent moments, Wald tests, PC) does instead: a noisy or coarsened
//! proxy of a common cause leaves a false dependence; the latent model removes it; the search
//! recovers a chain with a collider; the Wald test holds its level under a measurement model.
//! Test-only (declared `#[cfg(test)]`); every data set is drawn by `simulate` from a model declared in code
//! with a fixed seed. The long calibrations are `#[ignore]`d; docs/pitfalls.md has the numbers.

use nalgebra::DMatrix;

use construe_stats::moments::{Deletion, pearson};
use construe_stats::search::{CiTest, FisherZ, Knowledge, PcOptions, PcResult, WaldPartial, pc};
use construe_stats::sem::{FitOptions, Identification, Matrix, SemFit, SemModel};
use construe_stats::simulate::LatentVariance::{Own, Total};
use construe_stats::simulate::{Item, Model, ObservedVariable};

/// Columns of a simulated table (all analysed; no missing values in these models).
fn draw(model: &Model, n: usize, seed: u64) -> Vec<Vec<Option<f64>>> {
    model.draw(n, seed).unwrap().values
}

/// Sample covariance (n - 1 divisor) of the chosen columns.
fn covariance(columns: &[Vec<Option<f64>>]) -> DMatrix<f64> {
    pearson(columns, Deletion::Listwise).unwrap().covariance
}

/// CFA with correlated factors, latent variances fixed at 1, fitted by ML.
fn fit_cfa(groups: &[Vec<usize>], s: &DMatrix<f64>, n: usize) -> SemFit {
    let cfa = SemModel::cfa(groups, s.nrows(), Identification::UnitLatentVariance).unwrap();
    let fit = cfa.fit(s, n, &FitOptions::default()).unwrap();
    assert!(fit.converged, "CFA did not converge");
    fit
}

/// The Wald test on the fitted latent covariance, with the delta-method acov of its vech.
fn wald(fit: &SemFit) -> WaldPartial {
    let lm = fit.latent_moments();
    WaldPartial::new(lm.covariance, lm.covariance_acov).unwrap()
}

/// Unordered adjacencies of a PC result, each as (smaller, larger).
fn skeleton(result: &PcResult) -> Vec<(usize, usize)> {
    let mut out: Vec<(usize, usize)> = result.edges.iter().map(|e| (e.from.min(e.to), e.from.max(e.to))).collect();
    out.sort_unstable();
    out
}

fn has_directed(result: &PcResult, from: usize, to: usize) -> bool {
    result.edges.iter().any(|e| e.directed && e.from == from && e.to == to)
}

// ---------------------------------------------------------------------------------------------
// 1. A noisy proxy of a common cause does not screen off its effects.
//
// Z causes X and Y (0.5 each, all variances 1), there is no X-Y edge, so corr(X, Y) = 0.25 and
// X ⊥ Y | Z. X and Y are observed without error (reliability 1), so every dependence left is due
// to how Z is measured: by three continuous items with loadings 0.7, 0.65, 0.6 (reliabilities
// 0.49, 0.42, 0.36; the sum has reliability about 0.69). `z_true` is Z itself, the control.
// Column order: z1, z2, z3, x, y, z_true.
// ---------------------------------------------------------------------------------------------

fn proxy_model() -> Model {
    Model::default()
        .construct("z", Own(1.0))
        .construct("x", Total(1.0))
        .construct("y", Total(1.0))
        .path("z", "x", 0.5)
        .path("z", "y", 0.5)
        .item(Item::new("z1", "z", 0.7, 0.51))
        .item(Item::new("z2", "z", 0.65, 0.5775))
        .item(Item::new("z3", "z", 0.6, 0.64))
        .observed(ObservedVariable::new("x", "x", 1.0))
        .observed(ObservedVariable::new("y", "y", 1.0))
        .observed(ObservedVariable::new("z_true", "z", 1.0))
}

const PROXY_N: usize = 5_000;
const PROXY_SEED: u64 = 1_101;

fn proxy_columns() -> Vec<Vec<Option<f64>>> {
    draw(&proxy_model(), PROXY_N, PROXY_SEED)
}

/// Fisher-z test of x ⊥ y given one conditioning column, from the 3 x 3 sample covariance.
fn x_y_given(x: &[Option<f64>], y: &[Option<f64>], given: &[Option<f64>]) -> (f64, f64) {
    let s = covariance(&[x.to_vec(), y.to_vec(), given.to_vec()]);
    let r = FisherZ::new(s, PROXY_N as f64).unwrap().test(0, 1, &[2]).unwrap();
    (r.partial, r.p)
}

fn sum_score(columns: &[Vec<Option<f64>>]) -> Vec<Option<f64>> {
    (0..columns[0].len()).map(|row| Some(columns.iter().map(|c| c[row].unwrap()).sum())).collect()
}

#[test]
fn conditioning_on_a_sum_score_of_noisy_items_leaves_dependence() {
    // Common practice (no single source): partialling out an error-laden measure of a common
    // cause removes only part of its effect. Population values by hand: the sum has loading
    // 1.95 and error variance 1.7275 (reliability 0.688), corr(x, sum) = 0.975 / sqrt(5.53) =
    // 0.4146, so the partial correlation of x and y given the sum is
    // (0.25 - 0.4146^2) / (1 - 0.4146^2) = 0.094, which n = 5,000 detects surely.
    let cols = proxy_columns();
    let sum = sum_score(&cols[0..3]);
    let (r_sum, p_sum) = x_y_given(&cols[3], &cols[4], &sum);
    let (r_true, p_true) = x_y_given(&cols[3], &cols[4], &cols[5]);
    println!(
        "x, y given sum score: partial {r_sum:.4}, p {p_sum:.3e}; given true z: partial {r_true:.4}, p {p_true:.3}"
    );
    assert!(p_sum < 0.001, "the sum score screened off the dependence: p = {p_sum}");
    assert!(r_sum > 0.05 && r_sum < 0.14, "partial given the sum score {r_sum} far from 0.094");
    // the control: the same data given the construct itself show no dependence at this level
    assert!(p_true > 0.001, "given the true z, x and y still look dependent: p = {p_true}");
}

#[test]
fn conditioning_on_a_median_split_of_the_sum_score_leaves_dependence() {
    // Common practice (no single source): coarsening the proxy (here the sum of z's three items
    // cut at its sample median into two groups) throws away more of Z, so even more of the
    // X-Y dependence survives than with the sum itself.
    let cols = proxy_columns();
    let sum: Vec<f64> = sum_score(&cols[0..3]).into_iter().map(Option::unwrap).collect();
    let mut sorted = sum.clone();
    sorted.sort_by(f64::total_cmp);
    let median = (sorted[PROXY_N / 2 - 1] + sorted[PROXY_N / 2]) / 2.0;
    let split: Vec<Option<f64>> = sum.iter().map(|&v| Some(if v > median { 1.0 } else { 0.0 })).collect();
    let (r_split, p_split) = x_y_given(&cols[3], &cols[4], &split);
    let (r_sum, _) = x_y_given(&cols[3], &cols[4], &sum_score(&cols[0..3]));
    println!("x, y given median split of the sum: partial {r_split:.4}, p {p_split:.3e} (sum itself: {r_sum:.4})");
    assert!(p_split < 0.001, "the median split screened off the dependence: p = {p_split}");
    assert!(r_split > r_sum, "coarsening should leave more dependence: {r_split} vs {r_sum}");
    // Population value: a median split of a normal variable keeps sqrt(2 / pi) of its
    // correlations (the point-biserial of a dichotomised normal; common practice), so
    // corr(x, split) = 0.4146 * 0.7979 = 0.3308 and the partial correlation is
    // (0.25 - 0.3308^2) / (1 - 0.3308^2) = 0.158; the band is about three sampling sds.
    assert!(r_split > 0.12 && r_split < 0.20, "partial given the split {r_split} far from 0.158");
}

#[test]
fn latent_model_of_the_noisy_items_recovers_no_direct_effect() {
    // Common practice (no single source): modelling Z as a latent variable measured by its items
    // (x and y as single-indicator latents with error variance fixed at 0, their reliability in
    // this model) gives a consistent estimate of the direct x -> y effect, which is 0 here.
    let cols = proxy_columns();
    let s = covariance(&cols[0..5]);
    let groups = vec![vec![0, 1, 2], vec![3], vec![4]];
    // latents: 0 = z, 1 = x, 2 = y; first loadings fixed at 1 so the x -> y path is in the
    // units of x and y (both have variance 1)
    let mut sem = SemModel::sem(&groups, 5, Identification::UnitFirstLoading, &[(0, 1), (0, 2), (1, 2)]).unwrap();
    sem.fix_error_variance(3, 0.0).fix_error_variance(4, 0.0);
    let fit = sem.fit(&s, PROXY_N, &FitOptions::default()).unwrap();
    assert!(fit.converged);
    assert!(fit.heywood.is_empty(), "inadmissible estimates: {:?}", fit.heywood);
    let path = fit.entry(Matrix::Beta, 2, 1).unwrap();
    let se = path.se.unwrap();
    let z = path.est / se;
    println!("latent model: x -> y = {:.4} (se {se:.4}, z {z:.2})", path.est);
    assert!(z.abs() < 1.96, "x -> y looks significant in the latent model: z = {z}");
    assert!(path.est.abs() < 0.03, "x -> y = {} is not near 0", path.est);
    // the z -> x and z -> y paths carry the whole association
    for to in [1, 2] {
        let e = fit.entry(Matrix::Beta, to, 0).unwrap();
        assert!(e.est / e.se.unwrap() > 10.0, "z -> {to} not detected: {e:?}");
    }

    // The search on the latent covariance of the measurement model (the CFA; its latent
    // covariance equals the saturated SEM's) with the Wald test drops x - y and keeps the rest.
    let mut cfa = SemModel::cfa(&groups, 5, Identification::UnitFirstLoading).unwrap();
    cfa.fix_error_variance(3, 0.0).fix_error_variance(4, 0.0);
    let cfa_fit = cfa.fit(&s, PROXY_N, &FitOptions::default()).unwrap();
    assert!(cfa_fit.converged);
    let test = wald(&cfa_fit);
    let xy = test.test(1, 2, &[0]).unwrap();
    println!("latent Wald test of x, y given z: partial {:.4}, p {:.3}", xy.partial, xy.p);
    let result = pc(&test, &Knowledge::new(3), &PcOptions::default()).unwrap();
    assert!(!result.graph.is_adjacent(1, 2), "the search kept an x - y edge: {:?}", result.edges);
    assert_eq!(skeleton(&result), vec![(0, 1), (0, 2)]);
}

// ---------------------------------------------------------------------------------------------
// 2. Recovery of a chain with a collider among latents: A -> B -> C <- D, four pure continuous
// indicators each (loadings 0.8, 0.75, 0.7, 0.65), n = 1,000. Latents 0 = A, 1 = B, 2 = C, 3 = D.
// The true CPDAG is A - B, B -> C, D -> C.
// ---------------------------------------------------------------------------------------------

fn chain_model() -> Model {
    Model::default()
        .construct("a", Own(1.0))
        .construct("b", Total(1.0))
        .construct("c", Total(1.0))
        .construct("d", Own(1.0))
        .path("a", "b", 0.5)
        .path("b", "c", 0.4)
        .path("d", "c", 0.4)
        .item(Item::new("a1", "a", 0.8, 0.36))
        .item(Item::new("a2", "a", 0.75, 0.4375))
        .item(Item::new("a3", "a", 0.7, 0.51))
        .item(Item::new("a4", "a", 0.65, 0.5775))
        .item(Item::new("b1", "b", 0.8, 0.36))
        .item(Item::new("b2", "b", 0.75, 0.4375))
        .item(Item::new("b3", "b", 0.7, 0.51))
        .item(Item::new("b4", "b", 0.65, 0.5775))
        .item(Item::new("c1", "c", 0.8, 0.36))
        .item(Item::new("c2", "c", 0.75, 0.4375))
        .item(Item::new("c3", "c", 0.7, 0.51))
        .item(Item::new("c4", "c", 0.65, 0.5775))
        .item(Item::new("d1", "d", 0.8, 0.36))
        .item(Item::new("d2", "d", 0.75, 0.4375))
        .item(Item::new("d3", "d", 0.7, 0.51))
        .item(Item::new("d4", "d", 0.65, 0.5775))
}

const CHAIN_N: usize = 1_000;

/// Over `replicates` data sets (seeds base, base + 1, ...): how many gave exactly the true
/// skeleton and how many oriented B -> C <- D.
fn chain_recovery(replicates: u64, base_seed: u64) -> (usize, usize) {
    let m = chain_model();
    let groups: Vec<Vec<usize>> = (0..4).map(|k| (4 * k..4 * k + 4).collect()).collect();
    let (mut skeletons, mut colliders) = (0, 0);
    for r in 0..replicates {
        let s = covariance(&draw(&m, CHAIN_N, base_seed + r));
        let fit = fit_cfa(&groups, &s, CHAIN_N);
        let result = pc(&wald(&fit), &Knowledge::new(4), &PcOptions::default()).unwrap();
        let exact = skeleton(&result) == vec![(0, 1), (1, 2), (2, 3)];
        let collider = has_directed(&result, 1, 2) && has_directed(&result, 3, 2);
        if !(exact && collider) {
            println!("seed {}: adjacencies {:?}, collider {collider}", base_seed + r, skeleton(&result));
        }
        skeletons += usize::from(exact);
        colliders += usize::from(collider);
    }
    (skeletons, colliders)
}

const CHAIN_SEED: u64 = 2_000;

#[test]
fn search_on_latent_moments_recovers_chain_and_collider_short() {
    // Simulation check (Spirtes, Glymour & Scheines 2000, ch. 5: PC is consistent given
    // consistent tests): a short run with loose bands; the long run below holds the targets.
    let replicates = 20;
    let (sk, co) = chain_recovery(replicates, CHAIN_SEED);
    println!("chain/collider, {replicates} replicates: skeleton {sk}/{replicates}, collider {co}/{replicates}");
    assert!(sk >= 14, "exact skeleton only {sk} of {replicates}");
    assert!(co >= 13, "collider oriented only {co} of {replicates}");
}

// Long version: cargo test --release -- --ignored --nocapture search_on_latent_moments_recovers_chain_and_collider_long
#[test]
#[ignore]
fn search_on_latent_moments_recovers_chain_and_collider_long() {
    // Acceptance targets of the project: exact skeleton in >= 85% and the collider in >= 80% of
    // 100 replicates (simulation check; targets are ours).
    let replicates = 100;
    let (sk, co) = chain_recovery(replicates, CHAIN_SEED);
    let (sk_rate, co_rate) = (sk as f64 / replicates as f64, co as f64 / replicates as f64);
    println!("chain/collider, {replicates} replicates: skeleton {sk_rate:.2}, collider {co_rate:.2}");
    assert!(sk_rate >= 0.85, "exact skeleton rate {sk_rate}");
    assert!(co_rate >= 0.80, "collider rate {co_rate}");
}

// ---------------------------------------------------------------------------------------------
// 3. Level of the latent Wald test under a measurement model: L1 -> L2 -> L3 (0.5 each), three
// continuous indicators per latent (loadings 0.8, 0.7, 0.6), n = 500. The tested null is
// L1 ⊥ L3 | L2, which holds. The Fisher-z test on the latent correlation at the sample size is
// reported beside it: it ignores that the latent correlation is estimated from noisy items.
// ---------------------------------------------------------------------------------------------

fn null_model() -> Model {
    Model::default()
        .construct("l1", Own(1.0))
        .construct("l2", Total(1.0))
        .construct("l3", Total(1.0))
        .path("l1", "l2", 0.5)
        .path("l2", "l3", 0.5)
        .item(Item::new("p1", "l1", 0.8, 0.36))
        .item(Item::new("p2", "l1", 0.7, 0.51))
        .item(Item::new("p3", "l1", 0.6, 0.64))
        .item(Item::new("q1", "l2", 0.8, 0.36))
        .item(Item::new("q2", "l2", 0.7, 0.51))
        .item(Item::new("q3", "l2", 0.6, 0.64))
        .item(Item::new("s1", "l3", 0.8, 0.36))
        .item(Item::new("s2", "l3", 0.7, 0.51))
        .item(Item::new("s3", "l3", 0.6, 0.64))
}

const NULL_N: usize = 500;
const NULL_SEED: u64 = 3_000;

/// Rejections at alpha 0.05 of L1 ⊥ L3 | L2 over `cases` data sets: (Wald, Fisher z at n).
fn null_rejections(cases: u64, base_seed: u64) -> (usize, usize) {
    let m = null_model();
    let groups: Vec<Vec<usize>> = (0..3).map(|k| (3 * k..3 * k + 3).collect()).collect();
    let (mut wald_rej, mut fisher_rej) = (0, 0);
    for r in 0..cases {
        let s = covariance(&draw(&m, NULL_N, base_seed + r));
        let fit = fit_cfa(&groups, &s, NULL_N);
        let lm = fit.latent_moments();
        let w = WaldPartial::new(lm.covariance, lm.covariance_acov).unwrap().test(0, 2, &[1]).unwrap();
        let f = FisherZ::new(lm.correlation, NULL_N as f64).unwrap().test(0, 2, &[1]).unwrap();
        wald_rej += usize::from(w.p < 0.05);
        fisher_rej += usize::from(f.p < 0.05);
    }
    (wald_rej, fisher_rej)
}

#[test]
fn wald_test_on_latent_moments_holds_its_level_short() {
    // Simulation check of the delta-method Wald test (Rao 1973; Bollen 1989): with 100 cases the
    // band is wide (binomial sd about 0.022 at 0.05); the long run below is the real check.
    let cases = 100;
    let (w, f) = null_rejections(cases, NULL_SEED);
    let (w_rate, f_rate) = (w as f64 / cases as f64, f as f64 / cases as f64);
    println!("null L1 _||_ L3 | L2, {cases} cases: Wald rejects {w_rate:.3}, Fisher z at n rejects {f_rate:.3}");
    assert!(w_rate <= 0.15, "Wald rejection rate {w_rate}");
}

// Long version: cargo test --release -- --ignored --nocapture wald_test_on_latent_moments_holds_its_level_long
#[test]
#[ignore]
fn wald_test_on_latent_moments_holds_its_level_long() {
    // Target: rejection rate in [0.03, 0.07] over 500 cases (about two binomial sds around 0.05).
    let cases = 500;
    let (w, f) = null_rejections(cases, NULL_SEED);
    let (w_rate, f_rate) = (w as f64 / cases as f64, f as f64 / cases as f64);
    println!("null L1 _||_ L3 | L2, {cases} cases: Wald rejects {w_rate:.3}, Fisher z at n rejects {f_rate:.3}");
    assert!((0.03..=0.07).contains(&w_rate), "Wald rejection rate {w_rate}");
}
