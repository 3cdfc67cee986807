//! Each group's sample statistics for the threshold model: every item's thresholds, the
//! polychoric correlations, and the joint sampling covariance of both, from respondents'
//! contributions. Central type: `GroupStatistics`. Categories are merged the same way in
//! every group (a category some group never used joins its neighbour everywhere), so that
//! thresholds can be compared across groups.

use std::borrow::Cow;

use nalgebra::{DMatrix, DVector};

use crate::StatsError;
use crate::acov::{Contributions, Element, SamplingCovariance};
use crate::bvn::norm_pdf;
use crate::mixed::{Column, MISSING_CODE, mixed_correlation};
use crate::polychoric::{OrdinalFit, thresholds_from_counts};

/// Rows per chunk when the contributions are summed.
const CHUNK_ROWS: usize = 4096;

/// One group's answers: one column per item (the same items in the same order in every
/// group), zero-based category codes below the item's number of categories, `MISSING_CODE`
/// for a missing answer.
#[derive(Debug, Clone, PartialEq)]
pub struct GroupData<'a> {
    pub items: Vec<Cow<'a, [u8]>>,
}

/// A category no respondent of some group chose, merged into a neighbour in every group.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CategoryMerge {
    pub item: usize,
    /// The original code.
    pub empty: usize,
    /// The original code it was merged into.
    pub into: usize,
}

/// A group's statistics vector (thresholds item by item, then the polychoric correlations
/// j < l row-major) and its sampling covariance (of the estimates: already divided by n).
#[derive(Debug, Clone, PartialEq)]
pub struct GroupStatistics {
    pub n: usize,
    pub values: DVector<f64>,
    pub acov: DMatrix<f64>,
}

/// Per item: old code -> merged category, the number of merged categories; and the merges.
pub(super) type Merged = (Vec<Vec<u8>>, Vec<usize>, Vec<CategoryMerge>);

/// Per item, the old code -> merged category table and the number of merged categories, with
/// the merges: categories empty in some group go to the next kept category above (or the last
/// kept one below, for the top).
pub(super) fn merge_categories(groups: &[GroupData<'_>], levels: &[usize]) -> Result<Merged, StatsError> {
    let p = levels.len();
    let mut tables = Vec::with_capacity(p);
    let mut counts_out = Vec::with_capacity(p);
    let mut merges = Vec::new();
    for (j, &k) in levels.iter().enumerate() {
        let mut used = vec![true; k];
        for group in groups {
            let mut counts = vec![0_usize; k];
            for &c in group.items[j].iter() {
                if c != MISSING_CODE {
                    if c as usize >= k {
                        return Err(StatsError::InvalidInput(format!("item {j}: code {c} outside {k} categories")));
                    }
                    counts[c as usize] += 1;
                }
            }
            for (u, &n) in used.iter_mut().zip(&counts) {
                *u &= n > 0;
            }
        }
        let keep: Vec<usize> = (0..k).filter(|&c| used[c]).collect();
        if keep.len() < 2 {
            return Err(StatsError::Constant {
                what: format!("item {j} (fewer than 2 categories used in every group)"),
            });
        }
        let mut table = vec![0_u8; k];
        for (c, slot) in table.iter_mut().enumerate() {
            let into = keep.iter().copied().find(|&x| x >= c).or_else(|| keep.last().copied()).unwrap_or(c);
            if into != c {
                merges.push(CategoryMerge { item: j, empty: c, into });
            }
            let rank = keep.iter().position(|&x| x == into).unwrap_or(0);
            *slot = u8::try_from(rank).unwrap_or(u8::MAX - 1);
        }
        tables.push(table);
        counts_out.push(keep.len());
    }
    Ok((tables, counts_out, merges))
}

impl GroupStatistics {
    /// From one group's codes, already merged (`categories[j]` categories each, all used).
    /// Thresholds τ_jc = Φ⁻¹(proportion below category c) on the item's non-missing rows
    /// (Olsson 1979, eq. 6); polychoric correlations by the two-step estimator on each pair's
    /// complete rows (`mixed::mixed_correlation`); the sampling covariance of all of them is
    /// Σ_i c_i c_i' over respondents, with a threshold's contribution
    /// c_i = (1[category_i < c] - F_c) / (φ(τ_c) n_j) (the influence function of a normal
    /// quantile of a proportion) and a correlation's from `acov::Contributions` (thresholds'
    /// estimation accounted for; Muthén 1984, Jöreskog 1994).
    pub fn from_codes(items: &[Vec<u8>], categories: &[usize]) -> Result<Self, StatsError> {
        let p = items.len();
        let rows = items.first().map_or(0, Vec::len);
        let mut thresholds = Vec::with_capacity(p);
        let mut props = Vec::with_capacity(p);
        let mut n_item = Vec::with_capacity(p);
        for (j, codes) in items.iter().enumerate() {
            let mut counts = vec![0_u64; categories[j]];
            for &c in codes {
                if c != MISSING_CODE {
                    counts[c as usize] += 1;
                }
            }
            let n: u64 = counts.iter().sum();
            if n < 3 {
                return Err(StatsError::NotEnoughData { what: format!("item {j}"), needed: 3, found: n as usize });
            }
            let mut cum = 0;
            props.push(
                counts[..counts.len() - 1]
                    .iter()
                    .map(|&c| {
                        cum += c;
                        cum as f64 / n as f64
                    })
                    .collect::<Vec<f64>>(),
            );
            thresholds.push(thresholds_from_counts(&counts));
            n_item.push(n as f64);
        }
        let columns: Vec<Column<'_>> = items
            .iter()
            .zip(categories)
            .map(|(c, &levels)| Column::Ordinal { codes: Cow::Borrowed(c.as_slice()), levels })
            .collect();
        let estimate = mixed_correlation(&columns, OrdinalFit::TwoStep)?;
        let contributions = Contributions::correlations(&columns, &estimate)?;
        let pairs: Vec<Element> = (0..p).flat_map(|j| (j + 1..p).map(move |l| (j, l))).collect();
        let n_tau: usize = thresholds.iter().map(Vec::len).sum();
        let k = n_tau + pairs.len();
        let mut values = DVector::zeros(k);
        let mut at = 0;
        for t in &thresholds {
            for &v in t {
                values[at] = v;
                at += 1;
            }
        }
        for &(j, l) in &pairs {
            values[at] = estimate.matrix[(j, l)];
            at += 1;
        }
        let mut acov = DMatrix::zeros(k, k);
        let mut start = 0;
        while start < rows {
            let end = (start + CHUNK_ROWS).min(rows);
            let mut c = DMatrix::zeros(end - start, k);
            let mut col = 0;
            for (j, codes) in items.iter().enumerate() {
                for (t, (&tau, &f)) in thresholds[j].iter().zip(&props[j]).enumerate() {
                    let scale = 1.0 / (norm_pdf(tau) * n_item[j]);
                    for (r, &code) in codes[start..end].iter().enumerate() {
                        if code != MISSING_CODE {
                            let below = if (code as usize) <= t { 1.0 } else { 0.0 };
                            c[(r, col)] = (below - f) * scale;
                        }
                    }
                    col += 1;
                }
            }
            if let Some(pc) = contributions.contributions(&pairs, start..end)? {
                c.view_mut((0, n_tau), (end - start, pairs.len())).copy_from(&pc);
            }
            acov += c.transpose() * &c;
            start = end;
        }
        let acov = DMatrix::from_fn(k, k, |a, b| if a <= b { acov[(a, b)] } else { acov[(b, a)] });
        Ok(GroupStatistics { n: rows, values, acov })
    }
}
