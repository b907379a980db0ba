//! Errors of the analysis crate: each names the file and what is wrong with it.

use std::path::{Path, PathBuf};

/// Everything that can go wrong while reading a run file or writing tables, plots and reports.
#[derive(Debug, thiserror::Error)]
pub enum AnalysisError {
    /// The run file does not exist.
    #[error("{}: no such file", path.display())]
    NotFound { path: PathBuf },

    /// The file exists but HDF5 cannot open it.
    #[error("{}: not an HDF5 file (or unreadable): {reason}", path.display())]
    NotHdf5 { path: PathBuf, reason: String },

    /// An HDF5 file that is not an interstice run file, or one whose layout is broken.
    #[error("{}: not an interstice run file: {why}", path.display())]
    NotARunFile { path: PathBuf, why: String },

    /// A run file written by a newer layout than this reader knows.
    #[error("{}: run file format version {found}, this analysis reads versions up to {supported}", path.display())]
    UnsupportedVersion { path: PathBuf, found: u32, supported: u32 },

    /// The run file has no finished snapshot to analyse.
    #[error("{}: no finished snapshot to analyse (status: {status})", path.display())]
    NoSnapshots { path: PathBuf, status: String },

    /// A species asked for that the run file does not hold.
    #[error("{}: no particle species `{species}` (the run holds: {available})", path.display())]
    UnknownSpecies { path: PathBuf, species: String, available: String },

    /// A field asked for that the snapshot does not hold.
    #[error("{}: snapshot {snapshot} has no field `{field}` (it holds: {available})", path.display())]
    MissingField { path: PathBuf, snapshot: String, field: String, available: String },

    /// A snapshot number outside the finished snapshots.
    #[error("{}: no finished snapshot {index} (the run has {finished} finished snapshots, 0 to {last})", path.display(), last = finished.saturating_sub(1))]
    NoSuchSnapshot { path: PathBuf, index: usize, finished: usize },

    /// A dataset whose shape or type does not follow the layout.
    #[error("{}: {what}", path.display())]
    BadDataset { path: PathBuf, what: String },

    /// An option with a value outside what it accepts (threshold, density, bin width...).
    #[error("bad value for {option}: {value}: expected {expected}")]
    BadOption { option: String, value: String, expected: String },

    /// HDF5 failed while reading something that should be there.
    #[error("{}: cannot read {what}", path.display())]
    Read {
        path: PathBuf,
        what: String,
        #[source]
        source: hdf5::Error,
    },

    /// Writing an output (table, plot, report) failed.
    #[error("{}: cannot write {what}", path.display())]
    Write {
        path: PathBuf,
        what: String,
        #[source]
        source: std::io::Error,
    },

    /// Drawing a plot failed.
    #[error("cannot draw {what}: {reason}")]
    Plot { what: String, reason: String },
}

/// Result of the analysis crate.
pub type Result<T> = std::result::Result<T, AnalysisError>;

impl AnalysisError {
    /// A closure turning an HDF5 error into [`AnalysisError::Read`].
    pub(crate) fn read(path: &Path, what: impl Into<String>) -> impl FnOnce(hdf5::Error) -> AnalysisError {
        let path = path.to_path_buf();
        let what = what.into();
        move |source| AnalysisError::Read { path, what, source }
    }

    /// A closure turning an I/O error into [`AnalysisError::Write`].
    pub(crate) fn write(path: &Path, what: impl Into<String>) -> impl FnOnce(std::io::Error) -> AnalysisError {
        let path = path.to_path_buf();
        let what = what.into();
        move |source| AnalysisError::Write { path, what, source }
    }

    /// A bad option value.
    pub(crate) fn option(option: &str, value: impl ToString, expected: &str) -> AnalysisError {
        AnalysisError::BadOption { option: option.into(), value: value.to_string(), expected: expected.into() }
    }
}
