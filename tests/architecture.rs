//! Layering checks: lower layers never import higher ones, and the pure core
//! never touches I/O. The sources are parsed with `syn`, so grouped imports
//! (`use crate::{fit::x, …}`), paths written inline (`crate::fit::x()`) and
//! macro paths (`serde_json::json!`) are all seen, and only items marked
//! `#[cfg(test)]` are skipped — not everything after the first one. A failing
//! test names the file, the line and the path.

use std::fs;
use std::path::{Path, PathBuf};

use syn::spanned::Spanned;
use syn::visit::Visit;

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

/// Whether an item carries `#[cfg(test)]` (tests may use helpers, such as
/// serde_json for fixtures, that the code itself must not).
fn is_test_only(attrs: &[syn::Attribute]) -> bool {
    attrs.iter().any(|a| {
        a.path().is_ident("cfg")
            && a.parse_args::<syn::Meta>()
                .is_ok_and(|m| matches!(&m, syn::Meta::Path(p) if p.is_ident("test")))
    })
}

/// What one source file uses outside its tests: every path (imports with
/// groups expanded, inline paths, macro paths) with its line, and whether it
/// contains async code.
#[derive(Default)]
struct Uses {
    paths: Vec<(String, usize)>,
    async_lines: Vec<usize>,
}

impl Uses {
    fn push_use_tree(&mut self, prefix: &str, tree: &syn::UseTree, line: usize) {
        match tree {
            syn::UseTree::Path(p) => {
                let next = format!("{prefix}{}::", p.ident);
                self.push_use_tree(&next, &p.tree, line);
            }
            syn::UseTree::Name(n) => self.paths.push((format!("{prefix}{}", n.ident), line)),
            syn::UseTree::Rename(r) => self.paths.push((format!("{prefix}{}", r.ident), line)),
            syn::UseTree::Glob(_) => self.paths.push((format!("{prefix}*"), line)),
            syn::UseTree::Group(g) => {
                for t in &g.items {
                    self.push_use_tree(prefix, t, line);
                }
            }
        }
    }
}

impl<'ast> Visit<'ast> for Uses {
    fn visit_item(&mut self, item: &'ast syn::Item) {
        let attrs: &[syn::Attribute] = match item {
            syn::Item::Mod(m) => &m.attrs,
            syn::Item::Fn(f) => &f.attrs,
            syn::Item::Use(u) => &u.attrs,
            syn::Item::Impl(i) => &i.attrs,
            syn::Item::Struct(s) => &s.attrs,
            syn::Item::Enum(e) => &e.attrs,
            syn::Item::Const(c) => &c.attrs,
            syn::Item::Static(s) => &s.attrs,
            syn::Item::Trait(t) => &t.attrs,
            _ => &[],
        };
        if is_test_only(attrs) {
            return;
        }
        syn::visit::visit_item(self, item);
    }

    fn visit_item_use(&mut self, item: &'ast syn::ItemUse) {
        let line = item.span().start().line;
        let prefix = if item.leading_colon.is_some() {
            "::"
        } else {
            ""
        };
        self.push_use_tree(prefix, &item.tree, line);
    }

    fn visit_path(&mut self, path: &'ast syn::Path) {
        let text = path
            .segments
            .iter()
            .map(|s| s.ident.to_string())
            .collect::<Vec<_>>()
            .join("::");
        self.paths.push((text, path.span().start().line));
        syn::visit::visit_path(self, path);
    }

    fn visit_signature(&mut self, sig: &'ast syn::Signature) {
        if sig.asyncness.is_some() {
            self.async_lines.push(sig.span().start().line);
        }
        syn::visit::visit_signature(self, sig);
    }

    fn visit_expr_await(&mut self, e: &'ast syn::ExprAwait) {
        self.async_lines.push(e.span().start().line);
        syn::visit::visit_expr_await(self, e);
    }

    fn visit_expr_async(&mut self, e: &'ast syn::ExprAsync) {
        self.async_lines.push(e.span().start().line);
        syn::visit::visit_expr_async(self, e);
    }
}

fn uses_of_source(text: &str) -> Result<Uses, String> {
    let file = syn::parse_file(text).map_err(|e| e.to_string())?;
    let mut uses = Uses::default();
    uses.visit_file(&file);
    Ok(uses)
}

/// A path is forbidden when it equals a forbidden prefix or continues it
/// with `::` (so `tokio` catches `tokio::spawn` but not `tokio_stream`).
fn matches_prefix(path: &str, forbidden: &str) -> bool {
    path == forbidden
        || path
            .strip_prefix(forbidden)
            .is_some_and(|rest| rest.starts_with("::"))
}

/// The forbidden paths (and async code, when `no_async`) in one source text.
fn violations_in(name: &str, text: &str, forbidden: &[&str], no_async: bool) -> Vec<String> {
    let uses = match uses_of_source(text) {
        Ok(u) => u,
        Err(e) => return vec![format!("{name}: does not parse: {e}")],
    };
    let mut out = Vec::new();
    for (path, line) in &uses.paths {
        for f in forbidden {
            if matches_prefix(path, f) {
                out.push(format!(
                    "{name}:{line} uses `{path}` (forbidden here: `{f}`)"
                ));
            }
        }
    }
    if no_async {
        for line in &uses.async_lines {
            out.push(format!("{name}:{line} has async code"));
        }
    }
    out.sort();
    out.dedup();
    out
}

/// The files of modules declared test-only by their parent
/// (`#[cfg(test)] mod tests;` in `foo.rs` or `foo/mod.rs`), with everything
/// below them: they are tests, like inline `#[cfg(test)]` modules.
fn test_module_files(files: &[PathBuf]) -> Vec<PathBuf> {
    let mut out = Vec::new();
    for file in files {
        let Ok(parsed) = syn::parse_file(&fs::read_to_string(file).expect("readable source"))
        else {
            continue;
        };
        let stem = file.file_stem().and_then(|s| s.to_str()).unwrap_or("");
        let dir = file.parent().expect("a file has a parent");
        // Submodules of `mod.rs`/`lib.rs`/`main.rs` sit beside it; those of
        // `foo.rs` in `foo/`.
        let base = if matches!(stem, "mod" | "lib" | "main") {
            dir.to_path_buf()
        } else {
            dir.join(stem)
        };
        for item in &parsed.items {
            if let syn::Item::Mod(m) = item {
                if m.content.is_none() && is_test_only(&m.attrs) {
                    let name = m.ident.to_string();
                    out.push(base.join(format!("{name}.rs")));
                    out.push(base.join(name));
                }
            }
        }
    }
    out
}

fn check(dir: &str, forbidden: &[&str], no_async: bool) {
    let mut violations = Vec::new();
    let files = rust_files(&repo_path(dir));
    let tests = test_module_files(&files);
    for file in files
        .iter()
        .filter(|f| !tests.iter().any(|t| f.starts_with(t)))
    {
        let text = fs::read_to_string(file).expect("readable source");
        let name = file.display().to_string();
        violations.extend(violations_in(&name, &text, forbidden, no_async));
    }
    assert!(
        violations.is_empty(),
        "layering violated:\n{}",
        violations.join("\n")
    );
}

#[test]
fn the_checker_sees_grouped_imports_inline_paths_and_code_after_tests() {
    // A planted violation in each form the old substring check missed: a
    // grouped import, an inline path, and production code after a test
    // module. Test-only items stay allowed.
    let planted = r#"
        use crate::{numerics::special, fit::collapse::CollapseQuality};
        #[cfg(test)]
        mod tests {
            use crate::fit::tail;
            use serde_json::json;
        }
        pub fn after_tests() -> f64 {
            crate::fit::tail::something()
        }
        pub async fn waits() { other().await; }
    "#;
    let found = violations_in("planted.rs", planted, &["crate::fit", "serde_json"], true);
    assert!(
        found.iter().any(|v| v.starts_with("planted.rs:2 ")
            && v.contains("crate::fit::collapse::CollapseQuality")),
        "the grouped import, named by its line: {found:?}"
    );
    assert!(
        found
            .iter()
            .any(|v| v.contains("crate::fit::tail::something")),
        "{found:?}"
    );
    assert!(found.iter().any(|v| v.contains("async code")), "{found:?}");
    assert!(
        !found.iter().any(|v| v.contains("serde_json")),
        "test-only imports are allowed: {found:?}"
    );
    assert!(
        !violations_in(
            "clean.rs",
            "use crate::numerics::special;",
            &["crate::fit"],
            true
        )
        .iter()
        .any(|v| v.contains("uses"))
    );
    // `tokio_stream` is not `tokio`.
    assert!(violations_in("ok.rs", "use tokio_stream::StreamExt;", &["tokio"], false).is_empty());
}

#[test]
fn physics_core_has_no_io_and_no_outer_crates() {
    check(
        "server/physics/src",
        &[
            "axum",
            "tokio",
            "rusqlite",
            "serde_json",
            "std::fs",
            "std::net",
            "spreadscope",
        ],
        true,
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
    check(
        "server/physics/src/numerics",
        &["crate::model", "crate::fit"],
        false,
    );
    check("server/physics/src/model", &["crate::fit"], false);
}

#[test]
fn main_crate_layers_point_down() {
    let up = ["crate::api", "crate::app", "crate::cli"];
    check(
        "server/src/store",
        &[&up[..], &["crate::service", "crate::ingest", "axum"]].concat(),
        false,
    );
    // Parsing is pure: no files, no database, no async runtime.
    check(
        "server/src/ingest",
        &[
            &up[..],
            &[
                "crate::service",
                "crate::store",
                "std::fs",
                "axum",
                "rusqlite",
                "tokio",
            ],
        ]
        .concat(),
        true,
    );
    check(
        "server/src/service",
        &[&up[..], &["axum", "rusqlite"]].concat(),
        false,
    );
    check(
        "server/src/api",
        &["crate::store", "rusqlite", "crate::cli", "crate::app"],
        false,
    );
    check(
        "server/src/dataset.rs",
        &[
            &up[..],
            &["crate::service", "crate::store", "crate::ingest"],
        ]
        .concat(),
        false,
    );
}

#[test]
fn a_test_module_in_its_own_file_is_skipped_and_nothing_else() {
    let dir = tempfile::tempdir().expect("temp dir");
    let m = dir.path().join("model");
    fs::create_dir_all(m.join("stable")).expect("dirs");
    fs::write(
        m.join("stable/mod.rs"),
        "#[cfg(test)]\nmod tests;\nmod series;\n",
    )
    .expect("w");
    fs::write(m.join("stable/tests.rs"), "use serde_json::Value;\n").expect("w");
    fs::write(m.join("stable/series.rs"), "use serde_json::Value;\n").expect("w");
    let files = rust_files(&m);
    let skipped = test_module_files(&files);
    let kept: Vec<&PathBuf> = files
        .iter()
        .filter(|f| !skipped.iter().any(|t| f.starts_with(t)))
        .collect();
    assert!(
        kept.iter().any(|f| f.ends_with("stable/series.rs")),
        "{kept:?}"
    );
    assert!(
        !kept.iter().any(|f| f.ends_with("stable/tests.rs")),
        "{kept:?}"
    );
}
