//! Typed errors of the engine. The CLI prints them with `Display`, never with a backtrace.

use std::path::PathBuf;

use crate::scenario::ScenarioError;

/// Any failure of the engine that a user can act on.
#[derive(Debug, thiserror::Error)]
pub enum SimError {
    /// The scenario file could not be read, parsed or validated.
    #[error(transparent)]
    Scenario(#[from] ScenarioError),
    /// Writing or reading a run file failed.
    #[error("{path}: {what}: {source}")]
    Hdf5 {
        path: PathBuf,
        what: String,
        #[source]
        source: hdf5::Error,
    },
    /// A plain file-system operation failed.
    #[error("{path}: {what}: {source}")]
    Io {
        path: PathBuf,
        what: String,
        #[source]
        source: std::io::Error,
    },
    /// A conservation law or a finiteness check failed during a run: the run stops here.
    #[error("run stopped at t = {time_s:.6e} s (step {step}): {what}")]
    Invariant { time_s: f64, step: u64, what: String },
    /// An input file other than the scenario (network, table, mask) is malformed.
    #[error("{path}: {what}")]
    Input { path: PathBuf, what: String },
    /// A linear solve did not reach its tolerance.
    #[error(
        "{what}: no convergence after {iterations} iterations (relative residual {residual:.3e}, asked {tolerance:.1e})"
    )]
    Solver { what: String, iterations: usize, residual: f64, tolerance: f64 },
}

/// Result alias of the engine.
pub type SimResult<T> = Result<T, SimError>;

impl SimError {
    /// Wraps an HDF5 error with the file and the operation that failed.
    pub fn hdf5(path: impl Into<PathBuf>, what: impl Into<String>) -> impl FnOnce(hdf5::Error) -> SimError {
        let path = path.into();
        let what = what.into();
        move |source| SimError::Hdf5 { path, what, source }
    }

    /// Wraps an I/O error with the file and the operation that failed.
    pub fn io(path: impl Into<PathBuf>, what: impl Into<String>) -> impl FnOnce(std::io::Error) -> SimError {
        let path = path.into();
        let what = what.into();
        move |source| SimError::Io { path, what, source }
    }
}
