//! Crash safety: every acknowledged pin survives `kill -9` of the server in
//! the middle of a burst of pins, and the database passes SQLite's integrity
//! check afterwards.

use std::sync::{Arc, Mutex};
use std::time::Duration;

use serde_json::Value;

use crate::support::{Server, http};

#[test]
fn acknowledged_pins_survive_kill_9() {
    let dir = tempfile::tempdir().expect("temp dir");
    let server = Server::start(dir.path());
    let edit_url = server.links[0].0.clone();
    let token = edit_url.rsplit('/').next().expect("token").to_string();
    let log_url = format!("{}/api/s/{token}/log", server.base);

    let acknowledged = Arc::new(Mutex::new(Vec::<i64>::new()));
    let writers: Vec<_> = (0..4)
        .map(|w| {
            let (url, acked) = (log_url.clone(), acknowledged.clone());
            std::thread::spawn(move || {
                for n in 0..10_000 {
                    let body = format!(r#"{{"author":"writer {w}","comment":"pin {n}"}}"#);
                    match http("POST", &url, &body) {
                        Some((201, text)) => {
                            let entry: Value = serde_json::from_str(&text).expect("json");
                            acked
                                .lock()
                                .expect("lock")
                                .push(entry["id"].as_i64().expect("id"));
                        }
                        // The server died mid-request: that pin was never
                        // acknowledged, so it may or may not be stored.
                        _ => break,
                    }
                }
            })
        })
        .collect();
    // Let the burst run, then kill without any chance to clean up.
    while acknowledged.lock().expect("lock").len() < 40 {
        std::thread::sleep(Duration::from_millis(5));
    }
    let mut server = server;
    server.child.kill().expect("SIGKILL");
    server.child.wait().expect("reaped");
    for w in writers {
        w.join().expect("writer ends");
    }
    let acked = acknowledged.lock().expect("lock").clone();
    assert!(acked.len() >= 40);

    let again = Server::start(dir.path());
    let (status, text) =
        http("GET", &format!("{}/api/s/{token}/log", again.base), "").expect("answers");
    assert_eq!(status, 200);
    let entries: Value = serde_json::from_str(&text).expect("json");
    let stored: std::collections::HashSet<i64> = entries
        .as_array()
        .expect("list")
        .iter()
        .filter_map(|e| e["id"].as_i64())
        .collect();
    let lost: Vec<_> = acked.iter().filter(|id| !stored.contains(id)).collect();
    assert!(lost.is_empty(), "acknowledged pins lost: {lost:?}");
    assert!(again.stop().success());

    let store = spreadscope::store::Store::open_dir(dir.path()).expect("reopens");
    assert!(
        store.integrity_ok().expect("check runs"),
        "integrity check failed"
    );
}
