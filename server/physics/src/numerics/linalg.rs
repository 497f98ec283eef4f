//! Linear-algebra wrappers over faer, taking and returning ndarray values so
//! the rest of the core never touches faer types.

use faer::{Mat, Side};
use ndarray::Array2;
use thiserror::Error;

#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum LinalgError {
    #[error("matrix is not square: {0}×{1}")]
    NotSquare(usize, usize),
    #[error("eigendecomposition did not converge")]
    NoConvergence,
}

/// Eigendecomposition of a real symmetric matrix: `a = V diag(λ) Vᵀ`.
#[derive(Debug, Clone)]
pub struct SymmetricEigen {
    /// Eigenvalues in nondecreasing order.
    pub values: Vec<f64>,
    /// Orthonormal eigenvectors as columns, in the order of `values`.
    pub vectors: Array2<f64>,
}

/// Eigendecomposition of the real symmetric matrix `a` (only its lower
/// triangle is read), by faer's self-adjoint solver (tridiagonalisation and
/// divide and conquer; backward stable, residuals O(ε‖a‖)).
///
/// # Errors
/// [`LinalgError::NotSquare`] for a non-square input,
/// [`LinalgError::NoConvergence`] if faer reports failure.
pub fn symmetric_eigen(a: &Array2<f64>) -> Result<SymmetricEigen, LinalgError> {
    let (n, m) = a.dim();
    if n != m {
        return Err(LinalgError::NotSquare(n, m));
    }
    let mat = Mat::<f64>::from_fn(n, n, |i, j| a[(i, j)]);
    let evd = mat
        .self_adjoint_eigen(Side::Lower)
        .map_err(|_| LinalgError::NoConvergence)?;
    let s = evd.S();
    let u = evd.U();
    let values = (0..n).map(|i| s[i]).collect();
    let vectors = Array2::from_shape_fn((n, n), |(i, j)| u[(i, j)]);
    Ok(SymmetricEigen { values, vectors })
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn two_by_two_has_known_spectrum() {
        // [[2,1],[1,2]] has eigenvalues 1 and 3 (closed form, common practice).
        let e = symmetric_eigen(&array![[2.0, 1.0], [1.0, 2.0]]).expect("converges");
        assert!((e.values[0] - 1.0).abs() < 1e-14);
        assert!((e.values[1] - 3.0).abs() < 1e-14);
        let v = &e.vectors;
        let recon = v
            .dot(&Array2::from_diag(&ndarray::arr1(&e.values)))
            .dot(&v.t());
        assert!((recon[(0, 1)] - 1.0).abs() < 1e-14);
    }

    #[test]
    fn rejects_non_square() {
        assert!(symmetric_eigen(&Array2::zeros((2, 3))).is_err());
    }
}
