//! The interstitial pressure solve on the heterogeneous sphere problem: a spherical tumour in host
//! tissue (4 mm box, tumour radius 1.4 mm), collagen and glycosaminoglycan fractions varied at
//! random per voxel (a factor of 3 either way, log-uniform), conductivity from the matrix
//! (Jackson-James), continuum vessel terms, lymphatics in the host and a 100 um tumour rim,
//! host-equilibrium faces. Solved to a relative residual of 1e-8 from a zero start at 64^3, 128^3
//! and 192^3 unknowns. Prints `name value unit` lines: solve time (best and median of 5), set-up time
//! (hierarchy build), iterations, final relative residual, peak memory per unknown (growth of the
//! resident set while building and solving, from /proc/self/status) and the solver's own count.

use std::time::Instant;

use interstice_sim::lattice::Lattice;
use interstice_sim::params::Params;
use interstice_sim::process::pressure::{Lymphatics, PressureWall, assemble, conductivity_field};
use interstice_sim::rng::{Domain, stream};
use interstice_sim::scenario::Scenario;
use interstice_sim::solver::{Solver, SolverOptions};
use interstice_sim::tissue::{Matrix, Regions};
use interstice_sim::vascular::WallFluid;

/// Solves per size; the best and the median are printed (the machine may be shared).
const REPEATS: usize = 5;

fn status_kb(key: &str) -> Option<f64> {
    let s = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = s.lines().find(|l| l.starts_with(key))?;
    line.split_whitespace().nth(1)?.parse().ok()
}

fn main() {
    // Sizes to run (all three by default); `PRESSURE_BENCH_SIZES=128` runs one.
    let sizes: Vec<usize> = std::env::var("PRESSURE_BENCH_SIZES")
        .ok()
        .map(|s| s.split(',').filter_map(|v| v.trim().parse().ok()).collect())
        .unwrap_or_else(|| vec![64, 128, 192]);
    for n in sizes {
        // Start the peak count afresh (Linux: writing 5 to clear_refs resets VmHWM).
        let _ = std::fs::write("/proc/self/clear_refs", "5");
        let base = status_kb("VmRSS:").unwrap_or(0.0);
        let mut scenario = Scenario::default();
        scenario.lattice.shape = [n; 3];
        scenario.lattice.voxel_um = 4000.0 / n as f64;
        scenario.tumour.radius_um = 1400.0;
        scenario.lymphatics.functional_rim_um = 100.0;
        let p = Params::resolve(&scenario);
        let l: Lattice = p.lattice.clone();
        let regions = Regions::from_geometry(&l, &p.tumour);
        let mut matrix = Matrix::from_regions(&regions, &p.matrix);
        for v in 0..l.len() {
            let mut s = stream(7, Domain::Sweep, v as u64, 0);
            matrix.collagen.data[v] *= 3f64.powf(2.0 * s.uniform() - 1.0);
            matrix.gag.data[v] *= 3f64.powf(2.0 * s.uniform() - 1.0);
        }
        let wall = WallFluid::continuum(&l, &regions, &p.continuum_vessels, &p.starling);
        let lymph = Lymphatics::build(&l, &regions, &p.tumour, None, &p.lymphatics);
        let k = conductivity_field(&regions, &matrix, &p.matrix, &p.fluid);
        let sys = assemble(&l, &k.data, &wall, &lymph, |_, _| PressureWall::HostEquilibrium);
        drop((matrix, k));
        // The options the pressure process uses.
        let options = SolverOptions { tolerance: 1e-8, max_iterations: 500, sweeps: 2 };
        let t0 = Instant::now();
        let mut solver = Solver::new(&sys.stencil, options).expect("solver");
        let setup = t0.elapsed().as_secs_f64();
        let mut u = vec![0.0; l.len()];
        let mut times = Vec::new();
        let mut report = None;
        for _ in 0..REPEATS {
            u.iter_mut().for_each(|x| *x = 0.0);
            let t = Instant::now();
            let r = solver.solve(&sys.stencil, &sys.rhs, &mut u).expect("converges");
            times.push(t.elapsed().as_secs_f64());
            report = Some(r);
        }
        times.sort_by(f64::total_cmp);
        let (best, median) = (times[0], times[REPEATS / 2]);
        let r = report.expect("solved");
        let peak = status_kb("VmHWM:").unwrap_or(f64::NAN);
        let cells = l.len() as f64;
        let tag = format!("pressure_solve_{n}cubed");
        println!("{tag}_time {best:.4} s");
        println!("{tag}_time_median {median:.4} s");
        println!("{tag}_setup_time {setup:.4} s");
        println!("{tag}_iterations {} 1", r.iterations);
        println!("{tag}_relative_residual {:.3e} 1", r.relative_residual);
        println!("{tag}_peak_memory {:.1} bytes_per_unknown", (peak - base) * 1024.0 / cells);
        let own = solver.memory_bytes() as f64 + 32.0 * ((n + 2) as f64).powi(3);
        println!("{tag}_solver_memory {:.1} bytes_per_unknown", own / cells);
        println!("{tag}_levels {} 1", solver.levels().len());
    }
}
