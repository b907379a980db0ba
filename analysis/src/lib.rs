//! interstice analysis: reads run files (HDF5, the layout of [`runfile`]) and turns them into
//! delivery metrics, tidy CSV tables, plots (PNG and SVG) and self-contained HTML reports.
//!
//! It needs nothing from the engine but the file layout.
//!
//! - [`runfile`]: open and check a run file, list its finished snapshots, read fields and tables.
//! - [`metrics`]: per-species metrics over time ([`metrics::analyse`]).
//! - [`kdtree`], [`geometry`]: distances to perfused vessels and to the tumour surface.
//! - [`tables`]: tidy CSV.
//! - [`figures`]: which curves a run's figures show.
//! - [`plot`], [`colour`]: time courses, profiles, coverage curves and field slices.
//! - [`report`]: the run report and the comparison page.
//! - [`cli`]: what the `interstice` subcommands call.
//! - [`synthetic`]: writes small run files following the layout (tests, benchmarks, examples).

pub mod cli;
pub mod colour;
pub mod error;
pub mod figures;
pub mod geometry;
pub mod kdtree;
pub mod metrics;
pub mod plot;
pub mod report;
pub mod runfile;
pub mod stats;
pub mod synthetic;
pub mod tables;

pub use error::{AnalysisError, Result};
pub use metrics::{Options, RunMetrics, analyse};
pub use runfile::RunFile;

/// The caution every report carries (the same words as the engine's).
pub const CAUTION: &str = "Results are model predictions for research use only, not for clinical decisions. \
Any use involving animals or people is governed by local regulations and licensed practice.";
