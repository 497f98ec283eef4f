//! Optimisers: weighted nonlinear least squares (Levenberg–Marquardt) and
//! bounded one-dimensional minimisation and root finding (Brent, via argmin).
//!
//! Owns the iteration, the damping strategy, finite-difference Jacobians, the
//! covariance of fitted parameters and the reasons an iteration stops
//! ([`Termination`], shared by every report of the estimators). Must not know
//! any physics: problems arrive as residual vectors or scalar functions.
//!
//! # Why Levenberg–Marquardt is written here rather than taken from argmin
//! argmin 0.11 offers Gauss–Newton (plain and with a line search), trust-region
//! methods that need a Hessian, and quasi-Newton methods, but no
//! Levenberg–Marquardt solver. Gauss–Newton with a line search fails on the
//! NIST problems of higher difficulty from their far starting points (the
//! undamped normal equations are nearly singular there), and expressing the
//! damping loop through argmin's `Solver` trait would add nothing but
//! indirection. So LM is implemented by hand below; argmin supplies the
//! one-dimensional Brent minimiser and Brent root finder.
//!
//! # The algorithm
//! Residuals r(p) are *weighted*: r_i = (y_i − f_i(p))/σ_i, so χ²(p) = Σ r_i².
//! With J = ∂r/∂p, each trial step δ solves
//! (JᵀJ + λ D) δ = −Jᵀr,
//! with D diagonal: D_jj is the largest (JᵀJ)_jj seen so far (Marquardt's
//! scaling, in the monotone form of Moré, "The Levenberg–Marquardt algorithm:
//! implementation and theory", in Numerical Analysis, ed. G. A. Watson,
//! Springer LNM 630, 105–116 (1978)), which
//! makes the iteration invariant under rescaling of the parameters. The
//! damping λ starts at `initial_damping` and is updated from the gain ratio
//! ρ = (actual decrease of χ²)/(decrease predicted by the linear model) as in
//! Madsen, Nielsen & Tingleff, "Methods for non-linear least squares problems"
//! (2nd ed., 2004), eq. 3.16: on success λ ← λ·max(1/3, 1 − (2ρ − 1)³), on
//! failure λ ← λ·ν, ν ← 2ν. A step is accepted when ρ > 10⁻⁴. The step is
//! also held inside a trust radius, ‖D^½ δ‖ ≤ Δ, by raising λ until it fits:
//! Δ starts at `step_bound`·‖D^½ p₀‖ (MINPACK's `factor`; the default 10
//! keeps the first steps of BoxBOD from its far start out of the spurious
//! minimum at b₂ → ∞), grows to 3‖D^½ δ‖ after a step with ρ > 3/4, halves
//! after one with ρ < 1/4 and becomes ‖D^½ δ‖/2 after a rejected step.
//! The linear system is solved by a Cholesky factorisation (faer); if that
//! fails (numerically indefinite matrix) a pseudo-inverse from a singular
//! value decomposition is used instead.
//!
//! # Bounds: by projection (clamping), not by transformation
//! Each trial point is projected onto the box [lower, upper]. A parameter that
//! sits on a bound while the descent direction points outward is held fixed
//! for that step (removed from the linear system), so the other parameters
//! still move. Projection keeps the parameters — and hence the covariance —
//! in their natural coordinates; a transformation (e.g. p = lo + (hi−lo)
//! sin²θ) would distort both. A covariance for a parameter that ends on a
//! bound is meaningless; such parameters are flagged in
//! [`LeastSquaresReport::at_bound`].
//!
//! # Convergence tests (MINPACK's, Moré, Garbow & Hillstrom, ANL-80-74, 1980)
//! - gradient: max_j |(Jᵀr)_j| / (‖J_j‖ ‖r‖) ≤ `gradient_tolerance` (the cosine
//!   of the angle between the residual and each Jacobian column);
//! - step: ‖D^½ δ‖ ≤ `step_tolerance` · (‖D^½ p‖ + `step_tolerance`);
//! - χ²: both the actual and the predicted relative decrease of χ² are
//!   ≤ `chi2_tolerance` (and ρ ≤ 2).
//!
//! Near the minimum a change δ of the parameters changes χ² by about
//! (δ/σ_p)², which double precision resolves only down to ~ε·χ²: parameters
//! are therefore located to roughly √ε·σ_p (1e-8 of their standard errors),
//! far below any statistical error.
//!
//! # Covariance
//! `covariance` = (JᵀWJ)⁻¹ in terms of the model's Jacobian and W = diag(1/σ²)
//! (here (JᵀJ)⁻¹ of the weighted residuals), computed from a singular value
//! decomposition of J at the solution, *unscaled*: right when the σ are true
//! one-sigma errors. `scaled_covariance` = covariance × χ²/dof: right when the
//! σ are only relative weights (NIST StRD's certified standard deviations are
//! of this kind, with σ = 1). When J has numerical rank below the number of
//! parameters, the covariance is undefined and every entry is NaN.

mod marquardt;
mod scalar;

use marquardt::Marquardt;
pub use scalar::{ScalarResult, minimize_bounded, root_bracketed, scan_then_brent};

use faer::linalg::solvers::Solve;
use faer::{Mat, Side};
use thiserror::Error;

/// Why an optimiser stopped. Shared by every fit report in the crate.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Termination {
    /// Converged: the gradient is orthogonal to the residual within tolerance.
    GradientTolerance,
    /// Converged: the step became negligible relative to the parameters.
    StepTolerance,
    /// Converged: χ² stopped decreasing, actually and as predicted.
    Chi2Tolerance,
    /// χ² reached exactly zero: the model passes through every point.
    ExactFit,
    /// A one-dimensional search (Brent) met its interval tolerance.
    Converged,
    /// The best value of a one-dimensional search lies on the edge of the
    /// searched interval: the true minimum may lie outside.
    MinimumAtBoundary,
    /// The iteration limit was reached before any convergence test passed.
    MaxIterations,
    /// The Jacobian at the end has numerical rank below the number of
    /// parameters: the parameters are not determined and the covariance is
    /// undefined.
    SingularJacobian,
    /// The damping grew without bound and no step lowered χ².
    NoProgress,
}

impl Termination {
    /// Why the search stopped, in plain words for outputs.
    #[must_use]
    pub fn words(self) -> &'static str {
        match self {
            Self::GradientTolerance => "converged (the gradient vanished)",
            Self::StepTolerance => "converged (the steps became negligible)",
            Self::Chi2Tolerance => "converged (χ² stopped decreasing)",
            Self::ExactFit => "exact fit (χ² = 0)",
            Self::Converged => "converged",
            Self::MinimumAtBoundary => "best value at the edge of the searched interval",
            Self::MaxIterations => "iteration limit reached before convergence",
            Self::SingularJacobian => "parameters not determined (singular Jacobian)",
            Self::NoProgress => "no progress: no step lowered χ²",
        }
    }

    /// `true` for the reasons that mean "found a minimum".
    #[must_use]
    pub fn is_converged(self) -> bool {
        matches!(
            self,
            Self::GradientTolerance
                | Self::StepTolerance
                | Self::Chi2Tolerance
                | Self::ExactFit
                | Self::Converged
        )
    }
}

/// Why an optimisation could not be started.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum OptimizeError {
    #[error("{what} has length {got}, expected {expected}")]
    Dimension {
        what: &'static str,
        expected: usize,
        got: usize,
    },
    #[error("there are no parameters to fit")]
    NoParameters,
    #[error("{residuals} residuals cannot determine {params} parameters")]
    TooFewResiduals { residuals: usize, params: usize },
    #[error("bounds of parameter {index} are invalid: lower {lower}, upper {upper}")]
    BadBounds {
        index: usize,
        lower: f64,
        upper: f64,
    },
    #[error("starting value {value} of parameter {index} is not finite or lies outside its bounds")]
    BadStart { index: usize, value: f64 },
    #[error("residual {index} is not finite at the starting point")]
    NonFiniteStart { index: usize },
    #[error("error {value} of data point {index} is not finite and > 0")]
    BadSigma { index: usize, value: f64 },
    #[error("an analytic Jacobian was requested but the problem provides none")]
    NoAnalyticJacobian,
    #[error("interval [{lower}, {upper}] is empty or not finite")]
    BadInterval { lower: f64, upper: f64 },
    #[error("function values {f_lower} and {f_upper} at the ends do not bracket a root")]
    NotBracketed { f_lower: f64, f_upper: f64 },
    #[error("one-dimensional solver failed: {0}")]
    Solver(String),
}

/// A least-squares problem: weighted residuals r_i(p), χ² = Σ r_i².
pub trait LeastSquaresProblem {
    /// Number of parameters n.
    fn n_params(&self) -> usize;
    /// Number of residuals m (≥ n).
    fn n_residuals(&self) -> usize;
    /// Writes the m weighted residuals r_i(p) = (y_i − f_i(p))/σ_i into `r`.
    fn residuals(&self, p: &[f64], r: &mut [f64]);
    /// Writes ∂r_i/∂p_j row-major (m × n, index i·n + j) into `jac` and
    /// returns `true`, or returns `false` when no analytic Jacobian exists.
    fn jacobian(&self, _p: &[f64], _jac: &mut [f64]) -> bool {
        false
    }
}

/// How the Jacobian is obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum JacobianMethod {
    /// Analytic when the problem provides it, central differences otherwise.
    #[default]
    Auto,
    /// The problem's analytic Jacobian (an error if it has none).
    Analytic,
    /// Forward differences, step √ε·|p_j| (√ε when p_j = 0): relative
    /// accuracy ~1e-8. The final covariance always uses central differences.
    ForwardDifference,
    /// Central differences, step ε^⅓·|p_j| (ε^⅓ when p_j = 0): relative
    /// accuracy ~1e-10.
    CentralDifference,
}

/// Settings of [`least_squares`]. See the module documentation for the tests.
#[derive(Debug, Clone, PartialEq)]
pub struct LmOptions {
    pub jacobian: JacobianMethod,
    /// Lower bounds (length n), `None` for unbounded below.
    pub lower: Option<Vec<f64>>,
    /// Upper bounds (length n), `None` for unbounded above.
    pub upper: Option<Vec<f64>>,
    /// Maximum number of trial steps (each costs one residual evaluation).
    pub max_iterations: usize,
    pub gradient_tolerance: f64,
    pub step_tolerance: f64,
    pub chi2_tolerance: f64,
    /// Initial λ relative to the scaling D.
    pub initial_damping: f64,
    /// Initial trust radius for ‖D^½ δ‖ as a multiple of ‖D^½ p₀‖
    /// (MINPACK's `factor`, recommended range 0.1–100).
    pub step_bound: f64,
    /// Singular values of J below this fraction of the largest count as zero.
    pub rank_tolerance: f64,
}

impl Default for LmOptions {
    fn default() -> Self {
        Self {
            jacobian: JacobianMethod::Auto,
            lower: None,
            upper: None,
            max_iterations: 20_000,
            gradient_tolerance: 1e-12,
            step_tolerance: 1e-14,
            chi2_tolerance: 1e-15,
            initial_damping: 1e-3,
            step_bound: 10.0,
            rank_tolerance: 1e-13,
        }
    }
}

/// Result of [`least_squares`]. See the module documentation for the
/// meaning of the two covariances.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct LeastSquaresReport {
    pub params: Vec<f64>,
    /// (JᵀWJ)⁻¹, unscaled (row-major n × n); NaN when J is rank-deficient.
    pub covariance: Vec<Vec<f64>>,
    /// covariance × χ²/dof; NaN when dof = 0.
    pub scaled_covariance: Vec<Vec<f64>>,
    pub chi2: f64,
    pub dof: usize,
    /// χ²/dof; NaN when dof = 0.
    pub chi2_dof: f64,
    /// Trial steps taken.
    pub iterations: usize,
    /// Numerical rank of J at the solution.
    pub rank: usize,
    /// Which parameters ended on one of their bounds.
    pub at_bound: Vec<bool>,
    pub termination: Termination,
}

impl LeastSquaresReport {
    /// One-sigma errors from the unscaled covariance.
    #[must_use]
    pub fn std_errors(&self) -> Vec<f64> {
        diagonal_sqrt(&self.covariance)
    }

    /// One-sigma errors from the scaled covariance (NIST StRD's convention).
    #[must_use]
    pub fn scaled_std_errors(&self) -> Vec<f64> {
        diagonal_sqrt(&self.scaled_covariance)
    }
}

fn diagonal_sqrt(m: &[Vec<f64>]) -> Vec<f64> {
    m.iter().enumerate().map(|(i, row)| row[i].sqrt()).collect()
}

type Model<'a> = Box<dyn Fn(f64, &[f64]) -> f64 + 'a>;
type Gradient<'a> = Box<dyn Fn(f64, &[f64], &mut [f64]) + 'a>;

/// The common special case: data (x_i, y_i ± σ_i) and a model y = f(x; p),
/// residuals r_i = (y_i − f(x_i; p))/σ_i (σ_i = 1 when no errors are given).
pub struct CurveFit<'a> {
    x: &'a [f64],
    y: &'a [f64],
    sigma: Option<&'a [f64]>,
    n_params: usize,
    model: Model<'a>,
    gradient: Option<Gradient<'a>>,
}

impl std::fmt::Debug for CurveFit<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("CurveFit")
            .field("points", &self.x.len())
            .field("n_params", &self.n_params)
            .field("weighted", &self.sigma.is_some())
            .field("analytic_gradient", &self.gradient.is_some())
            .finish()
    }
}

impl<'a> CurveFit<'a> {
    /// A curve fit of `n_params` parameters to the points (x, y ± σ).
    ///
    /// # Errors
    /// [`OptimizeError::Dimension`] when the lengths differ,
    /// [`OptimizeError::BadSigma`] for an error that is not finite and > 0.
    pub fn new(
        x: &'a [f64],
        y: &'a [f64],
        sigma: Option<&'a [f64]>,
        n_params: usize,
        model: impl Fn(f64, &[f64]) -> f64 + 'a,
    ) -> Result<Self, OptimizeError> {
        if y.len() != x.len() {
            return Err(OptimizeError::Dimension {
                what: "y",
                expected: x.len(),
                got: y.len(),
            });
        }
        if let Some(s) = sigma {
            if s.len() != x.len() {
                return Err(OptimizeError::Dimension {
                    what: "sigma",
                    expected: x.len(),
                    got: s.len(),
                });
            }
            if let Some((index, &value)) = s
                .iter()
                .enumerate()
                .find(|&(_, &v)| !(v.is_finite() && v > 0.0))
            {
                return Err(OptimizeError::BadSigma { index, value });
            }
        }
        Ok(Self {
            x,
            y,
            sigma,
            n_params,
            model: Box::new(model),
            gradient: None,
        })
    }

    /// Adds the analytic gradient ∂f/∂p_j at (x, p), written into its third
    /// argument.
    #[must_use]
    pub fn with_gradient(mut self, gradient: impl Fn(f64, &[f64], &mut [f64]) + 'a) -> Self {
        self.gradient = Some(Box::new(gradient));
        self
    }

    fn sigma(&self, i: usize) -> f64 {
        self.sigma.map_or(1.0, |s| s[i])
    }
}

impl LeastSquaresProblem for CurveFit<'_> {
    fn n_params(&self) -> usize {
        self.n_params
    }

    fn n_residuals(&self) -> usize {
        self.x.len()
    }

    fn residuals(&self, p: &[f64], r: &mut [f64]) {
        for (i, ri) in r.iter_mut().enumerate() {
            *ri = (self.y[i] - (self.model)(self.x[i], p)) / self.sigma(i);
        }
    }

    fn jacobian(&self, p: &[f64], jac: &mut [f64]) -> bool {
        let Some(gradient) = &self.gradient else {
            return false;
        };
        let n = self.n_params;
        for (i, row) in jac.chunks_exact_mut(n).enumerate() {
            gradient(self.x[i], p, row);
            let s = -1.0 / self.sigma(i);
            row.iter_mut().for_each(|v| *v *= s);
        }
        true
    }
}

/// The box [lower, upper] with validated entries.
struct Bounds {
    lower: Vec<f64>,
    upper: Vec<f64>,
}

impl Bounds {
    fn new(n: usize, options: &LmOptions) -> Result<Self, OptimizeError> {
        let take = |b: &Option<Vec<f64>>, what, fill: f64| match b {
            None => Ok(vec![fill; n]),
            Some(v) if v.len() == n => Ok(v.clone()),
            Some(v) => Err(OptimizeError::Dimension {
                what,
                expected: n,
                got: v.len(),
            }),
        };
        let lower = take(&options.lower, "lower bounds", f64::NEG_INFINITY)?;
        let upper = take(&options.upper, "upper bounds", f64::INFINITY)?;
        for index in 0..n {
            let (lo, hi) = (lower[index], upper[index]);
            if lo.is_nan() || hi.is_nan() || lo > hi {
                return Err(OptimizeError::BadBounds {
                    index,
                    lower: lo,
                    upper: hi,
                });
            }
        }
        Ok(Self { lower, upper })
    }

    fn clamp(&self, j: usize, v: f64) -> f64 {
        v.clamp(self.lower[j], self.upper[j])
    }

    fn at_lower(&self, j: usize, v: f64) -> bool {
        v <= self.lower[j]
    }

    fn at_upper(&self, j: usize, v: f64) -> bool {
        v >= self.upper[j]
    }
}

/// Evaluates the Jacobian of the weighted residuals at `p` by the chosen
/// method. `r` must hold the residuals at `p` (used by forward differences).
struct JacobianEvaluator<'a, P: ?Sized> {
    problem: &'a P,
    bounds: &'a Bounds,
    m: usize,
    n: usize,
    scratch_p: Vec<f64>,
    scratch_r: Vec<f64>,
    scratch_r2: Vec<f64>,
}

impl<'a, P: LeastSquaresProblem + ?Sized> JacobianEvaluator<'a, P> {
    fn new(problem: &'a P, bounds: &'a Bounds) -> Self {
        let (m, n) = (problem.n_residuals(), problem.n_params());
        Self {
            problem,
            bounds,
            m,
            n,
            scratch_p: vec![0.0; n],
            scratch_r: vec![0.0; m],
            scratch_r2: vec![0.0; m],
        }
    }

    fn evaluate(&mut self, method: JacobianMethod, p: &[f64], r: &[f64], jac: &mut [f64]) {
        match method {
            JacobianMethod::Auto | JacobianMethod::Analytic => {
                if !self.problem.jacobian(p, jac) {
                    self.central(p, jac);
                }
            }
            JacobianMethod::ForwardDifference => self.forward(p, r, jac),
            JacobianMethod::CentralDifference => self.central(p, jac),
        }
    }

    /// A step of relative size `rel` in parameter `j`, pointed away from a
    /// bound it would cross, and made exactly representable.
    fn step(&self, p: &[f64], j: usize, rel: f64) -> f64 {
        let mut h = if p[j].abs() > 0.0 {
            rel * p[j].abs()
        } else {
            rel
        };
        if p[j] + h > self.bounds.upper[j] {
            h = -h;
        }
        (p[j] + h) - p[j]
    }

    fn forward(&mut self, p: &[f64], r: &[f64], jac: &mut [f64]) {
        let rel = f64::EPSILON.sqrt();
        for j in 0..self.n {
            let h = self.step(p, j, rel);
            self.scratch_p.copy_from_slice(p);
            self.scratch_p[j] += h;
            self.problem.residuals(&self.scratch_p, &mut self.scratch_r);
            for i in 0..self.m {
                jac[i * self.n + j] = (self.scratch_r[i] - r[i]) / h;
            }
        }
    }

    fn central(&mut self, p: &[f64], jac: &mut [f64]) {
        let rel = f64::EPSILON.cbrt();
        for j in 0..self.n {
            let h = self.step(p, j, rel).abs();
            // Near a bound the symmetric stencil would leave the box; fall
            // back to a one-sided difference of the same step there.
            let up = (p[j] + h).min(self.bounds.upper[j]);
            let down = (p[j] - h).max(self.bounds.lower[j]);
            self.scratch_p.copy_from_slice(p);
            self.scratch_p[j] = up;
            self.problem.residuals(&self.scratch_p, &mut self.scratch_r);
            self.scratch_p[j] = down;
            self.problem
                .residuals(&self.scratch_p, &mut self.scratch_r2);
            let width = up - down;
            for i in 0..self.m {
                jac[i * self.n + j] = (self.scratch_r[i] - self.scratch_r2[i]) / width;
            }
        }
    }
}

fn sum_sq(r: &[f64]) -> f64 {
    r.iter().map(|v| v * v).sum()
}

/// Solves the symmetric positive (semi)definite system `a x = b` (a is k × k,
/// row-major): Cholesky first, the SVD pseudo-inverse when Cholesky fails.
pub(crate) fn solve_spd(a: &[f64], b: &[f64], k: usize) -> Vec<f64> {
    let mat = Mat::<f64>::from_fn(k, k, |i, j| a[i * k + j]);
    let rhs = Mat::<f64>::from_fn(k, 1, |i, _| b[i]);
    if let Ok(llt) = mat.llt(Side::Lower) {
        let x = llt.solve(&rhs);
        let out: Vec<f64> = (0..k).map(|i| x[(i, 0)]).collect();
        if out.iter().all(|v| v.is_finite()) {
            return out;
        }
    }
    pseudo_inverse_solve(&mat, b, 1e-14)
}

/// x = A⁺ b with singular values below `rcond`·σ_max dropped.
fn pseudo_inverse_solve(a: &Mat<f64>, b: &[f64], rcond: f64) -> Vec<f64> {
    let k = a.ncols();
    let Ok(svd) = a.thin_svd() else {
        return vec![0.0; k];
    };
    let (u, s, v) = (svd.U(), svd.S(), svd.V());
    let smax = if k > 0 { s[0] } else { 0.0 };
    let mut x = vec![0.0; k];
    for l in 0..s.dim() {
        if s[l] <= rcond * smax || s[l] <= 0.0 {
            continue;
        }
        let coef: f64 = (0..a.nrows()).map(|i| u[(i, l)] * b[i]).sum::<f64>() / s[l];
        for (j, xj) in x.iter_mut().enumerate() {
            *xj += v[(j, l)] * coef;
        }
    }
    x
}

/// (JᵀJ)⁻¹ from the SVD of J (m × n row-major): V diag(1/s²) Vᵀ, with the
/// numerical rank. All NaN when the rank is below n.
fn covariance_from_jacobian(jac: &[f64], m: usize, n: usize, rcond: f64) -> (Vec<Vec<f64>>, usize) {
    let nan = vec![vec![f64::NAN; n]; n];
    let mat = Mat::<f64>::from_fn(m, n, |i, j| jac[i * n + j]);
    if jac.iter().any(|v| !v.is_finite()) {
        return (nan, 0);
    }
    let Ok(svd) = mat.thin_svd() else {
        return (nan, 0);
    };
    let (s, v) = (svd.S(), svd.V());
    let smax = s[0];
    let rank = (0..s.dim())
        .filter(|&l| s[l] > rcond * smax && s[l] > 0.0)
        .count();
    if rank < n {
        return (nan, rank);
    }
    let mut cov = vec![vec![0.0; n]; n];
    for (a, row) in cov.iter_mut().enumerate() {
        for (b, c) in row.iter_mut().enumerate() {
            *c = (0..n).map(|l| v[(a, l)] * v[(b, l)] / (s[l] * s[l])).sum();
        }
    }
    (cov, rank)
}

/// Minimises χ²(p) = Σ r_i(p)² from `start` by Levenberg–Marquardt (see the
/// module documentation for the algorithm, bounds and covariances).
///
/// # Errors
/// Inconsistent dimensions, fewer residuals than parameters, invalid bounds,
/// a start outside the bounds or with non-finite residuals, or an analytic
/// Jacobian requested from a problem that has none.
pub fn least_squares<P: LeastSquaresProblem + ?Sized>(
    problem: &P,
    start: &[f64],
    options: &LmOptions,
) -> Result<LeastSquaresReport, OptimizeError> {
    let (m, n) = (problem.n_residuals(), problem.n_params());
    if n == 0 {
        return Err(OptimizeError::NoParameters);
    }
    if start.len() != n {
        return Err(OptimizeError::Dimension {
            what: "start",
            expected: n,
            got: start.len(),
        });
    }
    if m < n {
        return Err(OptimizeError::TooFewResiduals {
            residuals: m,
            params: n,
        });
    }
    let bounds = Bounds::new(n, options)?;
    for (index, &value) in start.iter().enumerate() {
        if !value.is_finite() || value < bounds.lower[index] || value > bounds.upper[index] {
            return Err(OptimizeError::BadStart { index, value });
        }
    }
    if options.jacobian == JacobianMethod::Analytic {
        let mut probe = vec![0.0; m * n];
        if !problem.jacobian(start, &mut probe) {
            return Err(OptimizeError::NoAnalyticJacobian);
        }
    }
    let mut r = vec![0.0; m];
    problem.residuals(start, &mut r);
    if let Some(index) = r.iter().position(|v| !v.is_finite()) {
        return Err(OptimizeError::NonFiniteStart { index });
    }
    let mut lm = Marquardt::new(problem, &bounds, options, start.to_vec(), r);
    let termination = lm.run();
    Ok(lm.report(termination))
}

#[cfg(test)]
mod tests;
