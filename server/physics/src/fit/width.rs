//! Quantile half-widths w_q(t) of the spreading profile and their growth
//! exponent, w_q ~ t^(1/z).
//!
//! Owns the definition of the quantile width on a lattice and its error
//! propagation. Must not know where the map came from; the log-log growth
//! fit is the tail module's [`fit_power_law`].
//!
//! # Why a quantile width and never the variance
//! For a Lévy flight (stable index μ < 2, i.e. z < 2) the mean-square
//! displacement is infinite: Σ x² C(x,t) is set by the chain length, not by
//! the dynamics, and its growth exponent means nothing (physics notes,
//! "Conventions and their traps"). A quantile width exists for every μ and,
//! under the scaling form C(x,t) = (Dt)^(−1/z) f(x/(Dt)^(1/z)), grows exactly
//! as (Dt)^(1/z). So this module never computes a variance.
//!
//! # The definition on a lattice
//! Each site x carries its weight C(x,t) spread uniformly over its unit cell
//! [x − ½, x + ½]. The weight within |x| ≤ w is then the piecewise-linear,
//! continuous function
//! W(w) = Σ_{|x|<n} C(x) + (w − a_n)/(b_n − a_n) · [C(n) + C(−n)] for w in
//! [a_n, b_n], a_n = max(n − ½, 0), b_n = n + ½,
//! i.e. the cumulative weight is interpolated linearly between the cell
//! edges. w_q is the smallest w with W(w) ≥ q Σ_x C(x,t), the sum over all
//! offsets of the map at that time. For a smooth profile of width s ≫ 1
//! the cell model is the midpoint rule, so w_q agrees with the continuum
//! quantile to O(1/s) sites; at early times (w ≲ 1) it still varies
//! continuously instead of jumping between integers. Negative C values are
//! allowed (W may then be non-monotone; the first crossing counts).
//!
//! A time is used only when every offset of the map was measured at it
//! (a missing point would bias W); such times are skipped and counted. The
//! width is trusted only inside the symmetric coverage of the map: w ≤ R + ½
//! where every offset in −R..R is present. Points beyond it are reported
//! with `within_coverage = false` and left out of the growth fit.
//!
//! # Errors
//! First-order propagation of independent point errors. With the crossing
//! in ring n (the sites |x| = n), ring weight ρ_n = C(n) + C(−n), cell
//! length L = b_n − a_n and fraction f = (w − a_n)/L:
//! ∂w/∂C(x) = L(q − 1)/ρ_n for |x| < n, L(q − f)/ρ_n for |x| = n, and
//! L q/ρ_n for |x| > n. The growth exponent comes from a weighted fit of
//! ln w = ln B + (1/z) ln t with δ ln w = δw/w (the data's errors when the
//! map has them, otherwise the scatter; see the tail module).

use super::tail::{ErrorBasis, TailError, TimeWindow, fit_power_law};
use crate::CorrelationMap;
use crate::numerics::optimize::Termination;
use crate::numerics::stats::chi2_survival;
use thiserror::Error;

/// Why a width analysis could not be made.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum WidthError {
    #[error("quantile q = {0} must lie strictly between 0 and 1")]
    BadQuantile(f64),
    #[error("width growth fit: {0}")]
    Fit(#[from] TailError),
}

/// Settings of [`fit_width`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WidthOptions {
    /// Fraction of the total weight inside ±w (default ½: the median of |x|).
    pub q: f64,
    pub window: TimeWindow,
}

impl Default for WidthOptions {
    fn default() -> Self {
        Self {
            q: 0.5,
            window: TimeWindow::default(),
        }
    }
}

/// The quantile half-width at one time.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct WidthPoint {
    pub t: f64,
    pub w: f64,
    /// First-order error from the map's errors, `None` without them.
    pub w_err: Option<f64>,
    /// `false` when w lies beyond the symmetric coverage of the map.
    pub within_coverage: bool,
}

/// Result of [`fit_width`].
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct WidthReport {
    pub q: f64,
    /// Every usable time, including those left out of the fit.
    pub points: Vec<WidthPoint>,
    /// z from w ~ B t^(1/z).
    pub z: f64,
    pub z_err: f64,
    /// The fitted growth exponent 1/z and its (symmetric) error.
    pub inverse_z: f64,
    pub inverse_z_err: f64,
    /// B in w = B t^(1/z).
    pub prefactor: f64,
    pub prefactor_err: f64,
    pub chi2: f64,
    pub dof: usize,
    pub chi2_dof: f64,
    /// P(χ² ≥ observed) when the data carry errors; `None` otherwise.
    pub p_value: Option<f64>,
    /// First and last time used in the fit.
    pub t_window: [f64; 2],
    pub points_used: usize,
    /// Times left out because some offset was not measured.
    pub times_skipped_missing: usize,
    /// Times left out because w lay beyond the map's symmetric coverage.
    pub times_beyond_coverage: usize,
    pub error_basis: ErrorBasis,
    pub termination: Termination,
}

/// w_q and its propagated error for one profile C(x) at integer offsets
/// (strictly increasing), per the module documentation. Returns `None` when
/// Σ C ≤ 0 or the weight never reaches q Σ C.
#[must_use]
pub fn quantile_half_width(
    offsets: &[i32],
    values: &[f64],
    errors: Option<&[f64]>,
    q: f64,
) -> Option<(f64, Option<f64>)> {
    let total: f64 = values.iter().sum();
    if total.is_nan() || total <= 0.0 {
        return None;
    }
    let target = q * total;
    let radius = |x: i32| x.unsigned_abs() as usize;
    let max_r = offsets.iter().map(|&x| radius(x)).max()?;
    let mut ring = vec![0.0; max_r + 1];
    for (&x, &c) in offsets.iter().zip(values) {
        ring[radius(x)] += c;
    }
    let mut before = 0.0;
    let mut found = None;
    for (n, &rho) in ring.iter().enumerate() {
        if rho > 0.0 && before + rho >= target {
            found = Some((n, rho, before));
            break;
        }
        before += rho;
    }
    let (n, rho, before) = found?;
    let a = if n == 0 { 0.0 } else { n as f64 - 0.5 };
    let len = n as f64 + 0.5 - a;
    let f = ((target - before) / rho).clamp(0.0, 1.0);
    let w = a + f * len;
    let err = errors.map(|errs| {
        let var: f64 = offsets
            .iter()
            .zip(errs)
            .map(|(&x, &e)| {
                let coef = match radius(x).cmp(&n) {
                    std::cmp::Ordering::Less => q - 1.0,
                    std::cmp::Ordering::Equal => q - f,
                    std::cmp::Ordering::Greater => q,
                };
                (len * coef / rho * e).powi(2)
            })
            .sum();
        var.sqrt()
    });
    Some((w, err))
}

/// Largest R such that every offset in −R..=R is in the map, as the width
/// R + ½ it covers; −½ when x = 0 is missing.
fn coverage_width(offsets: &[i32]) -> f64 {
    let Ok(zero) = offsets.binary_search(&0) else {
        return -0.5;
    };
    let mut r = 0usize;
    while zero > r
        && zero + r + 1 < offsets.len()
        && offsets[zero - r - 1] == -(r as i32 + 1)
        && offsets[zero + r + 1] == r as i32 + 1
    {
        r += 1;
    }
    r as f64 + 0.5
}

/// w_q(t) at every time with t > 0 in the window where all offsets were
/// measured and the width is defined; also returns how many times were
/// skipped for missing points.
#[must_use]
pub fn widths(map: &CorrelationMap, q: f64, window: TimeWindow) -> (Vec<WidthPoint>, usize) {
    let offsets = map.offsets();
    let cover = coverage_width(offsets);
    let mut points = Vec::new();
    let mut skipped = 0;
    let mut values = Vec::with_capacity(offsets.len());
    let mut errors = Vec::with_capacity(offsets.len());
    for (ti, &t) in map.times().iter().enumerate() {
        if !(t > 0.0 && window.contains(t)) {
            continue;
        }
        if map.present().row(ti).iter().any(|&p| !p) {
            skipped += 1;
            continue;
        }
        values.clear();
        values.extend(map.values().row(ti).iter().copied());
        let errs = map.errors().map(|e| {
            errors.clear();
            errors.extend(e.row(ti).iter().copied());
            errors.as_slice()
        });
        if let Some((w, w_err)) = quantile_half_width(offsets, &values, errs, q) {
            points.push(WidthPoint {
                t,
                w,
                w_err,
                within_coverage: w <= cover,
            });
        }
    }
    (points, skipped)
}

/// Quantile widths at every usable time and the growth exponent from
/// w_q = B t^(1/z) (see the module documentation).
///
/// # Errors
/// [`WidthError::BadQuantile`] unless 0 < q < 1;
/// [`WidthError::Fit`] with fewer than 3 usable widths.
pub fn fit_width(map: &CorrelationMap, options: WidthOptions) -> Result<WidthReport, WidthError> {
    let q = options.q;
    if !(q > 0.0 && q < 1.0) {
        return Err(WidthError::BadQuantile(q));
    }
    let (points, times_skipped_missing) = widths(map, q, options.window);
    let used: Vec<&WidthPoint> = points
        .iter()
        .filter(|p| p.within_coverage && p.w > 0.0)
        .collect();
    let times_beyond_coverage = points.iter().filter(|p| !p.within_coverage).count();
    if used.len() < 3 {
        return Err(TailError::TooFewPoints {
            usable: used.len(),
            excluded_nonpositive: 0,
        }
        .into());
    }
    let t: Vec<f64> = used.iter().map(|p| p.t).collect();
    let w: Vec<f64> = used.iter().map(|p| p.w).collect();
    let w_err: Option<Vec<f64>> = used.iter().map(|p| p.w_err).collect();
    let fit = fit_power_law(&t, &w, w_err.as_deref())?;
    // w = B t^(−decay), so 1/z = −decay.
    let inverse_z = -fit.decay;
    Ok(WidthReport {
        q,
        z: 1.0 / inverse_z,
        z_err: fit.decay_err / (inverse_z * inverse_z),
        inverse_z,
        inverse_z_err: fit.decay_err,
        prefactor: fit.amplitude,
        prefactor_err: fit.amplitude_err,
        chi2: fit.chi2,
        dof: fit.dof,
        chi2_dof: fit.chi2_dof,
        p_value: (fit.error_basis == ErrorBasis::Data).then(|| chi2_survival(fit.chi2, fit.dof)),
        t_window: [t[0], t[t.len() - 1]],
        points_used: t.len(),
        times_skipped_missing,
        times_beyond_coverage,
        error_basis: fit.error_basis,
        termination: fit.termination,
        points,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::numerics::stats::{seeded_rng, standard_normal, std_dev};
    use crate::testing::{cauchy, gaussian};
    use crate::tolerance::close;
    use ndarray::Array2;

    fn profile(l: i32, f: impl Fn(f64) -> f64) -> (Vec<i32>, Vec<f64>) {
        let x: Vec<i32> = (-l..=l).collect();
        let c = x.iter().map(|&v| f(f64::from(v))).collect();
        (x, c)
    }

    #[test]
    fn uniform_profile_has_its_closed_form_width() {
        // C = 1/(2L+1) on |x| ≤ L fills [−L−½, L+½] uniformly in the cell
        // model, so w_q = q(L + ½) exactly.
        let (x, c) = profile(10, |_| 1.0 / 21.0);
        for q in [0.1, 0.25, 0.5, 0.9] {
            let (w, err) = quantile_half_width(&x, &c, None, q).expect("defined");
            assert!(close(w, q * 10.5, 1e-12, 0.0), "q = {q}: {w}");
            assert!(err.is_none());
        }
        // A point mass at the origin: W(w) = 2w for w ≤ ½, so w_q = q/2.
        let (x, c) = profile(3, |v| if v == 0.0 { 1.0 } else { 0.0 });
        let (w, _) = quantile_half_width(&x, &c, None, 0.5).expect("defined");
        assert!(close(w, 0.25, 1e-15, 0.0));
    }

    #[test]
    fn wide_gaussian_and_cauchy_match_continuum_quantiles() {
        // Gaussian of standard deviation s = √(2Dt) = 20 (D = 1, t = 200): the median of |X|
        // is s·Φ⁻¹(3/4) = 0.6744897501960817 s (A&S 26.2.23 / Table 26.1,
        // the "probable error"); the cell model's midpoint-rule error is
        // O(1/s²) relative.
        let (x, c) = profile(150, |v| gaussian(v, 200.0, 1.0));
        let (w, _) = quantile_half_width(&x, &c, None, 0.5).expect("defined");
        assert!(close(w, 0.674_489_750_196_081_7 * 20.0, 1e-3, 0.0), "{w}");
        // Cauchy of scale γ = 20 truncated to |x| ≤ L + ½ = 150.5: in the
        // continuum (2/π)atan(w/γ) = q (2/π)atan(150.5/γ), so
        // w = γ tan(q·atan(150.5/γ)) (closed form).
        let gamma = 20.0;
        let (x, c) = profile(150, |v| cauchy(v, gamma, 1.0));
        for q in [0.3, 0.5, 0.8] {
            let (w, _) = quantile_half_width(&x, &c, None, q).expect("defined");
            let want = gamma * (q * (150.5f64 / gamma).atan()).tan();
            assert!(close(w, want, 2e-3, 0.0), "q = {q}: {w} vs {want}");
        }
    }

    #[test]
    fn propagated_error_matches_monte_carlo_spread() {
        // Seeded Monte Carlo: the standard deviation of w over noisy
        // realisations should agree with the first-order formula (its own
        // sampling error is 1/√(2·3000) ≈ 1.3 %).
        let (x, c) = profile(20, |v| gaussian(v, 6.0, 1.0));
        let sigma = 0.003;
        let errs = vec![sigma; x.len()];
        let (w0, err) = quantile_half_width(&x, &c, Some(&errs), 0.5).expect("defined");
        let err = err.expect("errors given");
        let mut rng = seeded_rng(5);
        let samples: Vec<f64> = (0..3000)
            .map(|_| {
                let noisy: Vec<f64> = c
                    .iter()
                    .map(|v| v + sigma * standard_normal(&mut rng))
                    .collect();
                quantile_half_width(&x, &noisy, None, 0.5)
                    .expect("defined")
                    .0
            })
            .collect();
        let spread = std_dev(&samples);
        assert!(
            (spread / err - 1.0).abs() < 0.1,
            "MC {spread} vs linear {err} (w = {w0})"
        );
    }

    fn map_of(times: &[f64], l: i32, f: impl Fn(f64, f64) -> f64) -> CorrelationMap {
        let x: Vec<i32> = (-l..=l).collect();
        let values = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
            f(f64::from(x[j]), times[i])
        });
        CorrelationMap::complete(x, times.to_vec(), values, None).expect("valid")
    }

    fn log_times(t0: f64, t1: f64, n: usize) -> Vec<f64> {
        (0..n)
            .map(|k| t0 * (t1 / t0).powf(k as f64 / (n - 1) as f64))
            .collect()
    }

    #[test]
    fn growth_exponent_of_diffusion_and_levy_flight() {
        // Gaussian: w = 0.6745·√(2D)·t^(1/2) up to O(1/s²): z = 2.
        let times = log_times(5.0, 80.0, 12);
        let map = map_of(&times, 80, |x, t| gaussian(x, t, 1.0));
        let report = fit_width(&map, WidthOptions::default()).expect("fits");
        assert!((report.z - 2.0).abs() < 0.01, "{report:?}");
        assert!(close(
            report.prefactor,
            0.674_489_75 * 2f64.sqrt(),
            0.01,
            0.0
        ));
        assert_eq!(report.points_used, times.len());
        assert_eq!(report.error_basis, ErrorBasis::Scatter);
        // Cauchy (z = 1) on |x| ≤ 300: the truncated tails make the widths
        // γ tan(½ atan(300.5/γ)) with γ = Dt (closed form, see above), whose
        // log-log slope is a little below 1. Compare with the exponent of
        // those closed-form widths, and check that it is near z = 1.
        let times = log_times(5.0, 20.0, 8);
        let map = map_of(&times, 300, |x, t| cauchy(x, t, 1.0));
        let report = fit_width(&map, WidthOptions::default()).expect("fits");
        let closed: Vec<f64> = times
            .iter()
            .map(|&t| t * (0.5 * (300.5 / t).atan()).tan())
            .collect();
        let z_closed = -1.0 / fit_power_law(&times, &closed, None).expect("fits").decay;
        assert!(
            (report.z - z_closed).abs() < 0.005,
            "{report:?} vs {z_closed}"
        );
        assert!((z_closed - 1.0).abs() < 0.05, "{z_closed}");
    }

    #[test]
    fn missing_points_coverage_and_bad_quantiles() {
        let times = log_times(1.0, 40.0, 8);
        let x: Vec<i32> = (-1..=9).collect();
        let values = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
            gaussian(f64::from(x[j]), times[i], 1.0)
        });
        let mut present = Array2::from_elem(values.dim(), true);
        present[(1, 3)] = false;
        let map = CorrelationMap::new(x, times.clone(), values, None, present).expect("valid");
        let report = fit_width(&map, WidthOptions::default()).expect("fits");
        assert_eq!(report.times_skipped_missing, 1);
        // Symmetric coverage is |x| ≤ 1, i.e. w ≤ 1.5; at late times the
        // weight inside ±1.5 falls below half of the (one-sided) total.
        assert!(report.times_beyond_coverage > 0);
        assert!(
            report
                .points
                .iter()
                .all(|p| p.within_coverage == (p.w <= 1.5))
        );
        assert_eq!(
            report.points_used + report.times_beyond_coverage,
            report.points.len()
        );
        assert!(matches!(
            fit_width(
                &map,
                WidthOptions {
                    q: 1.0,
                    ..WidthOptions::default()
                }
            ),
            Err(WidthError::BadQuantile(_))
        ));
        let json = serde_json::to_value(&report).expect("serialises");
        for key in [
            "z",
            "z_err",
            "chi2_dof",
            "t_window",
            "points",
            "termination",
        ] {
            assert!(json.get(key).is_some(), "missing {key}");
        }
    }

    #[test]
    fn negative_values_and_empty_profiles() {
        // A negative ring makes W non-monotone; the first crossing counts.
        let x = [-2, -1, 0, 1, 2];
        let c = [0.3, -0.05, 0.2, -0.05, 0.3];
        // Total 0.7, target 0.35: W(½) = 0.2, W(1½) = 0.1, W(2½) = 0.7, so
        // the crossing is in ring 2 at 1.5 + (0.35 − 0.1)/0.6 (by hand).
        let (w, _) = quantile_half_width(&x, &c, None, 0.5).expect("defined");
        assert!(close(w, 1.5 + 0.25 / 0.6, 1e-14, 0.0));
        assert!(quantile_half_width(&x, &[0.0; 5], None, 0.5).is_none());
    }
}
