//! Free-fermion results for the flip-flop chain: exact for nearest-neighbour
//! couplings at Δ = 0, where the Jordan–Wigner transformation maps the spins
//! to non-interacting fermions hopping with the matrix K_ij = J_ij.
//!
//! Owns: C_ij(t) = |U_ij(t)|², U = exp(−iKt), on a finite chain via the
//! eigendecomposition of K (U = V e^{−iλt} Vᵀ), and the infinite-chain
//! result C(n,t) = J_n(2Jt)². Must not know: interacting dynamics, Ising
//! terms, data files.
//!
//! For couplings beyond nearest neighbours the Jordan–Wigner strings make the
//! spin model interacting; |U_ij|² is then only the non-interacting
//! approximation, agreeing with the spin correlation at order t² (not t⁴).
//! [`FreeFermionChain::is_exact`] says which case applies.

use ndarray::{Array1, Array2};
use thiserror::Error;

use crate::model::correlation_map::{CorrelationMap, MapError};
use crate::model::couplings::Couplings;
use crate::numerics::linalg::{LinalgError, symmetric_eigen};
use crate::numerics::special::bessel_j;

/// Why a free-fermion result could not be computed.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum FreeFermionError {
    #[error("site {site} is outside the chain of {sites} sites")]
    SiteOutOfRange { site: usize, sites: usize },
    #[error("time {value} at index {index} is not finite")]
    BadTime { index: usize, value: f64 },
    #[error(transparent)]
    Linalg(#[from] LinalgError),
    #[error(transparent)]
    Map(#[from] MapError),
}

/// Single-particle propagation on a chain with hopping K = J. See the module
/// documentation.
#[derive(Debug, Clone)]
pub struct FreeFermionChain {
    energies: Array1<f64>,
    modes: Array2<f64>,
    nearest_neighbour: bool,
}

impl FreeFermionChain {
    /// Diagonalises the hopping matrix K = J (cost O(N³), once).
    ///
    /// # Errors
    /// A failed eigendecomposition.
    pub fn new(couplings: &Couplings) -> Result<Self, FreeFermionError> {
        let k = couplings.matrix();
        let eigen = symmetric_eigen(k)?;
        let nearest_neighbour = k
            .indexed_iter()
            .all(|((i, j), v)| i.abs_diff(j) == 1 || v.abs() < f64::MIN_POSITIVE);
        Ok(Self {
            energies: Array1::from(eigen.values),
            modes: eigen.vectors,
            nearest_neighbour,
        })
    }

    /// Number of sites.
    #[must_use]
    pub fn sites(&self) -> usize {
        self.modes.nrows()
    }

    /// `true` when every non-zero coupling joins neighbouring sites, so that
    /// |U_ij|² is the exact spin correlation of the Δ = 0 chain.
    #[must_use]
    pub fn is_exact(&self) -> bool {
        self.nearest_neighbour
    }

    /// U_{i,source}(t) = Σ_k V_ik V_{source,k} e^{−iλ_k t} for all i, as
    /// (real parts, imaginary parts).
    fn amplitudes(&self, source: usize, t: f64) -> (Array1<f64>, Array1<f64>) {
        let row = self.modes.row(source);
        let cos_w = Array1::from_shape_fn(self.sites(), |k| (self.energies[k] * t).cos() * row[k]);
        let sin_w = Array1::from_shape_fn(self.sites(), |k| -(self.energies[k] * t).sin() * row[k]);
        (self.modes.dot(&cos_w), self.modes.dot(&sin_w))
    }

    /// C_{i,source}(t) = |U_{i,source}(t)|² for every site i, as a
    /// `times × sites` array. Σ_i C = 1 by unitarity (to ~1e-13).
    ///
    /// # Errors
    /// Source outside the chain; a non-finite time.
    pub fn correlations(
        &self,
        source: usize,
        times: &[f64],
    ) -> Result<Array2<f64>, FreeFermionError> {
        let sites = self.sites();
        if source >= sites {
            return Err(FreeFermionError::SiteOutOfRange {
                site: source,
                sites,
            });
        }
        if let Some((index, &value)) = times.iter().enumerate().find(|(_, t)| !t.is_finite()) {
            return Err(FreeFermionError::BadTime { index, value });
        }
        let mut out = Array2::zeros((times.len(), sites));
        for (ti, &t) in times.iter().enumerate() {
            let (re, im) = self.amplitudes(source, t);
            for i in 0..sites {
                out[(ti, i)] = re[i] * re[i] + im[i] * im[i];
            }
        }
        Ok(out)
    }

    /// [`FreeFermionChain::correlations`] as a correlation map with offsets
    /// x = i − source over the whole chain.
    ///
    /// # Errors
    /// As `correlations`, plus times that are negative or do not strictly
    /// increase.
    pub fn to_correlation_map(
        &self,
        source: usize,
        times: &[f64],
    ) -> Result<CorrelationMap, FreeFermionError> {
        let values = self.correlations(source, times)?;
        // A dense chain of more than i32::MAX sites cannot be stored: offsets fit.
        let offsets = (0..self.sites())
            .map(|i| i32::try_from(i as i64 - source as i64).unwrap_or(i32::MAX))
            .collect();
        Ok(CorrelationMap::complete(
            offsets,
            times.to_vec(),
            values,
            None,
        )?)
    }
}

/// C(n,t) = J_n(2Jt)² on the infinite nearest-neighbour flip-flop chain with
/// coupling J (spreadscope's convention, hopping K = J). Even in n and in t.
/// Bessel J_n from `numerics::special` (~1e-15 absolute).
#[must_use]
pub fn infinite_chain(n: i64, t: f64, coupling: f64) -> f64 {
    let order = u32::try_from(n.unsigned_abs()).unwrap_or(u32::MAX);
    let z = (2.0 * coupling * t).abs();
    let j = bessel_j(order, z);
    j * j
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::short_time::ShortTimeExpansion;
    use crate::model::short_time::small_chain_exact::SmallChain;
    use crate::tolerance::close;

    fn fixture() -> serde_json::Value {
        serde_json::from_str(include_str!(
            "../../../../tests/reference/lattice_reference.json"
        ))
        .expect("fixture parses")
    }

    fn num(v: &serde_json::Value) -> f64 {
        v.as_str().expect("string").parse().expect("number")
    }

    #[test]
    fn bessel_values_match_tables() {
        // A&S Table 9.1 (J_0, J_1 to 15 D; quoted from memory, confirmed by
        // the mpmath fixture below).
        let table = [
            (1.0, 0.765_197_686_557_966_6, 0.440_050_585_744_933_5),
            (2.0, 0.223_890_779_141_235_7, 0.576_724_807_756_873_4),
            (5.0, -0.177_596_771_314_338_3, -0.327_579_137_591_465_2),
            (10.0, -0.245_935_764_451_348_3, 0.043_472_746_168_861_44),
        ];
        for (x, j0, j1) in table {
            assert!((puruspe::Jn(0, x) - j0).abs() < 1e-15, "J0({x})");
            assert!((puruspe::Jn(1, x) - j1).abs() < 1e-15, "J1({x})");
        }
        // First zero of J_0 (A&S Table 9.5).
        assert!(puruspe::Jn(0, 2.404_825_557_695_773).abs() < 1e-15);
        // mpmath 1.3.0 besselj at 40 digits, orders 0–30, x ≤ 40.
        let fx = fixture();
        for row in fx["bessel"].as_array().expect("rows") {
            let n = u32::try_from(row["n"].as_u64().expect("n")).expect("small");
            let x = num(&row["x"]);
            let want = num(&row["j"]);
            let got = puruspe::Jn(n, x);
            assert!(
                close(got, want, 1e-12, 1e-15),
                "J_{n}({x}) = {got} vs {want}"
            );
        }
    }

    #[test]
    fn infinite_chain_sum_rules() {
        // Σ_n J_n(z)² = 1 (A&S 9.1.76) and Σ_n n² J_n(z)² = z²/2 (physics notes,
        // ballistic spreading), z = 2Jt.
        for (t, j) in [(0.25, 1.0), (1.5, 1.0), (5.0, 1.0), (3.0, 0.6)] {
            let z: f64 = 2.0 * j * t;
            let m = (z as i64) + 40;
            let total: f64 = (-m..=m).map(|n| infinite_chain(n, t, j)).sum();
            let second: f64 = (-m..=m)
                .map(|n| (n * n) as f64 * infinite_chain(n, t, j))
                .sum();
            assert!((total - 1.0).abs() < 1e-14, "t {t}: {total}");
            assert!(close(second, z * z / 2.0, 1e-13, 1e-15), "t {t}: {second}");
        }
        // Symmetry C(−n,t) = C(n,t) and C(n,−t) = C(n,t).
        assert!(close(
            infinite_chain(-3, 1.2, 1.0),
            infinite_chain(3, -1.2, 1.0),
            1e-15,
            0.0
        ));
    }

    #[test]
    fn finite_chain_bulk_matches_bessel_squares() {
        // Far from the ends (50 sites away, amplitude ~ (Jt)^50/50!) the
        // open chain is the infinite one: C = J_n(2Jt)² (physics notes, Free
        // fermions).
        for coupling in [1.0, 0.7] {
            let c = Couplings::power_law(101, coupling, f64::INFINITY).expect("valid");
            let chain = FreeFermionChain::new(&c).expect("diagonalises");
            assert!(chain.is_exact());
            let times = [0.5, 1.0, 2.0, 4.0];
            let map = chain.correlations(50, &times).expect("valid");
            for (ti, &t) in times.iter().enumerate() {
                for i in 0..101usize {
                    let n = i as i64 - 50;
                    let want = infinite_chain(n, t, coupling);
                    assert!((map[(ti, i)] - want).abs() < 1e-10, "t {t} n {n}");
                }
                assert!((map.row(ti).sum() - 1.0).abs() < 1e-12);
            }
        }
    }

    #[test]
    fn two_sites_oscillate() {
        // C_11 = cos²(Jt), C_12 = sin²(Jt) (physics notes, Short-time expansion).
        let c = Couplings::power_law(2, 1.3, 1.0).expect("valid");
        let chain = FreeFermionChain::new(&c).expect("diagonalises");
        let times = [0.0, 0.4, 1.1, 7.0];
        let map = chain.correlations(0, &times).expect("valid");
        for (ti, &t) in times.iter().enumerate() {
            let cos2 = (1.3 * t).cos().powi(2);
            assert!((map[(ti, 0)] - cos2).abs() < 1e-14);
            assert!((map[(ti, 1)] - (1.0 - cos2)).abs() < 1e-14);
        }
    }

    #[test]
    fn nearest_neighbour_chain_equals_exact_spin_dynamics() {
        // Jordan–Wigner is exact for nearest-neighbour flip-flop chains:
        // compare with brute-force diagonalisation of 7 spins (2^7 states),
        // including non-uniform couplings.
        let mut m = Array2::zeros((7, 7));
        for (i, v) in [1.0, 0.8, 1.3, 0.6, 1.1, 0.9].iter().enumerate() {
            m[(i, i + 1)] = *v;
            m[(i + 1, i)] = *v;
        }
        let c = Couplings::from_matrix(m).expect("valid");
        let exact = SmallChain::new(c.matrix(), 0.0);
        let chain = FreeFermionChain::new(&c).expect("diagonalises");
        for t in [0.3, 1.0, 2.7] {
            let want = exact.correlation(t);
            for source in [0, 3] {
                let got = chain.correlations(source, &[t]).expect("valid");
                for i in 0..7 {
                    assert!(
                        (got[(0, i)] - want[(i, source)]).abs() < 1e-12,
                        "t {t} i {i}"
                    );
                }
            }
        }
    }

    #[test]
    fn short_time_agreement_depends_on_range() {
        // Nearest neighbours: |U|² and the spin expansion agree through t⁴, so
        // their difference at small t is O(t⁶). Power-law couplings (α = 1):
        // they agree at t² only; the t⁴ terms differ by the string effect
        // (physics notes, Free fermions).
        let t = 0.02;
        for (alpha, agrees_at_t4) in [(f64::INFINITY, true), (1.0, false)] {
            let c = Couplings::power_law(9, 1.0, alpha).expect("valid");
            let chain = FreeFermionChain::new(&c).expect("diagonalises");
            assert_eq!(chain.is_exact(), agrees_at_t4);
            let expansion = ShortTimeExpansion::new(&c, 0.0).expect("valid");
            let ff = chain.correlations(4, &[t]).expect("valid");
            let mut worst_t4 = 0.0f64;
            for i in 0..9 {
                let second = expansion.correlation(i, 4, t, 2).expect("valid");
                let fourth = expansion.correlation(i, 4, t, 4).expect("valid");
                // t² agreement in both cases: what is left is O(t⁴).
                assert!((ff[(0, i)] - second).abs() < 10.0 * t.powi(4), "i {i}");
                worst_t4 = worst_t4.max((ff[(0, i)] - fourth).abs() / t.powi(4));
            }
            if agrees_at_t4 {
                assert!(worst_t4 < 1e-2, "nearest neighbour: {worst_t4}");
            } else {
                assert!(
                    worst_t4 > 1e-1,
                    "long range should differ at t⁴: {worst_t4}"
                );
            }
        }
    }

    #[test]
    fn rejects_bad_input() {
        let c = Couplings::power_law(4, 1.0, f64::INFINITY).expect("valid");
        let chain = FreeFermionChain::new(&c).expect("diagonalises");
        assert!(matches!(
            chain.correlations(4, &[0.0]),
            Err(FreeFermionError::SiteOutOfRange { site: 4, sites: 4 })
        ));
        assert!(matches!(
            chain.correlations(0, &[0.0, f64::NAN]),
            Err(FreeFermionError::BadTime { index: 1, .. })
        ));
        assert!(matches!(
            chain.to_correlation_map(0, &[1.0, 0.5]),
            Err(FreeFermionError::Map(_))
        ));
        let map = chain.to_correlation_map(1, &[0.0, 0.5]).expect("map");
        assert_eq!(map.offsets(), &[-1, 0, 1, 2]);
    }
}
