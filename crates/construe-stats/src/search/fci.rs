//! The FCI search, which allows unmeasured common causes of the variables (Spirtes, Meek &
//! Richardson 1995; Spirtes, Glymour & Scheines 2000, ch. 6), with the complete orientation
//! rules of Zhang (2008) and background knowledge. Central function: `fci`, returning an
//! `FciResult` whose graph is a PAG (`pag::Pag`). The rules themselves live in `fci_rules`.
//! Works on indices and a `CiTest` only, like `pc`; never reads data or chooses alpha.
//! Also owns `HiddenDSepOracle`, d-separation among the observed nodes of a DAG with hidden ones.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use super::ci::{CiResult, CiTest};
use super::fci_rules::{Orienter, possible_d_sep};
use super::graph::Graph;
use super::knowledge::Knowledge;
use super::pag::{Mark, Pag, PagEdge};
use super::pc::combinations;
use crate::StatsError;

/// Parameters of the search.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct FciOptions {
    /// A test with p > alpha accepts the independence and removes the adjacency.
    pub alpha: f64,
    /// Largest conditioning set tried, in both stages; `None` = no limit.
    pub max_cond: Option<usize>,
    /// Run the Possible-D-SEP stage (true for FCI; false gives the cheaper skeleton of PC).
    pub possible_dsep: bool,
    /// Allow selection bias: apply Zhang's rules R5-R7, which only selection can trigger in
    /// the population (they need undirected edges). Off by default: on sample data they would
    /// read a chance chordless cycle of circles as selection into the sample.
    pub selection_bias: bool,
}

impl Default for FciOptions {
    fn default() -> Self {
        FciOptions { alpha: 0.05, max_cond: None, possible_dsep: true, selection_bias: false }
    }
}

/// Which stage of the search removed an adjacency.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Stage {
    /// Subsets of the current adjacencies (the PC-stable skeleton).
    Adjacency,
    /// Subsets of a node's Possible-D-SEP set.
    PossibleDSep,
}

/// A pair the search left non-adjacent (a < b), with the test that separated them.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FciRemoved {
    pub a: usize,
    pub b: usize,
    /// The conditioning set of that test, sorted.
    pub sepset: Vec<usize>,
    pub test: CiResult,
    pub stage: Stage,
}

/// Why an edge end got its mark.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum MarkReason {
    /// Arrowhead of an unshielded collider (Zhang 2008, R0).
    Collider,
    /// Zhang (2008) orientation rule 1 to 10.
    Rule(u8),
    /// Arrowhead at the later of two tiers: a later construct never causes an earlier one.
    Tier,
    /// Tail and arrowhead of a required edge.
    Required,
    /// Arrowhead at `a` for a forbidden edge a -> b.
    Forbidden,
}

/// One mark set by the search: the mark at `at` on the edge between `other` and `at`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct MarkSet {
    pub other: usize,
    pub at: usize,
    pub mark: Mark,
    pub reason: MarkReason,
}

/// A mark a rule wanted to set where another mark was already fixed (sample errors, or data
/// against the knowledge); the earlier mark is kept.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct MarkConflict {
    pub other: usize,
    pub at: usize,
    pub wanted: Mark,
    pub kept: Mark,
    pub reason: MarkReason,
}

/// An unshielded triple a *-* c *-* b (a < b non-adjacent) of the final skeleton and whether
/// c is a collider on it (c not in the separating set of a and b).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct FciTriple {
    pub a: usize,
    pub c: usize,
    pub b: usize,
    pub collider: bool,
}

/// Everything the search found.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FciResult {
    /// The estimated PAG.
    pub pag: Pag,
    /// Its edges, as `Pag::edges` writes them.
    pub edges: Vec<PagEdge>,
    /// Every non-adjacent pair, sorted by (a, b).
    pub removed: Vec<FciRemoved>,
    /// The unshielded triples of the final skeleton, sorted by (a, c, b).
    pub triples: Vec<FciTriple>,
    /// Every non-circle mark with its reason, in the order set.
    pub marks: Vec<MarkSet>,
    /// Marks refused because another was already fixed.
    pub conflicts: Vec<MarkConflict>,
    pub alpha: f64,
    pub max_cond: Option<usize>,
    /// Number of conditional-independence tests run.
    pub tests_run: usize,
}

/// The FCI search with background knowledge.
///
/// 1. Adjacencies as in stable PC (Colombo & Maathuis 2014): from the complete graph, level by
///    level, remove a *-* b at the first p > alpha over subsets of a's frozen adjacencies.
///    Required pairs are never tested. Unlike PC, a pair the knowledge forbids both ways is
///    kept: with hidden variables it may still be joined (a <-> b, a hidden common cause).
/// 2. Possible-D-SEP (Spirtes, Meek & Richardson 1995; Spirtes, Glymour & Scheines 2000,
///    section 6.7): orient the unshielded colliders of that skeleton, compute every node's
///    Possible-D-SEP set on it, and test each remaining pair given the subsets of either
///    endpoint's set (stable: all sets are computed before any removal).
/// 3. Reset every mark to a circle; set the marks the knowledge implies (below); orient the
///    unshielded colliders (R0); then Zhang's (2008) rules R1-R4 to exhaustion, then R5-R10
///    (R5-R7 only with `selection_bias`) with R1-R4 until none applies. A rule only ever turns a circle into a tail or arrowhead;
///    a rule that would change a fixed mark is recorded as a `MarkConflict`.
///
/// Knowledge as marks (`MarkReason`): a tier later than another says the later construct is
/// not a cause of the earlier, so on an edge between them the mark at the later one is an
///    arrowhead (earlier *-> later); the earlier one keeps a circle unless the data settle it.
/// A required edge a -> b gives a tail at a and an arrowhead at b, and keeps the pair adjacent.
/// A forbidden edge a -> b, read as "a does not cause b along this edge", gives an arrowhead
/// at a when the two are adjacent (b *-> a, or a <-> b when forbidden both ways). With correct
/// knowledge these marks hold in the true PAG's ancestral graph, so the rules stay sound; the
/// rules are proved complete only without knowledge (Zhang 2008).
///
/// With a perfect test (d-separation among the observed nodes of a DAG with hidden nodes and
/// no selection) and no knowledge, the result is the PAG of that DAG (Zhang 2008, theorems on
/// arrowhead and tail completeness; numbering not restated here).
pub fn fci(test: &dyn CiTest, knowledge: &Knowledge, options: &FciOptions) -> Result<FciResult, StatsError> {
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

    let mut g = Pag::complete(n);
    let mut removed: BTreeMap<(usize, usize), FciRemoved> = BTreeMap::new();
    let mut tests_run = 0usize;

    // 1. adjacency stage (stable PC)
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
                        removed.insert((x, y), FciRemoved { a: x, b: y, sepset: s, test: t, stage: Stage::Adjacency });
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

    // 2. Possible-D-SEP stage
    if options.possible_dsep {
        let mut oriented = g.clone();
        orient_colliders(&mut oriented, &removed);
        let pds: Vec<Vec<usize>> = (0..n).map(|v| possible_d_sep(&oriented, v)).collect();
        for a in 0..n {
            for b in (a + 1)..n {
                if !g.is_adjacent(a, b) || required_pair(a, b) {
                    continue;
                }
                'pair: for (x, y) in [(a, b), (b, a)] {
                    let cand: Vec<usize> = pds[x].iter().copied().filter(|&v| v != y).collect();
                    for l in (0..=cand.len()).filter(|&l| within(l)) {
                        for s in combinations(&cand, l) {
                            let t = test.test(a, b, &s)?;
                            tests_run += 1;
                            if t.p > options.alpha {
                                g.remove(a, b);
                                removed.insert(
                                    (a, b),
                                    FciRemoved { a, b, sepset: s, test: t, stage: Stage::PossibleDSep },
                                );
                                break 'pair;
                            }
                        }
                    }
                }
            }
        }
    }

    // 3. orientation on the final skeleton, every mark a circle again
    let sepsets: BTreeMap<(usize, usize), Vec<usize>> = removed.iter().map(|(&k, r)| (k, r.sepset.clone())).collect();
    let mut o = Orienter::new(g, sepsets, options.selection_bias);
    for a in 0..n {
        for b in 0..n {
            if a == b || !o.g.is_adjacent(a, b) {
                continue;
            }
            if knowledge.is_required(a, b) {
                o.fix(a, b, Mark::Arrow, MarkReason::Required);
                o.fix(b, a, Mark::Tail, MarkReason::Required);
            }
        }
    }
    for a in 0..n {
        for b in 0..n {
            if a == b || !o.g.is_adjacent(a, b) {
                continue;
            }
            // mark at b: arrowhead when b is in a later tier than a, or b -> a is forbidden
            if knowledge.tier_forbids(b, a) {
                o.fix(a, b, Mark::Arrow, MarkReason::Tier);
            } else if knowledge.explicitly_forbidden(b, a) {
                o.fix(a, b, Mark::Arrow, MarkReason::Forbidden);
            }
        }
    }
    let triples = o.colliders();
    o.close();

    let Orienter { g, marks, conflicts, .. } = o;
    Ok(FciResult {
        edges: g.edges(),
        pag: g,
        removed: removed.into_values().collect(),
        triples,
        marks,
        conflicts,
        alpha: options.alpha,
        max_cond: options.max_cond,
        tests_run,
    })
}

/// R0 without bookkeeping, for the Possible-D-SEP stage: arrowheads at c for every unshielded
/// a *-* c *-* b whose separating set lacks c.
fn orient_colliders(g: &mut Pag, removed: &BTreeMap<(usize, usize), FciRemoved>) {
    let n = g.n();
    for c in 0..n {
        let adj = g.adjacent(c);
        for (k, &a) in adj.iter().enumerate() {
            for &b in &adj[k + 1..] {
                if g.is_adjacent(a, b) {
                    continue;
                }
                if removed.get(&(a.min(b), a.max(b))).is_some_and(|r| !r.sepset.contains(&c)) {
                    g.set_mark(a, c, Mark::Arrow);
                    g.set_mark(b, c, Mark::Arrow);
                }
            }
        }
    }
}

/// A perfect test from d-separation among the observed nodes of a DAG whose other nodes are
/// hidden (latent common causes; no selection variables): variable i of the test is node
/// `observed[i]` of the DAG, and the hidden nodes are marginalized by never conditioning on
/// them (Pearl 1988 for d-separation; Richardson & Spirtes 2002 for the marginal independence
/// model). p = 1 when d-separated, else p = 0, as `DSepOracle`.
#[derive(Debug, Clone)]
pub struct HiddenDSepOracle {
    dag: Graph,
    observed: Vec<usize>,
}

impl HiddenDSepOracle {
    /// An oracle over the nodes `observed` of `dag` (distinct, each below `dag.n()`).
    pub fn new(dag: Graph, observed: Vec<usize>) -> Result<HiddenDSepOracle, StatsError> {
        let mut sorted = observed.clone();
        sorted.sort_unstable();
        sorted.dedup();
        if sorted.len() != observed.len() || observed.iter().any(|&v| v >= dag.n()) {
            return Err(StatsError::InvalidInput(format!(
                "observed nodes {observed:?} must be distinct nodes of a {}-node graph",
                dag.n()
            )));
        }
        Ok(HiddenDSepOracle { dag, observed })
    }

    /// The oracle of `dag` with every node observed except `hidden`, in ascending order.
    pub fn hiding(dag: Graph, hidden: &[usize]) -> HiddenDSepOracle {
        let observed = (0..dag.n()).filter(|v| !hidden.contains(v)).collect();
        HiddenDSepOracle { dag, observed }
    }
}

impl CiTest for HiddenDSepOracle {
    fn n_vars(&self) -> usize {
        self.observed.len()
    }

    fn test(&self, i: usize, j: usize, s: &[usize]) -> Result<CiResult, StatsError> {
        let m = self.observed.len();
        if i == j || i >= m || j >= m || s.iter().any(|&k| k >= m || k == i || k == j) {
            return Err(StatsError::InvalidInput(format!(
                "conditional-independence test of {i} and {j} given {s:?} over {m} variables"
            )));
        }
        let z: Vec<usize> = s.iter().map(|&k| self.observed[k]).collect();
        let sep = self.dag.d_separated(self.observed[i], self.observed[j], &z);
        let v = if sep { 0.0 } else { 1.0 };
        Ok(CiResult { stat: v, p: 1.0 - v, partial: v })
    }
}

#[cfg(test)]
#[path = "fci_tests.rs"]
mod tests;
