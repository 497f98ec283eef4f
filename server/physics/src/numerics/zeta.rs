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

/// sin(π s / 2) with exact reduction of |s| modulo 4, so that its zeros at even
/// integers are exact and values near them keep full relative accuracy.
#[must_use]
pub fn sin_half_pi(s: f64) -> f64 {
    if s < 0.0 {
        // Odd function; reducing |s| keeps tiny negative s exact (rem_euclid
        // would round 4 − |s|).
        return -sin_half_pi(-s);
    }
    // fmod is exact for finite operands.
    let r = s % 4.0;
    let h = PI / 2.0;
    // Each branch maps r to within ±1/2 of the nearest integer; the
    // subtractions are exact (Sterbenz) on these ranges.
    if r <= 0.5 {
        (h * r).sin()
    } else if r <= 1.5 {
        (h * (r - 1.0)).cos()
    } else if r <= 2.5 {
        -(h * (r - 2.0)).sin()
    } else if r <= 3.5 {
        -(h * (r - 3.0)).cos()
    } else {
        -(h * (4.0 - r)).sin()
    }
}

/// cos(π s / 2) with exact reduction of |s| modulo 4 (zeros at odd integers are
/// exact, values near them keep full relative accuracy).
#[must_use]
pub fn cos_half_pi(s: f64) -> f64 {
    // Even function; fmod of |s| is exact.
    let r = s.abs() % 4.0;
    let h = PI / 2.0;
    if r <= 0.5 {
        (h * r).cos()
    } else if r <= 1.5 {
        (h * (1.0 - r)).sin()
    } else if r <= 2.5 {
        -(h * (r - 2.0)).cos()
    } else if r <= 3.5 {
        (h * (r - 3.0)).sin()
    } else {
        (h * (4.0 - r)).cos()
    }
}

/// ln Γ(z) for z ≥ 10 by Stirling's series with eight Bernoulli terms
/// (DLMF 5.11.1); the first omitted term is below 1e-17 relative there.
/// (`puruspe::ln_gamma` is a short Lanczos sum good to only ~1e-10.)
#[must_use]
pub(crate) fn ln_gamma_large(z: f64) -> f64 {
    debug_assert!(z >= 10.0);
    let inv = 1.0 / z;
    let inv2 = inv * inv;
    // B_{2k} / (2k (2k−1)) for k = 1..=8.
    let coeffs = BERNOULLI_EVEN
        .iter()
        .take(8)
        .enumerate()
        .map(|(k, (num, den))| {
            let two_k = 2.0 * (k + 1) as f64;
            num / den / (two_k * (two_k - 1.0))
        })
        .collect::<Vec<_>>();
    let series = coeffs.iter().rev().fold(0.0, |acc, c| acc * inv2 + c) * inv;
    (z - 0.5) * z.ln() - z + 0.5 * (2.0 * PI).ln() + series
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
        (2.0 * PI).powf(s) / PI * sine * puruspe::gamma(one_minus) * zeta_reflected
    } else {
        let log_mag = s * (2.0 * PI).ln() - PI.ln() + ln_gamma_large(one_minus);
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
    fn stirling_series_matches_factorials() {
        // ln Γ(n) = ln (n−1)! (A&S 6.1.6); 20! = 2432902008176640000 exactly.
        assert!(close(
            ln_gamma_large(21.0),
            2_432_902_008_176_640_000f64.ln(),
            1e-15,
            0.0
        ));
        // ln Γ(10.5) = ln(9.5·8.5·…·0.5·√π) (A&S 6.1.12).
        let direct: f64 = (0..10).map(|k| (0.5 + f64::from(k)).ln()).sum::<f64>() + 0.5 * PI.ln();
        assert!(close(ln_gamma_large(10.5), direct, 1e-15, 0.0));
    }

    #[test]
    fn half_pi_trig_is_exact_at_integers() {
        // sin, cos of multiples of π/2: common practice, no source.
        for n in -9i32..=9 {
            let s = f64::from(n);
            let (want_sin, want_cos) = match n.rem_euclid(4) {
                0 => (0.0, 1.0),
                1 => (1.0, 0.0),
                2 => (0.0, -1.0),
                _ => (-1.0, 0.0),
            };
            assert!((sin_half_pi(s) - want_sin).abs() < 1e-300, "sin n={n}");
            assert!((cos_half_pi(s) - want_cos).abs() < 1e-300, "cos n={n}");
        }
        // Near a zero the value is π ε / 2 to full relative accuracy.
        // (ε is taken as the exact offset of the rounded argument.)
        let (s1, s2) = (3.0 + 1e-9, -4.0 + 1e-9);
        assert!(close(cos_half_pi(s1), PI * (s1 - 3.0) / 2.0, 1e-15, 0.0));
        assert!(close(sin_half_pi(s2), PI * (s2 + 4.0) / 2.0, 1e-15, 0.0));
        assert!(close(sin_half_pi(0.3), (0.15 * PI).sin(), 1e-15, 0.0));
        assert!(close(cos_half_pi(5.7), (2.85 * PI).cos(), 1e-14, 0.0));
    }
}
