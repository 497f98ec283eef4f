//! The HTTP API through the router (no socket) and once over a real socket.

use axum::http::{Method, StatusCode};
use serde_json::Value;

use crate::support::{SMALL_CSV, Server, app, dataset_count, new_session, send, send_json};

#[tokio::test]
async fn sessions_give_distinct_unguessable_tokens() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    assert_ne!(edit, view);
    assert_eq!(edit.len(), 32, "128 bits as hex");
    let (status, info) = send_json(&app.router, Method::GET, &format!("/api/s/{edit}"), "").await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(info["can_edit"], true);
    let (_, info) = send_json(&app.router, Method::GET, &format!("/api/s/{view}"), "").await;
    assert_eq!(info["can_edit"], false);
    assert_eq!(
        info["edit_url"],
        Value::Null,
        "a view link never reveals the edit link"
    );
}

#[tokio::test]
async fn unknown_tokens_are_404_and_reveal_nothing() {
    let app = app().await;
    for uri in [
        "/api/s/00000000000000000000000000000000/datasets",
        "/api/s/nonsense",
        "/api/s/../../etc/passwd",
        "/s/00000000000000000000000000000000",
        "/assets/xyz/../../Cargo.toml",
        "/api/nothing-here",
    ] {
        let (status, body, _) = send(&app.router, Method::GET, uri, "").await;
        assert_eq!(status, StatusCode::NOT_FOUND, "{uri}");
        let text = String::from_utf8_lossy(&body);
        assert!(!text.contains("[package]"), "{uri} leaked a file");
    }
}

#[tokio::test]
async fn upload_lists_and_reads_back_a_csv() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let uri = format!("/api/s/{edit}/datasets?name=small.csv&format=csv");
    let (status, summary) = send_json(&app.router, Method::POST, &uri, SMALL_CSV).await;
    assert_eq!(status, StatusCode::CREATED, "{summary}");
    assert_eq!(summary["sites"], 3);
    assert_eq!(summary["times"], 2);
    assert_eq!(summary["content_hash"].as_str().map(str::len), Some(64));
    let id = summary["id"].as_i64().expect("id");

    assert_eq!(dataset_count(&app.router, &view).await, 1);

    let (status, detail) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/datasets/{id}"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(detail["x"], serde_json::json!([-1, 0, 1]));
    // Σ_x C at t = 1 is 0.3 + 0.4 + 0.3 (the file's own numbers).
    let sum = detail["sum_rule"][1]["sum"].as_f64().expect("sum");
    assert!((sum - 1.0).abs() < 1e-12);
    assert_eq!(detail["autocorrelation"][0]["C"], 0.6);
}

#[tokio::test]
async fn a_view_link_cannot_write() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let uri = format!("/api/s/{view}/datasets?name=a.csv&format=csv");
    let (status, body) = send_json(&app.router, Method::POST, &uri, SMALL_CSV).await;
    assert_eq!(status, StatusCode::FORBIDDEN, "{body}");
    assert_eq!(dataset_count(&app.router, &edit).await, 0, "nothing stored");
}

#[tokio::test]
async fn a_bad_csv_is_refused_with_every_line_and_nothing_stored() {
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let bad = "x,t,C,err\n0,0,1,0.1\n1,0,nan,0.1\n-1,0,0.1,-0.2\n0,0,0.9,0.1\n";
    let uri = format!("/api/s/{edit}/datasets?name=bad.csv&format=csv");
    let (status, body) = send_json(&app.router, Method::POST, &uri, bad).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{body}");
    let lines: Vec<i64> = body["problems"]
        .as_array()
        .expect("problems")
        .iter()
        .filter_map(|p| p["line"].as_i64())
        .collect();
    for line in [3, 4, 5] {
        assert!(lines.contains(&line), "line {line} named in {body}");
    }
    assert_eq!(dataset_count(&app.router, &edit).await, 0, "nothing stored");
}

#[tokio::test]
async fn metadata_edits_are_validated_and_kept() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let uri = format!("/api/s/{edit}/datasets?name=m.csv");
    let (_, summary) = send_json(&app.router, Method::POST, &uri, SMALL_CSV).await;
    let id = summary["id"].as_i64().expect("id");
    let meta_uri = format!("/api/s/{edit}/datasets/{id}/meta");
    let good = r#"{"platform":"ion chain","alpha":1.1,"chain_length":21,"source_site":10,"time_unit":"1/J"}"#;
    let (status, updated) = send_json(&app.router, Method::PUT, &meta_uri, good).await;
    assert_eq!(status, StatusCode::OK, "{updated}");
    assert_eq!(updated["meta"]["alpha"], 1.1);
    let bad = r#"{"chain_length":5,"source_site":9}"#;
    let (status, err) = send_json(&app.router, Method::PUT, &meta_uri, bad).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(
        err["error"]
            .as_str()
            .expect("message")
            .contains("source_site")
    );
    let view_uri = format!("/api/s/{view}/datasets/{id}/meta");
    let (status, _) = send_json(&app.router, Method::PUT, &view_uri, good).await;
    assert_eq!(status, StatusCode::FORBIDDEN);
}

#[tokio::test]
async fn pages_carry_security_headers_and_content_addressed_assets() {
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let (status, body, headers) = send(&app.router, Method::GET, &format!("/s/{edit}"), "").await;
    assert_eq!(status, StatusCode::OK);
    let csp = headers["content-security-policy"].to_str().expect("ascii");
    assert!(csp.contains("script-src 'self'") && !csp.contains("unsafe-eval"));
    assert_eq!(headers["x-content-type-options"], "nosniff");
    assert_eq!(headers["x-frame-options"], "DENY");
    let html = String::from_utf8(body).expect("utf-8");
    assert!(!html.contains("%ASSETS%"));
    let prefix = spreadscope::api::assets::prefix();
    assert!(html.contains(&prefix));
    let (status, _, headers) = send(
        &app.router,
        Method::GET,
        &format!("{prefix}/index.html"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK);
    assert!(
        headers["cache-control"]
            .to_str()
            .expect("ascii")
            .contains("immutable")
    );
}

/// The page names the first figure's data in a `Link` header so the browser
/// fetches it with the page; each named URL must be one the page's script
/// asks for, answering 200, or the browser fetches for nothing.
#[tokio::test]
async fn the_page_preloads_the_data_of_its_first_figure() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let link_of = |headers: &axum::http::HeaderMap| {
        headers
            .get("link")
            .expect("a Link header")
            .to_str()
            .expect("ascii")
            .to_string()
    };
    // No dataset yet: the session and its (empty) list only.
    let (status, _, headers) = send(&app.router, Method::GET, &format!("/s/{view}"), "").await;
    assert_eq!(status, StatusCode::OK);
    let link = link_of(&headers);
    assert_eq!(
        link,
        format!(
            "</api/s/{view}>; rel=preload; as=fetch; crossorigin, \
             </api/s/{view}/datasets>; rel=preload; as=fetch; crossorigin"
        )
    );
    let uri = format!("/api/s/{edit}/datasets?name=a.csv");
    let (_, first) = send_json(&app.router, Method::POST, &uri, SMALL_CSV).await;
    let uri = format!("/api/s/{edit}/datasets?name=b.csv");
    let (status, _) = send_json(&app.router, Method::POST, &uri, SMALL_CSV).await;
    assert_eq!(status, StatusCode::CREATED);
    let first = first["id"].as_i64().expect("id");
    let (_, _, headers) = send(&app.router, Method::GET, &format!("/s/{view}"), "").await;
    let link = link_of(&headers);
    let urls: Vec<&str> = link
        .split(", ")
        .map(|part| {
            assert!(
                part.ends_with(">; rel=preload; as=fetch; crossorigin"),
                "{part}"
            );
            part.trim_start_matches('<').split('>').next().expect("url")
        })
        .collect();
    // The page opens on the oldest dataset, the first of the list.
    let (_, list) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/datasets"),
        "",
    )
    .await;
    assert_eq!(list[0]["id"].as_i64(), Some(first));
    assert_eq!(
        urls,
        vec![
            format!("/api/s/{view}"),
            format!("/api/s/{view}/datasets"),
            format!("/api/s/{view}/datasets/{first}"),
        ]
    );
    for url in urls {
        let (status, _, _) = send(&app.router, Method::GET, url, "").await;
        assert_eq!(status, StatusCode::OK, "{url}");
    }
    // An unknown session gets no page and names nothing.
    let (status, _, headers) = send(
        &app.router,
        Method::GET,
        "/s/0123456789abcdef0123456789abcdef",
        "",
    )
    .await;
    assert_eq!(status, StatusCode::NOT_FOUND);
    assert!(headers.get("link").is_none());
}

#[tokio::test]
async fn uploads_over_the_limit_get_413() {
    let config = spreadscope::api::ApiConfig {
        max_upload_bytes: 1024,
        ..spreadscope::api::ApiConfig::default()
    };
    let app = crate::support::app_with(&config).await;
    let (edit, _) = new_session(&app.router).await;
    let big = format!("x,t,C\n{}", "0,0,1\n".repeat(1000));
    let uri = format!("/api/s/{edit}/datasets?name=big.csv");
    let (status, _, _) = send(&app.router, Method::POST, &uri, big).await;
    assert_eq!(status, StatusCode::PAYLOAD_TOO_LARGE);
}

#[tokio::test]
async fn a_fresh_store_opens_with_the_synthetic_demo_session() {
    let app = app().await;
    let sessions = app.service.sessions().await.expect("sessions");
    assert_eq!(sessions.len(), 1);
    let token = &sessions[0].view_token;
    let (_, list) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{token}/datasets"),
        "",
    )
    .await;
    let list = list.as_array().expect("list");
    assert!(!list.is_empty());
    assert!(list.iter().all(|d| d["meta"]["synthetic"] == true));
}

/// Over a real socket: the binary starts on port 0, prints its links,
/// datasets survive a restart, and SIGTERM ends it cleanly.
#[test]
fn the_binary_serves_and_datasets_survive_a_restart() {
    let dir = tempfile::tempdir().expect("temp dir");
    let server = Server::start(dir.path());
    let (edit_url, view_url) = server.links[0].clone();
    let edit = edit_url.rsplit('/').next().expect("token").to_string();
    let upload = format!("{}/api/s/{edit}/datasets?name=kept.csv", server.base);
    let out = std::process::Command::new("curl")
        .args([
            "-s",
            "-o",
            "/dev/null",
            "-w",
            "%{http_code}",
            "--data-binary",
            crate::support::SMALL_CSV,
            &upload,
        ])
        .output()
        .expect("curl runs");
    assert_eq!(String::from_utf8_lossy(&out.stdout), "201");
    assert!(server.stop().success(), "graceful exit on SIGTERM");

    let again = Server::start(dir.path());
    assert_eq!(again.links.len(), 1, "no second demo session on restart");
    let view = view_url.rsplit('/').next().expect("token");
    assert!(
        again.links[0].1.ends_with(view),
        "same session after restart"
    );
    let list = std::process::Command::new("curl")
        .args(["-s", &format!("{}/api/s/{view}/datasets", again.base)])
        .output()
        .expect("curl runs");
    let list: Value = serde_json::from_slice(&list.stdout).expect("json");
    assert!(
        list.as_array()
            .expect("array")
            .iter()
            .any(|d| d["name"] == "kept.csv")
    );
}

#[tokio::test]
async fn the_log_keeps_order_provenance_and_retractions() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let (_, ds) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets?name=p.csv"),
        SMALL_CSV,
    )
    .await;
    let id = ds["id"].as_i64().expect("id");
    let log = format!("/api/s/{edit}/log");
    let fit =
        serde_json::json!({"method": "tail", "parameters": {"z": {"value": 1.4, "err": 0.1}}});
    let first = serde_json::json!({"author": "Ada", "comment": "tail looks flat", "dataset": id, "fit": fit});
    let (status, pinned) = send_json(&app.router, Method::POST, &log, first.to_string()).await;
    assert_eq!(status, StatusCode::CREATED, "{pinned}");
    assert_eq!(
        pinned["dataset_hash"], ds["content_hash"],
        "hash copied from the dataset"
    );
    assert_eq!(pinned["fit"]["parameters"]["z"]["value"], 1.4);
    assert!(
        pinned["program_version"]
            .as_str()
            .expect("version")
            .starts_with("spreadscope ")
    );
    let old = pinned["id"].as_i64().expect("id");

    let retraction =
        serde_json::json!({"author": "Ada", "comment": "wrong window", "retracts": old});
    let (status, _) = send_json(&app.router, Method::POST, &log, retraction.to_string()).await;
    assert_eq!(status, StatusCode::CREATED);

    for (body, field) in [
        (serde_json::json!({"author": "", "comment": "x"}), "author"),
        (
            serde_json::json!({"author": "A", "comment": "x", "retracts": 9999}),
            "retracts",
        ),
        (
            serde_json::json!({"author": "A", "comment": "x", "dataset": 9999}),
            "dataset",
        ),
        (
            serde_json::json!({"author": "A", "comment": "x", "fit": [1]}),
            "fit",
        ),
    ] {
        let (status, err) = send_json(&app.router, Method::POST, &log, body.to_string()).await;
        assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{body}");
        assert!(
            err["error"].as_str().expect("message").contains(field),
            "{err}"
        );
    }
    let (status, _) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{view}/log"),
        serde_json::json!({"author": "Eve", "comment": "x"}).to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::FORBIDDEN);

    let (_, entries) = send_json(&app.router, Method::GET, &format!("/api/s/{view}/log"), "").await;
    let entries = entries.as_array().expect("list");
    assert_eq!(entries.len(), 2, "refused entries left no trace");
    assert_eq!(entries[1]["retracts"], old);
    assert!(entries[0]["id"].as_i64() < entries[1]["id"].as_i64());

    let (status, csv, headers) = send(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/log.csv"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK);
    assert!(
        headers["content-type"]
            .to_str()
            .expect("ascii")
            .starts_with("text/csv")
    );
    let csv = String::from_utf8(csv).expect("utf-8");
    assert_eq!(csv.lines().count(), 3, "header and two entries");
    assert!(
        csv.lines()
            .nth(1)
            .is_some_and(|row| row.contains(",1.4,0.1,")),
        "z and its error in cells of their own: {csv}"
    );
    let (_, json_export) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/log.json"),
        "",
    )
    .await;
    assert_eq!(json_export["entries"].as_array().map(Vec::len), Some(2));
    assert!(
        json_export["conventions"]
            .as_str()
            .expect("text")
            .contains("infinite temperature")
    );
}

#[tokio::test]
async fn open_pages_hear_of_new_pins_through_server_sent_events() {
    use http_body_util::BodyExt;
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let response = crate::support::open_events(&app.router, &view).await;
    assert_eq!(response.status(), StatusCode::OK);
    assert!(
        response.headers()["content-type"]
            .to_str()
            .expect("ascii")
            .starts_with("text/event-stream")
    );
    let mut body = response.into_body();
    let pin = serde_json::json!({"author": "Bo", "comment": "live"}).to_string();
    let (status, entry) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/log"),
        pin,
    )
    .await;
    assert_eq!(status, StatusCode::CREATED);
    let frame = tokio::time::timeout(std::time::Duration::from_secs(5), body.frame())
        .await
        .expect("an event within 5 s")
        .expect("a frame")
        .expect("no error");
    let text = String::from_utf8(frame.into_data().expect("data").to_vec()).expect("utf-8");
    assert!(text.contains("\"kind\":\"log-added\""), "{text}");
    assert!(text.contains(&format!("\"id\":{}", entry["id"])), "{text}");
}

#[tokio::test]
async fn comparison_and_report_carry_pinned_results() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let (_, ds) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets?name=r.csv"),
        SMALL_CSV,
    )
    .await;
    let id = ds["id"].as_i64().expect("id");
    let meta = r#"{"platform":"test chain","alpha":1.25}"#;
    send_json(
        &app.router,
        Method::PUT,
        &format!("/api/s/{edit}/datasets/{id}/meta"),
        meta,
    )
    .await;
    let fit = serde_json::json!({"method": "collapse",
        "parameters": {"z": {"value": 1.52, "err": 0.04}, "D": {"value": 0.8, "err": 0.1}}});
    let pin = serde_json::json!({"author": "Ada", "comment": "<script>alert(1)</script>", "dataset": id, "fit": fit});
    let (status, entry) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/log"),
        pin.to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::CREATED);
    let (_, rows) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/comparison"),
        "",
    )
    .await;
    let row = &rows[0];
    assert_eq!(row["entry"], entry["id"]);
    assert_eq!(row["z"], 1.52);
    assert_eq!(row["D_err"], 0.1);
    assert_eq!(row["alpha"], 1.25);
    assert_eq!(row["platform"], "test chain");
    assert_eq!(row["retracted"], false);

    let (status, html, headers) = send(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/report.html"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK);
    let html = String::from_utf8(html).expect("utf-8");
    assert!(
        html.contains("&lt;script&gt;alert(1)&lt;/script&gt;"),
        "comment escaped"
    );
    assert!(!html.contains("<script>alert(1)"));
    assert!(html.contains("z = 1.5200 ± 0.0400"));
    assert!(html.contains(&ds["content_hash"].as_str().expect("hash")[..12]));
    let csp = headers["content-security-policy"].to_str().expect("ascii");
    assert_eq!(csp.matches("'sha256-").count(), 2, "{csp}");
    assert!(csp.starts_with("default-src 'none'"));
    assert!(
        !html.contains("src=\"/") && !html.contains("href=\"/"),
        "nothing loaded from a server"
    );
}

#[tokio::test]
async fn a_shot_upload_becomes_a_dataset_and_keeps_its_shots() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let shots = std::fs::read(crate::support::repo_path("tests/reference/shots/shots.csv"))
        .expect("fixture");
    let uri = format!("/api/s/{view}/shots?name=run.csv&bootstrap=10&source=0");
    let (status, _) = send_json(&app.router, Method::POST, &uri, shots.clone()).await;
    assert_eq!(status, StatusCode::FORBIDDEN);
    let uri = format!("/api/s/{edit}/shots?name=run.csv&bootstrap=10&symmetrise=true&source=0");
    let (status, summary) = send_json(&app.router, Method::POST, &uri, shots).await;
    assert_eq!(status, StatusCode::CREATED, "{summary}");
    assert_eq!(summary["format"], "shots-csv");
    assert_eq!(summary["has_errors"], true);
    assert!(
        summary["notes"]
            .as_array()
            .expect("notes")
            .iter()
            .any(|n| n.as_str().is_some_and(|s| s.contains("symmetrise")))
    );
    let bad = format!("/api/s/{edit}/shots?name=bad.csv");
    let (status, body) = send_json(
        &app.router,
        Method::POST,
        &bad,
        "state_id,t,init_bits,meas_bits\na,0,01,0\n",
    )
    .await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(body["problems"][0]["line"], 2);
    let (_, list) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{edit}/datasets"),
        "",
    )
    .await;
    assert_eq!(
        list.as_array().map(Vec::len),
        Some(1),
        "the bad file stored nothing"
    );
}

#[tokio::test]
async fn site_resolved_shot_correlations_and_coupling_fits() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let shots = std::fs::read(crate::support::repo_path("tests/reference/shots/shots.csv"))
        .expect("fixture");
    let uri = format!("/api/s/{edit}/shots?name=run.csv&bootstrap=10&source=0");
    let (_, summary) = send_json(&app.router, Method::POST, &uri, shots).await;
    let id = summary["id"].as_i64().expect("id");
    let (status, pairs) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/datasets/{id}/shots?source=0"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{pairs}");
    // With one source j = 0, the dataset's C(x,t) is C_{x,0}(t): the
    // re-estimate from the kept shots must give the same numbers.
    let (_, detail) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/datasets/{id}"),
        "",
    )
    .await;
    let x = detail["x"].as_array().expect("x");
    for (ti, row) in detail["C"].as_array().expect("C").iter().enumerate() {
        for (xi, v) in row.as_array().expect("row").iter().enumerate() {
            let (Some(v), Some(i)) = (v.as_f64(), x[xi].as_i64()) else {
                continue;
            };
            let pair = pairs["C"][ti][usize::try_from(i).expect("i ≥ 0")]
                .as_f64()
                .expect("pair");
            assert!(
                (pair - v).abs() < 1e-15,
                "t index {ti}, x {i}: {pair} vs {v}"
            );
        }
    }
    // The kept shots re-run with other options give a new dataset; the
    // first one stays as it was.
    let again =
        serde_json::json!({"name": "run, source 1", "options": {"source": 1, "bootstrap": 10}});
    let (status, _) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{view}/datasets/{id}/shots"),
        again.to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::FORBIDDEN);
    let (status, second) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets/{id}/shots"),
        again.to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::CREATED, "{second}");
    assert_ne!(second["content_hash"], summary["content_hash"]);
    let (_, first) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/datasets/{id}"),
        "",
    )
    .await;
    assert_eq!(first["content_hash"], summary["content_hash"]);
    let (status, _) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/datasets/{id}/shots?source=99"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);

    // A noiseless power law J/|i−j|^1.5 with J = 2 is fitted exactly.
    let n = 6;
    let csv: String = (0..n)
        .map(|i: i32| {
            (0..n)
                .map(|j: i32| {
                    if i == j {
                        "0".to_string()
                    } else {
                        format!("{:?}", 2.0 / f64::from((i - j).abs()).powf(1.5))
                    }
                })
                .collect::<Vec<_>>()
                .join(",")
                + "\n"
        })
        .collect();
    let (status, fit) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{view}/couplings"),
        csv,
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{fit}");
    assert!(
        (fit["fit"]["alpha"].as_f64().expect("alpha") - 1.5).abs() < 1e-9,
        "{fit}"
    );
    assert!((fit["fit"]["J"].as_f64().expect("J") - 2.0).abs() < 1e-9);
    let (status, bad) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{view}/couplings"),
        "0,1\n1,x\n",
    )
    .await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(bad["problems"][0]["line"], 2);
}

#[tokio::test]
async fn a_cached_log_never_hides_a_newer_pin() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let log = format!("/api/s/{view}/log");
    for n in 1..=3 {
        let pin = serde_json::json!({"author": "Ada", "comment": format!("pin {n}")}).to_string();
        send_json(
            &app.router,
            Method::POST,
            &format!("/api/s/{edit}/log"),
            pin,
        )
        .await;
        // Read twice: the second read is served from the cache.
        for _ in 0..2 {
            let (status, entries) = send_json(&app.router, Method::GET, &log, "").await;
            assert_eq!(status, StatusCode::OK);
            assert_eq!(entries.as_array().map(Vec::len), Some(n), "after pin {n}");
        }
    }
}

#[tokio::test]
async fn fits_of_a_map_estimated_from_shots_say_its_points_are_correlated() {
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let shots = std::fs::read(crate::support::repo_path("tests/reference/shots/shots.csv"))
        .expect("fixture");
    let uri = format!("/api/s/{edit}/shots?name=run.csv&bootstrap=10&source=0");
    let (_, summary) = send_json(&app.router, Method::POST, &uri, shots).await;
    let id = summary["id"].as_i64().expect("id");
    let map =
        crate::support::upload_csv(&app.router, &edit, "g.csv", crate::support::gaussian_csv())
            .await;
    for (dataset, expected) in [(id, true), (map, false)] {
        let (status, fit) = send_json(
            &app.router,
            Method::POST,
            &format!("/api/s/{edit}/datasets/{dataset}/fits"),
            serde_json::json!({"method": "collapse", "windows": {"t_min": 0.1}, "options": {"bootstrap": 0}})
                .to_string(),
        )
        .await;
        assert_eq!(status, StatusCode::OK, "{fit}");
        let warned = fit["warnings"]
            .as_array()
            .expect("warnings")
            .iter()
            .any(|w| {
                w.as_str()
                    .is_some_and(|s| s.contains("estimated from shot records"))
            });
        assert_eq!(warned, expected, "{fit}");
    }
}

#[tokio::test]
async fn a_bulk_shot_map_records_its_sources_and_the_walk_fit_averages_over_them() {
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let shots = std::fs::read(crate::support::repo_path("tests/reference/shots/shots.csv"))
        .expect("fixture");
    let uri = format!("/api/s/{edit}/shots?name=bulk.csv&bootstrap=10&bulk=0:1&symmetrise=true");
    let (status, summary) = send_json(&app.router, Method::POST, &uri, shots).await;
    assert_eq!(status, StatusCode::CREATED, "{summary}");
    assert_eq!(summary["meta"]["chain_length"], 6, "{summary}");
    assert_eq!(summary["meta"]["source_window"], serde_json::json!([0, 1]));
    assert_eq!(summary["meta"]["source_site"], serde_json::Value::Null);
    assert_eq!(summary["meta"]["symmetrised"], true);
    let id = summary["id"].as_i64().expect("id");
    let (status, fit) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets/{id}/fits"),
        serde_json::json!({"method": "lattice_walk", "windows": {"t_min": 0.0}}).to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{fit}");
    assert_eq!(
        fit["report"]["average"],
        serde_json::json!({"first": 0, "last": 1, "symmetrised": true}),
        "{fit}"
    );
    // A source named in the request replaces the window.
    let (status, single) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets/{id}/fits"),
        serde_json::json!({"method": "lattice_walk", "windows": {"t_min": 0.0, "x_max": 1},
                           "options": {"source": 1}})
        .to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{single}");
    assert_eq!(single["report"]["average"], serde_json::Value::Null);
}
