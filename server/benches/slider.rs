//! Benchmark of the collapse-quality slider against the target of issue 11:
//! the quality S(z) of a 101-site × 60-time map reaches the page within
//! 33 ms of a drag (one frame at 30 Hz).
//!
//! It times the server-side round trip of
//! `GET /api/s/{token}/datasets/{id}/collapse-quality?z=…` through the whole
//! router (token check, cache, computation, JSON), over a file database in a
//! temporary directory, as a drag would send it: z moving in small steps.
//! The first request (which prepares the measure) is reported apart; the
//! rest give p50 and p95.
//!
//! The map is SYNTHETIC: a normalised Gaussian C(x,t) = exp(−x²/(4Dt)) /
//! √(4πDt) with D = 1, x = −50…50, t = 0.5…30 (common practice, no source).
//!
//! Run (release, the default for `cargo bench`):
//!   cargo bench --bench slider
//!   cargo bench --bench slider -- 400      # number of timed requests
//!
//! This is a timing program, never a test: it asserts nothing about speed.

use std::time::Instant;

use axum::body::Body;
use axum::http::Request;
use http_body_util::BodyExt;
use serde_json::Value;
use spreadscope::api::ApiConfig;
use spreadscope::app::App;
use tower::ServiceExt;

fn synthetic_csv() -> String {
    let mut out = String::from("x,t,C\n");
    for k in 1..=60 {
        let t = 0.5 * f64::from(k);
        for x in -50..=50 {
            let x = f64::from(x);
            let c = (-x * x / (4.0 * t)).exp() / (4.0 * std::f64::consts::PI * t).sqrt();
            out.push_str(&format!("{x},{t},{c:.12e}\n"));
        }
    }
    out
}

async fn call(router: &axum::Router, method: &str, uri: &str, body: String) -> Value {
    let response = router
        .clone()
        .oneshot(
            Request::builder()
                .method(method)
                .uri(uri)
                .body(Body::from(body))
                .expect("request"),
        )
        .await
        .expect("response");
    let status = response.status();
    let bytes = response
        .into_body()
        .collect()
        .await
        .expect("body")
        .to_bytes();
    assert!(
        status.is_success(),
        "{uri}: {status} {}",
        String::from_utf8_lossy(&bytes)
    );
    serde_json::from_slice(&bytes).expect("json")
}

fn percentile(sorted: &[f64], p: f64) -> f64 {
    let k = ((sorted.len() as f64 - 1.0) * p).round() as usize;
    sorted[k.min(sorted.len() - 1)]
}

#[tokio::main]
async fn main() {
    let n: usize = std::env::args()
        .skip(1)
        .find_map(|a| a.parse().ok())
        .unwrap_or(200);
    let dir = tempfile::tempdir().expect("temporary directory");
    let app = App::open(dir.path(), &ApiConfig::default())
        .await
        .expect("open");
    let router = app.router;
    let session = call(&router, "POST", "/api/sessions", "{}".into()).await;
    let token = session["edit_token"].as_str().expect("token").to_string();
    let uri = format!("/api/s/{token}/datasets?name=slider.csv&format=csv");
    let summary = call(&router, "POST", &uri, synthetic_csv()).await;
    let id = summary["id"].as_i64().expect("id");
    let quality_in = |z: f64, t_min: f64| {
        format!("/api/s/{token}/datasets/{id}/collapse-quality?z={z}&t_min={t_min}&x_max=40")
    };
    let quality = |z: f64| quality_in(z, 1.0);

    // Without the cache's help: every request names a window not held (40
    // windows in turn, more than the cache keeps), so each one reads,
    // decodes and windows the map and prepares the measure, as every drag
    // request did before the cache.
    let mut cold = Vec::with_capacity(n);
    for k in 0..n {
        let t_min = 1.0 + 0.01 * (k % 40) as f64 + 0.001;
        let start = Instant::now();
        call(&router, "GET", &quality_in(2.0, t_min), String::new()).await;
        cold.push(start.elapsed().as_secs_f64() * 1e3);
    }
    cold.sort_by(f64::total_cmp);

    let start = Instant::now();
    call(&router, "GET", &quality(2.0), String::new()).await;
    let first = start.elapsed().as_secs_f64() * 1e3;

    let mut times = Vec::with_capacity(n);
    for k in 0..n {
        // A drag: z sweeps 1.5 → 2.5 and back in steps of 0.01.
        let phase = k % 200;
        let step = if phase < 100 { phase } else { 200 - phase };
        let z = 1.5 + 0.01 * step as f64;
        let start = Instant::now();
        let v = call(&router, "GET", &quality(z), String::new()).await;
        times.push(start.elapsed().as_secs_f64() * 1e3);
        assert!(v["quality"].is_number(), "no quality at z = {z}: {v}");
    }
    times.sort_by(f64::total_cmp);
    println!("collapse-quality round trip, 101 × 60 map, window t ≥ 1, |x| ≤ 40");
    println!(
        "  {n} requests, each a window not cached: p50 {:.2} ms, p95 {:.2} ms",
        percentile(&cold, 0.5),
        percentile(&cold, 0.95)
    );
    println!("  first request (prepares the measure): {first:.2} ms");
    println!(
        "  {n} drag requests: p50 {:.2} ms, p95 {:.2} ms, max {:.2} ms",
        percentile(&times, 0.5),
        percentile(&times, 0.95),
        times[times.len() - 1]
    );
}
