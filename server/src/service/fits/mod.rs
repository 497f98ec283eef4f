//! Fits on request: one entry point for every estimator of the core, run on
//! the blocking pool behind the heavy-job limit, wrapped in one envelope that
//! carries the provenance a pinned result needs (dataset hash, method,
//! windows, seed, parameters ± errors, quality, termination, warnings,
//! program version). Long jobs report progress as session events and can be
//! cancelled by their client-chosen job id.

use std::collections::{BTreeMap, HashMap};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};

use serde::{Deserialize, Serialize};
use spreadscope_physics::CorrelationMap;
use spreadscope_physics::fit::analysis::{
    AnalysisError, AnalysisOptions, AnalysisReport, analyze_with_progress,
};
use spreadscope_physics::fit::collapse::{
    CollapseError, CollapseOptions, CollapseQuality, CollapseReport,
};
use spreadscope_physics::fit::lattice_walk_fit::{
    LatticeWalkFitOptions, LatticeWalkFitReport, SourceAverage, fit_lattice_walk, walk_window_start,
};
use spreadscope_physics::fit::profile::{
    ProfileComparison, ProfileModel, ProfileOptions, ProfileReport, compare_profiles, fit_profile,
};
use spreadscope_physics::fit::short_time_check::{
    ShortTimeOptions, ShortTimeReport, check_short_time,
};
use spreadscope_physics::fit::tail::{
    LocalExponent, TailReport, TimeWindow, fit_tail, local_exponent,
};
use spreadscope_physics::fit::verdict::{DConvention, EstimatorLine, Standing, Verdict};
use spreadscope_physics::fit::width::{WidthOptions, WidthReport, fit_width};
use spreadscope_physics::fit::windows::{self as window_rule, Bounds, DEFAULT_BOOTSTRAP};
use spreadscope_physics::model::lattice_walk::LatticeWalk;
use spreadscope_physics::model::stable::StableDensity;

use super::{Access, CONVENTIONS, PROGRAM_VERSION, Service, ServiceError, ServiceResult};

mod overlay;
mod wire;

use overlay::overlay;
pub use wire::*;

fn param(value: f64, err: f64) -> Parameter {
    Parameter {
        value,
        err: err.is_finite().then_some(err),
        err_bootstrap: None,
        err_sys: None,
        interval: None,
        bias: None,
        fixed: false,
    }
}

/// D in the requested convention from the rate convention's D at exponent
/// z: value, interval and bias mapped by D ↦ D^{1/z}, errors to first order
/// (`DConvention::convert`).
fn d_in(mut p: Parameter, z: f64, convention: DConvention) -> Parameter {
    if convention == DConvention::Rate {
        return p;
    }
    let rate = p.value;
    let map = |v: f64| convention.convert(v, 0.0, z).0;
    let (value, _) = convention.convert(rate, 0.0, z);
    p.err = p.err.map(|e| convention.convert(rate, e, z).1);
    p.err_bootstrap = p.err_bootstrap.map(|e| convention.convert(rate, e, z).1);
    p.err_sys = p.err_sys.map(|e| convention.convert(rate, e, z).1);
    p.interval = p.interval.map(|[a, b]| [map(a), map(b)]);
    p.bias = p.bias.map(|b| map(rate + b) - value);
    p.value = value;
    p
}

/// A parameter from an estimator line's measurement.
fn measured(m: &spreadscope_physics::fit::verdict::Measured) -> Parameter {
    Parameter {
        err_sys: m.err_sys,
        interval: m.interval,
        bias: m.bias,
        ..param(m.value, m.err_stat)
    }
}

/// Cancellation flags of running jobs, by (session, job id).
#[derive(Debug, Default)]
pub struct Jobs {
    running: Mutex<HashMap<(i64, String), Arc<AtomicBool>>>,
}

impl Jobs {
    pub(super) fn start(&self, session: i64, job: &str) -> Arc<AtomicBool> {
        let flag = Arc::new(AtomicBool::new(false));
        self.lock().insert((session, job.to_string()), flag.clone());
        flag
    }

    pub(super) fn finish(&self, session: i64, job: &str) {
        self.lock().remove(&(session, job.to_string()));
    }

    fn cancel(&self, session: i64, job: &str) -> bool {
        match self.lock().get(&(session, job.to_string())) {
            Some(flag) => {
                flag.store(true, Ordering::SeqCst);
                true
            }
            None => false,
        }
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, HashMap<(i64, String), Arc<AtomicBool>>> {
        self.running
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }
}

fn bad(e: impl std::fmt::Display) -> ServiceError {
    ServiceError::BadRequest(format!("fit: {e}"))
}

/// What one estimator gave, before the envelope is put around it.
struct Computed {
    parameters: BTreeMap<String, Parameter>,
    quality: Quality,
    termination: String,
    warnings: Vec<String>,
    report: FitReport,
    seed: Option<u64>,
}

/// What the analysis decided besides its parameters: the verdict and the
/// scaling window it used (typed, so the envelope never reads them back
/// from the report's JSON).
struct AnalysisHeadline {
    verdict: Verdict,
    windows: Windows,
    rule: String,
}

/// Reports progress of a job; `false` when it was cancelled.
type JobProgress<'a> = &'a (dyn Fn(f64) -> bool + Sync);

/// Everything a fit needs about its dataset.
struct FitInput {
    /// The map cut to the request's windows.
    map: CorrelationMap,
    /// The whole map (the analysis chooses its own windows inside the
    /// request's bounds), shared by the members of the window family.
    full: Arc<CorrelationMap>,
    windows: Windows,
    meta: crate::dataset::DatasetMeta,
}

impl FitInput {
    fn chain(&self, options: &FitOptions) -> ServiceResult<(usize, usize)> {
        let sites = options
            .sites
            .or(self.meta.chain_length.map(|n| n as usize))
            .ok_or_else(|| {
                ServiceError::BadRequest(
                    "field `options.sites`: give the chain length, or set it in the dataset's metadata"
                        .into(),
                )
            })?;
        let source = options
            .source
            .or(self.meta.source_site.map(|j| j as usize))
            .unwrap_or(sites.saturating_sub(1) / 2);
        Ok((sites, source))
    }

    /// The window of sources the map averages (from the metadata), unless
    /// the request names one source.
    fn average(&self, options: &FitOptions) -> Option<SourceAverage> {
        average_of(&self.meta, options)
    }
}

/// The metadata's window of sources, unless the request names one source.
fn average_of(meta: &crate::dataset::DatasetMeta, options: &FitOptions) -> Option<SourceAverage> {
    if options.source.is_some() {
        None
    } else {
        meta.source_average()
    }
}

/// Said on every fit of a map estimated from shot records.
pub const SHOT_MAP_WARNING: &str = "this map was estimated from shot records: its points share \
    initial states (the bootstrap over states correlates offsets and times, and a renormalised \
    map shares one factor per time), while the fit treats every point as independent, so its \
    χ² and errors assume what the map does not have; on synthetic shot maps the calibration \
    (README) found the intervals still cover the truth in 72–88 % of copies";

/// Runs one estimator. Pure apart from the cancel flag.
fn compute(
    method: FitMethod,
    input: &FitInput,
    options: &FitOptions,
    progress: JobProgress<'_>,
    analysis_out: &mut Option<AnalysisHeadline>,
) -> ServiceResult<Computed> {
    let map = &input.map;
    let window = TimeWindow::default();
    let mut quality = Quality::default();
    let mut warnings = Vec::new();
    let mut parameters = BTreeMap::new();
    match method {
        FitMethod::Tail => {
            let report = fit_tail(map, window).map_err(bad)?;
            parameters.insert("z".into(), param(report.z, report.z_err));
            parameters.insert(
                "amplitude".into(),
                param(report.amplitude, report.amplitude_err),
            );
            quality.chi2_dof = Some(report.chi2_dof);
            quality.p_value = Some(report.p_value);
            if report.points_excluded_nonpositive > 0 {
                warnings.push(format!(
                    "{} times with C(0,t) ≤ 0 were left out of the log-space fit",
                    report.points_excluded_nonpositive
                ));
            }
            let local = local_exponent(map).map_err(bad)?;
            Ok(Computed {
                parameters,
                quality,
                termination: report.termination.words().to_string(),
                warnings,
                report: FitReport::Tail(Box::new(TailWithLocal {
                    report,
                    local_exponent: local,
                })),
                seed: None,
            })
        }
        FitMethod::Width => {
            let report = fit_width(
                map,
                WidthOptions {
                    q: options.q,
                    window,
                    ..WidthOptions::default()
                },
            )
            .map_err(bad)?;
            parameters.insert("z".into(), param(report.z, report.z_err));
            quality.chi2_dof = Some(report.chi2_dof);
            if report.times_beyond_coverage > 0 {
                warnings.push(format!(
                    "{} times have a width beyond the map's symmetric coverage and were left out",
                    report.times_beyond_coverage
                ));
            }
            Ok(Computed {
                parameters,
                quality,
                termination: report.termination.words().to_string(),
                warnings,
                report: FitReport::Width(Box::new(report)),
                seed: None,
            })
        }
        FitMethod::Collapse => {
            let quality_fn = CollapseQuality::new(map).map_err(bad)?;
            let report = quality_fn
                .best_with_progress(
                    &CollapseOptions {
                        z_min: options.z_min,
                        z_max: options.z_max,
                        bootstrap_resamples: options.bootstrap,
                        seed: options.seed,
                        ..CollapseOptions::default()
                    },
                    progress,
                )
                .map_err(|e| match e {
                    CollapseError::Cancelled => ServiceError::Cancelled,
                    other => bad(other),
                })?;
            let mut z = param(report.z, report.z_err);
            z.err_bootstrap = report.z_err_bootstrap;
            z.interval = Some(report.z_interval);
            z.bias = report.z_bias;
            parameters.insert("z".into(), z);
            if report.d.is_finite() {
                let mut d = param(report.d, report.d_err);
                d.err_bootstrap = report.d_err.is_finite().then_some(report.d_err);
                d.interval = report.d_err.is_finite().then_some(report.d_interval);
                d.bias = report.d_bias;
                parameters.insert("D".into(), d_in(d, report.z, options.d_convention));
            }
            quality.collapse_quality = Some(report.quality_min);
            quality.chi2_dof = Some(report.chi2_dof);
            quality.n_points = Some(report.n_points);
            if report.poor_fit {
                warnings.push(format!(
                    "the curves do not fall on one master curve within their errors \
                     (χ²/dof = {:.2}): errors scaled by √(χ²/dof)",
                    report.chi2_dof
                ));
            }
            if !report.d_err.is_finite() && report.d.is_finite() {
                warnings.push("D has no error without the bootstrap".into());
            }
            if !report.errors_known {
                warnings.push(
                    "the map has no errors: the collapse quality is not in units of the noise"
                        .into(),
                );
            }
            Ok(Computed {
                parameters,
                quality,
                termination: report.termination.words().to_string(),
                warnings,
                seed: Some(report.seed),
                report: FitReport::Collapse(Box::new(report)),
            })
        }
        FitMethod::Profile => profile(map, options),
        FitMethod::LatticeWalk => {
            let (sites, source) = input.chain(options)?;
            let walk_options = match input.average(options) {
                Some(a) => LatticeWalkFitOptions::averaged(sites, a),
                None => LatticeWalkFitOptions::new(sites, source),
            };
            let report = fit_lattice_walk(map, &walk_options).map_err(bad)?;
            parameters.insert("gamma0".into(), param(report.gamma0, report.gamma0_err));
            parameters.insert("alpha".into(), param(report.alpha, report.alpha_err));
            parameters.insert("z".into(), param(report.z, report.z_err));
            quality.chi2_dof = Some(report.chi2_dof);
            if report.alpha_at_bound {
                warnings.push("α ended on the edge of its allowed range: the fit did not find an interior optimum".into());
            }
            Ok(Computed {
                parameters,
                quality,
                termination: report.termination.words().to_string(),
                warnings,
                report: FitReport::LatticeWalk(Box::new(report)),
                seed: None,
            })
        }
        FitMethod::ShortTime => {
            let report = check_short_time(
                map,
                &ShortTimeOptions {
                    order: options.order,
                    ..ShortTimeOptions::default()
                },
                None,
            )
            .map_err(bad)?;
            parameters.insert(
                "K2_sum".into(),
                param(report.square_sum.value, report.square_sum.err),
            );
            if let Some(n) = report.neighbour {
                parameters.insert("K01_sq".into(), param(n.value, n.err));
            }
            quality.chi2_dof = Some(report.chi2_dof);
            Ok(Computed {
                parameters,
                quality,
                termination: report.termination.words().to_string(),
                warnings,
                report: FitReport::ShortTime(Box::new(report)),
                seed: None,
            })
        }
        FitMethod::Analysis => {
            let sites = options
                .sites
                .or(input.meta.chain_length.map(|n| n as usize));
            let source = options
                .source
                .or(input.meta.source_site.map(|j| j as usize));
            let report = analyze_with_progress(
                &input.full,
                &AnalysisOptions {
                    t_min: input.windows.t_min,
                    t_max: input.windows.t_max,
                    x_max: input.windows.x_max,
                    sites,
                    source: source.filter(|_| sites.is_some()),
                    average: input.average(options).filter(|_| sites.is_some()),
                    bootstrap: options.bootstrap,
                    seed: options.seed,
                    alpha: input.meta.alpha,
                    time_unit: if input.meta.time_unit.is_empty() {
                        "time unit".to_string()
                    } else {
                        input.meta.time_unit.clone()
                    },
                    d_convention: options.d_convention,
                },
                &|fraction, _| progress(fraction),
            )
            .map_err(|e| match e {
                AnalysisError::Cancelled => ServiceError::Cancelled,
                other => bad(other),
            })?;
            let chosen: Option<&EstimatorLine> = report
                .estimators
                .iter()
                .find(|l| l.name == report.verdict.estimator);
            if let Some(z) = chosen.and_then(|l| l.z.as_ref()) {
                parameters.insert("z".into(), measured(z));
            }
            let v = &report.verdict;
            if let (Some(d), Some(e)) = (v.d, v.d_err_stat) {
                let mut p = param(d, e);
                p.err_sys = v.d_err_sys;
                parameters.insert("D".into(), p);
            }
            if let Some(mu) = report
                .estimators
                .iter()
                .find(|l| l.name == "stable profile" && l.standing == Standing::Applies)
                .and_then(|l| l.z.as_ref())
            {
                parameters.insert("mu".into(), measured(mu));
            }
            if let Some(c) = &report.collapse {
                quality.collapse_quality = Some(c.quality);
            }
            if let Some(p) = &report.profile {
                quality.chi2_dof = Some(p.preferred.chi2_dof);
            }
            quality.class = Some(v.class.name().to_string());
            quality.estimator = Some(v.estimator.clone());
            for w in &report.warnings {
                warnings.push(w.message.clone());
            }
            let text = crate::analysis_text::render(&report);
            *analysis_out = Some(AnalysisHeadline {
                verdict: report.verdict.clone(),
                windows: Windows {
                    t_min: Some(report.windows.t_window[0]),
                    t_max: Some(report.windows.t_window[1]),
                    x_max: report.windows.x_max,
                },
                rule: report.windows.rule.clone(),
            });
            Ok(Computed {
                parameters,
                quality,
                termination: "completed".into(),
                warnings,
                report: FitReport::Analysis(Box::new(AnalysisWithText { report, text })),
                seed: Some(options.seed),
            })
        }
    }
}

/// The windows of the one window rule for `map` with the request's bounds
/// and the chain from the options or the metadata.
#[must_use]
pub fn default_windows(
    map: &CorrelationMap,
    meta: &crate::dataset::DatasetMeta,
    windows: Windows,
    options: &FitOptions,
) -> window_rule::WindowChoice {
    let chain = window_rule::chain_of(
        map,
        options.sites.or(meta.chain_length.map(|n| n as usize)),
        options.source.or(meta.source_site.map(|j| j as usize)),
        average_of(meta, options),
    );
    window_rule::choose(
        map,
        Bounds {
            t_min: windows.t_min,
            t_max: windows.t_max,
            x_max: windows.x_max,
        },
        chain,
    )
}

/// Adds the window error to every parameter of a scaling-regime fit: the
/// root-mean-square deviation of the same estimator, without bootstrap,
/// over the window family (`windows` module of the physics crate).
fn window_errors(
    parameters: &mut BTreeMap<String, Parameter>,
    method: FitMethod,
    input: &FitInput,
    family: &[Windows],
    options: &FitOptions,
    progress: JobProgress<'_>,
) -> ServiceResult<()> {
    if family.is_empty() {
        return Ok(());
    }
    let quick = FitOptions {
        bootstrap: 0,
        ..options.clone()
    };
    let mut values: BTreeMap<String, Vec<f64>> = BTreeMap::new();
    for w in family {
        if !progress(0.9) {
            return Err(ServiceError::Cancelled);
        }
        let Ok(map) = w.apply(&input.full) else {
            continue;
        };
        let member = FitInput {
            map,
            full: Arc::clone(&input.full),
            windows: *w,
            meta: input.meta.clone(),
        };
        let mut none = None;
        if let Ok(c) = compute(method, &member, &quick, progress, &mut none) {
            for (name, p) in c.parameters {
                values.entry(name).or_default().push(p.value);
            }
        }
    }
    for (name, p) in parameters.iter_mut() {
        if p.fixed {
            continue;
        }
        if let Some(v) = values.get(name) {
            p.err_sys = window_rule::window_error(p.value, v);
        }
    }
    Ok(())
}

fn profile(map: &CorrelationMap, options: &FitOptions) -> ServiceResult<Computed> {
    let settings = ProfileOptions {
        bootstrap: options.bootstrap,
        seed: options.seed,
        ..ProfileOptions::default()
    };
    let mut parameters = BTreeMap::new();
    let mut quality = Quality::default();
    let mut warnings = Vec::new();
    let single = |model| fit_profile(map, model, &settings).map_err(bad);
    let (chosen, value) = match options.model {
        ProfileChoice::Gaussian => {
            let r = single(ProfileModel::Gaussian)?;
            (r.clone(), FitReport::Profile(Box::new(r)))
        }
        ProfileChoice::Stable => {
            let r = single(ProfileModel::Stable)?;
            (r.clone(), FitReport::Profile(Box::new(r)))
        }
        ProfileChoice::Compare => {
            let c = compare_profiles(map, &settings).map_err(bad)?;
            quality.preferred = Some(c.preferred.name().to_string());
            quality.delta_aic = Some(c.delta_aic);
            quality.delta_bic = Some(c.delta_bic);
            (
                c.preferred_report().clone(),
                FitReport::ProfileComparison(Box::new(c)),
            )
        }
    };
    let mut d = param(chosen.d, chosen.d_err);
    d.err_bootstrap = chosen.d_err_bootstrap;
    parameters.insert("D".into(), d_in(d, chosen.mu, options.d_convention));
    // The profile is narrowest at the window's start: s = (D t_min)^{1/μ}.
    let t_min = chosen.t_window[0];
    let scale = (chosen.d * t_min).powf(1.0 / chosen.mu);
    if let Some(w) = spreadscope_physics::fit::diagnosis::lattice_scale(chosen.mu, scale, t_min) {
        warnings.push(w.message);
    }
    let mut mu = param(chosen.mu, chosen.mu_err);
    mu.err_bootstrap = chosen.mu_err_bootstrap;
    if chosen.model == ProfileModel::Gaussian {
        mu.fixed = true;
        mu.err = None;
    }
    parameters.insert("mu".into(), mu.clone());
    parameters.insert("z".into(), mu);
    quality.chi2_dof = Some(chosen.chi2_dof);
    quality.model = Some(chosen.model.name().to_string());
    if chosen.mu_at_bound {
        warnings.push("μ ended on the edge of its allowed range".into());
    }
    if chosen.chi2_dof > 3.0 {
        warnings.push(format!(
            "χ²/dof = {:.2}: the {} profile does not describe the data within their errors; narrow the window",
            chosen.chi2_dof,
            chosen.model.name()
        ));
    }
    Ok(Computed {
        parameters,
        quality,
        termination: chosen.termination.words().to_string(),
        warnings,
        report: value,
        seed: Some(options.seed),
    })
}

impl Service {
    /// Runs a fit on a dataset of the session.
    ///
    /// # Errors
    /// NotFound, BadRequest naming the field, Busy, Cancelled.
    pub async fn fit(
        &self,
        access: &Access,
        dataset: i64,
        request: FitRequest,
    ) -> ServiceResult<FitResult> {
        let (summary, full) = self.dataset(access, dataset).await?;
        request.windows.check()?;
        let options = request.options.clone().unwrap_or_default();
        let method = request.method;
        // The one window rule fills what the request leaves open (the
        // estimators of the scaling regime); the lattice-walk fit and the
        // short-time check see the request's bounds only, and the analysis
        // applies the rule itself.
        let choice = default_windows(&full, &summary.meta, request.windows, &options);
        let used = match method {
            FitMethod::Tail | FitMethod::Width | FitMethod::Collapse | FitMethod::Profile => {
                Windows {
                    t_min: Some(choice.t_min),
                    t_max: Some(choice.t_max),
                    x_max: choice.x_max,
                }
            }
            // The walk starts a few coherence times in unless asked otherwise.
            FitMethod::LatticeWalk => Windows {
                t_min: request.windows.t_min.or_else(|| walk_window_start(&full)),
                ..request.windows
            },
            FitMethod::ShortTime | FitMethod::Analysis => request.windows,
        };
        let family: Vec<Windows> = match method {
            FitMethod::Tail | FitMethod::Width | FitMethod::Collapse | FitMethod::Profile => {
                window_rule::family(&full, &choice)
                    .into_iter()
                    .map(|m| Windows {
                        t_min: m.bounds.t_min,
                        t_max: m.bounds.t_max,
                        x_max: m.bounds.x_max,
                    })
                    .collect()
            }
            _ => Vec::new(),
        };
        let rule = match method {
            FitMethod::LatticeWalk if request.windows.t_min.is_none() && used.t_min.is_some() => {
                "from three coherence times in (where C(0,t) has fallen to 1/e, times three): \
                 before that the dynamics is coherent, not a walk; every later time within the \
                 request's bounds"
                    .to_string()
            }
            FitMethod::LatticeWalk | FitMethod::ShortTime => {
                "the request's bounds (this fit models every time)".to_string()
            }
            _ => choice.rule.clone(),
        };
        let input = FitInput {
            map: used.apply(&full)?,
            full: Arc::new(full),
            windows: used,
            meta: summary.meta.clone(),
        };
        let session_id = access.session.id;
        let job = request.job.clone();
        let cancel = match &job {
            Some(id) => {
                if id.is_empty() || id.len() > 64 {
                    return Err(ServiceError::BadRequest(
                        "field `job`: 1 to 64 characters".into(),
                    ));
                }
                self.jobs.start(session_id, id)
            }
            None => Arc::new(AtomicBool::new(false)),
        };
        if let Some(id) = &job {
            self.publish_progress(session_id, id, 0.0);
        }
        let flag = cancel.clone();
        let service = self.clone();
        let job_id = job.clone();
        let walk_times = input.map.times().to_vec();
        let (bootstrap, d_convention) = (options.bootstrap, options.d_convention.words());
        let outcome = self
            .heavy(move || {
                // Progress events at most every 1 % of the way, and the
                // cancel flag read at every step.
                let last = Mutex::new(-1.0_f64);
                let progress = |fraction: f64| {
                    if let Some(id) = &job_id {
                        let mut l = last
                            .lock()
                            .unwrap_or_else(std::sync::PoisonError::into_inner);
                        if fraction - *l >= 0.01 {
                            *l = fraction;
                            service.publish_progress(session_id, id, fraction.min(0.99));
                        }
                    }
                    !flag.load(Ordering::SeqCst)
                };
                let mut headline = None;
                let mut computed = compute(method, &input, &options, &progress, &mut headline)?;
                window_errors(
                    &mut computed.parameters,
                    method,
                    &input,
                    &family,
                    &options,
                    &progress,
                )?;
                let overlay = overlay(&input, &computed.parameters, &computed.report);
                Ok((computed, overlay, headline))
            })
            .await;
        if let Some(id) = &job {
            self.jobs.finish(session_id, id);
            self.publish_progress(session_id, id, 1.0);
        }
        if cancel.load(Ordering::SeqCst) {
            return Err(ServiceError::Cancelled);
        }
        let (computed, overlay, headline) = outcome?;
        let Computed {
            parameters,
            quality,
            termination,
            mut warnings,
            report,
            seed,
        } = computed;
        if summary.format.starts_with("shots-") {
            warnings.push(SHOT_MAP_WARNING.to_string());
        }
        let verdict = headline.as_ref().map(|h| h.verdict.clone());
        let (windows, rule) = match (method, headline) {
            (FitMethod::Analysis, Some(h)) => (h.windows, h.rule),
            (FitMethod::LatticeWalk | FitMethod::ShortTime, _) => {
                let t = &walk_times;
                (
                    Windows {
                        t_min: Some(t[0]),
                        t_max: Some(t[t.len() - 1]),
                        x_max: used.x_max,
                    },
                    rule,
                )
            }
            _ => (used, rule),
        };
        Ok(FitResult {
            method,
            dataset,
            dataset_name: summary.name,
            dataset_hash: summary.content_hash,
            windows,
            window_rule: rule,
            bootstrap,
            d_convention,
            seed,
            parameters,
            quality,
            termination,
            warnings,
            program_version: PROGRAM_VERSION,
            conventions: CONVENTIONS,
            report,
            overlay,
            verdict,
        })
    }

    /// Cancels a running job of the session; `false` if none has that id.
    #[must_use]
    pub fn cancel_job(&self, access: &Access, job: &str) -> bool {
        self.jobs.cancel(access.session.id, job)
    }
}
