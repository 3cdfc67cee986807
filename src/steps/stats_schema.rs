//! JSON Schemas of the numerics crate's types that results.json serializes (`FitIndices`,
//! `EdgeKind`). `construe-stats` stays free of schema crates, so these mirrors stand in for
//! them (`#[schemars(with = ...)]` on the fields); a test checks that each mirror has exactly
//! the fields and words its original serializes to.

use schemars::JsonSchema;

/// Global fit statistics of one maximum likelihood fit.
#[derive(JsonSchema)]
#[schemars(rename = "FitIndices")]
#[allow(dead_code)]
pub struct FitIndicesSchema {
    /// Likelihood-ratio chi-square statistic, (n - 1) times the minimum of the fit function.
    chisq: f64,
    /// Degrees of freedom: p(p + 1)/2 minus the number of free parameters.
    df: usize,
    /// Upper-tail chi-square probability of `chisq` on `df` (1 when df = 0).
    p: f64,
    /// Root mean square error of approximation (0 when df = 0).
    rmsea: f64,
    /// 90% confidence interval of the RMSEA, `[lower, upper]`.
    rmsea_ci: (f64, f64),
    /// Comparative fit index.
    cfi: f64,
    /// Tucker-Lewis index.
    tli: f64,
    /// Standardized root mean square residual.
    srmr: f64,
}

/// Whether an edge is oriented: `directed` (from -> to) or `undirected` (the data and the
/// knowledge leave the orientation open).
#[derive(JsonSchema)]
#[schemars(rename = "EdgeKind", rename_all = "lowercase")]
#[allow(dead_code)]
pub enum EdgeKindSchema {
    Undirected,
    Directed,
}

#[cfg(test)]
mod tests {
    use super::*;
    use construe_stats::search::EdgeKind;
    use construe_stats::sem::FitIndices;
    use serde_json::Value;

    fn schema_of<T: JsonSchema>() -> Value {
        serde_json::to_value(schemars::SchemaGenerator::default().into_root_schema_for::<T>()).unwrap()
    }

    #[test]
    fn fit_indices_mirror_has_the_serialized_fields() {
        let fit = FitIndices {
            chisq: 1.0,
            df: 2,
            p_value: 0.5,
            rmsea: 0.0,
            rmsea_ci: (0.0, 0.1),
            cfi: 1.0,
            tli: 1.0,
            srmr: 0.01,
        };
        let written: Vec<String> = serde_json::to_value(&fit).unwrap().as_object().unwrap().keys().cloned().collect();
        let schema = schema_of::<FitIndicesSchema>();
        let described: Vec<String> = schema["properties"].as_object().unwrap().keys().cloned().collect();
        assert_eq!(written, described);
        let required: Vec<String> =
            schema["required"].as_array().unwrap().iter().map(|v| v.as_str().unwrap().to_string()).collect();
        assert_eq!(written, required);
    }

    #[test]
    fn edge_kind_mirror_has_the_serialized_words() {
        let words: Vec<Value> =
            [EdgeKind::Undirected, EdgeKind::Directed].iter().map(|k| serde_json::to_value(k).unwrap()).collect();
        assert_eq!(schema_of::<EdgeKindSchema>()["enum"], Value::Array(words));
    }
}
