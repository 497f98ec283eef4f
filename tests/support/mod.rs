//! Shared harness: an app over an in-memory store driven through the router
//! without a socket, and the real binary on port 0 for socket-level tests.

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};

use axum::Router;
use axum::body::Body;
use axum::http::{Method, Request, StatusCode};
use http_body_util::BodyExt;
use serde_json::Value;
use spreadscope::api::ApiConfig;
use spreadscope::app::App;
use spreadscope::store::Store;
use tower::ServiceExt;

/// The program under test, as a command to add arguments to.
pub fn binary() -> Command {
    Command::new(env!("CARGO_BIN_EXE_spreadscope"))
}

/// Path of a file in the repository.
pub fn repo_path(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}

/// An app over a fresh in-memory database (with the demo session).
pub async fn app() -> App {
    app_with(&ApiConfig::default()).await
}

pub async fn app_with(config: &ApiConfig) -> App {
    App::with_store(Store::in_memory().expect("in-memory store"), config)
        .await
        .expect("app builds")
}

/// Sends one request through the router; returns status and body bytes.
pub async fn send(
    router: &Router,
    method: Method,
    uri: &str,
    body: impl Into<Body>,
) -> (StatusCode, Vec<u8>, axum::http::HeaderMap) {
    let request = Request::builder()
        .method(method)
        .uri(uri)
        .body(body.into())
        .expect("request builds");
    let response = router
        .clone()
        .oneshot(request)
        .await
        .expect("router answers");
    let status = response.status();
    let headers = response.headers().clone();
    let bytes = response
        .into_body()
        .collect()
        .await
        .expect("body reads")
        .to_bytes()
        .to_vec();
    (status, bytes, headers)
}

/// Like [`send`], parsing the body as JSON.
pub async fn send_json(
    router: &Router,
    method: Method,
    uri: &str,
    body: impl Into<Body>,
) -> (StatusCode, Value) {
    let (status, bytes, _) = send(router, method, uri, body).await;
    let value = serde_json::from_slice(&bytes)
        .unwrap_or_else(|_| Value::String(String::from_utf8_lossy(&bytes).into_owned()));
    (status, value)
}

/// Number of datasets a session holds, read through the API.
pub async fn dataset_count(router: &Router, token: &str) -> usize {
    let (status, list) =
        send_json(router, Method::GET, &format!("/api/s/{token}/datasets"), "").await;
    assert_eq!(status, StatusCode::OK, "{list}");
    list.as_array().map_or(0, Vec::len)
}

/// Creates a session; returns (edit token, view token).
pub async fn new_session(router: &Router) -> (String, String) {
    let (status, body) = send_json(router, Method::POST, "/api/sessions", "{\"name\":\"t\"}").await;
    assert_eq!(status, StatusCode::CREATED, "{body}");
    (
        body["edit_token"].as_str().expect("edit token").to_string(),
        body["view_token"].as_str().expect("view token").to_string(),
    )
}

/// The real binary serving a data directory on a free loopback port.
pub struct Server {
    pub child: Child,
    pub base: String,
    /// (edit URL, view URL) per session, as printed.
    pub links: Vec<(String, String)>,
}

impl Server {
    pub fn start(data: &Path) -> Self {
        Self::start_with(data, &[])
    }

    /// Like [`Server::start`], with more `serve` options.
    pub fn start_with(data: &Path, extra: &[&std::ffi::OsStr]) -> Self {
        let mut child = binary()
            .args(["serve", "--port", "0", "--data"])
            .arg(data)
            .args(extra)
            .stdout(Stdio::piped())
            .stderr(Stdio::inherit())
            .spawn()
            .expect("binary starts");
        let stdout = child.stdout.take().expect("stdout piped");
        let mut lines = BufReader::new(stdout).lines();
        let first = lines.next().expect("a line").expect("utf-8");
        let base = first
            .split_whitespace()
            .find(|w| w.starts_with("http://") || w.starts_with("https://"))
            .expect("serving line names the URL")
            .to_string();
        let mut links = Vec::new();
        let mut edit = None;
        for line in lines.by_ref() {
            let line = line.expect("utf-8");
            let url = line.split_whitespace().last().unwrap_or("").to_string();
            if line.trim_start().starts_with("edit:") {
                edit = Some(url);
            } else if line.trim_start().starts_with("view:") {
                links.push((edit.take().expect("edit before view"), url));
                break;
            }
        }
        // Keep draining stdout so the server never blocks on a full pipe.
        std::thread::spawn(move || for _ in lines {});
        Self { child, base, links }
    }

    /// Sends SIGTERM and waits for a graceful exit.
    pub fn stop(mut self) -> std::process::ExitStatus {
        let pid = self.child.id().to_string();
        let _ = Command::new("kill").args(["-TERM", &pid]).status();
        self.child.wait().expect("server exits")
    }
}

impl Drop for Server {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// A small valid long CSV: a Gaussian-ish spread on 3 sites at 2 times.
pub const SMALL_CSV: &str = "x,t,C,err\n\
-1,0.5,0.2,0.01\n0,0.5,0.6,0.01\n1,0.5,0.2,0.01\n\
-1,1.0,0.3,0.01\n0,1.0,0.4,0.01\n1,1.0,0.3,0.01\n";

/// A minimal blocking HTTP/1.1 request over loopback (no client library
/// needed): returns the status and body, or `None` if the connection failed.
pub fn http(method: &str, url: &str, body: &str) -> Option<(u16, String)> {
    use std::io::{Read, Write};
    let rest = url.strip_prefix("http://")?;
    let (host, path) = rest
        .split_once('/')
        .map_or((rest, "/".to_string()), |(h, p)| (h, format!("/{p}")));
    let mut stream = std::net::TcpStream::connect(host).ok()?;
    stream
        .set_read_timeout(Some(std::time::Duration::from_secs(20)))
        .ok()?;
    let request = format!(
        "{method} {path} HTTP/1.1\r\nHost: {host}\r\nContent-Type: application/json\r\nContent-Length: {}\r\nConnection: close\r\n\r\n{body}",
        body.len()
    );
    stream.write_all(request.as_bytes()).ok()?;
    let mut response = Vec::new();
    stream.read_to_end(&mut response).ok()?;
    let text = String::from_utf8_lossy(&response).into_owned();
    let status: u16 = text.split_whitespace().nth(1)?.parse().ok()?;
    let (head, body) = text.split_once("\r\n\r\n")?;
    // Bodies of chunked answers carry size lines; callers here only read
    // small JSON answers, which axum sends with Content-Length.
    let _ = head;
    Some((status, body.to_string()))
}

/// Diffusive scaling data in closed form (physics notes, "Conventions": z = 2
/// is a Gaussian of variance 2Dt): C(x,t) = exp(−x²/(4Dt)) / (2√(πDt)),
/// D = 0.5, 61 sites × 12 log-spaced times, a stated error of 1e-4 on every
/// point and no noise.
pub fn gaussian_csv() -> String {
    let mut csv = String::from("x,t,C,err\n");
    for k in 0..12 {
        let t = 2.0 * 1.25f64.powi(k);
        for x in -30..=30 {
            let dt = 0.5 * t;
            let c = (-(f64::from(x)).powi(2) / (4.0 * dt)).exp()
                / (2.0 * (std::f64::consts::PI * dt).sqrt());
            csv.push_str(&format!("{x},{t:?},{c:?},0.0001\n"));
        }
    }
    csv
}

/// Uploads a CSV map under `name`; returns the new dataset's id.
pub async fn upload_csv(router: &Router, edit: &str, name: &str, csv: String) -> i64 {
    let (status, ds) = send_json(
        router,
        Method::POST,
        &format!("/api/s/{edit}/datasets?name={name}&format=csv"),
        csv,
    )
    .await;
    assert_eq!(status, StatusCode::CREATED, "{ds}");
    ds["id"].as_i64().expect("id")
}

/// Runs a fit request on a dataset and expects an answer; returns the fit.
pub async fn fit(router: &Router, edit: &str, id: i64, request: &Value) -> Value {
    let (status, fit) = send_json(
        router,
        Method::POST,
        &format!("/api/s/{edit}/datasets/{id}/fits"),
        request.to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{fit}");
    fit
}

/// Pins a log entry (`body` as the log route takes it); returns the entry.
pub async fn pin(router: &Router, edit: &str, body: &Value) -> Value {
    let (status, entry) = send_json(
        router,
        Method::POST,
        &format!("/api/s/{edit}/log"),
        body.to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::CREATED, "{entry}");
    entry
}

/// Opens a session's event stream through the router; returns the response
/// (its body yields the server-sent events).
pub async fn open_events(router: &Router, token: &str) -> axum::response::Response {
    let request = Request::builder()
        .uri(format!("/api/s/{token}/events"))
        .body(Body::empty())
        .expect("request builds");
    router
        .clone()
        .oneshot(request)
        .await
        .expect("router answers")
}
