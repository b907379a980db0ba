//! Interstitial fluid pressure and flow: steady Darcy flow with Starling sources from the vessel
//! walls and lymphatic sinks (Baxter and Jain 1989, Microvasc Res 37:77; lymphatics as in Baxter
//! and Jain 1990, Microvasc Res 40:246):
//!
//! `-div(K grad p) = (Lp S/V)(p_v - p - sigma_T (pi_v - pi_i)) - (LpL SL/V)(p - p_L)`
//!
//! with the Darcy flux `q = -K grad p` (m/s) and the interstitial velocity `q / porosity`.
//!
//! - `K` per voxel: from the matrix ([`matrix_conductivity`]: Jackson and James 1986 for each fibre
//!   network, the two networks' Darcy resistivities added) or per region from `[fluid]`; a
//!   matrix without fibres (infinite `K`) is refused.
//! - Vessel terms per voxel from the [`WallFluid`] resource, whichever vessel model made it
//!   (`lp_s = sum Lp S`, `drive = sum Lp S (p_v - sigma_T (pi_v - pi_i))`): the source of voxel
//!   `v` is `drive(v) - lp_s(v) p(v)`.
//! - Lymphatics ([`Lymphatics`]): `LpL SL/V` per voxel, zero where the tumour has collapsed them
//!   (a depth rule from the tumour surface or a cell-density rule, `[lymphatics]`).
//! - Box faces: fixed pressure, zero flux, or host-tissue equilibrium: outside the box the tissue
//!   of the boundary voxel continues and relaxes to its own equilibrium pressure
//!   `p_eq = (drive + LpL SL p_L) / (lp_s + LpL SL)` over the length `lambda = sqrt(K / a)`,
//!   `a = (lp_s + LpL SL) / V`, the decaying solution of the 1D equation outside, which is a Robin
//!   condition: flux density out `K (p - p_eq) / lambda`, in series with the half voxel.
//!
//! Cell-centred finite volumes on the lattice ([`crate::solver`]), solved by multigrid-
//! preconditioned conjugate gradients at install time and again, warm-started, whenever the
//! wall coefficients, the matrix or the lymphatics change.
//!
//! Outputs: the [`InterstitialFluid`] fields (pressure, velocity, conductivity, drainage), the
//! [`DarcyFlux`] through every voxel face, the transport's [`FaceVelocity`] (flux density over
//! the face porosity, the mean of the two voxels' porosities; the voxel's own on a boundary face),
//! and the fluid balance per snapshot: vessel leakage = lymphatic drainage + boundary outflow,
//! with its relative error.

use bevy_ecs::change_detection::Tick;
use bevy_ecs::prelude::*;

use crate::error::{SimError, SimResult};
use crate::field::{Field, FieldRef};
use crate::io::SnapshotWriter;
use crate::lattice::{Face, Lattice};
use crate::params::{FluidParams, LymphaticParams, Params, TumourGeometry};
use crate::particles::hindrance::{jackson_james, mixed_permeability};
use crate::process::output;
use crate::process::transport::FaceVelocity;
use crate::scenario::{ConductivityModel, FluidBoundary, LymphaticCollapse, VesselModel};
use crate::solver::{Boundary, SolveError, SolveReport, Solver, SolverOptions, Stencil7, Wall};
use crate::tissue::{Matrix, Occupancy, Regions, TUMOUR};
use crate::vascular::WallFluid;
use crate::world::{Clock, Faults, Phase};

/// Hydraulic conductivity `K = kappa / mu` (m^2/(Pa s)) of a matrix of collagen and
/// glycosaminoglycan fibres: each network's Darcy permeability from Jackson and James 1986 (Can J
/// Chem Eng 64:364, [`jackson_james`]), the two networks' resistivities `1 / kappa` added
/// ([`mixed_permeability`]; the same rule the particle hindrance uses). Levick 1987 (Q J Exp
/// Physiol 72:409) found that neither class of fibre alone accounts for the conductivity of most
/// tissues, which rather comes from their combined effect.
pub fn matrix_conductivity(collagen: f64, gag: f64, collagen_radius: f64, gag_radius: f64, viscosity: f64) -> f64 {
    mixed_permeability(jackson_james(collagen_radius, collagen), jackson_james(gag_radius, gag)) / viscosity
}

/// Lymphatic drainage per voxel.
#[derive(Resource, Debug, Clone)]
pub struct Lymphatics {
    /// `LpL SL/V`, 1/(Pa s); zero where lymphatics are absent or collapsed.
    pub drainage: Field,
    /// Pressure in the lymphatics `p_L`, Pa.
    pub pressure: f64,
}

impl Lymphatics {
    /// Host voxels drain at the host rate; tumour voxels at the tumour rate unless the collapse
    /// rule of `p` says their lymphatics are closed. The cell-density rule reads `occupancy`
    /// (no cell anywhere when it is absent).
    pub fn build(
        l: &Lattice,
        regions: &Regions,
        tumour: &TumourGeometry,
        occupancy: Option<&Occupancy>,
        p: &LymphaticParams,
    ) -> Self {
        let n = l.len();
        let mut drainage = Field::filled(
            "lymphatic_drainage",
            "Pa-1 s-1",
            "lymphatic filtration coefficient times lymphatic surface per volume (0 where collapsed)",
            n,
            0.0,
        );
        let density = match p.collapse {
            LymphaticCollapse::CellDensity => {
                let w = (p.density_half_width / l.h).round() as usize;
                Some(cell_density(l, occupancy, w))
            }
            _ => None,
        };
        for (v, d) in drainage.data.iter_mut().enumerate() {
            let r = regions.region.data[v];
            if r != TUMOUR {
                *d = p.drainage[0];
                continue;
            }
            let open = match p.collapse {
                LymphaticCollapse::None => true,
                LymphaticCollapse::Depth => tumour.signed_distance(l.centre(l.ijk(v))) >= -p.functional_rim,
                LymphaticCollapse::CellDensity => density.as_ref().is_some_and(|dd| dd[v] <= p.collapse_cell_density),
            };
            *d = if open { p.drainage[1] } else { 0.0 };
        }
        Lymphatics { drainage, pressure: p.pressure }
    }
}

/// Fraction of voxels holding a cell in the cube of half-width `w` voxels around each voxel
/// (clipped at the box), from a summed-volume table.
fn cell_density(l: &Lattice, occupancy: Option<&Occupancy>, w: usize) -> Vec<f64> {
    let [nx, ny, nz] = l.n;
    let (px, py) = (nx + 1, ny + 1);
    let mut s = vec![0u32; px * py * (nz + 1)];
    let at = |i: usize, j: usize, k: usize| i + px * (j + py * k);
    for k in 0..nz {
        for j in 0..ny {
            for i in 0..nx {
                let occ = occupancy.is_some_and(|o| o.cell[l.idx(i, j, k)].is_some());
                s[at(i + 1, j + 1, k + 1)] = u32::from(occ)
                    + s[at(i, j + 1, k + 1)]
                    + s[at(i + 1, j, k + 1)]
                    + s[at(i + 1, j + 1, k)]
                    + s[at(i, j, k)]
                    - s[at(i, j, k + 1)]
                    - s[at(i, j + 1, k)]
                    - s[at(i + 1, j, k)];
            }
        }
    }
    let mut out = vec![0.0; l.len()];
    for k in 0..nz {
        let (k0, k1) = (k.saturating_sub(w), (k + w + 1).min(nz));
        for j in 0..ny {
            let (j0, j1) = (j.saturating_sub(w), (j + w + 1).min(ny));
            for i in 0..nx {
                let (i0, i1) = (i.saturating_sub(w), (i + w + 1).min(nx));
                let count = (s[at(i1, j1, k1)] + s[at(i0, j0, k1)] + s[at(i0, j1, k0)] + s[at(i1, j0, k0)])
                    - (s[at(i0, j1, k1)] + s[at(i1, j0, k1)] + s[at(i1, j1, k0)] + s[at(i0, j0, k0)]);
                let cells = (i1 - i0) * (j1 - j0) * (k1 - k0);
                out[l.idx(i, j, k)] = f64::from(count) / cells as f64;
            }
        }
    }
    out
}

/// Hydraulic conductivity per voxel, m^2/(Pa s).
pub fn conductivity_field(
    regions: &Regions,
    matrix: &Matrix,
    mp: &crate::params::MatrixParams,
    fp: &FluidParams,
) -> Field {
    let mut k = Field::filled(
        "hydraulic_conductivity",
        "m2 Pa-1 s-1",
        "interstitial hydraulic conductivity K (Darcy permeability over viscosity)",
        regions.region.len(),
        0.0,
    );
    for (v, out) in k.data.iter_mut().enumerate() {
        *out = match fp.conductivity {
            ConductivityModel::Table => fp.region_conductivity[regions.region.data[v] as usize],
            ConductivityModel::Matrix => matrix_conductivity(
                matrix.collagen.data[v],
                matrix.gag.data[v],
                mp.collagen_fibre_radius,
                mp.gag_fibre_radius,
                fp.viscosity,
            ),
        };
    }
    k
}

/// The discrete Darcy-Starling problem: operator, boundary values and right-hand side.
#[derive(Debug, Clone)]
pub struct FluidSystem {
    pub stencil: Stencil7,
    pub boundary: Boundary,
    /// Right-hand side per voxel, m^3/s: `drive + LpL SL p_L` plus the boundary sources.
    pub rhs: Vec<f64>,
}

/// What one boundary face of the box does to the pressure.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum PressureWall {
    /// This pressure on the face, Pa.
    Fixed(f64),
    /// No flow through the face.
    ZeroFlux,
    /// The tissue of the boundary voxel continues outside and relaxes to its own equilibrium
    /// pressure (a Robin condition; zero flux where the voxel exchanges no fluid).
    HostEquilibrium,
}

impl PressureWall {
    /// The wall of every face for a scenario's `[fluid]` section.
    pub fn from_params(fp: &FluidParams) -> Self {
        match fp.boundary {
            FluidBoundary::Fixed => PressureWall::Fixed(fp.boundary_pressure),
            FluidBoundary::ZeroFlux => PressureWall::ZeroFlux,
            FluidBoundary::HostEquilibrium => PressureWall::HostEquilibrium,
        }
    }
}

/// Assembles `-div(K grad p) + (lp_s + LpL SL) p = drive + LpL SL p_L` on the lattice: voxel
/// equations in m^3/s, face transmissibilities `K h` (harmonic mean of the two voxels), each
/// boundary face of each boundary voxel by `boundary(face, voxel)`.
pub fn assemble(
    l: &Lattice,
    conductivity: &[f64],
    wall: &WallFluid,
    lymph: &Lymphatics,
    boundary: impl Fn(Face, [usize; 3]) -> PressureWall,
) -> FluidSystem {
    let n = l.len();
    let vol = l.voxel_volume();
    let mut c = vec![0.0; n];
    let mut rhs = vec![0.0; n];
    for v in 0..n {
        let ll = lymph.drainage.data[v] * vol;
        c[v] = wall.lp_s.data[v] + ll;
        rhs[v] = wall.drive.data[v] + ll * lymph.pressure;
    }
    let walls = |face: Face, ijk: [usize; 3]| -> Wall {
        match boundary(face, ijk) {
            PressureWall::Fixed(p) => Wall::Fixed(p),
            PressureWall::ZeroFlux => Wall::ZeroFlux,
            PressureWall::HostEquilibrium => {
                let v = l.idx(ijk[0], ijk[1], ijk[2]);
                if c[v] > 0.0 && conductivity[v] > 0.0 {
                    let a = c[v] / vol;
                    Wall::Exterior { value: rhs[v] / c[v], distance: (conductivity[v] / a).sqrt() }
                } else {
                    Wall::ZeroFlux
                }
            }
        }
    };
    let (stencil, bnd) = Stencil7::from_conductivity(l.n, l.h, conductivity, &c, walls);
    stencil.add_boundary_source(&bnd, &mut rhs);
    FluidSystem { stencil, boundary: bnd, rhs }
}

/// Darcy flux through every voxel face: volumetric flow, m^3/s, positive along `+axis`.
///
/// Face arrays per axis, x fastest, with the boundary faces: `x` has `(nx + 1) * ny * nz`
/// entries, face `(i, j, k)` on the lower side of voxel `(i, j, k)` at index
/// `i + (nx + 1) * (j + ny * k)` (`i = nx`: the upper boundary face); likewise `y` has
/// `nx * (ny + 1) * nz` entries at `i + nx * (j + (ny + 1) * k)` and `z` has `nx * ny * (nz + 1)`
/// at `i + nx * (j + ny * k)`. The flux density (Darcy velocity, m/s) is the flow over the face
/// area `h^2`; the interstitial fluid moves at the flux density over the porosity. The net
/// outflow of a voxel equals its vessel leakage minus its lymphatic drainage.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct DarcyFlux {
    /// Voxels along x, y, z.
    pub n: [usize; 3],
    /// Voxel edge, m (face area `h^2`).
    pub h: f64,
    /// Flow through the x-faces, m^3/s.
    pub x: Vec<f64>,
    /// Flow through the y-faces, m^3/s.
    pub y: Vec<f64>,
    /// Flow through the z-faces, m^3/s.
    pub z: Vec<f64>,
}

impl DarcyFlux {
    /// All faces at rest.
    pub fn zeros(n: [usize; 3], h: f64) -> Self {
        let len = |a: usize| {
            let mut m = n;
            m[a] += 1;
            m[0] * m[1] * m[2]
        };
        DarcyFlux { n, h, x: vec![0.0; len(0)], y: vec![0.0; len(1)], z: vec![0.0; len(2)] }
    }

    /// Index in the face array of `axis` of the face on the lower side of voxel `ijk`
    /// (`ijk[axis] == n[axis]`: the upper boundary face).
    #[inline]
    pub fn index(&self, axis: usize, ijk: [usize; 3]) -> usize {
        let mut m = self.n;
        m[axis] += 1;
        ijk[0] + m[0] * (ijk[1] + m[1] * ijk[2])
    }

    /// Face array of `axis`.
    pub fn axis(&self, axis: usize) -> &[f64] {
        match axis {
            0 => &self.x,
            1 => &self.y,
            _ => &self.z,
        }
    }

    /// Flow through a face, m^3/s.
    #[inline]
    pub fn flow(&self, axis: usize, ijk: [usize; 3]) -> f64 {
        self.axis(axis)[self.index(axis, ijk)]
    }

    /// Flux density (Darcy velocity) through a face, m/s.
    #[inline]
    pub fn density(&self, axis: usize, ijk: [usize; 3]) -> f64 {
        self.flow(axis, ijk) / (self.h * self.h)
    }

    /// Net flow out of voxel `ijk` through its six faces, m^3/s.
    pub fn net_outflow(&self, ijk: [usize; 3]) -> f64 {
        let mut s = 0.0;
        for a in 0..3 {
            let mut hi = ijk;
            hi[a] += 1;
            s += self.flow(a, hi) - self.flow(a, ijk);
        }
        s
    }
}

/// Fluid balance of the whole lattice, m^3/s.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct FluidBalance {
    /// Net flow out of the vessels, `sum (drive - lp_s p)`.
    pub vessel_leakage: f64,
    /// Flow into the lymphatics, `sum LpL SL (p - p_L)`.
    pub lymphatic_drainage: f64,
    /// Net flow out through the box faces.
    pub boundary_outflow: f64,
    /// `|leakage - drainage - outflow| / max(|leakage|, |drainage| + |outflow|)`.
    pub relative_error: f64,
}

/// The interstitial fluid state: pressure, derived fields, and the record of the last solve.
#[derive(Resource, Debug, Clone)]
pub struct InterstitialFluid {
    /// Interstitial fluid pressure, Pa.
    pub pressure: Field,
    /// Hydraulic conductivity used, m^2/(Pa s).
    pub conductivity: Field,
    /// Interstitial velocity (Darcy flux density over porosity, averaged from the two faces),
    /// m/s, along x, y, z.
    pub velocity: [Field; 3],
    /// The last solve.
    pub report: SolveReport,
    /// Solves so far.
    pub solves: u64,
    pub balance: FluidBalance,
}

/// The solver and what it last solved for (change ticks of its inputs).
#[derive(Resource)]
struct PressureSolver {
    system: FluidSystem,
    solver: Solver,
    /// Change ticks of [`WallFluid`], [`Matrix`] and [`Lymphatics`] at the last solve.
    seen: Option<[Tick; 3]>,
}

/// Change tick of [`Occupancy`] when the lymphatics were last built from it.
#[derive(Resource)]
struct LymphaticsSeenCells(Option<Tick>);

fn tick<T: Resource>(world: &World) -> Option<Tick> {
    world.get_resource_ref::<T>().map(|r| r.last_changed())
}

fn input_ticks(world: &World) -> Option<[Tick; 3]> {
    Some([tick::<WallFluid>(world)?, tick::<Matrix>(world)?, tick::<Lymphatics>(world)?])
}

pub(crate) fn solver_error(what: &str, e: SolveError, tolerance: f64) -> SimError {
    match e {
        SolveError::NotConverged { iterations, relative_residual } => {
            SimError::Solver { what: what.to_string(), iterations, residual: relative_residual, tolerance }
        }
        other => {
            SimError::Solver { what: format!("{what}: {other}"), iterations: 0, residual: f64::INFINITY, tolerance }
        }
    }
}

/// Adds the pressure process: the continuum [`WallFluid`] when no vessel process made one,
/// [`Lymphatics`], the first solve (when the vessel terms exist already), the snapshot fields and
/// series, and the system that solves again when an input changes.
pub fn install(world: &mut World, schedule: &mut Schedule, params: &Params) -> SimResult<()> {
    let lattice = world.resource::<Lattice>().clone();
    if world.get_resource::<WallFluid>().is_none() && params.vessel_model == VesselModel::Continuum {
        let wall =
            WallFluid::continuum(&lattice, world.resource::<Regions>(), &params.continuum_vessels, &params.starling);
        world.insert_resource(wall);
    }
    if world.get_resource::<Lymphatics>().is_none() {
        let lymph = Lymphatics::build(
            &lattice,
            world.resource::<Regions>(),
            &params.tumour,
            world.get_resource::<Occupancy>(),
            &params.lymphatics,
        );
        world.insert_resource(lymph);
    }
    let cells = tick::<Occupancy>(world);
    world.insert_resource(LymphaticsSeenCells(cells));
    world.insert_resource(params.fluid.clone());
    world.insert_resource(params.lymphatics.clone());
    if world.get_resource::<crate::params::MatrixParams>().is_none() {
        world.insert_resource(params.matrix.clone());
    }
    if world.get_resource::<TumourGeometry>().is_none() {
        world.insert_resource(params.tumour.clone());
    }
    let n = lattice.len();
    let v = |name: &'static str, desc: &'static str| Field::filled(name, "m s-1", desc, n, 0.0);
    world.insert_resource(InterstitialFluid {
        pressure: Field::filled("interstitial_pressure", "Pa", "interstitial fluid pressure", n, 0.0),
        conductivity: Field::filled(
            "hydraulic_conductivity",
            "m2 Pa-1 s-1",
            "interstitial hydraulic conductivity",
            n,
            0.0,
        ),
        velocity: [
            v("interstitial_velocity_x", "interstitial fluid velocity along x (Darcy flux over porosity)"),
            v("interstitial_velocity_y", "interstitial fluid velocity along y (Darcy flux over porosity)"),
            v("interstitial_velocity_z", "interstitial fluid velocity along z (Darcy flux over porosity)"),
        ],
        report: SolveReport::default(),
        solves: 0,
        balance: FluidBalance::default(),
    });
    world.insert_resource(DarcyFlux::zeros(lattice.n, lattice.h));
    world.insert_resource(FaceVelocity::zero(&lattice));
    world.insert_resource(crate::process::exchange::PressureSource(|w| {
        w.get_resource::<InterstitialFluid>().map(|f| (&f.pressure.data[..], f.solves))
    }));
    if world.get_resource::<WallFluid>().is_some() {
        solve_now(world)?;
    }
    output::add_part(world, pressure_part);
    output::add_series(world, pressure_series);
    schedule.add_systems(update_pressure.in_set(Phase::Pressure));
    Ok(())
}

/// Solves again when the wall coefficients, the matrix or the lymphatics changed since the last
/// solve (warm start from the last pressure).
pub fn update_pressure(world: &mut World) {
    // A cell-density collapse rule follows the cells.
    let cells = tick::<Occupancy>(world);
    let rebuild_lymph = world.resource::<LymphaticParams>().collapse == LymphaticCollapse::CellDensity
        && cells != world.resource::<LymphaticsSeenCells>().0;
    if rebuild_lymph {
        world.resource_mut::<LymphaticsSeenCells>().0 = cells;
        let lymph = Lymphatics::build(
            world.resource::<Lattice>(),
            world.resource::<Regions>(),
            world.resource::<TumourGeometry>(),
            world.get_resource::<Occupancy>(),
            world.resource::<LymphaticParams>(),
        );
        world.insert_resource(lymph);
    }
    let Some(now) = input_ticks(world) else {
        if world.get_resource::<WallFluid>().is_none() {
            let (time_s, step) = {
                let c = world.resource::<Clock>();
                (c.time, c.step)
            };
            world.resource_mut::<Faults>().0.push(SimError::Invariant {
                time_s,
                step,
                what: "interstitial pressure: no vessel wall coefficients (WallFluid) were provided".into(),
            });
        }
        return;
    };
    let seen = world.get_resource::<PressureSolver>().and_then(|s| s.seen);
    if seen == Some(now) {
        return;
    }
    if let Err(e) = solve_now(world) {
        world.resource_mut::<Faults>().0.push(e);
    }
}

/// Assembles and solves the pressure problem from the current inputs, and derives the flux,
/// velocity and balance.
pub fn solve_now(world: &mut World) -> SimResult<()> {
    let ticks = input_ticks(world);
    let fp = world.resource::<FluidParams>().clone();
    let (system, conductivity) = {
        let l = world.resource::<Lattice>();
        let k = conductivity_field(
            world.resource::<Regions>(),
            world.resource::<Matrix>(),
            world.resource::<crate::params::MatrixParams>(),
            &fp,
        );
        if let Some(v) = k.first_non_finite() {
            return Err(SimError::Invariant {
                time_s: world.resource::<Clock>().time,
                step: world.resource::<Clock>().step,
                what: format!(
                    "interstitial pressure: the hydraulic conductivity of voxel {:?} is not finite (a matrix \
                     without fibres offers no resistance)",
                    l.ijk(v)
                ),
            });
        }
        let wall = PressureWall::from_params(&fp);
        let sys = assemble(l, &k.data, world.resource::<WallFluid>(), world.resource::<Lymphatics>(), |_, _| wall);
        (sys, k)
    };
    let what = "interstitial pressure solve";
    let options = SolverOptions { tolerance: fp.tolerance, max_iterations: fp.max_iterations, sweeps: 2 };
    let mut state = match world.remove_resource::<PressureSolver>() {
        Some(mut s) => {
            s.solver.options = options;
            s.solver.update(&system.stencil).map_err(|e| solver_error(what, e, fp.tolerance))?;
            s.system = system;
            s
        }
        None => {
            let solver = Solver::new(&system.stencil, options).map_err(|e| solver_error(what, e, fp.tolerance))?;
            PressureSolver { system, solver, seen: None }
        }
    };
    let Some(mut fluid) = world.remove_resource::<InterstitialFluid>() else {
        return Err(SimError::Invariant {
            time_s: world.resource::<Clock>().time,
            step: world.resource::<Clock>().step,
            what: "interstitial pressure: solved before the pressure process was installed".into(),
        });
    };
    let result = state.solver.solve(&state.system.stencil, &state.system.rhs, &mut fluid.pressure.data);
    let report = match result {
        Ok(r) => r,
        Err(e) => {
            world.insert_resource(fluid);
            world.insert_resource(state);
            return Err(solver_error(what, e, fp.tolerance));
        }
    };
    fluid.report = report;
    fluid.solves += 1;
    fluid.conductivity.data = conductivity.data;
    {
        let l = world.resource::<Lattice>().clone();
        let mut flux = world.resource_mut::<DarcyFlux>();
        let sys = &state.system;
        let p = &fluid.pressure.data;
        sys.stencil.face_flux(&sys.boundary, p, 0, &mut flux.x);
        sys.stencil.face_flux(&sys.boundary, p, 1, &mut flux.y);
        sys.stencil.face_flux(&sys.boundary, p, 2, &mut flux.z);
        let flux = world.resource::<DarcyFlux>();
        let porosity = &world.resource::<Matrix>().porosity.data;
        let area = l.h * l.h;
        for a in 0..3 {
            let vel = &mut fluid.velocity[a].data;
            for v in 0..l.len() {
                let ijk = l.ijk(v);
                let mut hi = ijk;
                hi[a] += 1;
                vel[v] = 0.5 * (flux.flow(a, ijk) + flux.flow(a, hi)) / area / porosity[v];
            }
        }
        fluid.balance =
            balance(world.resource::<WallFluid>(), world.resource::<Lymphatics>(), l.voxel_volume(), &state.system, p);
        let mut fv = world.remove_resource::<FaceVelocity>().unwrap_or_else(|| FaceVelocity::zero(&l));
        face_velocity(&l, world.resource::<DarcyFlux>(), &world.resource::<Matrix>().porosity.data, &mut fv);
        world.insert_resource(fv);
        // Lymph flow per voxel for the particles it carries away (no flow back from lymphatics).
        let lymph = world.resource::<Lymphatics>();
        let vol = l.voxel_volume();
        let q: Vec<f64> =
            lymph.drainage.data.iter().zip(p).map(|(d, &pv)| d * vol * (pv - lymph.pressure).max(0.0)).collect();
        world.insert_resource(crate::process::binding::LymphFlow(q));
    }
    state.seen = ticks;
    world.insert_resource(fluid);
    world.insert_resource(state);
    Ok(())
}

/// Interstitial velocity on the voxel faces, m/s: the flux density over the face porosity (the
/// mean of the two voxels' porosities; the voxel's own on a boundary face).
pub fn face_velocity(l: &Lattice, flux: &DarcyFlux, porosity: &[f64], out: &mut FaceVelocity) {
    let area = l.h * l.h;
    for (a, arr) in [&mut out.x, &mut out.y, &mut out.z].into_iter().enumerate() {
        let mut m = l.n;
        m[a] += 1;
        for k in 0..m[2] {
            for j in 0..m[1] {
                for i in 0..m[0] {
                    let f = [i, j, k];
                    let c = f[a];
                    let mut lo = f;
                    let phi = if c == 0 {
                        porosity[l.idx(i, j, k)]
                    } else if c == l.n[a] {
                        lo[a] -= 1;
                        porosity[l.idx(lo[0], lo[1], lo[2])]
                    } else {
                        lo[a] -= 1;
                        0.5 * (porosity[l.idx(lo[0], lo[1], lo[2])] + porosity[l.idx(i, j, k)])
                    };
                    let idx = flux.index(a, f);
                    arr[idx] = flux.axis(a)[idx] / area / phi;
                }
            }
        }
    }
}

/// The fluid balance of pressure field `p` (sums in voxel order).
pub fn balance(wall: &WallFluid, lymph: &Lymphatics, voxel_volume: f64, sys: &FluidSystem, p: &[f64]) -> FluidBalance {
    let mut leak = 0.0;
    let mut drain = 0.0;
    for (v, &pv) in p.iter().enumerate() {
        leak += wall.leakage(v, pv);
        drain += lymph.drainage.data[v] * voxel_volume * (pv - lymph.pressure);
    }
    let out = sys.stencil.boundary_outflow(&sys.boundary, p);
    let scale = leak.abs().max(drain.abs() + out.abs());
    let relative_error = if scale > 0.0 { (leak - drain - out).abs() / scale } else { 0.0 };
    FluidBalance { vessel_leakage: leak, lymphatic_drainage: drain, boundary_outflow: out, relative_error }
}

fn pressure_part(world: &World, w: &mut SnapshotWriter<'_>) -> SimResult<()> {
    let f = world.resource::<InterstitialFluid>();
    w.field(FieldRef::F64(&f.pressure))?;
    for v in &f.velocity {
        w.field(FieldRef::F64(v))?;
    }
    w.field(FieldRef::F64(&f.conductivity))?;
    w.field(FieldRef::F64(&world.resource::<Lymphatics>().drainage))?;
    Ok(())
}

fn pressure_series(world: &World, out: &mut Vec<(&'static str, &'static str, f64)>) {
    let f = world.resource::<InterstitialFluid>();
    let b = f.balance;
    out.push(("fluid_vessel_leakage", "m3 s-1", b.vessel_leakage));
    out.push(("fluid_lymphatic_drainage", "m3 s-1", b.lymphatic_drainage));
    out.push(("fluid_boundary_outflow", "m3 s-1", b.boundary_outflow));
    out.push(("fluid_balance_relative_error", "1", b.relative_error));
    out.push(("pressure_solve_iterations", "1", f.report.iterations as f64));
    out.push(("pressure_solve_relative_residual", "1", f.report.relative_residual));
    let regions = world.resource::<Regions>();
    let (mut sum, mut count, mut max) = (0.0, 0usize, f64::NEG_INFINITY);
    for (v, &p) in f.pressure.data.iter().enumerate() {
        if regions.region.data[v] == TUMOUR {
            sum += p;
            count += 1;
        }
        max = max.max(p);
    }
    out.push(("tumour_mean_interstitial_pressure", "Pa", if count > 0 { sum / count as f64 } else { f64::NAN }));
    out.push(("max_interstitial_pressure", "Pa", max));
}

/// Bytes the pressure process holds for a lattice of `n` voxels, for the memory estimate of
/// `interstice check`: the fields and face fluxes, the assembled system and the solver.
pub fn memory_estimate(n: [usize; 3]) -> f64 {
    let cells = (n[0] * n[1] * n[2]) as f64;
    let padded = ((n[0] + 2) * (n[1] + 2) * (n[2] + 2)) as f64;
    // Fields: pressure, conductivity, 3 velocities, drainage, wall lp_s and drive, rhs.
    let fields = 9.0 * 8.0 * cells;
    let faces = 8.0 * (3.0 * cells + (n[0] * n[1] + n[1] * n[2] + n[0] * n[2]) as f64);
    // Operator (3 faces, diagonal) and solver (inverse diagonal, 5 CG vectors, fine residual),
    // padded; coarse levels add about a seventh.
    let solver = 8.0 * padded * (4.0 + 7.0) * (1.0 + 1.0 / 7.0);
    fields + faces + solver
}

#[cfg(test)]
mod tests;
