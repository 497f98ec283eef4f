//! The whole analysis of one correlation map: every estimator in the
//! window of the one window rule, the window systematic error of each, the
//! verdict, the local-exponent picture, the diagnosis, one serialisable
//! report and a readable text table. This is what `spreadscope analyze`
//! prints and what the fits route's `analysis` method returns.
//!
//! Owns the order in which estimators run, the standing of each (applies,
//! does not apply, saturated, at a bound, poor fit) and the assembly of the
//! report. Must not know files, command lines or JSON encoders: values in,
//! an [`AnalysisReport`] out (serde-serialisable by the caller).
//!
//! # Windows
//! - **Scaling window** (tail, width, collapse, profile, second moment): the
//!   one window rule of `windows` (ends before noise, saturation at the
//!   plateau 1/N and the chain's ends; late half of the usable log-time
//!   range). The user's `t_min` / `t_max` / `x_max` replace either end.
//! - **Lattice-walk window**: everything within the user's bounds (no
//!   late-time cut): the walk model holds at all times and sees the edges.
//!   It runs when the chain length is given, or when the chain is inferred
//!   from the map and the window rule ended at saturation or at the ends.
//! - **Short-time window**: the early times while C(0,t) ≥ 0.7 (see
//!   `short_time_check`).
//! - **Sum rule**: all offsets of the map at the times of the scaling
//!   window.
//!
//! # Two errors
//! Every z (and D) carries a statistical error — the bootstrap's when it
//! ran, otherwise the fit's covariance; multiplied by √(χ²/dof) (the
//! collapse: √S_min) when that exceeds 1 — and a window error: the
//! root-mean-square deviation of the same estimator, run without
//! bootstrap, over the window family of `windows` (t_min × 1.5, t_min ÷ 1.5,
//! t_max ÷ 1.5, x_max × 3/4). The lattice-walk fit's family drops the
//! times before 1.5 × its first time, or after its last time ÷ 1.5.
//!
//! # Cost
//! One run of every estimator with bootstrap, plus (family members) × one
//! run without bootstrap, plus the z-versus-window-start scan (at most
//! [`SCAN_STARTS`] tail fits and collapses without bootstrap). Family and
//! scan run in parallel (rayon); each estimator is near linear in the
//! number of points, so the whole is linear in points × (resamples +
//! family + scan).

use std::fmt::Write as _;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

use rayon::prelude::*;

use crate::CorrelationMap;
use crate::SumRulePoint;
use crate::fit::collapse::{CollapseError, CollapseOptions, CollapseQuality, CollapseReport};
use crate::fit::diagnosis::{
    self, Edges, SUM_RULE_TOLERANCE, Warning, WarningCode, ZEstimate, estimator_failed, plus_minus,
    poor_fit,
};
use crate::fit::lattice_walk_fit::{
    LatticeWalkFitOptions, LatticeWalkFitReport, SourceAverage, fit_lattice_walk, walk_window_start,
};
use crate::fit::profile::{
    ProfileComparison, ProfileModel, ProfileOptions, ProfileReport, compare_profiles, fit_profile,
};
use crate::fit::short_time_check::{ShortTimeOptions, ShortTimeReport, check_short_time};
use crate::fit::tail::{
    LocalExponent, TailReport, TimeWindow, fit_power_law, fit_tail, local_exponent,
};
use crate::fit::verdict::{
    DConvention, EstimatorLine, Evidence, Measured, POOR_FIT_ABOVE, Standing, Verdict, decide,
};
use crate::fit::width::{WidthOptions, WidthReport, fit_width};
use crate::fit::windows::{
    self, Bounds, Chain, ChainBasis, DEFAULT_BOOTSTRAP, FamilyMember, WindowChoice, WindowEnd,
};
use crate::model::lattice_walk::InfiniteLatticeWalk;
use crate::numerics::optimize::Termination;

/// The conventions every output states.
pub const CONVENTIONS: &str = "C(x,t) = 2^-N Tr[σ^z_{j+x}(t) σ^z_j(0)] (infinite temperature); \
H = Σ_{i<j} J_ij (σ^+_i σ^-_j + h.c. + (Δ/2) σ^z_i σ^z_j), ħ = 1; scaling form \
Σ_x C(x,t) e^{ikx} ≈ exp(−D|k|^z t), D in sites^z per time unit; lattice walk \
γ_ij = γ0 |i−j|^{−2α}, z = min(2α − 1, 2)";

/// Most window starts of the z-versus-window-start scan.
pub const SCAN_STARTS: usize = 8;

/// Settings of [`analyze`].
#[derive(Debug, Clone, PartialEq)]
pub struct AnalysisOptions {
    /// Earliest time of every window (replaces the default's lower end).
    pub t_min: Option<f64>,
    /// Latest time of every window.
    pub t_max: Option<f64>,
    /// Largest |x| used by the fits.
    pub x_max: Option<i32>,
    /// Chain length N: enables the lattice-walk fit and the chain-edge check.
    pub sites: Option<usize>,
    /// Source site j; `None` infers it when the map's offsets span exactly N
    /// sites, and assumes the centre (N − 1)/2 otherwise.
    pub source: Option<usize>,
    /// The window of sources the map averages (with `sites`; replaces
    /// `source`).
    pub average: Option<SourceAverage>,
    /// Bootstrap replicates for the collapse and the profile fits.
    pub bootstrap: usize,
    pub seed: u64,
    /// Nominal coupling exponent α (metadata), for the crossover remark
    /// and the reference line 2α − 1.
    pub alpha: Option<f64>,
    /// Unit of the time axis, for D's units.
    pub time_unit: String,
    /// How D is written in the verdict.
    pub d_convention: DConvention,
}

impl Default for AnalysisOptions {
    fn default() -> Self {
        Self {
            t_min: None,
            t_max: None,
            x_max: None,
            sites: None,
            source: None,
            average: None,
            bootstrap: DEFAULT_BOOTSTRAP,
            seed: 0,
            alpha: None,
            time_unit: "time unit".to_string(),
            d_convention: DConvention::Rate,
        }
    }
}

/// Σ_x C(x,t) over the scaling window's times.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct SumRuleSummary {
    pub min: f64,
    pub max: f64,
    pub points: Vec<SumRulePoint>,
}

/// What was loaded.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct DatasetSummary {
    /// Number of site offsets in the map.
    pub sites: usize,
    /// Number of times.
    pub times: usize,
    pub offsets: [i32; 2],
    pub t_range: [f64; 2],
    /// Grid points not measured.
    pub missing: usize,
    pub errors_known: bool,
    pub sum_rule: SumRuleSummary,
}

/// The windows the estimators used and how they were chosen.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Windows {
    /// Scaling window [t_min, t_max] (tail, width, collapse, profile).
    pub t_window: [f64; 2],
    pub x_max: Option<i32>,
    /// How the scaling window was chosen, in words.
    pub rule: String,
    /// What ended the usable range.
    pub end: WindowEnd,
    /// `false` when no asymptotic regime was found (saturated or too short).
    pub asymptotic: bool,
    /// Chain length and source used by the lattice-walk fit and the edge
    /// check.
    pub chain_sites: Option<usize>,
    pub source: Option<usize>,
    /// The window of sources the map averages, when it does.
    pub source_average: Option<SourceAverage>,
    /// How the chain was obtained, in words.
    pub source_basis: Option<&'static str>,
    /// The neighbouring windows of the window error.
    pub family: Vec<FamilyMember>,
}

/// The autocorrelation tail and its local exponent.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct AutocorrelationSection {
    #[serde(flatten)]
    pub fit: TailReport,
    /// −d ln C(0,t)/d ln t over the whole map.
    pub local_exponent: Vec<LocalExponent>,
}

/// The collapse with its quality under the short key `quality`.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct CollapseSection {
    #[serde(flatten)]
    pub fit: CollapseReport,
    /// S at the minimum (Houdayer–Hartmann; ≈ 1 for a good collapse).
    pub quality: f64,
}

/// The preferred profile fit, and both fits with the comparison when the
/// stable fit ran.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ProfileSection {
    #[serde(flatten)]
    pub preferred: ProfileReport,
    pub comparison: Option<ProfileComparison>,
}

/// One point of z_eff(t) = 1/(−d ln C(0,t)/d ln t).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct EffectiveExponent {
    pub t: f64,
    pub z: f64,
    /// First-order error err(s)/s² of the local exponent s; `None` without
    /// errors.
    pub err: Option<f64>,
}

/// One window start of the z-versus-window-start scan (window end fixed
/// at the scaling window's end).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct ScanPoint {
    pub t_start: f64,
    /// Tail fit on [t_start, t_end].
    pub tail: Option<[f64; 2]>,
    /// Collapse (no bootstrap) on [t_start, t_end].
    pub collapse: Option<[f64; 2]>,
}

/// The local exponent as a picture: z_eff(t) with its errors, the scan, and
/// the reference lines z = 1, 2 and 2α − 1 (when α is known).
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct LocalExponentPicture {
    pub z_eff: Vec<EffectiveExponent>,
    pub scan: Vec<ScanPoint>,
    pub t_end: f64,
    /// (label, z) of the reference lines.
    pub references: Vec<(String, f64)>,
}

/// Result of [`analyze`]. Sections are `None` when their estimator could
/// not run; the reason is then among the warnings.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct AnalysisReport {
    pub conventions: &'static str,
    /// The headline: class, z ± stat ± window, D ± stat ± window.
    pub verdict: Verdict,
    pub dataset: DatasetSummary,
    pub windows: Windows,
    /// One line per estimator with both errors and its standing.
    pub estimators: Vec<EstimatorLine>,
    pub evidence: Evidence,
    pub autocorrelation: Option<AutocorrelationSection>,
    pub width: Option<WidthReport>,
    pub collapse: Option<CollapseSection>,
    pub profile: Option<ProfileSection>,
    /// Present only when the chain is known.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lattice_walk: Option<LatticeWalkFitReport>,
    pub short_time: Option<ShortTimeReport>,
    pub local_exponent_picture: LocalExponentPicture,
    pub warnings: Vec<Warning>,
    /// Informational remarks that are not warnings.
    pub notes: Vec<String>,
    pub bootstrap: usize,
    pub seed: u64,
    pub d_convention: &'static str,
}

/// Why the analysis could not start at all (every estimator failing is not
/// an error: the report then carries the warnings).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum AnalysisError {
    #[error("t_min = {t_min} is not below t_max = {t_max}")]
    BadTimeRange { t_min: f64, t_max: f64 },
    #[error("x_max = {0} must be ≥ 0")]
    BadXMax(i32),
    #[error("source site {source_site} is given without the chain length (sites)")]
    SourceWithoutSites { source_site: usize },
    #[error("source site {source_site} is outside the chain of {sites} sites")]
    SourceOutOfRange { source_site: usize, sites: usize },
    #[error("the window holds no data: {0}")]
    EmptyWindow(#[from] crate::MapError),
    #[error("the analysis was cancelled")]
    Cancelled,
}

/// Progress of an analysis: `progress(fraction, stage)` after every step;
/// returning `false` asks the analysis to stop.
pub type Progress<'a> = &'a (dyn Fn(f64, &str) -> bool + Sync);

/// Counts finished steps and remembers a refusal to go on.
struct Steps<'a> {
    total: usize,
    done: AtomicUsize,
    stopped: AtomicBool,
    report: Progress<'a>,
}

impl Steps<'_> {
    fn step(&self, stage: &str) {
        let done = self.done.fetch_add(1, Ordering::SeqCst) + 1;
        let fraction = (done as f64 / self.total as f64).min(1.0);
        if !(self.report)(fraction, stage) {
            self.stopped.store(true, Ordering::SeqCst);
        }
    }

    /// A progress closure for one estimator's inner loop (bootstrap
    /// replicates): it only asks whether to go on.
    fn go_on(&self) -> bool {
        !self.stopped.load(Ordering::SeqCst) && (self.report)(self.fraction(), "bootstrap")
    }

    fn fraction(&self) -> f64 {
        (self.done.load(Ordering::SeqCst) as f64 / self.total as f64).min(1.0)
    }

    fn check(&self) -> Result<(), AnalysisError> {
        if self.stopped.load(Ordering::SeqCst) {
            Err(AnalysisError::Cancelled)
        } else {
            Ok(())
        }
    }
}

/// The collapse with the analysis's progress hook (asked after each
/// bootstrap replicate; a stop cancels within one replicate).
fn collapse_best(
    quality: &CollapseQuality,
    options: &CollapseOptions,
    progress: &(dyn Fn(f64) -> bool + Sync),
) -> Result<CollapseReport, CollapseError> {
    quality.best_with_progress(options, progress)
}

/// Runs every estimator on `map` with the windows of the module
/// documentation and collects the verdict and the diagnosis.
///
/// # Errors
/// As [`analyze_with_progress`] (never `Cancelled`).
pub fn analyze(
    map: &CorrelationMap,
    options: &AnalysisOptions,
) -> Result<AnalysisReport, AnalysisError> {
    analyze_with_progress(map, options, &|_, _| true)
}

/// The estimates of one window, without bootstrap (window family and
/// scan).
#[derive(Debug, Clone, Copy, Default)]
struct Quick {
    tail: Option<f64>,
    width: Option<f64>,
    collapse: Option<f64>,
    collapse_d: Option<f64>,
    gaussian_d: Option<f64>,
    stable: Option<(f64, f64)>,
    second_moment: Option<f64>,
}

fn quick(map: &CorrelationMap, bounds: Bounds, front: bool) -> Quick {
    let Ok(m) = map.window(bounds.t_min, bounds.t_max, bounds.x_max) else {
        return Quick::default();
    };
    let profile = if front {
        None
    } else {
        compare_profiles(
            &m,
            &ProfileOptions {
                bootstrap: 0,
                ..ProfileOptions::default()
            },
        )
        .ok()
    };
    let collapse = CollapseQuality::new(&m)
        .and_then(|q| {
            q.best(&CollapseOptions {
                bootstrap_resamples: 0,
                quality: false,
                quality_scan: false,
                ..CollapseOptions::default()
            })
        })
        .ok();
    Quick {
        tail: fit_tail(&m, TimeWindow::default()).ok().map(|r| r.z),
        width: fit_width(&m, WidthOptions::default()).ok().map(|r| r.z),
        collapse: collapse.as_ref().map(|r| r.z),
        collapse_d: collapse.as_ref().map(|r| r.d).filter(|d| d.is_finite()),
        gaussian_d: profile.as_ref().map(|c| c.gaussian.d),
        stable: profile.as_ref().map(|c| (c.stable.mu, c.stable.d)),
        second_moment: second_moment(&m).ok().map(|f| f.z),
    }
}

/// The second-moment fit Σ_x x² C(x,t) = B t^{2/z}.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct SecondMomentFit {
    pub z: f64,
    pub z_err: f64,
    pub chi2_dof: f64,
    /// Largest fraction of the weight outside the map's offsets, 1 − Σ_x C,
    /// over the window's times.
    pub missing_weight: f64,
}

/// Fits the second moment over every time t > 0 of `map` (already
/// windowed). Only meaningful for a profile with a front: for a heavy tail
/// the moment is set by the window's edge.
fn second_moment(map: &CorrelationMap) -> Result<SecondMomentFit, String> {
    let (mut t, mut y, mut e) = (Vec::new(), Vec::new(), Vec::new());
    let mut missing: f64 = 0.0;
    for (ti, &tv) in map.times().iter().enumerate() {
        if tv <= 0.0 {
            continue;
        }
        let (mut m2, mut var, mut sum) = (0.0, 0.0, 0.0);
        for (xi, &x) in map.offsets().iter().enumerate() {
            let Some((c, err)) = map.get(ti, xi) else {
                return Err("a point of the window is missing".to_string());
            };
            let x2 = f64::from(x) * f64::from(x);
            m2 += x2 * c;
            var += (x2 * err.unwrap_or(0.0)).powi(2);
            sum += c;
        }
        if m2 <= 0.0 {
            continue;
        }
        missing = missing.max(1.0 - sum);
        t.push(tv);
        y.push(m2);
        e.push(var.sqrt());
    }
    let errors = map.errors().is_some().then_some(e.as_slice());
    let fit = fit_power_law(&t, &y, errors).map_err(|e| e.to_string())?;
    let slope = -fit.decay;
    Ok(SecondMomentFit {
        z: 2.0 / slope,
        z_err: 2.0 * fit.decay_err / (slope * slope),
        chi2_dof: fit.chi2_dof,
        missing_weight: missing,
    })
}

/// Is there a sharp front? The peak of C(x,t) lies at |x| ≥ 2 and above
/// C(0,t) by three combined errors at more than half of `times` (indices).
fn front(map: &CorrelationMap, times: &[usize]) -> bool {
    let Some(centre) = map.column_of(0) else {
        return false;
    };
    let hits = times
        .iter()
        .filter(|&&ti| {
            let Some((c0, e0)) = map.get(ti, centre) else {
                return false;
            };
            let peak = (0..map.n_sites())
                .filter_map(|xi| map.get(ti, xi).map(|v| (xi, v)))
                .max_by(|a, b| a.1.0.total_cmp(&b.1.0));
            peak.is_some_and(|(xi, (c, e))| {
                map.offsets()[xi].abs() >= 2
                    && c - c0 > 3.0 * e.unwrap_or(0.0).hypot(e0.unwrap_or(0.0))
                    && c > c0
            })
        })
        .count();
    !times.is_empty() && 2 * hits > times.len()
}

/// Does C(0,t) rise again beyond its errors at times in `range`?
fn oscillating(map: &CorrelationMap, range: [f64; 2]) -> bool {
    let Some(series) = map.autocorrelation() else {
        return false;
    };
    let mut low: Option<(f64, f64)> = None;
    for (t, c, e) in series {
        if t < range[0] || t > range[1] {
            continue;
        }
        let e = e.unwrap_or(0.0);
        if let Some((m, me)) = low {
            if c - m > 3.0 * e.hypot(me) + 1e-9 * m.abs() + 1e-12 {
                return true;
            }
            if c < m {
                low = Some((c, e));
            }
        } else {
            low = Some((c, e));
        }
    }
    false
}

/// D of the scaling form from the lattice-walk fit's (γ0, α): the Lévy
/// coefficient or the diffusion constant of the infinite walk, with the
/// error propagated by central differences in α and γ0 (independently).
fn walk_d(walk: &LatticeWalkFitReport) -> Option<Measured> {
    let d_of = |g: f64, a: f64| {
        InfiniteLatticeWalk::new(g, a)
            .ok()
            .and_then(|w| w.scaling_coefficient())
    };
    let d = d_of(walk.gamma0, walk.alpha)?;
    let h = (walk.alpha_err * 0.5).max(1e-6);
    let dd_da =
        (d_of(walk.gamma0, walk.alpha + h)? - d_of(walk.gamma0, walk.alpha - h)?) / (2.0 * h);
    let err = (dd_da * walk.alpha_err).hypot(d / walk.gamma0 * walk.gamma0_err);
    Some(Measured::new(d, err, Some(walk.chi2_dof)))
}

/// Runs every estimator on `map` with the windows of the module
/// documentation, the window family and the scan, and decides the verdict.
/// `progress(fraction, stage)` is called after each step and between
/// bootstrap replicates where the estimator allows; `false` stops the
/// analysis with [`AnalysisError::Cancelled`].
///
/// # Errors
/// Inconsistent options (t_min ≥ t_max, negative x_max, a source without
/// or outside the chain), a window without data, or cancellation.
/// Estimators that fail leave their section empty and add a warning.
pub fn analyze_with_progress(
    map: &CorrelationMap,
    options: &AnalysisOptions,
    progress: Progress<'_>,
) -> Result<AnalysisReport, AnalysisError> {
    if let (Some(a), Some(b)) = (options.t_min, options.t_max) {
        if a >= b {
            return Err(AnalysisError::BadTimeRange { t_min: a, t_max: b });
        }
    }
    if let Some(x) = options.x_max {
        if x < 0 {
            return Err(AnalysisError::BadXMax(x));
        }
    }
    if options.sites.is_none() {
        if let Some(s) = options.source {
            return Err(AnalysisError::SourceWithoutSites { source_site: s });
        }
    }
    let chain = windows::chain_of(map, options.sites, options.source, options.average);
    if let Some(c) = chain {
        if let Some(a) = c.average.filter(|a| a.first > a.last || a.last >= c.sites) {
            return Err(AnalysisError::SourceOutOfRange {
                source_site: a.last.max(a.first),
                sites: c.sites,
            });
        }
        if c.source >= c.sites {
            return Err(AnalysisError::SourceOutOfRange {
                source_site: c.source,
                sites: c.sites,
            });
        }
    }
    let bounds = Bounds {
        t_min: options.t_min,
        t_max: options.t_max,
        x_max: options.x_max,
    };
    let choice = windows::choose(map, bounds, chain);
    let family = windows::family(map, &choice);
    let run_walk = chain.filter(|c| {
        c.basis != ChainBasis::InferredFromMap
            || matches!(choice.end, WindowEnd::Saturation | WindowEnd::Edges)
    });
    let steps = Steps {
        // tail+width, collapse, profile, walk, family members, scan, verdict
        total: 5 + family.len() + 1,
        done: AtomicUsize::new(0),
        stopped: AtomicBool::new(false),
        report: progress,
    };
    let mut warnings = Vec::new();
    let mut notes = Vec::new();

    let scaling_map = map.window(Some(choice.t_min), Some(choice.t_max), options.x_max)?;
    let times = scaling_map.times();
    let t_window = [times[0], times[times.len() - 1]];
    let window = TimeWindow {
        t_min: Some(choice.t_min),
        t_max: Some(choice.t_max),
    };

    // Sum rule over all offsets at the scaling window's times.
    let sum_points = map.window(window.t_min, window.t_max, None)?.sum_rule();
    let (min, max) = sum_points
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), p| {
            (a.min(p.sum), b.max(p.sum))
        });
    let dataset = DatasetSummary {
        sites: map.n_sites(),
        times: map.n_times(),
        offsets: [map.offsets()[0], map.offsets()[map.n_sites() - 1]],
        t_range: [map.times()[0], map.times()[map.n_times() - 1]],
        missing: map.n_missing(),
        errors_known: map.errors().is_some(),
        sum_rule: SumRuleSummary {
            min,
            max,
            points: sum_points.clone(),
        },
    };

    // Evidence of the map's shape.
    let window_indices: Vec<usize> = map
        .times()
        .iter()
        .enumerate()
        .filter(|&(_, &t)| t >= choice.t_min && t <= choice.t_max && t > 0.0)
        .map(|(i, _)| i)
        .collect();
    let evidence = Evidence {
        front: front(map, &window_indices),
        oscillating: oscillating(map, choice.usable.unwrap_or([choice.t_min, choice.t_max])),
        nominal_alpha: options.alpha,
    };

    // Autocorrelation tail, local exponent, width and second moment.
    let local = local_exponent(map).unwrap_or_default();
    let autocorrelation = match fit_tail(&scaling_map, TimeWindow::default()) {
        Ok(fit) => Some(AutocorrelationSection {
            fit,
            local_exponent: local.clone(),
        }),
        Err(e) => {
            warnings.push(estimator_failed(
                "autocorrelation tail fit",
                &e.to_string(),
                "Check that the map has an x = 0 column with positive values in the window.",
            ));
            None
        }
    };
    let width = match fit_width(&scaling_map, WidthOptions::default()) {
        Ok(w) => Some(w),
        Err(e) => {
            notes.push(format!("quantile-width growth not computed: {e}"));
            None
        }
    };
    let moment = second_moment(&scaling_map);
    steps.step("tail, width and second moment");
    steps.check()?;

    // The collapse, the profile fits, the lattice-walk fit and the window
    // family are independent: run them side by side.
    // The S(z) picture belongs to the collapse view's own fit, not here.
    let collapse_options = CollapseOptions {
        bootstrap_resamples: options.bootstrap,
        seed: options.seed,
        quality_scan: false,
        ..CollapseOptions::default()
    };
    let profile_options = ProfileOptions {
        bootstrap: options.bootstrap,
        seed: options.seed,
        ..ProfileOptions::default()
    };
    // The walk window starts a few coherence times in unless the user set
    // its start (see `walk_window_start`).
    let walk_map = match run_walk {
        Some(_) => Some(map.window(
            options.t_min.or_else(|| walk_window_start(map)),
            options.t_max,
            options.x_max,
        )?),
        None => None,
    };
    let walk_family: Vec<CorrelationMap> = walk_map
        .as_ref()
        .map(|m| {
            let t = m.times();
            let (first, last) = (
                t.iter().copied().find(|&v| v > 0.0).unwrap_or(t[0]),
                t[t.len() - 1],
            );
            [
                (Some(first * windows::FAMILY_FACTOR), None),
                (None, Some(last / windows::FAMILY_FACTOR)),
            ]
            .into_iter()
            .filter_map(|(a, b)| m.window(a, b, None).ok())
            .filter(|w| w.n_times() >= windows::MIN_TIMES)
            .collect()
        })
        .unwrap_or_default();
    let go_on = |_: f64| steps.go_on();
    let ((collapse_result, profile_result), (walk_result, (family_quick, walk_family_fits))) =
        rayon::join(
            || {
                rayon::join(
                    || {
                        let r = CollapseQuality::new(&scaling_map)
                            .and_then(|q| collapse_best(&q, &collapse_options, &go_on));
                        steps.step("scaling collapse");
                        r
                    },
                    || {
                        let r = if evidence.front {
                            Err(estimator_failed(
                                "profile fit",
                                "the profile has a sharp front, so no stable law describes it",
                                "The profile fits apply to diffusion and Lévy flights only.",
                            ))
                        } else {
                            profile_section(&scaling_map, &profile_options)
                        };
                        steps.step("profile fits");
                        r
                    },
                )
            },
            || {
                rayon::join(
                    || {
                        let r = run_walk
                            .zip(walk_map.as_ref())
                            .map(|(c, m)| fit_lattice_walk(m, &walk_options(c)));
                        steps.step("lattice-walk fit");
                        r
                    },
                    || {
                        rayon::join(
                            || {
                                family
                                    .par_iter()
                                    .map(|m| {
                                        if steps.stopped.load(Ordering::SeqCst) {
                                            return Quick::default();
                                        }
                                        let q = quick(map, m.bounds, evidence.front);
                                        steps.step("window family");
                                        q
                                    })
                                    .collect::<Vec<Quick>>()
                            },
                            || {
                                run_walk
                                    .map(|c| {
                                        walk_family
                                            .par_iter()
                                            .filter_map(|m| {
                                                fit_lattice_walk(m, &walk_options(c))
                                                    .ok()
                                                    .map(|r| r.z)
                                            })
                                            .collect::<Vec<f64>>()
                                    })
                                    .unwrap_or_default()
                            },
                        )
                    },
                )
            },
        );
    steps.check()?;
    let collapse = match collapse_result {
        Ok(fit) => Some(CollapseSection {
            quality: fit.quality_min,
            fit,
        }),
        Err(e) => {
            warnings.push(estimator_failed(
                "scaling collapse",
                &e.to_string(),
                "The collapse needs at least two times with two or more offsets each in the window.",
            ));
            None
        }
    };
    let profile = match profile_result {
        Ok((section, warning)) => {
            warnings.extend(warning);
            Some(section)
        }
        Err(w) => {
            warnings.push(w);
            None
        }
    };
    let lattice_walk = match walk_result {
        Some(Ok(r)) => Some(r),
        Some(Err(e)) => {
            warnings.push(estimator_failed(
                "lattice-walk fit",
                &e.to_string(),
                "Check the chain length and source site against the map's offsets.",
            ));
            None
        }
        None => None,
    };

    let short_time = match check_short_time(
        map,
        &ShortTimeOptions {
            source: chain.map(|c| c.source),
            ..ShortTimeOptions::default()
        },
        None,
    ) {
        Ok(r) => Some(r),
        Err(e) => {
            notes.push(format!("short-time check not made: {e}"));
            None
        }
    };

    // The local exponent as a picture, and the scan of z against the
    // window's start.
    let picture = picture(map, &choice, &local, options.alpha);
    steps.step("scan of the window start");
    steps.check()?;

    let chosen_chain = run_walk.or(chain);
    let estimators = lines(&LineInputs {
        map,
        choice: &choice,
        chain: chosen_chain,
        autocorrelation: autocorrelation.as_ref(),
        width: width.as_ref(),
        collapse: collapse.as_ref(),
        profile: profile.as_ref(),
        lattice_walk: lattice_walk.as_ref(),
        moment: &moment,
        family: &family_quick,
        walk_family: &walk_family_fits,
        evidence,
    });
    let verdict = decide(
        &estimators,
        evidence,
        options.d_convention,
        &options.time_unit,
    );
    steps.step("verdict");

    diagnose(
        map,
        &DiagnosisInputs {
            window,
            lines: &estimators,
            local: &local,
            autocorrelation: autocorrelation.as_ref().map(|a| &a.fit),
            collapse: collapse.as_ref().map(|c| &c.fit),
            profile: profile.as_ref(),
            lattice_walk: lattice_walk.as_ref(),
            sum_points: &sum_points,
            chain: chosen_chain,
        },
        &mut warnings,
    );

    Ok(AnalysisReport {
        conventions: CONVENTIONS,
        verdict,
        dataset,
        windows: Windows {
            t_window,
            x_max: options.x_max,
            rule: choice.rule.clone(),
            end: choice.end,
            asymptotic: choice.asymptotic,
            chain_sites: chosen_chain.map(|c| c.sites),
            source: chosen_chain.map(|c| c.source),
            source_average: chosen_chain.and_then(|c| c.average),
            source_basis: chosen_chain.map(|c| c.basis.words()),
            family,
        },
        estimators,
        evidence,
        autocorrelation,
        width,
        collapse,
        profile,
        lattice_walk,
        short_time,
        local_exponent_picture: picture,
        warnings,
        notes,
        bootstrap: options.bootstrap,
        seed: options.seed,
        d_convention: options.d_convention.words(),
    })
}

/// z_eff(t) from the local exponent and the z-versus-window-start scan.
fn picture(
    map: &CorrelationMap,
    choice: &WindowChoice,
    local: &[LocalExponent],
    alpha: Option<f64>,
) -> LocalExponentPicture {
    let z_eff = local
        .iter()
        .filter(|l| l.exponent > 0.0)
        .map(|l| EffectiveExponent {
            t: l.t,
            z: 1.0 / l.exponent,
            err: l.err.map(|e| e / (l.exponent * l.exponent)),
        })
        .collect();
    let end = choice.t_max;
    let lo = choice.usable.map_or(choice.t_min, |u| u[0]);
    let candidates: Vec<f64> = map
        .times()
        .iter()
        .copied()
        .filter(|&t| t > 0.0 && t >= lo && t <= end)
        .collect();
    let usable = candidates.len().saturating_sub(windows::MIN_TIMES - 1);
    let stride = usable.div_ceil(SCAN_STARTS).max(1);
    let starts: Vec<f64> = candidates[..usable]
        .iter()
        .copied()
        .step_by(stride)
        .collect();
    let scan = starts
        .par_iter()
        .map(|&t0| {
            let m = map.window(Some(t0), Some(end), choice.x_max).ok();
            let tail = m
                .as_ref()
                .and_then(|m| fit_tail(m, TimeWindow::default()).ok())
                .map(|r| [r.z, r.z_err]);
            let collapse = m
                .as_ref()
                .and_then(|m| CollapseQuality::new(m).ok())
                .and_then(|q| {
                    q.best(&CollapseOptions {
                        bootstrap_resamples: 0,
                        quality: false,
                        quality_scan: false,
                        ..CollapseOptions::default()
                    })
                    .ok()
                })
                .map(|r| [r.z, r.z_err]);
            ScanPoint {
                t_start: t0,
                tail,
                collapse,
            }
        })
        .collect();
    let mut references = vec![("z = 1".to_string(), 1.0), ("z = 2".to_string(), 2.0)];
    if let Some(a) = alpha {
        references.push((format!("z = 2α − 1 (α = {a})"), 2.0 * a - 1.0));
    }
    LocalExponentPicture {
        z_eff,
        scan,
        t_end: end,
        references,
    }
}

/// What the estimator lines are built from.
struct LineInputs<'a> {
    map: &'a CorrelationMap,
    choice: &'a WindowChoice,
    chain: Option<Chain>,
    autocorrelation: Option<&'a AutocorrelationSection>,
    width: Option<&'a WidthReport>,
    collapse: Option<&'a CollapseSection>,
    profile: Option<&'a ProfileSection>,
    lattice_walk: Option<&'a LatticeWalkFitReport>,
    moment: &'a Result<SecondMomentFit, String>,
    family: &'a [Quick],
    walk_family: &'a [f64],
    evidence: Evidence,
}

/// The lattice-walk fit's options for the chain: its source, or its
/// window of sources.
fn walk_options(chain: Chain) -> LatticeWalkFitOptions {
    match chain.average {
        Some(a) => LatticeWalkFitOptions::averaged(chain.sites, a),
        None => LatticeWalkFitOptions::new(chain.sites, chain.source),
    }
}

fn with_sys(mut m: Measured, values: &[f64]) -> Measured {
    m.err_sys = windows::window_error(m.value, values);
    m
}

fn failed(name: &'static str, detail: &str) -> EstimatorLine {
    EstimatorLine {
        name,
        z: None,
        d: None,
        standing: Standing::Failed,
        detail: detail.to_string(),
    }
}

/// The standing of an asymptotic estimator's fit: saturated when the rule
/// found no asymptotic regime, a poor fit above [`POOR_FIT_ABOVE`].
fn asymptotic_standing(choice: &WindowChoice, chi2_dof: f64) -> (Standing, String) {
    if !choice.asymptotic {
        (Standing::Saturated, choice.rule.clone())
    } else if chi2_dof > POOR_FIT_ABOVE {
        (
            Standing::PoorFit,
            format!("χ²/dof = {chi2_dof:.3}, errors scaled by √(χ²/dof)"),
        )
    } else {
        (Standing::Applies, format!("χ²/dof = {chi2_dof:.3}"))
    }
}

/// Weight outside the window's offsets at its last time, 1 − Σ C, minus
/// three standard errors; `None` when the chain (or map) is not known to
/// carry the whole weight.
fn weight_outside(map: &CorrelationMap, choice: &WindowChoice) -> Option<(f64, f64)> {
    let m = map
        .window(Some(choice.t_min), Some(choice.t_max), choice.x_max)
        .ok()?;
    let p = m.sum_rule().last().copied()?;
    Some(((1.0 - p.sum) - 3.0 * p.err.unwrap_or(0.0), p.t))
}

fn lines(inputs: &LineInputs<'_>) -> Vec<EstimatorLine> {
    let choice = inputs.choice;
    let fam =
        |f: fn(&Quick) -> Option<f64>| -> Vec<f64> { inputs.family.iter().filter_map(f).collect() };
    let outside = weight_outside(inputs.map, choice).filter(|(w, _)| *w > SUM_RULE_TOLERANCE);
    let mut out = Vec::new();

    // Second moment: applies with a front and the whole weight inside.
    out.push(match inputs.moment {
        Ok(f) => {
            let z = with_sys(
                Measured::new(f.z, f.z_err, Some(f.chi2_dof)),
                &fam(|q| q.second_moment),
            );
            let (standing, detail) = if !inputs.evidence.front {
                (
                    Standing::NotApplicable,
                    "no sharp front: the moment of a heavy-tailed profile is set by the window's edge"
                        .to_string(),
                )
            } else if let Some((w, t)) = outside {
                (
                    Standing::NotApplicable,
                    format!("{:.1} % of the weight lies outside the window at t = {t:.4}", 100.0 * w),
                )
            } else {
                asymptotic_standing(choice, f.chi2_dof)
            };
            EstimatorLine {
                name: "second moment",
                z: Some(z),
                d: None,
                standing,
                detail,
            }
        }
        Err(e) => failed("second moment", e),
    });

    // Lattice walk.
    if let Some(w) = inputs.lattice_walk {
        let z = with_sys(
            Measured::new(w.z, w.z_err, Some(w.chi2_dof)),
            inputs.walk_family,
        );
        let (standing, detail) = if w.alpha_at_bound {
            (
                Standing::AtBound,
                format!("α = {:.4} on the edge of its allowed range", w.alpha),
            )
        } else if w.chi2_dof > POOR_FIT_ABOVE {
            (
                Standing::PoorFit,
                format!("χ²/dof = {:.3}, errors scaled by √(χ²/dof)", w.chi2_dof),
            )
        } else {
            (
                Standing::Applies,
                format!(
                    "α = {}, χ²/dof = {:.3}",
                    diagnosis::plus_minus(w.alpha, w.alpha_err),
                    w.chi2_dof
                ),
            )
        };
        out.push(EstimatorLine {
            name: "lattice-walk fit",
            z: Some(z),
            d: walk_d(w),
            standing,
            detail,
        });
    } else if let Some(c) = inputs.chain {
        out.push(EstimatorLine {
            name: "lattice-walk fit",
            z: None,
            d: None,
            standing: Standing::NotApplicable,
            detail: format!(
                "not run: the {} sites were inferred from the map and the window never reached \
                 the chain's ends or saturation",
                c.sites
            ),
        });
    }

    // Collapse: z and D from the master-curve fit; its errors already
    // carry the √(χ²/dof) scaling of a poor fit.
    match inputs.collapse {
        Some(c) => {
            let f = &c.fit;
            let mut z = with_sys(Measured::new(f.z, f.z_err, None), &fam(|q| q.collapse));
            z.interval = Some(f.z_interval);
            z.bias = f.z_bias;
            z.err_scale = f.err_scale;
            let d = f.d.is_finite().then(|| {
                let mut d = with_sys(Measured::new(f.d, f.d_err, None), &fam(|q| q.collapse_d));
                d.interval = f.d_err.is_finite().then_some(f.d_interval);
                d.bias = f.d_bias;
                d.err_scale = f.err_scale;
                d
            });
            let (standing, detail) = if f.termination == Termination::MinimumAtBoundary {
                (
                    Standing::AtBound,
                    format!("z = {:.4} at the edge of the searched range", f.z),
                )
            } else if !choice.asymptotic {
                (Standing::Saturated, choice.rule.clone())
            } else if f.errors_known && f.chi2_dof > POOR_FIT_ABOVE {
                (
                    Standing::PoorFit,
                    format!(
                        "the curves do not fall on one master curve: χ²/dof = {:.3}, \
                         errors scaled by √(χ²/dof)",
                        f.chi2_dof
                    ),
                )
            } else {
                (
                    Standing::Applies,
                    format!(
                        "master-curve χ²/dof = {:.3}, S = {:.3}, error: {}",
                        f.chi2_dof, c.quality, f.z_err_source
                    ),
                )
            };
            out.push(EstimatorLine {
                name: "scaling collapse",
                z: Some(z),
                d,
                standing,
                detail,
            });
        }
        None => out.push(failed("scaling collapse", "the collapse did not run")),
    }

    // Profiles: stable and Gaussian.
    if let Some(p) = inputs.profile {
        let reports: Vec<&ProfileReport> = match &p.comparison {
            Some(c) => vec![&c.stable, &c.gaussian],
            None => vec![&p.preferred],
        };
        for r in reports {
            let stable = r.model == ProfileModel::Stable;
            let d_err = r.d_err_bootstrap.unwrap_or(r.d_err);
            let mut d = Measured::new(r.d, d_err, Some(r.chi2_dof));
            if let Some(b) = &r.bootstrap {
                d.interval = Some([b.d.lower, b.d.upper]);
                d.bias = Some(b.d.mean - r.d);
            }
            let (name, z, d) = if stable {
                let mu_err = r.mu_err_bootstrap.unwrap_or(r.mu_err);
                let mut z = with_sys(
                    Measured::new(r.mu, mu_err, Some(r.chi2_dof)),
                    &fam(|q| q.stable.map(|s| s.0)),
                );
                if let Some(b) = r.bootstrap.as_ref().and_then(|b| b.mu.as_ref()) {
                    z.interval = Some([b.lower, b.upper]);
                    z.bias = Some(b.mean - r.mu);
                }
                (
                    "stable profile",
                    z,
                    with_sys(d, &fam(|q| q.stable.map(|s| s.1))),
                )
            } else {
                let z = Measured {
                    err_sys: Some(0.0),
                    ..Measured::new(2.0, 0.0, None)
                };
                ("Gaussian profile", z, with_sys(d, &fam(|q| q.gaussian_d)))
            };
            let preferred = p.preferred.model == r.model;
            let (standing, detail) = if stable && r.mu_at_bound {
                (
                    Standing::AtBound,
                    format!("μ = {:.4} on the edge of its allowed range", r.mu),
                )
            } else if !preferred {
                (
                    Standing::NotApplicable,
                    "the other profile model is preferred (information criteria)".to_string(),
                )
            } else {
                asymptotic_standing(choice, r.chi2_dof)
            };
            out.push(EstimatorLine {
                name,
                z: Some(z),
                d: Some(d),
                standing,
                detail,
            });
        }
    } else {
        out.push(failed("stable profile", "the profile fit did not run"));
    }

    // Tail.
    match inputs.autocorrelation {
        Some(a) => {
            let z = with_sys(
                Measured::new(a.fit.z, a.fit.z_err, Some(a.fit.chi2_dof)),
                &fam(|q| q.tail),
            );
            let (standing, detail) = if inputs.evidence.oscillating {
                (
                    Standing::NotApplicable,
                    "C(0,t) oscillates: no single power law".to_string(),
                )
            } else {
                asymptotic_standing(choice, a.fit.chi2_dof)
            };
            out.push(EstimatorLine {
                name: "autocorrelation tail",
                z: Some(z),
                d: None,
                standing,
                detail,
            });
        }
        None => out.push(failed(
            "autocorrelation tail",
            "no usable C(0,t) in the window",
        )),
    }

    // Width: does not apply when weight leaves the window.
    match inputs.width {
        Some(w) => {
            let z = with_sys(
                Measured::new(w.z, w.z_err, Some(w.chi2_dof)),
                &fam(|q| q.width),
            );
            let (standing, detail) = if let Some((f, t)) = outside {
                (
                    Standing::NotApplicable,
                    format!(
                        "{:.1} % of the weight lies outside the window at t = {t:.4}, so the \
                         quantile is taken of a cut profile",
                        100.0 * f
                    ),
                )
            } else if w.times_beyond_coverage > 0 {
                (
                    Standing::NotApplicable,
                    format!(
                        "{} times have a width beyond the map's coverage",
                        w.times_beyond_coverage
                    ),
                )
            } else {
                asymptotic_standing(choice, w.chi2_dof)
            };
            out.push(EstimatorLine {
                name: "quantile width",
                z: Some(z),
                d: None,
                standing,
                detail,
            });
        }
        None => out.push(failed("quantile width", "not computed")),
    }
    out
}

/// Both profile fits and the comparison; the Gaussian alone (with a
/// warning) when the stable fit fails; a warning when both fail.
fn profile_section(
    map: &CorrelationMap,
    options: &ProfileOptions,
) -> Result<(ProfileSection, Option<Warning>), Warning> {
    match compare_profiles(map, options) {
        Ok(comparison) => Ok((
            ProfileSection {
                preferred: comparison.preferred_report().clone(),
                comparison: Some(comparison),
            },
            None,
        )),
        Err(stable_error) => match fit_profile(map, ProfileModel::Gaussian, options) {
            Ok(gaussian) => Ok((
                ProfileSection {
                    preferred: gaussian,
                    comparison: None,
                },
                Some(estimator_failed(
                    "stable profile fit",
                    &stable_error.to_string(),
                    "Only the Gaussian profile is reported; no model comparison was made.",
                )),
            )),
            Err(e) => Err(estimator_failed(
                "profile fit",
                &e.to_string(),
                "The profile fit needs at least three points with t > 0 in the window.",
            )),
        },
    }
}

/// What the diagnosis reads.
struct DiagnosisInputs<'a> {
    window: TimeWindow,
    /// The estimator lines of the verdict (standing, z with both errors).
    lines: &'a [EstimatorLine],
    local: &'a [LocalExponent],
    autocorrelation: Option<&'a TailReport>,
    collapse: Option<&'a CollapseReport>,
    profile: Option<&'a ProfileSection>,
    lattice_walk: Option<&'a LatticeWalkFitReport>,
    sum_points: &'a [SumRulePoint],
    chain: Option<Chain>,
}

fn diagnose(map: &CorrelationMap, inputs: &DiagnosisInputs<'_>, warnings: &mut Vec<Warning>) {
    warnings.extend(diagnosis::exponent_drift(inputs.local, inputs.window));
    if let Some(tail) = inputs.autocorrelation {
        warnings.extend(poor_fit(
            "autocorrelation tail",
            tail.chi2_dof,
            tail.p_value,
            "C(0,t) is not one power law in the window: narrow it to where the local exponent \
             is flat.",
        ));
    }
    if let Some(profile) = inputs.profile {
        let p = &profile.preferred;
        warnings.extend(poor_fit(
            &format!("{} profile", p.model.name()),
            p.chi2_dof,
            p.p_value,
            "The scaling function does not describe the window: restrict it to late times and \
             the bulk, check the sum rule, and compare with the other profile model.",
        ));
        // The scale s(t) = (D t)^{1/μ} is smallest at the window's start.
        let t_min = p.t_window[0];
        let scale = (p.d * t_min).powf(1.0 / p.mu);
        warnings.extend(diagnosis::lattice_scale(p.mu, scale, t_min));
    }
    if let Some(walk) = inputs.lattice_walk {
        warnings.extend(poor_fit(
            "lattice-walk",
            walk.chi2_dof,
            walk.p_value,
            "The classical walk with power-law rates does not describe the data: the couplings \
             may not be a pure power law (use a measured coupling matrix), or early times carry \
             coherent dynamics; start the window later.",
        ));
    }
    if let Some(collapse) = inputs.collapse {
        warnings.extend(diagnosis::poor_collapse(
            collapse.chi2_dof,
            collapse.errors_known,
        ));
    }

    let edges = match inputs.chain {
        Some(c) => c.edges(),
        None => Edges::of_map(map),
    };
    warnings.extend(diagnosis::reaches_edges(map, inputs.window, edges));

    let crossover = match (inputs.lattice_walk, inputs.profile) {
        (Some(w), _) if !w.alpha_at_bound => {
            diagnosis::near_crossover(w.alpha, w.alpha_err, "the lattice-walk fit")
        }
        (_, Some(p))
            if p.preferred.model == ProfileModel::Stable
                && !p.preferred.mu_at_bound
                && p.preferred.mu >= 1.7 =>
        {
            diagnosis::near_crossover(
                (p.preferred.mu + 1.0) / 2.0,
                p.preferred.mu_err / 2.0,
                "the stable profile's index (α = (μ + 1)/2)",
            )
        }
        _ => None,
    };
    warnings.extend(crossover);

    let covers_chain = inputs.chain.map(|c| {
        let x = map.offsets();
        let edges = c.edges();
        x[0] <= edges.left && x[x.len() - 1] >= edges.right
    });
    warnings.extend(diagnosis::sum_rule_off(inputs.sum_points, covers_chain));

    // The same estimates and the same errors (stat ⊕ window) the verdict
    // compares, so the warning and the verdict's reasons never contradict.
    let estimates: Vec<ZEstimate> = inputs
        .lines
        .iter()
        .filter(|l| l.standing == Standing::Applies)
        .filter_map(|l| {
            l.z.as_ref().map(|z| ZEstimate {
                estimator: l.name,
                z: z.value,
                z_err: z.total_err(),
            })
        })
        .collect();
    warnings.extend(diagnosis::estimators_disagree(&estimates));
}

impl AnalysisReport {
    /// A readable table for the command line: dataset, windows, one line
    /// per estimator (z, D, quality), the profile preference, the short-time
    /// check, the warnings with their advice, and the conventions.
    #[must_use]
    pub fn render_text(&self) -> String {
        let mut out = String::new();
        let v = &self.verdict;
        let _ = writeln!(out, "verdict   {}", v.headline);
        if !v.why.is_empty() {
            let _ = writeln!(out, "          chosen because {}", v.why);
        }
        for r in &v.reasons {
            let _ = writeln!(out, "          · {r}");
        }
        let _ = writeln!(out, "          {}", v.d_convention);
        let _ = writeln!(out);
        let d = &self.dataset;
        let _ = writeln!(
            out,
            "dataset   {} offsets (x = {}..{}), {} times (t = {}..{}), {} missing, errors {}",
            d.sites,
            d.offsets[0],
            d.offsets[1],
            d.times,
            num(d.t_range[0]),
            num(d.t_range[1]),
            d.missing,
            if d.errors_known { "given" } else { "not given" }
        );
        let _ = writeln!(
            out,
            "sum rule  Σ_x C(x,t) in the window: {:.4}..{:.4}",
            d.sum_rule.min, d.sum_rule.max
        );
        let w = &self.windows;
        let _ = writeln!(
            out,
            "window    t = {}..{}{}: {}",
            num(w.t_window[0]),
            num(w.t_window[1]),
            w.x_max.map_or(String::new(), |x| format!(", |x| ≤ {x}")),
            w.rule
        );
        if let (Some(n), Some(s), Some(b)) = (w.chain_sites, w.source, w.source_basis) {
            match w.source_average {
                Some(a) => {
                    let symmetrised = if a.symmetrised { ", symmetrised" } else { "" };
                    let _ = writeln!(
                        out,
                        "chain     {n} sites, mean over sources {}–{}{symmetrised} ({b})",
                        a.first, a.last
                    );
                }
                None => {
                    let _ = writeln!(out, "chain     {n} sites, source {s} ({b})");
                }
            }
        }
        let _ = writeln!(out);
        let _ = writeln!(
            out,
            "bootstrap {} resamples (seed {}); window error over {} neighbouring windows ({})",
            self.bootstrap,
            self.seed,
            w.family.len(),
            w.family
                .iter()
                .map(|m| m.change)
                .collect::<Vec<_>>()
                .join(", ")
        );
        let _ = writeln!(out);
        let _ = writeln!(
            out,
            "{:<22} {:<48} {:<40} standing",
            "estimator", "z", "D (sites^z per time unit)"
        );
        let _ = writeln!(out, "{}", "-".repeat(124));
        for l in &self.estimators {
            let (z, d) = if l.standing == Standing::Applies {
                (
                    l.z.map_or_else(|| "—".to_string(), |m| m.text()),
                    l.d.map_or_else(String::new, |m| m.text()),
                )
            } else {
                (standing_words(l.standing).to_string(), String::new())
            };
            let _ = writeln!(out, "{:<22} {z:<48} {d:<40} {}", l.name, l.detail);
        }
        if let Some(l) = &self.lattice_walk {
            let _ = writeln!(
                out,
                "{:<22} α = {}, γ0 = {}",
                "walk parameters",
                plus_minus(l.alpha, l.alpha_err),
                plus_minus(l.gamma0, l.gamma0_err)
            );
        }
        let _ = writeln!(out);
        if let Some(p) = &self.profile {
            match &p.comparison {
                Some(c) => {
                    let _ = writeln!(
                        out,
                        "profile   preferred: {} (ΔAIC = {}, ΔBIC = {}): {}",
                        c.preferred.name(),
                        num(c.delta_aic),
                        num(c.delta_bic),
                        c.reason
                    );
                }
                None => {
                    let _ = writeln!(out, "profile   Gaussian only (no model comparison)");
                }
            }
            if let (Some(de), mu) = (p.preferred.d_err_bootstrap, p.preferred.mu_err_bootstrap) {
                let _ = writeln!(
                    out,
                    "          bootstrap ({} resamples, seed {}): D ± {}{}",
                    self.bootstrap,
                    self.seed,
                    num(de),
                    mu.map_or(String::new(), |m| format!(", μ ± {}", num(m)))
                );
            }
        }
        if let Some(s) = &self.short_time {
            let _ = writeln!(
                out,
                "short t   Σ_b K_0b² = {}, K_01² = {} (t ≤ {}, order t^{})",
                plus_minus(s.square_sum.value, s.square_sum.err),
                s.neighbour
                    .map_or("—".to_string(), |k| plus_minus(k.value, k.err)),
                num(s.t_window[1]),
                s.order
            );
        }
        let _ = writeln!(out);
        if self.warnings.is_empty() {
            let _ = writeln!(out, "warnings  none");
        } else {
            let _ = writeln!(out, "warnings");
            for w in &self.warnings {
                let _ = writeln!(out, "  [{}] {}", code_name(w.code), w.message);
                let _ = writeln!(out, "      → {}", w.advice);
            }
        }
        for n in &self.notes {
            let _ = writeln!(out, "note      {n}");
        }
        let _ = writeln!(out, "\nconventions: {}", self.conventions);
        out
    }
}

fn standing_words(s: Standing) -> &'static str {
    match s {
        Standing::Applies => "applies",
        Standing::NotApplicable => "does not apply",
        Standing::Saturated => "saturated regime",
        Standing::AtBound => "at a bound",
        Standing::PoorFit => "poor fit",
        Standing::Failed => "failed",
    }
}

fn code_name(code: WarningCode) -> &'static str {
    match code {
        WarningCode::ExponentDrift => "exponent_drift",
        WarningCode::PoorFit => "poor_fit",
        WarningCode::ReachesEdges => "reaches_edges",
        WarningCode::NearCrossover => "near_crossover",
        WarningCode::SumRuleOff => "sum_rule_off",
        WarningCode::EstimatorsDisagree => "estimators_disagree",
        WarningCode::EstimatorFailed => "estimator_failed",
        WarningCode::LatticeScale => "lattice_scale",
    }
}

/// A number with four significant digits (scientific beyond 1e±4).
fn num(v: f64) -> String {
    if !v.is_finite() {
        return format!("{v}");
    }
    let a = v.abs();
    if a != 0.0 && !(1e-3..1e4).contains(&a) {
        format!("{v:.3e}")
    } else {
        let digits = if a == 0.0 {
            3
        } else {
            (3 - a.log10().floor() as i32).clamp(0, 6) as usize
        };
        format!("{v:.digits$}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::verdict::TransportClass;
    use crate::model::couplings::Couplings;
    use crate::model::free_fermion::FreeFermionChain;
    use crate::model::lattice_walk::LatticeWalk;
    use crate::model::stable::StableDensity;
    use crate::numerics::stats::{seeded_rng, standard_normal};
    use crate::testing::{gaussian, log_times};
    use ndarray::Array2;
    use std::f64::consts::PI;

    /// The lattice walk on `sites` sites with seeded noise of `noise`
    /// (errors attached).
    fn walk_map(sites: usize, alpha: f64, times: &[f64], noise: f64, seed: u64) -> CorrelationMap {
        let source = sites / 2;
        let walk = LatticeWalk::power_law(sites, 1.0, alpha).expect("walk");
        let exact = walk.propagate(source, times).expect("propagates");
        let mut rng = seeded_rng(seed);
        let values = exact.mapv(|c| c + noise * standard_normal(&mut rng));
        let errors = Array2::from_elem(values.dim(), noise);
        let x = (0..sites).map(|i| i as i32 - source as i32).collect();
        CorrelationMap::complete(x, times.to_vec(), values, Some(errors)).expect("map")
    }

    #[test]
    fn finite_chain_warns_of_drift_while_the_lattice_walk_fit_recovers_alpha() {
        // The lattice walk at α = 0.9 on 61 sites, times 0.1–50, seeded noise
        // 1e-4: the spread reaches the ends (C(0,t) saturates at 1/61), the
        // local exponent drifts, and the lattice-walk fit, which models the
        // finite chain, recovers α = 0.9 within two of its standard errors.
        let times = log_times(0.1, 50.0, 30);
        let map = walk_map(61, 0.9, &times, 1e-4, 21);
        let options = AnalysisOptions {
            sites: Some(61),
            bootstrap: 0,
            ..AnalysisOptions::default()
        };
        let report = analyze(&map, &options).expect("analysis runs");
        let codes: Vec<WarningCode> = report.warnings.iter().map(|w| w.code).collect();
        assert!(codes.contains(&WarningCode::ExponentDrift), "{codes:?}");
        // The window now ends before the ends and saturation (window rule).
        assert!(!codes.contains(&WarningCode::ReachesEdges), "{codes:?}");
        assert_ne!(report.windows.end, WindowEnd::Data);
        let walk = report.lattice_walk.as_ref().expect("lattice-walk fit ran");
        assert_eq!(report.windows.source, Some(30));
        assert!(walk.alpha_err > 0.0 && walk.alpha_err < 0.01, "{walk:?}");
        assert!((walk.alpha - 0.9).abs() <= 2.0 * walk.alpha_err, "{walk:?}");
        assert!(
            (walk.gamma0 - 1.0).abs() <= 2.0 * walk.gamma0_err,
            "{walk:?}"
        );
    }

    #[test]
    fn the_disagreement_warning_never_contradicts_the_verdict() {
        // A 101-site walk at α = 0.9 seen over 0.1–6 (the demo's shape): the
        // asymptotic estimators drift from the walk's z, by several of their
        // statistical errors but within stat ⊕ window. Before both used the
        // same errors the warning called a pair "10σ apart" that the
        // verdict called "agrees (1.9σ)" (common practice, no source: one
        // rule for one comparison).
        let times = log_times(0.1, 6.0, 30);
        let map = walk_map(101, 0.9, &times, 1e-3, 5);
        let report = analyze(&map, &quick_options()).expect("analysis runs");
        let head = report.verdict.estimator.clone();
        let agreeing: Vec<&str> = report
            .verdict
            .reasons
            .iter()
            .filter(|r| r.contains(", agrees with the headline"))
            .filter_map(|r| r.split(':').next())
            .collect();
        let disagreement = report
            .warnings
            .iter()
            .filter(|w| w.code == WarningCode::EstimatorsDisagree)
            .map(|w| w.message.clone())
            .collect::<String>();
        for pair in disagreement.split("; ") {
            for name in &agreeing {
                assert!(
                    !(pair.contains(&format!("{name} z ="))
                        && pair.contains(&format!("{head} z ="))),
                    "{name} agrees with {head} in the verdict but not in: {pair}"
                );
            }
        }
    }

    #[test]
    fn a_profile_narrower_than_the_lattice_is_warned_about() {
        // Stable μ = 1.3 maps (D = 1, model::stable): from t = 0.3 the
        // profile starts 0.4 sites wide (lattice excess 2e-2), from t = 2 it
        // is 1.7 sites wide (excess below 1e-7). The warning follows the
        // window the analysis chose (common practice, no source).
        let x: Vec<i32> = (-40..=40).collect();
        for (t0, expected) in [(0.3, true), (2.0, false)] {
            let times = log_times(t0, t0 * 16.0, 14);
            let exact = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
                crate::model::stable::StableDensity::new(1.3, times[i].powf(1.0 / 1.3))
                    .expect("valid")
                    .pdf(f64::from(x[j]))
            });
            let map = noisy(x.clone(), times.clone(), &exact, 1e-5, 2);
            let options = AnalysisOptions {
                t_min: Some(t0),
                ..quick_options()
            };
            let report = analyze(&map, &options).expect("analysis runs");
            let warned = report
                .warnings
                .iter()
                .any(|w| w.code == WarningCode::LatticeScale);
            assert_eq!(warned, expected, "t from {t0}: {}", report.render_text());
        }
    }

    #[test]
    fn diffusive_data_give_consistent_estimates_and_json_keys() {
        // Closed-form Gaussian (D = 0.5, z = 2) on 61 offsets, times 1–20,
        // noise 1e-4: every z estimate near 2, the Gaussian profile preferred,
        // and the JSON carries the keys the README promises.
        let x: Vec<i32> = (-30..=30).collect();
        let times = log_times(1.0, 20.0, 12);
        let mut rng = seeded_rng(4);
        let noise = 1e-4;
        let values = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
            let (xv, t) = (f64::from(x[j]), times[i]);
            (-xv * xv / (2.0 * t)).exp() / (2.0 * (PI * 0.5 * t).sqrt())
                + noise * standard_normal(&mut rng)
        });
        let errors = Array2::from_elem(values.dim(), noise);
        let map = CorrelationMap::complete(x, times, values, Some(errors)).expect("map");
        let options = AnalysisOptions {
            bootstrap: 20,
            seed: 3,
            ..AnalysisOptions::default()
        };
        let report = analyze(&map, &options).expect("analysis runs");
        let profile = report.profile.as_ref().expect("profile");
        assert_eq!(profile.preferred.model, ProfileModel::Gaussian);
        assert!((profile.preferred.d - 0.5).abs() < 3.0 * profile.preferred.d_err);
        let tail = &report.autocorrelation.as_ref().expect("tail").fit;
        assert!((tail.z - 2.0).abs() < 3.0 * tail.z_err, "{tail:?}");
        let json = serde_json::to_value(&report).expect("serialises");
        for path in [
            "/dataset/sites",
            "/dataset/times",
            "/dataset/sum_rule/min",
            "/dataset/sum_rule/max",
            "/autocorrelation/z",
            "/autocorrelation/z_err",
            "/autocorrelation/t_window",
            "/collapse/z",
            "/collapse/z_err",
            "/collapse/quality",
            "/profile/model",
            "/profile/mu",
            "/profile/mu_err",
            "/profile/D",
            "/profile/D_err",
            "/profile/chi2_dof",
            "/warnings",
        ] {
            assert!(json.pointer(path).is_some(), "missing {path}");
        }
        assert!(json.get("lattice_walk").is_none());
        assert_eq!(
            json.pointer("/profile/model"),
            Some(&serde_json::json!("gaussian"))
        );
        let text = report.render_text();
        assert!(
            text.contains("Gaussian profile") && text.contains("scaling collapse"),
            "{text}"
        );
    }

    /// A map from exact values with seeded Gaussian noise of `noise`
    /// (errors attached).
    fn noisy(
        x: Vec<i32>,
        times: Vec<f64>,
        exact: &Array2<f64>,
        noise: f64,
        seed: u64,
    ) -> CorrelationMap {
        let mut rng = seeded_rng(seed);
        let values = exact.mapv(|c| c + noise * standard_normal(&mut rng));
        let errors = Array2::from_elem(values.dim(), noise);
        CorrelationMap::complete(x, times, values, Some(errors)).expect("map")
    }

    fn quick_options() -> AnalysisOptions {
        AnalysisOptions {
            bootstrap: 0,
            ..AnalysisOptions::default()
        }
    }

    fn assert_class(report: &AnalysisReport, class: TransportClass, z: f64, tol: f64) {
        let v = &report.verdict;
        assert_eq!(v.class, class, "{}", report.render_text());
        let got = v.z.expect("z");
        assert!(
            (got - z).abs() < tol,
            "z = {got}, expected {z}: {}",
            report.render_text()
        );
    }

    #[test]
    fn verdict_gaussian_map_is_diffusive() {
        // C = exp(−x²/4Dt)/√(4πDt), D = 0.5 (closed form, testing::gaussian),
        // |x| ≤ 40, t = 1..30, noise 1e-4: diffusive, z = 2.
        let x: Vec<i32> = (-40..=40).collect();
        let times = log_times(1.0, 30.0, 16);
        let exact = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
            gaussian(f64::from(x[j]), times[i], 0.5)
        });
        let report = analyze(&noisy(x, times, &exact, 1e-4, 7), &quick_options()).expect("runs");
        assert_class(&report, TransportClass::Diffusive, 2.0, 0.1);
        let d = report.verdict.d.expect("D");
        assert!((d - 0.5).abs() < 0.05, "D = {d}");
    }

    #[test]
    fn verdict_stable_map_is_levy() {
        // Symmetric stable density μ = 1.3, scale (Dt)^{1/μ} with D = 1
        // (model::stable, checked against the Nolan integral in its own
        // tests), |x| ≤ 60, t = 1..20, noise 1e-4: Lévy flight, z = 1.3.
        let mu = 1.3;
        let x: Vec<i32> = (-60..=60).collect();
        let times = log_times(1.0, 20.0, 14);
        let exact = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
            StableDensity::new(mu, times[i].powf(1.0 / mu))
                .expect("density")
                .pdf(f64::from(x[j]))
        });
        let report = analyze(&noisy(x, times, &exact, 1e-4, 8), &quick_options()).expect("runs");
        assert_class(&report, TransportClass::Levy, mu, 0.1);
        assert!(!report.evidence.front);
    }

    #[test]
    fn verdict_finite_chain_lattice_walk_is_levy_from_the_walk_fit() {
        // Lattice walk α = 0.9 (z = 2α − 1 = 0.8, physics notes "Classical
        // lattice walk") on 61 sites from the centre, times 0.1–50, noise
        // 1e-4, chain length given: the walk fit is chosen, and the
        // asymptotic estimators that reach saturation are set aside.
        let times = log_times(0.1, 50.0, 30);
        let map = walk_map(61, 0.9, &times, 1e-4, 21);
        let options = AnalysisOptions {
            sites: Some(61),
            ..quick_options()
        };
        let report = analyze(&map, &options).expect("runs");
        assert_class(&report, TransportClass::Levy, 0.8, 0.02);
        assert_eq!(report.verdict.estimator, "lattice-walk fit");
        // Without the chain length, the chain is inferred from the map.
        let inferred = analyze(&map, &quick_options()).expect("runs");
        assert_eq!(inferred.windows.chain_sites, Some(61));
        assert_class(&inferred, TransportClass::Levy, 0.8, 0.02);
    }

    #[test]
    fn verdict_free_fermion_map_is_ballistic() {
        // Nearest-neighbour XX chain, 121 sites, J = 1, centre source:
        // C(x,t) = |U_x0(t)|² → J_x(2t)² (physics notes, "Free fermions"),
        // times 1–20 before the front (|x| ≈ 2t) reaches the ends, noise
        // 1e-4. Σ_n n² J_n(2t)² = 2t² (A&S 9.1.76 family): z = 1, ballistic.
        let sites = 121;
        let couplings = Couplings::from_matrix(Array2::from_shape_fn((sites, sites), |(i, j)| {
            if i.abs_diff(j) == 1 { 1.0 } else { 0.0 }
        }))
        .expect("couplings");
        let chain = FreeFermionChain::new(&couplings).expect("chain");
        let times = log_times(1.0, 20.0, 25);
        let exact = chain.correlations(60, &times).expect("correlations");
        let x: Vec<i32> = (-60..=60).collect();
        let report = analyze(&noisy(x, times, &exact, 1e-4, 9), &quick_options()).expect("runs");
        assert!(report.evidence.front, "{:?}", report.evidence);
        assert_class(&report, TransportClass::Ballistic, 1.0, 0.05);
        assert_eq!(report.verdict.estimator, "second moment");
        assert!(report.verdict.d.is_none());
    }

    #[test]
    fn window_errors_and_picture_are_reported() {
        // Gaussian map as above: every applicable line carries a window
        // error, and the picture holds z_eff(t) near 2 at late times and a
        // scan (self-consistent: the same estimators on sub-windows).
        let x: Vec<i32> = (-40..=40).collect();
        let times = log_times(1.0, 30.0, 16);
        let exact = Array2::from_shape_fn((times.len(), x.len()), |(i, j)| {
            gaussian(f64::from(x[j]), times[i], 0.5)
        });
        let report = analyze(&noisy(x, times, &exact, 1e-4, 3), &quick_options()).expect("runs");
        for l in report
            .estimators
            .iter()
            .filter(|l| l.standing == Standing::Applies)
        {
            assert!(l.z.and_then(|z| z.err_sys).is_some(), "{l:?}");
        }
        let pic = &report.local_exponent_picture;
        assert!(!pic.scan.is_empty());
        let last = pic.z_eff.last().expect("z_eff");
        assert!((last.z - 2.0).abs() < 0.2, "{last:?}");
        let text = report.render_text();
        assert!(text.starts_with("verdict   diffusive"), "{text}");
        assert!(
            text.contains("(stat) ±") && text.contains("(window)"),
            "{text}"
        );
    }

    #[test]
    fn cancelled_analysis_stops() {
        let times = log_times(0.1, 50.0, 30);
        let map = walk_map(61, 0.9, &times, 1e-4, 21);
        let calls = AtomicUsize::new(0);
        let result = analyze_with_progress(&map, &quick_options(), &|_, _| {
            calls.fetch_add(1, Ordering::SeqCst) < 1
        });
        assert_eq!(result.err(), Some(AnalysisError::Cancelled));
    }

    #[test]
    fn bad_options_are_refused() {
        let map = walk_map(11, 1.0, &[1.0, 2.0, 3.0], 1e-3, 1);
        let bad = AnalysisOptions {
            t_min: Some(3.0),
            t_max: Some(1.0),
            ..AnalysisOptions::default()
        };
        assert!(matches!(
            analyze(&map, &bad),
            Err(AnalysisError::BadTimeRange { .. })
        ));
        let orphan = AnalysisOptions {
            source: Some(3),
            ..AnalysisOptions::default()
        };
        assert!(analyze(&map, &orphan).is_err());
    }

    #[test]
    fn number_formatting() {
        assert_eq!(num(0.5), "0.5000");
        assert_eq!(num(12346.0), "1.235e4");
    }
}
