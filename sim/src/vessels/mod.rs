//! Vessel networks: the network model and its segment entities, the seeded generators, the
//! import of measured networks, the lattice raster of vessel walls, blood viscosity and flow,
//! pore theory of the wall, plasma pharmacokinetics and dose schedules.
//!
//! The processes that use them live in [`crate::process::blood`] and
//! [`crate::process::plasma`].

pub mod amg;
pub mod check;
pub mod dosing;
pub mod flow;
pub mod generate;
pub mod import;
pub mod network;
pub mod pk;
pub mod pore;
pub mod raster;
pub mod viscosity;

pub use flow::{BloodFlow, FlowOptions};
pub use network::{Network, NodeBc, Segment, VesselKind};
pub use pore::{WallCoefficients, wall_coefficients};
pub use raster::VesselRaster;

#[cfg(test)]
mod tests;
