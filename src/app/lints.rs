//! Lints that need the respondents' values, run on the table `load` produced (missing codes
//! and reverse scoring applied, through the plan and the cache), so there is one loader.
//! Central function: `data_lints`. Values are read one at a time through an accessor, so no
//! column is copied.

use crate::spec::SpecFile;
use crate::spec::positions::{child, element};
use crate::spec::problem::{Finding, SpecProblem};

/// Fewest rows with all values present before two columns are compared.
const MIN_ROWS_FOR_LINT: usize = 10;

/// Most categories for a single indicator to count as coarsened.
const COARSE_LEVELS: usize = 3;

/// Scale scores entered as items and coarsened single indicators. `items` names the table's
/// columns; `value(k, r)` is column `k`'s value in row `r` (NaN when missing).
pub fn data_lints(spec: &SpecFile, items: &[String], rows: usize, value: &dyn Fn(usize, usize) -> f64) -> Vec<Finding> {
    let mut out = coarsened_single_indicators(spec, items, rows, value);
    out.extend(scale_scores(spec, items, rows, value));
    out
}

/// Items that equal the sum or mean of a construct's other items in every complete row: scale
/// scores entered as if they were indicators.
fn scale_scores(spec: &SpecFile, items: &[String], rows: usize, value: &dyn Fn(usize, usize) -> f64) -> Vec<Finding> {
    let mut out = Vec::new();
    for (own, c) in &spec.spec.constructs {
        for (k, item) in c.items.iter().enumerate() {
            let Some(x) = items.iter().position(|n| n == item) else { continue };
            for (construct, spec_c) in &spec.spec.constructs {
                let parts: Vec<usize> = spec_c
                    .items
                    .iter()
                    .filter(|i| *i != item)
                    .filter_map(|i| items.iter().position(|n| n == i))
                    .collect();
                if parts.len() < 2 {
                    continue;
                }
                for how in ["sum", "mean"] {
                    let mut compared = 0;
                    let equal = (0..rows).all(|r| {
                        let target = value(x, r);
                        let mut sum = 0.0;
                        for &p in &parts {
                            sum += value(p, r);
                        }
                        if target.is_nan() || sum.is_nan() {
                            return true;
                        }
                        compared += 1;
                        let want = if how == "sum" { sum } else { sum / parts.len() as f64 };
                        (target - want).abs() <= 1e-6 * (1.0 + want.abs())
                    });
                    if equal && compared >= MIN_ROWS_FOR_LINT {
                        let path = element(&child(&child("constructs", own), "items"), k);
                        out.push(Finding::value(
                            SpecProblem::ScaleScore {
                                item: item.clone(),
                                construct: construct.clone(),
                                how: how.into(),
                            },
                            path,
                        ));
                        break;
                    }
                }
            }
        }
    }
    out
}

/// Single indicators with at most 3 integer categories of constructs that sit between others
/// (a tier with constructs both before and after it).
fn coarsened_single_indicators(
    spec: &SpecFile,
    items: &[String],
    rows: usize,
    value: &dyn Fn(usize, usize) -> f64,
) -> Vec<Finding> {
    let tiers = &spec.spec.knowledge.tiers;
    let mut out = Vec::new();
    for (construct, c) in &spec.spec.constructs {
        let [item] = c.items.as_slice() else { continue };
        let Some(t) = tiers.iter().position(|tier| tier.contains(construct)) else { continue };
        if t == 0 || t + 1 >= tiers.len() {
            continue;
        }
        let Some(k) = items.iter().position(|n| n == item) else { continue };
        let mut levels: Vec<f64> = Vec::new();
        let mut integer = true;
        for r in 0..rows {
            let v = value(k, r);
            if v.is_nan() {
                continue;
            }
            if v.fract() != 0.0 {
                integer = false;
                break;
            }
            if !levels.contains(&v) {
                levels.push(v);
                if levels.len() > COARSE_LEVELS {
                    break;
                }
            }
        }
        if integer && levels.len() <= COARSE_LEVELS {
            let path = element(&child(&child("constructs", construct), "items"), 0);
            out.push(Finding::value(
                SpecProblem::CoarsenedSingleIndicator {
                    construct: construct.clone(),
                    item: item.clone(),
                    levels: levels.len(),
                },
                path,
            ));
        }
    }
    out
}
