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

/// Starts a run of scenario `s` named `name` and kills it (SIGKILL) as soon as its first
/// checkpoint is in place.
pub fn run_until_checkpoint(s: &Path, out: &Path, name: &str) {
    use std::time::{Duration, Instant};
    let mut child = spawn_run(s, out);
    let ckpt = out.join(format!("{name}.ckpt.h5"));
    let t0 = Instant::now();
    while !ckpt.exists() {
        assert!(t0.elapsed() < Duration::from_secs(120), "no checkpoint written");
        assert!(child.try_wait().unwrap().is_none(), "run ended before it could be killed");
        std::thread::sleep(Duration::from_millis(5));
    }
    child.kill().unwrap();
    assert!(!child.wait().unwrap().success());
}

/// Starts `interstice run` of scenario `s` into `out`, quiet, in the background.
pub fn spawn_run(s: &Path, out: &Path) -> std::process::Child {
    use std::process::Stdio;
    Command::new(bin())
        .args(["run", s.to_str().unwrap(), "--out", out.to_str().unwrap(), "-q"])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap()
}

/// A network scenario with checkpoints, slow enough to be killed after its first one (the
/// restart tests).
pub const RESTART: &str = r#"
[run]
name = "ck"
seed = 5
end_time_h = 3.0
time_step_s = 10.0
snapshot_interval_h = 0.1
checkpoint_interval_h = 0.3
[lattice]
shape = [28, 28, 28]
voxel_um = 20.0
[tumour]
radius_um = 200.0
[vessels]
model = "network"
[[particle]]
name = "np"
packet_particles = 1e6
[particle.ligand]
valency = 2
internalisation_per_s = 1e-3
[output]
packet_tables = true
"#;
