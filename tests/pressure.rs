//! The pressure operator and right-hand side against an independent assembly in Python, and our
//! multigrid-preconditioned CG solution against SciPy's sparse direct solver
//! (`scipy.sparse.linalg.spsolve`), on a small heterogeneous case: random conductivity, vessel
//! terms and lymphatics, with fixed, zero-flux and host-equilibrium faces.

mod common;

use common::*;
use interstice_sim::field::Field;
use interstice_sim::lattice::{Face, Lattice};
use interstice_sim::process::pressure::{Lymphatics, PressureWall, assemble};
use interstice_sim::rng::{Domain, stream};
use interstice_sim::solver::{Solver, SolverOptions};
use interstice_sim::vascular::WallFluid;

/// Boundary of each face of the box, as the Python side decodes it: 0 fixed, 1 zero flux,
/// 2 host equilibrium.
fn wall_code(face: Face) -> u8 {
    match (face.axis, face.upper) {
        (0, false) => 0,
        (0, true) => 2,
        (1, false) => 1,
        (1, true) => 0,
        (2, false) => 2,
        _ => 1,
    }
}

const FIXED_PA: f64 = 350.0;

#[test]
fn operator_and_solution_agree_with_scipy() {
    let n = [9, 7, 6];
    let h = 30e-6;
    let l = Lattice::new(n, h, [0.0; 3]);
    let len = l.len();
    let vol = l.voxel_volume();
    let mut s = stream(2024, Domain::Sweep, 0, 0);
    // Magnitudes of the Baxter-Jain 1989 tumour: K ~ 3e-14 m^2/(Pa s), Lp S/V ~ 3.1e-7 1/(Pa s),
    // effective pressure ~ 2800 Pa; each varied at random over a decade or so.
    let k: Vec<f64> = (0..len).map(|_| 3.1e-14 * 10f64.powf(1.5 * s.uniform() - 0.75)).collect();
    let mut wall = WallFluid {
        lp_s: Field::filled("wall_lp_s", "m3 Pa-1 s-1", "", len, 0.0),
        drive: Field::filled("wall_drive", "m3 s-1", "", len, 0.0),
    };
    let mut lymph =
        Lymphatics { drainage: Field::filled("lymphatic_drainage", "Pa-1 s-1", "", len, 0.0), pressure: 100.0 };
    for v in 0..len {
        let ls = 3.1e-7 * vol * 2.0 * s.uniform();
        wall.lp_s.data[v] = ls;
        wall.drive.data[v] = ls * 2800.0 * (0.3 + s.uniform());
        if s.chance(0.5) {
            lymph.drainage.data[v] = 3.0e-7 * s.uniform();
        }
    }
    let sys = assemble(&l, &k, &wall, &lymph, |face, _| match wall_code(face) {
        0 => PressureWall::Fixed(FIXED_PA),
        1 => PressureWall::ZeroFlux,
        _ => PressureWall::HostEquilibrium,
    });
    let tol = 1e-12;
    let mut solver =
        Solver::new(&sys.stencil, SolverOptions { tolerance: tol, max_iterations: 200, sweeps: 2 }).unwrap();
    let mut p = vec![0.0; len];
    let rep = solver.solve(&sys.stencil, &sys.rhs, &mut p).unwrap();
    assert!(rep.relative_residual <= tol);
    let trip = sys.stencil.triplets();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("pressure_case.h5");
    {
        let f = hdf5::File::create(&path).unwrap();
        let put =
            |name: &str, v: &[f64]| f.new_dataset::<f64>().shape(v.len()).create(name).unwrap().write_raw(v).unwrap();
        put("shape", &n.map(|x| x as f64));
        put("h", &[h]);
        put("conductivity", &k);
        put("lp_s", &wall.lp_s.data);
        put("drive", &wall.drive.data);
        put("drainage", &lymph.drainage.data);
        put("lymph_pressure", &[lymph.pressure]);
        put("fixed_pressure", &[FIXED_PA]);
        put("walls", &Face::ALL.map(|fc| f64::from(wall_code(fc))));
        put("rows", &trip.iter().map(|t| t.0 as f64).collect::<Vec<_>>());
        put("cols", &trip.iter().map(|t| t.1 as f64).collect::<Vec<_>>());
        put("vals", &trip.iter().map(|t| t.2).collect::<Vec<_>>());
        put("rhs", &sys.rhs);
        put("pressure", &p);
        put("tolerance", &[tol]);
    }
    let text = python("pressure_scipy.py", &[path.to_str().unwrap()]);
    assert!(text.contains("agree"), "{text}");
    println!("{text}");
}
