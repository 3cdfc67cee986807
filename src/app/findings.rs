//! The report's findings: what the data support, in a few sentences a reader takes in at a
//! glance, built from results.json alone (so every sentence names a number the evidence
//! sections show). Central function: `findings`, returning `{points, kept, cautions}`: each
//! point a labelled sentence, `kept` one row per construct, `cautions` the warnings that apply
//! to this run. Aggregates only, like the rest of the report context.

use serde_json::{Value, json};

/// Share of bootstrap replicates at or above which an edge (and its orientation) is called
/// stable; below `FRAGILE` it is called fragile. Presentation labels, stated in the text.
pub const STABLE: f64 = 0.8;
pub const FRAGILE: f64 = 0.6;

/// Fewest replicates behind a percentile 95% interval with at least one replicate in each
/// 2.5% tail (40 × 0.025 = 1); an interval from fewer is flagged.
pub const MIN_INTERVAL_REPLICATES: u64 = 40;

/// Usual guidance for the measurement model's fit (Hu & Bentler 1999): guidance, not a test.
const RMSEA_GOOD: f64 = 0.06;
const CFI_GOOD: f64 = 0.95;
const SRMR_GOOD: f64 = 0.08;

fn text(v: &Value) -> String {
    v.as_str().map_or_else(|| v.to_string(), str::to_string)
}

fn list(items: &[String]) -> String {
    match items {
        [] => String::new(),
        [one] => one.clone(),
        [init @ .., last] => format!("{} and {last}", init.join(", ")),
    }
}

fn pct(x: f64) -> String {
    format!("{:.0}%", x * 100.0)
}

/// The findings of one run.
pub fn findings(results: &Value) -> Value {
    let mut points = Vec::new();
    let mut cautions = Vec::new();
    let kept = measurement_point(results, &mut points);
    fit_point(results, &mut points, &mut cautions);
    structure_point(results, &mut points, &mut cautions);
    points.extend(super::pag_view::finding(&results["structure"]));
    claims_point(results, &mut points, &mut cautions);
    sensitivity_point(results, &mut points, &mut cautions);
    purify_cautions(results, &mut cautions);
    super::findings_invariance::invariance_point(results, &mut points, &mut cautions);
    data_cautions(results, &mut cautions);
    json!({"points": points, "kept": kept, "cautions": cautions})
}

fn point(label: &str, text: String) -> Value {
    json!({"label": label, "text": text})
}

/// Constructs and their kept items, with each construct's reliability (ω) when measured.
fn measurement_point(r: &Value, points: &mut Vec<Value>) -> Vec<Value> {
    let Some(constructs) = r["purify"]["constructs"].as_object() else { return Vec::new() };
    let omega = |c: &str| r["measure"]["reliability"][c]["omega"].as_f64();
    let mut rows = Vec::new();
    let (mut n_kept, mut n_all) = (0, 0);
    let mut dropped_named = Vec::new();
    for (name, c) in constructs {
        let kept: Vec<String> = c["kept"].as_array().into_iter().flatten().map(text).collect();
        let dropped: Vec<String> = c["dropped"].as_array().into_iter().flatten().map(|d| text(&d["item"])).collect();
        n_kept += kept.len();
        n_all += kept.len() + dropped.len();
        dropped_named.extend(dropped.iter().map(|d| format!("{d} ({name})")));
        rows.push(json!({"construct": name, "kept": kept, "dropped": dropped, "omega": omega(name)}));
    }
    let sentence = if dropped_named.is_empty() {
        format!(
            "{} constructs, each measured cleanly by all {n_all} declared items: no item failed the vanishing-tetrad test.",
            constructs.len()
        )
    } else {
        format!(
            "{} constructs, measured by {n_kept} of the {n_all} declared items. Purification dropped {}: each breaks vanishing tetrads, so it also reflects something other than its construct (details in section 5).",
            constructs.len(),
            list(&dropped_named)
        )
    };
    points.push(point("Constructs", sentence));
    rows
}

fn fit_point(r: &Value, points: &mut Vec<Value>, cautions: &mut Vec<String>) {
    let m = &r["measure"];
    let f = &m["fit"];
    let (Some(rmsea), Some(cfi), Some(srmr)) = (f["rmsea"].as_f64(), f["cfi"].as_f64(), f["srmr"].as_f64()) else {
        return;
    };
    let met = [rmsea <= RMSEA_GOOD, cfi >= CFI_GOOD, srmr <= SRMR_GOOD].iter().filter(|b| **b).count();
    let verdict = match met {
        3 => "fits well by the usual guidance",
        0 => "fits poorly by the usual guidance",
        _ => "fits acceptably on some indices only",
    };
    let model = if r["purify"].is_object() { "The purified measurement model" } else { "The measurement model" };
    let mut s = format!(
        "{model} {verdict} (Hu & Bentler 1999: RMSEA ≤ {RMSEA_GOOD}, CFI ≥ {CFI_GOOD}, SRMR ≤ {SRMR_GOOD}): RMSEA {rmsea:.3}, CFI {cfi:.3}, SRMR {srmr:.3}."
    );
    let u = &m["unpurified"]["fit"];
    if let (Some(ur), Some(uc)) = (u["rmsea"].as_f64(), u["cfi"].as_f64()) {
        s.push_str(&format!(" With every declared item: RMSEA {ur:.3}, CFI {uc:.3}."));
    }
    s.push_str(&diagnosis_sentence(m));
    points.push(point("Fit", s));
    if m["converged"] == Value::Bool(false) {
        cautions.push("The measurement model did not converge: treat its numbers as unreliable.".into());
    }
    if let Some(h) = m["heywood"].as_array().filter(|h| !h.is_empty()) {
        let names: Vec<String> = h.iter().map(|x| text(&x["parameter"])).collect();
        cautions.push(format!("Improper solution (Heywood case) for {}.", list(&names)));
    }
}

/// One sentence on the declared impurities modelled and, when the largest modification index
/// reads as a material misfit, what it suggests (empty when there is nothing to say).
fn diagnosis_sentence(m: &Value) -> String {
    let mut s = String::new();
    let modelled = m["declared"].as_array().map_or(0, |d| d.iter().filter(|x| x["modelled"] == true).count());
    if modelled > 0 {
        s.push_str(&format!(
            " It estimates {modelled} declared impurit{} rather than dropping the items.",
            if modelled == 1 { "y" } else { "ies" }
        ));
    }
    let top = &m["suggestions"][0];
    if top["judgement"] == "misspecified" {
        let items: Vec<String> =
            top["items"].as_array().map(|a| a.iter().map(|i| format!("`{}`", text(i))).collect()).unwrap_or_default();
        let what = if top["kind"] == "cross_loading" {
            format!("a loading of {} on {}", list(&items), text(&top["construct"]))
        } else {
            format!("an error covariance of {}", list(&items))
        };
        s.push_str(&format!(
            " The largest modification index ({:.1}) suggests {what} (standardized change {:.2}); acting on it is exploratory (section 5).",
            top["mi"].as_f64().unwrap_or(f64::NAN),
            top["std_epc"].as_f64().unwrap_or(f64::NAN)
        ));
    }
    s
}

fn structure_point(r: &Value, points: &mut Vec<Value>, cautions: &mut Vec<String>) {
    let st = &r["structure"];
    if st["search"] == "fci" {
        return; // FCI's graph has its own finding (pag_view)
    }
    let Some(edges) = st["edges"].as_array() else { return };
    let boot = r["resample"]["edges"].as_array();
    let support = |a: &str, b: &str| -> Option<(f64, f64)> {
        let e = boot?.iter().find(|e| (e["from"] == a && e["to"] == b) || (e["from"] == b && e["to"] == a))?;
        let present = e["present"].as_f64()?;
        let as_shown = if e["from"] == a { e["forward"].as_f64()? } else { e["backward"].as_f64()? };
        Some((present, as_shown))
    };
    let std = |a: &Value, b: &Value| {
        st["effects"].as_array()?.iter().find(|f| f["from"] == *a && f["to"] == *b)?["std"].as_f64()
    };
    let mut shown = Vec::new();
    let (mut stable, mut fragile) = (Vec::new(), Vec::new());
    for e in edges {
        let (a, b) = (text(&e["from"]), text(&e["to"]));
        let directed = e["kind"] == "directed";
        let name = if directed { format!("{a} → {b}") } else { format!("{a} — {b}") };
        let coef = std(&e["from"], &e["to"]).map(|c| format!("{c:+.2}"));
        match support(&a, &b) {
            Some((present, as_shown)) => {
                let share = if directed { as_shown } else { present };
                shown.push(match coef {
                    Some(c) => format!("{name} ({c}; {})", pct(share)),
                    None => format!("{name} ({})", pct(share)),
                });
                if share >= STABLE {
                    stable.push(name);
                } else if present < FRAGILE || share < FRAGILE {
                    fragile.push(name);
                }
            }
            None => shown.push(match coef {
                Some(c) => format!("{name} ({c})"),
                None => name,
            }),
        }
    }
    let independent = st["removed"].as_array().map_or(0, Vec::len);
    let mut s = if edges.is_empty() {
        "The structure search finds no edges among the constructs.".to_string()
    } else {
        format!(
            "The structure search finds {} among the constructs{}: {}; {} of constructs {} independent given others.",
            if edges.len() == 1 { "1 edge".to_string() } else { format!("{} edges", edges.len()) },
            match (st["effects"].as_array().is_some_and(|e| !e.is_empty()), boot.is_some()) {
                (true, true) => " (standardized coefficient; share of bootstrap replicates with the edge as drawn)",
                (true, false) => " (standardized coefficient)",
                (false, true) => " (share of bootstrap replicates with the edge as drawn)",
                (false, false) => "",
            },
            shown.join(", "),
            if independent == 1 { "1 pair".to_string() } else { format!("{independent} pairs") },
            if independent == 1 { "is" } else { "are" },
        )
    };
    if boot.is_some() && !edges.is_empty() {
        let stable_s = if stable.is_empty() { "none".into() } else { list(&stable) };
        let fragile_s = if fragile.is_empty() { "none".into() } else { list(&fragile) };
        s.push_str(&format!(
            " Stable (in at least {} of bootstrap replicates as drawn): {stable_s}. Fragile (below {}): {fragile_s}.",
            pct(STABLE),
            pct(FRAGILE)
        ));
    }
    points.push(point("Structure", s));
    if let Some(effects) = r["resample"]["effects"].as_array() {
        let few: Vec<String> = effects
            .iter()
            .filter(|f| f["replicates"].as_u64().is_some_and(|n| n < MIN_INTERVAL_REPLICATES))
            .map(|f| format!("{} → {} ({})", text(&f["from"]), text(&f["to"]), f["replicates"]))
            .collect();
        if !few.is_empty() {
            cautions.push(format!(
                "Bootstrap intervals resting on fewer than {MIN_INTERVAL_REPLICATES} replicates (the edge was rarely found): {}; read them as rough.",
                list(&few)
            ));
        }
    }
    let failed = r["resample"]["failed"].as_u64().unwrap_or(0);
    if failed > 0 {
        cautions.push(format!("{failed} bootstrap replicates failed; shares are over the others."));
    }
}

/// The joint test of the search's claims (one sentence), its conflicting triples and the
/// implausible estimates of the structural and measurement fits (cautions).
fn claims_point(r: &Value, points: &mut Vec<Value>, cautions: &mut Vec<String>) {
    let st = &r["structure"];
    let ct = &st["claims_test"];
    if let (Some(chisq), Some(df), Some(p)) = (ct["chisq"].as_f64(), ct["df"].as_u64(), ct["p"].as_f64()) {
        let pairs = if df == 1 { "1 pair".to_string() } else { format!("{df} pairs") };
        let verdict = if p < 0.05 { "are rejected jointly" } else { "hold jointly" };
        points.push(point(
            "Claims",
            format!(
                "The independences the search claims ({pairs} of constructs without an edge) {verdict} against the measurement model: χ² {chisq:.2} on {df} df, p = {p:.3}."
            ),
        ));
        if p < 0.05 {
            cautions.push(
                "The structural model fits worse than the measurement model: some pair the search left unlinked is linked; read the graph's missing edges with care."
                    .into(),
            );
        }
    }
    let conflicts = st["conflicts"].as_array().map(Vec::as_slice).unwrap_or_default();
    let (split, oriented): (Vec<&Value>, Vec<&Value>) = conflicts.iter().partition(|k| k["kind"] == "sepsets_disagree");
    if !split.is_empty() {
        let triples: Vec<String> = split
            .iter()
            .map(|k| format!("{} – {} – {}", text(&k["a"]), text(&k["c"]), text(&k["b"])))
            .collect::<std::collections::BTreeSet<_>>()
            .into_iter()
            .collect();
        cautions.push(format!(
            "The separating sets disagree at {} ({}): the data neither show nor rule out a collider there.",
            if triples.len() == 1 { "1 triple".to_string() } else { format!("{} triples", triples.len()) },
            list(&triples)
        ));
    }
    if !oriented.is_empty() {
        let triples: Vec<String> = oriented
            .iter()
            .map(|k| format!("{} – {} – {}", text(&k["a"]), text(&k["c"]), text(&k["b"])))
            .collect::<std::collections::BTreeSet<_>>()
            .into_iter()
            .collect();
        cautions.push(format!(
            "The conditional independence tests contradict each other at {} ({}): the orientations there are unreliable.",
            if triples.len() == 1 { "1 triple".to_string() } else { format!("{} triples", triples.len()) },
            list(&triples)
        ));
    }
    let beyond: Vec<String> = r["resample"]["effects"]
        .as_array()
        .into_iter()
        .flatten()
        .filter(|f| {
            f["std_ci"].as_array().is_some_and(|ci| ci.iter().any(|b| b.as_f64().is_some_and(|b| b.abs() > 1.0)))
        })
        .map(|f| format!("{} → {}", text(&f["from"]), text(&f["to"])))
        .collect();
    if !beyond.is_empty() {
        cautions.push(format!(
            "The bootstrap interval of the standardized effect {} reaches beyond ±1: some replicates found an improper solution; read the effect as unstable.",
            list(&beyond)
        ));
    }
    for w in
        st["warnings"].as_array().into_iter().flatten().chain(r["measure"]["warnings"].as_array().into_iter().flatten())
    {
        let message = text(&w["message"]);
        let mut c = message.chars();
        if let Some(first) = c.next() {
            cautions.push(format!("{}{}.", first.to_uppercase(), c.as_str()));
        }
    }
}

fn sensitivity_point(r: &Value, points: &mut Vec<Value>, cautions: &mut Vec<String>) {
    let s = &r["sensitivity"];
    let Some(conclusions) = s["conclusions"].as_array() else { return };
    let mut tipping = Vec::new();
    let mut swept: Vec<String> = Vec::new();
    for c in conclusions {
        for (k, t) in c["tipping"].as_object().into_iter().flatten() {
            if !swept.contains(k) {
                swept.push(k.clone());
            }
            if let Some(t) = t.as_f64() {
                tipping.push(format!("{} (changes at reliability {t:.2} of {k})", text(&c["what"])));
            }
        }
    }
    let grid = |k: &str| -> Option<(f64, f64)> {
        let values: Vec<f64> = conclusions
            .iter()
            .filter_map(|c| c["holds_for"][k].as_array())
            .flatten()
            .filter_map(Value::as_f64)
            .collect();
        let lo = values.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        (lo.is_finite() && hi.is_finite()).then_some((lo, hi))
    };
    let ranges: Vec<String> = swept
        .iter()
        .map(|k| match grid(k) {
            Some((lo, hi)) => format!("{k} from {lo:.1} to {hi:.1}"),
            None => k.clone(),
        })
        .collect();
    let text_s = if tipping.is_empty() {
        format!(
            "All {} conclusions tracked hold over the assumed reliabilities of {}.",
            conclusions.len(),
            list(&ranges)
        )
    } else {
        format!(
            "Of {} conclusions tracked over the reliabilities of {}, {} {} on the assumed measurement error: {}.",
            conclusions.len(),
            list(&ranges),
            tipping.len(),
            if tipping.len() == 1 { "depends" } else { "depend" },
            tipping.join("; ")
        )
    };
    points.push(point("Measurement error", text_s));
    let failed = s["failed"].as_u64().unwrap_or(0);
    if failed > 0 {
        cautions.push(format!(
            "{failed} sensitivity refits failed (a reliability so low that the corrected latent correlations leave the valid range) and are left out."
        ));
    }
}

/// Share of bootstrap replicates below which a kept item is called unstable (issue 16).
pub const KEEP_STABLE: f64 = 0.8;

/// Purification's warnings (a construct cut to the minimum, a facet or content group removed)
/// and kept items the bootstrap keeps in fewer than `KEEP_STABLE` of its replicates.
fn purify_cautions(r: &Value, cautions: &mut Vec<String>) {
    let Some(constructs) = r["purify"]["constructs"].as_object() else { return };
    let mut unstable = Vec::new();
    for (name, c) in constructs {
        for w in c["warnings"].as_array().into_iter().flatten() {
            if let Some(m) = w["message"].as_str() {
                cautions.push(format!("{name}: {m}."));
            }
        }
        for item in c["kept"].as_array().into_iter().flatten().map(text) {
            if let Some(share) = r["resample"]["items_kept"][&item].as_f64().filter(|s| *s < KEEP_STABLE) {
                unstable.push(format!("{item} ({})", pct(share)));
            }
        }
    }
    if !unstable.is_empty() {
        cautions.push(format!(
            "The kept set is unstable in the bootstrap: {} kept in fewer than {} of replicates; another sample could keep other items.",
            list(&unstable),
            pct(KEEP_STABLE)
        ));
    }
}

fn data_cautions(r: &Value, cautions: &mut Vec<String>) {
    let c = &r["covariance"];
    if c["definiteness"]["positive_definite"] == Value::Bool(false) {
        cautions.push("The item correlation matrix is not positive definite; see section 4.".into());
    }
    if c["smoothed"] == Value::Bool(true) {
        cautions.push("The item correlation matrix was smoothed to be positive definite.".into());
    }
    // Deletion is valid only when values are missing completely at random.
    let deletion = c["missing"].as_str().filter(|m| *m != "fiml");
    if let (Some(m), Some(p)) = (deletion, c["mcar"]["p"].as_f64())
        && p < 0.05
    {
        cautions.push(format!(
            "Little's test rejects that values are missing completely at random (p {}); {m} deletion can bias every estimate. `covariance: {{missing: fiml}}` is valid when values are missing at random (section 4).",
            if p < 0.001 { "< 0.001".to_string() } else { format!("= {p:.3}") }
        ));
    }
    if r["structure"].is_object() {
        cautions.push("Structural conclusions assume linearity, no unmeasured common causes, faithfulness and pure kept items (section 8); they are exploratory evidence.".into());
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Issue 16: purification's warnings become cautions, and a kept item the bootstrap keeps in
    // fewer than 80% of replicates is named with its share.
    #[test]
    fn purification_warnings_and_unstable_kept_items_are_cautions() {
        let r = json!({
            "purify": {"constructs": {
                "crowding": {"kept": ["cr1", "cr2", "cr3"], "dropped": [{"item": "cr4"}, {"item": "cr5"}],
                  "warnings": [{"kind": "minimum_reached", "facet": null, "items": ["cr1", "cr2", "cr3"],
                    "message": "purification stopped at the minimum of 3 items (cr1, cr2, cr3)"}]},
                "trust": {"kept": ["tr1", "tr2", "tr3", "tr4"], "dropped": [], "warnings": []}}},
            "resample": {"items_kept": {"cr1": 0.95, "cr2": 0.62, "cr3": 0.8, "tr1": 0.79, "cr4": 0.1}, "failed": 0}
        });
        let cautions = findings(&r)["cautions"].to_string();
        assert!(cautions.contains("crowding: purification stopped at the minimum of 3 items"), "{cautions}");
        assert!(cautions.contains("cr2 (62%) and tr1 (79%) kept in fewer than 80% of replicates"), "{cautions}");
        assert!(!cautions.contains("cr3 (") && !cautions.contains("cr4 ("), "{cautions}");
    }

    #[test]
    fn edges_are_called_stable_or_fragile_by_their_bootstrap_share() {
        let r = json!({
            "structure": {"edges": [
                {"from": "a", "to": "b", "kind": "directed"},
                {"from": "b", "to": "c", "kind": "directed"},
                {"from": "a", "to": "c", "kind": "undirected"}],
              "effects": [{"from": "a", "to": "b", "std": 0.4}], "removed": [{}]},
            "resample": {"edges": [
                {"from": "a", "to": "b", "present": 1.0, "forward": 0.9, "backward": 0.1},
                {"from": "c", "to": "b", "present": 0.9, "forward": 0.5, "backward": 0.4},
                {"from": "a", "to": "c", "present": 0.7, "forward": 0.3, "backward": 0.3}],
              "effects": [{"from": "b", "to": "c", "replicates": 12}], "failed": 0}
        });
        let f = findings(&r);
        let s = f["points"][0]["text"].as_str().unwrap();
        assert!(s.contains("a → b (+0.40; 90%)"), "{s}");
        assert!(s.contains("b → c (40%)"), "{s}");
        assert!(s.contains("Stable (in at least 80% of bootstrap replicates as drawn): a → b."), "{s}");
        assert!(s.contains("Fragile (below 60%): b → c."), "{s}");
        assert!(s.contains("1 pair of constructs is independent"), "{s}");
        let cautions = f["cautions"].to_string();
        assert!(cautions.contains("fewer than 40 replicates"), "{cautions}");
        assert!(cautions.contains("b → c (12)"), "{cautions}");
    }

    // The claims test's sentence, and a caution for each trigger: rejected claims, conflicting
    // triples, structural and measurement warnings, a bootstrap interval beyond ±1.
    #[test]
    fn claims_conflicts_and_implausible_estimates_are_cautioned() {
        let r = json!({
            "structure": {"edges": [], "removed": [{}],
              "claims_test": {"chisq": 12.5, "df": 2, "p": 0.0019},
              "conflicts": [{"a": "a", "c": "b", "b": "c"}, {"a": "a", "c": "b", "b": "c"},
                {"a": "x", "c": "y", "b": "z", "kind": "sepsets_disagree"}],
              "warnings": [{"message": "the standardized effect a → b is 1.20, beyond ±1"}]},
            "measure": {"warnings": [{"message": "the latent correlation of f and g is 0.95"}]},
            "resample": {"effects": [{"from": "a", "to": "b", "std_ci": [0.4, 1.14], "replicates": 100}]}
        });
        let f = findings(&r);
        let points = f["points"].to_string();
        assert!(points.contains("(2 pairs of constructs without an edge) are rejected jointly"), "{points}");
        assert!(points.contains("χ² 12.50 on 2 df, p = 0.002"), "{points}");
        let cautions = f["cautions"].to_string();
        for want in [
            "fits worse than the measurement model",
            "contradict each other at 1 triple (a – b – c)",
            "separating sets disagree at 1 triple (x – y – z)",
            "The standardized effect a → b is 1.20, beyond ±1.",
            "The latent correlation of f and g is 0.95.",
            "interval of the standardized effect a → b reaches beyond ±1",
        ] {
            assert!(cautions.contains(want), "{want}: {cautions}");
        }
        let fine = findings(
            &json!({"structure": {"edges": [], "removed": [], "claims_test": {"chisq": 1.0, "df": 3, "p": 0.8}}}),
        );
        assert!(fine["points"].to_string().contains("hold jointly"));
        let cautions = fine["cautions"].to_string();
        assert!(!cautions.contains("fits worse") && !cautions.contains("contradict"), "{cautions}");
    }
}
