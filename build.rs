//! Records the git commit of the source tree, when known, for provenance blocks.
use std::process::Command;

fn main() {
    let commit = Command::new("git")
        .args(["rev-parse", "HEAD"])
        .output()
        .ok()
        .filter(|o| o.status.success())
        .map(|o| String::from_utf8_lossy(&o.stdout).trim().to_string())
        .unwrap_or_default();
    // Mark builds from a tree with uncommitted changes to tracked files.
    let dirty = !commit.is_empty()
        && Command::new("git")
            .args(["status", "--porcelain", "--untracked-files=no"])
            .output()
            .map(|o| !o.stdout.is_empty())
            .unwrap_or(false);
    let commit = if dirty {
        format!("{commit}-dirty")
    } else {
        commit
    };
    println!("cargo:rustc-env=ASSAY_GIT_COMMIT={commit}");
    println!("cargo:rerun-if-changed=.git/HEAD");
    println!("cargo:rerun-if-changed=.git/refs/heads");
    println!("cargo:rerun-if-changed=.git/index");
}
