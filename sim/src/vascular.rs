//! What the interstitium sees of the vessels: per-voxel wall exchange coefficients.
//!
//! Both vessel models (continuum surface per volume, or explicit segments rasterised onto the
//! lattice) reduce to the same per-voxel sums, which the pressure process consumes. The
//! Starling law for the fluid leaving the vessels of voxel `v` (Starling 1896; in the form of
//! Baxter and Jain 1989, Microvasc Res 37:77) is
//!
//! `Jv(v) = sum_i Lp_i S_i (p_v,i - p(v) - sigma_T,i (pi_v - pi_i)) = drive(v) - lp_s(v) p(v)`
//!
//! with `lp_s = sum_i Lp_i S_i` and `drive = sum_i Lp_i S_i (p_v,i - sigma_T,i (pi_v - pi_i))`.

use bevy_ecs::prelude::Resource;

use crate::field::Field;
use crate::lattice::Lattice;
use crate::params::{ContinuumVesselParams, StarlingParams};
use crate::tissue::Regions;

/// Starling fluid exchange coefficients per voxel.
#[derive(Resource, Debug, Clone)]
pub struct WallFluid {
    /// `sum_i Lp_i S_i` over the vessel walls in the voxel, m^3/(Pa s).
    pub lp_s: Field,
    /// `sum_i Lp_i S_i (p_v,i - sigma_T,i (pi_v - pi_i))`, m^3/s.
    pub drive: Field,
}

impl WallFluid {
    /// Fluid leaving the vessels of voxel `v` into the interstitium at pressure `p`, m^3/s.
    #[inline]
    pub fn leakage(&self, v: usize, p: f64) -> f64 {
        self.drive.data[v] - self.lp_s.data[v] * p
    }

    /// The continuum model: surface `S/V * voxel volume` of uniform walls in every voxel of a region.
    pub fn continuum(l: &Lattice, regions: &Regions, c: &ContinuumVesselParams, st: &StarlingParams) -> Self {
        let n = l.len();
        let vol = l.voxel_volume();
        let mut lp_s =
            Field::filled("wall_lp_s", "m3 Pa-1 s-1", "sum of Lp S of the vessel walls in the voxel", n, 0.0);
        let mut drive = Field::filled("wall_drive", "m3 s-1", "sum of Lp S (p_v - sigma_T (pi_v - pi_i))", n, 0.0);
        for (v, &r) in regions.region.data.iter().enumerate() {
            let r = r as usize;
            let ls = c.wall_conductivity[r] * c.surface_per_volume[r] * vol;
            lp_s.data[v] = ls;
            drive.data[v] = ls * (c.vascular_pressure - st.oncotic_term(r));
        }
        WallFluid { lp_s, drive }
    }

    /// These coefficients with the walls' pores scaled by `factor` per voxel at a fixed pore area
    /// fraction: `Lp = gamma r^2 / (8 mu L)` (pore theory) scales with the factor squared, and so
    /// do both sums (the oncotic terms are kept).
    pub fn with_pore_factors(&self, factor: &[f64]) -> WallFluid {
        let mut out = self.clone();
        for ((ls, dr), &f) in out.lp_s.data.iter_mut().zip(out.drive.data.iter_mut()).zip(factor) {
            *ls *= f * f;
            *dr *= f * f;
        }
        out
    }
}

/// Factor on the pore radius of the continuum model's walls per voxel (1 where nothing acts), set
/// by vessel normalisation and heating ([`crate::process::interventions`]); the pore area fraction
/// stays as at the start, so the wall's hydraulic conductivity follows as the factor squared
/// ([`WallFluid::with_pore_factors`]). `revision` counts the changes (the wall exchange rebuilds
/// its patches when it moves).
#[derive(Resource, Debug, Clone, Default, PartialEq)]
pub struct ContinuumPores {
    pub factor: Vec<f64>,
    pub revision: u64,
}
