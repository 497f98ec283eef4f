//! Diagnosis: plain-language warnings about whether the data reach the
//! hydrodynamic regime and whether the estimators can be trusted, each with
//! a machine-readable code, a sentence saying what was seen and the advice
//! that follows from it.
//!
//! Owns the checks and their thresholds. Must not run any fit itself: every
//! check reads values that the estimators already produced (local
//! exponents, χ²/dof, α, sum rules, z estimates) or one row of the map.
//!
//! The thresholds are judgement calls of common practice (no published
//! source); each constant below says why it has its size.

use crate::CorrelationMap;
use crate::SumRulePoint;
use crate::fit::tail::{LocalExponent, TimeWindow};
use crate::model::shots::symmetric_readout_error;

/// What a warning is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum WarningCode {
    /// The local exponent of C(0,t) changes across the fit window.
    ExponentDrift,
    /// χ²/dof ≫ 1: the model does not describe the data within the errors.
    PoorFit,
    /// Weight has reached the ends of the chain (or of the measured window).
    ReachesEdges,
    /// α near 3/2, where Lévy flight crosses over to diffusion.
    NearCrossover,
    /// Σ_x C(x,t) differs from 1 (losses, readout error, truncated window).
    SumRuleOff,
    /// Two estimates of z differ by more than their errors allow.
    EstimatorsDisagree,
    /// An estimator could not run on these data.
    EstimatorFailed,
    /// The profile is so narrow at the window's start that the continuum
    /// density sampled at integer sites misses lattice corrections.
    LatticeScale,
}

/// One warning: code, what was seen, what to do.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Warning {
    pub code: WarningCode,
    pub message: String,
    pub advice: String,
}

/// Drift is significant beyond this many combined standard deviations
/// (3σ keeps false alarms near 0.3 % per check).
pub const DRIFT_SIGMAS: f64 = 3.0;
/// …and only when it is also larger than this fraction of the exponent
/// (a 10 % change of 1/z moves z by 10 %: larger than the errors people
/// usually quote, smaller than the difference between transport classes).
pub const DRIFT_RELATIVE: f64 = 0.1;
/// χ²/dof above this (with p < [`POOR_FIT_P`]) marks a poor fit: a value
/// of 3 is far outside the χ² distribution for any dof ≳ 10.
pub const POOR_FIT_CHI2_DOF: f64 = 3.0;
pub const POOR_FIT_P: f64 = 1e-3;
/// Fraction of Σ C within the edge zones above which the spread has
/// reached the edges: 5 % is where a finite-chain correction to a bulk
/// profile fit exceeds typical percent-level errors.
pub const EDGE_FRACTION: f64 = 0.05;
/// Width of each edge zone as a fraction of the chain (at least one site).
pub const EDGE_ZONE: f64 = 0.1;
/// |α − 3/2| below this (or below two of its standard deviations) is near
/// the crossover: corrections decay like |k|^{|2α−3|}, i.e. no faster than
/// |k|^0.3 within the band (physics notes, lattice walk).
pub const CROSSOVER_BAND: f64 = 0.15;
/// Smallest departure of Σ_x C from 1 worth a warning when it is also
/// beyond 3 of its standard deviations (2 %: the size of typical readout
/// errors after correction).
pub const SUM_RULE_TOLERANCE: f64 = 0.02;
/// Estimates of z disagree beyond this many combined standard deviations.
pub const DISAGREE_SIGMAS: f64 = 3.0;

/// Weighted (or plain) mean of local exponents and its error.
fn mean_exponent(points: &[&LocalExponent]) -> (f64, Option<f64>) {
    let weights: Option<Vec<f64>> = points
        .iter()
        .map(|p| {
            p.err
                .filter(|e| *e > 0.0 && e.is_finite())
                .map(|e| e.powi(-2))
        })
        .collect();
    match weights {
        Some(w) => {
            let sw: f64 = w.iter().sum();
            let mean = points
                .iter()
                .zip(&w)
                .map(|(p, w)| p.exponent * w)
                .sum::<f64>()
                / sw;
            (mean, Some(sw.sqrt().recip()))
        }
        None => {
            let n = points.len() as f64;
            let mean = points.iter().map(|p| p.exponent).sum::<f64>() / n;
            let err = (points.len() >= 3).then(|| {
                let var = points
                    .iter()
                    .map(|p| (p.exponent - mean).powi(2))
                    .sum::<f64>()
                    / (n - 1.0);
                (var / n).sqrt()
            });
            (mean, err)
        }
    }
}

/// Does the local exponent −d ln C(0,t)/d ln t drift across `window`?
/// Compares the mean over the earlier half of the window's local exponents
/// with the later half: a warning when they differ by more than
/// [`DRIFT_SIGMAS`] combined errors and by more than [`DRIFT_RELATIVE`].
/// The errors treat neighbouring local exponents as independent, which
/// overstates the error of each mean (neighbours share a point and are
/// anticorrelated), so the check errs on the quiet side. Without errors
/// the scatter within each half stands in. Needs at least 4 points.
#[must_use]
pub fn exponent_drift(local: &[LocalExponent], window: TimeWindow) -> Option<Warning> {
    let inside: Vec<&LocalExponent> = local
        .iter()
        .filter(|p| window.contains(p.t) && p.exponent.is_finite())
        .collect();
    if inside.len() < 4 {
        return None;
    }
    let half = inside.len() / 2;
    let (early, late) = inside.split_at(half);
    let (m1, e1) = mean_exponent(early);
    let (m2, e2) = mean_exponent(late);
    let change = (m2 - m1).abs();
    let scale = m1.abs().max(m2.abs());
    let significant = match (e1, e2) {
        (Some(a), Some(b)) => change > DRIFT_SIGMAS * a.hypot(b),
        _ => true,
    };
    if !(significant && change > DRIFT_RELATIVE * scale) {
        return None;
    }
    let fmt = |m: f64, e: Option<f64>| e.map_or(format!("{m:.3}"), |e| plus_minus(m, e));
    let span = |pts: &[&LocalExponent]| format!("t ≈ {:.3}–{:.3}", pts[0].t, pts[pts.len() - 1].t);
    Some(Warning {
        code: WarningCode::ExponentDrift,
        message: format!(
            "The local exponent −d ln C(0,t)/d ln t drifts from {} ({}) to {} ({}) across the \
             fit window: C(0,t) is not one power law there, so the tail exponent (and z from \
             it) depends on the window.",
            fmt(m1, e1),
            span(early),
            fmt(m2, e2),
            span(late)
        ),
        advice: "Narrow the time window to where the local exponent is flat. If the spread has \
                 reached the chain's edges, use the lattice-walk fit (give the chain length and \
                 source), which models the finite chain at all times."
            .to_string(),
    })
}

/// A poor fit: χ²/dof > [`POOR_FIT_CHI2_DOF`] with p < [`POOR_FIT_P`].
/// Only meaningful with data errors; without them χ² has no absolute scale
/// and no warning is given. `advice` is the estimator's own remedy.
#[must_use]
pub fn poor_fit(
    estimator: &str,
    chi2_dof: f64,
    p_value: Option<f64>,
    advice: &str,
) -> Option<Warning> {
    let p = p_value?;
    if !(chi2_dof > POOR_FIT_CHI2_DOF && p < POOR_FIT_P) {
        return None;
    }
    Some(Warning {
        code: WarningCode::PoorFit,
        message: format!(
            "The {estimator} fit has χ²/dof = {chi2_dof:.2} ({}): the model does not describe \
             the data within their errors, so its parameter errors understate the real \
             uncertainty.",
            p_text(p)
        ),
        advice: advice.to_string(),
    })
}

/// A poor collapse: the master-curve fit of the collapse leaves χ²/dof
/// above [`POOR_FIT_CHI2_DOF`] although the data carry errors (≈ 1 for
/// curves that fall on one curve within their errors). Without errors χ²
/// has no absolute scale and no warning is given.
#[must_use]
pub fn poor_collapse(chi2_dof: f64, errors_known: bool) -> Option<Warning> {
    if !(errors_known && chi2_dof > POOR_FIT_CHI2_DOF) {
        return None;
    }
    Some(Warning {
        code: WarningCode::PoorFit,
        message: format!(
            "The scaling collapse leaves χ²/dof = {chi2_dof:.2} against its master curve at the \
             best z (≈ 1 expected): the rescaled curves do not fall on one curve within their \
             errors."
        ),
        advice: "Scaling does not hold across the whole window: start it later, restrict |x| to \
                 the bulk, or look for a drift of the local exponent."
            .to_string(),
    })
}

/// Relative size above which the lattice correction of a sampled profile
/// is worth a warning (common practice, no source).
pub const LATTICE_EXCESS_LIMIT: f64 = 1e-3;

/// Σ_x f(x; μ, s) − 1 for the continuum symmetric stable density sampled at
/// integer x: by the Poisson summation formula, Σ_x f(x) = Σ_k φ(2πk) with
/// φ(k) = e^{−|sk|^μ}, so the excess is 2 Σ_{k≥1} e^{−(2πks)^μ} (common
/// practice, no source; at μ = 0.6, s = 1 it is 0.13). Summed until a term
/// falls below 1e-17 of the total.
#[must_use]
pub fn lattice_excess(mu: f64, scale: f64) -> f64 {
    if mu.is_nan() || scale.is_nan() || mu <= 0.0 || scale <= 0.0 {
        return f64::NAN;
    }
    let mut total = 0.0;
    for k in 1..100_000u32 {
        let term = (-(2.0 * std::f64::consts::PI * f64::from(k) * scale).powf(mu)).exp();
        total += term;
        if term <= 1e-17 * total.max(1e-300) {
            break;
        }
    }
    2.0 * total
}

/// A profile too narrow for the continuum model: the stable fit of index μ
/// with scale `scale` at the window's first time `t_min`.
#[must_use]
pub fn lattice_scale(mu: f64, scale: f64, t_min: f64) -> Option<Warning> {
    let excess = lattice_excess(mu, scale);
    if excess.is_nan() || excess <= LATTICE_EXCESS_LIMIT {
        return None;
    }
    Some(Warning {
        code: WarningCode::LatticeScale,
        message: format!(
            "At the window's start (t = {t_min:.4}) the fitted profile is {scale:.2} sites wide: \
             the continuum density sampled at integer sites then sums to 1 + {excess:.1e} \
             (μ = {mu:.3}), a lattice correction the profile fit does not model."
        ),
        advice: "Start the window later, where the profile spans a few sites, or read μ and D of \
                 the profile fit with this bias in mind (the collapse assumes no shape and is not \
                 affected)."
            .to_string(),
    })
}

/// Where the chain (or the measured window) ends, as offsets x = i − source.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct Edges {
    pub left: i32,
    pub right: i32,
    /// `true` when the ends are the chain's (sites and source known),
    /// `false` when they are only the ends of the measured offsets.
    pub chain: bool,
}

impl Edges {
    /// The ends of a chain of `sites` sites seen from `source`.
    #[must_use]
    pub fn of_chain(sites: usize, source: usize) -> Self {
        let left = -i32::try_from(source).unwrap_or(i32::MAX);
        let right = i32::try_from(sites.saturating_sub(1 + source)).unwrap_or(i32::MAX);
        Self {
            left,
            right,
            chain: true,
        }
    }

    /// The ends of the map's offsets.
    #[must_use]
    pub fn of_map(map: &CorrelationMap) -> Self {
        let x = map.offsets();
        Self {
            left: x[0],
            right: x[x.len() - 1],
            chain: false,
        }
    }
}

/// Fraction of the weight Σ C within the two edge zones (each
/// [`EDGE_ZONE`] of the span wide, at least one site) at time index `ti`,
/// reduced by three standard errors of the edge sum when errors are known,
/// so that noise alone (whose signed sum averages out) does not count as
/// weight at the edges. Signed values are summed for the same reason.
/// `None` when the map has no present offset in either zone or no positive
/// total weight.
#[must_use]
pub fn edge_fraction(map: &CorrelationMap, ti: usize, edges: Edges) -> Option<f64> {
    let span = f64::from(edges.right - edges.left + 1);
    let zone = ((EDGE_ZONE * span).round() as i32).max(1);
    let (mut total, mut outer, mut outer_var, mut seen) = (0.0, 0.0, 0.0, false);
    for (xi, &x) in map.offsets().iter().enumerate() {
        let Some((c, err)) = map.get(ti, xi) else {
            continue;
        };
        total += c;
        if x < edges.left + zone || x > edges.right - zone {
            outer += c;
            outer_var += err.unwrap_or(0.0).powi(2);
            seen = true;
        }
    }
    let significant = (outer - 3.0 * outer_var.sqrt()).max(0.0);
    (seen && total > 0.0).then(|| significant / total)
}

/// Has the spread reached the edges by the last time of `window`? A
/// warning when the edge fraction there exceeds [`EDGE_FRACTION`].
#[must_use]
pub fn reaches_edges(map: &CorrelationMap, window: TimeWindow, edges: Edges) -> Option<Warning> {
    let ti = map.times().iter().rposition(|&t| window.contains(t))?;
    let fraction = edge_fraction(map, ti, edges)?;
    if fraction <= EDGE_FRACTION {
        return None;
    }
    let t = map.times()[ti];
    let (what, advice) = if edges.chain {
        (
            "the chain's ends",
            "Data near the edges are not bulk: end the window before the spread reaches the \
             ends, or use the lattice-walk fit, which models the finite chain.",
        )
    } else {
        (
            "the edges of the measured window",
            "The profile is cut off by the measured window: end the time window earlier, widen \
             the window in x, or give the chain length and source so that the lattice-walk fit \
             can model the finite chain.",
        )
    };
    Some(Warning {
        code: WarningCode::ReachesEdges,
        message: format!(
            "At t = {t:.4} a fraction {:.0} % of the weight lies within {}% of {what} \
             (x = {}..{}): the spread has reached them.",
            100.0 * fraction,
            (100.0 * EDGE_ZONE).round(),
            edges.left,
            edges.right
        ),
        advice: advice.to_string(),
    })
}

/// Is α near the crossover α = 3/2 between Lévy flight and diffusion?
/// `source` names where α comes from (e.g. "the lattice-walk fit").
#[must_use]
pub fn near_crossover(alpha: f64, alpha_err: f64, source: &str) -> Option<Warning> {
    let distance = (alpha - 1.5).abs();
    let err = if alpha_err.is_finite() {
        alpha_err
    } else {
        0.0
    };
    if !(distance <= CROSSOVER_BAND || distance <= 2.0 * err) {
        return None;
    }
    Some(Warning {
        code: WarningCode::NearCrossover,
        message: format!(
            "α = {} from {source} is near the crossover α = 3/2 between Lévy \
             flight and diffusion: there the corrections to scaling decay only like \
             |k|^|2α−3|, so exponents fitted on accessible scales drift and z is not sharp.",
            plus_minus(alpha, err)
        ),
        advice: "Quote a range for z rather than a sharp value, and compare with the lattice-walk \
                 model at the fitted α, which contains the corrections."
            .to_string(),
    })
}

/// Is the sum rule Σ_x C(x,t) = 1 off at the times given? Each time counts
/// when |Σ − 1| exceeds both [`SUM_RULE_TOLERANCE`] and three of its
/// standard deviations. `covers_chain` says whether the map's offsets cover
/// the whole chain (`None`: unknown).
#[must_use]
pub fn sum_rule_off(points: &[SumRulePoint], covers_chain: Option<bool>) -> Option<Warning> {
    let off: Vec<&SumRulePoint> = points
        .iter()
        .filter(|p| {
            let tol = SUM_RULE_TOLERANCE.max(3.0 * p.err.unwrap_or(0.0));
            (p.sum - 1.0).abs() > tol
        })
        .collect();
    if off.is_empty() {
        return None;
    }
    let (min, max) = points
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), p| {
            (a.min(p.sum), b.max(p.sum))
        });
    let first = points.first().map_or(1.0, |p| p.sum);
    let last = points.last().map_or(1.0, |p| p.sum);
    let cause = if max < 1.0 && first - last > SUM_RULE_TOLERANCE {
        "it falls with time, as losses (or weight leaving the measured offsets) would make it"
            .to_string()
    } else if max < 1.0 {
        let mean = points.iter().map(|p| p.sum).sum::<f64>() / points.len() as f64;
        let e = symmetric_readout_error(mean);
        format!(
            "it is roughly constant below 1, as a readout error e ≈ {e:.3} of the final \
             measurement would make it (C scales by 1 − p01 − p10 = 1 − 2e; by (1 − 2e)² only \
             when the recorded initial bits are wrong as often)"
        )
    } else {
        "it exceeds 1, which points at a readout or normalisation error".to_string()
    };
    let coverage = match covers_chain {
        Some(false) => " The map does not cover the whole chain, which also lowers the sum.",
        None => " (Whether the map covers the whole chain is unknown.)",
        Some(true) => "",
    };
    Some(Warning {
        code: WarningCode::SumRuleOff,
        message: format!(
            "The sum rule Σ_x C(x,t) = 1 is off at {} of {} times (range {min:.3}–{max:.3}): \
             {cause}.{coverage}",
            off.len(),
            points.len()
        ),
        advice: "Fits assume the sum rule: check for losses, apply the readout-error correction \
                 or renormalise each time by Σ_x C before fitting."
            .to_string(),
    })
}

/// "value ± error" with the error rounded to two significant digits and
/// the value to the same decimal place (common practice, no source); plain
/// numbers when the error is not finite and positive.
#[must_use]
pub fn plus_minus(value: f64, err: f64) -> String {
    if !(err.is_finite() && err > 0.0 && value.is_finite()) {
        return format!("{value:.4} ± {err:.2}");
    }
    let digits = (1 - err.log10().floor() as i32).clamp(0, 12) as usize;
    format!("{value:.digits$} ± {err:.digits$}")
}

/// A p-value in words: "p = 3.1e-5", or "p < 1e-99" when it underflows the
/// two-digit exponent people read.
fn p_text(p: f64) -> String {
    if p < 1e-99 {
        "p < 1e-99".to_string()
    } else {
        format!("p = {p:.1e}")
    }
}

/// One estimate of z for the agreement check.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ZEstimate {
    pub estimator: &'static str,
    pub z: f64,
    pub z_err: f64,
}

/// Do estimates of z disagree? Every pair with finite values and finite,
/// positive errors is compared (an error of 0 marks an estimate without
/// one); a warning lists the pairs that differ by more than
/// [`DISAGREE_SIGMAS`] combined standard deviations.
#[must_use]
pub fn estimators_disagree(estimates: &[ZEstimate]) -> Option<Warning> {
    let usable: Vec<&ZEstimate> = estimates
        .iter()
        .filter(|e| e.z.is_finite() && e.z_err.is_finite() && e.z_err > 0.0)
        .collect();
    let mut pairs = Vec::new();
    for (i, a) in usable.iter().enumerate() {
        for b in &usable[i + 1..] {
            let combined = a.z_err.hypot(b.z_err);
            let diff = (a.z - b.z).abs();
            if diff > DISAGREE_SIGMAS * combined {
                let sigmas = if combined > 0.0 {
                    format!("{:.1}σ", diff / combined)
                } else {
                    "no error given".to_string()
                };
                pairs.push(format!(
                    "{} z = {} vs {} z = {} ({sigmas})",
                    a.estimator,
                    plus_minus(a.z, a.z_err),
                    b.estimator,
                    plus_minus(b.z, b.z_err)
                ));
            }
        }
    }
    if pairs.is_empty() {
        return None;
    }
    Some(Warning {
        code: WarningCode::EstimatorsDisagree,
        message: format!(
            "Estimates of z disagree beyond their errors: {}.",
            pairs.join("; ")
        ),
        advice: "The estimators weigh different parts of the data: look for a drift of the local \
                 exponent, narrow the window to where it is flat, and prefer the lattice-walk fit \
                 when the chain's edges matter."
            .to_string(),
    })
}

/// An estimator that could not run, with its reason.
#[must_use]
pub fn estimator_failed(estimator: &str, reason: &str, advice: &str) -> Warning {
    Warning {
        code: WarningCode::EstimatorFailed,
        message: format!("The {estimator} could not be computed: {reason}."),
        advice: advice.to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

    fn local(points: &[(f64, f64, Option<f64>)]) -> Vec<LocalExponent> {
        points
            .iter()
            .map(|&(t, exponent, err)| LocalExponent { t, exponent, err })
            .collect()
    }

    #[test]
    fn lattice_excess_matches_the_closed_lattice_sums() {
        // μ = 1: Σ_n s/(π(s² + n²)) = coth(πs) (Gradshteyn & Ryzhik
        // 1.421.4, Σ 1/(n² + a²) = (π/a) coth(πa)), so the excess is
        // coth(πs) − 1. μ = 2: the excess is 2 Σ e^{−(2πks)²}; check against
        // the direct lattice sum of the Gaussian of variance 2s².
        for s in [0.3, 0.5, 1.0, 2.0] {
            let coth = 1.0 / (std::f64::consts::PI * s).tanh();
            let got = lattice_excess(1.0, s);
            assert!((got - (coth - 1.0)).abs() <= 1e-14 * coth, "s = {s}: {got}");
        }
        for s in [0.3, 0.5, 0.8] {
            let direct: f64 = (-200..=200)
                .map(|x: i32| {
                    let x = f64::from(x);
                    (-x * x / (4.0 * s * s)).exp() / (2.0 * s * std::f64::consts::PI.sqrt())
                })
                .sum();
            let got = lattice_excess(2.0, s);
            assert!(
                (got - (direct - 1.0)).abs() < 1e-14,
                "s = {s}: {got} vs {}",
                direct - 1.0
            );
        }
        // The figure quoted in the documentation.
        assert!((lattice_excess(0.6, 1.0) - 0.13).abs() < 0.005);
        assert!(lattice_scale(1.3, 1.0, 1.0).is_none());
        assert!(lattice_scale(1.3, 0.4, 0.3).is_some());
    }

    #[test]
    fn drift_needs_both_significance_and_size() {
        let all = TimeWindow::default();
        // A flat exponent 0.5 within errors: no warning.
        let flat: Vec<_> = (1..=8)
            .map(|k| (f64::from(k), 0.5 + 0.01 * f64::from(k % 2), Some(0.02)))
            .collect();
        assert!(exponent_drift(&local(&flat), all).is_none());
        // From 1.25 to 0.4: a warning naming both values.
        let drifting: Vec<_> = (1..=8)
            .map(|k| (f64::from(k), if k <= 4 { 1.25 } else { 0.4 }, Some(0.02)))
            .collect();
        let w = exponent_drift(&local(&drifting), all).expect("drift");
        assert_eq!(w.code, WarningCode::ExponentDrift);
        assert!(
            w.message.contains("1.250") && w.message.contains("0.400"),
            "{}",
            w.message
        );
        // A 20 % change within huge errors: not significant.
        let noisy: Vec<_> = (1..=8)
            .map(|k| (f64::from(k), if k <= 4 { 0.5 } else { 0.6 }, Some(1.0)))
            .collect();
        assert!(exponent_drift(&local(&noisy), all).is_none());
        // Outside the window nothing counts.
        let window = TimeWindow {
            t_min: Some(5.0),
            t_max: None,
        };
        assert!(exponent_drift(&local(&drifting), window).is_none());
    }

    #[test]
    fn plain_number_formats() {
        assert_eq!(plus_minus(1.23456, 0.0123), "1.235 ± 0.012");
        assert_eq!(plus_minus(12.0, 3.0), "12.0 ± 3.0");
        assert_eq!(p_text(0.0), "p < 1e-99");
        assert_eq!(p_text(3.14e-5), "p = 3.1e-5");
    }

    #[test]
    fn poor_fit_only_with_errors_and_large_chi2() {
        assert!(poor_fit("profile", 10.0, Some(1e-9), "x").is_some());
        assert!(poor_fit("profile", 1.1, Some(0.3), "x").is_none());
        assert!(poor_fit("profile", 10.0, None, "x").is_none());
        assert!(poor_collapse(5.0, true).is_some());
        assert!(poor_collapse(5.0, false).is_none());
        assert!(poor_collapse(1.1, true).is_none());
    }

    #[test]
    fn edges_are_reached_by_a_flat_profile_but_not_by_a_narrow_one() {
        let x: Vec<i32> = (-10..=10).collect();
        let flat = Array2::from_elem((1, 21), 1.0 / 21.0);
        let narrow = Array2::from_shape_fn((1, 21), |(_, j)| if j == 10 { 1.0 } else { 0.0 });
        let all = TimeWindow::default();
        let edges = Edges::of_chain(21, 10);
        let map = CorrelationMap::complete(x.clone(), vec![1.0], flat, None).expect("map");
        // Zones of 2 sites at each end: 4/21 of a flat profile.
        let f = edge_fraction(&map, 0, edges).expect("fraction");
        assert!((f - 4.0 / 21.0).abs() < 1e-15);
        assert!(reaches_edges(&map, all, edges).is_some());
        let map = CorrelationMap::complete(x, vec![1.0], narrow, None).expect("map");
        assert!(reaches_edges(&map, all, edges).is_none());
    }

    #[test]
    fn crossover_band() {
        assert!(near_crossover(1.45, 0.01, "the lattice-walk fit").is_some());
        assert!(near_crossover(1.1, 0.01, "the lattice-walk fit").is_none());
        assert!(near_crossover(1.2, 0.2, "the lattice-walk fit").is_some());
    }

    #[test]
    fn sum_rule_causes_are_told_apart() {
        let pts = |sums: &[f64]| -> Vec<SumRulePoint> {
            sums.iter()
                .enumerate()
                .map(|(i, &sum)| SumRulePoint {
                    t: i as f64,
                    sum,
                    err: Some(0.001),
                    present: 10,
                })
                .collect()
        };
        assert!(sum_rule_off(&pts(&[1.0, 0.995, 1.004]), Some(true)).is_none());
        let losses = sum_rule_off(&pts(&[0.99, 0.95, 0.9]), Some(true)).expect("off");
        assert!(losses.message.contains("losses"), "{}", losses.message);
        // 1 − 2e = 0.9 for e = 0.05.
        let readout = sum_rule_off(&pts(&[0.9, 0.9, 0.9]), Some(true)).expect("off");
        assert!(readout.message.contains("e ≈ 0.050"), "{}", readout.message);
    }

    #[test]
    fn readout_error_is_inferred_with_the_estimators_rule() {
        // A symmetric readout error e = 0.05 on the final measurement scales
        // C by 1 − p01 − p10 = 0.9 (the rule the shot estimator inverts,
        // derived in `model::shots`); the diagnosis must infer e = 0.05 back
        // from a sum rule of 0.9, not 0.026 from (1 − 2e)².
        let b = crate::model::shots::readout_contrast(0.05, 0.05);
        let pts: Vec<SumRulePoint> = (0..3)
            .map(|i| SumRulePoint {
                t: f64::from(i),
                sum: b,
                err: Some(0.001),
                present: 10,
            })
            .collect();
        let w = sum_rule_off(&pts, Some(true)).expect("off");
        assert!(w.message.contains("e ≈ 0.050"), "{}", w.message);
        assert!(w.message.contains("1 − p01 − p10"), "{}", w.message);
    }

    #[test]
    fn disagreement_lists_the_pairs() {
        let estimates = [
            ZEstimate {
                estimator: "tail",
                z: 1.0,
                z_err: 0.01,
            },
            ZEstimate {
                estimator: "collapse",
                z: 1.02,
                z_err: 0.02,
            },
            ZEstimate {
                estimator: "profile",
                z: 1.5,
                z_err: 0.05,
            },
        ];
        let w = estimators_disagree(&estimates).expect("disagree");
        assert!(w.message.contains("tail z = 1.000 ± 0.010") && w.message.contains("profile"));
        assert!(!w.message.contains("vs collapse"), "{}", w.message);
        assert!(estimators_disagree(&estimates[..2]).is_none());
    }
}
