//! Data arriving from the lab, and the faults on its way: idempotent
//! uploads (router and a lost answer on a real socket), `push` and the
//! README's Python recipe, the watched folder (half-written files, bad
//! files, restarts, kill -9 mid-ingest), archives (round trip, truncated,
//! altered), the online backup under writes, a full disk, HTTPS with a
//! self-signed certificate, and identical fits under a crowd.

use std::io::Write;
use std::path::Path;
use std::process::Command;
use std::time::{Duration, Instant};

use axum::http::{Method, StatusCode};
use serde_json::{Value, json};

use crate::support::{
    SMALL_CSV, Server, app, binary, dataset_count, http, new_session, pin, repo_path, send,
    send_json,
};

fn token_of(link: &str) -> String {
    link.rsplit('/').next().expect("token").to_string()
}

/// A valid long CSV map of `sites` × `times` points (a flat profile; the
/// values only need to parse).
fn map_csv(sites: i32, times: usize) -> String {
    let mut csv = String::from("x,t,C\n");
    for k in 0..times {
        for x in -(sites / 2)..=(sites / 2) {
            csv.push_str(&format!(
                "{x},{},{}\n",
                0.5 + k as f64,
                1.0 / f64::from(sites)
            ));
        }
    }
    csv
}

fn wait_until(what: &str, limit: Duration, mut done: impl FnMut() -> bool) {
    let start = Instant::now();
    while !done() {
        assert!(start.elapsed() < limit, "timed out waiting for {what}");
        std::thread::sleep(Duration::from_millis(100));
    }
}

fn datasets_over_socket(base: &str, token: &str) -> Vec<Value> {
    let (status, text) =
        http("GET", &format!("{base}/api/s/{token}/datasets"), "").expect("answers");
    assert_eq!(status, 200, "{text}");
    serde_json::from_str::<Value>(&text)
        .expect("json")
        .as_array()
        .cloned()
        .unwrap_or_default()
}

fn log_over_socket(base: &str, token: &str) -> Vec<Value> {
    let (status, text) = http("GET", &format!("{base}/api/s/{token}/log"), "").expect("answers");
    assert_eq!(status, 200, "{text}");
    serde_json::from_str::<Value>(&text)
        .expect("json")
        .as_array()
        .cloned()
        .unwrap_or_default()
}

#[tokio::test]
async fn a_retried_upload_with_the_same_key_stores_once_and_says_so() {
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let uri = format!("/api/s/{edit}/datasets?name=run1.csv&key=run1-abc");
    let (first, body) = send_json(&app.router, Method::POST, &uri, SMALL_CSV).await;
    assert_eq!(first, StatusCode::CREATED, "{body}");
    assert_eq!(body["already_stored"], json!(false));
    let (again, repeat) = send_json(&app.router, Method::POST, &uri, SMALL_CSV).await;
    assert_eq!(again, StatusCode::OK, "{repeat}");
    assert_eq!(repeat["already_stored"], json!(true));
    assert_eq!(repeat["id"], body["id"]);
    assert_eq!(dataset_count(&app.router, &edit).await, 1);
    // Racing retries (the first still in flight) store once too.
    let racers: Vec<_> = (0..6)
        .map(|_| {
            let router = app.router.clone();
            let uri = format!("/api/s/{edit}/datasets?name=run2.csv&key=run2-abc");
            tokio::spawn(async move { send_json(&router, Method::POST, &uri, SMALL_CSV).await })
        })
        .collect();
    let mut created = 0;
    for r in racers {
        let (status, _) = r.await.expect("joins");
        created += usize::from(status == StatusCode::CREATED);
    }
    assert_eq!(created, 1);
    assert_eq!(dataset_count(&app.router, &edit).await, 2);
    // A malformed key is refused by name and stores nothing.
    let bad = format!("/api/s/{edit}/datasets?name=x.csv&key=has%20space");
    let (status, body) = send_json(&app.router, Method::POST, &bad, SMALL_CSV).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(
        body["error"]
            .as_str()
            .unwrap_or_default()
            .contains("idempotency key")
    );
    assert_eq!(dataset_count(&app.router, &edit).await, 2);
}

#[test]
fn a_push_retried_after_its_answer_was_lost_stores_one_dataset() {
    let dir = tempfile::tempdir().expect("temp dir");
    let server = Server::start(dir.path());
    let (edit_link, view_link) = server.links[0].clone();
    let token = token_of(&edit_link);
    let before = datasets_over_socket(&server.base, &token).len();
    let file = dir.path().join("run9.csv");
    std::fs::write(&file, map_csv(41, 30)).expect("writes");
    let bytes = std::fs::read(&file).expect("reads");
    let key = spreadscope::push::push_key("run9.csv", &bytes);
    // Send the upload and hang up without reading the answer: the client
    // never learns whether it was stored.
    let host = server.base.trim_start_matches("http://").to_string();
    let mut stream = std::net::TcpStream::connect(&host).expect("connects");
    write!(
        stream,
        "POST /api/s/{token}/datasets?name=run9.csv HTTP/1.1\r\nHost: {host}\r\nIdempotency-Key: {key}\r\nContent-Length: {}\r\nConnection: close\r\n\r\n",
        bytes.len()
    )
    .expect("sends head");
    stream.write_all(&bytes).expect("sends body");
    stream.flush().expect("flush");
    drop(stream);
    std::thread::sleep(Duration::from_millis(300));
    for round in 0..2 {
        let out = binary()
            .args(["push", "--to", &edit_link])
            .arg(&file)
            .output()
            .expect("push runs");
        let text = String::from_utf8_lossy(&out.stdout);
        assert!(
            out.status.success(),
            "{text} {}",
            String::from_utf8_lossy(&out.stderr)
        );
        if round == 1 {
            assert!(text.contains("already there"), "{text}");
        }
    }
    let after = datasets_over_socket(&server.base, &token);
    assert_eq!(after.iter().filter(|d| d["name"] == "run9.csv").count(), 1);
    assert_eq!(after.len(), before + 1);

    // Exit codes: a view link and a bad file are bad input (2), an
    // unreachable server is a failure (1); metadata lands on the dataset.
    let view = binary()
        .args(["push", "--to", &view_link])
        .arg(&file)
        .output()
        .expect("runs");
    assert_eq!(
        view.status.code(),
        Some(2),
        "{}",
        String::from_utf8_lossy(&view.stderr)
    );
    let bad = dir.path().join("bad.csv");
    std::fs::write(&bad, "x,t,C\n0,0.5,1.0\n1,zero,0.5\n").expect("writes");
    let refused = binary()
        .args(["push", "--to", &edit_link])
        .arg(&bad)
        .output()
        .expect("runs");
    assert_eq!(refused.status.code(), Some(2));
    let line = String::from_utf8_lossy(&refused.stderr);
    assert!(
        line.contains("bad.csv") && line.contains("line 3"),
        "{line}"
    );
    let missing = binary()
        .args(["push", "--to", &edit_link, "/nonexistent/file.csv"])
        .output()
        .expect("runs");
    assert_eq!(missing.status.code(), Some(2));
    let nobody = format!("http://127.0.0.1:9/s/{token}");
    let down = binary()
        .args(["push", "--attempts", "1", "--to", &nobody])
        .arg(&file)
        .output()
        .expect("runs");
    assert_eq!(down.status.code(), Some(1));
    let named = binary()
        .args([
            "push",
            "--to",
            &edit_link,
            "--name",
            "run9 with α",
            "--meta",
            "alpha=1.5",
            "--meta",
            "platform=ion chain",
        ])
        .arg(&file)
        .output()
        .expect("runs");
    assert!(
        named.status.success(),
        "{}",
        String::from_utf8_lossy(&named.stderr)
    );
    let list = datasets_over_socket(&server.base, &token);
    let with_meta = list
        .iter()
        .find(|d| d["name"] == "run9 with α")
        .expect("stored");
    assert_eq!(with_meta["meta"]["alpha"], json!(1.5));
    assert_eq!(with_meta["meta"]["platform"], json!("ion chain"));
    assert!(server.stop().success());
}

/// The Python snippet of the README, run as written.
fn readme_recipe() -> String {
    let readme = std::fs::read_to_string(repo_path("README.md")).expect("README");
    let start = readme.find("<!-- push-recipe -->").expect("recipe marker");
    let end = readme.find("<!-- /push-recipe -->").expect("recipe end");
    let block = &readme[start..end];
    let code = block.split("```python\n").nth(1).expect("python block");
    code.split("```").next().expect("block end").to_string()
}

#[test]
fn the_readme_python_recipe_pushes_once_and_says_so_on_retry() {
    let dir = tempfile::tempdir().expect("temp dir");
    let server = Server::start(dir.path());
    let edit_link = server.links[0].0.clone();
    let token = token_of(&edit_link);
    let script = dir.path().join("push.py");
    std::fs::write(&script, readme_recipe()).expect("writes");
    let file = dir.path().join("from-python.csv");
    std::fs::write(&file, map_csv(21, 10)).expect("writes");
    let mut said = Vec::new();
    for _ in 0..2 {
        let out = Command::new("python3")
            .arg(&script)
            .arg(&file)
            .arg(&edit_link)
            .output()
            .expect("python3 runs (it is on this machine and CI)");
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        said.push(String::from_utf8_lossy(&out.stdout).into_owned());
    }
    assert!(said[0].contains("stored as dataset"), "{}", said[0]);
    assert!(said[1].contains("already there"), "{}", said[1]);
    let list = datasets_over_socket(&server.base, &token);
    assert_eq!(
        list.iter()
            .filter(|d| d["name"] == "from-python.csv")
            .count(),
        1
    );
    // The same recipe also refuses a bad file with the server's reason.
    let bad = dir.path().join("bad.csv");
    std::fs::write(&bad, "x,t,C\n0,0.5,oops\n").expect("writes");
    let out = Command::new("python3")
        .arg(&script)
        .arg(&bad)
        .arg(&edit_link)
        .output()
        .expect("runs");
    assert!(!out.status.success());
    assert!(String::from_utf8_lossy(&out.stderr).contains("422"));
    assert!(server.stop().success());
}

#[test]
fn the_watched_folder_takes_each_file_once_never_half_and_reports_bad_ones() {
    let data = tempfile::tempdir().expect("temp dir");
    let watched = tempfile::tempdir().expect("watched dir");
    // A first start creates the demo session, whose edit link feeds the folder.
    let first = Server::start(data.path());
    let edit_link = first.links[0].0.clone();
    let token = token_of(&edit_link);
    assert!(first.stop().success());
    let args = [
        std::ffi::OsStr::new("--watch"),
        watched.path().as_os_str(),
        std::ffi::OsStr::new("--into"),
        std::ffi::OsStr::new(&edit_link),
    ];
    let server = Server::start_with(data.path(), &args);
    let before = datasets_over_socket(&server.base, &token).len();

    // A file written slowly in two halves is read only when complete.
    let full = map_csv(31, 20);
    let (head, tail) = full.split_at(full.len() / 2);
    let slow = watched.path().join("slow.csv");
    std::fs::write(&slow, head).expect("writes half");
    std::thread::sleep(Duration::from_millis(600));
    std::fs::OpenOptions::new()
        .append(true)
        .open(&slow)
        .expect("opens")
        .write_all(tail.as_bytes())
        .expect("appends");
    // A file renamed into place, and a bad one.
    let part = watched.path().join("renamed.csv.part");
    std::fs::write(&part, map_csv(11, 5)).expect("writes");
    std::fs::rename(&part, watched.path().join("renamed.csv")).expect("renames");
    std::fs::write(
        watched.path().join("broken.csv"),
        "x,t,C\n0,0.5,1.0\n1,0.5,not-a-number\n",
    )
    .expect("writes");

    wait_until(
        "two datasets and a log entry",
        Duration::from_secs(20),
        || {
            datasets_over_socket(&server.base, &token).len() == before + 2
                && log_over_socket(&server.base, &token)
                    .iter()
                    .any(|e| e["author"] == "watched folder")
        },
    );
    let list = datasets_over_socket(&server.base, &token);
    let slow_ds = list
        .iter()
        .find(|d| d["name"] == "slow.csv")
        .expect("slow file in");
    assert_eq!(slow_ds["sites"], json!(31));
    assert_eq!(slow_ds["times"], json!(20), "read complete, not half");
    assert!(list.iter().any(|d| d["name"] == "renamed.csv"));
    assert!(
        !list.iter().any(|d| d["name"] == "broken.csv"),
        "nothing stored from a bad file"
    );
    let log = log_over_socket(&server.base, &token);
    let report = log
        .iter()
        .find(|e| e["author"] == "watched folder")
        .expect("reported");
    let comment = report["comment"].as_str().unwrap_or_default();
    assert!(
        comment.contains("broken.csv") && comment.contains("line 3"),
        "{comment}"
    );

    // After a restart nothing is taken in twice.
    assert!(server.stop().success());
    let again = Server::start_with(data.path(), &args);
    std::thread::sleep(Duration::from_millis(2500));
    assert_eq!(datasets_over_socket(&again.base, &token).len(), before + 2);
    let reports = log_over_socket(&again.base, &token)
        .iter()
        .filter(|e| e["author"] == "watched folder")
        .count();
    assert_eq!(reports, 1);
    assert!(again.stop().success());
}

#[test]
fn a_kill_during_a_watched_ingest_leaves_the_file_whole_or_absent_then_takes_it_in() {
    let data = tempfile::tempdir().expect("temp dir");
    let watched = tempfile::tempdir().expect("watched dir");
    let first = Server::start(data.path());
    let edit_link = first.links[0].0.clone();
    let token = token_of(&edit_link);
    let before = datasets_over_socket(&first.base, &token).len();
    assert!(first.stop().success());
    let args = [
        std::ffi::OsStr::new("--watch"),
        watched.path().as_os_str(),
        std::ffi::OsStr::new("--into"),
        std::ffi::OsStr::new(&edit_link),
    ];
    // A 401 × 200 map: large enough that parsing and storing take a while.
    std::fs::write(watched.path().join("big.csv"), map_csv(401, 200)).expect("writes");
    let mut server = Server::start_with(data.path(), &args);
    // Kill somewhere between "settled" and "stored" (the settle time is 1 s).
    std::thread::sleep(Duration::from_millis(1300));
    server.child.kill().expect("SIGKILL");
    server.child.wait().expect("reaped");
    let store = spreadscope::store::Store::open_dir(data.path()).expect("reopens");
    assert!(store.integrity_ok().expect("check runs"));
    drop(store);
    let again = Server::start_with(data.path(), &args);
    wait_until("the big file", Duration::from_secs(60), || {
        datasets_over_socket(&again.base, &token)
            .iter()
            .any(|d| d["name"] == "big.csv")
    });
    std::thread::sleep(Duration::from_millis(1500));
    let list = datasets_over_socket(&again.base, &token);
    let big: Vec<_> = list.iter().filter(|d| d["name"] == "big.csv").collect();
    assert_eq!(big.len(), 1, "taken in exactly once");
    assert_eq!(big[0]["sites"], json!(401));
    assert_eq!(big[0]["times"], json!(200));
    assert_eq!(list.len(), before + 1);
    assert!(again.stop().success());
}

/// A log with ids renumbered by position, for comparing sessions.
fn normalised_log(entries: &[Value], datasets: &[Value]) -> Vec<Value> {
    let position = |id: &Value, list: &[Value]| list.iter().position(|e| e["id"] == *id);
    entries
        .iter()
        .map(|e| {
            let mut e = e.clone();
            e["retracts"] = json!(position(&e["retracts"], entries));
            e["dataset"] = json!(position(&e["dataset"], datasets));
            e["id"] = json!(position(&e["id"], entries));
            if let Some(fit) = e.get_mut("fit").and_then(Value::as_object_mut) {
                fit.remove("dataset");
            }
            e
        })
        .collect()
}

#[tokio::test]
async fn an_archive_round_trips_with_equal_hashes_and_log_and_damage_is_refused() {
    let source = app().await;
    let (edit, view) = new_session(&source.router).await;
    let (status, ds) = send_json(
        &source.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets?name=a.csv"),
        SMALL_CSV,
    )
    .await;
    assert_eq!(status, StatusCode::CREATED);
    let shots = std::fs::read(repo_path("tests/reference/shots/shots.csv")).expect("fixture");
    let (status, shot_ds) = send_json(
        &source.router,
        Method::POST,
        &format!("/api/s/{edit}/shots?name=s.csv&bootstrap=20&source=0"),
        shots,
    )
    .await;
    assert_eq!(status, StatusCode::CREATED, "{shot_ds}");
    let (status, fit) = send_json(
        &source.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets/{}/fits", ds["id"]),
        r#"{"method":"collapse","options":{"bootstrap":5}}"#,
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{fit}");
    let first = pin(
        &source.router,
        &edit,
        &json!({"author": "ana", "comment": "collapse", "dataset": ds["id"], "fit": fit}),
    )
    .await["id"]
        .as_i64()
        .expect("id");
    pin(
        &source.router,
        &edit,
        &json!({"author": "ben", "comment": "wrong window", "retracts": first}),
    )
    .await;

    let (status, archive, headers) = send(
        &source.router,
        Method::GET,
        &format!("/api/s/{view}/archive"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(headers["content-type"], "application/zip");

    let target = app().await;
    let sessions_before = target.service.sessions().await.expect("sessions").len();
    let (status, made) = send_json(
        &target.router,
        Method::POST,
        "/api/archives",
        archive.clone(),
    )
    .await;
    assert_eq!(status, StatusCode::CREATED, "{made}");
    let new_edit = made["edit_token"].as_str().expect("token").to_string();
    assert_ne!(new_edit, edit);
    let list = |router: axum::Router, token: String| async move {
        send_json(
            &router,
            Method::GET,
            &format!("/api/s/{token}/datasets"),
            "",
        )
        .await
        .1
        .as_array()
        .cloned()
        .unwrap_or_default()
    };
    let (old_ds, new_ds) = (
        list(source.router.clone(), edit.clone()).await,
        list(target.router.clone(), new_edit.clone()).await,
    );
    let hashes = |l: &[Value]| {
        l.iter()
            .map(|d| {
                (
                    d["name"].clone(),
                    d["content_hash"].clone(),
                    d["meta"].clone(),
                    d["notes"].clone(),
                )
            })
            .collect::<Vec<_>>()
    };
    assert_eq!(hashes(&old_ds), hashes(&new_ds));
    let log = |router: axum::Router, token: String| async move {
        send_json(&router, Method::GET, &format!("/api/s/{token}/log"), "")
            .await
            .1
            .as_array()
            .cloned()
            .unwrap_or_default()
    };
    let (old_log, new_log) = (
        log(source.router.clone(), edit.clone()).await,
        log(target.router.clone(), new_edit.clone()).await,
    );
    assert_eq!(old_log.len(), 2);
    assert_eq!(
        normalised_log(&old_log, &old_ds),
        normalised_log(&new_log, &new_ds)
    );
    // The kept shot file came along: re-estimating from it works.
    let new_shot_id = new_ds.iter().find(|d| d["name"] == "s.csv").expect("shots")["id"].clone();
    let (status, _) = send_json(
        &target.router,
        Method::GET,
        &format!("/api/s/{new_edit}/datasets/{new_shot_id}/shots"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK);

    // Truncated, or one byte of a map changed: refused with a reason,
    // nothing imported.
    let truncated = archive[..archive.len() - 200].to_vec();
    let (status, why) = send_json(&target.router, Method::POST, "/api/archives", truncated).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(
        why["error"]
            .as_str()
            .unwrap_or_default()
            .contains("nothing imported"),
        "{why}"
    );
    let mut altered = archive.clone();
    // The first local file header (signature PK\x03\x04) whose name starts
    // with `datasets/`; its data starts after the 30-byte header, the name
    // and the extra field. Flip a byte well inside that data.
    let at = (0..altered.len().saturating_sub(40))
        .find(|&i| {
            altered[i..i + 4] == *b"PK\x03\x04" && altered[i + 30..].starts_with(b"datasets/")
        })
        .expect("a dataset member");
    let name_len = usize::from(u16::from_le_bytes([altered[at + 26], altered[at + 27]]));
    let extra_len = usize::from(u16::from_le_bytes([altered[at + 28], altered[at + 29]]));
    altered[at + 30 + name_len + extra_len + 8] ^= 0x55;
    let (status, why) = send_json(&target.router, Method::POST, "/api/archives", altered).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    let reason = why["error"].as_str().unwrap_or_default();
    assert!(
        reason.contains("nothing imported")
            && (reason.contains("damaged") || reason.contains("altered")),
        "{reason}"
    );
    assert_eq!(
        target.service.sessions().await.expect("sessions").len(),
        sessions_before + 1
    );
}

#[test]
fn archive_commands_move_a_session_between_servers() {
    let (a_dir, b_dir) = (
        tempfile::tempdir().expect("dir"),
        tempfile::tempdir().expect("dir"),
    );
    let a = Server::start(a_dir.path());
    let b = Server::start(b_dir.path());
    let file = a_dir.path().join("moved.zip");
    let out = binary()
        .args(["archive", "export", &a.links[0].1, "--out"])
        .arg(&file)
        .output()
        .expect("runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let again = binary()
        .args(["archive", "export", &a.links[0].1, "--out"])
        .arg(&file)
        .output()
        .expect("runs");
    assert_eq!(
        again.status.code(),
        Some(2),
        "an existing file is not overwritten"
    );
    let out = binary()
        .args(["archive", "import"])
        .arg(&file)
        .args(["--to", &b.base])
        .output()
        .expect("runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8_lossy(&out.stdout);
    let edit = text
        .lines()
        .find(|l| l.trim_start().starts_with("edit:"))
        .expect("edit link")
        .split_whitespace()
        .last()
        .expect("url")
        .to_string();
    let moved = datasets_over_socket(&b.base, &token_of(&edit));
    let original = datasets_over_socket(&a.base, &token_of(&a.links[0].0));
    let hashes = |l: &[Value]| {
        l.iter()
            .map(|d| d["content_hash"].clone())
            .collect::<Vec<_>>()
    };
    assert_eq!(hashes(&moved), hashes(&original));
    std::fs::write(&file, b"PK\x03\x04 not really").expect("writes");
    let out = binary()
        .args(["archive", "import"])
        .arg(&file)
        .args(["--to", &b.base])
        .output()
        .expect("runs");
    assert_eq!(out.status.code(), Some(2));
}

#[test]
fn a_backup_taken_under_writes_is_consistent_and_keeps_every_acknowledged_pin() {
    let dir = tempfile::tempdir().expect("temp dir");
    let server = Server::start(dir.path());
    let token = token_of(&server.links[0].0);
    let url = format!("{}/api/s/{token}/log", server.base);
    let stop = std::sync::Arc::new(std::sync::atomic::AtomicBool::new(false));
    let acked = std::sync::Arc::new(std::sync::Mutex::new(Vec::<i64>::new()));
    let writer = {
        let (stop, acked, url) = (stop.clone(), acked.clone(), url.clone());
        std::thread::spawn(move || {
            let mut n = 0;
            while !stop.load(std::sync::atomic::Ordering::SeqCst) {
                if let Some((201, text)) = http(
                    "POST",
                    &url,
                    &format!(r#"{{"author":"w","comment":"pin {n}"}}"#),
                ) {
                    let v: Value = serde_json::from_str(&text).expect("json");
                    acked
                        .lock()
                        .expect("lock")
                        .push(v["id"].as_i64().expect("id"));
                }
                n += 1;
            }
        })
    };
    wait_until("some pins", Duration::from_secs(20), || {
        acked.lock().expect("lock").len() >= 20
    });
    let before_backup = acked.lock().expect("lock").clone();
    let copy = dir.path().join("copy.sqlite3");
    let out = binary()
        .args(["backup", "--data"])
        .arg(dir.path())
        .arg("--out")
        .arg(&copy)
        .output()
        .expect("runs");
    stop.store(true, std::sync::atomic::Ordering::SeqCst);
    writer.join().expect("writer ends");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let again = binary()
        .args(["backup", "--data"])
        .arg(dir.path())
        .arg("--out")
        .arg(&copy)
        .output()
        .expect("runs");
    assert_eq!(
        again.status.code(),
        Some(2),
        "an existing copy is not overwritten"
    );
    let restored = tempfile::tempdir().expect("dir");
    std::fs::copy(&copy, restored.path().join("spreadscope.sqlite3")).expect("copies");
    let store = spreadscope::store::Store::open_dir(restored.path()).expect("copy opens");
    assert!(store.integrity_ok().expect("check"));
    let session = store
        .session_by_token(&token)
        .expect("reads")
        .expect("session in the copy");
    let ids: std::collections::HashSet<i64> = store
        .log(session.id)
        .expect("log")
        .iter()
        .map(|e| e.id)
        .collect();
    assert!(
        before_backup.iter().all(|id| ids.contains(id)),
        "a pin acknowledged before the backup is missing"
    );
    assert!(server.stop().success());
}

#[tokio::test]
async fn a_full_disk_is_a_clear_error_and_loses_nothing() {
    let dir = tempfile::tempdir().expect("temp dir");
    let store = spreadscope::store::Store::open_dir(dir.path()).expect("opens");
    // Simulated with SQLite's page limit: the same SQLITE_FULL a full disk
    // gives, without needing a small file system.
    let pages = store.page_count().expect("pages");
    store.limit_pages(pages + 40).expect("limit");
    let app = spreadscope::app::App::with_store(store, &spreadscope::api::ApiConfig::default())
        .await
        .expect("app");
    let (edit, _) = new_session(&app.router).await;
    let (status, small) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets?name=small.csv"),
        SMALL_CSV,
    )
    .await;
    assert_eq!(status, StatusCode::CREATED, "{small}");
    let entry = pin(
        &app.router,
        &edit,
        &json!({"author": "ana", "comment": "before the disk filled"}),
    )
    .await["id"]
        .as_i64()
        .expect("id");
    let (status, body) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets?name=big.csv"),
        map_csv(401, 100),
    )
    .await;
    assert_eq!(status, StatusCode::INSUFFICIENT_STORAGE, "{body}");
    assert!(
        body["error"]
            .as_str()
            .unwrap_or_default()
            .contains("disk is full"),
        "{body}"
    );
    assert_eq!(dataset_count(&app.router, &edit).await, 1);
    drop(app);
    let store = spreadscope::store::Store::open_dir(dir.path()).expect("reopens");
    assert!(store.integrity_ok().expect("check"));
    let session = store
        .session_by_token(&edit)
        .expect("reads")
        .expect("session");
    assert_eq!(store.datasets(session.id).expect("datasets").len(), 1);
    assert!(
        store
            .log(session.id)
            .expect("log")
            .iter()
            .any(|e| e.id == entry)
    );
}

fn openssl_pair(dir: &Path) -> (std::path::PathBuf, std::path::PathBuf) {
    let (key, cert) = (dir.join("lab.key"), dir.join("lab.crt"));
    // The README's command, with the host name this test connects to.
    let status = Command::new("openssl")
        .args([
            "req",
            "-x509",
            "-newkey",
            "rsa:2048",
            "-nodes",
            "-days",
            "825",
            "-subj",
            "/CN=localhost",
        ])
        .args(["-addext", "subjectAltName=DNS:localhost,IP:127.0.0.1"])
        .args(["-addext", "basicConstraints=critical,CA:FALSE", "-keyout"])
        .arg(&key)
        .arg("-out")
        .arg(&cert)
        .stderr(std::process::Stdio::null())
        .status()
        .expect("openssl runs (installed on this machine and CI)");
    assert!(status.success());
    (cert, key)
}

#[test]
fn the_server_answers_over_https_with_a_self_signed_certificate() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (cert, key) = openssl_pair(dir.path());
    let args = [
        std::ffi::OsStr::new("--tls-cert"),
        cert.as_os_str(),
        std::ffi::OsStr::new("--tls-key"),
        key.as_os_str(),
    ];
    let server = Server::start_with(dir.path(), &args);
    assert!(server.base.starts_with("https://"), "{}", server.base);
    let (edit_link, _) = server.links[0].clone();
    let token = token_of(&edit_link);
    let trusting = spreadscope::client::agent(Some(&cert), Duration::from_secs(20)).expect("agent");
    let mut answer = trusting
        .get(&format!("{}/api/s/{token}", server.base))
        .call()
        .expect("TLS handshake and answer");
    assert_eq!(answer.status().as_u16(), 200);
    let info: Value =
        serde_json::from_str(&answer.body_mut().read_to_string().expect("body")).expect("json");
    assert_eq!(info["can_edit"], json!(true));
    // A client that does not trust the certificate is refused.
    let stranger = spreadscope::client::agent(None, Duration::from_secs(20)).expect("agent");
    assert!(
        stranger
            .get(&format!("{}/api/s/{token}", server.base))
            .call()
            .is_err()
    );
    // Plain HTTP on the TLS port gets no answer.
    assert!(
        http(
            "GET",
            &format!(
                "{}/api/s/{token}",
                server.base.replace("https://", "http://")
            ),
            ""
        )
        .is_none_or(|(s, _)| s != 200)
    );
    // push works over it with --ca.
    let file = dir.path().join("tls.csv");
    std::fs::write(&file, SMALL_CSV).expect("writes");
    let out = binary()
        .args(["push", "--to", &edit_link, "--ca"])
        .arg(&cert)
        .arg(&file)
        .output()
        .expect("runs");
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(server.stop().success());
}

#[tokio::test]
async fn identical_fits_under_a_crowd_compute_once_and_others_get_an_answer_or_429_at_once() {
    let app = app().await;
    let (edit, _) = new_session(&app.router).await;
    let mut csv = String::from("x,t,C,err\n");
    for k in 0..12 {
        let t = 2.0 * 1.25f64.powi(k);
        for x in -30..=30 {
            // Gaussian of variance 2Dt with D = 0.5 (common practice, no source).
            let c = (-(f64::from(x)).powi(2) / (2.0 * t)).exp()
                / (2.0 * std::f64::consts::PI * t * 0.5 * 2.0).sqrt();
            csv.push_str(&format!("{x},{t:?},{c:?},0.0001\n"));
        }
    }
    let (status, ds) = send_json(
        &app.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets?name=g.csv"),
        csv,
    )
    .await;
    assert_eq!(status, StatusCode::CREATED);
    let uri = format!("/api/s/{edit}/datasets/{}/fits", ds["id"]);
    let request = r#"{"method":"collapse","options":{"bootstrap":40,"seed":3}}"#;
    let started = app.service.shared_fits_started();
    let crowd: Vec<_> = (0..12)
        .map(|_| {
            let (router, uri) = (app.router.clone(), uri.clone());
            tokio::spawn(async move { send_json(&router, Method::POST, &uri, request).await })
        })
        .collect();
    let mut answers = Vec::new();
    for c in crowd {
        let (status, body) = c.await.expect("joins");
        assert_eq!(status, StatusCode::OK, "{body}");
        answers.push(body);
    }
    assert!(
        answers.iter().all(|a| a == &answers[0]),
        "everyone gets the same result"
    );
    assert_eq!(
        app.service.shared_fits_started() - started,
        1,
        "twelve identical requests, one computation"
    );
    // Different requests (other seeds) beyond what can start soon are told
    // at once, with a retry time, instead of waiting.
    let crowd: Vec<_> = (0..12)
        .map(|seed| {
            let (router, uri) = (app.router.clone(), uri.clone());
            let body = format!(
                r#"{{"method":"collapse","options":{{"bootstrap":200,"seed":{}}}}}"#,
                100 + seed
            );
            tokio::spawn(async move { send(&router, Method::POST, &uri, body).await })
        })
        .collect();
    let (mut ok, mut busy) = (0, 0);
    for c in crowd {
        let (status, _, headers) = c.await.expect("joins");
        match status {
            StatusCode::OK => ok += 1,
            StatusCode::TOO_MANY_REQUESTS => {
                busy += 1;
                let retry: u64 = headers["retry-after"]
                    .to_str()
                    .expect("text")
                    .parse()
                    .expect("seconds");
                assert!(retry >= 1);
            }
            other => panic!("unexpected {other}"),
        }
    }
    assert!(ok >= 1 && ok + busy == 12);
}

#[test]
fn an_exported_archive_is_an_ordinary_zip_file() {
    // Checked with a reader outside the project: Python's zipfile.
    let dir = tempfile::tempdir().expect("temp dir");
    let server = Server::start(dir.path());
    let link = server.links[0].1.clone();
    let file = dir.path().join("demo.zip");
    let out = binary()
        .args(["archive", "export", &link, "--out"])
        .arg(&file)
        .output()
        .expect("runs");
    assert!(out.status.success());
    let listing = Command::new("python3")
        .args(["-c", "import sys, zipfile; z = zipfile.ZipFile(sys.argv[1]); print(z.testzip()); print(len(z.namelist()))"])
        .arg(&file)
        .output()
        .expect("python3 runs");
    let text = String::from_utf8_lossy(&listing.stdout);
    assert!(
        text.starts_with("None"),
        "every member's CRC checks: {text}"
    );
    assert!(server.stop().success());
}

#[tokio::test]
async fn an_archive_whose_manifest_was_tampered_with_is_refused_and_imports_nothing() {
    use std::io::{Cursor, Read, Write};
    let source = app().await;
    let (edit, view) = new_session(&source.router).await;
    let (status, _) = send_json(
        &source.router,
        Method::POST,
        &format!("/api/s/{edit}/datasets?name=a.csv"),
        SMALL_CSV,
    )
    .await;
    assert_eq!(status, StatusCode::CREATED);
    let (status, archive, _) = send(
        &source.router,
        Method::GET,
        &format!("/api/s/{view}/archive"),
        "",
    )
    .await;
    assert_eq!(status, StatusCode::OK);
    // Rewrite the archive with one member's SHA-256 in the manifest
    // changed (its last hex digit), every member's bytes as they were.
    let mut zip = zip::ZipArchive::new(Cursor::new(archive)).expect("a zip");
    let mut out = zip::ZipWriter::new(Cursor::new(Vec::new()));
    let options =
        zip::write::SimpleFileOptions::default().compression_method(zip::CompressionMethod::Stored);
    let mut tampered = None;
    for k in 0..zip.len() {
        let mut file = zip.by_index(k).expect("member");
        let name = file.name().to_string();
        let mut bytes = Vec::new();
        file.read_to_end(&mut bytes).expect("reads");
        if name == "manifest.json" {
            let mut manifest: Value = serde_json::from_slice(&bytes).expect("json");
            let members = manifest["datasets"][0]["members"]
                .as_object_mut()
                .expect("members");
            let (member, hash) = members.iter_mut().next().expect("a member");
            let text = hash.as_str().expect("hex").to_string();
            let last = if text.ends_with('0') { "1" } else { "0" };
            *hash = Value::String(format!("{}{last}", &text[..text.len() - 1]));
            tampered = Some(member.clone());
            bytes = serde_json::to_vec_pretty(&manifest).expect("json");
        }
        out.start_file(name.as_str(), options).expect("member");
        out.write_all(&bytes).expect("writes");
    }
    let forged = out.finish().expect("zip").into_inner();
    let member = tampered.expect("the manifest was rewritten");

    let target = app().await;
    let before = target.service.sessions().await.expect("sessions").len();
    let (status, why) = send_json(&target.router, Method::POST, "/api/archives", forged).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{why}");
    let reason = why["error"].as_str().unwrap_or_default();
    assert!(
        reason.contains(&member) && reason.contains("nothing imported"),
        "{reason}"
    );
    assert_eq!(
        target.service.sessions().await.expect("sessions").len(),
        before
    );
}
