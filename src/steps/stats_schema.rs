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
/// knowledge leave the orientation open); with `search: fci` also `bidirected` (from <-> to:
/// a hidden common cause, neither causes the other), `partially_directed` (from o-> to: to
/// does not cause from) and `nondirected` (from o-o to: nothing settled).
#[derive(JsonSchema)]
#[schemars(rename = "EdgeKind", rename_all = "snake_case")]
#[allow(dead_code)]
pub enum EdgeKindSchema {
    Undirected,
    Directed,
    Bidirected,
    PartiallyDirected,
    Nondirected,
}

/// The mark at one end of an edge of a partial ancestral graph (`search: fci`): `tail` (this
/// end causes the other), `arrow` (this end does not cause the other), `circle` (undetermined).
#[derive(JsonSchema)]
#[schemars(rename = "Mark", rename_all = "lowercase")]
#[allow(dead_code)]
pub enum MarkSchema {
    Tail,
    Circle,
    Arrow,
}

/// How the test statistic was corrected: `none` (the normal-theory likelihood-ratio
/// statistic), `scaled` (Satorra & Bentler 1994), `scaled_shifted` (mean-and-variance adjusted,
/// Asparouhov & Muthén 2010).
#[derive(JsonSchema)]
#[schemars(rename = "StatisticCorrection", rename_all = "snake_case")]
#[allow(dead_code)]
pub enum StatisticCorrectionSchema {
    None,
    Scaled,
    ScaledShifted,
}

/// The naive statistic and how it became the one the fit indices use.
#[derive(JsonSchema)]
#[schemars(rename = "Correction")]
#[allow(dead_code)]
pub struct CorrectionSchema {
    /// Which correction.
    kind: StatisticCorrectionSchema,
    /// The uncorrected statistic T.
    naive: f64,
    /// tr(U Gamma): the statistic's asymptotic mean under the model.
    trace: f64,
    /// tr((U Gamma)^2): half its asymptotic variance (null where not needed).
    trace_squared: Option<f64>,
    /// a of corrected = max(a T + b, 0).
    scale: f64,
    /// b of corrected = max(a T + b, 0).
    shift: f64,
    /// The independence baseline's naive statistic (robust CFI, TLI).
    baseline_naive: f64,
    /// tr(U_B Gamma) of the independence baseline.
    baseline_trace: f64,
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
        let words: Vec<Value> = [
            EdgeKind::Undirected,
            EdgeKind::Directed,
            EdgeKind::Bidirected,
            EdgeKind::PartiallyDirected,
            EdgeKind::Nondirected,
        ]
        .iter()
        .map(|k| serde_json::to_value(k).unwrap())
        .collect();
        assert_eq!(schema_of::<EdgeKindSchema>()["enum"], Value::Array(words));
        use construe_stats::search::Mark;
        let marks: Vec<Value> =
            [Mark::Tail, Mark::Circle, Mark::Arrow].iter().map(|k| serde_json::to_value(k).unwrap()).collect();
        assert_eq!(schema_of::<MarkSchema>()["enum"], Value::Array(marks));
    }

    #[test]
    fn correction_mirrors_have_the_serialized_fields_and_words() {
        use construe_stats::sem::robust::{Correction, StatisticCorrection};
        let kinds = [StatisticCorrection::None, StatisticCorrection::Scaled, StatisticCorrection::ScaledShifted];
        let words: Vec<Value> = kinds.iter().map(|k| serde_json::to_value(k).unwrap()).collect();
        assert_eq!(schema_of::<StatisticCorrectionSchema>()["enum"], Value::Array(words));
        let c = Correction {
            kind: StatisticCorrection::Scaled,
            naive: 1.0,
            trace: 1.0,
            trace_squared: Some(1.0),
            scale: 1.0,
            shift: 0.0,
            baseline_naive: 1.0,
            baseline_trace: 1.0,
        };
        let written: Vec<String> = serde_json::to_value(&c).unwrap().as_object().unwrap().keys().cloned().collect();
        let described: Vec<String> =
            schema_of::<CorrectionSchema>()["properties"].as_object().unwrap().keys().cloned().collect();
        assert_eq!(written, described);
    }
}
