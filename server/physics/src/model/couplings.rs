//! `Couplings`: the exchange couplings J_ij of a chain of N sites, either the
//! power law J/|i−j|^α (α = ∞ meaning nearest neighbours only) or a measured
//! symmetric matrix. Shared by the spin chain, the short-time expansion and
//! the lattice walk (whose rates are ∝ J_ij²).
//!
//! Convention: H = Σ_{i<j} J_ij (σ^+_i σ^-_j + h.c. + (Δ/2) σ^z_i σ^z_j), so the
//! single-particle hopping is K_ij = J_ij.

use ndarray::Array2;
use thiserror::Error;

#[derive(Debug, Clone, PartialEq, Error)]
pub enum CouplingError {
    #[error("a chain needs at least 2 sites, got {0}")]
    TooFewSites(usize),
    #[error("exponent alpha must be > 0 (or infinite), got {0}")]
    BadAlpha(f64),
    #[error("coupling strength must be finite, got {0}")]
    BadStrength(f64),
    #[error("coupling matrix is {0}×{1}, not square")]
    NotSquare(usize, usize),
    #[error("coupling matrix entry ({i},{j}) is not finite")]
    NonFinite { i: usize, j: usize },
    #[error("coupling matrix is not symmetric at ({i},{j}): {a} vs {b}")]
    NotSymmetric { i: usize, j: usize, a: f64, b: f64 },
}

/// Symmetric couplings J_ij with zero diagonal. See the module documentation.
#[derive(Debug, Clone, PartialEq)]
pub struct Couplings {
    matrix: Array2<f64>,
}

impl Couplings {
    /// J_ij = strength / |i−j|^alpha on an open chain of `sites` sites;
    /// `alpha = f64::INFINITY` keeps nearest neighbours only.
    ///
    /// # Errors
    /// Fewer than 2 sites, alpha ≤ 0 or NaN, non-finite strength.
    pub fn power_law(sites: usize, strength: f64, alpha: f64) -> Result<Self, CouplingError> {
        if sites < 2 {
            return Err(CouplingError::TooFewSites(sites));
        }
        if alpha.is_nan() || alpha <= 0.0 {
            return Err(CouplingError::BadAlpha(alpha));
        }
        if !strength.is_finite() {
            return Err(CouplingError::BadStrength(strength));
        }
        let matrix = Array2::from_shape_fn((sites, sites), |(i, j)| {
            let r = i.abs_diff(j);
            match r {
                0 => 0.0,
                1 => strength,
                _ if alpha.is_infinite() => 0.0,
                _ => strength / (r as f64).powf(alpha),
            }
        });
        Ok(Self { matrix })
    }

    /// A measured coupling matrix. The diagonal is ignored (set to 0).
    /// Symmetry is required to a relative 1e-9 of the largest entry; the
    /// stored matrix is the symmetrised (J + Jᵀ)/2.
    ///
    /// # Errors
    /// Non-square, non-finite or asymmetric input, or fewer than 2 sites.
    pub fn from_matrix(mut matrix: Array2<f64>) -> Result<Self, CouplingError> {
        let (n, m) = matrix.dim();
        if n != m {
            return Err(CouplingError::NotSquare(n, m));
        }
        if n < 2 {
            return Err(CouplingError::TooFewSites(n));
        }
        if let Some(((i, j), _)) = matrix.indexed_iter().find(|(_, v)| !v.is_finite()) {
            return Err(CouplingError::NonFinite { i, j });
        }
        let scale = matrix.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        for i in 0..n {
            for j in (i + 1)..n {
                let (a, b) = (matrix[(i, j)], matrix[(j, i)]);
                if (a - b).abs() > 1e-9 * scale {
                    return Err(CouplingError::NotSymmetric { i, j, a, b });
                }
                let mean = 0.5 * (a + b);
                matrix[(i, j)] = mean;
                matrix[(j, i)] = mean;
            }
            matrix[(i, i)] = 0.0;
        }
        Ok(Self { matrix })
    }

    #[must_use]
    pub fn sites(&self) -> usize {
        self.matrix.nrows()
    }

    /// J_ij (zero diagonal, symmetric).
    #[must_use]
    pub fn matrix(&self) -> &Array2<f64> {
        &self.matrix
    }

    /// J_ij for one pair.
    #[must_use]
    pub fn get(&self, i: usize, j: usize) -> f64 {
        self.matrix[(i, j)]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn power_law_values() {
        let c = Couplings::power_law(4, 2.0, 1.0).expect("valid");
        assert!((c.get(0, 3) - 2.0 / 3.0).abs() < 1e-15);
        assert!(c.get(2, 2).abs() < f64::MIN_POSITIVE);
        let nn = Couplings::power_law(4, 1.0, f64::INFINITY).expect("valid");
        assert!(nn.get(0, 2).abs() < f64::MIN_POSITIVE);
        assert!((nn.get(1, 2) - 1.0).abs() < f64::EPSILON);
        assert!(Couplings::power_law(1, 1.0, 1.0).is_err());
        assert!(Couplings::power_law(3, 1.0, -1.0).is_err());
    }

    #[test]
    fn matrix_must_be_symmetric() {
        let m = ndarray::array![[0.0, 1.0], [0.5, 0.0]];
        assert!(matches!(
            Couplings::from_matrix(m),
            Err(CouplingError::NotSymmetric { .. })
        ));
    }
}
