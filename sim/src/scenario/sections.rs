//! The sections of a scenario file. Each key's unit is the end of its name; defaults and allowed
//! values are declared here and nowhere else (see [`super::spec::section!`]).

use serde::{Deserialize, Serialize};

use super::spec::{Check, Checked, Problem, SectionDoc, checked_plain, section};

section! {
    /// Run control: name, seed, simulated time and output cadence.
    pub struct RunSection {
        /// Name of the run; the output file is `<name>.h5` in the output folder.
        name: String = "interstice-run".to_string();
        /// Seed from which every random stream of the run is derived.
        seed: u64 = 1;
        /// Simulated time of the delivery phase, hours.
        end_time_h: f64 = 6.0, Check::above_upto(0.0, 1.0e4);
        /// Transport time step, seconds; the engine uses a smaller step where stability needs it.
        time_step_s: f64 = 20.0, Check::above_upto(0.0, 3600.0);
        /// Interval between snapshots, hours.
        snapshot_interval_h: f64 = 0.5, Check::above_upto(0.0, 1.0e4);
        /// Interval between checkpoints (written right after a snapshot), hours; 0 for none.
        checkpoint_interval_h: f64 = 0.0, Check::closed(0.0, 1.0e4);
    }
}

section! {
    /// The Cartesian lattice: voxel counts along x, y, z, voxel edge and origin.
    pub struct LatticeSection {
        /// Voxels along x, y and z.
        shape: [usize; 3] = [40, 40, 40], Check::count(3.0, 2048.0);
        /// Edge of a cubic voxel, micrometres.
        voxel_um: f64 = 20.0, Check::closed(0.5, 1000.0);
        /// Position of the lattice's lower corner, micrometres.
        origin_um: [f64; 3] = [0.0, 0.0, 0.0], Check::finite();
    }
}

/// Shape of the tumour region.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum TumourShape {
    /// A ball of radius `radius_um`.
    Sphere,
    /// An axis-aligned ellipsoid with semi-axes `semi_axes_um`.
    Ellipsoid,
}
checked_plain!(TumourShape);

section! {
    /// Geometry of the tumour inside the host tissue.
    pub struct TumourSection {
        /// "sphere" or "ellipsoid".
        shape: TumourShape = TumourShape::Sphere;
        /// Centre, micrometres; defaults to the centre of the lattice.
        centre_um: Option<[f64; 3]> = None, Check::finite();
        /// Radius of a spherical tumour, micrometres.
        radius_um: f64 = 250.0, Check::positive();
        /// Semi-axes along x, y, z of an ellipsoidal tumour, micrometres.
        semi_axes_um: [f64; 3] = [300.0, 250.0, 200.0], Check::positive();
    }
}

section! {
    /// Extracellular matrix: fibre volume fractions and fibre radii in host and tumour.
    /// Collagen fibres set steric hindrance; glycosaminoglycan chains set hydraulic resistance.
    pub struct MatrixSection {
        /// Collagen fibre radius, nm.
        collagen_fibre_radius_nm: f64 = 25.0, Check::closed(0.1, 1000.0);
        /// Glycosaminoglycan chain radius, nm.
        gag_fibre_radius_nm: f64 = 0.5, Check::closed(0.05, 100.0);
        /// Collagen volume fraction in host tissue.
        host_collagen_fraction: f64 = 0.02, Check::closed(0.0, 0.3);
        /// Collagen volume fraction in the tumour.
        tumour_collagen_fraction: f64 = 0.04, Check::closed(0.0, 0.3);
        /// Glycosaminoglycan volume fraction in host tissue.
        host_gag_fraction: f64 = 0.024, Check::closed(1.0e-5, 0.3);
        /// Glycosaminoglycan volume fraction in the tumour.
        tumour_gag_fraction: f64 = 0.007, Check::closed(1.0e-5, 0.3);
        /// Interstitial (fluid) volume fraction of host tissue.
        host_porosity: f64 = 0.2, Check::above_upto(0.0, 1.0);
        /// Interstitial (fluid) volume fraction of the tumour.
        tumour_porosity: f64 = 0.4, Check::above_upto(0.0, 1.0);
    }
}

section! {
    /// Starling forces across the vessel wall: oncotic pressures and protein reflection, by region.
    pub struct StarlingSection {
        /// Oncotic pressure of plasma, mmHg.
        plasma_oncotic_mmHg: f64 = 20.0, Check::closed(0.0, 100.0);
        /// Oncotic pressure of host interstitial fluid, mmHg.
        host_interstitial_oncotic_mmHg: f64 = 10.0, Check::closed(0.0, 100.0);
        /// Oncotic pressure of tumour interstitial fluid, mmHg.
        tumour_interstitial_oncotic_mmHg: f64 = 15.0, Check::closed(0.0, 100.0);
        /// Osmotic reflection coefficient of plasma proteins at host vessel walls.
        host_protein_reflection: f64 = 0.91, Check::fraction();
        /// Osmotic reflection coefficient of plasma proteins at tumour vessel walls.
        tumour_protein_reflection: f64 = 0.82, Check::fraction();
    }
}

/// How vessels are represented.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum VesselModel {
    /// Vessel surface spread uniformly over each region (surface per volume), as in lumped models.
    Continuum,
    /// Explicit vessel segments, generated or imported, with blood flow.
    Network,
}
checked_plain!(VesselModel);

section! {
    /// Vessel walls spread uniformly through each region (the `continuum` vessel model).
    pub struct ContinuumVesselsSection {
        /// Vessel surface per tissue volume in host tissue, 1/cm.
        host_surface_per_volume_per_cm: f64 = 70.0, Check::closed(0.0, 1.0e4);
        /// Vessel surface per tissue volume in the tumour, 1/cm.
        tumour_surface_per_volume_per_cm: f64 = 200.0, Check::closed(0.0, 1.0e4);
        /// Hydraulic conductivity of host vessel walls, cm/(mmHg s).
        host_wall_conductivity_cm_per_mmHg_s: f64 = 0.36e-7, Check::closed(0.0, 1.0e-3);
        /// Hydraulic conductivity of tumour vessel walls, cm/(mmHg s).
        tumour_wall_conductivity_cm_per_mmHg_s: f64 = 2.8e-7, Check::closed(0.0, 1.0e-3);
        /// Vascular (capillary) pressure, mmHg.
        vascular_pressure_mmHg: f64 = 25.0, Check::closed(0.0, 200.0);
        /// Radius of the pores of host vessel walls, nm (continuous capillaries: a few nm).
        host_pore_radius_nm: f64 = 6.0, Check::closed(0.5, 5000.0);
        /// Radius of the pores of tumour vessel walls, nm (hundreds of nm: Hobbs et al. 1998).
        tumour_pore_radius_nm: f64 = 200.0, Check::closed(0.5, 5000.0);
        /// Thickness of the vessel wall (pore length), um.
        wall_thickness_um: f64 = 1.0, Check::closed(0.01, 100.0);
    }
}

/// Where the vessel network of the `network` model comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum NetworkSource {
    /// A host capillary bed with tumour vessels inside the tumour (dense rim, sparse core).
    Tumour,
    /// A host capillary bed only, the same everywhere.
    CapillaryBed,
    /// Nodes and segments read from two CSV files (`nodes_csv`, `segments_csv`).
    Csv,
    /// Polylines read from a VTK legacy polydata file (`vtk_file`).
    Vtk,
}
checked_plain!(NetworkSource);

/// A lattice axis, for the direction of blood flow through a generated bed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Axis {
    X,
    Y,
    Z,
}
checked_plain!(Axis);

/// How the pore radius of each tumour vessel is drawn.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum PoreDistribution {
    /// Log-normal with median `tumour_pore_median_nm` and log spread `tumour_pore_spread`,
    /// truncated to [`tumour_pore_min_nm`, `tumour_pore_max_nm`].
    LogNormal,
    /// Uniform on [`tumour_pore_min_nm`, `tumour_pore_max_nm`].
    Uniform,
    /// Every tumour vessel has `tumour_pore_median_nm`.
    Fixed,
}
checked_plain!(PoreDistribution);

/// Where the hydraulic conductivity Lp of each segment wall comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum WallConductivitySource {
    /// Pore theory: `Lp = gamma r0^2 / (8 mu Lw)` from each segment's pores.
    Pores,
    /// The per-type values of `[vessels.continuum]` (host and tumour wall conductivity).
    TypeDefaults,
}
checked_plain!(WallConductivitySource);

/// Hindrance factors of particles in cylindrical pores.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum HindranceModel {
    /// Renkin 1954 centre-line forms.
    Renkin,
    /// Dechadilok and Deen 2006 fits (cross-section averaged).
    DechadilokDeen,
}
checked_plain!(HindranceModel);

/// Apparent viscosity of blood in a vessel of given diameter and haematocrit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ViscosityLaw {
    /// Pries et al. 1994 (Circ Res 75:904), microvessels in vivo.
    InVivo1994,
    /// Pries et al. 1992 (Am J Physiol 263:H1770), glass tubes in vitro.
    InVitro1992,
}
checked_plain!(ViscosityLaw);

section! {
    /// Explicit vessel segments (the `network` vessel model): generator or imported file,
    /// blood-flow boundary conditions and wall properties.
    pub struct NetworkSection {
        /// "tumour" (capillary bed with tumour vessels), "capillary-bed", "csv" or "vtk".
        source: NetworkSource = NetworkSource::Tumour;
        /// Node table of a "csv" network, relative to the scenario file (see DEVELOPERS.md).
        nodes_csv: String = String::new();
        /// Segment table of a "csv" network, relative to the scenario file.
        segments_csv: String = String::new();
        /// VTK legacy polydata file of a "vtk" network, relative to the scenario file.
        vtk_file: String = String::new();
        /// Micrometres per coordinate unit of the VTK file.
        vtk_length_unit_um: f64 = 1.0, Check::positive();
        /// Accept an imported network that falls into disconnected pieces (they may be unperfused).
        keep_disconnected: bool = false;
        /// Distance between neighbouring capillaries of the host bed, micrometres.
        capillary_spacing_um: f64 = 80.0, Check::closed(20.0, 1000.0);
        /// Median radius of host capillaries, micrometres.
        capillary_radius_um: f64 = 3.0, Check::closed(1.6, 50.0);
        /// Standard deviation of ln(radius) of host capillaries.
        capillary_radius_spread: f64 = 0.1, Check::closed(0.0, 1.0);
        /// Random displacement of bed nodes, as a fraction of the spacing.
        position_jitter: f64 = 0.25, Check::closed(0.0, 0.45);
        /// Probability of each cross-connection between neighbouring capillaries.
        cross_link_probability: f64 = 0.5, Check::fraction();
        /// Axis along which blood crosses the generated bed: "x", "y" or "z".
        flow_axis: Axis = Axis::X;
        /// Blood pressure at the inlet face of a generated bed (and at the low end of an imported
        /// network without boundary conditions), mmHg.
        inlet_pressure_mmHg: f64 = 35.0, Check::closed(0.0, 200.0);
        /// Blood pressure at the outlet face, mmHg.
        outlet_pressure_mmHg: f64 = 15.0, Check::closed(0.0, 200.0);
        /// Median radius of tumour vessels, micrometres.
        tumour_radius_um: f64 = 6.0, Check::closed(1.6, 100.0);
        /// Standard deviation of ln(radius) of tumour vessels.
        tumour_radius_spread: f64 = 0.4, Check::closed(0.0, 1.5);
        /// Radius of the necrotic core as a fraction of the tumour radius.
        necrotic_core_fraction: f64 = 0.4, Check::closed(0.0, 0.95);
        /// Fraction of vessels that survive in the necrotic core.
        core_vessel_survival: f64 = 0.05, Check::fraction();
        /// Thickness of the densely vascular rim as a fraction of the tumour radius.
        rim_thickness_fraction: f64 = 0.3, Check::closed(0.0, 1.0);
        /// Vessel density of the rim relative to the host bed.
        rim_density_factor: f64 = 2.0, Check::closed(1.0, 10.0);
        /// Sideways displacement of the kinks of tumour vessels, as a fraction of their length.
        tortuosity: f64 = 0.25, Check::closed(0.0, 1.0);
        /// Pore radius distribution of tumour vessels: "log-normal", "uniform" or "fixed".
        tumour_pore_distribution: PoreDistribution = PoreDistribution::LogNormal;
        /// Median (log-normal) or fixed pore radius of tumour vessels, nm.
        tumour_pore_median_nm: f64 = 200.0, Check::closed(1.0, 5000.0);
        /// Standard deviation of ln(pore radius) of tumour vessels.
        tumour_pore_spread: f64 = 0.7, Check::closed(0.0, 3.0);
        /// Smallest pore radius of tumour vessels, nm.
        tumour_pore_min_nm: f64 = 20.0, Check::closed(1.0, 5000.0);
        /// Largest pore radius of tumour vessels, nm.
        tumour_pore_max_nm: f64 = 1200.0, Check::closed(1.0, 5000.0);
        /// Fraction of tumour vessel wall area open as pores.
        tumour_pore_fraction: f64 = 5.0e-6, Check::closed(0.0, 0.5);
        /// Wall (pore) thickness of tumour vessels, micrometres.
        tumour_wall_thickness_um: f64 = 1.0, Check::closed(0.01, 20.0);
        /// Pore radius of host capillaries, nm.
        host_pore_radius_nm: f64 = 5.0, Check::closed(0.5, 5000.0);
        /// Fraction of host capillary wall area open as pores.
        host_pore_fraction: f64 = 5.0e-4, Check::closed(0.0, 0.5);
        /// Wall (pore) thickness of host capillaries, micrometres.
        host_wall_thickness_um: f64 = 0.5, Check::closed(0.01, 20.0);
        /// Wall hydraulic conductivity from "pores" or the "type-defaults" of [vessels.continuum].
        wall_conductivity: WallConductivitySource = WallConductivitySource::Pores;
        /// Hindrance factors: "dechadilok-deen" (2006) or "renkin" (1954).
        hindrance: HindranceModel = HindranceModel::DechadilokDeen;
        /// Apparent blood viscosity: "in-vivo-1994" or "in-vitro-1992" (Pries et al.).
        viscosity_law: ViscosityLaw = ViscosityLaw::InVivo1994;
        /// Segments with slower mean blood velocity count as unperfused, micrometres per second.
        min_perfused_velocity_um_per_s: f64 = 1.0, Check::closed(0.0, 1.0e5);
        /// Relative residual at which the blood-pressure solve stops.
        solver_tolerance: f64 = 1.0e-11, Check::closed(1.0e-15, 1.0e-4);
    }
}

section! {
    /// Blood vessels: which model, and its parameters.
    pub struct VesselsSection {
        /// "continuum" or "network".
        model: VesselModel = VesselModel::Continuum;
        /// Parameters of the continuum model.
        continuum: ContinuumVesselsSection = ContinuumVesselsSection::default();
        /// Parameters of the network model.
        network: NetworkSection = NetworkSection::default();
    }
}

section! {
    /// The circulating blood: volume, haematocrit and plasma viscosity.
    pub struct BloodSection {
        /// Circulating blood volume, mL (mouse about 2 mL, human about 5000 mL; common practice).
        volume_mL: f64 = 2.0, Check::closed(0.01, 1.0e4);
        /// Systemic discharge haematocrit.
        haematocrit: f64 = 0.45, Check::closed(0.0, 0.8);
        /// Plasma viscosity, mPa s (about 1.1 to 1.3 at 37 C; common practice).
        plasma_viscosity_mPa_s: f64 = 1.2, Check::closed(0.5, 5.0);
    }
}

/// Where the plasma curve of a particle design comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum PlasmaModel {
    /// Renal and phagocytic clearance rates that follow from the design (size, charge, coating).
    Design,
    /// A given elimination half-life, optionally with a distribution phase (two compartments).
    HalfLife,
    /// A measured time-concentration table (`table_csv`), interpolated log-linearly.
    Table,
}
checked_plain!(PlasmaModel);

section! {
    /// Plasma pharmacokinetics of one particle design.
    pub struct PlasmaSection {
        /// "design", "half-life" or "table".
        model: PlasmaModel = PlasmaModel::Design;
        /// Hydrodynamic diameter below which the kidney filters particles, nm (Choi et al. 2007).
        renal_cutoff_diameter_nm: f64 = 5.5, Check::closed(0.5, 100.0);
        /// Width of the renal cut-off (logistic), nm.
        renal_cutoff_width_nm: f64 = 0.5, Check::closed(0.01, 50.0);
        /// Plasma half-life from renal filtration well below the cut-off, minutes.
        renal_half_life_min: f64 = 30.0, Check::closed(0.1, 1.0e5);
        /// Phagocytic half-life of a small, neutral, bare particle, hours.
        mps_half_life_h: f64 = 2.0, Check::closed(1.0e-3, 1.0e5);
        /// Hydrodynamic diameter at which phagocytic clearance doubles, nm.
        mps_size_scale_nm: f64 = 200.0, Check::closed(1.0, 1.0e4);
        /// Exponent of the growth of phagocytic clearance with diameter.
        mps_size_exponent: f64 = 2.0, Check::closed(0.0, 6.0);
        /// Positive surface potential that multiplies phagocytic clearance by e, mV.
        mps_charge_scale_mV: f64 = 20.0, Check::closed(1.0, 1000.0);
        /// Factor on phagocytic clearance of a stealth-coated particle.
        stealth_factor: f64 = 0.1, Check::closed(0.0, 1.0);
        /// Elimination (terminal) half-life of the "half-life" model, hours.
        half_life_h: f64 = 12.0, Check::closed(1.0e-3, 1.0e5);
        /// Distribution half-life of the "half-life" model, hours (used when the fraction is > 0).
        distribution_half_life_h: f64 = 0.5, Check::closed(1.0e-4, 1.0e5);
        /// Fraction of the initial plasma concentration in the distribution phase (0: one compartment).
        distribution_fraction: f64 = 0.0, Check::closed(0.0, 0.99);
        /// Measured table of the "table" model, relative to the scenario file (see DEVELOPERS.md).
        table_csv: String = String::new();
    }
}

/// How the hydraulic conductivity of the interstitium is set.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ConductivityModel {
    /// From the fibre volume fractions of `[matrix]` (Jackson and James 1986), per voxel.
    Matrix,
    /// One value per region, from `[fluid]`.
    Table,
}
checked_plain!(ConductivityModel);

/// What the faces of the lattice box do to the interstitial pressure.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum FluidBoundary {
    /// Tissue like the boundary voxel continues outside and relaxes to its own equilibrium pressure.
    HostEquilibrium,
    /// The pressure `boundary_pressure_mmHg` on the faces.
    Fixed,
    /// No flow through the faces.
    ZeroFlux,
}
checked_plain!(FluidBoundary);

section! {
    /// Interstitial fluid: steady Darcy flow with Starling sources and lymphatic sinks.
    pub struct FluidSection {
        /// Hydraulic conductivity: "matrix" (from the fibre fractions of the matrix section) or "table" (per region, below).
        conductivity: ConductivityModel = ConductivityModel::Matrix;
        /// Viscosity of interstitial fluid, mPa s (default: water at 37 C, IAPWS 2008).
        viscosity_mPa_s: f64 = 0.6913, Check::closed(0.1, 100.0);
        /// Hydraulic conductivity of host tissue when conductivity = "table", cm^2/(mmHg s) (default: Baxter and Jain 1989).
        host_conductivity_cm2_per_mmHg_s: f64 = 8.53e-9, Check::closed(1.0e-14, 1.0e-3);
        /// Hydraulic conductivity of the tumour when conductivity = "table", cm^2/(mmHg s) (default: Baxter and Jain 1989).
        tumour_conductivity_cm2_per_mmHg_s: f64 = 4.13e-8, Check::closed(1.0e-14, 1.0e-3);
        /// Faces of the lattice box: "host-equilibrium" (the tissue continues outside), "fixed" or "zero-flux".
        boundary: FluidBoundary = FluidBoundary::HostEquilibrium;
        /// Pressure on the faces of the box when boundary = "fixed", mmHg.
        boundary_pressure_mmHg: f64 = 0.0, Check::closed(-50.0, 200.0);
        /// Relative residual at which a pressure solve stops.
        solver_tolerance: f64 = 1.0e-8, Check::closed(1.0e-14, 1.0e-2);
        /// Most conjugate-gradient iterations of one pressure solve.
        solver_max_iterations: u32 = 500, Check::count(1.0, 1.0e5);
    }
}

/// Which tumour lymphatics are collapsed (host lymphatics always drain).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum LymphaticCollapse {
    /// Those deeper than `functional_rim_um` below the tumour surface.
    Depth,
    /// Those where the local cell density exceeds `collapse_cell_density`.
    CellDensity,
    /// None: every tumour voxel drains.
    None,
}
checked_plain!(LymphaticCollapse);

section! {
    /// Lymphatic drainage of interstitial fluid: how much, and where tumour lymphatics still work.
    /// The default drainage is chosen, not measured: with the default vessels it settles host
    /// tissue near 1 mmHg (normal interstitial pressure is near 0 mmHg, common practice).
    pub struct LymphaticsSection {
        /// Lymphatic filtration coefficient times lymphatic surface per volume (LpL SL/V) in host tissue, 1/(mmHg s).
        host_drainage_per_mmHg_s: f64 = 4.0e-5, Check::closed(0.0, 1.0);
        /// The same in tumour tissue where its lymphatics work, 1/(mmHg s).
        tumour_drainage_per_mmHg_s: f64 = 4.0e-5, Check::closed(0.0, 1.0);
        /// Pressure inside the lymphatics, mmHg.
        lymph_pressure_mmHg: f64 = 0.0, Check::closed(-20.0, 50.0);
        /// Collapsed tumour lymphatics: "depth", "cell-density" or "none".
        collapse: LymphaticCollapse = LymphaticCollapse::Depth;
        /// Depth below the tumour surface within which tumour lymphatics drain (collapse = "depth"), um.
        functional_rim_um: f64 = 50.0, Check::closed(0.0, 1.0e5);
        /// Fraction of voxels holding a cell, over a cube around the voxel, above which tumour lymphatics collapse (collapse = "cell-density").
        collapse_cell_density: f64 = 0.8, Check::fraction();
        /// Half-width of that cube, um (rounded to whole voxels).
        density_half_width_um: f64 = 40.0, Check::closed(0.0, 1.0e4);
    }
}

/// Surface coating of a particle.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Coating {
    /// Bare surface: opsonised and cleared by phagocytes.
    None,
    /// A stealth polymer brush (for example polyethylene glycol) that hides it from opsonins.
    Stealth,
}
checked_plain!(Coating);

/// Which cells carry the receptor a ligand targets.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ReceptorTarget {
    /// The receptor of cancer cells (`cells.cancer_receptors_per_cell`).
    Cancer,
    /// The receptor of host cells (`cells.host_receptors_per_cell`).
    Host,
}
checked_plain!(ReceptorTarget);

section! {
    /// A targeting ligand on a particle.
    pub struct LigandSection {
        /// Which cells carry the targeted receptor: "cancer" or "host".
        receptor: ReceptorTarget = ReceptorTarget::Cancer;
        /// Association rate constant of one ligand with one receptor, 1/(M s).
        kon_per_M_s: f64 = 1.0e5, Check::closed(0.0, 1.0e10);
        /// Dissociation rate constant of one ligand-receptor bond, 1/s.
        koff_per_s: f64 = 1.0e-4, Check::closed(0.0, 1.0e3);
        /// Ligands that can engage receptors at once (1 = monovalent).
        valency: u32 = 1, Check::count(1.0, 100.0);
        /// Internalisation rate of bound particles, 1/s.
        internalisation_per_s: f64 = 1.0e-4, Check::closed(0.0, 10.0);
    }
}

/// How one entry of a dose schedule gives its particles.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum DoseKind {
    /// One intravenous bolus of `particles` at `at_h`.
    Bolus,
    /// `count` boluses of `particles` each, the first at `at_h`, then every `every_h`.
    Repeated,
    /// A constant intravenous infusion from `at_h` for `duration_h`: `particles` in all, or
    /// `particles_per_h`.
    Infusion,
}
checked_plain!(DoseKind);

section! {
    /// One entry of a particle design's dose schedule (`[[particle.dose]]`).
    pub struct DoseSection {
        /// "bolus", "repeated" or "infusion".
        kind: DoseKind = DoseKind::Bolus;
        /// Time of the bolus, of the first repeated bolus or of the start of the infusion, hours.
        at_h: f64 = 0.0, Check::closed(0.0, 1.0e4);
        /// Interval between repeated boluses, hours ("repeated" only).
        every_h: Option<f64> = None, Check::above_upto(0.0, 1.0e4);
        /// Number of repeated boluses ("repeated" only).
        count: Option<u32> = None, Check::count(1.0, 1.0e5);
        /// Duration of the infusion, hours ("infusion" only).
        duration_h: Option<f64> = None, Check::above_upto(0.0, 1.0e4);
        /// Particles of each bolus, or of the whole infusion.
        particles: Option<f64> = None, Check::closed(0.0, 1.0e19);
        /// Infusion rate instead of the infusion's total, particles per hour ("infusion" only).
        particles_per_h: Option<f64> = None, Check::closed(0.0, 1.0e19);
    }
}

section! {
    /// One particle design: a species of its own in every output.
    pub struct ParticleSection {
        /// Name of the species in outputs (letters, digits, '-', '_').
        name: String = "particle".to_string();
        /// Hydrodynamic radius (core plus coating), nm.
        hydrodynamic_radius_nm: f64 = 50.0, Check::closed(0.5, 2000.0);
        /// Surface (zeta) potential, mV; its sign is the sign of the surface charge.
        surface_potential_mV: f64 = -10.0, Check::closed(-200.0, 200.0);
        /// Surface coating: "none" or "stealth".
        coating: Coating = Coating::Stealth;
        /// Particles given in one intravenous bolus at t = 0 (1e13 when neither this nor a
        /// `[[particle.dose]]` is given; not both).
        dose_particles: Option<f64> = None, Check::closed(0.0, 1.0e19);
        /// Dose schedule: boluses, repeated boluses and infusions, one `[[particle.dose]]` table each.
        dose: Vec<DoseSection> = Vec::new();
        /// Particles carried by one packet in the tissue.
        packet_particles: f64 = 1.0e4, Check::closed(1.0, 1.0e15);
        /// Factor on the particle's advection by interstitial flow (1: it moves with the fluid).
        convective_hindrance: f64 = 1.0, Check::closed(0.0, 1.0);
        /// Targeting ligand; absent for an untargeted design.
        ligand: Option<LigandSection> = None;
        /// Plasma pharmacokinetics of the design.
        plasma: PlasmaSection = PlasmaSection::default();
    }
}

section! {
    /// Cell agents placed at the start: at most one cell per voxel.
    pub struct CellsSection {
        /// Probability that a tumour voxel holds a cancer cell.
        tumour_cell_fraction: f64 = 0.9, Check::fraction();
        /// Probability that a host voxel holds a host cell.
        host_cell_fraction: f64 = 0.6, Check::fraction();
        /// Fraction of tumour cells that are phagocytes (tumour-associated macrophages).
        tumour_phagocyte_fraction: f64 = 0.05, Check::fraction();
        /// Target receptors on each cancer cell.
        cancer_receptors_per_cell: f64 = 1.0e5, Check::closed(0.0, 1.0e8);
        /// Target receptors on each host cell.
        host_receptors_per_cell: f64 = 1.0e3, Check::closed(0.0, 1.0e8);
    }
}

/// Topology the XDMF sidecar describes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum XdmfMesh {
    /// Explicit hexahedra up to 262144 voxels (64^3), the regular grid above.
    Auto,
    /// Points and hexahedra stored in the run file: every XDMF reader understands it.
    Explicit,
    /// Origin and spacing only (3DCoRectMesh): compact, for large lattices.
    Regular,
}
checked_plain!(XdmfMesh);

section! {
    /// What each snapshot writes.
    pub struct OutputSection {
        /// Deflate level of datasets, 0 (none) to 9; 1 is fastest with most of the gain.
        compression_level: u32 = 1, Check::count(0.0, 9.0);
        /// Write the packet table in every snapshot (large).
        packet_tables: bool = false;
        /// Write the cell table in every snapshot.
        cell_tables: bool = true;
        /// Topology of the XDMF sidecar: "auto", "explicit" or "regular".
        xdmf_mesh: XdmfMesh = XdmfMesh::Auto;
    }
}

/// A whole scenario as written in the file, before units are converted.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Scenario {
    pub run: RunSection,
    pub lattice: LatticeSection,
    pub tumour: TumourSection,
    pub matrix: MatrixSection,
    pub cells: CellsSection,
    pub starling: StarlingSection,
    pub vessels: VesselsSection,
    pub fluid: FluidSection,
    pub lymphatics: LymphaticsSection,
    pub transport: super::TransportSection,
    pub binding: super::BindingSection,
    pub uptake: super::UptakeSection,
    pub tissue: super::TissueSection,
    pub oxygen: super::OxygenSection,
    pub growth: super::GrowthSection,
    pub blood: BloodSection,
    /// Particle designs, one `[[particle]]` table each.
    pub particle: Vec<ParticleSection>,
    /// Scheduled interventions, one `[[intervention]]` table each.
    pub intervention: Vec<super::InterventionSection>,
    pub output: OutputSection,
}

impl Scenario {
    /// Every section with its summary, keys and defaults, in file order.
    pub fn sections() -> Vec<SectionDoc> {
        vec![
            SectionDoc::of::<RunSection>("run"),
            SectionDoc::of::<LatticeSection>("lattice"),
            SectionDoc::of::<TumourSection>("tumour"),
            SectionDoc::of::<MatrixSection>("matrix"),
            SectionDoc::of::<CellsSection>("cells"),
            SectionDoc::of::<StarlingSection>("starling"),
            SectionDoc::of::<VesselsSection>("vessels"),
            SectionDoc::of::<ContinuumVesselsSection>("vessels.continuum"),
            SectionDoc::of::<FluidSection>("fluid"),
            SectionDoc::of::<LymphaticsSection>("lymphatics"),
            SectionDoc::of::<super::TransportSection>("transport"),
            SectionDoc::of::<super::BindingSection>("binding"),
            SectionDoc::of::<super::UptakeSection>("uptake"),
            SectionDoc::of::<super::TissueSection>("tissue"),
            SectionDoc::of::<super::OxygenSection>("oxygen"),
            SectionDoc::of::<super::GrowthSection>("growth"),
            SectionDoc::of::<NetworkSection>("vessels.network"),
            SectionDoc::of::<BloodSection>("blood"),
            SectionDoc::of::<ParticleSection>("[[particle]]"),
            SectionDoc::of::<LigandSection>("particle.ligand"),
            SectionDoc::of::<PlasmaSection>("particle.plasma"),
            SectionDoc::of::<super::InterventionSection>("[[intervention]]"),
            SectionDoc::of::<super::DegradationSection>("intervention.matrix_degradation"),
            SectionDoc::of::<super::NormalisationSection>("intervention.normalisation"),
            SectionDoc::of::<super::HeatingSection>("intervention.heating"),
            SectionDoc::of::<super::PeptideSection>("intervention.peptide"),
            SectionDoc::of::<super::SetSection>("intervention.set"),
            SectionDoc::of::<DoseSection>("[[particle.dose]]"),
            SectionDoc::of::<OutputSection>("output"),
        ]
    }

    /// Range checks of every key, then consistency checks between sections.
    pub fn problems(&self, file: Option<&std::path::Path>) -> Vec<Problem> {
        let mut out = Vec::new();
        self.run.check_into("run", None, &mut out);
        self.lattice.check_into("lattice", None, &mut out);
        self.tumour.check_into("tumour", None, &mut out);
        self.matrix.check_into("matrix", None, &mut out);
        self.cells.check_into("cells", None, &mut out);
        self.starling.check_into("starling", None, &mut out);
        self.vessels.check_into("vessels", None, &mut out);
        self.fluid.check_into("fluid", None, &mut out);
        self.lymphatics.check_into("lymphatics", None, &mut out);
        self.transport.check_into("transport", None, &mut out);
        self.binding.check_into("binding", None, &mut out);
        self.uptake.check_into("uptake", None, &mut out);
        self.tissue.check_into("tissue", None, &mut out);
        self.oxygen.check_into("oxygen", None, &mut out);
        self.growth.check_into("growth", None, &mut out);
        self.blood.check_into("blood", None, &mut out);
        self.particle.check_into("particle", None, &mut out);
        self.intervention.check_into("intervention", None, &mut out);
        self.output.check_into("output", None, &mut out);
        if !out.is_empty() {
            return out;
        }
        self.consistency(&mut out);
        self.vessel_consistency(file, &mut out);
        super::intervention_problems(self, &mut out);
        self.dose_consistency(&mut out);
        self.tissue_consistency(file, &mut out);
        out
    }

    fn consistency(&self, out: &mut Vec<Problem>) {
        let r = &self.run;
        if r.snapshot_interval_h > r.end_time_h {
            out.push(Problem {
                path: "run.snapshot_interval_h".into(),
                value: r.snapshot_interval_h.to_string(),
                expected: format!("at most run.end_time_h = {}", r.end_time_h),
                line: None,
            });
        }
        if r.time_step_s > r.snapshot_interval_h * 3600.0 {
            out.push(Problem {
                path: "run.time_step_s".into(),
                value: r.time_step_s.to_string(),
                expected: format!("at most the snapshot interval ({} s)", r.snapshot_interval_h * 3600.0),
                line: None,
            });
        }
        if r.name.is_empty() || !r.name.chars().all(|c| c.is_ascii_alphanumeric() || "-_.".contains(c)) {
            out.push(Problem {
                path: "run.name".into(),
                value: format!("{:?}", r.name),
                expected: "a non-empty name of letters, digits, '-', '_' and '.'".into(),
                line: None,
            });
        }
        let mut names = std::collections::BTreeSet::new();
        for (i, p) in self.particle.iter().enumerate() {
            if p.name.is_empty() || !p.name.chars().all(|c| c.is_ascii_alphanumeric() || "-_".contains(c)) {
                out.push(Problem {
                    path: format!("particle[{i}].name"),
                    value: format!("{:?}", p.name),
                    expected: "a non-empty name of letters, digits, '-' and '_'".into(),
                    line: None,
                });
            } else if !names.insert(p.name.clone()) {
                out.push(Problem {
                    path: format!("particle[{i}].name"),
                    value: format!("{:?}", p.name),
                    expected: "a name no other particle design uses".into(),
                    line: None,
                });
            }
        }
        if self.particle.len() > crate::tissue::MAX_SPECIES {
            out.push(Problem {
                path: "particle".into(),
                value: format!("{} designs", self.particle.len()),
                expected: format!("at most {} particle designs", crate::tissue::MAX_SPECIES),
                line: None,
            });
        }
        self.fluid_consistency(out);
        let l = &self.lattice;
        let voxels: f64 = l.shape.iter().map(|&n| n as f64).product();
        if voxels > 2.0e9 {
            out.push(Problem {
                path: "lattice.shape".into(),
                value: format!("{:?}", l.shape),
                expected: "at most 2e9 voxels in all".into(),
                line: None,
            });
        }
        // The tumour must fit inside the lattice.
        let extent: Vec<f64> = (0..3).map(|a| l.shape[a] as f64 * l.voxel_um).collect();
        let centre = self.tumour.centre_um.unwrap_or([
            l.origin_um[0] + extent[0] / 2.0,
            l.origin_um[1] + extent[1] / 2.0,
            l.origin_um[2] + extent[2] / 2.0,
        ]);
        let semi = match self.tumour.shape {
            TumourShape::Sphere => [self.tumour.radius_um; 3],
            TumourShape::Ellipsoid => self.tumour.semi_axes_um,
        };
        let key = match self.tumour.shape {
            TumourShape::Sphere => "tumour.radius_um",
            TumourShape::Ellipsoid => "tumour.semi_axes_um",
        };
        for a in 0..3 {
            let lo = centre[a] - semi[a];
            let hi = centre[a] + semi[a];
            if lo < l.origin_um[a] || hi > l.origin_um[a] + extent[a] {
                out.push(Problem {
                    path: key.into(),
                    value: format!("{}", semi[a]),
                    expected: format!(
                        "a tumour inside the lattice: along {} it spans {lo} to {hi} um, the lattice {} to {} um",
                        ["x", "y", "z"][a],
                        l.origin_um[a],
                        l.origin_um[a] + extent[a]
                    ),
                    line: None,
                });
                break;
            }
        }
    }
}

impl Scenario {
    /// The interstitial pressure must be tied down somewhere: by the box faces, vessel walls or
    /// lymphatics (otherwise the Darcy problem is singular).
    fn fluid_consistency(&self, out: &mut Vec<Problem>) {
        if self.fluid.boundary != FluidBoundary::ZeroFlux || self.vessels.model != VesselModel::Continuum {
            return;
        }
        let c = &self.vessels.continuum;
        let walls = c.host_surface_per_volume_per_cm * c.host_wall_conductivity_cm_per_mmHg_s
            + c.tumour_surface_per_volume_per_cm * c.tumour_wall_conductivity_cm_per_mmHg_s;
        let lymph = self.lymphatics.host_drainage_per_mmHg_s + self.lymphatics.tumour_drainage_per_mmHg_s;
        if walls == 0.0 && lymph == 0.0 {
            out.push(Problem {
                path: "fluid.boundary".into(),
                value: "\"zero-flux\"".into(),
                expected: "\"host-equilibrium\" or \"fixed\" when no vessel wall and no lymphatic exchanges fluid \
                           (vessels.continuum and lymphatics are all zero): the pressure would be undetermined"
                    .into(),
                line: None,
            });
        }
    }
}
