//! Quasi-steady oxygen, in [`Phase::Blood`] after the blood flow: diffusion with sources at
//! the walls of perfused vessels and Michaelis-Menten consumption by living cells,
//!
//! `-div(D grad c) + M(c) = (P S / V)(c_b - c)`, `M(c) = Vmax c / (c + Km)`
//!
//! (the Krogh 1919 tissue-cylinder model, J Physiol 52:409, generalised to a lattice with a
//! saturable consumption, as in Secomb et al. 2004, Ann Biomed Eng 32:1519; the consumption
//! term is that of Michaelis and Menten 1913, Biochem Z 49:333). Concentrations are in mol/m^3
//! inside (`c = alpha pO2` with the solubility `alpha`); scenario keys give partial pressures in
//! mmHg. Oxygen changes within seconds while the fields it feeds change over hours, so the
//! field is solved as a steady state whenever its inputs change.
//!
//! - Sources: in voxel `v`, `W(v) = sum_i P S_i(v)` over the perfused segments with wall area
//!   `S_i(v)` (the network model; unperfused segments supply nothing) or `P (S/V)_region V f(v)`
//!   with the vessel density factor `f` (the continuum model); zero in necrotic voxels. Blood is
//!   at `c_b` in every perfused segment (`blood_transport = "constant"`), or, on a network,
//!   carried by the flow from the inlets and giving up along the way what the walls pass
//!   (`"along-vessels"`: [`along`], solved together with the tissue by [`solve_along`]).
//! - Consumption: `Vmax` per voxel holding a living cell (host cells times
//!   `host_consumption_factor`); none in empty or necrotic voxels.
//! - Box faces: zero flux.
//!
//! The nonlinear system is solved by Newton's method: at iterate `c_k` the consumption is
//! replaced by its tangent `M(c_k) + M'(c_k)(c - c_k)`, `M' = Vmax Km / (c + Km)^2 >= 0`, which
//! adds the diagonal `V M'(c_k) + W` (positive) and the source `W c_b - V Vmax c_k^2 / (c_k +
//! Km)^2` to the 7-point operator of [`crate::solver`]. Each linear system is solved for the
//! deficit `u = c_b - c` (its right-hand side `V (M'(c_k) c_b + Vmax c_k^2 / (c_k + Km)^2)` holds
//! consumption only, so the relative residual is not swamped by the large wall terms) by the
//! multigrid-preconditioned conjugate gradients of the pressure process, warm-started from the
//! previous iterate; iterates are clamped at zero. Iteration stops when no voxel changes by
//! more than `newton_tolerance * c_b`.
//!
//! Cell states: below `necrotic_threshold` a cell is necrotic (and stays so), below
//! `hypoxic_threshold` hypoxic, otherwise viable. The expected diffusion distance of oxygen from
//! a vessel, `sqrt(2 D c_b / Vmax)` (zero-order consumption in a slab), is printed by `check`.

use bevy_ecs::change_detection::Tick;
use bevy_ecs::prelude::*;

use crate::error::{SimError, SimResult};
use crate::field::{Field, FieldRef};
use crate::io::SnapshotWriter;
use crate::io::{Column, ColumnData};
use crate::lattice::Lattice;
use crate::params::{ContinuumVesselParams, Params};
use crate::process::output;
use crate::process::pressure::solver_error;
use crate::scenario::BloodTransport;
use crate::scenario::Scenario;
use crate::solver::{Solver, SolverOptions, Stencil7, Wall};
use crate::tissue::{Cell, CellKind, Occupancy, Regions, TUMOUR};
use crate::units::{MMHG, UM};
use crate::vessels::VesselRaster;
use crate::vessels::flow::BloodFlow;
use crate::vessels::network::Network;

pub mod along;
use crate::world::{Faults, Phase};
pub use along::{BloodBalance, BloodOxygenLaw};
use along::{MarchOrder, SegmentVoxels, march};

/// Oxygen parameters in SI (concentrations mol/m^3).
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct OxygenParams {
    pub enabled: bool,
    /// Diffusivity, m^2/s.
    pub diffusivity: f64,
    /// Solubility, mol/(m^3 Pa).
    pub solubility: f64,
    /// Concentration in perfused blood, mol/m^3.
    pub blood: f64,
    /// Wall permeability, m/s.
    pub permeability: f64,
    /// Maximal consumption of a voxel full of living cells, mol/(m^3 s).
    pub vmax: f64,
    /// Michaelis constant, mol/m^3.
    pub km: f64,
    pub host_factor: f64,
    /// Hypoxic and necrotic thresholds, mol/m^3.
    pub hypoxic: f64,
    pub necrotic: f64,
    pub newton_tolerance: f64,
    pub newton_max_iterations: usize,
    pub solver_tolerance: f64,
    /// The blood's oxygen carried along the network ([`along`]); none: constant `blood`.
    pub along_vessels: Option<BloodOxygenLaw>,
}

impl OxygenParams {
    /// From a validated scenario (growth switches oxygen on).
    pub fn resolve(s: &Scenario) -> Self {
        let o = &s.oxygen;
        let alpha = o.solubility_mol_per_m3_mmHg / MMHG;
        let c = |mmhg: f64| alpha * mmhg * MMHG;
        OxygenParams {
            enabled: o.enabled || s.growth.enabled,
            diffusivity: o.diffusivity_m2_per_s,
            solubility: alpha,
            blood: c(o.blood_pO2_mmHg),
            permeability: o.wall_permeability_um_per_s * UM,
            vmax: c(o.max_consumption_mmHg_per_s),
            km: c(o.half_saturation_mmHg),
            host_factor: o.host_consumption_factor,
            hypoxic: c(o.hypoxic_threshold_mmHg),
            necrotic: c(o.necrotic_threshold_mmHg),
            newton_tolerance: o.newton_tolerance,
            newton_max_iterations: o.newton_max_iterations as usize,
            solver_tolerance: o.solver_tolerance,
            along_vessels: (o.blood_transport == BloodTransport::AlongVessels).then_some(BloodOxygenLaw {
                solubility: alpha,
                capacity: o.hemoglobin_capacity_mol_per_m3,
                p50: o.hill_p50_mmHg * MMHG,
                hill: o.hill_exponent,
                inlet: o.inlet_pO2_mmHg * MMHG,
            }),
        }
    }

    /// Expected diffusion distance `sqrt(2 D c_b / Vmax)`, m (infinite without consumption).
    pub fn diffusion_distance(&self) -> f64 {
        if self.vmax > 0.0 { (2.0 * self.diffusivity * self.blood / self.vmax).sqrt() } else { f64::INFINITY }
    }
}

/// State code of an empty voxel in [`CellStates`].
pub const NO_CELL: u8 = 0;
/// State code of a viable cell.
pub const VIABLE: u8 = 1;
/// State code of a hypoxic (quiescent) cell.
pub const HYPOXIC: u8 = 2;
/// State code of a necrotic cell.
pub const NECROTIC: u8 = 3;

/// Per-voxel inputs of one oxygen solve.
#[derive(Debug, Clone, Default)]
pub struct OxygenInputs {
    /// Diffusivity per voxel, m^2/s.
    pub diffusivity: Vec<f64>,
    /// Wall conductance `P S` of the perfused vessels in the voxel, m^3/s.
    pub wall: Vec<f64>,
    /// Maximal consumption per voxel, mol/(m^3 s).
    pub vmax: Vec<f64>,
    /// Where the blood is below `c_b`: `sum_i P S_i(v) (c_b - c_i)` per voxel over the perfused
    /// segments at blood level `c_i`, mol/s (empty: every vessel at `c_b`).
    pub shortfall: Vec<f64>,
}

/// What one oxygen solve did.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct OxygenReport {
    pub newton_iterations: usize,
    pub linear_iterations: usize,
    /// Largest change of the last Newton iteration over `c_b`.
    pub last_change: f64,
    /// Rounds of blood march and tissue solve until the blood levels settled (along-vessels).
    pub blood_iterations: usize,
}

/// The operator and solver of the oxygen problem of one lattice size, allocated once.
pub struct OxygenSolver {
    stencil: Stencil7,
    solver: Solver,
    /// The diffusivity the stencil was built from.
    diffusivity: Vec<f64>,
    diag: Vec<f64>,
    rhs: Vec<f64>,
    next: Vec<f64>,
}

fn stencil_of(l: &Lattice, d: &[f64]) -> Stencil7 {
    let zeros = vec![0.0; l.len()];
    Stencil7::from_conductivity(l.n, l.h, d, &zeros, |_, _| Wall::ZeroFlux).0
}

/// Solves the oxygen field `c` (mol/m^3) for `inputs`, warm-started from `c` (see the module
/// documentation). `state` keeps the solver between calls.
pub fn solve(
    l: &Lattice,
    inputs: &OxygenInputs,
    p: &OxygenParams,
    state: &mut Option<OxygenSolver>,
    c: &mut [f64],
) -> SimResult<OxygenReport> {
    let n = l.len();
    let vol = l.voxel_volume();
    if inputs.wall.iter().all(|&w| w <= 0.0) {
        // No supply anywhere: no oxygen.
        c.iter_mut().for_each(|x| *x = 0.0);
        return Ok(OxygenReport::default());
    }
    if inputs.vmax.iter().all(|&m| m <= 0.0) {
        // Supply without consumption: blood level everywhere (zero-flux faces).
        c.iter_mut().for_each(|x| *x = p.blood);
        return Ok(OxygenReport::default());
    }
    let what = "oxygen solve";
    let options = SolverOptions { tolerance: p.solver_tolerance, max_iterations: 500, sweeps: 2 };
    let rebuild = state.as_ref().is_none_or(|s| s.diffusivity != inputs.diffusivity || s.stencil.dims() != l.n);
    if rebuild {
        let stencil = stencil_of(l, &inputs.diffusivity);
        let mut st = stencil.clone();
        let first: Vec<f64> = (0..n).map(|v| inputs.wall[v] + vol * inputs.vmax[v] / p.km.max(1e-30)).collect();
        st.set_diagonals(&first);
        let solver = Solver::new(&st, options).map_err(|e| solver_error(what, e, p.solver_tolerance))?;
        *state = Some(OxygenSolver {
            stencil,
            solver,
            diffusivity: inputs.diffusivity.clone(),
            diag: vec![0.0; n],
            rhs: vec![0.0; n],
            next: vec![0.0; n],
        });
    }
    let s = state.as_mut().expect("built above");
    s.solver.options = options;
    let mut report = OxygenReport::default();
    for it in 0..p.newton_max_iterations {
        for (v, &cv) in c.iter().enumerate() {
            let ck = cv.max(0.0);
            let den = ck + p.km;
            let slope = inputs.vmax[v] * p.km / (den * den);
            s.diag[v] = inputs.wall[v] + vol * slope;
            // For the deficit u = c_b - c (the diffusion of a constant vanishes with zero-flux faces).
            s.rhs[v] = vol * (slope * p.blood + inputs.vmax[v] * ck * ck / (den * den));
            if let Some(&short) = inputs.shortfall.get(v) {
                s.rhs[v] += short;
            }
            s.next[v] = p.blood - cv;
        }
        s.stencil.set_diagonals(&s.diag);
        s.solver.update(&s.stencil).map_err(|e| solver_error(what, e, p.solver_tolerance))?;
        let r =
            s.solver.solve(&s.stencil, &s.rhs, &mut s.next).map_err(|e| solver_error(what, e, p.solver_tolerance))?;
        report.linear_iterations += r.iterations;
        let mut change = 0.0f64;
        for (x, &u) in c.iter_mut().zip(&s.next) {
            let y = (p.blood - u).max(0.0);
            change = change.max((y - *x).abs());
            *x = y;
        }
        report.newton_iterations = it + 1;
        report.last_change = change / p.blood.max(1e-300);
        if report.last_change <= p.newton_tolerance {
            return Ok(report);
        }
    }
    Err(SimError::Solver {
        what: format!("{what}: Newton iteration"),
        iterations: report.newton_iterations,
        residual: report.last_change,
        tolerance: p.newton_tolerance,
    })
}

/// Kind code per voxel: 0 empty, `1 + CellKind` where a cell is.
pub fn kind_codes(world: &mut World) -> Vec<u8> {
    let n = world.resource::<Lattice>().len();
    let mut out = vec![0u8; n];
    let mut q = world.query::<&Cell>();
    for c in q.iter(world) {
        out[c.voxel as usize] = 1 + c.kind as u8;
    }
    out
}

/// Wall conductance `P S` per voxel, m^3/s, of the perfused network segments.
pub fn network_wall(raster: &VesselRaster, flow: &BloodFlow, permeability: f64, n: usize, out: &mut Vec<f64>) {
    out.clear();
    out.extend((0..n).map(|v| {
        raster.voxel(v).filter(|(s, _)| flow.perfused[*s as usize]).map(|(_, a)| a).sum::<f64>() * permeability
    }));
}

/// Wall conductance `P S` per voxel, m^3/s, of the continuum model (times the vessel density factor).
pub fn continuum_wall(
    l: &Lattice,
    regions: &Regions,
    c: &ContinuumVesselParams,
    density: Option<&[f64]>,
    permeability: f64,
    out: &mut Vec<f64>,
) {
    let vol = l.voxel_volume();
    out.clear();
    out.extend(regions.region.data.iter().enumerate().map(|(v, &r)| {
        let f = if r == TUMOUR { density.map_or(1.0, |d| d[v]) } else { 1.0 };
        permeability * c.surface_per_volume[r as usize] * vol * f
    }));
}

/// Maximal consumption per voxel from cell kind codes and states.
pub fn consumption(kinds: &[u8], states: &[u8], p: &OxygenParams, out: &mut Vec<f64>) {
    out.clear();
    out.extend(kinds.iter().zip(states).map(|(&k, &s)| {
        if k == 0 || s == NECROTIC {
            0.0
        } else if k == 1 + CellKind::Host as u8 {
            p.vmax * p.host_factor
        } else {
            p.vmax
        }
    }));
}

/// Classifies cells by oxygen; necrotic cells stay necrotic.
pub fn classify(kinds: &[u8], c: &[f64], p: &OxygenParams, states: &mut [u8]) {
    for ((s, &k), &x) in states.iter_mut().zip(kinds).zip(c) {
        *s = if k == 0 {
            NO_CELL
        } else if *s == NECROTIC || x < p.necrotic {
            NECROTIC
        } else if x < p.hypoxic {
            HYPOXIC
        } else {
            VIABLE
        };
    }
}

/// The oxygen field of the run and the cell states.
#[derive(Resource, Debug, Clone)]
pub struct Oxygen {
    /// Oxygen concentration, mol/m^3.
    pub concentration: Field,
    /// Cell kind per voxel: 0 empty, 1 host, 2 cancer, 3 stromal, 4 phagocyte.
    pub kinds: Field<u8>,
    /// Cell state per voxel: 0 empty, 1 viable, 2 hypoxic, 3 necrotic.
    pub states: Field<u8>,
    pub report: OxygenReport,
    pub solves: u64,
    /// Along-vessels: partial pressure of the blood in each segment, Pa (0 where unperfused),
    /// and the network's oxygen balance at the last solve.
    pub blood_pressure: Vec<f64>,
    pub balance: BloodBalance,
}

impl Oxygen {
    /// Empty fields of `n` voxels (concentration starting at `c0`).
    pub fn new(n: usize, c0: f64) -> Self {
        Oxygen {
            concentration: Field::filled("oxygen", "mol m-3", "dissolved oxygen concentration", n, c0),
            kinds: Field::filled("cell_kind", "1", "0 empty, 1 host, 2 cancer, 3 stromal, 4 phagocyte", n, 0),
            states: Field::filled("cell_state", "1", "0 empty, 1 viable, 2 hypoxic, 3 necrotic", n, 0),
            report: OxygenReport::default(),
            solves: 0,
            blood_pressure: Vec::new(),
            balance: BloodBalance::default(),
        }
    }

    /// Fractions of the tumour's cells that are hypoxic and necrotic.
    pub fn tumour_fractions(&self, regions: &Regions) -> (f64, f64) {
        let (mut cells, mut hyp, mut nec) = (0usize, 0usize, 0usize);
        for (&s, &r) in self.states.data.iter().zip(&regions.region.data) {
            if r == TUMOUR && s != NO_CELL {
                cells += 1;
                hyp += usize::from(s == HYPOXIC);
                nec += usize::from(s == NECROTIC);
            }
        }
        let n = cells.max(1) as f64;
        (hyp as f64 / n, nec as f64 / n)
    }
}

/// The solver between solves, and the inputs' change marks at the last one.
#[derive(Resource)]
struct OxygenState {
    solver: Option<OxygenSolver>,
    seen: Option<(u64, Tick)>,
    inputs: OxygenInputs,
}

/// Adds the oxygen process when the scenario asks for it (or grows the tumour): the first solve
/// now, again whenever the network or the cells change.
pub fn install(world: &mut World, schedule: &mut Schedule, params: &Params) -> SimResult<()> {
    if !params.oxygen.enabled {
        return Ok(());
    }
    let n = world.resource::<Lattice>().len();
    world.insert_resource(params.oxygen.clone());
    world.insert_resource(params.continuum_vessels.clone());
    if world.get_resource::<Oxygen>().is_none() {
        world.insert_resource(Oxygen::new(n, params.oxygen.blood));
    }
    world.insert_resource(OxygenState { solver: None, seen: None, inputs: OxygenInputs::default() });
    solve_now(world)?;
    output::add_part(world, oxygen_part);
    output::add_series(world, oxygen_series);
    schedule.add_systems(update_oxygen.in_set(Phase::Blood).after(crate::process::blood::update_blood));
    Ok(())
}

fn marks(world: &World) -> Option<(u64, Tick)> {
    let rev = world.get_resource::<BloodFlow>().map_or(0, |f| f.revision);
    Some((rev, world.get_resource_ref::<Occupancy>()?.last_changed()))
}

/// Whether the oxygen field is solved for the world's current network and cells (false while a
/// change waits for the next step's solve). A checkpoint keeps this.
pub fn is_current(world: &World) -> bool {
    world.get_resource::<OxygenState>().is_some_and(|st| st.seen == marks(world))
}

/// After a checkpoint restored the oxygen field into a rebuilt world: marks it solved for the
/// restored network and cells if it was `current` at the checkpoint, else leaves a solve due at
/// the next step, as in the uninterrupted run (which would solve from the same field).
pub fn restored(world: &mut World, current: bool) {
    let seen = if current { marks(world) } else { None };
    if let Some(mut st) = world.get_resource_mut::<OxygenState>() {
        st.seen = seen;
    }
}

/// Solves again when the network or the cells changed.
pub fn update_oxygen(world: &mut World) {
    if world.resource::<OxygenState>().seen == marks(world) {
        return;
    }
    if let Err(e) = solve_now(world) {
        world.resource_mut::<Faults>().0.push(e);
    }
}

/// Fills the solve inputs from the world: diffusivity, wall conductances, consumption.
fn gather_inputs(world: &mut World, kinds: &[u8], states: &[u8], inputs: &mut OxygenInputs) {
    let l = world.resource::<Lattice>().clone();
    let p = world.resource::<OxygenParams>().clone();
    let n = l.len();
    inputs.diffusivity.clear();
    inputs.diffusivity.resize(n, p.diffusivity);
    match (world.get_resource::<VesselRaster>(), world.get_resource::<BloodFlow>()) {
        (Some(r), Some(f)) => network_wall(r, f, p.permeability, n, &mut inputs.wall),
        _ => {
            let density = world.get_resource::<crate::terrain::generator::TerrainFactors>();
            continuum_wall(
                &l,
                world.resource::<Regions>(),
                world.resource::<ContinuumVesselParams>(),
                density.map(|d| &d.vessel_density.data[..]),
                p.permeability,
                &mut inputs.wall,
            );
        }
    }
    for (w, &s) in inputs.wall.iter_mut().zip(states) {
        if s == NECROTIC {
            *w = 0.0;
        }
    }
    consumption(kinds, states, &p, &mut inputs.vmax);
}

/// Solves the oxygen field from the current world and classifies the cells.
pub fn solve_now(world: &mut World) -> SimResult<()> {
    let kinds = kind_codes(world);
    let mut ox = world.remove_resource::<Oxygen>().expect("installed");
    let mut st = world.remove_resource::<OxygenState>().expect("installed");
    ox.kinds.data = kinds;
    gather_inputs(world, &ox.kinds.data, &ox.states.data, &mut st.inputs);
    let l = world.resource::<Lattice>().clone();
    let p = world.resource::<OxygenParams>().clone();
    st.inputs.shortfall.clear();
    let network =
        (world.get_resource::<Network>(), world.get_resource::<BloodFlow>(), world.get_resource::<VesselRaster>());
    let result = match (p.along_vessels, network) {
        (Some(law), (Some(net), Some(flow), Some(raster))) => {
            let (solver, inputs) = (&mut st.solver, &mut st.inputs);
            let (c, levels) = (&mut ox.concentration.data, &mut ox.blood_pressure);
            solve_along(&l, &p, &law, (net, flow, raster), solver, inputs, c, levels).map(|(r, b)| {
                ox.balance = b;
                r
            })
        }
        _ => solve(&l, &st.inputs, &p, &mut st.solver, &mut ox.concentration.data),
    };
    if let Ok(r) = &result {
        ox.report = *r;
        ox.solves += 1;
        classify(&ox.kinds.data, &ox.concentration.data, &p, &mut ox.states.data);
    }
    st.seen = marks(world);
    world.insert_resource(ox);
    world.insert_resource(st);
    result.map(|_| ())
}

/// Most rounds of blood march and tissue solve.
const BLOOD_ROUNDS: usize = 200;
/// Rounds the Anderson mixing remembers.
const ANDERSON_DEPTH: usize = 20;
/// The rounds stop when no segment's level changes by more than this times `newton_tolerance`
/// of the inlet's.
const BLOOD_TOLERANCE: f64 = 1e-2;

/// The tissue field and the blood levels of the network together (along-vessels): the blood is
/// marched through the network on the current tissue field ([`along::march`]) and the tissue
/// solved with the walls at the blood's levels, until no segment's partial pressure changes by
/// more than a hundredth of `newton_tolerance` of the inlet's. The first round has every vessel
/// at `c_b` (or the last solve's levels). Where walls pass oxygen easily the tissue beside a
/// vessel follows its blood closely and the plain alternation converges slowly (a few percent
/// per round), so the rounds are accelerated by Anderson mixing of the last
/// [`ANDERSON_DEPTH`] (Anderson 1965, J ACM 12:547; Walker and Ni 2011, SIAM J Numer Anal
/// 49:1715), clamped to partial pressures between 0 and the inlet's (or `c_b`'s, if higher).
/// The tissue solves inside run a hundred times tighter than the rounds' tolerance.
///
/// `inputs` holds the tissue's inputs with the walls of the perfused segments; `levels` the
/// blood's partial pressure per segment (Pa), read as the start when it fits the network and
/// left at the solution; `c` the tissue field (mol/m^3), warm start and solution.
#[allow(clippy::too_many_arguments)]
pub fn solve_along(
    l: &Lattice,
    p: &OxygenParams,
    law: &BloodOxygenLaw,
    (net, flow, raster): (&Network, &BloodFlow, &VesselRaster),
    solver: &mut Option<OxygenSolver>,
    inputs: &mut OxygenInputs,
    c: &mut [f64],
    levels: &mut Vec<f64>,
) -> SimResult<(OxygenReport, BloodBalance)> {
    let ns = net.segments.len();
    let wall = &inputs.wall;
    let walls = SegmentVoxels::build(raster, ns, p.permeability, |v| wall[v] > 0.0);
    if levels.len() != ns {
        *levels = vec![p.blood / law.solubility; ns];
    }
    let order = MarchOrder::new(net, flow);
    let mut next = Vec::new();
    let mut mixing = Anderson::new(ANDERSON_DEPTH);
    let mut total = OxygenReport::default();
    let tolerance = BLOOD_TOLERANCE * p.newton_tolerance * law.inlet;
    // Tissue solves a hundred times tighter than the rounds' last change (and in the end than
    // their tolerance), so that their rounding does not stall the mixing while early rounds stay
    // cheap.
    let mut last = 1.0f64;
    let top = law.inlet.max(p.blood / law.solubility);
    for round in 1..=BLOOD_ROUNDS {
        let rel = 1e-2 * last.max(tolerance / law.inlet);
        let tight = OxygenParams {
            newton_tolerance: rel.min(p.newton_tolerance),
            solver_tolerance: (1e-1 * rel).clamp(1e-12, p.solver_tolerance),
            ..p.clone()
        };
        let shortfall = &mut inputs.shortfall;
        shortfall.clear();
        shortfall.resize(l.len(), 0.0);
        for (s, &ps) in levels.iter().enumerate() {
            if flow.perfused[s] {
                for (v, k) in walls.of(s) {
                    shortfall[v] += k * (p.blood - law.solubility * ps);
                }
            }
        }
        let r = solve(l, inputs, &tight, solver, c)?;
        total.newton_iterations += r.newton_iterations;
        total.linear_iterations += r.linear_iterations;
        total.last_change = r.last_change;
        let balance = march(net, flow, &order, &walls, c, law, &mut next);
        let change = levels.iter().zip(&next).map(|(a, b)| (a - b).abs()).fold(0.0, f64::max);
        last = change / law.inlet;
        total.blood_iterations = round;
        if change <= tolerance {
            return Ok((total, balance));
        }
        *levels = mixing.next(levels, &next);
        for x in levels.iter_mut() {
            *x = x.clamp(0.0, top);
        }
    }
    Err(SimError::Solver {
        what: "oxygen along the vessels: blood and tissue levels".into(),
        iterations: BLOOD_ROUNDS,
        residual: f64::NAN,
        tolerance,
    })
}

/// Anderson mixing of a fixed-point iteration `x -> G(x)` over the last `m` rounds (type II:
/// the combination of the last values of `G` whose residuals `G(x) - x` combine to the least
/// norm; Walker and Ni 2011).
struct Anderson {
    m: usize,
    x: Vec<Vec<f64>>,
    g: Vec<Vec<f64>>,
}

impl Anderson {
    fn new(m: usize) -> Self {
        Anderson { m, x: Vec::new(), g: Vec::new() }
    }

    /// The next iterate after `x` with `G(x) = g`.
    fn next(&mut self, x: &[f64], g: &[f64]) -> Vec<f64> {
        self.x.push(x.to_vec());
        self.g.push(g.to_vec());
        if self.x.len() > self.m + 1 {
            self.x.remove(0);
            self.g.remove(0);
        }
        let k = self.x.len();
        if k < 2 {
            return g.to_vec();
        }
        let f = |i: usize| -> Vec<f64> { self.g[i].iter().zip(&self.x[i]).map(|(g, x)| g - x).collect() };
        let fs: Vec<Vec<f64>> = (0..k).map(f).collect();
        let last = &fs[k - 1];
        // Differences of residuals and of values between consecutive rounds.
        let df: Vec<Vec<f64>> =
            (0..k - 1).map(|j| fs[j + 1].iter().zip(&fs[j]).map(|(a, b)| a - b).collect()).collect();
        let dg: Vec<Vec<f64>> =
            (0..k - 1).map(|j| self.g[j + 1].iter().zip(&self.g[j]).map(|(a, b)| a - b).collect()).collect();
        let n = k - 1;
        let dot = |a: &[f64], b: &[f64]| a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>();
        let mut a = vec![vec![0.0; n]; n];
        let mut rhs = vec![0.0; n];
        for i in 0..n {
            for j in 0..n {
                a[i][j] = dot(&df[i], &df[j]);
            }
            rhs[i] = dot(&df[i], last);
        }
        let trace: f64 = (0..n).map(|i| a[i][i]).sum();
        if trace <= 0.0 {
            return g.to_vec();
        }
        for (i, row) in a.iter_mut().enumerate() {
            row[i] += 1e-12 * trace;
        }
        let Some(gamma) = solve_small(a, rhs) else { return g.to_vec() };
        let mut out = g.to_vec();
        for (j, gj) in gamma.iter().enumerate() {
            for (o, d) in out.iter_mut().zip(&dg[j]) {
                *o -= gj * d;
            }
        }
        out
    }
}

/// Gaussian elimination with partial pivoting of a small dense system; none if singular.
fn solve_small(mut a: Vec<Vec<f64>>, mut b: Vec<f64>) -> Option<Vec<f64>> {
    let n = b.len();
    for c in 0..n {
        let p = (c..n).max_by(|&i, &j| a[i][c].abs().total_cmp(&a[j][c].abs()))?;
        if a[p][c] == 0.0 || !a[p][c].is_finite() {
            return None;
        }
        a.swap(c, p);
        b.swap(c, p);
        let (top, below) = a.split_at_mut(c + 1);
        let pivot = &top[c];
        for (r, row) in below.iter_mut().enumerate() {
            let f = row[c] / pivot[c];
            for (x, y) in row[c..].iter_mut().zip(&pivot[c..]) {
                *x -= f * y;
            }
            b[c + 1 + r] -= f * b[c];
        }
    }
    let mut x = vec![0.0; n];
    for r in (0..n).rev() {
        let s: f64 = (r + 1..n).map(|k| a[r][k] * x[k]).sum();
        x[r] = (b[r] - s) / a[r][r];
    }
    Some(x)
}

fn oxygen_part(world: &World, w: &mut SnapshotWriter<'_>) -> SimResult<()> {
    let ox = world.resource::<Oxygen>();
    w.field(FieldRef::F64(&ox.concentration))?;
    w.field(FieldRef::U8(&ox.kinds))?;
    w.field(FieldRef::U8(&ox.states))?;
    if let Some(law) = world.resource::<OxygenParams>().along_vessels
        && !ox.blood_pressure.is_empty()
    {
        let sat: Vec<f64> = ox.blood_pressure.iter().map(|&p| law.saturation(p)).collect();
        w.table(
            "vessel_oxygen",
            &[
                Column {
                    name: "blood_pO2",
                    units: "Pa",
                    description: "oxygen partial pressure of the blood in the segment (0 unperfused); rows as in vessels",
                    data: ColumnData::F64(&ox.blood_pressure),
                },
                Column {
                    name: "saturation",
                    units: "1",
                    description: "haemoglobin saturation of that blood (Hill)",
                    data: ColumnData::F64(&sat),
                },
            ],
        )?;
    }
    Ok(())
}

fn oxygen_series(world: &World, out: &mut Vec<(&'static str, &'static str, f64)>) {
    let ox = world.resource::<Oxygen>();
    let (h, n) = ox.tumour_fractions(world.resource::<Regions>());
    out.push(("tumour_hypoxic_fraction", "1", h));
    out.push(("tumour_necrotic_fraction", "1", n));
    out.push(("oxygen_newton_iterations", "1", ox.report.newton_iterations as f64));
    let p = world.resource::<OxygenParams>();
    if p.along_vessels.is_some() {
        out.push(("oxygen_blood_delivery", "mol s-1", ox.balance.delivered()));
        out.push(("oxygen_consumption", "mol s-1", consumption_rate(world.resource::<Lattice>(), p, ox)));
    }
}

/// Oxygen the living cells take up, `sum_v V M(c_v)`, mol/s.
pub fn consumption_rate(l: &Lattice, p: &OxygenParams, ox: &Oxygen) -> f64 {
    let mut vmax = Vec::new();
    consumption(&ox.kinds.data, &ox.states.data, p, &mut vmax);
    let vol = l.voxel_volume();
    vmax.iter().zip(&ox.concentration.data).map(|(m, &c)| vol * m * c.max(0.0) / (c.max(0.0) + p.km)).sum()
}

#[cfg(test)]
mod tests;
