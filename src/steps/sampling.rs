//! The sampling covariance of the covariance step's moments, rebuilt on demand from the load
//! table's columns and the covariance artifact (never stored: at 500 items the full matrix
//! has 125,000² entries). Central function: `sampling_covariance`; later tests and fits ask the
//! returned `SamplingCovariance` for the blocks or sandwiches they need.
//!
//! The correlations are the artifact's (not refitted); thresholds and means are recomputed from
//! each pair's complete rows (cheap, deterministic). For a smoothed matrix the sampling
//! covariance is that of the estimates before smoothing (`CovarianceOutput::unsmoothed`) and
//! applies to the smoothed matrix only approximately (`SMOOTHED_NOTE`).

use construe_stats::acov::{Contributions, NormalTheory, SamplingCovariance};
use construe_stats::mixed::MixedCorrelation;
use nalgebra::DMatrix;

use super::StepError;
use super::covariance::{CovarianceOutput, complete_rows, estimator_columns, masked_values};
use super::load::{ItemKind, LoadOutput};
use crate::spec::types::{MatrixKind, OrdinalEstimation};

/// Which moments the sampling covariance is for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Moments {
    /// The correlations (elements j < l).
    Correlations,
    /// The covariances and variances (elements j <= l): all-continuous data or a summary
    /// covariance matrix only.
    Covariances,
}

/// Which sampling theory.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Theory {
    /// Normal theory from the matrix and n (the smallest pairwise n): continuous items or a
    /// summary matrix only.
    Normal,
    /// From each respondent's contribution (Browne 1984 for product moments; Muthén 1984,
    /// Jöreskog 1994 for polychoric and polyserial correlations): needs the rows; the only valid
    /// theory for ordinal items.
    DistributionFree,
}

/// results.json's `covariance.sampling_note` for a smoothed matrix.
pub const SMOOTHED_NOTE: &str = "the sampling covariance is that of the correlations as estimated, before smoothing; \
     it applies to the smoothed matrix approximately";

/// Which sampling covariance the covariance step's moments have, in words (results.json's
/// `covariance.sampling`).
pub fn available(summary: bool, kinds: &[ItemKind], ordinal: OrdinalEstimation) -> &'static str {
    let continuous = kinds.iter().all(|k| *k == ItemKind::Continuous);
    match (summary, continuous, ordinal) {
        (true, _, _) => "normal theory from the summary matrix",
        (false, true, _) => {
            "distribution-free from respondents' contributions; normal theory also applies to these continuous items"
        }
        (false, false, OrdinalEstimation::TwoStep) => "distribution-free from respondents' contributions",
        (false, false, OrdinalEstimation::Full) => {
            "none for ordinal items estimated jointly with their thresholds (ordinal: full); the two-step estimator has one"
        }
    }
}

fn unavailable(what: &'static str, reason: &'static str, hint: &'static str) -> StepError {
    StepError::SamplingUnavailable { what, reason, hint }
}

/// The sampling covariance of the covariance step's `moments` under `theory`.
///
/// Valid combinations: `Normal` for a summary matrix or all-continuous rows (n = the smallest
/// pairwise n); `DistributionFree` for rows (correlations of any item types with the two-step
/// ordinal estimator; covariances of all-continuous items), with the artifact's missing-data
/// rule (listwise rows masked as the covariance step masked them). `Covariances` of a summary
/// correlation matrix or of data with ordinal items, normal theory for ordinal items,
/// distribution-free theory for a summary matrix and distribution-free correlations after the
/// joint (`full`) ordinal estimator are `StepError::SamplingUnavailable` with a hint.
pub fn sampling_covariance(
    load: &LoadOutput,
    cov: &CovarianceOutput,
    moments: Moments,
    theory: Theory,
) -> Result<Box<dyn SamplingCovariance>, StepError> {
    let stats = |context: &str| {
        let context = context.to_string();
        move |source| StepError::Stats { context, source }
    };
    let kinds = load.item_kinds();
    let continuous = kinds.iter().all(|k| *k == ItemKind::Continuous);
    if let Some(m) = &load.matrix {
        if theory == Theory::DistributionFree {
            return Err(unavailable(
                "a distribution-free sampling covariance",
                "the data are a summary matrix, without respondents' rows",
                "use the normal-theory sampling covariance, or load the respondent-level data",
            ));
        }
        return match moments {
            Moments::Correlations => Ok(Box::new(
                NormalTheory::correlations(&cov.correlation_matrix(), m.n)
                    .map_err(stats("normal-theory sampling covariance"))?,
            )),
            Moments::Covariances if m.kind == MatrixKind::Covariance => Ok(Box::new(
                NormalTheory::covariances(&cov.covariance_matrix(), m.n)
                    .map_err(stats("normal-theory sampling covariance"))?,
            )),
            Moments::Covariances => Err(unavailable(
                "a sampling covariance of covariances",
                "the summary matrix holds correlations",
                "use the correlations' sampling covariance, or load a covariance matrix",
            )),
        };
    }
    let Some(table) = &load.table else {
        return Err(StepError::MissingInput { step: super::StepKind::Covariance, needs: super::StepKind::Load });
    };
    if moments == Moments::Covariances && !continuous {
        return Err(unavailable(
            "a sampling covariance of covariances",
            "some items are ordinal, so their covariances are rescaled polychoric or polyserial correlations",
            "use the correlations' sampling covariance",
        ));
    }
    if let Some(record) = &cov.missing_data {
        return fiml_sampling(load, table, cov, record, moments, theory, continuous);
    }
    match theory {
        Theory::Normal if !continuous => Err(unavailable(
            "a normal-theory sampling covariance",
            "normal theory does not hold for polychoric and polyserial correlations of ordinal items",
            "use the distribution-free sampling covariance",
        )),
        Theory::Normal => {
            let n = cov.min_n();
            let built = match moments {
                Moments::Correlations => NormalTheory::correlations(&cov.correlation_matrix(), n),
                Moments::Covariances => NormalTheory::covariances(&cov.covariance_matrix(), n),
            };
            Ok(Box::new(built.map_err(stats("normal-theory sampling covariance"))?))
        }
        Theory::DistributionFree => {
            let complete = complete_rows(table, cov.missing);
            if moments == Moments::Covariances {
                let values: Vec<_> =
                    (0..table.items.len()).map(|k| masked_values(table, k, complete.as_deref())).collect();
                let views: Vec<&[f64]> = values.iter().map(AsRef::as_ref).collect();
                return Ok(Box::new(
                    Contributions::covariances(&views).map_err(stats("distribution-free sampling covariance"))?,
                ));
            }
            if !continuous && cov.ordinal == OrdinalEstimation::Full {
                return Err(unavailable(
                    "a distribution-free sampling covariance",
                    "ordinal correlations estimated jointly with their thresholds (ordinal: full) have no respondent contributions here",
                    "set the covariance step's `ordinal: two_step` (the default)",
                ));
            }
            let columns = estimator_columns(load, table, complete.as_deref());
            let matrix = cov.unsmoothed.as_ref().map_or_else(|| cov.correlation_matrix(), |m| to_matrix(m));
            let p = cov.items.len();
            let estimate =
                MixedCorrelation { matrix, n: DMatrix::from_fn(p, p, |r, c| cov.n[r][c]), pairs: Vec::new() };
            let built = Contributions::correlations(&columns, &estimate).map_err(|source| StepError::Stats {
                context: match &source {
                    construe_stats::StatsError::Pair { first, second, .. } => format!(
                        "the sampling covariance of the correlation of `{}` and `{}`",
                        cov.items.get(*first).map_or("?", String::as_str),
                        cov.items.get(*second).map_or("?", String::as_str)
                    ),
                    _ => "distribution-free sampling covariance".into(),
                },
                source,
            })?;
            Ok(Box::new(built))
        }
    }
}

/// `missing: fiml`: the two-stage sampling covariance of the EM estimates (continuous items;
/// normal theory = the inverse observed information, distribution-free = its sandwich), or
/// Rubin's rules over the completed data sets (ordinal and mixed items).
fn fiml_sampling(
    load: &LoadOutput,
    table: &crate::data::Table,
    cov: &CovarianceOutput,
    record: &super::missing_data::MissingData,
    moments: Moments,
    theory: Theory,
    continuous: bool,
) -> Result<Box<dyn SamplingCovariance>, StepError> {
    if continuous {
        let two = super::missing_data::two_stage(
            table,
            record,
            &cov.covariance_matrix(),
            theory == Theory::DistributionFree,
            moments == Moments::Correlations,
        )?;
        return Ok(Box::new(two));
    }
    if theory == Theory::Normal {
        return Err(unavailable(
            "a normal-theory sampling covariance",
            "normal theory does not hold for polychoric and polyserial correlations of ordinal items",
            "use the distribution-free sampling covariance",
        ));
    }
    let fit = match cov.ordinal {
        OrdinalEstimation::TwoStep => construe_stats::polychoric::OrdinalFit::TwoStep,
        OrdinalEstimation::Full => construe_stats::polychoric::OrdinalFit::Full,
    };
    let columns = estimator_columns(load, table, None);
    Ok(Box::new(super::missing_data::pool(&columns, &record.imputed, fit)?))
}

fn to_matrix(rows: &[Vec<f64>]) -> DMatrix<f64> {
    let p = rows.len();
    DMatrix::from_fn(p, p, |r, c| rows[r][c])
}

#[cfg(test)]
mod tests {
    use std::collections::BTreeMap;

    use construe_stats::acov::all_elements;
    use construe_stats::mixed::{self, Column as StatsColumn};
    use construe_stats::polychoric::OrdinalFit;

    use super::*;
    use crate::data::Table;
    use crate::data::table::Column;
    use crate::pipeline::chain::NoProgress;
    use crate::spec::types::{CovarianceSpec, Missing};
    use crate::steps::covariance::CovarianceStep;
    use crate::steps::load::{DataSummary, ItemSummary, SummaryMatrix};
    use crate::steps::{Artifact, Inputs, Step, StepKind};

    /// A load artifact of `columns` (one-factor data from the stats testkit: continuous first,
    /// then 5-category ordinal items coded 1..5).
    fn load_of(columns: &[StatsColumn<'_>]) -> LoadOutput {
        let levels: Vec<f64> = (1..=5).map(f64::from).collect();
        let mut items = Vec::new();
        let mut table_columns = Vec::new();
        for (k, c) in columns.iter().enumerate() {
            let (kind, col, categories) = match c {
                StatsColumn::Continuous(v) => (ItemKind::Continuous, Column::Values(v.to_vec()), None),
                StatsColumn::Ordinal { codes, .. } => (
                    ItemKind::Ordinal,
                    Column::Codes { levels: levels.clone(), codes: codes.to_vec() },
                    Some(levels.clone()),
                ),
            };
            items.push(ItemSummary {
                name: format!("q{k}"),
                construct: "c".into(),
                kind,
                n: 0,
                missing: 0,
                levels: 5,
                categories,
                mean: None,
                sd: None,
                p5: None,
                p95: None,
                responses: None,
                reversed: false,
            });
            table_columns.push(col);
        }
        let rows = table_columns[0].len();
        let table = Table {
            items: items.iter().map(|i| i.name.clone()).collect(),
            waves: vec!["w".into()],
            wave_of_row: vec![0; rows],
            columns: table_columns,
        };
        LoadOutput {
            summary: DataSummary { source: "waves".into(), waves: Vec::new(), rows, items },
            table: Some(table),
            matrix: None,
        }
    }

    fn covariance_of(load: &LoadOutput, missing: Missing) -> CovarianceOutput {
        let mut artifacts = BTreeMap::new();
        artifacts.insert(StepKind::Load, Artifact::Load(Box::new(load.clone())));
        let inputs = Inputs { step: StepKind::Covariance, artifacts: &artifacts, progress: &NoProgress };
        let step = CovarianceStep::from_spec(&CovarianceSpec { missing, ..Default::default() });
        match step.run(&inputs).unwrap() {
            Artifact::Covariance(c) => *c,
            _ => unreachable!(),
        }
    }

    // The step-level accessor gives exactly what the stats crate gives for the same columns
    // and estimates; the combinations that do not hold are typed errors with a hint.
    #[test]
    fn mixed_items_get_the_distribution_free_correlations_only() {
        let columns = construe_stats::testkit::one_factor_columns(400, 5, 2, 0.05, 21);
        let load = load_of(&columns);
        let cov = covariance_of(&load, Missing::Pairwise);
        assert_eq!(cov.sampling, "distribution-free from respondents' contributions");
        let v = sampling_covariance(&load, &cov, Moments::Correlations, Theory::DistributionFree).unwrap();
        let est = mixed::mixed_correlation(&columns, OrdinalFit::TwoStep).unwrap();
        let direct = Contributions::correlations(&columns, &est).unwrap();
        let elements = all_elements(5, true);
        assert_eq!(v.block(&elements).unwrap(), direct.block(&elements).unwrap());
        assert_eq!((v.n_obs(), v.rows(), v.is_correlation()), (direct.n_obs(), Some(400), true));
        for (moments, theory) in [
            (Moments::Correlations, Theory::Normal),
            (Moments::Covariances, Theory::DistributionFree),
            (Moments::Covariances, Theory::Normal),
        ] {
            let err = sampling_covariance(&load, &cov, moments, theory).unwrap_err();
            assert!(matches!(err, StepError::SamplingUnavailable { .. }), "{err}");
        }
        let full = CovarianceOutput { ordinal: OrdinalEstimation::Full, ..cov.clone() };
        let err = sampling_covariance(&load, &full, Moments::Correlations, Theory::DistributionFree).unwrap_err();
        assert!(err.is_input_problem());
        let StepError::SamplingUnavailable { hint, .. } = err else { panic!("{err}") };
        assert!(hint.contains("two_step"));
    }

    // Continuous items: both theories, covariances too; listwise deletion masks the rows the
    // covariance step used (a row missing any item contributes nothing).
    #[test]
    fn continuous_items_get_both_theories_with_the_missing_rule() {
        let columns = construe_stats::testkit::one_factor_columns(300, 3, 3, 0.1, 4);
        let load = load_of(&columns);
        let cov = covariance_of(&load, Missing::Listwise);
        assert!(cov.sampling.starts_with("distribution-free") && cov.sampling.contains("normal theory also"));
        let elements = all_elements(3, false);
        let df = sampling_covariance(&load, &cov, Moments::Covariances, Theory::DistributionFree).unwrap();
        let values: Vec<Vec<f64>> = columns
            .iter()
            .map(|c| match c {
                StatsColumn::Continuous(v) => v.to_vec(),
                StatsColumn::Ordinal { .. } => unreachable!(),
            })
            .collect();
        let complete: Vec<bool> = (0..300).map(|r| values.iter().all(|v| !v[r].is_nan())).collect();
        let masked: Vec<Vec<f64>> = values
            .iter()
            .map(|v| v.iter().zip(&complete).map(|(x, &c)| if c { *x } else { f64::NAN }).collect())
            .collect();
        let views: Vec<&[f64]> = masked.iter().map(Vec::as_slice).collect();
        let direct = Contributions::covariances(&views).unwrap();
        assert_eq!(df.block(&elements).unwrap(), direct.block(&elements).unwrap());
        assert_eq!(df.n_obs(), complete.iter().filter(|&&c| c).count());
        let nt = sampling_covariance(&load, &cov, Moments::Covariances, Theory::Normal).unwrap();
        let s = cov.covariance_matrix();
        let n = cov.min_n() as f64;
        let b = nt.block(&[(0, 1), (1, 1)]).unwrap();
        assert!((b[(0, 1)] - 2.0 * s[(0, 1)] * s[(1, 1)] / n).abs() < 1e-15);
        // The two theories agree roughly on normal rows.
        let d = df.block(&[(0, 1)]).unwrap()[(0, 0)];
        assert!((d / b[(0, 0)] - 1.0).abs() < 0.3, "{d} vs {}", b[(0, 0)]);
        let r = sampling_covariance(&load, &cov, Moments::Correlations, Theory::Normal).unwrap();
        assert!(r.is_correlation() && r.rows().is_none());
    }

    // A smoothed matrix keeps its estimates: the sampling covariance belongs to them (the
    // artifact's `unsmoothed`), and results say it applies approximately. Three continuous
    // items seen in disjoint pairs of row blocks, correlated +0.9, +0.9 and -0.9: not positive
    // definite, so the step smooths.
    #[test]
    fn a_smoothed_matrix_keeps_the_sampling_covariance_of_its_estimates() {
        let mut rng = construe_stats::testkit::seeded(8);
        let sigma = |r: f64| DMatrix::from_row_slice(2, 2, &[1.0, r, r, 1.0]);
        let mut cols = vec![vec![f64::NAN; 300]; 3];
        for (block, (a, b, r)) in [(0, 1, 0.9), (1, 2, 0.9), (0, 2, -0.9)].into_iter().enumerate() {
            let draws = construe_stats::testkit::draw_normal(&sigma(r), 100, &mut rng);
            for i in 0..100 {
                cols[a][block * 100 + i] = draws[(i, 0)];
                cols[b][block * 100 + i] = draws[(i, 1)];
            }
        }
        let columns: Vec<StatsColumn> = cols.iter().map(|c| StatsColumn::Continuous(c.as_slice().into())).collect();
        let load = load_of(&columns);
        let cov = covariance_of(&load, Missing::Pairwise);
        assert!(cov.smoothed && cov.sampling_note.as_deref() == Some(SMOOTHED_NOTE));
        let unsmoothed = to_matrix(cov.unsmoothed.as_ref().unwrap());
        assert!((unsmoothed - cov.correlation_matrix()).amax() > 0.05);
        let v = sampling_covariance(&load, &cov, Moments::Correlations, Theory::DistributionFree).unwrap();
        let est = mixed::mixed_correlation(&columns, OrdinalFit::TwoStep).unwrap();
        let direct = Contributions::correlations(&columns, &est).unwrap();
        let elements = all_elements(3, true);
        let (got, want) = (v.block(&elements).unwrap(), direct.block(&elements).unwrap());
        assert!((&got - &want).amax() < 1e-12 * want.amax(), "{got} vs {want}");
        assert_eq!(v.n_obs(), 100);
    }

    #[test]
    fn a_summary_matrix_has_normal_theory_only() {
        let values = vec![vec![1.0, 0.4, 0.3], vec![0.4, 1.0, 0.5], vec![0.3, 0.5, 1.0]];
        let mut load = load_of(&construe_stats::testkit::one_factor_columns(10, 3, 3, 0.0, 1));
        load.table = None;
        load.matrix = Some(SummaryMatrix { kind: MatrixKind::Correlation, n: 250, values: values.clone() });
        let mut artifacts = BTreeMap::new();
        artifacts.insert(StepKind::Load, Artifact::Load(Box::new(load.clone())));
        let inputs = Inputs { step: StepKind::Covariance, artifacts: &artifacts, progress: &NoProgress };
        let Artifact::Covariance(cov) = CovarianceStep::from_spec(&CovarianceSpec::default()).run(&inputs).unwrap()
        else {
            unreachable!()
        };
        assert_eq!(cov.sampling, "normal theory from the summary matrix");
        let nt = sampling_covariance(&load, &cov, Moments::Correlations, Theory::Normal).unwrap();
        assert!((nt.block(&[(0, 1)]).unwrap()[(0, 0)] - (1.0_f64 - 0.16).powi(2) / 250.0).abs() < 1e-15);
        for (moments, theory) in
            [(Moments::Correlations, Theory::DistributionFree), (Moments::Covariances, Theory::Normal)]
        {
            assert!(matches!(
                sampling_covariance(&load, &cov, moments, theory),
                Err(StepError::SamplingUnavailable { .. })
            ));
        }
    }
}
