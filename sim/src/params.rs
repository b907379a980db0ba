//! Typed parameters in SI units, resolved once from a scenario. Each process reads its own struct.

use bevy_ecs::prelude::Resource;

use crate::lattice::Lattice;
use crate::scenario::{ConductivityModel, FluidBoundary, LymphaticCollapse, Scenario, TumourShape};
use crate::units::{CM, HOUR, MMHG, NM, UM, cm_per_mmhg_s, cm2_per_mmhg_s, per_mmhg_s};

/// Run control.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct RunParams {
    pub name: String,
    pub seed: u64,
    /// End of the delivery phase, s.
    pub end_time: f64,
    /// Requested transport step, s.
    pub time_step: f64,
    /// Interval between snapshots, s.
    pub snapshot_interval: f64,
    /// Interval between checkpoints, s (0: none).
    pub checkpoint_interval: f64,
}

/// Tumour geometry: an axis-aligned ellipsoid (a sphere has equal semi-axes).
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct TumourGeometry {
    /// Centre, m.
    pub centre: [f64; 3],
    /// Semi-axes along x, y, z, m.
    pub semi_axes: [f64; 3],
}

impl TumourGeometry {
    /// Whether point `x` (m) lies inside the tumour.
    pub fn contains(&self, x: [f64; 3]) -> bool {
        self.level(x) <= 1.0
    }

    /// `sum((x - c)^2 / a^2)`: below 1 inside, 1 on the surface.
    pub fn level(&self, x: [f64; 3]) -> f64 {
        (0..3).map(|a| ((x[a] - self.centre[a]) / self.semi_axes[a]).powi(2)).sum()
    }

    /// An equivalent radius `(a b c)^(1/3)`, m.
    pub fn equivalent_radius(&self) -> f64 {
        (self.semi_axes[0] * self.semi_axes[1] * self.semi_axes[2]).cbrt()
    }

    /// Approximate signed distance to the surface (negative inside), m; exact for a sphere.
    pub fn signed_distance(&self, x: [f64; 3]) -> f64 {
        let l = self.level(x).sqrt();
        // Distance along the ray from the centre, scaled by the local radius of the ellipsoid.
        let r = (0..3).map(|a| (x[a] - self.centre[a]).powi(2)).sum::<f64>().sqrt();
        if l == 0.0 {
            return -self.semi_axes.iter().cloned().fold(f64::INFINITY, f64::min);
        }
        let surface_r = r / l;
        r - surface_r
    }
}

/// Extracellular matrix composition of host and tumour.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct MatrixParams {
    /// Collagen fibre radius, m.
    pub collagen_fibre_radius: f64,
    /// Glycosaminoglycan chain radius, m.
    pub gag_fibre_radius: f64,
    /// Collagen volume fraction in host and tumour.
    pub collagen_fraction: [f64; 2],
    /// Glycosaminoglycan volume fraction in host and tumour.
    pub gag_fraction: [f64; 2],
    /// Interstitial fluid volume fraction in host and tumour.
    pub porosity: [f64; 2],
}

/// Initial cell placement.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct CellParams {
    /// Probability that a voxel holds a cell, host and tumour.
    pub occupancy: [f64; 2],
    /// Receptors per cell, host and cancer cells.
    pub receptors: [f64; 2],
    /// Fraction of tumour cells that are phagocytes.
    pub tumour_phagocyte_fraction: f64,
}

/// Starling forces by region (index 0 host, 1 tumour).
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct StarlingParams {
    /// Plasma oncotic pressure, Pa.
    pub plasma_oncotic: f64,
    /// Interstitial oncotic pressure, Pa.
    pub interstitial_oncotic: [f64; 2],
    /// Protein reflection coefficient.
    pub protein_reflection: [f64; 2],
}

impl StarlingParams {
    /// Oncotic term `sigma_T (pi_v - pi_i)` of a region, Pa.
    pub fn oncotic_term(&self, region: usize) -> f64 {
        self.protein_reflection[region] * (self.plasma_oncotic - self.interstitial_oncotic[region])
    }
}

/// The continuum vessel model: wall surface spread uniformly through each region.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct ContinuumVesselParams {
    /// Vessel surface per tissue volume, 1/m, host and tumour.
    pub surface_per_volume: [f64; 2],
    /// Wall hydraulic conductivity Lp, m/(Pa s), host and tumour.
    pub wall_conductivity: [f64; 2],
    /// Vascular pressure, Pa.
    pub vascular_pressure: f64,
    /// Pore radius of the walls, m, host and tumour.
    pub pore_radius: [f64; 2],
    /// Wall thickness (pore length), m.
    pub wall_thickness: f64,
}

/// Interstitial fluid flow and its solver.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct FluidParams {
    pub conductivity: ConductivityModel,
    /// Viscosity of interstitial fluid, Pa s.
    pub viscosity: f64,
    /// Hydraulic conductivity per region when `conductivity` is a table, m^2/(Pa s), host and tumour.
    pub region_conductivity: [f64; 2],
    pub boundary: FluidBoundary,
    /// Pressure on the box faces for a fixed boundary, Pa.
    pub boundary_pressure: f64,
    /// Relative residual at which a solve stops.
    pub tolerance: f64,
    pub max_iterations: usize,
}

/// Lymphatic drainage.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct LymphaticParams {
    /// `LpL SL/V` where lymphatics work, 1/(Pa s), host and tumour.
    pub drainage: [f64; 2],
    /// Lymph pressure, Pa.
    pub pressure: f64,
    pub collapse: LymphaticCollapse,
    /// Depth of the draining tumour rim, m.
    pub functional_rim: f64,
    /// Cell density above which tumour lymphatics collapse.
    pub collapse_cell_density: f64,
    /// Half-width of the density cube, m.
    pub density_half_width: f64,
}

/// The circulating blood.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct BloodParams {
    /// Circulating blood volume, m^3.
    pub volume: f64,
    /// Systemic discharge haematocrit.
    pub haematocrit: f64,
    /// Plasma viscosity, Pa s.
    pub plasma_viscosity: f64,
}

impl BloodParams {
    /// Plasma volume `V_blood (1 - Hct)`, m^3: the volume particles circulate in.
    pub fn plasma_volume(&self) -> f64 {
        self.volume * (1.0 - self.haematocrit)
    }
}

/// The explicit vessel network: its source, generator settings, flow boundary conditions and
/// wall properties, in SI.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct NetworkParams {
    pub source: crate::scenario::NetworkSource,
    /// Node and segment tables of a CSV network, resolved against the scenario's folder.
    pub nodes_csv: std::path::PathBuf,
    pub segments_csv: std::path::PathBuf,
    /// VTK polydata of a VTK network, resolved against the scenario's folder.
    pub vtk_file: std::path::PathBuf,
    /// Metres per VTK coordinate unit.
    pub vtk_length_unit: f64,
    pub keep_disconnected: bool,
    /// Capillary spacing, m.
    pub capillary_spacing: f64,
    /// Median capillary radius, m.
    pub capillary_radius: f64,
    /// Standard deviation of ln(capillary radius).
    pub capillary_radius_spread: f64,
    /// Node jitter as a fraction of the spacing.
    pub position_jitter: f64,
    pub cross_link_probability: f64,
    /// Flow axis 0, 1 or 2.
    pub flow_axis: usize,
    /// Inlet and outlet blood pressure, Pa.
    pub inlet_pressure: f64,
    pub outlet_pressure: f64,
    /// Median tumour vessel radius, m, and the standard deviation of its logarithm.
    pub tumour_radius: f64,
    pub tumour_radius_spread: f64,
    pub necrotic_core_fraction: f64,
    pub core_vessel_survival: f64,
    pub rim_thickness_fraction: f64,
    pub rim_density_factor: f64,
    pub tortuosity: f64,
    pub tumour_pore_distribution: crate::scenario::PoreDistribution,
    /// Tumour pore radius: median, log spread, bounds, m.
    pub tumour_pore_median: f64,
    pub tumour_pore_spread: f64,
    pub tumour_pore_min: f64,
    pub tumour_pore_max: f64,
    /// Pore area fraction, pore radius (m) and wall thickness (m): index 0 host, 1 tumour.
    pub pore_fraction: [f64; 2],
    pub host_pore_radius: f64,
    pub wall_thickness: [f64; 2],
    pub wall_conductivity: crate::scenario::WallConductivitySource,
    pub hindrance: crate::scenario::HindranceModel,
    pub viscosity_law: crate::scenario::ViscosityLaw,
    /// Slowest mean velocity of a perfused segment, m/s.
    pub min_perfused_velocity: f64,
    pub solver_tolerance: f64,
}

/// One particle design as the vessel and plasma processes see it, in SI.
#[derive(Debug, Clone, PartialEq)]
pub struct ParticlePlasmaParams {
    pub name: String,
    /// Hydrodynamic radius, m.
    pub hydrodynamic_radius: f64,
    /// Surface potential, V.
    pub surface_potential: f64,
    pub coating: crate::scenario::Coating,
    /// Particles of the whole dose schedule (exact count).
    pub dose: u64,
    /// When the particles are given: boluses and infusions, s.
    pub schedule: crate::vessels::dosing::DoseSchedule,
    pub model: crate::scenario::PlasmaModel,
    /// Renal cut-off diameter and its width, m; renal clearance rate well below it, 1/s.
    pub renal_cutoff_diameter: f64,
    pub renal_cutoff_width: f64,
    pub renal_rate: f64,
    /// Phagocytic clearance rate of a small, neutral, bare particle, 1/s.
    pub mps_rate: f64,
    /// Diameter scale (m) and exponent of the size dependence of phagocytic clearance.
    pub mps_size_scale: f64,
    pub mps_size_exponent: f64,
    /// Positive potential that multiplies phagocytic clearance by e, V.
    pub mps_charge_scale: f64,
    pub stealth_factor: f64,
    /// Elimination and distribution half-lives (s) and the distribution fraction.
    pub half_life: f64,
    pub distribution_half_life: f64,
    pub distribution_fraction: f64,
    /// Measured plasma table, resolved against the scenario's folder.
    pub table_csv: std::path::PathBuf,
}

/// Output choices.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct OutputParams {
    pub compression_level: u8,
    pub packet_tables: bool,
    pub cell_tables: bool,
    pub xdmf_mesh: crate::scenario::XdmfMesh,
}

/// Every resolved parameter set of a scenario.
#[derive(Debug, Clone)]
pub struct Params {
    pub run: RunParams,
    pub lattice: Lattice,
    pub tumour: TumourGeometry,
    pub matrix: MatrixParams,
    pub cells: CellParams,
    pub starling: StarlingParams,
    pub vessel_model: crate::scenario::VesselModel,
    pub continuum_vessels: ContinuumVesselParams,
    pub fluid: FluidParams,
    pub lymphatics: LymphaticParams,
    pub network: NetworkParams,
    pub blood: BloodParams,
    /// Plasma pharmacokinetics of each particle design, in species order.
    pub particles: Vec<ParticlePlasmaParams>,
    pub output: OutputParams,
    pub transport: crate::process::transport::TransportParams,
    pub binding: crate::process::binding::BindingParams,
    pub designs: crate::particles::Designs,
    /// Scheduled interventions, in scenario order.
    pub interventions: Vec<crate::process::interventions::Intervention>,
    pub tissue: crate::terrain::generator::TissueParams,
    pub oxygen: crate::process::oxygen::OxygenParams,
    pub growth: crate::terrain::growth::GrowthParams,
}

impl Params {
    /// Whether the XDMF sidecar uses explicit hexahedra.
    pub fn output_explicit_mesh(&self) -> bool {
        match self.output.xdmf_mesh {
            crate::scenario::XdmfMesh::Explicit => true,
            crate::scenario::XdmfMesh::Regular => false,
            crate::scenario::XdmfMesh::Auto => self.lattice.len() <= 1 << 18,
        }
    }

    /// Converts a validated scenario to SI; file paths are resolved against the scenario's folder.
    pub fn resolve_loaded(loaded: &crate::scenario::LoadedScenario) -> Self {
        Self::resolve_in(&loaded.scenario, Some(&loaded.file))
    }

    /// Converts a validated scenario to SI; relative file paths stay relative to the working folder.
    pub fn resolve(s: &Scenario) -> Self {
        Self::resolve_in(s, None)
    }

    fn resolve_in(s: &Scenario, file: Option<&std::path::Path>) -> Self {
        let lattice = Lattice::new(
            s.lattice.shape,
            s.lattice.voxel_um * UM,
            [s.lattice.origin_um[0] * UM, s.lattice.origin_um[1] * UM, s.lattice.origin_um[2] * UM],
        );
        let centre =
            s.tumour.centre_um.map(|c| [c[0] * UM, c[1] * UM, c[2] * UM]).unwrap_or_else(|| lattice.box_centre());
        let semi_axes = match s.tumour.shape {
            TumourShape::Sphere => [s.tumour.radius_um * UM; 3],
            TumourShape::Ellipsoid => s.tumour.semi_axes_um.map(|v| v * UM),
        };
        let m = &s.matrix;
        Params {
            run: RunParams {
                name: s.run.name.clone(),
                seed: s.run.seed,
                end_time: s.run.end_time_h * HOUR,
                time_step: s.run.time_step_s,
                snapshot_interval: s.run.snapshot_interval_h * HOUR,
                checkpoint_interval: s.run.checkpoint_interval_h * HOUR,
            },
            lattice,
            tumour: TumourGeometry { centre, semi_axes },
            matrix: MatrixParams {
                collagen_fibre_radius: m.collagen_fibre_radius_nm * NM,
                gag_fibre_radius: m.gag_fibre_radius_nm * NM,
                collagen_fraction: [m.host_collagen_fraction, m.tumour_collagen_fraction],
                gag_fraction: [m.host_gag_fraction, m.tumour_gag_fraction],
                porosity: [m.host_porosity, m.tumour_porosity],
            },
            cells: CellParams {
                occupancy: [s.cells.host_cell_fraction, s.cells.tumour_cell_fraction],
                receptors: [s.cells.host_receptors_per_cell, s.cells.cancer_receptors_per_cell],
                tumour_phagocyte_fraction: s.cells.tumour_phagocyte_fraction,
            },
            starling: StarlingParams {
                plasma_oncotic: s.starling.plasma_oncotic_mmHg * MMHG,
                interstitial_oncotic: [
                    s.starling.host_interstitial_oncotic_mmHg * MMHG,
                    s.starling.tumour_interstitial_oncotic_mmHg * MMHG,
                ],
                protein_reflection: [s.starling.host_protein_reflection, s.starling.tumour_protein_reflection],
            },
            vessel_model: s.vessels.model,
            continuum_vessels: {
                let c = &s.vessels.continuum;
                ContinuumVesselParams {
                    surface_per_volume: [
                        c.host_surface_per_volume_per_cm / CM,
                        c.tumour_surface_per_volume_per_cm / CM,
                    ],
                    wall_conductivity: [
                        cm_per_mmhg_s(c.host_wall_conductivity_cm_per_mmHg_s),
                        cm_per_mmhg_s(c.tumour_wall_conductivity_cm_per_mmHg_s),
                    ],
                    vascular_pressure: c.vascular_pressure_mmHg * MMHG,
                    pore_radius: [c.host_pore_radius_nm * NM, c.tumour_pore_radius_nm * NM],
                    wall_thickness: c.wall_thickness_um * UM,
                }
            },
            fluid: FluidParams {
                conductivity: s.fluid.conductivity,
                viscosity: s.fluid.viscosity_mPa_s * 1e-3,
                region_conductivity: [
                    cm2_per_mmhg_s(s.fluid.host_conductivity_cm2_per_mmHg_s),
                    cm2_per_mmhg_s(s.fluid.tumour_conductivity_cm2_per_mmHg_s),
                ],
                boundary: s.fluid.boundary,
                boundary_pressure: s.fluid.boundary_pressure_mmHg * MMHG,
                tolerance: s.fluid.solver_tolerance,
                max_iterations: s.fluid.solver_max_iterations as usize,
            },
            lymphatics: {
                let l = &s.lymphatics;
                LymphaticParams {
                    drainage: [per_mmhg_s(l.host_drainage_per_mmHg_s), per_mmhg_s(l.tumour_drainage_per_mmHg_s)],
                    pressure: l.lymph_pressure_mmHg * MMHG,
                    collapse: l.collapse,
                    functional_rim: l.functional_rim_um * UM,
                    collapse_cell_density: l.collapse_cell_density,
                    density_half_width: l.density_half_width_um * UM,
                }
            },
            transport: crate::process::transport::TransportParams {
                hindrance: s.transport.hindrance,
                steric_partition: s.transport.steric_partition,
                max_step_voxels: s.transport.max_step_voxels,
                increments: s.transport.increments,
                faces: s.transport.faces,
                sort_interval_steps: u64::from(s.transport.sort_interval_steps),
                collagen_fibre_radius: m.collagen_fibre_radius_nm * NM,
                gag_fibre_radius: m.gag_fibre_radius_nm * NM,
            },
            binding: crate::process::binding::BindingParams {
                receptor_recycling: s.binding.receptor_recycling_per_s,
                cell_area: crate::particles::design::cell_area(s.binding.cell_radius_um),
                ligand_reach: s.binding.ligand_reach_nm * NM,
                adsorption_per_volt: s.binding.matrix_adsorption_per_s_mV * 1e3,
                cationic_factor: s.binding.cationic_adsorption_factor,
                matrix_reference_fraction: s.binding.matrix_reference_fraction,
                desorption: s.binding.matrix_desorption_per_s,
                phagocyte_uptake: s.uptake.phagocyte_uptake_per_s,
                stealth_uptake_factor: s.uptake.stealth_uptake_factor,
                uptake_charge_scale: s.uptake.uptake_charge_scale_mV * 1e-3,
            },
            designs: crate::particles::Designs::from_scenario(s),
            tissue: crate::terrain::generator::TissueParams::resolve(s, file),
            oxygen: crate::process::oxygen::OxygenParams::resolve(s),
            growth: crate::terrain::growth::GrowthParams::resolve(s),
            network: {
                let n = &s.vessels.network;
                let rel = |w: &str| crate::scenario::scenario_relative(file, w);
                NetworkParams {
                    source: n.source,
                    nodes_csv: rel(&n.nodes_csv),
                    segments_csv: rel(&n.segments_csv),
                    vtk_file: rel(&n.vtk_file),
                    vtk_length_unit: n.vtk_length_unit_um * UM,
                    keep_disconnected: n.keep_disconnected,
                    capillary_spacing: n.capillary_spacing_um * UM,
                    capillary_radius: n.capillary_radius_um * UM,
                    capillary_radius_spread: n.capillary_radius_spread,
                    position_jitter: n.position_jitter,
                    cross_link_probability: n.cross_link_probability,
                    flow_axis: match n.flow_axis {
                        crate::scenario::Axis::X => 0,
                        crate::scenario::Axis::Y => 1,
                        crate::scenario::Axis::Z => 2,
                    },
                    inlet_pressure: n.inlet_pressure_mmHg * MMHG,
                    outlet_pressure: n.outlet_pressure_mmHg * MMHG,
                    tumour_radius: n.tumour_radius_um * UM,
                    tumour_radius_spread: n.tumour_radius_spread,
                    necrotic_core_fraction: n.necrotic_core_fraction,
                    core_vessel_survival: n.core_vessel_survival,
                    rim_thickness_fraction: n.rim_thickness_fraction,
                    rim_density_factor: n.rim_density_factor,
                    tortuosity: n.tortuosity,
                    tumour_pore_distribution: n.tumour_pore_distribution,
                    tumour_pore_median: n.tumour_pore_median_nm * NM,
                    tumour_pore_spread: n.tumour_pore_spread,
                    tumour_pore_min: n.tumour_pore_min_nm * NM,
                    tumour_pore_max: n.tumour_pore_max_nm * NM,
                    pore_fraction: [n.host_pore_fraction, n.tumour_pore_fraction],
                    host_pore_radius: n.host_pore_radius_nm * NM,
                    wall_thickness: [n.host_wall_thickness_um * UM, n.tumour_wall_thickness_um * UM],
                    wall_conductivity: n.wall_conductivity,
                    hindrance: n.hindrance,
                    viscosity_law: n.viscosity_law,
                    min_perfused_velocity: n.min_perfused_velocity_um_per_s * UM,
                    solver_tolerance: n.solver_tolerance,
                }
            },
            blood: BloodParams {
                volume: s.blood.volume_mL * crate::units::ML,
                haematocrit: s.blood.haematocrit,
                plasma_viscosity: s.blood.plasma_viscosity_mPa_s * 1e-3,
            },
            particles: s
                .particle
                .iter()
                .map(|p| {
                    let pl = &p.plasma;
                    let schedule = crate::vessels::dosing::DoseSchedule::from_section(p);
                    ParticlePlasmaParams {
                        name: p.name.clone(),
                        hydrodynamic_radius: p.hydrodynamic_radius_nm * NM,
                        surface_potential: p.surface_potential_mV * 1e-3,
                        coating: p.coating,
                        dose: schedule.total(),
                        schedule,
                        model: pl.model,
                        renal_cutoff_diameter: pl.renal_cutoff_diameter_nm * NM,
                        renal_cutoff_width: pl.renal_cutoff_width_nm * NM,
                        renal_rate: std::f64::consts::LN_2 / (pl.renal_half_life_min * crate::units::MIN),
                        mps_rate: std::f64::consts::LN_2 / (pl.mps_half_life_h * HOUR),
                        mps_size_scale: pl.mps_size_scale_nm * NM,
                        mps_size_exponent: pl.mps_size_exponent,
                        mps_charge_scale: pl.mps_charge_scale_mV * 1e-3,
                        stealth_factor: pl.stealth_factor,
                        half_life: pl.half_life_h * HOUR,
                        distribution_half_life: pl.distribution_half_life_h * HOUR,
                        distribution_fraction: pl.distribution_fraction,
                        table_csv: crate::scenario::scenario_relative(file, &pl.table_csv),
                    }
                })
                .collect(),
            output: OutputParams {
                compression_level: s.output.compression_level as u8,
                packet_tables: s.output.packet_tables,
                cell_tables: s.output.cell_tables,
                xdmf_mesh: s.output.xdmf_mesh,
            },
            interventions: Vec::new(),
        }
        .with_interventions(s, file)
    }

    /// Resolves the `[[intervention]]` tables; a `set` carries the whole parameter set in force
    /// from its start (earlier sets included), resolved from the changed scenario.
    fn with_interventions(mut self, s: &Scenario, file: Option<&std::path::Path>) -> Self {
        use crate::process::interventions::{Action, Intervention, Place};
        use crate::scenario::InterventionRegion;
        let in_force = crate::scenario::set_scenarios(s);
        let mut out = Vec::new();
        for (i, iv) in s.intervention.iter().enumerate() {
            if !iv.enabled {
                continue;
            }
            let place = match iv.region {
                InterventionRegion::All => Place::All,
                InterventionRegion::Tumour => Place::Tumour,
                InterventionRegion::Host => Place::Host,
                InterventionRegion::Sphere => Place::Sphere {
                    centre: iv.region_centre_um.map(|c| c.map(|v| v * UM)).unwrap_or(self.tumour.centre),
                    radius: iv.region_radius_um * UM,
                },
            };
            let action = if let Some(d) = &iv.matrix_degradation {
                Action::Degradation {
                    fibre: d.fibre,
                    rate: d.rate_per_h / HOUR,
                    enzyme_half_life: d.enzyme_half_life_h * HOUR,
                    update_interval: d.update_interval_min * 60.0,
                }
            } else if let Some(n) = &iv.normalisation {
                Action::Normalisation {
                    normal_pore_radius: n.normal_pore_radius_nm * NM,
                    time_constant: n.time_constant_h * HOUR,
                    prune_maturity_below: n.prune_maturity_below,
                    update_interval: n.update_interval_min * 60.0,
                }
            } else if let Some(h) = &iv.heating {
                Action::Heating {
                    pore_factor: h.pore_factor,
                    flow_factor: h.flow_factor,
                    relax_time: h.relax_time_h * HOUR,
                    update_interval: h.update_interval_min * 60.0,
                }
            } else if let Some(p) = &iv.peptide {
                Action::Peptide {
                    species: s.particle.iter().position(|d| d.name == p.particle).unwrap_or(0),
                    wall_factor: p.wall_factor,
                    tissue_factor: p.tissue_factor,
                }
            } else if let (Some(set), Some(Ok(in_force))) = (&iv.set, &in_force[i]) {
                // Validated before resolution, so the change applies.
                Action::Set {
                    key: set.key.clone(),
                    value: set.value.0.to_string(),
                    params: Box::new(Self::resolve_in(in_force, file)),
                }
            } else {
                continue;
            };
            let start = iv.start_h * HOUR;
            let end = if iv.duration_h > 0.0 { Some(start + iv.duration_h * HOUR) } else { None };
            out.push(Intervention { name: iv.name.clone(), start, end, place, action });
        }
        self.interventions = out;
        self
    }
}
