//! Records build provenance (git commit, profile, compiler) for the run files.
use std::process::Command;

fn main() {
    let dir = std::env::var("CARGO_MANIFEST_DIR").unwrap_or_else(|_| ".".into());
    let git = |args: &[&str]| {
        Command::new("git")
            .arg("-C")
            .arg(&dir)
            .args(args)
            .output()
            .ok()
            .filter(|o| o.status.success())
            .map(|o| String::from_utf8_lossy(&o.stdout).trim().to_string())
    };
    let commit = git(&["rev-parse", "HEAD"]).unwrap_or_else(|| "unknown".into());
    let dirty = git(&["status", "--porcelain", "--untracked-files=no"]).map(|s| !s.is_empty()).unwrap_or(false);
    println!("cargo:rustc-env=INTERSTICE_GIT_COMMIT={commit}{}", if dirty { "-dirty" } else { "" });
    let rustc = std::env::var("RUSTC").unwrap_or_else(|_| "rustc".into());
    let rv = Command::new(rustc)
        .arg("--version")
        .output()
        .ok()
        .map(|o| String::from_utf8_lossy(&o.stdout).trim().to_string())
        .unwrap_or_else(|| "unknown".into());
    println!("cargo:rustc-env=INTERSTICE_RUSTC={rv}");
    println!("cargo:rustc-env=INTERSTICE_PROFILE={}", std::env::var("PROFILE").unwrap_or_default());
    if let Some(top) = git(&["rev-parse", "--show-toplevel"]) {
        for p in ["HEAD", "index"] {
            println!("cargo:rerun-if-changed={top}/.git/{p}");
        }
    }
    println!("cargo:rerun-if-changed=build.rs");
}
