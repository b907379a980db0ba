//! End-to-end checks of the grown terrain: a run with a growth phase is bit-identical for 1 and
//! 2 threads (growth snapshots included), and the growth snapshots show the tumour growing.

mod common;

use common::*;

const GROWN: &str = r#"
[run]
name = "grown"
seed = 5
end_time_h = 0.5
time_step_s = 60.0
snapshot_interval_h = 0.25
[lattice]
shape = [24, 24, 24]
voxel_um = 20.0
[tumour]
radius_um = 120.0
[tissue]
tumour_stromal_fraction = 0.1
matrix_cv = 0.3
receptor_cv = 0.3
vessel_density_cv = 0.5
[oxygen]
max_consumption_mmHg_per_s = 12.0
[growth]
enabled = true
duration_d = 1.0
time_step_h = 3.0
snapshot_interval_h = 12.0
sprout_rate_per_h = 0.1
[vessels]
model = "network"
[vessels.network]
necrotic_core_fraction = 0.7
[lymphatics]
collapse = "cell-density"
[[particle]]
name = "np"
packet_particles = 1e6
"#;

#[test]
fn growth_is_identical_for_one_and_two_threads() {
    // Results are a function of scenario and seed only: every dataset and attribute of the run
    // file, the /growth group included, is the same bit for bit.
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(dir.path(), "grown", GROWN);
    let a = dir.path().join("a");
    let b = dir.path().join("b");
    interstice(&["run", s.to_str().unwrap(), "--out", a.to_str().unwrap(), "-q", "-j", "1"]);
    interstice(&["run", s.to_str().unwrap(), "--out", b.to_str().unwrap(), "-q", "-j", "2"]);
    let fa = a.join("grown.h5");
    let text = python("compare_runs.py", &[fa.to_str().unwrap(), b.join("grown.h5").to_str().unwrap()]);
    assert!(text.contains("identical"), "{text}");
    // The growth snapshots: three frames (-24 h, -12 h, 0) and a tumour that grew.
    let f = hdf5::File::open(&fa).unwrap();
    let times: Vec<f64> = f.dataset("growth/series/time_s").unwrap().read_raw().unwrap();
    assert_eq!(times, vec![-86400.0, -43200.0, 0.0]);
    let cancer: Vec<f64> = f.dataset("growth/series/cancer_cells").unwrap().read_raw().unwrap();
    assert!(cancer[2] > cancer[0], "{cancer:?}");
    let kind: Vec<u8> = f.dataset("growth/000002/cell_kind").unwrap().read_raw().unwrap();
    let snap: Vec<u8> = f.dataset("snapshots/000000/fields/cell_kind").unwrap().read_raw().unwrap();
    assert_eq!(kind, snap, "delivery starts from the grown tumour");
    // The growth sidecar, read by meshio (an outside XDMF reader), lists the same frames and data.
    let text = python("check_growth_xdmf.py", &[fa.to_str().unwrap()]);
    assert!(text.contains("all checks passed"), "{text}");
}
