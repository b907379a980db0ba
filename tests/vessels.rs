//! End-to-end checks of the network vessel model: the blood-pressure solve against SciPy, run
//! files with the vessel table read back by h5py, identical files for any thread count, and
//! clear errors for bad network files.

mod common;

use std::process::Command;

use common::*;
use interstice_sim::LoadedScenario;
use interstice_sim::params::Params;
use interstice_sim::process::blood::flow_options;
use interstice_sim::vessels::flow::solve;
use interstice_sim::vessels::generate::generate;
use interstice_sim::vessels::network::NodeBc;

const NETWORK: &str = r#"
[run]
name = "net"
seed = 4
end_time_h = 1.0
time_step_s = 120.0
snapshot_interval_h = 0.5
[lattice]
shape = [24, 22, 20]
voxel_um = 20.0
[tumour]
radius_um = 160.0
[vessels]
model = "network"
[[particle]]
name = "lipo"
packet_particles = 1e9
[[particle]]
name = "dot"
hydrodynamic_radius_nm = 2.5
coating = "none"
packet_particles = 1e9
"#;

#[test]
fn pressures_of_a_random_network_match_scipy() {
    let s = LoadedScenario::from_text(std::path::Path::new("net.toml"), NETWORK.to_string()).unwrap();
    let p = Params::resolve(&s.scenario);
    let mut net = generate(&p.lattice, &p.tumour, &p.network, 17, true);
    // Two interior nodes with imposed inflows, to check that boundary type as well.
    let interior: Vec<usize> = (0..net.nodes.len()).filter(|&i| net.bc[i] == NodeBc::None).collect();
    net.bc[interior[interior.len() / 3]] = NodeBc::Inflow(2e-14);
    net.bc[interior[2 * interior.len() / 3]] = NodeBc::Inflow(-1e-14);
    let f = solve(&net, &flow_options(&p.network, &p.blood)).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let mut nodes = String::from("index,bc,value,pressure\n");
    for (i, bc) in net.bc.iter().enumerate() {
        let (k, v) = match bc {
            NodeBc::None => (0, 0.0),
            NodeBc::Pressure(v) => (1, *v),
            NodeBc::Inflow(q) => (2, *q),
        };
        nodes.push_str(&format!("{i},{k},{v:e},{:e}\n", f.node_pressure[i]));
    }
    let mut segs = String::from("a,b,conductance,flow\n");
    for (s, seg) in net.segments.iter().enumerate() {
        segs.push_str(&format!("{},{},{:e},{:e}\n", seg.a, seg.b, f.conductance[s], f.flow[s]));
    }
    let (np, sp) = (dir.path().join("nodes.csv"), dir.path().join("segments.csv"));
    std::fs::write(&np, nodes).unwrap();
    std::fs::write(&sp, segs).unwrap();
    let text = python("check_flow_scipy.py", &[np.to_str().unwrap(), sp.to_str().unwrap()]);
    assert!(text.contains("agree"), "{text}");
}

#[test]
fn network_runs_read_back_and_do_not_depend_on_threads() {
    let dir = tempfile::tempdir().unwrap();
    let s = scenario(dir.path(), "net", NETWORK);
    let (a, b) = (dir.path().join("a"), dir.path().join("b"));
    interstice(&["run", s.to_str().unwrap(), "--out", a.to_str().unwrap(), "-q", "-j", "1"]);
    interstice(&["run", s.to_str().unwrap(), "--out", b.to_str().unwrap(), "-q", "-j", "2"]);
    let (fa, fb) = (a.join("net.h5"), b.join("net.h5"));
    let text = python("check_runfile.py", &[fa.to_str().unwrap(), "--min-snapshots", "3"]);
    assert!(text.contains("all checks passed"), "{text}");
    let text = python("check_vessels.py", &[fa.to_str().unwrap()]);
    assert!(text.contains("vessel checks passed"), "{text}");
    let text = python("compare_runs.py", &[fa.to_str().unwrap(), fb.to_str().unwrap()]);
    assert!(text.contains("identical"), "{text}");
    let out = interstice(&["check", s.to_str().unwrap()]);
    let text = String::from_utf8_lossy(&out.stdout);
    for want in ["[vessels]", "perfused fraction", "lipo half-life", "dot renal clearance", "lipo tumour P"] {
        assert!(text.contains(want), "{want}: {text}");
    }
    let demo = root().join("configs/network-demo.toml");
    let out = interstice(&["check", demo.to_str().unwrap()]);
    assert!(String::from_utf8_lossy(&out.stdout).contains("liposome half-life"));
}

#[test]
fn bad_network_files_are_reported_with_file_and_line() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(
        dir.path().join("nodes.csv"),
        "id,x_um,y_um,z_um,pressure_mmHg\n1,10,100,100,40\n2,200,100,100,10\n",
    )
    .unwrap();
    std::fs::write(dir.path().join("segs.csv"), "id,node_a,node_b,radius_um\n1,1,2,-4\n").unwrap();
    let text = NETWORK.replace(
        "model = \"network\"\n",
        "model = \"network\"\n[vessels.network]\nsource = \"csv\"\nnodes_csv = \"nodes.csv\"\nsegments_csv = \"segs.csv\"\n",
    );
    let s = scenario(dir.path(), "bad", &text);
    let out =
        Command::new(bin()).args(["run", s.to_str().unwrap(), "--out", dir.path().to_str().unwrap()]).output().unwrap();
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("segs.csv: line 2: segment 1 has radius -4 um: expected a radius > 0"), "{err}");
    assert!(!err.contains("panicked"), "{err}");
    // A missing file is a scenario problem with its line.
    let text = text.replace("segs.csv", "missing.csv");
    let s = scenario(dir.path(), "missing", &text);
    let out = Command::new(bin()).args(["check", s.to_str().unwrap()]).output().unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(!out.status.success());
    assert!(
        err.contains("missing.toml:18: `vessels.network.segments_csv` = \"missing.csv\": expected an existing file"),
        "{err}"
    );
}
