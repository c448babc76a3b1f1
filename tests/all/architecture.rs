//! The architecture as a test: the application's top-level modules form layers that point one
//! way (a module imports only modules below its own layer, so no two import each other in a
//! circle), and the core crate stays free of files, the clock, the environment and logging.
//! ARCHITECTURE.md draws the same layers; a change to them changes both.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// The application crate's top-level modules, highest layer first. A module may name a module
/// of a lower layer, never one of its own layer or above. The core crate's modules
/// (re-exported at the crate root) sit below all of them and are not listed.
const LAYERS: &[&[&str]] =
    &[&["commands"], &["run"], &["stages"], &["config"], &["report"], &["tables"], &["ingest"], &["error"]];

/// The core crate's modules (its `pub mod` lines): re-exported by the application, importable
/// from every layer.
fn core_modules() -> Vec<String> {
    let lib = Path::new(env!("CARGO_MANIFEST_DIR")).join("crates/hazardline-core/src/lib.rs");
    std::fs::read_to_string(lib)
        .unwrap()
        .lines()
        .filter_map(|l| l.strip_prefix("pub mod "))
        .map(|m| m.trim_end_matches(';').to_string())
        .collect()
}

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

/// The module path of a file under `src` (`run/merge.rs` -> [run, merge]; `run/mod.rs` -> [run]).
fn module_path(src: &Path, file: &Path) -> Vec<String> {
    let rel = file.strip_prefix(src).unwrap();
    let mut parts: Vec<String> = rel.iter().map(|p| p.to_string_lossy().to_string()).collect();
    let last = parts.pop().unwrap();
    let stem = last.trim_end_matches(".rs");
    if stem != "mod" && stem != "lib" && stem != "main" {
        parts.push(stem.to_string());
    }
    parts
}

fn ident_at(text: &str) -> String {
    text.chars().take_while(|c| c.is_ascii_alphanumeric() || *c == '_').collect()
}

/// The first identifier of each path inside a `{ ... }` group that starts `text` (depth one).
fn group_heads(text: &str) -> Vec<String> {
    let mut heads = Vec::new();
    let mut depth = 0;
    let mut expect = true;
    for (i, c) in text.char_indices() {
        match c {
            '{' => {
                depth += 1;
                expect = depth == 1;
            }
            '}' => {
                depth -= 1;
                if depth == 0 {
                    break;
                }
            }
            ',' if depth == 1 => expect = true,
            c if expect && depth == 1 && (c.is_ascii_alphabetic() || c == '_') => {
                heads.push(ident_at(&text[i..]));
                expect = false;
            }
            _ => {}
        }
    }
    heads
}

/// Every top-level module a file names: `crate::x`, `crate::{x, y::z}`, and `super::` paths
/// that climb to the crate root.
fn named_modules(src: &Path, file: &Path) -> Vec<(String, usize)> {
    let text = std::fs::read_to_string(file).unwrap();
    let here = module_path(src, file);
    let mut out = Vec::new();
    for (n, line) in text.lines().enumerate() {
        let mut rest = line;
        while let Some(i) = rest.find("crate::") {
            let after = &rest[i + 7..];
            if after.starts_with('{') {
                // A group may span lines: read on from here in the whole text.
                let offset = line.len() - rest.len() + i + 7;
                let start: usize = text.lines().take(n).map(|l| l.len() + 1).sum::<usize>() + offset;
                out.extend(group_heads(&text[start..]).into_iter().map(|h| (h, n + 1)));
            } else {
                out.push((ident_at(after), n + 1));
            }
            rest = after;
        }
        let mut rest = line;
        while let Some(i) = rest.find("super::") {
            let mut after = &rest[i..];
            let mut up = 0;
            while let Some(a) = after.strip_prefix("super::") {
                up += 1;
                after = a;
            }
            if up >= here.len() {
                out.push((ident_at(after), n + 1));
            }
            rest = after;
        }
    }
    out
}

fn layer_of(module: &str) -> Option<usize> {
    LAYERS.iter().position(|l| l.contains(&module))
}

#[test]
fn application_layers_point_one_way() {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut files = Vec::new();
    rust_files(&src, &mut files);
    files.sort();
    let mut problems = Vec::new();
    let mut edges: BTreeMap<(String, String), usize> = BTreeMap::new();
    let core = core_modules();
    assert!(core.len() >= 10 && core.iter().any(|m| m == "calibrate"), "{core:?}");
    for file in &files {
        let here = module_path(&src, file);
        let Some(top) = here.first().cloned() else { continue }; // lib.rs, main.rs
        let Some(layer) = layer_of(&top) else {
            problems.push(format!(
                "{}: top-level module `{top}` is in no layer (add it to LAYERS and to ARCHITECTURE.md)",
                file.display()
            ));
            continue;
        };
        for (named, line) in named_modules(&src, file) {
            if named == top || core.contains(&named) || named.is_empty() {
                continue;
            }
            match layer_of(&named) {
                Some(l) if l > layer => *edges.entry((top.clone(), named)).or_default() += 1,
                Some(_) => {
                    problems.push(format!("{}:{line}: `{top}` names `{named}`, which is not below it", file.display()))
                }
                None => problems
                    .push(format!("{}:{line}: `{top}` names `crate::{named}`, which is in no layer", file.display())),
            }
        }
    }
    assert!(problems.is_empty(), "layer violations:\n{}", problems.join("\n"));
    // The edges found, for the reader of a failure: every one points down.
    assert!(edges.keys().all(|(a, b)| layer_of(a) < layer_of(b)), "{edges:?}");
}

#[test]
fn the_checker_sees_groups_and_climbing_super_paths() {
    assert_eq!(group_heads("{a::b, c, d::{e, f}} rest"), ["a", "c", "d"]);
    assert_eq!(module_path(Path::new("src"), Path::new("src/run/merge.rs")), ["run", "merge"]);
    assert_eq!(module_path(Path::new("src"), Path::new("src/run/mod.rs")), ["run"]);
    assert_eq!(layer_of("commands"), Some(0));
    assert!(layer_of("run") < layer_of("tables"));
}

#[test]
fn core_crate_touches_no_file_clock_environment_or_log() {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("crates/hazardline-core/src");
    let mut files = Vec::new();
    rust_files(&src, &mut files);
    assert!(files.len() > 20, "core crate sources not found under {}", src.display());
    let banned = [
        "std::fs",
        "std::env",
        "std::net",
        "std::process",
        "Instant::now",
        "SystemTime",
        "println!",
        "eprintln!",
        "print!(",
        "tracing::",
        "polars",
    ];
    let mut problems = Vec::new();
    for file in &files {
        for (n, line) in std::fs::read_to_string(file).unwrap().lines().enumerate() {
            let code = line.split("//").next().unwrap_or("");
            for b in banned {
                if code.contains(b) {
                    problems.push(format!("{}:{}: `{b}`", file.display(), n + 1));
                }
            }
        }
    }
    assert!(problems.is_empty(), "the core crate must stay pure:\n{}", problems.join("\n"));
    // No I/O crate among its dependencies either (a compiler fact once it is not listed).
    let manifest = std::fs::read_to_string(src.parent().unwrap().join("Cargo.toml")).unwrap();
    for dep in ["polars", "tracing", "serde_json", "toml", "sha2", "indicatif", "plotters", "libc"] {
        assert!(!manifest.lines().any(|l| l.trim_start().starts_with(dep)), "core crate depends on {dep}");
    }
}
