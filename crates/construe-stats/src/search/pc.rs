//! The PC search (Spirtes & Glymour 1991; Spirtes, Glymour & Scheines 2000, ch. 5) in its
//! order-independent "stable" form (Colombo & Maathuis 2014), with background knowledge.
//! Central function: `pc`, returning a `PcResult`: the CPDAG, each edge's orientation reason,
//! each removed adjacency with the test that removed it, and every unshielded triple's verdict.
//! Works on indices and a `CiTest` only; never chooses which test to use or reads any data.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use super::ci::{CiResult, CiTest};
use super::graph::{EdgeKind, Graph};
use super::knowledge::Knowledge;
use super::meek;
use crate::StatsError;

/// How unshielded triples a - c - b (a, b non-adjacent) are judged colliders.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum ColliderRule {
    /// Collider iff c is not in the separating set that removed a - b (Spirtes & Glymour 1991).
    /// Depends on which separating set was found first, hence on the variable order.
    Standard,
    /// Tests a and b given every subset of adj(a) and of adj(b); collider iff c is in none of
    /// the separating sets found, non-collider iff in all, else ambiguous (Ramsey, Zhang &
    /// Spirtes 2006, "conservative PC"). Costs up to 2^|adj| extra tests per triple.
    Conservative,
    /// As `Conservative`, but collider iff c is in fewer than half of the separating sets,
    /// non-collider iff in more than half, ambiguous at exactly half (Colombo & Maathuis 2014,
    /// majority rule).
    Majority,
}

/// Parameters of the search.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PcOptions {
    /// A test with p > alpha accepts the independence and removes the adjacency.
    pub alpha: f64,
    /// Largest conditioning set tried; `None` = no limit.
    pub max_cond: Option<usize>,
    /// How colliders are decided.
    pub colliders: ColliderRule,
}

impl Default for PcOptions {
    fn default() -> Self {
        PcOptions { alpha: 0.05, max_cond: None, colliders: ColliderRule::Standard }
    }
}

/// Why an edge has its direction.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum Reason {
    /// Arrowhead of an unshielded collider.
    Collider,
    /// Meek (1995) rule 1 to 4.
    Meek(u8),
    /// The tiers forbid the other direction.
    Tier,
    /// Required by the knowledge.
    Required,
    /// The other direction is explicitly forbidden.
    ForbiddenImplied,
}

/// One edge of the result: `from -> to` when `directed` (with its reason), else `from - to`
/// with `from < to`. `kind()` gives the orientation as the `EdgeKind` the rest of the project
/// compares by. (The field stays a bool while the simulation checks in `pitfalls` read it.)
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PcEdge {
    pub from: usize,
    pub to: usize,
    pub directed: bool,
    pub reason: Option<Reason>,
}

impl PcEdge {
    pub fn kind(&self) -> EdgeKind {
        EdgeKind::from_directed(self.directed)
    }
}

/// A pair the search left non-adjacent (a < b).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Removed {
    pub a: usize,
    pub b: usize,
    /// True when the knowledge forbids both directions, so the pair was never adjacent; its
    /// separating set was then looked for after the skeleton, for the collider step only.
    pub by_knowledge: bool,
    /// The conditioning set of the test that accepted independence (sorted), if any.
    pub sepset: Option<Vec<usize>>,
    /// That test.
    pub test: Option<CiResult>,
}

/// Verdict on an unshielded triple.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum TripleKind {
    Collider,
    NonCollider,
    /// No verdict (split separating sets, or no separating set found); Meek rules treat it as
    /// neither collider nor non-collider.
    Ambiguous,
}

/// An unshielded triple a - c - b (a < b, a and b non-adjacent) and its verdict.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Triple {
    pub a: usize,
    pub c: usize,
    pub b: usize,
    pub kind: TripleKind,
    /// Conservative and majority rules: (separating sets containing c, separating sets found)
    /// among the subsets of adj(a) and adj(b); `None` under the standard rule (one set read).
    pub sepsets: Option<(usize, usize)>,
}

/// Why a proposed collider orientation `from -> to` was not made.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum ConflictKind {
    /// The knowledge orients or forbids the pair the other way.
    AgainstKnowledge,
    /// Another collider wants the opposite direction; the edge is left undirected.
    CollidersDisagree,
}

/// A refused collider orientation (evidence that the tests contradict each other or the
/// knowledge; the report should show it).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Conflict {
    pub from: usize,
    pub to: usize,
    pub kind: ConflictKind,
}

/// Everything the search found.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PcResult {
    /// The estimated CPDAG (a PDAG when knowledge or conflicts are involved).
    pub graph: Graph,
    /// Its edges with reasons, sorted as `Graph::edges`.
    pub edges: Vec<PcEdge>,
    /// Every non-adjacent pair, sorted by (a, b).
    pub removed: Vec<Removed>,
    /// Every unshielded triple of the skeleton with its verdict.
    pub triples: Vec<Triple>,
    /// Collider orientations that were refused.
    pub conflicts: Vec<Conflict>,
    pub alpha: f64,
    pub max_cond: Option<usize>,
    pub colliders: ColliderRule,
    /// Number of conditional-independence tests run.
    pub tests_run: usize,
}

/// All size-k subsets of `items`, in lexicographic order of positions (also used by FCI).
pub(crate) fn combinations(items: &[usize], k: usize) -> Vec<Vec<usize>> {
    let n = items.len();
    if k > n {
        return Vec::new();
    }
    let mut out = Vec::new();
    let mut pos: Vec<usize> = (0..k).collect();
    loop {
        out.push(pos.iter().map(|&p| items[p]).collect());
        let Some(i) = (0..k).rev().find(|&i| pos[i] != i + n - k) else {
            return out;
        };
        pos[i] += 1;
        for t in (i + 1)..k {
            pos[t] = pos[t - 1] + 1;
        }
    }
}

/// The stable PC search with background knowledge.
///
/// 1. Skeleton (Colombo & Maathuis 2014, "PC-stable"): start from the complete graph minus
///    pairs the knowledge forbids both ways; at level l = 0, 1, ... freeze every node's
///    adjacency set, and for each adjacent pair test a ⊥ b | S for the size-l subsets S of
///    a's frozen adjacencies without b, removing the edge at the first p > alpha. Required
///    pairs are never tested. Stops when no pair has l candidates or at `max_cond`. Given the
///    test outcomes the skeleton does not depend on the variable order (their main result; numbering from memory).
/// 2. Knowledge: required edges are oriented as required; an adjacency whose one direction is
///    forbidden (by tiers or explicitly) gets the other.
/// 3. Colliders by `options.colliders`; all collider orientations are collected first and then
///    applied, an edge wanted both ways is left undirected and reported as a conflict, and no
///    collider overrides knowledge. With `Conservative` or `Majority` this step is also
///    order-independent (Colombo & Maathuis 2014); with `Standard` it depends on
///    which separating set was found first.
/// 4. Meek rules R1-R4 to a fixpoint, respecting the knowledge, ambiguous triples and colliders
///    whose arrowheads a conflict refused (none is read as a non-collider). For a
///    consistent PDAG the closure is unique; when sample errors make it inconsistent, the scan
///    order (ascending indices) decides, so that step is not order-independent.
///
/// With a perfect test (d-separation in a faithful DAG) the result is that DAG's CPDAG
/// (Spirtes, Glymour & Scheines 2000, ch. 5), refined by correct knowledge (Meek 1995).
/// Errors from the test (a singular covariance, too few observations) are passed on.
pub fn pc(test: &dyn CiTest, knowledge: &Knowledge, options: &PcOptions) -> Result<PcResult, StatsError> {
    let n = test.n_vars();
    if knowledge.n() != n {
        return Err(StatsError::SizeMismatch {
            what: "nodes in the knowledge for the test's variables",
            expected: n,
            found: knowledge.n(),
        });
    }
    if !(options.alpha > 0.0 && options.alpha < 1.0) {
        return Err(StatsError::InvalidInput(format!(
            "alpha must lie strictly between 0 and 1, got {}",
            options.alpha
        )));
    }
    knowledge.validate()?;
    let required_pair = |a: usize, b: usize| knowledge.is_required(a, b) || knowledge.is_required(b, a);
    let within = |l: usize| options.max_cond.is_none_or(|m| l <= m);

    let mut g = Graph::complete(n);
    let mut removed: BTreeMap<(usize, usize), Removed> = BTreeMap::new();
    for a in 0..n {
        for b in (a + 1)..n {
            if knowledge.forbids_adjacency(a, b) {
                g.remove(a, b);
                removed.insert((a, b), Removed { a, b, by_knowledge: true, sepset: None, test: None });
            }
        }
    }

    let mut tests_run = 0usize;
    let mut level = 0usize;
    while within(level) {
        let frozen: Vec<Vec<usize>> = (0..n).map(|v| g.adjacent(v)).collect();
        let mut any = false;
        for (a, adj_a) in frozen.iter().enumerate() {
            for &b in adj_a {
                if !g.is_adjacent(a, b) || required_pair(a, b) {
                    continue;
                }
                let cand: Vec<usize> = adj_a.iter().copied().filter(|&v| v != b).collect();
                if cand.len() < level {
                    continue;
                }
                any = true;
                for s in combinations(&cand, level) {
                    let t = test.test(a, b, &s)?;
                    tests_run += 1;
                    if t.p > options.alpha {
                        g.remove(a, b);
                        let (x, y) = (a.min(b), a.max(b));
                        removed.insert(
                            (x, y),
                            Removed { a: x, b: y, by_knowledge: false, sepset: Some(s), test: Some(t) },
                        );
                        break;
                    }
                }
            }
        }
        if !any {
            break;
        }
        level += 1;
    }

    // Pairs removed by knowledge still need a separating set for the collider step: Pa(a) or
    // Pa(b) separates them and lies within the final adjacencies, so searching there suffices.
    for r in removed.values_mut().filter(|r| r.by_knowledge) {
        'search: for (x, y) in [(r.a, r.b), (r.b, r.a)] {
            let cand = g.adjacent(x);
            for l in (0..=cand.len()).filter(|&l| within(l)) {
                for s in combinations(&cand, l) {
                    let t = test.test(x, y, &s)?;
                    tests_run += 1;
                    if t.p > options.alpha {
                        r.sepset = Some(s);
                        r.test = Some(t);
                        break 'search;
                    }
                }
            }
        }
    }

    let mut reasons: BTreeMap<(usize, usize), Reason> = BTreeMap::new();
    for a in 0..n {
        for b in (a + 1)..n {
            if !g.is_adjacent(a, b) {
                continue;
            }
            for (x, y) in [(a, b), (b, a)] {
                let reason = if knowledge.is_required(x, y) {
                    Some(Reason::Required)
                } else if knowledge.tier_forbids(y, x) {
                    Some(Reason::Tier)
                } else if knowledge.explicitly_forbidden(y, x) {
                    Some(Reason::ForbiddenImplied)
                } else {
                    None
                };
                if let Some(reason) = reason {
                    g.add_directed(x, y);
                    reasons.insert((x, y), reason);
                    break;
                }
            }
        }
    }

    let mut triples = Vec::new();
    for c in 0..n {
        let adj = g.adjacent(c);
        for (k, &a) in adj.iter().enumerate() {
            for &b in &adj[k + 1..] {
                if g.is_adjacent(a, b) {
                    continue;
                }
                let (kind, sepsets) = match options.colliders {
                    ColliderRule::Standard => match removed.get(&(a, b)).and_then(|r| r.sepset.as_ref()) {
                        Some(s) if s.contains(&c) => (TripleKind::NonCollider, None),
                        Some(_) => (TripleKind::Collider, None),
                        None => (TripleKind::Ambiguous, None),
                    },
                    rule => {
                        let (with_c, total) = count_sepsets(test, &g, a, b, c, options, &mut tests_run)?;
                        (judge(rule, with_c, total), Some((with_c, total)))
                    }
                };
                triples.push(Triple { a, c, b, kind, sepsets });
            }
        }
    }
    triples.sort_by_key(|t| (t.a, t.c, t.b));

    let mut proposals: BTreeMap<(usize, usize), ()> = BTreeMap::new();
    for t in triples.iter().filter(|t| t.kind == TripleKind::Collider) {
        proposals.insert((t.a, t.c), ());
        proposals.insert((t.b, t.c), ());
    }
    let mut conflicts = Vec::new();
    for &(x, y) in proposals.keys() {
        if g.is_directed(x, y) {
            continue;
        }
        if g.is_directed(y, x) || knowledge.is_forbidden(x, y) {
            conflicts.push(Conflict { from: x, to: y, kind: ConflictKind::AgainstKnowledge });
        } else if proposals.contains_key(&(y, x)) {
            conflicts.push(Conflict { from: x, to: y, kind: ConflictKind::CollidersDisagree });
        } else {
            g.add_directed(x, y);
            reasons.insert((x, y), Reason::Collider);
        }
    }

    // Meek's R1 reads an unshielded triple as a non-collider; only those judged so may be read
    // that way (a collider whose arrowheads a conflict refused is not one).
    let ambiguous: Vec<(usize, usize, usize)> =
        triples.iter().filter(|t| t.kind != TripleKind::NonCollider).map(|t| (t.a, t.c, t.b)).collect();
    for o in meek::apply(&mut g, knowledge, &ambiguous) {
        reasons.insert((o.from, o.to), Reason::Meek(o.rule));
    }

    let edges = g
        .edges()
        .into_iter()
        .map(|e| PcEdge {
            from: e.from,
            to: e.to,
            directed: e.is_directed(),
            reason: if e.is_directed() { reasons.get(&(e.from, e.to)).copied() } else { None },
        })
        .collect();
    Ok(PcResult {
        graph: g,
        edges,
        removed: removed.into_values().collect(),
        triples,
        conflicts,
        alpha: options.alpha,
        max_cond: options.max_cond,
        colliders: options.colliders,
        tests_run,
    })
}

/// Among the subsets of adj(a) \ {b} and of adj(b) \ {a} in the skeleton (up to `max_cond`,
/// each distinct set once), how many separate a and b, and how many of those contain c.
fn count_sepsets(
    test: &dyn CiTest,
    g: &Graph,
    a: usize,
    b: usize,
    c: usize,
    options: &PcOptions,
    tests_run: &mut usize,
) -> Result<(usize, usize), StatsError> {
    let mut sets: Vec<Vec<usize>> = Vec::new();
    for (x, y) in [(a, b), (b, a)] {
        let cand: Vec<usize> = g.adjacent(x).into_iter().filter(|&v| v != y).collect();
        for l in 0..=cand.len() {
            if options.max_cond.is_some_and(|m| l > m) {
                break;
            }
            sets.extend(combinations(&cand, l));
        }
    }
    sets.sort();
    sets.dedup();
    let (mut with_c, mut total) = (0, 0);
    for s in sets {
        let t = test.test(a, b, &s)?;
        *tests_run += 1;
        if t.p > options.alpha {
            total += 1;
            if s.contains(&c) {
                with_c += 1;
            }
        }
    }
    Ok((with_c, total))
}

fn judge(rule: ColliderRule, with_c: usize, total: usize) -> TripleKind {
    if total == 0 {
        return TripleKind::Ambiguous;
    }
    match rule {
        ColliderRule::Conservative | ColliderRule::Standard => {
            if with_c == 0 {
                TripleKind::Collider
            } else if with_c == total {
                TripleKind::NonCollider
            } else {
                TripleKind::Ambiguous
            }
        }
        ColliderRule::Majority => match (2 * with_c).cmp(&total) {
            std::cmp::Ordering::Less => TripleKind::Collider,
            std::cmp::Ordering::Greater => TripleKind::NonCollider,
            std::cmp::Ordering::Equal => TripleKind::Ambiguous,
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::search::ci::{DSepOracle, FisherZ};
    use crate::search::enumerate::enumerate_dags;
    use crate::search::graph::tests::random_dag;
    use crate::testkit::{linear_gaussian_cov, sample_cov_of_draws};
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    /// The five random DAGs of the oracle checks: 5 to 8 nodes, density 0.4, fixed seeds.
    fn five_dags() -> Vec<Graph> {
        (0..5u64).map(|k| random_dag(5 + (k as usize % 4), 0.4, 1000 + k)).collect()
    }

    fn run(test: &dyn CiTest, k: &Knowledge, colliders: ColliderRule) -> PcResult {
        let opts = PcOptions { alpha: 0.01, max_cond: None, colliders };
        pc(test, k, &opts).unwrap()
    }

    #[test]
    fn combinations_in_lexicographic_order() {
        assert_eq!(combinations(&[4, 7, 9], 2), vec![vec![4, 7], vec![4, 9], vec![7, 9]]);
        assert_eq!(combinations(&[1, 2], 0), vec![Vec::<usize>::new()]);
        assert!(combinations(&[1], 2).is_empty());
    }

    // With a d-separation oracle, PC returns exactly the CPDAG of the true DAG (Spirtes,
    // Glymour & Scheines 2000, ch. 5), for each collider rule.
    #[test]
    fn oracle_recovers_true_cpdag() {
        for (k, dag) in five_dags().into_iter().enumerate() {
            let truth = Graph::cpdag_of_dag(&dag);
            let oracle = DSepOracle::new(dag.clone());
            for rule in [ColliderRule::Standard, ColliderRule::Conservative, ColliderRule::Majority] {
                let r = run(&oracle, &Knowledge::new(dag.n()), rule);
                assert_eq!(r.graph, truth, "dag {k} rule {rule:?}");
                assert!(r.conflicts.is_empty());
            }
            let r = run(&oracle, &Knowledge::new(dag.n()), ColliderRule::Standard);
            // every removed pair carries the test that removed it, and is d-separated by it
            for rem in &r.removed {
                let s = rem.sepset.as_ref().unwrap();
                assert!(dag.d_separated(rem.a, rem.b, s));
                assert_eq!(rem.test.unwrap().p, 1.0);
            }
            // every directed edge has a reason from the data, none from knowledge
            for e in r.edges.iter().filter(|e| e.directed) {
                assert!(matches!(e.reason, Some(Reason::Collider | Reason::Meek(_))), "{e:?}");
            }
        }
    }

    // The population covariance of a linear Gaussian model is faithful to its DAG for generic
    // coefficients (Spirtes, Glymour & Scheines 2000, ch. 3; Meek 1995b), so Fisher-z at a huge n
    // (n = 1e10: an exact-zero partial gives z ~ 1e-6, a partial of 1e-3 gives z ~ 100) acts as
    // an oracle.
    #[test]
    fn population_covariance_recovers_true_cpdag() {
        for (k, dag) in five_dags().into_iter().enumerate() {
            let sigma = linear_gaussian_cov(&dag, 77 + k as u64);
            let fz = FisherZ::new(sigma, 1e10).unwrap();
            let r = run(&fz, &Knowledge::new(dag.n()), ColliderRule::Standard);
            assert_eq!(r.graph, Graph::cpdag_of_dag(&dag), "dag {k}");
        }
    }

    // One tier per node in a topological order orients every adjacency, so the output is the
    // true DAG itself with every reason `Tier` (Meek 1995: knowledge refines the class).
    #[test]
    fn tiers_ordering_every_edge_give_the_true_dag() {
        for dag in five_dags() {
            let order = dag.topological_order().unwrap();
            let mut k = Knowledge::new(dag.n());
            k.set_tiers(&order.iter().map(|&v| vec![v]).collect::<Vec<_>>()).unwrap();
            let sigma = linear_gaussian_cov(&dag, 5);
            for test in [
                Box::new(DSepOracle::new(dag.clone())) as Box<dyn CiTest>,
                Box::new(FisherZ::new(sigma, 1e10).unwrap()),
            ] {
                let r = run(test.as_ref(), &k, ColliderRule::Standard);
                assert_eq!(r.graph, dag);
                assert!(r.edges.iter().all(|e| e.reason == Some(Reason::Tier)));
            }
        }
    }

    // Chain 0 -> 1 -> 2 -> 3 with an oracle: the CPDAG is fully undirected. Knowledge changes it
    // as follows (hand-derived): forbidding 1 -> 0 orients 0 -> 1 (ForbiddenImplied) and Meek R1
    // then orients 1 -> 2 -> 3; forbidding both 2 -> 3 and 3 -> 2 removes that true adjacency;
    // requiring 0 -> 3 keeps a pair the oracle separates and orients it.
    #[test]
    fn knowledge_is_respected() {
        let dag = Graph::from_directed(4, &[(0, 1), (1, 2), (2, 3)]);
        let oracle = DSepOracle::new(dag.clone());
        let plain = run(&oracle, &Knowledge::new(4), ColliderRule::Standard);
        assert!(plain.graph.is_undirected(0, 1) && plain.graph.is_undirected(2, 3));

        let mut k = Knowledge::new(4);
        k.forbid(1, 0).unwrap();
        let r = run(&oracle, &k, ColliderRule::Standard);
        assert_eq!(r.graph, dag);
        assert_eq!(r.edges[0].reason, Some(Reason::ForbiddenImplied));
        assert!(r.edges[1..].iter().all(|e| e.reason == Some(Reason::Meek(1))));

        let mut k = Knowledge::new(4);
        k.forbid(2, 3).unwrap();
        k.forbid(3, 2).unwrap();
        let r = run(&oracle, &k, ColliderRule::Standard);
        assert!(!r.graph.is_adjacent(2, 3));
        let rem = r.removed.iter().find(|x| (x.a, x.b) == (2, 3)).unwrap();
        assert!(rem.by_knowledge && rem.sepset.is_none());

        let mut k = Knowledge::new(4);
        k.require(0, 3).unwrap();
        let r = run(&oracle, &k, ColliderRule::Standard);
        assert!(r.graph.is_directed(0, 3));
        let e = r.edges.iter().find(|e| (e.from, e.to) == (0, 3)).unwrap();
        assert_eq!(e.reason, Some(Reason::Required));
        assert!(r.removed.iter().all(|x| (x.a, x.b) != (0, 3)));
    }

    // Tiers plus a forbid across them can exclude an adjacency completely (both directions
    // forbidden), and a required edge the tiers allow is oriented even where the class would
    // leave it undirected.
    #[test]
    fn tiers_and_forbid_combine() {
        let dag = Graph::from_directed(3, &[(0, 1), (1, 2)]);
        let oracle = DSepOracle::new(dag);
        let mut k = Knowledge::new(3);
        k.set_tiers(&[vec![0], vec![1]]).unwrap();
        k.forbid(0, 1).unwrap();
        let r = run(&oracle, &k, ColliderRule::Standard);
        assert!(!r.graph.is_adjacent(0, 1));
        assert!(r.graph.is_undirected(1, 2));
        let mut k = Knowledge::new(3);
        k.require(2, 1).unwrap();
        let r = run(&oracle, &k, ColliderRule::Standard);
        assert!(r.graph.is_directed(2, 1) && r.graph.is_directed(1, 0));
        assert_eq!(r.edges.iter().find(|e| e.from == 1).unwrap().reason, Some(Reason::Meek(1)));
    }

    // A knowledge-removed pair whose separating set exists still yields its collider:
    // 0 -> 2 <- 1 with 0 - 1 forbidden both ways is oriented as the collider.
    #[test]
    fn knowledge_removed_pair_still_finds_its_collider() {
        let dag = Graph::from_directed(3, &[(0, 2), (1, 2)]);
        let mut k = Knowledge::new(3);
        k.forbid(0, 1).unwrap();
        k.forbid(1, 0).unwrap();
        let r = run(&DSepOracle::new(dag.clone()), &k, ColliderRule::Standard);
        assert_eq!(r.graph, dag);
        assert_eq!(r.removed[0].sepset, Some(vec![]));
    }

    /// A test on relabelled variables: variable v of the wrapper is variable perm[v] inside.
    struct Relabelled<'a> {
        inner: &'a dyn CiTest,
        perm: Vec<usize>,
    }

    impl CiTest for Relabelled<'_> {
        fn n_vars(&self) -> usize {
            self.inner.n_vars()
        }
        fn test(&self, i: usize, j: usize, s: &[usize]) -> Result<CiResult, StatsError> {
            let mut s: Vec<usize> = s.iter().map(|&v| self.perm[v]).collect();
            s.sort_unstable();
            self.inner.test(self.perm[i], self.perm[j], &s)
        }
    }

    // On a finite sample (where tests err) the stable skeleton and the conservative triple
    // verdicts do not depend on the variable order (Colombo & Maathuis 2014).
    #[test]
    fn stable_skeleton_is_order_independent() {
        let dag = random_dag(8, 0.35, 4242);
        let sigma = linear_gaussian_cov(&dag, 4243);
        let mut rng = ChaCha8Rng::seed_from_u64(4244);
        let s = sample_cov_of_draws(&sigma, 120, &mut rng);
        let fz = FisherZ::new(s, 120.0).unwrap();
        let base = run(&fz, &Knowledge::new(8), ColliderRule::Conservative);
        for perm in [vec![7, 6, 5, 4, 3, 2, 1, 0], vec![3, 0, 6, 1, 7, 2, 5, 4]] {
            let rel = Relabelled { inner: &fz, perm: perm.clone() };
            let r = run(&rel, &Knowledge::new(8), ColliderRule::Conservative);
            for a in 0..8 {
                for b in 0..8 {
                    assert_eq!(r.graph.is_adjacent(a, b), base.graph.is_adjacent(perm[a], perm[b]));
                }
            }
            let mut mapped: Vec<(usize, usize, usize, TripleKind)> = r
                .triples
                .iter()
                .map(|t| {
                    let (x, y) = (perm[t.a].min(perm[t.b]), perm[t.a].max(perm[t.b]));
                    (x, perm[t.c], y, t.kind)
                })
                .collect();
            mapped.sort_by_key(|t| (t.0, t.1, t.2));
            let want: Vec<_> = base.triples.iter().map(|t| (t.a, t.c, t.b, t.kind)).collect();
            assert_eq!(mapped, want);
        }
    }

    #[test]
    fn max_cond_limits_the_levels() {
        // 0 and 3 are separated only by {1, 2}: with max_cond = 1 the pair stays adjacent
        let dag = Graph::from_directed(4, &[(0, 1), (0, 2), (1, 3), (2, 3)]);
        let oracle = DSepOracle::new(dag);
        let opts = PcOptions { alpha: 0.05, max_cond: Some(1), colliders: ColliderRule::Standard };
        let r = pc(&oracle, &Knowledge::new(4), &opts).unwrap();
        assert!(r.graph.is_adjacent(0, 3));
        let opts = PcOptions { max_cond: Some(2), ..opts };
        let r = pc(&oracle, &Knowledge::new(4), &opts).unwrap();
        assert!(!r.graph.is_adjacent(0, 3));
        assert_eq!(r.removed[0].sepset, Some(vec![1, 2]));
    }

    #[test]
    fn bad_options_are_rejected() {
        let oracle = DSepOracle::new(Graph::new(3));
        let opts = PcOptions { alpha: 1.5, ..PcOptions::default() };
        assert!(pc(&oracle, &Knowledge::new(3), &opts).is_err());
        assert_eq!(
            pc(&oracle, &Knowledge::new(4), &PcOptions::default()).unwrap_err(),
            StatsError::SizeMismatch { what: "nodes in the knowledge for the test's variables", expected: 3, found: 4 }
        );
        assert!(matches!(
            enumerate_dags(&Graph::new(3), &Knowledge::new(2), 4),
            Err(StatsError::SizeMismatch { expected: 3, found: 2, .. })
        ));
    }
}
