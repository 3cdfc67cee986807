//! What changed in the invariance analysis between two report versions: each rung's verdict,
//! parameters newly found or no longer found non-invariant, and construct means that moved
//! (beyond the older interval, or within it when the rounded value changed). Central
//! function: `invariance_changes`, one section of `diff::diff`. Works on results.json values.

use std::collections::{BTreeMap, BTreeSet};

use serde_json::Value;

fn s(v: &Value) -> String {
    v.as_str().map_or_else(|| v.to_string(), str::to_string)
}

fn verdict(l: &Value) -> String {
    match (l["holds"].as_bool(), l["partial"].as_bool()) {
        (Some(true), Some(true)) => "holds partially".into(),
        (Some(true), _) => "holds".into(),
        (Some(false), _) => "fails".into(),
        _ => "not tested".into(),
    }
}

/// One line per change; empty when neither version ran `invariance` or nothing changed.
pub fn invariance_changes(ra: &Value, rb: &Value) -> Vec<String> {
    let (a, b) = (&ra["invariance"], &rb["invariance"]);
    let mut out = Vec::new();
    match (a.is_object(), b.is_object()) {
        (false, false) => return out,
        (false, true) => out.push("invariance analysis added".into()),
        (true, false) => {
            out.push("invariance analysis removed".into());
            return out;
        }
        _ => {}
    }
    let levels = |v: &Value| -> BTreeMap<String, String> {
        v["levels"].as_array().into_iter().flatten().map(|l| (s(&l["level"]), verdict(l))).collect()
    };
    let (la, lb) = (levels(a), levels(b));
    for name in ["configural", "metric", "scalar", "strict"] {
        let (old, new) = (la.get(name), lb.get(name));
        if a.is_object() && old != new {
            let shown = |v: Option<&String>| v.cloned().unwrap_or_else(|| "not tested".into());
            out.push(format!("{name} invariance: {} → {}", shown(old), shown(new)));
        }
    }
    let freed = |v: &Value| -> BTreeSet<String> {
        v["noninvariant"]
            .as_array()
            .into_iter()
            .flatten()
            .map(|n| {
                format!(
                    "{} of {} ({})",
                    s(&n["parameter"]),
                    s(&n["item"]),
                    n["groups"].as_array().into_iter().flatten().map(s).collect::<Vec<_>>().join(", ")
                )
            })
            .collect()
    };
    if a.is_object() {
        let (fa, fb) = (freed(a), freed(b));
        out.extend(fb.difference(&fa).map(|x| format!("now non-invariant: {x}")));
        out.extend(fa.difference(&fb).map(|x| format!("no longer non-invariant: {x}")));
    }
    let means = |v: &Value| -> BTreeMap<(String, String), Value> {
        v["latent_means"]
            .as_array()
            .into_iter()
            .flatten()
            .map(|m| ((s(&m["construct"]), s(&m["group"])), m.clone()))
            .collect()
    };
    let (ma, mb) = (means(a), means(b));
    for (k, mnew) in &mb {
        let Some(new) = mnew["diff"].as_f64() else { continue };
        match ma.get(k).and_then(|m| Some((m["diff"].as_f64()?, m["ci"][0].as_f64()?, m["ci"][1].as_f64()?))) {
            None => out.push(format!("mean of {} in {}: {new:+.2} (newly compared)", k.0, k.1)),
            Some((old, lo, hi)) if new < lo || new > hi => {
                out.push(format!("mean of {} in {}: {old:+.2} → {new:+.2}, beyond its 95% interval", k.0, k.1));
            }
            Some((old, _, _)) if format!("{old:.2}") != format!("{new:.2}") => {
                out.push(format!("mean of {} in {}: {old:+.2} → {new:+.2}, within its 95% interval", k.0, k.1));
            }
            _ => {}
        }
    }
    for k in ma.keys().filter(|k| !mb.contains_key(*k)) {
        out.push(format!("mean of {} in {}: no longer compared", k.0, k.1));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    #[test]
    fn verdicts_freed_parameters_and_means() {
        let ra = json!({"invariance": {
            "levels": [{"level": "configural", "holds": true}, {"level": "metric", "holds": true}, {"level": "scalar", "holds": true, "partial": false}],
            "noninvariant": [],
            "latent_means": [{"construct": "trust", "group": "autumn", "diff": -0.10, "ci": [-0.2, 0.0]},
                             {"construct": "crowding", "group": "autumn", "diff": 0.05, "ci": [-0.05, 0.15]}]}});
        let rb = json!({"invariance": {
            "levels": [{"level": "configural", "holds": true}, {"level": "metric", "holds": true}, {"level": "scalar", "holds": true, "partial": true}],
            "noninvariant": [{"item": "pu2", "parameter": "intercept", "groups": ["autumn"]}],
            "latent_means": [{"construct": "trust", "group": "autumn", "diff": -0.35, "ci": [-0.5, -0.2]},
                             {"construct": "crowding", "group": "autumn", "diff": 0.052, "ci": [-0.05, 0.15]}]}});
        let lines = invariance_changes(&ra, &rb);
        assert_eq!(
            lines,
            [
                "scalar invariance: holds → holds partially",
                "now non-invariant: intercept of pu2 (autumn)",
                "mean of trust in autumn: -0.10 → -0.35, beyond its 95% interval",
            ]
        );
        assert!(invariance_changes(&json!({}), &json!({})).is_empty());
        assert_eq!(invariance_changes(&json!({}), &rb)[0], "invariance analysis added");
    }
}
