//! Linear solver for the steady fields of the engine (interstitial pressure, oxygen):
//! `-div(T grad u) + c u = f` on the lattice, a 7-point finite-volume operator with face
//! transmissibilities `T`, a non-negative diagonal term `c`, and fixed-value, zero-flux or
//! exterior (Robin) boundary faces.
//!
//! - [`Stencil7`] holds the operator (matrix-free: per-face and per-cell coefficients only);
//!   [`Stencil7::from_conductivity`] builds it from a cell coefficient with harmonic-mean faces.
//! - [`Solver`] is conjugate gradients preconditioned by a geometric multigrid V-cycle (red-black
//!   Gauss-Seidel smoothing, trilinear transfers, re-discretised coarse operators, dense Cholesky
//!   on the coarsest level; the multigrid streams single-precision copies of the coefficients,
//!   the arithmetic is double precision throughout). It allocates everything once per lattice size; [`Solver::update`]
//!   refreshes the hierarchy after the coefficients change, and a solve starts from whatever the
//!   solution vector holds (a warm start).
//! - Results are bit-identical for any number of threads: red-black sweeps update cells whose
//!   inputs no other task writes, and every reduction adds per-plane partial sums in plane order.
//!
//! A nonlinear problem (Michaelis-Menten consumption, say) is solved by linearising it per outer
//! iteration: update the diagonal term and right-hand side, call [`Solver::update`], solve from
//! the previous iterate.
//!
//! ```
//! use interstice_sim::solver::{Solver, SolverOptions, Stencil7, Wall};
//! // -u'' = 1 on a line of 32 cells of width 1/32, u = 0 on both ends.
//! let n = [32, 1, 1];
//! let h = 1.0 / 32.0;
//! let k = vec![1.0; 32];
//! let c = vec![0.0; 32];
//! let (op, bnd) = Stencil7::from_conductivity(n, h, &k, &c, |face, _| {
//!     if face.axis == 0 { Wall::Fixed(0.0) } else { Wall::ZeroFlux }
//! });
//! let mut f = vec![h * h * h; 32]; // source per cell: 1 per unit volume times the cell volume
//! op.add_boundary_source(&bnd, &mut f);
//! let mut u = vec![0.0; 32];
//! let mut solver = Solver::new(&op, SolverOptions::default()).unwrap();
//! let report = solver.solve(&op, &f, &mut u).unwrap();
//! assert!(report.relative_residual <= 1e-8);
//! // The exact solution is x (1 - x) / 2; the scheme is second order (here the error is h^2 / 8).
//! let x = 15.5 * h;
//! assert!((u[15] - x * (1.0 - x) / 2.0).abs() < h * h);
//! ```

mod grid;
mod kernels;
mod multigrid;
mod pcg;
mod stencil;

pub use multigrid::COARSEST_MAX;
pub use pcg::Solver;
pub use stencil::{Boundary, Stencil7, Wall, harmonic_mean};

/// Stopping rule and smoothing of a [`Solver`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SolverOptions {
    /// Relative residual `||f - A u|| / ||f||` at which a solve stops.
    pub tolerance: f64,
    /// Most conjugate-gradient iterations before a solve gives up.
    pub max_iterations: usize,
    /// Red-black Gauss-Seidel sweeps before and after each coarse correction.
    pub sweeps: usize,
}

impl Default for SolverOptions {
    fn default() -> Self {
        SolverOptions { tolerance: 1e-8, max_iterations: 200, sweeps: 1 }
    }
}

/// What a solve did.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct SolveReport {
    /// Conjugate-gradient iterations (0 when the initial guess already met the tolerance).
    pub iterations: usize,
    /// Final relative residual `||f - A u|| / ||f||`, recomputed from the solution.
    pub relative_residual: f64,
    /// Relative residual of the initial guess.
    pub initial_relative_residual: f64,
}

/// Why a solve failed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SolveError {
    /// The tolerance was not reached within the iteration limit.
    #[error("no convergence after {iterations} iterations (relative residual {relative_residual:.3e})")]
    NotConverged { iterations: usize, relative_residual: f64 },
    /// The operator is singular: nothing ties the solution down somewhere.
    #[error("singular operator: {what}")]
    Singular { what: String },
    /// A value that must be finite (and positive where the operator must be definite) is not.
    #[error("not finite or not positive: {what}")]
    NotFinite { what: String },
    /// Vectors or operator of a different size than the solver was built for.
    #[error("size mismatch: the solver was built for {expected:?} cells, got {found:?}")]
    Shape { expected: [usize; 3], found: [usize; 3] },
}

#[cfg(test)]
mod tests;
