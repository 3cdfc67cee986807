//! Records the git commit of a checkout build, so manifests can name the exact source.
//! Outside a git checkout (a crates.io or tarball build) nothing is recorded.

use std::process::Command;

fn main() {
    let commit = Command::new("git")
        .args(["rev-parse", "--short=12", "HEAD"])
        .output()
        .ok()
        .filter(|o| o.status.success())
        .and_then(|o| String::from_utf8(o.stdout).ok())
        .map(|s| s.trim().to_string())
        .filter(|s| !s.is_empty());
    if let Some(c) = commit {
        println!("cargo:rustc-env=CONSTRUE_GIT_COMMIT={c}");
    }
    println!("cargo:rerun-if-changed=.git/HEAD");
    println!("cargo:rerun-if-changed=.git/refs/heads");
}
