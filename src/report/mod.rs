//! The report: results.json, the CSV tables (`tables/*.csv`), manifest.json, report.html and
//! report.md for one version, written
//! to `<report.dir>/<slug>/v<N>/`. Central function: `write_version`. A version folder appears
//! whole or not at all (built under a hidden temporary name, then renamed); an identical
//! rerun (same manifest fingerprint as the latest version) writes nothing. `render_files` and
//! `complete_context` are shared with `verify`, which renders every file again and compares.

pub mod diagram;
pub mod diff;
pub mod diff_invariance;
pub mod means_plot;
pub mod power;
pub mod results;
pub mod svg;
pub mod tables;
pub mod text;
pub mod versions;

use std::path::{Path, PathBuf};

use minijinja::{AutoEscape, Environment, Error as TemplateError, Output, State, Value as TemplateValue};
use serde_json::{Value, json};
use thiserror::Error;

use crate::pipeline::key::Key;
use crate::pipeline::manifest::{Manifest, PreviousVersion};
use crate::spec::types::ReportFormat;

pub use results::{RESULTS_FORMAT, Results};
pub use text::{code_span, markdown_text, visible};
pub use versions::{WriteOutcome, slug};

#[derive(Debug, Error)]
pub enum ReportError {
    #[error("cannot {action} `{}`\n  caused by: {source}", path.display())]
    Io { action: &'static str, path: PathBuf, source: std::io::Error },
    #[error("report template `{name}` failed: {source}")]
    Template { name: String, source: minijinja::Error },
}

const HTML: &str = include_str!("../../templates/report.html");
const MARKDOWN: &str = include_str!("../../templates/report.md");
const STYLE: &str = include_str!("../../templates/style.css");
/// FCI's graph (`structure.search: fci | both`), included by the two reports.
const PAG_HTML: &str = include_str!("../../templates/pag.html");
const PAG_MARKDOWN: &str = include_str!("../../templates/pag.md");

/// The template environment: HTML autoescaped (by the `.html` name); in Markdown every printed
/// value is escaped by `formatter` unless a filter here already made it safe. Filters for
/// fixed-digit numbers, numbers already rounded (`sig`), Markdown text (`cell`, `md`) and
/// Markdown code spans (`code`).
pub(crate) fn environment() -> Result<Environment<'static>, ReportError> {
    let mut env = Environment::new();
    env.set_formatter(formatter);
    env.add_filter("num", num);
    env.add_filter("sig", sig);
    env.add_filter("cell", markdown_filter);
    env.add_filter("md", markdown_filter);
    env.add_filter("code", markdown_code);
    env.add_filter("pct", pct);
    for (name, text) in
        [("report.html", HTML), ("report.md", MARKDOWN), ("pag.html", PAG_HTML), ("pag.md", PAG_MARKDOWN)]
    {
        env.add_template(name, text).map_err(|source| ReportError::Template { name: name.into(), source })?;
    }
    Ok(env)
}

/// Writes every `{{ … }}` value. Text from specs and data never reaches a report raw: invisible
/// and direction-changing characters are shown as `<U+202E>` in both formats (issue 13: a
/// right-to-left override could make a name read differently from what it is), HTML is
/// escaped as usual, and Markdown (no auto-escape) is escaped by `markdown_text`, except for
/// values a filter already escaped (marked safe).
fn formatter(out: &mut Output<'_>, state: &mut State<'_, '_>, value: &TemplateValue) -> Result<(), TemplateError> {
    if value.is_safe() || value.is_undefined() || value.is_none() {
        return minijinja::escape_formatter(out, state, value);
    }
    let text = value.as_str().map_or_else(|| value.to_string(), str::to_string);
    match state.auto_escape() {
        AutoEscape::None => out.write_str(&markdown_text(&text)).map_err(TemplateError::from),
        _ => minijinja::escape_formatter(out, state, &TemplateValue::from(visible(&text))),
    }
}

/// `{{ x | num(3) }}`: a number with fixed decimals; missing or non-finite values show as "–".
fn num(value: TemplateValue, digits: Option<usize>) -> String {
    let digits = digits.unwrap_or(3);
    match f64::try_from(value) {
        Ok(v) if v.is_finite() => format!("{v:.digits$}"),
        _ => "–".into(),
    }
}

/// `{{ x | sig(3) }}`: a number already rounded to that many significant digits (the item
/// summaries), written with exactly those digits (`1.00`, `4990`, `97000`); missing values
/// show as "–".
fn sig(value: TemplateValue, digits: Option<i32>) -> String {
    f64::try_from(value).ok().and_then(|v| text::significant(v, digits.unwrap_or(3))).unwrap_or_else(|| "–".into())
}

fn pct(value: TemplateValue) -> String {
    match f64::try_from(value) {
        Ok(v) if v.is_finite() => format!("{:.1}%", v * 100.0),
        _ => "–".into(),
    }
}

fn as_text(value: &TemplateValue) -> String {
    value.as_str().map_or_else(|| value.to_string(), str::to_string)
}

/// `{{ x | cell }}` / `{{ x | md }}`: spec or data text as Markdown text (see `markdown_text`).
fn markdown_filter(value: TemplateValue) -> TemplateValue {
    if value.is_safe() {
        return value;
    }
    TemplateValue::from_safe_string(markdown_text(&as_text(&value)))
}

/// `{{ x | code }}`: spec or data text as a Markdown code span, whatever backticks it holds.
fn markdown_code(value: TemplateValue) -> TemplateValue {
    TemplateValue::from_safe_string(code_span(&as_text(&value)))
}

/// Renders one format from the report context.
pub fn render(format: ReportFormat, context: &Value) -> Result<String, ReportError> {
    let env = environment()?;
    let name = match format {
        ReportFormat::Html => "report.html",
        ReportFormat::Markdown => "report.md",
    };
    let mut ctx = context.clone();
    if let Value::Object(map) = &mut ctx {
        map.insert("style".into(), Value::String(STYLE.to_string()));
    }
    env.get_template(name)
        .and_then(|t| t.render(TemplateValue::from(minijinja::value::Serde(&ctx))))
        .map_err(|source| ReportError::Template { name: name.into(), source })
}

/// The files of a version besides the manifest, rendered from the results and the completed
/// context: `results.json` first, then the CSV tables, then one file per format. `verify`
/// renders them again and compares bytes.
pub fn render_files(
    results: &Results<'_>,
    context: &Value,
    formats: &[ReportFormat],
) -> Result<Vec<(&'static str, String)>, ReportError> {
    let mut files = vec![("results.json", pretty(&results.to_value()))];
    files.extend(tables::tables(results));
    for format in formats {
        let name = match format {
            ReportFormat::Html => "report.html",
            ReportFormat::Markdown => "report.md",
        };
        if files.iter().all(|(n, _)| *n != name) {
            files.push((name, render(*format, context)?));
        }
    }
    Ok(files)
}

/// Adds what the report shows about its own version to the context built from the results:
/// number, folder, manifest, spec path as recorded, and the changes since `previous`
/// (its number, results.json and manifest). `run` and `verify` both call this.
pub fn complete_context(
    context: &mut Value,
    manifest: &Manifest,
    results: &Value,
    previous: Option<(u32, &Value, &Manifest)>,
) {
    let Value::Object(map) = context else { return };
    // The files' hashes are added after rendering; leave them out so run and verify agree.
    let manifest = &Manifest { files: Default::default(), ..manifest.clone() };
    map.insert("version".into(), Value::from(manifest.report_version));
    map.insert("report_dir".into(), Value::String(manifest.report_dir.clone()));
    map.insert("spec_path".into(), Value::String(manifest.spec.path.clone()));
    map.insert("manifest".into(), serde_json::to_value(manifest).unwrap_or(Value::Null));
    if let Some((n, old_results, old_manifest)) = previous {
        let old = serde_json::to_value(old_manifest).unwrap_or(Value::Null);
        let new = serde_json::to_value(manifest).unwrap_or(Value::Null);
        let changes = diff::diff(old_results, &old, results, &new);
        map.insert(
            "changes".into(),
            json!({"from": format!("v{n}"), "sections": changes.sections, "empty": changes.is_empty()}),
        );
    }
}

/// results.json of a published version, if it is there and parses.
pub fn read_results(dir: &Path) -> Option<Value> {
    let text = crate::fsguard::read_regular_text(&dir.join("results.json"), crate::fsguard::MAX_TEXT_BYTES).ok()?;
    serde_json::from_str(&text).ok()
}

/// Writes a new version under `root` (the spec's `<report.dir>/<slug>`) unless the latest
/// sound version has the same fingerprint. `shown_root` is `root` as the user should see it.
/// Damaged or stray `v<N>` entries are skipped with a warning through `warn`, never trusted
/// and never overwritten.
pub fn write_version(
    root: &Path,
    manifest: &mut Manifest,
    typed: &Results<'_>,
    context: &mut Value,
    formats: &[ReportFormat],
    warn: &mut dyn FnMut(String),
) -> Result<WriteOutcome, ReportError> {
    let io = |action: &'static str, path: &Path| {
        let path = path.to_path_buf();
        move |source| ReportError::Io { action, path, source }
    };
    let results = &typed.to_value();
    std::fs::create_dir_all(root).map_err(io("create report folder", root))?;
    versions::remove_stale_partials(root);
    let survey = versions::survey(root);
    for (name, reason) in &survey.skipped {
        warn(format!("skipping `{}`: {reason}", root.join(name).display()));
    }
    if let Some((n, latest)) = &survey.latest
        && latest.fingerprint == manifest.fingerprint
    {
        return Ok(WriteOutcome::Unchanged { version: *n, dir: root.join(format!("v{n}")) });
    }
    let version = survey.highest.checked_add(1).ok_or_else(|| ReportError::Io {
        action: "number a new version in",
        path: root.to_path_buf(),
        source: std::io::Error::other("version numbers are exhausted"),
    })?;
    manifest.report_version = version;
    let final_dir = root.join(format!("v{version}"));
    manifest.report_dir = final_dir.display().to_string();
    let previous = survey.latest.as_ref().and_then(|(n, m)| {
        let old_results = read_results(&root.join(format!("v{n}")))?;
        Some((*n, old_results, m))
    });
    manifest.previous = previous.as_ref().map(|(n, _, m)| PreviousVersion { version: *n, fingerprint: m.fingerprint });
    complete_context(context, manifest, results, previous.as_ref().map(|(n, r, m)| (*n, r, *m)));
    let files = render_files(typed, context, formats)?;
    let staging =
        tempfile::Builder::new().prefix(".partial-v").tempdir_in(root).map_err(io("create staging folder in", root))?;
    for (name, text) in &files {
        let path = staging.path().join(name);
        if let Some(folder) = path.parent() {
            std::fs::create_dir_all(folder).map_err(io("create folder", folder))?;
        }
        std::fs::write(&path, text).map_err(io("write", &path))?;
        manifest.files.insert((*name).to_string(), Key::of_bytes(text.as_bytes()));
    }
    // The manifest goes last: a version folder with a manifest is complete.
    let manifest_path = staging.path().join("manifest.json");
    std::fs::write(&manifest_path, pretty(&serde_json::to_value(&*manifest).unwrap_or(Value::Null)))
        .map_err(io("write", &manifest_path))?;
    // Staging folders are private (0700); a published version is an ordinary folder.
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        let _ = std::fs::set_permissions(staging.path(), std::fs::Permissions::from_mode(0o755));
    }
    // `final_dir` is numbered past every entry, so the rename cannot replace a version; if it
    // fails anyway, the staging folder is dropped (removed) rather than left behind.
    std::fs::rename(staging.path(), &final_dir).map_err(io("publish report folder", &final_dir))?;
    let _ = staging.keep();
    Ok(WriteOutcome::Written { version, dir: final_dir })
}

pub fn pretty(v: &Value) -> String {
    let mut s = serde_json::to_string_pretty(v).unwrap_or_default();
    s.push('\n');
    s
}
