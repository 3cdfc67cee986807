//! Calibration of the invariance ladder's decisions for continuous items (issue 18), on seeded
//! simulations of two groups (n = 800 each), two constructs with five items each (loadings 0.7,
//! item variances 1):
//! - power and false flags: item 1's loading is 0.8 in the reference group and 0.4 in the other,
//!   item 7's intercept is 0.5 item SDs higher in the other group, latent means differ by 0.3
//!   reference SDs on both constructs. Acceptance: both planted items flagged (with the right
//!   parameter) in >= 90% of replicates, each invariant item flagged in <= 10%, the 95%
//!   intervals of the latent mean differences cover 0.3 in >= 93%;
//! - size: with every parameter invariant (latent means still differ), how often the
//!   metric, scalar and strict difference tests reject at alpha = 0.05 (near 0.05 each) and
//!   how often any item is flagged.
//!
//! Short versions run always (< 10 s); the long ones (200 and 500 replicates) are `#[ignore]`d:
//! `cargo test -p construe-stats --test invariance_calibration -- --ignored --nocapture`.

use nalgebra::{DMatrix, DVector};

use construe_stats::groups_continuous::{ContinuousEngine, ContinuousOptions, GroupMoments};
use construe_stats::invariance::{GroupDesign, LadderOptions, Level, ParamKind, run_ladder};
use construe_stats::testkit;

const P: usize = 10;
const N: usize = 800;
const MEAN_DIFF: f64 = 0.3;
const LOADING_ITEM: usize = 1;
const INTERCEPT_ITEM: usize = 7;

fn construct(i: usize) -> usize {
    i / 5
}

/// Moments of one simulated group: loadings, intercept shifts and latent means as given.
fn group(lambda: &[f64], nu: &[f64], kappa: &[f64], seed: u64) -> GroupMoments {
    let mut l = DMatrix::zeros(P, 2);
    for i in 0..P {
        l[(i, construct(i))] = lambda[i];
    }
    let phi = DMatrix::from_row_slice(2, 2, &[1.0, 0.4, 0.4, 1.0]);
    let theta = DMatrix::from_diagonal(&DVector::from_element(P, 0.51));
    let sigma = testkit::factor_cov(&l, &phi, &theta);
    let mu = DVector::from_column_slice(nu) + &l * DVector::from_column_slice(kappa);
    let x = testkit::draw_normal(&sigma, N, &mut testkit::seeded(seed));
    let columns: Vec<Vec<f64>> = (0..P).map(|j| x.column(j).iter().map(|v| v + mu[j]).collect()).collect();
    GroupMoments::from_columns(&columns).unwrap()
}

struct Outcome {
    /// (item, kind) of every release in the accepted ladder.
    flagged: Vec<(usize, ParamKind)>,
    /// Whether each construct's latent mean interval covers the truth (None: no means).
    covered: Vec<Option<bool>>,
    /// Difference test rejected (before releases) at metric, scalar, strict.
    rejected: [bool; 3],
}

fn replicate(seed: u64, planted: bool) -> Outcome {
    let base_l = [0.7; P];
    let mut other_l = base_l;
    let nu = [0.0; P];
    let mut other_nu = nu;
    let mut ref_l = base_l;
    if planted {
        ref_l[LOADING_ITEM] = 0.8;
        other_l[LOADING_ITEM] = 0.4;
        // Item SD 1 in the reference group (0.7^2 + 0.51).
        other_nu[INTERCEPT_ITEM] = 0.5;
    }
    let g0 = group(&ref_l, &nu, &[0.0, 0.0], seed * 2);
    let g1 = group(&other_l, &other_nu, &[MEAN_DIFF, MEAN_DIFF], seed * 2 + 1);
    let design = GroupDesign {
        items: (0..P).map(|i| format!("x{i}")).collect(),
        constructs: vec!["a".into(), "b".into()],
        item_construct: (0..P).map(construct).collect(),
        groups: vec!["spring".into(), "autumn".into()],
        n: vec![N, N],
        reference: 0,
    };
    let engine = ContinuousEngine::new(design, vec![g0, g1], ContinuousOptions::default()).unwrap();
    let ladder = run_ladder(&engine, &LadderOptions { strict: true, ..LadderOptions::default() }).unwrap();
    let flagged = ladder.noninvariant.iter().map(|t| (t.release.item, t.release.kind)).collect();
    let covered = (0..2)
        .map(|c| {
            ladder.latent_means.iter().find(|m| m.construct == c).map(|m| m.ci.0 <= MEAN_DIFF && MEAN_DIFF <= m.ci.1)
        })
        .collect();
    let mut rejected = [false; 3];
    for (k, level) in [Level::Metric, Level::Scalar, Level::Strict].into_iter().enumerate() {
        if let Some(l) = ladder.levels.iter().find(|l| l.level == level) {
            let d = l.diff_full.as_ref().or(l.diff.as_ref()).unwrap();
            rejected[k] = d.p < 0.05;
        }
    }
    Outcome { flagged, covered, rejected }
}

struct Power {
    loading: usize,
    intercept: usize,
    /// Times each item was flagged when it is invariant (planted items: wrong parameter).
    false_flags: [usize; P],
    covered: usize,
    intervals: usize,
    reps: usize,
}

fn power(reps: usize, seed0: u64) -> Power {
    let mut out = Power { loading: 0, intercept: 0, false_flags: [0; P], covered: 0, intervals: 0, reps };
    for r in 0..reps {
        let o = replicate(seed0 + r as u64, true);
        let has = |item, kind| o.flagged.contains(&(item, kind));
        out.loading += usize::from(has(LOADING_ITEM, ParamKind::Loading));
        out.intercept += usize::from(has(INTERCEPT_ITEM, ParamKind::Intercept));
        for (i, f) in out.false_flags.iter_mut().enumerate() {
            if i != LOADING_ITEM && i != INTERCEPT_ITEM && o.flagged.iter().any(|x| x.0 == i) {
                *f += 1;
            }
        }
        for c in o.covered {
            out.intervals += 1;
            out.covered += usize::from(c == Some(true));
        }
    }
    eprintln!(
        "invariance power over {reps} replicates: loading item flagged {}, intercept item flagged {}, invariant items flagged {:?}, latent mean intervals covering {}/{}",
        out.loading, out.intercept, out.false_flags, out.covered, out.intervals
    );
    out
}

fn size(reps: usize, seed0: u64) -> ([usize; 3], usize) {
    let mut rejected = [0; 3];
    let mut any_flag = 0;
    for r in 0..reps {
        let o = replicate(seed0 + r as u64, false);
        for (count, hit) in rejected.iter_mut().zip(o.rejected) {
            *count += usize::from(hit);
        }
        any_flag += usize::from(!o.flagged.is_empty());
    }
    eprintln!(
        "invariance size over {reps} replicates: metric, scalar, strict difference tests rejecting at 0.05: {rejected:?}; any item flagged: {any_flag}"
    );
    (rejected, any_flag)
}

/// Short power check: 20 replicates; bands about 2.5 binomial SDs around the acceptance.
#[test]
fn planted_noninvariance_is_found_and_means_covered() {
    let p = power(20, 1_000);
    assert!(p.loading >= 17 && p.intercept >= 17, "planted items flagged {} and {} of 20", p.loading, p.intercept);
    assert!(p.false_flags.iter().all(|&f| f <= 5), "invariant items flagged {:?} of 20", p.false_flags);
    assert!(p.covered >= 34, "latent mean intervals cover {}/40", p.covered);
}

/// Short size check: 30 invariant replicates; each difference test rejects at most 6 times
/// (expected 1.5).
#[test]
fn ladder_tests_hold_their_size_when_invariance_holds() {
    let (rejected, _) = size(30, 5_000);
    assert!(rejected.iter().all(|&r| r <= 6), "rejections {rejected:?} of 30");
}

/// Issue 18's acceptance over 200 replicates (the issue asks for 100).
#[test]
#[ignore]
fn invariance_power_acceptance_long() {
    let p = power(200, 10_000);
    let reps = p.reps as f64;
    assert!(p.loading as f64 >= 0.9 * reps && p.intercept as f64 >= 0.9 * reps);
    assert!(p.false_flags.iter().all(|&f| f as f64 <= 0.1 * reps));
    assert!(p.covered as f64 >= 0.93 * p.intervals as f64);
}

/// Size of the ladder's difference tests under invariance over 500 replicates: each in
/// [0.03, 0.07].
#[test]
#[ignore]
fn invariance_size_long() {
    let (rejected, _) = size(500, 50_000);
    assert!(rejected.iter().all(|&r| (15..=35).contains(&r)), "rejections {rejected:?} of 500");
}
