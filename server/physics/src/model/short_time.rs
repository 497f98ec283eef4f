//! Short-time expansion of the infinite-temperature correlation
//! C_ij(t) = 2^-N Tr[σ^z_i(t) σ^z_j] for any couplings J_ij and any Ising
//! anisotropy Δ, to order t² and t⁴.
//!
//! Owns: the Taylor coefficients of C_ij(t), derived by nested commutators
//! (derivation below), and their evaluation as values or correlation maps.
//! Must not know: how couplings were measured, exact dynamics, fitting.
//!
//! Convention: H = Σ_{a<b} J_ab (σ^+_a σ^-_b + σ^-_a σ^+_b + (Δ/2) σ^z_a σ^z_b),
//! ħ = 1, i.e. H = Σ_{a<b} J_ab [(X_aX_b + Y_aY_b)/2 + (Δ/2) Z_aZ_b].
//!
//! Derivation. With the Liouvillian 𝓛 = [H, ·] and ⟨A,B⟩ = 2^-N Tr(A†B),
//! C_ij(t) = ⟨Z_j, e^{i𝓛t} Z_i⟩ = Σ_n (−1)^n t^{2n}/(2n)! ⟨𝓛^n Z_j, 𝓛^n Z_i⟩;
//! odd orders vanish because 𝓛 Z_i is i times a Hermitian operator with real
//! Pauli coefficients. Write K_ic = X_iY_c − Y_iX_c and P_ab = X_aX_b + Y_aY_b.
//!
//! First commutator (the Ising term commutes with Z_i):
//!
//! ```text
//! 𝓛Z_i = i Σ_c J_ic K_ic,   ⟨𝓛Z_j, 𝓛Z_i⟩ = −2 J_ij² (i ≠ j),  2 S_i (i = j),
//! S_i = Σ_c J_ic²,   so   C_ij = δ_ij − t² (δ_ij S_i − J_ij²) + O(t⁴).
//! ```
//!
//! Second commutator:
//!
//! ```text
//! [H, K_ic] = 2iJ_ic(Z_c − Z_i)
//!             + i Σ_{d∉{i,c}} [−J_id Z_iP_dc + J_cd Z_cP_di + Δ(J_id − J_cd) Z_dP_ic],
//! B_i = 𝓛²Z_i = 2S_i Z_i − 2 Σ_c J_ic² Z_c + Σ_{c<d; c,d≠i} 2J_icJ_id Z_iP_cd
//!               − Σ_{a≠i} Σ_{b∉{i,a}} [J_iaJ_ab + ΔJ_ib(J_ia − J_ab)] Z_aP_ib.
//! ```
//!
//! The strings Z_k have norm 1 and Z_aP_bc (two Pauli strings) norm 2, all
//! mutually orthogonal, which gives G_ij = ⟨B_j, B_i⟩ and the t⁴ coefficient
//! G_ij/24:
//!
//! ```text
//! G_ii = 8S_i² + 2 Σ_{a≠i} Σ_{b∉{i,a}} [J_iaJ_ab + ΔJ_ib(J_ia − J_ab)]²,
//! G_ij = −4J_ij²(S_i + S_j) + Σ_{k∉{i,j}} { 4J_ik²J_jk²
//!            − 4J_ij J_ik [J_ij J_ik + Δ J_jk (J_ij − J_ik)]
//!            − 4J_ij J_jk [J_ij J_jk + Δ J_ik (J_ij − J_jk)]
//!            + 2 (J_ik J_jk)² − 2 Δ² J_ij² (J_ik − J_jk)² }.
//! ```
//!
//! This holds for every Δ; the tests check it against exact diagonalisation
//! of 6–8 spin chains.
//!
//! Checks: two sites give cos²(Jt) = 1 − J²t² + J⁴t⁴/3; Σ_i C_ij = 1 holds
//! order by order (Σ_i Z_i commutes with H).

use ndarray::{Array2, ArrayView1};
use thiserror::Error;

use crate::model::correlation_map::{CorrelationMap, MapError};
use crate::model::couplings::Couplings;

/// Why a short-time expansion could not be built or evaluated.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ShortTimeError {
    #[error("Ising anisotropy delta must be finite, got {0}")]
    BadDelta(f64),
    #[error("site {site} is outside the chain of {sites} sites")]
    SiteOutOfRange { site: usize, sites: usize },
    #[error("expansion order {0} is not available: use 0, 2 or 4 (odd orders vanish)")]
    BadOrder(usize),
    #[error("time {value} at index {index} is not finite")]
    BadTime { index: usize, value: f64 },
    #[error(transparent)]
    Map(#[from] MapError),
}

/// Taylor coefficients of C_ij(t) up to t⁴ for given couplings and Δ. See
/// the module documentation for the formulas and their derivation.
#[derive(Debug, Clone)]
pub struct ShortTimeExpansion {
    couplings: Array2<f64>,
    delta: f64,
    /// S_i = Σ_c J_ic².
    row_square_sums: Vec<f64>,
}

impl ShortTimeExpansion {
    /// The expansion for couplings J_ij and Ising anisotropy Δ (Δ = 0: the
    /// flip-flop model).
    ///
    /// # Errors
    /// A non-finite Δ.
    pub fn new(couplings: &Couplings, delta: f64) -> Result<Self, ShortTimeError> {
        if !delta.is_finite() {
            return Err(ShortTimeError::BadDelta(delta));
        }
        let matrix = couplings.matrix().clone();
        let row_square_sums = matrix.rows().into_iter().map(|r| r.dot(&r)).collect();
        Ok(Self {
            couplings: matrix,
            delta,
            row_square_sums,
        })
    }

    /// Number of sites.
    #[must_use]
    pub fn sites(&self) -> usize {
        self.couplings.nrows()
    }

    /// The Ising anisotropy Δ.
    #[must_use]
    pub fn delta(&self) -> f64 {
        self.delta
    }

    fn check_site(&self, site: usize) -> Result<(), ShortTimeError> {
        let sites = self.sites();
        if site < sites {
            Ok(())
        } else {
            Err(ShortTimeError::SiteOutOfRange { site, sites })
        }
    }

    /// [c0, c2, c4] with C_ij(t) = c0 + c2 t² + c4 t⁴ + O(t⁶): c0 = δ_ij,
    /// c2 = J_ij² − δ_ij S_i, c4 = G_ij/24 (module documentation). Cost
    /// O(N) off the diagonal, O(N²) on it.
    ///
    /// # Errors
    /// A site outside the chain.
    pub fn coefficients(&self, i: usize, j: usize) -> Result<[f64; 3], ShortTimeError> {
        self.check_site(i)?;
        self.check_site(j)?;
        let jm = &self.couplings;
        if i == j {
            let s = self.row_square_sums[i];
            Ok([1.0, -s, self.diagonal_fourth(i) / 24.0])
        } else {
            let jij = jm[(i, j)];
            Ok([0.0, jij * jij, self.off_diagonal_fourth(i, j) / 24.0])
        }
    }

    /// G_ii = 8S_i² + 2 Σ_{a≠i} Σ_{b∉{i,a}} [J_iaJ_ab + ΔJ_ib(J_ia − J_ab)]².
    fn diagonal_fourth(&self, i: usize) -> f64 {
        let jm = &self.couplings;
        let n = self.sites();
        let s = self.row_square_sums[i];
        let row_i: ArrayView1<f64> = jm.row(i);
        let mut triple = 0.0;
        for a in (0..n).filter(|&a| a != i) {
            let jia = row_i[a];
            let row_a = jm.row(a);
            for b in (0..n).filter(|&b| b != i && b != a) {
                let jab = row_a[b];
                let coeff = jia * jab + self.delta * row_i[b] * (jia - jab);
                triple += coeff * coeff;
            }
        }
        8.0 * s * s + 2.0 * triple
    }

    /// G_ij for i ≠ j (module documentation).
    fn off_diagonal_fourth(&self, i: usize, j: usize) -> f64 {
        let jm = &self.couplings;
        let d = self.delta;
        let jij = jm[(i, j)];
        let (row_i, row_j) = (jm.row(i), jm.row(j));
        let mut sum = -4.0 * jij * jij * (self.row_square_sums[i] + self.row_square_sums[j]);
        for k in (0..self.sites()).filter(|&k| k != i && k != j) {
            let (jik, jjk) = (row_i[k], row_j[k]);
            let p = jik * jjk;
            let q = d * jij * (jik - jjk);
            sum += 4.0 * p * p
                - 4.0 * jij * jik * (jij * jik + d * jjk * (jij - jik))
                - 4.0 * jij * jjk * (jij * jjk + d * jik * (jij - jjk))
                + 2.0 * (p * p - q * q);
        }
        sum
    }

    /// C_ij(t) truncated after t^order (order 0, 2 or 4; 1 and 3 equal 0 and
    /// 2 because odd orders vanish). Valid while t·max_i √S_i ≪ 1.
    ///
    /// # Errors
    /// A site outside the chain, an order above 4, a non-finite time.
    pub fn correlation(
        &self,
        i: usize,
        j: usize,
        t: f64,
        order: usize,
    ) -> Result<f64, ShortTimeError> {
        if order > 4 {
            return Err(ShortTimeError::BadOrder(order));
        }
        if !t.is_finite() {
            return Err(ShortTimeError::BadTime { index: 0, value: t });
        }
        let c = self.coefficients(i, j)?;
        Ok(evaluate(&c, t, order))
    }

    /// The truncated expansion as a correlation map with offsets
    /// x = i − source over the whole chain.
    ///
    /// # Errors
    /// As `correlation`, plus times that are negative or do not strictly
    /// increase.
    pub fn to_correlation_map(
        &self,
        source: usize,
        times: &[f64],
        order: usize,
    ) -> Result<CorrelationMap, ShortTimeError> {
        if order > 4 {
            return Err(ShortTimeError::BadOrder(order));
        }
        self.check_site(source)?;
        if let Some((index, &value)) = times.iter().enumerate().find(|(_, t)| !t.is_finite()) {
            return Err(ShortTimeError::BadTime { index, value });
        }
        let n = self.sites();
        let coefficients = (0..n)
            .map(|i| self.coefficients(i, source))
            .collect::<Result<Vec<_>, _>>()?;
        let values = Array2::from_shape_fn((times.len(), n), |(ti, i)| {
            evaluate(&coefficients[i], times[ti], order)
        });
        // Chains have at most a few thousand sites: offsets fit in i32.
        let offsets = (0..n)
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

fn evaluate(c: &[f64; 3], t: f64, order: usize) -> f64 {
    let t2 = t * t;
    match order {
        0 | 1 => c[0],
        2 | 3 => c[0] + c[1] * t2,
        _ => c[0] + t2 * (c[1] + c[2] * t2),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::numerics::zeta::zeta;
    use crate::tolerance::close;
    use rand::Rng;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    fn exact_coefficients(j: &Array2<f64>, delta: f64) -> (Array2<f64>, Array2<f64>) {
        let chain = small_chain_exact::SmallChain::new(j, delta);
        (chain.taylor_coefficient(1), chain.taylor_coefficient(2))
    }

    fn compare_with_exact(couplings: &Couplings, delta: f64) {
        let expansion = ShortTimeExpansion::new(couplings, delta).expect("valid");
        let (c2, c4) = exact_coefficients(couplings.matrix(), delta);
        let n = couplings.sites();
        let scale2 = c2.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let scale4 = c4.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        for i in 0..n {
            for j in 0..n {
                let [c0, got2, got4] = expansion.coefficients(i, j).expect("sites");
                assert!((c0 - if i == j { 1.0 } else { 0.0 }).abs() < 1e-300);
                assert!(
                    (got2 - c2[(i, j)]).abs() < 1e-11 * scale2,
                    "t² ({i},{j}) Δ={delta}: {got2} vs exact {}",
                    c2[(i, j)]
                );
                assert!(
                    (got4 - c4[(i, j)]).abs() < 1e-10 * scale4,
                    "t⁴ ({i},{j}) Δ={delta}: {got4} vs exact {}",
                    c4[(i, j)]
                );
            }
        }
    }

    #[test]
    fn matches_exact_diagonalisation_for_power_law_chains() {
        // Exact dynamics of 6 and 7 spins (brute force above) for power-law
        // couplings, flip-flop and with an Ising term.
        for (sites, alpha, delta) in [(6, 1.0, 0.0), (7, 1.5, 0.0), (6, 0.7, 1.0), (7, 3.0, -0.6)] {
            let c = Couplings::power_law(sites, 1.3, alpha).expect("valid");
            compare_with_exact(&c, delta);
        }
    }

    #[test]
    fn matches_exact_diagonalisation_for_random_couplings() {
        // A dense random symmetric coupling matrix (seeded), 8 spins, Δ ≠ 0.
        let mut rng = ChaCha8Rng::seed_from_u64(17);
        let n = 8;
        let mut m = Array2::zeros((n, n));
        for i in 0..n {
            for j in (i + 1)..n {
                let v: f64 = rng.random_range(-1.0..1.0);
                m[(i, j)] = v;
                m[(j, i)] = v;
            }
        }
        let c = Couplings::from_matrix(m).expect("valid");
        compare_with_exact(&c, 0.0);
        compare_with_exact(&c, 0.8);
    }

    #[test]
    fn agrees_with_sector_exact_dynamics_of_ten_spins() {
        // Cross-check with the crate's sector-by-sector exact dynamics
        // (model::spin_chain, written independently): the residual
        // r(t) = C(t) − c0 − c2 t² = c4 t⁴ + c6 t⁶ + … gives c4 by Richardson
        // extrapolation, (4 r(t)/t⁴ − r(2t)/(2t)⁴)/3 = c4 + O(t⁴).
        use crate::model::spin_chain::SpinChain;
        let c = Couplings::power_law(10, 1.0, 1.2).expect("valid");
        let (t1, t2) = (0.02, 0.04);
        for delta in [0.0, 0.7] {
            let chain = SpinChain::new(&c, delta).expect("valid");
            let exact = chain.correlations_exact(4, &[t1, t2]).expect("exact");
            let e = ShortTimeExpansion::new(&c, delta).expect("valid");
            for i in 0..10 {
                let [c0, c2, c4] = e.coefficients(i, 4).expect("sites");
                let r1 = exact[(0, i)] - c0 - c2 * t1 * t1;
                let r2 = exact[(1, i)] - c0 - c2 * t2 * t2;
                let est = (4.0 * r1 / t1.powi(4) - r2 / t2.powi(4)) / 3.0;
                assert!((est - c4).abs() < 1e-4, "Δ {delta} i {i}: {est} vs {c4}");
            }
        }
    }

    #[test]
    fn two_sites_follow_cos_squared() {
        // Two sites: C_11 = cos²(Jt) = 1 − J²t² + J⁴t⁴/3 − …,
        // C_12 = sin²(Jt) (physics notes, Short-time expansion; Taylor series of
        // cos 2x, A&S 4.3.66).
        let c = Couplings::power_law(2, 0.9, 1.0).expect("valid");
        for delta in [0.0, 2.0] {
            let e = ShortTimeExpansion::new(&c, delta).expect("valid");
            let [_, a2, a4] = e.coefficients(0, 0).expect("sites");
            assert!(close(a2, -0.81, 1e-15, 0.0));
            assert!(close(a4, 0.81 * 0.81 / 3.0, 1e-15, 0.0));
            let [_, b2, b4] = e.coefficients(0, 1).expect("sites");
            assert!(close(b2, 0.81, 1e-15, 0.0));
            assert!(close(b4, -0.81 * 0.81 / 3.0, 1e-15, 0.0));
        }
    }

    #[test]
    fn sum_rule_holds_order_by_order() {
        // Σ_i C_ij(t) = 1 at every order (U(1) symmetry, the physics notes).
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        let n = 30;
        let mut m = Array2::zeros((n, n));
        for i in 0..n {
            for j in (i + 1)..n {
                let v: f64 = rng.random_range(-1.0..1.0) / (j - i) as f64;
                m[(i, j)] = v;
                m[(j, i)] = v;
            }
        }
        let c = Couplings::from_matrix(m).expect("valid");
        for delta in [0.0, 1.7] {
            let e = ShortTimeExpansion::new(&c, delta).expect("valid");
            for source in [0, 11, 29] {
                let mut sums = [0.0; 3];
                let mut scale = 0.0f64;
                for i in 0..n {
                    let co = e.coefficients(i, source).expect("sites");
                    for (s, v) in sums.iter_mut().zip(co) {
                        *s += v;
                    }
                    scale = scale.max(co[2].abs());
                }
                assert!((sums[0] - 1.0).abs() < 1e-15);
                assert!(sums[1].abs() < 1e-13);
                assert!(sums[2].abs() < 1e-12 * scale.max(1.0), "t⁴ sum {}", sums[2]);
            }
        }
    }

    #[test]
    fn bulk_autocorrelation_matches_zeta() {
        // Infinite power-law chain: C(0,t) = 1 − 2ζ(2α) J² t² + …
        // (physics notes); at α = 1 this is 1 − (π²/3) t² (ζ(2) = π²/6, A&S
        // 23.2.24). A 2001-site chain misses 2 Σ_{r>1000} r^{−2α} ≤
        // 2·1000^{1−2α}/(2α−1) of it.
        let n = 2001;
        for alpha in [1.0, 1.5] {
            let c = Couplings::power_law(n, 1.0, alpha).expect("valid");
            let e = ShortTimeExpansion::new(&c, 0.0).expect("valid");
            let [_, c2, _] = e.coefficients(1000, 1000).expect("sites");
            let want = -2.0 * zeta(2.0 * alpha);
            let tail = 2.0 * 1000f64.powf(1.0 - 2.0 * alpha) / (2.0 * alpha - 1.0);
            assert!(
                c2 > want && c2 - want < tail,
                "alpha {alpha}: {c2} vs {want}"
            );
        }
        let c = Couplings::power_law(n, 1.0, 1.0).expect("valid");
        let e = ShortTimeExpansion::new(&c, 0.0).expect("valid");
        let [_, c2, _] = e.coefficients(1000, 1000).expect("sites");
        assert!((c2 + std::f64::consts::PI.powi(2) / 3.0).abs() < 2.0e-3);
    }

    #[test]
    fn map_and_errors() {
        let c = Couplings::power_law(5, 1.0, 2.0).expect("valid");
        let e = ShortTimeExpansion::new(&c, 0.5).expect("valid");
        let map = e.to_correlation_map(2, &[0.0, 0.1, 0.2], 4).expect("map");
        assert_eq!(map.offsets(), &[-2, -1, 0, 1, 2]);
        let direct = e.correlation(3, 2, 0.2, 4).expect("valid");
        let col = map.column_of(1).expect("offset 1");
        assert!(close(map.values()[(2, col)], direct, 1e-15, 0.0));
        assert!(matches!(
            e.correlation(0, 0, 0.1, 6),
            Err(ShortTimeError::BadOrder(6))
        ));
        assert!(matches!(
            e.correlation(5, 0, 0.1, 2),
            Err(ShortTimeError::SiteOutOfRange { site: 5, sites: 5 })
        ));
        assert!(ShortTimeExpansion::new(&c, f64::NAN).is_err());
        assert!(matches!(
            e.to_correlation_map(0, &[0.0, f64::INFINITY], 2),
            Err(ShortTimeError::BadTime { index: 1, .. })
        ));
        // Order 3 equals order 2 (odd orders vanish).
        let o2 = e.correlation(1, 2, 0.3, 2).expect("valid");
        let o3 = e.correlation(1, 2, 0.3, 3).expect("valid");
        assert!((o2 - o3).abs() < 1e-300);
    }
}

/// Brute-force exact dynamics of small spin chains, for tests only: an
/// independent reference for the expansion above and for the free-fermion
/// mapping. Builds the 2^N × 2^N Hamiltonian with bit operations (bit k of
/// a basis state is site k, 1 = up), diagonalises it, and evaluates
/// C_ij(t) = 2^-N Σ_mn cos((E_m−E_n)t) (Z_i)_mn (Z_j)_mn in the eigenbasis,
/// whose t^{2k} Taylor coefficient is
/// (−1)^k/(2k)! 2^-N Σ_mn (E_m−E_n)^{2k} (Z_i)_mn (Z_j)_mn.
#[cfg(test)]
pub(crate) mod small_chain_exact {
    use crate::numerics::linalg::symmetric_eigen;
    use ndarray::Array2;

    pub(crate) struct SmallChain {
        energies: Vec<f64>,
        /// Z_i in the eigenbasis, one matrix per site.
        z_eigen: Vec<Array2<f64>>,
    }

    impl SmallChain {
        pub(crate) fn new(j: &Array2<f64>, delta: f64) -> Self {
            let n = j.nrows();
            let dim = 1usize << n;
            let spin = |state: usize, site: usize| if state >> site & 1 == 1 { 1.0 } else { -1.0 };
            let mut h = Array2::<f64>::zeros((dim, dim));
            for state in 0..dim {
                for a in 0..n {
                    for b in (a + 1)..n {
                        let jab = j[(a, b)];
                        // Ising part (Δ/2) J_ab z_a z_b on the diagonal.
                        h[(state, state)] += 0.5 * delta * jab * spin(state, a) * spin(state, b);
                        // σ+σ− + σ−σ+ swaps antiparallel spins with element 1.
                        if spin(state, a) * spin(state, b) < 0.0 {
                            let other = state ^ (1 << a) ^ (1 << b);
                            h[(other, state)] += jab;
                        }
                    }
                }
            }
            let eig = symmetric_eigen(&h).expect("diagonalises");
            let v = &eig.vectors;
            let z_eigen = (0..n)
                .map(|site| {
                    let mut zv = v.clone();
                    for state in 0..dim {
                        let s = spin(state, site);
                        zv.row_mut(state).mapv_inplace(|x| x * s);
                    }
                    v.t().dot(&zv)
                })
                .collect();
            Self {
                energies: eig.values,
                z_eigen,
            }
        }

        fn sites(&self) -> usize {
            self.z_eigen.len()
        }

        /// 2^-N Σ_mn f(E_m − E_n) (Z_i)_mn (Z_j)_mn for all i, j.
        fn spectral_sum(&self, f: impl Fn(f64) -> f64) -> Array2<f64> {
            let n = self.sites();
            let dim = self.energies.len();
            let weights =
                Array2::from_shape_fn((dim, dim), |(m, k)| f(self.energies[m] - self.energies[k]));
            Array2::from_shape_fn((n, n), |(i, j)| {
                let (zi, zj) = (&self.z_eigen[i], &self.z_eigen[j]);
                let mut total = 0.0;
                for ((a, b), w) in zi.iter().zip(zj.iter()).zip(weights.iter()) {
                    total += a * b * w;
                }
                total / dim as f64
            })
        }

        /// The t^{2k} Taylor coefficient of C_ij(t), all i, j.
        pub(crate) fn taylor_coefficient(&self, k: i32) -> Array2<f64> {
            let factorial: f64 = (1..=2 * k).map(f64::from).product();
            let sign = if k % 2 == 0 { 1.0 } else { -1.0 };
            self.spectral_sum(|de| de.powi(2 * k)) * (sign / factorial)
        }

        /// C_ij(t) for all i, j.
        pub(crate) fn correlation(&self, t: f64) -> Array2<f64> {
            self.spectral_sum(|de| (de * t).cos())
        }
    }
}
