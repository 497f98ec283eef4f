//! Bounded one-dimensional minimisation and root finding (Brent's methods,
//! through argmin), with the same [`Termination`] reasons as the least
//! squares.

use argmin::core::{CostFunction, Executor, State, TerminationReason};
use argmin::solver::brent::{BrentOpt, BrentRoot};

use super::{OptimizeError, Termination};

/// A scalar function for argmin.
pub(super) struct Scalar<F>(F);

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

pub(super) fn check_interval(lower: f64, upper: f64) -> Result<(), OptimizeError> {
    if lower.is_finite() && upper.is_finite() && lower < upper {
        Ok(())
    } else {
        Err(OptimizeError::BadInterval { lower, upper })
    }
}

pub(super) fn map_reason(reason: Option<&TerminationReason>) -> Termination {
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
