//! Autocorrelation tail: the dynamical exponent z from C(0,t) ~ A t^(−1/z),
//! and the local exponent −d ln C(0,t)/d ln t that shows where the power law
//! holds.
//!
//! Owns the log-log power-law fit that the width estimator reuses
//! ([`fit_power_law`]). Must not know where the map came from, nor any
//! other estimator; it reads a [`CorrelationMap`] and returns reports.
//!
//! Under the scaling form C(x,t) ≈ (Dt)^(−1/z) f_z(x/(Dt)^(1/z)) the return
//! probability is C(0,t) = f_z(0) (Dt)^(−1/z): a straight line of slope −1/z
//! on log-log axes (physics notes, "Scaling form"). The fit is a weighted least
//! squares fit of ln C = ln A − (1/z) ln t in log space, with the errors
//! propagated to first order, δ ln C = δC/C. Points with C ≤ 0 (which occur
//! in interacting chains and in noisy data) have no logarithm: they are
//! excluded and counted. Times t ≤ 0 are excluded too (the power law is a
//! late-time statement). The fit is linear in (ln A, 1/z) and runs through
//! the crate's Levenberg–Marquardt engine, which converges in one or two
//! steps and supplies the covariance and the termination reason.
//!
//! The errors: when the map carries errors, `z_err` comes from the unscaled
//! covariance (the data errors are taken as true one-sigma errors) and
//! `chi2_dof` judges them; without errors every point gets unit weight in
//! log space and `z_err` comes from the covariance scaled by χ²/dof (the
//! scatter about the line). `error_basis` says which. z = 1/s for the fitted
//! slope s = 1/z, so z_err = s_err/s² — a first-order error, asymmetric in
//! truth when s_err is not small against s.

use crate::CorrelationMap;
use crate::numerics::optimize::{
    CurveFit, JacobianMethod, LmOptions, OptimizeError, Termination, least_squares,
};
use crate::numerics::stats::chi2_survival;
use thiserror::Error;

/// Why a tail (or width-growth) fit could not be made.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum TailError {
    #[error("the map has no x = 0 column, so C(0,t) is unknown")]
    NoAutocorrelation,
    #[error(
        "only {usable} usable points in the time window (need at least 3); {excluded_nonpositive} had C ≤ 0"
    )]
    TooFewPoints {
        usable: usize,
        excluded_nonpositive: usize,
    },
    #[error("fit failed: {0}")]
    Fit(#[from] OptimizeError),
}

/// Where the quoted errors come from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ErrorBasis {
    /// From the data's one-sigma errors (unscaled covariance).
    Data,
    /// From the scatter about the fit (covariance scaled by χ²/dof), because
    /// the data carry no errors.
    Scatter,
}

/// Time window of a fit; `None` leaves a side open.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct TimeWindow {
    pub t_min: Option<f64>,
    pub t_max: Option<f64>,
}

impl TimeWindow {
    #[must_use]
    pub fn contains(&self, t: f64) -> bool {
        self.t_min.is_none_or(|m| t >= m) && self.t_max.is_none_or(|m| t <= m)
    }
}

/// A power law y = A t^(−s) fitted in log space (see [`fit_power_law`]).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct PowerLawFit {
    /// s in y = A t^(−s) (s = 1/z for C(0,t); s = −1/z for a width).
    pub decay: f64,
    pub decay_err: f64,
    pub amplitude: f64,
    pub amplitude_err: f64,
    /// Correlation coefficient of (ln A, s).
    pub correlation: f64,
    pub chi2: f64,
    pub dof: usize,
    pub chi2_dof: f64,
    pub error_basis: ErrorBasis,
    pub termination: Termination,
}

/// Fits ln y = ln A − s ln t by weighted least squares, σ_ln y = δy/y.
/// Needs t > 0, y > 0 (the caller filters) and at least 3 points.
///
/// # Errors
/// [`TailError::TooFewPoints`] below 3 points; [`TailError::Fit`] if the
/// optimiser rejects the data (e.g. a non-positive error).
pub fn fit_power_law(
    t: &[f64],
    y: &[f64],
    y_err: Option<&[f64]>,
) -> Result<PowerLawFit, TailError> {
    if t.len() < 3 {
        return Err(TailError::TooFewPoints {
            usable: t.len(),
            excluded_nonpositive: 0,
        });
    }
    let ln_t: Vec<f64> = t.iter().map(|v| v.ln()).collect();
    let ln_y: Vec<f64> = y.iter().map(|v| v.ln()).collect();
    let sigma: Option<Vec<f64>> = y_err.map(|e| e.iter().zip(y).map(|(&e, &y)| e / y).collect());
    let fit = CurveFit::new(&ln_t, &ln_y, sigma.as_deref(), 2, |lt, p| p[0] - p[1] * lt)?
        .with_gradient(|lt, _, g| {
            g[0] = 1.0;
            g[1] = -lt;
        });
    // Start from the line through the end points; the problem is linear, so
    // any start converges in a step or two.
    let last = ln_t.len() - 1;
    let s0 = -(ln_y[last] - ln_y[0]) / (ln_t[last] - ln_t[0]);
    let start = [
        ln_y[0] + s0 * ln_t[0],
        if s0.is_finite() { s0 } else { 0.0 },
    ];
    let options = LmOptions {
        jacobian: JacobianMethod::Analytic,
        ..LmOptions::default()
    };
    let report = least_squares(&fit, &start, &options)?;
    let (cov, error_basis) = if y_err.is_some() {
        (&report.covariance, ErrorBasis::Data)
    } else {
        (&report.scaled_covariance, ErrorBasis::Scatter)
    };
    let ln_a_err = cov[0][0].sqrt();
    let decay_err = cov[1][1].sqrt();
    let amplitude = report.params[0].exp();
    Ok(PowerLawFit {
        decay: report.params[1],
        decay_err,
        amplitude,
        amplitude_err: amplitude * ln_a_err,
        correlation: cov[0][1] / (ln_a_err * decay_err),
        chi2: report.chi2,
        dof: report.dof,
        chi2_dof: report.chi2_dof,
        error_basis,
        termination: report.termination,
    })
}

/// Result of [`fit_tail`].
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct TailReport {
    /// Dynamical exponent z = 1/s.
    pub z: f64,
    /// First-order error s_err/s².
    pub z_err: f64,
    /// The fitted decay exponent s = 1/z itself, with its (symmetric) error.
    pub inverse_z: f64,
    pub inverse_z_err: f64,
    /// A in C(0,t) = A t^(−1/z).
    pub amplitude: f64,
    pub amplitude_err: f64,
    pub chi2: f64,
    pub dof: usize,
    pub chi2_dof: f64,
    /// P(χ² ≥ observed) when the data carry errors; `None` otherwise.
    pub p_value: Option<f64>,
    /// First and last time used.
    pub t_window: [f64; 2],
    pub points_used: usize,
    /// Points in the window left out because C ≤ 0.
    pub points_excluded_nonpositive: usize,
    pub error_basis: ErrorBasis,
    pub termination: Termination,
}

/// The usable autocorrelation points (t, C, δC) with t > 0 and C > 0 in a
/// window, and how many points of the window had C ≤ 0.
struct UsableSeries {
    points: Vec<(f64, f64, Option<f64>)>,
    excluded: usize,
}

fn usable_autocorrelation(
    map: &CorrelationMap,
    window: TimeWindow,
) -> Result<UsableSeries, TailError> {
    let series = map.autocorrelation().ok_or(TailError::NoAutocorrelation)?;
    let in_window: Vec<_> = series
        .into_iter()
        .filter(|&(t, _, _)| t > 0.0 && window.contains(t))
        .collect();
    let total = in_window.len();
    let usable: Vec<_> = in_window.into_iter().filter(|&(_, c, _)| c > 0.0).collect();
    let excluded = total - usable.len();
    Ok(UsableSeries {
        points: usable,
        excluded,
    })
}

/// Fits C(0,t) = A t^(−1/z) in the time window (see the module
/// documentation for the method and the errors).
///
/// # Errors
/// [`TailError::NoAutocorrelation`] without an x = 0 column;
/// [`TailError::TooFewPoints`] with fewer than 3 usable points.
pub fn fit_tail(map: &CorrelationMap, window: TimeWindow) -> Result<TailReport, TailError> {
    let UsableSeries { points, excluded } = usable_autocorrelation(map, window)?;
    if points.len() < 3 {
        return Err(TailError::TooFewPoints {
            usable: points.len(),
            excluded_nonpositive: excluded,
        });
    }
    let t: Vec<f64> = points.iter().map(|p| p.0).collect();
    let c: Vec<f64> = points.iter().map(|p| p.1).collect();
    let err: Option<Vec<f64>> = points.iter().map(|p| p.2).collect();
    let fit = fit_power_law(&t, &c, err.as_deref())?;
    let s = fit.decay;
    Ok(TailReport {
        z: 1.0 / s,
        z_err: fit.decay_err / (s * s),
        inverse_z: s,
        inverse_z_err: fit.decay_err,
        amplitude: fit.amplitude,
        amplitude_err: fit.amplitude_err,
        chi2: fit.chi2,
        dof: fit.dof,
        chi2_dof: fit.chi2_dof,
        p_value: (fit.error_basis == ErrorBasis::Data).then(|| chi2_survival(fit.chi2, fit.dof)),
        t_window: [t[0], t[t.len() - 1]],
        points_used: t.len(),
        points_excluded_nonpositive: excluded,
        error_basis: fit.error_basis,
        termination: fit.termination,
    })
}

/// One point of the local-exponent series.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct LocalExponent {
    /// Geometric mean √(t₁t₂) of the two neighbouring times.
    pub t: f64,
    /// −[ln C(0,t₂) − ln C(0,t₁)]/[ln t₂ − ln t₁]; tends to 1/z where the
    /// power law holds.
    pub exponent: f64,
    /// √((δC₁/C₁)² + (δC₂/C₂)²)/(ln t₂ − ln t₁) for independent errors;
    /// `None` when the map has none.
    pub err: Option<f64>,
}

/// The local exponent −d ln C(0,t)/d ln t by finite differences between
/// neighbouring measured times (both with t > 0 and C > 0; a pair that
/// includes an unusable time is skipped, never bridged). A flat stretch of
/// this series is where a tail fit is justified.
///
/// # Errors
/// [`TailError::NoAutocorrelation`] without an x = 0 column.
pub fn local_exponent(map: &CorrelationMap) -> Result<Vec<LocalExponent>, TailError> {
    let series = map.autocorrelation().ok_or(TailError::NoAutocorrelation)?;
    Ok(series
        .windows(2)
        .filter(|w| w[0].0 > 0.0 && w[0].1 > 0.0 && w[1].1 > 0.0)
        .map(|w| {
            let ((t1, c1, e1), (t2, c2, e2)) = (w[0], w[1]);
            let d_ln_t = (t2 / t1).ln();
            let err = match (e1, e2) {
                (Some(e1), Some(e2)) => Some((e1 / c1).hypot(e2 / c2) / d_ln_t),
                _ => None,
            };
            LocalExponent {
                t: (t1 * t2).sqrt(),
                exponent: -(c2 / c1).ln() / d_ln_t,
                err,
            }
        })
        .collect())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::numerics::stats::{seeded_rng, standard_normal};
    use crate::testing::{cauchy, gaussian, log_times};
    use crate::tolerance::close;
    use ndarray::Array2;
    use std::f64::consts::PI;

    fn map_from(
        times: &[f64],
        profile: impl Fn(f64, f64) -> f64,
        errors: Option<&dyn Fn(f64) -> f64>,
    ) -> CorrelationMap {
        let x: Vec<i32> = (-3..=3).collect();
        let values = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
            profile(f64::from(x[j]), times[i])
        });
        let errs = errors.map(|e| values.mapv(e));
        CorrelationMap::complete(x, times.to_vec(), values, errs).expect("valid map")
    }

    #[test]
    fn exact_gaussian_and_cauchy_returns_give_their_exponents() {
        let times = log_times(1.0, 50.0, 12);
        let d = 0.7;
        let map = map_from(&times, |x, t| gaussian(x, t, d), None);
        let report = fit_tail(&map, TimeWindow::default()).expect("fits");
        assert!(close(report.z, 2.0, 1e-9, 0.0), "{report:?}");
        // A = f(0)·D^(−1/2) = 1/(2√(πD)) (closed form).
        assert!(close(
            report.amplitude,
            1.0 / (2.0 * (PI * d).sqrt()),
            1e-9,
            0.0
        ));
        assert_eq!(report.error_basis, ErrorBasis::Scatter);
        assert!(report.termination.is_converged());

        let map = map_from(&times, |x, t| cauchy(x, t, d), None);
        let report = fit_tail(&map, TimeWindow::default()).expect("fits");
        assert!(close(report.z, 1.0, 1e-9, 0.0), "{report:?}");
        assert!(close(report.amplitude, 1.0 / (PI * d), 1e-9, 0.0));
    }

    #[test]
    fn log_space_weights_match_closed_form_regression() {
        // Weighted regression of ln C on ln t with σ = δC/C, by the closed
        // form of Bevington & Robinson (3rd ed., eq. 6.12), computed here
        // independently of the optimiser.
        let times = log_times(2.0, 40.0, 9);
        let mut rng = seeded_rng(3);
        let noise: Vec<f64> = (0..times.len())
            .map(|_| standard_normal(&mut rng))
            .collect();
        let rel = 0.03;
        let x: Vec<i32> = vec![0];
        let values = Array2::from_shape_fn((times.len(), 1), |(i, _)| {
            cauchy(0.0, times[i], 1.3) * (1.0 + rel * noise[i])
        });
        let errors = values.mapv(|v| rel * v);
        let map = CorrelationMap::complete(x, times.clone(), values.clone(), Some(errors))
            .expect("valid");
        let report = fit_tail(&map, TimeWindow::default()).expect("fits");

        let (mut s, mut sx, mut sy, mut sxx, mut sxy) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for (i, &t) in times.iter().enumerate() {
            let w = 1.0 / (rel * rel);
            let (lx, ly) = (t.ln(), values[(i, 0)].ln());
            s += w;
            sx += w * lx;
            sy += w * ly;
            sxx += w * lx * lx;
            sxy += w * lx * ly;
        }
        let delta = s * sxx - sx * sx;
        let slope = (s * sxy - sx * sy) / delta;
        let slope_err = (s / delta).sqrt();
        assert!(
            (report.inverse_z + slope).abs() < 1e-6 * slope_err,
            "{report:?}"
        );
        assert!(close(report.inverse_z_err, slope_err, 1e-9, 0.0));
        assert!(close(report.z_err, slope_err / (slope * slope), 1e-6, 0.0));
        assert_eq!(report.error_basis, ErrorBasis::Data);
        assert!(report.p_value.is_some_and(|p| (0.0..=1.0).contains(&p)));
    }

    #[test]
    fn one_sigma_interval_covers_the_truth_about_68_percent() {
        // Calibration: Gaussian return probability with 2 % Gaussian noise and
        // honest errors; z ± z_err should cover z = 2 in ~68 % of seeds
        // (common practice). With 400 seeds the binomial σ is 2.3 %.
        let times = log_times(2.0, 60.0, 10);
        let (mut covered, mut chi2_dof_sum) = (0, 0.0);
        let seeds = 400;
        for seed in 0..seeds {
            let mut rng = seeded_rng(seed);
            let values = Array2::from_shape_fn((times.len(), 1), |(i, _)| {
                gaussian(0.0, times[i], 1.0) * (1.0 + 0.02 * standard_normal(&mut rng))
            });
            let errors = Array2::from_shape_fn((times.len(), 1), |(i, _)| {
                0.02 * gaussian(0.0, times[i], 1.0)
            });
            let map = CorrelationMap::complete(vec![0], times.clone(), values, Some(errors))
                .expect("valid");
            let r = fit_tail(&map, TimeWindow::default()).expect("fits");
            if (r.z - 2.0).abs() <= r.z_err {
                covered += 1;
            }
            chi2_dof_sum += r.chi2_dof;
        }
        let coverage = f64::from(covered) / seeds as f64;
        assert!((0.60..=0.76).contains(&coverage), "coverage {coverage}");
        // ⟨χ²/dof⟩ = 1 with σ = √(2/8)/√400 = 0.025.
        let mean_chi2_dof = chi2_dof_sum / seeds as f64;
        assert!((mean_chi2_dof - 1.0).abs() < 0.1, "{mean_chi2_dof}");
    }

    #[test]
    fn window_and_nonpositive_points_are_respected_and_counted() {
        let times = log_times(1.0, 30.0, 10);
        let x = vec![0];
        let mut values =
            Array2::from_shape_fn((times.len(), 1), |(i, _)| cauchy(0.0, times[i], 1.0));
        values[(4, 0)] = -1e-3;
        values[(6, 0)] = 0.0;
        let map = CorrelationMap::complete(x, times.clone(), values, None).expect("valid");
        let window = TimeWindow {
            t_min: Some(2.0),
            t_max: Some(20.0),
        };
        let report = fit_tail(&map, window).expect("fits");
        let in_window = times.iter().filter(|&&t| window.contains(t)).count();
        assert_eq!(report.points_excluded_nonpositive, 2);
        assert_eq!(report.points_used, in_window - 2);
        assert!(report.t_window[0] >= 2.0 && report.t_window[1] <= 20.0);
        assert!(close(report.z, 1.0, 1e-9, 0.0));

        let narrow = TimeWindow {
            t_min: Some(2.0),
            t_max: Some(3.0),
        };
        assert!(matches!(
            fit_tail(&map, narrow),
            Err(TailError::TooFewPoints { .. })
        ));
        let no_origin = CorrelationMap::complete(
            vec![1],
            vec![1.0, 2.0, 3.0],
            Array2::from_elem((3, 1), 0.1),
            None,
        )
        .expect("valid");
        assert!(matches!(
            fit_tail(&no_origin, TimeWindow::default()),
            Err(TailError::NoAutocorrelation)
        ));
    }

    #[test]
    fn local_exponent_is_flat_for_a_power_law_with_propagated_errors() {
        // Gaussian: −d ln C(0,t)/d ln t = 1/2 exactly at every t.
        let times = log_times(1.0, 20.0, 8);
        let map = map_from(&times, |x, t| gaussian(x, t, 2.0), Some(&|v: f64| 0.01 * v));
        let series = local_exponent(&map).expect("has x = 0");
        assert_eq!(series.len(), times.len() - 1);
        let step = (times[1] / times[0]).ln();
        for p in &series {
            assert!(close(p.exponent, 0.5, 1e-12, 0.0), "{p:?}");
            // Relative errors 1 % on both points: √2·0.01/Δln t.
            assert!(close(
                p.err.expect("has errors"),
                2f64.sqrt() * 0.01 / step,
                1e-9,
                0.0
            ));
        }
        assert!(close(series[0].t, (times[0] * times[1]).sqrt(), 1e-15, 0.0));
        // t = 0 and C ≤ 0 break the series instead of being bridged.
        let mut values = Array2::from_shape_fn((4, 1), |(i, _)| 1.0 / (1.0 + i as f64));
        values[(2, 0)] = -0.1;
        let map = CorrelationMap::complete(vec![0], vec![0.0, 1.0, 2.0, 3.0], values, None)
            .expect("valid");
        assert!(local_exponent(&map).expect("has x = 0").is_empty());
    }

    #[test]
    fn report_serialises_with_plain_field_names() {
        let times = log_times(1.0, 10.0, 5);
        let map = map_from(&times, |x, t| cauchy(x, t, 1.0), None);
        let report = fit_tail(&map, TimeWindow::default()).expect("fits");
        let json = serde_json::to_value(&report).expect("serialises");
        for key in [
            "z",
            "z_err",
            "chi2_dof",
            "t_window",
            "points_used",
            "termination",
        ] {
            assert!(json.get(key).is_some(), "missing {key}");
        }
        assert_eq!(json["error_basis"], "scatter");
    }
}
