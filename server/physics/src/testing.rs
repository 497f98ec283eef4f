//! Shared helpers of the unit tests: closed-form scaling profiles to
//! generate data with known (z, D), and time grids. Test code only.

use std::f64::consts::PI;

/// Diffusive profile, closed form (physics notes: z = 2 is a Gaussian of
/// variance 2Dt): exp(−x²/(4Dt)) / (2√(πDt)).
pub fn gaussian(x: f64, t: f64, d: f64) -> f64 {
    (-x * x / (4.0 * d * t)).exp() / (2.0 * (PI * d * t).sqrt())
}

/// Lévy flight at μ = 1, closed form (physics notes: z = 1 is a Lorentzian of
/// half-width Dt): Dt / (π((Dt)² + x²)).
pub fn cauchy(x: f64, t: f64, d: f64) -> f64 {
    d * t / (PI * ((d * t).powi(2) + x * x))
}

/// `count` times from `t0` to `t1`, evenly spaced in log t.
pub fn log_times(t0: f64, t1: f64, count: usize) -> Vec<f64> {
    (0..count)
        .map(|k| t0 * (t1 / t0).powf(k as f64 / (count - 1) as f64))
        .collect()
}
