//! Meek's (1995) orientation rules R1-R4, applied to a PDAG until no rule fires, each
//! orientation recorded with its rule number. Central type: `MeekOrientation`.
//! Never orients an edge the knowledge forbids, never reverses a directed edge, and never uses
//! a triple marked ambiguous (conservative / majority collider rules) as a non-collider.

use serde::{Deserialize, Serialize};

use super::graph::Graph;
use super::knowledge::Knowledge;

/// One edge oriented `from -> to` by Meek rule `rule` (1 to 4).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct MeekOrientation {
    pub from: usize,
    pub to: usize,
    pub rule: u8,
}

/// Applies R1-R4 (Meek 1995) to `g` until a fixpoint, never orienting an edge that
/// `knowledge` forbids, and never treating a triple (x, y, z) listed in `ambiguous` (either end
/// order) as a known non-collider. The rules, orienting a - b into a -> b:
/// - R1: c -> a, c and b non-adjacent (else c -> a <- b would be a new v-structure);
/// - R2: a -> c -> b (else a cycle);
/// - R3: a - c -> b and a - d -> b with c, d non-adjacent;
/// - R4: a - d -> c -> b with d, b non-adjacent and a adjacent to c.
///
/// Meek (1995; theorem number from memory: 4) shows R1-R4 are sound and complete for orientation given background
/// knowledge when the input is a consistent PDAG; with sample errors the input may not be, and
/// then the first rule to reach an edge (scan order: a, b ascending, rules 1 to 4) wins.
pub fn apply(g: &mut Graph, knowledge: &Knowledge, ambiguous: &[(usize, usize, usize)]) -> Vec<MeekOrientation> {
    let is_amb = |x: usize, y: usize, z: usize| {
        ambiguous.iter().any(|&(p, q, r)| q == y && ((p == x && r == z) || (p == z && r == x)))
    };
    close_with(g, &|a, b| knowledge.is_forbidden(a, b), &is_amb)
}

/// R1-R4 to a fixpoint with only a forbidden-orientation predicate (no ambiguous triples);
/// used for the CPDAG of a DAG and inside the enumeration of a class.
pub fn close(g: &mut Graph, forbidden: impl Fn(usize, usize) -> bool) -> Vec<MeekOrientation> {
    close_with(g, &forbidden, &|_, _, _| false)
}

fn close_with(
    g: &mut Graph,
    forbidden: &dyn Fn(usize, usize) -> bool,
    ambiguous: &dyn Fn(usize, usize, usize) -> bool,
) -> Vec<MeekOrientation> {
    let n = g.n();
    let mut out = Vec::new();
    loop {
        let mut changed = false;
        for a in 0..n {
            for b in 0..n {
                if !g.is_undirected(a, b) || forbidden(a, b) {
                    continue;
                }
                if let Some(rule) = which_rule(g, a, b, ambiguous) {
                    g.add_directed(a, b);
                    out.push(MeekOrientation { from: a, to: b, rule });
                    changed = true;
                }
            }
        }
        if !changed {
            return out;
        }
    }
}

/// The first of R1-R4 that orients the undirected edge a - b into a -> b, if any.
fn which_rule(g: &Graph, a: usize, b: usize, ambiguous: &dyn Fn(usize, usize, usize) -> bool) -> Option<u8> {
    let n = g.n();
    if (0..n).any(|c| g.is_directed(c, a) && !g.is_adjacent(c, b) && c != b && !ambiguous(c, a, b)) {
        return Some(1);
    }
    if (0..n).any(|c| g.is_directed(a, c) && g.is_directed(c, b)) {
        return Some(2);
    }
    let into_b: Vec<usize> = (0..n).filter(|&c| g.is_undirected(a, c) && g.is_directed(c, b)).collect();
    for (k, &c) in into_b.iter().enumerate() {
        for &d in &into_b[k + 1..] {
            if !g.is_adjacent(c, d) && !ambiguous(c, a, d) {
                return Some(3);
            }
        }
    }
    for c in (0..n).filter(|&c| g.is_directed(c, b) && g.is_adjacent(a, c)) {
        if (0..n).any(|d| {
            d != b && g.is_undirected(a, d) && g.is_directed(d, c) && !g.is_adjacent(d, b) && !ambiguous(d, a, b)
        }) {
            return Some(4);
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pdag(n: usize, directed: &[(usize, usize)], undirected: &[(usize, usize)]) -> Graph {
        let mut g = Graph::from_directed(n, directed);
        for &(a, b) in undirected {
            g.add_undirected(a, b);
        }
        g
    }

    // R1 (Meek 1995): 0 -> 1 - 2, 0 and 2 non-adjacent gives 1 -> 2.
    #[test]
    fn rule_one() {
        let mut g = pdag(3, &[(0, 1)], &[(1, 2)]);
        let o = apply(&mut g, &Knowledge::new(3), &[]);
        assert_eq!(o, vec![MeekOrientation { from: 1, to: 2, rule: 1 }]);
        // the same triple marked ambiguous is not a known non-collider: nothing fires
        let mut g = pdag(3, &[(0, 1)], &[(1, 2)]);
        assert!(apply(&mut g, &Knowledge::new(3), &[(2, 1, 0)]).is_empty());
        assert!(g.is_undirected(1, 2));
    }

    // R2 (Meek 1995): 0 -> 1 -> 2 with 0 - 2 gives 0 -> 2.
    #[test]
    fn rule_two() {
        let mut g = pdag(3, &[(0, 1), (1, 2)], &[(0, 2)]);
        let o = apply(&mut g, &Knowledge::new(3), &[]);
        assert_eq!(o, vec![MeekOrientation { from: 0, to: 2, rule: 2 }]);
    }

    // R3 (Meek 1995): the kite 0 - 2 -> 1 <- 3 - 0, 0 - 1, 2 and 3 non-adjacent gives
    // 0 -> 1; the two sides stay undirected.
    #[test]
    fn rule_three() {
        let mut g = pdag(4, &[(2, 1), (3, 1)], &[(0, 1), (0, 2), (0, 3)]);
        let o = apply(&mut g, &Knowledge::new(4), &[]);
        assert_eq!(o, vec![MeekOrientation { from: 0, to: 1, rule: 3 }]);
        assert!(g.is_undirected(0, 2) && g.is_undirected(0, 3));
    }

    // R4 (Meek 1995): 0 - 3 -> 2 -> 1 with 0 - 1, 0 - 2 and 3, 1 non-adjacent gives
    // 0 -> 1. Such a PDAG arises only with background knowledge (here 3 -> 2 and 2 -> 1).
    #[test]
    fn rule_four() {
        let mut g = pdag(4, &[(3, 2), (2, 1)], &[(0, 1), (0, 2), (0, 3)]);
        let o = apply(&mut g, &Knowledge::new(4), &[]);
        assert_eq!(o, vec![MeekOrientation { from: 0, to: 1, rule: 4 }]);
        assert!(g.is_undirected(0, 2) && g.is_undirected(0, 3));
    }

    // R1 chains along a path: 0 -> 1 - 2 - 3 orients 1 -> 2 -> 3 (two R1 steps).
    #[test]
    fn rules_reach_a_fixpoint_along_a_path() {
        let mut g = pdag(4, &[(0, 1)], &[(1, 2), (2, 3)]);
        let o = apply(&mut g, &Knowledge::new(4), &[]);
        assert_eq!(o.len(), 2);
        assert!(g.is_fully_directed() && g.is_directed(2, 3));
    }

    #[test]
    fn forbidden_orientations_are_never_made() {
        let mut k = Knowledge::new(3);
        k.forbid(1, 2).unwrap();
        let mut g = pdag(3, &[(0, 1)], &[(1, 2)]);
        assert!(apply(&mut g, &k, &[]).is_empty());
        assert!(g.is_undirected(1, 2));
    }
}
