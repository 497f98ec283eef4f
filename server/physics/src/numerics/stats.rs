//! Statistics helpers: seeded random numbers, bootstrap resampling and
//! intervals, means, the χ² tail probability and information criteria.
//!
//! Owns nothing but arithmetic on samples. Must not know what the samples
//! mean (no physics) and never draws from an unseeded generator: every
//! generator is a `ChaCha8Rng` built from an explicit seed, so every result
//! is reproducible from the seed recorded beside it.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use thiserror::Error;

/// Probability mass of a normal distribution within one standard deviation,
/// erf(1/√2) (Abramowitz & Stegun 26.2, Table 26.1).
pub const ONE_SIGMA_LEVEL: f64 = 0.682_689_492_137_085_9;

/// Why a statistic could not be formed.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum StatsError {
    #[error("no values were given")]
    Empty,
    #[error("values and errors differ in length ({values} vs {errors})")]
    Length { values: usize, errors: usize },
    #[error("error {value} at index {index} is not finite and > 0")]
    BadError { index: usize, value: f64 },
    #[error("value {value} at index {index} is not finite")]
    NonFinite { index: usize, value: f64 },
}

/// The crate's random generator, seeded: ChaCha with 8 rounds (fast,
/// statistically strong, identical on every platform).
#[must_use]
pub fn seeded_rng(seed: u64) -> ChaCha8Rng {
    ChaCha8Rng::seed_from_u64(seed)
}

/// A standard normal deviate by the Box–Muller transform (Box & Muller, Ann.
/// Math. Stat. 29, 610 (1958)): √(−2 ln u₁) cos(2π u₂) with u₁ ∈ (0, 1],
/// u₂ ∈ [0, 1). Exact in distribution up to the 53-bit resolution of u₁
/// (|z| ≤ 8.6).
pub fn standard_normal<R: Rng + ?Sized>(rng: &mut R) -> f64 {
    let u1 = 1.0 - rng.random::<f64>();
    let u2 = rng.random::<f64>();
    (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
}

/// Fills `out` with indices drawn uniformly with replacement from 0..n (one
/// nonparametric bootstrap resample; Efron & Tibshirani, "An Introduction to
/// the Bootstrap", 1993, ch. 6). `n` = 0 leaves `out` empty.
pub fn resample_indices_into<R: Rng + ?Sized>(n: usize, rng: &mut R, out: &mut Vec<usize>) {
    out.clear();
    if n == 0 {
        return;
    }
    out.extend((0..n).map(|_| rng.random_range(0..n)));
}

/// n indices drawn uniformly with replacement from 0..n.
pub fn resample_indices<R: Rng + ?Sized>(n: usize, rng: &mut R) -> Vec<usize> {
    let mut out = Vec::with_capacity(n);
    resample_indices_into(n, rng, &mut out);
    out
}

/// Arithmetic mean; NaN for no values.
#[must_use]
pub fn mean(values: &[f64]) -> f64 {
    if values.is_empty() {
        return f64::NAN;
    }
    values.iter().sum::<f64>() / values.len() as f64
}

/// Sample standard deviation with the n − 1 denominator (two-pass, so no
/// cancellation); NaN for fewer than two values.
#[must_use]
pub fn std_dev(values: &[f64]) -> f64 {
    if values.len() < 2 {
        return f64::NAN;
    }
    let m = mean(values);
    let ss: f64 = values.iter().map(|v| (v - m).powi(2)).sum();
    (ss / (values.len() - 1) as f64).sqrt()
}

/// An inverse-variance weighted mean and its one-sigma error.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct WeightedMean {
    pub mean: f64,
    pub err: f64,
    /// Σ (v_i − mean)²/σ_i², to judge whether the values agree.
    pub chi2: f64,
    pub dof: usize,
}

/// μ = Σ v_i/σ_i² / Σ 1/σ_i², σ_μ = (Σ 1/σ_i²)^(−½) (Bevington & Robinson,
/// "Data reduction and error analysis", 3rd ed., eqs. 4.17–4.19).
///
/// # Errors
/// No values, lengths that differ, a value that is not finite, or an error
/// that is not finite and > 0.
pub fn weighted_mean(values: &[f64], errors: &[f64]) -> Result<WeightedMean, StatsError> {
    if values.is_empty() {
        return Err(StatsError::Empty);
    }
    if values.len() != errors.len() {
        return Err(StatsError::Length {
            values: values.len(),
            errors: errors.len(),
        });
    }
    for (index, (&v, &e)) in values.iter().zip(errors).enumerate() {
        if !v.is_finite() {
            return Err(StatsError::NonFinite { index, value: v });
        }
        if !(e.is_finite() && e > 0.0) {
            return Err(StatsError::BadError { index, value: e });
        }
    }
    let (mut sw, mut swv) = (0.0, 0.0);
    for (&v, &e) in values.iter().zip(errors) {
        let w = 1.0 / (e * e);
        sw += w;
        swv += w * v;
    }
    let mean = swv / sw;
    let chi2 = values
        .iter()
        .zip(errors)
        .map(|(&v, &e)| ((v - mean) / e).powi(2))
        .sum();
    Ok(WeightedMean {
        mean,
        err: sw.sqrt().recip(),
        chi2,
        dof: values.len() - 1,
    })
}

/// The p-quantile (0 ≤ p ≤ 1) of sorted values by linear interpolation
/// between order statistics, x_(h) with h = (n − 1)p (Hyndman & Fan, Am.
/// Stat. 50, 361 (1996), definition 7; numpy's default). NaN when empty.
#[must_use]
pub fn quantile_sorted(sorted: &[f64], p: f64) -> f64 {
    let n = sorted.len();
    if n == 0 || p.is_nan() {
        return f64::NAN;
    }
    let h = (n - 1) as f64 * p.clamp(0.0, 1.0);
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(n - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// Sorted copy of the finite values (NaN and infinities are dropped: a
/// failed resample must not move an interval).
fn sorted_finite(samples: &[f64]) -> Vec<f64> {
    let mut v: Vec<f64> = samples.iter().copied().filter(|x| x.is_finite()).collect();
    v.sort_by(f64::total_cmp);
    v
}

/// The central interval holding a fraction `level` of the finite samples:
/// the (1 − level)/2 and (1 + level)/2 quantiles (percentile bootstrap
/// interval, Efron & Tibshirani 1993, §13.3).
#[must_use]
pub fn percentile_interval(samples: &[f64], level: f64) -> (f64, f64) {
    let sorted = sorted_finite(samples);
    let tail = (1.0 - level) / 2.0;
    (
        quantile_sorted(&sorted, tail),
        quantile_sorted(&sorted, 1.0 - tail),
    )
}

/// Summary of a bootstrap distribution of one statistic.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct BootstrapSummary {
    /// Mean of the finite replicates.
    pub mean: f64,
    /// Their standard deviation: the bootstrap standard error.
    pub std: f64,
    /// Central one-sigma (68.27 %) percentile interval.
    pub lower: f64,
    pub upper: f64,
    /// Number of finite replicates used.
    pub replicates: usize,
    /// Replicates that were not finite (failed refits), left out.
    pub failed: usize,
}

/// Mean, standard deviation and one-sigma percentile interval of bootstrap
/// replicates, ignoring non-finite ones (counted in `failed`).
#[must_use]
pub fn summarize_bootstrap(replicates: &[f64]) -> BootstrapSummary {
    let finite = sorted_finite(replicates);
    let tail = (1.0 - ONE_SIGMA_LEVEL) / 2.0;
    BootstrapSummary {
        mean: mean(&finite),
        std: std_dev(&finite),
        lower: quantile_sorted(&finite, tail),
        upper: quantile_sorted(&finite, 1.0 - tail),
        replicates: finite.len(),
        failed: replicates.len() - finite.len(),
    }
}

/// Probability that a χ² variable with `dof` degrees of freedom exceeds
/// `chi2`: Q(dof/2, chi2/2), the regularised upper incomplete gamma function
/// (A&S 26.4.19), from `special::gamma_q` (relative accuracy ~3e-11 against
/// scipy in the tests; ample for a p-value). NaN for dof = 0
/// or a negative or non-finite χ².
#[must_use]
pub fn chi2_survival(chi2: f64, dof: usize) -> f64 {
    if dof == 0 || !chi2.is_finite() || chi2 < 0.0 {
        return f64::NAN;
    }
    crate::numerics::special::gamma_q(dof as f64 / 2.0, chi2 / 2.0)
}

/// Akaike's information criterion from a χ² fit with k parameters:
/// AIC = χ² + 2k (−2 ln L = χ² + const for Gaussian errors; Akaike, IEEE
/// Trans. Autom. Control 19, 716 (1974)). Only differences between models
/// fitted to the same data mean anything.
#[must_use]
pub fn aic(chi2: f64, k: usize) -> f64 {
    chi2 + 2.0 * k as f64
}

/// Small-sample AIC: AIC + 2k(k + 1)/(n − k − 1) (Hurvich & Tsai,
/// Biometrika 76, 297 (1989)); +∞ when n ≤ k + 1.
#[must_use]
pub fn aicc(chi2: f64, k: usize, n: usize) -> f64 {
    if n <= k + 1 {
        return f64::INFINITY;
    }
    let kf = k as f64;
    aic(chi2, k) + 2.0 * kf * (kf + 1.0) / (n - k - 1) as f64
}

/// Bayesian information criterion: BIC = χ² + k ln n (Schwarz, Ann. Stat. 6,
/// 461 (1978)).
#[must_use]
pub fn bic(chi2: f64, k: usize, n: usize) -> f64 {
    chi2 + k as f64 * (n as f64).ln()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::tolerance::close;

    const SAMPLE: [f64; 7] = [3.1, -0.4, 2.2, 7.5, 1.0, 4.4, 0.3];

    #[test]
    fn quantiles_match_numpy_default() {
        // numpy 2.4.6 numpy.percentile(SAMPLE, q) (linear method).
        let mut sorted = SAMPLE.to_vec();
        sorted.sort_by(f64::total_cmp);
        let cases = [
            (0.025, -0.29500000000000004),
            (0.15865525393145708, 0.26635206651211973),
            (0.5, 2.2),
            (0.8413447460685429, 4.549012276874897),
            (0.975, 7.034999999999999),
        ];
        for (p, want) in cases {
            assert!(
                close(quantile_sorted(&sorted, p), want, 1e-13, 1e-15),
                "p = {p}"
            );
        }
        let (lo, hi) = percentile_interval(&SAMPLE, 0.95);
        assert!(close(lo, -0.29500000000000004, 1e-13, 0.0));
        assert!(close(hi, 7.034999999999999, 1e-13, 0.0));
        assert!(quantile_sorted(&[], 0.5).is_nan());
    }

    #[test]
    fn mean_and_std_match_numpy() {
        // numpy 2.4.6: SAMPLE.mean(), numpy.std(SAMPLE, ddof=1).
        assert!(close(mean(&SAMPLE), 2.585714285714286, 1e-14, 0.0));
        assert!(close(std_dev(&SAMPLE), 2.7236180418875255, 1e-14, 0.0));
        assert!(std_dev(&[1.0]).is_nan());
    }

    #[test]
    fn chi2_tail_matches_scipy() {
        // scipy 1.17.1 scipy.stats.chi2.sf(x, k).
        let cases = [
            (3.84, 1, 0.05004352124870519),
            (10.0, 5, 0.07523524614651217),
            (25.0, 30, 0.7250318841806004),
            (100.0, 80, 0.064570368921133),
        ];
        for (x, k, want) in cases {
            assert!(
                close(chi2_survival(x, k), want, 1e-10, 0.0),
                "x = {x}, k = {k}"
            );
        }
        // Two degrees of freedom: Q = exp(−x/2) (A&S 26.4.21, closed form).
        for x in [0.5, 3.0, 20.0] {
            assert!(close(chi2_survival(x, 2), (-x / 2.0_f64).exp(), 1e-10, 0.0));
        }
        assert!(chi2_survival(1.0, 0).is_nan());
    }

    #[test]
    fn weighted_mean_follows_inverse_variance_formula() {
        // By hand: weights 1 and 1/4 → (1·1 + 3/4)/(5/4) = 1.4, σ = (5/4)^(−½).
        let m = weighted_mean(&[1.0, 3.0], &[1.0, 2.0]).expect("valid");
        assert!(close(m.mean, 1.4, 1e-15, 0.0));
        assert!(close(m.err, (0.8f64).sqrt(), 1e-15, 0.0));
        assert!(close(m.chi2, 0.16 + 1.6f64.powi(2) / 4.0, 1e-14, 0.0));
        assert_eq!(m.dof, 1);
        assert!(matches!(
            weighted_mean(&[1.0], &[0.0]),
            Err(StatsError::BadError { index: 0, .. })
        ));
        assert!(matches!(weighted_mean(&[], &[]), Err(StatsError::Empty)));
        assert!(matches!(
            weighted_mean(&[1.0, 2.0], &[1.0]),
            Err(StatsError::Length { .. })
        ));
    }

    #[test]
    fn normal_deviates_have_unit_variance_and_normal_mass() {
        let mut rng = seeded_rng(7);
        let n = 200_000;
        let z: Vec<f64> = (0..n).map(|_| standard_normal(&mut rng)).collect();
        // Sampling errors: σ(mean) = 1/√n ≈ 0.0022, σ(var) ≈ √(2/n) ≈ 0.0032,
        // σ(fraction) ≈ √(0.68·0.32/n) ≈ 0.001; bounds at 5σ.
        assert!(mean(&z).abs() < 0.012);
        assert!((std_dev(&z).powi(2) - 1.0).abs() < 0.016);
        let inside = z.iter().filter(|v| v.abs() < 1.0).count() as f64 / n as f64;
        assert!((inside - ONE_SIGMA_LEVEL).abs() < 0.005, "{inside}");
        // Same seed, same numbers.
        let mut again = seeded_rng(7);
        assert!(close(standard_normal(&mut again), z[0], 0.0, 0.0));
    }

    #[test]
    fn bootstrap_of_the_mean_reproduces_its_plug_in_standard_error() {
        // For the sample mean the bootstrap standard error tends to
        // σ̂/√n with the plug-in σ̂ (divisor n) (Efron & Tibshirani 1993,
        // §5.2, eq. 5.11). With B = 4000 replicates its relative sampling
        // error is about 1/√(2B) ≈ 1.1 %.
        let mut rng = seeded_rng(11);
        let data: Vec<f64> = (0..50)
            .map(|_| 3.0 + 2.0 * standard_normal(&mut rng))
            .collect();
        let n = data.len() as f64;
        let plug_in = std_dev(&data) * ((n - 1.0) / n).sqrt() / n.sqrt();
        let mut idx = Vec::new();
        let reps: Vec<f64> = (0..4000)
            .map(|_| {
                resample_indices_into(data.len(), &mut rng, &mut idx);
                idx.iter().map(|&i| data[i]).sum::<f64>() / n
            })
            .collect();
        let summary = summarize_bootstrap(&reps);
        assert!(
            (summary.std / plug_in - 1.0).abs() < 0.05,
            "{summary:?} vs {plug_in}"
        );
        assert!(summary.lower < mean(&data) && mean(&data) < summary.upper);
        assert_eq!(summary.replicates, 4000);
        let with_failure = summarize_bootstrap(&[1.0, f64::NAN, 2.0, 3.0]);
        assert_eq!((with_failure.replicates, with_failure.failed), (3, 1));
        assert!(resample_indices(5, &mut rng).iter().all(|&i| i < 5));
        assert!(resample_indices(0, &mut rng).is_empty());
    }

    #[test]
    fn information_criteria_follow_their_definitions() {
        // AIC = χ² + 2k; AICc adds 2k(k+1)/(n−k−1); BIC = χ² + k ln n.
        assert!(close(aic(10.0, 3), 16.0, 1e-15, 0.0));
        assert!(close(aicc(10.0, 3, 20), 17.5, 1e-15, 0.0));
        assert!(aicc(10.0, 3, 4).is_infinite());
        assert!(close(
            bic(10.0, 3, 100),
            10.0 + 3.0 * 100f64.ln(),
            1e-15,
            0.0
        ));
    }
}
