//! Tests of the vessel network: flow against hand solutions, generators, raster, import.
//! Each check names the outside reference it relies on.

use std::path::Path;

use super::flow::{FlowOptions, solve};
use super::generate::generate;
use super::import::{read_csv, read_vtk};
use super::network::{Network, NodeBc, Segment, VesselKind};
use super::raster::{VesselRaster, traverse};
use crate::lattice::Lattice;
use crate::params::{NetworkParams, Params, TumourGeometry};
use crate::scenario::{Scenario, ViscosityLaw};

const MU: f64 = 1.2e-3;

/// Plasma-only flow (H = 0 in the 1992 law gives exactly the plasma viscosity).
fn newtonian() -> FlowOptions {
    FlowOptions {
        law: ViscosityLaw::InVitro1992,
        haematocrit: 0.0,
        plasma_viscosity: MU,
        tolerance: 1e-13,
        min_velocity: 0.0,
    }
}

fn seg(a: u32, b: u32, radius: f64, length: f64) -> Segment {
    Segment {
        a,
        b,
        radius,
        length,
        wall_thickness: 1e-6,
        pore_radius: 5e-9,
        pore_fraction: 1e-3,
        maturity: 1.0,
        kind: VesselKind::Host,
    }
}

fn resistance(r: f64, l: f64) -> f64 {
    8.0 * MU * l / (std::f64::consts::PI * r.powi(4))
}

#[test]
fn single_tube_follows_poiseuille() {
    // Poiseuille's law Q = pi r^4 dP / (8 mu L); wall shear from the force balance
    // tau = r dP / (2 L) (both in any fluid mechanics text, e.g. Batchelor 1967, section 4.2).
    let (r, l, p1, p2) = (5e-6, 400e-6, 4000.0, 2500.0);
    let mut net = Network::default();
    let a = net.add_node([0.0; 3], NodeBc::Pressure(p1));
    let b = net.add_node([l, 0.0, 0.0], NodeBc::Pressure(p2));
    net.segments.push(seg(a, b, r, l));
    let f = solve(&net, &newtonian()).unwrap();
    let q = std::f64::consts::PI * r.powi(4) * (p1 - p2) / (8.0 * MU * l);
    assert!((f.flow[0] - q).abs() / q < 1e-13, "{} {q}", f.flow[0]);
    assert!((f.wall_shear[0] - r * (p1 - p2) / (2.0 * l)).abs() / f.wall_shear[0] < 1e-12);
    assert!((f.velocity[0] - q / (std::f64::consts::PI * r * r)).abs() / f.velocity[0] < 1e-13);
    assert_eq!(f.mid_pressure[0], 0.5 * (p1 + p2));
    assert!((f.total_inflow - q).abs() / q < 1e-13);
    assert!(f.perfused[0]);
}

#[test]
fn series_and_parallel_networks_match_hand_solutions() {
    // Series: resistances add, Q = dP / sum R, node pressures fall by Q R_i (Ohm's law analogy;
    // any physiology text).
    let (p1, p2) = (5000.0, 1000.0);
    let tubes = [(4e-6, 100e-6), (6e-6, 300e-6), (3e-6, 50e-6)];
    let mut net = Network::default();
    let mut prev = net.add_node([0.0; 3], NodeBc::Pressure(p1));
    for (i, &(r, l)) in tubes.iter().enumerate() {
        let bc = if i + 1 == tubes.len() { NodeBc::Pressure(p2) } else { NodeBc::None };
        let next = net.add_node([(i + 1) as f64 * 1e-4, 0.0, 0.0], bc);
        net.segments.push(seg(prev, next, r, l));
        prev = next;
    }
    let f = solve(&net, &newtonian()).unwrap();
    let rt: f64 = tubes.iter().map(|&(r, l)| resistance(r, l)).sum();
    let q = (p1 - p2) / rt;
    let mut p = p1;
    for (i, &(r, l)) in tubes.iter().enumerate() {
        assert!((f.flow[i] - q).abs() / q < 1e-11, "segment {i}");
        p -= q * resistance(r, l);
        assert!((f.node_pressure[i + 1] - p).abs() / p1 < 1e-11, "node {}", i + 1);
    }
    // Parallel: two two-tube paths between the same pressures; each carries dP / (R1 + R2).
    let mut net = Network::default();
    let a = net.add_node([0.0; 3], NodeBc::Pressure(p1));
    let b = net.add_node([1e-3, 0.0, 0.0], NodeBc::Pressure(p2));
    let c = net.add_node([5e-4, 1e-4, 0.0], NodeBc::None);
    let d = net.add_node([5e-4, -1e-4, 0.0], NodeBc::None);
    let paths = [((5e-6, 2e-4), (4e-6, 3e-4)), ((3e-6, 1e-4), (7e-6, 6e-4))];
    net.segments.push(seg(a, c, paths[0].0.0, paths[0].0.1));
    net.segments.push(seg(c, b, paths[0].1.0, paths[0].1.1));
    net.segments.push(seg(a, d, paths[1].0.0, paths[1].0.1));
    net.segments.push(seg(d, b, paths[1].1.0, paths[1].1.1));
    let f = solve(&net, &newtonian()).unwrap();
    let mut total = 0.0;
    for (k, &((r1, l1), (r2, l2))) in paths.iter().enumerate() {
        let q = (p1 - p2) / (resistance(r1, l1) + resistance(r2, l2));
        assert!((f.flow[2 * k] - q).abs() / q < 1e-11 && (f.flow[2 * k + 1] - q).abs() / q < 1e-11, "path {k}");
        total += q;
    }
    assert!((f.total_inflow - total).abs() / total < 1e-11);
    // An imposed inflow into one end of a tube draining to a pressure: p_in = p_out + Q R.
    let mut net = Network::default();
    let q = 1e-13;
    let a = net.add_node([0.0; 3], NodeBc::Inflow(q));
    let b = net.add_node([2e-4, 0.0, 0.0], NodeBc::Pressure(p2));
    net.segments.push(seg(a, b, 4e-6, 2e-4));
    let f = solve(&net, &newtonian()).unwrap();
    assert!((f.node_pressure[0] - (p2 + q * resistance(4e-6, 2e-4))).abs() / p2 < 1e-11);
}

fn small_scenario_params() -> Params {
    let text = "[lattice]\nshape = [30, 30, 30]\nvoxel_um = 20.0\n[tumour]\nradius_um = 220.0\n";
    let s: Scenario = toml::from_str(text).unwrap();
    Params::resolve(&s)
}

fn tumour_network(seed: u64) -> (Network, Params) {
    let p = small_scenario_params();
    (generate(&p.lattice, &p.tumour, &p.network, seed, true), p)
}

#[test]
fn blood_is_conserved_at_every_node_of_a_tumour_network() {
    let (net, p) = tumour_network(3);
    net.check().unwrap();
    let opt = crate::process::blood::flow_options(&p.network, &p.blood);
    let f = solve(&net, &opt).unwrap();
    assert!(f.total_inflow > 0.0);
    let imbalance = f.node_imbalance(&net);
    for (i, bc) in net.bc.iter().enumerate() {
        if !matches!(bc, NodeBc::Pressure(_)) && f.node_pressure[i].is_finite() {
            // Mass conservation to 1e-10 of the network's throughput at every node.
            assert!(imbalance[i].abs() <= 1e-10 * f.total_inflow, "node {i}: {} of {}", imbalance[i], f.total_inflow);
        }
    }
    // Inflow equals outflow over the boundary.
    let out: f64 = (0..net.nodes.len())
        .filter(|&i| matches!(net.bc[i], NodeBc::Pressure(_)) && imbalance[i] < 0.0)
        .map(|i| -imbalance[i])
        .sum();
    assert!((out - f.total_inflow).abs() <= 1e-10 * f.total_inflow);
    // Pressures lie between the boundary values (maximum principle of the graph Laplacian).
    for &pr in f.node_pressure.iter().filter(|v| v.is_finite()) {
        assert!(pr <= p.network.inlet_pressure * (1.0 + 1e-12) && pr >= p.network.outlet_pressure * (1.0 - 1e-12));
    }
}

#[test]
fn generators_are_reproducible_and_shaped_as_asked() {
    let (a, p) = tumour_network(5);
    let (b, _) = tumour_network(5);
    let (c, _) = tumour_network(6);
    assert_eq!(a, b, "same seed, same network");
    assert_ne!(a, c, "another seed, another network");
    // Host bed: capillaries along x from the inlet face to the outlet face, one line per
    // spacing^2 of cross-section (600 um box, 80 um spacing: round(600/80) = 8 lines a side).
    let bed = generate(&p.lattice, &p.tumour, &p.network, 5, false);
    let e = p.lattice.extent();
    let inlets = bed.bc.iter().filter(|b| **b == NodeBc::Pressure(p.network.inlet_pressure)).count();
    assert_eq!(inlets, 64);
    for x in &bed.nodes {
        assert!((0..3).all(|k| x[k] >= p.lattice.origin[k] && x[k] <= p.lattice.origin[k] + e[k]));
    }
    // Mean spacing of the nodes along a capillary: the box divided into round(600/80) = 8 steps.
    let along: Vec<f64> = bed
        .segments
        .iter()
        .enumerate()
        .filter(|(s, _)| {
            let (x, y) = bed.ends(*s);
            (y[0] - x[0]).abs() > 0.5 * (y[1] - x[1]).abs().max((y[2] - x[2]).abs())
        })
        .map(|(s, _)| bed.chord(s))
        .collect();
    let mean = along.iter().sum::<f64>() / along.len() as f64;
    assert!((mean - e[0] / 8.0).abs() / (e[0] / 8.0) < 0.1, "{mean}");
    // Tumour: vessel surface per volume dense in the rim, sparse in the core, against the host.
    let raster = VesselRaster::build(&a, &p.lattice);
    let surf = raster.surface_field(&p.lattice);
    let (mut host, mut rim, mut core) = ((0.0, 0), (0.0, 0), (0.0, 0));
    for v in 0..p.lattice.len() {
        let x = p.lattice.centre(p.lattice.ijk(v));
        let rho = p.tumour.level(x).sqrt();
        let acc = if rho < 0.35 {
            &mut core
        } else if (0.75..1.0).contains(&rho) {
            &mut rim
        } else if rho > 1.2 {
            &mut host
        } else {
            continue;
        };
        acc.0 += surf.data[v];
        acc.1 += 1;
    }
    let (h, r, c) = (host.0 / host.1 as f64, rim.0 / rim.1 as f64, core.0 / core.1 as f64);
    assert!(r > 1.5 * h && c < 0.3 * h, "surface per volume: host {h}, rim {r}, core {c}");
    // Host capillary surface per volume: 2 pi r (length per volume ~ (1 + 2 p) / s^2) gives
    // about 2 pi 3e-6 * 2 / 6.4e-9 = 59 /cm... within a factor 2 of the common 70 /cm (Baxter and
    // Jain 1989, from memory).
    assert!((3000.0..14000.0).contains(&h), "{h} 1/m");
    // Tumour pore radii within bounds, median near the configured one.
    let mut pores: Vec<f64> =
        a.segments.iter().filter(|s| s.kind == VesselKind::Tumour).map(|s| s.pore_radius).collect();
    assert!(pores.iter().all(|&r| r >= p.network.tumour_pore_min && r <= p.network.tumour_pore_max));
    pores.sort_by(f64::total_cmp);
    let median = pores[pores.len() / 2];
    // Standard error of a sample median of ln r: 1.2533 sigma / sqrt(n) (Kendall and Stuart);
    // segments of one vessel share a pore radius (3 kinks), so count vessels: n / 3.
    let se = 1.2533 * p.network.tumour_pore_spread / ((pores.len() / 3) as f64).sqrt();
    assert!((median / p.network.tumour_pore_median).ln().abs() < 4.0 * se + 0.02, "{median}");
}

#[test]
fn raster_shares_each_wall_among_the_voxels_of_its_centre_line() {
    let l = Lattice::new([10, 10, 10], 1e-5, [0.0; 3]);
    let mut out = Vec::new();
    // Along x through voxel centres, from the middle of voxel 1 to the middle of voxel 4.
    traverse(&l, [1.5e-5, 5.5e-5, 5.5e-5], [4.5e-5, 5.5e-5, 5.5e-5], &mut out);
    let fr: Vec<f64> = out.iter().map(|e| e.1).collect();
    assert_eq!(out.len(), 4);
    for (f, want) in fr.iter().zip([1.0 / 6.0, 1.0 / 3.0, 1.0 / 3.0, 1.0 / 6.0]) {
        assert!((f - want).abs() < 1e-12, "{fr:?}");
    }
    // A diagonal: fractions add up to 1; the part outside the box is left out.
    out.clear();
    traverse(&l, [1e-6, 2e-6, 3e-6], [9.3e-5, 8.1e-5, 7.7e-5], &mut out);
    assert!((out.iter().map(|e| e.1).sum::<f64>() - 1.0).abs() < 1e-12);
    out.clear();
    traverse(&l, [5e-5, 5e-5, 5e-5], [15e-5, 5e-5, 5e-5], &mut out);
    assert!((out.iter().map(|e| e.1).sum::<f64>() - 0.5).abs() < 1e-12);
    // A whole network: the raster holds the whole wall area of its segments.
    let (net, p) = tumour_network(9);
    let r = VesselRaster::build(&net, &p.lattice);
    let total: f64 = net.segments.iter().map(Segment::wall_area).sum();
    assert!((r.total_area() - total).abs() / total < 1e-12);
    let f = r.surface_field(&p.lattice);
    assert!((f.sum() * p.lattice.voxel_volume() - total).abs() / total < 1e-12);
    for v in 0..p.lattice.len() {
        let segs: Vec<u32> = r.voxel(v).map(|e| e.0).collect();
        assert!(segs.windows(2).all(|w| w[0] < w[1]));
    }
}

const NODES_CSV: &str = "# a small network written by hand\nid,x_um,y_um,z_um,pressure_mmHg\n\
1,0,100,100,40\n2,100,100,100,\n3,200,150,100,\n4,200,50,100,\n5,300,100,100,10\n";
const SEGMENTS_CSV: &str = "id,node_a,node_b,radius_um\n10,1,2,5\n11,2,3,4\n12,2,4,3.5\n13,3,5,4\n14,4,5,3\n";
const VTK: &str = "# vtk DataFile Version 3.0\nsame network as the CSV tables\nASCII\nDATASET POLYDATA\n\
POINTS 5 float\n0 100 100\n100 100 100\n200 150 100\n200 50 100\n300 100 100\n\
LINES 5 15\n2 0 1\n2 1 2\n2 1 3\n2 2 4\n2 3 4\n\
POINT_DATA 5\nSCALARS pressure_mmHg float 1\nLOOKUP_TABLE default\n40 nan nan nan 10\n\
CELL_DATA 5\nSCALARS radius_um float\nLOOKUP_TABLE default\n5 4 3.5 4 3\n";

fn write(dir: &Path, name: &str, text: &str) -> std::path::PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, text).unwrap();
    p
}

fn import_params() -> (NetworkParams, TumourGeometry) {
    let p = small_scenario_params();
    (p.network, p.tumour)
}

#[test]
fn hand_written_csv_and_vtk_give_the_same_network() {
    let dir = tempfile::tempdir().unwrap();
    let (np, g) = import_params();
    let a =
        read_csv(&write(dir.path(), "n.csv", NODES_CSV), &write(dir.path(), "s.csv", SEGMENTS_CSV), &np, &g).unwrap();
    let b = read_vtk(&write(dir.path(), "net.vtk", VTK), &np, &g).unwrap();
    assert_eq!(a, b);
    assert_eq!(a.segments.len(), 5);
    assert_eq!(a.bc[0], NodeBc::Pressure(40.0 * crate::units::MMHG));
    // The VTK 5.1 layout (OFFSETS and CONNECTIVITY) and a polyline give the same network too.
    let v51 = VTK.replace(
        "LINES 5 15\n2 0 1\n2 1 2\n2 1 3\n2 2 4\n2 3 4\n",
        "LINES 6 10\nOFFSETS vtktypeint64\n0 2 4 6 8 10\nCONNECTIVITY vtktypeint64\n0 1 1 2 1 3 2 4 3 4\n",
    );
    let c = read_vtk(&write(dir.path(), "net51.vtk", &v51), &np, &g).unwrap();
    assert_eq!(a, c);
    let poly = VTK
        .replace("LINES 5 15\n2 0 1\n2 1 2\n2 1 3\n2 2 4\n2 3 4\n", "LINES 3 11\n3 0 1 2\n2 1 3\n3 2 4 3\n")
        .replace(
            "CELL_DATA 5\nSCALARS radius_um float\nLOOKUP_TABLE default\n5 4 3.5 4 3\n",
            "CELL_DATA 3\nSCALARS radius_um float\nLOOKUP_TABLE default\n4 3.5 4\n",
        );
    let d = read_vtk(&write(dir.path(), "poly.vtk", &poly), &np, &g).unwrap();
    assert_eq!(d.segments.len(), 5);
    // Without boundary conditions in the file, the dead ends get the inlet and outlet pressures.
    let bare =
        NODES_CSV.replace(",pressure_mmHg", "").replace(",40\n", "\n").replace(",\n", "\n").replace(",10\n", "\n");
    let tree = SEGMENTS_CSV.replace("14,4,5,3\n", "");
    let e = read_csv(&write(dir.path(), "bare.csv", &bare), &write(dir.path(), "s2.csv", &tree), &np, &g).unwrap();
    assert_eq!(e.bc[0], NodeBc::Pressure(np.inlet_pressure));
    assert_eq!(e.bc[4], NodeBc::Pressure(np.outlet_pressure));
    // Node 4 (x = 200 of 0..300 um) lies two thirds of the way from inlet to outlet.
    let want = np.inlet_pressure / 3.0 + 2.0 / 3.0 * np.outlet_pressure;
    assert!(matches!(e.bc[3], NodeBc::Pressure(v) if (v - want).abs() < 1e-9), "{:?}", e.bc[3]);
    assert_eq!(e.bc[1], NodeBc::None);
}

#[test]
fn malformed_network_files_get_clear_messages() {
    let dir = tempfile::tempdir().unwrap();
    let (np, g) = import_params();
    let nodes = write(dir.path(), "n.csv", NODES_CSV);
    let case = |segments: &str, nodes_text: Option<&str>| -> String {
        let s = write(dir.path(), "bad_s.csv", segments);
        let n = match nodes_text {
            Some(t) => write(dir.path(), "bad_n.csv", t),
            None => nodes.clone(),
        };
        read_csv(&n, &s, &np, &g).expect_err("should be rejected").to_string()
    };
    let m = case("id,node_a,node_b,radius_um\n10,1,2,5\n11,2,9,4\n", None);
    assert!(
        m.contains("bad_s.csv") && m.contains("line 3") && m.contains("node \"9\"") && m.contains("does not define"),
        "{m}"
    );
    let m = case("id,node_a,node_b,radius_um\n10,1,2,-5\n", None);
    assert!(m.contains("line 2") && m.contains("radius -5 um") && m.contains("> 0"), "{m}");
    let m = case("id,node_a,node_b,radius_um\n10,1,2,1.0\n", None);
    assert!(m.contains("at least 1.6 um"), "{m}");
    let same = NODES_CSV.replace("2,100,100,100,", "2,0,100,100,");
    let m = case("id,node_a,node_b,radius_um\n10,1,2,5\n", Some(&same));
    assert!(m.contains("same position (length 0)"), "{m}");
    let m = case("id,node_a,node_b,radius_um,length_um\n10,1,2,5,0\n11,2,5,5,\n", None);
    assert!(m.contains("length 0 um"), "{m}");
    let m = case("id,node_a,node_b,radius_um\n10,1,2,5\n11,3,4,4\n", None);
    assert!(
        m.contains("2 disconnected pieces") && m.contains("segment 11 (line 3)") && m.contains("keep_disconnected"),
        "{m}"
    );
    let m = case("id,node_a,node_b,radius_um\n10,1,2,5\n10,2,3,4\n", None);
    assert!(m.contains("segment id 10 is already used on line 2"), "{m}");
    let m = case("id,node_a,node_b,radius_um\n10,1,2,five\n", None);
    assert!(m.contains("`radius_um` = \"five\" is not a finite number"), "{m}");
    let m = case("id,node_a,node_b\n10,1,2\n", None);
    assert!(m.contains("lacks the column `radius_um`"), "{m}");
    let m = case("id,node_a,node_b,radius_um,colour\n10,1,2,5,red\n", None);
    assert!(m.contains("unknown column `colour`"), "{m}");
    let m = case("id,node_a,node_b,radius_um\n10,1,1,5\n", None);
    assert!(m.contains("starts and ends at the same node"), "{m}");
    // VTK cases.
    let vtk = |text: &str| read_vtk(&write(dir.path(), "bad.vtk", text), &np, &g).expect_err("rejected").to_string();
    let m = vtk(&VTK.replace("ASCII", "BINARY"));
    assert!(m.contains("bad.vtk") && m.contains("only ASCII"), "{m}");
    let m = vtk(&VTK.replace("2 3 4\n", "2 3 7\n"));
    assert!(m.contains("refers to point 7 of 5"), "{m}");
    let m = vtk(&VTK.replace("radius_um", "diameter"));
    assert!(m.contains("no `radius_um` array"), "{m}");
    let m = vtk(&VTK.replace("LINES 5 15", "LINES 5 16"));
    assert!(m.contains("LINES says 16 values"), "{m}");
}

mod pharmacokinetics {
    use super::super::pk::{Elimination, PlasmaPool, PlasmaTable, design_rates, transition, two_compartment};
    use crate::params::{Params, ParticlePlasmaParams};
    use crate::rng::{Domain, stream};
    use crate::scenario::{Coating, Scenario};

    const DOSE: u64 = 10_000_000_000_000; // 1e13 particles

    fn design(radius_nm: f64, zeta_mv: f64, coating: Coating) -> ParticlePlasmaParams {
        let text = format!(
            "[[particle]]\nname = \"p\"\nhydrodynamic_radius_nm = {radius_nm}\nsurface_potential_mV = {zeta_mv}\n\
             coating = \"{}\"\n",
            if coating == Coating::Stealth { "stealth" } else { "none" }
        );
        let s: Scenario = toml::from_str(&text).unwrap();
        Params::resolve(&s).particles[0].clone()
    }

    /// Runs a pool for `steps` steps of `dt`, returning the amounts at every step boundary.
    fn run(pool: &mut PlasmaPool, dt: f64, steps: u64) -> Vec<f64> {
        let mut out = vec![pool.amount as f64];
        for k in 0..steps {
            let mut s = stream(1, Domain::Vessels, 77, k);
            pool.step(k as f64 * dt, dt, &mut s);
            assert!(pool.balanced());
            out.push(pool.amount as f64);
        }
        out
    }

    #[test]
    fn one_compartment_half_life_and_auc_match_the_closed_form() {
        // C(t) = C0 e^(-k t): half-life ln 2 / k, AUC over [0, T] = C0 (1 - e^(-k T)) / k
        // (Gibaldi and Perrier 1982, chapter 1).
        let k = std::f64::consts::LN_2 / (12.0 * 3600.0);
        let e = Elimination::Rates { renal: 0.25 * k, phagocytic: 0.75 * k };
        let mut pool = PlasmaPool::bolus("p", DOSE, 2e-6, 1.1e-6, e);
        let dt = 60.0;
        let steps = 5 * 12 * 60; // five half-lives
        let a = run(&mut pool, dt, steps);
        // Half-life: the first step below half the dose, interpolated log-linearly.
        let i = a.iter().position(|&v| v < 0.5 * DOSE as f64).unwrap();
        let (l0, l1) = ((a[i - 1] / DOSE as f64).ln(), (a[i] / DOSE as f64).ln());
        let t_half = dt * ((i - 1) as f64 + (-std::f64::consts::LN_2 - l0) / (l1 - l0));
        // Binomial noise of N = 1e13 particles: relative sd below 1 / sqrt(N) = 3e-7, i.e. a
        // time error below 3e-7 / ln 2 of a half-life; 1e-5 is more than 20 of those.
        assert!((t_half * k / std::f64::consts::LN_2 - 1.0).abs() < 1e-5, "{t_half}");
        // AUC by the trapezoid rule: relative error (k dt)^2 / 12 = 8e-8, plus the noise above.
        let auc: f64 = a.windows(2).map(|w| 0.5 * (w[0] + w[1]) * dt).sum();
        let t_end = steps as f64 * dt;
        let exact = DOSE as f64 * (1.0 - (-k * t_end).exp()) / k;
        assert!((auc / exact - 1.0).abs() < 1e-5, "{auc} {exact}");
        // Routes split in proportion to their rates: renal share 1/4 within 5 binomial sd.
        let share = pool.cleared_renal as f64 / pool.cleared as f64;
        assert!((share - 0.25).abs() < 5.0 * (0.25 * 0.75 / pool.cleared as f64).sqrt() + 1e-12, "{share}");
        assert_eq!(pool.dose, pool.amount + pool.cleared);
    }

    #[test]
    fn renal_cut_off_separates_fast_and_slow_clearance() {
        // Below a hydrodynamic diameter of about 5.5 nm the kidney clears particles within
        // minutes to an hour; above it, it does not (Choi et al. 2007; common practice).
        let small = design(2.0, 0.0, Coating::Stealth); // 4 nm diameter
        let large = design(4.0, 0.0, Coating::Stealth); // 8 nm diameter
        let (rs, ms) = design_rates(&small);
        let (rl, ml) = design_rates(&large);
        assert!(rs > 100.0 * rl, "renal {rs} vs {rl}");
        let half = |r: f64, m: f64| std::f64::consts::LN_2 / (r + m) / 3600.0;
        assert!(half(rs, ms) < 1.0, "small: {} h", half(rs, ms));
        assert!(half(rl, ml) > 4.0, "large: {} h", half(rl, ml));
        // Phagocytic clearance rises with size and positive charge and falls with a stealth coat
        // (common practice); a 100 nm stealth particle circulates for about 15 to 20 h in mice
        // (reference sheet section 2, from memory): the defaults give 16 h.
        let base = design_rates(&design(50.0, 0.0, Coating::Stealth)).1;
        assert!(design_rates(&design(150.0, 0.0, Coating::Stealth)).1 > 2.0 * base);
        assert!(design_rates(&design(50.0, 30.0, Coating::Stealth)).1 > 2.0 * base);
        assert!(design_rates(&design(50.0, 0.0, Coating::None)).1 > 5.0 * base);
        let t = half(0.0, base);
        assert!((15.0..=20.0).contains(&t), "{t} h");
    }

    #[test]
    fn two_compartment_model_reproduces_the_bi_exponential() {
        // Gibaldi and Perrier 1982: the central amount of the two-compartment model with
        // k21 = A beta + B alpha, k10 = alpha beta / k21, k12 = alpha + beta - k21 - k10 is
        // A e^(-alpha t) + B e^(-beta t).
        let (a, alpha, beta) = (0.4, std::f64::consts::LN_2 / 1800.0, std::f64::consts::LN_2 / 43200.0);
        let (k10, k12, k21) = two_compartment(a, alpha, beta);
        for t in [0.0, 600.0, 3600.0, 7200.0, 86400.0, 3.0 * 86400.0] {
            let want = a * (-alpha * t).exp() + (1.0 - a) * (-beta * t).exp();
            let got = transition(k10, k12, k21, t)[0][0];
            assert!((got - want).abs() < 1e-12, "t = {t}: {got} {want}");
        }
        let e = Elimination::TwoCompartment { k10, k12, k21 };
        let mut pool = PlasmaPool::bolus("p", DOSE, 2e-6, 1.1e-6, e);
        let a_t = run(&mut pool, 300.0, 288);
        let want = a * (-alpha * 86400.0).exp() + (1.0 - a) * (-beta * 86400.0).exp();
        // Relative binomial noise after 288 steps: below sqrt(288 / N) / want = 1e-5.
        assert!((a_t[288] / DOSE as f64 / want - 1.0).abs() < 1e-4, "{} {want}", a_t[288] / DOSE as f64);
    }

    #[test]
    fn measured_table_round_trips() {
        let dir = tempfile::tempdir().unwrap();
        // Samples of a bi-exponential curve, in percent of the dose, at typical blood-draw times.
        let curve = |t_h: f64| 100.0 * (0.3 * (-t_h * 1.2).exp() + 0.7 * (-t_h * 0.05).exp());
        let times = [0.083, 0.25, 0.5, 1.0, 2.0, 4.0, 8.0, 24.0];
        let mut text = "# plasma samples\ntime_h,percent_of_dose\n".to_string();
        for t in times {
            text.push_str(&format!("{t},{}\n", curve(t)));
        }
        let path = dir.path().join("pk.csv");
        std::fs::write(&path, &text).unwrap();
        let tab = PlasmaTable::read(&path, DOSE, 1.1e-6).unwrap();
        // The table holds its samples exactly (relative to the back-extrapolated t = 0 value).
        let scale = curve(times[0]) / tab.fraction(times[0] * 3600.0);
        for t in times {
            assert!((tab.fraction(t * 3600.0) * scale / curve(t) - 1.0).abs() < 1e-12, "t = {t} h");
        }
        // The same curve in particles per mL of plasma reads to the same table.
        let per_ml = text
            .replace("percent_of_dose", "particles_per_mL")
            .lines()
            .map(|l| match l.split_once(',') {
                Some((t, v)) if v.parse::<f64>().is_ok() => {
                    format!("{t},{}\n", v.parse::<f64>().unwrap() / 100.0 * DOSE as f64 / 1.1)
                }
                _ => format!("{l}\n"),
            })
            .collect::<String>();
        std::fs::write(&path, per_ml).unwrap();
        let tab2 = PlasmaTable::read(&path, DOSE, 1.1e-6).unwrap();
        for t in times {
            assert!((tab2.fraction(t * 3600.0) / tab.fraction(t * 3600.0) - 1.0).abs() < 1e-12);
        }
        // A pool following the table reproduces it at the sample times.
        let mut pool = PlasmaPool::bolus("p", DOSE, 2e-6, 1.1e-6, Elimination::Table(tab.clone()));
        let a = run(&mut pool, 60.0, 24 * 60);
        for t in times {
            let k = (t * 60.0).round() as usize;
            let want = tab.fraction(k as f64 * 60.0);
            // Relative binomial noise below sqrt(steps / N) / want, under 2e-5 here.
            assert!((a[k] / DOSE as f64 / want - 1.0).abs() < 1e-4, "t = {t} h");
        }
        // Malformed tables.
        for (body, msg) in [
            ("time_h,fraction_of_dose\n0,1\n", "at least 2"),
            ("time_h,fraction_of_dose\n1,0.5\n0.5,0.4\n", "increasing order"),
            ("time_h,fraction_of_dose\n0,1\n1,-0.5\n", "concentration > 0"),
            ("time_d,fraction_of_dose\n0,1\n1,0.5\n", "time_h, time_min or time_s"),
            ("time_h,mg\n0,1\n1,0.5\n", "fraction_of_dose, percent_of_dose or particles_per_mL"),
            ("time_h,fraction_of_dose\n0,1\n1,x\n", "line 3: value \"x\" is not a number"),
        ] {
            std::fs::write(&path, body).unwrap();
            let m = PlasmaTable::read(&path, DOSE, 1.1e-6).unwrap_err().to_string();
            assert!(m.contains("pk.csv") && m.contains(msg), "{m}");
        }
    }

    #[test]
    fn tiny_elimination_probabilities_draw_quickly() {
        // A renal rate far above the cut-off is ~1e-82 /h: the binomial split of cleared
        // particles must neither loop over 1e13 trials nor overflow.
        let mut s = stream(5, Domain::Vessels, 2, 0);
        assert_eq!(s.binomial(DOSE, 1e-84), 0);
        assert_eq!(s.binomial(DOSE, 1.0 - 1e-17), DOSE);
        let mut pool = PlasmaPool::bolus("p", DOSE, 2e-6, 1e-6, Elimination::Rates { renal: 1e-86, phagocytic: 1e-5 });
        pool.step(0.0, 60.0, &mut s);
        assert!(pool.balanced() && pool.cleared > 0 && pool.cleared_renal == 0);
    }

    #[test]
    fn withdrawals_and_returns_keep_the_books_exact() {
        let mut pool = PlasmaPool::bolus("p", 1000, 2e-6, 1e-6, Elimination::Rates { renal: 0.0, phagocytic: 1e-3 });
        assert_eq!(pool.withdraw(300), 300);
        assert_eq!(pool.withdraw(2000), 700, "cannot take more than there is");
        assert_eq!(pool.amount, 0);
        pool.give_back(50);
        assert!(pool.balanced());
        assert_eq!(pool.concentration(), 50.0 / 1e-6);
        let mut s = stream(3, Domain::Vessels, 1, 0);
        pool.step(0.0, 1e4, &mut s);
        assert!(pool.balanced() && pool.cleared > 0);
    }
}

#[test]
fn dead_ends_and_unanchored_pieces_are_unperfused() {
    // A tube with a dead-end branch, and a separate loop without any boundary condition.
    let mut net = Network::default();
    let a = net.add_node([0.0; 3], NodeBc::Pressure(4000.0));
    let b = net.add_node([2e-4, 0.0, 0.0], NodeBc::None);
    let c = net.add_node([4e-4, 0.0, 0.0], NodeBc::Pressure(2000.0));
    let d = net.add_node([2e-4, 2e-4, 0.0], NodeBc::None);
    let e = net.add_node([0.0, 5e-4, 0.0], NodeBc::None);
    let f = net.add_node([2e-4, 5e-4, 0.0], NodeBc::None);
    net.segments.extend([seg(a, b, 4e-6, 2e-4), seg(b, c, 4e-6, 2e-4), seg(b, d, 4e-6, 2e-4), seg(e, f, 4e-6, 2e-4)]);
    let fl = solve(&net, &newtonian()).unwrap();
    assert_eq!(fl.perfused, vec![true, true, false, false]);
    assert!((fl.node_pressure[d as usize] - 3000.0).abs() < 1e-9, "the dead end sits at the branch pressure");
    assert!(fl.node_pressure[e as usize].is_nan() && fl.mid_pressure[3].is_nan());
    assert_eq!(fl.flow[3], 0.0);
    assert_eq!(fl.perfused_fraction(), 0.5);
}

#[test]
fn network_wall_fluid_sums_starling_terms_of_perfused_walls() {
    use crate::process::blood::{BloodSettings, network_wall_fluid, segment_walls};
    // One host tube along x through the middle of a 4-voxel row, pressures 30 and 20 mmHg.
    let p = small_scenario_params();
    let l = Lattice::new([4, 1, 1], 1e-4, [0.0; 3]);
    let regions = crate::tissue::Regions::from_geometry(&l, &TumourGeometry { centre: [1.0; 3], semi_axes: [1e-9; 3] });
    let mm = crate::units::MMHG;
    let mut net = Network::default();
    let a = net.add_node([0.0, 5e-5, 5e-5], NodeBc::Pressure(30.0 * mm));
    let b = net.add_node([4e-4, 5e-5, 5e-5], NodeBc::Pressure(20.0 * mm));
    net.segments.push(seg(a, b, 5e-6, 4e-4));
    let settings = BloodSettings {
        flow: newtonian(),
        network: p.network.clone(),
        blood: p.blood.clone(),
        starling: p.starling.clone(),
        continuum: p.continuum_vessels.clone(),
        particles: vec![],
    };
    let flow = solve(&net, &settings.flow).unwrap();
    let raster = VesselRaster::build(&net, &l);
    let walls = segment_walls(&net, &settings);
    let wf = network_wall_fluid(&l, &regions, &net, &raster, &flow, &walls, &p.starling);
    // Starling (Baxter and Jain 1989 form): each voxel holds a quarter of the wall area 2 pi r L;
    // Lp from pore theory gamma r0^2 / (8 mu Lw); drive = Lp S (p_mid - sigma_T (pi_v - pi_i)).
    let seg0 = &net.segments[0];
    let lp = seg0.pore_fraction * seg0.pore_radius.powi(2) / (8.0 * p.blood.plasma_viscosity * seg0.wall_thickness);
    let s_vox = seg0.wall_area() / 4.0;
    let onc = p.starling.protein_reflection[0] * (p.starling.plasma_oncotic - p.starling.interstitial_oncotic[0]);
    for v in 0..4 {
        assert!((wf.lp_s.data[v] - lp * s_vox).abs() <= 1e-12 * lp * s_vox, "voxel {v}");
        let want = lp * s_vox * (25.0 * mm - onc);
        assert!((wf.drive.data[v] - want).abs() <= 1e-12 * want.abs(), "voxel {v}: {} {want}", wf.drive.data[v]);
    }
}
