//! Solver checks that need no outside data: agreement of the matrix-free operator with its own
//! assembled triplets, symmetry of the preconditioner, convergence, warm starts, thread-count
//! independence and the refusal of singular problems. The comparison with an outside direct
//! solver (SciPy) is in `tests/pressure.rs`.

use super::grid::{scatter, zeros};
use super::multigrid::Multigrid;
use super::*;
use crate::lattice::Face;
use crate::rng::{Domain, stream};

/// A heterogeneous problem: log-uniform coefficients over two decades, a sparse diagonal term,
/// mixed walls (fixed on x-, exterior on y+, zero flux elsewhere) and a random source.
pub(crate) fn random_problem(n: [usize; 3], seed: u64) -> (Stencil7, Vec<f64>) {
    let len = n[0] * n[1] * n[2];
    let mut s = stream(seed, Domain::Sweep, 0, 0);
    let k: Vec<f64> = (0..len).map(|_| 10f64.powf(2.0 * s.uniform() - 1.0)).collect();
    let c: Vec<f64> = (0..len).map(|_| if s.chance(0.3) { 0.05 * s.uniform() } else { 0.0 }).collect();
    let walls = |face: Face, ijk: [usize; 3]| match (face.axis, face.upper) {
        (0, false) => Wall::Fixed(1.0 + 0.1 * ijk[1] as f64),
        (1, true) => Wall::Exterior { value: -0.5, distance: 0.7 },
        _ => Wall::ZeroFlux,
    };
    let (op, bnd) = Stencil7::from_conductivity(n, 0.1, &k, &c, walls);
    let mut f: Vec<f64> = (0..len).map(|_| s.uniform() - 0.3).collect();
    op.add_boundary_source(&bnd, &mut f);
    (op, f)
}

fn matvec_triplets(op: &Stencil7, u: &[f64]) -> Vec<f64> {
    let mut out = vec![0.0; u.len()];
    for (r, c, v) in op.triplets() {
        out[r] += v * u[c];
    }
    out
}

fn norm(v: &[f64]) -> f64 {
    v.iter().map(|x| x * x).sum::<f64>().sqrt()
}

#[test]
fn matrix_free_operator_matches_its_triplets() {
    let (op, _) = random_problem([7, 5, 4], 3);
    let mut s = stream(4, Domain::Sweep, 1, 0);
    let u: Vec<f64> = (0..op.len()).map(|_| s.uniform() - 0.5).collect();
    let mut a = vec![0.0; op.len()];
    op.apply(&u, &mut a);
    let b = matvec_triplets(&op, &u);
    for (x, y) in a.iter().zip(&b) {
        // Same products, summed in a different order: equal to a few ulps of the terms.
        assert!((x - y).abs() <= 1e-13 * (x.abs() + y.abs() + 1.0), "{x} vs {y}");
    }
    // Symmetric: every off-diagonal (r, c) has its mirror (c, r) with the same value.
    let t = op.triplets();
    let map: std::collections::HashMap<(usize, usize), f64> = t.iter().map(|&(r, c, v)| ((r, c), v)).collect();
    for (&(r, c), v) in &map {
        assert_eq!(map[&(c, r)], *v);
    }
}

#[test]
fn solves_to_the_asked_tolerance_on_odd_heterogeneous_lattices() {
    for (n, seed) in [([13, 9, 7], 1u64), ([31, 6, 17], 2), ([1, 40, 3], 5), ([9, 9, 9], 6)] {
        let (op, f) = random_problem(n, seed);
        let mut solver = Solver::new(&op, SolverOptions { tolerance: 1e-10, ..Default::default() }).unwrap();
        let mut u = vec![0.0; op.len()];
        let rep = solver.solve(&op, &f, &mut u).unwrap();
        // The residual recomputed here from the assembled matrix, independently of the solver.
        let au = matvec_triplets(&op, &u);
        let r: Vec<f64> = f.iter().zip(&au).map(|(a, b)| a - b).collect();
        let rel = norm(&r) / norm(&f);
        // Rounding of the two residual computations differs by about eps * ||A|| ||u|| / ||f||.
        assert!(rel <= 1e-10 * (1.0 + 1e-3), "{n:?}: relative residual {rel:e}, report {rep:?}");
        assert!(rep.iterations < 40, "{n:?}: {rep:?} levels {:?}", solver.levels());
    }
}

#[test]
fn the_preconditioner_is_symmetric() {
    // PCG needs a symmetric preconditioner: (M a) . b = a . (M b).
    let (op, _) = random_problem([19, 12, 10], 9);
    let g = op.g;
    let mut mg = Multigrid::new(&op, 1).unwrap();
    assert!(mg.dims().len() >= 3, "{:?}", mg.dims());
    let mut s = stream(10, Domain::Sweep, 2, 0);
    let a: Vec<f64> = (0..op.len()).map(|_| s.uniform() - 0.5).collect();
    let b: Vec<f64> = (0..op.len()).map(|_| s.uniform() - 0.5).collect();
    let (mut ap, mut bp, mut ma, mut mb) = (zeros(&g), zeros(&g), zeros(&g), zeros(&g));
    scatter(&g, &a, &mut ap);
    scatter(&g, &b, &mut bp);
    mg.vcycle(&ap, &mut ma);
    mg.vcycle(&bp, &mut mb);
    let x: f64 = ma.iter().zip(&bp).map(|(u, v)| u * v).sum();
    let y: f64 = ap.iter().zip(&mb).map(|(u, v)| u * v).sum();
    assert!((x - y).abs() <= 1e-12 * (x.abs() + y.abs()), "{x} vs {y}");
    // Positive definite on these vectors.
    assert!(x > 0.0 && ma.iter().zip(&ap).map(|(u, v)| u * v).sum::<f64>() > 0.0);
}

#[test]
fn warm_start_from_the_solution_needs_no_iteration() {
    let (op, f) = random_problem([16, 16, 16], 11);
    let mut solver = Solver::new(&op, SolverOptions::default()).unwrap();
    let mut u = vec![0.0; op.len()];
    let cold = solver.solve(&op, &f, &mut u).unwrap();
    assert!(cold.iterations > 0);
    let again = solver.solve(&op, &f, &mut u).unwrap();
    assert_eq!(again.iterations, 0, "{again:?}");
    // A small change of the problem: fewer iterations from the old solution than from zero.
    let mut op2 = op.clone();
    for i in 0..16 {
        op2.set_diagonal([i, 8, 8], 0.5);
    }
    solver.update(&op2).unwrap();
    let mut cold_u = vec![0.0; op.len()];
    let c2 = solver.solve(&op2, &f, &mut cold_u).unwrap();
    let w2 = solver.solve(&op2, &f, &mut u).unwrap();
    assert!(w2.iterations < c2.iterations, "warm {w2:?} cold {c2:?}");
}

#[test]
fn results_do_not_depend_on_the_thread_count() {
    // Large enough for the parallel loops (over 2^14 padded cells per level 0).
    let (op, f) = random_problem([40, 36, 30], 12);
    let run = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
        pool.install(|| {
            let mut solver = Solver::new(&op, SolverOptions::default()).unwrap();
            let mut u = vec![0.0; op.len()];
            let rep = solver.solve(&op, &f, &mut u).unwrap();
            (u, rep)
        })
    };
    let (a, ra) = run(1);
    let (b, rb) = run(3);
    assert_eq!(ra, rb);
    assert!(a.iter().zip(&b).all(|(x, y)| x.to_bits() == y.to_bits()));
}

#[test]
fn singular_problems_are_refused() {
    let n = [6, 5, 4];
    let len = 120;
    let (op, _) = Stencil7::from_conductivity(n, 1.0, &vec![1.0; len], &vec![0.0; len], |_, _| Wall::ZeroFlux);
    let e = Solver::new(&op, SolverOptions::default()).unwrap_err();
    assert!(matches!(e, SolveError::Singular { .. }), "{e}");
    // An isolated cell (no conductance) without a diagonal term.
    let mut k = vec![1.0; len];
    k[7] = 0.0;
    let mut c = vec![0.0; len];
    c[0] = 1.0;
    let (op, _) = Stencil7::from_conductivity(n, 1.0, &k, &c, |_, _| Wall::ZeroFlux);
    let e = Solver::new(&op, SolverOptions::default()).unwrap_err();
    assert!(e.to_string().contains("cell (1, 1, 0)"), "{e}");
}

#[test]
fn the_iteration_limit_is_reported() {
    let (op, f) = random_problem([20, 20, 20], 13);
    let mut solver = Solver::new(&op, SolverOptions { tolerance: 1e-14, max_iterations: 2, sweeps: 1 }).unwrap();
    let mut u = vec![0.0; op.len()];
    let e = solver.solve(&op, &f, &mut u).unwrap_err();
    assert!(matches!(e, SolveError::NotConverged { iterations: 2, .. }), "{e}");
}

#[test]
fn the_pipelined_sweeps_equal_plain_sweeps_bit_for_bit() {
    use super::kernels;
    // Thick enough for several slabs at 2 to 5 threads; odd sizes so rows start with either colour.
    for n in [[37, 21, 61], [8, 9, 33], [5, 4, 3], [6, 130, 14]] {
        let (op, f0) = random_problem(n, 21);
        let g = op.g;
        let mg = Multigrid::new(&op, 1).unwrap();
        let v = mg.fine_view();
        let mut f = zeros(&g);
        scatter(&g, &f0, &mut f);
        let mut s = stream(22, Domain::Sweep, 3, 0);
        let start: Vec<f64> = (0..op.len()).map(|_| s.uniform()).collect();
        let mut u0 = zeros(&g);
        scatter(&g, &start, &mut u0);
        for threads in [1, 2, 3, 5] {
            let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
            pool.install(|| {
                for (c1, sweeps, zero) in
                    [(0, 1, false), (1, 1, true), (0, 2, false), (1, 2, true), (0, 3, true), (1, 4, false)]
                {
                    let mut a = u0.clone();
                    let mut r = zeros(&g);
                    kernels::smooth(&v, &mut a, &f, c1, sweeps, zero, Some(&mut r));
                    let mut b = if zero { zeros(&g) } else { u0.clone() };
                    for _ in 0..sweeps {
                        kernels::sweep_two_pass(&v, &mut b, &f, c1);
                    }
                    let case =
                        format!("{n:?}, {threads} threads, first colour {c1}, {sweeps} sweeps, from zero {zero}");
                    assert!(a.iter().zip(&b).all(|(x, y)| x.to_bits() == y.to_bits()), "{case}");
                    // The fused residual equals the plain one at the first colour, zero elsewhere.
                    let mut rr = zeros(&g);
                    kernels::residual_smooth(&v, &b, &f, &mut rr);
                    for k in 0..n[2] {
                        for j in 0..n[1] {
                            for i in 0..n[0] {
                                let p = g.pad(i, j, k);
                                let want = if (i + j + k) % 2 == c1 { rr[p] } else { 0.0 };
                                assert_eq!(r[p].to_bits(), want.to_bits(), "{case}: ({i},{j},{k})");
                            }
                        }
                    }
                    // Without the residual.
                    let mut c = u0.clone();
                    kernels::smooth(&v, &mut c, &f, c1, sweeps, zero, None);
                    assert!(c.iter().zip(&b).all(|(x, y)| x.to_bits() == y.to_bits()), "{case}, no residual");
                }
            });
        }
    }
}
