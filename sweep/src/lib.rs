//! interstice sweeps: many runs of one base scenario, on this machine or on a Slurm cluster.
//!
//! - [`spec`]: sweep files (TOML), checked like scenarios: every problem names file, line, key.
//! - [`design`]: grids, Latin hypercube, Morris trajectories, Saltelli's cross-sampled design.
//! - [`plan`]: the runs: parameters, derived seeds, scenario texts validated by the engine.
//! - [`estimate`]: the cost before anything is spent (counts, and a probe of run 0).
//! - [`folder`]: the sweep folder, each run's status file and the state derived from files.
//! - [`local`]: the local runner (child `interstice run` processes, a bounded number at once).
//! - [`slurm`]: job arrays (`sbatch --array`), the queue, collection and resubmission.
//! - [`aggregate`]: one table of parameters and metrics (CSV, HDF5) and the sensitivity indices.
//! - [`sensitivity`]: Morris mu, mu*, sigma; Sobol first-order, total and second-order indices.
//! - [`cli`]: the `interstice sweep` subcommands.

pub mod aggregate;
pub mod cli;
pub mod design;
pub mod error;
pub mod estimate;
pub mod folder;
pub mod local;
pub mod plan;
pub mod sensitivity;
pub mod slurm;
pub mod spec;

pub use error::{Result, SweepError};
pub use folder::{Folder, RunState};
pub use plan::Plan;
pub use spec::SweepSpec;
