//! What `purify` and `discover` share: the tetrad tester the spec's `test` asks for, built on
//! the covariance step's correlation matrix (the matrix that is fitted), and the record of
//! which test ran and why (`TetradMethod`, shown in the report).
//!
//! `auto` (the default) and `delta`: the delta method (Bollen and Ting 1993) on that matrix with
//! the sampling covariance of its correlations, distribution-free from the respondents'
//! contributions (polychoric, polyserial and Pearson pairs alike, pairwise-present data), the
//! theory that holds for ordinal and non-normal items. `auto` on a summary matrix (no rows):
//! the normal-theory sampling covariance of the matrix's correlations at its n. `wishart`:
//! normal theory (Wishart 1928), refused when an item is ordinal.

use std::sync::Arc;

use serde::{Deserialize, Serialize};

use super::covariance::PairMethod;
use super::load::ItemKind;
use super::sampling::{Moments, Theory, sampling_covariance};
use super::{CovarianceOutput, LoadOutput, StepError, StepKind};
use crate::spec::types::TetradTest;
use construe_stats::tetrad::TetradTester;

/// The test that ran.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum TetradTestRun {
    /// The delta method with the sampling covariance of the tested matrix's correlations.
    Delta,
    /// Wishart's (1928) normal-theory variance.
    Wishart,
}

/// The sampling theory behind the test's variances.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum SamplingTheory {
    /// From the respondents' contributions; no distribution assumed for the answers.
    DistributionFree,
    /// Multivariate-normal answers.
    Normal,
}

/// Which tetrad test ran on which matrix, and why (results.json: `purify.method`,
/// `discover.method`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
pub struct TetradMethod {
    /// The test that ran.
    pub test: TetradTestRun,
    /// The sampling theory behind its variances.
    pub theory: SamplingTheory,
    /// The tested matrix, e.g. "polychoric correlations".
    pub matrix: String,
    /// Why this test, e.g. "items are ordinal".
    pub reason: String,
    /// One sentence for the report.
    pub sentence: String,
}

/// The tester `test` asks for, on `cov`'s correlation matrix, with the record of what ran.
/// `involved` (indices into `cov.items`) are the items whose tetrads will be tested: their
/// types decide whether `wishart` is allowed and what `auto`'s reason says.
pub fn tetrad_tester(
    step: StepKind,
    load: &LoadOutput,
    cov: &CovarianceOutput,
    test: TetradTest,
    involved: &[usize],
) -> Result<(TetradTester, TetradMethod), StepError> {
    let matrix = cov.correlation_matrix();
    let stats = |source| StepError::Stats { context: "tetrad tests".into(), source };
    let rows = load.table.is_some();
    let ordinal: Vec<String> = cov
        .items
        .iter()
        .enumerate()
        .filter(|(i, name)| involved.contains(i) && cov.kind.get(*name) == Some(&ItemKind::Ordinal))
        .map(|(_, name)| name.clone())
        .collect();
    let described = describe_matrix(cov, rows, involved);
    if test == TetradTest::Wishart {
        if !ordinal.is_empty() {
            return Err(StepError::NormalTheoryOnOrdinal { step, items: ordinal });
        }
        let tester = TetradTester::wishart(&matrix, cov.min_n()).map_err(stats)?;
        let reason = "requested (`test: wishart`); every item is continuous".to_string();
        let sentence = format!(
            "Tetrads tested by Wishart's (1928) normal-theory variance on the {described} at n = {}, as requested; every item is continuous.",
            tester.n_obs()
        );
        let method = TetradMethod {
            test: TetradTestRun::Wishart,
            theory: SamplingTheory::Normal,
            matrix: described,
            reason,
            sentence,
        };
        return Ok((tester, method));
    }
    let theory = if rows || test == TetradTest::Delta { Theory::DistributionFree } else { Theory::Normal };
    let sampling = sampling_covariance(load, cov, Moments::Correlations, theory)?;
    let tester = TetradTester::with_sampling(&matrix, Arc::from(sampling)).map_err(stats)?;
    let method = match theory {
        Theory::DistributionFree => {
            let reason = if test == TetradTest::Delta {
                "requested (`test: delta`)".to_string()
            } else if ordinal.len() == involved.len() {
                "items are ordinal".to_string()
            } else if !ordinal.is_empty() {
                "some items are ordinal".to_string()
            } else {
                "answers need not be normally distributed".to_string()
            };
            let sentence = format!(
                "Tetrads tested by the delta method (Bollen and Ting 1993) on the {described} with their sampling covariance from the respondents' answers (distribution-free), {}.",
                if test == TetradTest::Delta { "as requested".to_string() } else { format!("because {reason}") }
            );
            TetradMethod {
                test: TetradTestRun::Delta,
                theory: SamplingTheory::DistributionFree,
                matrix: described,
                reason,
                sentence,
            }
        }
        Theory::Normal => {
            let reason = "the input is a summary matrix, which carries no respondents' answers".to_string();
            let sentence = format!(
                "Tetrads tested by the delta method (Bollen and Ting 1993) on the {described} with the normal-theory sampling covariance of its correlations at n = {}, because {reason} to estimate a distribution-free one.",
                tester.n_obs()
            );
            TetradMethod {
                test: TetradTestRun::Delta,
                theory: SamplingTheory::Normal,
                matrix: described,
                reason,
                sentence,
            }
        }
    };
    Ok((tester, method))
}

/// The correlations among the `involved` items: "polychoric correlations", "polychoric,
/// polyserial and Pearson correlations", "summary correlation matrix"; "(smoothed to be
/// positive definite)" when it was.
fn describe_matrix(cov: &CovarianceOutput, rows: bool, involved: &[usize]) -> String {
    let names: Vec<&String> = involved.iter().filter_map(|&i| cov.items.get(i)).collect();
    let used: Vec<PairMethod> = cov
        .method
        .iter()
        .filter(|(pair, _)| names.contains(&&pair.first) && names.contains(&&pair.second))
        .map(|(_, m)| *m)
        .filter(|m| *m != PairMethod::Given)
        .collect();
    let mut text = if rows {
        let mut names: Vec<&str> = Vec::new();
        for (method, name) in [
            (PairMethod::Polychoric, "polychoric"),
            (PairMethod::Polyserial, "polyserial"),
            (PairMethod::Pearson, "Pearson"),
        ] {
            if used.contains(&method) {
                names.push(name);
            }
        }
        match names.as_slice() {
            [] => "correlations".to_string(),
            [one] => format!("{one} correlations"),
            [init @ .., last] => format!("{} and {last} correlations", init.join(", ")),
        }
    } else {
        "summary correlation matrix".to_string()
    };
    if cov.smoothed {
        text.push_str(" (smoothed to be positive definite)");
    }
    text
}
