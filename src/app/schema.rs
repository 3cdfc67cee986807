//! `construe schema spec` / `construe schema results`: the JSON Schemas (draft 2020-12) of the
//! spec format and of results.json, generated from the Rust types with `schemars`, so they
//! cannot drift from the code. Descriptions are the types' doc comments; bounds are those
//! `validate.rs` checks. Central function: `schema_text`. The repository ships both in
//! `schemas/`; a test fails when those files are stale.

use schemars::generate::SchemaSettings;
use serde_json::Value;

use crate::report::Results;
use crate::spec::types::Spec;

/// Which schema.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SchemaKind {
    /// The analysis spec (what `construe check` reads).
    Spec,
    /// results.json of a report version.
    Results,
}

impl SchemaKind {
    /// Where the repository keeps this schema, relative to its root.
    pub fn committed_path(self) -> &'static str {
        match self {
            SchemaKind::Spec => "schemas/spec.schema.json",
            SchemaKind::Results => "schemas/results.schema.json",
        }
    }
}

/// The schema as a JSON value.
pub fn schema(kind: SchemaKind) -> Value {
    let mut value = match kind {
        // A spec is read: keys with defaults are optional, unknown keys are refused.
        SchemaKind::Spec => {
            let generator = SchemaSettings::draft2020_12().into_generator();
            serde_json::to_value(generator.into_root_schema_for::<Spec>())
        }
        // results.json is written: every field it always writes is required; it may grow new
        // fields within a major version, so unknown ones are allowed.
        SchemaKind::Results => {
            let generator = SchemaSettings::draft2020_12().for_serialize().into_generator();
            serde_json::to_value(generator.into_root_schema_for::<Results<'static>>())
        }
    }
    .unwrap_or(Value::Null);
    tidy(&mut value, kind == SchemaKind::Results);
    value
}

/// The schema as the text `construe schema` prints and `schemas/` holds.
pub fn schema_text(kind: SchemaKind) -> String {
    crate::report::pretty(&schema(kind))
}

/// Descriptions read as prose (a doc comment's line breaks inside a paragraph become spaces);
/// in results.json, where serde_json writes a non-finite number as `null`, every number may be
/// `null`.
fn tidy(value: &mut Value, nullable_numbers: bool) {
    match value {
        Value::Object(map) => {
            if let Some(Value::String(text)) = map.get_mut("description") {
                *text = unwrap_paragraphs(text);
            }
            if nullable_numbers && map.get("type") == Some(&Value::String("number".into())) {
                map.insert("type".into(), serde_json::json!(["number", "null"]));
            }
            for v in map.values_mut() {
                tidy(v, nullable_numbers);
            }
        }
        Value::Array(items) => {
            for v in items {
                tidy(v, nullable_numbers);
            }
        }
        _ => {}
    }
}

fn unwrap_paragraphs(text: &str) -> String {
    text.split("\n\n")
        .map(|p| p.split('\n').map(str::trim).collect::<Vec<_>>().join(" "))
        .collect::<Vec<_>>()
        .join("\n\n")
}

#[cfg(test)]
mod tests {
    use super::*;

    /// `schemas/` must hold what the code generates; regenerate with
    /// `CONSTRUE_BLESS=1 cargo test --lib committed_schemas_are_current`.
    #[test]
    fn committed_schemas_are_current() {
        let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
        let mut stale = Vec::new();
        for kind in [SchemaKind::Spec, SchemaKind::Results] {
            let path = root.join(kind.committed_path());
            let fresh = schema_text(kind);
            if std::env::var_os("CONSTRUE_BLESS").is_some() {
                std::fs::create_dir_all(path.parent().unwrap()).unwrap();
                std::fs::write(&path, &fresh).unwrap();
                continue;
            }
            if std::fs::read_to_string(&path).ok().as_deref() != Some(fresh.as_str()) {
                stale.push(kind.committed_path());
            }
        }
        assert!(
            stale.is_empty(),
            "{stale:?} differ from the schemas the code generates; regenerate them with\n  \
             CONSTRUE_BLESS=1 cargo test --lib committed_schemas_are_current\n\
             (or `construe schema spec > schemas/spec.schema.json`, `construe schema results > \
             schemas/results.schema.json`) and list any change of results.json's shape in CHANGELOG.md"
        );
    }

    #[test]
    fn the_spec_schema_refuses_unknown_keys_and_states_bounds() {
        let s = schema(SchemaKind::Spec);
        assert_eq!(s["$schema"], "https://json-schema.org/draft/2020-12/schema");
        assert_eq!(s["additionalProperties"], false);
        assert_eq!(s["$defs"]["PurifySpec"]["additionalProperties"], false);
        let min_items = &s["$defs"]["PurifySpec"]["properties"]["min_items"];
        assert_eq!(min_items["minimum"], 3);
        assert_eq!(min_items["maximum"], crate::spec::validate::MAX_MIN_ITEMS);
        assert_eq!(s["$defs"]["PurifySpec"]["properties"]["alpha"]["exclusiveMaximum"], 1.0);
        assert_eq!(s["$defs"]["TetradTest"]["oneOf"][0]["const"], "auto");
        // Descriptions come from the doc comments.
        assert!(s["properties"]["title"]["description"].as_str().unwrap().contains("report folder"));
    }

    #[test]
    fn the_results_schema_requires_the_format_version() {
        let s = schema(SchemaKind::Results);
        assert!(s["required"].as_array().unwrap().contains(&"results_format".into()));
        assert_eq!(s["properties"]["measure"]["anyOf"], Value::Null, "an absent analysis is left out, not null");
    }
}
