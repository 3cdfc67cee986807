//! The report context: everything the templates show, as one JSON value built from the spec,
//! the execution and results.json. Aggregates only; the respondent table never enters it, and
//! no single respondent's value does (`disclosure` says what the item table shows instead).

use serde_json::{Value, json};

use crate::pipeline::executor::Execution;
use crate::report::diagram::{Link, Node, diagram};
use crate::report::svg::heatmap;
use crate::spec::SpecFile;
use crate::steps::covariance::PairMethod;
use crate::steps::{Artifact, StepKind};

pub fn report_context(spec: &SpecFile, execution: &Execution, results: &Value) -> Value {
    let s = &spec.spec;
    let constructs: Vec<Value> = s
        .constructs
        .iter()
        .map(|(name, c)| json!({"name": name, "items": c.items, "reliability": c.reliability}))
        .collect();
    let steps: Vec<Value> = execution
        .outcomes
        .iter()
        .map(|o| json!({"kind": o.kind.name(), "key": o.key.short(), "cached": o.cached, "seconds": o.seconds, "description": o.description}))
        .collect();
    let covariance = match execution.artifacts.get(&StepKind::Covariance) {
        Some(Artifact::Covariance(c)) => {
            let groups: Vec<String> = match execution.artifacts.get(&StepKind::Load) {
                Some(Artifact::Load(l)) => l.summary.items.iter().map(|i| i.construct.clone()).collect(),
                _ => Vec::new(),
            };
            let mut counts = serde_json::Map::new();
            for m in c.method.values() {
                let key = serde_json::to_value(m).ok().and_then(|v| v.as_str().map(str::to_string)).unwrap_or_default();
                let entry = counts.entry(key).or_insert(Value::from(0));
                *entry = Value::from(entry.as_u64().unwrap_or(0) + 1);
            }
            let per_item: Vec<Value> = c
                .items
                .iter()
                .map(|item| {
                    // Counted by value, in order of first appearance; named only for the table.
                    let mut methods: Vec<(PairMethod, usize)> = Vec::new();
                    for m in c.method.iter().filter(|(pair, _)| pair.contains(item)).map(|(_, m)| *m) {
                        match methods.iter_mut().find(|(l, _)| *l == m) {
                            Some(entry) => entry.1 += 1,
                            None => methods.push((m, 1)),
                        }
                    }
                    let label = |m: &PairMethod| {
                        serde_json::to_value(m).ok().and_then(|v| v.as_str().map(str::to_string)).unwrap_or_default()
                    };
                    let merges = c.merges.iter().filter(|m| &m.item == item).count();
                    json!({
                        "item": item,
                        "kind": c.kind.get(item),
                        "methods": methods.iter().map(|(m, k)| format!("{} ({k})", label(m))).collect::<Vec<_>>().join(", "),
                        "merges": merges,
                    })
                })
                .collect();
            json!({
                "result": results.get("covariance"),
                "per_item": per_item,
                "heatmap": heatmap(&c.items, &groups, &c.correlation),
                "method_counts": counts,
                "min_n": c.min_n(),
                "max_n": c.n.iter().flatten().copied().max().unwrap_or(0),
            })
        }
        _ => Value::Null,
    };
    let tiers: Vec<Value> = s.knowledge.tiers.iter().map(|t| json!(t)).collect();
    let diagram = structure_diagram(spec, execution);
    json!({
        "findings": super::findings::findings(results),
        "few_replicates": super::findings::MIN_INTERVAL_REPLICATES,
        "title": s.title,
        "spec_path": spec.path.display().to_string(),
        "tool_version": env!("CARGO_PKG_VERSION"),
        "data": results.get("data"),
        "disclosure": disclosure(),
        "source": if s.data.matrix.is_some() { "matrix" } else { "waves" },
        "constructs": constructs,
        "knowledge": {"tiers": tiers, "forbid": s.knowledge.forbid, "require": s.knowledge.require},
        "covariance": covariance,
        "purify": results.get("purify"),
        "discover": results.get("discover"),
        "measure": results.get("measure"),
        "structure": results.get("structure"),
        "resample": results.get("resample"),
        "edge_support": edge_support(execution),
        "diagram": diagram,
        "pag_diagram": super::pag_view::diagram_of_both(spec, execution),
        "truth": truth_comparison(spec, execution),
        "sensitivity": results.get("sensitivity"),
        "sensitivity_plots": sensitivity_plots(spec, execution),
        "sensitivity_tables": sensitivity_tables(spec, results),
        "leave_one_out_tables": leave_one_out_tables(results),
        "steps": steps,
        "invariance": results.get("invariance"),
        "invariance_plot": results.get("invariance").and_then(crate::report::means_plot::from_results),
    })
}

/// What the item table shows in place of single answers (statistical disclosure control).
fn disclosure() -> String {
    use crate::steps::load::{MEAN_DIGITS, MIN_GROUP as k, PERCENTILE_DIGITS};
    format!(
        "No value in this report is a single respondent's answer: continuous items show mean and SD to \
         {MEAN_DIGITS} significant digits and, as spread, the 5th to 95th percentile to {PERCENTILE_DIGITS}, \
         given only when at least {k} \
         answers lie beyond each; ordinal items show their response levels with counts, levels with fewer \
         than {k} answers pooled with their neighbours; no minimum or maximum is shown."
    )
}

/// The path diagram, when the structure search ran.
fn structure_diagram(spec: &SpecFile, execution: &Execution) -> Option<String> {
    let (Some(Artifact::Structure(st)), Some(Artifact::Measure(m))) =
        (execution.artifacts.get(&StepKind::Structure), execution.artifacts.get(&StepKind::Measure))
    else {
        return None;
    };
    let tiers = &spec.spec.knowledge.tiers;
    let last = tiers.len();
    let names: Vec<&String> = m.constructs.keys().collect();
    let nodes: Vec<Node> = m
        .constructs
        .iter()
        .map(|(name, items)| Node {
            name: name.clone(),
            column: tiers.iter().position(|t| t.contains(name)).unwrap_or(last),
            items: items.clone(),
        })
        .collect();
    let index = |n: &String| names.iter().position(|x| *x == n);
    let links: Vec<Link> = st
        .edges
        .iter()
        .filter_map(|e| {
            let coefficient = st.effects.iter().find(|f| f.from == e.from && f.to == e.to).and_then(|f| f.std);
            // With resampling, the share of replicates with the edge as drawn (oriented the
            // same way for a directed edge; present at all for an undirected one).
            let support = drawn_support(execution, &e.from, &e.to, e.kind.is_directed());
            // Orientation conflicts only: a split of separating sets leaves its triple unoriented.
            let conflict = st
                .conflicts
                .iter()
                .filter(|k| k.kind != crate::steps::structure_checks::ConflictKind::SepsetsDisagree)
                .flat_map(|k| &k.edges)
                .any(|[a, b]| (*a == e.from && *b == e.to) || (*a == e.to && *b == e.from));
            Some(Link { from: index(&e.from)?, to: index(&e.to)?, kind: e.kind, coefficient, support, conflict })
        })
        .collect();
    let dropped: Vec<String> = match execution.artifacts.get(&StepKind::Purify) {
        Some(Artifact::Purify(p)) => {
            p.constructs.values().flat_map(|c| c.dropped.iter().map(|d| d.item.clone())).collect()
        }
        _ => Vec::new(),
    };
    Some(diagram(&nodes, &links, &dropped))
}

/// The known truth beside the findings, when the spec names the model the data came from (read
/// and checked once, with the spec: `SpecFile::truth`).
fn truth_comparison(spec: &SpecFile, execution: &Execution) -> Option<Value> {
    let rel = spec.spec.report.truth_model.as_ref()?;
    let truth = &spec.truth.as_ref()?.truth;
    let dropped: Vec<String> = match execution.artifacts.get(&StepKind::Purify) {
        Some(Artifact::Purify(p)) => {
            p.constructs.values().flat_map(|c| c.dropped.iter().map(|d| d.item.clone())).collect()
        }
        _ => Vec::new(),
    };
    let structure = match execution.artifacts.get(&StepKind::Structure) {
        Some(Artifact::Structure(s)) => Some(s),
        _ => None,
    };
    let mut rows: Vec<Value> = Vec::new();
    let found = |a: &str, b: &str| {
        structure.and_then(|s| s.edges.iter().find(|e| (e.from == a && e.to == b) || (e.from == b && e.to == a)))
    };
    for p in &truth.paths {
        let edge = found(&p.from, &p.to);
        let est =
            structure.and_then(|s| s.effects.iter().find(|f| f.from == p.from && f.to == p.to)).and_then(|f| f.std);
        let status = match edge {
            Some(e) if e.kind.is_directed() && e.from == p.from => "found, oriented as true",
            Some(e) if e.kind.is_directed() => "found, reversed",
            Some(_) => "found, unoriented",
            None => "missed",
        };
        rows.push(json!({"from": p.from, "to": p.to, "true_std": p.standardized, "est_std": est, "status": status}));
    }
    if let Some(s) = structure {
        for e in &s.edges {
            if !truth.paths.iter().any(|p| (p.from == e.from && p.to == e.to) || (p.from == e.to && p.to == e.from)) {
                let est = s.effects.iter().find(|f| f.from == e.from && f.to == e.to).and_then(|f| f.std);
                rows.push(json!({"from": e.from, "to": e.to, "true_std": 0.0, "est_std": est, "status": "spurious (not in the model)"}));
            }
        }
    }
    Some(json!({
        "file": rel.display().to_string(),
        "impure": truth.impure,
        "dropped": dropped,
        "paths": rows,
        "searched": structure.is_some(),
    }))
}

/// The bootstrap share of replicates with the edge `a` -> `b` as drawn (`directed`: oriented
/// `a` -> `b`; otherwise adjacent at all), when resampling ran.
fn drawn_support(execution: &Execution, a: &str, b: &str, directed: bool) -> Option<f64> {
    let Some(Artifact::Resample(r)) = execution.artifacts.get(&StepKind::Resample) else { return None };
    let found = r.edges.iter().find(|e| (e.from == a && e.to == b) || (e.from == b && e.to == a));
    Some(found.map_or(0.0, |e| match (directed, e.from == a) {
        (false, _) => e.present,
        (true, true) => e.forward,
        (true, false) => e.backward,
    }))
}

/// For each edge of the structure, its bootstrap presence and orientation shares.
fn edge_support(execution: &Execution) -> Value {
    let (Some(Artifact::Structure(st)), Some(Artifact::Resample(r))) =
        (execution.artifacts.get(&StepKind::Structure), execution.artifacts.get(&StepKind::Resample))
    else {
        return Value::Null;
    };
    let rows: Vec<Value> = st
        .edges
        .iter()
        .map(|e| {
            let f = r.edges.iter().find(|x| (x.from == e.from && x.to == e.to) || (x.from == e.to && x.to == e.from));
            let (present, same, other) = match f {
                Some(x) if x.from == e.from => (x.present, x.forward, x.backward),
                Some(x) => (x.present, x.backward, x.forward),
                None => (0.0, 0.0, 0.0),
            };
            json!({"present": present, "as_shown": same, "reversed": other})
        })
        .collect();
    Value::Array(rows)
}

/// One plot per effect and swept construct, the declared reliability marked.
fn sensitivity_plots(spec: &SpecFile, execution: &Execution) -> Vec<Value> {
    let Some(Artifact::Sensitivity(s)) = execution.artifacts.get(&StepKind::Sensitivity) else { return Vec::new() };
    s.curves
        .iter()
        .map(|c| {
            let declared = spec.spec.constructs.get(&c.construct).and_then(|d| d.reliability);
            json!({
                "title": format!("{} → {} against the reliability of {}", c.from, c.to, c.construct),
                "svg": crate::report::svg::sensitivity_plot(&crate::report::svg::SensitivityCurve {
                    construct: &c.construct,
                    xs: &c.reliability,
                    est: &c.est,
                    lo: &c.lo,
                    hi: &c.hi,
                    tipping: c.tipping,
                    declared,
                }),
            })
        })
        .collect()
}

/// With `leave_one_out`: one table per kind of conclusion (edges found, pairs found
/// independent, others), a row per conclusion with the items whose omission overturns it.
fn leave_one_out_tables(results: &Value) -> Value {
    let s = &results["sensitivity"];
    let items = s["left_out"].as_array().map_or(0, Vec::len);
    let Some(conclusions) = s["conclusions"].as_array().filter(|_| items > 0) else { return Value::Null };
    let mut tables = Vec::new();
    for (kind, title) in [("edge ", "Edges found"), ("no edge", "Pairs found independent"), ("", "Other conclusions")] {
        let rows: Vec<Value> = conclusions
            .iter()
            .filter(|c| {
                let what = c["what"].as_str().unwrap_or("");
                match kind {
                    "" => !what.starts_with("edge ") && !what.starts_with("no edge"),
                    k => what.starts_with(k),
                }
            })
            .map(|c| {
                let holds = c["holds_without"].as_array().map_or(0, Vec::len);
                json!({"what": c["what"], "holds": holds, "fails_without": c["fails_without"]})
            })
            .collect();
        if !rows.is_empty() {
            let all_hold = rows.iter().all(|r| r["fails_without"].as_array().is_none_or(Vec::is_empty));
            tables.push(json!({"title": title, "rows": rows, "all_hold": all_hold}));
        }
    }
    json!({"items": items, "tables": tables})
}

/// The sensitivity conclusions as one table per kind of conclusion (edges found, pairs found
/// independent, others) and swept construct: a row per conclusion, a column per grid value
/// (the declared one marked), a cell saying whether the conclusion holds there. And the failed
/// refits in words: how many, at which reliabilities, and why such refits fail.
fn sensitivity_tables(spec: &SpecFile, results: &Value) -> Value {
    let s = &results["sensitivity"];
    let Some(conclusions) = s["conclusions"].as_array() else { return Value::Null };
    let grids = spec.spec.analyses.sensitivity.as_ref().map(|p| p.reliability.clone()).unwrap_or_default();
    let mut tables = Vec::new();
    for (construct, grid) in &grids {
        let declared = spec.spec.constructs.get(construct).and_then(|c| c.reliability);
        for (kind, title) in
            [("edge ", "Edges found"), ("no edge", "Pairs found independent"), ("", "Other conclusions")]
        {
            let rows: Vec<Value> = conclusions
                .iter()
                .filter(|c| {
                    let what = c["what"].as_str().unwrap_or("");
                    match kind {
                        "" => !what.starts_with("edge ") && !what.starts_with("no edge"),
                        k => what.starts_with(k),
                    }
                })
                .map(|c| {
                    let holds: Vec<f64> = c["holds_for"][construct].as_array().into_iter().flatten().filter_map(Value::as_f64).collect();
                    let cells: Vec<bool> = grid.iter().map(|g| holds.iter().any(|h| (h - g).abs() < 1e-9)).collect();
                    json!({"what": c["what"], "cells": cells, "prior": c["prior_probability"], "tipping": c["tipping"][construct]})
                })
                .collect();
            if !rows.is_empty() {
                let all_hold = rows.iter().all(|r| r["cells"].as_array().is_some_and(|c| c.iter().all(|b| b == true)));
                tables.push(json!({
                    "title": title,
                    "construct": construct,
                    "grid": grid,
                    "declared": declared,
                    "rows": rows,
                    "all_hold": all_hold,
                }));
            }
        }
    }
    let failed = s["failed"].as_u64().unwrap_or(0);
    let failures = s["failures"].as_array().map(Vec::as_slice).unwrap_or_default();
    // "prior draw 165 (fare_burden = 0.181): …": the reliabilities at which refits failed.
    let at: Vec<String> = failures
        .iter()
        .filter_map(|f| {
            let f = f.as_str()?;
            let inner = f.split_once('(')?.1.split_once(')')?.0;
            inner.contains(" = ").then(|| inner.to_string())
        })
        .collect();
    let failed_words = (failed > 0).then(|| {
        let shown = if at.is_empty() { String::new() } else { format!(" (among them {})", at.join(", ")) };
        format!(
            "{failed} refit{} failed{shown}. Refits fail when the assumed reliability is so low that the corrected correlations among the constructs leave the valid range (above 1 in size), which no model can fit; those refits are left out of every share and probability.",
            if failed == 1 { "" } else { "s" }
        )
    });
    json!({"tables": tables, "failed_words": failed_words})
}
