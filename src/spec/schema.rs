//! The keys each mapping of a spec may hold, so every unknown key is reported at once with its
//! position and a "did you mean" (serde stops at the first one and knows no positions of ours).
//! Must agree with `types.rs`; a test parses a spec using every key to keep the two in step.

use super::diagnostic::suggest;
use super::positions::{Positions, child};
use super::problem::{Finding, SpecProblem};

const ROOT: &[&str] = &["construe", "title", "data", "constructs", "knowledge", "analyses", "report", "impurities"];
const DATA: &[&str] = &["waves", "matrix", "id_column", "missing_codes", "ordinal", "reverse"];
const WAVE: &[&str] = &["id", "file"];
const MATRIX: &[&str] = &["file", "kind", "n"];
const CONSTRUCT: &[&str] = &["items", "reliability", "facets"];
const KNOWLEDGE: &[&str] = &["tiers", "forbid", "require"];
pub const ANALYSES: &[&str] =
    &["covariance", "purify", "discover", "measure", "structure", "sensitivity", "resample", "invariance"];
const COVARIANCE: &[&str] = &["missing", "ordinal"];
const PURIFY: &[&str] = &["test", "alpha", "min_items", "tolerance"];
const DISCOVER: &[&str] = &["items", "alpha", "test", "tolerance"];
const MEASURE: &[&str] = &["identification", "estimation"];
const ESTIMATION: &[&str] = &["method", "standard_errors"];
const STRUCTURE: &[&str] = &["alpha", "test", "search", "colliders"];
const SENSITIVITY: &[&str] = &["reliability", "prior", "draws", "alpha", "seed", "leave_one_out"];
const PRIOR: &[&str] = &["beta"];
const RESAMPLE: &[&str] = &["replicates", "seed"];
const INVARIANCE: &[&str] = &["across", "reference", "alpha", "strict", "partial"];
const REPORT: &[&str] = &["formats", "dir", "truth_model"];
const IMPURITIES: &[&str] = &["correlated_errors", "cross_loadings", "method_factors"];
const CROSS_LOADING: &[&str] = &["item", "also"];

/// What keys a mapping at a given path may have.
enum Allowed {
    Only(&'static [&'static str]),
    /// User-chosen names (constructs, items).
    Any,
    /// Not a place where a mapping is expected; serde reports the type error.
    NotAMapping,
}

fn allowed(path: &str) -> Allowed {
    let segments: Vec<String> = path
        .split('.')
        .filter(|s| !s.is_empty())
        .map(|s| match s.find('[') {
            Some(i) => format!("{}[]", &s[..i]),
            None => s.to_string(),
        })
        .collect();
    let s: Vec<&str> = segments.iter().map(String::as_str).collect();
    use Allowed::*;
    match s.as_slice() {
        [] => Only(ROOT),
        ["data"] => Only(DATA),
        ["data", "waves[]"] => Only(WAVE),
        ["data", "matrix"] => Only(MATRIX),
        ["data", "reverse"] | ["constructs"] => Any,
        ["constructs", _] => Only(CONSTRUCT),
        ["constructs", _, "facets"] => Any,
        ["knowledge"] => Only(KNOWLEDGE),
        ["analyses"] => Only(ANALYSES),
        ["analyses", "covariance"] => Only(COVARIANCE),
        ["analyses", "purify"] => Only(PURIFY),
        ["analyses", "discover"] => Only(DISCOVER),
        ["analyses", "measure"] => Only(MEASURE),
        ["analyses", "measure", "estimation"] => Only(ESTIMATION),
        ["analyses", "structure"] => Only(STRUCTURE),
        ["analyses", "sensitivity"] => Only(SENSITIVITY),
        ["analyses", "sensitivity", "reliability" | "prior"] => Any,
        ["analyses", "sensitivity", "prior", _] => Only(PRIOR),
        ["analyses", "resample"] => Only(RESAMPLE),
        ["analyses", "invariance"] => Only(INVARIANCE),
        ["report"] => Only(REPORT),
        ["impurities"] => Only(IMPURITIES),
        ["impurities", "cross_loadings[]"] => Only(CROSS_LOADING),
        ["impurities", "method_factors"] => Any,
        _ => NotAMapping,
    }
}

/// Every key of every mapping that the format does not define, and every key a mapping holds
/// twice (at any level, user-named ones such as constructs included).
pub fn unknown_keys(positions: &Positions) -> Vec<Finding> {
    let mut findings: Vec<Finding> = positions
        .duplicates()
        .iter()
        .map(|d| {
            // The key's path points at its last copy, which is where the diagnostic goes.
            let problem =
                SpecProblem::DuplicateKey { parent: d.parent.clone(), key: d.key.clone(), first_line: d.first.line };
            Finding::key(problem, child(&d.parent, &d.key))
        })
        .collect();
    for map_path in positions.mapping_paths() {
        let Allowed::Only(keys) = allowed(map_path) else { continue };
        for entry in positions.keys_of(map_path) {
            if !keys.contains(&entry.key.as_str()) {
                let problem = SpecProblem::UnknownKey {
                    parent: map_path.to_string(),
                    key: entry.key.clone(),
                    suggestion: suggest(&entry.key, keys.iter().copied()),
                };
                findings.push(Finding::key(problem, child(map_path, &entry.key)));
            }
        }
    }
    findings
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::spec::types::Spec;

    /// A spec with every key of the format: serde accepts it and the schema finds nothing.
    pub const EVERY_KEY: &str = r#"
construe: 1
title: every key
data:
  waves: [{id: a, file: a.csv}]
  matrix: {file: m.csv, kind: correlation, n: 100}
  id_column: rid
  missing_codes: [-9]
  ordinal: auto
  reverse: {x1: [1, 5]}
constructs:
  f: {items: [x1, x2, x3], reliability: 0.9, facets: {core: [x1, x2]}}
knowledge: {tiers: [[f]], forbid: [], require: []}
analyses:
  covariance: {missing: pairwise, ordinal: two_step}
  purify: {test: wishart, alpha: 0.01, min_items: 3, tolerance: 0.05}
  discover: {items: all, alpha: 0.01, test: delta, tolerance: 0.05}
  measure: {identification: unit_variance, estimation: {method: auto, standard_errors: auto}}
  structure: {alpha: 0.05, test: wald}
  sensitivity: {reliability: {f: [0.5]}, prior: {f: {beta: [7, 3]}}, draws: 10, alpha: [0.01], seed: 3}
  resample: {replicates: 10, seed: 11}
  invariance: {across: wave, reference: a, alpha: 0.1, strict: false, partial: true}
report: {formats: [html, markdown], dir: reports, truth_model: model.yaml}
impurities:
  correlated_errors: [[x1, x2]]
  cross_loadings: [{item: x3, also: f}]
  method_factors: {reversed: [x1, x3]}
"#;

    #[test]
    fn schema_and_serde_agree_on_every_key() {
        let positions = Positions::index(EVERY_KEY).unwrap();
        assert_eq!(unknown_keys(&positions), vec![]);
        serde_yaml::from_str::<Spec>(EVERY_KEY).unwrap();
    }

    #[test]
    fn unknown_keys_everywhere_are_all_found() {
        let src = EVERY_KEY.replace("purify: {test", "purfy: {test").replace("min_items", "min_itms");
        let found = unknown_keys(&Positions::index(&src).unwrap());
        assert_eq!(found.len(), 1, "the misspelt analysis hides its own keys: {found:?}");
        let src = EVERY_KEY.replace("alpha: 0.05", "alpah: 0.05").replace("title:", "titel:");
        let mut found: Vec<String> =
            unknown_keys(&Positions::index(&src).unwrap()).into_iter().map(|f| f.problem.to_string()).collect();
        found.sort();
        assert_eq!(
            found,
            ["unknown key `alpah` in `analyses.structure`", "unknown key `titel` in the spec's top level"]
        );
    }
}
