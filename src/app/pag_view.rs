//! The report's view of FCI's result (`structure.search: fci | both`): the finding sentence
//! and, with `both`, the second path diagram (the partial ancestral graph beside PC's).
//! Reads results.json values and artifacts only; computes nothing statistical.

use serde_json::Value;

use crate::pipeline::executor::Execution;
use crate::report::diagram::{Link, Node, diagram};
use crate::spec::SpecFile;
use crate::steps::{Artifact, StepKind};

/// The edge as text with its marks: `a → b`, `a ↔ b`, `a o→ b`, `a o–o b`, `a — b`.
pub fn shown(e: &Value) -> String {
    let glyph = match e["kind"].as_str().unwrap_or("") {
        "directed" => "→",
        "bidirected" => "↔",
        "partially_directed" => "o→",
        "nondirected" => "o–o",
        _ => "—",
    };
    format!("{} {glyph} {}", e["from"].as_str().unwrap_or(""), e["to"].as_str().unwrap_or(""))
}

/// One finding for FCI's graph: how many edges, which pairs may share a hidden common cause,
/// which require one, and what is settled as cause and effect.
pub fn finding(structure: &Value) -> Option<Value> {
    let f = &structure["fci"];
    let edges = f["edges"].as_array()?;
    let hidden = f["hidden_causes"].as_array().cloned().unwrap_or_default();
    let pair = |h: &Value| format!("{} and {}", h["a"].as_str().unwrap_or(""), h["b"].as_str().unwrap_or(""));
    let required: Vec<String> = hidden.iter().filter(|h| h["required"] == true).map(pair).collect();
    let possible: Vec<String> = hidden.iter().filter(|h| h["required"] != true).map(pair).collect();
    let causal: Vec<String> = edges.iter().filter(|e| e["kind"] == "directed").map(shown).collect();
    let mut s = if edges.is_empty() {
        "Allowing hidden common causes (FCI), the search finds no edges among the constructs.".to_string()
    } else {
        format!(
            "Allowing hidden common causes (FCI), the search finds {}: {}.",
            crate::spec::diagnostic::plural(edges.len(), "edge"),
            edges.iter().map(shown).collect::<Vec<_>>().join(", ")
        )
    };
    if !required.is_empty() {
        s.push_str(&format!(" A hidden common cause (and no causation either way): {}.", required.join("; ")));
    }
    if !possible.is_empty() {
        s.push_str(&format!(" Possibly a hidden common cause: {}.", possible.join("; ")));
    }
    if !causal.is_empty() {
        s.push_str(&format!(" Settled as cause and effect: {}.", causal.join(", ")));
    }
    Some(serde_json::json!({"label": "Hidden causes", "text": s}))
}

/// With `search: both`, the path diagram of FCI's graph (PC's is the main one).
pub fn diagram_of_both(spec: &SpecFile, execution: &Execution) -> Option<String> {
    let (Some(Artifact::Structure(st)), Some(Artifact::Measure(m))) =
        (execution.artifacts.get(&StepKind::Structure), execution.artifacts.get(&StepKind::Measure))
    else {
        return None;
    };
    if st.search != crate::spec::types::Search::Both {
        return None;
    }
    let f = st.fci.as_ref()?;
    let tiers = &spec.spec.knowledge.tiers;
    let names: Vec<&String> = m.constructs.keys().collect();
    let nodes: Vec<Node> = m
        .constructs
        .iter()
        .map(|(name, items)| Node {
            name: name.clone(),
            column: tiers.iter().position(|t| t.contains(name)).unwrap_or(tiers.len()),
            items: items.clone(),
        })
        .collect();
    let index = |n: &String| names.iter().position(|x| *x == n);
    let links: Vec<Link> = f
        .edges
        .iter()
        .filter_map(|e| {
            Some(Link {
                from: index(&e.from)?,
                to: index(&e.to)?,
                kind: e.kind,
                coefficient: None,
                support: None,
                conflict: false,
            })
        })
        .collect();
    Some(diagram(&nodes, &links, &[]))
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    #[test]
    fn finding_names_required_and_possible_hidden_causes() {
        let st = json!({"fci": {
            "edges": [
                {"from": "a", "to": "b", "kind": "partially_directed"},
                {"from": "b", "to": "c", "kind": "bidirected"},
                {"from": "c", "to": "e", "kind": "directed"}
            ],
            "hidden_causes": [
                {"a": "a", "b": "b", "kind": "partially_directed", "required": false},
                {"a": "b", "b": "c", "kind": "bidirected", "required": true}
            ]
        }});
        let f = finding(&st).unwrap();
        assert_eq!(
            f["text"],
            "Allowing hidden common causes (FCI), the search finds 3 edges: a o→ b, b ↔ c, c → e. A hidden common \
             cause (and no causation either way): b and c. Possibly a hidden common cause: a and b. Settled as \
             cause and effect: c → e."
        );
        assert!(finding(&json!({"edges": []})).is_none());
    }
}
