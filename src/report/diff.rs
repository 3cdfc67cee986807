//! What changed between two report versions (for example before and after a new wave):
//! inputs, rows, items kept and dropped, clusters, edges added, removed or reoriented, and
//! estimates and fit that moved beyond their intervals. Central type: `Changes`. Works on the
//! results.json and manifest.json values only; `construe diff` and the report's "changes since
//! the previous version" section both use it.

use std::collections::{BTreeMap, BTreeSet};

use construe_stats::search::EdgeKind;
use serde::{Deserialize, Serialize};
use serde_json::Value;

/// One titled group of change lines.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Section {
    pub title: String,
    pub lines: Vec<String>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Changes {
    pub sections: Vec<Section>,
}

impl Changes {
    pub fn is_empty(&self) -> bool {
        self.sections.iter().all(|s| s.lines.is_empty())
    }

    /// Markdown fit for a review comment.
    pub fn markdown(&self, from: &str, to: &str) -> String {
        let mut out = format!("## Changes from {from} to {to}\n");
        if self.is_empty() {
            out.push_str("\nNo differences in inputs or results.\n");
        }
        for s in self.sections.iter().filter(|s| !s.lines.is_empty()) {
            out.push_str(&format!("\n### {}\n\n", s.title));
            for l in &s.lines {
                out.push_str(&format!("- {l}\n"));
            }
        }
        out
    }
}

fn s(v: &Value) -> String {
    v.as_str().map_or_else(|| v.to_string(), str::to_string)
}

fn f(v: &Value) -> Option<f64> {
    v.as_f64()
}

/// Compares results and manifests of an older (`a`) and a newer (`b`) version.
pub fn diff(ra: &Value, ma: &Value, rb: &Value, mb: &Value) -> Changes {
    let sections = vec![
        Section { title: "Inputs".into(), lines: inputs(ma, mb, ra, rb) },
        Section { title: "Items kept and dropped".into(), lines: items(ra, rb) },
        Section { title: "Clusters".into(), lines: clusters(ra, rb) },
        Section { title: "Edges among constructs".into(), lines: edges(ra, rb) },
        Section { title: "Estimates and fit".into(), lines: estimates(ra, rb) },
    ];
    Changes { sections }
}

fn inputs(ma: &Value, mb: &Value, ra: &Value, rb: &Value) -> Vec<String> {
    let list = |m: &Value| -> BTreeMap<String, String> {
        m["inputs"]
            .as_array()
            .into_iter()
            .flatten()
            .map(|i| (format!("{} ({})", s(&i["path"]), s(&i["wave"])), s(&i["blake3"])))
            .collect()
    };
    let (a, b) = (list(ma), list(mb));
    let mut out = Vec::new();
    for (k, h) in &b {
        match a.get(k) {
            None => out.push(format!("added input {k}")),
            Some(old) if old != h => out.push(format!("changed input {k}")),
            _ => {}
        }
    }
    out.extend(a.keys().filter(|k| !b.contains_key(*k)).map(|k| format!("removed input {k}")));
    if ra["data"]["rows"] != rb["data"]["rows"] {
        out.push(format!("rows: {} → {}", ra["data"]["rows"], rb["data"]["rows"]));
    }
    if ma["spec"]["content_hash"] != mb["spec"]["content_hash"] {
        out.push("the spec's content changed".into());
    }
    out
}

fn kept(r: &Value) -> Option<BTreeMap<String, BTreeSet<String>>> {
    let constructs = r["purify"]["constructs"].as_object()?;
    Some(
        constructs
            .iter()
            .map(|(c, v)| (c.clone(), v["kept"].as_array().into_iter().flatten().map(s).collect()))
            .collect(),
    )
}

fn items(ra: &Value, rb: &Value) -> Vec<String> {
    let (Some(a), Some(b)) = (kept(ra), kept(rb)) else { return Vec::new() };
    let mut out = Vec::new();
    for (c, now) in &b {
        let before = a.get(c).cloned().unwrap_or_default();
        for i in before.difference(now) {
            out.push(format!("{i} ({c}) is now dropped"));
        }
        for i in now.difference(&before) {
            out.push(format!("{i} ({c}) is now kept"));
        }
    }
    out
}

fn cluster_set(r: &Value) -> Option<BTreeSet<Vec<String>>> {
    let list = r["discover"]["clusters"].as_array()?;
    Some(
        list.iter()
            .map(|c| {
                let mut v: Vec<String> = c.as_array().into_iter().flatten().map(s).collect();
                v.sort();
                v
            })
            .collect(),
    )
}

fn clusters(ra: &Value, rb: &Value) -> Vec<String> {
    let (Some(a), Some(b)) = (cluster_set(ra), cluster_set(rb)) else { return Vec::new() };
    let mut out: Vec<String> = b.difference(&a).map(|c| format!("new cluster {}", c.join(", "))).collect();
    out.extend(a.difference(&b).map(|c| format!("cluster no longer found: {}", c.join(", "))));
    out
}

/// Edges keyed by unordered pair, with their shown form.
fn edge_map(r: &Value) -> Option<BTreeMap<(String, String), String>> {
    let list = r["structure"]["edges"].as_array()?;
    Some(
        list.iter()
            .map(|e| {
                let (from, to) = (s(&e["from"]), s(&e["to"]));
                let key = if from < to { (from.clone(), to.clone()) } else { (to.clone(), from.clone()) };
                // Read as the type results.json wrote; anything else draws as undirected.
                let kind = EdgeKind::deserialize(&e["kind"]).unwrap_or(EdgeKind::Undirected);
                let shown = match kind {
                    EdgeKind::Directed => format!("{from} → {to}"),
                    EdgeKind::Undirected => format!("{from} — {to}"),
                };
                (key, shown)
            })
            .collect(),
    )
}

fn edges(ra: &Value, rb: &Value) -> Vec<String> {
    let (Some(a), Some(b)) = (edge_map(ra), edge_map(rb)) else { return Vec::new() };
    let mut out = Vec::new();
    for (k, now) in &b {
        match a.get(k) {
            None => out.push(format!("edge added: {now}")),
            Some(before) if before != now => out.push(format!("edge reoriented: {before} became {now}")),
            _ => {}
        }
    }
    out.extend(a.iter().filter(|(k, _)| !b.contains_key(*k)).map(|(_, e)| format!("edge removed: {e}")));
    out
}

fn estimates(ra: &Value, rb: &Value) -> Vec<String> {
    let mut out = Vec::new();
    let effects = |r: &Value| -> BTreeMap<(String, String), Value> {
        r["structure"]["effects"]
            .as_array()
            .into_iter()
            .flatten()
            .map(|e| ((s(&e["from"]), s(&e["to"])), e.clone()))
            .collect()
    };
    let (a, b) = (effects(ra), effects(rb));
    for (k, eb) in &b {
        let Some(ea) = a.get(k) else { continue };
        let (Some(old), Some(new)) = (f(&ea["est"]), f(&eb["est"])) else { continue };
        let outside =
            |e: &Value, x: f64| matches!((f(&e["ci"][0]), f(&e["ci"][1])), (Some(lo), Some(hi)) if x < lo || x > hi);
        if outside(ea, new) || outside(eb, old) {
            out.push(format!("effect {} → {}: {old:.3} → {new:.3}, beyond its 95% interval", k.0, k.1));
        }
    }
    let fit = |r: &Value| r["measure"]["fit"].clone();
    let (fa, fb) = (fit(ra), fit(rb));
    if let (Some(old), Some(new)) = (f(&fa["rmsea"]), f(&fb["rmsea"])) {
        let beyond =
            matches!((f(&fa["rmsea_ci"][0]), f(&fa["rmsea_ci"][1])), (Some(lo), Some(hi)) if new < lo || new > hi);
        if beyond {
            out.push(format!("measurement RMSEA: {old:.3} → {new:.3}, beyond its 90% interval"));
        }
        if let (Some(ca), Some(cb)) = (f(&fa["cfi"]), f(&fb["cfi"]))
            && (ca - cb).abs() >= 0.01
        {
            out.push(format!("measurement CFI: {ca:.3} → {cb:.3}"));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    #[test]
    fn edges_items_and_inputs() {
        let ma = json!({"inputs": [{"path": "a.csv", "wave": "w1", "blake3": "1"}], "spec": {"content_hash": "x"}});
        let mb = json!({"inputs": [{"path": "a.csv", "wave": "w1", "blake3": "1"}, {"path": "b.csv", "wave": "w2", "blake3": "2"}], "spec": {"content_hash": "x"}});
        let ra = json!({"data": {"rows": 10}, "purify": {"constructs": {"c": {"kept": ["x1", "x2", "x3"]}}},
            "structure": {"edges": [{"from": "a", "to": "b", "kind": "directed"}, {"from": "b", "to": "c", "kind": "undirected"}]}});
        let rb = json!({"data": {"rows": 20}, "purify": {"constructs": {"c": {"kept": ["x1", "x2"]}}},
            "structure": {"edges": [{"from": "b", "to": "a", "kind": "directed"}, {"from": "a", "to": "c", "kind": "directed"}]}});
        let c = diff(&ra, &ma, &rb, &mb);
        let md = c.markdown("v1", "v2");
        assert!(md.contains("- added input b.csv (w2)"), "{md}");
        assert!(md.contains("- rows: 10 → 20"));
        assert!(md.contains("- x3 (c) is now dropped"));
        assert!(md.contains("- edge reoriented: a → b became b → a"));
        assert!(md.contains("- edge added: a → c"));
        assert!(md.contains("- edge removed: b — c"));
    }
}
