//! Typed errors of sweeps. The CLI prints them with `Display` and their causes, never a backtrace.

use std::path::{Path, PathBuf};

use interstice_sim::scenario::{Problem, ScenarioError};

/// Any failure of a sweep command that a user can act on.
#[derive(Debug, thiserror::Error)]
pub enum SweepError {
    /// The sweep file could not be read.
    #[error("{file}: cannot read the sweep file: {reason}")]
    Read { file: PathBuf, reason: String },
    /// The sweep file has problems: each names the line, key, value and what is allowed.
    #[error("{}", render(file, problems))]
    Invalid { file: PathBuf, problems: Vec<Problem> },
    /// The base scenario of the sweep is not valid on its own.
    #[error("{sweep}: the base scenario is not valid")]
    Base {
        sweep: PathBuf,
        #[source]
        source: ScenarioError,
    },
    /// A generated run's scenario does not pass the engine's validation.
    #[error("{sweep}: run {index} ({params}): its scenario is not valid")]
    RunInvalid {
        sweep: PathBuf,
        index: usize,
        params: String,
        #[source]
        source: ScenarioError,
    },
    /// A plain file-system operation failed.
    #[error("{path}: {what}: {source}")]
    Io {
        path: PathBuf,
        what: String,
        #[source]
        source: std::io::Error,
    },
    /// Writing an HDF5 table failed.
    #[error("{path}: {what}: {source}")]
    Hdf5 {
        path: PathBuf,
        what: String,
        #[source]
        source: hdf5::Error,
    },
    /// A sweep folder is missing, belongs to another sweep, or is in use.
    #[error("{path}: {what}")]
    Folder { path: PathBuf, what: String },
    /// A command-line option has a value outside what it accepts.
    #[error("option `{name}` = {value}: expected {expected}")]
    Option { name: String, value: String, expected: String },
    /// Slurm could not be used (command missing, submission refused).
    #[error("slurm: {what}")]
    Slurm { what: String },
    /// A run of the sweep failed (the task command's exit status says so too).
    #[error("run {index} failed: {what}")]
    RunFailed { index: usize, what: String },
    /// Reading a run's metrics failed.
    #[error("run {index}: cannot read its metrics")]
    Metrics {
        index: usize,
        #[source]
        source: interstice_analysis::AnalysisError,
    },
    /// Some runs are not finished and the command needs them all.
    #[error("{what}")]
    Incomplete { what: String },
}

/// Result alias of sweeps.
pub type Result<T> = std::result::Result<T, SweepError>;

fn render(file: &Path, problems: &[Problem]) -> String {
    let mut s = String::new();
    if problems.len() > 1 {
        s.push_str(&format!("{}: {} problems in the sweep file\n", file.display(), problems.len()));
    }
    for (i, p) in problems.iter().enumerate() {
        if i > 0 {
            s.push('\n');
        }
        s.push_str(&format!("{}", file.display()));
        if let Some(l) = p.line {
            s.push_str(&format!(":{l}"));
        }
        s.push_str(&format!(": `{}`", p.path));
        if !p.value.is_empty() {
            s.push_str(&format!(" = {}", p.value));
        }
        s.push_str(&format!(": expected {}", p.expected));
    }
    s
}

impl SweepError {
    /// Wraps an I/O error with the path and the operation that failed.
    pub fn io(path: impl Into<PathBuf>, what: impl Into<String>) -> impl FnOnce(std::io::Error) -> SweepError {
        let path = path.into();
        let what = what.into();
        move |source| SweepError::Io { path, what, source }
    }

    /// Wraps an HDF5 error with the path and the operation that failed.
    pub fn hdf5(path: impl Into<PathBuf>, what: impl Into<String>) -> impl FnOnce(hdf5::Error) -> SweepError {
        let path = path.into();
        let what = what.into();
        move |source| SweepError::Hdf5 { path, what, source }
    }

    /// A bad command-line option.
    pub fn option(name: &str, value: impl std::fmt::Display, expected: impl Into<String>) -> SweepError {
        SweepError::Option { name: name.into(), value: value.to_string(), expected: expected.into() }
    }

    /// The problems of an invalid sweep file (empty otherwise).
    pub fn problems(&self) -> &[Problem] {
        match self {
            SweepError::Invalid { problems, .. } => problems,
            _ => &[],
        }
    }
}
