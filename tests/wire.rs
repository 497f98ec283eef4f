//! The page's types against the routes: every JSDoc typedef of
//! `web/js/api.js` that describes an answer is compared with what the route
//! actually returns. A property the typedef requires must be present, and
//! for the typedefs marked closed here every key the server sends must be
//! declared — so a field renamed or added on either side fails this test
//! instead of leaving a blank on the page.

use std::collections::BTreeMap;

use axum::http::{Method, StatusCode};
use serde_json::{Value, json};

use crate::support::{app, gaussian_csv, new_session, repo_path, send_json, upload_csv};

/// One typedef: its properties, with whether each is optional (`[name]`).
type Typedef = BTreeMap<String, bool>;

/// The `@typedef {object}` blocks of a JSDoc file and their `@property` lines.
fn typedefs(text: &str) -> BTreeMap<String, Typedef> {
    let mut out = BTreeMap::new();
    let mut current: Option<(String, Typedef)> = None;
    for line in text.lines() {
        let line = line.trim_start().trim_start_matches('*').trim();
        if let Some(name) = line.strip_prefix("@typedef {object} ") {
            if let Some((n, t)) = current.take() {
                out.insert(n, t);
            }
            current = Some((name.trim().to_string(), Typedef::new()));
        } else if let Some(rest) = line.strip_prefix("@property ") {
            let Some((_, t)) = current.as_mut() else {
                continue;
            };
            // Skip the braced type, which may nest braces.
            let mut depth = 0usize;
            let mut end = 0;
            for (i, c) in rest.char_indices() {
                match c {
                    '{' => depth += 1,
                    '}' => {
                        depth -= 1;
                        if depth == 0 {
                            end = i + 1;
                            break;
                        }
                    }
                    _ => {}
                }
            }
            let name = rest[end..].split_whitespace().next().unwrap_or("");
            let optional = name.starts_with('[');
            t.insert(name.trim_matches(['[', ']']).to_string(), optional);
        } else if line.starts_with("*/") || line == "/" {
            if let Some((n, t)) = current.take() {
                out.insert(n, t);
            }
        }
    }
    if let Some((n, t)) = current.take() {
        out.insert(n, t);
    }
    out
}

/// Compares one JSON object with its typedef; returns the mismatches.
fn compare(name: &str, typedef: &Typedef, value: &Value, closed: bool) -> Vec<String> {
    let Some(object) = value.as_object() else {
        return vec![format!("{name}: the route answered {value}, not an object")];
    };
    let mut out = Vec::new();
    for (property, optional) in typedef {
        if !optional && !object.contains_key(property) {
            out.push(format!("{name}: the server no longer sends `{property}`"));
        }
    }
    if closed {
        for key in object.keys() {
            if !typedef.contains_key(key) {
                out.push(format!(
                    "{name}: the server sends `{key}`, which web/js/api.js does not declare"
                ));
            }
        }
    }
    out
}

#[tokio::test]
async fn the_page_s_types_match_what_the_routes_send() {
    let text = std::fs::read_to_string(repo_path("web/js/api.js")).expect("api.js");
    let defs = typedefs(&text);
    let def = |n: &str| {
        defs.get(n)
            .unwrap_or_else(|| panic!("no typedef {n} in api.js"))
    };
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let id = upload_csv(&app.router, &edit, "g.csv", gaussian_csv()).await;
    let meta = json!({"chain_length": 61, "alpha": 2.5, "time_unit": "1/J", "synthetic": true});
    let (status, _) = send_json(
        &app.router,
        Method::PUT,
        &format!("/api/s/{edit}/datasets/{id}/meta"),
        meta.to_string(),
    )
    .await;
    assert_eq!(status, StatusCode::OK);
    let get = |uri: String| {
        let router = app.router.clone();
        async move {
            let (status, v) = send_json(&router, Method::GET, &uri, "").await;
            assert_eq!(status, StatusCode::OK, "{uri}: {v}");
            v
        }
    };
    let post = |uri: String, body: Value| {
        let router = app.router.clone();
        async move {
            let (status, v) = send_json(&router, Method::POST, &uri, body.to_string()).await;
            assert_eq!(status, StatusCode::OK, "{uri}: {v}");
            v
        }
    };
    let mut problems = Vec::new();
    let dataset = get(format!("/api/s/{edit}/datasets/{id}")).await;
    problems.extend(compare(
        "DatasetMeta",
        def("DatasetMeta"),
        &dataset["meta"],
        true,
    ));
    let fits = format!("/api/s/{edit}/datasets/{id}/fits");
    let tail = post(fits.clone(), json!({"method": "tail"})).await;
    problems.extend(compare("FitResult", def("FitResult"), &tail, true));
    problems.extend(compare(
        "FitParameter",
        def("FitParameter"),
        &tail["parameters"]["z"],
        true,
    ));
    let analysis = post(
        fits,
        json!({"method": "analysis", "options": {"bootstrap": 0}}),
    )
    .await;
    problems.extend(compare(
        "Verdict",
        def("Verdict"),
        &analysis["verdict"],
        true,
    ));
    let quality = get(format!(
        "/api/s/{edit}/datasets/{id}/collapse-quality?z=2&t_min=1"
    ))
    .await;
    problems.extend(compare(
        "CollapseQualityAnswer",
        def("CollapseQualityAnswer"),
        &quality,
        true,
    ));
    let scaling = get(format!(
        "/api/s/{edit}/scaling-function?mu=1.5&D=0.5&u_min=-2&u_max=2&n=5"
    ))
    .await;
    problems.extend(compare(
        "ScalingFunction",
        def("ScalingFunction"),
        &scaling,
        true,
    ));
    let theory = format!("/api/s/{edit}/datasets/{id}/theory");
    let plan = post(
        theory.clone(),
        json!({"model": "lattice_walk", "plan": true}),
    )
    .await;
    problems.extend(compare("TheoryPlan", def("TheoryPlan"), &plan, true));
    let overlay = post(theory, json!({"model": "lattice_walk"})).await;
    problems.extend(compare("TheoryResult", def("TheoryResult"), &overlay, true));
    let shots = std::fs::read(repo_path("tests/reference/shots/shots.csv")).expect("fixture");
    let (status, shot_dataset) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/shots?name=s.csv&bootstrap=10&source=0"),
        shots,
    )
    .await;
    assert_eq!(status, StatusCode::CREATED, "{shot_dataset}");
    let shot_id = shot_dataset["id"].as_i64().expect("id");
    let view = get(format!("/api/s/{edit}/datasets/{shot_id}/shots")).await;
    problems.extend(compare("ShotView", def("ShotView"), &view, true));
    let matrix = "0,1,0.5\n1,0,1\n0.5,1,0\n";
    let (status, couplings) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/couplings"),
        matrix,
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{couplings}");
    problems.extend(compare(
        "CouplingAnswer",
        def("CouplingAnswer"),
        &couplings,
        true,
    ));
    // The fit's report carries far more than the page reads: open.
    problems.extend(compare(
        "CouplingFit",
        def("CouplingFit"),
        &couplings["fit"],
        false,
    ));
    assert!(problems.is_empty(), "{}", problems.join("\n"));
}

#[test]
fn the_typedef_reader_sees_optional_and_nested_types() {
    let text = "/**\n * @typedef {object} A\n * @property {Record<string, {a: number}>} m\n \
                * @property {number} [n] note\n */\n/**\n * @typedef {object} B\n * @property {string} s\n */";
    let defs = typedefs(text);
    assert_eq!(defs["A"].get("m"), Some(&false));
    assert_eq!(defs["A"].get("n"), Some(&true));
    assert_eq!(defs["B"].len(), 1);
    let problems = compare("B", &defs["B"], &json!({"s": "x", "extra": 1}), true);
    assert_eq!(problems.len(), 1, "{problems:?}");
    assert!(compare("B", &defs["B"], &json!({}), false)[0].contains("no longer sends `s`"));
}
