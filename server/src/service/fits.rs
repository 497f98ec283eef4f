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
use serde_json::{Map, Value, json};
use spreadscope_physics::CorrelationMap;
use spreadscope_physics::fit::analysis::{AnalysisError, AnalysisOptions, analyze_with_progress};
use spreadscope_physics::fit::collapse::{CollapseError, CollapseOptions, CollapseQuality};
use spreadscope_physics::fit::lattice_walk_fit::{
    LatticeWalkFitOptions, SourceAverage, fit_lattice_walk, walk_window_start,
};
use spreadscope_physics::fit::profile::{
    ProfileModel, ProfileOptions, compare_profiles, fit_profile,
};
use spreadscope_physics::fit::short_time_check::{ShortTimeOptions, check_short_time};
use spreadscope_physics::fit::tail::{TimeWindow, fit_tail, local_exponent};
use spreadscope_physics::fit::verdict::{DConvention, EstimatorLine, Standing, Verdict};
use spreadscope_physics::fit::width::{WidthOptions, fit_width};
use spreadscope_physics::fit::windows::{self as window_rule, Bounds, DEFAULT_BOOTSTRAP};
use spreadscope_physics::model::lattice_walk::LatticeWalk;
use spreadscope_physics::model::stable::StableDensity;

use super::{Access, CONVENTIONS, PROGRAM_VERSION, Service, ServiceError, ServiceResult};

/// The estimators a client may ask for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum FitMethod {
    Tail,
    Width,
    Collapse,
    Profile,
    LatticeWalk,
    ShortTime,
    Analysis,
}

/// Which scaling function the profile fit uses.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ProfileChoice {
    Gaussian,
    Stable,
    /// Both, with a model preference by AIC and BIC.
    #[default]
    Compare,
}

/// The space–time window a fit sees.
#[derive(Debug, Clone, Copy, Default, PartialEq, Deserialize, Serialize)]
#[serde(deny_unknown_fields)]
pub struct Windows {
    pub t_min: Option<f64>,
    pub t_max: Option<f64>,
    pub x_max: Option<i32>,
}

impl Windows {
    fn check(&self) -> ServiceResult<()> {
        for (name, v) in [("t_min", self.t_min), ("t_max", self.t_max)] {
            if v.is_some_and(|v| !v.is_finite() || v < 0.0) {
                return Err(ServiceError::BadRequest(format!(
                    "field `windows.{name}`: must be a finite time ≥ 0"
                )));
            }
        }
        if let (Some(a), Some(b)) = (self.t_min, self.t_max) {
            if a > b {
                return Err(ServiceError::BadRequest(
                    "field `windows.t_min`: larger than `t_max`".into(),
                ));
            }
        }
        if self.x_max.is_some_and(|x| x < 0) {
            return Err(ServiceError::BadRequest(
                "field `windows.x_max`: must be ≥ 0".into(),
            ));
        }
        Ok(())
    }

    /// The sub-map in the window.
    pub(super) fn apply(&self, map: &CorrelationMap) -> ServiceResult<CorrelationMap> {
        self.check()?;
        map.window(self.t_min, self.t_max, self.x_max)
            .map_err(|e| ServiceError::BadRequest(format!("field `windows`: {e}")))
    }
}

/// Method-specific settings; unknown fields are refused by name.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FitOptions {
    /// Quantile of the width fit (weight fraction inside ±w).
    #[serde(default = "half")]
    pub q: f64,
    /// Range searched by the collapse.
    #[serde(default = "z_low")]
    pub z_min: f64,
    #[serde(default = "z_high")]
    pub z_max: f64,
    /// Bootstrap resamples (collapse; profile).
    #[serde(default = "resamples")]
    pub bootstrap: usize,
    /// Seed of every random number.
    #[serde(default)]
    pub seed: u64,
    /// Profile fit: Gaussian, stable or both.
    #[serde(default)]
    pub model: ProfileChoice,
    /// Chain length and source (lattice-walk fit, analysis); default from
    /// the dataset's metadata.
    #[serde(default)]
    pub sites: Option<usize>,
    #[serde(default)]
    pub source: Option<usize>,
    /// Short-time check: order of the polynomial in t (2 or 4).
    #[serde(default)]
    pub order: Option<usize>,
    /// How D is written: `rate`, s(t) = (D t)^{1/z} (default), or
    /// `prefactor`, s(t) = D t^{1/z}.
    #[serde(default)]
    pub d_convention: DConvention,
}

fn half() -> f64 {
    0.5
}
fn z_low() -> f64 {
    0.5
}
fn z_high() -> f64 {
    3.0
}
fn resamples() -> usize {
    DEFAULT_BOOTSTRAP
}

impl Default for FitOptions {
    fn default() -> Self {
        Self {
            q: half(),
            z_min: z_low(),
            z_max: z_high(),
            bootstrap: resamples(),
            seed: 0,
            model: ProfileChoice::Compare,
            sites: None,
            source: None,
            order: None,
            d_convention: DConvention::Rate,
        }
    }
}

/// A request to run one estimator.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FitRequest {
    pub method: FitMethod,
    #[serde(default)]
    pub windows: Windows,
    #[serde(default)]
    pub options: Option<FitOptions>,
    /// Client-chosen id for progress events and cancellation.
    #[serde(default)]
    pub job: Option<String>,
}

/// One fitted parameter: `err` is the statistical 1σ, `err_sys` the
/// window systematic (spread over the window family), `interval` the
/// bootstrap 16th–84th percentiles, `bias` bootstrap mean − estimate.
#[derive(Debug, Clone, Serialize)]
pub struct Parameter {
    pub value: f64,
    pub err: Option<f64>,
    pub err_bootstrap: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub err_sys: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub interval: Option<[f64; 2]>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub bias: Option<f64>,
    /// Held fixed by the model (e.g. μ = 2 of the Gaussian profile).
    pub fixed: bool,
}

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

/// The envelope every fit returns (and a pinned entry stores).
#[derive(Debug, Clone, Serialize)]
pub struct FitResult {
    pub method: FitMethod,
    pub dataset: i64,
    pub dataset_name: String,
    pub dataset_hash: String,
    /// The windows actually used (never empty: the rule fills what the
    /// request left open).
    pub windows: Windows,
    /// How the windows were chosen, in words.
    pub window_rule: String,
    /// Bootstrap resamples used.
    pub bootstrap: usize,
    /// How D is defined in this result.
    pub d_convention: &'static str,
    pub seed: Option<u64>,
    pub parameters: BTreeMap<String, Parameter>,
    pub quality: Map<String, Value>,
    pub termination: String,
    pub warnings: Vec<String>,
    pub program_version: &'static str,
    pub conventions: &'static str,
    /// The estimator's full report.
    pub report: Value,
    /// Curves to draw over the data, computed from the fitted parameters:
    /// `tail` `{t, C}` (the fitted C(0,t) law), `profile` `{x, t, C}` (the
    /// fitted model on the window's grid) and `residual` `{x, t, values,
    /// err}` (data − model).
    pub overlay: Option<Value>,
    /// The headline (only for `analysis`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub verdict: Option<Verdict>,
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

fn termination_text(t: impl std::fmt::Debug) -> String {
    format!("{t:?}")
}

fn to_value(report: &impl Serialize) -> ServiceResult<Value> {
    serde_json::to_value(report).map_err(|e| ServiceError::Internal(e.to_string()))
}

fn bad(e: impl std::fmt::Display) -> ServiceError {
    ServiceError::BadRequest(format!("fit: {e}"))
}

type Computed = (
    BTreeMap<String, Parameter>,
    Map<String, Value>,
    String,
    Vec<String>,
    Value,
    Option<u64>,
);

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
    let mut quality = Map::new();
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
            quality.insert("chi2_dof".into(), json!(report.chi2_dof));
            quality.insert("p_value".into(), json!(report.p_value));
            if report.points_excluded_nonpositive > 0 {
                warnings.push(format!(
                    "{} times with C(0,t) ≤ 0 were left out of the log-space fit",
                    report.points_excluded_nonpositive
                ));
            }
            let mut value = to_value(&report)?;
            value["local_exponent"] = to_value(&local_exponent(map).map_err(bad)?)?;
            Ok((
                parameters,
                quality,
                termination_text(report.termination),
                warnings,
                value,
                None,
            ))
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
            quality.insert("chi2_dof".into(), json!(report.chi2_dof));
            if report.times_beyond_coverage > 0 {
                warnings.push(format!(
                    "{} times have a width beyond the map's symmetric coverage and were left out",
                    report.times_beyond_coverage
                ));
            }
            Ok((
                parameters,
                quality,
                termination_text(report.termination),
                warnings,
                to_value(&report)?,
                None,
            ))
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
            quality.insert("collapse_quality".into(), json!(report.quality_min));
            quality.insert("chi2_dof".into(), json!(report.chi2_dof));
            quality.insert("n_points".into(), json!(report.n_points));
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
            Ok((
                parameters,
                quality,
                termination_text(report.termination),
                warnings,
                to_value(&report)?,
                Some(report.seed),
            ))
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
            quality.insert("chi2_dof".into(), json!(report.chi2_dof));
            if report.alpha_at_bound {
                warnings.push("α ended on the edge of its allowed range: the fit did not find an interior optimum".into());
            }
            Ok((
                parameters,
                quality,
                termination_text(report.termination),
                warnings,
                to_value(&report)?,
                None,
            ))
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
            quality.insert("chi2_dof".into(), json!(report.chi2_dof));
            Ok((
                parameters,
                quality,
                termination_text(report.termination),
                warnings,
                to_value(&report)?,
                None,
            ))
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
                quality.insert("collapse_quality".into(), json!(c.quality));
            }
            if let Some(p) = &report.profile {
                quality.insert("chi2_dof".into(), json!(p.preferred.chi2_dof));
            }
            quality.insert("class".into(), json!(v.class.name()));
            quality.insert("estimator".into(), json!(v.estimator));
            for w in &report.warnings {
                warnings.push(w.message.clone());
            }
            let text = report.render_text();
            let mut value = to_value(&report)?;
            value["text"] = json!(text);
            *analysis_out = Some(AnalysisHeadline {
                verdict: report.verdict.clone(),
                windows: Windows {
                    t_min: Some(report.windows.t_window[0]),
                    t_max: Some(report.windows.t_window[1]),
                    x_max: report.windows.x_max,
                },
                rule: report.windows.rule.clone(),
            });
            Ok((
                parameters,
                quality,
                "completed".into(),
                warnings,
                value,
                Some(options.seed),
            ))
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
            for (name, p) in c.0 {
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

/// The fitted curves of a result, on the grid of its window.
fn overlay(
    method: FitMethod,
    input: &FitInput,
    parameters: &BTreeMap<String, Parameter>,
    report: &Value,
) -> Option<Value> {
    let value = |name: &str| parameters.get(name).map(|p| p.value);
    let map = &input.map;
    match method {
        FitMethod::Tail => {
            let (a, z) = (value("amplitude")?, value("z")?);
            let t0 = report["t_window"][0].as_f64()?;
            let t1 = report["t_window"][1].as_f64()?;
            let n = 40;
            let t: Vec<f64> = (0..n)
                .map(|i| t0 * (t1 / t0).powf(i as f64 / (n - 1) as f64))
                .collect();
            let c: Vec<f64> = t.iter().map(|&t| a * t.powf(-1.0 / z)).collect();
            Some(json!({"tail": {"t": t, "C": c}}))
        }
        FitMethod::Profile | FitMethod::Analysis => {
            let (d, mu) = (value("D")?, value("mu")?);
            let model = map.times().iter().map(|&t| {
                let density = StableDensity::new(mu, (d * t).powf(1.0 / mu)).ok()?;
                Some(
                    map.offsets()
                        .iter()
                        .map(|&x| density.pdf(f64::from(x)))
                        .collect::<Vec<_>>(),
                )
            });
            let model: Option<Vec<Vec<f64>>> = model.collect();
            grid_overlay(map, &model?)
        }
        FitMethod::LatticeWalk => {
            let (gamma0, alpha) = (value("gamma0")?, value("alpha")?);
            let sites = usize::try_from(report["sites"].as_u64()?).ok()?;
            let source = usize::try_from(report["source"].as_u64()?).ok()?;
            let walk = LatticeWalk::power_law(sites, gamma0, alpha).ok()?;
            let p = walk.propagate(source, map.times()).ok()?;
            let model: Option<Vec<Vec<f64>>> = (0..map.n_times())
                .map(|ti| {
                    map.offsets()
                        .iter()
                        .map(|&x| {
                            let i = usize::try_from(i64::from(x) + source as i64).ok()?;
                            p.get((ti, i)).copied()
                        })
                        .collect()
                })
                .collect();
            grid_overlay(map, &model?)
        }
        FitMethod::Width | FitMethod::Collapse | FitMethod::ShortTime => None,
    }
}

/// `profile` and `residual` overlays from model values on the map's grid.
fn grid_overlay(map: &CorrelationMap, model: &[Vec<f64>]) -> Option<Value> {
    let residual: Vec<Vec<Option<f64>>> = (0..map.n_times())
        .map(|ti| {
            (0..map.n_sites())
                .map(|xi| map.get(ti, xi).map(|(c, _)| c - model[ti][xi]))
                .collect()
        })
        .collect();
    let err = map.errors().map(|_| {
        (0..map.n_times())
            .map(|ti| {
                (0..map.n_sites())
                    .map(|xi| map.get(ti, xi).and_then(|(_, e)| e))
                    .collect::<Vec<_>>()
            })
            .collect::<Vec<_>>()
    });
    Some(json!({
        "profile": {"x": map.offsets(), "t": map.times(), "C": model},
        "residual": {"x": map.offsets(), "t": map.times(), "values": residual, "err": err},
    }))
}

fn profile(map: &CorrelationMap, options: &FitOptions) -> ServiceResult<Computed> {
    let settings = ProfileOptions {
        bootstrap: options.bootstrap,
        seed: options.seed,
        ..ProfileOptions::default()
    };
    let mut parameters = BTreeMap::new();
    let mut quality = Map::new();
    let mut warnings = Vec::new();
    let single = |model| fit_profile(map, model, &settings).map_err(bad);
    let (chosen, value) = match options.model {
        ProfileChoice::Gaussian => {
            let r = single(ProfileModel::Gaussian)?;
            let v = to_value(&r)?;
            (r, v)
        }
        ProfileChoice::Stable => {
            let r = single(ProfileModel::Stable)?;
            let v = to_value(&r)?;
            (r, v)
        }
        ProfileChoice::Compare => {
            let c = compare_profiles(map, &settings).map_err(bad)?;
            quality.insert("preferred".into(), json!(c.preferred.name()));
            quality.insert("delta_aic".into(), json!(c.delta_aic));
            quality.insert("delta_bic".into(), json!(c.delta_bic));
            let v = to_value(&c)?;
            (c.preferred_report().clone(), v)
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
    quality.insert("chi2_dof".into(), json!(chosen.chi2_dof));
    quality.insert("model".into(), json!(chosen.model.name()));
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
    Ok((
        parameters,
        quality,
        termination_text(chosen.termination),
        warnings,
        value,
        Some(options.seed),
    ))
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
                    &mut computed.0,
                    method,
                    &input,
                    &family,
                    &options,
                    &progress,
                )?;
                let overlay = overlay(method, &input, &computed.0, &computed.4);
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
        let ((parameters, quality, termination, mut warnings, report, seed), overlay, headline) =
            outcome?;
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
