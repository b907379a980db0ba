//! Helpers of the end-to-end tests: the built binary, scratch folders, the Python cross-checks.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// The `interstice` binary built for this test run.
pub fn bin() -> PathBuf {
    PathBuf::from(env!("CARGO_BIN_EXE_interstice"))
}

/// Root of the workspace.
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// Writes `text` as a scenario file in `dir`.
pub fn scenario(dir: &Path, name: &str, text: &str) -> PathBuf {
    let p = dir.join(format!("{name}.toml"));
    std::fs::write(&p, text).unwrap();
    p
}

/// Runs the binary with `args`; panics with its output when it fails.
pub fn interstice(args: &[&str]) -> Output {
    let out = Command::new(bin()).args(args).output().expect("binary runs");
    assert!(
        out.status.success(),
        "interstice {args:?} failed:\n{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    out
}

/// Runs one of the Python cross-checks in `tests/python`; panics with its output when it fails.
pub fn python(script: &str, args: &[&str]) -> String {
    let path = root().join("tests/python").join(script);
    let out = Command::new("python3")
        .arg(&path)
        .args(args)
        .output()
        .expect("python3 runs (scripts/setup --tests installs the Python packages of the cross-checks)");
    let text = format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr));
    assert!(out.status.success(), "{script} {args:?} failed:\n{text}");
    text
}
