//! Short-time coupling check: the curvature of C(0,t) and C(±1,t) at early
//! times, read against the t² law of the short-time expansion, gives the
//! couplings Σ_b K_0b² and K_{0,±1}² that the data actually saw; compared
//! with nominal couplings when they are given.
//!
//! Owns the early-time polynomial fits and the comparison. Must not know
//! how the couplings were designed or measured (they arrive as
//! [`Couplings`]) nor anything about late-time transport.
//!
//! # The law (physics notes, "Short-time expansion, any couplings")
//! C_ii(t) = 1 − t² Σ_{b≠i} K_ib² + O(t⁴), C_ij(t) = t² K_ij² + O(t⁴), odd
//! orders vanishing, for every Ising anisotropy; K_ij = J_ij in spreadscope's
//! convention (physics notes, "Conventions"). So the curvature of C(0,t) measures the total
//! squared coupling of the source and that of C(±1,t) the nearest-neighbour
//! coupling.
//!
//! # The fits
//! C(0,t) = c0 + c2 t² [+ c4 t⁴] and C(x,t) = d2 t² [+ d4 t⁴] for x = ±1,
//! by weighted linear least squares (the crate's Levenberg–Marquardt engine
//! with the analytic Jacobian; one step). The intercept c0 is free: a
//! readout error of the final measurement scales every C by the constant
//! 1 − p01 − p10 (the rule of `model::shots`), so the
//! couplings are read from the *normalised* curvatures
//! Σ_b K_0b² = −c2/c0 and K_{0,x}² = d2/c0, errors by first-order
//! propagation with the covariance of (c0, c2). Keeping the t⁴ term reduces
//! the truncation bias from O(t²) to O(t⁴) relative; it is used when at
//! least 6 early times are available.
//!
//! # The early-time window
//! Unless `t_max` is given, the times from 0 up to the last one before C(0,t)
//! first falls below 1 − `max_drop` (default 0.3, i.e. while the
//! expansion's leading correction is still small; common practice, no
//! source). Errors: the data's (unscaled covariance) when the map has them,
//! otherwise the scatter about the fit (scaled covariance), as in the tail
//! module.

use thiserror::Error;

use crate::CorrelationMap;
use crate::fit::tail::ErrorBasis;
use crate::model::couplings::Couplings;
use crate::numerics::optimize::{
    CurveFit, JacobianMethod, LmOptions, OptimizeError, Termination, least_squares,
};

/// Why a short-time check could not be made.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum ShortTimeCheckError {
    #[error("the map has no x = 0 column, so C(0,t) is unknown")]
    NoAutocorrelation,
    #[error(
        "{0} early time(s) (t ≤ t_max, C(0,t) ≥ 1 − max_drop) where the t² fit needs at least 3: measure earlier times"
    )]
    TooFewTimes(usize),
    #[error("polynomial order {0} is not available: use 2 or 4")]
    BadOrder(usize),
    #[error("max_drop {0} must lie in (0, 1)")]
    BadDrop(f64),
    #[error(
        "nominal couplings cover {sites} sites but the source is unknown: give the source site"
    )]
    UnknownSource { sites: usize },
    #[error("source site {source_site} is outside the nominal chain of {sites} sites")]
    SourceOutOfRange { source_site: usize, sites: usize },
    #[error("fit failed: {0}")]
    Fit(#[from] OptimizeError),
}

/// Settings of [`check_short_time`].
#[derive(Debug, Clone, PartialEq)]
pub struct ShortTimeOptions {
    /// Latest time used; `None` chooses by `max_drop`.
    pub t_max: Option<f64>,
    /// The default window keeps times while C(0,t) ≥ 1 − `max_drop`.
    pub max_drop: f64,
    /// 2 (t² law only) or 4 (with the t⁴ term); `None`: 4 with at least 6
    /// early times, else 2.
    pub order: Option<usize>,
    /// The source site on the nominal chain; `None` infers it when the map's
    /// offsets span exactly the nominal chain (x from −j to N − 1 − j).
    pub source: Option<usize>,
}

impl Default for ShortTimeOptions {
    fn default() -> Self {
        Self {
            t_max: None,
            max_drop: 0.3,
            order: None,
            source: None,
        }
    }
}

/// A fitted squared coupling and, when nominal couplings were given, the
/// nominal value and the pull (fit − nominal)/error.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct CouplingEstimate {
    pub value: f64,
    pub err: f64,
    pub nominal: Option<f64>,
    /// (value − nominal)/err in standard deviations.
    pub pull: Option<f64>,
}

impl CouplingEstimate {
    fn new(value: f64, err: f64, nominal: Option<f64>) -> Self {
        Self {
            value,
            err,
            nominal,
            pull: nominal.map(|n| (value - n) / err),
        }
    }
}

/// The nearest-neighbour coupling read from one side.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct NeighbourCoupling {
    /// x = +1 or −1.
    pub offset: i32,
    /// K_{0,x}² (normalised curvature d2/c0).
    pub k_squared: CouplingEstimate,
    pub chi2_dof: f64,
    pub termination: Termination,
}

/// Result of [`check_short_time`].
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ShortTimeReport {
    /// First and last time used.
    pub t_window: [f64; 2],
    pub times_used: usize,
    /// Polynomial order of the fits (2 or 4).
    pub order: usize,
    /// c0: C(0, t → 0); 1 for perfect readout.
    pub intercept: f64,
    pub intercept_err: f64,
    /// Σ_b K_0b² = −c2/c0.
    pub square_sum: CouplingEstimate,
    /// Per side, for the sides the map has.
    pub neighbours: Vec<NeighbourCoupling>,
    /// K_01²: the inverse-variance mean over the sides (`None` without any).
    pub neighbour: Option<CouplingEstimate>,
    /// χ²/dof of the C(0,t) fit.
    pub chi2_dof: f64,
    pub error_basis: ErrorBasis,
    pub termination: Termination,
}

/// One weighted polynomial fit in t²: the parameters, covariance and fit
/// statistics.
struct PolyFit {
    params: Vec<f64>,
    cov: Vec<Vec<f64>>,
    chi2_dof: f64,
    termination: Termination,
}

/// Fits y = Σ_k p_k t^(2(k + first)) for k < terms.
fn fit_even_polynomial(
    t: &[f64],
    y: &[f64],
    err: Option<&[f64]>,
    first: i32,
    terms: usize,
) -> Result<PolyFit, OptimizeError> {
    let fit = CurveFit::new(t, y, err, terms, move |t, p| {
        let t2 = t * t;
        let mut power = t2.powi(first);
        let mut sum = 0.0;
        for c in p {
            sum += c * power;
            power *= t2;
        }
        sum
    })?
    .with_gradient(move |t, _, g| {
        let t2 = t * t;
        let mut power = t2.powi(first);
        for gk in g.iter_mut() {
            *gk = power;
            power *= t2;
        }
    });
    let options = LmOptions {
        jacobian: JacobianMethod::Analytic,
        max_iterations: 100,
        ..LmOptions::default()
    };
    let start = vec![0.0; terms];
    let report = least_squares(&fit, &start, &options)?;
    let cov = if err.is_some() {
        report.covariance
    } else {
        report.scaled_covariance
    };
    Ok(PolyFit {
        params: report.params,
        cov,
        chi2_dof: report.chi2_dof,
        termination: report.termination,
    })
}

/// Nominal Σ_b K_jb² and K_{j,j+x}² for x = ±1 at the source j.
fn nominal_values(
    couplings: &Couplings,
    source: usize,
) -> Result<(f64, [Option<f64>; 2]), ShortTimeCheckError> {
    let sites = couplings.sites();
    if source >= sites {
        return Err(ShortTimeCheckError::SourceOutOfRange {
            source_site: source,
            sites,
        });
    }
    let row = couplings.matrix().row(source);
    let square_sum = row.iter().map(|k| k * k).sum();
    let side = |x: i64| {
        let j = source as i64 + x;
        (0..sites as i64)
            .contains(&j)
            .then(|| couplings.get(source, j as usize).powi(2))
    };
    Ok((square_sum, [side(-1), side(1)]))
}

/// Reads Σ_b K_0b² and K_{0,±1}² from the early-time curvature of the map
/// (module documentation), compared with `nominal` couplings when given.
///
/// # Errors
/// No x = 0 column, fewer than 3 early times (or fewer than the order
/// needs), a bad option, nominal couplings with an unknown or impossible
/// source, or a failed fit.
pub fn check_short_time(
    map: &CorrelationMap,
    options: &ShortTimeOptions,
    nominal: Option<&Couplings>,
) -> Result<ShortTimeReport, ShortTimeCheckError> {
    if !(options.max_drop > 0.0 && options.max_drop < 1.0) {
        return Err(ShortTimeCheckError::BadDrop(options.max_drop));
    }
    if let Some(order) = options.order {
        if order != 2 && order != 4 {
            return Err(ShortTimeCheckError::BadOrder(order));
        }
    }
    let x0 = map
        .column_of(0)
        .ok_or(ShortTimeCheckError::NoAutocorrelation)?;
    // The early times: a prefix of the time axis.
    let floor = 1.0 - options.max_drop;
    let mut early = Vec::new();
    for (ti, &t) in map.times().iter().enumerate() {
        if options.t_max.is_some_and(|m| t > m) {
            break;
        }
        match map.get(ti, x0) {
            Some((c, _)) if options.t_max.is_none() && c < floor => break,
            Some(_) => early.push(ti),
            None => {}
        }
    }
    let order = match options.order {
        Some(o) => o,
        None if early.len() >= 6 => 4,
        None => 2,
    };
    let terms = order / 2 + 1;
    if early.len() < terms.max(3) {
        return Err(ShortTimeCheckError::TooFewTimes(early.len()));
    }
    let nominal = match nominal {
        None => None,
        Some(c) => {
            let source = match options.source {
                Some(s) => s,
                None => infer_source(map, c.sites())?,
            };
            Some(nominal_values(c, source)?)
        }
    };

    let column = |xi: usize| {
        let mut t = Vec::new();
        let mut y = Vec::new();
        let mut e = Vec::new();
        for &ti in &early {
            if let Some((c, err)) = map.get(ti, xi) {
                t.push(map.times()[ti]);
                y.push(c);
                e.push(err);
            }
        }
        let e: Option<Vec<f64>> = e.into_iter().collect();
        (t, y, e)
    };

    let (t, y, e) = column(x0);
    let auto = fit_even_polynomial(&t, &y, e.as_deref(), 0, terms)?;
    let (c0, c2) = (auto.params[0], auto.params[1]);
    let (v00, v02, v22) = (auto.cov[0][0], auto.cov[0][1], auto.cov[1][1]);
    // Σ K² = −c2/c0: gradient (c2/c0², −1/c0).
    let (g0, g2) = (c2 / (c0 * c0), -1.0 / c0);
    let square_sum_err = (g0 * g0 * v00 + 2.0 * g0 * g2 * v02 + g2 * g2 * v22).sqrt();
    let square_sum = CouplingEstimate::new(-c2 / c0, square_sum_err, nominal.map(|n| n.0));

    let mut neighbours = Vec::new();
    for (side, x) in [(0usize, -1i32), (1, 1)] {
        let Some(xi) = map.column_of(x) else { continue };
        let (t, y, e) = column(xi);
        if t.len() < (terms - 1).max(2) + 1 {
            continue;
        }
        let fit = fit_even_polynomial(&t, &y, e.as_deref(), 1, terms - 1)?;
        let d2 = fit.params[0];
        let value = d2 / c0;
        // d2 and c0 come from separate fits of independent data.
        let err = ((fit.cov[0][0]).sqrt() / c0).hypot(d2 * v00.sqrt() / (c0 * c0));
        neighbours.push(NeighbourCoupling {
            offset: x,
            k_squared: CouplingEstimate::new(value, err, nominal.and_then(|n| n.1[side])),
            chi2_dof: fit.chi2_dof,
            termination: fit.termination,
        });
    }
    let neighbour = combine_sides(&neighbours);
    Ok(ShortTimeReport {
        t_window: [t[0], t[t.len() - 1]],
        times_used: t.len(),
        order,
        intercept: c0,
        intercept_err: v00.sqrt(),
        square_sum,
        neighbours,
        neighbour,
        chi2_dof: auto.chi2_dof,
        error_basis: if e.is_some() {
            ErrorBasis::Data
        } else {
            ErrorBasis::Scatter
        },
        termination: auto.termination,
    })
}

/// Inverse-variance mean of the sides' K² (their errors share c0's, a
/// small correlation ignored here), with the nominal value of the sides
/// when they agree.
fn combine_sides(sides: &[NeighbourCoupling]) -> Option<CouplingEstimate> {
    let usable: Vec<&CouplingEstimate> = sides
        .iter()
        .map(|s| &s.k_squared)
        .filter(|k| k.err.is_finite() && k.err > 0.0)
        .collect();
    if usable.is_empty() {
        return sides.first().map(|s| s.k_squared);
    }
    let weight: f64 = usable.iter().map(|k| k.err.powi(-2)).sum();
    let value = usable.iter().map(|k| k.value * k.err.powi(-2)).sum::<f64>() / weight;
    let nominal = usable[0].nominal.filter(|&n| {
        usable
            .iter()
            .all(|k| k.nominal.is_some_and(|m| (m - n).abs() <= 1e-12 * n.abs()))
    });
    Some(CouplingEstimate::new(value, weight.sqrt().recip(), nominal))
}

/// The source site when the map's offsets span exactly `sites` sites.
fn infer_source(map: &CorrelationMap, sites: usize) -> Result<usize, ShortTimeCheckError> {
    let offsets = map.offsets();
    let (first, last) = (offsets[0], offsets[offsets.len() - 1]);
    let span = i64::from(last) - i64::from(first) + 1;
    if first <= 0 && span == sites as i64 {
        Ok(first.unsigned_abs() as usize)
    } else {
        Err(ShortTimeCheckError::UnknownSource { sites })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::spin_chain::{SpinChain, to_correlation_map};
    use crate::numerics::stats::{seeded_rng, standard_normal};
    use ndarray::Array2;

    /// Σ_{b≠j} |b − j|^{−2α} over a chain of `sites` sites: the closed form
    /// of Σ_b K_jb² for K = 1/r^α (physics notes, short-time expansion).
    fn power_law_square_sum(sites: usize, source: usize, alpha: f64) -> f64 {
        (0..sites)
            .filter(|&b| b != source)
            .map(|b| (b.abs_diff(source) as f64).powf(-2.0 * alpha))
            .sum()
    }

    /// `count` equally spaced times from 0 to `t_max`.
    fn early_times(t_max: f64, count: usize) -> Vec<f64> {
        (0..count)
            .map(|k| t_max * k as f64 / (count - 1) as f64)
            .collect()
    }

    fn exact_map(
        sites: usize,
        source: usize,
        alpha: f64,
        delta: f64,
        times: &[f64],
    ) -> CorrelationMap {
        let couplings = Couplings::power_law(sites, 1.0, alpha).expect("couplings");
        let chain = SpinChain::new(&couplings, delta).expect("chain");
        let values = chain
            .correlations_exact(source, times)
            .expect("exact dynamics");
        to_correlation_map(&values, None, source, times).expect("map")
    }

    #[test]
    fn recovers_square_sum_from_exact_power_law_dynamics() {
        // Exact dynamics of an 8-site chain, J = 1/r (α = 1), Ising Δ = 0.5,
        // off-centre source 2, times 0–0.15. Truth: Σ_b 1/|b−2|² over the
        // chain (closed form) and K_{2,3}² = K_{2,1}² = 1. Without noise the
        // only error is the bias of the neglected t⁶ term, ~ (S t_max²)² ≈
        // 5e-3 of the t⁶ coefficient's size relative to S at t_max = 0.1,
        // so the check is a relative bound of 1e-4 (observed: 1.4e-4 with
        // t_max = 0.15, 16 times; the bias falls as t_max⁴).
        let (sites, source, alpha) = (8, 2, 1.0);
        let map = exact_map(sites, source, alpha, 0.5, &early_times(0.1, 21));
        let report =
            check_short_time(&map, &ShortTimeOptions::default(), None).expect("check runs");
        let truth = power_law_square_sum(sites, source, alpha);
        assert_eq!(report.order, 4);
        assert_eq!(report.times_used, 21);
        assert!(
            (report.square_sum.value - truth).abs() < 1e-4 * truth,
            "{} vs {truth}",
            report.square_sum.value
        );
        assert!((report.intercept - 1.0).abs() < 1e-6, "{report:?}");
        let k01 = report.neighbour.expect("both sides present");
        assert!((k01.value - 1.0).abs() < 1e-4, "{k01:?}");
        assert_eq!(report.neighbours.len(), 2);
    }

    #[test]
    fn noisy_data_agree_with_nominal_couplings_within_errors() {
        // α = 1.5, 7 sites, source inferred from the offsets (3); seeded noise
        // 2e-3 on every point and a readout-like scale 0.9 on every value,
        // which the normalised curvature must remove.
        let (sites, alpha) = (7, 1.5);
        let clean = exact_map(sites, 3, alpha, 0.0, &early_times(0.4, 21));
        let mut rng = seeded_rng(11);
        let noise = 2e-3;
        let values = clean
            .values()
            .mapv(|c| 0.9 * c + noise * standard_normal(&mut rng));
        let errors = Array2::from_elem(values.dim(), noise);
        let map = CorrelationMap::complete(
            clean.offsets().to_vec(),
            clean.times().to_vec(),
            values,
            Some(errors),
        )
        .expect("map");
        let nominal = Couplings::power_law(sites, 1.0, alpha).expect("couplings");
        let report = check_short_time(&map, &ShortTimeOptions::default(), Some(&nominal))
            .expect("check runs");
        let truth = power_law_square_sum(sites, 3, alpha);
        let s = report.square_sum;
        assert!((s.nominal.expect("nominal") - truth).abs() < 1e-12);
        // Three standard deviations: a 0.27 % chance for a correct error.
        assert!(s.pull.expect("pull").abs() < 3.0, "{report:?}");
        assert!(s.err < 0.1 * truth, "{report:?}");
        let k = report.neighbour.expect("neighbour");
        assert!(k.pull.expect("pull").abs() < 3.0, "{k:?}");
        assert!((report.intercept - 0.9).abs() < 3.0 * report.intercept_err);
        // A wrong nominal chain (α = 0.5) must show up as a large pull.
        let wrong = Couplings::power_law(sites, 1.0, 0.5).expect("couplings");
        let off =
            check_short_time(&map, &ShortTimeOptions::default(), Some(&wrong)).expect("check runs");
        assert!(off.square_sum.pull.expect("pull").abs() > 5.0, "{off:?}");
    }

    #[test]
    fn refuses_maps_without_early_times() {
        let late: Vec<f64> = (1..6).map(f64::from).collect();
        let map = CorrelationMap::complete(
            vec![-1, 0, 1],
            late.clone(),
            Array2::from_shape_fn((late.len(), 3), |(_, x)| if x == 1 { 0.2 } else { 0.4 }),
            None,
        )
        .expect("map");
        let err = check_short_time(&map, &ShortTimeOptions::default(), None).unwrap_err();
        assert_eq!(err, ShortTimeCheckError::TooFewTimes(0));
        assert!(err.to_string().contains("earlier times"));
    }
}
