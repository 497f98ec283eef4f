//! Reference models on request: the lattice walk, spin-chain dynamics and the
//! short-time expansion for a chain, computed on a dataset's grid for
//! overlays and difference maps, and the scaling function for the collapse
//! view. One function ([`model_map`]) runs every model; the `simulate`
//! command uses it too, so the dashboard and the command line cannot drift.

use std::sync::atomic::{AtomicBool, Ordering};

use serde::{Deserialize, Serialize};
use serde_json::{Value, json};
use spreadscope_physics::CorrelationMap;
use spreadscope_physics::model::couplings::Couplings;
use spreadscope_physics::model::free_fermion::FreeFermionChain;
use spreadscope_physics::model::lattice_walk::LatticeWalk;
use spreadscope_physics::model::short_time::ShortTimeExpansion;
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
    /// diagonalisation up to the exact limit, else typicality.
    #[default]
    Auto,
    Exact,
    Typicality,
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
    pub seed: u64,
    /// A measured coupling matrix replacing the power law (its size must
    /// equal `sites`); the lattice walk then uses rates ∝ J_ij².
    pub matrix: Option<Couplings>,
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
    let couplings = match &spec.matrix {
        Some(m) if m.sites() != spec.sites => {
            return Err(format!(
                "sites {}: the coupling matrix has {} sites",
                spec.sites,
                m.sites()
            ));
        }
        Some(m) => m.clone(),
        None => Couplings::power_law(spec.sites, spec.coupling, spec.alpha)
            .map_err(|e| format!("alpha/coupling: {e}"))?,
    };
    let text = |e: &dyn std::fmt::Display| e.to_string();
    match spec.model {
        TheoryModel::LatticeWalk => {
            let walk = LatticeWalk::power_law(spec.sites, spec.gamma0, spec.alpha)
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
        TheoryModel::SpinChain => {
            let free = spec.matrix.is_none()
                && spec.alpha.is_infinite()
                && spec.delta.abs() < f64::MIN_POSITIVE;
            let method = match spec.method {
                SpinMethod::Auto if free => None,
                SpinMethod::Auto if spec.sites <= spin_chain::MAX_EXACT_SITES => {
                    Some(SpinMethod::Exact)
                }
                SpinMethod::Auto => Some(SpinMethod::Typicality),
                m => Some(m),
            };
            match method {
                None => {
                    let chain = FreeFermionChain::new(&couplings).map_err(|e| text(&e))?;
                    let map = chain
                        .to_correlation_map(spec.source, times)
                        .map_err(|e| text(&e))?;
                    Ok((
                        map,
                        "free fermions (exact for nearest neighbours at Δ = 0)".into(),
                    ))
                }
                Some(SpinMethod::Exact) => {
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
                Some(_) => {
                    let chain = SpinChain::new(&couplings, spec.delta).map_err(|e| text(&e))?;
                    let options = TypicalityOptions::new(spec.samples, spec.seed);
                    let result = chain
                        .correlations_typical_with(spec.source, times, &options, progress, cancel)
                        .map_err(|e| text(&e))?;
                    let map = result.to_correlation_map().map_err(|e| text(&e))?;
                    Ok((
                        map,
                        format!(
                            "dynamical typicality, {} random vectors, seed {}",
                            spec.samples, spec.seed
                        ),
                    ))
                }
            }
        }
    }
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
    #[serde(default)]
    pub seed: u64,
    #[serde(default)]
    pub job: Option<String>,
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
    ) -> ServiceResult<Value> {
        let (summary, data) = self.dataset(access, dataset).await?;
        let meta = &summary.meta;
        let sites = request
            .sites
            .or(meta.chain_length.map(|n| n as usize))
            .ok_or_else(|| {
                ServiceError::BadRequest(
                    "field `sites`: give the chain length, or set it in the dataset's metadata"
                        .into(),
                )
            })?;
        let source = request
            .source
            .or(meta.source_site.map(|j| j as usize))
            .unwrap_or((sites.saturating_sub(1)) / 2);
        let alpha = match (request.alpha, meta.alpha, meta.nearest_neighbour) {
            (Some(a), _, _) | (None, Some(a), false) => a,
            (None, _, true) => f64::INFINITY,
            (None, None, false) => {
                return Err(ServiceError::BadRequest(
                    "field `alpha`: give the coupling exponent, or set it in the dataset's metadata".into(),
                ));
            }
        };
        let spec = ModelSpec {
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
            seed: request.seed,
            matrix: None,
        };
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
        Ok(on_data_grid(&data, &model, &spec, &how))
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
    ) -> ServiceResult<Value> {
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
        Ok(json!({"mu": mu, "D": d, "u": u, "f": f}))
    }
}

/// The model at the dataset's offsets (null where the chain has no such
/// offset) and the difference data − model where both exist.
fn on_data_grid(
    data: &CorrelationMap,
    model: &CorrelationMap,
    spec: &ModelSpec,
    how: &str,
) -> Value {
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
    let has_err = model.errors().is_some();
    json!({
        "model": spec.model,
        "method": how,
        "parameters": {
            "sites": spec.sites, "source": spec.source,
            "alpha": if spec.alpha.is_finite() { json!(spec.alpha) } else { json!("inf") },
            "coupling": spec.coupling, "delta": spec.delta, "gamma0": spec.gamma0,
            "order": spec.order, "samples": spec.samples, "seed": spec.seed,
        },
        "x": data.offsets(),
        "t": data.times(),
        "C": c,
        "err": if has_err { json!(err) } else { Value::Null },
        "residual": residual,
        "warnings": warnings,
    })
}
