//! The Riemann zeta function ζ(s) for real s, and the trigonometric helpers
//! sin(πs/2), cos(πs/2) with exact argument reduction that its reflection
//! formula (and the lattice-walk dispersion) need.
//!
//! Owns: ζ(s) for every real s ≠ 1, the regular part ζ(s) − 1/(s−1) near the
//! pole. Must not know: any physics; callers decide what ζ is used for.
//!
//! Why hand-written: the Rust crates that offer ζ are either unmaintained,
//! limited to s > 1, or accurate only to ~1e-8; the Euler–Maclaurin formula
//! below reaches ~1e-15 relative in a few dozen operations and is short
//! enough to audit.

use std::f64::consts::PI;

use crate::numerics::special::{EULER_GAMMA, ln_gamma, sin_half_pi};

/// Number of terms summed directly before the Euler–Maclaurin correction.
const EM_TERMS: usize = 12;

/// B_{2k} for k = 1..=13 as (numerator, denominator) (A&S Table 23.2).
const BERNOULLI_EVEN: [(f64, f64); 13] = [
    (1.0, 6.0),
    (-1.0, 30.0),
    (1.0, 42.0),
    (-1.0, 30.0),
    (5.0, 66.0),
    (-691.0, 2730.0),
    (7.0, 6.0),
    (-3617.0, 510.0),
    (43867.0, 798.0),
    (-174_611.0, 330.0),
    (854_513.0, 138.0),
    (-236_364_091.0, 2730.0),
    (8_553_103.0, 6.0),
];

/// Euler–Maclaurin sum for ζ(s) without the pole term N^{1−s}/(s−1):
/// Σ_{n<N} n^{−s} + N^{−s}/2 + Σ_k B_{2k}/(2k)! (s)_{2k−1} N^{−s−2k+1}
/// (DLMF 25.2.9 with N = 12 and 12 Bernoulli terms; the first omitted term
/// is below 1e-20 relative for s ≥ 1/2).
fn euler_maclaurin_without_pole(s: f64) -> f64 {
    let n = EM_TERMS as f64;
    // Sum from the smallest term up to limit rounding.
    let mut sum = 0.0;
    for k in (1..EM_TERMS).rev() {
        sum += (k as f64).powf(-s);
    }
    let n_pow = n.powf(-s);
    sum += 0.5 * n_pow;
    // term_k = B_{2k}/(2k)! · s(s+1)…(s+2k−2) · N^{−s−2k+1}
    let mut rising = s; // s(s+1)…(s+2k−2), starting at k = 1
    let mut factorial = 2.0; // (2k)!
    let mut power = n_pow / n; // N^{−s−2k+1}
    let mut correction = 0.0;
    for (k, (num, den)) in BERNOULLI_EVEN.iter().enumerate() {
        let kk = (k + 1) as f64;
        if k > 0 {
            rising *= (s + 2.0 * kk - 3.0) * (s + 2.0 * kk - 2.0);
            factorial *= (2.0 * kk - 1.0) * (2.0 * kk);
            power /= n * n;
        }
        correction += num / den / factorial * rising * power;
    }
    sum + correction
}

/// ζ(s) − 1/(s − 1), the regular part of zeta at its pole, for s ≥ 1/2.
///
/// Equals Euler's constant γ = 0.5772… at s = 1 (DLMF 25.2.4). The pole term
/// of the Euler–Maclaurin formula is combined with −1/(s−1) through
/// `expm1`, so there is no cancellation for s → 1. Accuracy ~2e-16
/// absolute for s ∈ [1/2, 2] (a few ulps of the partial sum that cancels
/// against the pole term), ~1e-15 relative elsewhere.
///
/// Returns NaN for s < 1/2 or NaN.
#[must_use]
pub fn zeta_regular_part(s: f64) -> f64 {
    if s.is_nan() || s < 0.5 {
        return f64::NAN;
    }
    let n = EM_TERMS as f64;
    let u = (1.0 - s) * n.ln();
    // (N^{1−s} − 1)/(s − 1) = −ln N · expm1(u)/u.
    let pole_rest = -n.ln() * expm1_over_x(u);
    euler_maclaurin_without_pole(s) + pole_rest
}

/// expm1(x)/x, equal to 1 at x = 0, accurate to ~1 ulp everywhere.
#[must_use]
pub(crate) fn expm1_over_x(x: f64) -> f64 {
    if x.abs() < 1e-5 {
        1.0 + x / 2.0 + x * x / 6.0 + x * x * x / 24.0
    } else {
        x.exp_m1() / x
    }
}

/// Taylor coefficients c_0..=c_order of Γ(1 + η) = Σ c_m η^m around η = 0.
///
/// From ln Γ(1 + η) = −γη + Σ_{k≥2} (−1)^k ζ(k) η^k / k (A&S 6.1.33), then
/// exponentiated term by term (the power-series exponential recurrence
/// m c_m = Σ_{k=1}^{m} k ℓ_k c_{m−k}). ζ(k) comes from
/// [`zeta`]. Coefficients are accurate to ~1e-15
/// relative; all have modulus ≤ 1 for m ≤ 30 (they tend to (−1)^m).
#[must_use]
pub fn gamma_one_plus_taylor(order: usize) -> Vec<f64> {
    // ℓ_k: coefficients of ln Γ(1 + η).
    let mut ell = vec![0.0; order + 1];
    if order >= 1 {
        ell[1] = -EULER_GAMMA;
    }
    for (k, l) in ell.iter_mut().enumerate().skip(2) {
        let sign = if k % 2 == 0 { 1.0 } else { -1.0 };
        *l = sign * zeta(k as f64) / k as f64;
    }
    let mut c = vec![0.0; order + 1];
    c[0] = 1.0;
    for m in 1..=order {
        let mut acc = 0.0;
        for k in 1..=m {
            acc += k as f64 * ell[k] * c[m - k];
        }
        c[m] = acc / m as f64;
    }
    c
}

/// The Riemann zeta function ζ(s) for real s ≠ 1.
///
/// - s ≥ 1/2: Euler–Maclaurin summation (DLMF 25.2.9), ~1e-15 relative
///   (absolute ~2e-16 near its zero-free neighbourhood of s = 1/2…1).
/// - s < 1/2: the reflection formula ζ(s) = 2^s π^{s−1} sin(πs/2) Γ(1−s)
///   ζ(1−s) (DLMF 25.4.2) with Γ from `puruspe` (~1e-15); for 1 − s > 170
///   the power and gamma factors are combined in logarithms (Stirling's
///   series), losing about |s|·5e-16 relative. Trivial zeros at negative even integers are exact.
///   ζ(0) = −1/2 is returned directly.
///
/// Returns NaN at s = 1 (pole) and for NaN input; ±∞ where the value
/// overflows (s ≲ −300).
#[must_use]
pub fn zeta(s: f64) -> f64 {
    if s.is_nan() {
        return f64::NAN;
    }
    if s.is_infinite() && s > 0.0 {
        return 1.0;
    }
    if s >= 0.5 {
        if (s - 1.0).abs() < f64::EPSILON * 0.25 {
            return f64::NAN;
        }
        if s > 60.0 {
            // 2^−s < 1e-18: only the n = 2, 3 terms matter.
            return 1.0 + 2f64.powf(-s) + 3f64.powf(-s);
        }
        return zeta_regular_part(s) + 1.0 / (s - 1.0);
    }
    if s.abs() < f64::MIN_POSITIVE {
        return -0.5;
    }
    let sine = sin_half_pi(s);
    if sine.abs() < f64::MIN_POSITIVE {
        // Trivial zero at a negative even integer (exact reduction above).
        return 0.0;
    }
    let one_minus = 1.0 - s;
    // ζ(1−s) near its pole: 1/((1−s)−1) must use s itself, since the
    // rounding of 1 − s would be amplified by the pole (ζ(1e-6) would lose
    // five digits).
    let zeta_reflected = if one_minus <= 2.0 {
        zeta_regular_part(one_minus) - 1.0 / s
    } else {
        zeta(one_minus)
    };
    if one_minus <= 170.0 {
        (2.0 * PI).powf(s) / PI * sine * crate::numerics::special::gamma(one_minus) * zeta_reflected
    } else {
        let log_mag = s * (2.0 * PI).ln() - PI.ln() + ln_gamma(one_minus);
        log_mag.exp() * sine * zeta_reflected
    }
}

#[cfg(test)]
mod tests {
    use super::*;
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
    fn integer_values_match_abramowitz_stegun_table() {
        // A&S Table 23.3 (ζ(n), 20 D; values quoted from memory, confirmed
        // by the mpmath fixture below).
        let table = [
            (2.0, 1.644_934_066_848_226_4),
            (3.0, 1.202_056_903_159_594_3),
            (4.0, 1.082_323_233_711_138_2),
            (5.0, 1.036_927_755_143_37),
            (6.0, 1.017_343_061_984_449),
            (10.0, 1.000_994_575_127_818_1),
        ];
        for (s, want) in table {
            assert!(close(zeta(s), want, 2e-15, 0.0), "zeta({s}) = {}", zeta(s));
        }
        // ζ(2) = π²/6, ζ(4) = π⁴/90 (A&S 23.2.24), ζ(−1) = −1/12,
        // ζ(0) = −1/2 (A&S 23.2.15 with B_2), ζ(−2) = 0 (trivial zero).
        assert!(close(zeta(2.0), PI * PI / 6.0, 2e-15, 0.0));
        assert!(close(zeta(4.0), PI.powi(4) / 90.0, 2e-15, 0.0));
        assert!(close(zeta(-1.0), -1.0 / 12.0, 2e-15, 0.0));
        assert!(close(zeta(0.0), -0.5, 1e-16, 0.0));
        assert!(zeta(-2.0).abs() < 1e-300);
        assert!(zeta(1.0).is_nan());
    }

    #[test]
    fn real_values_match_mpmath_fixture() {
        // mpmath 1.3.0 zeta at 40 digits (tests/reference/lattice_reference.py).
        let fx = fixture();
        let rows = fx["zeta"].as_array().expect("zeta rows");
        assert!(rows.len() > 30);
        for row in rows {
            let s = num(&row["s"]);
            let want = num(&row["zeta"]);
            let got = zeta(s);
            // Near s = 1/2 … 1 Euler–Maclaurin keeps ~3e-16 absolute; for
            // s < −20 the powers and Γ(1−s) cost ~|s|·1e-16 relative.
            let rel = if s < -20.0 { 5e-16 * s.abs() } else { 3e-15 };
            assert!(
                close(got, want, rel, 1e-16),
                "zeta({s}) = {got}, mpmath {want}"
            );
        }
    }

    #[test]
    fn regular_part_matches_mpmath_near_pole() {
        // mpmath 1.3.0, ζ(s) − 1/(s−1) at 40 digits; γ at s = 1 (DLMF 25.2.4).
        let fx = fixture();
        for row in fx["zeta_regular"].as_array().expect("rows") {
            let s = num(&row["s"]);
            let want = num(&row["value"]);
            let got = zeta_regular_part(s);
            // About four ulps of the partial sum Σ n^{−s} ≈ 3 that cancels
            // against ln N.
            assert!(close(got, want, 0.0, 1e-15), "s = {s}: {got} vs {want}");
        }
        assert!(zeta_regular_part(0.2).is_nan());
    }

    #[test]
    fn gamma_taylor_coefficients_match_known_values() {
        // Γ(1+η) = 1 − γη + (γ²/2 + π²/12) η² + … (from A&S 6.1.33; the η²
        // coefficient 0.989055995327972555 is mpmath 1.3 taylor(gamma, 1, 2)).
        let c = gamma_one_plus_taylor(4);
        assert!(close(c[1], -EULER_GAMMA, 1e-15, 0.0));
        assert!(close(c[2], 0.989_055_995_327_972_6, 1e-14, 0.0));
        // Σ c_m η^m at η = 0.1 against Γ(1.1) = 0.951350769866873184 (mpmath 1.3, 30 digits).
        let c = gamma_one_plus_taylor(30);
        let v: f64 = c.iter().rev().fold(0.0, |acc, &cm| acc * 0.1 + cm);
        assert!(close(v, 0.951_350_769_866_873_2, 1e-14, 0.0));
    }
}
