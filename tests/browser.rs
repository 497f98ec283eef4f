//! End-to-end in headless Chromium: the demo heatmap draws, an upload shows up
//! in the list, a view link shows no editing controls. Drives
//! `tests/browser/e2e.mjs` (playwright-core) against the real binary.
//!
//! Needs Debian's `chromium` and `npm ci --prefix tests/browser` (`.ci/run`
//! installs both). Without them the test fails and says how to install them;
//! set `SPREADSCOPE_SKIP_BROWSER=1` to skip it knowingly on a machine that
//! cannot have them.

use std::process::Command;

use crate::support::{Server, repo_path};

#[test]
fn dashboard_draws_the_demo_and_accepts_an_upload() {
    if std::env::var_os("SPREADSCOPE_SKIP_BROWSER").is_some() {
        eprintln!("browser test skipped: SPREADSCOPE_SKIP_BROWSER is set");
        return;
    }
    assert!(
        std::path::Path::new("/usr/bin/chromium").exists(),
        "Chromium missing: apt-get install -y chromium (or set SPREADSCOPE_SKIP_BROWSER=1)"
    );
    assert!(
        repo_path("tests/browser/node_modules/playwright-core").exists(),
        "playwright-core missing: npm ci --prefix tests/browser (or set SPREADSCOPE_SKIP_BROWSER=1)"
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
    assert!(
        out.status.success(),
        "browser test failed:\n{stdout}\n{stderr}"
    );
    drop(server);
}
