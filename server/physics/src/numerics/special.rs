//! Special functions of a real argument: Γ, ln Γ, digamma, sin(πx),
//! cos(πx), sin(πs/2) and cos(πs/2) with exact argument reduction, erfc,
//! Bessel J_n, the incomplete gamma function Q, and the Taylor coefficients of
//! Γ(1 + η) that series expansions in an exponent need.
//!
//! Owns: accurate evaluation (≲ 1e-15 relative unless stated) of these
//! functions on the positive real axis, and the clear statement of where each
//! one is accurate. Must not know: any physics or where the functions are
//! used.
//!
//! The one door to the `puruspe` crate (architecture test): Γ, erfc, J_n and
//! Q wrap it, whose `gamma` is accurate to ~3e-16
//! relative up to x ≈ 170 (checked against mpmath 1.3 at 30 digits when this
//! module was written). Its `ln_gamma` is a short Lanczos sum good to only
//! ~1e-11 absolute, so `ln_gamma` here is our own: ln of `puruspe::gamma` for
//! small arguments and the Stirling series for large ones.

use std::f64::consts::PI;

/// Euler–Mascheroni constant γ (A&S 6.1.3).
pub const EULER_GAMMA: f64 = 0.577_215_664_901_532_9;

/// ln(2π)/2 (A&S 6.1.41 uses it as the constant of the Stirling series).
const HALF_LN_TWO_PI: f64 = 0.918_938_533_204_672_8;

/// B_{2k}/(2k(2k−1)) for k = 1..=8: the coefficients of the Stirling series
/// ln Γ(x) = (x − ½) ln x − x + ½ ln 2π + Σ_k B_{2k}/(2k(2k−1) x^{2k−1})
/// (A&S 6.1.40; Bernoulli numbers from A&S Table 23.2).
const STIRLING: [f64; 8] = [
    1.0 / 12.0,
    -1.0 / 360.0,
    1.0 / 1260.0,
    -1.0 / 1680.0,
    1.0 / 1188.0,
    -691.0 / 360_360.0,
    1.0 / 156.0,
    -3617.0 / 122_400.0,
];

/// B_{2k}/(2k) for k = 1..=8: the coefficients of the asymptotic digamma
/// series ψ(x) = ln x − 1/(2x) − Σ_k B_{2k}/(2k x^{2k}) (A&S 6.3.18).
const DIGAMMA_ASYMPTOTIC: [f64; 8] = [
    1.0 / 12.0,
    -1.0 / 120.0,
    1.0 / 252.0,
    -1.0 / 240.0,
    1.0 / 132.0,
    -691.0 / 32_760.0,
    1.0 / 12.0,
    -3617.0 / 8160.0,
];

/// Γ(x) for real x (a pole gives ±∞ or NaN as in C's `tgamma`).
///
/// Below x = 10 (and for x ≤ 0): puruspe 0.4 (Fukushima's piecewise
/// polynomial after shifting the argument by a loop of multiplications),
/// ≲ 4e-16 relative. From x = 10 on, the Stirling series in product form
/// Γ(x) = √(2π) [x^{(x−½)/2} e^{−x/2}]² exp(Σ_k B_{2k}/(2k(2k−1) x^{2k−1}))
/// (A&S 6.1.40): `powf` and `exp` are each within an ulp, so the result is
/// within a few ulps (≲ 1e-15) up to the overflow at x ≈ 171.6, and it costs
/// two transcendental calls instead of the shifting loop's x − 3
/// multiplications.
#[must_use]
pub fn gamma(x: f64) -> f64 {
    if x.is_nan() || x < 10.0 {
        return puruspe::gamma(x);
    }
    if x > 171.7 {
        return f64::INFINITY;
    }
    let inv = 1.0 / x;
    let inv2 = inv * inv;
    let mut correction = 0.0;
    for &c in STIRLING.iter().rev() {
        correction = correction * inv2 + c;
    }
    let half = x.powf(0.5 * (x - 0.5)) * (-0.5 * x).exp();
    SQRT_TWO_PI * half * half * (correction * inv).exp()
}

/// √(2π).
const SQRT_TWO_PI: f64 = 2.506_628_274_631_000_7;

/// ln Γ(x) for x > 0 (NaN otherwise).
///
/// For x < 15 it is ln of `gamma` (absolute error ≲ 4e-16); above, the
/// Stirling series with eight correction terms (A&S 6.1.40), whose first
/// omitted term is < 1e-22 at x = 15. The absolute error there is the
/// rounding of (x − ½) ln x − x, about 1e-16 · x ln x.
#[must_use]
pub fn ln_gamma(x: f64) -> f64 {
    if x.is_nan() || x <= 0.0 {
        return f64::NAN;
    }
    if x < 15.0 {
        return gamma(x).ln();
    }
    if x.is_infinite() {
        return f64::INFINITY;
    }
    let inv = 1.0 / x;
    let inv2 = inv * inv;
    let mut correction = 0.0;
    for &c in STIRLING.iter().rev() {
        correction = correction * inv2 + c;
    }
    (x - 0.5) * x.ln() - x + HALF_LN_TWO_PI + correction * inv
}

/// Γ(a)/Γ(b) for a, b > 0 without intermediate overflow.
///
/// Both Γ values are formed directly while they stay finite (relative error
/// ≲ 1e-15); otherwise exp(ln Γ(a) − ln Γ(b)), whose relative error is the
/// absolute error of the two logarithms, ≲ 1e-16 · max(a ln a, b ln b).
#[must_use]
pub fn gamma_ratio(a: f64, b: f64) -> f64 {
    if a <= 170.0 && b <= 170.0 {
        let ga = gamma(a);
        let gb = gamma(b);
        let r = ga / gb;
        if r.is_finite() && r > f64::MIN_POSITIVE {
            return r;
        }
    }
    (ln_gamma(a) - ln_gamma(b)).exp()
}

/// Digamma ψ(x) = Γ'(x)/Γ(x) for x > 0 (NaN otherwise).
///
/// Upward recurrence ψ(x) = ψ(x + 1) − 1/x to x ≥ 12, then the asymptotic
/// series A&S 6.3.18 with eight terms (first omitted term < 1e-18). Absolute
/// error ≲ 1e-15; near the root x₀ ≈ 1.4616 the relative error grows as
/// 1e-15/|ψ(x)|.
#[must_use]
pub fn digamma(x: f64) -> f64 {
    if x.is_nan() || x <= 0.0 {
        return f64::NAN;
    }
    let mut shift = 0.0;
    let mut y = x;
    while y < 12.0 {
        shift += 1.0 / y;
        y += 1.0;
    }
    let inv2 = 1.0 / (y * y);
    let mut tail = 0.0;
    for &c in DIGAMMA_ASYMPTOTIC.iter().rev() {
        tail = tail * inv2 + c;
    }
    y.ln() - 0.5 / y - tail * inv2 - shift
}

/// Splits the product n·m into its nearest integer k and the remainder
/// r = n·m − k, computed exactly with a fused multiply-add (the product of two
/// doubles is the sum of two doubles), so |r| ≤ ½ carries full relative
/// accuracy even when n·m is large.
fn reduce_product(n: f64, m: f64) -> (f64, f64) {
    let p = n * m;
    let e = n.mul_add(m, -p);
    let k = p.round();
    // p − k is exact (Sterbenz) because k is the integer nearest to p.
    let r = (p - k) + e;
    // r may exceed ½ by rounding of e; renormalise once.
    if r > 0.5 {
        (k + 1.0, r - 1.0)
    } else if r < -0.5 {
        (k - 1.0, r + 1.0)
    } else {
        (k, r)
    }
}

/// sin(π·n·m) with the product reduced exactly, so that the result keeps full
/// relative accuracy where it is small (near integers n·m). Used for
/// sin(nπμ/2) in the stable-law series: pass n and μ/2.
#[must_use]
pub fn sin_pi_product(n: f64, m: f64) -> f64 {
    let (k, r) = reduce_product(n, m);
    let s = (PI * r).sin();
    if k.rem_euclid(2.0) >= 1.0 { -s } else { s }
}

/// cos(π·n·m) with the product reduced exactly (see [`sin_pi_product`]).
#[must_use]
pub fn cos_pi_product(n: f64, m: f64) -> f64 {
    let (k, r) = reduce_product(n, m);
    // cos(πr) for |r| ≤ ½ is computed as sin(π(½ − |r|)) so that it keeps
    // relative accuracy near r = ±½, where it vanishes.
    let c = (PI * (0.5 - r.abs())).sin();
    if k.rem_euclid(2.0) >= 1.0 { -c } else { c }
}

/// sin(πx) with exact reduction (x = 1·x).
#[must_use]
pub fn sin_pi(x: f64) -> f64 {
    sin_pi_product(1.0, x)
}

/// cos(πx) with exact reduction.
#[must_use]
pub fn cos_pi(x: f64) -> f64 {
    cos_pi_product(1.0, x)
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

/// Bessel function of the first kind J_n(x) for x ≥ 0 (puruspe 0.4: rational
/// approximations and recurrences, ~1e-15 absolute).
#[must_use]
pub fn bessel_j(order: u32, x: f64) -> f64 {
    puruspe::Jn(order, x)
}

/// The regularised upper incomplete gamma function Q(a, x) (A&S 6.5.3), from
/// puruspe 0.4 (relative accuracy ~3e-11 against scipy).
#[must_use]
pub fn gamma_q(a: f64, x: f64) -> f64 {
    puruspe::gammq(a, x)
}

/// Complementary error function erfc(x) (puruspe 0.4, Chebyshev fit).
///
/// Accuracy measured against mpmath: ≲ 3e-16 relative for x ≤ 2, 1.5e-15 at
/// x = 5, 2.5e-15 at x = 10, 4.5e-14 at x = 20 (the growth is the relative
/// error of exp(−x²) in its tail form).
#[must_use]
pub fn erfc(x: f64) -> f64 {
    puruspe::erfc(x)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tolerance::close;

    #[test]
    fn gamma_is_accurate_on_both_sides_of_the_switch() {
        // mpmath 1.3, 30 digits.
        let cases = [
            (9.75, 207_358.599_890_248_68),
            (10.0, 362_880.0),
            (12.5, 136_843_365.465_565_86),
            (50.5, 4.290_462_912_351_96e63),
            (100.25, 2.948_466_281_838_77e156),
            (170.3, 1.991_587_557_235_89e305),
        ];
        for (x, want) in cases {
            let got = gamma(x);
            assert!(
                close(got, want, 1e-15, 0.0),
                "gamma({x}) = {got:e}, want {want:e}"
            );
        }
        assert!(gamma(172.0).is_infinite());
    }

    #[test]
    fn gamma_matches_handbook_values() {
        // Γ(1/2) = √π (A&S 6.1.8); Γ(5) = 4! (A&S 6.1.6).
        assert!(close(gamma(0.5), PI.sqrt(), 1e-15, 0.0));
        assert!(close(gamma(5.0), 24.0, 1e-15, 0.0));
        // Γ(1/3) = 2.678938534707747634 (mpmath 1.3, 30 digits).
        assert!(close(gamma(1.0 / 3.0), 2.678_938_534_707_747_6, 1e-15, 0.0));
    }

    #[test]
    fn ln_gamma_is_accurate_on_both_sides_of_the_switch() {
        // mpmath 1.3, 30 digits: loggamma(14.5), loggamma(15.5), loggamma(100.25),
        // loggamma(1000.5).
        let cases = [
            (14.5, 23.862_765_841_689_085),
            (15.5, 26.536_914_491_115_614),
            (100.25, 360.284_559_637_764_23),
            (1000.5, 5_908.674_175_848_677),
        ];
        for (x, want) in cases {
            let got = ln_gamma(x);
            assert!(
                close(got, want, 2e-16, 0.0),
                "ln_gamma({x}) = {got}, want {want}"
            );
        }
        // Continuity of the two branches at x = 15 (both are accurate there).
        let below = puruspe::gamma(15.0).ln();
        let x: f64 = 15.0;
        let inv = 1.0 / x;
        let mut corr = 0.0;
        for &c in STIRLING.iter().rev() {
            corr = corr * inv * inv + c;
        }
        let above = (x - 0.5) * x.ln() - x + HALF_LN_TWO_PI + corr * inv;
        assert!((below - above).abs() < 1e-14);
    }

    #[test]
    fn gamma_ratio_handles_large_arguments() {
        // Γ(201)/Γ(200) = 200 exactly (A&S 6.1.15).
        assert!(close(gamma_ratio(201.0, 200.0), 200.0, 1e-13, 0.0));
        // Γ(3.5)/Γ(1.5) = 2.5 · 1.5 (A&S 6.1.15).
        assert!(close(gamma_ratio(3.5, 1.5), 3.75, 1e-15, 0.0));
    }

    #[test]
    fn digamma_matches_handbook_values() {
        // ψ(1) = −γ, ψ(1/2) = −γ − 2 ln 2 (A&S 6.3.2, 6.3.3).
        assert!(close(digamma(1.0), -EULER_GAMMA, 1e-15, 0.0));
        assert!(close(
            digamma(0.5),
            -EULER_GAMMA - 2.0 * 2f64.ln(),
            1e-15,
            0.0
        ));
        // ψ(20.7) = 3.00578467484073188 (mpmath 1.3, 30 digits).
        assert!(close(digamma(20.7), 3.005_784_674_840_732, 1e-15, 0.0));
    }

    #[test]
    fn reduced_sine_keeps_relative_accuracy_near_integers() {
        // sin(π·7·(1 − 1e-9)) = sin(7π − 7πe-9) = sin(7e-9 π) (exact identity);
        // the naive (7π(1 − 1e-9)).sin() loses ~7 digits here.
        let m = 1.0 - 1e-9;
        let want = (7.0 * PI * 1e-9).sin();
        // The double nearest 1 − 1e-9 differs from it by < 1.2e-16 · 1e-9 relative.
        assert!(close(sin_pi_product(7.0, m), want, 1e-7, 0.0));
        assert!(close(sin_pi(0.5), 1.0, 1e-16, 0.0));
        assert!(close(cos_pi(1.0 / 3.0), 0.5, 1e-15, 0.0));
        assert!(close(
            cos_pi_product(3.0, 0.5 + 1e-12),
            (3.0 * PI * 1e-12).sin(),
            1e-3,
            0.0
        ));
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
