//! The whole analysis of one correlation map: every estimator with sensible
//! default windows, the diagnosis, one serialisable report and a readable
//! text table. This is what `spreadscope analyze` prints.
//!
//! Owns the choice of default windows and the order in which estimators
//! run. Must not know files, command lines or JSON encoders: values in, a
//! [`AnalysisReport`] out (serde-serialisable by the caller).
//!
//! # Default windows
//! - **Scaling window** (tail, width, collapse, profile): the *late-time
//!   half of the log-time range where C(0,t) is above noise*. "Above noise"
//!   means C(0,t) > 3 δC(0,t) when the map has errors and C(0,t) > 0
//!   otherwise; the range runs from the first time t > 0 to the last time
//!   before C(0,t) first drops to noise, [t_a, t_b], and the window is
//!   [√(t_a t_b), t_b]: early times carry the microscopic, non-universal
//!   dynamics, and the scaling form is a late-time statement. The user's
//!   `t_min` / `t_max` replace either end; `x_max` limits |x|. If fewer
//!   than 3 times remain, every time t > 0 within the user's bounds is used
//!   and the report says so. Without an x = 0 column the log-time range of
//!   all times t > 0 is halved instead.
//! - **Lattice-walk window**: everything within the user's bounds (no
//!   late-time cut): the walk model holds at all times and sees the edges.
//! - **Short-time window**: the early times while C(0,t) ≥ 0.7 (see
//!   `short_time_check`); the check is skipped, with a note, when the map
//!   has too few of them.
//! - **Sum rule** (dataset summary and diagnosis): all offsets of the map at
//!   the times of the scaling window.
//!
//! # Errors of z
//! Every estimator reports its own; the collapse's is the bootstrap's when
//! `bootstrap > 0` and otherwise the width of the minimum of S, which is
//! known to be too small on noisy data (see `collapse`), so run with a
//! bootstrap before trusting the agreement check.

use std::fmt::Write as _;

use crate::CorrelationMap;
use crate::SumRulePoint;
use crate::fit::collapse::{CollapseOptions, CollapseQuality, CollapseReport};
use crate::fit::diagnosis::{
    self, Edges, Warning, WarningCode, ZEstimate, estimator_failed, plus_minus, poor_fit,
};
use crate::fit::lattice_walk_fit::{LatticeWalkFitOptions, LatticeWalkFitReport, fit_lattice_walk};
use crate::fit::profile::{
    ProfileComparison, ProfileModel, ProfileOptions, ProfileReport, compare_profiles, fit_profile,
};
use crate::fit::short_time_check::{ShortTimeOptions, ShortTimeReport, check_short_time};
use crate::fit::tail::{LocalExponent, TailReport, TimeWindow, fit_tail, local_exponent};
use crate::fit::width::{WidthOptions, WidthReport, fit_width};
use crate::numerics::optimize::Termination;

/// The conventions every output states (DESIGN.md).
pub const CONVENTIONS: &str = "C(x,t) = 2^-N Tr[σ^z_{j+x}(t) σ^z_j(0)] (infinite temperature); \
H = Σ_{i<j} J_ij (σ^+_i σ^-_j + h.c. + (Δ/2) σ^z_i σ^z_j), ħ = 1; scaling form \
Σ_x C(x,t) e^{ikx} ≈ exp(−D|k|^z t), D in sites^z per time unit; lattice walk \
γ_ij = γ0 |i−j|^{−2α}, z = min(2α − 1, 2)";

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
    /// Bootstrap replicates for the collapse and the profile fits.
    pub bootstrap: usize,
    pub seed: u64,
}

impl Default for AnalysisOptions {
    fn default() -> Self {
        Self {
            t_min: None,
            t_max: None,
            x_max: None,
            sites: None,
            source: None,
            bootstrap: 200,
            seed: 0,
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
    /// Chain length and source used by the lattice-walk fit and the edge
    /// check.
    pub chain_sites: Option<usize>,
    pub source: Option<usize>,
    /// How the source was obtained: "given", "inferred from the offsets" or
    /// "assumed at the centre".
    pub source_basis: Option<&'static str>,
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

/// Result of [`analyze`]. Sections are `None` when their estimator could
/// not run; the reason is then among the warnings.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct AnalysisReport {
    pub conventions: &'static str,
    pub dataset: DatasetSummary,
    pub windows: Windows,
    pub autocorrelation: Option<AutocorrelationSection>,
    pub width: Option<WidthReport>,
    pub collapse: Option<CollapseSection>,
    pub profile: Option<ProfileSection>,
    /// Present only when the chain length was given.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lattice_walk: Option<LatticeWalkFitReport>,
    pub short_time: Option<ShortTimeReport>,
    pub warnings: Vec<Warning>,
    /// Informational remarks that are not warnings.
    pub notes: Vec<String>,
    pub bootstrap: usize,
    pub seed: u64,
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
}

/// The scaling window of the module documentation and its description.
fn scaling_window(map: &CorrelationMap, options: &AnalysisOptions) -> (TimeWindow, String) {
    let user = TimeWindow {
        t_min: options.t_min,
        t_max: options.t_max,
    };
    let positive: Vec<f64> = map
        .times()
        .iter()
        .copied()
        .filter(|&t| t > 0.0 && user.contains(t))
        .collect();
    let above_noise: Vec<f64> = match map.autocorrelation() {
        Some(series) => series
            .into_iter()
            .filter(|&(t, _, _)| t > 0.0 && user.contains(t))
            .take_while(|&(_, c, e)| c > 3.0 * e.unwrap_or(0.0) && c > 0.0)
            .map(|(t, _, _)| t)
            .collect(),
        None => positive.clone(),
    };
    let noise_rule = if map.errors().is_some() {
        "C(0,t) > 3 δC"
    } else {
        "C(0,t) > 0"
    };
    let candidate = if above_noise.len() >= 2 {
        let (ta, tb) = (above_noise[0], above_noise[above_noise.len() - 1]);
        let window = TimeWindow {
            t_min: Some(options.t_min.unwrap_or((ta * tb).sqrt())),
            t_max: Some(options.t_max.unwrap_or(tb)),
        };
        let rule = format!(
            "late-time half of the log-time range where {noise_rule} (t = {ta:.4}..{tb:.4}){}",
            user_note(options)
        );
        Some((window, rule))
    } else {
        None
    };
    let enough = |w: &TimeWindow| positive.iter().filter(|&&t| w.contains(t)).count() >= 3;
    match candidate {
        Some((w, rule)) if enough(&w) => (w, rule),
        _ => (
            user,
            format!(
                "every time t > 0{} (too few times above noise for the default late-time window)",
                user_note(options)
            ),
        ),
    }
}

fn user_note(options: &AnalysisOptions) -> String {
    match (options.t_min, options.t_max) {
        (None, None) => String::new(),
        (Some(a), None) => format!(", t ≥ {a} as given"),
        (None, Some(b)) => format!(", t ≤ {b} as given"),
        (Some(a), Some(b)) => format!(", {a} ≤ t ≤ {b} as given"),
    }
}

/// Runs every estimator on `map` with the windows of the module
/// documentation and collects the diagnosis.
///
/// # Errors
/// Inconsistent options (t_min ≥ t_max, negative x_max, a source without
/// or outside the chain) or a window without data. Estimators that fail
/// leave their section empty and add a warning instead.
pub fn analyze(
    map: &CorrelationMap,
    options: &AnalysisOptions,
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
    let chain = chain_geometry(map, options)?;
    let mut warnings = Vec::new();
    let mut notes = Vec::new();

    let (window, rule) = scaling_window(map, options);
    let scaling_map = map.window(window.t_min, window.t_max, options.x_max)?;
    let times = scaling_map.times();
    let t_window = [times[0], times[times.len() - 1]];

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

    // Autocorrelation tail and local exponent.
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

    // The collapse, the profile fits and the lattice-walk fit are
    // independent: run them side by side (the bootstraps and the walk's
    // eigendecompositions are the costly parts).
    let collapse_options = CollapseOptions {
        bootstrap_resamples: options.bootstrap,
        seed: options.seed,
        ..CollapseOptions::default()
    };
    let profile_options = ProfileOptions {
        bootstrap: options.bootstrap,
        seed: options.seed,
        ..ProfileOptions::default()
    };
    // The lattice-walk fit sees the user's window only (no late-time cut).
    let walk_map = match chain {
        Some(_) => Some(map.window(options.t_min, options.t_max, options.x_max)?),
        None => None,
    };
    let (collapse_result, (profile_result, walk_result)) = rayon::join(
        || CollapseQuality::new(&scaling_map).and_then(|q| q.best(&collapse_options)),
        || {
            rayon::join(
                || profile_section(&scaling_map, &profile_options),
                || {
                    chain.zip(walk_map.as_ref()).map(|((sites, source, _), m)| {
                        fit_lattice_walk(m, &LatticeWalkFitOptions::new(sites, source))
                    })
                },
            )
        },
    );
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
            source: chain.map(|c| c.1),
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

    diagnose(
        map,
        &DiagnosisInputs {
            window,
            local: &local,
            autocorrelation: autocorrelation.as_ref().map(|a| &a.fit),
            width: width.as_ref(),
            collapse: collapse.as_ref().map(|c| &c.fit),
            profile: profile.as_ref(),
            lattice_walk: lattice_walk.as_ref(),
            sum_points: &sum_points,
            chain,
        },
        &mut warnings,
    );

    Ok(AnalysisReport {
        conventions: CONVENTIONS,
        dataset,
        windows: Windows {
            t_window,
            x_max: options.x_max,
            rule,
            chain_sites: chain.map(|c| c.0),
            source: chain.map(|c| c.1),
            source_basis: chain.map(|c| c.2),
        },
        autocorrelation,
        width,
        collapse,
        profile,
        lattice_walk,
        short_time,
        warnings,
        notes,
        bootstrap: options.bootstrap,
        seed: options.seed,
    })
}

/// (sites, source, how the source was found) when the chain length is
/// given.
fn chain_geometry(
    map: &CorrelationMap,
    options: &AnalysisOptions,
) -> Result<Option<(usize, usize, &'static str)>, AnalysisError> {
    let Some(sites) = options.sites else {
        return match options.source {
            Some(s) => Err(AnalysisError::SourceWithoutSites { source_site: s }),
            None => Ok(None),
        };
    };
    let (source, basis) = match options.source {
        Some(s) => (s, "given"),
        None => {
            let x = map.offsets();
            let (first, last) = (x[0], x[x.len() - 1]);
            if first <= 0 && i64::from(last) - i64::from(first) + 1 == sites as i64 {
                (first.unsigned_abs() as usize, "inferred from the offsets")
            } else {
                (sites.saturating_sub(1) / 2, "assumed at the centre")
            }
        }
    };
    if source >= sites {
        return Err(AnalysisError::SourceOutOfRange {
            source_site: source,
            sites,
        });
    }
    Ok(Some((sites, source, basis)))
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
    local: &'a [LocalExponent],
    autocorrelation: Option<&'a TailReport>,
    width: Option<&'a WidthReport>,
    collapse: Option<&'a CollapseReport>,
    profile: Option<&'a ProfileSection>,
    lattice_walk: Option<&'a LatticeWalkFitReport>,
    sum_points: &'a [SumRulePoint],
    chain: Option<(usize, usize, &'static str)>,
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
            collapse.quality_min,
            collapse.errors_known,
        ));
    }

    let edges = match inputs.chain {
        Some((sites, source, _)) => Edges::of_chain(sites, source),
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

    let covers_chain = inputs.chain.map(|(sites, source, _)| {
        let x = map.offsets();
        let edges = Edges::of_chain(sites, source);
        x[0] <= edges.left && x[x.len() - 1] >= edges.right
    });
    warnings.extend(diagnosis::sum_rule_off(inputs.sum_points, covers_chain));

    let mut estimates = Vec::new();
    if let Some(t) = inputs.autocorrelation {
        estimates.push(ZEstimate {
            estimator: "tail",
            z: t.z,
            z_err: t.z_err,
        });
    }
    if let Some(w) = inputs.width {
        estimates.push(ZEstimate {
            estimator: "width",
            z: w.z,
            z_err: w.z_err,
        });
    }
    // A collapse whose minimum lies on the edge of the searched range has
    // no meaningful error: it is left out of the comparison.
    if let Some(c) = inputs
        .collapse
        .filter(|c| c.termination != Termination::MinimumAtBoundary)
    {
        estimates.push(ZEstimate {
            estimator: "collapse",
            z: c.z,
            z_err: c.z_err,
        });
    }
    if let Some(stable) = inputs
        .profile
        .and_then(|p| p.comparison.as_ref())
        .map(|c| &c.stable)
        .filter(|s| !s.mu_at_bound)
    {
        estimates.push(ZEstimate {
            estimator: "stable profile",
            z: stable.mu,
            z_err: stable.mu_err,
        });
    }
    if let Some(w) = inputs.lattice_walk.filter(|w| !w.alpha_at_bound) {
        estimates.push(ZEstimate {
            estimator: "lattice walk",
            z: w.z,
            z_err: w.z_err,
        });
    }
    warnings.extend(diagnosis::estimators_disagree(&estimates));
}

impl AnalysisReport {
    /// A readable table for the command line: dataset, windows, one line
    /// per estimator (z, D, quality), the profile preference, the short-time
    /// check, the warnings with their advice, and the conventions.
    #[must_use]
    pub fn render_text(&self) -> String {
        let mut out = String::new();
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
            let _ = writeln!(out, "chain     {n} sites, source {s} ({b})");
        }
        let _ = writeln!(out);
        let _ = writeln!(
            out,
            "{:<22} {:>16} {:>22} {:>24}",
            "estimator", "z", "D or other", "quality"
        );
        let _ = writeln!(out, "{}", "-".repeat(87));
        let row = |out: &mut String, name: &str, z: String, other: String, quality: String| {
            let _ = writeln!(out, "{name:<22} {z:>16} {other:>22} {quality:>24}");
        };
        match &self.autocorrelation {
            Some(a) => row(
                &mut out,
                "tail C(0,t)",
                plus_minus(a.fit.z, a.fit.z_err),
                format!("A = {}", plus_minus(a.fit.amplitude, a.fit.amplitude_err)),
                format!("χ²/dof = {}", num(a.fit.chi2_dof)),
            ),
            None => row(
                &mut out,
                "tail C(0,t)",
                "—".into(),
                String::new(),
                "failed".into(),
            ),
        }
        if let Some(wd) = &self.width {
            row(
                &mut out,
                &format!("width (q = {})", wd.q),
                plus_minus(wd.z, wd.z_err),
                format!("B = {}", plus_minus(wd.prefactor, wd.prefactor_err)),
                format!("χ²/dof = {}", num(wd.chi2_dof)),
            );
        }
        match &self.collapse {
            Some(c) => row(
                &mut out,
                "collapse (H&H S)",
                plus_minus(c.fit.z, c.fit.z_err),
                if c.fit.termination == Termination::MinimumAtBoundary {
                    "z at edge of search".to_string()
                } else {
                    format!("error: {}", c.fit.z_err_source)
                },
                format!("S_min = {}", num(c.quality)),
            ),
            None => row(
                &mut out,
                "collapse (H&H S)",
                "—".into(),
                String::new(),
                "failed".into(),
            ),
        }
        if let Some(p) = &self.profile {
            let reports: Vec<&ProfileReport> = match &p.comparison {
                Some(c) => vec![&c.gaussian, &c.stable],
                None => vec![&p.preferred],
            };
            for r in reports {
                let z = match r.model {
                    ProfileModel::Gaussian => "2 (fixed)".to_string(),
                    ProfileModel::Stable if r.mu_at_bound => format!("{} (bound)", num(r.mu)),
                    ProfileModel::Stable => plus_minus(r.mu, r.mu_err),
                };
                row(
                    &mut out,
                    &format!("profile {}", r.model.name()),
                    z,
                    format!("D = {}", plus_minus(r.d, r.d_err)),
                    format!("χ²/dof = {}, AIC {}", num(r.chi2_dof), num(r.aic)),
                );
            }
        } else {
            row(
                &mut out,
                "profile",
                "—".into(),
                String::new(),
                "failed".into(),
            );
        }
        if let Some(l) = &self.lattice_walk {
            row(
                &mut out,
                "lattice walk",
                plus_minus(l.z, l.z_err),
                format!("α = {}", plus_minus(l.alpha, l.alpha_err)),
                format!("χ²/dof = {}", num(l.chi2_dof)),
            );
            row(
                &mut out,
                "",
                String::new(),
                format!("γ0 = {}", plus_minus(l.gamma0, l.gamma0_err)),
                String::new(),
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

fn code_name(code: WarningCode) -> &'static str {
    match code {
        WarningCode::ExponentDrift => "exponent_drift",
        WarningCode::PoorFit => "poor_fit",
        WarningCode::ReachesEdges => "reaches_edges",
        WarningCode::NearCrossover => "near_crossover",
        WarningCode::SumRuleOff => "sum_rule_off",
        WarningCode::EstimatorsDisagree => "estimators_disagree",
        WarningCode::EstimatorFailed => "estimator_failed",
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
    use crate::model::lattice_walk::LatticeWalk;
    use crate::numerics::stats::{seeded_rng, standard_normal};
    use crate::testing::log_times;
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
        assert!(codes.contains(&WarningCode::ReachesEdges), "{codes:?}");
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
    fn diffusive_data_give_consistent_estimates_and_json_keys() {
        // Closed-form Gaussian (D = 0.5, z = 2) on 61 offsets, times 1–20,
        // noise 1e-4: every z estimate near 2, the Gaussian profile preferred,
        // and the JSON carries the keys DESIGN.md promises.
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
            text.contains("profile gaussian") && text.contains("collapse"),
            "{text}"
        );
    }

    #[test]
    fn scaling_window_is_the_late_half_of_the_log_range_above_noise() {
        // C(0,t) = 1/√t with errors 0.01: above 3δC = 0.03 up to t = 1111.
        // Times 1, 3, 10, …, 10000: above noise from 1 to 1000, so the
        // window is [√(1·1000), 1000] = [31.62, 1000] (module documentation),
        // holding t = 100, 300, 1000.
        let times: Vec<f64> = vec![1.0, 3.0, 10.0, 30.0, 100.0, 300.0, 1000.0, 3000.0, 10000.0];
        let n = times.len();
        let values = Array2::from_shape_fn((n, 3), |(i, j)| {
            let c = times[i].powf(-0.5);
            if j == 1 { c } else { (1.0 - c) / 2.0 }
        });
        let map = CorrelationMap::complete(
            vec![-1, 0, 1],
            times,
            values,
            Some(Array2::from_elem((n, 3), 0.01)),
        )
        .expect("map");
        let (w, rule) = scaling_window(&map, &AnalysisOptions::default());
        let t_min = w.t_min.expect("lower end");
        assert!((t_min - 1000f64.sqrt()).abs() < 1e-12, "{w:?}");
        assert!(w.t_max.is_some_and(|t| (t - 1000.0).abs() < 1e-12), "{w:?}");
        assert!(rule.contains("late-time half"), "{rule}");
        // A user bound replaces that end only.
        let given = AnalysisOptions {
            t_max: Some(300.0),
            ..AnalysisOptions::default()
        };
        let (w2, _) = scaling_window(&map, &given);
        assert!(
            w2.t_max.is_some_and(|t| (t - 300.0).abs() < 1e-12),
            "{w2:?}"
        );
        // Too few times in the default window: every time is used.
        let short = map.window(None, Some(30.0), None).expect("window");
        let (w3, rule3) = scaling_window(&short, &AnalysisOptions::default());
        assert!(w3.t_min.is_none() && w3.t_max.is_none(), "{w3:?}");
        assert!(rule3.contains("too few"), "{rule3}");
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
