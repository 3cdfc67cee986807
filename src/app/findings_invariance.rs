//! The findings sentence on measurement invariance: which rung holds across the waves or
//! groups, which parameters differ, and which construct means changed (intervals that exclude
//! zero). Central function: `invariance_point`, called by `findings::findings`. Built from
//! results.json's `invariance` block alone, like the other findings.

use serde_json::{Value, json};

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

/// One labelled sentence (pushed to `points`) and, when the ladder did not reach scalar
/// invariance, a caution against comparing scale scores.
pub fn invariance_point(r: &Value, points: &mut Vec<Value>, cautions: &mut Vec<String>) {
    let inv = &r["invariance"];
    let Some(levels) = inv["levels"].as_array() else { return };
    let groups: Vec<String> = inv["groups"].as_array().into_iter().flatten().map(text).collect();
    let by_wave = inv["across"] == "wave";
    let label = if by_wave { "Across waves" } else { "Across groups" };
    let who =
        if by_wave { list(&groups) } else { format!("the groups of `{}` ({})", text(&inv["across"]), list(&groups)) };
    let freed: Vec<String> = inv["noninvariant"]
        .as_array()
        .into_iter()
        .flatten()
        .map(|n| format!("the {} of {} ({})", text(&n["parameter"]), text(&n["item"]), list(&text_list(&n["groups"]))))
        .collect();
    let highest = inv["highest"].as_str().unwrap_or("none");
    let scalar = levels.iter().find(|l| l["level"] == "scalar");
    let p_of = |l: Option<&Value>| l.and_then(|l| l["diff"]["p"].as_f64());
    let mut s = match highest {
        "scalar" | "strict" => {
            let partial = scalar.is_some_and(|l| l["partial"] == true) || !freed.is_empty();
            let p = p_of(scalar).map_or(String::new(), |p| format!(", chi-square difference p = {p:.3}"));
            if partial {
                format!(
                    "the items measure the constructs alike in {who} once {} {} freed (partial scalar invariance{p}), so construct means can be compared.",
                    list(&freed),
                    if freed.len() == 1 { "is" } else { "are" }
                )
            } else {
                format!(
                    "the items measure the constructs alike in {who}: loadings and intercepts are equal (scalar invariance{p}), so construct means can be compared."
                )
            }
        }
        "metric" => format!(
            "loadings are equal in {who}, but item intercepts differ beyond what freeing single items explains, so construct means are not compared{}.",
            if freed.is_empty() { String::new() } else { format!(" ({} differ)", list(&freed)) }
        ),
        "configural" => format!(
            "only the pattern of loadings is shared by {who}; loadings differ, so neither construct means nor relations are compared across them."
        ),
        _ => format!("the multi-group measurement model could not be fitted in {who}."),
    };
    let reference = text(&inv["reference"]);
    let means = inv["latent_means"].as_array().cloned().unwrap_or_default();
    if !means.is_empty() {
        let moved: Vec<String> = means
            .iter()
            .filter(|m| m["ci"][0].as_f64().unwrap_or(0.0) > 0.0 || m["ci"][1].as_f64().unwrap_or(0.0) < 0.0)
            .map(|m| {
                let d = m["diff"].as_f64().unwrap_or(0.0);
                format!(
                    "{} is {:.2} SD {} in {} (95% CI {:.2} to {:.2})",
                    text(&m["construct"]),
                    d.abs(),
                    if d > 0.0 { "higher" } else { "lower" },
                    text(&m["group"]),
                    m["ci"][0].as_f64().unwrap_or(f64::NAN),
                    m["ci"][1].as_f64().unwrap_or(f64::NAN)
                )
            })
            .collect();
        if moved.is_empty() {
            s.push_str(&format!(" No construct mean differs detectably from {reference}."));
        } else {
            s.push_str(&format!(
                " Compared with {reference}: {}; the other means did not change detectably.",
                list(&moved)
            ));
        }
    }
    let mut chars = s.chars();
    let s = chars.next().map_or(String::new(), |c| c.to_uppercase().collect::<String>() + chars.as_str());
    points.push(json!({"label": label, "text": s}));
    if matches!(highest, "configural" | "metric") {
        cautions.push(format!(
            "Scalar invariance does not hold across {who}: differences in item or scale means between them mix construct change with item change."
        ));
    }
}

fn text_list(v: &Value) -> Vec<String> {
    v.as_array().into_iter().flatten().map(text).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn partial_scalar_with_a_changed_mean() {
        let r = json!({"invariance": {
        "across": "wave", "groups": ["spring", "autumn"], "reference": "spring", "highest": "scalar",
        "levels": [{"level": "configural"}, {"level": "metric", "diff": {"p": 0.4}}, {"level": "scalar", "partial": true, "diff": {"p": 0.21}}],
        "noninvariant": [{"item": "pu2", "parameter": "intercept", "groups": ["autumn"]}],
        "latent_means": [
            {"construct": "trust", "group": "autumn", "diff": -0.31, "ci": [-0.45, -0.17]},
            {"construct": "crowding", "group": "autumn", "diff": 0.05, "ci": [-0.1, 0.2]}
        ]}});
        let (mut points, mut cautions) = (Vec::new(), Vec::new());
        invariance_point(&r, &mut points, &mut cautions);
        assert_eq!(points[0]["label"], "Across waves");
        assert_eq!(
            points[0]["text"],
            "The items measure the constructs alike in spring and autumn once the intercept of pu2 (autumn) is freed (partial scalar invariance, chi-square difference p = 0.210), so construct means can be compared. Compared with spring: trust is 0.31 SD lower in autumn (95% CI -0.45 to -0.17); the other means did not change detectably."
        );
        assert!(cautions.is_empty());
    }

    #[test]
    fn metric_only_warns_about_mean_comparisons() {
        let r = json!({"invariance": {
            "across": "region", "groups": ["east", "west"], "reference": "east", "highest": "metric",
            "levels": [{"level": "configural"}, {"level": "metric"}, {"level": "scalar", "holds": false}],
            "noninvariant": [], "latent_means": []}});
        let (mut points, mut cautions) = (Vec::new(), Vec::new());
        invariance_point(&r, &mut points, &mut cautions);
        assert_eq!(points[0]["label"], "Across groups");
        assert!(
            points[0]["text"]
                .as_str()
                .unwrap()
                .starts_with("Loadings are equal in the groups of `region` (east and west)")
        );
        assert_eq!(cautions.len(), 1);
    }
}
