//! The CSV tables beside results.json (`tables/*.csv`) for spreadsheet users: loadings, fit,
//! edges with their bootstrap shares, effects with their intervals. Central function:
//! `tables`. Aggregates only, taken from the same typed results as results.json; numbers are
//! written in Rust's shortest round-trip form (the same digits results.json has), missing or
//! non-finite values as empty fields. Rendered again and compared by `verify`.

use construe_stats::sem::FitIndices;

use super::results::Results;
use crate::steps::resample::EdgeFrequency;

/// The tables the results give, as (path inside the version folder, CSV text). A table
/// appears when the analysis it comes from ran: loadings and fit with `measure`, edges and
/// effects with `structure`.
pub fn tables(results: &Results<'_>) -> Vec<(&'static str, String)> {
    let mut out = Vec::new();
    if let Some(m) = results.measure {
        let mut rows = vec![row(["construct", "item", "loading", "se", "std"])];
        for (construct, items) in &m.loadings {
            for (item, e) in items {
                rows.push(vec![construct.clone(), item.clone(), num(e.est), opt(e.se), opt(e.std)]);
            }
        }
        out.push(("tables/loadings.csv", csv_text(&rows)));
    }
    let mut fit = vec![row([
        "model",
        "converged",
        "n",
        "chisq",
        "df",
        "p",
        "rmsea",
        "rmsea_ci_lower",
        "rmsea_ci_upper",
        "cfi",
        "tli",
        "srmr",
    ])];
    let fit_row = |model: String, converged: bool, n: usize, f: &FitIndices| {
        vec![
            model,
            converged.to_string(),
            n.to_string(),
            num(f.chisq),
            f.df.to_string(),
            num(f.p_value),
            num(f.rmsea),
            num(f.rmsea_ci.0),
            num(f.rmsea_ci.1),
            num(f.cfi),
            num(f.tli),
            num(f.srmr),
        ]
    };
    if let Some(m) = results.measure {
        fit.push(fit_row("measure".into(), m.converged, m.n, &m.fit));
        if let Some(u) = &m.unpurified {
            fit.push(fit_row("measure_unpurified".into(), u.converged, m.n, &u.fit));
        }
    }
    if let Some(s) = results.structure {
        for (k, member) in s.members.iter().enumerate() {
            let model = if k == 0 { "structure".to_string() } else { format!("structure_member_{}", k + 1) };
            fit.push(fit_row(model, member.converged, s.n, &member.fit));
        }
    }
    if fit.len() > 1 {
        out.push(("tables/fit.csv", csv_text(&fit)));
    }
    if let Some(s) = results.structure {
        let boot: &[EdgeFrequency] = results.resample.map_or(&[], |r| r.edges.as_slice());
        let mut rows =
            vec![row(["from", "to", "kind", "reason", "found", "boot_present", "boot_from_to", "boot_to_from"])];
        let mut matched = vec![false; boot.len()];
        for e in &s.edges {
            let mut fields = vec![
                e.from.clone(),
                e.to.clone(),
                if e.kind.is_directed() { "directed" } else { "undirected" }.to_string(),
                e.reason.clone(),
                "true".into(),
            ];
            match boot.iter().position(|b| (b.from == e.from && b.to == e.to) || (b.from == e.to && b.to == e.from)) {
                Some(k) => {
                    matched[k] = true;
                    let b = &boot[k];
                    let (same, reverse) =
                        if b.from == e.from { (b.forward, b.backward) } else { (b.backward, b.forward) };
                    fields.extend([num(b.present), num(same), num(reverse)]);
                }
                None if results.resample.is_some() => fields.extend(["0".into(), "0".into(), "0".into()]),
                None => fields.extend([String::new(), String::new(), String::new()]),
            }
            rows.push(fields);
        }
        // Adjacencies the bootstrap found that the result does not have.
        for (b, _) in boot.iter().zip(&matched).filter(|(_, m)| !**m) {
            rows.push(vec![
                b.from.clone(),
                b.to.clone(),
                String::new(),
                String::new(),
                "false".into(),
                num(b.present),
                num(b.forward),
                num(b.backward),
            ]);
        }
        out.push(("tables/edges.csv", csv_text(&rows)));

        let mut rows = vec![row([
            "from",
            "to",
            "est",
            "se",
            "ci_lower",
            "ci_upper",
            "std",
            "boot_ci_lower",
            "boot_ci_upper",
            "boot_std_ci_lower",
            "boot_std_ci_upper",
            "boot_replicates",
        ])];
        for e in &s.effects {
            let mut fields =
                vec![e.from.clone(), e.to.clone(), num(e.est), opt(e.se), opt(e.ci[0]), opt(e.ci[1]), opt(e.std)];
            let boot = results.resample.and_then(|r| r.effects.iter().find(|b| b.from == e.from && b.to == e.to));
            match boot {
                Some(b) => fields.extend([
                    num(b.ci[0]),
                    num(b.ci[1]),
                    num(b.std_ci[0]),
                    num(b.std_ci[1]),
                    b.replicates.to_string(),
                ]),
                None => fields.extend(std::iter::repeat_n(String::new(), 5)),
            }
            rows.push(fields);
        }
        out.push(("tables/effects.csv", csv_text(&rows)));
    }
    out
}

fn row<const N: usize>(names: [&str; N]) -> Vec<String> {
    names.iter().map(|s| s.to_string()).collect()
}

/// A number as results.json writes it; empty when not finite (results.json has `null`).
fn num(v: f64) -> String {
    if v.is_finite() { format!("{v:?}") } else { String::new() }
}

fn opt(v: Option<f64>) -> String {
    v.map(num).unwrap_or_default()
}

/// RFC 4180 text: fields quoted when they hold a comma, quote or line break, lines ended by
/// `\n`.
fn csv_text(rows: &[Vec<String>]) -> String {
    let mut writer = csv::WriterBuilder::new().terminator(csv::Terminator::Any(b'\n')).from_writer(Vec::new());
    for r in rows {
        // Writing to a Vec cannot fail.
        let _ = writer.write_record(r);
    }
    let bytes = writer.into_inner().unwrap_or_default();
    String::from_utf8(bytes).unwrap_or_default()
}
