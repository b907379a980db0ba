//! Scenario sections of the particle processes: transport in the interstitium, binding, uptake.

use serde::{Deserialize, Serialize};

use super::spec::{Check, checked_plain, section};

/// Model of diffusive hindrance by the matrix.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum MatrixHindrance {
    /// Steric (Ogston 1973) times hydrodynamic (Brinkman; Phillips, Deen and Brady 1989), as combined by Phillips 2000.
    OgstonBrinkman,
    /// Steric hindrance alone (Ogston 1973).
    Ogston,
    /// No hindrance: `D = D0`.
    None,
}
checked_plain!(MatrixHindrance);

/// Random increments of the walk.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Increments {
    /// Uniform increments of unit variance: the simplified weak Euler scheme (Kloeden and Platen 1992).
    Uniform,
    /// Gaussian increments: the Euler-Maruyama scheme.
    Gaussian,
}
checked_plain!(Increments);

/// What happens to a packet that reaches a face of the lattice.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum FaceRule {
    /// It is reflected back.
    Reflect,
    /// It leaves the domain (booked as "left through the faces").
    Absorb,
}
checked_plain!(FaceRule);

section! {
    /// Motion of particle packets through the interstitium.
    pub struct TransportSection {
        /// Tissue temperature, degrees Celsius.
        temperature_C: f64 = 37.0, Check::closed(0.0, 50.0);
        /// Viscosity of interstitial fluid, mPa s (default: water at 37 C, IAPWS 2008).
        fluid_viscosity_mPa_s: f64 = 0.6913, Check::closed(0.1, 100.0);
        /// Diffusive hindrance model: "ogston-brinkman", "ogston" or "none".
        hindrance: MatrixHindrance = MatrixHindrance::OgstonBrinkman;
        /// Steric partition into the accessible fluid (Ogston 1958): true or false.
        steric_partition: bool = true;
        /// Largest move of a packet in one fine sub-step (taken where the interpolated motion coefficients vary around it), in voxel edges.
        max_step_voxels: f64 = 0.25, Check::above_upto(0.0, 1.0);
        /// Random increments: "uniform" or "gaussian".
        increments: Increments = Increments::Uniform;
        /// Rule at the lattice faces: "reflect" or "absorb".
        faces: FaceRule = FaceRule::Reflect;
        /// Steps between re-sorts of the packets by their voxel.
        sort_interval_steps: u32 = 16, Check::count(1.0, 1.0e6);
    }
}

section! {
    /// Binding to cell receptors and to the matrix, and internalisation.
    pub struct BindingSection {
        /// Rate at which internalised receptors return to the cell surface, 1/s.
        receptor_recycling_per_s: f64 = 1.0e-4, Check::closed(0.0, 10.0);
        /// Radius of a cell, for its receptor surface density, um.
        cell_radius_um: f64 = 8.0, Check::closed(1.0, 100.0);
        /// Reach of a ligand tether, for the effective receptor concentration of further bonds, nm.
        ligand_reach_nm: f64 = 10.0, Check::closed(0.1, 1000.0);
        /// Non-specific adsorption rate to the matrix per mV of surface potential at the reference matrix fraction, 1/(s mV).
        matrix_adsorption_per_s_mV: f64 = 2.0e-6, Check::closed(0.0, 1.0);
        /// Factor on adsorption of positively charged particles (the matrix carries negative charge).
        cationic_adsorption_factor: f64 = 5.0, Check::closed(0.0, 1.0e3);
        /// Total matrix volume fraction (collagen plus glycosaminoglycan) at which the adsorption rate is as given.
        matrix_reference_fraction: f64 = 0.05, Check::above_upto(0.0, 1.0);
        /// Desorption rate from the matrix, 1/s.
        matrix_desorption_per_s: f64 = 1.0e-4, Check::closed(0.0, 10.0);
    }
}

section! {
    /// Uptake by phagocytes and drainage by lymphatics.
    pub struct UptakeSection {
        /// Uptake rate of a phagocyte for a 100 nm, uncharged, uncoated particle in its voxel, 1/s.
        phagocyte_uptake_per_s: f64 = 2.0e-4, Check::closed(0.0, 10.0);
        /// Factor on phagocytic uptake for a stealth coating.
        stealth_uptake_factor: f64 = 0.1, Check::closed(0.0, 1.0);
        /// Surface potential that doubles phagocytic uptake of positive particles, mV.
        uptake_charge_scale_mV: f64 = 20.0, Check::closed(0.1, 1000.0);
    }
}
