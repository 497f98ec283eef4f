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

use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

use rayon::prelude::*;

use crate::CorrelationMap;
use crate::SumRulePoint;
use crate::fit::collapse::{CollapseError, CollapseOptions, CollapseQuality, CollapseReport};
use crate::fit::diagnosis::{
    self, Edges, SUM_RULE_TOLERANCE, Warning, ZEstimate, estimator_failed, poor_fit,
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

mod diagnose;
mod lines;
mod report;

pub use report::*;

use diagnose::{DiagnosisInputs, diagnose};
use lines::{LineInputs, lines, walk_options};

/// The conventions every output states.
pub const CONVENTIONS: &str = "C(x,t) = 2^-N Tr[σ^z_{j+x}(t) σ^z_j(0)] (infinite temperature); \
H = Σ_{i<j} J_ij (σ^+_i σ^-_j + h.c. + (Δ/2) σ^z_i σ^z_j), ħ = 1; scaling form \
Σ_x C(x,t) e^{ikx} ≈ exp(−D|k|^z t), D in sites^z per time unit; lattice walk \
γ_ij = γ0 |i−j|^{−2α}, z = min(2α − 1, 2)";

/// Most window starts of the z-versus-window-start scan.
pub const SCAN_STARTS: usize = 8;

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

#[cfg(test)]
mod tests;
