//! Discovery of pure one-factor clusters in an item pool from vanishing tetrad constraints alone,
//! after the published approach of Silva, Scheines, Glymour & Spirtes (2006) and Kummerfeld &
//! Ramsey (2016): find a pure triple, grow it into a cluster, check purity against every other
//! item, merge clusters of one latent, report the largest first. Central function
//! `find_clusters`, result `Clusters`. Never uses declared groups: the pool is all it sees.

use nalgebra::DMatrix;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, Normal};

use super::StatsError;
use super::tetrad::TetradTester;

/// Settings of a cluster search.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ClusterOptions {
    /// Level of each purity decision (Bonferroni-corrected over that decision's quad tests).
    pub alpha: f64,
    /// Smallest cluster reported (at least 3, the size of a seed).
    pub min_size: usize,
    /// Tetrad tolerance (units of the matrix's tetrads; correlation products for a
    /// correlation matrix): a quad counts against purity only when its tetrads are
    /// significantly outside it (`TetradTester::quad_excess_chi2`), and a cluster is reported
    /// only when the sample could tell a material tetrad (`MATERIAL_TETRAD`) from it (see
    /// `find_clusters`). 0 is the exact test, with no such check.
    pub tolerance: f64,
}

impl Default for ClusterOptions {
    fn default() -> Self {
        Self { alpha: 0.01, min_size: 3, tolerance: DEFAULT_TOLERANCE }
    }
}

/// The default tetrad tolerance of cluster discovery, in correlation units: the same as
/// purification's (`purify::DEFAULT_TOLERANCE`). A larger one (0.05) let an error correlation
/// of 0.4 pass unseen at n = 1,000 in more than half of the samples of the crate's acceptance
/// design (tests/acceptance.rs), since such a pair's tetrads are only about 0.10.
pub const DEFAULT_TOLERANCE: f64 = 0.02;

/// The tetrad size a reported cluster's purity checks must be able to see: twice the
/// tolerance, and at least 0.10 (a residual correlation of about 0.2 between two items with
/// loadings near 0.7, the size of a material correlated error or cross-loading).
pub const MATERIAL_TETRAD: f64 = 0.10;

/// Pure clusters found, largest first (ties: smallest first item), items ascending within a
/// cluster; `unclustered` holds the rest of the pool (including the items of withheld
/// clusters), ascending.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Clusters {
    pub clusters: Vec<Vec<usize>>,
    pub unclustered: Vec<usize>,
    /// Clusters the search grew but does not report for lack of evidence, largest first.
    pub withheld: Vec<Withheld>,
}

/// A cluster the search grew whose tetrads could not be told from the tolerance at this n.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Withheld {
    /// Its items, ascending.
    pub items: Vec<usize>,
    /// The median standard error of the tetrads that judged its purity (its seed triple with
    /// each other pool item).
    pub se: f64,
    /// The smallest tetrad the purity checks tell from the tolerance: tolerance + z se, z the
    /// square root of their critical value.
    pub detectable: f64,
    /// Sample size at which `detectable` would reach the material size (`MATERIAL_TETRAD`, or
    /// twice the tolerance if larger; standard errors shrink as 1 / sqrt(n)).
    pub n_needed: usize,
}

/// Finds pure one-factor clusters among the `pool` items of `tester`'s covariance matrix.
///
/// Building block (Silva et al. 2006; Kummerfeld & Ramsey 2016): three items {a, b, c} are a
/// *pure triple* when, for every other pool item d, all three tetrads of {a, b, c, d} vanish.
/// Three pure indicators of one latent plus any fourth indicator of a pure model satisfy this
/// (see `purify::implied_tetrads`, the 3 + 1 case), while a triple drawn from two latents, or
/// containing an item that loads on two latents or whose error correlates with any pool item,
/// generically violates it for some d. Each quad is tested by the joint df-2 chi-square of
/// `TetradTester::quad_chi2` (Bollen & Ting 1993); a triple is declared impure as soon as one
/// quad has p < alpha / (pool size - 3), a Bonferroni bound over the triple's quads that allows
/// stopping at the first rejection. Quads are visited in a fixed stride order over the pool so
/// that a rejection tends to come early.
///
/// Search (our arrangement of those published steps, shaped for large pools: it never
/// enumerates all quads). Candidate seeds are tried strongest first: item pairs by decreasing
/// |correlation|, and for each pair the third items by decreasing smaller |correlation| with
/// the pair. The first pure triple seeds a cluster; every other unassigned item o joins it when
/// at least two of the three triples {a, b, o}, {a, c, o}, {b, c, o} are pure (an impure o
/// fails all three, a pure o survives one spurious rejection); the cluster's items are then
/// assigned and the search resumes with the next pair of unassigned items. Seeding by strength
/// matters: a triple spread over three latents has tetrads that are products of small
/// between-latent covariances, so the per-quad tests have little power against it, and it must
/// not be tried before the items of real clusters are taken. Only pairs whose correlation
/// differs from zero (Fisher z test at alpha) are combined, because tetrads of uncorrelated
/// items vanish trivially. Finally clusters whose seeds form pure triples with each other are
/// merged (they measure one latent), clusters smaller than `min_size` are returned to the
/// unclustered items, and the largest are listed first. Deterministic: the parallel steps keep
/// the sequential order of their results.
///
/// Size criterion (issue 16). With `tolerance` > 0 each quad is judged by the close-fit
/// statistic `TetradTester::quad_excess_chi2` (the distance of its tetrads from the set where
/// all are within the tolerance), against the same critical value. And a cluster is reported
/// only when its purity verdicts had the power to see a material impurity: with s the median
/// standard error of the tetrads of its seed triple with every other pool item, the smallest
/// tetrad the purity checks tell from the tolerance is tol + z s, z the square root of their
/// chi-square critical value (alpha Bonferroni-corrected over a triple's quads); when that
/// exceeds the material size m = max(`MATERIAL_TETRAD`, 2 tol), a material impurity would pass
/// unseen more often than not, so the cluster is withheld (`Clusters::withheld`, with the n at
/// which it would be judged: n (z s / (m - tol))^2) and its items count as unclustered. At small n this turns what
/// would be a large cluster mixing several latents (no triple can be rejected) into a statement
/// that the evidence is not enough. Tolerance 0 skips the check.
pub fn find_clusters(tester: &TetradTester, pool: &[usize], options: &ClusterOptions) -> Result<Clusters, StatsError> {
    if !(options.alpha > 0.0 && options.alpha < 1.0) {
        return Err(StatsError::InvalidInput(format!("alpha {} is not in (0, 1)", options.alpha)));
    }
    if options.min_size < 3 {
        return Err(StatsError::InvalidInput(format!("minimum cluster size {} is below 3", options.min_size)));
    }
    let mut items = pool.to_vec();
    items.sort_unstable();
    if let Some(w) = items.windows(2).find(|w| w[0] == w[1]) {
        return Err(StatsError::InvalidInput(format!("item {} is listed twice", w[0])));
    }
    if let Some(&bad) = items.iter().find(|&&i| i >= tester.n_items()) {
        return Err(StatsError::InvalidInput(format!("item {bad} is out of range for {} items", tester.n_items())));
    }
    if !(options.tolerance.is_finite() && options.tolerance >= 0.0) {
        return Err(StatsError::InvalidInput(format!(
            "tolerance {} is not a finite non-negative number",
            options.tolerance
        )));
    }
    if items.len() < 4 {
        return Ok(Clusters { clusters: Vec::new(), unclustered: items, withheld: Vec::new() });
    }
    let search = Search::new(tester, items, options.alpha, options.tolerance);
    let found = search.seed_and_grow()?;
    let merged = search.merge(found)?;
    let m = search.items.len();
    let mut in_cluster = vec![false; m];
    let mut clusters: Vec<Vec<usize>> = Vec::new();
    let mut withheld: Vec<Withheld> = Vec::new();
    // The search's own per-quad critical value on the z scale: a tetrad exceeding the
    // tolerance by z standard errors makes the quad's statistic about crit.
    let z = search.crit.sqrt();
    for (members, seed) in merged.into_iter().filter(|(c, _)| c.len() >= options.min_size) {
        let mut names: Vec<usize> = members.iter().map(|&x| search.items[x]).collect();
        names.sort_unstable();
        if options.tolerance > 0.0 {
            let se = search.seed_se(seed)?;
            let detectable = options.tolerance + z * se;
            let material = MATERIAL_TETRAD.max(2.0 * options.tolerance);
            if detectable > material {
                let ratio = z * se / (material - options.tolerance);
                let n_needed = ((tester.n_obs() as f64) * ratio * ratio).ceil() as usize;
                withheld.push(Withheld { items: names, se, detectable, n_needed });
                continue;
            }
        }
        for &x in &members {
            in_cluster[x] = true;
        }
        clusters.push(names);
    }
    clusters.sort_by(|a, b| b.len().cmp(&a.len()).then(a[0].cmp(&b[0])));
    withheld.sort_by(|a, b| b.items.len().cmp(&a.items.len()).then(a.items[0].cmp(&b.items[0])));
    let unclustered = (0..m).filter(|&x| !in_cluster[x]).map(|x| search.items[x]).collect();
    Ok(Clusters { clusters, unclustered, withheld })
}

/// One search over a fixed pool; items are addressed by their position in `items`.
struct Search<'a> {
    tester: &'a TetradTester,
    items: Vec<usize>,
    /// Visiting order of the fourth item d (positions), a fixed stride permutation.
    order: Vec<usize>,
    /// Chi-square (df 2) critical value of one quad within a triple's Bonferroni family.
    crit: f64,
    /// Tetrad tolerance of the close-fit statistic (0: exact).
    tolerance: f64,
    /// For each position, the `NEIGHBOURS` positions of largest |correlation| with it.
    neighbours: Vec<Vec<usize>>,
    /// |correlation| of each pair of positions, and whether it differs from zero.
    abs_r: DMatrix<f64>,
    correlated: DMatrix<bool>,
}

/// How many most-correlated items of each triple member the purity screen tries first.
const NEIGHBOURS: usize = 8;

/// A cluster under construction: its positions and the seed triple it was grown from.
type Found = (Vec<usize>, [usize; 3]);

impl<'a> Search<'a> {
    fn new(tester: &'a TetradTester, items: Vec<usize>, alpha: f64, tolerance: f64) -> Self {
        let m = items.len();
        let stride = stride_for(m);
        let order = (0..m).map(|k| (k * stride) % m).collect();
        // df-2 chi-square survival is exp(-x/2), so p < q  <=>  x > -2 ln q.
        let others = (m - 3) as f64;
        let crit = -2.0 * (alpha / others).ln();
        let z_crit = Normal::standard().inverse_cdf(1.0 - alpha / 2.0);
        let cov = tester.covariance();
        let scale = ((tester.n_obs() as f64) - 3.0).max(1.0).sqrt();
        let abs_r = DMatrix::from_fn(m, m, |a, b| {
            let (i, j) = (items[a], items[b]);
            (cov[(i, j)] / (cov[(i, i)] * cov[(j, j)]).sqrt()).abs()
        });
        // Fisher (1915) z: atanh(r) sqrt(N - 3) is approximately standard normal at r = 0.
        let correlated =
            DMatrix::from_fn(m, m, |a, b| a != b && (abs_r[(a, b)].min(0.999_999).atanh() * scale) > z_crit);
        let neighbours = (0..m)
            .map(|a| {
                let mut others: Vec<usize> = (0..m).filter(|&b| b != a).collect();
                others.sort_by(|&x, &y| abs_r[(a, y)].total_cmp(&abs_r[(a, x)]).then(x.cmp(&y)));
                others.truncate(NEIGHBOURS);
                others
            })
            .collect();
        Self { tester, items, order, crit, tolerance, neighbours, abs_r, correlated }
    }

    /// Median standard error of the tetrads of the seed triple with every other pool item.
    fn seed_se(&self, seed: [usize; 3]) -> Result<f64, StatsError> {
        let [a, b, c] = seed.map(|x| self.items[x]);
        let mut ses: Vec<f64> = Vec::new();
        for d in (0..self.items.len()).filter(|d| !seed.contains(d)) {
            for t in self.tester.test_quad([a, b, c, self.items[d]])? {
                ses.push(t.se);
            }
        }
        ses.sort_by(f64::total_cmp);
        Ok(if ses.is_empty() { 0.0 } else { ses[ses.len() / 2] })
    }

    /// Early-exit purity screen of a triple. The fourth items most correlated with a triple
    /// member are tried first: an item sharing a latent with one member is where a violation is
    /// largest (the partner of a two-item latent, say). Re-testing them in the full pass adds
    /// no multiplicity, since a quad's verdict is fixed.
    fn triple_pure(&self, t: [usize; 3], crit: f64) -> Result<bool, StatsError> {
        let [a, b, c] = t.map(|x| self.items[x]);
        let near = t.iter().flat_map(|&x| self.neighbours[x].iter().copied());
        for d in near.chain(self.order.iter().copied()) {
            if t.contains(&d) {
                continue;
            }
            if self.tester.quad_excess_chi2([a, b, c, self.items[d]], self.tolerance)? > crit {
                return Ok(false);
            }
        }
        Ok(true)
    }

    /// Two of the three anchor triples must be pure: a pure item then survives one spurious
    /// rejection, while an item that cross-loads or has a correlated error fails all three
    /// (for the latter, the error partner or the anchor serves as the fourth item d).
    fn joins(&self, [a, b, c]: [usize; 3], o: usize) -> Result<bool, StatsError> {
        let (mut pure, mut impure) = (0, 0);
        for pair in [[a, b], [a, c], [b, c]] {
            if self.triple_pure([pair[0], pair[1], o], self.crit)? {
                pure += 1;
            } else {
                impure += 1;
            }
            if pure == 2 || impure == 2 {
                break;
            }
        }
        Ok(pure == 2)
    }

    fn all_correlated(&self, x: usize, with: &[usize]) -> bool {
        with.iter().all(|&y| self.correlated[(x, y)])
    }

    /// Seeds in order of strength: item pairs by decreasing |correlation|, third items by
    /// decreasing smaller |correlation| with the pair. Items of one latent correlate more
    /// strongly than items of different latents, so real clusters are seeded, and absorb their
    /// members, before any triple spread over several latents can be tried.
    fn seed_and_grow(&self) -> Result<Vec<Found>, StatsError> {
        let m = self.items.len();
        let mut pairs: Vec<(usize, usize)> =
            (0..m).flat_map(|a| (a + 1..m).map(move |b| (a, b))).filter(|&(a, b)| self.correlated[(a, b)]).collect();
        pairs.sort_by(|&(a, b), &(c, d)| self.abs_r[(c, d)].total_cmp(&self.abs_r[(a, b)]).then((a, b).cmp(&(c, d))));
        let mut assigned = vec![false; m];
        let mut found = Vec::new();
        for (a, b) in pairs {
            if assigned[a] || assigned[b] {
                continue;
            }
            let mut candidates: Vec<usize> =
                (0..m).filter(|&c| c != a && c != b && !assigned[c] && self.all_correlated(c, &[a, b])).collect();
            let strength = |c: usize| self.abs_r[(a, c)].min(self.abs_r[(b, c)]);
            candidates.sort_by(|&x, &y| strength(y).total_cmp(&strength(x)).then(x.cmp(&y)));
            // find_first keeps the sequential choice of seed whatever the thread count.
            let hit = candidates
                .par_iter()
                .map(|&c| (c, self.triple_pure([a, b, c], self.crit)))
                .find_first(|(_, r)| !matches!(r, Ok(false)));
            let Some((c, pure)) = hit else { continue };
            pure?;
            let seed = [a, b, c];
            let others: Vec<usize> =
                (0..m).filter(|&o| !assigned[o] && !seed.contains(&o) && self.all_correlated(o, &seed)).collect();
            let verdicts: Vec<Result<bool, StatsError>> = others.par_iter().map(|&o| self.joins(seed, o)).collect();
            let mut members = seed.to_vec();
            for (&o, verdict) in others.iter().zip(verdicts) {
                if verdict? {
                    members.push(o);
                }
            }
            members.sort_unstable();
            for &x in &members {
                assigned[x] = true;
            }
            found.push((members, seed));
        }
        Ok(found)
    }

    /// Merges clusters grown from seeds of one latent: seeds s and t belong together when
    /// {s1, s2, t1} and {s1, t1, t2} are pure triples.
    fn merge(&self, found: Vec<Found>) -> Result<Vec<Found>, StatsError> {
        let mut clusters: Vec<Option<Found>> = found.into_iter().map(Some).collect();
        for i in 0..clusters.len() {
            for j in i + 1..clusters.len() {
                let (Some((_, s)), Some((_, t))) = (&clusters[i], &clusters[j]) else {
                    continue;
                };
                let (s, t) = (*s, *t);
                if !self.all_correlated(t[0], &[s[0], s[1]]) || !self.correlated[(s[0], t[1])] {
                    continue;
                }
                if self.triple_pure([s[0], s[1], t[0]], self.crit)?
                    && self.triple_pure([s[0], t[0], t[1]], self.crit)?
                {
                    let taken = clusters[j].take().map(|(members, _)| members).unwrap_or_default();
                    if let Some((members, _)) = clusters[i].as_mut() {
                        members.extend(taken);
                        members.sort_unstable();
                    }
                }
            }
        }
        Ok(clusters.into_iter().flatten().collect())
    }
}

/// A multiplier coprime with m near 0.618 m, so consecutive visits land far apart in the pool
/// (neighbouring items often share a latent in questionnaires, and a rejection needs an item
/// from elsewhere).
fn stride_for(m: usize) -> usize {
    if m <= 2 {
        return 1;
    }
    let mut s = ((m as f64) * 0.618).round() as usize;
    s = s.clamp(1, m - 1);
    while gcd(s, m) != 1 {
        s += 1;
    }
    s
}

fn gcd(mut a: usize, mut b: usize) -> usize {
    while b != 0 {
        (a, b) = (b, a % b);
    }
    a
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testkit::{cluster_pool as pool_model, draw_normal, sample_cov};
    use rand::SeedableRng;
    use rand::seq::SliceRandom;
    use rand_chacha::ChaCha8Rng;

    // Simulation (REFERENCES.md, simulation checks; the setting of Kummerfeld & Ramsey 2016):
    // three pure clusters of five plus two cross-loading items, n = 2000. The three clusters
    // are recovered exactly and the two impure items are left unclustered; the result does not
    // depend on the order the pool is given in.
    #[test]
    fn recovers_three_pure_clusters() {
        let mut rng = ChaCha8Rng::seed_from_u64(2016);
        let sigma = pool_model(3, 5, 2, &mut rng);
        let x = draw_normal(&sigma, 2000, &mut rng);
        let tester = TetradTester::wishart(&sample_cov(&x), 2000).unwrap();
        let pool: Vec<usize> = (0..17).collect();
        let got = find_clusters(&tester, &pool, &ClusterOptions::default()).unwrap();
        assert_eq!(got.clusters, vec![vec![0, 1, 2, 3, 4], vec![5, 6, 7, 8, 9], vec![10, 11, 12, 13, 14]]);
        assert_eq!(got.unclustered, vec![15, 16]);
        let mut shuffled = pool.clone();
        shuffled.shuffle(&mut rng);
        let again = find_clusters(&tester, &shuffled, &ClusterOptions::default()).unwrap();
        assert_eq!(again, got);
    }

    fn correlated_error_case(seed: u64, delta: bool) -> Clusters {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let mut sigma = pool_model(2, 6, 0, &mut rng);
        sigma[(4, 5)] += 0.25;
        sigma[(5, 4)] += 0.25;
        let x = draw_normal(&sigma, 2000, &mut rng);
        let tester = if delta {
            // The delta test on the matrix with its distribution-free sampling covariance.
            let adf = std::sync::Arc::new(crate::acov::adf_covariances(&x).unwrap());
            TetradTester::with_sampling(&sample_cov(&x), adf).unwrap()
        } else {
            TetradTester::wishart(&sample_cov(&x), 2000).unwrap()
        };
        let pool: Vec<usize> = (0..12).collect();
        // The exact test: with loadings as low as 0.55 the error covariance of 0.25 makes
        // tetrads of about 0.08, not always significantly above the default tolerance.
        find_clusters(&tester, &pool, &ClusterOptions { tolerance: 0.0, ..ClusterOptions::default() }).unwrap()
    }

    // A correlated-error pair (items 4, 5) inside a cluster makes both items impure (each
    // breaks every triple of the other's latent), so neither is ever clustered; the rest of
    // both clusters is recovered exactly in at least 4 of 5 seeded runs (the first with the delta
    // test, the others with the Wishart test; the measured rate is
    // 96-97 % over 100 seeds, see `recovery_rate_long`).
    #[test]
    fn correlated_errors_are_left_out() {
        let mut exact = 0;
        for seed in 0..5 {
            let got = correlated_error_case(40 + seed, seed == 0);
            assert!(got.unclustered.contains(&4) && got.unclustered.contains(&5), "{got:?}");
            exact += usize::from(
                got.clusters == vec![vec![6, 7, 8, 9, 10, 11], vec![0, 1, 2, 3]] && got.unclustered == vec![4, 5],
            );
        }
        assert!(exact >= 4, "exact recovery in {exact} of 5 runs");
    }

    // Long recovery check: `cargo test --release recovery_rate_long -- --ignored --nocapture`.
    // 100 seeds of each simulated design, both tests; exact recovery must be at least 90 %.
    #[test]
    #[ignore]
    fn recovery_rate_long() {
        let reps = 100;
        for delta in [true, false] {
            let mut ok = [0usize; 2];
            for seed in 0..reps {
                let got = correlated_error_case(1000 + seed, delta);
                ok[0] += usize::from(got.clusters == vec![vec![6, 7, 8, 9, 10, 11], vec![0, 1, 2, 3]]);
                let mut rng = ChaCha8Rng::seed_from_u64(5000 + seed);
                let sigma = pool_model(3, 5, 2, &mut rng);
                let x = draw_normal(&sigma, 2000, &mut rng);
                let tester = if delta {
                    TetradTester::delta(&x).unwrap()
                } else {
                    TetradTester::wishart(&sample_cov(&x), 2000).unwrap()
                };
                let pool: Vec<usize> = (0..17).collect();
                let exact = ClusterOptions { tolerance: 0.0, ..ClusterOptions::default() };
                let got = find_clusters(&tester, &pool, &exact).unwrap();
                let truth = vec![vec![0, 1, 2, 3, 4], vec![5, 6, 7, 8, 9], vec![10, 11, 12, 13, 14]];
                ok[1] += usize::from(got.clusters == truth);
            }
            println!("delta {delta}: exact recovery {} and {} of {reps}", ok[0], ok[1]);
            assert!(ok.iter().all(|&k| k * 10 >= reps as usize * 9));
        }
    }

    /// Three correlated latents (0.6) with five indicators each (loadings 0.6-0.8), n rows.
    fn mixed_small_case(n: usize, seed: u64) -> TetradTester {
        let mut lambda = DMatrix::zeros(15, 3);
        let loadings = [0.8, 0.7, 0.6, 0.75, 0.65];
        for f in 0..3 {
            for (k, &l) in loadings.iter().enumerate() {
                lambda[(5 * f + k, f)] = l;
            }
        }
        let phi = DMatrix::from_fn(3, 3, |a, b| if a == b { 1.0 } else { 0.6 });
        let common = &lambda * &phi * lambda.transpose();
        let theta = DMatrix::from_diagonal(&nalgebra::DVector::from_fn(15, |i, _| 1.0 - common[(i, i)]));
        let sigma = crate::testkit::factor_cov(&lambda, &phi, &theta);
        let x = draw_normal(&sigma, n, &mut ChaCha8Rng::seed_from_u64(seed));
        TetradTester::wishart(&sample_cov(&x), n).unwrap()
    }

    fn mixes_latents(c: &[usize]) -> bool {
        c.iter().any(|&i| i / 5 != c[0] / 5)
    }

    // Issue 16 (simulated mixed case at small n): three correlated latents, n = 120. The exact
    // test cannot reject triples spread over the latents and returns clusters mixing them in
    // most of 10 seeded samples; with the size criterion no reported cluster mixes latents,
    // and every sample says the evidence is not enough, with an n needed above 120.
    #[test]
    fn low_power_withholds_mixed_clusters() {
        let pool: Vec<usize> = (0..15).collect();
        let (mut exact_mixed, mut withheld) = (0, 0);
        for seed in 0..10 {
            let tester = mixed_small_case(120, 1600 + seed);
            let exact =
                find_clusters(&tester, &pool, &ClusterOptions { tolerance: 0.0, ..ClusterOptions::default() }).unwrap();
            exact_mixed += usize::from(exact.clusters.iter().any(|c| mixes_latents(c)));
            let sized = find_clusters(&tester, &pool, &ClusterOptions::default()).unwrap();
            assert!(sized.clusters.iter().all(|c| !mixes_latents(c)), "seed {seed}: {sized:?}");
            assert!(sized.withheld.iter().all(|w| w.n_needed > 120 && w.detectable > 0.1), "{sized:?}");
            withheld += usize::from(sized.clusters.is_empty() && !sized.withheld.is_empty());
        }
        assert!(exact_mixed >= 6, "the exact test mixed latents in only {exact_mixed} of 10 samples");
        assert_eq!(withheld, 10);
    }

    // At n = 3000 the same design is judged: the three latents' clusters are reported, none
    // withheld.
    #[test]
    fn large_samples_report_clusters() {
        let pool: Vec<usize> = (0..15).collect();
        let tester = mixed_small_case(3000, 1700);
        let got = find_clusters(&tester, &pool, &ClusterOptions::default()).unwrap();
        assert!(got.withheld.is_empty(), "{got:?}");
        let mut clusters = got.clusters.clone();
        clusters.sort();
        assert_eq!(clusters, vec![(0..5).collect::<Vec<_>>(), (5..10).collect(), (10..15).collect()]);
    }

    // Long calibration of the withholding rule (issue 16):
    // `cargo test -p construe-stats --lib withholding_rate_long -- --ignored --nocapture`.
    // 100 samples of the three-latent design at n = 120 (no reported cluster may mix latents;
    // share of samples reporting nothing) and at n = 3000 (share reporting the three true
    // clusters, none withheld; at least 90 %). Measured: n = 120, no mixed cluster and nothing
    // reported in 100/100; n = 3000, the three clusters in 100/100.
    #[test]
    #[ignore]
    fn withholding_rate_long() {
        let pool: Vec<usize> = (0..15).collect();
        let (mut mixed_small, mut silent_small, mut exact_large) = (0, 0, 0);
        for seed in 0..100 {
            let small =
                find_clusters(&mixed_small_case(120, 20_000 + seed), &pool, &ClusterOptions::default()).unwrap();
            mixed_small += usize::from(small.clusters.iter().any(|c| mixes_latents(c)));
            silent_small += usize::from(small.clusters.is_empty());
            let large =
                find_clusters(&mixed_small_case(3000, 30_000 + seed), &pool, &ClusterOptions::default()).unwrap();
            let mut got = large.clusters.clone();
            got.sort();
            let truth: Vec<Vec<usize>> = (0..3).map(|f| (5 * f..5 * f + 5).collect()).collect();
            exact_large += usize::from(got == truth && large.withheld.is_empty());
        }
        println!(
            "n 120: mixed clusters reported in {mixed_small}/100, nothing reported in {silent_small}/100; n 3000: the three clusters in {exact_large}/100"
        );
        assert_eq!(mixed_small, 0);
        assert!(exact_large >= 90);
    }

    #[test]
    fn min_size_and_small_pools() {
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        let sigma = pool_model(3, 5, 2, &mut rng);
        let tester = TetradTester::wishart(&sigma, 2000).unwrap();
        let pool: Vec<usize> = (0..17).collect();
        let big = ClusterOptions { min_size: 6, ..ClusterOptions::default() };
        let got = find_clusters(&tester, &pool, &big).unwrap();
        assert!(got.clusters.is_empty());
        assert_eq!(got.unclustered, pool);
        let tiny = find_clusters(&tester, &[0, 1, 2], &ClusterOptions::default()).unwrap();
        assert_eq!(tiny.unclustered, vec![0, 1, 2]);
        let bad = ClusterOptions { min_size: 2, ..ClusterOptions::default() };
        assert!(find_clusters(&tester, &pool, &bad).is_err());
        assert!(find_clusters(&tester, &[0, 1, 1, 2], &ClusterOptions::default()).is_err());
        assert!(find_clusters(&tester, &[0, 1, 2, 99], &ClusterOptions::default()).is_err());
    }
}
