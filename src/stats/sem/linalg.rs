//! Dense symmetric positive-definite helpers for the fit: inverse and log-determinant through
//! one Cholesky factor. Central function: `spd_inverse`. Exists because inverting through the
//! triangular factor and one matrix product is several times faster than solving against the
//! identity, and the fit inverts Sigma at every trial point. Never regularises a matrix.

use nalgebra::DMatrix;

/// Inverse and ln-determinant of a symmetric positive-definite matrix, `None` if it is not PD.
/// A = L L' (Cholesky), ln|A| = 2 sum ln L_ii, A^-1 = L^-T L^-1 with L^-1 by column-wise
/// forward substitution (Golub & Van Loan 2013, alg. 3.1.3 and sec. 4.2).
pub fn spd_inverse(a: &DMatrix<f64>) -> Option<(DMatrix<f64>, f64)> {
    let l = a.clone().cholesky()?.unpack();
    let ln_det = l.diagonal().iter().map(|d| 2.0 * d.ln()).sum();
    Some((inverse_from_factor(&l), ln_det))
}

/// A^-1 = L^-T L^-1 from the lower Cholesky factor L of A (Golub & Van Loan 2013, sec. 4.2);
/// L^-1 by forward substitution down contiguous columns, the product by one matrix multiply.
pub fn inverse_from_factor(l: &DMatrix<f64>) -> DMatrix<f64> {
    let n = l.nrows();
    let mut x = DMatrix::zeros(n, n);
    let ls = l.as_slice();
    for j in 0..n {
        let col = &mut x.as_mut_slice()[j * n..(j + 1) * n];
        col[j] = 1.0;
        for k in j..n {
            let xk = col[k] / ls[k * n + k];
            col[k] = xk;
            if xk != 0.0 {
                for (xi, li) in col[k + 1..].iter_mut().zip(&ls[k * n + k + 1..(k + 1) * n]) {
                    *xi -= xk * li;
                }
            }
        }
    }
    let inv = x.transpose() * &x;
    (&inv + inv.transpose()) * 0.5
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn inverse_times_matrix_is_identity() {
        // Definition of the inverse; ln|A| of a 2x2 by hand: |[[4, 2], [2, 3]]| = 8.
        let a = DMatrix::from_row_slice(3, 3, &[4.0, 2.0, 0.5, 2.0, 3.0, 0.2, 0.5, 0.2, 2.0]);
        let (inv, ln_det) = spd_inverse(&a).unwrap();
        assert!((&inv * &a - DMatrix::identity(3, 3)).amax() < 1e-13);
        assert!((ln_det - a.determinant().ln()).abs() < 1e-13);
        let b = DMatrix::from_row_slice(2, 2, &[4.0, 2.0, 2.0, 3.0]);
        assert!((spd_inverse(&b).unwrap().1 - 8f64.ln()).abs() < 1e-14);
        assert!(spd_inverse(&DMatrix::from_row_slice(2, 2, &[1.0, 2.0, 2.0, 1.0])).is_none());
    }
}
