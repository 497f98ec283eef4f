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

use argmin::core::{CostFunction, Executor, State, TerminationReason};
use argmin::solver::brent::{BrentOpt, BrentRoot};
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

/// The state of one Levenberg–Marquardt run.
struct Marquardt<'a, P: ?Sized> {
    problem: &'a P,
    bounds: &'a Bounds,
    options: &'a LmOptions,
    jacobian: JacobianEvaluator<'a, P>,
    m: usize,
    n: usize,
    p: Vec<f64>,
    r: Vec<f64>,
    chi2: f64,
    /// ∂r/∂p at `p`, row-major m × n.
    jac: Vec<f64>,
    /// JᵀJ at `p`, row-major n × n.
    jtj: Vec<f64>,
    /// Jᵀr at `p` (half the gradient of χ²).
    grad: Vec<f64>,
    /// Marquardt's scaling D (largest diagonal of JᵀJ seen so far).
    scale: Vec<f64>,
    lambda: f64,
    nu: f64,
    /// Trust radius bounding ‖D^½ δ‖.
    radius: f64,
    iterations: usize,
    p_trial: Vec<f64>,
    r_trial: Vec<f64>,
}

impl<'a, P: LeastSquaresProblem + ?Sized> Marquardt<'a, P> {
    fn new(
        problem: &'a P,
        bounds: &'a Bounds,
        options: &'a LmOptions,
        p: Vec<f64>,
        r: Vec<f64>,
    ) -> Self {
        let (m, n) = (problem.n_residuals(), problem.n_params());
        let mut jacobian = JacobianEvaluator::new(problem, bounds);
        let mut jac = vec![0.0; m * n];
        jacobian.evaluate(options.jacobian, &p, &r, &mut jac);
        Self {
            problem,
            bounds,
            options,
            jacobian,
            m,
            n,
            chi2: sum_sq(&r),
            p,
            r,
            jac,
            jtj: vec![0.0; n * n],
            grad: vec![0.0; n],
            scale: vec![0.0; n],
            lambda: options.initial_damping,
            nu: 2.0,
            radius: f64::NAN,
            iterations: 0,
            p_trial: vec![0.0; n],
            r_trial: vec![0.0; m],
        }
    }

    /// JᵀJ, Jᵀr and the scaling D at the current point.
    fn normal_equations(&mut self) {
        let (m, n, jac) = (self.m, self.n, &self.jac);
        for a in 0..n {
            self.grad[a] = (0..m).map(|i| jac[i * n + a] * self.r[i]).sum();
            for b in 0..=a {
                let v: f64 = (0..m).map(|i| jac[i * n + a] * jac[i * n + b]).sum();
                self.jtj[a * n + b] = v;
                self.jtj[b * n + a] = v;
            }
        }
        let max_diag = (0..n).map(|j| self.jtj[j * n + j]).fold(0.0, f64::max);
        for j in 0..n {
            let d = self.scale[j]
                .max(self.jtj[j * n + j])
                .max(f64::EPSILON * max_diag);
            self.scale[j] = if d > 0.0 { d } else { 1.0 };
        }
    }

    fn scaled_norm(&self, v: impl Iterator<Item = (usize, f64)>) -> f64 {
        v.map(|(j, x)| self.scale[j] * x * x).sum::<f64>().sqrt()
    }

    /// Solves (JᵀJ + λD) δ = −Jᵀr over the free parameters and writes the
    /// projected trial point into `p_trial`; returns ‖D^½ (p_trial − p)‖.
    fn trial_point(&mut self, free: &[usize]) -> f64 {
        let (n, k) = (self.n, free.len());
        let mut a = vec![0.0; k * k];
        let mut b = vec![0.0; k];
        for (ia, &ja) in free.iter().enumerate() {
            b[ia] = -self.grad[ja];
            for (ib, &jb) in free.iter().enumerate() {
                a[ia * k + ib] = self.jtj[ja * n + jb];
            }
            a[ia * k + ia] += self.lambda * self.scale[ja];
        }
        let delta = solve_spd(&a, &b, k);
        self.p_trial.copy_from_slice(&self.p);
        for (ia, &ja) in free.iter().enumerate() {
            self.p_trial[ja] = self.bounds.clamp(ja, self.p[ja] + delta[ia]);
        }
        self.scaled_norm((0..n).map(|j| (j, self.p_trial[j] - self.p[j])))
    }

    fn run(&mut self) -> Termination {
        let n = self.n;
        let mut free: Vec<usize> = Vec::with_capacity(n);
        loop {
            if self.chi2 <= 0.0 {
                return Termination::ExactFit;
            }
            self.normal_equations();
            if self.radius.is_nan() {
                // MINPACK's initial step bound: factor · ‖D^½ p₀‖.
                let p_norm = self.scaled_norm(self.p.iter().copied().enumerate());
                self.radius = self.options.step_bound * if p_norm > 0.0 { p_norm } else { 1.0 };
            }
            // Parameters on a bound whose descent direction (−Jᵀr) points
            // outward stay fixed this iteration.
            free.clear();
            free.extend((0..n).filter(|&j| {
                !((self.bounds.at_lower(j, self.p[j]) && self.grad[j] > 0.0)
                    || (self.bounds.at_upper(j, self.p[j]) && self.grad[j] < 0.0))
            }));
            let r_norm = self.chi2.sqrt();
            let cosine = free
                .iter()
                .map(|&j| {
                    let col = self.jtj[j * n + j].sqrt();
                    if col > 0.0 {
                        self.grad[j].abs() / (col * r_norm)
                    } else {
                        0.0
                    }
                })
                .fold(0.0, f64::max);
            if free.is_empty() || cosine <= self.options.gradient_tolerance {
                return Termination::GradientTolerance;
            }
            let p_norm = self.scaled_norm(self.p.iter().copied().enumerate());
            if let Some(stop) = self.improve(&free, p_norm) {
                return stop;
            }
        }
    }

    /// Raises the damping until a trial step lowers χ² and accepts it
    /// (returns `None`), or returns why the iteration ends.
    fn improve(&mut self, free: &[usize], p_norm: f64) -> Option<Termination> {
        let (m, n) = (self.m, self.n);
        let tol = self.options.step_tolerance;
        loop {
            let mut step_norm = self.trial_point(free);
            // Keep the step inside the trust radius: more damping shortens
            // it (‖δ‖ falls roughly like 1/λ once λD dominates).
            let mut guard = 0;
            while step_norm > 1.5 * self.radius && guard < 100 {
                self.lambda *= (step_norm / self.radius).powi(2).max(2.0);
                step_norm = self.trial_point(free);
                guard += 1;
            }
            if step_norm <= tol * (p_norm + tol) {
                return Some(Termination::StepTolerance);
            }
            if self.iterations >= self.options.max_iterations {
                return Some(Termination::MaxIterations);
            }
            self.iterations += 1;
            self.problem.residuals(&self.p_trial, &mut self.r_trial);
            // Actual and predicted decreases of χ², written as sums of
            // products of differences so that no large numbers cancel near
            // the minimum: Σ(r² − r'²) = Σ(r − r')(r + r'), and with
            // q = J·δ, χ² − ‖r + q‖² = −Σ q(2r + q).
            let actual: f64 = (0..m)
                .map(|i| (self.r[i] - self.r_trial[i]) * (self.r[i] + self.r_trial[i]))
                .sum();
            let predicted: f64 = (0..m)
                .map(|i| {
                    let q: f64 = (0..n)
                        .map(|j| self.jac[i * n + j] * (self.p_trial[j] - self.p[j]))
                        .sum();
                    -q * (2.0 * self.r[i] + q)
                })
                .sum();
            let rho = if actual.is_finite() && predicted > 0.0 {
                actual / predicted
            } else {
                -1.0
            };
            if rho > 1e-4 {
                let old_chi2 = self.chi2;
                std::mem::swap(&mut self.p, &mut self.p_trial);
                std::mem::swap(&mut self.r, &mut self.r_trial);
                self.chi2 = sum_sq(&self.r);
                self.lambda *= (1.0 - (2.0 * rho - 1.0).powi(3)).max(1.0 / 3.0);
                self.nu = 2.0;
                if rho > 0.75 {
                    self.radius = self.radius.max(3.0 * step_norm);
                } else if rho < 0.25 {
                    self.radius = 0.5 * self.radius.min(step_norm * 2.0);
                }
                self.jacobian
                    .evaluate(self.options.jacobian, &self.p, &self.r, &mut self.jac);
                let ftol = self.options.chi2_tolerance * old_chi2;
                if actual <= ftol && predicted <= ftol && rho <= 2.0 {
                    return Some(Termination::Chi2Tolerance);
                }
                return None;
            }
            self.lambda *= self.nu;
            self.nu *= 2.0;
            self.radius = 0.5 * step_norm;
            if !self.lambda.is_finite() || self.lambda > 1e300 {
                return Some(Termination::NoProgress);
            }
        }
    }

    fn report(mut self, termination: Termination) -> LeastSquaresReport {
        let (m, n) = (self.m, self.n);
        // The covariance needs an accurate Jacobian: forward differences are
        // replaced by central ones at the solution.
        if self.options.jacobian == JacobianMethod::ForwardDifference {
            self.jacobian.evaluate(
                JacobianMethod::CentralDifference,
                &self.p,
                &self.r,
                &mut self.jac,
            );
        }
        let (covariance, rank) =
            covariance_from_jacobian(&self.jac, m, n, self.options.rank_tolerance);
        let dof = m - n;
        let chi2_dof = if dof > 0 {
            self.chi2 / dof as f64
        } else {
            f64::NAN
        };
        let scaled_covariance = covariance
            .iter()
            .map(|row| row.iter().map(|c| c * chi2_dof).collect())
            .collect();
        let at_bound = (0..n)
            .map(|j| self.bounds.at_lower(j, self.p[j]) || self.bounds.at_upper(j, self.p[j]))
            .collect();
        let termination = if rank < n && termination != Termination::ExactFit {
            Termination::SingularJacobian
        } else {
            termination
        };
        LeastSquaresReport {
            params: self.p,
            covariance,
            scaled_covariance,
            chi2: self.chi2,
            dof,
            chi2_dof,
            iterations: self.iterations,
            rank,
            at_bound,
            termination,
        }
    }
}

/// A scalar function for argmin.
struct Scalar<F>(F);

impl<F: Fn(f64) -> f64> CostFunction for Scalar<F> {
    type Param = f64;
    type Output = f64;

    fn cost(&self, x: &f64) -> Result<f64, argmin::core::Error> {
        Ok((self.0)(*x))
    }
}

/// Result of a one-dimensional minimisation or root search.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct ScalarResult {
    /// The abscissa found.
    pub x: f64,
    /// f(x).
    pub value: f64,
    pub iterations: u64,
    pub termination: Termination,
}

fn check_interval(lower: f64, upper: f64) -> Result<(), OptimizeError> {
    if lower.is_finite() && upper.is_finite() && lower < upper {
        Ok(())
    } else {
        Err(OptimizeError::BadInterval { lower, upper })
    }
}

fn map_reason(reason: Option<&TerminationReason>) -> Termination {
    match reason {
        Some(TerminationReason::SolverConverged | TerminationReason::TargetCostReached) => {
            Termination::Converged
        }
        Some(TerminationReason::MaxItersReached) => Termination::MaxIterations,
        _ => Termination::NoProgress,
    }
}

/// Minimises f on [lower, upper] by Brent's method (parabolic interpolation
/// with golden-section safeguards; R. P. Brent, "Algorithms for minimization
/// without derivatives", 1973, ch. 5), through argmin's `BrentOpt`. Finds a
/// local minimum to within about 3·(√ε·|x| + `abs_tol`); bracket the global
/// minimum first (see [`scan_then_brent`]).
///
/// # Errors
/// [`OptimizeError::BadInterval`] for an empty or infinite interval;
/// [`OptimizeError::Solver`] if argmin fails.
pub fn minimize_bounded(
    f: impl Fn(f64) -> f64,
    lower: f64,
    upper: f64,
    abs_tol: f64,
    max_iterations: u64,
) -> Result<ScalarResult, OptimizeError> {
    check_interval(lower, upper)?;
    let solver = BrentOpt::new(lower, upper).set_tolerance(f64::EPSILON.sqrt(), abs_tol);
    let result = Executor::new(Scalar(&f), solver)
        .configure(|state| state.max_iters(max_iterations))
        .run()
        .map_err(|e| OptimizeError::Solver(e.to_string()))?;
    let state = result.state();
    let x = state.get_best_param().copied().unwrap_or(f64::NAN);
    Ok(ScalarResult {
        x,
        value: state.get_best_cost(),
        iterations: state.get_iter(),
        termination: map_reason(state.get_termination_reason()),
    })
}

/// Evaluates f on `scan_points` equally spaced abscissae of [lower, upper],
/// then refines the best one by [`minimize_bounded`] within its neighbouring
/// scan points. Returns the refined minimum (termination
/// [`Termination::MinimumAtBoundary`] when the best scan point is an end of
/// the interval) and the scan as (x, f(x)) pairs. Non-finite values count as
/// +∞ in the scan.
///
/// # Errors
/// As [`minimize_bounded`]; fewer than 3 scan points is a
/// [`OptimizeError::BadInterval`].
pub fn scan_then_brent(
    f: impl Fn(f64) -> f64,
    lower: f64,
    upper: f64,
    scan_points: usize,
    abs_tol: f64,
) -> Result<(ScalarResult, Vec<(f64, f64)>), OptimizeError> {
    check_interval(lower, upper)?;
    if scan_points < 3 {
        return Err(OptimizeError::BadInterval { lower, upper });
    }
    let h = (upper - lower) / (scan_points - 1) as f64;
    let scan: Vec<(f64, f64)> = (0..scan_points)
        .map(|k| {
            let x = if k + 1 == scan_points {
                upper
            } else {
                lower + h * k as f64
            };
            (x, f(x))
        })
        .collect();
    let key = |v: f64| if v.is_nan() { f64::INFINITY } else { v };
    let best = (0..scan_points)
        .min_by(|&a, &b| key(scan[a].1).total_cmp(&key(scan[b].1)))
        .unwrap_or(0);
    let lo = scan[best.saturating_sub(1)].0;
    let hi = scan[(best + 1).min(scan_points - 1)].0;
    let mut result = minimize_bounded(&f, lo, hi, abs_tol, 200)?;
    // Brent never evaluates the bracket ends; keep the scan point if better.
    if key(scan[best].1) < key(result.value) {
        result.x = scan[best].0;
        result.value = scan[best].1;
    }
    if best == 0 || best + 1 == scan_points {
        result.termination = Termination::MinimumAtBoundary;
    }
    Ok((result, scan))
}

/// A root of f in [lower, upper], where f(lower) and f(upper) differ in sign,
/// by Brent's method (Brent 1973, ch. 4; argmin's `BrentRoot`), to absolute
/// tolerance `tol`.
///
/// # Errors
/// [`OptimizeError::BadInterval`], [`OptimizeError::NotBracketed`], or
/// [`OptimizeError::Solver`] if argmin fails.
pub fn root_bracketed(
    f: impl Fn(f64) -> f64,
    lower: f64,
    upper: f64,
    tol: f64,
) -> Result<ScalarResult, OptimizeError> {
    check_interval(lower, upper)?;
    let (f_lower, f_upper) = (f(lower), f(upper));
    let product = f_lower * f_upper;
    if product.is_nan() || product > 0.0 {
        return Err(OptimizeError::NotBracketed { f_lower, f_upper });
    }
    let solver = BrentRoot::new(lower, upper, tol);
    let result = Executor::new(Scalar(&f), solver)
        .configure(|state| state.max_iters(200))
        .run()
        .map_err(|e| OptimizeError::Solver(e.to_string()))?;
    let state = result.state();
    let x = state.get_best_param().copied().unwrap_or(f64::NAN);
    Ok(ScalarResult {
        x,
        value: f(x),
        iterations: state.get_iter(),
        termination: map_reason(state.get_termination_reason()),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// One NIST StRD problem as stored in tests/reference/nist_strd.json.
    #[derive(Debug, serde::Deserialize)]
    struct NistProblem {
        name: String,
        x: Vec<f64>,
        y: Vec<f64>,
        start1: Vec<f64>,
        start2: Vec<f64>,
        certified: Vec<f64>,
        certified_sd: Vec<f64>,
        rss: f64,
        residual_sd: f64,
        dof: usize,
    }

    #[derive(Debug, serde::Deserialize)]
    struct NistFile {
        problems: Vec<NistProblem>,
    }

    fn nist() -> Vec<NistProblem> {
        let text = include_str!("../../../../tests/reference/nist_strd.json");
        let file: NistFile = serde_json::from_str(text).expect("nist_strd.json parses");
        file.problems
    }

    /// The NIST model functions (formulas from the StRD .dat headers).
    fn model(name: &str) -> fn(f64, &[f64]) -> f64 {
        match name {
            "MGH09" => |x, b| b[0] * (x * x + x * b[1]) / (x * x + x * b[2] + b[3]),
            "Thurber" => |x, b| {
                (b[0] + b[1] * x + b[2] * x * x + b[3] * x.powi(3))
                    / (1.0 + b[4] * x + b[5] * x * x + b[6] * x.powi(3))
            },
            "Eckerle4" => |x, b| (b[0] / b[1]) * (-0.5 * ((x - b[2]) / b[1]).powi(2)).exp(),
            "Rat43" => |x, b| b[0] / (1.0 + (b[1] - b[2] * x).exp()).powf(1.0 / b[3]),
            "BoxBOD" => |x, b| b[0] * (1.0 - (-b[1] * x).exp()),
            "MGH10" => |x, b| b[0] * (b[1] / (x + b[2])).exp(),
            other => panic!("no model for {other}"),
        }
    }

    /// Analytic gradients ∂f/∂b (differentiated by hand) for some problems,
    /// so that both the analytic and the finite-difference paths are tested.
    type GradientFn = fn(f64, &[f64], &mut [f64]);

    fn gradient(name: &str) -> Option<GradientFn> {
        match name {
            "MGH09" => Some(|x, b, g| {
                let num = x * x + x * b[1];
                let den = x * x + x * b[2] + b[3];
                g[0] = num / den;
                g[1] = b[0] * x / den;
                g[2] = -b[0] * num * x / (den * den);
                g[3] = -b[0] * num / (den * den);
            }),
            "Eckerle4" => Some(|x, b, g| {
                let d = (x - b[2]) / b[1];
                let e = (-0.5 * d * d).exp();
                g[0] = e / b[1];
                g[1] = b[0] * e * (d * d - 1.0) / (b[1] * b[1]);
                g[2] = b[0] * e * d / (b[1] * b[1]);
            }),
            "BoxBOD" => Some(|x, b, g| {
                let e = (-b[1] * x).exp();
                g[0] = 1.0 - e;
                g[1] = b[0] * x * e;
            }),
            "MGH10" => Some(|x, b, g| {
                let e = (b[1] / (x + b[2])).exp();
                g[0] = e;
                g[1] = b[0] * e / (x + b[2]);
                g[2] = -b[0] * e * b[1] / (x + b[2]).powi(2);
            }),
            _ => None,
        }
    }

    fn fit_problem(p: &NistProblem, start: &[f64], method: JacobianMethod) -> LeastSquaresReport {
        let f = model(&p.name);
        let mut fit = CurveFit::new(&p.x, &p.y, None, start.len(), f).expect("valid data");
        if let Some(g) = gradient(&p.name) {
            fit = fit.with_gradient(g);
        }
        let options = LmOptions {
            jacobian: method,
            ..LmOptions::default()
        };
        least_squares(&fit, start, &options).expect("fit runs")
    }

    #[test]
    fn nist_data_reproduce_certified_rss() {
        // Guards against typing errors in nist_strd.json: the certified RSS
        // and residual SD follow from the data at the certified parameters.
        for p in nist() {
            let f = model(&p.name);
            let rss: f64 =
                p.x.iter()
                    .zip(&p.y)
                    .map(|(&x, &y)| (y - f(x, &p.certified)).powi(2))
                    .sum();
            assert!(
                crate::tolerance::close(rss, p.rss, 1e-9, 0.0),
                "{}: RSS {rss} vs certified {}",
                p.name,
                p.rss
            );
            let sd = (p.rss / p.dof as f64).sqrt();
            assert!(
                crate::tolerance::close(sd, p.residual_sd, 1e-9, 0.0),
                "{}",
                p.name
            );
            assert_eq!(p.x.len() - p.certified.len(), p.dof, "{}", p.name);
        }
    }

    /// NIST StRD certified values (see nist_strd.json for the source): both
    /// starting points, parameters to 6 significant digits, standard errors
    /// (scaled covariance, NIST's convention) to 4.
    fn check_against_certified(method: JacobianMethod) {
        for p in nist() {
            for (label, start) in [("start 1", &p.start1), ("start 2", &p.start2)] {
                let report = fit_problem(&p, start, method);
                let tag = format!("{} {label} {method:?}: {report:?}", p.name);
                assert!(report.termination.is_converged(), "{tag}");
                assert!(
                    crate::tolerance::close(report.chi2, p.rss, 1e-9, 0.0),
                    "{tag}"
                );
                for (j, (&got, &want)) in report.params.iter().zip(&p.certified).enumerate() {
                    assert!(
                        crate::tolerance::close(got, want, 1e-6, 0.0),
                        "{tag}: b{} = {got}, certified {want}",
                        j + 1
                    );
                }
                let se = report.scaled_std_errors();
                for (j, (&got, &want)) in se.iter().zip(&p.certified_sd).enumerate() {
                    assert!(
                        crate::tolerance::close(got, want, 1e-4, 0.0),
                        "{tag}: sd(b{}) = {got}, certified {want}",
                        j + 1
                    );
                }
                assert_eq!(report.dof, p.dof);
            }
        }
    }

    #[test]
    fn nist_higher_difficulty_analytic_or_central() {
        check_against_certified(JacobianMethod::Auto);
    }

    #[test]
    fn nist_higher_difficulty_forward_differences() {
        check_against_certified(JacobianMethod::ForwardDifference);
    }

    /// Rosenbrock's function as least squares, r = (10(x₂ − x₁²), 1 − x₁)
    /// (Moré, Garbow & Hillstrom 1981, problem 1): minimum χ² = 0 at (1, 1),
    /// standard start (−1.2, 1).
    struct Rosenbrock;

    impl LeastSquaresProblem for Rosenbrock {
        fn n_params(&self) -> usize {
            2
        }
        fn n_residuals(&self) -> usize {
            2
        }
        fn residuals(&self, p: &[f64], r: &mut [f64]) {
            r[0] = 10.0 * (p[1] - p[0] * p[0]);
            r[1] = 1.0 - p[0];
        }
        fn jacobian(&self, p: &[f64], jac: &mut [f64]) -> bool {
            jac.copy_from_slice(&[-20.0 * p[0], 10.0, -1.0, 0.0]);
            true
        }
    }

    #[test]
    fn rosenbrock_reaches_its_known_minimum() {
        for method in [
            JacobianMethod::Analytic,
            JacobianMethod::ForwardDifference,
            JacobianMethod::CentralDifference,
        ] {
            let options = LmOptions {
                jacobian: method,
                ..LmOptions::default()
            };
            let report = least_squares(&Rosenbrock, &[-1.2, 1.0], &options).expect("runs");
            assert!(report.termination.is_converged(), "{method:?}: {report:?}");
            assert!((report.params[0] - 1.0).abs() < 1e-9, "{report:?}");
            assert!((report.params[1] - 1.0).abs() < 1e-9, "{report:?}");
            assert!(report.chi2 < 1e-20, "{report:?}");
            assert!(report.chi2_dof.is_nan(), "dof = 0 has no χ²/dof");
        }
    }

    #[test]
    fn bounds_hold_and_are_flagged() {
        // Rosenbrock restricted to x₁ ≤ 0.5: along the bound the minimum of
        // 100(x₂ − 0.25)² + 0.25 is at x₂ = 0.25 (by hand).
        let options = LmOptions {
            upper: Some(vec![0.5, f64::INFINITY]),
            ..LmOptions::default()
        };
        let report = least_squares(&Rosenbrock, &[-1.2, 1.0], &options).expect("runs");
        assert!(report.termination.is_converged(), "{report:?}");
        assert!((report.params[0] - 0.5).abs() < 1e-12);
        assert!((report.params[1] - 0.25).abs() < 1e-9, "{report:?}");
        assert!((report.chi2 - 0.25).abs() < 1e-12);
        assert_eq!(report.at_bound, vec![true, false]);
    }

    #[test]
    fn weighted_straight_line_matches_closed_form() {
        // Weighted linear regression y = a + b x, closed form of Bevington &
        // Robinson, "Data reduction and error analysis", 3rd ed., eqs. 6.12:
        // Δ = S·Sxx − Sx², a = (Sxx·Sy − Sx·Sxy)/Δ, b = (S·Sxy − Sx·Sy)/Δ,
        // σa² = Sxx/Δ, σb² = S/Δ, with S = Σ1/σ², Sx = Σx/σ², ...
        let x = [0.0, 1.0, 2.0, 3.0, 4.0, 5.0];
        let y = [1.1, 2.9, 5.2, 6.8, 9.3, 10.9];
        let s = [0.1, 0.2, 0.1, 0.3, 0.2, 0.1];
        let w: Vec<f64> = s.iter().map(|v| 1.0 / (v * v)).collect();
        let sum = |f: &dyn Fn(usize) -> f64| (0..6).map(f).sum::<f64>();
        let (s0, sx, sy) = (sum(&|i| w[i]), sum(&|i| w[i] * x[i]), sum(&|i| w[i] * y[i]));
        let (sxx, sxy) = (sum(&|i| w[i] * x[i] * x[i]), sum(&|i| w[i] * x[i] * y[i]));
        let delta = s0 * sxx - sx * sx;
        let a = (sxx * sy - sx * sxy) / delta;
        let b = (s0 * sxy - sx * sy) / delta;
        let fit = CurveFit::new(&x, &y, Some(&s), 2, |x, p| p[0] + p[1] * x)
            .expect("valid")
            .with_gradient(|x, _, g| {
                g[0] = 1.0;
                g[1] = x;
            });
        let report = least_squares(&fit, &[0.0, 0.0], &LmOptions::default()).expect("runs");
        let se = report.std_errors();
        assert!(crate::tolerance::close(
            se[0],
            (sxx / delta).sqrt(),
            1e-10,
            0.0
        ));
        assert!(crate::tolerance::close(
            se[1],
            (s0 / delta).sqrt(),
            1e-10,
            0.0
        ));
        // χ² cannot resolve parameter changes below ~√ε of a standard error
        // (module documentation), so that is the accuracy to expect.
        assert!(
            (report.params[0] - a).abs() < 1e-6 * se[0],
            "{report:?} a={a}"
        );
        assert!(
            (report.params[1] - b).abs() < 1e-6 * se[1],
            "{report:?} b={b}"
        );
        let chi2: f64 = (0..6).map(|i| w[i] * (y[i] - a - b * x[i]).powi(2)).sum();
        assert!(crate::tolerance::close(report.chi2, chi2, 1e-10, 0.0));
        assert_eq!(report.dof, 4);
        let scaled = report.scaled_std_errors();
        assert!(crate::tolerance::close(
            scaled[1],
            se[1] * (chi2 / 4.0).sqrt(),
            1e-12,
            0.0
        ));
    }

    #[test]
    fn rank_deficient_model_is_reported_singular() {
        // y = (a + b)·x: only a + b is determined.
        let x = [1.0, 2.0, 3.0];
        let y = [2.0, 4.1, 5.9];
        let fit = CurveFit::new(&x, &y, None, 2, |x, p| (p[0] + p[1]) * x).expect("valid");
        let report = least_squares(&fit, &[0.5, 0.5], &LmOptions::default()).expect("runs");
        assert_eq!(report.termination, Termination::SingularJacobian);
        assert_eq!(report.rank, 1);
        assert!(report.covariance[0][0].is_nan());
        // The determined combination still fits: Σxy/Σx² = 27.9/14 (by hand).
        assert!(
            (report.params[0] + report.params[1] - 27.9 / 14.0).abs() < 1e-9,
            "{report:?}"
        );
    }

    #[test]
    fn bad_inputs_are_rejected_with_reasons() {
        let x = [1.0, 2.0];
        let y = [1.0, 2.0];
        assert!(matches!(
            CurveFit::new(&x, &y, Some(&[1.0, 0.0]), 1, |x, p| p[0] * x),
            Err(OptimizeError::BadSigma { index: 1, .. })
        ));
        let fit = CurveFit::new(&x, &y, None, 3, |x, p| p[0] * x).expect("valid");
        assert!(matches!(
            least_squares(&fit, &[1.0, 1.0, 1.0], &LmOptions::default()),
            Err(OptimizeError::TooFewResiduals { .. })
        ));
        let fit = CurveFit::new(&x, &y, None, 1, |x, p| p[0] * x).expect("valid");
        let bounded = LmOptions {
            lower: Some(vec![2.0]),
            ..LmOptions::default()
        };
        assert!(matches!(
            least_squares(&fit, &[1.0], &bounded),
            Err(OptimizeError::BadStart { index: 0, .. })
        ));
        let analytic = LmOptions {
            jacobian: JacobianMethod::Analytic,
            ..LmOptions::default()
        };
        assert!(matches!(
            least_squares(&fit, &[1.0], &analytic),
            Err(OptimizeError::NoAnalyticJacobian)
        ));
        let fit = CurveFit::new(&x, &y, None, 1, |x, p| (p[0] - x).ln()).expect("valid");
        assert!(matches!(
            least_squares(&fit, &[0.0], &LmOptions::default()),
            Err(OptimizeError::NonFiniteStart { .. })
        ));
    }

    #[test]
    fn brent_finds_known_minima_and_roots() {
        // min of (x − 2)² + 1 on [0, 5] is at 2 (by hand); cos has its minimum
        // on [2, 5] at π.
        let m = minimize_bounded(|x| (x - 2.0).powi(2) + 1.0, 0.0, 5.0, 1e-10, 100).expect("ok");
        assert!((m.x - 2.0).abs() < 1e-7 && m.termination == Termination::Converged);
        let m = minimize_bounded(f64::cos, 2.0, 5.0, 1e-10, 100).expect("ok");
        assert!((m.x - std::f64::consts::PI).abs() < 1e-7);
        // The first positive zero of J₀ is 2.404825557695773 (A&S Table 9.5).
        let r = root_bracketed(|x| puruspe::Jn(0, x), 1.0, 3.0, 1e-14).expect("ok");
        assert!((r.x - 2.404825557695773).abs() < 1e-12, "{r:?}");
        assert!(matches!(
            root_bracketed(|x| x * x + 1.0, -1.0, 1.0, 1e-10),
            Err(OptimizeError::NotBracketed { .. })
        ));
        assert!(minimize_bounded(|x| x, 1.0, 1.0, 1e-8, 10).is_err());
    }

    #[test]
    fn scan_finds_the_global_minimum_and_flags_boundaries() {
        // x + 2 sin(3x) on [−3, 3]: several local minima; the global one is
        // near x = −2.617 where 3 cos(3x)·2 = −1 (checked by the scan itself
        // against a dense grid below, an independent brute force).
        let f = |x: f64| x + 2.0 * (3.0 * x).sin();
        let (best, scan) = scan_then_brent(f, -3.0, 3.0, 31, 1e-10).expect("ok");
        assert_eq!(scan.len(), 31);
        let brute = (0..=600_000)
            .map(|k| -3.0 + 6.0 * f64::from(k) / 600_000.0)
            .min_by(|a, b| f(*a).total_cmp(&f(*b)))
            .expect("non-empty");
        assert!((best.x - brute).abs() < 1e-4, "{best:?} vs {brute}");
        assert_eq!(best.termination, Termination::Converged);
        let (edge, _) = scan_then_brent(|x| x, 0.0, 1.0, 5, 1e-10).expect("ok");
        assert_eq!(edge.termination, Termination::MinimumAtBoundary);
        assert!(edge.x < 1e-4);
    }
}
