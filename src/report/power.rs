//! A design study's report (`construe power`): results.json, report.html / report.md with a
//! recovery-versus-n plot, and manifest.json, in a version folder `<out>/v<N>/` that appears
//! whole or not at all (staged, then renamed). Central function: `write_study`. An identical
//! rerun (same fingerprint as the latest version) writes nothing. Aggregates only: no drawn
//! row reaches any file.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::Path;

use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use super::svg::escape;
use super::{ReportError, WriteOutcome, pretty};
use crate::app::power::{PowerTable, StudyInfo};
use crate::pipeline::key::Key;

/// `results_format` of a study's results.json.
pub const POWER_RESULTS_FORMAT: &str = "1.0";
/// `manifest_format` of a study's manifest.json.
pub const POWER_MANIFEST_FORMAT: u32 = 1;

const HTML: &str = include_str!("../../templates/power.html");
const MARKDOWN: &str = include_str!("../../templates/power.md");

/// A study version's manifest: inputs, settings, fingerprint and the published files' hashes.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct PowerManifest {
    pub manifest_format: u32,
    /// Always `power` (a `run` manifest has no such field).
    pub kind: String,
    pub tool_version: String,
    pub created: String,
    pub report_version: u32,
    pub model: InputRecord,
    pub spec: InputRecord,
    pub settings: Value,
    /// BLAKE3 over every replicate's cache key and summary, in replicate order.
    pub replicates_digest: Key,
    /// BLAKE3 over tool version, inputs, settings and `replicates_digest`: equal fingerprints
    /// mean equal results.
    pub fingerprint: Key,
    pub files: BTreeMap<String, Key>,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct InputRecord {
    /// As given on the command line.
    pub path: String,
    /// Relative to the version folder, for `verify` from another working directory.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub from_report: Option<String>,
    /// The model file's bytes; the spec's parsed content (comments and key order aside).
    pub hash: Key,
}

fn results_value(info: &StudyInfo, table: &PowerTable) -> Value {
    json!({
        "results_format": POWER_RESULTS_FORMAT,
        "kind": "power",
        "title": info.title,
        "seed": info.seed,
        "steps": info.chain,
        "power": table,
    })
}

/// Renders results.json and the two report formats (in that order).
pub fn render_study(
    info: &StudyInfo,
    table: &PowerTable,
    manifest: &PowerManifest,
) -> Result<Vec<(&'static str, String)>, ReportError> {
    let results = results_value(info, table);
    let mut env = super::environment()?;
    for (name, text) in [("power.html", HTML), ("power.md", MARKDOWN)] {
        env.add_template(name, text).map_err(|source| ReportError::Template { name: name.into(), source })?;
    }
    let context = context(info, table, manifest);
    let mut files = vec![("results.json", pretty(&results))];
    for (file, template) in [("report.html", "power.html"), ("report.md", "power.md")] {
        let text = env
            .get_template(template)
            .and_then(|t| t.render(minijinja::Value::from(minijinja::value::Serde(&context))))
            .map_err(|source| ReportError::Template { name: template.into(), source })?;
        files.push((file, text));
    }
    Ok(files)
}

fn fmt_share(v: Option<f64>, se: Option<f64>) -> String {
    match (v, se) {
        (Some(v), Some(se)) => format!("{:.0}% ± {:.1}", v * 100.0, se * 100.0),
        (Some(v), None) => format!("{:.0}%", v * 100.0),
        _ => "–".into(),
    }
}

fn fmt_num(v: Option<f64>, digits: usize) -> String {
    match v {
        Some(v) if v.is_finite() => format!("{v:+.digits$}"),
        _ => "–".into(),
    }
}

fn context(info: &StudyInfo, t: &PowerTable, manifest: &PowerManifest) -> Value {
    let n = t.sizes.len();
    let edges: Vec<Value> = t
        .edges
        .iter()
        .map(|e| {
            json!({
                "from": e.from, "to": e.to, "true_std": format!("{:+.2}", e.true_std),
                "found": (0..n).map(|i| fmt_share(e.found[i], e.found_se[i])).collect::<Vec<_>>(),
                "oriented": (0..n).map(|i| fmt_share(e.oriented[i], e.oriented_se[i])).collect::<Vec<_>>(),
                "min_n_found": e.min_n_found, "min_n_oriented": e.min_n_oriented,
            })
        })
        .collect();
    let effects: Vec<Value> = t
        .effects
        .iter()
        .map(|e| {
            json!({
                "from": e.from, "to": e.to, "truth": format!("{:+.3}", e.truth), "true_std": format!("{:+.2}", e.true_std),
                "estimated": (0..n).map(|i| fmt_share(e.estimated[i], None)).collect::<Vec<_>>(),
                "bias": (0..n).map(|i| match (e.bias[i], e.bias_se[i]) {
                    (Some(b), Some(se)) => format!("{b:+.3} ± {se:.3}"),
                    (b, _) => fmt_num(b, 3),
                }).collect::<Vec<_>>(),
                "rmse": (0..n).map(|i| e.rmse[i].map_or("–".into(), |v| format!("{v:.3}"))).collect::<Vec<_>>(),
                "coverage": (0..n).map(|i| fmt_share(e.coverage[i], e.coverage_se[i])).collect::<Vec<_>>(),
            })
        })
        .collect();
    let items: Vec<Value> = t
        .items
        .iter()
        .map(|i| json!({"item": i.item, "impure": i.impure, "kept": (0..n).map(|k| fmt_share(i.kept[k], i.kept_se[k])).collect::<Vec<_>>()}))
        .collect();
    let impurities: Vec<Value> = t
        .impurities
        .iter()
        .map(|i| json!({"item": i.item, "kind": i.kind, "min_n": i.min_n, "caught": (0..n).map(|k| fmt_share(i.caught[k], i.caught_se[k])).collect::<Vec<_>>()}))
        .collect();
    let false_edges: Vec<Value> = t
        .false_edges
        .iter()
        .map(|e| json!({"from": e.from, "to": e.to, "found": (0..n).map(|k| fmt_share(e.found[k], None)).collect::<Vec<_>>()}))
        .collect();
    let summary: Vec<Value> = (0..n)
        .map(|k| {
            json!({
                "n": t.sizes[k],
                "succeeded": t.succeeded[k],
                "failed": t.failed[k],
                "not_converged": t.not_converged[k],
                "all_found": fmt_share(t.all_found.get(k).copied().flatten(), t.all_found_se.get(k).copied().flatten()),
                "all_oriented": fmt_share(t.all_oriented.get(k).copied().flatten(), t.all_oriented_se.get(k).copied().flatten()),
                "any_false": fmt_share(t.any_false_edge.get(k).copied().flatten(), t.any_false_edge_se.get(k).copied().flatten()),
            })
        })
        .collect();
    json!({
        "title": info.title,
        "tool_version": env!("CARGO_PKG_VERSION"),
        "version": manifest.report_version,
        "created": manifest.created,
        "model_path": info.model_path,
        "spec_path": info.spec_path,
        "seed": info.seed,
        "steps": info.chain.join(", "),
        "with_resampling": info.with_resampling,
        "with_sensitivity": info.with_sensitivity,
        "sizes": t.sizes,
        "replicates": t.replicates,
        "target": format!("{:.0}%", t.target * 100.0),
        "searched": !t.edges.is_empty(),
        "min_n_all_found": t.min_n_all_found,
        "min_n_all_oriented": t.min_n_all_oriented,
        "summary": summary,
        "edges": edges,
        "effects": effects,
        "items": items,
        "impurities": impurities,
        "false_edges": false_edges,
        "failures": t.failures,
        "plot": recovery_plot(t),
        "style": include_str!("../../templates/style.css"),
    })
}

/// One line of the recovery plot: label, shares, their Monte Carlo SEs, colour, stroke width.
type Series<'a> = (String, &'a Vec<Option<f64>>, Option<&'a Vec<Option<f64>>>, &'a str, f64);

/// Recovery against sample size: one line per true path (share of replicates that found the
/// adjacency, with ±2 Monte Carlo SE whiskers), the share that found all of them in bold, and
/// the target as a dashed rule. The x axis is logarithmic in n.
pub fn recovery_plot(t: &PowerTable) -> Option<String> {
    if t.edges.is_empty() || t.sizes.is_empty() {
        return None;
    }
    let (left, right, top, bottom, width, height) = (52.0, 170.0, 16.0, 40.0, 620.0, 300.0);
    let plot_w = width - left - right;
    let plot_h = height - top - bottom;
    let lo = (t.sizes[0] as f64).ln();
    let hi = (*t.sizes.last().unwrap_or(&t.sizes[0]) as f64).ln();
    let x = |n: usize| if hi > lo { left + ((n as f64).ln() - lo) / (hi - lo) * plot_w } else { left + plot_w / 2.0 };
    let y = |p: f64| top + (1.0 - p.clamp(0.0, 1.0)) * plot_h;
    let palette = ["#a84824", "#1f5e66", "#7a6a2f", "#6b3f7a", "#2f6b3f", "#8a2f4f", "#3f4f8a", "#5d6670"];
    let mut s = String::new();
    let _ = write!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" class="power-plot" viewBox="0 0 {width} {height}" width="{width}" height="{height}" role="img" aria-label="recovery of each true path against sample size">"#
    );
    for tick in [0.0, 0.25, 0.5, 0.75, 1.0] {
        let _ = write!(
            s,
            r##"<line x1="{left}" y1="{yy:.1}" x2="{x2}" y2="{yy:.1}" stroke="#e2ded5" stroke-width="0.8"/><text x="{tx}" y="{ty:.1}" text-anchor="end" class="hm-label">{p:.0}%</text>"##,
            yy = y(tick),
            x2 = left + plot_w,
            tx = left - 6.0,
            ty = y(tick) + 4.0,
            p = tick * 100.0
        );
    }
    for &n in &t.sizes {
        let _ = write!(
            s,
            r##"<line x1="{xx:.1}" y1="{y1}" x2="{xx:.1}" y2="{y2}" stroke="#5d6670" stroke-width="0.8"/><text x="{xx:.1}" y="{ty}" text-anchor="middle" class="hm-label">{n}</text>"##,
            xx = x(n),
            y1 = top + plot_h,
            y2 = top + plot_h + 4.0,
            ty = top + plot_h + 16.0
        );
    }
    let _ = write!(
        s,
        r##"<text x="{cx:.1}" y="{cy}" text-anchor="middle" class="hm-label">sample size n (log scale)</text>"##,
        cx = left + plot_w / 2.0,
        cy = height - 6.0
    );
    let _ = write!(
        s,
        r##"<line x1="{left}" y1="{yt:.1}" x2="{x2}" y2="{yt:.1}" stroke="#1f1f1f" stroke-width="1" stroke-dasharray="5 4"/><text x="{tx}" y="{ty:.1}" class="hm-label">target {p:.0}%</text>"##,
        yt = y(t.target),
        x2 = left + plot_w,
        tx = left + plot_w + 6.0,
        ty = y(t.target) + 4.0,
        p = t.target * 100.0
    );
    let mut series: Vec<Series<'_>> = t
        .edges
        .iter()
        .enumerate()
        .map(|(i, e)| (format!("{} → {}", e.from, e.to), &e.found, Some(&e.found_se), palette[i % palette.len()], 1.4))
        .collect();
    series.push(("all paths found".into(), &t.all_found, Some(&t.all_found_se), "#1f1f1f", 2.6));
    for (i, (label, values, se, colour, stroke)) in series.iter().enumerate() {
        let points: Vec<String> = t
            .sizes
            .iter()
            .zip(values.iter())
            .filter_map(|(&n, v)| v.map(|v| format!("{:.1},{:.1}", x(n), y(v))))
            .collect();
        let _ = write!(
            s,
            r##"<polyline points="{}" fill="none" stroke="{colour}" stroke-width="{stroke}"><title>{}</title></polyline>"##,
            points.join(" "),
            escape(label)
        );
        for (k, (&n, v)) in t.sizes.iter().zip(values.iter()).enumerate() {
            let Some(v) = v else { continue };
            if let Some(Some(e)) = se.and_then(|se| se.get(k)) {
                let _ = write!(
                    s,
                    r##"<line x1="{xx:.1}" y1="{a:.1}" x2="{xx:.1}" y2="{b:.1}" stroke="{colour}" stroke-width="0.8"/>"##,
                    xx = x(n),
                    a = y(v + 2.0 * e),
                    b = y(v - 2.0 * e)
                );
            }
            let _ = write!(
                s,
                r##"<circle cx="{:.1}" cy="{:.1}" r="2.6" fill="{colour}"><title>{}: n = {n}, {:.1}%</title></circle>"##,
                x(n),
                y(*v),
                escape(label),
                v * 100.0
            );
        }
        let ly = top + 14.0 * i as f64 + 6.0;
        let _ = write!(
            s,
            r##"<line x1="{lx}" y1="{ly:.1}" x2="{lx2}" y2="{ly:.1}" stroke="{colour}" stroke-width="{stroke}"/><text x="{tx}" y="{ty:.1}" class="hm-label">{}</text>"##,
            escape(label),
            lx = left + plot_w + 6.0,
            lx2 = left + plot_w + 22.0,
            tx = left + plot_w + 26.0,
            ty = ly + 4.0
        );
    }
    s.push_str("</svg>");
    Some(s)
}

fn settings(info: &StudyInfo, table: &PowerTable) -> Value {
    json!({
        "sizes": table.sizes,
        "replicates": table.replicates,
        "seed": info.seed,
        "target": table.target,
        "steps": info.chain,
        "with_resampling": info.with_resampling,
        "with_sensitivity": info.with_sensitivity,
    })
}

/// What makes two study versions the same: tool, inputs, settings and every replicate.
pub fn fingerprint(info: &StudyInfo, table: &PowerTable) -> Key {
    Key::of_json(&json!({
        "tool": env!("CARGO_PKG_VERSION"),
        "model": info.model_hash,
        "spec": info.spec_content,
        "settings": settings(info, table),
        "replicates": info.replicates_digest,
        "results_format": POWER_RESULTS_FORMAT,
    }))
}

/// The study manifest in a version folder, if it has one.
pub fn read_study_manifest(dir: &Path) -> Option<PowerManifest> {
    let text = crate::fsguard::read_regular_text(&dir.join("manifest.json"), crate::fsguard::MAX_TEXT_BYTES).ok()?;
    let m: PowerManifest = serde_json::from_str(&text).ok()?;
    (m.kind == "power").then_some(m)
}

/// Writes a new version under `out` unless the latest has the same fingerprint.
pub fn write_study(out: &Path, info: &StudyInfo, table: &PowerTable) -> Result<WriteOutcome, ReportError> {
    let io = |action: &'static str, path: &Path| {
        let path = path.to_path_buf();
        move |source| ReportError::Io { action, path, source }
    };
    std::fs::create_dir_all(out).map_err(io("create report folder", out))?;
    let settings = settings(info, table);
    let fingerprint = fingerprint(info, table);
    let (highest, latest) = survey(out);
    if let Some((n, m)) = latest
        && m.fingerprint == fingerprint
    {
        return Ok(WriteOutcome::Unchanged { version: n, dir: out.join(format!("v{n}")) });
    }
    let version = highest + 1;
    let final_dir = out.join(format!("v{version}"));
    let from_report =
        |p: &str| crate::app::verify::relative_path(&final_dir, Path::new(p)).map(|r| r.display().to_string());
    let mut manifest = PowerManifest {
        manifest_format: POWER_MANIFEST_FORMAT,
        kind: "power".into(),
        tool_version: env!("CARGO_PKG_VERSION").into(),
        created: crate::pipeline::manifest::now_utc(),
        report_version: version,
        model: InputRecord {
            path: info.model_path.clone(),
            from_report: from_report(&info.model_path),
            hash: info.model_hash,
        },
        spec: InputRecord {
            path: info.spec_path.clone(),
            from_report: from_report(&info.spec_path),
            hash: info.spec_content,
        },
        settings,
        replicates_digest: info.replicates_digest,
        fingerprint,
        files: BTreeMap::new(),
    };
    let files = render_study(info, table, &manifest)?;
    let staging =
        tempfile::Builder::new().prefix(".partial-v").tempdir_in(out).map_err(io("create staging folder in", out))?;
    for (name, text) in &files {
        let path = staging.path().join(name);
        std::fs::write(&path, text).map_err(io("write", &path))?;
        manifest.files.insert((*name).to_string(), Key::of_bytes(text.as_bytes()));
    }
    let manifest_path = staging.path().join("manifest.json");
    std::fs::write(&manifest_path, pretty(&serde_json::to_value(&manifest).unwrap_or(Value::Null)))
        .map_err(io("write", &manifest_path))?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        let _ = std::fs::set_permissions(staging.path(), std::fs::Permissions::from_mode(0o755));
    }
    std::fs::rename(staging.path(), &final_dir).map_err(io("publish report folder", &final_dir))?;
    let _ = staging.keep();
    Ok(WriteOutcome::Written { version, dir: final_dir })
}

/// The highest `v<N>` in use under `out` and the newest one with a readable study manifest.
fn survey(out: &Path) -> (u32, Option<(u32, PowerManifest)>) {
    let mut numbers: Vec<u32> = std::fs::read_dir(out)
        .map(|entries| {
            entries
                .filter_map(|e| {
                    let name = e.ok()?.file_name().to_str()?.to_string();
                    let n = name.strip_prefix('v')?.parse::<u32>().ok()?;
                    (format!("v{n}") == name).then_some(n)
                })
                .collect()
        })
        .unwrap_or_default();
    numbers.sort_unstable();
    let highest = numbers.last().copied().unwrap_or(0);
    let latest = numbers.iter().rev().find_map(|&n| {
        let text = crate::fsguard::read_regular_text(
            &out.join(format!("v{n}")).join("manifest.json"),
            crate::fsguard::MAX_TEXT_BYTES,
        )
        .ok()?;
        let m: PowerManifest = serde_json::from_str(&text).ok()?;
        (m.report_version == n && m.kind == "power").then_some((n, m))
    });
    (highest, latest)
}
