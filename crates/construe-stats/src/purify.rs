//! Purification of declared indicator groups by vanishing tetrad constraints (Spirtes, Glymour &
//! Scheines 2000, ch. 12; Silva, Scheines, Glymour & Spirtes 2006). Central function `purify`,
//! result `Purification`: per group the items kept, the items dropped with the tetrads that
//! condemned each (raw and Benjamini–Hochberg adjusted p), and a `min_items_reached` flag.
//! Impurity is judged by its size (issue 16): each tetrad is tested against a tolerance (a
//! close-fit null, `tetrad::close_fit_p`), and an item is dropped only when a residual
//! correlation under the pure model is also material (`item_misfit`, `MATERIAL_RESIDUAL`).
//! Never hides a group it could not purify: a group that would fall below `min_items` is
//! flagged and its standing violations are returned in `unresolved`; the largest tetrads left
//! among the kept items are returned per group (`remaining`).

use nalgebra::DMatrix;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::StatsError;
use super::fdr::benjamini_hochberg;
use super::tetrad::{PAIRS, TERMS, Tetrad, TetradTest, TetradTestKind, TetradTester, close_fit_p};

/// Settings of one purification run.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PurifyOptions {
    pub test: TetradTestKind,
    /// FDR level: a tetrad is a violation when its BH-adjusted p-value is below `alpha`.
    pub alpha: f64,
    /// A group never shrinks below this many items; it is flagged instead.
    pub min_items: usize,
    /// Size of a negligible tetrad (units of the matrix's tetrads: correlation products for a
    /// correlation matrix); 0 is the exact test of vanishing tetrads. See `PurifyRule`.
    pub tolerance: f64,
}

impl Default for PurifyOptions {
    fn default() -> Self {
        Self { test: TetradTestKind::Wishart, alpha: 0.01, min_items: 3, tolerance: DEFAULT_TOLERANCE }
    }
}

/// The default tetrad tolerance of purification, in correlation units (a tetrad of
/// correlations is a difference of two products of correlations). Purification has a second
/// size guard, the misfit threshold (`MATERIAL_RESIDUAL`), which decides whether an implicated
/// item is worth dropping; the tolerance only keeps negligible tetrads from counting as
/// evidence, so it can stay small and keep the power to find a material impurity at n = 300.
/// Chosen by simulation (issue 16; crates/construe-stats/tests/tolerance_acceptance.rs): with
/// small cross-loadings of 0.05-0.10 and error correlations of 0.10 on every item (population
/// tetrads up to about 0.06) and one cross-loading of 0.40 (tetrads up to 0.16), 0.02 finds
/// the material item in 77-93 % of samples at n = 300, 0.05 in 27-60 %, and neither drops a
/// small-impurity item consistently at n = 3,000 or 30,000.
pub const DEFAULT_TOLERANCE: f64 = 0.02;

/// The decision rule of `purify_with`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PurifyRule {
    /// FDR level: a tetrad is a violation when its BH-adjusted close-fit p-value is below it.
    pub alpha: f64,
    /// A group never shrinks below this many items; it is flagged instead.
    pub min_items: usize,
    /// Tetrad tolerance: a tetrad counts as a violation only when it is significantly larger
    /// than this in absolute value (close-fit null |tau| <= tolerance). 0 restores
    /// the exact test (every significant tetrad counts, every implicated item can go).
    pub tolerance: f64,
    /// Misfit threshold (correlation units): an implicated item is dropped only when its
    /// largest absolute residual correlation (`item_misfit`) exceeds this; 0 drops every
    /// implicated item. `PurifyRule::sized` sets it to `MATERIAL_RESIDUAL`.
    pub misfit: f64,
}

impl PurifyRule {
    /// The rule with the size criterion: `misfit` = `MATERIAL_RESIDUAL` when `tolerance` > 0,
    /// and the exact rule (no misfit threshold) when it is 0.
    pub fn sized(alpha: f64, min_items: usize, tolerance: f64) -> Self {
        Self { alpha, min_items, tolerance, misfit: if tolerance > 0.0 { MATERIAL_RESIDUAL } else { 0.0 } }
    }
    /// The exact test of vanishing tetrads (tolerance 0), as before issue 16.
    pub fn exact(alpha: f64, min_items: usize) -> Self {
        Self { alpha, min_items, tolerance: 0.0, misfit: 0.0 }
    }
}

/// One tetrad test that counted against a measurement model.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TetradEvidence {
    /// Item indices in the order the tetrad labelling (t1, t2, t3) refers to.
    pub items: [usize; 4],
    /// 0, 1, 2 for t1, t2, t3 (see `tetrad`).
    pub which: usize,
    pub diff: f64,
    /// Standard error of `diff`.
    pub se: f64,
    /// z statistic of the exact null, diff / se.
    pub stat: f64,
    /// Close-fit p-value of H0 |tau| <= tolerance (`tetrad::close_fit_p`); with tolerance 0
    /// the usual two-sided p-value.
    pub p: f64,
    /// Benjamini–Hochberg adjusted p-value within the round's family.
    pub p_adjusted: f64,
}

/// An item removed from its group, and why.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DroppedItem {
    pub item: usize,
    /// Round (0-based) in which it was dropped; round r tests the items kept after r drops.
    pub round: usize,
    /// The violations of that round that involve the item, most significant first.
    pub tetrads: Vec<TetradEvidence>,
    /// Its largest absolute residual correlation under the pure model of that round's items
    /// (`item_misfit`).
    pub misfit: f64,
}

/// Outcome for one declared group.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GroupPurification {
    /// Items kept, ascending.
    pub kept: Vec<usize>,
    /// Items dropped, in the order they were dropped.
    pub dropped: Vec<DroppedItem>,
    /// True when the most implicated item was in this group but dropping it would have left
    /// fewer than `min_items` items, so the group was frozen with violations standing.
    pub min_items_reached: bool,
    /// Largest absolute residual correlation of each kept item (in `kept` order) under the
    /// pure model of all kept items (`item_misfit`); NaN when it cannot be estimated.
    pub misfit: Vec<f64>,
    /// Items implicated by standing violations but kept because their misfit is within the
    /// tolerance, ascending.
    pub spared: Vec<usize>,
    /// The largest tetrads (by |diff|) of the last round that involve a kept item of this
    /// group, at most `REMAINING`, largest first: the impurity the kept set still carries.
    pub remaining: Vec<TetradEvidence>,
}

/// How many remaining tetrads `GroupPurification::remaining` lists.
pub const REMAINING: usize = 3;

/// Result of `purify`, groups in input order.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Purification {
    pub groups: Vec<GroupPurification>,
    /// Number of tetrad tests (the BH family) in each round.
    pub family_sizes: Vec<usize>,
    /// Violations still standing at the end: those a frozen group's items are in, or whose
    /// implicated items were spared because their misfit is within the tolerance.
    pub unresolved: Vec<TetradEvidence>,
}

/// The tetrads that a pure multi-factor measurement model implies to vanish, for the given
/// item groups (each group the indicators of one latent), within each group and across each
/// pair of groups.
///
/// Derivation (Spirtes, Glymour & Scheines 2000, ch. 12; Silva et al. 2006): in a pure model
/// (each item loads on one latent f(a), independent errors) sigma_ab = lambda_a lambda_b
/// phi_{f(a) f(b)} for a != b. The tetrad that is the determinant of the cross block between
/// the item pairs {a, b} and {c, d} (see `tetrad::PARTITIONS`) then equals
/// lambda_a lambda_b lambda_c lambda_d (phi_{f(a)f(c)} phi_{f(b)f(d)} - phi_{f(a)f(d)} phi_{f(b)f(c)}),
/// which vanishes for every latent covariance matrix Phi exactly when f(a) = f(b) or
/// f(c) = f(d), and is generically non-zero otherwise. Hence, listed with the items in the
/// order given here:
/// - four items of one group `[a, b, c, d]` (ascending): all three tetrads;
/// - three items of group G (ascending) then one item of group H, `[a, b, c, x]`: all three;
/// - two items of G then two of H, `[a1, a2, b1, b2]`: only t3 (the split {a1,a2}|{b1,b2}),
///   t3 = s_a1b1 s_a2b2 - s_a1b2 s_a2b1.
///
/// Quads drawing on three or four groups imply at most one tetrad each; they are not listed,
/// which keeps the family quadratic in the number of groups.
/// Order: groups in input order (within-group quads, then pairs (g, h) with g < h: triples of
/// g with items of h, triples of h with items of g, then pairs), each in lexicographic order.
pub fn implied_tetrads(groups: &[Vec<usize>]) -> Vec<Tetrad> {
    let sorted: Vec<Vec<usize>> = groups
        .iter()
        .map(|g| {
            let mut g = g.clone();
            g.sort_unstable();
            g
        })
        .collect();
    let mut out = Vec::new();
    let all_three = |out: &mut Vec<Tetrad>, items: [usize; 4]| {
        out.extend((0..3).map(|which| Tetrad { items, which }));
    };
    for g in &sorted {
        for_each_combination(g, 4, |c| all_three(&mut out, [c[0], c[1], c[2], c[3]]));
    }
    for (gi, g) in sorted.iter().enumerate() {
        for h in &sorted[gi + 1..] {
            for (three, one) in [(g, h), (h, g)] {
                for_each_combination(three, 3, |c| {
                    for &x in one {
                        all_three(&mut out, [c[0], c[1], c[2], x]);
                    }
                });
            }
            for_each_combination(g, 2, |a| {
                for_each_combination(h, 2, |b| {
                    out.push(Tetrad { items: [a[0], a[1], b[0], b[1]], which: 2 });
                });
            });
        }
    }
    out
}

/// Purifies declared item groups by vanishing tetrads, building the tester from the inputs:
/// Wishart kind from `cov` (covariance or correlation matrix) and `n_obs`; Delta kind from
/// `data` (complete rows, required), see `TetradTester::new`. Then as `purify_with`, with no
/// declared pairs.
pub fn purify(
    cov: &DMatrix<f64>,
    n_obs: usize,
    data: Option<&DMatrix<f64>>,
    groups: &[Vec<usize>],
    options: &PurifyOptions,
) -> Result<Purification, StatsError> {
    let tester = TetradTester::new(options.test, cov, n_obs, data)?;
    let rule = PurifyRule::sized(options.alpha, options.min_items, options.tolerance);
    purify_with(&tester, groups, &rule, &[])
}

/// Iterative purification (in the manner of Spirtes, Glymour & Scheines 2000, ch. 12, and the
/// purification step of Silva et al. 2006) with false-discovery-rate control and a size
/// criterion (issue 16).
///
/// Each round tests every tetrad of `implied_tetrads` over the items still kept, except those
/// with a `declared_pairs` pair among the four covariances of their two products (a pair whose
/// covariance is known to carry extra shared variance: a declared correlated error, say, would
/// make those tetrads non-zero without either item being impure). Each test is the close-fit
/// test of H0 |tau| <= `rule.tolerance` (`tetrad::close_fit_p`; tolerance 0 is the exact
/// test); that set of tests is the round's family, and Benjamini–Hochberg (1995) adjusted
/// p-values are computed over it. A violation is a test with adjusted p < alpha; it implicates
/// its four items. Items are ranked by the violations they are in (ties: larger sum of the
/// excess z, (|t| - tol) / se, then lower index). The first in that order whose group has more
/// than `min_items` items and whose misfit (`item_misfit`: largest absolute residual
/// correlation under the pure model of the kept items, declared pairs left out) exceeds
/// the rule's misfit threshold (`MATERIAL_RESIDUAL` by default) is dropped and the next round begins; items with a smaller misfit are spared
/// (their violations are significant but small in the model's terms: the stopping rule on the
/// measurement model's misfit attributable to the item). With tolerance 0 no item is spared.
/// When the candidate's group has only `min_items` items left, the group is frozen and flagged
/// instead; from then on the violations that involve a frozen group's items are set aside (they
/// cannot be resolved and would otherwise condemn the innocent partners of the frozen group's
/// bad item). The run stops when no violation remains or no candidate can be dropped; standing
/// violations are returned as `unresolved`. Deterministic: no randomness, ties broken by index.
pub fn purify_with(
    tester: &TetradTester,
    groups: &[Vec<usize>],
    rule: &PurifyRule,
    declared_pairs: &[(usize, usize)],
) -> Result<Purification, StatsError> {
    let PurifyRule { alpha, min_items, tolerance, misfit: misfit_threshold } = *rule;
    if !(alpha > 0.0 && alpha < 1.0) {
        return Err(StatsError::InvalidInput(format!("alpha {alpha} is not in (0, 1)")));
    }
    if !(tolerance.is_finite() && tolerance >= 0.0) {
        return Err(StatsError::InvalidInput(format!("tolerance {tolerance} is not a finite non-negative number")));
    }
    let p = tester.n_items();
    let mut group_of: Vec<Option<usize>> = vec![None; p];
    for (g, items) in groups.iter().enumerate() {
        for &i in items {
            if i >= p {
                return Err(StatsError::InvalidInput(format!("item {i} is out of range for {p} items")));
            }
            if let Some(other) = group_of[i] {
                return Err(StatsError::InvalidInput(format!("item {i} is declared in groups {other} and {g}")));
            }
            group_of[i] = Some(g);
        }
    }
    let mut declared = vec![false; p * p];
    for &(a, b) in declared_pairs {
        if a >= p || b >= p || a == b {
            return Err(StatsError::InvalidInput(format!("declared pair ({a}, {b}) is not two distinct items of {p}")));
        }
        declared[a * p + b] = true;
        declared[b * p + a] = true;
    }
    let exempt = |t: &Tetrad| {
        TERMS[t.which].iter().any(|&u| {
            let (x, y) = PAIRS[u];
            declared[t.items[x] * p + t.items[y]]
        })
    };
    let corr = correlation(tester.covariance());
    let mut kept: Vec<Vec<usize>> = groups
        .iter()
        .map(|g| {
            let mut g = g.clone();
            g.sort_unstable();
            g
        })
        .collect();
    let mut frozen = vec![false; groups.len()];
    let mut dropped: Vec<Vec<DroppedItem>> = vec![Vec::new(); groups.len()];
    let mut family_sizes = Vec::new();
    let mut spared: Vec<usize> = Vec::new();
    let (unresolved, last) = loop {
        let round = family_sizes.len();
        let tetrads: Vec<Tetrad> = implied_tetrads(&kept).into_iter().filter(|t| !exempt(t)).collect();
        let tests = run_tests(tester, &tetrads)?;
        family_sizes.push(tests.len());
        let raw: Vec<f64> = tests.iter().map(|t| close_fit_p(t.diff, t.se, tolerance)).collect();
        let adjusted = benjamini_hochberg(&raw)?;
        let all: Vec<TetradEvidence> =
            tests.iter().zip(&raw).zip(&adjusted).map(|((t, &p), &q)| evidence(t, p, q)).collect();
        let violations: Vec<TetradEvidence> = all.iter().filter(|e| e.p_adjusted < alpha).copied().collect();
        if violations.is_empty() {
            break (Vec::new(), all);
        }
        let misfit = item_misfit(&corr, &kept, declared_pairs);
        let material = |i: usize| misfit_threshold == 0.0 || misfit[i].is_nan() || misfit[i] > misfit_threshold;
        let choice = choose_item(&violations, &group_of, &kept, &mut frozen, min_items, tolerance, &material);
        match choice {
            Choice::None { spared: s } => {
                spared = s;
                break (violations, all);
            }
            Choice::Drop(item) => {
                let g = group_of[item].unwrap_or(0);
                let mut tetrads: Vec<TetradEvidence> = violations
                    .iter()
                    .filter(|v| v.items.contains(&item) && !touches_frozen(v, &group_of, &frozen))
                    .copied()
                    .collect();
                tetrads.sort_by(|a, b| a.p.total_cmp(&b.p).then(a.items.cmp(&b.items)));
                dropped[g].push(DroppedItem { item, round, tetrads, misfit: misfit[item] });
                kept[g].retain(|&i| i != item);
            }
        }
    };
    let misfit = item_misfit(&corr, &kept, declared_pairs);
    let groups = kept
        .into_iter()
        .zip(dropped)
        .zip(frozen)
        .map(|((kept, dropped), min_items_reached)| {
            let mut remaining: Vec<TetradEvidence> =
                last.iter().filter(|e| e.items.iter().any(|i| kept.contains(i))).copied().collect();
            remaining.sort_by(|a, b| b.diff.abs().total_cmp(&a.diff.abs()).then(a.items.cmp(&b.items)));
            remaining.truncate(REMAINING);
            let mut spared_here: Vec<usize> = spared.iter().copied().filter(|i| kept.contains(i)).collect();
            spared_here.sort_unstable();
            GroupPurification {
                misfit: kept.iter().map(|&i| misfit[i]).collect(),
                kept,
                dropped,
                min_items_reached,
                spared: spared_here,
                remaining,
            }
        })
        .collect();
    Ok(Purification { groups, family_sizes, unresolved })
}

/// What `choose_item` decided.
enum Choice {
    Drop(usize),
    /// Nothing can be dropped; the implicated items kept for their small misfit.
    None {
        spared: Vec<usize>,
    },
}

/// Picks the item to drop, freezing (and flagging) groups already at `min_items` on the way
/// and passing over items whose misfit is not `material`.
fn choose_item(
    violations: &[TetradEvidence],
    group_of: &[Option<usize>],
    kept: &[Vec<usize>],
    frozen: &mut [bool],
    min_items: usize,
    tolerance: f64,
    material: &dyn Fn(usize) -> bool,
) -> Choice {
    'recount: loop {
        let mut count = vec![0usize; group_of.len()];
        let mut weight = vec![0.0f64; group_of.len()];
        for v in violations.iter().filter(|v| !touches_frozen(v, group_of, frozen)) {
            for &i in &v.items {
                count[i] += 1;
                weight[i] += (v.diff.abs() - tolerance) / v.se;
            }
        }
        let mut order: Vec<usize> = (0..group_of.len()).filter(|&i| count[i] > 0).collect();
        order.sort_by(|&a, &b| count[b].cmp(&count[a]).then(weight[b].total_cmp(&weight[a])).then(a.cmp(&b)));
        let mut spared = Vec::new();
        for best in order {
            let Some(g) = group_of[best] else { continue };
            if kept[g].len() <= min_items {
                frozen[g] = true;
                continue 'recount;
            }
            if material(best) {
                return Choice::Drop(best);
            }
            spared.push(best);
        }
        return Choice::None { spared };
    }
}

fn touches_frozen(v: &TetradEvidence, group_of: &[Option<usize>], frozen: &[bool]) -> bool {
    v.items.iter().any(|&i| group_of[i].is_some_and(|g| frozen[g]))
}

fn evidence(t: &TetradTest, p: f64, p_adjusted: f64) -> TetradEvidence {
    TetradEvidence { items: t.items, which: t.which, diff: t.diff, se: t.se, stat: t.stat, p, p_adjusted }
}

/// The correlation matrix of a covariance matrix (itself for a correlation matrix).
fn correlation(cov: &DMatrix<f64>) -> DMatrix<f64> {
    let d: Vec<f64> = (0..cov.nrows()).map(|i| cov[(i, i)].sqrt()).collect();
    DMatrix::from_fn(cov.nrows(), cov.ncols(), |i, j| cov[(i, j)] / (d[i] * d[j]))
}

/// Residual correlations of the pure multi-factor model of `groups` (each group the indicators
/// of one factor, no cross-loadings, independent errors) fitted to the correlation matrix
/// `corr` by simple closed-form estimates: for a group of three or more, the squared loading
/// of item i is the median over pairs {j, k} of its group of |r_ij r_ik / r_jk| (Spearman's
/// 1904 triad estimate, the median making it robust to one impure partner), capped at 1; for a
/// group of two, |r_ij|^(1/2) for both; signs follow the item's correlation with the group's
/// first item. The factor correlation of groups g and h is the median of r_ij / (l_i l_j)
/// over i in g, j in h. Entry (i, j) is r_ij - l_i l_j phi_gh (phi_gg = 1); NaN when i or j is
/// in no group or in a one-item group (whose loading is not identified), and on the diagonal.
/// Units: correlation.
pub fn residual_correlations(corr: &DMatrix<f64>, groups: &[Vec<usize>]) -> DMatrix<f64> {
    let p = corr.nrows();
    let mut loading = vec![f64::NAN; p];
    let mut group_of = vec![usize::MAX; p];
    for (g, items) in groups.iter().enumerate() {
        if items.len() < 2 {
            continue;
        }
        let first = items[0];
        for &i in items {
            let others: Vec<usize> = items.iter().copied().filter(|&j| j != i).collect();
            let l2 = if others.len() == 1 {
                corr[(i, others[0])].abs()
            } else {
                let mut ratios = Vec::new();
                for (x, &j) in others.iter().enumerate() {
                    for &k in &others[x + 1..] {
                        if corr[(j, k)].abs() > 1e-6 {
                            ratios.push((corr[(i, j)] * corr[(i, k)] / corr[(j, k)]).abs());
                        }
                    }
                }
                median(&mut ratios)
            };
            let sign = if i == first || corr[(i, first)] >= 0.0 { 1.0 } else { -1.0 };
            loading[i] = sign * l2.clamp(1e-4, 1.0).sqrt();
            group_of[i] = g;
        }
    }
    let k = groups.len();
    let mut phi = DMatrix::from_element(k, k, f64::NAN);
    for g in 0..k {
        phi[(g, g)] = 1.0;
        for h in g + 1..k {
            let mut ratios: Vec<f64> = groups[g]
                .iter()
                .flat_map(|&i| groups[h].iter().map(move |&j| (i, j)))
                .filter(|&(i, j)| loading[i].is_finite() && loading[j].is_finite())
                .map(|(i, j)| corr[(i, j)] / (loading[i] * loading[j]))
                .collect();
            let v = median(&mut ratios);
            phi[(g, h)] = v;
            phi[(h, g)] = v;
        }
    }
    DMatrix::from_fn(p, p, |i, j| {
        if i == j || !loading[i].is_finite() || !loading[j].is_finite() {
            f64::NAN
        } else {
            corr[(i, j)] - loading[i] * loading[j] * phi[(group_of[i], group_of[j])]
        }
    })
}

/// The misfit attributable to each item of `groups`: the largest absolute residual correlation
/// (`residual_correlations`) of the item with any other item of the groups, pairs in
/// `declared_pairs` left out (their extra covariance is known). NaN for items with no residual
/// (not in a group, or in a one-item group). Units: correlation. Purification compares it with
/// the rule's misfit threshold (`MATERIAL_RESIDUAL`).
pub fn item_misfit(corr: &DMatrix<f64>, groups: &[Vec<usize>], declared_pairs: &[(usize, usize)]) -> Vec<f64> {
    let res = residual_correlations(corr, groups);
    let p = corr.nrows();
    (0..p)
        .map(|i| {
            let mut worst = f64::NAN;
            for j in 0..p {
                let e = res[(i, j)];
                if e.is_finite() && !declared_pairs.iter().any(|&(a, b)| (a, b) == (i, j) || (a, b) == (j, i)) {
                    worst = if worst.is_nan() { e.abs() } else { worst.max(e.abs()) };
                }
            }
            worst
        })
        .collect()
}

/// With the size criterion an implicated item is dropped only when its misfit (`item_misfit`,
/// its largest absolute residual correlation under the pure model) exceeds this: the size at
/// which residual correlations are commonly read as misfit (common practice, e.g. Kline's rule
/// of thumb of 0.10; from memory). At large n it is what keeps items with small, real
/// impurities (significant tetrads of negligible size) in their construct.
pub const MATERIAL_RESIDUAL: f64 = 0.10;

/// Residual correlation above which two items of one construct are read as sharing content
/// beyond the construct (common practice: residual correlations above 0.10 are commonly read
/// as misfit; Kline's rule of thumb, from memory).
pub const CONTENT_LINK: f64 = 0.10;

/// Groups of a construct's `items` that share content beyond the construct: the connected
/// components, of two items or more, of the graph linking two items whose residual correlation
/// under the construct's one-factor model (`residual_correlations` with `items` as the one
/// group) exceeds `CONTENT_LINK`. Items ascending in each group; groups by first item. Used
/// to warn when purification removes a whole such group (facets the user did not declare).
pub fn content_groups(cov: &DMatrix<f64>, items: &[usize]) -> Vec<Vec<usize>> {
    let mut sorted = items.to_vec();
    sorted.sort_unstable();
    if sorted.len() < 4 {
        return Vec::new();
    }
    let res = residual_correlations(&correlation(cov), std::slice::from_ref(&sorted));
    let m = sorted.len();
    let mut component: Vec<usize> = (0..m).collect();
    fn root(c: &mut [usize], mut x: usize) -> usize {
        while c[x] != x {
            c[x] = c[c[x]];
            x = c[x];
        }
        x
    }
    for a in 0..m {
        for b in a + 1..m {
            if res[(sorted[a], sorted[b])] > CONTENT_LINK {
                let (ra, rb) = (root(&mut component, a), root(&mut component, b));
                component[ra.max(rb)] = ra.min(rb);
            }
        }
    }
    let mut groups: Vec<Vec<usize>> = Vec::new();
    for a in 0..m {
        let r = root(&mut component, a);
        let members: Vec<usize> = (0..m).filter(|&x| root(&mut component.clone(), x) == r).map(|x| sorted[x]).collect();
        if members.len() >= 2 && members[0] == sorted[a] {
            groups.push(members);
        }
    }
    groups
}

fn median(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(f64::total_cmp);
    let m = v.len() / 2;
    if v.len() % 2 == 1 { v[m] } else { 0.5 * (v[m - 1] + v[m]) }
}

/// Runs the tests in parallel, in the order of `tetrads`; consecutive tetrads of one quad
/// share one `test_quad` call.
fn run_tests(tester: &TetradTester, tetrads: &[Tetrad]) -> Result<Vec<TetradTest>, StatsError> {
    let mut chunks: Vec<&[Tetrad]> = Vec::new();
    let mut start = 0;
    for k in 1..=tetrads.len() {
        if k == tetrads.len() || tetrads[k].items != tetrads[start].items {
            chunks.push(&tetrads[start..k]);
            start = k;
        }
    }
    let per_chunk: Result<Vec<Vec<TetradTest>>, StatsError> = chunks
        .par_iter()
        .map(|chunk| {
            let all = tester.test_quad(chunk[0].items)?;
            Ok(chunk.iter().map(|t| all[t.which]).collect())
        })
        .collect();
    Ok(per_chunk?.into_iter().flatten().collect())
}

/// Calls `f` with every k-subset of `items` (in the given order), lexicographically.
fn for_each_combination(items: &[usize], k: usize, mut f: impl FnMut(&[usize])) {
    let n = items.len();
    if k == 0 || k > n {
        return;
    }
    let mut idx: Vec<usize> = (0..k).collect();
    let mut buf = vec![0usize; k];
    loop {
        for (b, &i) in buf.iter_mut().zip(&idx) {
            *b = items[i];
        }
        f(&buf);
        let Some(pos) = (0..k).rev().find(|&x| idx[x] != x + n - k) else {
            return;
        };
        idx[pos] += 1;
        for x in pos + 1..k {
            idx[x] = idx[x - 1] + 1;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testkit::{draw_normal, factor_cov, sample_cov};
    use crate::tetrad::tetrad_differences;
    use nalgebra::DVector;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    /// Three correlated factors, items 0..=4 on A, 6..=10 on B, 11..=15 on C (unit variances).
    /// `impure` adds a cross-loading on B to item 5 (declared with A) and an error covariance
    /// between items 14 and 15; otherwise item 5 is a pure indicator of A.
    fn model(impure: bool) -> (DMatrix<f64>, Vec<Vec<usize>>) {
        let a = [0.8, 0.7, 0.75, 0.65, 0.7];
        let b = [0.7, 0.8, 0.6, 0.75, 0.7];
        let c = [0.7, 0.75, 0.8, 0.65, 0.7];
        let mut lambda = DMatrix::zeros(16, 3);
        for k in 0..5 {
            lambda[(k, 0)] = a[k];
            lambda[(6 + k, 1)] = b[k];
            lambda[(11 + k, 2)] = c[k];
        }
        lambda[(5, 0)] = 0.6;
        if impure {
            lambda[(5, 1)] = 0.5;
        }
        let phi = DMatrix::from_row_slice(3, 3, &[1.0, 0.4, 0.3, 0.4, 1.0, 0.5, 0.3, 0.5, 1.0]);
        let common = &lambda * &phi * lambda.transpose();
        let mut theta = DMatrix::from_diagonal(&DVector::from_fn(16, |i, _| 1.0 - common[(i, i)]));
        if impure {
            theta[(14, 15)] = 0.2;
            theta[(15, 14)] = 0.2;
        }
        let groups = vec![(0..6).collect(), (6..11).collect(), (11..16).collect()];
        (factor_cov(&lambda, &phi, &theta), groups)
    }

    fn assert_impure_dropped(result: &Purification) {
        let g = &result.groups;
        assert_eq!(g[0].kept, vec![0, 1, 2, 3, 4], "{result:#?}");
        assert_eq!(g[0].dropped.len(), 1);
        assert_eq!(g[0].dropped[0].item, 5);
        assert_eq!(g[1].kept, (6..11).collect::<Vec<_>>());
        assert!(g[1].dropped.is_empty());
        assert_eq!(g[2].dropped.len(), 1);
        let pair_member = g[2].dropped[0].item;
        assert!(pair_member == 14 || pair_member == 15);
        let mut expect: Vec<usize> = (11..16).filter(|&i| i != pair_member).collect();
        expect.sort_unstable();
        assert_eq!(g[2].kept, expect);
        assert!(g.iter().all(|x| !x.min_items_reached));
        assert!(result.unresolved.is_empty());
        for d in g.iter().flat_map(|x| &x.dropped) {
            assert!(!d.tetrads.is_empty());
            for t in &d.tetrads {
                assert!(t.items.contains(&d.item));
                assert!(t.p_adjusted < 0.01 && t.p <= t.p_adjusted);
            }
        }
    }

    // Derivation check (Spirtes, Glymour & Scheines 2000, ch. 12): in a pure three-factor
    // population every tetrad listed by `implied_tetrads` vanishes, and in each cross-group
    // quad the tetrads not listed do not.
    #[test]
    fn implied_tetrads_vanish_exactly_in_a_pure_population() {
        let (sigma, groups) = model(false);
        let implied = implied_tetrads(&groups);
        for t in &implied {
            let d = tetrad_differences(&sigma, t.items).unwrap()[t.which];
            assert!(d.abs() < 1e-13, "{t:?}: {d}");
        }
        let two_two = implied.iter().filter(|t| {
            t.which == 2 && {
                let g0 = groups.iter().position(|g| g.contains(&t.items[0]));
                let g2 = groups.iter().position(|g| g.contains(&t.items[2]));
                g0 != g2
            }
        });
        let mut n = 0;
        for t in two_two {
            let d = tetrad_differences(&sigma, t.items).unwrap();
            assert!(d[0].abs() > 1e-3 && d[1].abs() > 1e-3, "{t:?}: {d:?}");
            n += 1;
        }
        // 2 + 2 quads: C(6,2) C(5,2) + C(6,2) C(5,2) + C(5,2) C(5,2).
        assert_eq!(n, 15 * 10 + 15 * 10 + 10 * 10);
    }

    // Simulation (REFERENCES.md, simulation checks): n = 2000 from the impure model; the
    // cross-loading item and one of the correlated-error pair are dropped, nothing else.
    #[test]
    fn drops_exactly_the_impure_items_wishart() {
        let (sigma, groups) = model(true);
        let x = draw_normal(&sigma, 2000, &mut ChaCha8Rng::seed_from_u64(2000));
        let s = sample_cov(&x);
        let result = purify(&s, 2000, None, &groups, &PurifyOptions::default()).unwrap();
        assert_impure_dropped(&result);
        assert_eq!(result.family_sizes.len(), 3);
    }

    #[test]
    fn drops_exactly_the_impure_items_delta() {
        let (sigma, groups) = model(true);
        // n = 1000 keeps the unoptimised test build fast; the impurities stay clear (|z| > 5).
        let x = draw_normal(&sigma, 1000, &mut ChaCha8Rng::seed_from_u64(2001));
        let s = sample_cov(&x);
        // The exact test (tolerance 0): these impurities are material, but at n = 1000 the
        // correlated error's tetrads (about 0.1) are not always significantly above 0.05.
        let options = PurifyOptions { test: TetradTestKind::Delta, tolerance: 0.0, ..PurifyOptions::default() };
        let result = purify(&s, 1000, Some(&x), &groups, &options).unwrap();
        assert_impure_dropped(&result);
    }

    // The delta test on a given matrix with its sampling covariance (here Browne's 1984
    // distribution-free covariance of the sample covariances) finds the same impurities.
    #[test]
    fn drops_exactly_the_impure_items_with_a_sampling_covariance() {
        let (sigma, groups) = model(true);
        let x = draw_normal(&sigma, 1000, &mut ChaCha8Rng::seed_from_u64(2001));
        let adf = std::sync::Arc::new(crate::acov::adf_covariances(&x).unwrap());
        let tester = TetradTester::with_sampling(&sample_cov(&x), adf).unwrap();
        let result = purify_with(&tester, &groups, &PurifyRule::exact(0.01, 3), &[]).unwrap();
        assert_impure_dropped(&result);
    }

    // Under a pure model BH at 0.01 rejects anything with probability at most about 0.01, so
    // with five fixed seeds at least four runs must keep every item.
    #[test]
    fn pure_model_keeps_everything() {
        let (sigma, groups) = model(false);
        let mut all_kept = 0;
        for seed in 0..5 {
            let x = draw_normal(&sigma, 2000, &mut ChaCha8Rng::seed_from_u64(100 + seed));
            let r = purify(&sample_cov(&x), 2000, None, &groups, &PurifyOptions::default()).unwrap();
            all_kept += usize::from(r.groups.iter().all(|g| g.dropped.is_empty()));
        }
        assert!(all_kept >= 4, "only {all_kept} of 5 pure runs kept every item");
    }

    // A group of four with one cross-loading item and min_items = 4 cannot lose it: it is
    // flagged, keeps its four items, and the violations involving the bad item are returned.
    #[test]
    fn min_items_breach_is_flagged() {
        let (sigma, _) = model(true);
        let groups = vec![vec![0, 1, 2, 5], (6..11).collect()];
        let x = draw_normal(&sigma, 2000, &mut ChaCha8Rng::seed_from_u64(4));
        let options = PurifyOptions { min_items: 4, ..PurifyOptions::default() };
        let r = purify(&sample_cov(&x), 2000, None, &groups, &options).unwrap();
        assert!(r.groups[0].min_items_reached);
        assert_eq!(r.groups[0].kept, vec![0, 1, 2, 5]);
        assert!(r.groups[0].dropped.is_empty());
        assert!(!r.groups[1].min_items_reached);
        assert!(r.groups[1].dropped.is_empty(), "{:?}", r.groups[1]);
        assert!(!r.unresolved.is_empty());
        assert!(r.unresolved.iter().all(|v| v.p_adjusted < 0.01));
        assert!(r.unresolved.iter().any(|v| v.items.contains(&5)));
    }

    // Declared impurities are not purified away: with the error covariance of items 14 and 15
    // declared, the tetrads over that pair are left out and both items stay (the exact test at
    // n = 2000, which otherwise drops one of them); the cross-loading item 5 is still dropped.
    #[test]
    fn a_declared_pair_keeps_an_otherwise_dropped_item() {
        let (sigma, groups) = model(true);
        let x = draw_normal(&sigma, 2000, &mut ChaCha8Rng::seed_from_u64(2000));
        let tester = TetradTester::wishart(&sample_cov(&x), 2000).unwrap();
        let rule = PurifyRule::exact(0.01, 3);
        let plain = purify_with(&tester, &groups, &rule, &[]).unwrap();
        assert_eq!(plain.groups[2].dropped.len(), 1);
        for pairs in [[(14, 15)], [(15, 14)]] {
            let declared = purify_with(&tester, &groups, &rule, &pairs).unwrap();
            assert_eq!(declared.groups[2].kept, (11..16).collect::<Vec<_>>(), "{declared:#?}");
            assert_eq!(declared.groups[0].kept, vec![0, 1, 2, 3, 4]);
            assert!(declared.family_sizes[0] < plain.family_sizes[0]);
        }
        assert!(purify_with(&tester, &groups, &rule, &[(3, 3)]).is_err());
        assert!(purify_with(&tester, &groups, &rule, &[(3, 99)]).is_err());
    }

    /// Population of `model(false)` with a small error covariance (0.08) between items 0 and 1.
    fn slightly_impure() -> (DMatrix<f64>, Vec<Vec<usize>>) {
        let (mut sigma, groups) = model(false);
        sigma[(0, 1)] += 0.08;
        sigma[(1, 0)] += 0.08;
        (sigma, groups)
    }

    // The size criterion (issue 16): a small error covariance (0.08; tetrads up to about 0.05)
    // seen at n = 100,000 condemns one of its items under the exact test, but with the
    // default tolerance the items' misfit (largest residual correlation about 0.05) is below
    // the material 0.10, so both are kept, listed as spared, and the remaining tetrads show
    // the impurity's size.
    #[test]
    fn small_impurities_are_kept_by_the_size_criterion() {
        let (sigma, groups) = slightly_impure();
        let tester = TetradTester::wishart(&sigma, 100_000).unwrap();
        let exact = purify_with(&tester, &groups, &PurifyRule::exact(0.01, 3), &[]).unwrap();
        let dropped: Vec<usize> = exact.groups[0].dropped.iter().map(|d| d.item).collect();
        assert!(dropped == vec![0] || dropped == vec![1], "{dropped:?}");
        let sized = purify_with(&tester, &groups, &PurifyRule::sized(0.01, 3, DEFAULT_TOLERANCE), &[]).unwrap();
        assert!(sized.groups.iter().all(|g| g.dropped.is_empty()), "{sized:#?}");
        // Every item in a standing violation is spared, the pair among them.
        assert!(sized.groups[0].spared.starts_with(&[0, 1]), "{:?}", sized.groups[0].spared);
        assert!(!sized.unresolved.is_empty());
        let top = &sized.groups[0].remaining[0];
        assert!(top.items.contains(&0) && top.items.contains(&1));
        assert!(top.diff.abs() > 0.02 && top.diff.abs() < 0.07, "{top:?}");
        assert_eq!(sized.groups[0].remaining.len(), REMAINING);
        let m = &sized.groups[0].misfit;
        assert!(m[0] > 0.03 && m[0] < MATERIAL_RESIDUAL && m[2] < 0.02, "{m:?}");
        // A large tolerance leaves no violation at all.
        let loose = purify_with(&tester, &groups, &PurifyRule::sized(0.01, 3, 0.2), &[]).unwrap();
        assert!(loose.unresolved.is_empty() && loose.groups[0].spared.is_empty());
    }

    // Identity (Spearman 1904): in a pure population the triad loadings are exact and every
    // residual correlation vanishes; a planted error covariance (0.3) shows in its pair's
    // residual and forms a content group, and a declared pair's residual does not count.
    #[test]
    fn residuals_and_content_groups() {
        let (sigma, groups) = model(false);
        let res = residual_correlations(&correlation(&sigma), &groups);
        for i in 0..16 {
            for j in 0..16 {
                let e = res[(i, j)];
                assert!(i == j || e.abs() < 1e-12, "({i}, {j}): {e}");
            }
        }
        assert!(content_groups(&sigma, &groups[2]).is_empty());
        let mut impure = sigma.clone();
        impure[(14, 15)] += 0.3;
        impure[(15, 14)] += 0.3;
        let res = residual_correlations(&correlation(&impure), &groups);
        // The median triad loadings absorb part of the shared error: 0.15 of 0.3 shows.
        assert!(res[(14, 15)] > 0.12, "{}", res[(14, 15)]);
        assert_eq!(content_groups(&impure, &groups[2]), vec![vec![14, 15]]);
        assert!(item_misfit(&correlation(&impure), &groups, &[(14, 15)])[14] < 0.1);
    }

    // Error rate of the content-group warning's grouping (simulation check): 20 samples of a
    // pure five-item group at n = 3000 form no content group in at least 19; with an error
    // covariance of 0.3 planted between two items, the pair is found in at least 19.
    #[test]
    fn content_groups_error_rates() {
        let (sigma, groups) = model(false);
        let mut planted = sigma.clone();
        planted[(12, 13)] += 0.3;
        planted[(13, 12)] += 0.3;
        let mut rng = ChaCha8Rng::seed_from_u64(1616);
        let (mut false_groups, mut found) = (0, 0);
        for _ in 0..20 {
            let pure = sample_cov(&draw_normal(&sigma, 3000, &mut rng));
            false_groups += usize::from(!content_groups(&pure, &groups[2]).is_empty());
            let impure = sample_cov(&draw_normal(&planted, 3000, &mut rng));
            found += usize::from(content_groups(&impure, &groups[2]) == vec![vec![12, 13]]);
        }
        assert!(false_groups <= 1 && found >= 19, "false {false_groups}, found {found}");
    }

    #[test]
    fn invalid_groups_are_errors() {
        let (sigma, _) = model(false);
        let o = PurifyOptions::default();
        assert!(purify(&sigma, 500, None, &[vec![0, 1, 2], vec![2, 3, 4]], &o).is_err());
        assert!(purify(&sigma, 500, None, &[vec![0, 1, 99]], &o).is_err());
        let bad = PurifyOptions { alpha: 0.0, ..o };
        assert!(purify(&sigma, 500, None, &[vec![0, 1, 2, 3]], &bad).is_err());
    }

    #[test]
    fn combinations_are_lexicographic() {
        let mut seen = Vec::new();
        for_each_combination(&[3, 5, 7, 9], 3, |c| seen.push(c.to_vec()));
        assert_eq!(seen, vec![vec![3, 5, 7], vec![3, 5, 9], vec![3, 7, 9], vec![5, 7, 9]]);
    }
}

/// Size and power of purification with the default test (the delta method on the fitted
/// correlation matrix with its distribution-free sampling covariance) on pure and impure
/// models with continuous, 5-point and binary items (issue 15's acceptance: at alpha 0.01 a
/// pure item is dropped in at most 2 % of replicates). The Wishart test on the same matrix is
/// run beside it, for contrast: it assumes normal rows and fails on ordinal items.
#[cfg(test)]
mod calibration {
    use std::sync::Arc;

    use nalgebra::DMatrix;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;
    use rand_distr::{ChiSquared, Distribution, StandardNormal};

    use super::{PurifyRule, purify_with};
    use crate::acov::{Contributions, SamplingCovariance};
    use crate::mixed::{Column, MixedCorrelation, mixed_correlation};
    use crate::polychoric::OrdinalFit;
    use crate::tetrad::TetradTester;

    /// How the item responses arise from the standardized latent response y* (variance 1).
    #[derive(Debug, Clone, Copy, PartialEq)]
    pub(super) enum ItemType {
        /// y* itself, with skewed (centred chi-square(3)) factors and errors.
        SkewedContinuous,
        /// Five categories, cuts symmetric about 0 (about 7, 24, 38, 24, 7 %).
        FiveSymmetric,
        /// Five categories, most answers in the top two (about 2, 6, 16, 38, 38 %).
        FiveSkewed,
        /// Two categories, 80 % in the upper one.
        Binary,
    }

    impl ItemType {
        fn cuts(self) -> Option<&'static [f64]> {
            match self {
                ItemType::SkewedContinuous => None,
                ItemType::FiveSymmetric => Some(&[-1.5, -0.7, 0.7, 1.5]),
                ItemType::FiveSkewed => Some(&[-2.0, -1.4, -0.7, 0.3]),
                ItemType::Binary => Some(&[-0.841_621_233_572_914_3]),
            }
        }
    }

    /// What is planted in the model.
    #[derive(Debug, Clone, Copy, PartialEq)]
    pub(super) enum Plant {
        Pure,
        /// The last item of the first group also loads 0.4 on the second factor.
        CrossLoading,
        /// The errors of the first group's last two items covary by 0.3 (on the standardized
        /// item scale).
        CorrelatedError,
    }

    /// A factor model on standardized latent responses: loadings (p x k), factor correlations,
    /// one extra error covariance, the declared groups.
    pub(super) struct Design {
        lambda: DMatrix<f64>,
        phi: DMatrix<f64>,
        error_pair: Option<(usize, usize, f64)>,
        pub(super) groups: Vec<Vec<usize>>,
        /// The planted items (an impurity to find), empty for a pure model.
        pub(super) planted: Vec<usize>,
    }

    impl Design {
        /// `factors` 1 (six items) or 3 (five items each, correlations 0.4, 0.3, 0.5).
        pub(super) fn new(factors: usize, plant: Plant) -> Design {
            let (loadings, phi): (Vec<Vec<f64>>, DMatrix<f64>) = if factors == 1 {
                (vec![vec![0.8, 0.7, 0.6, 0.75, 0.65, 0.55]], DMatrix::identity(1, 1))
            } else {
                (
                    vec![
                        vec![0.8, 0.7, 0.75, 0.65, 0.7],
                        vec![0.7, 0.8, 0.6, 0.75, 0.7],
                        vec![0.7, 0.75, 0.8, 0.65, 0.7],
                    ],
                    DMatrix::from_row_slice(3, 3, &[1.0, 0.4, 0.3, 0.4, 1.0, 0.5, 0.3, 0.5, 1.0]),
                )
            };
            let p: usize = loadings.iter().map(Vec::len).sum();
            let mut lambda = DMatrix::zeros(p, factors);
            let mut groups = Vec::new();
            let mut at = 0;
            for (f, ls) in loadings.iter().enumerate() {
                groups.push((at..at + ls.len()).collect::<Vec<_>>());
                for &l in ls {
                    lambda[(at, f)] = l;
                    at += 1;
                }
            }
            let last = groups[0].len() - 1;
            let (mut planted, mut error_pair) = (Vec::new(), None);
            match plant {
                Plant::Pure => {}
                Plant::CrossLoading => {
                    assert!(factors > 1, "a cross-loading needs a second factor");
                    lambda[(last, 0)] = 0.6;
                    lambda[(last, 1)] = 0.4;
                    planted.push(last);
                }
                Plant::CorrelatedError => {
                    error_pair = Some((last - 1, last, 0.3));
                    planted.extend([last - 1, last]);
                }
            }
            Design { lambda, phi, error_pair, groups, planted }
        }

        /// n rows of latent responses y* with unit variances, mapped to `kind` items. The
        /// factors are phi^(1/2) z and the errors psi^(1/2) e with z, e standard normal, or for
        /// `SkewedContinuous` standardized chi-square(3) variables (skewness 1.63).
        pub(super) fn draw(&self, kind: ItemType, n: usize, rng: &mut ChaCha8Rng) -> Vec<Column<'static>> {
            let (p, k) = self.lambda.shape();
            let chol = self.phi.clone().cholesky().expect("factor correlations are positive definite").l();
            let common = &self.lambda * &self.phi * self.lambda.transpose();
            let psi: Vec<f64> = (0..p).map(|i| 1.0 - common[(i, i)]).collect();
            assert!(psi.iter().all(|&v| v > 0.05), "error variances {psi:?}");
            let chi = ChiSquared::new(3.0).unwrap();
            let shock = |rng: &mut ChaCha8Rng| -> f64 {
                if kind == ItemType::SkewedContinuous {
                    (chi.sample(rng) - 3.0) / 6f64.sqrt()
                } else {
                    StandardNormal.sample(rng)
                }
            };
            let mut y = vec![Vec::with_capacity(n); p];
            let mut z = vec![0.0; k];
            for _ in 0..n {
                for v in z.iter_mut() {
                    *v = shock(rng);
                }
                let shared = shock(rng);
                for (i, column) in y.iter_mut().enumerate() {
                    let f: f64 =
                        (0..k).map(|a| self.lambda[(i, a)] * (0..k).map(|b| chol[(a, b)] * z[b]).sum::<f64>()).sum();
                    let (mut e, mut e_var) = (0.0, psi[i]);
                    if let Some((a, b, c)) = self.error_pair
                        && (i == a || i == b)
                    {
                        e += c.sqrt() * shared;
                        e_var -= c;
                    }
                    column.push(f + e + e_var.sqrt() * shock(rng));
                }
            }
            match kind.cuts() {
                None => y.into_iter().map(|v| Column::Continuous(v.into())).collect(),
                Some(cuts) => y
                    .into_iter()
                    .map(|v| {
                        let codes: Vec<u8> = v.iter().map(|&x| cuts.iter().filter(|&&c| x > c).count() as u8).collect();
                        Column::Ordinal { codes: codes.into(), levels: cuts.len() + 1 }
                    })
                    .collect(),
            }
        }
    }

    /// The sampling covariance of the fitted matrix's correlations, distribution-free, from the
    /// respondents' contributions (what the covariance step provides for the default test).
    fn sampling(columns: &[Column<'_>], fitted: &MixedCorrelation) -> Arc<dyn SamplingCovariance> {
        Arc::new(Contributions::correlations(columns, fitted).unwrap())
    }

    /// Which test a cell runs.
    #[derive(Debug, Clone, Copy, PartialEq)]
    pub(super) enum Test {
        /// The default: delta method on the fitted matrix with its distribution-free sampling
        /// covariance.
        Default,
        /// Wishart's normal-theory test on the same matrix with its n.
        Wishart,
    }

    /// One replicate: the items purification drops.
    pub(super) fn dropped(design: &Design, kind: ItemType, n: usize, test: Test, rng: &mut ChaCha8Rng) -> Vec<usize> {
        let columns = design.draw(kind, n, rng);
        let fitted = mixed_correlation(&columns, OrdinalFit::TwoStep).unwrap();
        let tester = match test {
            Test::Default => TetradTester::with_sampling(&fitted.matrix, sampling(&columns, &fitted)).unwrap(),
            Test::Wishart => TetradTester::wishart(&fitted.matrix, n).unwrap(),
        };
        let result = purify_with(&tester, &design.groups, &PurifyRule::exact(0.01, 3), &[]).unwrap();
        result.groups.iter().flat_map(|g| g.dropped.iter().map(|d| d.item)).collect()
    }

    /// Over `reps` replicates: the share dropping at least one pure item, and the share
    /// dropping a planted one (for a correlated-error pair, either member).
    pub(super) fn rates(
        factors: usize,
        plant: Plant,
        kind: ItemType,
        n: usize,
        test: Test,
        reps: usize,
        seed: u64,
    ) -> (f64, f64) {
        let design = Design::new(factors, plant);
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let (mut false_drop, mut found) = (0usize, 0usize);
        for _ in 0..reps {
            let out = dropped(&design, kind, n, test, &mut rng);
            false_drop += usize::from(out.iter().any(|i| !design.planted.contains(i)));
            found += usize::from(out.iter().any(|i| design.planted.contains(i)));
        }
        (false_drop as f64 / reps as f64, found as f64 / reps as f64)
    }

    // Short size check on skewed continuous items (simulation check, REFERENCES.md): three
    // pure factors, n = 500, 30 replicates. At alpha 0.01 with BH the default test drops a
    // pure item in at most 2 of 30 runs (expected rate at most ~1-2 %).
    #[test]
    fn default_purification_keeps_pure_skewed_continuous_items() {
        let (size, _) = rates(3, Plant::Pure, ItemType::SkewedContinuous, 500, Test::Default, 30, 1501);
        assert!(size <= 2.0 / 30.0, "pure item dropped in {size} of runs");
    }

    // Short power check: the planted cross-loading (0.4) on skewed continuous items at n = 500
    // is dropped in at least 8 of 10 runs.
    #[test]
    fn default_purification_drops_a_cross_loading_on_skewed_items() {
        let (_, power) = rates(3, Plant::CrossLoading, ItemType::SkewedContinuous, 500, Test::Default, 10, 1502);
        assert!(power >= 0.8, "planted item dropped in {power} of runs");
    }

    // Short size checks on ordinal items (simulation check): three pure factors, n = 500,
    // 50 replicates each of binary (80/20) and skewed 5-point items. The default test drops a
    // pure item in at most 3 of 50 runs (expected rate about 1 %); Wishart's test on the same binary matrices drops one in
    // at least 12 of 20 (the next test), so a test that ignored the polychoric estimates' own
    // sampling variability would fail here.
    #[test]
    fn default_purification_keeps_pure_binary_items() {
        let (size, _) = rates(3, Plant::Pure, ItemType::Binary, 500, Test::Default, 50, 1503);
        assert!(size <= 0.06, "pure binary item dropped in {size} of runs");
    }

    #[test]
    fn default_purification_keeps_pure_skewed_five_point_items() {
        let (size, _) = rates(3, Plant::Pure, ItemType::FiveSkewed, 500, Test::Default, 50, 1504);
        assert!(size <= 0.06, "pure 5-point item dropped in {size} of runs");
    }

    // Short power check on ordinal items: the planted cross-loading (0.4) on symmetric 5-point
    // items at n = 500 is dropped in at least 8 of 10 runs.
    #[test]
    fn default_purification_drops_a_cross_loading_on_five_point_items() {
        let (_, power) = rates(3, Plant::CrossLoading, ItemType::FiveSymmetric, 500, Test::Default, 10, 1505);
        assert!(power >= 0.8, "planted item dropped in {power} of runs");
    }

    // The harness can fail: Wishart's normal-theory test on the polychoric matrix of binary
    // items (80/20), three pure factors, n = 500, drops a pure item in most runs (issue 15
    // measured 100 % at n = 2,000), at least 12 of 20 here.
    #[test]
    fn wishart_on_binary_items_drops_pure_items() {
        let (size, _) = rates(3, Plant::Pure, ItemType::Binary, 500, Test::Wishart, 20, 1503);
        assert!(size >= 0.6, "Wishart dropped a pure binary item in only {size} of runs");
    }

    const KINDS: [ItemType; 4] =
        [ItemType::SkewedContinuous, ItemType::FiveSymmetric, ItemType::FiveSkewed, ItemType::Binary];

    // Long size calibration (issue 15 acceptance), 1,000 replicates per cell (the true rate is
    // near 1 %, so at 200 replicates a cell's count of 5 or more, 2.5 %, happens by chance in
    // about one cell in fifteen):
    // `cargo test -p construe-stats --release purification_size_long -- --ignored --nocapture`.
    // Pure one- and three-factor models, every item type, n = 500 and 2,000: the default test
    // drops a pure item in at most 2 % of replicates; Wishart's rate on the same matrices
    // (200 replicates) is printed beside it.
    #[test]
    #[ignore]
    fn purification_size_long() {
        let (reps, wishart_reps) = (1000, 200);
        let mut worst: f64 = 0.0;
        for factors in [1, 3] {
            for kind in KINDS {
                for n in [500, 2000] {
                    let seed = 15_000 + 100 * factors as u64 + n as u64 + kind as u64;
                    let (size, _) = rates(factors, Plant::Pure, kind, n, Test::Default, reps, seed);
                    let (wishart, _) = rates(factors, Plant::Pure, kind, n, Test::Wishart, wishart_reps, seed);
                    println!(
                        "size  factors {factors} {kind:?} n {n}: default {size:.3} ({reps} replicates), wishart {wishart:.3} ({wishart_reps})"
                    );
                    worst = worst.max(size);
                }
            }
        }
        assert!(worst <= 0.02, "a pure item was dropped in {worst} of replicates");
    }

    // Long power check, 200 replicates per cell:
    // `cargo test -p construe-stats --release purification_power_long -- --ignored --nocapture`.
    // A cross-loading of 0.4 (three factors) and an error covariance of 0.3 (one and three
    // factors): the share of replicates dropping a planted item, and dropping a pure one. At
    // n = 2,000 every planted impurity is dropped in at least 80 % of replicates (measured:
    // 100 % except the error covariance between binary items of a three-factor model, 85.5 %;
    // at n = 500 binary items leave the impurities mostly undetected: 0-30 %).
    #[test]
    #[ignore]
    fn purification_power_long() {
        let reps = 200;
        let mut weakest_at_2000: f64 = 1.0;
        for (factors, plant) in [(3, Plant::CrossLoading), (3, Plant::CorrelatedError), (1, Plant::CorrelatedError)] {
            for kind in KINDS {
                for n in [500, 2000] {
                    let seed = 25_000 + 100 * factors as u64 + n as u64 + kind as u64;
                    let (size, power) = rates(factors, plant, kind, n, Test::Default, reps, seed);
                    // Wishart's test was the default before; on continuous items it is the
                    // comparison for power (on ordinal items its size is not held).
                    let wishart = if kind == ItemType::SkewedContinuous {
                        let (_, p) = rates(factors, plant, kind, n, Test::Wishart, reps, seed);
                        format!(", wishart planted dropped {p:.3}")
                    } else {
                        String::new()
                    };
                    println!(
                        "power factors {factors} {plant:?} {kind:?} n {n}: planted dropped {power:.3}, pure dropped {size:.3}{wishart}"
                    );
                    if n == 2000 {
                        weakest_at_2000 = weakest_at_2000.min(power);
                    }
                }
            }
        }
        assert!(weakest_at_2000 >= 0.8, "a planted impurity at n = 2,000 was dropped in only {weakest_at_2000}");
    }
}
