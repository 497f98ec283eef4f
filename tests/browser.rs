//! End-to-end in headless Chromium: the demo heatmap draws, an upload shows up
//! in the list, a view link shows no editing controls. Drives
//! `tests/browser/e2e.mjs` (playwright-core) against the real binary.
//!
//! Needs Debian's `chromium` and `npm ci --prefix tests/browser`. It is marked
//! `#[ignore]`, so a plain `cargo test` reports it as ignored rather than
//! passing it silently; `tests/run.sh` (the README's test command, which
//! installs both) runs it with `--include-ignored`. Run alone with
//! `cargo test --test main browser -- --include-ignored`; when it runs
//! without Chromium or the node modules it fails and says how to install them.

use std::process::Command;

use crate::support::{Server, repo_path};

#[test]
#[ignore = "browser test: needs Chromium and tests/browser/node_modules; tests/run.sh runs it"]
fn dashboard_draws_the_demo_and_accepts_an_upload() {
    assert!(
        std::path::Path::new("/usr/bin/chromium").exists(),
        "Chromium missing: apt-get install -y chromium (tests/run.sh installs it)"
    );
    assert!(
        repo_path("tests/browser/node_modules/playwright-core").exists(),
        "playwright-core missing: npm ci --prefix tests/browser (tests/run.sh installs it)"
    );
    let dir = tempfile::tempdir().expect("temp dir");
    let server = Server::start(dir.path());
    let (edit, view) = server.links[0].clone();
    let upload = dir.path().join("upload-check.csv");
    std::fs::write(&upload, crate::support::SMALL_CSV).expect("writes");
    let artifacts = repo_path("tests/browser/artifacts");
    std::fs::create_dir_all(&artifacts).expect("artifacts dir");
    let out = Command::new("node")
        .arg(repo_path("tests/browser/e2e.mjs"))
        .args(["--url", &edit, "--view-url", &view, "--upload"])
        .arg(&upload)
        .arg("--screenshot")
        .arg(artifacts.join("dashboard.png"))
        .output()
        .expect("node runs");
    let stdout = String::from_utf8_lossy(&out.stdout);
    let stderr = String::from_utf8_lossy(&out.stderr);
    // Timings are reported, never asserted (the machines are shared).
    for line in stdout.lines().filter(|l| l.starts_with("measured:")) {
        eprintln!("{line}");
    }
    assert!(
        out.status.success(),
        "browser test failed:\n{stdout}\n{stderr}"
    );
    drop(server);
}
