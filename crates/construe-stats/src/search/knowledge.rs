//! Background knowledge for the search among constructs: tiers (a node may cause nodes in its
//! own or later tiers only; nodes in no tier are unconstrained), forbidden and required
//! directed edges. Central type: `Knowledge`, always internally consistent: every builder
//! method validates, so a contradiction is a typed `KnowledgeError`, never a silent override.
//! Works on node indices only; names and spec positions stay in `spec/` and `steps/`.

use std::collections::BTreeSet;

use serde::{Deserialize, Serialize};
use thiserror::Error;

/// Why a piece of background knowledge was rejected. Fields are node indices.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum KnowledgeError {
    /// A node index is not below the number of nodes.
    #[error("node {node} is out of range for {n} nodes")]
    OutOfRange { node: usize, n: usize },
    /// A node was listed in two tiers (or twice in one).
    #[error("node {node} is listed in more than one tier")]
    TwoTiers { node: usize },
    /// An edge from a node to itself.
    #[error("node {node} cannot have an edge to itself")]
    SelfLoop { node: usize },
    /// A required edge points from a later tier into an earlier one.
    #[error("required edge {from} -> {to} goes against the tiers")]
    RequiredAgainstTier { from: usize, to: usize },
    /// An edge is both required and explicitly forbidden.
    #[error("edge {from} -> {to} is both required and forbidden")]
    RequiredAndForbidden { from: usize, to: usize },
    /// Both a -> b and b -> a are required.
    #[error("edges {a} -> {b} and {b} -> {a} are both required")]
    RequiredBothWays { a: usize, b: usize },
    /// The required edges contain a directed cycle through these nodes.
    #[error("the required edges form a directed cycle through node {node}")]
    RequiredCycle { node: usize },
}

/// Tiers, forbidden and required directed edges over `n` nodes.
#[derive(Debug, Clone, PartialEq, Eq, Default, Serialize, Deserialize)]
pub struct Knowledge {
    n: usize,
    tier: Vec<Option<usize>>,
    forbidden: BTreeSet<(usize, usize)>,
    required: BTreeSet<(usize, usize)>,
}

impl Knowledge {
    /// No knowledge about `n` nodes.
    pub fn new(n: usize) -> Self {
        Knowledge { n, tier: vec![None; n], forbidden: BTreeSet::new(), required: BTreeSet::new() }
    }

    /// Number of nodes the knowledge speaks about.
    pub fn n(&self) -> usize {
        self.n
    }

    fn check(&self, node: usize) -> Result<(), KnowledgeError> {
        if node < self.n { Ok(()) } else { Err(KnowledgeError::OutOfRange { node, n: self.n }) }
    }

    /// Sets the tiers, earliest first, replacing earlier tiers; then validates everything.
    pub fn set_tiers(&mut self, tiers: &[Vec<usize>]) -> Result<(), KnowledgeError> {
        let mut tier = vec![None; self.n];
        for (t, nodes) in tiers.iter().enumerate() {
            for &v in nodes {
                self.check(v)?;
                if tier[v].is_some() {
                    return Err(KnowledgeError::TwoTiers { node: v });
                }
                tier[v] = Some(t);
            }
        }
        let old = std::mem::replace(&mut self.tier, tier);
        self.validate().inspect_err(|_| self.tier = old)
    }

    /// Forbids the direct edge a -> b; then validates.
    pub fn forbid(&mut self, a: usize, b: usize) -> Result<(), KnowledgeError> {
        self.check_pair(a, b)?;
        let fresh = self.forbidden.insert((a, b));
        self.validate().inspect_err(|_| {
            if fresh {
                self.forbidden.remove(&(a, b));
            }
        })
    }

    /// Requires the direct edge a -> b; then validates.
    pub fn require(&mut self, a: usize, b: usize) -> Result<(), KnowledgeError> {
        self.check_pair(a, b)?;
        let fresh = self.required.insert((a, b));
        self.validate().inspect_err(|_| {
            if fresh {
                self.required.remove(&(a, b));
            }
        })
    }

    fn check_pair(&self, a: usize, b: usize) -> Result<(), KnowledgeError> {
        self.check(a)?;
        self.check(b)?;
        if a == b {
            return Err(KnowledgeError::SelfLoop { node: a });
        }
        Ok(())
    }

    /// Checks that the required edges agree with the tiers and the forbidden edges, are not
    /// required both ways and contain no directed cycle (a DAG must be able to hold them all).
    pub fn validate(&self) -> Result<(), KnowledgeError> {
        // a deserialized value has not passed through the builder methods
        if self.tier.len() != self.n {
            return Err(KnowledgeError::OutOfRange { node: self.tier.len().min(self.n), n: self.n });
        }
        for &(a, b) in self.required.iter().chain(&self.forbidden) {
            self.check_pair(a, b)?;
        }
        for &(a, b) in &self.required {
            if self.forbidden.contains(&(a, b)) {
                return Err(KnowledgeError::RequiredAndForbidden { from: a, to: b });
            }
            if self.tier_forbids(a, b) {
                return Err(KnowledgeError::RequiredAgainstTier { from: a, to: b });
            }
            if self.required.contains(&(b, a)) {
                return Err(KnowledgeError::RequiredBothWays { a: a.min(b), b: a.max(b) });
            }
        }
        // Kahn's algorithm over the required edges: whatever is never freed lies on a cycle.
        let mut indeg = vec![0usize; self.n];
        for &(_, b) in &self.required {
            indeg[b] += 1;
        }
        let mut ready: Vec<usize> = (0..self.n).filter(|&v| indeg[v] == 0).collect();
        let mut freed = 0;
        while let Some(v) = ready.pop() {
            freed += 1;
            for &(a, b) in &self.required {
                if a == v {
                    indeg[b] -= 1;
                    if indeg[b] == 0 {
                        ready.push(b);
                    }
                }
            }
        }
        if freed < self.n {
            let node = (0..self.n).find(|&v| indeg[v] > 0).unwrap_or(0);
            return Err(KnowledgeError::RequiredCycle { node });
        }
        Ok(())
    }

    /// The tier of a node, if it has one (0 = earliest).
    pub fn tier_of(&self, a: usize) -> Option<usize> {
        self.tier.get(a).copied().flatten()
    }

    /// True when the tiers forbid a -> b: both have tiers and a's is later than b's.
    pub fn tier_forbids(&self, a: usize, b: usize) -> bool {
        matches!((self.tier_of(a), self.tier_of(b)), (Some(ta), Some(tb)) if ta > tb)
    }

    /// True when a -> b was forbidden explicitly (not by tiers).
    pub fn explicitly_forbidden(&self, a: usize, b: usize) -> bool {
        self.forbidden.contains(&(a, b))
    }

    /// True when a -> b is forbidden, by the tiers or explicitly.
    pub fn is_forbidden(&self, a: usize, b: usize) -> bool {
        self.tier_forbids(a, b) || self.explicitly_forbidden(a, b)
    }

    /// True when a -> b is required.
    pub fn is_required(&self, a: usize, b: usize) -> bool {
        self.required.contains(&(a, b))
    }

    /// True when neither a -> b nor b -> a is allowed, so a and b can never be adjacent.
    pub fn forbids_adjacency(&self, a: usize, b: usize) -> bool {
        self.is_forbidden(a, b) && self.is_forbidden(b, a)
    }

    /// The required edges, sorted.
    pub fn required_edges(&self) -> Vec<(usize, usize)> {
        self.required.iter().copied().collect()
    }

    /// The explicitly forbidden edges, sorted.
    pub fn forbidden_edges(&self) -> Vec<(usize, usize)> {
        self.forbidden.iter().copied().collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::StatsError;

    // Hand-worked cases of the tier semantics stated in the design (own or later tiers only).
    #[test]
    fn tiers_forbid_backwards_only() {
        let mut k = Knowledge::new(4);
        k.set_tiers(&[vec![0], vec![1, 2]]).unwrap();
        assert!(k.is_forbidden(1, 0) && k.is_forbidden(2, 0));
        assert!(!k.is_forbidden(0, 1) && !k.is_forbidden(1, 2) && !k.is_forbidden(2, 1));
        // node 3 has no tier: unconstrained both ways
        assert!(!k.is_forbidden(3, 0) && !k.is_forbidden(0, 3));
        assert!(!k.forbids_adjacency(0, 1));
        k.forbid(0, 1).unwrap();
        assert!(k.forbids_adjacency(0, 1) && k.forbids_adjacency(1, 0));
        assert!(k.explicitly_forbidden(0, 1) && !k.explicitly_forbidden(1, 0));
    }

    #[test]
    fn contradictions_are_rejected_and_leave_knowledge_unchanged() {
        let mut k = Knowledge::new(4);
        k.set_tiers(&[vec![0], vec![1]]).unwrap();
        assert_eq!(k.require(1, 0), Err(KnowledgeError::RequiredAgainstTier { from: 1, to: 0 }));
        assert!(!k.is_required(1, 0));
        k.forbid(2, 3).unwrap();
        assert_eq!(k.require(2, 3), Err(KnowledgeError::RequiredAndForbidden { from: 2, to: 3 }));
        k.require(3, 2).unwrap();
        assert_eq!(k.forbid(3, 2), Err(KnowledgeError::RequiredAndForbidden { from: 3, to: 2 }));
        assert!(!k.explicitly_forbidden(3, 2));
        assert_eq!(k.require(2, 3).unwrap_err(), KnowledgeError::RequiredAndForbidden { from: 2, to: 3 });
        assert_eq!(k.require(0, 0), Err(KnowledgeError::SelfLoop { node: 0 }));
        assert_eq!(k.forbid(0, 9), Err(KnowledgeError::OutOfRange { node: 9, n: 4 }));
        // tiers set after a required edge are checked against it too
        assert_eq!(k.set_tiers(&[vec![2], vec![3]]), Err(KnowledgeError::RequiredAgainstTier { from: 3, to: 2 }));
        assert_eq!(k.tier_of(0), Some(0));
        assert_eq!(k.set_tiers(&[vec![0], vec![0]]), Err(KnowledgeError::TwoTiers { node: 0 }));
    }

    #[test]
    fn required_both_ways_and_cycles_are_rejected() {
        let mut k = Knowledge::new(3);
        k.require(0, 1).unwrap();
        assert_eq!(k.require(1, 0), Err(KnowledgeError::RequiredBothWays { a: 0, b: 1 }));
        k.require(1, 2).unwrap();
        assert!(matches!(k.require(2, 0), Err(KnowledgeError::RequiredCycle { .. })));
        assert_eq!(k.required_edges(), vec![(0, 1), (1, 2)]);
        let bad: Knowledge =
            serde_json::from_str(r#"{"n":2,"tier":[null,null],"forbidden":[],"required":[[0,5]]}"#).unwrap();
        assert_eq!(bad.validate(), Err(KnowledgeError::OutOfRange { node: 5, n: 2 }));
        let e: StatsError = KnowledgeError::SelfLoop { node: 1 }.into();
        assert!(matches!(e, StatsError::Knowledge(_)), "{e:?}");
    }
}
