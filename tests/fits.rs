//! Fits through the API: the envelope's provenance, windows, bad requests,
//! collapse quality for sliders, job progress events.

use axum::http::{Method, StatusCode};
use serde_json::{Value, json};

use crate::support::{app, gaussian_csv, new_session, open_events, send_json, upload_csv};

async fn upload_gaussian(router: &axum::Router, edit: &str) -> i64 {
    upload_csv(router, edit, "gauss.csv", gaussian_csv()).await
}

#[tokio::test]
async fn tail_fit_recovers_the_diffusive_exponent_with_provenance() {
    let app = app().await;
    let (edit, view) = new_session(&app.router).await;
    let id = upload_gaussian(&app.router, &edit).await;
    let body = json!({"method": "tail", "windows": {"t_min": 3.0}});
    // Fits do not write: a view link may run them.
    let (status, fit) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{view}/datasets/{id}/fits"),
        body.to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{fit}");
    let z = fit["parameters"]["z"]["value"].as_f64().expect("z");
    // C(0,t) = (2πt)^{-1/2} exactly here, so z = 2 up to rounding.
    assert!((z - 2.0).abs() < 1e-6, "z = {z}");
    assert_eq!(fit["method"], "tail");
    assert_eq!(fit["windows"]["t_min"], 3.0);
    assert_eq!(fit["dataset"], id);
    assert_eq!(fit["dataset_hash"].as_str().map(str::len), Some(64));
    assert!(
        fit["program_version"]
            .as_str()
            .expect("version")
            .starts_with("spreadscope")
    );
    assert!(fit["report"]["t_window"][0].as_f64().expect("window") >= 3.0);
    assert!(
        fit["report"]["local_exponent"]
            .as_array()
            .is_some_and(|a| !a.is_empty())
    );

    // The result pins as it is, with its provenance.
    let pin = json!({"author": "Ada", "comment": "diffusive", "dataset": id, "fit": fit});
    let (status, entry) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/log"),
        pin.to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::CREATED);
    assert_eq!(
        entry["fit"]["parameters"]["z"]["value"],
        fit["parameters"]["z"]["value"]
    );
}

#[tokio::test]
async fn collapse_fit_and_slider_quality_find_z_two() {
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let id = upload_gaussian(&app.router, &edit).await;
    let body = json!({"method": "collapse", "windows": {"t_min": 10.0}, "options": {"bootstrap": 10, "seed": 3, "z_min": 1.0, "z_max": 3.0}});
    let (status, fit) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets/{id}/fits"),
        body.to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{fit}");
    let z = fit["parameters"]["z"]["value"].as_f64().expect("z");
    assert!((z - 2.0).abs() < 0.02, "z = {z}");
    assert_eq!(fit["seed"], 3);
    let at = |z: f64| format!("/api/s/{edit}/datasets/{id}/collapse-quality?z={z}&t_min=10");
    let (_, good) = send_json(&app.router, Method::GET, &at(2.0), "").await;
    let (_, poor) = send_json(&app.router, Method::GET, &at(1.2), "").await;
    let (s_good, s_poor) = (
        good["quality"].as_f64().expect("S"),
        poor["quality"].as_f64().expect("S"),
    );
    // Noise-free lattice data: S(2) is not 0 only through the linear
    // interpolation of the neighbouring curves; a wrong z is far worse.
    assert!(s_good < s_poor / 50.0, "S(2) = {s_good}, S(1.2) = {s_poor}");
    let (status, _) = send_json(&app.router, Method::GET, &at(-1.0), "").await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
}

#[tokio::test]
async fn collapse_fit_gives_d_and_the_slider_measures_the_same_default_window() {
    // The Gaussian of the shared helper is exp(−x²/(4Dt))/√(4πDt) with
    // D = 1/2 (σ² = 2Dt; physics notes, closed form), so the collapse must
    // return z = 2 and D = 1/2.
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let id = upload_gaussian(&app.router, &edit).await;
    let body = json!({"method": "collapse", "options": {"bootstrap": 10, "seed": 1}});
    let (status, fit) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets/{id}/fits"),
        body.to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{fit}");
    let z = fit["parameters"]["z"]["value"].as_f64().expect("z");
    let d = fit["parameters"]["D"]["value"].as_f64().expect("D");
    assert!((z - 2.0).abs() < 1e-3, "z = {z}");
    assert!((d - 0.5).abs() < 5e-3, "D = {d}");
    assert!(fit["parameters"]["D"]["err"].as_f64().is_some(), "{fit}");
    // No window given: the slider closes it with the same rule as the fit,
    // so S at the fitted z is the fit's S.
    let (status, slider) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{edit}/datasets/{id}/collapse-quality?z={z}"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{slider}");
    let s_fit = fit["quality"]["collapse_quality"].as_f64().expect("S");
    let s_slider = slider["quality"].as_f64().expect("S");
    assert!(
        (s_fit - s_slider).abs() <= 1e-9 * s_fit.abs().max(1.0),
        "fit S = {s_fit}, slider S = {s_slider}"
    );
}

#[tokio::test]
async fn bad_fit_requests_name_their_field() {
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let id = upload_gaussian(&app.router, &edit).await;
    let uri = format!("/api/s/{edit}/datasets/{id}/fits");
    for (body, field) in [
        (
            json!({"method": "tail", "windows": {"t_min": 50.0, "t_max": 10.0}}),
            "t_min",
        ),
        (
            json!({"method": "tail", "windows": {"t_min": 1000.0}}),
            "windows",
        ),
        (json!({"method": "magic"}), "method"),
        (json!({"method": "collapse", "options": {"zz": 1}}), "zz"),
        // An option the method does not read is refused, not ignored.
        (
            json!({"method": "collapse", "options": {"q": 0.5}}),
            "option `q` does not apply to the scaling collapse",
        ),
        (
            json!({"method": "tail", "options": {"bootstrap": 10}}),
            "option `bootstrap` does not apply to the autocorrelation tail fit",
        ),
    ] {
        let (status, err) = send_json(&app.router, Method::POST, &uri, body.to_string()).await;
        assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{body}");
        assert!(
            err["error"].as_str().expect("message").contains(field),
            "{err}"
        );
    }
    let (status, _) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets/999/fits"),
        json!({"method": "tail"}).to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::NOT_FOUND);
    let (_, cancel) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/jobs/none/cancel"),
        "",
    )
    .await;
    assert_eq!(cancel["cancelled"], false);
}

#[tokio::test]
async fn a_fit_with_a_job_id_reports_progress_as_events() {
    use http_body_util::BodyExt;
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let id = upload_gaussian(&app.router, &edit).await;
    let mut events = open_events(&app.router, &edit).await.into_body();
    let body = json!({"method": "width", "job": "job-7"});
    let (status, _) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets/{id}/fits"),
        body.to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::OK);
    let mut seen: Vec<f64> = Vec::new();
    while !seen.iter().any(|&f| f >= 1.0) {
        let frame = tokio::time::timeout(std::time::Duration::from_secs(5), events.frame())
            .await
            .expect("events arrive")
            .expect("frame")
            .expect("ok");
        let text = String::from_utf8(frame.into_data().expect("data").to_vec()).expect("utf-8");
        for line in text.lines().filter_map(|l| l.strip_prefix("data: ")) {
            let v: Value = serde_json::from_str(line).expect("json");
            if v["kind"] == "job-progress" && v["job"] == "job-7" {
                seen.push(v["fraction"].as_f64().expect("fraction"));
            }
        }
    }
    // Starts at 0, ends at 1, never goes back (the window-family steps lie
    // in between).
    assert_eq!(seen.first().copied(), Some(0.0));
    assert!(seen.windows(2).all(|w| w[1] >= w[0]), "{seen:?}");
}

#[tokio::test]
async fn theory_overlays_use_the_dataset_metadata_and_give_residuals_self_consistent() {
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    // A lattice-walk map written by the same engine, so the residual of the
    // same model must vanish (to the 17 significant digits printed).
    let walk = spreadscope_physics::model::lattice_walk::LatticeWalk::power_law(15, 1.0, 1.3)
        .expect("walk");
    let map = walk.to_correlation_map(7, &[0.5, 1.0, 2.0]).expect("map");
    let csv = spreadscope::cli::long_csv::to_long_csv(&map, &["synthetic: true".into()]);
    let (_, ds) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets?name=w.csv"),
        csv,
    )
    .await;
    let id = ds["id"].as_i64().expect("id");
    let uri = format!("/api/s/{edit}/datasets/{id}/theory");
    let (status, err) = send_json(
        &app.router,
        Method::POST,
        &uri,
        json!({"model": "lattice_walk"}).to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(
        err["error"].as_str().expect("message").contains("sites"),
        "{err}"
    );
    let meta = json!({"chain_length": 15, "source_site": 7, "alpha": 1.3});
    send_json(
        &app.router,
        Method::PUT,
        &format!("/api/s/{edit}/datasets/{id}/meta"),
        meta.to_string(),
    )
    .await;
    let (status, theory) = send_json(
        &app.router,
        Method::POST,
        &uri,
        json!({"model": "lattice_walk"}).to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{theory}");
    let worst = theory["residual"]
        .as_array()
        .expect("rows")
        .iter()
        .flat_map(|r| {
            r.as_array()
                .expect("row")
                .iter()
                .map(|v| v.as_f64().expect("value").abs())
        })
        .fold(0.0f64, f64::max);
    assert!(worst < 1e-15, "residual {worst}");
    // Another α leaves a visible residual.
    let (_, other) = send_json(
        &app.router,
        Method::POST,
        &uri,
        json!({"model": "lattice_walk", "alpha": 2.0}).to_string(),
    )
    .await;
    let r = other["residual"][2][7].as_f64().expect("centre");
    assert!(r.abs() > 1e-3, "residual at the source {r}");
}

#[tokio::test]
async fn long_chain_overlays_say_their_method_and_time_first_and_take_a_coupling_matrix_self_consistent()
 {
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    // A 41-site lattice-walk map as the dataset (the overlay's own accuracy
    // is the physics crate's concern; here the route's choices are checked).
    let walk = spreadscope_physics::model::lattice_walk::LatticeWalk::power_law(41, 1.0, 1.2)
        .expect("walk");
    let map = walk.to_correlation_map(20, &[0.0, 0.5, 1.0]).expect("map");
    let csv = spreadscope::cli::long_csv::to_long_csv(
        &map,
        &[
            "synthetic: true".into(),
            "chain_length: 41".into(),
            "alpha: 1.2".into(),
        ],
    );
    let (_, ds) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets?name=long.csv"),
        csv,
    )
    .await;
    let id = ds["id"].as_i64().expect("id");
    let uri = format!("/api/s/{edit}/datasets/{id}/theory");
    let ask =
        |body: serde_json::Value| send_json(&app.router, Method::POST, &uri, body.to_string());
    // Before running: the method `auto` picks at 41 sites, and a time.
    let (status, plan) = ask(json!({"model": "spin_chain", "plan": true})).await;
    assert_eq!(status, StatusCode::OK, "{plan}");
    assert!(
        plan["method"]
            .as_str()
            .expect("method")
            .starts_with("semiclassical DTWA"),
        "{plan}"
    );
    let seconds = plan["seconds"].as_f64().expect("seconds");
    assert!(seconds > 0.0 && seconds < 60.0, "{plan}");
    assert_eq!(plan["sites"], 41);
    // Small chains keep the exact methods.
    let (_, small) = ask(json!({"model": "spin_chain", "plan": true, "sites": 10})).await;
    assert!(
        small["method"]
            .as_str()
            .expect("method")
            .starts_with("exact"),
        "{small}"
    );
    // The run: every offset of the chain, the caveat said.
    let (status, run) = ask(json!({"model": "spin_chain", "trajectories": 64, "seed": 3})).await;
    assert_eq!(status, StatusCode::OK, "{run}");
    assert!(
        run["method"].as_str().expect("method").contains("DTWA"),
        "{run}"
    );
    assert!(
        run["warnings"]
            .as_array()
            .expect("warnings")
            .iter()
            .any(|w| w.as_str().is_some_and(|s| s.contains("short-range chains"))),
        "{run}"
    );
    let sum: f64 = run["C"][2]
        .as_array()
        .expect("row")
        .iter()
        .map(|v| v.as_f64().expect("value"))
        .sum();
    // Σ_i C_i,source = 1 exactly for every DTWA pair (physics notes).
    assert!((sum - 1.0).abs() < 1e-9, "sum rule {sum}");
    // A measured coupling matrix sets the chain: the 41 × 41 power law
    // J = 1/|i−j|^1.2 given as rows gives the walk of the metadata's α.
    let rows: Vec<Vec<f64>> = (0..41)
        .map(|i: i32| {
            (0..41)
                .map(|j: i32| {
                    if i == j {
                        0.0
                    } else {
                        f64::from((i - j).abs()).powf(-1.2)
                    }
                })
                .collect()
        })
        .collect();
    let (status, walk_run) = ask(json!({"model": "lattice_walk", "couplings": rows})).await;
    assert_eq!(status, StatusCode::OK, "{walk_run}");
    assert_eq!(walk_run["parameters"]["coupling_matrix"], true);
    let worst = walk_run["residual"]
        .as_array()
        .expect("rows")
        .iter()
        .flat_map(|r| {
            r.as_array()
                .expect("row")
                .iter()
                .map(|v| v.as_f64().expect("v").abs())
        })
        .fold(0.0f64, f64::max);
    assert!(worst < 1e-12, "residual {worst}");
    let (status, ragged) =
        ask(json!({"model": "lattice_walk", "couplings": [[0.0, 1.0], [1.0]]})).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{ragged}");
    assert!(
        ragged["error"].as_str().expect("error").contains("row 2"),
        "{ragged}"
    );
}

#[tokio::test]
async fn the_scaling_function_is_the_stable_density_in_collapse_units() {
    let app = app().await;
    let (_, view) = new_session(&app.router).await;
    // μ = 1: y(u) = s/(π(s² + u²)) with s = D (Cauchy, the physics notes: z = 1 is a
    // Lorentzian of half-width Dt, so D t^{…} scale s = D at unit time).
    let (status, f) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/scaling-function?mu=1&D=0.5&u_min=-2&u_max=2&n=5"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{f}");
    for (u, y) in f["u"]
        .as_array()
        .expect("u")
        .iter()
        .zip(f["f"].as_array().expect("f"))
    {
        let (u, y) = (u.as_f64().expect("u"), y.as_f64().expect("f"));
        let cauchy = 0.5 / (std::f64::consts::PI * (0.25 + u * u));
        assert!((y - cauchy).abs() < 1e-12 * cauchy, "u = {u}");
    }
    let (status, err) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{view}/scaling-function?mu=1&D=-1&u_min=-2&u_max=2"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(err["error"].as_str().expect("message").contains("`D`"));
}

#[tokio::test]
async fn profile_lattice_walk_and_analysis_methods_run_through_the_api() {
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let id = upload_gaussian(&app.router, &edit).await;
    let uri = format!("/api/s/{edit}/datasets/{id}/fits");
    let body = json!({"method": "profile", "options": {"bootstrap": 0}});
    let (status, fit) = send_json(&app.router, Method::POST, &uri, body.to_string()).await;
    assert_eq!(status, StatusCode::OK, "{fit}");
    // The data are the closed-form Gaussian with D = 0.5 (see gaussian_csv):
    // sampled at integer x its lattice sum differs from the continuum only
    // by terms of order exp(−π²·4Dt), far below the stated errors.
    let d = fit["parameters"]["D"]["value"].as_f64().expect("D");
    assert!((d - 0.5).abs() < 1e-3, "D = {d}");
    assert_eq!(fit["quality"]["preferred"], "gaussian");
    // The overlay is the fitted Gaussian; the residual is data − model and
    // small against the stated error 1e-4.
    let worst = fit["overlay"]["residual"]["values"]
        .as_array()
        .expect("rows")
        .iter()
        .flat_map(|r| {
            r.as_array()
                .expect("row")
                .iter()
                .filter_map(serde_json::Value::as_f64)
        })
        .fold(0.0f64, |m, v| m.max(v.abs()));
    assert!(worst < 1e-3, "largest residual {worst}");

    // A lattice walk written by the engine: the walk fit recovers (γ0, α).
    let walk = spreadscope_physics::model::lattice_walk::LatticeWalk::power_law(31, 0.8, 1.1)
        .expect("walk");
    let map = walk
        .to_correlation_map(15, &[0.5, 1.0, 2.0, 3.0])
        .expect("map");
    let csv = spreadscope::cli::long_csv::to_long_csv(&map, &[]);
    let (_, ds) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets?name=w.csv"),
        csv,
    )
    .await;
    let wid = ds["id"].as_i64().expect("id");
    let wuri = format!("/api/s/{edit}/datasets/{wid}/fits");
    let (status, err) = send_json(
        &app.router,
        Method::POST,
        &wuri,
        json!({"method": "lattice_walk"}).to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(err["error"].as_str().expect("message").contains("sites"));
    let body = json!({"method": "lattice_walk", "options": {"sites": 31, "source": 15}});
    let (status, fit) = send_json(&app.router, Method::POST, &wuri, body.to_string()).await;
    assert_eq!(status, StatusCode::OK, "{fit}");
    let alpha = fit["parameters"]["alpha"]["value"].as_f64().expect("alpha");
    let gamma0 = fit["parameters"]["gamma0"]["value"]
        .as_f64()
        .expect("gamma0");
    assert!(
        (alpha - 1.1).abs() < 1e-6 && (gamma0 - 0.8).abs() < 1e-6,
        "α = {alpha}, γ0 = {gamma0}"
    );
    // The curves drawn over the data are the fitted walk: on this exact walk
    // map the residual vanishes to the fit's precision (self-consistent).
    let worst = fit["overlay"]["residual"]["values"]
        .as_array()
        .expect("residual rows")
        .iter()
        .flat_map(|r| r.as_array().expect("row").iter().filter_map(Value::as_f64))
        .fold(0.0f64, |w, v| w.max(v.abs()));
    assert!(worst < 1e-6, "largest residual of the walk overlay {worst}");

    let (status, all) = send_json(
        &app.router,
        Method::POST,
        &uri,
        json!({"method": "analysis", "options": {"bootstrap": 0}}).to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{all}");
    assert!(
        all["report"]["text"]
            .as_str()
            .is_some_and(|t| !t.is_empty())
    );
    assert!(all["parameters"]["z"]["value"].as_f64().is_some());
}

#[tokio::test]
async fn analysis_returns_the_verdict_and_the_windows_of_the_one_rule_and_pins_them() {
    // The Gaussian map above (closed form, z = 2): the page's default
    // windows (dataset route), the analysis and a collapse without windows
    // all use the same window; the verdict is diffusive; the pinned entry
    // keeps the windows and the verdict.
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let id = upload_gaussian(&app.router, &edit).await;
    let (_, detail) = send_json(
        &app.router,
        Method::GET,
        &format!("/api/s/{edit}/datasets/{id}"),
        "",
    )
    .await;
    let defaults = &detail["default_windows"];
    assert!(defaults["t_min"].as_f64().is_some(), "{defaults}");
    assert!(defaults["rule"].as_str().is_some_and(|r| !r.is_empty()));
    let uri = format!("/api/s/{edit}/datasets/{id}/fits");
    let (status, all) = send_json(
        &app.router,
        Method::POST,
        &uri,
        json!({"method": "analysis", "options": {"bootstrap": 0}}).to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{all}");
    assert_eq!(
        all["verdict"]["class"], "diffusive",
        "{}",
        all["report"]["text"]
    );
    assert_eq!(all["windows"]["t_min"], defaults["t_min"]);
    assert_eq!(all["windows"]["t_max"], defaults["t_max"]);
    assert!(
        all["parameters"]["z"]["err_sys"].as_f64().is_some(),
        "{all}"
    );
    let (status, collapse) = send_json(
        &app.router,
        Method::POST,
        &uri,
        json!({"method": "collapse", "options": {"bootstrap": 0}}).to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{collapse}");
    assert_eq!(collapse["windows"]["t_min"], defaults["t_min"]);
    assert_eq!(collapse["bootstrap"], 0);
    let pin = json!({"author": "Ada", "comment": "verdict", "dataset": id, "fit": all});
    let (status, entry) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/log"),
        pin.to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::CREATED);
    assert_eq!(entry["fit"]["windows"]["t_min"], defaults["t_min"]);
    assert_eq!(entry["fit"]["verdict"]["class"], "diffusive");
}

#[tokio::test]
async fn a_running_analysis_reports_steps_and_stops_when_cancelled() {
    use http_body_util::BodyExt;
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let id = upload_gaussian(&app.router, &edit).await;
    let mut events = open_events(&app.router, &edit).await.into_body();
    let router = app.router.clone();
    let uri = format!("/api/s/{edit}/datasets/{id}/fits");
    let running = tokio::spawn(async move {
        send_json(
            &router,
            Method::POST,
            &uri,
            json!({"method": "analysis", "job": "job-c", "options": {"bootstrap": 400}})
                .to_string(),
        )
        .await
    });
    // Wait for a progress step strictly between start and end.
    loop {
        let frame = tokio::time::timeout(std::time::Duration::from_secs(30), events.frame())
            .await
            .expect("events arrive")
            .expect("frame")
            .expect("ok");
        let text = String::from_utf8(frame.into_data().expect("data").to_vec()).expect("utf-8");
        let step = text
            .lines()
            .filter_map(|l| l.strip_prefix("data: "))
            .filter_map(|l| serde_json::from_str::<Value>(l).ok())
            .any(|v| {
                v["kind"] == "job-progress"
                    && v["job"] == "job-c"
                    && v["fraction"].as_f64().is_some_and(|f| f > 0.0 && f < 1.0)
            });
        if step {
            break;
        }
    }
    let (_, cancel) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/jobs/job-c/cancel"),
        "",
    )
    .await;
    assert_eq!(cancel["cancelled"], true);
    let (status, body) = running.await.expect("joins");
    assert_eq!(status, StatusCode::CONFLICT, "{body}");
}

#[tokio::test]
async fn a_running_collapse_reports_each_replicate_and_stops_when_cancelled() {
    use http_body_util::BodyExt;
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let id = upload_gaussian(&app.router, &edit).await;
    let mut events = open_events(&app.router, &edit).await.into_body();
    let router = app.router.clone();
    let uri = format!("/api/s/{edit}/datasets/{id}/fits");
    // Far more replicates than can finish before the cancel arrives.
    let running = tokio::spawn(async move {
        send_json(
            &router,
            Method::POST,
            &uri,
            json!({"method": "collapse", "job": "job-r", "options": {"bootstrap": 20000}})
                .to_string(),
        )
        .await
    });
    // Progress moves through the replicates: several distinct fractions
    // strictly between start and end.
    let mut inside: Vec<f64> = Vec::new();
    while inside.len() < 3 {
        let frame = tokio::time::timeout(std::time::Duration::from_secs(60), events.frame())
            .await
            .expect("events arrive")
            .expect("frame")
            .expect("ok");
        let text = String::from_utf8(frame.into_data().expect("data").to_vec()).expect("utf-8");
        for v in text
            .lines()
            .filter_map(|l| l.strip_prefix("data: "))
            .filter_map(|l| serde_json::from_str::<Value>(l).ok())
        {
            if v["kind"] == "job-progress" && v["job"] == "job-r" {
                let f = v["fraction"].as_f64().expect("fraction");
                if f > 0.0 && f < 1.0 && !inside.contains(&f) {
                    inside.push(f);
                }
            }
        }
    }
    assert!(inside.windows(2).all(|w| w[1] > w[0]), "{inside:?}");
    let (_, cancel) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/jobs/job-r/cancel"),
        "",
    )
    .await;
    assert_eq!(cancel["cancelled"], true);
    let (status, body) = running.await.expect("joins");
    assert_eq!(status, StatusCode::CONFLICT, "{body}");
}

#[tokio::test]
async fn d_follows_the_requested_convention_in_collapse_and_profile_fits() {
    // The helper's Gaussian has D = 1/2 in s(t) = (D t)^{1/z}; written as
    // s(t) = D' t^{1/z} it is D' = D^{1/2} = 0.7071 (z = 2; physics notes).
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let id = upload_gaussian(&app.router, &edit).await;
    for method in ["collapse", "profile"] {
        for (convention, expected) in [("rate", 0.5), ("prefactor", 0.5f64.sqrt())] {
            let body =
                json!({"method": method, "options": {"bootstrap": 4, "d_convention": convention}});
            let (status, fit) = send_json(
                &app.router,
                Method::POST,
                &format!("/api/s/{edit}/datasets/{id}/fits"),
                body.to_string(),
            )
            .await;
            assert_eq!(status, StatusCode::OK, "{fit}");
            let d = fit["parameters"]["D"]["value"].as_f64().expect("D");
            assert!(
                (d - expected).abs() < 5e-3,
                "{method} {convention}: D = {d}"
            );
            assert!(
                fit["d_convention"]
                    .as_str()
                    .is_some_and(|w| w.contains(if convention == "rate" {
                        "(D t)"
                    } else {
                        "D t^"
                    })),
                "{fit}"
            );
        }
    }
}
