//! Reference models on request: the lattice walk, spin-chain dynamics and the
//! short-time expansion for a chain, computed on a dataset's grid for
//! overlays and difference maps, and the scaling function for the collapse
//! view. One function ([`model_map`]) runs every model; the `simulate`
//! command uses it too, so the dashboard and the command line cannot drift.

use std::sync::atomic::{AtomicBool, Ordering};

use serde::{Deserialize, Serialize};
use spreadscope_physics::CorrelationMap;
use spreadscope_physics::model::couplings::Couplings;
use spreadscope_physics::model::free_fermion::FreeFermionChain;
use spreadscope_physics::model::lattice_walk::LatticeWalk;
use spreadscope_physics::model::short_time::ShortTimeExpansion;
use spreadscope_physics::model::spin_chain::dtwa::{self, DtwaOptions};
use spreadscope_physics::model::spin_chain::{self, SpinChain, typicality::TypicalityOptions};
use spreadscope_physics::model::stable::StableDensity;

use super::{Access, Service, ServiceError, ServiceResult};

/// Which reference model.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum TheoryModel {
    LatticeWalk,
    SpinChain,
    ShortTime,
}

/// How spin-chain dynamics are computed.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Deserialize, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum SpinMethod {
    /// Free fermions when exact (nearest neighbours at Δ = 0), else exact
    /// diagonalisation up to [`spin_chain::MAX_EXACT_SITES`] sites, else
    /// typicality up to [`AUTO_TYPICAL_SITES`], else the semiclassical DTWA.
    #[default]
    Auto,
    Exact,
    Typicality,
    /// The discrete truncated Wigner approximation (any length).
    Dtwa,
}

/// Largest chain `auto` gives to typicality: 20 sites take about 7 s on
/// two cores; beyond, typicality takes minutes (24 sites: about 3 with
/// both cores free) where the semiclassical method takes seconds.
pub const AUTO_TYPICAL_SITES: usize = 20;

/// Said beside every semiclassical result (its validation table is in the
/// physics notes).
pub const DTWA_CAVEAT: &str = "semiclassical (DTWA): against exact dynamics on 12–16 sites it \
    was within about 0.05–0.08 for α up to 2 at any Δ and within a few 0.01 up to t ≈ 1/J, but \
    up to 0.2 off for short-range chains at later times (physics notes, semiclassical dynamics)";

/// How a spin-chain run is actually computed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Resolved {
    FreeFermions,
    Exact,
    Typicality,
    Dtwa,
}

/// What a model run will do, said before it starts.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Plan {
    /// The method, in words.
    pub method: String,
    /// Estimated wall time on two cores, in seconds (see [`ModelSpec::plan`]).
    pub seconds: f64,
    pub sites: usize,
    pub source: usize,
}

/// A fully specified model run.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelSpec {
    pub model: TheoryModel,
    pub sites: usize,
    pub source: usize,
    /// Coupling exponent; infinite means nearest neighbours.
    pub alpha: f64,
    pub coupling: f64,
    pub delta: f64,
    pub gamma0: f64,
    pub order: usize,
    pub method: SpinMethod,
    pub samples: usize,
    /// Trajectories of the semiclassical method.
    pub trajectories: usize,
    pub seed: u64,
    /// A measured coupling matrix replacing the power law (its size must
    /// equal `sites`); the lattice walk then uses rates ∝ J_ij².
    pub matrix: Option<Couplings>,
}

impl ModelSpec {
    fn resolved(&self) -> Resolved {
        let free = self.matrix.is_none()
            && self.alpha.is_infinite()
            && self.delta.abs() < f64::MIN_POSITIVE;
        match self.method {
            SpinMethod::Auto if free => Resolved::FreeFermions,
            SpinMethod::Auto if self.sites <= spin_chain::MAX_EXACT_SITES => Resolved::Exact,
            SpinMethod::Auto if self.sites <= AUTO_TYPICAL_SITES => Resolved::Typicality,
            SpinMethod::Auto | SpinMethod::Dtwa => Resolved::Dtwa,
            SpinMethod::Exact => Resolved::Exact,
            SpinMethod::Typicality => Resolved::Typicality,
        }
    }

    fn couplings(&self) -> Result<Couplings, String> {
        match &self.matrix {
            Some(m) if m.sites() != self.sites => Err(format!(
                "sites {}: the coupling matrix has {} sites",
                self.sites,
                m.sites()
            )),
            Some(m) => Ok(m.clone()),
            None => Couplings::power_law(self.sites, self.coupling, self.alpha)
                .map_err(|e| format!("alpha/coupling: {e}")),
        }
    }

    /// The method and an estimate of the wall time on two cores, before
    /// anything runs. The rates were measured on the project's 2-core
    /// machine in release builds (benches `dtwa` and `spin_chain`) and are
    /// good to a factor of about two:
    /// - DTWA: 9.1e-10 s per trajectory, Runge–Kutta step and N² (100 sites,
    ///   10⁴ trajectories, 470 steps: 43 s), plus 3e-7 s per trajectory and
    ///   step (12 sites, 4000 trajectories: 0.4 s);
    /// - typicality: 7 s for 20 sites, 2 vectors, t = 10 (median of ten
    ///   runs 7.6 s, 7.3–9.2 s wall, on a busy evening; about 6 s in a quiet
    ///   spell), scaled by the vectors, by t and by
    ///   2^N N² (sector dimensions times the flip-flop terms per state);
    /// - exact: 2e-9 s per Σ_k d_k³ over the sectors k ≤ N/2;
    /// - the others: N³ · 1e-9 s plus a millisecond.
    ///
    /// # Errors
    /// The sentence [`model_map`] would fail with for a bad chain.
    pub fn plan(&self, times: &[f64]) -> Result<Plan, String> {
        if self.sites < 2 || self.source >= self.sites {
            return Err(format!(
                "sites {}, source {}: not a chain with that source",
                self.sites, self.source
            ));
        }
        let n = self.sites as f64;
        let t_max = times.iter().copied().fold(0.0f64, f64::max);
        let quick = n.powi(3) * 1e-9 + 1e-3;
        let (method, seconds) = match self.model {
            TheoryModel::LatticeWalk => ("lattice walk".to_string(), quick),
            TheoryModel::ShortTime => ("short-time expansion".to_string(), quick),
            TheoryModel::SpinChain => match self.resolved() {
                Resolved::FreeFermions => ("free fermions".to_string(), quick),
                Resolved::Exact => {
                    let cubes: f64 = (0..=self.sites / 2)
                        .map(|k| binomial(self.sites, k).powi(3))
                        .sum();
                    (
                        "exact diagonalisation per magnetisation sector".to_string(),
                        2e-9 * cubes + quick,
                    )
                }
                Resolved::Typicality => (
                    format!("dynamical typicality, {} random vectors", self.samples),
                    7.0 * (self.samples as f64 / 2.0) * (t_max / 10.0) * (2f64.powf(n) * n * n)
                        / (2f64.powi(20) * 400.0),
                ),
                Resolved::Dtwa => {
                    let chain = SpinChain::new(&self.couplings()?, self.delta)
                        .map_err(|e| e.to_string())?;
                    let step = dtwa::largest_step(&chain, dtwa::DEFAULT_STEP_SCALE);
                    let steps = if step.is_finite() {
                        (t_max / step).ceil()
                    } else {
                        1.0
                    };
                    (
                        format!("semiclassical DTWA, {} trajectories", self.trajectories),
                        self.trajectories as f64 * steps * (9.1e-10 * n * n + 3e-7),
                    )
                }
            },
        };
        Ok(Plan {
            method,
            seconds,
            sites: self.sites,
            source: self.source,
        })
    }
}

impl ModelSpec {
    /// The chain and options of a sampled run (DTWA or typicality), for
    /// runs split into shards (see `cli/shard.rs`).
    ///
    /// # Errors
    /// A spec that is not a spin chain computed by a sampled method, or a
    /// bad chain.
    pub fn sampled_run(&self) -> Result<SampledRun, String> {
        let method = if self.model == TheoryModel::SpinChain {
            self.resolved()
        } else {
            Resolved::Exact
        };
        if !matches!(method, Resolved::Dtwa | Resolved::Typicality) {
            return Err("only sampled runs split into shards: use spin-chain with \
                 --method dtwa or --method typicality"
                .into());
        }
        let chain = SpinChain::new(&self.couplings()?, self.delta).map_err(|e| e.to_string())?;
        Ok(if method == Resolved::Dtwa {
            SampledRun::Dtwa(chain, DtwaOptions::new(self.trajectories, self.seed))
        } else {
            SampledRun::Typicality(chain, TypicalityOptions::new(self.samples, self.seed))
        })
    }

    /// How a semiclassical run is described in outputs.
    #[must_use]
    pub fn dtwa_words(&self) -> String {
        format!(
            "semiclassical DTWA, {} trajectories, seed {}",
            self.trajectories, self.seed
        )
    }

    /// How a typicality run is described in outputs.
    #[must_use]
    pub fn typicality_words(&self) -> String {
        format!(
            "dynamical typicality, {} random vectors, seed {}",
            self.samples, self.seed
        )
    }
}

/// A run by a sampled method, ready to be split into shards.
#[derive(Debug)]
pub enum SampledRun {
    Dtwa(SpinChain, DtwaOptions),
    Typicality(SpinChain, TypicalityOptions),
}

/// C(n, k) as a float.
fn binomial(n: usize, k: usize) -> f64 {
    (0..k).fold(1.0, |c, i| c * (n - i) as f64 / (i + 1) as f64)
}

/// Runs a model over the whole chain at `times`. Returns the map
/// (x = i − source) and a sentence saying how it was computed. Errors are
/// sentences naming the parameter at fault.
///
/// # Errors
/// Invalid parameters, chains too large for the method, cancellation.
pub fn model_map(
    spec: &ModelSpec,
    times: &[f64],
    progress: &(dyn Fn(f64) + Sync),
    cancel: &AtomicBool,
) -> Result<(CorrelationMap, String), String> {
    if spec.sites < 2 {
        return Err(format!(
            "sites {}: a chain needs at least 2 sites",
            spec.sites
        ));
    }
    if spec.source >= spec.sites {
        return Err(format!(
            "source {}: outside a chain of {} sites",
            spec.source, spec.sites
        ));
    }
    let couplings = spec.couplings()?;
    let text = |e: &dyn std::fmt::Display| e.to_string();
    match spec.model {
        TheoryModel::LatticeWalk => {
            let walk = match &spec.matrix {
                Some(m) => LatticeWalk::from_couplings(m, spec.gamma0),
                None => LatticeWalk::power_law(spec.sites, spec.gamma0, spec.alpha),
            }
            .map_err(|e| text(&e))?;
            let map = walk
                .to_correlation_map(spec.source, times)
                .map_err(|e| text(&e))?;
            Ok((map, format!("lattice walk, γ0 = {}", spec.gamma0)))
        }
        TheoryModel::ShortTime => {
            let expansion =
                ShortTimeExpansion::new(&couplings, spec.delta).map_err(|e| text(&e))?;
            let map = expansion
                .to_correlation_map(spec.source, times, spec.order)
                .map_err(|e| format!("order {}: {e}", spec.order))?;
            Ok((
                map,
                format!("short-time expansion to order t^{}", spec.order),
            ))
        }
        TheoryModel::SpinChain => match spec.resolved() {
            Resolved::FreeFermions => {
                let chain = FreeFermionChain::new(&couplings).map_err(|e| text(&e))?;
                let map = chain
                    .to_correlation_map(spec.source, times)
                    .map_err(|e| text(&e))?;
                Ok((
                    map,
                    "free fermions (exact for nearest neighbours at Δ = 0)".into(),
                ))
            }
            Resolved::Exact => {
                let chain = SpinChain::new(&couplings, spec.delta).map_err(|e| text(&e))?;
                let values = chain
                    .correlations_exact(spec.source, times)
                    .map_err(|e| text(&e))?;
                if cancel.load(Ordering::SeqCst) {
                    return Err("cancelled".into());
                }
                let map = spin_chain::to_correlation_map(&values, None, spec.source, times)
                    .map_err(|e| text(&e))?;
                Ok((map, "exact diagonalisation per magnetisation sector".into()))
            }
            Resolved::Typicality => {
                let chain = SpinChain::new(&couplings, spec.delta).map_err(|e| text(&e))?;
                let options = TypicalityOptions::new(spec.samples, spec.seed);
                let result = chain
                    .correlations_typical_with(spec.source, times, &options, progress, cancel)
                    .map_err(|e| text(&e))?;
                let map = result.to_correlation_map().map_err(|e| text(&e))?;
                Ok((map, spec.typicality_words()))
            }
            Resolved::Dtwa => {
                let chain = SpinChain::new(&couplings, spec.delta).map_err(|e| text(&e))?;
                let options = DtwaOptions::new(spec.trajectories, spec.seed);
                let result =
                    dtwa::correlations(&chain, spec.source, times, &options, progress, cancel)
                        .map_err(|e| text(&e))?;
                let map = result.to_correlation_map().map_err(|e| text(&e))?;
                Ok((map, spec.dtwa_words()))
            }
        },
    }
}

/// The answer of the theory route: a plan, or the model on the grid.
#[derive(Debug, Clone, Serialize)]
#[serde(untagged)]
pub enum TheoryReply {
    Plan(PlanAnswer),
    Map(Box<TheoryAnswer>),
}

/// A plan said before running, or why none can be made yet.
#[derive(Debug, Clone, Serialize)]
pub struct PlanAnswer {
    pub ready: bool,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
    #[serde(flatten)]
    pub plan: Option<Plan>,
}

impl PlanAnswer {
    fn not_ready(reason: String) -> Self {
        Self {
            ready: false,
            reason: Some(reason),
            plan: None,
        }
    }
}

/// α as the overlay states it: a number, or words (nearest neighbours, a
/// coupling matrix).
#[derive(Debug, Clone, Copy, Serialize)]
#[serde(untagged)]
pub enum AlphaValue {
    Number(f64),
    Words(&'static str),
}

/// The values a model run used.
#[derive(Debug, Clone, Serialize)]
pub struct TheoryParameters {
    pub sites: usize,
    pub source: usize,
    pub alpha: AlphaValue,
    pub coupling: f64,
    pub delta: f64,
    pub gamma0: f64,
    pub order: usize,
    pub samples: usize,
    pub trajectories: usize,
    pub seed: u64,
    pub coupling_matrix: bool,
}

/// A model on a dataset's grid (`[time][offset]`, null where the chain has
/// no such offset or the data are missing) and the residual data − model.
#[derive(Debug, Clone, Serialize)]
pub struct TheoryAnswer {
    pub model: TheoryModel,
    /// How it was computed, in words.
    pub method: String,
    pub parameters: TheoryParameters,
    pub x: Vec<i32>,
    pub t: Vec<f64>,
    #[serde(rename = "C")]
    pub c: Vec<Vec<Option<f64>>>,
    /// One-sigma errors of a sampled method.
    pub err: Option<Vec<Vec<Option<f64>>>>,
    pub residual: Vec<Vec<Option<f64>>>,
    pub warnings: Vec<String>,
}

/// The model scaling function sampled for the collapse view.
#[derive(Debug, Clone, Serialize)]
pub struct ScalingFunction {
    pub mu: f64,
    #[serde(rename = "D")]
    pub d: f64,
    pub u: Vec<f64>,
    pub f: Vec<f64>,
}

/// A request from the dashboard; chain data default from the dataset's
/// metadata.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TheoryRequest {
    pub model: TheoryModel,
    pub sites: Option<usize>,
    pub source: Option<usize>,
    /// Coupling exponent; `null` with `nearest_neighbour` in the metadata
    /// means nearest neighbours.
    pub alpha: Option<f64>,
    #[serde(default = "one")]
    pub coupling: f64,
    #[serde(default)]
    pub delta: f64,
    #[serde(default = "one")]
    pub gamma0: f64,
    #[serde(default = "two")]
    pub order: usize,
    #[serde(default)]
    pub method: SpinMethod,
    #[serde(default = "eight")]
    pub samples: usize,
    #[serde(default = "default_trajectories")]
    pub trajectories: usize,
    #[serde(default)]
    pub seed: u64,
    /// A coupling matrix J_ij (rows of numbers, flip-flop convention, as
    /// the couplings import returns it) replacing the power law; its size
    /// sets the chain length.
    #[serde(default)]
    pub couplings: Option<Vec<Vec<f64>>>,
    /// Only say how the model would be computed and how long it would take.
    #[serde(default)]
    pub plan: bool,
    #[serde(default)]
    pub job: Option<String>,
}

/// Trajectories of the semiclassical method by default: a statistical
/// error of about 0.02 on C, a few seconds for a hundred sites.
pub const DEFAULT_TRAJECTORIES: usize = 2000;

fn default_trajectories() -> usize {
    DEFAULT_TRAJECTORIES
}

fn one() -> f64 {
    1.0
}
fn two() -> usize {
    2
}
fn eight() -> usize {
    8
}

impl Service {
    /// A model on a dataset's grid, with the difference map data − model.
    ///
    /// # Errors
    /// NotFound; BadRequest naming the missing or bad parameter; Busy;
    /// Cancelled.
    pub async fn theory(
        &self,
        access: &Access,
        dataset: i64,
        request: TheoryRequest,
    ) -> ServiceResult<TheoryReply> {
        let (summary, data) = self.dataset(access, dataset).await?;
        let spec = match (spec_of(&request, &summary.meta), request.plan) {
            (Ok(spec), _) => spec,
            // A plan that cannot be made yet is an answer, not a failure:
            // the page asks while a person is still filling the form.
            (Err(ServiceError::BadRequest(reason)), true) => {
                return Ok(TheoryReply::Plan(PlanAnswer::not_ready(reason)));
            }
            (Err(e), _) => return Err(e),
        };
        if request.plan {
            return Ok(TheoryReply::Plan(match spec.plan(data.times()) {
                Ok(plan) => PlanAnswer {
                    ready: true,
                    reason: None,
                    plan: Some(plan),
                },
                Err(reason) => PlanAnswer::not_ready(reason),
            }));
        }
        let session_id = access.session.id;
        let cancel = match &request.job {
            Some(id) => self.jobs.start(session_id, id),
            None => std::sync::Arc::new(AtomicBool::new(false)),
        };
        let times = data.times().to_vec();
        let (flag, events, job) = (cancel.clone(), self.clone(), request.job.clone());
        let run_spec = spec.clone();
        let outcome = self
            .heavy(move || {
                let progress = |f: f64| {
                    if let Some(j) = &job {
                        events.publish_progress(session_id, j, f);
                    }
                };
                model_map(&run_spec, &times, &progress, &flag).map_err(ServiceError::BadRequest)
            })
            .await;
        if let Some(id) = &request.job {
            self.jobs.finish(session_id, id);
            self.publish_progress(session_id, id, 1.0);
        }
        if cancel.load(Ordering::SeqCst) {
            return Err(ServiceError::Cancelled);
        }
        let (model, how) = outcome?;
        let mut answer = on_data_grid(&data, &model, &spec, &how);
        if how.starts_with("semiclassical") {
            answer.warnings.push(DTWA_CAVEAT.to_string());
        }
        Ok(TheoryReply::Map(Box::new(answer)))
    }

    /// The model scaling function for the collapse view:
    /// y(u) = D^{−1/μ} f_μ(u / D^{1/μ}), f_μ the symmetric stable density
    /// (characteristic function exp(−|k|^μ)), sampled at `n` points.
    ///
    /// # Errors
    /// BadRequest naming the parameter.
    pub fn scaling_function(
        &self,
        mu: f64,
        d: f64,
        u_min: f64,
        u_max: f64,
        n: usize,
    ) -> ServiceResult<ScalingFunction> {
        if !(d.is_finite() && d > 0.0) {
            return Err(ServiceError::BadRequest(
                "parameter `D`: must be a positive number".into(),
            ));
        }
        if !(u_min.is_finite() && u_max.is_finite() && u_min < u_max) {
            return Err(ServiceError::BadRequest(
                "parameters `u_min`, `u_max`: need u_min < u_max".into(),
            ));
        }
        if !(2..=5000).contains(&n) {
            return Err(ServiceError::BadRequest(
                "parameter `n`: between 2 and 5000".into(),
            ));
        }
        let density = StableDensity::new(mu, d.powf(1.0 / mu))
            .map_err(|e| ServiceError::BadRequest(format!("parameter `mu`: {e}")))?;
        let u: Vec<f64> = (0..n)
            .map(|i| u_min + (u_max - u_min) * i as f64 / (n - 1) as f64)
            .collect();
        let f: Vec<f64> = u.iter().map(|&x| density.pdf(x)).collect();
        Ok(ScalingFunction { mu, d, u, f })
    }
}

/// The model run a request asks for, completed from the dataset's metadata.
fn spec_of(
    request: &TheoryRequest,
    meta: &crate::dataset::DatasetMeta,
) -> ServiceResult<ModelSpec> {
    let matrix = match &request.couplings {
        None => None,
        Some(rows) => Some(matrix_of(rows).map_err(ServiceError::BadRequest)?),
    };
    let sites = request
        .sites
        .or(matrix.as_ref().map(Couplings::sites))
        .or(meta.chain_length.map(|n| n as usize))
        .ok_or_else(|| {
            ServiceError::BadRequest(
                "field `sites`: give the chain length, or set it in the dataset's metadata".into(),
            )
        })?;
    let source = request
        .source
        .or(meta.source_site.map(|j| j as usize))
        .or(meta.source_window.map(|[a, b]| ((a + b) / 2) as usize))
        .unwrap_or((sites.saturating_sub(1)) / 2);
    let alpha = match (request.alpha, meta.alpha, meta.nearest_neighbour) {
        _ if matrix.is_some() => f64::NAN,
        (Some(a), _, _) | (None, Some(a), false) => a,
        (None, _, true) => f64::INFINITY,
        (None, None, false) => {
            return Err(ServiceError::BadRequest(
                "field `alpha`: give the coupling exponent, or set it in the dataset's metadata"
                    .into(),
            ));
        }
    };
    Ok(ModelSpec {
        model: request.model,
        sites,
        source,
        alpha,
        coupling: request.coupling,
        delta: request.delta,
        gamma0: request.gamma0,
        order: request.order,
        method: request.method,
        samples: request.samples,
        trajectories: request.trajectories,
        seed: request.seed,
        matrix,
    })
}

/// A coupling matrix from the request's rows.
fn matrix_of(rows: &[Vec<f64>]) -> Result<Couplings, String> {
    let n = rows.len();
    if let Some((i, row)) = rows.iter().enumerate().find(|(_, r)| r.len() != n) {
        return Err(format!(
            "field `couplings`: row {} has {} numbers; a matrix of {n} rows needs {n}",
            i + 1,
            row.len()
        ));
    }
    let flat: Vec<f64> = rows.iter().flatten().copied().collect();
    let matrix = ndarray::Array2::from_shape_vec((n, n), flat)
        .map_err(|e| format!("field `couplings`: {e}"))?;
    Couplings::from_matrix(matrix).map_err(|e| format!("field `couplings`: {e}"))
}

/// The model at the dataset's offsets (null where the chain has no such
/// offset) and the difference data − model where both exist.
fn on_data_grid(
    data: &CorrelationMap,
    model: &CorrelationMap,
    spec: &ModelSpec,
    how: &str,
) -> TheoryAnswer {
    let mut c = Vec::with_capacity(data.n_times());
    let mut residual = Vec::with_capacity(data.n_times());
    let mut err = Vec::with_capacity(data.n_times());
    let mut outside = 0usize;
    for ti in 0..data.n_times() {
        let mut c_row = Vec::with_capacity(data.n_sites());
        let mut r_row = Vec::with_capacity(data.n_sites());
        let mut e_row = Vec::with_capacity(data.n_sites());
        for (xi, &x) in data.offsets().iter().enumerate() {
            let m = model.column_of(x).and_then(|mi| model.get(ti, mi));
            if m.is_none() {
                outside += 1;
            }
            c_row.push(m.map(|(v, _)| v));
            e_row.push(m.and_then(|(_, e)| e));
            r_row.push(match (data.get(ti, xi), m) {
                (Some((d, _)), Some((v, _))) => Some(d - v),
                _ => None,
            });
        }
        c.push(c_row);
        residual.push(r_row);
        err.push(e_row);
    }
    let mut warnings = Vec::new();
    if outside > 0 {
        warnings.push(format!(
            "{outside} grid points lie outside the modelled chain ({} sites, source {}) and have no model value",
            spec.sites, spec.source
        ));
    }
    TheoryAnswer {
        model: spec.model,
        method: how.to_string(),
        parameters: TheoryParameters {
            sites: spec.sites,
            source: spec.source,
            alpha: if spec.matrix.is_some() {
                AlphaValue::Words("from the coupling matrix")
            } else if spec.alpha.is_finite() {
                AlphaValue::Number(spec.alpha)
            } else {
                AlphaValue::Words("inf")
            },
            coupling: spec.coupling,
            delta: spec.delta,
            gamma0: spec.gamma0,
            order: spec.order,
            samples: spec.samples,
            trajectories: spec.trajectories,
            seed: spec.seed,
            coupling_matrix: spec.matrix.is_some(),
        },
        x: data.offsets().to_vec(),
        t: data.times().to_vec(),
        c,
        err: model.errors().is_some().then_some(err),
        residual,
        warnings,
    }
}
