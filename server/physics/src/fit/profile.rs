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
//! # Conventions (DESIGN.md, "Scaling form")
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
//! 2nd ed. 2002, §2.6, from memory).
//!
//! # The stable model's interpolation table
//! Each residual evaluation needs f_μ at every point of the window (thousands
//! of points, each a quadrature or series in [`StableDensity`]). Instead,
//! for each μ the fit tabulates g(w) = ln f_μ(u) on a uniform grid in
//! w = asinh(u/c), c = min(1, √(2Γ(1/μ)/Γ(3/μ))) (the curvature scale of
//! f_μ at 0, so that the sharp peak of small μ is resolved), step 0.04, up to
//! the largest |x|/s of the window, and interpolates it by a clamped cubic
//! spline (g'(0) = 0 by symmetry; a third-order one-sided difference at the
//! far end). In w the power-law tail is a straight line and the Gaussian
//! core smooth, so the interpolation error is ~h⁴|g''''|/384 ≈ 1e-7 of f
//! where f matters (the tests compare table and density directly), far
//! below any statistical error. ∂f/∂u comes from the spline, ∂f/∂μ from
//! central differences of tables at μ ± 1e-4 (one-sided at a bound). Values
//! of f that underflow are floored at the smallest positive double.

use std::cell::{Cell, RefCell};
use std::f64::consts::PI;
use std::rc::Rc;

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use thiserror::Error;

use crate::CorrelationMap;
use crate::fit::tail::ErrorBasis;
use crate::numerics::optimize::{
    JacobianMethod, LeastSquaresProblem, LmOptions, OptimizeError, Termination, least_squares,
};
use crate::numerics::stats::{
    BootstrapSummary, chi2_survival, standard_normal, summarize_bootstrap,
};

/// Why a profile fit could not be made.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ProfileError {
    #[error("only {points} points with t > 0 in the window; the {model} model needs at least {needed}")]
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

/// Smallest stable index the model accepts (the range of [`StableDensity`]
/// promised by its module).
pub const MU_MIN: f64 = 0.3;

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
    /// One-sigma error of μ from the covariance; 0 when μ is fixed.
    pub mu_err: f64,
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
        };
        for (ti, &t) in map.times().iter().enumerate() {
            if !(t > 0.0) {
                continue;
            }
            let mut any = false;
            for (xi, &x) in map.offsets().iter().enumerate() {
                if let Some((c, e)) = map.get(ti, xi) {
                    any = true;
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

    /// D from C(0,t) = f_μ(0)/(Dt)^(1/μ), f_μ(0) = Γ(1 + 1/μ)/π (PHYSICS.md),
    /// the median over the times with a positive C(0,t); `None` without.
    fn d_from_peak(&self, mu: f64) -> Option<f64> {
        let f0 = puruspe::gamma(1.0 + 1.0 / mu) / PI;
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

/// The Gaussian model: C = exp(−x²/(4Dt))/(2√(πDt)).
struct GaussianProblem<'a> {
    data: &'a ProfileData,
    y: &'a [f64],
}

impl LeastSquaresProblem for GaussianProblem<'_> {
    fn n_params(&self) -> usize {
        1
    }

    fn n_residuals(&self) -> usize {
        self.y.len()
    }

    fn residuals(&self, p: &[f64], r: &mut [f64]) {
        let d = p[0];
        for (k, rk) in r.iter_mut().enumerate() {
            let dt = d * self.data.times[self.data.time_index[k]];
            let x = self.data.x[k];
            let c = (-x * x / (4.0 * dt)).exp() / (2.0 * (PI * dt).sqrt());
            *rk = (self.y[k] - c) / self.data.sigma[k];
        }
    }

    fn jacobian(&self, p: &[f64], jac: &mut [f64]) -> bool {
        let d = p[0];
        for (k, jk) in jac.iter_mut().enumerate() {
            let t = self.data.times[self.data.time_index[k]];
            let dt = d * t;
            let x = self.data.x[k];
            let c = (-x * x / (4.0 * dt)).exp() / (2.0 * (PI * dt).sqrt());
            // ∂C/∂D = C (x²/(4D²t) − 1/(2D)).
            let dc = c * (x * x / (4.0 * d * dt) - 0.5 / d);
            *jk = -dc / self.data.sigma[k];
        }
        true
    }
}

/// f_μ at unit scale: a closure from the stable-density model.
type UnitDensity = Box<dyn Fn(f64) -> f64>;

/// Provides f_μ(u) for a given μ (module documentation).
fn unit_density(mu: f64) -> Result<UnitDensity, ProfileError> {
    Err(ProfileError::Density {
        mu,
        reason: "PENDING-STABLE-DENSITY".to_string(),
    })
}

/// Step of the interpolation grid in w = asinh(u/c).
const TABLE_STEP: f64 = 0.04;

/// Clamped cubic spline of g(w) = ln f_μ(c sinh w) on a uniform grid
/// (module documentation).
#[derive(Debug)]
struct DensityTable {
    mu: f64,
    scale: f64,
    step: f64,
    u_max: f64,
    g: Vec<f64>,
    second: Vec<f64>,
}

impl DensityTable {
    fn build(mu: f64, u_max: f64, f: &dyn Fn(f64) -> f64) -> Self {
        let curvature = (2.0 * puruspe::gamma(1.0 / mu) / puruspe::gamma(3.0 / mu)).sqrt();
        let scale = curvature.min(1.0);
        let u_max = u_max.max(4.0 * scale);
        let w_max = (u_max / scale).asinh();
        let intervals = ((w_max / TABLE_STEP).ceil() as usize).max(16);
        let step = w_max / intervals as f64;
        let floor = f64::MIN_POSITIVE.ln();
        let g: Vec<f64> = (0..=intervals)
            .map(|k| {
                let u = scale * (k as f64 * step).sinh();
                let v = f(u);
                if v > 0.0 { v.ln().max(floor) } else { floor }
            })
            .collect();
        let second = clamped_spline(&g, step, 0.0, end_slope(&g, step));
        Self {
            mu,
            scale,
            step,
            u_max,
            g,
            second,
        }
    }

    /// (f(u), f'(u)) for u ≥ 0; beyond the table, the end's straight line in
    /// w (a power law in u).
    fn eval(&self, u: f64) -> (f64, f64) {
        let w = (u / self.scale).asinh();
        let last = self.g.len() - 1;
        let h = self.step;
        let pos = w / h;
        let (g, dg) = if pos >= last as f64 {
            let slope = end_slope(&self.g, h);
            (self.g[last] + slope * (w - last as f64 * h), slope)
        } else {
            let j = pos as usize;
            let b = pos - j as f64;
            let a = 1.0 - b;
            let (g0, g1, m0, m1) = (self.g[j], self.g[j + 1], self.second[j], self.second[j + 1]);
            let g = a * g0 + b * g1 + ((a * a * a - a) * m0 + (b * b * b - b) * m1) * h * h / 6.0;
            let dg = (g1 - g0) / h - (3.0 * a * a - 1.0) / 6.0 * h * m0
                + (3.0 * b * b - 1.0) / 6.0 * h * m1;
            (g, dg)
        };
        let f = g.exp();
        // dw/du = 1/√(c² + u²).
        (f, f * dg / self.scale.hypot(u))
    }
}

/// g'(w_end) by the third-order one-sided difference
/// (11g_K − 18g_{K−1} + 9g_{K−2} − 2g_{K−3})/(6h).
fn end_slope(g: &[f64], h: f64) -> f64 {
    let k = g.len() - 1;
    (11.0 * g[k] - 18.0 * g[k - 1] + 9.0 * g[k - 2] - 2.0 * g[k - 3]) / (6.0 * h)
}

/// Second derivatives of the clamped cubic spline through (k h, g_k) with
/// end slopes `d0`, `d1` (tridiagonal system, Thomas algorithm; de Boor, "A
/// Practical Guide to Splines", ch. IV).
fn clamped_spline(g: &[f64], h: f64, d0: f64, d1: f64) -> Vec<f64> {
    let n = g.len();
    let mut diag = vec![4.0; n];
    let mut rhs = vec![0.0; n];
    diag[0] = 2.0;
    diag[n - 1] = 2.0;
    rhs[0] = 6.0 / h * ((g[1] - g[0]) / h - d0);
    rhs[n - 1] = 6.0 / h * (d1 - (g[n - 1] - g[n - 2]) / h);
    for k in 1..n - 1 {
        rhs[k] = 6.0 / (h * h) * (g[k + 1] - 2.0 * g[k] + g[k - 1]);
    }
    // Off-diagonals are all 1.
    for k in 1..n {
        let w = 1.0 / diag[k - 1];
        diag[k] -= w;
        rhs[k] -= w * rhs[k - 1];
    }
    let mut m = vec![0.0; n];
    m[n - 1] = rhs[n - 1] / diag[n - 1];
    for k in (0..n - 1).rev() {
        m[k] = (rhs[k] - m[k + 1]) / diag[k];
    }
    m
}

/// Half-width of the central difference in μ for ∂f/∂μ.
const MU_STEP: f64 = 1e-4;

/// The stable model with parameters (D, μ).
struct StableProblem<'a> {
    data: &'a ProfileData,
    y: &'a [f64],
    mu_bounds: [f64; 2],
    cache: RefCell<Vec<Rc<DensityTable>>>,
    failure: RefCell<Option<ProfileError>>,
    tables: Cell<usize>,
}

impl<'a> StableProblem<'a> {
    fn new(data: &'a ProfileData, y: &'a [f64], mu_bounds: [f64; 2]) -> Self {
        Self {
            data,
            y,
            mu_bounds,
            cache: RefCell::new(Vec::new()),
            failure: RefCell::new(None),
            tables: Cell::new(0),
        }
    }

    /// The largest |x|/s(t) of the data at (D, μ): s is smallest at the
    /// earliest time.
    fn u_needed(&self, d: f64, mu: f64) -> f64 {
        self.data.abs_x_max / (d * self.data.times[0]).powf(1.0 / mu)
    }

    fn table(&self, mu: f64, u_needed: f64) -> Option<Rc<DensityTable>> {
        if let Some(t) = self
            .cache
            .borrow()
            .iter()
            .find(|t| t.mu.to_bits() == mu.to_bits() && t.u_max >= u_needed)
        {
            return Some(Rc::clone(t));
        }
        let f = match unit_density(mu) {
            Ok(f) => f,
            Err(e) => {
                *self.failure.borrow_mut() = Some(e);
                return None;
            }
        };
        // A margin, so that the next few steps in D reuse the table.
        let table = Rc::new(DensityTable::build(mu, 2.0 * u_needed, &f));
        self.tables.set(self.tables.get() + 1);
        let mut cache = self.cache.borrow_mut();
        if cache.len() >= 6 {
            cache.remove(0);
        }
        cache.push(Rc::clone(&table));
        Some(table)
    }

    fn scales(&self, d: f64, mu: f64) -> Vec<f64> {
        self.data
            .times
            .iter()
            .map(|&t| (d * t).powf(1.0 / mu))
            .collect()
    }
}

impl LeastSquaresProblem for StableProblem<'_> {
    fn n_params(&self) -> usize {
        2
    }

    fn n_residuals(&self) -> usize {
        self.y.len()
    }

    fn residuals(&self, p: &[f64], r: &mut [f64]) {
        let (d, mu) = (p[0], p[1]);
        let Some(table) = self.table(mu, self.u_needed(d, mu)) else {
            r.fill(f64::NAN);
            return;
        };
        let s = self.scales(d, mu);
        for (k, rk) in r.iter_mut().enumerate() {
            let sk = s[self.data.time_index[k]];
            let (f, _) = table.eval(self.data.x[k].abs() / sk);
            *rk = (self.y[k] - f / sk) / self.data.sigma[k];
        }
    }

    fn jacobian(&self, p: &[f64], jac: &mut [f64]) -> bool {
        let (d, mu) = (p[0], p[1]);
        let need = self.u_needed(d, mu);
        let (lo, hi) = (
            (mu - MU_STEP).max(self.mu_bounds[0]),
            (mu + MU_STEP).min(self.mu_bounds[1]),
        );
        let (Some(table), Some(below), Some(above)) = (
            self.table(mu, need),
            self.table(lo, need),
            self.table(hi, need),
        ) else {
            jac.fill(f64::NAN);
            return true;
        };
        let s = self.scales(d, mu);
        let ln_dt: Vec<f64> = self.data.times.iter().map(|&t| (d * t).ln()).collect();
        for k in 0..self.y.len() {
            let ti = self.data.time_index[k];
            let sk = s[ti];
            let u = self.data.x[k].abs() / sk;
            let (f, df) = table.eval(u);
            let df_dmu = (above.eval(u).0 - below.eval(u).0) / (hi - lo);
            let core = f + u * df;
            // ∂C/∂D = −(f + u f')/(sμD); ∂C/∂μ = (f + u f') ln(Dt)/(sμ²) + ∂f/∂μ / s.
            let dc_dd = -core / (sk * mu * d);
            let dc_dmu = core * ln_dt[ti] / (sk * mu * mu) + df_dmu / sk;
            let w = -1.0 / self.data.sigma[k];
            jac[2 * k] = w * dc_dd;
            jac[2 * k + 1] = w * dc_dmu;
        }
        true
    }
}

fn lm_options(model: ProfileModel, mu_bounds: [f64; 2]) -> LmOptions {
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
        gradient_tolerance: 1e-10,
        step_tolerance: 1e-10,
        chi2_tolerance: 1e-12,
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
) -> Result<crate::numerics::optimize::LeastSquaresReport, ProfileError> {
    let options = lm_options(model, mu_bounds);
    match model {
        ProfileModel::Gaussian => Ok(least_squares(&GaussianProblem { data, y }, start, &options)?),
        ProfileModel::Stable => {
            let problem = StableProblem::new(data, y, mu_bounds);
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
    let problem = StableProblem::new(data, &data.y, mu_bounds);
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
    let fit = solve(data, &data.y, model, options.mu_bounds, &start)?;
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
        Some(bootstrap(data, model, options, &fit.params, sigma_scale))
    } else {
        None
    };
    Ok(ProfileReport {
        model,
        mu,
        mu_err,
        d,
        d_err,
        correlation,
        mu_err_bootstrap: bootstrap.as_ref().and_then(|b| b.mu.map(|m| m.std)),
        d_err_bootstrap: bootstrap.as_ref().map(|b| b.d.std),
        bootstrap,
        chi2: fit.chi2,
        dof: fit.dof,
        chi2_dof: fit.chi2_dof,
        p_value: data
            .errors_known
            .then(|| chi2_survival(fit.chi2, fit.dof)),
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
fn bootstrap(
    data: &ProfileData,
    model: ProfileModel,
    options: &ProfileOptions,
    best: &[f64],
    sigma_scale: f64,
) -> ProfileBootstrap {
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
            solve(data, &y, model, options.mu_bounds, best)
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
    ProfileBootstrap {
        resamples: options.bootstrap,
        d: summarize_bootstrap(&column(0)),
        mu: (model == ProfileModel::Stable).then(|| summarize_bootstrap(&column(1))),
    }
}

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
                "the stable model (μ = {:.3} ± {:.3}) lowers AIC by {delta_aic:.1} (> 2): the free index is supported; {bic_note}",
                stable.mu, stable.mu_err
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
                "the models are not distinguished (|ΔAIC| = {:.1} ≤ 2; stable μ = {:.3} ± {:.3}): the simpler Gaussian is kept",
                delta_aic.abs(),
                stable.mu,
                stable.mu_err
            ),
        )
    };
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
mod tests {
    use super::*;
    use crate::numerics::stats::seeded_rng;
    use ndarray::Array2;

    /// Gaussian scaling function, closed form (PHYSICS.md, μ = 2):
    /// exp(−x²/(4Dt))/(2√(πDt)).
    fn gaussian(x: f64, t: f64, d: f64) -> f64 {
        (-x * x / (4.0 * d * t)).exp() / (2.0 * (PI * d * t).sqrt())
    }

    /// Cauchy scaling function, closed form (PHYSICS.md, μ = 1):
    /// Dt/(π((Dt)² + x²)).
    fn cauchy(x: f64, t: f64, d: f64) -> f64 {
        d * t / (PI * ((d * t).powi(2) + x * x))
    }

    /// A complete map of `f` on offsets −x_max..=x_max at `times`, with
    /// seeded noise of `noise` (absolute) plus `relative`·C on every point,
    /// and those errors attached.
    fn noisy_map(
        f: impl Fn(f64, f64) -> f64,
        x_max: i32,
        times: &[f64],
        noise: f64,
        relative: f64,
        seed: u64,
    ) -> CorrelationMap {
        let x: Vec<i32> = (-x_max..=x_max).collect();
        let exact = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
            f(f64::from(x[j]), times[i])
        });
        let errors = exact.mapv(|c| noise + relative * c.abs());
        let mut rng = seeded_rng(seed);
        let values = Array2::from_shape_fn(exact.dim(), |ij| {
            exact[ij] + errors[ij] * standard_normal(&mut rng)
        });
        CorrelationMap::complete(x, times.to_vec(), values, Some(errors)).expect("valid map")
    }

    #[test]
    fn gaussian_fit_recovers_d_within_errors_and_bootstrap_agrees() {
        // Closed-form Gaussian, D = 0.7, 41 sites × 6 times, noise 1e-3.
        let times = [2.0, 3.0, 4.5, 6.0, 8.0, 10.0];
        let map = noisy_map(|x, t| gaussian(x, t, 0.7), 20, &times, 1e-3, 0.0, 5);
        let options = ProfileOptions {
            bootstrap: 100,
            seed: 9,
            ..ProfileOptions::default()
        };
        let r = fit_profile(&map, ProfileModel::Gaussian, &options).expect("fits");
        assert!(r.termination.is_converged(), "{r:?}");
        assert!((r.d - 0.7).abs() < 3.0 * r.d_err, "{r:?}");
        assert!(r.d_err < 0.01, "{r:?}");
        assert!(r.chi2_dof > 0.8 && r.chi2_dof < 1.2, "{r:?}");
        // The bootstrap error estimates the same spread as the covariance
        // (linear regime): within 25 % for 100 replicates (relative standard
        // error of a standard deviation ≈ 1/√(2K) = 7 %).
        let boot = r.d_err_bootstrap.expect("bootstrap ran");
        assert!((boot / r.d_err - 1.0).abs() < 0.25, "{boot} vs {}", r.d_err);
        assert_eq!(r.seed, 9);
    }

    #[test]
    fn gaussian_covariance_interval_covers_the_truth_about_68_percent() {
        // 300 seeds of a small map (21 sites × 4 times); the binomial
        // standard deviation of the coverage is 2.7 %, so 60–76 % is ±3σ
        // around the nominal 68.27 % (A&S 26.2).
        let times = [1.0, 2.0, 3.0, 5.0];
        let seeds = 300;
        let mut covered = 0;
        for seed in 0..seeds {
            let map = noisy_map(|x, t| gaussian(x, t, 1.3), 10, &times, 2e-3, 0.02, seed);
            let r = fit_profile(&map, ProfileModel::Gaussian, &ProfileOptions::default())
                .expect("fits");
            if (r.d - 1.3).abs() <= r.d_err {
                covered += 1;
            }
        }
        let fraction = f64::from(covered) / f64::from(seeds as u32);
        assert!((0.60..=0.76).contains(&fraction), "coverage {fraction}");
    }

    #[test]
    fn gaussian_fit_without_errors_reports_scatter_errors() {
        // Exact Gaussian data without errors: D recovered to rounding, the
        // error basis is the scatter.
        let x: Vec<i32> = (-8..=8).collect();
        let times = vec![1.0, 2.0, 4.0];
        let values = Array2::from_shape_fn((3, x.len()), |(i, j)| {
            gaussian(f64::from(x[j]), times[i], 0.45)
        });
        let map = CorrelationMap::complete(x, times, values, None).expect("map");
        let r = fit_profile(&map, ProfileModel::Gaussian, &ProfileOptions::default())
            .expect("fits");
        assert!((r.d - 0.45).abs() < 1e-10, "{r:?}");
        assert_eq!(r.error_basis, ErrorBasis::Scatter);
        assert!(r.p_value.is_none());
    }

    #[test]
    fn spline_reproduces_closed_form_densities() {
        // The interpolation table against the closed forms at μ = 1
        // (1/(π(1+u²))) and μ = 2 (exp(−u²/4)/(2√π)) (PHYSICS.md), at points
        // between the nodes: relative error ≤ 1e-6 plus 1e-10 of the peak
        // f(0) (the Gaussian's far tail, where f < 1e-5 f(0), is
        // interpolated to ~u²·1e-8 relative), and the slope against central
        // differences of the closed form.
        let cauchy_unit = |u: f64| 1.0 / (PI * (1.0 + u * u));
        let gauss_unit = |u: f64| (-u * u / 4.0).exp() / (2.0 * PI.sqrt());
        for (mu, f) in [
            (1.0, &cauchy_unit as &dyn Fn(f64) -> f64),
            (2.0, &gauss_unit as &dyn Fn(f64) -> f64),
        ] {
            let table = DensityTable::build(mu, 300.0, f);
            let peak = f(0.0);
            for k in 0..3000 {
                let u = 0.0137 + 0.1 * f64::from(k);
                let (v, dv) = table.eval(u);
                let exact = f(u);
                assert!(
                    (v - exact).abs() <= 1e-6 * exact + 1e-10 * peak,
                    "mu {mu}, u {u}: {v} vs {exact}"
                );
                let h = 1e-6 * u.max(1.0);
                let slope = (f(u + h) - f(u - h)) / (2.0 * h);
                // Spline slopes are one order less accurate (O(h³)).
                assert!(
                    (dv - slope).abs() <= 1e-4 * slope.abs() + 1e-5 * exact + 1e-9 * peak,
                    "mu {mu}, u {u}: f' {dv} vs {slope}"
                );
            }
        }
    }
}
