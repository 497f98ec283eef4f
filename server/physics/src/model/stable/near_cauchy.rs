//! **Why a band around μ = 1.** Near μ = 1 the exponent a = μ/(μ−1) is huge:
//! u = a(ln x + ln(cos θ/sin μθ)) + … loses |a| · 1e-16 to rounding, so the
//! Nolan form is only good to ~1e-16/|μ−1| (1e-14 at the band edge 0.02, 1e-10
//! at 1e-6). Inside the band the density is instead expanded around the
//! Cauchy law: with e^{−k^{1+ε}} = e^{−k} Σ_r (ε ln k)^r/r! T_r(−k) (T_r the
//! Touchard polynomials, whose coefficients are Stirling numbers S(r,a)) and
//! ∫₀^∞ k^a (ln k)^r e^{−zk} dk = ∂_s^r [Γ(s) z^{−s}] at s = a+1, z = 1 − ix,
//! f = (1/π) Re Σ_a (−1)^a a! z^{−(a+1)} Σ_j B_{a,j}(ε) (−ln z)^j/j!, where the
//! B_{a,j} are polynomials in ε built from S(r,a) and the Taylor coefficients
//! of Γ(a+1+η) (precomputed per μ). Checked against mpmath: the ε-series has
//! radius ≈ 0.2–0.3, so order 16 leaves < 1e-17 at |ε| ≤ 0.02 for the x of the
//! middle region (0.8 ≲ x ≲ 2); smaller |ε| keep fewer orders ((5|ε|)^{R+1} <
//! 1e-19). No neighbouring closed form is substituted: at μ = 1 ± 1e-12 the
//! result differs from the Cauchy density by the true O(ε ln x) amount.
//!

use num_complex::Complex64 as Complex;

use super::series::alternate;
use super::*;

pub(super) const NC_DIM: usize = NEAR_CAUCHY_ORDER + 1;

/// f(x; 1+ε) = (1/π) Re Σ_a z^{−(a+1)} P_a(w) and
/// 1 − F = (1/π)[atan(1/x) − Im Σ_{a≥1} z^{−a} Q_a(w)], z = 1 − ix,
/// w = −ln z, with P_a, Q_a polynomials of degree ≤ 16 whose coefficients
/// are fixed by ε (module docs).
#[derive(Debug)]
pub(super) struct NearCauchy {
    /// Highest power of ε kept: the ε-series has radius ≳ 0.2 (its
    /// coefficients grow by ≲ 5 per order), so orders beyond R with
    /// (5|ε|)^{R+1} < 1e-19 are dropped (R ≤ 16).
    pub(super) order: usize,
    /// pdf_coef[a][j] = (−1)^a a!/j! Σ_{r=max(a,j)}^{R} ε^r S(r,a) g_a[r−j].
    pub(super) pdf_coef: Vec<[f64; NC_DIM]>,
    /// cdf_coef[a][j] = (−1)^a (a−1)!/j! Σ_{r=max(a,j)}^{R} ε^r S(r,a) g_{a−1}[r−j] (a ≥ 1).
    pub(super) cdf_coef: Vec<[f64; NC_DIM]>,
}

impl NearCauchy {
    pub(super) fn new(eps: f64) -> Self {
        let r_max = NEAR_CAUCHY_ORDER;
        let mut order = 1;
        while order < r_max && (5.0 * eps.abs()).powi(order as i32 + 1) >= 1e-19 {
            order += 1;
        }
        // g[a][m] = [η^m] Γ(a+1+η)/a! = [η^m] Γ(1+η) Π_{j≤a} (1 + η/j).
        let mut g = vec![[0.0; NC_DIM]; NC_DIM];
        g[0].copy_from_slice(&gamma_one_plus_taylor(r_max));
        for a in 1..NC_DIM {
            for m in 0..NC_DIM {
                let lower = if m > 0 {
                    g[a - 1][m - 1] / a as f64
                } else {
                    0.0
                };
                g[a][m] = g[a - 1][m] + lower;
            }
        }
        // Stirling numbers of the second kind S(r, a) (exact in f64 here).
        let mut stirling = vec![[0.0; NC_DIM]; NC_DIM];
        stirling[0][0] = 1.0;
        for r in 1..NC_DIM {
            for a in 1..=r {
                stirling[r][a] = a as f64 * stirling[r - 1][a] + stirling[r - 1][a - 1];
            }
        }
        let mut eps_pow = [1.0; NC_DIM];
        for r in 1..NC_DIM {
            eps_pow[r] = eps_pow[r - 1] * eps;
        }
        let mut factorial = [1.0; NC_DIM + 1];
        for k in 1..=NC_DIM {
            factorial[k] = factorial[k - 1] * k as f64;
        }
        let mut pdf_coef = vec![[0.0; NC_DIM]; NC_DIM];
        let mut cdf_coef = vec![[0.0; NC_DIM]; NC_DIM];
        for a in 0..NC_DIM {
            let sign = alternate(a);
            for j in 0..NC_DIM {
                let mut b = 0.0;
                let mut b_cdf = 0.0;
                for r in a.max(j)..=order {
                    let e = eps_pow[r] * stirling[r][a];
                    b += e * g[a][r - j];
                    if a >= 1 {
                        b_cdf += e * g[a - 1][r - j];
                    }
                }
                pdf_coef[a][j] = sign * factorial[a] / factorial[j] * b;
                if a >= 1 {
                    cdf_coef[a][j] = sign * factorial[a - 1] / factorial[j] * b_cdf;
                }
            }
        }
        Self {
            order,
            pdf_coef,
            cdf_coef,
        }
    }

    /// z⁻¹ = 1/(1 − ix) and w = −ln(1 − ix).
    pub(super) fn variables(x: f64) -> (Complex, Complex) {
        let d = 1.0 + x * x;
        let zinv = Complex::new(1.0 / d, x / d);
        let w = Complex::new(-0.5 * (x * x).ln_1p(), x.atan());
        (zinv, w)
    }

    /// Σ_{j≤order} c_j w^j (Horner).
    pub(super) fn horner(&self, c: &[f64; NC_DIM], w: Complex) -> Complex {
        let mut p = Complex::new(c[self.order], 0.0);
        for &cj in c[..self.order].iter().rev() {
            p = p * w + Complex::new(cj, 0.0);
        }
        p
    }

    /// Σ_{j≤order} c_j w^j and its derivative in w (Horner).
    pub(super) fn horner_with_derivative(
        &self,
        c: &[f64; NC_DIM],
        w: Complex,
    ) -> (Complex, Complex) {
        let mut p = Complex::new(c[self.order], 0.0);
        let mut dp = Complex::new(0.0, 0.0);
        for &cj in c[..self.order].iter().rev() {
            dp = dp * w + p;
            p = p * w + Complex::new(cj, 0.0);
        }
        (p, dp)
    }

    pub(super) fn pdf(&self, x: f64) -> f64 {
        let (zinv, w) = Self::variables(x);
        let mut total = Complex::new(0.0, 0.0);
        let mut zp = zinv;
        for coef in &self.pdf_coef[..=self.order] {
            total += zp * self.horner(coef, w);
            zp *= zinv;
        }
        total.re / PI
    }

    pub(super) fn pdf_and_derivative(&self, x: f64) -> (f64, f64) {
        let (zinv, w) = Self::variables(x);
        let mut total = Complex::new(0.0, 0.0);
        let mut dtotal = Complex::new(0.0, 0.0);
        let mut zp = zinv;
        for (a, coef) in self.pdf_coef[..=self.order].iter().enumerate() {
            let (p, dp) = self.horner_with_derivative(coef, w);
            total += zp * p;
            // d/dx [z^{−(a+1)} P_a(w)] = i z^{−(a+2)} ((a+1) P_a + P_a').
            let inner = p * (a as f64 + 1.0) + dp;
            let t = zp * zinv * inner;
            dtotal += Complex::new(-t.im, t.re);
            zp *= zinv;
        }
        (total.re / PI, dtotal.re / PI)
    }

    pub(super) fn sf(&self, x: f64) -> f64 {
        let (zinv, w) = Self::variables(x);
        let mut total = Complex::new(0.0, 0.0);
        let mut zp = zinv;
        for coef in self.cdf_coef[1..=self.order].iter() {
            let q = self.horner(coef, w);
            total += zp * q;
            zp *= zinv;
        }
        ((1.0 / x).atan() - total.im) / PI
    }
}
