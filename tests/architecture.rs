//! Layering checks: lower layers never import higher ones, and the pure core
//! never touches I/O. A failing test here names the file and the import.

use std::fs;
use std::path::{Path, PathBuf};

use crate::support::repo_path;

fn rust_files(dir: &Path) -> Vec<PathBuf> {
    if dir.is_file() {
        return vec![dir.to_path_buf()];
    }
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for entry in fs::read_dir(&d).expect("readable dir") {
            let path = entry.expect("entry").path();
            if path.is_dir() {
                stack.push(path);
            } else if path.extension().is_some_and(|e| e == "rs") {
                out.push(path);
            }
        }
    }
    out.sort();
    out
}

/// The part of a source file before its `#[cfg(test)]` module: tests may use
/// helpers (serde_json for fixtures) that the code itself must not.
fn non_test_source(path: &Path) -> String {
    let text = fs::read_to_string(path).expect("readable source");
    match text.find("#[cfg(test)]") {
        Some(i) => text[..i].to_string(),
        None => text,
    }
}

fn assert_no_mentions(dir: &str, forbidden: &[&str]) {
    let mut violations = Vec::new();
    for file in rust_files(&repo_path(dir)) {
        let text = non_test_source(&file);
        for needle in forbidden {
            if text.contains(needle) {
                violations.push(format!("{} mentions `{needle}`", file.display()));
            }
        }
    }
    assert!(
        violations.is_empty(),
        "layering violated:\n{}",
        violations.join("\n")
    );
}

#[test]
fn physics_core_has_no_io_and_no_outer_crates() {
    assert_no_mentions(
        "server/physics/src",
        &[
            "axum",
            "tokio",
            "rusqlite",
            "serde_json",
            "std::fs",
            "std::net",
            "spreadscope::",
        ],
    );
    let manifest = fs::read_to_string(repo_path("server/physics/Cargo.toml")).expect("manifest");
    let deps = manifest
        .split("[dependencies]")
        .nth(1)
        .and_then(|rest| rest.split("\n[").next())
        .expect("physics has a [dependencies] table");
    for crate_name in ["axum", "tokio", "rusqlite", "serde_json", "tower"] {
        assert!(
            !deps.lines().any(|l| l.trim_start().starts_with(crate_name)),
            "server/physics/Cargo.toml depends on {crate_name}"
        );
    }
}

#[test]
fn numerics_know_no_models_and_models_know_no_fits() {
    assert_no_mentions(
        "server/physics/src/numerics",
        &["crate::model", "crate::fit"],
    );
    assert_no_mentions("server/physics/src/model", &["crate::fit"]);
}

#[test]
fn main_crate_layers_point_down() {
    let up = ["crate::api", "crate::app", "crate::cli"];
    assert_no_mentions(
        "server/src/store",
        &[&up[..], &["crate::service", "crate::ingest", "axum"]].concat(),
    );
    assert_no_mentions(
        "server/src/ingest",
        &[
            &up[..],
            &[
                "crate::service",
                "crate::store",
                "std::fs",
                "axum",
                "rusqlite",
            ],
        ]
        .concat(),
    );
    assert_no_mentions(
        "server/src/service",
        &[&up[..], &["axum", "rusqlite"]].concat(),
    );
    assert_no_mentions(
        "server/src/api",
        &["crate::store", "rusqlite", "crate::cli", "crate::app"],
    );
    assert_no_mentions(
        "server/src/dataset.rs",
        &[
            &up[..],
            &["crate::service", "crate::store", "crate::ingest"],
        ]
        .concat(),
    );
}
