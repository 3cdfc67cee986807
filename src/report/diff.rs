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
        Section { title: "Invariance across groups".into(), lines: super::diff_invariance::invariance_changes(ra, rb) },
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
        let (ca, cb) = (&ma["spec"]["content"], &mb["spec"]["content"]);
        let named = if ca.is_null() || cb.is_null() { Vec::new() } else { value_changes(ca, cb) };
        if named.is_empty() {
            // A manifest written before specs were recorded: only the hash can differ.
            out.push("the spec's content changed".into());
        }
        out.extend(named.into_iter().map(|c| format!("spec {c}")));
    }
    out
}

/// Most changed values named before the rest are counted.
const MAX_NAMED_CHANGES: usize = 40;

/// The values that differ between two JSON trees, one line each: `analyses.structure.alpha:
/// 0.05 → 0.2`, `constructs.trust: added`. Mappings are followed key by key, lists of
/// mappings element by element; any other list is one value. Sorted by path, at most
/// `MAX_NAMED_CHANGES` lines (then a count of the rest).
pub fn value_changes(a: &Value, b: &Value) -> Vec<String> {
    let mut out = Vec::new();
    walk_changes("", a, b, &mut out);
    if out.len() > MAX_NAMED_CHANGES {
        let rest = out.len() - MAX_NAMED_CHANGES;
        out.truncate(MAX_NAMED_CHANGES);
        out.push(format!("and {rest} more changed values"));
    }
    out
}

fn join(path: &str, key: &str) -> String {
    if path.is_empty() { key.to_string() } else { format!("{path}.{key}") }
}

/// A value as a reader writes it: strings bare, whole numbers without `.0`, lists and
/// mappings compact, cut short.
fn shown(v: &Value) -> String {
    fn text(v: &Value) -> String {
        match v {
            Value::String(t) => t.clone(),
            Value::Null => "none".into(),
            Value::Number(n) => match n.as_f64() {
                Some(x) if x.fract() == 0.0 && x.abs() < 1e15 => format!("{}", x as i64),
                _ => n.to_string(),
            },
            Value::Array(l) => format!("[{}]", l.iter().map(text).collect::<Vec<_>>().join(", ")),
            Value::Object(m) => {
                format!("{{{}}}", m.iter().map(|(k, v)| format!("{k}: {}", text(v))).collect::<Vec<_>>().join(", "))
            }
            Value::Bool(b) => b.to_string(),
        }
    }
    let t = text(v);
    match t.char_indices().nth(MAX_SHOWN_CHARS) {
        Some((at, _)) => format!("{}…", &t[..at]),
        None => t,
    }
}

/// Most characters of a changed value shown.
const MAX_SHOWN_CHARS: usize = 80;

fn walk_changes(path: &str, a: &Value, b: &Value, out: &mut Vec<String>) {
    if a == b {
        return;
    }
    let is_record_list = |v: &Value| v.as_array().is_some_and(|l| !l.is_empty() && l.iter().all(Value::is_object));
    match (a, b) {
        (Value::Object(x), Value::Object(y)) => {
            let keys: BTreeSet<&String> = x.keys().chain(y.keys()).collect();
            for k in keys {
                let p = join(path, k);
                match (x.get(k), y.get(k)) {
                    (Some(va), Some(vb)) => walk_changes(&p, va, vb, out),
                    (None, Some(vb)) if !vb.is_null() => out.push(format!("{p}: added ({})", shown(vb))),
                    (Some(va), None) if !va.is_null() => out.push(format!("{p}: removed (was {})", shown(va))),
                    _ => {}
                }
            }
        }
        (Value::Array(x), Value::Array(y)) if is_record_list(a) && is_record_list(b) => {
            for (i, (va, vb)) in x.iter().zip(y).enumerate() {
                walk_changes(&format!("{path}[{i}]"), va, vb, out);
            }
            for (i, vb) in y.iter().enumerate().skip(x.len()) {
                out.push(format!("{path}[{i}]: added ({})", shown(vb)));
            }
            for (i, va) in x.iter().enumerate().skip(y.len()) {
                out.push(format!("{path}[{i}]: removed (was {})", shown(va)));
            }
        }
        (Value::Null, v) => out.push(format!("{path}: added ({})", shown(v))),
        (v, Value::Null) => out.push(format!("{path}: removed (was {})", shown(v))),
        _ => out.push(format!("{path}: {} → {}", shown(a), shown(b))),
    }
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
                    EdgeKind::Bidirected => format!("{from} ↔ {to}"),
                    EdgeKind::PartiallyDirected => format!("{from} o→ {to}"),
                    EdgeKind::Nondirected => format!("{from} o–o {to}"),
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
        } else if format!("{old:.2}") != format!("{new:.2}") {
            out.push(format!("effect {} → {}: {old:.2} → {new:.2}, within its 95% interval", k.0, k.1));
        }
    }
    for (k, eb) in &b {
        if !a.contains_key(k)
            && let Some(new) = f(&eb["est"])
        {
            out.push(format!("effect {} → {}: new, {new:.2}", k.0, k.1));
        }
    }
    let fit = |r: &Value| r["measure"]["fit"].clone();
    let (fa, fb) = (fit(ra), fit(rb));
    if let (Some(old), Some(new)) = (f(&fa["rmsea"]), f(&fb["rmsea"])) {
        let beyond =
            matches!((f(&fa["rmsea_ci"][0]), f(&fa["rmsea_ci"][1])), (Some(lo), Some(hi)) if new < lo || new > hi);
        if beyond {
            out.push(format!("measurement RMSEA: {old:.3} → {new:.3}, beyond its 90% interval"));
        } else if format!("{old:.3}") != format!("{new:.3}") {
            out.push(format!("measurement RMSEA: {old:.3} → {new:.3}, within its 90% interval"));
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

    #[test]
    fn spec_values_are_named() {
        let spec_a = json!({"analyses": {"structure": {"alpha": 0.05, "test": "wald"}},
            "data": {"waves": [{"id": "w1", "file": "a.csv"}], "missing_codes": [-9]}});
        let spec_b = json!({"analyses": {"structure": {"alpha": 0.2, "test": "wald"}, "measure": {}},
            "data": {"waves": [{"id": "w1", "file": "b.csv"}], "missing_codes": [-9, 99]}});
        let ma = json!({"spec": {"content_hash": "x", "content": spec_a}});
        let mb = json!({"spec": {"content_hash": "y", "content": spec_b}});
        let md = diff(&json!({}), &ma, &json!({}), &mb).markdown("v1", "v2");
        assert!(md.contains("- spec analyses.structure.alpha: 0.05 → 0.2\n"), "{md}");
        assert!(md.contains("- spec analyses.measure: added ({})\n"), "{md}");
        assert!(md.contains("- spec data.waves[0].file: a.csv → b.csv\n"), "{md}");
        assert!(md.contains("- spec data.missing_codes: [-9] → [-9, 99]\n"), "{md}");
        assert!(!md.contains("the spec's content changed"), "{md}");
        // An older manifest without the spec's content: only the hash is known.
        let old = json!({"spec": {"content_hash": "x"}});
        let md = diff(&json!({}), &old, &json!({}), &mb).markdown("v1", "v2");
        assert!(md.contains("- the spec's content changed"), "{md}");
    }
}
