//! The project's written float-tolerance policy, in one place.
//!
//! Floats are never compared with `==` (`clippy::float_cmp` is denied). Tests
//! and validation use the helpers here, and each constant says why it has the
//! size it has.

/// Relative tolerance for quantities computed in closed form or by
/// eigendecomposition of matrices of moderate size (≲ 2000): a few hundred
/// ulps of accumulated rounding.
pub const EXACT_REL: f64 = 1e-12;

/// Tolerance for conservation laws (sum rules, probability) of propagators
/// built from an eigendecomposition: rounding grows with the matrix size.
pub const CONSERVATION_ABS: f64 = 1e-12;

/// Relative accuracy promised for the symmetric stable density.
pub const STABLE_DENSITY_REL: f64 = 1e-12;

/// `true` when `a` and `b` agree to relative tolerance `rel`, or to absolute
/// tolerance `abs` (for values near zero where relative error is meaningless).
#[must_use]
pub fn close(a: f64, b: f64, rel: f64, abs: f64) -> bool {
    if a.is_nan() || b.is_nan() {
        return false;
    }
    let diff = (a - b).abs();
    diff <= abs || diff <= rel * a.abs().max(b.abs())
}

/// Relative difference |a − b| / max(|a|, |b|), 0 when both are 0.
#[must_use]
pub fn rel_diff(a: f64, b: f64) -> f64 {
    let scale = a.abs().max(b.abs());
    if scale == 0.0 {
        0.0
    } else {
        (a - b).abs() / scale
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn close_respects_both_tolerances() {
        assert!(close(1.0, 1.0 + 1e-13, 1e-12, 0.0));
        assert!(!close(1.0, 1.0 + 1e-11, 1e-12, 0.0));
        assert!(close(0.0, 1e-15, 0.0, 1e-14));
        assert!(!close(f64::NAN, f64::NAN, 1.0, 1.0));
        assert!(rel_diff(2.0, 1.0) > 0.49 && rel_diff(2.0, 1.0) < 0.51);
    }
}
