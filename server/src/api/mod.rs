//! Api: the only code that knows HTTP and JSON wire shapes.
//!
//! Builds the [`Router`]: the dashboard page, embedded assets and the JSON API
//! under `/api`. Maps every [`ServiceError`] to one status code in one place.
//! Handlers are thin: parse the request, call the service, shape the answer.

pub mod assets;
mod estimators;
mod lab;

use std::convert::Infallible;
use std::time::Duration;

use axum::body::Bytes;
use axum::extract::{DefaultBodyLimit, Path, Query, State};
use axum::http::{HeaderName, HeaderValue, StatusCode, header};
use axum::response::sse::{Event, KeepAlive, Sse};
use axum::response::{Html, IntoResponse, Response};
use axum::routing::{get, post, put};
use axum::{Json, Router};
use futures_util::Stream;
use serde::Deserialize;
use serde_json::{Value, json};
use tokio_stream::StreamExt;
use tokio_stream::wrappers::BroadcastStream;
use tower_http::set_header::SetResponseHeaderLayer;
use tower_http::timeout::TimeoutLayer;

use crate::dataset::DatasetMeta;
use crate::ingest::couplings::CouplingConvention;
use crate::ingest::shots::ShotFormat;
use crate::ingest::{Format, IngestOptions};
use crate::service::exports::FitTable;
use crate::service::log::PinRequest;
use crate::service::shots::ShotOptions;
use crate::service::{CONVENTIONS, PROGRAM_VERSION, Service, ServiceError};

/// Settings of the HTTP layer.
#[derive(Debug, Clone)]
pub struct ApiConfig {
    /// Largest accepted upload body, in bytes.
    pub max_upload_bytes: usize,
    /// Longest time a request may take to produce its response (the event
    /// stream's body is not limited, only its start).
    pub request_timeout: Duration,
}

impl Default for ApiConfig {
    fn default() -> Self {
        Self {
            max_upload_bytes: 256 * 1024 * 1024,
            request_timeout: Duration::from_secs(300),
        }
    }
}

/// Builds the whole application router. Tests call this without a socket.
pub fn router(service: Service, config: &ApiConfig) -> Router {
    let api = Router::new()
        .route("/sessions", post(create_session))
        .route("/s/{token}", get(session_info))
        .route("/s/{token}/name", put(rename_session))
        .route(
            "/s/{token}/datasets",
            get(list_datasets)
                .post(upload_dataset)
                .layer(DefaultBodyLimit::max(config.max_upload_bytes)),
        )
        .route(
            "/s/{token}/shots",
            post(upload_shots).layer(DefaultBodyLimit::max(config.max_upload_bytes)),
        )
        .route("/s/{token}/datasets/{id}", get(get_dataset))
        .route(
            "/s/{token}/datasets/{id}/shots",
            get(shot_pairs).post(reestimate),
        )
        .route("/s/{token}/couplings", post(couplings))
        .route("/s/{token}/datasets/{id}/meta", put(update_meta))
        .route("/s/{token}/events", get(events))
        .route("/s/{token}/log", get(get_log).post(pin))
        .route("/s/{token}/log.json", get(get_log_json))
        .route("/s/{token}/log.csv", get(get_log_csv))
        .route("/s/{token}/comparison", get(get_comparison))
        .route("/s/{token}/comparison.csv", get(get_comparison_csv))
        .route("/s/{token}/log/{entry}/curves.csv", get(get_curves_csv))
        .route(
            "/s/{token}/log/{entry}/residuals.csv",
            get(get_residuals_csv),
        )
        .route("/s/{token}/datasets/{id}/fits", post(estimators::run_fit))
        .route(
            "/s/{token}/datasets/{id}/collapse-quality",
            get(estimators::collapse_quality),
        )
        .route("/s/{token}/jobs/{job}/cancel", post(cancel_job))
        .route(
            "/s/{token}/datasets/{id}/theory",
            post(estimators::run_theory),
        )
        .route(
            "/s/{token}/scaling-function",
            get(estimators::scaling_function),
        )
        .route("/s/{token}/report.html", get(get_report))
        .route("/s/{token}/archive", get(lab::export_archive))
        .route(
            "/archives",
            post(lab::import_archive).layer(DefaultBodyLimit::max(config.max_upload_bytes)),
        )
        .fallback(|| async { ApiError(ServiceError::NotFound) });
    Router::new()
        .route("/", get(home))
        .route("/s/{token}", get(page))
        .route("/assets/{hash}/{*path}", get(asset))
        .nest("/api", api)
        .with_state(service)
        .layer(TimeoutLayer::with_status_code(
            StatusCode::REQUEST_TIMEOUT,
            config.request_timeout,
        ))
        .layer(header_layer(
            header::CONTENT_SECURITY_POLICY,
            "default-src 'self'; script-src 'self'; style-src 'self' 'unsafe-inline'; \
             img-src 'self' data: blob:; connect-src 'self'; object-src 'none'; \
             base-uri 'none'; frame-ancestors 'none'; form-action 'self'",
        ))
        .layer(header_layer(header::X_CONTENT_TYPE_OPTIONS, "nosniff"))
        .layer(header_layer(header::X_FRAME_OPTIONS, "DENY"))
        // Session links carry their token in the path: never leak it to
        // another site through the Referer header.
        .layer(header_layer(header::REFERRER_POLICY, "no-referrer"))
}

fn header_layer(name: HeaderName, value: &'static str) -> SetResponseHeaderLayer<HeaderValue> {
    SetResponseHeaderLayer::if_not_present(name, HeaderValue::from_static(value))
}

/// A service error on its way out as an HTTP response.
#[derive(Debug)]
pub struct ApiError(pub ServiceError);

impl From<ServiceError> for ApiError {
    fn from(e: ServiceError) -> Self {
        Self(e)
    }
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        let (status, body) = match &self.0 {
            ServiceError::NotFound => (StatusCode::NOT_FOUND, json!({"error": "not found"})),
            ServiceError::Forbidden => {
                (StatusCode::FORBIDDEN, json!({"error": self.0.to_string()}))
            }
            ServiceError::Invalid(e) => (
                StatusCode::UNPROCESSABLE_ENTITY,
                json!({"error": self.0.to_string(), "problems": e.problems}),
            ),
            ServiceError::BadRequest(msg) => {
                (StatusCode::UNPROCESSABLE_ENTITY, json!({"error": msg}))
            }
            ServiceError::Cancelled => (StatusCode::CONFLICT, json!({"error": self.0.to_string()})),
            ServiceError::Busy(seconds) => {
                let mut response = (
                    StatusCode::TOO_MANY_REQUESTS,
                    Json(json!({"error": self.0.to_string(), "retry_after": seconds})),
                )
                    .into_response();
                response
                    .headers_mut()
                    .insert(header::RETRY_AFTER, HeaderValue::from(*seconds));
                return response;
            }
            ServiceError::StorageFull => (
                StatusCode::INSUFFICIENT_STORAGE,
                json!({"error": self.0.to_string()}),
            ),
            ServiceError::Internal(msg) => {
                eprintln!("spreadscope: internal error: {msg}");
                (
                    StatusCode::INTERNAL_SERVER_ERROR,
                    json!({"error": "internal error; see the server's log"}),
                )
            }
        };
        (status, Json(body)).into_response()
    }
}

type ApiResult<T> = Result<T, ApiError>;

/// A query string as parsed by axum, kept as a result so that a bad one
/// becomes our own 422 naming the parameter rather than axum's plain 400.
type QueryResult<T> = Result<Query<T>, axum::extract::rejection::QueryRejection>;

fn from_query<T>(query: QueryResult<T>) -> Result<T, ServiceError> {
    query
        .map(|Query(q)| q)
        .map_err(|e| ServiceError::BadRequest(format!("query string: {}", e.body_text())))
}

/// Parses a JSON request body; a failure names the field (`field \`a.b\``)
/// as well as serde's reason.
fn parse_json<T: serde::de::DeserializeOwned>(body: &[u8], what: &str) -> Result<T, ServiceError> {
    let mut de = serde_json::Deserializer::from_slice(body);
    serde_path_to_error::deserialize(&mut de).map_err(|e| {
        let path = e.path().to_string();
        if path.is_empty() || path == "." {
            ServiceError::BadRequest(format!("{what}: {}", e.inner()))
        } else {
            ServiceError::BadRequest(format!("{what}: field `{path}`: {}", e.inner()))
        }
    })
}

/// The start page: create, name, rename and list sessions (see
/// `web/js/start.js` for which sessions it lists).
async fn home() -> Response {
    match assets::page_html("start.html") {
        Some(html) => ([(header::CACHE_CONTROL, "no-store")], Html(html)).into_response(),
        None => (StatusCode::NOT_FOUND, "front end missing from this build").into_response(),
    }
}

async fn page(State(service): State<Service>, Path(token): Path<String>) -> Response {
    match service.access(&token).await {
        Ok(access) => match assets::index_html() {
            Some(html) => {
                // A failed look-up only costs the head start, never the page.
                let first = service.first_dataset_id(&access).await.ok().flatten();
                let mut response =
                    ([(header::CACHE_CONTROL, "no-store")], Html(html)).into_response();
                if let Ok(link) = HeaderValue::from_str(&data_preloads(&token, first)) {
                    response.headers_mut().insert(header::LINK, link);
                }
                response
            }
            None => (StatusCode::NOT_FOUND, "front end missing from this build").into_response(),
        },
        Err(ServiceError::NotFound) => (
            StatusCode::NOT_FOUND,
            Html("<!doctype html><p>No such session.</p>"),
        )
            .into_response(),
        Err(e) => ApiError(e).into_response(),
    }
}

/// The `Link` header that starts the first figure's data requests with the
/// page itself: the session, its dataset list and the dataset the page opens
/// on when the address names none. The browser fetches them while the
/// modules and the plotting library arrive, and `web/js/api.js`'s requests
/// (same URLs, same mode) take the answers instead of asking again. A page
/// opened on another dataset (`#dataset=…`, which never reaches the server)
/// leaves the last one unused.
fn data_preloads(token: &str, first_dataset: Option<i64>) -> String {
    let base = format!("/api/s/{token}");
    let mut urls = vec![base.clone(), format!("{base}/datasets")];
    if let Some(id) = first_dataset {
        urls.push(format!("{base}/datasets/{id}"));
    }
    urls.iter()
        .map(|u| format!("<{u}>; rel=preload; as=fetch; crossorigin"))
        .collect::<Vec<_>>()
        .join(", ")
}

async fn asset(Path((hash, path)): Path<(String, String)>) -> Response {
    assets::serve(&hash, &path)
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct NewSession {
    #[serde(default)]
    name: String,
}

async fn create_session(State(service): State<Service>, body: Bytes) -> ApiResult<Response> {
    let request: NewSession = if body.iter().all(u8::is_ascii_whitespace) {
        NewSession::default()
    } else {
        serde_json::from_slice(&body)
            .map_err(|e| ServiceError::BadRequest(format!("request body: {e}")))?
    };
    let tokens = service.create_session(&request.name).await?;
    Ok((
        StatusCode::CREATED,
        Json(json!({
            "edit_token": tokens.edit_token,
            "view_token": tokens.view_token,
            "edit_url": format!("/s/{}", tokens.edit_token),
            "view_url": format!("/s/{}", tokens.view_token),
        })),
    )
        .into_response())
}

async fn session_info(
    State(service): State<Service>,
    Path(token): Path<String>,
) -> ApiResult<Json<Value>> {
    let access = service.access(&token).await?;
    let s = &access.session;
    Ok(Json(json!({
        "name": s.name,
        "can_edit": access.can_edit,
        "view_url": format!("/s/{}", s.view_token),
        "edit_url": access.can_edit.then(|| format!("/s/{}", s.edit_token)),
        "created_at": s.created_at,
        "program_version": PROGRAM_VERSION,
        "conventions": CONVENTIONS,
    })))
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Rename {
    name: String,
}

async fn rename_session(
    State(service): State<Service>,
    Path(token): Path<String>,
    body: Bytes,
) -> ApiResult<Json<Value>> {
    let access = service.access(&token).await?;
    let request: Rename = parse_json(&body, "rename request")?;
    let name = service.rename_session(&access, &request.name).await?;
    Ok(Json(json!({"name": name})))
}

async fn list_datasets(
    State(service): State<Service>,
    Path(token): Path<String>,
) -> ApiResult<Json<Value>> {
    let access = service.access(&token).await?;
    let list = service.datasets(&access).await?;
    Ok(Json(json!(list)))
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct UploadQuery {
    name: Option<String>,
    format: Option<String>,
    /// Offsets of a bare NPY array: `A:B` (inclusive) or a comma list.
    x: Option<String>,
    /// Times of a bare NPY array: a comma list or `T0:T1:COUNT`.
    t: Option<String>,
    /// Idempotency key (also accepted as the `Idempotency-Key` header).
    key: Option<String>,
}

async fn upload_dataset(
    State(service): State<Service>,
    Path(token): Path<String>,
    headers: axum::http::HeaderMap,
    query: QueryResult<UploadQuery>,
    body: Bytes,
) -> ApiResult<Response> {
    let access = service.access(&token).await?;
    let query = from_query(query)?;
    let name = query.name.unwrap_or_default();
    let format = upload_format(query.format.as_deref(), || {
        Format::from_file_name(&name).or_else(|| crate::ingest::sniff(&body))
    })?;
    let options = IngestOptions {
        x: query
            .x
            .as_deref()
            .map(parse_offsets)
            .transpose()
            .map_err(ServiceError::BadRequest)?,
        t: query
            .t
            .as_deref()
            .map(|t| crate::ingest::parse_time_spec(t, "parameter `t`"))
            .transpose()
            .map_err(ServiceError::BadRequest)?,
    };
    let key = lab::upload_key(&headers, query.key)?;
    let uploaded = service
        .add_dataset_keyed(&access, key, &name, format, body.to_vec(), options)
        .await?;
    Ok(lab::uploaded_response(&uploaded))
}

/// The query of a shot upload. Listed field by field: query strings carry
/// only text, which `serde(flatten)` would not convert to numbers.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ShotQuery {
    name: Option<String>,
    format: Option<String>,
    source: Option<usize>,
    bulk: Option<String>,
    readout: Option<String>,
    #[serde(default)]
    readout_from_t0: bool,
    #[serde(default)]
    symmetrise: bool,
    #[serde(default)]
    renormalise: bool,
    bootstrap: Option<usize>,
    seed: Option<u64>,
    /// Idempotency key (also accepted as the `Idempotency-Key` header).
    key: Option<String>,
}

async fn upload_shots(
    State(service): State<Service>,
    Path(token): Path<String>,
    headers: axum::http::HeaderMap,
    query: QueryResult<ShotQuery>,
    body: Bytes,
) -> ApiResult<Response> {
    let access = service.access(&token).await?;
    let query = from_query(query)?;
    let name = query.name.unwrap_or_default();
    let format = upload_format(query.format.as_deref(), || {
        ShotFormat::from_file_name(&name).or_else(|| ShotFormat::sniff(&body))
    })?;
    let options = ShotOptions {
        source: query.source,
        bulk: query.bulk,
        readout: query.readout,
        readout_from_t0: query.readout_from_t0,
        symmetrise: query.symmetrise,
        renormalise: query.renormalise,
        bootstrap: query.bootstrap,
        seed: query.seed,
    };
    let key = lab::upload_key(&headers, query.key)?;
    let uploaded = service
        .add_shots_keyed(&access, key, &name, format, body.to_vec(), options)
        .await?;
    Ok(lab::uploaded_response(&uploaded))
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct PairsQuery {
    source: Option<usize>,
}

async fn shot_pairs(
    State(service): State<Service>,
    Path((token, id)): Path<(String, i64)>,
    query: QueryResult<PairsQuery>,
) -> ApiResult<Json<crate::service::shots::ShotPairs>> {
    let access = service.access(&token).await?;
    let q = from_query(query)?;
    Ok(Json(service.shot_pairs(&access, id, q.source).await?))
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ReestimateRequest {
    name: String,
    #[serde(default)]
    options: ShotOptions,
}

async fn reestimate(
    State(service): State<Service>,
    Path((token, id)): Path<(String, i64)>,
    body: Bytes,
) -> ApiResult<Response> {
    let access = service.access(&token).await?;
    let request: ReestimateRequest = parse_json(&body, "re-estimate request")?;
    let summary = service
        .reestimate(&access, id, &request.name, request.options)
        .await?;
    Ok((StatusCode::CREATED, Json(json!(summary))).into_response())
}

#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct CouplingsQuery {
    /// The Hamiltonian the file is written for (`flip-flop`, `pauli-xy`,
    /// `spin-xy`).
    #[serde(default)]
    convention: CouplingConvention,
}

async fn couplings(
    State(service): State<Service>,
    Path(token): Path<String>,
    query: QueryResult<CouplingsQuery>,
    body: Bytes,
) -> ApiResult<Json<crate::service::shots::CouplingsAnswer>> {
    service.access(&token).await?;
    let q = from_query(query)?;
    Ok(Json(service.couplings(body.to_vec(), q.convention).await?))
}

/// The format of an upload: the `format` parameter when given, else a guess
/// from the file name or the first bytes.
fn upload_format<F: std::str::FromStr<Err = String>>(
    given: Option<&str>,
    guess: impl FnOnce() -> Option<F>,
) -> Result<F, ServiceError> {
    match given {
        Some(f) => f
            .parse()
            .map_err(|e| ServiceError::BadRequest(format!("parameter `format`: {e}"))),
        None => guess().ok_or_else(|| {
            ServiceError::BadRequest("parameter `format`: missing and not recognisable".into())
        }),
    }
}

/// `A:B` (inclusive range) or `a,b,c`.
fn parse_offsets(text: &str) -> Result<Vec<i32>, String> {
    let bad = |part: &str| format!("parameter `x`: `{part}` is not an integer");
    if let Some((a, b)) = text.split_once(':') {
        let a: i32 = a.trim().parse().map_err(|_| bad(a))?;
        let b: i32 = b.trim().parse().map_err(|_| bad(b))?;
        if b < a || b - a > 1_000_000 {
            return Err(format!("parameter `x`: range {a}:{b} is empty or too long"));
        }
        return Ok((a..=b).collect());
    }
    text.split(',')
        .map(|p| p.trim().parse().map_err(|_| bad(p)))
        .collect()
}

async fn get_dataset(
    State(service): State<Service>,
    Path((token, id)): Path<(String, i64)>,
) -> ApiResult<Json<Value>> {
    let access = service.access(&token).await?;
    let (summary, map) = service.dataset(&access, id).await?;
    let mut body = json!(summary);
    let rule = crate::service::fits::default_windows(
        &map,
        &summary.meta,
        crate::service::fits::Windows::default(),
        &crate::service::fits::FitOptions::default(),
    );
    let grid = |a: &ndarray::Array2<f64>| -> Vec<Vec<Option<f64>>> {
        a.outer_iter()
            .zip(map.present().outer_iter())
            .map(|(row, mask)| {
                row.iter()
                    .zip(mask.iter())
                    .map(|(&v, &p)| p.then_some(v))
                    .collect()
            })
            .collect()
    };
    let extra = json!({
        "x": map.offsets(),
        "t": map.times(),
        "C": grid(map.values()),
        "err": map.errors().map(grid),
        "sum_rule": map.sum_rule(),
        "autocorrelation": map.autocorrelation().map(|a| a
            .into_iter()
            .map(|(t, c, e)| json!({"t": t, "C": c, "err": e}))
            .collect::<Vec<_>>()),
        "default_windows": {
            "t_min": rule.t_min,
            "t_max": rule.t_max,
            "x_max": rule.x_max,
            "rule": rule.rule,
            "bootstrap": spreadscope_physics::fit::windows::DEFAULT_BOOTSTRAP,
        },
    });
    if let (Some(obj), Value::Object(more)) = (body.as_object_mut(), extra) {
        obj.extend(more);
    }
    Ok(Json(body))
}

async fn update_meta(
    State(service): State<Service>,
    Path((token, id)): Path<(String, i64)>,
    body: Bytes,
) -> ApiResult<Json<Value>> {
    let access = service.access(&token).await?;
    let meta: DatasetMeta = parse_json(&body, "metadata")?;
    let summary = service.update_meta(&access, id, meta).await?;
    Ok(Json(json!(summary)))
}

async fn pin(
    State(service): State<Service>,
    Path(token): Path<String>,
    body: Bytes,
) -> ApiResult<Response> {
    let access = service.access(&token).await?;
    let request: PinRequest = parse_json(&body, "log entry")?;
    let entry = service.pin(&access, request).await?;
    Ok((StatusCode::CREATED, Json(json!(entry))).into_response())
}

async fn get_log(State(service): State<Service>, Path(token): Path<String>) -> ApiResult<Response> {
    let access = service.access(&token).await?;
    let body = service.log_json(&access).await?;
    Ok((
        [(header::CONTENT_TYPE, "application/json")],
        axum::body::Body::from(Bytes::from_owner(SharedBody(body))),
    )
        .into_response())
}

/// A cached response body shared between requests without copying.
struct SharedBody(std::sync::Arc<Vec<u8>>);

impl AsRef<[u8]> for SharedBody {
    fn as_ref(&self) -> &[u8] {
        self.0.as_slice()
    }
}

/// The log as a downloadable JSON document with the session's provenance.
async fn get_log_json(
    State(service): State<Service>,
    Path(token): Path<String>,
) -> ApiResult<Response> {
    let access = service.access(&token).await?;
    let entries = service.log(&access).await?;
    let body = json!({
        "session": access.session.name,
        "exported_at": crate::service::now_utc(),
        "program_version": PROGRAM_VERSION,
        "conventions": CONVENTIONS,
        "entries": entries,
    });
    Ok((
        [(
            header::CONTENT_DISPOSITION,
            "attachment; filename=\"spreadscope-log.json\"",
        )],
        Json(body),
    )
        .into_response())
}

async fn get_log_csv(
    State(service): State<Service>,
    Path(token): Path<String>,
) -> ApiResult<Response> {
    let access = service.access(&token).await?;
    let csv = service.log_csv(&access).await?;
    Ok(csv_download(csv, "spreadscope-log.csv"))
}

/// A CSV body offered for download under `file_name`.
fn csv_download(body: String, file_name: &str) -> Response {
    let disposition = format!("attachment; filename=\"{file_name}\"");
    let mut response = ([(header::CONTENT_TYPE, "text/csv; charset=utf-8")], body).into_response();
    if let Ok(value) = HeaderValue::from_str(&disposition) {
        response
            .headers_mut()
            .insert(header::CONTENT_DISPOSITION, value);
    }
    response
}

async fn cancel_job(
    State(service): State<Service>,
    Path((token, job)): Path<(String, String)>,
) -> ApiResult<Json<Value>> {
    let access = service.access(&token).await?;
    let cancelled = service.cancel_job(&access, &job);
    Ok(Json(json!({"job": job, "cancelled": cancelled})))
}

async fn get_comparison(
    State(service): State<Service>,
    Path(token): Path<String>,
) -> ApiResult<Json<Value>> {
    let access = service.access(&token).await?;
    Ok(Json(json!(service.comparison(&access).await?)))
}

async fn get_comparison_csv(
    State(service): State<Service>,
    Path(token): Path<String>,
) -> ApiResult<Response> {
    let access = service.access(&token).await?;
    let csv = service.comparison_csv(&access).await?;
    Ok(csv_download(csv, "spreadscope-comparison.csv"))
}

async fn get_curves_csv(
    State(service): State<Service>,
    Path((token, entry)): Path<(String, i64)>,
) -> ApiResult<Response> {
    let access = service.access(&token).await?;
    let (csv, name) = service.fit_table(&access, entry, FitTable::Curves).await?;
    Ok(csv_download(csv, &name))
}

async fn get_residuals_csv(
    State(service): State<Service>,
    Path((token, entry)): Path<(String, i64)>,
) -> ApiResult<Response> {
    let access = service.access(&token).await?;
    let (csv, name) = service
        .fit_table(&access, entry, FitTable::Residuals)
        .await?;
    Ok(csv_download(csv, &name))
}

/// The self-contained report, served with a policy that allows exactly its
/// own inline scripts (by hash) and nothing from anywhere.
async fn get_report(
    State(service): State<Service>,
    Path(token): Path<String>,
) -> ApiResult<Response> {
    let access = service.access(&token).await?;
    let library = assets::text("vendor/plotly/plotly-scatter-heatmap.min.js")
        .ok_or_else(|| ServiceError::Internal("plotting library missing from the build".into()))?;
    let report = service.report(&access, &library).await?;
    let hashes: Vec<String> = report
        .script_hashes
        .iter()
        .map(|h| format!("'{h}'"))
        .collect();
    let csp = format!(
        "default-src 'none'; script-src {}; style-src 'unsafe-inline'; img-src data: blob:; \
         font-src data:; base-uri 'none'; form-action 'none'; frame-ancestors 'none'",
        hashes.join(" ")
    );
    let mut response = Html(report.html).into_response();
    let headers = response.headers_mut();
    if let Ok(value) = HeaderValue::from_str(&csp) {
        headers.insert(header::CONTENT_SECURITY_POLICY, value);
    }
    headers.insert(
        header::CONTENT_DISPOSITION,
        HeaderValue::from_static("inline; filename=\"spreadscope-report.html\""),
    );
    Ok(response)
}

async fn events(
    State(service): State<Service>,
    Path(token): Path<String>,
) -> ApiResult<Sse<impl Stream<Item = Result<Event, Infallible>>>> {
    let access = service.access(&token).await?;
    let session_id = access.session.id;
    let stream = BroadcastStream::new(service.subscribe()).filter_map(move |item| {
        // A lagged receiver skips events; the page re-reads the list on the
        // next one, so nothing shown stays wrong.
        let event = item.ok()?;
        (event.session_id == session_id)
            .then(|| Ok(Event::default().data(serde_json::to_string(&event).unwrap_or_default())))
    });
    Ok(Sse::new(stream).keep_alive(KeepAlive::new().interval(Duration::from_secs(15))))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn axis_parameters_parse_and_name_the_parameter() {
        assert_eq!(parse_offsets("-2:2").expect("range"), vec![-2, -1, 0, 1, 2]);
        assert_eq!(parse_offsets("0, 3").expect("list"), vec![0, 3]);
        assert!(parse_offsets("a:3").unwrap_err().contains("`x`"));
        let t = crate::ingest::parse_time_spec("0:1:3", "parameter `t`").expect("linspace");
        assert_eq!(t.len(), 3);
        assert!((t[1] - 0.5).abs() < 1e-15);
        assert!(
            crate::ingest::parse_time_spec("1,x", "parameter `t`")
                .unwrap_err()
                .contains("`t`")
        );
    }
}
