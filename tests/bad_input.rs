//! The bad-input corpus (`tests/data/bad/`, made by `make_corpus.py`): every
//! file is refused with a 4xx naming its place, nothing is stored, and the
//! server keeps serving.

use axum::http::{Method, StatusCode};

use crate::support::{SMALL_CSV, app, dataset_count, new_session, repo_path, send_json};

/// (file, line a problem must name, phrase a reason must contain).
fn corpus() -> Vec<(String, Option<usize>, Option<String>)> {
    let text = std::fs::read_to_string(repo_path("tests/data/bad/expect.tsv")).expect("expect.tsv");
    text.lines()
        .filter(|l| !l.starts_with('#') && !l.trim().is_empty())
        .map(|l| {
            let cols: Vec<&str> = l.split('\t').collect();
            assert_eq!(cols.len(), 3, "expect.tsv row `{l}`");
            let line = (cols[1] != "-").then(|| cols[1].parse().expect("line number"));
            let phrase = (cols[2] != "-").then(|| cols[2].to_string());
            (cols[0].to_string(), line, phrase)
        })
        .collect()
}

#[tokio::test]
async fn every_bad_file_is_refused_with_its_place_and_nothing_is_stored() {
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let files = corpus();
    assert!(files.len() >= 40, "the corpus has {} files", files.len());
    let mut failures = Vec::new();
    for (file, line, phrase) in &files {
        let bytes = std::fs::read(repo_path(&format!("tests/data/bad/{file}"))).expect("readable");
        let ext = file.rsplit('.').next().expect("extension");
        let mut uri = format!("/api/s/{edit}/datasets?name={file}&format={ext}");
        if ext == "npy" {
            uri.push_str("&x=-1:1&t=0:1:3");
        }
        let (status, body) = send_json(&app.router, Method::POST, &uri, bytes).await;
        if status != StatusCode::UNPROCESSABLE_ENTITY {
            failures.push(format!("{file}: status {status}, body {body}"));
            continue;
        }
        let problems = body["problems"].as_array().cloned().unwrap_or_default();
        if problems.is_empty() {
            failures.push(format!("{file}: no problems listed"));
        }
        if let Some(line) = line {
            let named = problems
                .iter()
                .any(|p| p["line"].as_u64() == Some(*line as u64));
            if !named {
                failures.push(format!("{file}: line {line} not named in {body}"));
            }
        }
        if let Some(phrase) = phrase {
            let said = problems.iter().any(|p| {
                p["reason"]
                    .as_str()
                    .is_some_and(|r| r.to_lowercase().contains(phrase.as_str()))
            });
            if !said {
                failures.push(format!("{file}: no reason mentions `{phrase}` in {body}"));
            }
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
    assert_eq!(dataset_count(&app.router, &edit).await, 0, "nothing stored");
    let ok = format!("/api/s/{edit}/datasets?name=good.csv");
    let (status, _) = send_json(&app.router, Method::POST, &ok, SMALL_CSV).await;
    assert_eq!(status, StatusCode::CREATED, "still serving");
}
