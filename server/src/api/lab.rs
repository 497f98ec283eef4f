//! HTTP shapes of data arriving from the lab: idempotency keys of uploads
//! (header `Idempotency-Key` or query parameter `key`), the answer that says
//! whether an upload was new (201) or already there (200), and session
//! archives (download; import into a new session).

use axum::Json;
use axum::body::Bytes;
use axum::extract::{Path, State};
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde_json::json;

use super::ApiResult;
use crate::service::intake::Uploaded;
use crate::service::{Service, ServiceError};

/// The header carrying an upload's idempotency key.
pub const KEY_HEADER: &str = "idempotency-key";

/// The key of an upload, from the header or the query; both given must agree.
pub(super) fn upload_key(
    headers: &HeaderMap,
    query: Option<String>,
) -> Result<Option<String>, ServiceError> {
    let header = match headers.get(KEY_HEADER) {
        Some(v) => Some(
            v.to_str()
                .map_err(|_| {
                    ServiceError::BadRequest(
                        "header `Idempotency-Key`: not visible ASCII text".into(),
                    )
                })?
                .to_string(),
        ),
        None => None,
    };
    match (header, query) {
        (Some(h), Some(q)) if h != q => Err(ServiceError::BadRequest(
            "parameter `key` and header `Idempotency-Key` differ: give one".into(),
        )),
        (h, q) => Ok(h.or(q)),
    }
}

/// 201 with the new dataset's summary, or 200 with the stored one and
/// `already_stored: true`.
pub(super) fn uploaded_response(uploaded: &Uploaded) -> Response {
    let mut body = json!(uploaded.summary);
    body["already_stored"] = json!(uploaded.already_stored);
    let status = if uploaded.already_stored {
        StatusCode::OK
    } else {
        StatusCode::CREATED
    };
    (status, Json(body)).into_response()
}

/// The whole session as one archive file.
pub(super) async fn export_archive(
    State(service): State<Service>,
    Path(token): Path<String>,
) -> ApiResult<Response> {
    let access = service.access(&token).await?;
    let bytes = service.export_archive(&access).await?;
    let mut response = bytes.into_response();
    let headers = response.headers_mut();
    headers.insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("application/zip"),
    );
    headers.insert(
        header::CONTENT_DISPOSITION,
        HeaderValue::from_static("attachment; filename=\"session.spreadscope.zip\""),
    );
    headers.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
    Ok(response)
}

/// Imports an archive into a new session; answers with its new links.
pub(super) async fn import_archive(
    State(service): State<Service>,
    body: Bytes,
) -> ApiResult<Response> {
    let imported = service.import_archive(body.to_vec()).await?;
    Ok((
        StatusCode::CREATED,
        Json(json!({
            "edit_token": imported.tokens.edit_token,
            "view_token": imported.tokens.view_token,
            "edit_url": format!("/s/{}", imported.tokens.edit_token),
            "view_url": format!("/s/{}", imported.tokens.view_token),
            "datasets": imported.datasets,
            "log_entries": imported.log_entries,
        })),
    )
        .into_response())
}
