//! Building and fitting the latent-variable model of named constructs: what `measure`,
//! `structure` and `sensitivity`'s refits share. Central function: `fit_constructs`, which
//! resolves item names to covariance rows, fixes single indicators' error variances from their
//! reliability, and calls `construe_stats::sem`. No numerics of its own beyond that assembly.

use nalgebra::DMatrix;

use super::StepError;
use crate::spec::types::Identification;
use construe_stats::StatsError;
use construe_stats::sem::{self, FitOptions, SemFit, SemModel};

pub fn identification(i: Identification) -> sem::Identification {
    match i {
        Identification::UnitVariance => sem::Identification::UnitLatentVariance,
        Identification::FirstLoading => sem::Identification::UnitFirstLoading,
    }
}

/// Fits the CFA of `constructs` on the covariance of the named items; a failing fit is a
/// `StepError::Stats` with `context` ("the measurement model").
pub fn fit_constructs(
    constructs: &[(String, Vec<String>, Option<f64>)],
    all_items: &[String],
    covariance: &DMatrix<f64>,
    n: usize,
    ident: Identification,
    paths: &[(usize, usize)],
    context: &'static str,
) -> Result<(SemFit, Vec<String>), StepError> {
    let observed: Vec<String> = constructs.iter().flat_map(|(_, items, _)| items.iter().cloned()).collect();
    let index: Vec<usize> = observed
        .iter()
        .map(|i| all_items.iter().position(|a| a == i).ok_or_else(|| StepError::ItemNotInMatrix { item: i.clone() }))
        .collect::<Result<_, _>>()?;
    let stats = |source: StatsError| StepError::Stats { context: context.into(), source };
    let s = DMatrix::from_fn(index.len(), index.len(), |r, c| covariance[(index[r], index[c])]);
    let mut offset = 0;
    let groups: Vec<Vec<usize>> = constructs
        .iter()
        .map(|(_, items, _)| {
            let g = (offset..offset + items.len()).collect();
            offset += items.len();
            g
        })
        .collect();
    let names: Vec<String> = constructs.iter().map(|(n, _, _)| n.clone()).collect();
    let mut model = if paths.is_empty() {
        SemModel::cfa(&groups, index.len(), identification(ident))
    } else {
        SemModel::sem(&groups, index.len(), identification(ident), paths)
    }
    .map_err(stats)?;
    for ((name, _, reliability), g) in constructs.iter().zip(&groups) {
        match (reliability, g.as_slice()) {
            (Some(r), [single]) => {
                model.fix_error_variance(*single, (1.0 - r) * s[(*single, *single)]);
            }
            (None, [_]) => return Err(StepError::NoReliability { construct: name.clone() }),
            _ => {}
        }
    }
    let model = model.with_names(observed.clone(), names).map_err(stats)?;
    let fit = model.fit(&s, n, &FitOptions::default()).map_err(stats)?;
    Ok((fit, observed))
}

#[cfg(test)]
mod tests {
    use super::*;

    // The two model problems a step can meet before any numerics are typed and name the item
    // or construct.
    #[test]
    fn model_problems_name_the_item_or_construct() {
        let items: Vec<String> = ["a", "b", "c"].map(String::from).to_vec();
        let s = DMatrix::<f64>::identity(3, 3);
        let missing = vec![("f".to_string(), vec!["a".to_string(), "b".to_string(), "q".to_string()], None)];
        let e = fit_constructs(&missing, &items, &s, 100, Identification::UnitVariance, &[], "the model").unwrap_err();
        assert!(matches!(&e, StepError::ItemNotInMatrix { item } if item == "q"), "{e:?}");
        let single = vec![("g".to_string(), vec!["c".to_string()], None)];
        let e = fit_constructs(&single, &items, &s, 100, Identification::UnitVariance, &[], "the model").unwrap_err();
        assert!(matches!(&e, StepError::NoReliability { construct } if construct == "g"), "{e:?}");
        assert_eq!(e.to_string(), "construct `g` has one item and no reliability");
    }
}
