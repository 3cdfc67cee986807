//! Issue 16's first acceptance bullet: purification with the size criterion (tetrad tolerance,
//! close-fit tests, misfit stopping rule) on approximately pure simulated data as real
//! instruments are. Three constructs of six items, every item with a small cross-loading of
//! 0.05-0.10 and two error correlations of 0.10 (a ring: each item's error correlates with the
//! next item's, the last with the first), plus one material cross-loading of 0.40 (item a6 on
//! construct b). Also the size check on exactly pure data, and the stats-level bootstrap's
//! keep shares. Short versions run always; the 100-replicate versions are `#[ignore]`d (command
//! in the README's list of long calibrations). Targets: the acceptance (no published
//! source; REFERENCES.md, simulation checks).

use construe_stats::acov::Contributions;
use construe_stats::bootstrap::{replicate_rng, stratified_rows};
use construe_stats::mixed::{Column, mixed_correlation};
use construe_stats::polychoric::OrdinalFit;
use construe_stats::purify::{DEFAULT_TOLERANCE, PurifyRule, purify_with};
use construe_stats::simulate::LatentVariance::{Own, Total};
use construe_stats::simulate::{CrossLoading, Item, Model};
use construe_stats::tetrad::TetradTester;
use std::sync::Arc;

/// Main loadings of the three constructs (unit item variances).
const LOADINGS: [[f64; 6]; 3] =
    [[0.8, 0.7, 0.75, 0.65, 0.7, 0.6], [0.7, 0.8, 0.6, 0.75, 0.7, 0.65], [0.7, 0.75, 0.8, 0.65, 0.7, 0.6]];
/// The material item: a6 (index 5), loading 0.6 on a and 0.4 on b.
const MATERIAL: usize = 5;
const NAMES: [&str; 3] = ["a", "b", "c"];
/// Five-point items: cuts on the unit-variance latent response (about 7, 24, 38, 24, 7 %).
const FIVE_POINT: [f64; 4] = [-1.5, -0.7, 0.7, 1.5];

/// How the data are drawn.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Kind {
    Continuous,
    FivePoint,
}

/// The design. `approximate`: the small impurities on every item; `material`: the 0.40
/// cross-loading. Factor correlations 0.4 (a, b), 0.3 (a, c), 0.5 (b, c) through a common
/// cause g with paths sqrt(0.24), sqrt(2/3), sqrt(0.375).
fn model(approximate: bool, material: bool, kind: Kind) -> Model {
    let phi = [[1.0, 0.4, 0.3], [0.4, 1.0, 0.5], [0.3, 0.5, 1.0]];
    let mut m = Model::default().construct("g", Own(1.0));
    for (name, path) in NAMES.iter().zip([0.24f64.sqrt(), (2.0f64 / 3.0).sqrt(), 0.375f64.sqrt()]) {
        m = m.construct(name, Total(1.0)).path("g", name, path);
    }
    let mut theta = Vec::new();
    for (g, loadings) in LOADINGS.iter().enumerate() {
        for (k, &loading) in loadings.iter().enumerate() {
            let (mut main, mut cross) = (loading, if approximate { 0.05 + 0.01 * k as f64 } else { 0.0 });
            if material && 6 * g + k == MATERIAL {
                (main, cross) = (0.6, 0.4);
            }
            let h = (g + 1) % 3;
            let common = main * main + cross * cross + 2.0 * main * cross * phi[g][h];
            let error = 1.0 - common;
            theta.push(error);
            let mut item = Item::new(&format!("{}{}", NAMES[g], k + 1), NAMES[g], main, error);
            if cross > 0.0 {
                item.cross_loadings = vec![CrossLoading { construct: NAMES[h].into(), loading: cross }];
            }
            if kind == Kind::FivePoint {
                item.thresholds = Some(FIVE_POINT.to_vec());
            }
            m = m.item(item);
        }
    }
    if approximate {
        for i in 0..18 {
            let j = (i + 1) % 18;
            let name = |x: usize| format!("{}{}", NAMES[x / 6], x % 6 + 1);
            m = m.correlated_error(&name(i), &name(j), 0.10 * (theta[i] * theta[j]).sqrt());
        }
    }
    m
}

fn groups() -> Vec<Vec<usize>> {
    (0..3).map(|g| (6 * g..6 * g + 6).collect()).collect()
}

/// The drawn table's 18 item columns as the numerics' columns (codes 1..5 -> 0..4).
fn columns(m: &Model, kind: Kind, n: usize, seed: u64) -> Vec<Column<'static>> {
    let table = m.draw(n, seed).expect("the model draws");
    table
        .values
        .into_iter()
        .map(|v| match kind {
            Kind::Continuous => Column::Continuous(v.into_iter().map(|x| x.unwrap_or(f64::NAN)).collect()),
            Kind::FivePoint => Column::Ordinal {
                codes: v.into_iter().map(|x| (x.expect("no missing values") - 1.0) as u8).collect(),
                levels: 5,
            },
        })
        .collect()
}

/// The items the default purification (delta test on the fitted matrix with its
/// distribution-free sampling covariance; `tolerance`) drops from these columns.
fn dropped(columns: &[Column<'_>], rule: &PurifyRule) -> Vec<usize> {
    let fitted = mixed_correlation(columns, OrdinalFit::TwoStep).unwrap();
    let sampling = Arc::new(Contributions::correlations(columns, &fitted).unwrap());
    let tester = TetradTester::with_sampling(&fitted.matrix, sampling).unwrap();
    let result = purify_with(&tester, &groups(), rule, &[]).unwrap();
    result.groups.iter().flat_map(|g| g.dropped.iter().map(|d| d.item)).collect()
}

fn pick(columns: &[Column<'_>], rows: &[usize]) -> Vec<Column<'static>> {
    columns
        .iter()
        .map(|c| match c {
            Column::Continuous(v) => Column::Continuous(rows.iter().map(|&r| v[r]).collect()),
            Column::Ordinal { codes, levels } => {
                Column::Ordinal { codes: rows.iter().map(|&r| codes[r]).collect(), levels: *levels }
            }
        })
        .collect()
}

/// Per-item drop rates over `reps` data sets, and (when `boot` > 0) the mean bootstrap keep
/// share of every item but the material one, `boot` resamples per data set.
fn rates(
    approximate: bool,
    material: bool,
    kind: Kind,
    n: usize,
    reps: usize,
    boot: usize,
    seed: u64,
) -> (Vec<f64>, f64) {
    rates_with(&PurifyRule::sized(0.01, 3, DEFAULT_TOLERANCE), approximate, material, kind, n, reps, boot, seed)
}

#[allow(clippy::too_many_arguments)]
fn rates_with(
    rule: &PurifyRule,
    approximate: bool,
    material: bool,
    kind: Kind,
    n: usize,
    reps: usize,
    boot: usize,
    seed: u64,
) -> (Vec<f64>, f64) {
    let m = model(approximate, material, kind);
    let mut drops = [0usize; 18];
    let (mut keep_sum, mut keep_count) = (0.0, 0usize);
    for r in 0..reps {
        let cols = columns(&m, kind, n, seed + r as u64);
        for i in dropped(&cols, rule) {
            drops[i] += 1;
        }
        if boot > 0 {
            let strata = vec![0u32; n];
            let mut kept = [0usize; 18];
            for b in 0..boot {
                let rows = stratified_rows(&strata, 1, &mut replicate_rng(seed + r as u64, b));
                let out = dropped(&pick(&cols, &rows), rule);
                for (i, k) in kept.iter_mut().enumerate() {
                    *k += usize::from(!out.contains(&i));
                }
            }
            for (i, k) in kept.iter().enumerate() {
                if i != MATERIAL || !material {
                    keep_sum += *k as f64 / boot as f64;
                    keep_count += 1;
                }
            }
        }
    }
    let rates = drops.iter().map(|&d| d as f64 / reps as f64).collect();
    (rates, if keep_count == 0 { f64::NAN } else { keep_sum / keep_count as f64 })
}

fn show(label: &str, rates: &[f64], keep: f64) {
    let list: Vec<String> = rates.iter().map(|r| format!("{r:.2}")).collect();
    println!("{label}: drop rates [{}], mean bootstrap keep share of the other items {keep:.3}", list.join(" "));
}

/// At most one item other than the material one is dropped in 90 % of data sets or more.
fn others_at_most_one_consistently(rates: &[f64]) -> bool {
    rates.iter().enumerate().filter(|&(i, &r)| i != MATERIAL && r >= 0.9).count() <= 1
}

// Short version: n = 3,000, continuous and five-point items, 4 data sets each; the material
// item is dropped in every one, no other item in all four.
#[test]
fn sized_purification_finds_the_material_item_short() {
    for (kind, seed) in [(Kind::Continuous, 16_100), (Kind::FivePoint, 16_200)] {
        let (rates, _) = rates(true, true, kind, 3000, 4, 0, seed);
        show(&format!("{kind:?} n 3000"), &rates, f64::NAN);
        assert!(rates[MATERIAL] >= 1.0, "{kind:?}: {rates:?}");
        assert!(rates.iter().enumerate().all(|(i, &r)| i == MATERIAL || r < 1.0), "{kind:?}: {rates:?}");
    }
}

// Short power check at n = 300 (where power is low): continuous items, 6 data sets; the
// material item is dropped in at least 4 (the long run measured 98 %).
#[test]
fn sized_purification_finds_the_material_item_at_n_300_short() {
    let (rates, _) = rates(true, true, Kind::Continuous, 300, 6, 0, 16_400);
    assert!(rates[MATERIAL] >= 4.0 / 6.0, "{rates:?}");
}

// Short size check: exactly pure data, five-point items, n = 3,000, 6 data sets: no item is
// dropped (the rate of dropping any item should stay below alpha = 0.01).
#[test]
fn sized_purification_keeps_pure_items_short() {
    let (rates, _) = rates(false, false, Kind::FivePoint, 3000, 6, 0, 16_300);
    assert!(rates.iter().all(|&r| r == 0.0), "{rates:?}");
}

// Long acceptance (issue 16): `cargo test -p construe-stats --test tolerance_acceptance
// -- --ignored --nocapture` (the numerics crate is optimised in the test profile). 100 data sets
// per cell. Measured (default tolerance 0.02, misfit threshold 0.10): n = 3,000 the material
// item dropped in 100 % (continuous and 5-point), no other item in more than 3 %; n = 300 in
// 98 % (continuous) and 63 % (5-point), no other item in more than 3 %; exactly pure data at
// n = 3,000: no item dropped in any of the 100 data sets (both kinds).
#[test]
#[ignore]
fn sized_purification_acceptance_long() {
    let mut failures = Vec::new();
    for (kind, seed) in [(Kind::Continuous, 160_000), (Kind::FivePoint, 170_000)] {
        let (big, _) = rates(true, true, kind, 3000, 100, 0, seed);
        show(&format!("{kind:?} n 3000"), &big, f64::NAN);
        if big[MATERIAL] < 0.9 || !others_at_most_one_consistently(&big) {
            failures.push(format!("{kind:?} n 3000"));
        }
        let (small, _) = rates(true, true, kind, 300, 100, 0, seed + 5000);
        show(&format!("{kind:?} n 300"), &small, f64::NAN);
        if small[MATERIAL] < 0.6 {
            failures.push(format!("{kind:?} n 300"));
        }
        let (pure, _) = rates(false, false, kind, 3000, 100, 0, seed + 9000);
        let any = pure.iter().copied().fold(0.0, f64::max);
        show(&format!("{kind:?} n 3000 exactly pure"), &pure, f64::NAN);
        if any > 0.03 {
            failures.push(format!("{kind:?} exactly pure"));
        }
    }
    assert!(failures.is_empty(), "failed cells: {failures:?}");
}

// Long bootstrap acceptance: `cargo test --release -p construe-stats --test tolerance_acceptance
// bootstrap -- --ignored --nocapture`. Five-point items, n = 3,000, 100 data sets with 10
// bootstrap resamples each: the keep share of the items other than the material one averages at
// least 0.9 (measured 0.988).
#[test]
#[ignore]
fn sized_purification_bootstrap_keep_share_long() {
    let (rates, keep) = rates(true, true, Kind::FivePoint, 3000, 100, 10, 180_000);
    show("FivePoint n 3000 bootstrap", &rates, keep);
    assert!(keep >= 0.9, "mean keep share {keep}");
}
