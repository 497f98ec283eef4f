//! The classical lattice walk with power-law jump rates: the hydrodynamic
//! reference model of magnetisation spreading.
//!
//! Owns: [`LatticeWalk`], the master equation dP_i/dt = Σ_j γ_ij (P_j − P_i)
//! on a finite open chain (rates γ_ij = γ0 |i−j|^{−2α}, ∝ J_ij², or any
//! symmetric non-negative matrix), solved once by eigendecomposition; and
//! [`InfiniteLatticeWalk`], the same walk on the infinite lattice through its
//! dispersion λ(k) and Fourier propagator, with its small-k coefficients
//! (Lévy coefficient, diffusion constant, dynamical exponent) and the
//! finite-chain escape estimate.
//!
//! Must not know: where rates or couplings come from (files, fits), how
//! results are displayed, anything about spins beyond "rates ∝ J²".
//!
//! Conventions: a walker started at `source` has P_i(0) = δ_{i,source}; as a
//! correlation map, C(x,t) = P_{source+x}(t) with x = i − source. The sum rule
//! Σ_i P_i = 1 holds exactly (rounding aside).

use std::f64::consts::PI;
use std::sync::OnceLock;

use ndarray::{Array1, Array2};
use thiserror::Error;

use crate::model::correlation_map::{CorrelationMap, MapError};
use crate::model::couplings::Couplings;
use crate::numerics::linalg::{LinalgError, symmetric_eigen};
use crate::numerics::quadrature::GaussLegendre;
use crate::numerics::special::{cos_half_pi, gamma, ln_gamma, sin_half_pi};
use crate::numerics::zeta::{expm1_over_x, zeta, zeta_regular_part};

/// Largest finite chain: the dense eigendecomposition costs O(N³) time and
/// 2·N² doubles of memory (64 MB at N = 2000).
pub const MAX_SITES: usize = 2000;

/// Largest coupling exponent accepted by [`InfiniteLatticeWalk`]: beyond it
/// the walk is nearest-neighbour diffusion to far better than 1e-12, and the
/// series coefficients of λ(k) start to overflow.
pub const MAX_INFINITE_ALPHA: f64 = 20.0;

/// Euler's constant γ (DLMF 5.2.3).
const EULER_GAMMA: f64 = 0.577_215_664_901_532_9;

/// Why a lattice walk could not be built or evaluated.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum LatticeWalkError {
    #[error("a lattice walk needs between 2 and {MAX_SITES} sites, got {0}")]
    Sites(usize),
    #[error("rate matrix is {rows}×{cols}, not square")]
    NotSquare { rows: usize, cols: usize },
    #[error("rate ({i},{j}) = {value} is not finite and ≥ 0")]
    BadRate { i: usize, j: usize, value: f64 },
    #[error("rate matrix is not symmetric at ({i},{j}): {a} vs {b}")]
    NotSymmetric { i: usize, j: usize, a: f64, b: f64 },
    #[error("gamma0 must be finite and > 0, got {0}")]
    BadGamma0(f64),
    #[error("alpha = {value} is outside the allowed range {range}")]
    BadAlpha { value: f64, range: &'static str },
    #[error("source site {site} is outside the chain of {sites} sites")]
    SiteOutOfRange { site: usize, sites: usize },
    #[error("time {value} at index {index} is negative or not finite")]
    BadTime { index: usize, value: f64 },
    #[error("every coupling is zero: rates ∝ J² would all vanish")]
    NoCouplings,
    #[error("site offset {0} is too large for a correlation map")]
    OffsetTooLarge(i64),
    #[error(transparent)]
    Linalg(#[from] LinalgError),
    #[error(transparent)]
    Map(#[from] MapError),
}

fn check_times(times: &[f64]) -> Result<(), LatticeWalkError> {
    match times
        .iter()
        .enumerate()
        .find(|(_, t)| !t.is_finite() || **t < 0.0)
    {
        Some((index, &value)) => Err(LatticeWalkError::BadTime { index, value }),
        None => Ok(()),
    }
}

fn check_gamma0(gamma0: f64) -> Result<(), LatticeWalkError> {
    if gamma0.is_finite() && gamma0 > 0.0 {
        Ok(())
    } else {
        Err(LatticeWalkError::BadGamma0(gamma0))
    }
}

/// The lattice walk on a finite open chain. See the module documentation.
///
/// The generator G (G_ij = γ_ij for i ≠ j, G_ii = −Σ_{j≠i} γ_ij) is real
/// symmetric and negative semi-definite, so P(t) = V e^{−r t} Vᵀ P(0) with
/// r_k ≥ 0 the decay rates and V the orthonormal modes. The decomposition is
/// computed once; each later time costs O(N²).
#[derive(Debug, Clone)]
pub struct LatticeWalk {
    rates: Array2<f64>,
    /// −(eigenvalues of G), clamped at 0: the generator is negative
    /// semi-definite exactly, so a positive computed eigenvalue is rounding
    /// and would make the zero mode grow at late times.
    decay_rates: Array1<f64>,
    modes: Array2<f64>,
}

impl LatticeWalk {
    /// Power-law rates γ_ij = γ0 |i−j|^{−2α} on `sites` sites;
    /// `alpha = f64::INFINITY` keeps nearest-neighbour hops only (rate γ0).
    ///
    /// # Errors
    /// Sites outside 2..=[`MAX_SITES`], γ0 not finite and > 0, α ≤ 0 or NaN,
    /// or a failed eigendecomposition.
    pub fn power_law(sites: usize, gamma0: f64, alpha: f64) -> Result<Self, LatticeWalkError> {
        check_gamma0(gamma0)?;
        if alpha.is_nan() || alpha <= 0.0 {
            return Err(LatticeWalkError::BadAlpha {
                value: alpha,
                range: "(0, ∞]",
            });
        }
        if !(2..=MAX_SITES).contains(&sites) {
            return Err(LatticeWalkError::Sites(sites));
        }
        let rates = Array2::from_shape_fn((sites, sites), |(i, j)| {
            let r = i.abs_diff(j);
            match r {
                0 => 0.0,
                1 => gamma0,
                _ if alpha.is_infinite() => 0.0,
                _ => gamma0 * (r as f64).powf(-2.0 * alpha),
            }
        });
        Self::from_rates(rates)
    }

    /// Rates from exchange couplings by Fermi's golden rule (rates ∝ J_ij²,
    /// common practice): γ_ij = γ0 (J_ij / J_max)², with J_max the largest
    /// |J_ij|. So γ0 is the rate between the most strongly coupled pair, and
    /// power-law couplings J/|i−j|^α give exactly γ0 |i−j|^{−2α}.
    ///
    /// # Errors
    /// All couplings zero, more than [`MAX_SITES`] sites, γ0 not finite and
    /// > 0, or a failed eigendecomposition.
    pub fn from_couplings(couplings: &Couplings, gamma0: f64) -> Result<Self, LatticeWalkError> {
        check_gamma0(gamma0)?;
        let j = couplings.matrix();
        let j_max = j.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        if j_max <= 0.0 {
            return Err(LatticeWalkError::NoCouplings);
        }
        let rates = j.mapv(|v| gamma0 * (v / j_max) * (v / j_max));
        Self::from_rates(rates)
    }

    /// Any symmetric non-negative rate matrix γ_ij (the diagonal is ignored).
    /// Symmetry is required to a relative 1e-12 of the largest rate; the
    /// stored matrix is (γ + γᵀ)/2.
    ///
    /// # Errors
    /// Non-square, a size outside 2..=[`MAX_SITES`], a negative or non-finite
    /// rate, asymmetry, or a failed eigendecomposition.
    pub fn from_rates(mut rates: Array2<f64>) -> Result<Self, LatticeWalkError> {
        let (rows, cols) = rates.dim();
        if rows != cols {
            return Err(LatticeWalkError::NotSquare { rows, cols });
        }
        if !(2..=MAX_SITES).contains(&rows) {
            return Err(LatticeWalkError::Sites(rows));
        }
        for ((i, j), &value) in rates.indexed_iter() {
            if i != j && !(value.is_finite() && value >= 0.0) {
                return Err(LatticeWalkError::BadRate { i, j, value });
            }
        }
        let scale = rates
            .indexed_iter()
            .filter(|((i, j), _)| i != j)
            .fold(0.0f64, |m, (_, v)| m.max(*v));
        for i in 0..rows {
            rates[(i, i)] = 0.0;
            for j in (i + 1)..rows {
                let (a, b) = (rates[(i, j)], rates[(j, i)]);
                if (a - b).abs() > 1e-12 * scale {
                    return Err(LatticeWalkError::NotSymmetric { i, j, a, b });
                }
                let mean = 0.5 * (a + b);
                rates[(i, j)] = mean;
                rates[(j, i)] = mean;
            }
        }
        let mut generator = rates.clone();
        for i in 0..rows {
            let out: f64 = rates.row(i).sum();
            generator[(i, i)] = -out;
        }
        let eigen = symmetric_eigen(&generator)?;
        let decay_rates = Array1::from_iter(eigen.values.iter().map(|&l| (-l).max(0.0)));
        Ok(Self {
            rates,
            decay_rates,
            modes: eigen.vectors,
        })
    }

    /// Number of sites N.
    #[must_use]
    pub fn sites(&self) -> usize {
        self.rates.nrows()
    }

    /// The symmetric rate matrix γ_ij (zero diagonal).
    #[must_use]
    pub fn rates(&self) -> &Array2<f64> {
        &self.rates
    }

    /// Relaxation rates r_k ≥ 0 of the modes (−eigenvalues of the generator),
    /// in nonincreasing order: the conserved mode, r = 0, comes last.
    #[must_use]
    pub fn decay_rates(&self) -> &Array1<f64> {
        &self.decay_rates
    }

    /// P_i(t) for a walker started at `source`, as a `times × sites` array.
    /// Cost O(N²) per time after construction. Σ_i P_i(t) = 1 and
    /// P_i(t; source j) = P_j(t; source i) to ~1e-13 (rounding of the
    /// eigendecomposition).
    ///
    /// # Errors
    /// Source outside the chain; a negative or non-finite time (naming its
    /// index).
    pub fn propagate(&self, source: usize, times: &[f64]) -> Result<Array2<f64>, LatticeWalkError> {
        let n = self.sites();
        if source >= n {
            return Err(LatticeWalkError::SiteOutOfRange {
                site: source,
                sites: n,
            });
        }
        check_times(times)?;
        let source_row = self.modes.row(source);
        let mut out = Array2::zeros((times.len(), n));
        for (ti, &t) in times.iter().enumerate() {
            let weights =
                Array1::from_shape_fn(n, |k| (-self.decay_rates[k] * t).exp() * source_row[k]);
            out.row_mut(ti).assign(&self.modes.dot(&weights));
        }
        Ok(out)
    }

    /// [`LatticeWalk::propagate`] as a correlation map with offsets
    /// x = i − source over the whole chain.
    ///
    /// # Errors
    /// As `propagate`, plus times that do not strictly increase.
    pub fn to_correlation_map(
        &self,
        source: usize,
        times: &[f64],
    ) -> Result<CorrelationMap, LatticeWalkError> {
        let values = self.propagate(source, times)?;
        let offsets = (0..self.sites())
            .map(|i| offset_i32(i as i64 - source as i64))
            .collect::<Result<Vec<_>, _>>()?;
        Ok(CorrelationMap::complete(
            offsets,
            times.to_vec(),
            values,
            None,
        )?)
    }
}

fn offset_i32(x: i64) -> Result<i32, LatticeWalkError> {
    i32::try_from(x).map_err(|_| LatticeWalkError::OffsetTooLarge(x))
}

/// Rate at which a walker in the middle of a chain of `length` sites would
/// jump beyond its ends on the infinite lattice:
/// 2 Σ_{r > L/2} γ0 r^{−2α} ≈ 2 γ0 (L/2)^{1−2α} / (2α − 1) (integral
/// estimate of the sum, valid for α > 1/2 and L ≫ 1; relative error
/// O(1/L)). A finite chain lacks these jumps, so over a time t its bulk
/// values differ from the infinite lattice's by about this rate × t.
///
/// Returns NaN for α ≤ 1/2 (the escape rate is infinite) or L ≤ 0.
#[must_use]
pub fn escape_rate_estimate(gamma0: f64, alpha: f64, length: f64) -> f64 {
    if alpha.is_nan() || alpha <= 0.5 || length.is_nan() || length <= 0.0 {
        return f64::NAN;
    }
    2.0 * gamma0 * (length / 2.0).powf(1.0 - 2.0 * alpha) / (2.0 * alpha - 1.0)
}

/// Pairing of the two singular terms of λ(k) near an odd s = 2α = 2m+1+ε,
/// where Γ(1−s) and ζ(s−2m) both have poles that cancel.
#[derive(Debug, Clone, Copy)]
struct NearOddPair {
    m: usize,
    eps: f64,
    /// ζ(1+ε) − 1/ε.
    zeta_regular: f64,
    /// [ln(sin x / x) + ln Γ(1+ε) + Σ_{j=1}^{2m} ln(1+ε/j)] / ε, x = πε/2;
    /// equals H_{2m} − γ at ε = 0.
    shape: f64,
    /// 1/(2m)!.
    inv_factorial: f64,
}

impl NearOddPair {
    /// ε = s − (2m+1) with |ε| ≤ 0.1; `zeta_int[k]` holds ζ(k) for k ≥ 2.
    fn new(m: usize, eps: f64, zeta_int: &[f64]) -> Self {
        // ln Γ(1+ε)/ε = −γ + Σ_{k≥2} (−1)^k ζ(k) ε^{k−1}/k (DLMF 5.7.3).
        let mut lg = -EULER_GAMMA;
        let mut p = 1.0;
        for (k, &z) in zeta_int.iter().enumerate().skip(2) {
            p *= eps;
            let term = if k % 2 == 0 { z } else { -z } * p / k as f64;
            lg += term;
            if term.abs() < 1e-18 {
                break;
            }
        }
        // ln(sin x/x) = −Σ_{n≥1} ζ(2n) (x/π)^{2n} / n with x/π = ε/2, from the
        // product sin x = x Π(1 − x²/(n²π²)) (DLMF 4.22.1); divided by ε
        // this is −Σ ζ(2n) (ε/2)^{2n−1} / (2n), regular at ε = 0.
        let half = eps / 2.0;
        let mut power = half; // (ε/2)^{2n−1}
        let mut ls = 0.0;
        for n in 1..=(zeta_int.len() - 1) / 2 {
            let term = zeta_int[2 * n] * power / (2 * n) as f64;
            ls -= term;
            if term.abs() < 1e-18 {
                break;
            }
            power *= half * half;
        }
        let harmonic: f64 = (1..=2 * m)
            .map(|j| {
                let y = eps / j as f64;
                ln1p_over_x(y) / j as f64
            })
            .sum();
        let inv_factorial = 1.0 / (1..=2 * m).map(|j| j as f64).product::<f64>();
        Self {
            m,
            eps,
            zeta_regular: zeta_regular_part(1.0 + eps),
            shape: ls + lg + harmonic,
            inv_factorial,
        }
    }

    /// A + B = Re[Γ(1−s)(−iθ)^{s−1}] + (−1)^m ζ(s−2m) θ^{2m}/(2m)! for θ > 0,
    /// as (−1)^m θ^{2m}/(2m)! [ζ(1+ε) − 1/ε − expm1(L)/ε],
    /// L = ε (ln θ − shape) (derivation in [`InfiniteLatticeWalk`]).
    fn value(&self, theta: f64) -> f64 {
        let per_eps = theta.ln() - self.shape;
        let big_l = self.eps * per_eps;
        let q = expm1_over_x(big_l) * per_eps;
        let sign = if self.m % 2 == 0 { 1.0 } else { -1.0 };
        sign * theta.powi(2 * self.m as i32) * self.inv_factorial * (self.zeta_regular - q)
    }
}

/// ln(1+y)/y, 1 at y = 0.
fn ln1p_over_x(y: f64) -> f64 {
    if y.abs() < 1e-5 {
        1.0 - y / 2.0 + y * y / 3.0
    } else {
        y.ln_1p() / y
    }
}

/// The lattice walk on the infinite chain, γ_r = γ0 r^{−2α}.
///
/// Dispersion (P_k(t) = e^{−λ(k) t}):
/// λ(k) = 2γ0 Σ_{r≥1} (1 − cos kr) r^{−2α} = 2γ0 [ζ(s) − Re Li_s(e^{ik})],
/// s = 2α. It is evaluated from the expansion of the polylogarithm about
/// z = 1 (DLMF 25.12.12, convergent for |k| < 2π):
/// Re Li_s(e^{iθ}) = π θ^{s−1} / (2 Γ(s) cos(πs/2)) + Σ_{k≥0} (−1)^k ζ(s−2k) θ^{2k}/(2k)!,
/// using Γ(1−s) sin(πs/2) = π/(2Γ(s) cos(πs/2)) (reflection, DLMF 5.5.3),
/// which is regular at even s. Near odd s = 2m+1+ε the θ^{s−1} term and the
/// ζ(s−2m) term have cancelling poles; for |ε| ≤ 0.1 they are combined
/// analytically into (−1)^m θ^{2m}/(2m)! [ζ(1+ε) − 1/ε − (e^{L} − 1)/ε],
/// L = ε (ln θ − [ln(sin x/x) + ln Γ(1+ε) + Σ_{j≤2m} ln(1+ε/j)]/ε),
/// x = πε/2, which at ε = 0 reproduces the logarithmic term of DLMF 25.12.12
/// (e.g. λ ≈ γ0 k² (3/2 − ln|k|) at α = 3/2). Accuracy ~1e-15 relative for
/// |k| ≤ π (tested against mpmath polylog at 40 digits).
///
/// Small-k expansion: λ = A|k|^{2α−1} + γ0 ζ(2α−2) k² + O(k⁴) with
/// A = πγ0/(Γ(2α)|cos πα|) for 1/2 < α < 3/2.
///
/// Propagator P(x,t) = (1/2π)∫_{−π}^{π} cos(kx) e^{−λ(k)t} dk by composite
/// 20-point Gauss–Legendre quadrature on [0, π], with panels no longer than
/// one period of cos(kx) and geometric refinement towards k = 0 where λ has
/// its |k|^{2α−1} cusp; absolute accuracy ~1e-15.
#[derive(Debug, Clone)]
pub struct InfiniteLatticeWalk {
    gamma0: f64,
    alpha: f64,
    /// Coefficient of θ^{s−1} in λ/(2γ0): −π/(2Γ(s) cos(πs/2)) (unused in
    /// the near-odd case).
    power_coeff: f64,
    /// c_k (index k−1) of θ^{2k} in λ/(2γ0): −(−1)^k ζ(s−2k)/(2k)!; the
    /// k = m coefficient is 0 in the near-odd case (carried by the pair).
    even_coeffs: Vec<f64>,
    near_odd: Option<NearOddPair>,
}

/// ζ(σ)/(2k)! for σ = s − 2k, through logarithms of the gamma functions
/// when (2k)! would overflow.
fn zeta_over_factorial(sigma: f64, k: usize) -> f64 {
    let two_k = (2 * k) as f64;
    if 2 * k <= 160 {
        let fact: f64 = (1..=2 * k).map(|j| j as f64).product();
        return zeta(sigma) / fact;
    }
    // Reflection (DLMF 25.4.2): ζ(σ) = (2π)^σ/π sin(πσ/2) Γ(1−σ) ζ(1−σ).
    let log_mag = sigma * (2.0 * PI).ln() - PI.ln() + ln_gamma(1.0 - sigma) - ln_gamma(two_k + 1.0);
    log_mag.exp() * sin_half_pi(sigma) * zeta(1.0 - sigma)
}

impl InfiniteLatticeWalk {
    /// The walk with γ_r = γ0 r^{−2α} on the infinite lattice.
    ///
    /// # Errors
    /// γ0 not finite and > 0; α outside (1/2, [`MAX_INFINITE_ALPHA`]] (for
    /// α ≤ 1/2 the total jump rate diverges).
    pub fn new(gamma0: f64, alpha: f64) -> Result<Self, LatticeWalkError> {
        check_gamma0(gamma0)?;
        if !(alpha > 0.5 && alpha <= MAX_INFINITE_ALPHA) {
            return Err(LatticeWalkError::BadAlpha {
                value: alpha,
                range: "(1/2, 20]",
            });
        }
        let s = 2.0 * alpha;
        let nearest_odd = 2.0 * ((s - 1.0) / 2.0).round() + 1.0;
        let eps = s - nearest_odd;
        let m = ((nearest_odd - 1.0) / 2.0) as usize;
        let near_odd = if m >= 1 && eps.abs() <= 0.1 {
            let zeta_int: Vec<f64> = (0..=40)
                .map(|k| if k >= 2 { zeta(f64::from(k)) } else { f64::NAN })
                .collect();
            Some(NearOddPair::new(m, eps, &zeta_int))
        } else {
            None
        };
        let power_coeff = if near_odd.is_some() {
            0.0
        } else {
            -PI / (2.0 * gamma(s) * cos_half_pi(s))
        };
        // Terms decay like 2(2π)^{s−1} (θ/2π)^{2k} (2k)^{−s} ≤ … 4^{−k} at
        // θ ≤ π: stop once three successive bounds are negligible.
        let mut even_coeffs = Vec::new();
        let mut small = 0;
        for k in 1..=200usize {
            let c = if near_odd.is_some_and(|p| p.m == k) {
                0.0
            } else {
                let sign = if k % 2 == 0 { -1.0 } else { 1.0 };
                sign * zeta_over_factorial(s - 2.0 * k as f64, k)
            };
            even_coeffs.push(c);
            let bound = c.abs() * PI.powi(2 * k as i32);
            if (k as f64) > s / 2.0 + 1.0 && bound < 1e-19 {
                small += 1;
                if small == 3 {
                    break;
                }
            } else {
                small = 0;
            }
        }
        Ok(Self {
            gamma0,
            alpha,
            power_coeff,
            even_coeffs,
            near_odd,
        })
    }

    /// The jump-rate scale γ0.
    #[must_use]
    pub fn gamma0(&self) -> f64 {
        self.gamma0
    }

    /// The coupling exponent α (rates ∝ r^{−2α}).
    #[must_use]
    pub fn alpha(&self) -> f64 {
        self.alpha
    }

    /// λ(k) = 2γ0 Σ_{r≥1} (1 − cos kr) r^{−2α}, even and 2π-periodic in k;
    /// exactly γ0(π|k| − k²/2) at α = 1 for |k| ≤ π. See the type's
    /// documentation for method and accuracy.
    #[must_use]
    pub fn lambda(&self, k: f64) -> f64 {
        if !k.is_finite() {
            return f64::NAN;
        }
        let mut theta = k.abs().rem_euclid(2.0 * PI);
        if theta > PI {
            theta = 2.0 * PI - theta;
        }
        if theta < f64::MIN_POSITIVE {
            return 0.0;
        }
        let t2 = theta * theta;
        let series = self
            .even_coeffs
            .iter()
            .rev()
            .fold(0.0, |acc, c| acc * t2 + c)
            * t2;
        let singular = match &self.near_odd {
            Some(pair) => -pair.value(theta),
            None => self.power_coeff * theta.powf(2.0 * self.alpha - 1.0),
        };
        2.0 * self.gamma0 * (singular + series)
    }

    /// A = πγ0/(Γ(2α)|cos πα|), the coefficient of |k|^{2α−1} in λ(k) for
    /// 1/2 < α < 3/2 (Lévy flight, D of the scaling form); `None` otherwise.
    #[must_use]
    pub fn levy_coefficient(&self) -> Option<f64> {
        if self.alpha < 1.5 {
            Some(PI * self.gamma0 / (gamma(2.0 * self.alpha) * cos_half_pi(2.0 * self.alpha).abs()))
        } else {
            None
        }
    }

    /// γ0 ζ(2α−2), the coefficient of k² in λ(k) for every α ≠ 3/2 (a
    /// correction for α < 3/2, the leading term for α > 3/2; at α = 3/2 the
    /// k² term carries a logarithm and this is `None`).
    #[must_use]
    pub fn k2_coefficient(&self) -> Option<f64> {
        let z = zeta(2.0 * self.alpha - 2.0);
        z.is_finite().then_some(self.gamma0 * z)
    }

    /// The diffusion constant D = γ0 ζ(2α−2) for α > 3/2 (λ ≈ D k², so the
    /// profile is Gaussian of variance 2Dt); `None` for α ≤ 3/2.
    #[must_use]
    pub fn diffusion_coefficient(&self) -> Option<f64> {
        if self.alpha > 1.5 {
            self.k2_coefficient()
        } else {
            None
        }
    }

    /// D of the scaling form exp(−D|k|^z t): the Lévy coefficient for
    /// α < 3/2, the diffusion constant for α > 3/2, `None` at α = 3/2 where
    /// λ ≈ γ0 k² (3/2 − ln|k|) has no pure power law.
    #[must_use]
    pub fn scaling_coefficient(&self) -> Option<f64> {
        self.levy_coefficient()
            .or_else(|| self.diffusion_coefficient())
    }

    /// z = min(2α − 1, 2). Near α = 3/2 the corrections decay like
    /// |k|^{|2α−3|} and exponents fitted on accessible scales drift.
    #[must_use]
    pub fn dynamical_exponent(&self) -> f64 {
        (2.0 * self.alpha - 1.0).min(2.0)
    }

    /// P(x,t) = (1/2π)∫_{−π}^{π} cos(kx) e^{−λ(k)t} dk, the probability to be
    /// x sites from the start after time t. Absolute accuracy ~1e-15.
    ///
    /// # Errors
    /// A negative or non-finite time.
    pub fn propagator(&self, x: i64, t: f64) -> Result<f64, LatticeWalkError> {
        check_times(&[t])?;
        let grid = QuadratureGrid::new(x.unsigned_abs(), self);
        Ok(grid.propagator(x, t))
    }

    /// P(x,t) for x in −x_max..=x_max and the given times, as a correlation
    /// map (the infinite-lattice reference for a bulk source). The quadrature
    /// grid and λ at its nodes are shared by all points.
    ///
    /// # Errors
    /// Bad times (negative, non-finite, not strictly increasing), x_max too
    /// large for i32 offsets.
    pub fn to_correlation_map(
        &self,
        x_max: u32,
        times: &[f64],
    ) -> Result<CorrelationMap, LatticeWalkError> {
        check_times(times)?;
        let x_max_i = offset_i32(i64::from(x_max))?;
        let grid = QuadratureGrid::new(u64::from(x_max), self);
        let offsets: Vec<i32> = (-x_max_i..=x_max_i).collect();
        let mut values = Array2::zeros((times.len(), offsets.len()));
        for (ti, &t) in times.iter().enumerate() {
            let damping: Vec<f64> = grid.lambda.iter().map(|l| (-l * t).exp()).collect();
            for (xi, &x) in offsets.iter().enumerate() {
                values[(ti, xi)] = grid.integrate(i64::from(x), &damping, t);
            }
        }
        Ok(CorrelationMap::complete(
            offsets,
            times.to_vec(),
            values,
            None,
        )?)
    }
}

/// Nodes and weights of the composite rule on [0, π], with λ at the nodes.
struct QuadratureGrid {
    nodes: Vec<f64>,
    weights: Vec<f64>,
    lambda: Vec<f64>,
}

impl QuadratureGrid {
    /// Panels of length ≤ min(π/8, 2π/(x_max+1)) (at most one period of
    /// cos(kx) each), the first one split geometrically (ratio 1/5) down to
    /// a width δ with δ^{min(2α,2)} ≤ 1e-18: there the cusp |k|^{2α−1} is
    /// left to a single panel whose error is below δ·(At δ^{2α−1}) … ≤ δ.
    fn new(x_max: u64, walk: &InfiniteLatticeWalk) -> Self {
        let rule = gauss_legendre_20();
        let (gl_x, gl_w) = (rule.nodes(), rule.weights());
        let uniform = ((x_max as f64 + 1.0) / 2.0).ceil().max(8.0) as usize;
        let h = PI / uniform as f64;
        let mut edges = Vec::new();
        let exponent = (2.0 * walk.alpha).min(2.0);
        let delta = 10f64.powf(-18.0 / exponent).min(h * 0.2);
        let mut a = h;
        edges.push(0.0);
        let mut inner = Vec::new();
        while a > delta {
            inner.push(a);
            a *= 0.2;
        }
        inner.push(a);
        edges.extend(inner.iter().rev());
        edges.extend((2..=uniform).map(|p| h * p as f64));
        let mut nodes = Vec::with_capacity(20 * edges.len());
        let mut weights = Vec::with_capacity(20 * edges.len());
        for w in edges.windows(2) {
            let (lo, hi) = (w[0], w[1]);
            let half = 0.5 * (hi - lo);
            let mid = 0.5 * (hi + lo);
            for (x, wt) in gl_x.iter().zip(gl_w) {
                nodes.push(mid + half * x);
                weights.push(half * wt);
            }
        }
        let lambda = nodes.iter().map(|&k| walk.lambda(k)).collect();
        Self {
            nodes,
            weights,
            lambda,
        }
    }

    fn propagator(&self, x: i64, t: f64) -> f64 {
        let damping: Vec<f64> = self.lambda.iter().map(|l| (-l * t).exp()).collect();
        self.integrate(x, &damping, t)
    }

    /// (1/π) Σ w cos(kx) e^{−λt}; δ_{x0} exactly at t = 0.
    fn integrate(&self, x: i64, damping: &[f64], t: f64) -> f64 {
        if t <= 0.0 {
            return if x == 0 { 1.0 } else { 0.0 };
        }
        let xf = x as f64;
        let sum: f64 = self
            .nodes
            .iter()
            .zip(&self.weights)
            .zip(damping)
            .map(|((k, w), d)| w * (k * xf).cos() * d)
            .sum();
        sum / PI
    }
}

/// The 20-point Gauss–Legendre rule on [−1, 1] (`numerics::quadrature`),
/// built once.
fn gauss_legendre_20() -> &'static GaussLegendre {
    static RULE: OnceLock<GaussLegendre> = OnceLock::new();
    RULE.get_or_init(|| GaussLegendre::new(20))
}

#[cfg(test)]
mod tests;
