//! Enumeration of the DAGs a PDAG stands for that agree with the background knowledge, so a
//! later step can fit each member. Central type: `Enumeration` (the members, and whether the
//! cap cut the list short). A member keeps every directed edge and the skeleton, adds no
//! v-structure, has no cycle, uses no forbidden edge and contains every required one.
//! Never returns more than the cap; never returns a graph that fails those checks.

use serde::{Deserialize, Serialize};

use super::graph::Graph;
use super::knowledge::Knowledge;
use super::meek;
use crate::StatsError;

/// The DAGs found, in a fixed order, and whether they are all of them.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Enumeration {
    pub dags: Vec<Graph>,
    /// False when the cap was reached while more members remained.
    pub complete: bool,
}

/// The consistent extensions of `pdag` (Dor & Tarsi 1992: same skeleton, same directed edges,
/// same v-structures, acyclic) that also satisfy `knowledge`, at most `cap` of them.
///
/// Branches on one undirected edge at a time, closes each branch under Meek's rules (which
/// orient only edges compelled by acyclicity and the v-structures; Meek 1995), and prunes a
/// branch at its first cycle or new v-structure; both only grow as edges are oriented. For a
/// CPDAG every branch reaches a member (Meek 1995; from memory), so the work is proportional to
/// the number of members. Required edges that are not adjacent in `pdag` admit no member.
/// A knowledge about a different number of nodes is a `SizeMismatch` error.
pub fn enumerate_dags(pdag: &Graph, knowledge: &Knowledge, cap: usize) -> Result<Enumeration, StatsError> {
    let n = pdag.n();
    if knowledge.n() != n {
        return Err(StatsError::SizeMismatch {
            what: "nodes in the knowledge for the graph's nodes",
            expected: n,
            found: knowledge.n(),
        });
    }
    let mut out = Enumeration { dags: Vec::new(), complete: true };
    search(pdag, knowledge, cap, &mut out);
    Ok(out)
}

fn search(pdag: &Graph, knowledge: &Knowledge, cap: usize, out: &mut Enumeration) {
    let n = pdag.n();
    let target = pdag.v_structures();
    let mut start = pdag.clone();
    for (a, b) in knowledge.required_edges() {
        if !start.is_adjacent(a, b) || start.is_directed(b, a) {
            return;
        }
        start.add_directed(a, b);
    }
    for a in 0..n {
        for b in 0..n {
            if start.is_directed(a, b) && knowledge.is_forbidden(a, b) {
                return;
            }
            if start.is_undirected(a, b) && knowledge.is_forbidden(b, a) {
                if knowledge.is_forbidden(a, b) {
                    return;
                }
                start.add_directed(a, b);
            }
        }
    }
    let forbidden = |a: usize, b: usize| knowledge.is_forbidden(a, b);
    meek::close(&mut start, forbidden);
    if viable(&start, &target) {
        descend(start, &target, &forbidden, cap, out);
    }
}

fn viable(g: &Graph, target: &[(usize, usize, usize)]) -> bool {
    g.is_acyclic() && g.v_structures().iter().all(|v| target.binary_search(v).is_ok())
}

/// Depth-first over orientations; returns false once the cap stops the search.
fn descend(
    g: Graph,
    target: &[(usize, usize, usize)],
    forbidden: &dyn Fn(usize, usize) -> bool,
    cap: usize,
    out: &mut Enumeration,
) -> bool {
    let Some(e) = g.edges().into_iter().find(|e| !e.is_directed()) else {
        if out.dags.len() == cap {
            out.complete = false;
            return false;
        }
        out.dags.push(g);
        return true;
    };
    for (x, y) in [(e.from, e.to), (e.to, e.from)] {
        if forbidden(x, y) {
            continue;
        }
        let mut h = g.clone();
        h.add_directed(x, y);
        meek::close(&mut h, forbidden);
        if viable(&h, target) && !descend(h, target, forbidden, cap, out) {
            return false;
        }
    }
    true
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::search::graph::tests::{brute_class, random_dag};

    fn undirected(n: usize, pairs: &[(usize, usize)]) -> Graph {
        let mut g = Graph::new(n);
        for &(a, b) in pairs {
            g.add_undirected(a, b);
        }
        g
    }

    // Counts of well-known classes (common practice, no single source): an undirected path on
    // k nodes stands for k DAGs (one per choice of root), a complete undirected graph on k
    // nodes for k! (one per ordering).
    #[test]
    fn known_class_sizes() {
        let none = Knowledge::new(5);
        let path = undirected(5, &[(0, 1), (1, 2), (2, 3), (3, 4)]);
        assert_eq!(enumerate_dags(&path, &none, 100).unwrap().dags.len(), 5);
        let k4 = Graph::complete(4);
        let e = enumerate_dags(&k4, &Knowledge::new(4), 100).unwrap();
        assert_eq!(e.dags.len(), 24);
        assert!(e.complete);
        let capped = enumerate_dags(&k4, &Knowledge::new(4), 5).unwrap();
        assert_eq!(capped.dags.len(), 5);
        assert!(!capped.complete);
        let exact = enumerate_dags(&k4, &Knowledge::new(4), 24).unwrap();
        assert!(exact.complete);
    }

    // The members of a DAG's CPDAG are exactly its Markov equivalence class, enumerated here by
    // brute force over all orientations (Verma & Pearl 1990, Theorem 1), and each has that CPDAG.
    #[test]
    fn members_equal_brute_force_class() {
        for seed in 0..20u64 {
            let dag = random_dag(4 + (seed % 3) as usize, 0.5, 500 + seed);
            let cp = Graph::cpdag_of_dag(&dag);
            let e = enumerate_dags(&cp, &Knowledge::new(dag.n()), 10_000).unwrap();
            let mut want = brute_class(&dag);
            let mut got = e.dags.clone();
            let key = |g: &Graph| g.edges();
            want.sort_by_key(key);
            got.sort_by_key(key);
            assert_eq!(got, want, "seed {seed}");
            assert!(e.dags.iter().all(|d| Graph::cpdag_of_dag(d) == cp));
        }
    }

    // Path 0 - 1 - 2 (members 0->1->2, 0<-1->2, 0<-1<-2): forbidding 1 -> 0 leaves only
    // 0 -> 1 -> 2; also forbidding 1 -> 2 leaves none (0 -> 1 <- 2 is a new v-structure);
    // tiers [0], [1], [2] on the complete graph leave the one ordering (hand-derived).
    #[test]
    fn knowledge_restricts_members() {
        let path = undirected(3, &[(0, 1), (1, 2)]);
        let mut k = Knowledge::new(3);
        k.forbid(1, 0).unwrap();
        let e = enumerate_dags(&path, &k, 10).unwrap();
        assert_eq!(e.dags, vec![Graph::from_directed(3, &[(0, 1), (1, 2)])]);
        k.forbid(1, 2).unwrap();
        assert!(enumerate_dags(&path, &k, 10).unwrap().dags.is_empty());

        let mut k = Knowledge::new(3);
        k.set_tiers(&[vec![0], vec![1], vec![2]]).unwrap();
        let e = enumerate_dags(&Graph::complete(3), &k, 10).unwrap();
        assert_eq!(e.dags, vec![Graph::from_directed(3, &[(0, 1), (0, 2), (1, 2)])]);

        let mut k = Knowledge::new(3);
        k.require(2, 1).unwrap();
        let e = enumerate_dags(&path, &k, 10).unwrap();
        assert_eq!(e.dags, vec![Graph::from_directed(3, &[(2, 1), (1, 0)])]);
        let mut k = Knowledge::new(3);
        k.require(0, 2).unwrap();
        assert!(enumerate_dags(&path, &k, 10).unwrap().dags.is_empty());
    }
}
