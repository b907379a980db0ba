//! Particle designs in SI units: one species each.

use crate::scenario::{Coating, ParticleSection, ReceptorTarget, Scenario};
use crate::units::{NM, UM, ZERO_CELSIUS, per_molar_s_to_m3_per_s};

use super::hindrance::stokes_einstein;

/// A targeting ligand in SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct Ligand {
    pub target: ReceptorTarget,
    /// Association rate constant of one ligand with one receptor, m^3/s per pair.
    pub kon: f64,
    /// Dissociation rate constant of one bond, 1/s.
    pub koff: f64,
    /// Bonds a particle can form at once.
    pub valency: u32,
    /// Internalisation rate of bound particles, 1/s.
    pub kint: f64,
}

/// One particle design (species).
#[derive(Debug, Clone, PartialEq)]
pub struct Design {
    pub name: String,
    /// Hydrodynamic radius, m.
    pub radius: f64,
    /// Surface (zeta) potential, V.
    pub potential: f64,
    pub coating: Coating,
    /// Particles of the whole dose schedule.
    pub dose: u64,
    /// Particles per packet.
    pub packet: u64,
    /// Factor on advection by the interstitial flow.
    pub convective_hindrance: f64,
    /// Free diffusion coefficient in interstitial fluid, m^2/s (Stokes-Einstein).
    pub d0: f64,
    pub ligand: Option<Ligand>,
}

/// All species of a run, in scenario order.
#[derive(bevy_ecs::prelude::Resource, Debug, Clone, PartialEq, Default)]
pub struct Designs(pub Vec<Design>);

impl Design {
    /// Resolves a `[[particle]]` table; `temperature` in K, `viscosity` in Pa s.
    pub fn resolve(p: &ParticleSection, temperature: f64, viscosity: f64) -> Self {
        let radius = p.hydrodynamic_radius_nm * NM;
        Design {
            name: p.name.clone(),
            radius,
            potential: p.surface_potential_mV * 1e-3,
            coating: p.coating,
            dose: crate::vessels::dosing::DoseSchedule::from_section(p).total(),
            packet: (p.packet_particles.round() as u64).max(1),
            convective_hindrance: p.convective_hindrance,
            d0: stokes_einstein(radius, viscosity, temperature),
            ligand: p.ligand.as_ref().map(|l| Ligand {
                target: l.receptor,
                kon: per_molar_s_to_m3_per_s(l.kon_per_M_s),
                koff: l.koff_per_s,
                valency: l.valency,
                kint: l.internalisation_per_s,
            }),
        }
    }
}

impl Designs {
    /// Every `[[particle]]` of a scenario.
    pub fn from_scenario(s: &Scenario) -> Self {
        let t = s.transport.temperature_C + ZERO_CELSIUS;
        let mu = s.transport.fluid_viscosity_mPa_s * 1e-3;
        Designs(s.particle.iter().map(|p| Design::resolve(p, t, mu)).collect())
    }

    /// Number of species.
    pub fn len(&self) -> usize {
        self.0.len()
    }

    /// Whether the run carries no particles.
    pub fn is_empty(&self) -> bool {
        self.0.is_empty()
    }
}

/// Radius of a cell, for receptor surface densities: `UM` scale helper.
pub fn cell_area(radius_um: f64) -> f64 {
    4.0 * std::f64::consts::PI * (radius_um * UM).powi(2)
}
