//! End-to-end checks of run files: read back by h5py and meshio (independent readers),
//! determinism across thread counts, and a run killed with SIGKILL.

mod common;

use std::process::Command;
use std::time::{Duration, Instant};

use common::*;

const SMALL: &str = r#"
[run]
name = "small"
seed = 11
end_time_h = 1.0
time_step_s = 60.0
snapshot_interval_h = 0.25
[lattice]
shape = [20, 18, 16]
voxel_um = 20.0
origin_um = [-100.0, 0.0, 50.0]
[tumour]
shape = "ellipsoid"
semi_axes_um = [150.0, 120.0, 100.0]
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

#[test]
fn run_file_reads_back_with_h5py_and_meshio() {
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(dir.path(), "small", SMALL);
    let out = dir.path().join("out");
    interstice(&["run", s.to_str().unwrap(), "--out", out.to_str().unwrap(), "--quiet"]);
    let text = python("check_runfile.py", &[out.join("small.h5").to_str().unwrap(), "--min-snapshots", "5"]);
    assert!(text.contains("all checks passed"), "{text}");
}

#[test]
fn one_and_two_threads_give_identical_files() {
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(dir.path(), "small", SMALL);
    let a = dir.path().join("a");
    let b = dir.path().join("b");
    interstice(&["run", s.to_str().unwrap(), "--out", a.to_str().unwrap(), "-q", "-j", "1"]);
    interstice(&["run", s.to_str().unwrap(), "--out", b.to_str().unwrap(), "-q", "-j", "2"]);
    let text = python("compare_runs.py", &[a.join("small.h5").to_str().unwrap(), b.join("small.h5").to_str().unwrap()]);
    assert!(text.contains("identical"), "{text}");
}

#[test]
fn killed_run_leaves_its_finished_snapshots_readable() {
    // Many snapshots of a larger lattice, so the run is still writing when it is killed.
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(
        dir.path(),
        "long",
        r#"
[run]
name = "long"
end_time_h = 100.0
time_step_s = 36.0
snapshot_interval_h = 0.01
[lattice]
shape = [64, 64, 64]
voxel_um = 10.0
[tumour]
radius_um = 200.0
[output]
xdmf_mesh = "explicit"
"#,
    );
    let out = dir.path().join("out");
    let mut child = spawn_run(&s, &out);
    // The sidecar is rewritten after each finished snapshot: wait for the third.
    let xmf = out.join("long.xmf");
    let t0 = Instant::now();
    loop {
        let n = std::fs::read_to_string(&xmf).map(|t| t.matches("<Time ").count()).unwrap_or(0);
        if n >= 3 {
            break;
        }
        assert!(t0.elapsed() < Duration::from_secs(120), "run did not reach 3 snapshots");
        assert!(child.try_wait().unwrap().is_none(), "run ended before it could be killed");
        std::thread::sleep(Duration::from_millis(20));
    }
    child.kill().unwrap(); // SIGKILL on Unix
    let status = child.wait().unwrap();
    assert!(!status.success());
    let text = python("check_runfile.py", &[out.join("long.h5").to_str().unwrap(), "--min-snapshots", "3"]);
    assert!(text.contains("all checks passed"), "{text}");
}

#[test]
fn bad_scenario_gets_one_clear_message_and_no_backtrace() {
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(dir.path(), "bad", "[lattice]\nvoxel_um = 0.0\n");
    let out = Command::new(bin()).args(["run", s.to_str().unwrap()]).env("RUST_BACKTRACE", "1").output().unwrap();
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("bad.toml:2: `lattice.voxel_um` = 0: expected a finite number in [0.5, 1000]"), "{err}");
    assert!(!err.contains("panicked") && !err.contains("stack backtrace"), "{err}");
    let out = Command::new(bin()).args(["check", dir.path().join("missing.toml").to_str().unwrap()]).output().unwrap();
    assert!(!out.status.success());
    assert!(String::from_utf8_lossy(&out.stderr).contains("missing.toml: cannot read the scenario"));
}

#[test]
fn check_defaults_and_version_commands_work() {
    let demo = root().join("configs/demo.toml");
    let out = interstice(&["check", demo.to_str().unwrap(), "--resolved"]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("valid scenario") && text.contains("[memory]") && text.contains("[run]"), "{text}");
    let out = interstice(&["defaults"]);
    assert!(String::from_utf8_lossy(&out.stdout).contains("voxel_um = 20.0"));
    let out = interstice(&["version"]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("commit") && text.contains("research use"), "{text}");
}

#[test]
fn killed_run_resumed_from_its_checkpoint_equals_the_uninterrupted_run() {
    // Random streams are derived from (seed, process, id, step), so a resumed run must reproduce
    // the uninterrupted one bit for bit: every dataset and attribute (h5py comparison).
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(dir.path(), "ck", RESTART);
    let a = dir.path().join("a");
    let b = dir.path().join("b");
    interstice(&["run", s.to_str().unwrap(), "--out", a.to_str().unwrap(), "-q"]);
    assert!(!a.join("ck.ckpt.h5").exists(), "a finished run removes its checkpoint");
    run_until_checkpoint(&s, &b, "ck");
    let out = interstice(&["run", s.to_str().unwrap(), "--out", b.to_str().unwrap(), "-q", "--resume"]);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let text = python("compare_runs.py", &[a.join("ck.h5").to_str().unwrap(), b.join("ck.h5").to_str().unwrap()]);
    assert!(text.contains("identical"), "{text}");
}

#[test]
fn resume_refuses_a_checkpoint_of_another_scenario() {
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(dir.path(), "ck", RESTART);
    let b = dir.path().join("b");
    run_until_checkpoint(&s, &b, "ck");
    let s2 = scenario(dir.path(), "ck", &RESTART.replace("seed = 5", "seed = 6"));
    let out = Command::new(bin())
        .args(["run", s2.to_str().unwrap(), "--out", b.to_str().unwrap(), "-q", "--resume"])
        .output()
        .unwrap();
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("ck.ckpt.h5") && err.contains("another scenario"), "{err}");
    assert!(!err.contains("panicked") && !err.contains("RUST_BACKTRACE"), "{err}");
}
