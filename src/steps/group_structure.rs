//! The structure search run in each group of `invariance` and compared (issue 18, item 7):
//! the PC search (Spirtes & Glymour 1991) under the spec's background knowledge, with Fisher-z
//! tests on each group's latent correlations from the multi-group model at the group's n.
//! Central type: `GroupStructures` (results.json `invariance.structure_by_group`): per pair of
//! constructs, how each group links them, and whether skeletons and orientations agree.
//! Thin: the search is `construe_stats::search::pc`; knowledge naming a construct the
//! multi-group model left out is dropped.

use indexmap::IndexMap;
use nalgebra::DMatrix;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

use super::StepError;
use crate::spec::types::Knowledge as KnowledgeSpec;
use construe_stats::search::{FisherZ, Knowledge, KnowledgeError, PcOptions, pc};

/// How a group's search links a pair of constructs (`a`, `b` in construct order).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Link {
    /// Not adjacent.
    None,
    /// Adjacent, orientation left open.
    Undirected,
    /// `a -> b`.
    Forward,
    /// `b -> a`.
    Backward,
}

/// One pair of constructs across the groups.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct PairLinks {
    /// The first construct of the pair (construct order).
    pub a: String,
    /// The second.
    pub b: String,
    /// Group -> how its search links the pair.
    pub links: IndexMap<String, Link>,
    /// Whether every group links the pair the same way.
    pub same: bool,
}

/// The structure search per group, compared.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct GroupStructures {
    /// Significance level of the tests (`structure.alpha`).
    pub alpha: f64,
    /// Every pair of constructs adjacent in some group, or not adjacent in some group.
    pub pairs: Vec<PairLinks>,
    /// Whether every group has the same adjacencies.
    pub same_skeleton: bool,
    /// Whether every group has the same adjacencies with the same orientations.
    pub same_orientation: bool,
}

/// Knowledge over `names` from the spec's, keeping only constructs among `names`.
fn knowledge(spec: &KnowledgeSpec, names: &[String]) -> Result<Knowledge, KnowledgeError> {
    let idx = |n: &String| names.iter().position(|x| x == n);
    let mut k = Knowledge::new(names.len());
    let tiers: Vec<Vec<usize>> =
        spec.tiers.iter().map(|t| t.iter().filter_map(idx).collect::<Vec<_>>()).filter(|t| !t.is_empty()).collect();
    k.set_tiers(&tiers)?;
    for [a, b] in &spec.forbid {
        if let (Some(a), Some(b)) = (idx(a), idx(b)) {
            k.forbid(a, b)?;
        }
    }
    for [a, b] in &spec.require {
        if let (Some(a), Some(b)) = (idx(a), idx(b)) {
            k.require(a, b)?;
        }
    }
    Ok(k)
}

/// Runs the search in each group on its latent covariance `covs[g]` at `n[g]` and compares.
pub fn compare(
    names: &[String],
    groups: &[String],
    covs: &[DMatrix<f64>],
    n: &[usize],
    spec: &KnowledgeSpec,
    alpha: f64,
) -> Result<GroupStructures, StepError> {
    let err = |what: &str| {
        let what = what.to_string();
        move |source: construe_stats::StatsError| StepError::Stats { context: what.clone(), source }
    };
    let k = knowledge(spec, names)
        .map_err(|e| StepError::Stats { context: "background knowledge".into(), source: e.into() })?;
    let m = names.len();
    let mut links: Vec<Vec<Link>> = Vec::new();
    for (cov, &ng) in covs.iter().zip(n) {
        let test = FisherZ::new(cov.clone(), ng as f64).map_err(err("the per-group Fisher-z tests"))?;
        let result =
            pc(&test, &k, &PcOptions { alpha, ..PcOptions::default() }).map_err(err("the per-group PC search"))?;
        let mut g = vec![Link::None; m * m];
        for e in &result.edges {
            let (a, b) = (e.from.min(e.to), e.from.max(e.to));
            g[a * m + b] = match (e.directed, e.from == a) {
                (false, _) => Link::Undirected,
                (true, true) => Link::Forward,
                (true, false) => Link::Backward,
            };
        }
        links.push(g);
    }
    let mut pairs = Vec::new();
    let (mut same_skeleton, mut same_orientation) = (true, true);
    for a in 0..m {
        for b in a + 1..m {
            let per: Vec<Link> = links.iter().map(|g| g[a * m + b]).collect();
            if per.iter().all(|l| *l == Link::None) {
                continue;
            }
            let same = per.iter().all(|l| *l == per[0]);
            let adjacent_alike = per.iter().all(|l| (*l == Link::None) == (per[0] == Link::None));
            same_skeleton &= adjacent_alike;
            same_orientation &= same;
            pairs.push(PairLinks {
                a: names[a].clone(),
                b: names[b].clone(),
                links: groups.iter().cloned().zip(per).collect(),
                same,
            });
        }
    }
    Ok(GroupStructures { alpha, pairs, same_skeleton, same_orientation })
}

#[cfg(test)]
mod tests {
    use super::*;

    // Chain a -> b -> c in group 1 (a, c independent given b) and a collider a -> b <- c in
    // group 2 (a, c independent): same skeleton, different orientations.
    #[test]
    fn chain_and_collider_share_a_skeleton_only() {
        let names: Vec<String> = ["a", "b", "c"].iter().map(|s| (*s).to_string()).collect();
        let chain = DMatrix::from_row_slice(3, 3, &[1.0, 0.5, 0.25, 0.5, 1.0, 0.5, 0.25, 0.5, 1.0]);
        let collider = DMatrix::from_row_slice(3, 3, &[1.0, 0.5, 0.0, 0.5, 1.0, 0.5, 0.0, 0.5, 1.0]);
        let groups = vec!["g1".to_string(), "g2".to_string()];
        let s = compare(&names, &groups, &[chain, collider], &[5000, 5000], &KnowledgeSpec::default(), 0.01).unwrap();
        assert!(s.same_skeleton && !s.same_orientation, "{s:?}");
        let ab = s.pairs.iter().find(|p| p.a == "a" && p.b == "b").unwrap();
        assert_eq!(ab.links["g1"], Link::Undirected);
        assert_eq!(ab.links["g2"], Link::Forward);
        assert!(!s.pairs.iter().any(|p| p.a == "a" && p.b == "c"), "a, c are separated in both");
    }
}
