//! Run files: one HDF5 file per run, with an XDMF sidecar for visualisation tools.
//!
//! Layout (all quantities SI, each dataset with a `units` attribute):
//!
//! ```text
//! /                          format, format_version, status, finished_snapshots, caution
//! /lattice                   shape_xyz, voxel_size (m), origin (m)
//! /provenance                version, git_commit, rustc, build_profile, threads, seed,
//!                            started_unix_s, wall_time_s, process_wall_s ("blood=0.012
//!                            pressure=1.503 ...": seconds in each process set of the step);
//!                            datasets scenario_toml, resolved_toml
//! /mesh                      points, hexahedra (explicit XDMF topology, small lattices only)
//! /snapshots/NNNNNN          time_s, step, complete
//!     fields/<name>          [nz, ny, nx] chunked, deflate-compressed
//!     cells/<column>         one row per cell
//!     vessels/<column>       one row per vessel segment
//!     packets/<column>       one row per packet (optional)
//! /series/<name>             one value per finished snapshot; /series/time_s
//! ```
//!
//! A snapshot is flushed to disk as soon as it is written, and its `complete` attribute is set
//! last; the root attribute `finished_snapshots` counts the complete ones. A run that fails or is
//! killed therefore leaves every finished snapshot readable, and `status` says how it ended.

mod runfile;
pub mod xdmf;

pub use runfile::{Column, ColumnData, RunWriter, SnapshotWriter, read_string_attr, write_string_attr};

/// Name of the format in the root attribute `format`.
pub const FORMAT: &str = "interstice-run";
/// Version of the layout above.
pub const FORMAT_VERSION: u32 = 1;
