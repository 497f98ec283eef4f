//! HTTP shapes of the estimators: fits (options a method does not read are
//! refused by name), the collapse quality behind the slider, theory
//! overlays and plans, and the model scaling function.

use axum::Json;
use axum::body::Bytes;
use axum::extract::{Path, State};
use serde::Deserialize;
use serde_json::{Value, json};

use super::{ApiResult, QueryResult, from_query, parse_json};
use crate::service::Service;
use crate::service::fits::{FitRequest, Windows};
use crate::service::theory::TheoryRequest;

pub(super) async fn run_fit(
    State(service): State<Service>,
    Path((token, id)): Path<(String, i64)>,
    body: Bytes,
) -> ApiResult<Json<Value>> {
    let access = service.access(&token).await?;
    let request: FitRequest = parse_json(&body, "fit request")?;
    // Options the method does not read are refused by name.
    let given: Vec<String> = serde_json::from_slice::<Value>(&body)
        .ok()
        .and_then(|v| {
            v.get("options")?
                .as_object()
                .map(|o| o.keys().cloned().collect())
        })
        .unwrap_or_default();
    request.method.check_given(&given)?;
    // Identical requests share one computation and its cached result.
    Ok(Json(json!(
        *service.fit_shared(&access, id, request).await?
    )))
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct QualityQuery {
    z: f64,
    t_min: Option<f64>,
    t_max: Option<f64>,
    x_max: Option<i32>,
}

pub(super) async fn collapse_quality(
    State(service): State<Service>,
    Path((token, id)): Path<(String, i64)>,
    query: QueryResult<QualityQuery>,
) -> ApiResult<Json<crate::service::quality::QualityAnswer>> {
    let access = service.access(&token).await?;
    let q = from_query(query)?;
    let windows = Windows {
        t_min: q.t_min,
        t_max: q.t_max,
        x_max: q.x_max,
    };
    Ok(Json(
        service.collapse_quality(&access, id, windows, q.z).await?,
    ))
}

pub(super) async fn run_theory(
    State(service): State<Service>,
    Path((token, id)): Path<(String, i64)>,
    body: Bytes,
) -> ApiResult<Json<crate::service::theory::TheoryReply>> {
    let access = service.access(&token).await?;
    let request: TheoryRequest = parse_json(&body, "theory request")?;
    Ok(Json(service.theory(&access, id, request).await?))
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub(super) struct ScalingQuery {
    mu: f64,
    #[serde(rename = "D")]
    d: f64,
    u_min: f64,
    u_max: f64,
    n: Option<usize>,
}

pub(super) async fn scaling_function(
    State(service): State<Service>,
    Path(token): Path<String>,
    query: QueryResult<ScalingQuery>,
) -> ApiResult<Json<crate::service::theory::ScalingFunction>> {
    service.access(&token).await?;
    let q = from_query(query)?;
    Ok(Json(service.scaling_function(
        q.mu,
        q.d,
        q.u_min,
        q.u_max,
        q.n.unwrap_or(201),
    )?))
}
