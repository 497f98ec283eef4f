//! Issue 11's data side through the API: the slider's cached collapse
//! measure, the tidy CSV exports, the report, and sessions from the start
//! page.

use axum::http::{Method, StatusCode};
use serde_json::{Value, json};

use crate::support::{app, fit, gaussian_csv, new_session, pin, send, send_json, upload_csv};

/// Pins `fit` (a fit request's answer) with a comment holding a comma (a CSV
/// trap); returns the entry id.
async fn pin_fit(router: &axum::Router, edit: &str, dataset: i64, fit: &Value) -> i64 {
    let body =
        json!({"author": "Ada", "comment": "pinned, with a comma", "dataset": dataset, "fit": fit});
    pin(router, edit, &body).await["id"].as_i64().expect("id")
}

#[tokio::test]
async fn slider_quality_from_the_cache_equals_an_uncached_answer_self_consistent() {
    // Two servers with the same upload: the second answers each z from a
    // cold cache (a fresh window each time), the first from one prepared
    // measure.
    let cached = app().await;
    let (edit, view) = new_session(&cached.router).await;
    let id = upload_csv(&cached.router, &edit, "gauss.csv", gaussian_csv()).await;
    let cold = app().await;
    let (cold_edit, _) = new_session(&cold.router).await;
    let cold_id = upload_csv(&cold.router, &cold_edit, "gauss.csv", gaussian_csv()).await;
    let before = cached.service.quality_cache().len();
    for (k, z) in [1.5, 2.0, 2.5, 2.0].into_iter().enumerate() {
        // Edit and view links share the session's cached measure.
        let token = if k % 2 == 0 { &edit } else { &view };
        let uri = format!("/api/s/{token}/datasets/{id}/collapse-quality?z={z}&t_min=5&x_max=20");
        let (status, body) = send_json(&cached.router, Method::GET, &uri, "").await;
        assert_eq!(status, StatusCode::OK, "{body}");
        let uri = format!(
            "/api/s/{cold_edit}/datasets/{cold_id}/collapse-quality?z={z}&t_min=5&x_max=20"
        );
        let cold_len = cold.service.quality_cache().len();
        let (_, fresh) = send_json(&cold.router, Method::GET, &uri, "").await;
        assert_eq!(body["quality"], fresh["quality"], "z = {z}");
        assert_eq!(body["n_points"], fresh["n_points"], "z = {z}");
        assert!(body["quality"].as_f64().is_some_and(f64::is_finite));
        if k == 0 {
            assert_eq!(cold.service.quality_cache().len(), cold_len + 1);
        }
    }
    assert_eq!(
        cached.service.quality_cache().len(),
        before + 1,
        "one measure for four drags"
    );

    // Another session's link never reaches this session's cached measure.
    let (other, _) = new_session(&cached.router).await;
    let uri = format!("/api/s/{other}/datasets/{id}/collapse-quality?z=2&t_min=5&x_max=20");
    let (status, _) = send_json(&cached.router, Method::GET, &uri, "").await;
    assert_eq!(status, StatusCode::NOT_FOUND);
    // A bad window is refused by name and caches nothing.
    let uri = format!("/api/s/{edit}/datasets/{id}/collapse-quality?z=2&t_min=9&t_max=3");
    let (status, body) = send_json(&cached.router, Method::GET, &uri, "").await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(
        body["error"].as_str().expect("message").contains("t_min"),
        "{body}"
    );
    assert_eq!(cached.service.quality_cache().len(), before + 1);
}

/// Reads a CSV download with the `csv` crate: header and rows, after
/// checking that every row has the header's width.
fn read_csv(bytes: &[u8]) -> (Vec<String>, Vec<Vec<String>>) {
    let text = std::str::from_utf8(bytes).expect("utf-8");
    let text = text
        .strip_prefix('\u{feff}')
        .expect("byte-order mark for spreadsheets");
    let mut reader = csv::Reader::from_reader(text.as_bytes());
    let header: Vec<String> = reader
        .headers()
        .expect("header")
        .iter()
        .map(String::from)
        .collect();
    let rows: Vec<Vec<String>> = reader
        .records()
        .map(|r| {
            r.expect("a well-formed row")
                .iter()
                .map(String::from)
                .collect()
        })
        .collect();
    for row in &rows {
        assert_eq!(row.len(), header.len());
    }
    (header, rows)
}

#[tokio::test]
async fn log_csv_has_one_quantity_per_cell_and_fits_a_spreadsheet_cell() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let id = upload_csv(&app.router, &edit, "gauss.csv", gaussian_csv()).await;
    let tail = fit(
        &app.router,
        &edit,
        id,
        &json!({"method": "tail", "windows": {"t_min": 5.0}}),
    )
    .await;
    let profile = fit(&app.router, &edit, id, &json!({"method": "profile", "windows": {"t_min": 5.0}, "options": {"bootstrap": 4, "seed": 1}})).await;
    let first = pin_fit(&app.router, &edit, id, &tail).await;
    pin_fit(&app.router, &edit, id, &profile).await;
    let (status, _) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/log"),
        json!({"author": "Ada", "comment": "=wrong window", "retracts": first}).to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::CREATED);

    let (status, bytes, headers) = send(
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
    let (header, rows) = read_csv(&bytes);
    assert_eq!(rows.len(), 3);
    let col = |name: &str| {
        header
            .iter()
            .position(|h| h == name)
            .unwrap_or_else(|| panic!("column {name}"))
    };
    for required in [
        "entry",
        "time (UTC)",
        "author",
        "dataset",
        "dataset hash",
        "α",
        "method",
        "t_min",
        "t_max",
        "x_max",
        "z",
        "z error (stat.)",
        "z error (window)",
        "D (sites^z per time unit)",
        "D error (stat.)",
        "D error (window)",
        "χ²/dof",
        "collapse quality S",
        "retracted by",
        "comment",
    ] {
        col(required);
    }
    // A spreadsheet cell holds at most 32,767 characters (the limit of the
    // common spreadsheet programs; common practice, no source).
    for row in &rows {
        for cell in row {
            assert!(
                cell.chars().count() <= 32_767,
                "a cell of {} characters",
                cell.len()
            );
        }
    }
    // One value per cell: numbers parse, and equal the fit's own values.
    let z = rows[0][col("z")].parse::<f64>().expect("z is one number");
    assert_eq!(Some(z), tail["parameters"]["z"]["value"].as_f64());
    let z_err = rows[0][col("z error (stat.)")]
        .parse::<f64>()
        .expect("one number");
    assert_eq!(Some(z_err), tail["parameters"]["z"]["err"].as_f64());
    assert_eq!(rows[0][col("t_min")], "5");
    assert_eq!(rows[0][col("method")], "return-probability tail");
    assert_eq!(rows[0][col("retracted by")], rows[2][col("entry")]);
    let d = rows[1][col("D (sites^z per time unit)")]
        .parse::<f64>()
        .expect("D");
    assert_eq!(Some(d), profile["parameters"]["D"]["value"].as_f64());
    assert_eq!(rows[1][col("comment")], "pinned, with a comma");
    assert_eq!(rows[2][col("comment")], "'=wrong window", "formula defused");
    assert_eq!(rows[2][col("z")], "", "no fit, empty cell");
    // The full report stays in the JSON export.
    let (_, export) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/log.json"),
        "",
    )
    .await;
    assert!(export["entries"][0]["fit"]["report"].is_object());
}

#[tokio::test]
async fn comparison_curves_and_residuals_download_as_csv() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let id = upload_csv(&app.router, &edit, "gauss.csv", gaussian_csv()).await;
    let profile = fit(&app.router, &edit, id, &json!({"method": "profile", "windows": {"t_min": 5.0, "x_max": 10}, "options": {"bootstrap": 4, "seed": 1}})).await;
    let width = fit(&app.router, &edit, id, &json!({"method": "width"})).await;
    let with_curves = pin_fit(&app.router, &edit, id, &profile).await;
    let without = pin_fit(&app.router, &edit, id, &width).await;

    let (status, bytes, _) = send(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/comparison.csv"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK);
    let (header, rows) = read_csv(&bytes);
    assert_eq!(rows.len(), 2);
    assert_eq!(header[5], "z");

    let (status, bytes, headers) = send(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/log/{with_curves}/curves.csv"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK);
    let disposition = headers["content-disposition"].to_str().expect("ascii");
    assert!(
        disposition.contains(&format!(
            "entry{with_curves}_gauss.csv_profile_fitted-curves.csv"
        )),
        "{disposition}"
    );
    let (header, rows) = read_csv(&bytes);
    assert_eq!(header, ["x (sites)", "t (time units)", "C(x,t) fitted"]);
    let points = profile["overlay"]["profile"]["x"]
        .as_array()
        .map(Vec::len)
        .unwrap_or(0)
        * profile["overlay"]["profile"]["t"]
            .as_array()
            .map(Vec::len)
            .unwrap_or(0);
    assert_eq!(rows.len(), points);

    let (status, bytes, _) = send(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/log/{with_curves}/residuals.csv"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK);
    let (header, rows) = read_csv(&bytes);
    assert_eq!(header[2], "C data − C fitted");
    assert!(!rows.is_empty());
    // The profile model is the Gaussian the data were made from (a stable
    // law with μ = 2 is a Gaussian; common practice, no source): residuals
    // are far below the peak value 1/(2√(πDt)) ≈ 0.1 at t = 5.
    for row in &rows {
        let r: f64 = row[2].parse().expect("number");
        assert!(r.abs() < 0.02, "residual {r}");
    }

    let (status, body) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/log/{without}/curves.csv"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(
        body["error"]
            .as_str()
            .expect("message")
            .contains("width growth"),
        "{body}"
    );
    let (status, _) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/log/999/curves.csv"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::NOT_FOUND);
}

#[tokio::test]
async fn demo_report_draws_pinned_fits_on_a_log_map_and_stays_small() {
    let app = app().await;
    let demo = app.service.sessions().await.expect("sessions").remove(0);
    let edit = demo.edit_token;
    let (_, list) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{edit}/datasets"),
        "",
    )
    .await;
    let ids: Vec<i64> = list
        .as_array()
        .expect("list")
        .iter()
        .filter_map(|d| d["id"].as_i64())
        .collect();
    let mut entries = Vec::new();
    for &id in ids.iter().take(2) {
        for request in [
            json!({"method": "collapse", "options": {"bootstrap": 4, "seed": 1}}),
            json!({"method": "profile", "options": {"bootstrap": 4, "seed": 1}}),
            json!({"method": "tail"}),
        ] {
            let result = fit(&app.router, &edit, id, &request).await;
            entries.push(pin_fit(&app.router, &edit, id, &result).await);
        }
    }
    let (status, bytes, _) = send(
        &app.router,
        Method::GET,
        &format!("/api/s/{edit}/report.html"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK);
    let html = String::from_utf8(bytes).expect("utf-8");
    assert!(
        html.len() <= 3 * 1024 * 1024,
        "report of {} bytes",
        html.len()
    );
    for (k, entry) in entries.iter().enumerate() {
        let kind = ["collapse", "profile", "tail"][k % 3];
        assert!(
            html.contains(&format!("id=fit-{kind}-{entry}")),
            "no {kind} figure for entry {entry}"
        );
    }
    assert!(html.contains("log₁₀ C"), "log colour scale");
    assert!(!html.contains("{{"), "every template mark filled");
}

#[tokio::test]
async fn sessions_are_created_renamed_and_the_start_page_is_served() {
    let app = app().await;
    let (status, page, _) = send(&app.router, Method::GET, "/", "").await;
    assert_eq!(status, StatusCode::OK);
    let page = String::from_utf8(page).expect("utf-8");
    assert!(page.contains("/js/start.js") && !page.contains("%ASSETS%"));

    let (edit, view) = new_session(&app.router).await;
    let rename = |token: &str, name: &str| {
        (
            format!("/api/s/{token}/name"),
            json!({"name": name}).to_string(),
        )
    };
    let (uri, body) = rename(&edit, "  α scan, run 2 ");
    let (status, answer) = send_json(&app.router, Method::PUT, &uri, body).await;
    assert_eq!(status, StatusCode::OK, "{answer}");
    assert_eq!(answer["name"], "α scan, run 2");
    let (_, info) = send_json(&app.router, Method::GET, &format!("/api/s/{view}"), "").await;
    assert_eq!(info["name"], "α scan, run 2");

    let (uri, body) = rename(&view, "taken over");
    let (status, _) = send_json(&app.router, Method::PUT, &uri, body).await;
    assert_eq!(status, StatusCode::FORBIDDEN);
    let (uri, body) = rename(&edit, &"x".repeat(201));
    let (status, answer) = send_json(&app.router, Method::PUT, &uri, body).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(
        answer["error"].as_str().expect("message").contains("200"),
        "{answer}"
    );
    let (status, _) = send_json(
        &app.router,
        Method::PUT,
        &format!("/api/s/{edit}/name"),
        "{\"nam\": 1}",
    )
    .await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    let (_, info) = send_json(&app.router, Method::GET, &format!("/api/s/{view}"), "").await;
    assert_eq!(
        info["name"], "α scan, run 2",
        "refused renames changed nothing"
    );
}
