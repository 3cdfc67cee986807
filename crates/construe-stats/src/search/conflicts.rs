//! Unshielded triples whose marks conflict, read off a finished PC search. Central function:
//! `triple_conflicts`. A conflict is evidence that the tests contradict each other (or the
//! knowledge): no DAG faithful to the test results exists, so some orientation had to give way.
//! Kinds:
//! - a collider whose arrowhead another collider (or the knowledge) refused; the edge is left
//!   as the other side or the knowledge wants (`pc::ConflictKind`);
//! - a triple judged a non-collider (c separated a and b) that nonetheless ends with both
//!   arrowheads into c, put there by other triples, the knowledge or Meek's rules;
//! - a triple whose separating sets disagree about c (conservative and majority rules only:
//!   some contain c and some do not; Ramsey, Zhang & Spirtes 2006 call it unfaithful). The
//!   conservative rule leaves it unoriented, the majority rule follows the larger share
//!   (Colombo & Maathuis 2014).

use serde::{Deserialize, Serialize};

use super::pc::{ConflictKind, PcResult, TripleKind};

/// What is contradictory about a triple.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum TripleConflictKind {
    /// A collider a -> c <- b whose arrowhead on `(from, to)` was refused because another
    /// collider wants `to -> from`; that edge is left undirected.
    CollidersDisagree { from: usize, to: usize },
    /// A collider whose arrowhead on `(from, to)` the knowledge refuses.
    AgainstKnowledge { from: usize, to: usize },
    /// A non-collider with both arrowheads into c in the final graph.
    NonColliderOriented,
    /// `with_c` of the `total` separating sets found contain c.
    SepsetsDisagree { with_c: usize, total: usize },
}

/// One conflicting triple a - c - b (a < b) and the verdict the rule reached on it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct TripleConflict {
    pub a: usize,
    pub c: usize,
    pub b: usize,
    /// The triple's verdict under the search's rule.
    pub verdict: TripleKind,
    pub kind: TripleConflictKind,
}

impl TripleConflict {
    /// The edges whose marks are contested: the refused one, or both edges of the triple.
    pub fn edges(&self) -> Vec<(usize, usize)> {
        match self.kind {
            TripleConflictKind::CollidersDisagree { from, to } | TripleConflictKind::AgainstKnowledge { from, to } => {
                vec![(from, to)]
            }
            _ => vec![(self.a, self.c), (self.b, self.c)],
        }
    }
}

/// Every conflicting triple of `result`, ordered by (a, c, b) and kind; a triple conflicting
/// in two ways appears twice.
pub fn triple_conflicts(result: &PcResult) -> Vec<TripleConflict> {
    let mut out = Vec::new();
    for t in &result.triples {
        let record = |kind| TripleConflict { a: t.a, c: t.c, b: t.b, verdict: t.kind, kind };
        if t.kind == TripleKind::Collider {
            for from in [t.a, t.b] {
                for k in result.conflicts.iter().filter(|k| k.from == from && k.to == t.c) {
                    out.push(record(match k.kind {
                        ConflictKind::CollidersDisagree => TripleConflictKind::CollidersDisagree { from, to: t.c },
                        ConflictKind::AgainstKnowledge => TripleConflictKind::AgainstKnowledge { from, to: t.c },
                    }));
                }
            }
        }
        if t.kind == TripleKind::NonCollider && result.graph.is_directed(t.a, t.c) && result.graph.is_directed(t.b, t.c)
        {
            out.push(record(TripleConflictKind::NonColliderOriented));
        }
        if let Some((with_c, total)) = t.sepsets
            && with_c > 0
            && with_c < total
        {
            out.push(record(TripleConflictKind::SepsetsDisagree { with_c, total }));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use std::collections::BTreeSet;

    use super::*;
    use crate::StatsError;
    use crate::search::ci::{CiResult, CiTest, FisherZ};
    use crate::search::graph::Graph;
    use crate::search::graph::tests::random_dag;
    use crate::search::knowledge::Knowledge;
    use crate::search::pc::{ColliderRule, PcOptions, pc};
    use crate::testkit::{linear_gaussian_cov, sample_cov_of_draws};
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    /// A CI oracle from a list of independences: (i, j, S) is independent iff listed (order of
    /// i, j and of S free). Faithful to no DAG when the list says so.
    struct Listed(usize, BTreeSet<(usize, usize, Vec<usize>)>);

    impl Listed {
        fn new(n: usize, independences: &[(usize, usize, &[usize])]) -> Self {
            let mut set = BTreeSet::new();
            for &(i, j, s) in independences {
                let mut s = s.to_vec();
                s.sort_unstable();
                set.insert((i.min(j), i.max(j), s));
            }
            Listed(n, set)
        }
    }

    impl CiTest for Listed {
        fn n_vars(&self) -> usize {
            self.0
        }

        fn test(&self, i: usize, j: usize, s: &[usize]) -> Result<CiResult, StatsError> {
            let mut s = s.to_vec();
            s.sort_unstable();
            let ind = self.1.contains(&(i.min(j), i.max(j), s));
            Ok(CiResult { stat: 0.0, p: if ind { 1.0 } else { 0.0 }, partial: 0.0 })
        }
    }

    // The constructed conflict (nodes A = 0, B = 1, C = 2, D = 3; skeleton A - B - C - D):
    // A ⊥ C given {} and {D} but not given any set holding B, so A - B - C is a collider under
    // every rule; B ⊥ D given {}, {A} and {A, C}: C lies in 1 of the 3 separating sets. A ⊥ D
    // given {}. Standard (the first separating set, {}): B - C - D is a collider too and wants
    // B -> C while A - B - C wants C -> B: B - C is left undirected, A -> B and D -> C kept.
    // Majority (1 of 3 below half): the same colliders and the same refusal, plus the split
    // separating sets. Conservative: B - C - D has no verdict (the split is reported), so
    // A -> B <- C stands and C - D stays undirected.
    #[test]
    fn constructed_conflict_is_reported_under_every_rule_and_resolved_by_it() {
        let oracle = Listed::new(
            4,
            &[(0, 2, &[]), (0, 2, &[3]), (1, 3, &[]), (1, 3, &[0]), (1, 3, &[0, 2]), (0, 3, &[]), (0, 3, &[1])],
        );
        let k = Knowledge::new(4);
        let run = |rule| pc(&oracle, &k, &PcOptions { alpha: 0.05, max_cond: None, colliders: rule }).unwrap();
        let disagree = |from, to, a, c, b| TripleConflict {
            a,
            c,
            b,
            verdict: TripleKind::Collider,
            kind: TripleConflictKind::CollidersDisagree { from, to },
        };
        for rule in [ColliderRule::Standard, ColliderRule::Majority, ColliderRule::Conservative] {
            let r = run(rule);
            let found = triple_conflicts(&r);
            assert!(!found.is_empty(), "{rule:?}: no conflict reported");
            let g = &r.graph;
            assert!(g.is_directed(0, 1), "{rule:?}: A -> B");
            match rule {
                ColliderRule::Conservative => {
                    assert!(g.is_directed(2, 1), "C -> B");
                    assert!(g.is_adjacent(2, 3) && !g.is_directed(2, 3) && !g.is_directed(3, 2), "C - D");
                    assert_eq!(
                        found,
                        vec![TripleConflict {
                            a: 1,
                            c: 2,
                            b: 3,
                            verdict: TripleKind::Ambiguous,
                            kind: TripleConflictKind::SepsetsDisagree { with_c: 1, total: 3 },
                        }]
                    );
                }
                _ => {
                    assert!(g.is_directed(3, 2), "{rule:?}: D -> C");
                    assert!(!g.is_directed(1, 2) && !g.is_directed(2, 1), "{rule:?}: B - C undirected");
                    let mut want = vec![disagree(2, 1, 0, 1, 2), disagree(1, 2, 1, 2, 3)];
                    if rule == ColliderRule::Majority {
                        want.push(TripleConflict {
                            a: 1,
                            c: 2,
                            b: 3,
                            verdict: TripleKind::Collider,
                            kind: TripleConflictKind::SepsetsDisagree { with_c: 1, total: 3 },
                        });
                    }
                    assert_eq!(found, want, "{rule:?}");
                }
            }
        }
    }

    // A faithful oracle has no conflicts.
    #[test]
    fn faithful_oracle_has_no_conflicts() {
        for seed in 0..6u64 {
            let dag = random_dag(6, 0.4, 500 + seed);
            let oracle = crate::search::ci::DSepOracle::new(dag);
            for rule in [ColliderRule::Standard, ColliderRule::Majority, ColliderRule::Conservative] {
                let r = pc(&oracle, &Knowledge::new(6), &PcOptions { alpha: 0.05, max_cond: None, colliders: rule })
                    .unwrap();
                assert!(triple_conflicts(&r).is_empty(), "seed {seed} {rule:?}");
            }
        }
    }

    /// Orientation errors of each rule against the true CPDAG, over `graphs` random DAGs (6 to
    /// 8 nodes, density 0.35) with n draws each, Fisher-z tests at 0.05: among edges whose
    /// adjacency is right, the share whose mark (a -> b, a <- b, a - b) differs from the
    /// truth; and the share of estimated arrowheads that are wrong (not in the true CPDAG).
    fn orientation_errors(graphs: u64, n: usize, seed: u64) -> Vec<(ColliderRule, f64, f64)> {
        let rules = [ColliderRule::Standard, ColliderRule::Conservative, ColliderRule::Majority];
        let mut counts = [(0usize, 0usize, 0usize, 0usize); 3];
        for gi in 0..graphs {
            let dag = random_dag(6 + (gi as usize % 3), 0.35, seed + gi);
            let truth = Graph::cpdag_of_dag(&dag);
            let sigma = linear_gaussian_cov(&dag, seed + 7 * gi);
            let mut rng = ChaCha8Rng::seed_from_u64(seed + 13 * gi);
            let s = sample_cov_of_draws(&sigma, n, &mut rng);
            let test = FisherZ::new(s, n as f64).unwrap();
            let k = Knowledge::new(dag.n());
            for (r, &rule) in rules.iter().enumerate() {
                let g = pc(&test, &k, &PcOptions { alpha: 0.05, max_cond: None, colliders: rule }).unwrap().graph;
                for e in g.edges() {
                    let (a, b) = (e.from, e.to);
                    if e.is_directed() {
                        counts[r].2 += 1;
                        counts[r].3 += usize::from(!truth.is_directed(a, b));
                    }
                    if !truth.is_adjacent(a, b) {
                        continue;
                    }
                    let mark = |h: &Graph| (h.is_directed(a, b), h.is_directed(b, a));
                    counts[r].0 += 1;
                    counts[r].1 += usize::from(mark(&g) != mark(&truth));
                }
            }
        }
        rules
            .iter()
            .zip(counts)
            .map(|(&rule, (edges, wrong, heads, bad))| {
                (rule, wrong as f64 / edges.max(1) as f64, bad as f64 / heads.max(1) as f64)
            })
            .collect()
    }

    // Short calibration of the collider rules at small n (the default, conservative, chosen for
    // robustness): over 60 graphs at n = 150 its arrowheads are wrong at least 5 points less
    // often than the standard rule's, and majority's marks are no worse than standard's.
    #[test]
    fn conservative_arrowheads_beat_standard_short() {
        let e = orientation_errors(60, 150, 7_000);
        let (standard, conservative) = (e[0].2, e[1].2);
        assert!(conservative + 0.05 <= standard, "wrong arrowheads: conservative {conservative}, standard {standard}");
        assert!(e[2].1 <= e[0].1, "wrong marks: majority {}, standard {}", e[2].1, e[0].1);
    }

    // Long calibration: 400 graphs at n = 100, 300 and 1,000; prints each rule's mark error
    // rate and wrong-arrowhead share. Measured (seed 70,000): wrong arrowheads standard 0.456 /
    // 0.383 / 0.310, conservative 0.247 / 0.248 / 0.192, majority 0.271 / 0.254 / 0.199; wrong
    // marks standard 0.422 / 0.357 / 0.290, conservative 0.327 / 0.268 / 0.205, majority
    // 0.306 / 0.259 / 0.198. Asserts the ordering at every n.
    // cargo test --release -p construe-stats collider_rules_long -- --ignored --nocapture
    #[test]
    #[ignore]
    fn collider_rules_long() {
        for n in [100, 300, 1000] {
            for (rule, marks, heads) in orientation_errors(400, n, 70_000) {
                println!("n = {n}: {rule:?}: marks wrong {marks:.3}, arrowheads wrong {heads:.3}");
            }
            let e = orientation_errors(400, n, 70_000);
            assert!(e[1].2 < e[0].2 && e[2].2 < e[0].2, "n = {n}: {e:?}");
        }
    }
}
