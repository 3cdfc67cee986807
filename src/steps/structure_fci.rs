//! `structure` with `search: fci` or `both`: the FCI search (`construe_stats::search::fci`) on
//! the same latent conditional-independence tests and knowledge as PC, its partial ancestral
//! graph turned into named records with each edge's marks, reasons and meaning in plain words.
//! Central type: `FciOutput`. Fits no structural model: a PAG stands for many ancestral graphs
//! and choosing one to fit is not done here (the report says so).

use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

use super::StepError;
use super::structure::{EdgeRecord, RemovedRecord, StructureOutput};
use crate::spec::types::{Search, StructureSpec};
use construe_stats::search::{CiTest, EdgeKind, FciOptions, Knowledge, Mark, MarkReason, PagEdgeKind, fci};

/// Why `search: fci` reports no fitted structural model (shown in results.json and the report).
pub const NO_MODEL: &str = "FCI returns a partial ancestral graph, which stands for several causal structures with \
     hidden common causes; no structural model is fitted to it, so there are no effect estimates or fit indices";

/// A pair of constructs the PAG allows to share a hidden common cause.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct HiddenCause {
    /// One construct (the edge's `from`).
    pub a: String,
    /// The other (the edge's `to`).
    pub b: String,
    /// The edge between them (`bidirected`, `partially_directed` or `nondirected`).
    #[schemars(with = "super::stats_schema::EdgeKindSchema")]
    pub kind: EdgeKind,
    /// True for `bidirected`: the data require a hidden common cause (given the search's
    /// assumptions); false where one is possible but not required.
    pub required: bool,
}

/// A mark the search could not set because another was already fixed there.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct MarkConflictRecord {
    /// The construct at whose end the marks conflict.
    pub at: String,
    /// The other end of the edge.
    pub other: String,
    /// The mark the rule wanted (`tail`, `arrow`).
    #[schemars(with = "super::stats_schema::MarkSchema")]
    pub wanted: Mark,
    /// The mark kept.
    #[schemars(with = "super::stats_schema::MarkSchema")]
    pub kept: Mark,
    /// The rule that wanted it.
    pub reason: String,
}

/// FCI's result among the constructs.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct FciOutput {
    /// The edges of the partial ancestral graph, each with its two marks and meaning.
    pub edges: Vec<EdgeRecord>,
    /// Pairs left non-adjacent, with the test that separated them.
    pub removed: Vec<RemovedRecord>,
    /// How many of `removed` were separated only in the Possible-D-SEP stage.
    pub removed_by_possible_dsep: usize,
    /// Conditional independence tests run (both stages).
    pub tests_run: usize,
    /// Adjacent pairs whose marks allow a hidden common cause.
    pub hidden_causes: Vec<HiddenCause>,
    /// Marks refused because another mark was already fixed (sample errors, or the data
    /// against the knowledge).
    pub conflicts: Vec<MarkConflictRecord>,
    /// Why no structural model is fitted.
    pub model: String,
}

fn reason_words(r: MarkReason) -> String {
    match r {
        MarkReason::Collider => "collider".into(),
        MarkReason::Rule(k) => format!("rule {k} (Zhang 2008)"),
        MarkReason::Tier => "tier order".into(),
        MarkReason::Required => "required by the spec".into(),
        MarkReason::Forbidden => "forbidden by the spec".into(),
    }
}

/// The plain-words reading of an edge `a` *-* `b` of the kind given (Zhang 2008, section 2, for
/// the marks' meaning; no selection bias assumed).
pub fn meaning(kind: EdgeKind, a: &str, b: &str) -> String {
    match kind {
        EdgeKind::Directed => {
            format!("{a} causes {b} (directly or through constructs not in the model); {b} does not cause {a}")
        }
        EdgeKind::Bidirected => format!("{a} and {b} share a hidden common cause, and neither causes the other"),
        EdgeKind::PartiallyDirected => {
            format!("{a} causes {b}, or both share a hidden common cause (or both hold); {b} does not cause {a}")
        }
        EdgeKind::Nondirected => {
            format!("{a} and {b} are linked: {a} causes {b}, {b} causes {a}, or both share a hidden common cause")
        }
        EdgeKind::Undirected => format!("{a} and {b} are linked, but the tests contradict each other about how"),
    }
}

/// Runs FCI with `test` and `knowledge` at `alpha` (the Possible-D-SEP stage on, selection
/// bias not allowed) and names everything by `names`.
pub fn search(test: &dyn CiTest, knowledge: &Knowledge, names: &[String], alpha: f64) -> Result<FciOutput, StepError> {
    let options = FciOptions { alpha, ..FciOptions::default() };
    let r = fci(test, knowledge, &options)
        .map_err(|source| StepError::Stats { context: "the FCI search".into(), source })?;
    let name = |i: usize| names[i].clone();
    let why = |other: usize, at: usize| {
        r.marks.iter().rev().find(|m| m.other == other && m.at == at).map(|m| reason_words(m.reason))
    };
    let mut edges = Vec::new();
    let mut hidden_causes = Vec::new();
    for e in &r.edges {
        let kind = EdgeKind::from(e.kind);
        let (a, b) = (name(e.from), name(e.to));
        let mut parts = Vec::new();
        for (at, other, mark) in [(e.from, e.to, e.mark_from), (e.to, e.from, e.mark_to)] {
            if mark != Mark::Circle {
                let what = if mark == Mark::Arrow { "arrowhead" } else { "tail" };
                let source = why(other, at).unwrap_or_else(|| "the search".into());
                parts.push(format!("{what} at {}: {source}", name(at)));
            }
        }
        let reason =
            if parts.is_empty() { "no mark follows from the data or the knowledge".into() } else { parts.join("; ") };
        if e.kind.allows_hidden_cause() {
            hidden_causes.push(HiddenCause {
                a: a.clone(),
                b: b.clone(),
                kind,
                required: e.kind == PagEdgeKind::Bidirected,
            });
        }
        edges.push(EdgeRecord {
            meaning: Some(meaning(kind, &a, &b)),
            from: a,
            to: b,
            kind,
            reason,
            marks: Some([e.mark_from, e.mark_to]),
        });
    }
    let removed = r
        .removed
        .iter()
        .map(|x| RemovedRecord {
            a: name(x.a),
            b: name(x.b),
            sepset: x.sepset.iter().map(|&i| name(i)).collect(),
            p: Some(x.test.p),
            by_knowledge: false,
        })
        .collect();
    let conflicts = r
        .conflicts
        .iter()
        .map(|c| MarkConflictRecord {
            at: name(c.at),
            other: name(c.other),
            wanted: c.wanted,
            kept: c.kept,
            reason: reason_words(c.reason),
        })
        .collect();
    Ok(FciOutput {
        edges,
        removed,
        removed_by_possible_dsep: r
            .removed
            .iter()
            .filter(|x| x.stage == construe_stats::search::fci::Stage::PossibleDSep)
            .count(),
        tests_run: r.tests_run,
        hidden_causes,
        conflicts,
        model: NO_MODEL.into(),
    })
}

/// The structure artifact of `search: fci`: FCI's edges and removed pairs in the places PC's
/// go, no structural model.
pub fn without_model(params: &StructureSpec, n: usize, f: FciOutput) -> StructureOutput {
    StructureOutput {
        test: params.test,
        alpha: params.alpha,
        n,
        edges: f.edges.clone(),
        removed: f.removed.clone(),
        tests_run: f.tests_run,
        class_complete: true,
        search: Search::Fci,
        fci: Some(f),
        ..StructureOutput::default()
    }
}

/// The step's one-line summary for `search: fci`.
pub fn describe(s: &StructureOutput) -> String {
    let hidden = s.fci.as_ref().map_or(0, |f| f.hidden_causes.len());
    format!(
        "partial ancestral graph with {} ({} possibly sharing a hidden cause) after {} tests",
        crate::spec::diagnostic::plural(s.edges.len(), "edge"),
        hidden,
        s.tests_run
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use construe_stats::search::{Graph, HiddenDSepOracle};

    // The hidden-confounder graph A -> B <- L -> C <- D (L hidden) read through the step's
    // records: PAG A o-> B <-> C <-o D (Spirtes, Glymour & Scheines 2000, ch. 6), with marks,
    // reasons and words.
    #[test]
    fn records_name_marks_reasons_and_meaning() {
        let oracle = HiddenDSepOracle::hiding(Graph::from_directed(5, &[(0, 1), (4, 1), (4, 2), (3, 2)]), &[4]);
        let names: Vec<String> = ["a", "b", "c", "d"].iter().map(|s| s.to_string()).collect();
        let f = search(&oracle, &Knowledge::new(4), &names, 0.05).unwrap();
        let shown: Vec<(String, String, EdgeKind, [Mark; 2])> =
            f.edges.iter().map(|e| (e.from.clone(), e.to.clone(), e.kind, e.marks.unwrap())).collect();
        assert_eq!(
            shown,
            vec![
                ("a".into(), "b".into(), EdgeKind::PartiallyDirected, [Mark::Circle, Mark::Arrow]),
                ("b".into(), "c".into(), EdgeKind::Bidirected, [Mark::Arrow, Mark::Arrow]),
                ("d".into(), "c".into(), EdgeKind::PartiallyDirected, [Mark::Circle, Mark::Arrow]),
            ]
        );
        assert_eq!(f.edges[1].reason, "arrowhead at b: collider; arrowhead at c: collider");
        assert_eq!(
            f.edges[1].meaning.as_deref(),
            Some("b and c share a hidden common cause, and neither causes the other")
        );
        assert_eq!(f.hidden_causes.iter().filter(|h| h.required).count(), 1);
        assert_eq!(f.hidden_causes.len(), 3);
        assert_eq!(f.removed.len(), 3);
        let json = serde_json::to_value(&f.edges[0]).unwrap();
        assert_eq!(json["kind"], "partially_directed");
        assert_eq!(json["marks"], serde_json::json!(["circle", "arrow"]));
    }
}
