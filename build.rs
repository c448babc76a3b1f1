//! Records the source revision the binary is built from, for the manifest and the report
//! (`HAZARDLINE_SOURCE_REVISION`): the commit's full hash, with `-modified` when the build's
//! own sources (`src`, `crates`, `Cargo.toml`, `Cargo.lock`) differ from that commit, or
//! `unknown` outside a git checkout (a source archive) or without git. Two builds of one commit
//! with different uncommitted changes both read `<hash>-modified`: the revision then names the
//! commit, not the exact sources, and merge cannot tell such parts apart.

use std::path::Path;
use std::process::Command;

fn git(args: &[&str]) -> Option<String> {
    let out = Command::new("git").args(args).output().ok()?;
    out.status.success().then(|| String::from_utf8_lossy(&out.stdout).trim().to_string())
}

fn main() {
    // Rerun when the commit or the sources change. Only paths that exist are named: cargo
    // reruns a build script on every build when a named path is missing.
    for p in ["src", "crates", "Cargo.toml", "Cargo.lock", "build.rs"] {
        println!("cargo:rerun-if-changed={p}");
    }
    if let Some(git_dir) = git(&["rev-parse", "--git-dir"]) {
        for f in ["HEAD", "index", "packed-refs"] {
            let p = Path::new(&git_dir).join(f);
            if p.exists() {
                println!("cargo:rerun-if-changed={}", p.display());
            }
        }
        if let Some(head_ref) = git(&["symbolic-ref", "-q", "HEAD"]) {
            let p = Path::new(&git_dir).join(head_ref);
            if p.exists() {
                println!("cargo:rerun-if-changed={}", p.display());
            }
        }
    }
    let revision = match git(&["rev-parse", "--verify", "HEAD"]) {
        Some(hash) if hash.len() == 40 => {
            let changed = git(&[
                "status",
                "--porcelain",
                "--untracked-files=normal",
                "--",
                "src",
                "crates",
                "Cargo.toml",
                "Cargo.lock",
                "build.rs",
            ])
            .is_none_or(|s| !s.is_empty());
            if changed {
                format!("{hash}-modified")
            } else {
                hash
            }
        }
        _ => "unknown".to_string(),
    };
    println!("cargo:rustc-env=HAZARDLINE_SOURCE_REVISION={revision}");
}
