//! Positive-definiteness check and smoothing of correlation matrices assembled pair by pair
//! (pairwise deletion, polychoric/polyserial mixes), which need not be positive definite.
//! Central type: `Smoothing`, which always says whether and by how much the matrix changed,
//! so the report can show it. Must never change a matrix that is already safely positive
//! definite, and never return one without unit diagonal.

use super::StatsError;
use nalgebra::DMatrix;

/// Smallest eigenvalue a smoothed correlation matrix is given. A matrix whose smallest
/// eigenvalue is below this is treated as not (safely) positive definite: 1e-6 keeps the
/// condition number of a unit-diagonal matrix below about 1e6 times its dimension, so the
/// Cholesky factorisations and log-determinants of the ML fit downstream stay stable, while
/// the change it forces beyond the nearest positive-semidefinite correlation matrix is of the
/// order of 1e-6 per entry.
pub const EIGENVALUE_FLOOR: f64 = 1e-6;

const MAX_ITERATIONS: usize = 5_000;
const TOLERANCE: f64 = 1e-11;

/// Outcome of `smooth_correlation`. (No serde derive: the crate builds nalgebra without its
/// serde feature; steps/ copies the matrix into its artifact.)
#[derive(Debug, Clone, PartialEq)]
pub struct Smoothing {
    /// The smoothed matrix (the input, symmetrised, when nothing changed).
    pub matrix: DMatrix<f64>,
    /// Whether the input was below the eigenvalue floor and so was changed.
    pub changed: bool,
    pub min_eigenvalue_before: f64,
    pub min_eigenvalue_after: f64,
    /// max |smoothed_ij - input_ij|.
    pub max_abs_change: f64,
    /// Frobenius norm of smoothed - input.
    pub frobenius_change: f64,
    /// Alternating-projection iterations (0 when unchanged).
    pub iterations: usize,
    /// Whether the projections met their tolerance; if not, `matrix` is still positive
    /// definite with unit diagonal, just not the nearest such matrix.
    pub converged: bool,
}

/// Smallest eigenvalue of a symmetric matrix (symmetric eigen-decomposition, nalgebra).
pub fn min_eigenvalue(m: &DMatrix<f64>) -> f64 {
    m.clone().symmetric_eigenvalues().min()
}

/// Whether a symmetric matrix is positive definite: its Cholesky factorisation exists and its
/// smallest eigenvalue is positive.
pub fn is_positive_definite(m: &DMatrix<f64>) -> bool {
    m.is_square() && m.clone().cholesky().is_some() && min_eigenvalue(m) > 0.0
}

/// Smooth a correlation matrix with the default `EIGENVALUE_FLOOR`; see
/// `smooth_correlation_with_floor`.
pub fn smooth_correlation(m: &DMatrix<f64>) -> Result<Smoothing, StatsError> {
    smooth_correlation_with_floor(m, EIGENVALUE_FLOOR)
}

/// Nearest correlation matrix with eigenvalues >= `floor`, by Higham's (2002, "Computing the
/// nearest correlation matrix — a problem from finance", IMA J. Numer. Anal. 22, 329–343,
/// Algorithm 3.3) alternating projections with Dykstra's correction, unit weights (Frobenius
/// norm), the semidefinite projection replaced by the projection onto {eigenvalues >= floor}
/// (also a closed convex set, so the iteration still converges to the nearest point of the
/// intersection). A last clip-and-rescale D^{-1/2} X D^{-1/2} makes the diagonal exactly 1
/// and the result positive definite exactly (a congruence preserves definiteness).
///
/// Chosen over plain eigenvalue clipping plus rescaling because it is the minimal change in
/// the Frobenius norm: clipping moves every entry along the offending eigenvectors, then the
/// rescaling moves them again, typically changing the matrix several times more.
///
/// Input: square, finite, symmetric (to 1e-10) with unit diagonal (to 1e-8); otherwise
/// `InvalidInput`. A matrix whose smallest eigenvalue is already >= `floor` is returned
/// unchanged.
pub fn smooth_correlation_with_floor(m: &DMatrix<f64>, floor: f64) -> Result<Smoothing, StatsError> {
    validate(m)?;
    if !(floor > 0.0 && floor < 1.0) {
        return Err(StatsError::InvalidInput(format!("eigenvalue floor {floor} must lie in (0, 1)")));
    }
    let mut a = (m + m.transpose()) * 0.5;
    a.fill_diagonal(1.0);
    let before = min_eigenvalue(&a);
    if before >= floor {
        return Ok(Smoothing {
            matrix: a,
            changed: false,
            min_eigenvalue_before: before,
            min_eigenvalue_after: before,
            max_abs_change: 0.0,
            frobenius_change: 0.0,
            iterations: 0,
            converged: true,
        });
    }
    let dim = a.nrows();
    let mut y = a.clone();
    let mut correction = DMatrix::<f64>::zeros(dim, dim);
    let mut iterations = 0;
    let mut converged = false;
    while iterations < MAX_ITERATIONS {
        iterations += 1;
        let r = &y - &correction;
        let x = clip_eigenvalues(&r, floor);
        correction = &x - &r;
        let mut next = x;
        next.fill_diagonal(1.0);
        let change = (&next - &y).norm() / next.norm();
        y = next;
        if change < TOLERANCE {
            converged = true;
            break;
        }
    }
    let x = clip_eigenvalues(&y, floor);
    let scale: Vec<f64> = (0..dim).map(|i| x[(i, i)].sqrt().recip()).collect();
    let mut out = DMatrix::from_fn(dim, dim, |i, j| x[(i, j)] * scale[i] * scale[j]);
    out = (&out + out.transpose()) * 0.5;
    out.fill_diagonal(1.0);
    let after = min_eigenvalue(&out);
    if after.is_nan() || after <= 0.0 || out.clone().cholesky().is_none() {
        return Err(StatsError::Singular { what: "smoothed correlation matrix".into() });
    }
    let diff = &out - &a;
    Ok(Smoothing {
        max_abs_change: diff.amax(),
        frobenius_change: diff.norm(),
        matrix: out,
        changed: true,
        min_eigenvalue_before: before,
        min_eigenvalue_after: after,
        iterations,
        converged,
    })
}

fn validate(m: &DMatrix<f64>) -> Result<(), StatsError> {
    if !m.is_square() || m.nrows() == 0 {
        return Err(StatsError::InvalidInput(format!(
            "a correlation matrix must be square and non-empty, got {} x {}",
            m.nrows(),
            m.ncols()
        )));
    }
    if m.iter().any(|v| !v.is_finite()) {
        return Err(StatsError::InvalidInput("correlation matrix has non-finite entries".into()));
    }
    let asym = (m - m.transpose()).amax();
    if asym > 1e-10 {
        return Err(StatsError::InvalidInput(format!("correlation matrix is not symmetric (max asymmetry {asym:e})")));
    }
    if let Some(i) = (0..m.nrows()).find(|&i| (m[(i, i)] - 1.0).abs() > 1e-8) {
        return Err(StatsError::InvalidInput(format!("correlation matrix has diagonal entry {} at {i}", m[(i, i)])));
    }
    Ok(())
}

/// Projection onto {symmetric S : eigenvalues >= floor} in the Frobenius norm:
/// V max(Λ, floor) Vᵀ (Higham 2002, Theorem 3.2 with the floor).
fn clip_eigenvalues(m: &DMatrix<f64>, floor: f64) -> DMatrix<f64> {
    let sym = (m + m.transpose()) * 0.5;
    let eig = sym.symmetric_eigen();
    let clipped = eig.eigenvalues.map(|l| l.max(floor));
    let v = &eig.eigenvectors;
    let out = v * DMatrix::from_diagonal(&clipped) * v.transpose();
    (&out + out.transpose()) * 0.5
}

/// Eigenvalues at or below this (relative to the matrix size) count as not positive definite.
pub const EIGEN_TOLERANCE: f64 = 1e-10;

/// The smallest eigenvalue of a symmetric matrix, whether it is clearly positive (above
/// `EIGEN_TOLERANCE` times the size), and, when it is not, the indices of the variables with
/// weight above 0.2 in its eigenvector, largest first: the variables whose combination is
/// (nearly) degenerate. Eigenvalues alone cost a fraction of the full decomposition, so the
/// eigenvectors are computed only for a matrix that needs the diagnosis.
pub fn definiteness(matrix: &DMatrix<f64>) -> (bool, f64, Vec<usize>) {
    let smallest = |values: &nalgebra::DVector<f64>| {
        values.iter().copied().enumerate().min_by(|a, b| a.1.total_cmp(&b.1)).unwrap_or((0, f64::NAN))
    };
    let (_, min) = smallest(&matrix.clone().symmetric_eigenvalues());
    let positive_definite = min > EIGEN_TOLERANCE * matrix.nrows().max(1) as f64;
    if positive_definite {
        return (true, min, Vec::new());
    }
    let eig = matrix.clone().symmetric_eigen();
    let (imin, _) = smallest(&eig.eigenvalues);
    let mut weights: Vec<(f64, usize)> = eig
        .eigenvectors
        .column(imin)
        .iter()
        .map(|w| w.abs())
        .enumerate()
        .map(|(i, w)| (w, i))
        .filter(|(w, _)| *w > 0.2)
        .collect();
    weights.sort_by(|a, b| b.0.total_cmp(&a.0));
    (false, min, weights.into_iter().map(|(_, i)| i).collect())
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde::Deserialize;

    #[derive(Deserialize)]
    struct Fixture {
        cases: Vec<Case>,
    }

    #[derive(Deserialize)]
    struct Case {
        name: String,
        input: Vec<Vec<f64>>,
        nearest: Vec<Vec<f64>>,
        min_eigenvalue: f64,
    }

    fn matrix(rows: &[Vec<f64>]) -> DMatrix<f64> {
        DMatrix::from_fn(rows.len(), rows.len(), |i, j| rows[i][j])
    }

    // Reference: an independent nearest-correlation computation with scipy.optimize (BFGS on
    // unit-row factors X = LLᵀ, several starts; tests/reference/polychoric/make_smoothing.py,
    // versions inside smoothing.json). Its answer is the nearest positive-semidefinite
    // correlation matrix; ours is floored at 1e-6, hence the 1e-4 tolerance.
    #[test]
    fn matches_independent_nearest_correlation() {
        let fx: Fixture = crate::reference!("polychoric/smoothing.json");
        for case in &fx.cases {
            let input = matrix(&case.input);
            let s = smooth_correlation(&input).unwrap();
            assert!(s.changed, "{}", case.name);
            assert!((s.min_eigenvalue_before - case.min_eigenvalue).abs() < 1e-10);
            assert!(s.converged, "{}", case.name);
            assert!(s.min_eigenvalue_after > 0.0 && is_positive_definite(&s.matrix));
            for i in 0..input.nrows() {
                assert_eq!(s.matrix[(i, i)], 1.0);
                for j in 0..input.nrows() {
                    assert_eq!(s.matrix[(i, j)], s.matrix[(j, i)]);
                    let want = case.nearest[i][j];
                    assert!(
                        (s.matrix[(i, j)] - want).abs() < 1e-4,
                        "{} ({i}, {j}): {} vs {want}",
                        case.name,
                        s.matrix[(i, j)]
                    );
                }
            }
            let diff = &s.matrix - &input;
            assert!((s.frobenius_change - diff.norm()).abs() < 1e-12);
            assert!((s.max_abs_change - diff.amax()).abs() < 1e-12);
        }
    }

    // Higham (2002), section 4: the nearest correlation matrix to [[1,1,0],[1,1,1],[0,1,1]]
    // has off-diagonals 0.7607 and 0.1573 (values as printed there, from memory).
    #[test]
    fn higham_example() {
        let a = DMatrix::from_row_slice(3, 3, &[1.0, 1.0, 0.0, 1.0, 1.0, 1.0, 0.0, 1.0, 1.0]);
        let s = smooth_correlation(&a).unwrap();
        assert!((s.matrix[(0, 1)] - 0.7607).abs() < 1e-4);
        assert!((s.matrix[(1, 2)] - 0.7607).abs() < 1e-4);
        assert!((s.matrix[(0, 2)] - 0.1573).abs() < 1e-4);
        assert!(s.min_eigenvalue_before < 0.0 && s.min_eigenvalue_after > 0.0);
    }

    // A positive definite matrix is returned untouched.
    #[test]
    fn positive_definite_is_unchanged() {
        let a = DMatrix::from_row_slice(3, 3, &[1.0, 0.5, 0.3, 0.5, 1.0, 0.2, 0.3, 0.2, 1.0]);
        let s = smooth_correlation(&a).unwrap();
        assert!(!s.changed);
        assert_eq!(s.matrix, a);
        assert_eq!(s.max_abs_change, 0.0);
        assert!(is_positive_definite(&a));
    }

    #[test]
    fn invalid_inputs() {
        let rect = DMatrix::<f64>::zeros(2, 3);
        assert!(matches!(smooth_correlation(&rect), Err(StatsError::InvalidInput(_))));
        let asym = DMatrix::from_row_slice(2, 2, &[1.0, 0.5, 0.4, 1.0]);
        assert!(matches!(smooth_correlation(&asym), Err(StatsError::InvalidInput(_))));
        let diag = DMatrix::from_row_slice(2, 2, &[2.0, 0.5, 0.5, 1.0]);
        assert!(matches!(smooth_correlation(&diag), Err(StatsError::InvalidInput(_))));
    }
}
