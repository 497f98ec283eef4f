//! Session archives and backups: a round trip with equal hashes and log,
//! damage and tampering refused with nothing imported, the command line
//! moving a session between servers, and a consistent backup under writes.

use std::process::Command;
use std::time::Duration;

use axum::http::{Method, StatusCode};
use serde_json::{Value, json};

use crate::support::{
    SMALL_CSV, Server, app, binary, http, new_session, pin, repo_path, send, send_json,
};

use crate::lab::{datasets_over_socket, token_of, wait_until};

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
