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
use spreadscope_physics::fit::collapse::{CollapseOptions, CollapseQuality};
use spreadscope_physics::fit::tail::{TimeWindow, fit_tail, local_exponent};
use spreadscope_physics::fit::width::{WidthOptions, fit_width};

use super::{Access, CONVENTIONS, PROGRAM_VERSION, Service, ServiceError, ServiceResult};

/// The estimators a client may ask for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum FitMethod {
    Tail,
    Width,
    Collapse,
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
    fn apply(&self, map: &CorrelationMap) -> ServiceResult<CorrelationMap> {
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
    50
}

impl Default for FitOptions {
    fn default() -> Self {
        Self {
            q: half(),
            z_min: z_low(),
            z_max: z_high(),
            bootstrap: resamples(),
            seed: 0,
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

/// One fitted parameter.
#[derive(Debug, Clone, Serialize)]
pub struct Parameter {
    pub value: f64,
    pub err: Option<f64>,
    pub err_bootstrap: Option<f64>,
}

fn param(value: f64, err: f64) -> Parameter {
    Parameter {
        value,
        err: err.is_finite().then_some(err),
        err_bootstrap: None,
    }
}

/// The envelope every fit returns (and a pinned entry stores).
#[derive(Debug, Clone, Serialize)]
pub struct FitResult {
    pub method: FitMethod,
    pub dataset: i64,
    pub dataset_name: String,
    pub dataset_hash: String,
    pub windows: Windows,
    pub seed: Option<u64>,
    pub parameters: BTreeMap<String, Parameter>,
    pub quality: Map<String, Value>,
    pub termination: String,
    pub warnings: Vec<String>,
    pub program_version: &'static str,
    pub conventions: &'static str,
    /// The estimator's full report.
    pub report: Value,
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

/// Runs one estimator on a windowed map. Pure apart from the cancel flag.
fn compute(
    method: FitMethod,
    map: &CorrelationMap,
    options: &FitOptions,
    cancel: &AtomicBool,
) -> ServiceResult<(
    BTreeMap<String, Parameter>,
    Map<String, Value>,
    String,
    Vec<String>,
    Value,
    Option<u64>,
)> {
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
            if cancel.load(Ordering::SeqCst) {
                return Err(ServiceError::Cancelled);
            }
            let report = quality_fn
                .best(&CollapseOptions {
                    z_min: options.z_min,
                    z_max: options.z_max,
                    bootstrap_resamples: options.bootstrap,
                    seed: options.seed,
                    ..CollapseOptions::default()
                })
                .map_err(bad)?;
            let mut z = param(report.z, report.z_err);
            z.err_bootstrap = report.z_err_bootstrap;
            parameters.insert("z".into(), z);
            quality.insert("collapse_quality".into(), json!(report.quality_min));
            quality.insert("n_points".into(), json!(report.n_points));
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
    }
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
        let (summary, map) = self.dataset(access, dataset).await?;
        let windowed = request.windows.apply(&map)?;
        let options = request.options.clone().unwrap_or_default();
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
        let method = request.method;
        let flag = cancel.clone();
        let outcome = self
            .heavy(move || compute(method, &windowed, &options, &flag))
            .await;
        if let Some(id) = &job {
            self.jobs.finish(session_id, id);
            self.publish_progress(session_id, id, 1.0);
        }
        if cancel.load(Ordering::SeqCst) {
            return Err(ServiceError::Cancelled);
        }
        let (parameters, quality, termination, warnings, report, seed) = outcome?;
        Ok(FitResult {
            method,
            dataset,
            dataset_name: summary.name,
            dataset_hash: summary.content_hash,
            windows: request.windows,
            seed,
            parameters,
            quality,
            termination,
            warnings,
            program_version: PROGRAM_VERSION,
            conventions: CONVENTIONS,
            report,
        })
    }

    /// Cancels a running job of the session; `false` if none has that id.
    #[must_use]
    pub fn cancel_job(&self, access: &Access, job: &str) -> bool {
        self.jobs.cancel(access.session.id, job)
    }

    /// The collapse quality S at one z (for dragging a slider).
    ///
    /// # Errors
    /// NotFound, BadRequest for a bad window or z.
    pub async fn collapse_quality(
        &self,
        access: &Access,
        dataset: i64,
        windows: Windows,
        z: f64,
    ) -> ServiceResult<Value> {
        if !(z.is_finite() && z > 0.0) {
            return Err(ServiceError::BadRequest(
                "parameter `z`: must be a positive number".into(),
            ));
        }
        let (_, map) = self.dataset(access, dataset).await?;
        let windowed = windows.apply(&map)?;
        let quality = CollapseQuality::new(&windowed).map_err(bad)?;
        let value = quality.quality_value(z);
        Ok(json!({"z": z, "quality": value.s, "n_points": value.n_pairs}))
    }
}
