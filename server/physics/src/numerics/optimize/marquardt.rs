//! One Levenberg–Marquardt run: the damped, scaled and bounded iteration
//! with its trust radius, the convergence tests and the final report with
//! the covariance (module documentation of `optimize`).

use super::*;

/// The state of one Levenberg–Marquardt run.
pub(super) struct Marquardt<'a, P: ?Sized> {
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
    pub(super) fn new(
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

    pub(super) fn run(&mut self) -> Termination {
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

    pub(super) fn report(mut self, termination: Termination) -> LeastSquaresReport {
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
