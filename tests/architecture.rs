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
fn puruspe_is_reached_only_through_the_special_functions_module() {
    // One door per numerical helper: the special functions wrap the crate,
    // with their accuracy stated once; everything else calls them.
    let root = repo_path("server/physics/src");
    let files = rust_files(&root);
    let tests = test_module_files(&files);
    let mut violations = Vec::new();
    for file in files
        .iter()
        .filter(|f| !tests.iter().any(|t| f.starts_with(t)) && !f.ends_with("numerics/special.rs"))
    {
        let text = fs::read_to_string(file).expect("readable source");
        violations.extend(violations_in(
            &file.display().to_string(),
            &text,
            &["puruspe"],
            false,
        ));
    }
    assert!(violations.is_empty(), "{}", violations.join("\n"));
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
    // The service answers with typed values; JSON is written by serde at
    // the edge, never assembled by hand here (stored JSON is only read).
    check(
        "server/src/service",
        &[&up[..], &["axum", "rusqlite", "serde_json::json", "json"]].concat(),
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

/// The modules directly under `dir` (files `x.rs` and folders `x/`, without
/// `lib`, `main` and `mod`) and which of them each one uses, from the paths
/// of its non-test files: `{prefix}x::…` anywhere below, and `super::x::…`
/// in files directly in `dir`.
fn module_graph(dir: &str, prefix: &str) -> Vec<(String, Vec<(String, String)>)> {
    let root = repo_path(dir);
    let files = rust_files(&root);
    let tests = test_module_files(&files);
    let module_of = |file: &Path| -> Option<String> {
        let first = file.strip_prefix(&root).ok()?.components().next()?;
        let name = first
            .as_os_str()
            .to_str()?
            .trim_end_matches(".rs")
            .to_string();
        (!matches!(name.as_str(), "lib" | "main" | "mod")).then_some(name)
    };
    let mut graph: Vec<(String, Vec<(String, String)>)> = Vec::new();
    for file in files
        .iter()
        .filter(|f| !tests.iter().any(|t| f.starts_with(t)))
    {
        let Some(module) = module_of(file) else {
            continue;
        };
        let text = fs::read_to_string(file).expect("readable source");
        let uses = uses_of_source(&text).expect("parses");
        let direct = file.parent() == Some(root.as_path());
        let index = match graph.iter().position(|(m, _)| *m == module) {
            Some(i) => i,
            None => {
                graph.push((module.clone(), Vec::new()));
                graph.len() - 1
            }
        };
        for (path, line) in &uses.paths {
            let rest = path
                .strip_prefix(prefix)
                .or_else(|| direct.then(|| path.strip_prefix("super::")).flatten());
            let Some(target) = rest.and_then(|r| r.split("::").next()) else {
                continue;
            };
            if target != module {
                let place = format!("{}:{line}", file.display());
                graph[index].1.push((target.to_string(), place));
            }
        }
    }
    let names: Vec<String> = graph.iter().map(|(m, _)| m.clone()).collect();
    for (_, edges) in &mut graph {
        edges.retain(|(t, _)| names.contains(t));
    }
    graph
}

/// A cycle of the graph as "a → b (place) → … → a", if there is one.
fn find_cycle(graph: &[(String, Vec<(String, String)>)]) -> Option<String> {
    fn visit(
        graph: &[(String, Vec<(String, String)>)],
        node: usize,
        state: &mut [u8],
        stack: &mut Vec<(usize, String)>,
    ) -> Option<String> {
        state[node] = 1;
        for (target, place) in &graph[node].1 {
            let Some(t) = graph.iter().position(|(m, _)| m == target) else {
                continue;
            };
            stack.push((t, place.clone()));
            if state[t] == 1 {
                // The loop runs from t's place on the stack back to t.
                let start = stack.iter().position(|(n, _)| *n == t).unwrap_or(0);
                let path: Vec<String> = stack[start + 1..]
                    .iter()
                    .map(|(n, p)| format!("{} ({p})", graph[*n].0))
                    .collect();
                return Some(format!("{} → {}", graph[t].0, path.join(" → ")));
            }
            if state[t] == 0 {
                if let Some(c) = visit(graph, t, state, stack) {
                    return Some(c);
                }
            }
            stack.pop();
        }
        state[node] = 2;
        None
    }
    let mut state = vec![0u8; graph.len()];
    for start in 0..graph.len() {
        if state[start] == 0 {
            let mut stack = vec![(start, String::new())];
            if let Some(c) = visit(graph, start, &mut state, &mut stack) {
                return Some(c);
            }
        }
    }
    None
}

#[test]
fn modules_do_not_import_each_other_in_a_circle() {
    for (dir, prefix) in [
        ("server/src", "crate::"),
        ("server/src/cli", "crate::cli::"),
        ("server/src/service", "crate::service::"),
        ("server/src/ingest", "crate::ingest::"),
        ("server/physics/src", "crate::"),
        ("server/physics/src/fit", "crate::fit::"),
        ("server/physics/src/model", "crate::model::"),
        ("server/physics/src/numerics", "crate::numerics::"),
    ] {
        let graph = module_graph(dir, prefix);
        assert!(graph.len() > 2, "{dir}: no modules found");
        if let Some(cycle) = find_cycle(&graph) {
            panic!("{dir}: modules import each other in a circle: {cycle}");
        }
    }
}

#[test]
fn the_circle_check_finds_a_planted_circle() {
    let graph = vec![
        (
            "a".to_string(),
            vec![("b".to_string(), "a.rs:1".to_string())],
        ),
        (
            "b".to_string(),
            vec![("c".to_string(), "b.rs:2".to_string())],
        ),
        (
            "c".to_string(),
            vec![("a".to_string(), "c.rs:3".to_string())],
        ),
        (
            "d".to_string(),
            vec![("a".to_string(), "d.rs:4".to_string())],
        ),
    ];
    let cycle = find_cycle(&graph).expect("a circle");
    assert!(
        cycle.contains("c.rs:3") && cycle.starts_with('a'),
        "{cycle}"
    );
    assert!(find_cycle(&graph[..2]).is_none());
}

/// The relative module paths (`./x.js`) a JavaScript module imports or
/// re-exports from.
fn js_imports(text: &str) -> Vec<String> {
    let mut found = Vec::new();
    let mut rest = text;
    while let Some(at) = rest.find("from \"./") {
        let tail = &rest[at + "from \"./".len()..];
        let Some(end) = tail.find('"') else { break };
        found.push(tail[..end].to_string());
        rest = &tail[end..];
    }
    found
}

/// The dashboard page lists every module `app.js` reaches as a
/// `modulepreload`, so that the browser fetches them all at once; a module
/// added without its line would be fetched a level later, one left in the
/// list after it is gone would cost a useless request.
#[test]
fn the_page_preloads_exactly_the_modules_the_app_imports() {
    let js = repo_path("web/js");
    let mut reached: Vec<String> = Vec::new();
    let mut todo = vec!["app.js".to_string()];
    while let Some(module) = todo.pop() {
        if reached.contains(&module) {
            continue;
        }
        let text = fs::read_to_string(js.join(&module))
            .unwrap_or_else(|e| panic!("web/js/{module} is imported but cannot be read: {e}"));
        todo.extend(js_imports(&text));
        reached.push(module);
    }
    reached.retain(|m| m != "app.js");
    reached.sort();
    let page = fs::read_to_string(repo_path("web/index.html")).expect("index.html");
    let marker = "<link rel=\"modulepreload\" href=\"%ASSETS%/js/";
    let mut preloaded: Vec<String> = page
        .match_indices(marker)
        .filter_map(|(at, _)| {
            let tail = &page[at + marker.len()..];
            tail.find('"').map(|end| tail[..end].to_string())
        })
        .collect();
    preloaded.sort();
    let missing: Vec<&String> = reached.iter().filter(|m| !preloaded.contains(m)).collect();
    let extra: Vec<&String> = preloaded.iter().filter(|m| !reached.contains(m)).collect();
    assert!(
        missing.is_empty() && extra.is_empty(),
        "web/index.html: modulepreload lines missing for {missing:?}, not imported by app.js: {extra:?}"
    );
    assert!(reached.len() > 10, "only {} modules found", reached.len());
}

#[test]
fn the_import_reader_sees_imports_and_re_exports() {
    let text = "import { a } from \"./a.js\";\nimport {\n  b,\n} from \"./b.js\";\nexport { c } from \"./c.js\";\nconst s = \"from\";\n";
    assert_eq!(js_imports(text), vec!["a.js", "b.js", "c.js"]);
}
