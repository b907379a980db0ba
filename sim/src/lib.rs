//! interstice engine: a 3D lattice of voxels carrying continuum fields (interstitial pressure
//! and flow, matrix, oxygen) coupled to discrete agents (cells, vessel segments, particle packets)
//! in a bevy_ecs world, stepped process by process in the order of the physics, with HDF5
//! snapshots.
//!
//! Units are SI throughout; scenario keys carry their unit in their name and are converted once
//! ([`params::Params::resolve`]).

pub mod check;
pub mod checkpoint;
pub mod error;
pub mod field;
pub mod io;
pub mod lattice;
pub mod params;
pub mod particles;
pub mod process;
pub mod progress;
pub mod provenance;
pub mod rng;
pub mod scenario;
pub mod solver;
pub mod terrain;
pub mod tissue;
pub mod units;
pub mod vascular;
pub mod vessels;
pub mod world;

pub use error::{SimError, SimResult};
pub use scenario::LoadedScenario;
pub use world::{RunOptions, RunSummary, Simulation};
