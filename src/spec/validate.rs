//! Semantic checks of a parsed spec against itself and its data files' columns: items exist,
//! no item in two constructs, knowledge names declared constructs, ranges hold.
//! Central function: `validate`. It reads no file: the caller passes each source's columns,
//! so checks stay fast and testable; every problem is returned, none stops the others.

use std::collections::{HashMap, HashSet};
use std::path::PathBuf;

use super::diagnostic::suggest;
use super::positions::{child, element};
use super::problem::{Finding, SpecProblem};
use super::types::{
    Alpha, Estimation, EstimationMethod, ItemPool, MIN_ITEMS_FLOOR, OrdinalSpec, Positive, Reliability, Spec,
    StandardErrors, TetradTest, Tolerance,
};
use crate::data::MatrixProblem;

/// What the caller found when reading a data source's header.
#[derive(Debug, Clone, PartialEq)]
pub enum ColumnsRead {
    Columns(Vec<String>),
    Missing,
    Unsupported,
    Unreadable(String),
    /// A summary matrix whose file reads but is not a valid matrix.
    BadMatrix(MatrixProblem),
}

/// Most characters in a title (it names the report folder; file names stop at 255 bytes).
pub const MAX_TITLE_CHARS: usize = 255;
/// Largest `n` of a summary matrix: more respondents than any survey has.
pub const MAX_MATRIX_N: usize = 100_000_000;
/// Largest `purify.min_items`.
pub const MAX_MIN_ITEMS: usize = 1_000;
/// Most bootstrap replicates (each reruns every analysis).
pub const MAX_REPLICATES: usize = 100_000;
/// Most Monte Carlo draws of the sensitivity prior (each refits the models).
pub const MAX_DRAWS: usize = 100_000;
/// Most reliability values in one construct's sensitivity grid (each refits the models).
pub const MAX_GRID_POINTS: usize = 1_000;

/// One data source (a wave, or the summary matrix when `wave` is `None`) and its columns.
#[derive(Debug, Clone, PartialEq)]
pub struct SourceColumns {
    pub wave: Option<String>,
    /// Index in `data.waves`, for positions.
    pub index: usize,
    pub path: PathBuf,
    pub columns: ColumnsRead,
}

/// Every semantic problem of `spec`, given the columns of its sources.
pub fn validate(spec: &Spec, sources: &[SourceColumns]) -> Vec<Finding> {
    let mut out = Vec::new();
    if spec.construe != super::types::FORMAT_VERSION {
        out.push(Finding::value(
            SpecProblem::WrongVersion { found: spec.construe, supported: super::types::FORMAT_VERSION },
            "construe",
        ));
    }
    let title_chars = spec.title.chars().count();
    if title_chars > MAX_TITLE_CHARS {
        out.push(Finding::value(SpecProblem::TitleTooLong { length: title_chars, max: MAX_TITLE_CHARS }, "title"));
    }
    check_sources(spec, sources, &mut out);
    check_matrix_n(spec, &mut out);
    let available = available_items(spec, sources);
    check_constructs(spec, sources, available.as_ref(), &mut out);
    check_data_options(spec, available.as_ref(), &mut out);
    check_knowledge(spec, &mut out);
    check_analyses(spec, available.as_ref(), &mut out);
    check_impurities(spec, &mut out);
    super::validate_invariance::check_invariance(spec, sources, &mut out);
    // `report.truth_model` is read, parsed and checked once, by `SpecFile::parse` (its problems
    // arrive in `SpecFile::early`).
    if spec.report.formats.is_empty() {
        out.push(Finding::value(SpecProblem::NoReportFormats, "report.formats"));
    }
    out
}

fn check_sources(spec: &Spec, sources: &[SourceColumns], out: &mut Vec<Finding>) {
    let data = &spec.data;
    match (data.waves.is_empty(), data.matrix.is_some()) {
        (true, false) => out.push(Finding::key(SpecProblem::NoData, "data")),
        (false, true) => out.push(Finding::key(SpecProblem::WavesAndMatrix, "data.matrix")),
        _ => {}
    }
    let mut seen = HashSet::new();
    for (i, w) in data.waves.iter().enumerate() {
        if !seen.insert(w.id.as_str()) {
            out.push(Finding::value(SpecProblem::DuplicateWave { wave: w.id.clone() }, format!("data.waves[{i}].id")));
        }
    }
    for s in sources {
        let path = match &s.wave {
            Some(_) => format!("data.waves[{}].file", s.index),
            None => "data.matrix.file".to_string(),
        };
        let problem = match &s.columns {
            ColumnsRead::Columns(_) => continue,
            ColumnsRead::Missing => SpecProblem::MissingFile { wave: s.wave.clone(), path: s.path.clone() },
            ColumnsRead::Unsupported => SpecProblem::UnsupportedFormat { path: s.path.clone() },
            ColumnsRead::Unreadable(reason) => {
                SpecProblem::UnreadableFile { path: s.path.clone(), reason: reason.clone() }
            }
            ColumnsRead::BadMatrix(problem) => {
                SpecProblem::BadMatrix { path: s.path.clone(), problem: problem.clone() }
            }
        };
        out.push(Finding::value(problem, path));
    }
    if let Some(id) = &data.id_column {
        for s in sources.iter().filter(|s| s.wave.is_some()) {
            if let ColumnsRead::Columns(cols) = &s.columns
                && !cols.contains(id)
            {
                out.push(Finding::value(
                    SpecProblem::MissingIdColumn { column: id.clone(), path: s.path.clone() },
                    "data.id_column",
                ));
            }
        }
    }
}

/// A summary matrix's `n`: more than the number of items the spec uses (fewer respondents
/// than items cannot give a positive definite matrix) and at most `MAX_MATRIX_N`.
fn check_matrix_n(spec: &Spec, out: &mut Vec<Finding>) {
    let Some(m) = &spec.data.matrix else { return };
    let mut items: Vec<&str> = spec.constructs.values().flat_map(|c| c.items.iter().map(String::as_str)).collect();
    items.sort_unstable();
    items.dedup();
    if m.n > MAX_MATRIX_N {
        out.push(Finding::value(SpecProblem::MatrixTooManyCases { n: m.n, max: MAX_MATRIX_N }, "data.matrix.n"));
    } else if m.n <= items.len() {
        out.push(Finding::value(SpecProblem::MatrixTooFewCases { n: m.n, items: items.len() }, "data.matrix.n"));
    }
}

/// The union of analysable columns over readable sources; `None` when no source could be read
/// (then item checks would only repeat the file problem).
fn available_items(spec: &Spec, sources: &[SourceColumns]) -> Option<Vec<String>> {
    let mut items: Vec<String> = Vec::new();
    let mut any = false;
    for s in sources {
        if let ColumnsRead::Columns(cols) = &s.columns {
            any = true;
            for c in cols {
                if Some(c) != spec.data.id_column.as_ref() && !items.contains(c) {
                    items.push(c.clone());
                }
            }
        }
    }
    any.then_some(items)
}

fn check_constructs(spec: &Spec, sources: &[SourceColumns], available: Option<&Vec<String>>, out: &mut Vec<Finding>) {
    let mut owner: HashMap<&str, &str> = HashMap::new();
    for (name, c) in &spec.constructs {
        let base = child("constructs", name);
        if c.items.is_empty() {
            out.push(Finding::key(SpecProblem::EmptyConstruct { construct: name.clone() }, base.clone()));
        }
        if let Some(r) = c.reliability {
            if !Reliability::holds(r) {
                out.push(Finding::value(
                    SpecProblem::OutOfRange {
                        what: format!("reliability of `{name}`"),
                        range: "(0, 1]".into(),
                        value: r,
                    },
                    child(&base, "reliability"),
                ));
            }
        } else if let Some(p) =
            spec.analyses.purify.as_ref().filter(|p| c.items.len() < p.min_items && !c.items.is_empty())
        {
            out.push(Finding::key(
                SpecProblem::BelowMinItems { construct: name.clone(), count: c.items.len(), min_items: p.min_items },
                base.clone(),
            ));
        } else if c.items.len() == 1 && (spec.analyses.measure.is_some() || spec.analyses.structure.is_some()) {
            // One item and no reliability: the model fit would fail after computing the rest.
            out.push(Finding::key(SpecProblem::Unidentified { construct: name.clone() }, base.clone()));
        } else if !c.items.is_empty() && c.items.len() < 3 {
            out.push(Finding::key(
                SpecProblem::TooFewItems { construct: name.clone(), count: c.items.len() },
                base.clone(),
            ));
        }
        check_facets(name, c, &base, out);
        let mut in_this = HashSet::new();
        for (i, item) in c.items.iter().enumerate() {
            let path = element(&child(&base, "items"), i);
            if !in_this.insert(item.as_str()) {
                out.push(Finding::value(
                    SpecProblem::DuplicateItem { construct: name.clone(), item: item.clone() },
                    path,
                ));
                continue;
            }
            if let Some(first) = owner.insert(item, name)
                && first != name
            {
                out.push(Finding::value(
                    SpecProblem::ItemInTwoConstructs {
                        item: item.clone(),
                        first: first.to_string(),
                        second: name.clone(),
                    },
                    path.clone(),
                ));
            }
            if spec.data.id_column.as_deref() == Some(item) {
                out.push(Finding::value(SpecProblem::IdColumnIsItem { column: item.clone() }, path.clone()));
                continue;
            }
            let Some(all) = available else { continue };
            if !all.contains(item) {
                let problem = SpecProblem::UnknownItem {
                    construct: name.clone(),
                    item: item.clone(),
                    suggestion: suggest(item, all.iter().map(String::as_str)),
                };
                out.push(Finding::value(problem, path));
                continue;
            }
            for s in sources {
                if let (Some(wave), ColumnsRead::Columns(cols)) = (&s.wave, &s.columns)
                    && !cols.contains(item)
                {
                    let problem = SpecProblem::MissingColumn {
                        wave: wave.clone(),
                        column: item.clone(),
                        path: s.path.clone(),
                        suggestion: suggest(item, cols.iter().map(String::as_str)),
                    };
                    out.push(Finding::value(problem, path.clone()));
                }
            }
        }
    }
}

fn check_data_options(spec: &Spec, available: Option<&Vec<String>>, out: &mut Vec<Finding>) {
    for (i, &code) in spec.data.missing_codes.iter().enumerate() {
        if !code.is_finite() {
            out.push(Finding::value(
                SpecProblem::NotFinite { what: "a missing code".into(), value: code },
                element("data.missing_codes", i),
            ));
        }
    }
    for (item, bounds) in &spec.data.reverse {
        for (k, &v) in bounds.iter().enumerate() {
            if !v.is_finite() {
                out.push(Finding::value(
                    SpecProblem::NotFinite { what: format!("the reverse range of `{item}`"), value: v },
                    element(&child("data.reverse", item), k),
                ));
            }
        }
    }
    let Some(all) = available else { return };
    let unknown = |place: &str, item: &str| SpecProblem::UnknownDataItem {
        place: place.to_string(),
        item: item.to_string(),
        suggestion: suggest(item, all.iter().map(String::as_str)),
    };
    for (item, [lo, hi]) in &spec.data.reverse {
        let path = child("data.reverse", item);
        if !all.contains(item) {
            out.push(Finding::key(unknown("`data.reverse`", item), path));
        } else if lo.is_finite() && hi.is_finite() && lo >= hi {
            out.push(Finding::value(SpecProblem::BadReverseRange { item: item.clone() }, path));
        }
    }
    if let OrdinalSpec::Items(items) = &spec.data.ordinal {
        for (i, item) in items.iter().enumerate() {
            if !all.contains(item) {
                out.push(Finding::value(unknown("`data.ordinal`", item), element("data.ordinal", i)));
            }
        }
    }
}

fn check_knowledge(spec: &Spec, out: &mut Vec<Finding>) {
    let names: Vec<&str> = spec.constructs.keys().map(String::as_str).collect();
    let known = |place: &str, name: &str, path: String, out: &mut Vec<Finding>| -> bool {
        if names.contains(&name) {
            return true;
        }
        let problem = SpecProblem::UnknownConstruct {
            place: place.to_string(),
            name: name.to_string(),
            suggestion: suggest(name, names.iter().copied()),
        };
        out.push(Finding::value(problem, path));
        false
    };
    let k = &spec.knowledge;
    let mut tier_of: HashMap<&str, usize> = HashMap::new();
    for (t, tier) in k.tiers.iter().enumerate() {
        for (i, name) in tier.iter().enumerate() {
            let path = element(&element("knowledge.tiers", t), i);
            if !known(&format!("tier {}", t + 1), name, path.clone(), out) {
                continue;
            }
            if let Some(first) = tier_of.insert(name, t) {
                out.push(Finding::value(
                    SpecProblem::ConstructInTwoTiers { construct: name.clone(), first: first + 1, second: t + 1 },
                    path,
                ));
            }
        }
    }
    let edges_ok = |list: &[[String; 2]], key: &str, out: &mut Vec<Finding>| -> Vec<bool> {
        list.iter()
            .enumerate()
            .map(|(i, [from, to])| {
                let base = element(&child("knowledge", key), i);
                let a = known(&format!("`knowledge.{key}`"), from, element(&base, 0), out);
                let b = known(&format!("`knowledge.{key}`"), to, element(&base, 1), out);
                if a && b && from == to {
                    out.push(Finding::value(SpecProblem::SelfEdge { from: from.clone(), to: to.clone() }, base));
                    return false;
                }
                a && b
            })
            .collect()
    };
    edges_ok(&k.forbid, "forbid", out);
    let require_ok = edges_ok(&k.require, "require", out);
    for (i, ([from, to], ok)) in k.require.iter().zip(require_ok).enumerate() {
        if !ok {
            continue;
        }
        let path = element("knowledge.require", i);
        let reason = if k.forbid.iter().any(|[f, t]| f == from && t == to) {
            Some("is also forbidden".to_string())
        } else {
            match (tier_of.get(from.as_str()), tier_of.get(to.as_str())) {
                (Some(&a), Some(&b)) if a > b => {
                    Some(format!("goes from tier {} back to tier {}, which the tiers do not allow", a + 1, b + 1))
                }
                _ => None,
            }
        };
        if let Some(reason) = reason {
            out.push(Finding::value(
                SpecProblem::ImpossibleRequirement { from: from.clone(), to: to.clone(), reason },
                path,
            ));
        }
    }
}

/// `impurities`: every item is an item of a construct, every `also` another declared construct,
/// nothing declared twice, each method factor with at least 2 items, a name of its own, and
/// not holding every item of one construct (identification; see `types::Impurities`).
fn check_impurities(spec: &Spec, out: &mut Vec<Finding>) {
    let imp = &spec.impurities;
    let owner: HashMap<&str, &str> =
        spec.constructs.iter().flat_map(|(name, c)| c.items.iter().map(move |i| (i.as_str(), name.as_str()))).collect();
    let items: Vec<&str> = spec.constructs.values().flat_map(|c| c.items.iter().map(String::as_str)).collect();
    let known = |place: &str, item: &str, path: String, out: &mut Vec<Finding>| -> Option<&str> {
        let found = owner.get(item).copied();
        if found.is_none() {
            let problem = SpecProblem::ImpurityItemNotInConstruct {
                place: place.to_string(),
                item: item.to_string(),
                suggestion: suggest(item, items.iter().copied()),
            };
            out.push(Finding::value(problem, path));
        }
        found
    };
    let mut pairs = HashSet::new();
    for (i, [a, b]) in imp.correlated_errors.iter().enumerate() {
        let base = element("impurities.correlated_errors", i);
        let place = "`impurities.correlated_errors`";
        let ka = known(place, a, element(&base, 0), out).is_some();
        let kb = known(place, b, element(&base, 1), out).is_some();
        if !(ka && kb) {
            continue;
        }
        if a == b {
            out.push(Finding::value(SpecProblem::ErrorWithItself { item: a.clone() }, base));
        } else if !pairs.insert((a.min(b), a.max(b))) {
            out.push(Finding::value(
                SpecProblem::DuplicateImpurity { what: format!("the correlated error of `{a}` and `{b}`") },
                base,
            ));
        }
    }
    let names: Vec<&str> = spec.constructs.keys().map(String::as_str).collect();
    let mut cross = HashSet::new();
    for (i, c) in imp.cross_loadings.iter().enumerate() {
        let base = element("impurities.cross_loadings", i);
        let own = known("`impurities.cross_loadings`", &c.item, child(&base, "item"), out);
        if !names.contains(&c.also.as_str()) {
            let problem = SpecProblem::UnknownConstruct {
                place: "`impurities.cross_loadings`".into(),
                name: c.also.clone(),
                suggestion: suggest(&c.also, names.iter().copied()),
            };
            out.push(Finding::value(problem, child(&base, "also")));
            continue;
        }
        match own {
            Some(own) if own == c.also => out.push(Finding::value(
                SpecProblem::CrossLoadingOnOwnConstruct { item: c.item.clone(), construct: c.also.clone() },
                child(&base, "also"),
            )),
            Some(_) if !cross.insert((c.item.as_str(), c.also.as_str())) => out.push(Finding::value(
                SpecProblem::DuplicateImpurity { what: format!("the cross-loading of `{}` on `{}`", c.item, c.also) },
                base,
            )),
            _ => {}
        }
    }
    for (factor, list) in &imp.method_factors {
        let base = child("impurities.method_factors", factor);
        if spec.constructs.contains_key(factor) {
            out.push(Finding::key(SpecProblem::MethodFactorIsConstruct { factor: factor.clone() }, base.clone()));
        }
        let mut seen = HashSet::new();
        let place = format!("method factor `{factor}`");
        for (i, item) in list.iter().enumerate() {
            if known(&place, item, element(&base, i), out).is_some() && !seen.insert(item.as_str()) {
                out.push(Finding::value(
                    SpecProblem::DuplicateImpurity { what: format!("item `{item}` of method factor `{factor}`") },
                    element(&base, i),
                ));
            }
        }
        if list.len() < 2 {
            out.push(Finding::key(
                SpecProblem::MethodFactorTooSmall { factor: factor.clone(), count: list.len() },
                base.clone(),
            ));
        }
        for (name, c) in &spec.constructs {
            if c.items.len() > 1 && c.items.iter().all(|i| seen.contains(i.as_str())) {
                out.push(Finding::key(
                    SpecProblem::MethodFactorCoversConstruct { factor: factor.clone(), construct: name.clone() },
                    base.clone(),
                ));
            }
        }
    }
}

fn check_analyses(spec: &Spec, available: Option<&Vec<String>>, out: &mut Vec<Finding>) {
    let a = &spec.analyses;
    let rows = spec.data.matrix.is_none();
    let alpha = |what: &str, value: f64, path: &str, out: &mut Vec<Finding>| {
        if !Alpha::holds(value) {
            out.push(Finding::value(
                SpecProblem::OutOfRange { what: what.into(), range: "(0, 1)".into(), value },
                path,
            ));
        } else if !(0.001..=0.2).contains(&value) {
            out.push(Finding::value(SpecProblem::UnusualAlpha { what: what.into(), value }, path));
        }
    };
    // Items the spec itself declares ordinal (under `ordinal: auto` the data decide, at run).
    let declared_ordinal = |among: &mut dyn Iterator<Item = &String>| -> Vec<String> {
        match &spec.data.ordinal {
            OrdinalSpec::Items(list) => {
                let mut found: Vec<String> = among.filter(|i| list.contains(i)).cloned().collect();
                found.dedup();
                found
            }
            OrdinalSpec::Auto | OrdinalSpec::None => Vec::new(),
        }
    };
    let construct_items = || spec.constructs.values().flat_map(|c| c.items.iter());
    if let Some(p) = &a.purify {
        alpha("`purify.alpha`", p.alpha, "analyses.purify.alpha", out);
        tolerance("`purify.tolerance`", p.tolerance, "analyses.purify.tolerance", out);
        let ordinal = declared_ordinal(&mut construct_items());
        if p.test == TetradTest::Wishart && !ordinal.is_empty() {
            out.push(Finding::value(
                SpecProblem::NormalTheoryOnOrdinal { analysis: "purify".into(), items: ordinal },
                "analyses.purify.test",
            ));
        }
        if p.test == TetradTest::Delta && !rows {
            out.push(Finding::value(
                SpecProblem::NeedsRows { analysis: "purify (test: delta)".into() },
                "analyses.purify.test",
            ));
        }
        too_many(out, "`purify.min_items`", p.min_items, MAX_MIN_ITEMS, "analyses.purify.min_items");
        if p.min_items < MIN_ITEMS_FLOOR {
            out.push(Finding::value(
                SpecProblem::OutOfRange {
                    what: "`purify.min_items`".into(),
                    range: "3 or more (a tetrad needs 4 items; a latent, 3)".into(),
                    value: p.min_items as f64,
                },
                "analyses.purify.min_items",
            ));
        }
    }
    if let Some(m) = &a.measure {
        check_estimation(&m.estimation, rows, out);
    }
    if let Some(d) = &a.discover {
        alpha("`discover.alpha`", d.alpha, "analyses.discover.alpha", out);
        tolerance("`discover.tolerance`", d.tolerance, "analyses.discover.tolerance", out);
        let ordinal = match &d.items {
            ItemPool::All => declared_ordinal(&mut construct_items()),
            ItemPool::Items(pool) => declared_ordinal(&mut pool.iter()),
        };
        if d.test == TetradTest::Wishart && !ordinal.is_empty() {
            out.push(Finding::value(
                SpecProblem::NormalTheoryOnOrdinal { analysis: "discover".into(), items: ordinal },
                "analyses.discover.test",
            ));
        }
        if d.test == TetradTest::Delta && !rows {
            out.push(Finding::value(
                SpecProblem::NeedsRows { analysis: "discover (test: delta)".into() },
                "analyses.discover.test",
            ));
        }
        if let (ItemPool::Items(items), Some(all)) = (&d.items, available) {
            for (i, item) in items.iter().enumerate() {
                if !all.contains(item) {
                    let problem = SpecProblem::UnknownDataItem {
                        place: "`analyses.discover.items`".into(),
                        item: item.clone(),
                        suggestion: suggest(item, all.iter().map(String::as_str)),
                    };
                    out.push(Finding::value(problem, element("analyses.discover.items", i)));
                }
            }
        }
    }
    if let Some(s) = &a.structure {
        alpha("`structure.alpha`", s.alpha, "analyses.structure.alpha", out);
        if s.search == crate::spec::types::Search::Fci && a.sensitivity.is_some() {
            out.push(Finding::value(SpecProblem::SensitivityWithoutModel, "analyses.structure.search"));
        }
    }
    if let Some(s) = &a.sensitivity {
        if a.structure.is_none() {
            out.push(Finding::key(
                SpecProblem::MissingPrerequisite { analysis: "sensitivity".into(), needs: "structure".into() },
                "analyses.sensitivity",
            ));
        }
        let multi = spec.constructs.values().any(|c| c.items.len() >= 3);
        if s.reliability.is_empty() && s.prior.is_empty() && s.alpha.is_empty() && !(s.leave_one_out && multi) {
            let why = if s.leave_one_out {
                "`leave_one_out` needs a construct with at least 3 items, and there is no reliability grid, prior or `alpha` list"
            } else {
                "no reliability grid or prior, no `alpha` list, and `leave_one_out` is off"
            };
            out.push(Finding::key(SpecProblem::NothingToVary { why: why.into() }, "analyses.sensitivity"));
        }
        let swept = s.reliability.keys().map(|n| (n, "analyses.sensitivity.reliability"));
        for (name, path) in swept.chain(s.prior.keys().map(|n| (n, "analyses.sensitivity.prior"))) {
            let count = spec.constructs.get(name).map_or(1, |c| c.items.len());
            if count != 1 {
                out.push(Finding::key(
                    SpecProblem::NotSingleIndicator { construct: name.clone(), count },
                    child(path, name),
                ));
            }
        }
        let names: Vec<&str> = spec.constructs.keys().map(String::as_str).collect();
        for (name, grid) in &s.reliability {
            let path = child("analyses.sensitivity.reliability", name);
            if !names.contains(&name.as_str()) {
                out.push(Finding::key(
                    SpecProblem::UnknownConstruct {
                        place: "`sensitivity.reliability`".into(),
                        name: name.clone(),
                        suggestion: suggest(name, names.iter().copied()),
                    },
                    path,
                ));
                continue;
            }
            too_many(
                out,
                &format!("the number of reliability values for `{name}`"),
                grid.len(),
                MAX_GRID_POINTS,
                path.clone(),
            );
            for (i, &r) in grid.iter().enumerate() {
                if !Reliability::holds(r) {
                    out.push(Finding::value(
                        SpecProblem::OutOfRange {
                            what: format!("reliability grid value for `{name}`"),
                            range: "(0, 1]".into(),
                            value: r,
                        },
                        element(&path, i),
                    ));
                }
            }
        }
        for (name, prior) in &s.prior {
            let path = child("analyses.sensitivity.prior", name);
            if !names.contains(&name.as_str()) {
                out.push(Finding::key(
                    SpecProblem::UnknownConstruct {
                        place: "`sensitivity.prior`".into(),
                        name: name.clone(),
                        suggestion: suggest(name, names.iter().copied()),
                    },
                    path,
                ));
            } else {
                for (k, &v) in prior.beta.iter().enumerate() {
                    let what = format!("beta prior parameter {} for `{name}`", k + 1);
                    let problem = if !v.is_finite() {
                        SpecProblem::NotFinite { what, value: v }
                    } else if !Positive::holds(v) {
                        SpecProblem::OutOfRange { what, range: "(0, inf)".into(), value: v }
                    } else {
                        continue;
                    };
                    out.push(Finding::value(problem, element(&child(&path, "beta"), k)));
                }
            }
        }
        if !too_many(out, "`sensitivity.draws`", s.draws, MAX_DRAWS, "analyses.sensitivity.draws")
            && s.draws == 0
            && !s.prior.is_empty()
        {
            out.push(Finding::value(
                SpecProblem::OutOfRange {
                    what: "`sensitivity.draws`".into(),
                    range: "1 or more with a prior".into(),
                    value: 0.0,
                },
                "analyses.sensitivity.draws",
            ));
        }
        for (i, &v) in s.alpha.iter().enumerate() {
            alpha("a `sensitivity.alpha` value", v, &element("analyses.sensitivity.alpha", i), out);
        }
    }
    if a.resample.is_some() && !rows {
        out.push(Finding::key(SpecProblem::NeedsRows { analysis: "resample".into() }, "analyses.resample"));
    }
    if let Some(r) = &a.resample
        && !too_many(out, "`resample.replicates`", r.replicates, MAX_REPLICATES, "analyses.resample.replicates")
        && r.replicates == 0
    {
        out.push(Finding::value(
            SpecProblem::OutOfRange { what: "`resample.replicates`".into(), range: "1 or more".into(), value: 0.0 },
            "analyses.resample.replicates",
        ));
    }
}

/// Pushes a `TooMany` finding at `path` when `value` exceeds `max`; true when it did.
/// `analyses.measure.estimation`: DWLS has no information-matrix SEs, and DWLS and sandwich
/// SEs need the moments' sampling covariance, which a summary matrix cannot give.
fn check_estimation(e: &Estimation, rows: bool, out: &mut Vec<Finding>) {
    let path = "analyses.measure.estimation";
    if e.method == EstimationMethod::Dwls && e.standard_errors == StandardErrors::Information {
        out.push(Finding::value(SpecProblem::DwlsInformation, format!("{path}.standard_errors")));
    }
    if !rows && e.method == EstimationMethod::Dwls {
        out.push(Finding::value(
            SpecProblem::NeedsRows { analysis: "measure (method: dwls)".into() },
            format!("{path}.method"),
        ));
    }
    if !rows && e.standard_errors == StandardErrors::Sandwich {
        out.push(Finding::value(
            SpecProblem::NeedsRows { analysis: "measure (standard_errors: sandwich)".into() },
            format!("{path}.standard_errors"),
        ));
    }
}

/// A tetrad tolerance outside [0, `MAX_TOLERANCE`].
fn tolerance(what: &str, value: f64, path: &str, out: &mut Vec<Finding>) {
    if !Tolerance::holds(value) {
        let range = format!("[0, {}] (correlation units; 0 is the exact test)", super::types::MAX_TOLERANCE);
        out.push(Finding::value(SpecProblem::OutOfRange { what: what.into(), range, value }, path));
    }
}

/// Each facet of a construct lists some of the construct's own items.
fn check_facets(name: &str, c: &super::types::ConstructSpec, base: &str, out: &mut Vec<Finding>) {
    let facets = child(base, "facets");
    for (facet, items) in &c.facets {
        let path = child(&facets, facet);
        if items.is_empty() {
            out.push(Finding::key(SpecProblem::EmptyFacet { construct: name.into(), facet: facet.clone() }, path));
            continue;
        }
        for (i, item) in items.iter().enumerate() {
            if !c.items.contains(item) {
                let problem = SpecProblem::FacetItemNotInConstruct {
                    construct: name.into(),
                    facet: facet.clone(),
                    item: item.clone(),
                    suggestion: suggest(item, c.items.iter().map(String::as_str)),
                };
                out.push(Finding::value(problem, element(&path, i)));
            }
        }
    }
}

fn too_many(out: &mut Vec<Finding>, what: &str, value: usize, max: usize, path: impl Into<String>) -> bool {
    if value <= max {
        return false;
    }
    out.push(Finding::value(SpecProblem::TooMany { what: what.into(), value: value as u64, max: max as u64 }, path));
    true
}
