//! Particles: designs (species), hindrance physics, and the packet table.

pub mod design;
pub mod hindrance;
pub mod packets;

pub use design::{Design, Designs, Ligand};
pub use packets::Packets;
