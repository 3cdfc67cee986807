//! Simulation checks of the FCI search on latent constructs measured by items: a hidden common
//! cause planted between two constructs is reported as possibly one (issue 19's acceptance:
//! in >= 80% of 100 replicates at n = 2,000), and without a hidden cause FCI claims one (a
//! bidirected edge) no more often than the tests' error rate allows. Data drawn by `simulate`
//! from models declared here with fixed seeds; the CFA, the latent moments and the Wald tests
//! are those the `structure` step uses. The 100-replicate runs are `#[ignore]`d; 10-replicate
//! versions run always.

use nalgebra::DMatrix;

use construe_stats::moments::{Deletion, pearson};
use construe_stats::search::{EdgeKind, FciOptions, FciResult, Knowledge, WaldPartial, fci};
use construe_stats::sem::{FitOptions, Identification, SemModel};
use construe_stats::simulate::LatentVariance::{Own, Total};
use construe_stats::simulate::{Item, Model};

/// Four items per construct, loadings 0.8, 0.75, 0.7, 0.65 (unit item variances).
fn with_items(mut m: Model, constructs: &[&str]) -> Model {
    for c in constructs {
        for (k, l) in [0.8f64, 0.75, 0.7, 0.65].into_iter().enumerate() {
            m = m.item(Item::new(&format!("{c}{}", k + 1), c, l, 1.0 - l * l));
        }
    }
    m
}

/// The planted case: hidden H (no items) causes A and B (0.5 each), C causes A and D causes
/// B (0.5 each); no edge between A and B. Measured constructs in order C, A, B, D. The true
/// PAG is C o-> A <-> B <-o D (Spirtes, Glymour & Scheines 2000, ch. 6).
fn planted() -> Model {
    let m = Model::default()
        .construct("c", Own(1.0))
        .construct("a", Total(1.0))
        .construct("b", Total(1.0))
        .construct("d", Own(1.0))
        .construct("h", Own(1.0))
        .path("c", "a", 0.5)
        .path("h", "a", 0.5)
        .path("h", "b", 0.5)
        .path("d", "b", 0.5);
    with_items(m, &["c", "a", "b", "d"])
}

/// The null case: no hidden cause. The Y-structure C -> A <- E, A -> B (0.5 each; Mani,
/// Cooper & Spirtes 2006), measured constructs C, A, B, E: true PAG C o-> A <-o E, A -> B,
/// with no bidirected edge.
fn null() -> Model {
    let m = Model::default()
        .construct("c", Own(1.0))
        .construct("a", Total(1.0))
        .construct("b", Total(1.0))
        .construct("e", Own(1.0))
        .path("c", "a", 0.5)
        .path("e", "a", 0.5)
        .path("a", "b", 0.5);
    with_items(m, &["c", "a", "b", "e"])
}

const N: usize = 2_000;

/// One replicate: draw, fit the four-construct CFA by ML, run FCI on the Wald tests of the
/// latent covariance (alpha 0.05, the step's default).
fn replicate(model: &Model, seed: u64) -> FciResult {
    let table = model.draw(N, seed).unwrap();
    let s: DMatrix<f64> = pearson(&table.values, Deletion::Listwise).unwrap().covariance;
    let groups: Vec<Vec<usize>> = (0..4).map(|k| (4 * k..4 * k + 4).collect()).collect();
    let cfa = SemModel::cfa(&groups, s.nrows(), Identification::UnitLatentVariance).unwrap();
    let fit = cfa.fit(&s, N, &FitOptions::default()).unwrap();
    assert!(fit.converged, "seed {seed}: CFA did not converge");
    let lm = fit.latent_moments();
    let test = WaldPartial::new(lm.covariance, lm.covariance_acov).unwrap();
    fci(&test, &Knowledge::new(4), &FciOptions { alpha: 0.05, ..FciOptions::default() }).unwrap()
}

fn kind_between(r: &FciResult, x: usize, y: usize) -> Option<EdgeKind> {
    r.edges.iter().find(|e| (e.from, e.to) == (x, y) || (e.from, e.to) == (y, x)).map(|e| EdgeKind::from(e.kind))
}

/// Planted case over `replicates` seeds: how often A - B (indices 1, 2) is reported as
/// possibly a hidden common cause (`<->`, `o->` either way or `o-o`), and how often as `<->`.
fn planted_rates(replicates: u64, base: u64) -> (usize, usize) {
    let m = planted();
    let (mut possible, mut bidirected) = (0, 0);
    for r in 0..replicates {
        let res = replicate(&m, base + r);
        let k = kind_between(&res, 1, 2);
        if k.is_some_and(|k| matches!(k, EdgeKind::Bidirected | EdgeKind::PartiallyDirected | EdgeKind::Nondirected)) {
            possible += 1;
        } else {
            println!("seed {}: a-b {k:?}; {}", base + r, res.pag.describe());
        }
        bidirected += usize::from(k == Some(EdgeKind::Bidirected));
    }
    (possible, bidirected)
}

/// Null case over `replicates` seeds: how many results have any bidirected edge (a claimed
/// hidden cause), and how many report A -> B (indices 1, 2) as directed.
fn null_rates(replicates: u64, base: u64) -> (usize, usize) {
    let m = null();
    let (mut claims, mut directed) = (0, 0);
    for r in 0..replicates {
        let res = replicate(&m, base + r);
        let claim = res.edges.iter().any(|e| EdgeKind::from(e.kind) == EdgeKind::Bidirected);
        if claim {
            println!("seed {}: {}", base + r, res.pag.describe());
        }
        claims += usize::from(claim);
        directed += usize::from(res.pag.is_directed(1, 2));
    }
    (claims, directed)
}

const SEED: u64 = 19_000;

#[test]
fn planted_hidden_cause_is_reported_short() {
    let (possible, bidirected) = planted_rates(10, SEED);
    println!("planted, 10 replicates: possible {possible}, bidirected {bidirected}");
    assert!(possible >= 7, "possible hidden cause in only {possible} of 10");
}

#[test]
fn no_hidden_cause_is_rarely_claimed_short() {
    let (claims, directed) = null_rates(10, SEED + 500);
    println!("null, 10 replicates: claims {claims}, a -> b {directed}");
    assert!(claims <= 3, "a hidden cause claimed in {claims} of 10");
}

// Long versions: cargo test --release -p construe-stats --test hidden_cause -- --ignored --nocapture
#[test]
#[ignore]
fn planted_hidden_cause_is_reported_long() {
    // Acceptance (issue 19): possibly a hidden common cause in >= 80% of 100 replicates.
    let (possible, bidirected) = planted_rates(100, SEED);
    println!("planted, 100 replicates: possible {possible}/100, bidirected {bidirected}/100");
    assert!(possible >= 80, "possible hidden cause in only {possible} of 100");
}

#[test]
#[ignore]
fn no_hidden_cause_is_rarely_claimed_long() {
    // Bound: a bidirected edge needs two wrong collider verdicts or a wrong removal; with
    // alpha = 0.05 per test we accept up to 15% of replicates (our bound; the measured rate is
    // in the report and DEVELOPERS.md).
    let (claims, directed) = null_rates(100, SEED + 500);
    println!("null, 100 replicates: claims {claims}/100, a -> b {directed}/100");
    assert!(claims <= 15, "a hidden cause claimed in {claims} of 100");
}
