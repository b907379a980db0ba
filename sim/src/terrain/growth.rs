//! Agent-based growth of the tumour before dosing (`[growth]`): days of simulated time in
//! steps of `time_step_h`, before the delivery phase starts at t = 0 from the grown terrain.
//!
//! During growth the cells live in contiguous per-voxel tables (kind, state, cycle age,
//! receptors: at most one cell per voxel); at the end they become the run's cell entities again,
//! in voxel order. One growth step:
//!
//! 1. Oxygen: the quasi-steady field of [`crate::process::oxygen`] for the current cells and
//!    vessels (warm start), then every cell's state: necrotic below the necrotic threshold (any
//!    kind; a dead cell stays where it is and consumes nothing), hypoxic (quiescent) below the
//!    hypoxic threshold, viable otherwise.
//! 2. Division: viable cancer cells age by the step; a cell whose age reaches the cycle time
//!    divides when a free voxel lies within `max_push_voxels` steps (6-neighbour paths): the
//!    daughter takes the neighbouring voxel on the shortest path to the nearest free voxel, and
//!    the cells along that path each move one voxel on (shoving). Dividing cells are taken in a
//!    random order (one key per voxel and step). Without room a cell waits (growth slows when
//!    space runs out); hypoxic cells do not age (growth slows when oxygen runs out). Ages start
//!    uniform in [0, T), so an unconstrained population doubles every cycle time `T`. A voxel
//!    that takes a cancer cell becomes tumour.
//! 3. Vessels: segments with an end or their midpoint in a necrotic voxel are removed (the
//!    continuum model loses its walls there). Hypoxic cells release an angiogenic signal that
//!    reaches `sprout_reach_um` (a distance rule of our own: the signal is present within that
//!    many micrometres of a hypoxic cell, and points down the distance to the nearest one);
//!    perfused segments within reach sprout at `sprout_rate_per_h` from their first node. Each
//!    tip grows `sprout_step_um` per step down the signal's distance gradient, laying immature,
//!    leaky tumour segments (radius `sprout_radius_um`, the largest tumour pore radius, maturity
//!    0.1); a tip within `anastomosis_distance_um` of a node of another vessel joins it, which
//!    lets blood through once the flow solve finds a pressure difference; a tip stops at
//!    `max_sprout_length_um`. Blood flow and the wall raster are recomputed after each change.
//!    With `angiogenic_signal = "diffusing"` the signal is instead a steady released factor that
//!    diffuses and decays ([`angiogenic_signal`]: `s - L^2 lap(s) = 1` in hypoxic voxels, 0
//!    elsewhere, `L = signal_decay_length_um`): segments sprout where it reaches
//!    `signal_sprout_threshold` and tips climb its gradient.
//! 4. Matrix: stromal cells deposit collagen in their voxel at `stromal_collagen_per_day`, up to
//!    `max_collagen_fraction`.
//!
//! Lymphatics collapse where the grown tumour is dense (the cell-density rule of
//! `[lymphatics]`, applied to the grown cells whatever rule the scenario names) and are absent
//! in necrotic voxels.
//!
//! Every random draw comes from `rng::stream(seed, Domain::Growth, id, step)` with the voxel or
//! segment as id; the steps run in a fixed order, so the grown tumour is bit-identical for any
//! thread count.
//!
//! Growth snapshots go to the run file's `/growth` group (see [`write_history`]): one group per
//! frame, `/growth/NNNNNN`, with attribute `time_s` (negative: seconds before dosing) and the
//! fields `cell_kind`, `cell_state`, `oxygen` (mol/m^3) and `region` as `[z][y][x]` datasets, and
//! `/growth/series/<name>` with one value per frame.

use bevy_ecs::prelude::*;

use crate::error::{SimError, SimResult};
use crate::lattice::Lattice;
use crate::params::Params;
use crate::process::oxygen::{self, HYPOXIC, NECROTIC, NO_CELL, OxygenInputs, OxygenParams, OxygenSolver, VIABLE};
use crate::rng::{Domain, mix64, stream, stream_key};
use crate::scenario::{AngiogenicSignal, Scenario, VesselModel};
use crate::solver::{Solver, SolverOptions, Stencil7, Wall};
use crate::tissue::{Cell, CellKind, CellLoad, Receptors, Regions, TUMOUR};
use crate::units::{DAY, HOUR, UM};
use crate::vessels::network::{Segment, VesselKind, dist};
use crate::vessels::{BloodFlow, FlowOptions, Network, NodeBc, VesselRaster};

const CANCER: u8 = 1 + CellKind::Cancer as u8;
const STROMAL: u8 = 1 + CellKind::Stromal as u8;
const TAG_AGE: u64 = 1 << 56;
const TAG_ORDER: u64 = 2 << 56;
const TAG_WALK: u64 = 3 << 56;
const TAG_SPROUT: u64 = 4 << 56;
const TAG_TIP: u64 = 5 << 56;
const FAR: u16 = u16::MAX;

/// Growth parameters in SI.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct GrowthParams {
    pub enabled: bool,
    /// Growth before dosing, s.
    pub duration: f64,
    /// Growth step, s.
    pub time_step: f64,
    /// Interval between growth snapshots, s.
    pub snapshot_interval: f64,
    /// Cell cycle time, s.
    pub cycle_time: f64,
    pub max_push: usize,
    /// Reach of the angiogenic signal, m.
    pub sprout_reach: f64,
    /// The signal's model; decay length (m) and sprouting threshold of a diffusing one.
    pub signal: AngiogenicSignal,
    pub signal_length: f64,
    pub signal_threshold: f64,
    /// Sprouting rate of a segment within reach, 1/s.
    pub sprout_rate: f64,
    /// Tip growth per step, m.
    pub sprout_step: f64,
    pub sprout_radius: f64,
    pub anastomosis: f64,
    pub max_sprout_length: f64,
    pub max_tips: usize,
    /// Collagen volume fraction deposited per stromal cell, 1/s.
    pub deposition: f64,
    pub max_collagen: f64,
}

impl GrowthParams {
    /// From a validated scenario.
    pub fn resolve(s: &Scenario) -> Self {
        let g = &s.growth;
        GrowthParams {
            enabled: g.enabled,
            duration: g.duration_d * DAY,
            time_step: g.time_step_h * HOUR,
            snapshot_interval: g.snapshot_interval_h * HOUR,
            cycle_time: g.cycle_time_h * HOUR,
            max_push: g.max_push_voxels as usize,
            sprout_reach: g.sprout_reach_um * UM,
            signal: g.angiogenic_signal,
            signal_length: g.signal_decay_length_um * UM,
            signal_threshold: g.signal_sprout_threshold,
            sprout_rate: g.sprout_rate_per_h / HOUR,
            sprout_step: g.sprout_step_um * UM,
            sprout_radius: g.sprout_radius_um * UM,
            anastomosis: g.anastomosis_distance_um * UM,
            max_sprout_length: g.max_sprout_length_um * UM,
            max_tips: g.max_tips as usize,
            deposition: g.stromal_collagen_per_day / DAY,
            max_collagen: g.max_collagen_fraction,
        }
    }
}

/// One growth snapshot.
#[derive(Debug, Clone)]
pub struct GrowthFrame {
    /// Time relative to dosing, s (negative).
    pub time: f64,
    pub kinds: Vec<u8>,
    pub states: Vec<u8>,
    pub oxygen: Vec<f64>,
    pub region: Vec<u8>,
    pub series: Vec<(&'static str, &'static str, f64)>,
}

/// The growth snapshots of the run, written into the run file when it is opened.
#[derive(Resource, Debug, Clone, Default)]
pub struct GrowthHistory(pub Vec<GrowthFrame>);

/// A growing sprout.
#[derive(Debug, Clone)]
struct Tip {
    node: u32,
    length: f64,
    /// Nodes of this sprout (its origin included), which it does not join.
    own: Vec<u32>,
}

/// The operator of the diffusing angiogenic signal and its solver, built once per lattice.
pub struct SignalSolver {
    stencil: Stencil7,
    solver: Solver,
    rhs: Vec<f64>,
}

/// The steady diffusing signal of the hypoxic voxels: `s - L^2 lap(s) = 1` in a hypoxic voxel and
/// `0` elsewhere, zero flux at the box faces (a released growth factor diffusing with `D` and
/// decaying at rate `k`, `L = sqrt(D / k)`, scaled so that a large hypoxic region sits at 1;
/// beside a hypoxic half-space it falls as `exp(-x / L) / 2`). Finite volumes on the shared
/// multigrid-preconditioned solver, warm-started from `out`.
pub fn angiogenic_signal(
    l: &Lattice,
    length: f64,
    hypoxic: impl Fn(usize) -> bool,
    state: &mut Option<SignalSolver>,
    out: &mut Vec<f64>,
) -> SimResult<()> {
    const TOLERANCE: f64 = 1e-8;
    let failed = |e| crate::process::pressure::solver_error("angiogenic signal", e, TOLERANCE);
    let n = l.len();
    out.resize(n, 0.0);
    let vol = l.voxel_volume();
    if state.is_none() {
        let k = vec![length * length; n];
        let (stencil, _) = Stencil7::from_conductivity(l.n, l.h, &k, &vec![vol; n], |_, _| Wall::ZeroFlux);
        let options = SolverOptions { tolerance: TOLERANCE, max_iterations: 500, sweeps: 2 };
        let solver = Solver::new(&stencil, options).map_err(failed)?;
        *state = Some(SignalSolver { stencil, solver, rhs: vec![0.0; n] });
    }
    let st = state.as_mut().expect("built above");
    let mut any = false;
    for (v, r) in st.rhs.iter_mut().enumerate() {
        *r = if hypoxic(v) { vol } else { 0.0 };
        any |= *r > 0.0;
    }
    if !any {
        out.iter_mut().for_each(|x| *x = 0.0);
        return Ok(());
    }
    st.solver.solve(&st.stencil, &st.rhs, out).map_err(failed)?;
    Ok(())
}

/// The cells and the vessels being grown.
pub struct Grower<'a> {
    l: Lattice,
    g: &'a GrowthParams,
    ox: &'a OxygenParams,
    seed: u64,
    /// Kind code per voxel (0 empty, `1 + CellKind`), state code, cycle age (s), receptors.
    pub kind: Vec<u8>,
    pub state: Vec<u8>,
    pub age: Vec<f64>,
    pub receptors: Vec<f64>,
    /// Collagen deposited by stromal cells, volume fraction.
    pub deposit: Vec<f64>,
    pub region: Vec<u8>,
    /// Oxygen, mol/m^3.
    pub oxygen: Vec<f64>,
    /// The network (network model) with its flow and raster.
    pub network: Option<(Network, BloodFlow, VesselRaster, FlowOptions)>,
    /// Continuum wall conductance per voxel (continuum model), m^3/s.
    continuum_wall: Vec<f64>,
    tips: Vec<Tip>,
    solver: Option<OxygenSolver>,
    /// Blood partial pressure per segment, Pa (oxygen carried along the vessels).
    blood_levels: Vec<f64>,
    /// A diffusing angiogenic signal (relative level) and its solver.
    pub signal: Vec<f64>,
    signal_solver: Option<SignalSolver>,
    inputs: OxygenInputs,
    dist: Vec<u16>,
    queue: std::collections::VecDeque<u32>,
    base_collagen: Vec<f64>,
    pub step: u64,
}

impl<'a> Grower<'a> {
    /// From per-voxel cell tables and the vessels.
    #[allow(clippy::too_many_arguments)]
    pub fn new(
        l: &Lattice,
        g: &'a GrowthParams,
        ox: &'a OxygenParams,
        seed: u64,
        kind: Vec<u8>,
        receptors: Vec<f64>,
        region: Vec<u8>,
        base_collagen: Vec<f64>,
        network: Option<(Network, FlowOptions)>,
        continuum_wall: Vec<f64>,
    ) -> SimResult<Self> {
        let n = l.len();
        let age =
            (0..n).map(|v| stream(seed, Domain::Growth, TAG_AGE | v as u64, 0).uniform() * g.cycle_time).collect();
        let state = kind.iter().map(|&k| if k == 0 { NO_CELL } else { VIABLE }).collect();
        let network = match network {
            Some((net, opt)) => {
                let flow = crate::vessels::flow::solve(&net, &opt)?;
                let raster = VesselRaster::build(&net, l);
                Some((net, flow, raster, opt))
            }
            None => None,
        };
        Ok(Grower {
            l: l.clone(),
            g,
            ox,
            seed,
            kind,
            state,
            age,
            receptors,
            deposit: vec![0.0; n],
            region,
            oxygen: vec![ox.blood; n],
            network,
            continuum_wall,
            tips: Vec::new(),
            solver: None,
            blood_levels: Vec::new(),
            signal: Vec::new(),
            signal_solver: None,
            inputs: OxygenInputs::default(),
            dist: vec![FAR; n],
            queue: std::collections::VecDeque::new(),
            base_collagen,
            step: 0,
        })
    }

    /// Number of cells of kind code `k` (all cells for `None`).
    pub fn count(&self, k: Option<u8>) -> usize {
        self.kind.iter().filter(|&&c| c != 0 && k.is_none_or(|k| c == k)).count()
    }

    /// Number of cells in state `s`.
    pub fn count_state(&self, s: u8) -> usize {
        self.state.iter().filter(|&&c| c == s).count()
    }

    /// Solves oxygen for the current cells and vessels and classifies the cells.
    pub fn oxygenate(&mut self) -> SimResult<()> {
        let n = self.l.len();
        self.inputs.diffusivity.clear();
        self.inputs.diffusivity.resize(n, self.ox.diffusivity);
        match &self.network {
            Some((_, flow, raster, _)) => {
                oxygen::network_wall(raster, flow, self.ox.permeability, n, &mut self.inputs.wall)
            }
            None => self.inputs.wall.clone_from(&self.continuum_wall),
        }
        for (w, &s) in self.inputs.wall.iter_mut().zip(&self.state) {
            if s == NECROTIC {
                *w = 0.0;
            }
        }
        oxygen::consumption(&self.kind, &self.state, self.ox, &mut self.inputs.vmax);
        match (&self.ox.along_vessels, &self.network) {
            (Some(law), Some((net, flow, raster, _))) => {
                let parts = (&mut self.solver, &mut self.inputs, &mut self.oxygen[..], &mut self.blood_levels);
                oxygen::solve_along(&self.l, self.ox, law, (net, flow, raster), parts.0, parts.1, parts.2, parts.3)?;
            }
            _ => {
                self.inputs.shortfall.clear();
                oxygen::solve(&self.l, &self.inputs, self.ox, &mut self.solver, &mut self.oxygen)?;
            }
        }
        oxygen::classify(&self.kind, &self.oxygen, self.ox, &mut self.state);
        Ok(())
    }

    /// Multi-source breadth-first distance (6-neighbour steps, capped at `cap`) from the voxels
    /// `source` accepts; `FAR` beyond the cap.
    fn distance_from(&mut self, cap: usize, source: impl Fn(usize) -> bool) {
        self.queue.clear();
        for (v, d) in self.dist.iter_mut().enumerate() {
            if source(v) {
                *d = 0;
                self.queue.push_back(v as u32);
            } else {
                *d = FAR;
            }
        }
        while let Some(v) = self.queue.pop_front() {
            let v = v as usize;
            let d = self.dist[v];
            if d as usize >= cap {
                continue;
            }
            for a in 0..3 {
                for up in [false, true] {
                    if let Some(w) = self.l.neighbour(v, a, up)
                        && self.dist[w] == FAR
                    {
                        self.dist[w] = d + 1;
                        self.queue.push_back(w as u32);
                    }
                }
            }
        }
    }

    /// Ages viable cancer cells and divides those that have completed their cycle.
    pub fn divide(&mut self, dt: f64) {
        let t = self.g.cycle_time;
        let mut ready: Vec<(u64, u32)> = Vec::new();
        for v in 0..self.kind.len() {
            if self.kind[v] == CANCER && self.state[v] == VIABLE {
                self.age[v] += dt;
                if self.age[v] >= t {
                    ready.push((
                        mix64(stream_key(self.seed, Domain::Growth, TAG_ORDER | v as u64, self.step)),
                        v as u32,
                    ));
                }
            }
        }
        if ready.is_empty() {
            return;
        }
        ready.sort_unstable();
        let kind = &self.kind;
        let cap = self.g.max_push;
        let free: Vec<bool> = kind.iter().map(|&k| k == 0).collect();
        self.distance_from(cap, |v| free[v]);
        let mut path: Vec<usize> = Vec::with_capacity(cap + 1);
        for &(_, v) in &ready {
            let v = v as usize;
            let d0 = self.dist[v];
            if d0 == FAR || d0 == 0 || self.kind[v] != CANCER {
                continue;
            }
            let mut r = stream(self.seed, Domain::Growth, TAG_WALK | v as u64, self.step);
            path.clear();
            path.push(v);
            let mut cur = v;
            let mut ok = true;
            while self.dist[cur] > 0 {
                let want = self.dist[cur] - 1;
                let mut cand = [0usize; 6];
                let mut nc = 0;
                for a in 0..3 {
                    for up in [false, true] {
                        if let Some(w) = self.l.neighbour(cur, a, up)
                            && self.dist[w] == want
                        {
                            cand[nc] = w;
                            nc += 1;
                        }
                    }
                }
                if nc == 0 {
                    ok = false;
                    break;
                }
                cur = cand[(r.uniform() * nc as f64) as usize % nc];
                path.push(cur);
            }
            if !ok || self.kind[cur] != 0 {
                continue;
            }
            // Shove: every cell on the path moves one voxel on; the daughter takes path[1].
            for i in (2..path.len()).rev() {
                let (from, to) = (path[i - 1], path[i]);
                self.move_cell(from, to);
            }
            let d = path[1];
            self.kind[d] = CANCER;
            self.state[d] = VIABLE;
            self.age[v] -= t;
            self.age[d] = self.age[v];
            self.receptors[d] = self.receptors[v];
            let end = *path.last().expect("path has its end");
            self.dist[end] = FAR;
            for &p in &path {
                if self.kind[p] == CANCER {
                    self.region[p] = TUMOUR;
                }
            }
        }
    }

    fn move_cell(&mut self, from: usize, to: usize) {
        self.kind[to] = self.kind[from];
        self.state[to] = self.state[from];
        self.age[to] = self.age[from];
        self.receptors[to] = self.receptors[from];
    }

    /// Removes vessels in necrotic voxels (the continuum walls there too).
    pub fn lose_vessels(&mut self) -> bool {
        let state = &self.state;
        for (w, &s) in self.continuum_wall.iter_mut().zip(state) {
            if s == NECROTIC {
                *w = 0.0;
            }
        }
        let Some((net, ..)) = &mut self.network else { return false };
        let l = &self.l;
        let necrotic = |x: [f64; 3]| l.voxel_of(x).is_some_and(|c| state[l.idx(c[0], c[1], c[2])] == NECROTIC);
        let before = net.segments.len();
        let nodes = &net.nodes;
        net.segments.retain(|s| {
            let (a, b) = (nodes[s.a as usize], nodes[s.b as usize]);
            let m = [0, 1, 2].map(|k| 0.5 * (a[k] + b[k]));
            !(necrotic(a) || necrotic(b) || necrotic(m))
        });
        let changed = net.segments.len() != before;
        if changed {
            let deg = net.degrees();
            self.tips.retain(|t| deg[t.node as usize] > 0 && !necrotic(net.nodes[t.node as usize]));
        }
        changed
    }

    /// Starts and extends sprouts toward hypoxic cells (network model only).
    pub fn angiogenesis(&mut self, dt: f64, np: &crate::params::NetworkParams) -> bool {
        if self.network.is_none() || self.g.sprout_reach <= 0.0 {
            return false;
        }
        let reach = (self.g.sprout_reach / self.l.h).ceil() as usize;
        let diffusing = self.g.signal == AngiogenicSignal::Diffusing;
        if diffusing {
            let state = &self.state;
            // A failed solve leaves the signal as it was (the growth goes on without new sprouts).
            let (l, length) = (&self.l, self.g.signal_length);
            let r = angiogenic_signal(l, length, |v| state[v] == HYPOXIC, &mut self.signal_solver, &mut self.signal);
            if r.is_err() {
                self.signal.iter_mut().for_each(|x| *x = 0.0);
            }
        } else {
            let state = std::mem::take(&mut self.state);
            self.distance_from(reach, |v| state[v] == HYPOXIC);
            self.state = state;
        }
        let (l, g, seed, step) = (self.l.clone(), self.g, self.seed, self.step);
        let dist = &self.dist;
        let signal = &self.signal;
        // Where the signal makes a segment sprout, and how strong it is at a voxel (larger
        // toward hypoxia).
        let signalled = |v: usize| if diffusing { signal[v] >= g.signal_threshold } else { dist[v] != FAR };
        let strength = |w: Option<usize>, here: usize| {
            if diffusing {
                signal[w.unwrap_or(here)]
            } else {
                -w.map_or(f64::from(dist[here]), |w| f64::from(dist[w].min(reach as u16 + 1)))
            }
        };
        let state = &self.state;
        let voxel = |x: [f64; 3]| l.voxel_of(x).map(|c| l.idx(c[0], c[1], c[2]));
        let Some((net, flow, ..)) = &mut self.network else { return false };
        let mut changed = false;
        // New sprouts from perfused segments within reach.
        let p = 1.0 - (-g.sprout_rate * dt).exp();
        for s in 0..net.segments.len() {
            if self.tips.len() >= g.max_tips {
                break;
            }
            if !flow.perfused.get(s).copied().unwrap_or(false) {
                continue;
            }
            let Some(v) = voxel(net.midpoint(s)) else { continue };
            if !signalled(v) || state[v] == NECROTIC {
                continue;
            }
            if stream(seed, Domain::Growth, TAG_SPROUT | s as u64, step).chance(p) {
                let node = net.segments[s].a;
                self.tips.push(Tip { node, length: 0.0, own: vec![node] });
            }
        }
        // Tips grow down the signal's distance.
        let mut done = vec![false; self.tips.len()];
        for (ti, tip) in self.tips.iter_mut().enumerate() {
            let x = net.nodes[tip.node as usize];
            let Some(v) = voxel(x) else {
                done[ti] = true;
                continue;
            };
            let mut r =
                stream(seed, Domain::Growth, TAG_TIP | ((tip.own[0] as u64) << 20) | tip.own.len() as u64, step);
            let mut dir = [0.0f64; 3];
            for (a, d) in dir.iter_mut().enumerate() {
                *d = strength(l.neighbour(v, a, true), v) - strength(l.neighbour(v, a, false), v);
            }
            let norm = dir.iter().map(|d| d * d).sum::<f64>().sqrt();
            for d in dir.iter_mut() {
                *d = if norm > 0.0 { *d / norm } else { 0.0 } + 0.5 * (2.0 * r.uniform() - 1.0);
            }
            let norm = dir.iter().map(|d| d * d).sum::<f64>().sqrt().max(1e-12);
            let e = l.extent();
            let y: [f64; 3] = [0, 1, 2]
                .map(|a| (x[a] + g.sprout_step * dir[a] / norm).clamp(l.origin[a] + 1e-9, l.origin[a] + e[a] - 1e-9));
            if dist_of(x, y) < 1e-9 {
                done[ti] = true;
                continue;
            }
            let seg = |a: u32, b: u32, length: f64| Segment {
                a,
                b,
                radius: g.sprout_radius,
                length,
                wall_thickness: np.wall_thickness[1],
                pore_radius: np.tumour_pore_max,
                pore_fraction: np.pore_fraction[1],
                maturity: 0.1,
                kind: VesselKind::Tumour,
            };
            let nn = net.add_node(y, NodeBc::None);
            let len = dist_of(x, y);
            net.segments.push(seg(tip.node, nn, len));
            tip.own.push(nn);
            tip.node = nn;
            tip.length += len;
            changed = true;
            // Anastomosis with the nearest node of another vessel.
            let mut best: Option<(f64, u32)> = None;
            let deg_ok = |i: usize| net.bc[i] == NodeBc::None;
            for (i, &z) in net.nodes.iter().enumerate() {
                let d = dist_of(z, y);
                if d <= g.anastomosis && !tip.own.contains(&(i as u32)) && deg_ok(i) && best.is_none_or(|b| d < b.0) {
                    best = Some((d, i as u32));
                }
            }
            if let Some((d, i)) = best {
                net.segments.push(seg(nn, i, d.max(1e-7)));
                done[ti] = true;
            } else if tip.length >= g.max_sprout_length {
                done[ti] = true;
            }
        }
        let mut k = 0;
        self.tips.retain(|_| {
            k += 1;
            !done[k - 1]
        });
        changed
    }

    /// Stromal cells deposit collagen.
    pub fn deposit_matrix(&mut self, dt: f64) {
        let add = self.g.deposition * dt;
        if add <= 0.0 {
            return;
        }
        for v in 0..self.kind.len() {
            if self.kind[v] == STROMAL && self.state[v] != NECROTIC {
                let room = (self.g.max_collagen - self.base_collagen[v] - self.deposit[v]).max(0.0);
                self.deposit[v] += add.min(room);
            }
        }
    }

    /// Recomputes blood flow and the wall raster after the network changed.
    pub fn reflow(&mut self) -> SimResult<()> {
        if let Some((net, flow, raster, opt)) = &mut self.network {
            net.touch();
            *flow = crate::vessels::flow::solve(net, opt)?;
            *raster = VesselRaster::build(net, &self.l);
        }
        Ok(())
    }

    /// One growth step of `dt` seconds (see the module documentation).
    pub fn advance(&mut self, dt: f64, np: &crate::params::NetworkParams) -> SimResult<()> {
        self.oxygenate()?;
        self.divide(dt);
        let lost = self.lose_vessels();
        let grew = self.angiogenesis(dt, np);
        if lost || grew {
            self.reflow()?;
        }
        self.deposit_matrix(dt);
        self.step += 1;
        Ok(())
    }

    /// The series values of a frame.
    pub fn series(&self) -> Vec<(&'static str, &'static str, f64)> {
        let tumour_cells =
            self.kind.iter().zip(&self.region).filter(|(k, r)| **k != 0 && **r == TUMOUR).count().max(1) as f64;
        let in_tumour = |s: u8| {
            self.state.iter().zip(&self.region).filter(|(x, r)| **x == s && **r == TUMOUR).count() as f64 / tumour_cells
        };
        let mut out = vec![
            ("cells", "1", self.count(None) as f64),
            ("cancer_cells", "1", self.count(Some(CANCER)) as f64),
            ("tumour_voxels", "1", self.region.iter().filter(|&&r| r == TUMOUR).count() as f64),
            ("tumour_hypoxic_fraction", "1", in_tumour(HYPOXIC)),
            ("tumour_necrotic_fraction", "1", in_tumour(NECROTIC)),
        ];
        if let Some((net, flow, ..)) = &self.network {
            out.push(("vessel_segments", "1", net.segments.len() as f64));
            out.push(("vessels_perfused_fraction", "1", flow.perfused_fraction()));
            out.push(("sprout_tips", "1", self.tips.len() as f64));
        }
        out
    }

    fn frame(&self, time: f64) -> GrowthFrame {
        GrowthFrame {
            time,
            kinds: self.kind.clone(),
            states: self.state.clone(),
            oxygen: self.oxygen.clone(),
            region: self.region.clone(),
            series: self.series(),
        }
    }
}

fn dist_of(a: [f64; 3], b: [f64; 3]) -> f64 {
    dist(a, b)
}

/// Grows the tumour of `world` (cells, regions, matrix, network) for the scenario's growth
/// duration and leaves the grown terrain in the world: cell entities, [`crate::tissue::Occupancy`],
/// [`Regions`], [`crate::tissue::Matrix`], the [`Network`] (network model), the
/// [`oxygen::Oxygen`] states, the lymphatics, and the [`GrowthHistory`].
pub fn grow(world: &mut World, params: &Params, keep_frames: bool) -> SimResult<()> {
    let l = world.resource::<Lattice>().clone();
    let n = l.len();
    let g = &params.growth;
    let ox = &params.oxygen;
    // Cells into tables; entities are respawned at the end.
    let mut kind = vec![0u8; n];
    let mut receptors = vec![0.0; n];
    let cells: Vec<(Entity, Cell, Receptors)> =
        world.query::<(Entity, &Cell, &Receptors)>().iter(world).map(|(e, c, r)| (e, *c, *r)).collect();
    for (e, c, r) in &cells {
        kind[c.voxel as usize] = 1 + c.kind as u8;
        receptors[c.voxel as usize] = r.total;
        world.despawn(*e);
    }
    let region = world.resource::<Regions>().region.data.clone();
    let base_collagen = world.resource::<crate::tissue::Matrix>().collagen.data.clone();
    let network = match params.vessel_model {
        VesselModel::Network => {
            let net = world.remove_resource::<Network>().ok_or_else(|| SimError::Invariant {
                time_s: 0.0,
                step: 0,
                what: "growth: the vessel network was not built".into(),
            })?;
            Some((net, crate::process::blood::flow_options(&params.network, &params.blood)))
        }
        VesselModel::Continuum => None,
    };
    let mut cw = Vec::new();
    if network.is_none() {
        let density = world.get_resource::<super::generator::TerrainFactors>().map(|f| f.vessel_density.data.clone());
        oxygen::continuum_wall(
            &l,
            world.resource::<Regions>(),
            &params.continuum_vessels,
            density.as_deref(),
            ox.permeability,
            &mut cw,
        );
    }
    let mut gr = Grower::new(&l, g, ox, params.run.seed, kind, receptors, region, base_collagen, network, cw)?;
    let mut history = GrowthHistory::default();
    let mut t = 0.0;
    let mut next_frame = 0.0;
    let eps = 1e-9 * g.duration;
    while t < g.duration - eps {
        if keep_frames && t >= next_frame - eps {
            gr.oxygenate()?;
            history.0.push(gr.frame(t - g.duration));
            next_frame += g.snapshot_interval;
        }
        let dt = g.time_step.min(g.duration - t);
        gr.advance(dt, &params.network)?;
        t += dt;
    }
    gr.oxygenate()?;
    if keep_frames {
        history.0.push(gr.frame(0.0));
    }
    finish(world, params, gr)?;
    world.insert_resource(history);
    Ok(())
}

/// Puts the grown terrain back into the world.
fn finish(world: &mut World, params: &Params, gr: Grower<'_>) -> SimResult<()> {
    let l = gr.l.clone();
    let n = l.len();
    let mut batch = Vec::new();
    for v in 0..n {
        let k = gr.kind[v];
        if k == 0 {
            continue;
        }
        let kind = match k - 1 {
            0 => CellKind::Host,
            1 => CellKind::Cancer,
            2 => CellKind::Stromal,
            _ => CellKind::Phagocyte,
        };
        let rec = if gr.state[v] == NECROTIC { 0.0 } else { gr.receptors[v] };
        batch.push((Cell { kind, voxel: v as u32 }, Receptors::new(rec), CellLoad::default()));
    }
    let mut occ = Vec::new();
    crate::tissue::spawn_cells(world, n, batch, &mut occ);
    let mut regions = world.resource::<Regions>().clone();
    regions.region.data.clone_from(&gr.region);
    let factors = world.resource::<super::generator::TerrainFactors>().clone();
    let mut matrix = super::generator::matrix(&regions, &params.matrix, &factors);
    for (c, d) in matrix.collagen.data.iter_mut().zip(&gr.deposit) {
        *c = (*c + d).min(0.5);
    }
    let mut ox = oxygen::Oxygen::new(n, params.oxygen.blood);
    ox.concentration.data.clone_from(&gr.oxygen);
    ox.kinds.data.clone_from(&gr.kind);
    ox.states.data.clone_from(&gr.state);
    let mut lp = params.lymphatics.clone();
    lp.collapse = crate::scenario::LymphaticCollapse::CellDensity;
    let mut lymph = crate::process::pressure::Lymphatics::build(
        &l,
        &regions,
        &params.tumour,
        world.get_resource::<crate::tissue::Occupancy>(),
        &lp,
    );
    for (d, &s) in lymph.drainage.data.iter_mut().zip(&gr.state) {
        if s == NECROTIC {
            *d = 0.0;
        }
    }
    if let Some((mut net, ..)) = gr.network {
        net.drop_unused_nodes();
        net.touch();
        world.insert_resource(net);
    }
    world.insert_resource(regions);
    world.insert_resource(matrix);
    world.insert_resource(ox);
    world.insert_resource(lymph);
    Ok(())
}

/// Writes the growth snapshots into the run file's `/growth` group (see the module
/// documentation); nothing when the run did not grow.
pub fn write_history(world: &World, file: &hdf5::File, lattice: &Lattice, compression: u8) -> SimResult<()> {
    let Some(h) = world.get_resource::<GrowthHistory>() else { return Ok(()) };
    if h.0.is_empty() {
        return Ok(());
    }
    let path = file.filename();
    let [nx, ny, nz] = lattice.n;
    let chunk = [nz.min(16), ny.min(64), nx.min(64)];
    (|| -> hdf5::Result<()> {
        let root = file.create_group("growth")?;
        crate::io::write_string_attr(&root, "description", "growth snapshots before dosing (time_s < 0)")?;
        for (i, f) in h.0.iter().enumerate() {
            let g = root.create_group(&format!("{i:06}"))?;
            g.new_attr::<f64>().create("time_s")?.write_scalar(&f.time)?;
            let u8s: [(&str, &str, &Vec<u8>); 3] = [
                ("cell_kind", "0 empty, 1 host, 2 cancer, 3 stromal, 4 phagocyte", &f.kinds),
                ("cell_state", "0 empty, 1 viable, 2 hypoxic, 3 necrotic", &f.states),
                ("region", "0 host tissue, 1 tumour", &f.region),
            ];
            for (name, desc, data) in u8s {
                let mut b = g.new_dataset::<u8>().shape([nz, ny, nx]).chunk(chunk);
                if compression > 0 {
                    b = b.deflate(compression);
                }
                let ds = b.create(name)?;
                ds.write_raw(data)?;
                crate::io::write_string_attr(&ds, "units", "1")?;
                crate::io::write_string_attr(&ds, "description", desc)?;
            }
            let mut b = g.new_dataset::<f64>().shape([nz, ny, nx]).chunk(chunk);
            if compression > 0 {
                b = b.shuffle().deflate(compression);
            }
            let ds = b.create("oxygen")?;
            ds.write_raw(&f.oxygen)?;
            crate::io::write_string_attr(&ds, "units", "mol m-3")?;
            crate::io::write_string_attr(&ds, "description", "dissolved oxygen concentration")?;
        }
        let sg = root.create_group("series")?;
        let times: Vec<f64> = h.0.iter().map(|f| f.time).collect();
        let ds = sg.new_dataset::<f64>().shape(times.len()).create("time_s")?;
        ds.write_raw(&times)?;
        crate::io::write_string_attr(&ds, "units", "s")?;
        for (k, (name, units, _)) in h.0[0].series.iter().enumerate() {
            let vals: Vec<f64> = h.0.iter().map(|f| f.series.get(k).map_or(f64::NAN, |s| s.2)).collect();
            let ds = sg.new_dataset::<f64>().shape(vals.len()).create(*name)?;
            ds.write_raw(&vals)?;
            crate::io::write_string_attr(&ds, "units", units)?;
        }
        Ok(())
    })()
    .map_err(SimError::hdf5(path, "cannot write the growth snapshots"))
}

#[cfg(test)]
mod tests;
