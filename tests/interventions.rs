//! End-to-end: interventions in the run file (snapshots before and after each change, the
//! timeline, the level series) and `--set` overrides for controls.

mod common;

use common::*;

const SCENARIO: &str = r#"
[run]
name = "treated"
end_time_h = 1.0
time_step_s = 60.0
snapshot_interval_h = 0.5
[lattice]
shape = [16, 16, 16]
voxel_um = 20.0
[tumour]
radius_um = 120.0
[[particle]]
name = "np"
packet_particles = 1e8
[[intervention]]
name = "enzyme"
start_h = 0.3
duration_h = 0.4
[intervention.matrix_degradation]
rate_per_h = 2.0
update_interval_min = 6.0
"#;

fn snapshot_times(file: &std::path::Path) -> Vec<f64> {
    let f = hdf5::File::open(file).unwrap();
    let g = f.group("snapshots").unwrap();
    let mut names = g.member_names().unwrap();
    names.sort();
    names.iter().map(|n| g.group(n).unwrap().attr("time_s").unwrap().read_scalar::<f64>().unwrap()).collect()
}

#[test]
fn interventions_add_snapshots_at_their_start_and_end_and_write_their_timeline() {
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(dir.path(), "treated", SCENARIO);
    let out = dir.path().join("out");
    interstice(&["run", s.to_str().unwrap(), "--out", out.to_str().unwrap(), "-q"]);
    let file = out.join("treated.h5");
    let t: Vec<u64> = snapshot_times(&file).iter().map(|t| (t / 36.0).round() as u64).collect();
    assert_eq!(t, vec![0, 30, 50, 70, 100], "regular snapshots plus the start and end (0.01 h)");
    let f = hdf5::File::open(&file).unwrap();
    let level = f.dataset("series/intervention_enzyme_level").unwrap().read_raw::<f64>().unwrap();
    // k tau (1 - exp(-T / tau)) with the default enzyme half-life of 4 h, T = 0.4 h, k = 2 / h.
    let tau = 4.0 / std::f64::consts::LN_2;
    let total = 2.0 * tau * (1.0 - (-0.4 / tau).exp());
    assert_eq!(level[0], 0.0);
    assert!((level[4] - total).abs() < 1e-12, "{level:?} vs {total}");
    let updated = f.dataset("snapshots/000004/interventions/updated").unwrap().read_raw::<f64>().unwrap();
    assert!((updated[0] - 0.7 * 3600.0).abs() < 1e-6);
}

#[test]
fn set_overrides_make_a_control_and_are_stored_with_the_scenario() {
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(dir.path(), "treated", SCENARIO);
    let out = dir.path().join("out");
    interstice(&[
        "run",
        s.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "-q",
        "--set",
        "intervention[0].enabled=false",
        "--set",
        "run.name=control",
    ]);
    let file = out.join("control.h5");
    let t = snapshot_times(&file);
    assert_eq!(t.len(), 3, "a disabled intervention adds no snapshots: {t:?}");
    let f = hdf5::File::open(&file).unwrap();
    assert!(f.dataset("series/intervention_enzyme_level").is_err());
    // A bad override names the key and what it expects, without a backtrace.
    let bad = std::process::Command::new(bin())
        .args(["check", s.to_str().unwrap(), "--set", "intervention[0].start_h=-1"])
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&bad.stderr);
    assert!(!bad.status.success() && err.contains("intervention[0].start_h") && err.contains("treated.toml"), "{err}");
    assert!(!err.contains("panicked"), "{err}");
}
