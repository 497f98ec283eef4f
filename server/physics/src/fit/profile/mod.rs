//! Scaling-function fit: C(x,t) = (Dt)^(−1/μ) f_μ(x/(Dt)^(1/μ)) over a
//! space–time window, for the Gaussian model (μ = 2 fixed) and the
//! symmetric stable model (μ free in [0.3, 2]), weighted by the data errors,
//! with covariance and bootstrap errors, χ²/dof, AIC and BIC, and a stated
//! model preference.
//!
//! Owns the two least-squares problems, the interpolation table that makes
//! the stable model fast, the parametric bootstrap of both fits and the
//! model comparison. Must not know where the window came from (callers pass
//! a windowed [`CorrelationMap`]) nor how the stable density is computed
//! (that is [`StableDensity`]'s business).
//!
//! # Conventions (physics notes, "Scaling form")
//! Σ_x C(x,t) e^{ikx} ≈ exp(−D|k|^μ t), so s(t) = (Dt)^(1/μ) and f_μ is the
//! symmetric stable density of characteristic function exp(−|k|^μ): μ = 2 is
//! the Gaussian exp(−x²/(4Dt))/(2√(πDt)) of variance 2Dt, μ = 1 the
//! Lorentzian Dt/(π((Dt)² + x²)). D is in sites^μ per time unit. There is no
//! amplitude parameter: the sum rule fixes the area (a map that breaks it is
//! flagged by the diagnosis, not absorbed here). Points with t ≤ 0 are left
//! out (the scaling form is a late-time statement).
//!
//! # Errors and goodness of fit
//! With data errors the residuals are (C − model)/δC; parameter errors come
//! from the unscaled covariance (JᵀWJ)⁻¹ and χ²/dof judges the fit. Without
//! errors every point has unit weight, the errors come from the covariance
//! scaled by χ²/dof (the scatter) and `error_basis` says so.
//!
//! The bootstrap is parametric over the data errors: each replicate adds
//! seeded Gaussian noise of the point's error (σ_eff = √(χ²/dof) when the map
//! has none) to the measured values and refits from the best fit; the
//! standard deviation of the replicates is the bootstrap error. Replicate k
//! draws from ChaCha8 stream k of the seed, so the result does not depend on
//! how the replicates are spread over threads.
//!
//! # Information criteria
//! With data errors −2 ln L = χ² + const, so AIC = χ² + 2k (Akaike 1974) and
//! BIC = χ² + k ln n (Schwarz 1978), k = 1 (Gaussian) or 2 (stable). Without
//! errors the noise level is a further fitted parameter and −2 ln L =
//! n ln(χ²/n) + const, so AIC = n ln(χ²/n) + 2(k + 1) and BIC =
//! n ln(χ²/n) + (k + 1) ln n. Only differences between the two models on the
//! same points mean anything. The stable model is preferred when its AIC is
//! lower by more than 2; within 2 the data do not distinguish the models
//! and the simpler Gaussian is kept (the "ΔAIC ≤ 2: substantial support"
//! rule of Burnham & Anderson, "Model Selection and Multimodel Inference",
//! 2nd ed. 2002, §2.6, from memory). The Gaussian is the stable model at
//! μ = 2, the edge of μ's range: the likelihood ratio of a parameter on the
//! boundary of its space follows ½χ²₀ + ½χ²₁ rather than χ²₁ (Chernoff,
//! Ann. Math. Stat. 25, 573 (1954); Self & Liang, JASA 82, 605 (1987)), so
//! the rule is a rule of thumb there, and every stated preference says so.
//! The Gaussian's μ is reported with `mu_fixed = true` (its `mu_err` of 0 is
//! not a measurement).
//!
//! # The stable model's interpolation table
//! Each residual evaluation needs f_μ at every point of the window (thousands
//! of points, each a quadrature or series in [`StableDensity`]). Instead,
//! for each μ the fit tabulates g(w) = ln f_μ(u) on a uniform grid in
//! w = asinh(u/c), c = min(1, √(2Γ(1/μ)/Γ(3/μ))) (the curvature scale of
//! f_μ at 0, so that the sharp peak of small μ is resolved), step 0.03, up to
//! twice the largest |x|/s of the window, and interpolates it by a clamped
//! cubic spline (g'(0) = 0 by symmetry; at the far end the slope from the
//! density's analytic ∂f/∂x). Node values come from
//! [`StableDensity::log_pdf`], so far tails never underflow. In w the power-law tail is a straight line and the Gaussian
//! core smooth, so the interpolation error is ~h⁴|g''''|/384: below 3e-6
//! of f plus 1e-8 of the peak f(0) for every μ (largest just below μ = 2,
//! where ln f bends from the Gaussian core into the power-law tail; the
//! tests compare the table with closed forms and with the density itself),
//! far below any statistical error. ∂f/∂u comes from the spline, ∂f/∂μ from
//! central differences of tables at μ ± 1e-4 (one-sided at a bound). The
//! stable model is evaluated once per distinct (t, |x|).
//!
//! # The bootstrap's shared tables
//! Building a table costs a [`StableDensity`] construction (tens of µs) and
//! ~150 density values; a refit needs several. The replicates, however, move
//! μ only by about its standard error σ_μ, so before they start the fit
//! tabulates the density at 6–25 equally spaced μ across μ̂ ± 6σ_μ (spacing
//! ≤ 0.01 where possible) on one common u grid, and each replicate
//! interpolates ln f in μ by four-point Lagrange polynomials (∂ ln f/∂μ from
//! the same polynomials). The tests bound that interpolation by 5e-8 in ln f.
//! A replicate that leaves the band falls back to its own tables. Refits
//! stop when the step or the χ² change is below 1e-6 / 1e-8 relative (about
//! 1e-3 of a standard error), looser than the reported fit.

use std::cell::{Cell, RefCell};
use std::collections::HashMap;
use std::f64::consts::PI;
use std::rc::Rc;

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use thiserror::Error;

use crate::CorrelationMap;
use crate::fit::diagnosis::plus_minus;
use crate::fit::tail::ErrorBasis;
use crate::model::stable::{MU_MIN, StableDensity};
use crate::numerics::optimize::{
    JacobianMethod, LeastSquaresProblem, LmOptions, OptimizeError, Termination, least_squares,
};
use crate::numerics::special::gamma;
use crate::numerics::stats::{
    BootstrapSummary, chi2_survival, standard_normal, summarize_bootstrap,
};

mod models;
mod table;

use models::*;
use table::*;

/// Why a profile fit could not be made.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ProfileError {
    #[error(
        "only {points} points with t > 0 in the window; the {model} model needs at least {needed}"
    )]
    TooFewPoints {
        points: usize,
        model: &'static str,
        needed: usize,
    },
    #[error("mu bounds [{lower}, {upper}] must lie within [0.3, 2] and increase")]
    BadMuBounds { lower: f64, upper: f64 },
    #[error("the stable density is unavailable at mu = {mu}: {reason}")]
    Density { mu: f64, reason: String },
    #[error("fit failed: {0}")]
    Fit(#[from] OptimizeError),
}

/// Which scaling function is fitted.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ProfileModel {
    /// μ = 2: exp(−x²/(4Dt))/(2√(πDt)), one parameter D.
    Gaussian,
    /// Symmetric stable density of index μ, parameters D and μ.
    Stable,
}

impl ProfileModel {
    /// Lower-case name as used in reports.
    #[must_use]
    pub fn name(self) -> &'static str {
        match self {
            Self::Gaussian => "gaussian",
            Self::Stable => "stable",
        }
    }

    fn parameters(self) -> usize {
        match self {
            Self::Gaussian => 1,
            Self::Stable => 2,
        }
    }
}

/// Settings of [`fit_profile`] and [`compare_profiles`].
#[derive(Debug, Clone, PartialEq)]
pub struct ProfileOptions {
    /// Bootstrap replicates K (0: covariance errors only).
    pub bootstrap: usize,
    pub seed: u64,
    /// Bounds of μ for the stable model, within [0.3, 2].
    pub mu_bounds: [f64; 2],
}

impl Default for ProfileOptions {
    fn default() -> Self {
        Self {
            bootstrap: 0,
            seed: 0,
            mu_bounds: [MU_MIN, 2.0],
        }
    }
}

/// Bootstrap errors of a profile fit.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ProfileBootstrap {
    pub resamples: usize,
    #[serde(rename = "D")]
    pub d: BootstrapSummary,
    /// `None` for the Gaussian model (μ fixed).
    pub mu: Option<BootstrapSummary>,
}

/// Result of [`fit_profile`].
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ProfileReport {
    pub model: ProfileModel,
    /// Stable index μ (= z); 2 for the Gaussian model.
    pub mu: f64,
    /// One-sigma error of μ from the covariance; 0 when μ is fixed, which
    /// `mu_fixed` says (the 0 is not a measurement).
    pub mu_err: f64,
    /// μ was fixed by the model (the Gaussian's μ = 2), not fitted.
    pub mu_fixed: bool,
    /// Transport coefficient D, sites^μ per time unit.
    #[serde(rename = "D")]
    pub d: f64,
    #[serde(rename = "D_err")]
    pub d_err: f64,
    /// Correlation coefficient of (D, μ) (`None` for the Gaussian model).
    pub correlation: Option<f64>,
    /// Bootstrap standard errors, when the bootstrap ran.
    pub mu_err_bootstrap: Option<f64>,
    #[serde(rename = "D_err_bootstrap")]
    pub d_err_bootstrap: Option<f64>,
    pub bootstrap: Option<ProfileBootstrap>,
    pub chi2: f64,
    pub dof: usize,
    pub chi2_dof: f64,
    /// P(χ² ≥ observed) when the data carry errors.
    pub p_value: Option<f64>,
    pub aic: f64,
    pub bic: f64,
    /// Points used (t > 0, present).
    pub points: usize,
    pub t_window: [f64; 2],
    pub x_window: [i32; 2],
    /// μ ended on one of its bounds (its covariance error is then
    /// meaningless).
    pub mu_at_bound: bool,
    pub error_basis: ErrorBasis,
    pub iterations: usize,
    pub termination: Termination,
    pub seed: u64,
}

/// Both fits and the stated preference (module documentation).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ProfileComparison {
    pub gaussian: ProfileReport,
    pub stable: ProfileReport,
    pub preferred: ProfileModel,
    /// AIC(Gaussian) − AIC(stable): positive favours the stable model.
    pub delta_aic: f64,
    /// BIC(Gaussian) − BIC(stable).
    pub delta_bic: f64,
    pub reason: String,
}

impl ProfileComparison {
    /// The report of the preferred model.
    #[must_use]
    pub fn preferred_report(&self) -> &ProfileReport {
        match self.preferred {
            ProfileModel::Gaussian => &self.gaussian,
            ProfileModel::Stable => &self.stable,
        }
    }
}

/// The points of the window: offsets, time indices, values and weights.
#[derive(Debug, Clone)]
struct ProfileData {
    x: Vec<f64>,
    /// Index into `times` for every point.
    time_index: Vec<usize>,
    times: Vec<f64>,
    y: Vec<f64>,
    sigma: Vec<f64>,
    errors_known: bool,
    x_window: [i32; 2],
    abs_x_max: f64,
    /// Distinct (time index, |x|): the stable model is evaluated once per
    /// node, and x and −x share one.
    nodes: Vec<(usize, f64)>,
    /// Node of every point.
    node_of: Vec<usize>,
}

impl ProfileData {
    fn new(map: &CorrelationMap) -> Self {
        let mut data = Self {
            x: Vec::new(),
            time_index: Vec::new(),
            times: Vec::new(),
            y: Vec::new(),
            sigma: Vec::new(),
            errors_known: map.errors().is_some(),
            x_window: [i32::MAX, i32::MIN],
            abs_x_max: 0.0,
            nodes: Vec::new(),
            node_of: Vec::new(),
        };
        for (ti, &t) in map.times().iter().enumerate() {
            // A NaN time cannot occur (the map validates its axis), so
            // "not positive" is simply t ≤ 0.
            if t <= 0.0 {
                continue;
            }
            let mut any = false;
            let mut seen: HashMap<u32, usize> = HashMap::new();
            for (xi, &x) in map.offsets().iter().enumerate() {
                if let Some((c, e)) = map.get(ti, xi) {
                    any = true;
                    let node = *seen.entry(x.unsigned_abs()).or_insert_with(|| {
                        data.nodes
                            .push((data.times.len(), f64::from(x.unsigned_abs())));
                        data.nodes.len() - 1
                    });
                    data.node_of.push(node);
                    data.x.push(f64::from(x));
                    data.time_index.push(data.times.len());
                    data.y.push(c);
                    data.sigma.push(e.unwrap_or(1.0));
                    data.x_window = [data.x_window[0].min(x), data.x_window[1].max(x)];
                    data.abs_x_max = data.abs_x_max.max(f64::from(x).abs());
                }
            }
            if any {
                data.times.push(t);
            }
        }
        data
    }

    fn len(&self) -> usize {
        self.y.len()
    }

    /// D from C(0,t) = f_μ(0)/(Dt)^(1/μ), f_μ(0) = Γ(1 + 1/μ)/π (physics notes),
    /// the median over the times with a positive C(0,t); `None` without.
    fn d_from_peak(&self, mu: f64) -> Option<f64> {
        let f0 = gamma(1.0 + 1.0 / mu) / PI;
        let mut estimates: Vec<f64> = (0..self.len())
            .filter(|&k| self.x[k].abs() < 0.5 && self.y[k] > 0.0)
            .map(|k| {
                let s = f0 / self.y[k];
                s.powf(mu) / self.times[self.time_index[k]]
            })
            .filter(|d| d.is_finite() && *d > 0.0)
            .collect();
        if estimates.is_empty() {
            return None;
        }
        estimates.sort_by(f64::total_cmp);
        Some(estimates[estimates.len() / 2])
    }

    /// D from the variance Σx²C/ΣC = 2Dt of each time (a starting value
    /// only; the variance is meaningless for μ < 2), the median over times.
    fn d_from_variance(&self) -> Option<f64> {
        let mut m0 = vec![0.0; self.times.len()];
        let mut m2 = vec![0.0; self.times.len()];
        for k in 0..self.len() {
            m0[self.time_index[k]] += self.y[k];
            m2[self.time_index[k]] += self.x[k] * self.x[k] * self.y[k];
        }
        let mut estimates: Vec<f64> = (0..self.times.len())
            .map(|i| m2[i] / m0[i] / (2.0 * self.times[i]))
            .filter(|d| d.is_finite() && *d > 0.0)
            .collect();
        if estimates.is_empty() {
            return None;
        }
        estimates.sort_by(f64::total_cmp);
        Some(estimates[estimates.len() / 2])
    }
}

/// How precisely a fit is solved.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Precision {
    /// The reported fit: central μ differences and tight tolerances.
    Full,
    /// A bootstrap refit: forward μ differences, and tolerances that locate
    /// the minimum to ~1e-3 of a standard error (χ² changes by ~1e-6 there),
    /// which adds a negligible 1e-6 to the variance of the replicates.
    Replicate,
}

fn lm_options(model: ProfileModel, mu_bounds: [f64; 2], precision: Precision) -> LmOptions {
    let (lower, upper) = match model {
        ProfileModel::Gaussian => (vec![f64::MIN_POSITIVE], vec![f64::INFINITY]),
        ProfileModel::Stable => (
            vec![f64::MIN_POSITIVE, mu_bounds[0]],
            vec![f64::INFINITY, mu_bounds[1]],
        ),
    };
    LmOptions {
        jacobian: JacobianMethod::Analytic,
        lower: Some(lower),
        upper: Some(upper),
        max_iterations: 200,
        gradient_tolerance: match precision {
            Precision::Full => 1e-10,
            Precision::Replicate => 1e-6,
        },
        step_tolerance: match precision {
            Precision::Full => 1e-10,
            Precision::Replicate => 1e-6,
        },
        chi2_tolerance: match precision {
            Precision::Full => 1e-12,
            Precision::Replicate => 1e-8,
        },
        ..LmOptions::default()
    }
}

/// One least-squares fit of `model` to values `y` from `start`.
fn solve(
    data: &ProfileData,
    y: &[f64],
    model: ProfileModel,
    mu_bounds: [f64; 2],
    start: &[f64],
    precision: Precision,
    mu_grid: Option<&MuGrid>,
) -> Result<crate::numerics::optimize::LeastSquaresReport, ProfileError> {
    let options = lm_options(model, mu_bounds, precision);
    match model {
        ProfileModel::Gaussian => Ok(least_squares(
            &GaussianProblem { data, y },
            start,
            &options,
        )?),
        ProfileModel::Stable => {
            let problem = StableProblem::new(data, y, mu_bounds, precision, mu_grid);
            let result = least_squares(&problem, start, &options);
            if let Some(e) = problem.failure.borrow_mut().take() {
                return Err(e);
            }
            Ok(result?)
        }
    }
}

/// The stable model's start: μ from a few candidates (and the Gaussian's D
/// at μ = 2), D from the peak height, the candidate of least χ².
fn stable_start(data: &ProfileData, mu_bounds: [f64; 2]) -> Result<[f64; 2], ProfileError> {
    let problem = StableProblem::new(data, &data.y, mu_bounds, Precision::Full, None);
    let mut r = vec![0.0; data.len()];
    let mut best: Option<(f64, [f64; 2])> = None;
    for mu in [0.5f64, 0.8, 1.0, 1.25, 1.5, 1.75, 1.95] {
        let mu = mu.clamp(mu_bounds[0], mu_bounds[1]);
        let d = data
            .d_from_peak(mu)
            .or_else(|| data.d_from_variance())
            .unwrap_or(1.0);
        problem.residuals(&[d, mu], &mut r);
        if let Some(e) = problem.failure.borrow_mut().take() {
            return Err(e);
        }
        let chi2: f64 = r.iter().map(|v| v * v).sum();
        if chi2.is_finite() && best.is_none_or(|(b, _)| chi2 < b) {
            best = Some((chi2, [d, mu]));
        }
    }
    Ok(best.map_or([1.0, mu_bounds[1].min(1.5)], |(_, p)| p))
}

/// Information criteria of the module documentation.
fn information_criteria(chi2: f64, k: usize, n: usize, errors_known: bool) -> (f64, f64) {
    use crate::numerics::stats::{aic, bic};
    if errors_known {
        (aic(chi2, k), bic(chi2, k, n))
    } else {
        let nf = n as f64;
        let fit = nf * (chi2 / nf).ln();
        (fit + 2.0 * (k + 1) as f64, fit + (k + 1) as f64 * nf.ln())
    }
}

/// Fits `model` to every present point with t > 0 of `map` (already
/// windowed by the caller); see the module documentation.
///
/// # Errors
/// Too few points (more than the parameters, at least 3), bad μ bounds, the
/// stable density failing at some μ, or an optimiser error.
pub fn fit_profile(
    map: &CorrelationMap,
    model: ProfileModel,
    options: &ProfileOptions,
) -> Result<ProfileReport, ProfileError> {
    let data = ProfileData::new(map);
    fit_data(&data, model, options)
}

fn fit_data(
    data: &ProfileData,
    model: ProfileModel,
    options: &ProfileOptions,
) -> Result<ProfileReport, ProfileError> {
    let [lo, hi] = options.mu_bounds;
    if !(lo >= MU_MIN && hi <= 2.0 && lo < hi) {
        return Err(ProfileError::BadMuBounds {
            lower: lo,
            upper: hi,
        });
    }
    let k = model.parameters();
    let needed = (k + 1).max(3);
    if data.len() < needed {
        return Err(ProfileError::TooFewPoints {
            points: data.len(),
            model: model.name(),
            needed,
        });
    }
    let start: Vec<f64> = match model {
        ProfileModel::Gaussian => vec![
            data.d_from_peak(2.0)
                .or_else(|| data.d_from_variance())
                .unwrap_or(1.0),
        ],
        ProfileModel::Stable => stable_start(data, options.mu_bounds)?.to_vec(),
    };
    let fit = solve(
        data,
        &data.y,
        model,
        options.mu_bounds,
        &start,
        Precision::Full,
        None,
    )?;
    let (cov, error_basis) = if data.errors_known {
        (&fit.covariance, ErrorBasis::Data)
    } else {
        (&fit.scaled_covariance, ErrorBasis::Scatter)
    };
    let d = fit.params[0];
    let d_err = cov[0][0].sqrt();
    let (mu, mu_err, correlation, mu_at_bound) = match model {
        ProfileModel::Gaussian => (2.0, 0.0, None, false),
        ProfileModel::Stable => {
            let mu_err = cov[1][1].sqrt();
            (
                fit.params[1],
                mu_err,
                Some(cov[0][1] / (d_err * mu_err)),
                fit.at_bound[1],
            )
        }
    };
    let (aic, bic) = information_criteria(fit.chi2, k, data.len(), data.errors_known);
    let bootstrap = if options.bootstrap > 0 {
        let sigma_scale = if data.errors_known {
            1.0
        } else {
            fit.chi2_dof.sqrt()
        };
        Some(bootstrap(
            data,
            model,
            options,
            &fit.params,
            mu_err,
            sigma_scale,
        )?)
    } else {
        None
    };
    Ok(ProfileReport {
        model,
        mu,
        mu_err,
        mu_fixed: model == ProfileModel::Gaussian,
        d,
        d_err,
        correlation,
        mu_err_bootstrap: bootstrap.as_ref().and_then(|b| b.mu.map(|m| m.std)),
        d_err_bootstrap: bootstrap.as_ref().map(|b| b.d.std),
        bootstrap,
        chi2: fit.chi2,
        dof: fit.dof,
        chi2_dof: fit.chi2_dof,
        p_value: data.errors_known.then(|| chi2_survival(fit.chi2, fit.dof)),
        aic,
        bic,
        points: data.len(),
        t_window: [data.times[0], data.times[data.times.len() - 1]],
        x_window: data.x_window,
        mu_at_bound,
        error_basis,
        iterations: fit.iterations,
        termination: fit.termination,
        seed: options.seed,
    })
}

/// Parametric bootstrap over the data errors (module documentation).
///
/// # Errors
/// The stable density failing while the shared μ grid is built.
fn bootstrap(
    data: &ProfileData,
    model: ProfileModel,
    options: &ProfileOptions,
    best: &[f64],
    mu_err: f64,
    sigma_scale: f64,
) -> Result<ProfileBootstrap, ProfileError> {
    let mu_grid = match model {
        ProfileModel::Gaussian => None,
        ProfileModel::Stable => {
            let (d, mu) = (best[0], best[1]);
            let u_needed = data.abs_x_max / (d * data.times[0]).powf(1.0 / mu);
            MuGrid::build(mu, mu_err, 2.0 * u_needed, options.mu_bounds)?
        }
    };
    let replicates: Vec<Option<Vec<f64>>> = (0..options.bootstrap)
        .into_par_iter()
        .map(|k| {
            let mut rng = ChaCha8Rng::seed_from_u64(options.seed);
            rng.set_stream(k as u64);
            let y: Vec<f64> = data
                .y
                .iter()
                .zip(&data.sigma)
                .map(|(&y, &s)| y + sigma_scale * s * standard_normal(&mut rng))
                .collect();
            solve(
                data,
                &y,
                model,
                options.mu_bounds,
                best,
                Precision::Replicate,
                mu_grid.as_ref(),
            )
            .ok()
            .filter(|f| !matches!(f.termination, Termination::NoProgress))
            .map(|f| f.params)
        })
        .collect();
    let column = |j: usize| -> Vec<f64> {
        replicates
            .iter()
            .map(|r| r.as_ref().map_or(f64::NAN, |p| p[j]))
            .collect()
    };
    Ok(ProfileBootstrap {
        resamples: options.bootstrap,
        d: summarize_bootstrap(&column(0)),
        mu: (model == ProfileModel::Stable).then(|| summarize_bootstrap(&column(1))),
    })
}

/// Appended to every model preference: the Gaussian is the stable model at
/// μ = 2, the upper end of μ's range, so the comparison tests a parameter on
/// the boundary of its space (module documentation, "Information criteria").
const BOUNDARY_NOTE: &str = "The Gaussian is the stable model with μ on the boundary of its \
range (μ = 2), where the likelihood-ratio statistic is not χ²₁ but an equal mixture of χ²₀ and \
χ²₁ (Chernoff 1954): the ΔAIC > 2 threshold then favours the Gaussian slightly more than the \
usual calibration says, so read it as a rule of thumb";

/// Fits both models to the same points and states which one the data
/// support (module documentation, "Information criteria").
///
/// # Errors
/// As [`fit_profile`], for either model.
pub fn compare_profiles(
    map: &CorrelationMap,
    options: &ProfileOptions,
) -> Result<ProfileComparison, ProfileError> {
    let data = ProfileData::new(map);
    let gaussian = fit_data(&data, ProfileModel::Gaussian, options)?;
    let stable = fit_data(&data, ProfileModel::Stable, options)?;
    let delta_aic = gaussian.aic - stable.aic;
    let delta_bic = gaussian.bic - stable.bic;
    let bic_word = if delta_bic > 0.0 {
        "BIC agrees"
    } else {
        "BIC, which penalises the extra parameter more, disagrees"
    };
    let (preferred, reason) = if delta_aic > 2.0 {
        let bic_note = if delta_bic > 0.0 {
            "BIC agrees".to_string()
        } else {
            format!("{bic_word} (ΔBIC = {delta_bic:.1})")
        };
        (
            ProfileModel::Stable,
            format!(
                "the stable model (μ = {}) lowers AIC by {delta_aic:.1} (> 2): the free index is supported; {bic_note}",
                plus_minus(stable.mu, stable.mu_err)
            ),
        )
    } else if delta_aic < -2.0 {
        (
            ProfileModel::Gaussian,
            format!(
                "the Gaussian model has the lower AIC by {:.1} (> 2): the free index μ is not supported",
                -delta_aic
            ),
        )
    } else {
        (
            ProfileModel::Gaussian,
            format!(
                "the models are not distinguished (|ΔAIC| = {:.1} ≤ 2; stable μ = {}): the simpler Gaussian is kept",
                delta_aic.abs(),
                plus_minus(stable.mu, stable.mu_err)
            ),
        )
    };
    let reason = format!("{reason}. {BOUNDARY_NOTE}");
    Ok(ProfileComparison {
        gaussian,
        stable,
        preferred,
        delta_aic,
        delta_bic,
        reason,
    })
}

#[cfg(test)]
mod tests;
