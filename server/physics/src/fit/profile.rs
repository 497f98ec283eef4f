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
use crate::numerics::stats::{
    BootstrapSummary, chi2_survival, standard_normal, summarize_bootstrap,
};

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

/// ln f_μ(u) and d ln f_μ/du at unit scale, for u ≥ 0.
struct UnitDensity {
    ln_f: Box<dyn Fn(f64) -> f64>,
    d_ln_f: Box<dyn Fn(f64) -> f64>,
}

/// f_μ from the stable-density model (module documentation).
fn unit_density(mu: f64) -> Result<UnitDensity, ProfileError> {
    let density = StableDensity::standard(mu).map_err(|e| ProfileError::Density {
        mu,
        reason: e.to_string(),
    })?;
    let slope = density.clone();
    Ok(UnitDensity {
        ln_f: Box::new(move |u| density.log_pdf(u)),
        d_ln_f: Box::new(move |u| slope.d_pdf_dx(u) / slope.pdf(u)),
    })
}

/// Largest |x|/s a density table covers; beyond it the table continues
/// its end slope (the power-law tail).
const MAX_TABLE_U: f64 = 1e8;

/// Step of the interpolation grid in w = asinh(u/c).
const TABLE_STEP: f64 = 0.03;

/// c = min(1, √(2Γ(1/μ)/Γ(3/μ))): the curvature scale of f_μ at 0
/// (f_μ(u) ≈ f_μ(0)(1 − u²/c²) from the small-x series).
fn curvature_scale(mu: f64) -> f64 {
    (2.0 * puruspe::gamma(1.0 / mu) / puruspe::gamma(3.0 / mu))
        .sqrt()
        .min(1.0)
}

/// The uniform grid w_k = k h, u = c sinh w, shared by tables of one fit.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Grid {
    scale: f64,
    step: f64,
    intervals: usize,
    u_max: f64,
}

/// Where u falls on a [`Grid`]: interval j and the weights a = 1 − b, b,
/// or the distance in w beyond the last node.
#[derive(Debug, Clone, Copy)]
struct Location {
    j: usize,
    a: f64,
    b: f64,
    beyond: Option<f64>,
    /// dw/du = 1/√(c² + u²).
    dw_du: f64,
}

impl Grid {
    fn new(scale: f64, u_max: f64) -> Self {
        let u_max = u_max.max(4.0 * scale);
        let w_max = (u_max / scale).asinh();
        let intervals = ((w_max / TABLE_STEP).ceil() as usize).max(16);
        Self {
            scale,
            step: w_max / intervals as f64,
            intervals,
            u_max,
        }
    }

    fn locate(&self, u: f64) -> Location {
        let w = (u / self.scale).asinh();
        let pos = w / self.step;
        let dw_du = 1.0 / self.scale.hypot(u);
        if pos >= self.intervals as f64 {
            return Location {
                j: self.intervals,
                a: 0.0,
                b: 1.0,
                beyond: Some(w - self.intervals as f64 * self.step),
                dw_du,
            };
        }
        let j = pos as usize;
        let b = pos - j as f64;
        Location {
            j,
            a: 1.0 - b,
            b,
            beyond: None,
            dw_du,
        }
    }
}

/// Clamped cubic spline of g(w) = ln f_μ(c sinh w) on a [`Grid`] (module
/// documentation).
#[derive(Debug)]
struct DensityTable {
    mu: f64,
    grid: Grid,
    g: Vec<f64>,
    second: Vec<f64>,
    end_slope: f64,
}

impl DensityTable {
    fn build(mu: f64, grid: Grid, density: &UnitDensity) -> Self {
        let (c, h) = (grid.scale, grid.step);
        let g: Vec<f64> = (0..=grid.intervals)
            .map(|k| (density.ln_f)(c * (k as f64 * h).sinh()))
            .collect();
        // dg/dw = (d ln f/du)·du/dw with du/dw = c cosh w at the far end;
        // the one-sided difference stands in if that slope is not finite.
        let w_end = grid.intervals as f64 * h;
        let exact_end = (density.d_ln_f)(c * w_end.sinh()) * c * w_end.cosh();
        let end_slope = if exact_end.is_finite() {
            exact_end
        } else {
            one_sided_slope(&g, h)
        };
        let second = clamped_spline(&g, h, 0.0, end_slope);
        Self {
            mu,
            grid,
            g,
            second,
            end_slope,
        }
    }

    /// (g, dg/dw) at a location of this table's grid; beyond the last node
    /// the end's straight line in w (a power law in u).
    fn log_at(&self, at: &Location) -> (f64, f64) {
        if let Some(beyond) = at.beyond {
            return (
                self.g[self.grid.intervals] + self.end_slope * beyond,
                self.end_slope,
            );
        }
        let (j, a, b, h) = (at.j, at.a, at.b, self.grid.step);
        let (g0, g1, m0, m1) = (self.g[j], self.g[j + 1], self.second[j], self.second[j + 1]);
        let g = a * g0 + b * g1 + ((a * a * a - a) * m0 + (b * b * b - b) * m1) * h * h / 6.0;
        let dg =
            (g1 - g0) / h - (3.0 * a * a - 1.0) / 6.0 * h * m0 + (3.0 * b * b - 1.0) / 6.0 * h * m1;
        (g, dg)
    }

    /// (f(u), f'(u)) for u ≥ 0.
    fn eval(&self, u: f64) -> (f64, f64) {
        let at = self.grid.locate(u);
        let (g, dg) = self.log_at(&at);
        let f = g.exp();
        (f, f * dg * at.dw_du)
    }
}

/// g'(w_end) by the third-order one-sided difference
/// (11g_K − 18g_{K−1} + 9g_{K−2} − 2g_{K−3})/(6h).
fn one_sided_slope(g: &[f64], h: f64) -> f64 {
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

/// Tables at equally spaced μ around a best fit, interpolated in μ by
/// four-point Lagrange polynomials: the bootstrap's replicates move μ by
/// about its standard error, and this grid spares each of them new density
/// tables (module documentation, "The bootstrap").
#[derive(Debug)]
struct MuGrid {
    first: f64,
    delta: f64,
    tables: Vec<DensityTable>,
}

impl MuGrid {
    /// Tables over μ̂ ± 6σ_μ (within the bounds; at least 1e-3 wide), at
    /// 6–25 equally spaced μ no farther apart than 0.01 where possible, on
    /// one grid in u covering `u_max`. `None` when σ_μ is not finite.
    fn build(
        mu: f64,
        mu_err: f64,
        u_max: f64,
        bounds: [f64; 2],
    ) -> Result<Option<Self>, ProfileError> {
        if !(mu_err.is_finite() && mu.is_finite()) {
            return Ok(None);
        }
        let half = (6.0 * mu_err).max(5e-4);
        let mut lo = (mu - half).max(bounds[0]);
        let mut hi = (mu + half).min(bounds[1]);
        if hi - lo < 1e-3 {
            // Against a bound: extend inwards.
            if lo <= bounds[0] {
                hi = (lo + 1e-3).min(bounds[1]);
            } else {
                lo = (hi - 1e-3).max(bounds[0]);
            }
        }
        let count = (((hi - lo) / 0.01).ceil() as usize + 1).clamp(6, 25);
        let delta = (hi - lo) / (count - 1) as f64;
        let grid = Grid::new(curvature_scale(mu), u_max);
        let tables = (0..count)
            .map(|k| {
                let m = lo + k as f64 * delta;
                unit_density(m).map(|d| DensityTable::build(m, grid, &d))
            })
            .collect::<Result<Vec<_>, _>>()?;
        Ok(Some(Self {
            first: lo,
            delta,
            tables,
        }))
    }

    fn grid(&self) -> &Grid {
        &self.tables[0].grid
    }

    fn covers(&self, mu: f64, u_needed: f64) -> bool {
        let last = self.first + self.delta * (self.tables.len() - 1) as f64;
        mu >= self.first && mu <= last && u_needed <= self.grid().u_max
    }

    /// The four tables around μ and their Lagrange weights and
    /// μ-derivatives of the weights.
    fn stencil(&self, mu: f64) -> (usize, [f64; 4], [f64; 4]) {
        let n = self.tables.len();
        let pos = (mu - self.first) / self.delta;
        let k = (pos.floor() as usize).clamp(1, n - 3);
        let tau = pos - k as f64;
        let weights = [
            -tau * (tau - 1.0) * (tau - 2.0) / 6.0,
            (tau + 1.0) * (tau - 1.0) * (tau - 2.0) / 2.0,
            -(tau + 1.0) * tau * (tau - 2.0) / 2.0,
            (tau + 1.0) * tau * (tau - 1.0) / 6.0,
        ];
        let slopes = [
            -(3.0 * tau * tau - 6.0 * tau + 2.0) / 6.0 / self.delta,
            (3.0 * tau * tau - 4.0 * tau - 1.0) / 2.0 / self.delta,
            -(3.0 * tau * tau - 2.0 * tau - 2.0) / 2.0 / self.delta,
            (3.0 * tau * tau - 1.0) / 6.0 / self.delta,
        ];
        (k - 1, weights, slopes)
    }
}

/// Half-width of the central difference in μ for ∂f/∂μ.
const MU_STEP: f64 = 1e-4;

/// (f, ∂f/∂u, ∂f/∂μ) at unit scale for every distinct (time, |x|) node.
type NodeValues = Vec<[f64; 3]>;

/// The stable model with parameters (D, μ).
struct StableProblem<'a> {
    data: &'a ProfileData,
    y: &'a [f64],
    mu_bounds: [f64; 2],
    precision: Precision,
    /// Shared tables around the best fit, for bootstrap refits.
    mu_grid: Option<&'a MuGrid>,
    cache: RefCell<Vec<Rc<DensityTable>>>,
    failure: RefCell<Option<ProfileError>>,
    tables: Cell<usize>,
}

impl<'a> StableProblem<'a> {
    fn new(
        data: &'a ProfileData,
        y: &'a [f64],
        mu_bounds: [f64; 2],
        precision: Precision,
        mu_grid: Option<&'a MuGrid>,
    ) -> Self {
        Self {
            data,
            y,
            mu_bounds,
            precision,
            mu_grid,
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
        // A trial step with D → 0 asks for u → ∞ (or NaN): beyond
        // MAX_TABLE_U the table's power-law end carries on, so the grid
        // never needs more (an unbounded request overflowed its length).
        let u_needed = if u_needed.is_finite() {
            u_needed.min(MAX_TABLE_U)
        } else {
            MAX_TABLE_U
        };
        if let Some(t) = self
            .cache
            .borrow()
            .iter()
            .find(|t| t.mu.to_bits() == mu.to_bits() && t.grid.u_max >= u_needed)
        {
            return Some(Rc::clone(t));
        }
        let density = match unit_density(mu) {
            Ok(d) => d,
            Err(e) => {
                *self.failure.borrow_mut() = Some(e);
                return None;
            }
        };
        // A margin, so that the next few steps in D reuse the table.
        let grid = Grid::new(curvature_scale(mu), 2.0 * u_needed);
        let table = Rc::new(DensityTable::build(mu, grid, &density));
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

    /// f (and, with `derivatives`, ∂f/∂u and ∂f/∂μ) at every node, from the
    /// shared μ grid when it covers (D, μ), otherwise from per-μ tables;
    /// `None` when the density failed.
    fn node_values(&self, d: f64, mu: f64, s: &[f64], derivatives: bool) -> Option<NodeValues> {
        let need = self.u_needed(d, mu);
        let nodes = &self.data.nodes;
        if let Some(grid) = self.mu_grid.filter(|g| g.covers(mu, need)) {
            let (first, weights, slopes) = grid.stencil(mu);
            let tables = &grid.tables[first..first + 4];
            return Some(
                nodes
                    .iter()
                    .map(|&(ti, ax)| {
                        let u = ax / s[ti];
                        let at = grid.grid().locate(u);
                        let (mut g, mut dg_dw, mut dg_dmu) = (0.0, 0.0, 0.0);
                        for (q, table) in tables.iter().enumerate() {
                            let (gq, dq) = table.log_at(&at);
                            g += weights[q] * gq;
                            dg_dw += weights[q] * dq;
                            dg_dmu += slopes[q] * gq;
                        }
                        let f = g.exp();
                        [f, f * dg_dw * at.dw_du, f * dg_dmu]
                    })
                    .collect(),
            );
        }
        let table = self.table(mu, need)?;
        if !derivatives {
            return Some(
                nodes
                    .iter()
                    .map(|&(ti, ax)| [table.eval(ax / s[ti]).0, 0.0, 0.0])
                    .collect(),
            );
        }
        // Central differences for the final covariance; a forward one (half
        // the tables) for bootstrap refits, which only need the minimum.
        let (lo, hi) = match self.precision {
            Precision::Full => (
                (mu - MU_STEP).max(self.mu_bounds[0]),
                (mu + MU_STEP).min(self.mu_bounds[1]),
            ),
            Precision::Replicate if mu + MU_STEP <= self.mu_bounds[1] => (mu, mu + MU_STEP),
            Precision::Replicate => (mu - MU_STEP, mu),
        };
        let below = self.table(lo, need)?;
        let above = self.table(hi, need)?;
        Some(
            nodes
                .iter()
                .map(|&(ti, ax)| {
                    let u = ax / s[ti];
                    let (f, df) = table.eval(u);
                    [f, df, (above.eval(u).0 - below.eval(u).0) / (hi - lo)]
                })
                .collect(),
        )
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
        let s = self.scales(d, mu);
        let Some(values) = self.node_values(d, mu, &s, false) else {
            r.fill(f64::NAN);
            return;
        };
        for (k, rk) in r.iter_mut().enumerate() {
            let n = self.data.node_of[k];
            let c = values[n][0] / s[self.data.nodes[n].0];
            *rk = (self.y[k] - c) / self.data.sigma[k];
        }
    }

    fn jacobian(&self, p: &[f64], jac: &mut [f64]) -> bool {
        let (d, mu) = (p[0], p[1]);
        let s = self.scales(d, mu);
        let Some(values) = self.node_values(d, mu, &s, true) else {
            jac.fill(f64::NAN);
            return true;
        };
        let ln_dt: Vec<f64> = self.data.times.iter().map(|&t| (d * t).ln()).collect();
        // ∂C/∂D = −(f + u f')/(sμD); ∂C/∂μ = (f + u f') ln(Dt)/(sμ²) + ∂f/∂μ / s.
        let derivatives: Vec<[f64; 2]> = self
            .data
            .nodes
            .iter()
            .zip(&values)
            .map(|(&(ti, ax), &[f, df, df_dmu])| {
                let sk = s[ti];
                let core = f + ax / sk * df;
                [
                    -core / (sk * mu * d),
                    core * ln_dt[ti] / (sk * mu * mu) + df_dmu / sk,
                ]
            })
            .collect();
        for k in 0..self.y.len() {
            let [dc_dd, dc_dmu] = derivatives[self.data.node_of[k]];
            let w = -1.0 / self.data.sigma[k];
            jac[2 * k] = w * dc_dd;
            jac[2 * k + 1] = w * dc_dmu;
        }
        true
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
mod tests {
    use super::*;
    use crate::numerics::stats::seeded_rng;
    use crate::testing::{cauchy, gaussian};
    use crate::tolerance::close;
    use ndarray::Array2;

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
    fn a_free_fermion_map_never_panics_the_profile_fit() {
        // C = J_x(2t)² of the XX chain (a front, no stable law): in the
        // window t = 2–20 a trial step drove D → 0 and asked the density
        // table for an unbounded range ("capacity overflow"). The fit must
        // answer with a result or an error. Model: free fermions, exact.
        use crate::model::couplings::Couplings;
        use crate::model::free_fermion::FreeFermionChain;
        let sites = 121;
        let times = crate::testing::log_times(1.0, 20.0, 25);
        let h = Array2::from_shape_fn(
            (sites, sites),
            |(i, j)| {
                if i.abs_diff(j) == 1 { 1.0 } else { 0.0 }
            },
        );
        let chain =
            FreeFermionChain::new(&Couplings::from_matrix(h).expect("couplings")).expect("chain");
        let values = chain.correlations(60, &times).expect("correlations");
        let x: Vec<i32> = (0..sites).map(|i| i as i32 - 60).collect();
        let errors = Array2::from_elem(values.dim(), 1e-4);
        let map = CorrelationMap::complete(x, times, values, Some(errors)).expect("map");
        for (t0, x_max) in [(2.0, None), (1.0, Some(20)), (5.0, Some(40))] {
            let window = map.window(Some(t0), Some(20.0), x_max).expect("window");
            let options = ProfileOptions {
                bootstrap: 0,
                ..ProfileOptions::default()
            };
            if let Ok(c) = compare_profiles(&window, &options) {
                assert!(c.stable.mu.is_finite() && c.stable.d.is_finite(), "{c:?}");
            }
        }
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
        let r =
            fit_profile(&map, ProfileModel::Gaussian, &ProfileOptions::default()).expect("fits");
        assert!((r.d - 0.45).abs() < 1e-10, "{r:?}");
        assert_eq!(r.error_basis, ErrorBasis::Scatter);
        assert!(r.p_value.is_none());
    }

    /// The interpolation error bound of the module documentation.
    fn assert_table_matches(mu: f64, table: &DensityTable, f: &dyn Fn(f64) -> f64) {
        let peak = f(0.0);
        for k in 0..3000 {
            let u = 0.0137 + 0.1 * f64::from(k);
            let (v, dv) = table.eval(u);
            let exact = f(u);
            assert!(
                (v - exact).abs() <= 3e-6 * exact + 1e-8 * peak,
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

    #[test]
    fn table_reproduces_closed_form_densities() {
        // Against the closed forms at μ = 1, 1/(π(1+u²)), and μ = 2,
        // exp(−u²/4)/(2√π) (physics notes), at points between the nodes:
        // error ≤ 3e-6 of f plus 1e-8 of the peak (the Gaussian's far tail,
        // f < 1e-5 f(0), is interpolated to ~u²·1e-8 relative).
        let cauchy_unit = UnitDensity {
            ln_f: Box::new(|u: f64| -(PI * (1.0 + u * u)).ln()),
            d_ln_f: Box::new(|u: f64| -2.0 * u / (1.0 + u * u)),
        };
        let gauss_unit = UnitDensity {
            ln_f: Box::new(|u: f64| -u * u / 4.0 - (2.0 * PI.sqrt()).ln()),
            d_ln_f: Box::new(|u: f64| -u / 2.0),
        };
        let cauchy_f = |u: f64| 1.0 / (PI * (1.0 + u * u));
        let gauss_f = |u: f64| (-u * u / 4.0).exp() / (2.0 * PI.sqrt());
        let table = |mu: f64, density: &UnitDensity| {
            DensityTable::build(mu, Grid::new(curvature_scale(mu), 300.0), density)
        };
        assert_table_matches(1.0, &table(1.0, &cauchy_unit), &cauchy_f);
        assert_table_matches(2.0, &table(2.0, &gauss_unit), &gauss_f);
    }

    #[test]
    fn table_reproduces_the_stable_density_at_other_indices() {
        // The same bound against `StableDensity` itself (checked against
        // mpmath to 1e-12 in its own module) where no closed form exists.
        for mu in [0.35, 0.5, 0.8, 1.2, 1.5, 1.9, 1.97, 1.995] {
            let density = StableDensity::standard(mu).expect("valid mu");
            let grid = Grid::new(curvature_scale(mu), 300.0);
            let table = DensityTable::build(mu, grid, &unit_density(mu).expect("density"));
            assert_table_matches(mu, &table, &|u| density.pdf(u));
        }
    }

    #[test]
    fn mu_grid_interpolates_between_its_tables() {
        // Four-point Lagrange interpolation in μ (spacing 0.01) against a
        // table built directly at the target μ on the same u grid: ln f to
        // 5e-8 (the Lagrange remainder δ⁴|τ(τ²−1)(τ−2)|/24·∂⁴g/∂μ⁴ is
        // ≈ 2e-10·∂⁴g/∂μ⁴ inside and up to 40 times more in the end
        // intervals, where the stencil cannot be centred), and ∂ ln f/∂μ
        // against central differences of direct tables to 1e-5 absolute.
        let grid = MuGrid::build(1.3, 0.02, 50.0, [MU_MIN, 2.0])
            .expect("density")
            .expect("finite error");
        assert_eq!(grid.tables.len(), 25);
        let direct =
            |mu: f64| DensityTable::build(mu, *grid.grid(), &unit_density(mu).expect("density"));
        for mu in [1.1837, 1.2551, 1.3, 1.3555, 1.4163] {
            assert!(grid.covers(mu, 40.0));
            let (first, weights, slopes) = grid.stencil(mu);
            let (at_mu, up, down) = (direct(mu), direct(mu + 1e-4), direct(mu - 1e-4));
            for k in 0..200 {
                let u = 0.013 + 0.25 * f64::from(k);
                let at = grid.grid().locate(u);
                let (mut g, mut dg_dmu) = (0.0, 0.0);
                for q in 0..4 {
                    let gq = grid.tables[first + q].log_at(&at).0;
                    g += weights[q] * gq;
                    dg_dmu += slopes[q] * gq;
                }
                let exact = at_mu.log_at(&at).0;
                assert!((g - exact).abs() < 5e-8, "mu {mu}, u {u}: {g} vs {exact}");
                let slope = (up.log_at(&at).0 - down.log_at(&at).0) / 2e-4;
                assert!(
                    (dg_dmu - slope).abs() < 1e-5,
                    "mu {mu}, u {u}: {dg_dmu} vs {slope}"
                );
            }
        }
        assert!(!grid.covers(1.5, 1.0) && !grid.covers(1.3, 1e4));
    }

    /// C(x,t) from the stable density with s = (Dt)^(1/μ).
    fn stable_profile(mu: f64, d: f64) -> impl Fn(f64, f64) -> f64 {
        let density = StableDensity::standard(mu).expect("valid mu");
        move |x, t| {
            let s = (d * t).powf(1.0 / mu);
            density.pdf(x / s) / s
        }
    }

    #[test]
    fn stable_fit_recovers_cauchy_parameters_and_aic_prefers_it() {
        // Closed-form Cauchy data (μ = 1, D = 0.8), 61 sites × 6 times, noise
        // 2e-4 + 1 % of C. Truth within 3σ; the stable model must win by
        // AIC and BIC by a wide margin.
        let times = [2.0, 3.0, 4.5, 6.0, 8.0, 10.0];
        let map = noisy_map(|x, t| cauchy(x, t, 0.8), 30, &times, 2e-4, 0.01, 17);
        let c = compare_profiles(&map, &ProfileOptions::default()).expect("fits");
        let s = &c.stable;
        assert!(s.termination.is_converged(), "{s:?}");
        assert!((s.mu - 1.0).abs() < 3.0 * s.mu_err, "{s:?}");
        assert!((s.d - 0.8).abs() < 3.0 * s.d_err, "{s:?}");
        assert!(s.mu_err < 0.02, "{s:?}");
        assert!(s.chi2_dof > 0.8 && s.chi2_dof < 1.25, "{s:?}");
        assert_eq!(c.preferred, ProfileModel::Stable, "{}", c.reason);
        assert!(c.delta_aic > 10.0 && c.delta_bic > 10.0, "{c:?}");
    }

    #[test]
    fn stable_fit_recovers_other_indices() {
        // Data from `StableDensity` at μ = 0.7 (D = 0.5) and μ = 1.5
        // (D = 1.2), 61 sites × 5 times, noise 2e-4 + 1 %.
        let times = [2.0, 3.5, 5.0, 7.0, 10.0];
        for (mu, d, seed) in [(0.7, 0.5, 31), (1.5, 1.2, 32)] {
            let map = noisy_map(stable_profile(mu, d), 30, &times, 2e-4, 0.01, seed);
            let r =
                fit_profile(&map, ProfileModel::Stable, &ProfileOptions::default()).expect("fits");
            assert!((r.mu - mu).abs() < 3.0 * r.mu_err, "{r:?}");
            assert!((r.d - d).abs() < 3.0 * r.d_err, "{r:?}");
            assert!(r.mu_err < 0.05, "{r:?}");
        }
    }

    #[test]
    fn maps_without_errors_use_the_scatter_and_still_compare_models() {
        // Exact closed-form Cauchy values (μ = 1, D = 0.6) without errors:
        // μ and D recovered to the table's accuracy, the information
        // criteria from n ln(χ²/n) still prefer the stable model, and the
        // bootstrap runs with σ_eff = √(χ²/dof).
        let x: Vec<i32> = (-15..=15).collect();
        let times = vec![2.0, 3.0, 5.0, 8.0];
        let values = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
            cauchy(f64::from(x[j]), times[i], 0.6)
        });
        let map = CorrelationMap::complete(x, times, values, None).expect("map");
        let options = ProfileOptions {
            bootstrap: 10,
            seed: 1,
            ..ProfileOptions::default()
        };
        let c = compare_profiles(&map, &options).expect("fits");
        assert_eq!(c.preferred, ProfileModel::Stable, "{}", c.reason);
        assert_eq!(c.stable.error_basis, ErrorBasis::Scatter);
        assert!((c.stable.mu - 1.0).abs() < 1e-5, "{:?}", c.stable);
        assert!((c.stable.d - 0.6).abs() < 1e-5, "{:?}", c.stable);
        assert!(c.stable.mu_err_bootstrap.is_some_and(f64::is_finite));
    }

    #[test]
    fn fits_agree_with_scipy_curve_fit() {
        // scipy 1.17.1, numpy 2.4.6: curve_fit (absolute_sigma),
        // levy_stable.pdf default method; tests/reference/profile_reference.py
        const SCIPY_GAUSSIAN_D: f64 = 1.1205270156053773;
        const SCIPY_GAUSSIAN_D_ERR: f64 = 0.011697542427648411;
        const SCIPY_GAUSSIAN_CHI2: f64 = 1157.407599278696;
        const SCIPY_STABLE_D: f64 = 0.7505969348349345;
        const SCIPY_STABLE_D_ERR: f64 = 0.009866331089891338;
        const SCIPY_STABLE_MU: f64 = 1.3910123177497287;
        const SCIPY_STABLE_MU_ERR: f64 = 0.014698116297564193;
        const SCIPY_STABLE_CHI2: f64 = 90.92457874428366;
        // The same deterministic map as the script: an equal Cauchy +
        // Gaussian mixture (D = 0.8) times 1 + 0.03 sin(3.7x + 1.3t).
        let x: Vec<i32> = (-12..=12).collect();
        let times = vec![2.0, 3.0, 5.0, 8.0];
        let values = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
            let (xv, t) = (f64::from(x[j]), times[i]);
            0.5 * (cauchy(xv, t, 0.8) + gaussian(xv, t, 0.8))
                * (1.0 + 0.03 * (3.7 * xv + 1.3 * t).sin())
        });
        let errors = values.mapv(|c: f64| 0.002 + 0.01 * c.abs());
        let map = CorrelationMap::complete(x, times, values, Some(errors)).expect("map");
        let c = compare_profiles(&map, &ProfileOptions::default()).expect("fits");
        let (g, s) = (&c.gaussian, &c.stable);
        // Observed agreement ~1e-7 relative; bounds: parameters and χ² to
        // 1e-6 (table and levy_stable accuracy), errors to 1e-5 (scipy's
        // finite-difference Jacobian).
        let agree = |ours: f64, theirs: f64, rel: f64| {
            assert!(close(ours, theirs, rel, 0.0), "{ours} vs scipy {theirs}");
        };
        agree(g.d, SCIPY_GAUSSIAN_D, 1e-6);
        agree(g.d_err, SCIPY_GAUSSIAN_D_ERR, 1e-5);
        agree(g.chi2, SCIPY_GAUSSIAN_CHI2, 1e-6);
        agree(s.d, SCIPY_STABLE_D, 1e-6);
        agree(s.d_err, SCIPY_STABLE_D_ERR, 1e-5);
        agree(s.mu, SCIPY_STABLE_MU, 1e-6);
        agree(s.mu_err, SCIPY_STABLE_MU_ERR, 1e-5);
        agree(s.chi2, SCIPY_STABLE_CHI2, 1e-6);
        assert_eq!(c.preferred, ProfileModel::Stable);
    }

    #[test]
    fn aic_prefers_the_gaussian_on_gaussian_data() {
        // The stable model contains the Gaussian (μ = 2, on its bound), so
        // its χ² is never larger; ΔAIC = Δχ² − 2 exceeds 0 only when the
        // free μ lowers χ² by more than 2, which for a boundary parameter
        // happens with probability ½·P(χ²₁ > 2) ≈ 8 % (Chernoff 1954,
        // boundary likelihood ratio; from memory). Over 25 seeds at least
        // 20 must prefer the Gaussian (binomial, p = 0.92: P(< 20) ≈ 3 %).
        let times = [2.0, 4.0, 6.0, 9.0];
        let mut gaussian_wins = 0;
        for seed in 0..25 {
            let map = noisy_map(
                |x, t| gaussian(x, t, 0.6),
                15,
                &times,
                5e-4,
                0.01,
                100 + seed,
            );
            let c = compare_profiles(&map, &ProfileOptions::default()).expect("fits");
            if c.preferred == ProfileModel::Gaussian {
                gaussian_wins += 1;
            }
        }
        assert!(gaussian_wins >= 20, "{gaussian_wins} of 25");
    }

    #[test]
    fn fixed_index_is_marked_fixed_and_the_boundary_is_stated() {
        // A preferred Gaussian has μ = 2 by construction: its μ must be
        // marked fixed (an error of 0 would read as exact), the stable fit's
        // μ must not be, and the ΔAIC rule must say that μ = 2 sits on the
        // boundary of the stable model's range, where the usual χ²
        // calibration of the likelihood ratio does not hold (Chernoff 1954).
        let times = [2.0, 4.0, 6.0, 9.0];
        let map = noisy_map(|x, t| gaussian(x, t, 0.6), 15, &times, 5e-4, 0.01, 100);
        let c = compare_profiles(&map, &ProfileOptions::default()).expect("fits");
        assert!(c.gaussian.mu_fixed && !c.stable.mu_fixed, "{c:?}");
        let json = serde_json::to_value(&c.gaussian).expect("serialises");
        assert_eq!(json["mu_fixed"], serde_json::Value::Bool(true));
        assert!(c.reason.contains("boundary"), "{}", c.reason);
    }

    #[test]
    fn stable_covariance_interval_covers_the_truth_about_68_percent() {
        // Coverage of μ over 150 seeds of small Cauchy maps (21 sites × 4
        // times); binomial standard deviation 3.8 %, so 60–76 % is about
        // ±2σ around 68.27 % (A&S 26.2). The bootstrap error of one map is
        // compared with its covariance error as well.
        let times = [1.5, 2.5, 4.0, 6.0];
        let seeds = 150u32;
        let mut covered = 0;
        for seed in 0..seeds {
            let map = noisy_map(
                |x, t| cauchy(x, t, 1.0),
                10,
                &times,
                1e-3,
                0.02,
                500 + u64::from(seed),
            );
            let r =
                fit_profile(&map, ProfileModel::Stable, &ProfileOptions::default()).expect("fits");
            if (r.mu - 1.0).abs() <= r.mu_err {
                covered += 1;
            }
        }
        let fraction = f64::from(covered) / f64::from(seeds);
        assert!((0.60..=0.76).contains(&fraction), "coverage {fraction}");

        let map = noisy_map(|x, t| cauchy(x, t, 1.0), 10, &times, 1e-3, 0.02, 9);
        let options = ProfileOptions {
            bootstrap: 100,
            seed: 4,
            ..ProfileOptions::default()
        };
        let r = fit_profile(&map, ProfileModel::Stable, &options).expect("fits");
        let boot = r.mu_err_bootstrap.expect("bootstrap ran");
        // 1/√(2K) = 7 % relative standard error of a standard deviation.
        assert!(
            (boot / r.mu_err - 1.0).abs() < 0.3,
            "{boot} vs {}",
            r.mu_err
        );
        let again = fit_profile(&map, ProfileModel::Stable, &options).expect("fits");
        assert_eq!(
            again.mu_err_bootstrap, r.mu_err_bootstrap,
            "seeded bootstrap repeats"
        );
    }
}
