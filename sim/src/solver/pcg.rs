//! Conjugate gradients (Hestenes and Stiefel 1952, J Res Natl Bur Stand 49:409) preconditioned by
//! one multigrid V-cycle per iteration.

use super::grid::{Grid, gather, scatter, zeros};
use super::kernels::{self, dot_row};
use super::multigrid::Multigrid;
use super::stencil::Stencil7;
use super::{SolveError, SolveReport, SolverOptions};

/// A reusable solver for one lattice size: the multigrid hierarchy and the conjugate-gradient
/// vectors, allocated once.
#[derive(Debug, Clone)]
pub struct Solver {
    g: Grid,
    mg: Multigrid,
    x: Vec<f64>,
    r: Vec<f64>,
    z: Vec<f64>,
    p: Vec<f64>,
    q: Vec<f64>,
    partials: Vec<f64>,
    /// Stopping rule and smoothing.
    pub options: SolverOptions,
}

impl Solver {
    /// Builds the solver of `op` (allocates everything the solves will need).
    pub fn new(op: &Stencil7, options: SolverOptions) -> Result<Self, SolveError> {
        let g = op.g;
        let mg = Multigrid::new(op, options.sweeps)?;
        Ok(Solver {
            g,
            mg,
            x: zeros(&g),
            r: zeros(&g),
            z: zeros(&g),
            p: zeros(&g),
            q: zeros(&g),
            partials: vec![0.0; g.n[2] + 2],
            options,
        })
    }

    /// Refreshes the preconditioner after the coefficients of `op` changed (same dimensions);
    /// allocates nothing. Solves stay correct without it, only slower.
    pub fn update(&mut self, op: &Stencil7) -> Result<(), SolveError> {
        if op.g != self.g {
            return Err(SolveError::Shape { expected: self.g.n, found: op.g.n });
        }
        self.mg.sweeps = self.options.sweeps;
        self.mg.update(op)
    }

    /// Cells per multigrid level, finest first.
    pub fn levels(&self) -> Vec<[usize; 3]> {
        self.mg.dims()
    }

    /// Bytes held by the solver (vectors and hierarchy), not counting the operator.
    pub fn memory_bytes(&self) -> usize {
        8 * (self.x.len() + self.r.len() + self.z.len() + self.p.len() + self.q.len() + self.partials.len())
            + self.mg.memory_bytes()
    }

    /// Solves `A u = f` for plain cell vectors (x fastest), starting from the `u` given (a warm
    /// start: pass the previous solution, or zeros). Stops when `||f - A u|| <= tolerance ||f||`
    /// (2-norms), checked on the recomputed residual.
    pub fn solve(&mut self, op: &Stencil7, f: &[f64], u: &mut [f64]) -> Result<SolveReport, SolveError> {
        if op.g != self.g {
            return Err(SolveError::Shape { expected: self.g.n, found: op.g.n });
        }
        let n = self.g.cells();
        if f.len() != n || u.len() != n {
            return Err(SolveError::Shape { expected: self.g.n, found: [f.len().min(u.len()), 1, 1] });
        }
        let tol = self.options.tolerance;
        let g = self.g;
        let a = op.view();
        scatter(&g, f, &mut self.r);
        let bnorm = self.norm2_r();
        if !bnorm.is_finite() {
            return Err(SolveError::NotFinite { what: "the right-hand side".into() });
        }
        if bnorm == 0.0 {
            u.iter_mut().for_each(|v| *v = 0.0);
            return Ok(SolveReport { iterations: 0, relative_residual: 0.0, initial_relative_residual: 0.0 });
        }
        scatter(&g, u, &mut self.x);
        self.true_residual(&a);
        let mut rnorm = self.norm2_r();
        let initial = rnorm / bnorm;
        if !initial.is_finite() {
            return Err(SolveError::NotFinite { what: "the initial guess".into() });
        }
        let mut it = 0;
        let mut restart = true;
        let mut rz = 0.0;
        while rnorm > tol * bnorm {
            if it >= self.options.max_iterations {
                gather(&g, &self.x, u);
                return Err(SolveError::NotConverged { iterations: it, relative_residual: rnorm / bnorm });
            }
            it += 1;
            // z = M r
            self.mg.vcycle(&self.r, &mut self.z);
            let rz_new = self.dot(DotPair::RZ);
            if rz_new.is_nan() || rz_new <= 0.0 {
                return Err(SolveError::NotFinite {
                    what: format!(
                        "the preconditioned residual (r.z = {rz_new:e}): the operator is not positive definite"
                    ),
                });
            }
            if restart {
                self.p.copy_from_slice(&self.z);
                restart = false;
            } else {
                let beta = rz_new / rz;
                let g2 = self.g;
                let z = &self.z;
                g2.planes(&mut self.p, |k, pl| {
                    let o = g2.sz * k;
                    for (pv, &zv) in pl.iter_mut().zip(&z[o..o + g2.sz]) {
                        *pv = zv + beta * *pv;
                    }
                });
            }
            rz = rz_new;
            let pq = kernels::apply_dot(&a, &self.p, &mut self.q, &mut self.partials);
            if pq.is_nan() || pq <= 0.0 {
                return Err(SolveError::NotFinite {
                    what: format!("the search direction (p.Ap = {pq:e}): the operator is not positive definite"),
                });
            }
            let alpha = rz / pq;
            let rr = self.update_xr(alpha);
            rnorm = rr.sqrt();
            if rnorm <= tol * bnorm {
                // Confirm on the recomputed residual; continue from it if rounding drifted.
                scatter(&g, f, &mut self.r);
                self.true_residual(&a);
                rnorm = self.norm2_r();
                restart = true;
            }
        }
        gather(&g, &self.x, u);
        Ok(SolveReport { iterations: it, relative_residual: rnorm / bnorm, initial_relative_residual: initial })
    }

    /// `r = r - A x` where `r` holds the right-hand side on entry.
    fn true_residual(&mut self, a: &kernels::OpView<'_>) {
        // q = A x, then r -= q.
        kernels::apply(a, &self.x, &mut self.q);
        let g = self.g;
        let q = &self.q;
        g.planes(&mut self.r, |k, pl| {
            let o = g.sz * k;
            for (rv, &qv) in pl.iter_mut().zip(&q[o..o + g.sz]) {
                *rv -= qv;
            }
        });
    }

    fn norm2_r(&mut self) -> f64 {
        self.dot(DotPair::RR).sqrt()
    }

    fn dot(&mut self, which: DotPair) -> f64 {
        let g = self.g;
        let (a, b) = match which {
            DotPair::RR => (&self.r, &self.r),
            DotPair::RZ => (&self.r, &self.z),
        };
        g.sum(&mut self.partials, |k| {
            let o = g.sz * k;
            dot_row(&a[o..o + g.sz], &b[o..o + g.sz])
        })
    }

    /// `x += alpha p`, `r -= alpha q`; returns `r . r`.
    fn update_xr(&mut self, alpha: f64) -> f64 {
        let g = self.g;
        let (p, q) = (&self.p, &self.q);
        let r = &mut self.r;
        // Two plane-parallel passes, each with its own disjoint output.
        g.planes(&mut self.x, |k, pl| {
            let o = g.sz * k;
            for (xv, &pv) in pl.iter_mut().zip(&p[o..o + g.sz]) {
                *xv += alpha * pv;
            }
        });
        g.planes_sum(r, &mut self.partials, |k, pl| {
            let o = g.sz * k;
            let mut s = 0.0;
            for (rv, &qv) in pl.iter_mut().zip(&q[o..o + g.sz]) {
                *rv -= alpha * qv;
                s += *rv * *rv;
            }
            s
        })
    }
}

#[derive(Clone, Copy)]
enum DotPair {
    RR,
    RZ,
}
