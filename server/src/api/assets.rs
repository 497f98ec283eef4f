//! Embedded front-end assets: one explicit table (the `web/` folder compiled
//! into the binary), served under a content-addressed prefix
//! `/assets/{hash}/…` with immutable caching. The hash covers every file, so
//! a new build changes every URL and no browser keeps a stale module.

use std::sync::OnceLock;

use axum::body::Body;
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use rust_embed::RustEmbed;
use sha2::{Digest, Sha256};

#[derive(RustEmbed)]
#[folder = "web"]
#[exclude = "*.md"]
#[exclude = "*.ts"]
#[exclude = "jsconfig.json"]
struct WebFiles;

/// Hash of all embedded files (first 12 hex digits of SHA-256 over paths and
/// contents in sorted order).
pub fn build_hash() -> &'static str {
    static HASH: OnceLock<String> = OnceLock::new();
    HASH.get_or_init(|| {
        let mut names: Vec<_> = WebFiles::iter().collect();
        names.sort();
        let mut h = Sha256::new();
        for name in names {
            h.update(name.as_bytes());
            h.update([0]);
            if let Some(f) = WebFiles::get(&name) {
                h.update(f.metadata.sha256_hash());
            }
        }
        h.finalize()
            .iter()
            .take(6)
            .map(|b| format!("{b:02x}"))
            .collect()
    })
}

/// URL prefix of the current assets.
pub fn prefix() -> String {
    format!("/assets/{}", build_hash())
}

fn content_type(path: &str) -> &'static str {
    match path.rsplit_once('.').map(|(_, ext)| ext) {
        Some("html") => "text/html; charset=utf-8",
        Some("js" | "mjs") => "text/javascript; charset=utf-8",
        Some("css") => "text/css; charset=utf-8",
        Some("svg") => "image/svg+xml",
        Some("png") => "image/png",
        Some("json") => "application/json",
        Some("ico") => "image/x-icon",
        Some("woff2") => "font/woff2",
        _ => "application/octet-stream",
    }
}

/// The asset at `path` if `hash` is the current build's; anything else is a
/// plain 404 (the path never reaches a file system: the table is in memory).
pub fn serve(hash: &str, path: &str) -> Response {
    if hash != build_hash() {
        return StatusCode::NOT_FOUND.into_response();
    }
    let Some(file) = WebFiles::get(path) else {
        return StatusCode::NOT_FOUND.into_response();
    };
    let mut response = Response::new(Body::from(file.data.into_owned()));
    let headers = response.headers_mut();
    headers.insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static(content_type(path)),
    );
    headers.insert(
        header::CACHE_CONTROL,
        HeaderValue::from_static("public, max-age=31536000, immutable"),
    );
    response
}

/// The text of an embedded file, if present and UTF-8.
pub fn text(path: &str) -> Option<String> {
    let file = WebFiles::get(path)?;
    String::from_utf8(file.data.into_owned()).ok()
}

/// The dashboard page with the asset prefix filled in, or `None` if the
/// front end is missing from the build.
pub fn index_html() -> Option<String> {
    page_html("index.html")
}

/// An embedded HTML page with the asset prefix filled in.
pub fn page_html(path: &str) -> Option<String> {
    let file = WebFiles::get(path)?;
    let text = String::from_utf8_lossy(&file.data).into_owned();
    Some(text.replace("%ASSETS%", &prefix()))
}
