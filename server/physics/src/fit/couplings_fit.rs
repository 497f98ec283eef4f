//! Effective power law of a coupling matrix: J_ij ≈ J/|i−j|^α fitted to a
//! measured (or computed) [`Couplings`] matrix, with parameter errors.
//!
//! Owns the fit and its report. Must not know where the matrix came from
//! (file formats are the ingest layer's) nor what uses the result.
//!
//! # The fit
//! Every unordered pair i < j is one data point (r = j − i, J_ij), so a
//! distance r enters with its N − r pairs, as measured. The model
//! f(r) = J r^(−α) is fitted in linear space by the crate's
//! Levenberg–Marquardt engine with the analytic gradient
//! ∂f/∂J = r^(−α), ∂f/∂α = −J ln r · r^(−α). Fitting in linear space rather
//! than as a straight line in log-log space keeps zero and negative entries
//! usable: a measured long-range coupling compatible with zero, or pushed
//! below zero by noise, is a valid datum, and dropping it (as a log fit
//! must) would bias α downwards. The start comes from a log-log regression
//! on the entries whose sign matches the nearest-neighbour mean.
//!
//! # Weighting and errors
//! - With an error matrix σ_ij (one-sigma, upper triangle read), residuals
//!   are (J_ij − f)/σ_ij and the parameter covariance is (JᵀWJ)⁻¹,
//!   *unscaled*: right when σ are true errors; χ²/dof and its p-value judge
//!   them.
//! - Without errors every pair has unit weight and the covariance is
//!   scaled by χ²/dof, i.e. the residual scatter stands in for the unknown
//!   common error (NIST StRD convention, see `numerics::optimize`).
//!
//! # Zeros
//! An entry exactly 0 may be a coupling below resolution (a datum) or a pair
//! never measured (no datum). [`ZeroEntries`] chooses; the default treats
//! zeros as data. Either way the report counts zero and negative entries.

use ndarray::Array2;
use thiserror::Error;

use crate::model::couplings::Couplings;
use crate::numerics::optimize::{
    CurveFit, JacobianMethod, LmOptions, OptimizeError, Termination, least_squares,
};
use crate::numerics::stats::chi2_survival;

/// Why a coupling fit could not be made.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum CouplingsFitError {
    #[error("the error matrix is {got:?}, the coupling matrix {expected:?}")]
    ErrorShape {
        got: (usize, usize),
        expected: (usize, usize),
    },
    #[error("error of pair ({i},{j}) is {value}, not finite and > 0")]
    BadError { i: usize, j: usize, value: f64 },
    #[error(
        "only {pairs} pair(s) at {distances} distinct distance(s) are usable; a power law \
         needs at least 3 pairs at 2 distances"
    )]
    TooFewPairs { pairs: usize, distances: usize },
    #[error("every usable coupling is zero: there is no power law to fit")]
    AllZero,
    #[error("the least-squares fit failed: {0}")]
    Optimize(#[from] OptimizeError),
}

/// What an entry exactly 0 means.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ZeroEntries {
    /// A coupling of zero (below resolution): kept as a datum.
    #[default]
    Data,
    /// A pair that was not measured: left out.
    Missing,
}

/// Settings of [`fit_power_law`].
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize)]
pub struct CouplingsFitOptions {
    pub zeros: ZeroEntries,
    /// Use only pairs with |i − j| ≤ this distance.
    pub max_distance: Option<usize>,
}

/// Where the parameter errors come from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ErrorBasis {
    /// The given σ_ij, taken as true one-sigma errors (unscaled covariance).
    GivenErrors,
    /// Unit weights; covariance scaled by χ²/dof (residual scatter).
    Scatter,
}

/// The mean measured coupling at one distance beside the fitted law, for
/// the view of the matrix and its fit.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct DistanceSummary {
    pub distance: usize,
    pub pairs: usize,
    pub mean: f64,
    pub model: f64,
}

/// The result of [`fit_power_law`].
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct CouplingsFitReport {
    /// J, the coupling at distance 1.
    pub strength: f64,
    pub strength_err: f64,
    pub alpha: f64,
    pub alpha_err: f64,
    /// Correlation coefficient of (J, α).
    pub correlation: f64,
    /// Covariance of (J, α), row-major.
    pub covariance: [[f64; 2]; 2],
    pub error_basis: ErrorBasis,
    pub chi2: f64,
    pub dof: usize,
    pub chi2_dof: f64,
    /// P(χ² ≥ observed) for the given errors; `None` with unit weights.
    pub p_value: Option<f64>,
    pub pairs_used: usize,
    pub zero_entries: usize,
    pub negative_entries: usize,
    /// Zero entries left out as unmeasured.
    pub excluded_zeros: usize,
    pub termination: Termination,
    pub by_distance: Vec<DistanceSummary>,
    pub options: CouplingsFitOptions,
}

/// One usable pair.
struct Pair {
    r: f64,
    value: f64,
    sigma: Option<f64>,
}

/// Fits J_ij ≈ J/|i−j|^α to `couplings`, optionally weighted by the one-sigma
/// `errors` (same shape; the upper triangle is read). See the module
/// documentation.
///
/// # Errors
/// An error matrix of the wrong shape or with an entry not finite and > 0
/// at a used pair, fewer than 3 usable pairs or 2 distances, an all-zero
/// matrix, or a failure of the least-squares engine.
pub fn fit_power_law(
    couplings: &Couplings,
    errors: Option<&Array2<f64>>,
    options: &CouplingsFitOptions,
) -> Result<CouplingsFitReport, CouplingsFitError> {
    let n = couplings.sites();
    if let Some(e) = errors {
        if e.dim() != (n, n) {
            return Err(CouplingsFitError::ErrorShape {
                got: e.dim(),
                expected: (n, n),
            });
        }
    }
    let max_distance = options.max_distance.unwrap_or(n - 1);
    let mut pairs = Vec::new();
    let (mut zero_entries, mut negative_entries, mut excluded_zeros) = (0, 0, 0);
    for i in 0..n {
        for j in (i + 1)..n {
            let r = j - i;
            if r > max_distance {
                continue;
            }
            let value = couplings.get(i, j);
            if value.abs() < f64::MIN_POSITIVE {
                zero_entries += 1;
                if options.zeros == ZeroEntries::Missing {
                    excluded_zeros += 1;
                    continue;
                }
            } else if value < 0.0 {
                negative_entries += 1;
            }
            let sigma = match errors {
                Some(e) => {
                    let s = e[(i, j)];
                    if !(s.is_finite() && s > 0.0) {
                        return Err(CouplingsFitError::BadError { i, j, value: s });
                    }
                    Some(s)
                }
                None => None,
            };
            pairs.push(Pair {
                r: r as f64,
                value,
                sigma,
            });
        }
    }
    let mut distances: Vec<usize> = pairs.iter().map(|p| p.r as usize).collect();
    distances.dedup();
    distances.sort_unstable();
    distances.dedup();
    if pairs.len() < 3 || distances.len() < 2 {
        return Err(CouplingsFitError::TooFewPairs {
            pairs: pairs.len(),
            distances: distances.len(),
        });
    }
    if pairs.iter().all(|p| p.value.abs() < f64::MIN_POSITIVE) {
        return Err(CouplingsFitError::AllZero);
    }

    let start = starting_point(&pairs);
    let r: Vec<f64> = pairs.iter().map(|p| p.r).collect();
    let y: Vec<f64> = pairs.iter().map(|p| p.value).collect();
    let sigma: Option<Vec<f64>> = errors.map(|_| pairs.iter().filter_map(|p| p.sigma).collect());
    let problem = CurveFit::new(&r, &y, sigma.as_deref(), 2, |r, p| p[0] * r.powf(-p[1]))?
        .with_gradient(|r, p, g| {
            let power = r.powf(-p[1]);
            g[0] = power;
            g[1] = -p[0] * r.ln() * power;
        });
    let lm = LmOptions {
        jacobian: JacobianMethod::Analytic,
        ..LmOptions::default()
    };
    let fit = least_squares(&problem, &start, &lm)?;
    let (basis, cov) = if errors.is_some() {
        (ErrorBasis::GivenErrors, &fit.covariance)
    } else {
        (ErrorBasis::Scatter, &fit.scaled_covariance)
    };
    let covariance = [[cov[0][0], cov[0][1]], [cov[1][0], cov[1][1]]];
    let (strength_err, alpha_err) = (cov[0][0].sqrt(), cov[1][1].sqrt());
    let (strength, alpha) = (fit.params[0], fit.params[1]);
    let by_distance = distances
        .iter()
        .map(|&d| {
            let values: Vec<f64> = pairs
                .iter()
                .filter(|p| p.r as usize == d)
                .map(|p| p.value)
                .collect();
            DistanceSummary {
                distance: d,
                pairs: values.len(),
                mean: values.iter().sum::<f64>() / values.len() as f64,
                model: strength * (d as f64).powf(-alpha),
            }
        })
        .collect();
    Ok(CouplingsFitReport {
        strength,
        strength_err,
        alpha,
        alpha_err,
        correlation: cov[0][1] / (strength_err * alpha_err),
        covariance,
        error_basis: basis,
        chi2: fit.chi2,
        dof: fit.dof,
        chi2_dof: fit.chi2_dof,
        p_value: errors.map(|_| chi2_survival(fit.chi2, fit.dof)),
        pairs_used: pairs.len(),
        zero_entries,
        negative_entries,
        excluded_zeros,
        termination: fit.termination,
        by_distance,
        options: *options,
    })
}

/// A start for (J, α): the nearest-neighbour mean for J and, for α, the
/// least-squares slope of ln|J_ij| against ln r over the entries whose sign
/// matches it (α = 1 when fewer than two distances qualify).
fn starting_point(pairs: &[Pair]) -> [f64; 2] {
    let nearest: Vec<f64> = pairs
        .iter()
        .filter(|p| p.r < 1.5)
        .map(|p| p.value)
        .collect();
    let mut strength = if nearest.is_empty() {
        0.0
    } else {
        nearest.iter().sum::<f64>() / nearest.len() as f64
    };
    if strength.abs() < f64::MIN_POSITIVE {
        // No nearest-neighbour information: the largest entry sets the scale.
        strength = pairs
            .iter()
            .map(|p| p.value)
            .max_by(|a, b| a.abs().total_cmp(&b.abs()))
            .unwrap_or(1.0);
    }
    let sign = strength.signum();
    let logs: Vec<(f64, f64)> = pairs
        .iter()
        .filter(|p| p.value * sign > 0.0)
        .map(|p| (p.r.ln(), (p.value * sign).ln()))
        .collect();
    let k = logs.len() as f64;
    let (mx, my) = logs
        .iter()
        .fold((0.0, 0.0), |(a, b), (x, y)| (a + x / k, b + y / k));
    let sxx: f64 = logs.iter().map(|(x, _)| (x - mx).powi(2)).sum();
    let sxy: f64 = logs.iter().map(|(x, y)| (x - mx) * (y - my)).sum();
    let alpha = if logs.len() >= 2 && sxx > 0.0 {
        -sxy / sxx
    } else {
        1.0
    };
    [strength, if alpha.is_finite() { alpha } else { 1.0 }]
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::numerics::stats::{seeded_rng, standard_normal};
    use crate::tolerance::close;

    fn noisy(sites: usize, strength: f64, alpha: f64, sigma: f64, seed: u64) -> Couplings {
        let mut rng = seeded_rng(seed);
        let exact = Couplings::power_law(sites, strength, alpha).expect("valid");
        let mut m = exact.matrix().clone();
        for i in 0..sites {
            for j in (i + 1)..sites {
                let v = m[(i, j)] + sigma * standard_normal(&mut rng);
                m[(i, j)] = v;
                m[(j, i)] = v;
            }
        }
        Couplings::from_matrix(m).expect("symmetric")
    }

    #[test]
    fn noiseless_power_law_is_recovered_exactly() {
        // J_ij = 1.7/|i−j|^1.3 by construction (common practice): the fit
        // must return the generating parameters to rounding.
        let c = Couplings::power_law(12, 1.7, 1.3).expect("valid");
        for opts in [
            CouplingsFitOptions::default(),
            CouplingsFitOptions {
                zeros: ZeroEntries::Missing,
                max_distance: Some(6),
            },
        ] {
            let fit = fit_power_law(&c, None, &opts).expect("fit");
            assert!(close(fit.strength, 1.7, 1e-10, 0.0), "{}", fit.strength);
            assert!(close(fit.alpha, 1.3, 1e-10, 0.0), "{}", fit.alpha);
            assert!(fit.chi2 < 1e-20, "{}", fit.chi2);
            assert!(fit.termination.is_converged(), "{:?}", fit.termination);
        }
        let fit = fit_power_law(&c, None, &CouplingsFitOptions::default()).expect("fit");
        assert_eq!(fit.pairs_used, 66);
        assert_eq!(fit.by_distance.len(), 11);
        assert_eq!(fit.by_distance[10].pairs, 1);
        // Mean at distance 2 is 1.7/2^1.3 (the law itself).
        assert!(close(
            fit.by_distance[1].mean,
            1.7 / 2f64.powf(1.3),
            1e-14,
            0.0
        ));
    }

    #[test]
    fn noisy_weighted_fit_is_calibrated() {
        // With true one-sigma errors the stated 1σ intervals should cover
        // the truth in about 68 % of seeds (common practice), and the
        // χ²/dof should average 1.
        let (sites, sigma) = (12, 0.02);
        let errors = Array2::from_elem((sites, sites), sigma);
        let (mut cover_j, mut cover_a, mut chi2) = (0, 0, 0.0);
        let seeds = 300;
        for seed in 0..seeds {
            let c = noisy(sites, 1.0, 1.5, sigma, seed);
            let fit =
                fit_power_law(&c, Some(&errors), &CouplingsFitOptions::default()).expect("fit");
            assert_eq!(fit.error_basis, ErrorBasis::GivenErrors);
            cover_j += usize::from((fit.strength - 1.0).abs() < fit.strength_err);
            cover_a += usize::from((fit.alpha - 1.5).abs() < fit.alpha_err);
            chi2 += fit.chi2_dof;
        }
        let (cj, ca) = (cover_j as f64 / seeds as f64, cover_a as f64 / seeds as f64);
        // Binomial spread of a 68 % coverage over 300 seeds: ±0.027.
        assert!((0.60..0.76).contains(&cj), "J coverage {cj}");
        assert!((0.60..0.76).contains(&ca), "α coverage {ca}");
        // Mean of χ²/dof over 300 fits with 64 dof: 1 ± 0.01.
        let mean = chi2 / seeds as f64;
        assert!((mean - 1.0).abs() < 0.05, "mean χ²/dof {mean}");
    }

    #[test]
    fn noisy_unweighted_fit_uses_the_scatter() {
        let (sites, sigma) = (16, 0.01);
        let (mut cover, seeds) = (0, 200);
        for seed in 0..seeds {
            let c = noisy(sites, 2.0, 1.1, sigma, 1000 + seed);
            let fit = fit_power_law(&c, None, &CouplingsFitOptions::default()).expect("fit");
            assert_eq!(fit.error_basis, ErrorBasis::Scatter);
            assert!(fit.p_value.is_none());
            cover += usize::from((fit.alpha - 1.1).abs() < fit.alpha_err);
            // The residual scatter estimates σ: χ²/dof with unit weights ≈ σ².
            assert!((fit.chi2_dof / (sigma * sigma) - 1.0).abs() < 0.5);
        }
        let c = cover as f64 / seeds as f64;
        // ±0.033 binomial spread over 200 seeds.
        assert!((0.58..0.78).contains(&c), "α coverage {c}");
    }

    #[test]
    fn zeros_as_data_or_missing_and_negative_entries_are_counted() {
        // A power law measured only up to distance 4, zeros beyond.
        let exact = Couplings::power_law(10, 1.0, 1.2).expect("valid");
        let cut = exact.matrix().mapv(|v| {
            if v.abs() > 0.0 && v < 4.5f64.powf(-1.2) {
                0.0
            } else {
                v
            }
        });
        let c = Couplings::from_matrix(cut).expect("symmetric");
        let missing = fit_power_law(
            &c,
            None,
            &CouplingsFitOptions {
                zeros: ZeroEntries::Missing,
                max_distance: None,
            },
        )
        .expect("fit");
        // Distances 5..=9 hold 5+4+3+2+1 = 15 zero pairs (counted by hand).
        assert_eq!((missing.zero_entries, missing.excluded_zeros), (15, 15));
        assert!(close(missing.alpha, 1.2, 1e-9, 0.0), "{}", missing.alpha);
        let data = fit_power_law(&c, None, &CouplingsFitOptions::default()).expect("fit");
        assert_eq!((data.zero_entries, data.excluded_zeros), (15, 0));
        // Zeros taken at face value pull the tail down: a steeper law.
        assert!(data.alpha > 1.3, "{}", data.alpha);

        // Noise that drives long-range couplings negative: counted, kept.
        let c = noisy(14, 0.5, 2.5, 0.01, 77);
        let fit = fit_power_law(&c, None, &CouplingsFitOptions::default()).expect("fit");
        assert!(fit.negative_entries > 10, "{}", fit.negative_entries);
        assert!((fit.alpha - 2.5).abs() < 4.0 * fit.alpha_err, "{fit:?}");
    }

    #[test]
    fn bad_inputs_are_refused() {
        let c = Couplings::power_law(5, 1.0, 1.0).expect("valid");
        let wrong = Array2::from_elem((4, 4), 0.1);
        assert!(matches!(
            fit_power_law(&c, Some(&wrong), &CouplingsFitOptions::default()),
            Err(CouplingsFitError::ErrorShape { .. })
        ));
        let mut zero = Array2::from_elem((5, 5), 0.1);
        zero[(1, 3)] = 0.0;
        assert!(matches!(
            fit_power_law(&c, Some(&zero), &CouplingsFitOptions::default()),
            Err(CouplingsFitError::BadError { i: 1, j: 3, .. })
        ));
        let two = Couplings::power_law(2, 1.0, 1.0).expect("valid");
        assert!(matches!(
            fit_power_law(&two, None, &CouplingsFitOptions::default()),
            Err(CouplingsFitError::TooFewPairs { .. })
        ));
        let nothing = Couplings::from_matrix(Array2::zeros((4, 4))).expect("valid");
        assert!(matches!(
            fit_power_law(&nothing, None, &CouplingsFitOptions::default()),
            Err(CouplingsFitError::AllZero)
        ));
    }
}
