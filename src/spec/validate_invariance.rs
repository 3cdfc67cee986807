//! Checks of `analyses.invariance` against the spec and its sources' columns: respondent rows,
//! at least two groups, a grouping column every wave has and that is no item or id, a
//! reference group that exists, a significance level in (0, 1). Central function:
//! `check_invariance` (called by `validate`). Reads no file; the group sizes of waves are
//! checked by `check` after its pass over the data (`check_group_rows`), the values of a
//! grouping column at run time by `steps::invariance`.

use super::diagnostic::suggest;
use super::problem::{Finding, SpecProblem};
use super::types::{ACROSS_WAVES, Alpha, Spec};
use super::validate::{ColumnsRead, SourceColumns};

/// Fewest respondents with every item answered that a group needs: a covariance matrix of
/// about 20 items estimated from fewer is too unstable for a multi-group model (and a group
/// needs more rows than items for it to be positive definite at all).
pub const MIN_GROUP_ROWS: usize = 50;

const BASE: &str = "analyses.invariance";

pub fn check_invariance(spec: &Spec, sources: &[SourceColumns], out: &mut Vec<Finding>) {
    let Some(inv) = &spec.analyses.invariance else { return };
    if spec.data.matrix.is_some() {
        out.push(Finding::key(SpecProblem::NeedsRows { analysis: "invariance".into() }, BASE));
        return;
    }
    if !Alpha::holds(inv.alpha) {
        out.push(Finding::value(
            SpecProblem::OutOfRange { what: "`invariance.alpha`".into(), range: "(0, 1)".into(), value: inv.alpha },
            format!("{BASE}.alpha"),
        ));
    }
    if inv.across == ACROSS_WAVES {
        let waves = &spec.data.waves;
        if waves.len() < 2 {
            out.push(Finding::key(SpecProblem::InvarianceOneGroup { waves: waves.len() }, BASE));
        }
        if let Some(r) = &inv.reference
            && !waves.iter().any(|w| &w.id == r)
        {
            out.push(Finding::value(
                SpecProblem::UnknownReferenceGroup {
                    reference: r.clone(),
                    suggestion: suggest(r, waves.iter().map(|w| w.id.as_str())),
                },
                format!("{BASE}.reference"),
            ));
        }
        return;
    }
    let column = &inv.across;
    let at = format!("{BASE}.across");
    if spec.constructs.values().any(|c| c.items.contains(column)) {
        out.push(Finding::value(
            SpecProblem::BadGroupColumn { column: column.clone(), what: "an item of a construct" },
            at,
        ));
        return;
    }
    if spec.data.id_column.as_ref() == Some(column) {
        out.push(Finding::value(
            SpecProblem::BadGroupColumn { column: column.clone(), what: "the id column (one respondent per group)" },
            at,
        ));
        return;
    }
    for s in sources {
        if let (Some(wave), ColumnsRead::Columns(cols)) = (&s.wave, &s.columns)
            && !cols.contains(column)
        {
            out.push(Finding::value(
                SpecProblem::MissingColumn {
                    wave: wave.clone(),
                    column: column.clone(),
                    path: s.path.clone(),
                    suggestion: suggest(column, cols.iter().map(String::as_str)),
                },
                at.clone(),
            ));
        }
    }
}

/// `check` with data: each wave that is a group has at least `MIN_GROUP_ROWS` rows.
pub fn check_group_rows(spec: &Spec, rows_by_wave: &[(String, usize)], out: &mut Vec<Finding>) {
    let Some(inv) = &spec.analyses.invariance else { return };
    if inv.across != ACROSS_WAVES {
        return;
    }
    for (wave, rows) in rows_by_wave {
        if *rows < MIN_GROUP_ROWS {
            out.push(Finding::key(
                SpecProblem::InvarianceSmallGroup { group: wave.clone(), rows: *rows, min: MIN_GROUP_ROWS },
                BASE,
            ));
        }
    }
}
