//! Scheduled interventions, in [`Phase::Interventions`]: each acts through the model's own
//! parameters, and the processes that depend on them re-solve (warm-started) in the next step.
//!
//! - **Matrix degradation** by an enzyme whose activity decays with half-life `t_1/2` from the
//!   start `t0` and stops at the end `t1`: first-order (Michaelis-Menten far below saturation)
//!   fibre loss `d phi/dt = -k a(t) phi`, `a(t) = exp(-(t - t0) ln 2 / t_1/2)`, integrates to
//!   `phi(t) = phi_0 exp(-k I(t))`, `I(t) = tau (1 - exp(-(min(t, t1) - t0) / tau))`,
//!   `tau = t_1/2 / ln 2` (Michaelis and Menten 1913; first-order enzyme inactivation). Diffusive
//!   hindrance (Ogston, Brinkman) and hydraulic conductivity (Jackson and James 1986) follow from
//!   the new fibre fractions: the motion coefficients are rebuilt here and the pressure re-solves.
//! - **Vessel normalisation**: pore radii above the normal value relax as
//!   `r(t) = r_n + (r_0 - r_n) exp(-(t - t0) / tau)`; wall conductivity follows from the pores
//!   (`Lp = eps r^2 / (8 mu L)`, pore theory) when `vessels.network.wall_conductivity = "pores"`;
//!   vessels less mature than a threshold close at the start ([`Network::closed`]: no flow, no
//!   exchange). Flow, the Starling sums, the pressure and the wall exchange are re-solved. The
//!   pruning of immature vessels and pore shrinkage follow the normalisation window described by
//!   Jain 2005 (Science 307:58). Continuum vessels (one uniform wall per region) get the same pore
//!   law voxel by voxel ([`ContinuumPores`]), their `Lp` following the pores at the walls' pore
//!   area fraction; they have no maturity, so nothing is pruned.
//! - **Mild hyperthermia**: a heating level `h(t)` = 1 during heating and
//!   `exp(-(t - t1) / tau_r)` after it; pores widen `r = r_0 (1 + (f_p - 1) h)` and lumen radii
//!   `R = R_0 (1 + (f_q^(1/4) - 1) h)`, so that Poiseuille flow (`Q ~ R^4`) rises by `f_q` at full
//!   heat for a fixed pressure drop. Continuum vessels get the pores (as for normalisation); they
//!   carry no modelled blood flow, so `f_q` does not act on them.
//! - **Tissue-penetrating peptide**: while it acts, the carrying design's wall permeability is
//!   multiplied by a factor (an active transcytosis route) and its diffusion coefficient by
//!   another in voxels whose cell carries receptors (the C-end rule route of Teesalu et al. 2009,
//!   PNAS 106:16157, reduced to these two factors).
//! - **Set**: from its start a scenario key takes a new value; the run continues exactly as a run
//!   restarted at that time with the new value would.
//!
//! Every effect is a closed-form function of the last update time, recomputed from the values at
//! the start of the run, so a run resumed from a checkpoint reproduces it.

use bevy_ecs::prelude::*;

use crate::error::SimError;
use crate::lattice::Lattice;
use crate::params::Params;
use crate::particles::Designs;
use crate::process::exchange::WallExchange;
use crate::process::output::ExtraSnapshots;
use crate::process::transport::{MotionFields, TransportParams};
use crate::scenario::MatrixFibre;
use crate::scenario::VesselModel;
use crate::tissue::{Matrix, Occupancy, Receptors, Regions, TUMOUR};
use crate::vascular::{ContinuumPores, WallFluid};
use crate::vessels::network::Network;
use crate::world::{Breakpoints, Clock, Faults, Phase};

/// Where an intervention acts.
#[derive(Debug, Clone, PartialEq)]
pub enum Place {
    All,
    Tumour,
    Host,
    /// Centre and radius, m.
    Sphere {
        centre: [f64; 3],
        radius: f64,
    },
}

/// What an intervention does (SI).
#[derive(Debug, Clone)]
pub enum Action {
    /// `rate`: 1/s at full activity; half-life and update interval, s.
    Degradation { fibre: MatrixFibre, rate: f64, enzyme_half_life: f64, update_interval: f64 },
    /// Normal pore radius (m), time constant (s), maturity threshold of closing, update interval (s).
    Normalisation { normal_pore_radius: f64, time_constant: f64, prune_maturity_below: f64, update_interval: f64 },
    /// Factors at full heat; time constant of the return and update interval, s.
    Heating { pore_factor: f64, flow_factor: f64, relax_time: f64, update_interval: f64 },
    /// Species index and its factors.
    Peptide { species: usize, wall_factor: f64, tissue_factor: f64 },
    /// A key, its new value as written, and every parameter in force from the start.
    Set { key: String, value: String, params: Box<Params> },
}

/// One scheduled intervention.
#[derive(Debug, Clone)]
pub struct Intervention {
    pub name: String,
    /// Start and end, s (no end: until the end of the run).
    pub start: f64,
    pub end: Option<f64>,
    pub place: Place,
    pub action: Action,
}

impl Intervention {
    /// The kind as the timeline writes it.
    pub fn kind(&self) -> &'static str {
        match self.action {
            Action::Degradation { .. } => "matrix_degradation",
            Action::Normalisation { .. } => "normalisation",
            Action::Heating { .. } => "heating",
            Action::Peptide { .. } => "peptide",
            Action::Set { .. } => "set",
        }
    }

    /// Times (s) at which its effect is brought up to date, increasing, up to `run_end`.
    pub fn update_times(&self, run_end: f64) -> Vec<f64> {
        let stop = self.end.unwrap_or(run_end).min(run_end);
        let grid = |from: f64, to: f64, dt: f64, out: &mut Vec<f64>| {
            let mut k = 0u64;
            loop {
                let t = from + k as f64 * dt;
                if t >= to * (1.0 - 1e-12) {
                    break;
                }
                out.push(t);
                k += 1;
            }
        };
        let mut out = Vec::new();
        match &self.action {
            Action::Degradation { update_interval, .. } | Action::Normalisation { update_interval, .. } => {
                grid(self.start, stop, *update_interval, &mut out);
                if stop < run_end {
                    out.push(stop);
                }
            }
            Action::Heating { relax_time, update_interval, .. } => {
                grid(self.start, stop, *update_interval, &mut out);
                if stop < run_end {
                    // The return: until the heat has fallen below 1e-3 of its level.
                    grid(stop, (stop + 7.0 * relax_time).min(run_end), *update_interval, &mut out);
                    let tail = stop + 7.0 * relax_time;
                    if tail < run_end {
                        out.push(tail);
                    }
                }
            }
            Action::Peptide { .. } => {
                out.push(self.start);
                if stop < run_end {
                    out.push(stop);
                }
            }
            Action::Set { .. } => out.push(self.start),
        }
        out.dedup();
        out
    }

    /// Its level when brought up to date at time `t` (s): for a degradation the log-reduction
    /// `k I(t)` of the fibre fraction; for a normalisation its progress `1 - exp(-(t - t0)/tau)`;
    /// for heating `h(t)`; for a peptide or a set 1 while in force. 0 before the start.
    pub fn level(&self, t: f64) -> f64 {
        if t < self.start {
            return 0.0;
        }
        let stop = self.end.unwrap_or(f64::INFINITY);
        let active = (t.min(stop) - self.start).max(0.0);
        match &self.action {
            &Action::Degradation { rate, enzyme_half_life, .. } => {
                let tau = enzyme_half_life / std::f64::consts::LN_2;
                rate * tau * -(-active / tau).exp_m1()
            }
            &Action::Normalisation { time_constant, .. } => -(-active / time_constant).exp_m1(),
            &Action::Heating { relax_time, .. } => {
                if t < stop {
                    1.0
                } else {
                    (-(t - stop) / relax_time).exp()
                }
            }
            Action::Peptide { .. } => {
                if t < stop {
                    1.0
                } else {
                    0.0
                }
            }
            Action::Set { .. } => 1.0,
        }
    }
}

/// The interventions of a run, the values they act on as they were at the start, and when each
/// was last brought up to date.
#[derive(Resource, Debug, Clone)]
pub struct Interventions {
    pub list: Vec<Intervention>,
    /// Update times of each, s.
    pub times: Vec<Vec<f64>>,
    /// Time of the update in force, per intervention (None: not started).
    pub applied: Vec<Option<f64>>,
    /// Voxels in each intervention's region.
    pub voxels: Vec<Vec<bool>>,
    /// Segments (by the voxel of their midpoint) in each intervention's region.
    pub segments: Vec<Vec<bool>>,
    base_collagen: Vec<f64>,
    base_gag: Vec<f64>,
    base_pore: Vec<f64>,
    base_radius: Vec<f64>,
    maturity: Vec<f64>,
    /// Continuum vessels: the pore radius per voxel and the Starling sums at the start (present
    /// when a normalisation or heating acts on continuum vessels).
    continuum: Option<(Vec<f64>, WallFluid)>,
    /// Names of the series (`intervention_<name>_level`), made once.
    series_names: Vec<&'static str>,
}

fn in_place(place: &Place, x: [f64; 3], region: u8) -> bool {
    match place {
        Place::All => true,
        Place::Tumour => region == TUMOUR,
        Place::Host => region != TUMOUR,
        Place::Sphere { centre, radius } => (0..3).map(|a| (x[a] - centre[a]).powi(2)).sum::<f64>() <= radius * radius,
    }
}

impl Interventions {
    /// The time of the last update at or before `t` of intervention `i`.
    fn due(&self, i: usize, t: f64) -> Option<f64> {
        let eps = 1e-9 * t.abs().max(1.0);
        let ts = &self.times[i];
        let k = ts.partition_point(|&x| x <= t + eps);
        if k == 0 { None } else { Some(ts[k - 1]) }
    }

    fn level_in_force(&self, i: usize) -> f64 {
        self.applied[i].map_or(0.0, |t| self.list[i].level(t))
    }
}

/// Adds the interventions of the scenario: their update times as breakpoints, the values they act
/// on as they are now, the step system and the timeline output.
pub fn install(world: &mut World, schedule: &mut Schedule, params: &Params) {
    if params.interventions.is_empty() {
        return;
    }
    let list = params.interventions.clone();
    let end = params.run.end_time;
    let times: Vec<Vec<f64>> = list.iter().map(|iv| iv.update_times(end)).collect();
    {
        let mut b = world.resource_mut::<Breakpoints>();
        for t in times.iter().flatten() {
            b.add(*t);
        }
    }
    // Snapshots at every start and end: the state before and after each change.
    let mut extra = world.remove_resource::<ExtraSnapshots>().unwrap_or_default();
    for iv in &list {
        for t in [Some(iv.start), iv.end].into_iter().flatten() {
            if t > 0.0 && t < end {
                extra.0.add(t);
            }
        }
    }
    world.insert_resource(extra);
    let l = world.resource::<Lattice>().clone();
    let regions = world.resource::<Regions>().region.data.clone();
    let voxels: Vec<Vec<bool>> = list
        .iter()
        .map(|iv| (0..l.len()).map(|v| in_place(&iv.place, l.centre(l.ijk(v)), regions[v])).collect())
        .collect();
    let (mut base_pore, mut base_radius, mut maturity, mut mids) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    if let Some(net) = world.get_resource::<Network>() {
        for (s, seg) in net.segments.iter().enumerate() {
            base_pore.push(seg.pore_radius);
            base_radius.push(seg.radius);
            maturity.push(seg.maturity);
            let (a, b) = net.ends(s);
            mids.push([(a[0] + b[0]) / 2.0, (a[1] + b[1]) / 2.0, (a[2] + b[2]) / 2.0]);
        }
    }
    let segments: Vec<Vec<bool>> = list
        .iter()
        .map(|iv| {
            mids.iter()
                .map(|&x| {
                    let region = l.voxel_of(x).map_or(0, |ijk| regions[l.idx(ijk[0], ijk[1], ijk[2])]);
                    in_place(&iv.place, x, region)
                })
                .collect()
        })
        .collect();
    // Continuum vessels: one uniform wall per region, its pores scaled per voxel.
    let acts_on_walls =
        list.iter().any(|iv| matches!(iv.action, Action::Normalisation { .. } | Action::Heating { .. }));
    let continuum = match world.get_resource::<WallFluid>() {
        Some(wall) if acts_on_walls && params.vessel_model == VesselModel::Continuum => {
            let pores = regions.iter().map(|&r| params.continuum_vessels.pore_radius[r as usize]).collect();
            Some((pores, wall.clone()))
        }
        _ => None,
    };
    if continuum.is_some() {
        world.insert_resource(ContinuumPores { factor: vec![1.0; l.len()], revision: 0 });
    }
    let m = world.resource::<Matrix>();
    let series_names =
        list.iter().map(|iv| &*Box::leak(format!("intervention_{}_level", iv.name).into_boxed_str())).collect();
    let n = list.len();
    world.insert_resource(Interventions {
        list,
        times,
        applied: vec![None; n],
        voxels,
        segments,
        base_collagen: m.collagen.data.clone(),
        base_gag: m.gag.data.clone(),
        base_pore,
        base_radius,
        maturity,
        continuum,
        series_names,
    });
    crate::process::output::add_series(world, series);
    crate::process::output::add_part(world, timeline_part);
    schedule.add_systems(step_interventions.in_set(Phase::Interventions));
    // What starts at t = 0 is in force from the first step.
    catch_up(world);
}

/// What an update changed.
#[derive(Default)]
struct Dirty {
    matrix: bool,
    network: bool,
    motion: bool,
    sets: Vec<usize>,
}

/// Brings every intervention up to the end of the step (the clock's time plus its step): what is
/// due by then is in force for the steps that follow.
pub fn step_interventions(world: &mut World) {
    let t = {
        let c = world.resource::<Clock>();
        c.time + c.dt
    };
    let dirty = advance(world, t);
    apply(world, dirty, true);
}

/// After a checkpoint is restored: puts the effects in force at the restored time back in place
/// (the matrix itself is restored from the checkpoint).
pub fn catch_up(world: &mut World) {
    if !world.contains_resource::<Interventions>() {
        return;
    }
    let t = world.resource::<Clock>().time;
    let dirty = advance(world, t);
    apply(world, dirty, false);
}

fn advance(world: &mut World, t: f64) -> Dirty {
    let mut ivs = world.resource_mut::<Interventions>();
    let mut d = Dirty::default();
    for i in 0..ivs.list.len() {
        let due = ivs.due(i, t);
        if due == ivs.applied[i] {
            continue;
        }
        ivs.applied[i] = due;
        match ivs.list[i].action {
            Action::Degradation { .. } => d.matrix = true,
            Action::Normalisation { .. } | Action::Heating { .. } => d.network = true,
            Action::Peptide { .. } => d.motion = true,
            Action::Set { .. } => d.sets.push(i),
        }
    }
    d
}

fn apply(world: &mut World, mut d: Dirty, write_matrix: bool) {
    for i in std::mem::take(&mut d.sets) {
        let p = match &world.resource::<Interventions>().list[i].action {
            Action::Set { params, .. } => params.clone(),
            _ => continue,
        };
        retune(world, &p);
        d.motion = true;
    }
    if d.matrix {
        if write_matrix {
            update_matrix(world);
        }
        d.motion = true;
    }
    if d.network {
        update_network(world);
    }
    if d.motion {
        rebuild_motion(world);
    }
}

/// Fibre fractions from their values at the start and every degradation in force.
fn update_matrix(world: &mut World) {
    let (collagen, gag) = {
        let ivs = world.resource::<Interventions>();
        let (mut c, mut g) = (ivs.base_collagen.clone(), ivs.base_gag.clone());
        for (i, iv) in ivs.list.iter().enumerate() {
            if let Action::Degradation { fibre, .. } = iv.action {
                let f = (-ivs.level_in_force(i)).exp();
                let target = if fibre == MatrixFibre::Collagen { &mut c } else { &mut g };
                for (v, x) in target.iter_mut().enumerate() {
                    if ivs.voxels[i][v] {
                        *x *= f;
                    }
                }
            }
        }
        (c, g)
    };
    let mut m = world.resource_mut::<Matrix>();
    m.collagen.data = collagen;
    m.gag.data = gag;
}

/// Segment pores and radii from their values at the start and every normalisation and heating in
/// force; the network's new revision makes the blood process re-solve.
fn update_network(world: &mut World) {
    let (pore, radius, closed) = {
        let ivs = world.resource::<Interventions>();
        let (mut pore, mut radius) = (ivs.base_pore.clone(), ivs.base_radius.clone());
        let mut closed = vec![false; pore.len()];
        for (i, iv) in ivs.list.iter().enumerate() {
            let Some(_) = ivs.applied[i] else { continue };
            let h = ivs.level_in_force(i);
            for s in 0..pore.len() {
                if !ivs.segments[i][s] {
                    continue;
                }
                match iv.action {
                    Action::Normalisation { normal_pore_radius, prune_maturity_below, .. } => {
                        if pore[s] > normal_pore_radius {
                            pore[s] = normal_pore_radius + (pore[s] - normal_pore_radius) * (1.0 - h);
                        }
                        if ivs.maturity[s] < prune_maturity_below {
                            closed[s] = true;
                        }
                    }
                    Action::Heating { pore_factor, flow_factor, .. } => {
                        pore[s] *= 1.0 + (pore_factor - 1.0) * h;
                        radius[s] *= 1.0 + (flow_factor.powf(0.25) - 1.0) * h;
                    }
                    _ => {}
                }
            }
        }
        (pore, radius, closed)
    };
    if let Some(mut net) = world.get_resource_mut::<Network>() {
        for (s, seg) in net.segments.iter_mut().enumerate() {
            seg.pore_radius = pore[s];
            seg.radius = radius[s];
        }
        net.closed = if closed.iter().any(|&c| c) { closed } else { Vec::new() };
        net.touch();
    }
    update_continuum_walls(world);
}

/// Continuum vessels: the pore factor of every voxel from the normalisations and heatings in
/// force (the same laws as for segments, per voxel of each one's region), and the Starling sums
/// that follow; the pressure re-solves on the new sums and the exchange on the new revision.
/// Continuum vessels have no lumen or maturity: heating's flow factor and pruning do not apply.
fn update_continuum_walls(world: &mut World) {
    let factor = {
        let ivs = world.resource::<Interventions>();
        let Some((base, _)) = &ivs.continuum else { return };
        let mut pore = base.clone();
        for (i, iv) in ivs.list.iter().enumerate() {
            let Some(_) = ivs.applied[i] else { continue };
            let h = ivs.level_in_force(i);
            for (v, r) in pore.iter_mut().enumerate() {
                if !ivs.voxels[i][v] {
                    continue;
                }
                match iv.action {
                    Action::Normalisation { normal_pore_radius, .. } if *r > normal_pore_radius => {
                        *r = normal_pore_radius + (*r - normal_pore_radius) * (1.0 - h);
                    }
                    Action::Heating { pore_factor, .. } => *r *= 1.0 + (pore_factor - 1.0) * h,
                    _ => {}
                }
            }
        }
        pore.iter().zip(base).map(|(r, r0)| r / r0).collect::<Vec<f64>>()
    };
    if world.resource::<ContinuumPores>().factor == factor {
        return;
    }
    let wall = world.resource::<Interventions>().continuum.as_ref().map(|(_, w)| w.with_pore_factors(&factor));
    let mut pores = world.resource_mut::<ContinuumPores>();
    pores.factor = factor;
    pores.revision += 1;
    if let Some(wall) = wall {
        world.insert_resource(wall);
    }
}

/// Motion coefficients from the matrix, with the tissue route of every peptide in force; the
/// wall exchange re-derives its coefficients in the next step.
pub fn rebuild_motion(world: &mut World) {
    let Some(tp) = world.get_resource::<TransportParams>().cloned() else { return };
    let designs = world.resource::<Designs>().clone();
    let mut fields = MotionFields::build(&tp, &designs, world.resource::<Matrix>());
    let mut route = vec![1.0; designs.len()];
    if let Some(ivs) = world.get_resource::<Interventions>() {
        let occ = world.resource::<Occupancy>();
        for (i, iv) in ivs.list.iter().enumerate() {
            let Action::Peptide { species, wall_factor, tissue_factor } = iv.action else { continue };
            if ivs.level_in_force(i) <= 0.0 || species >= designs.len() {
                continue;
            }
            route[species] *= wall_factor;
            for (v, cell) in occ.cell.iter().enumerate() {
                let expresses = cell.and_then(|e| world.get::<Receptors>(e)).is_some_and(|r| r.total > 0.0);
                if ivs.voxels[i][v] && expresses {
                    fields.ad[species][v] *= tissue_factor;
                }
            }
            let (ad, a) = (&fields.ad[species], &fields.a[species]);
            fields.d_max[species] =
                ad.iter().zip(a).map(|(g, a)| if *a > 0.0 { g / a } else { 0.0 }).fold(0.0, f64::max);
        }
    }
    let l = world.resource::<Lattice>().clone();
    let faces = world.resource::<TransportParams>().faces;
    fields.mark_uniform(&l, faces);
    world.insert_resource(fields);
    if let Some(mut ex) = world.get_resource_mut::<WallExchange>() {
        ex.route_factor = route;
        // An empty influx makes the exchange refresh its coefficients in its next step.
        ex.influx.clear();
    }
}

/// Puts a new parameter set in force: the particle designs, binding and uptake kinetics, plasma
/// elimination. (Only kinetic keys may change on a schedule; see [`crate::scenario::SETTABLE`].)
pub fn retune(world: &mut World, p: &Params) {
    world.insert_resource(p.designs.clone());
    if world.contains_resource::<crate::process::binding::Kinetics>() {
        crate::process::binding::set_kinetics(world, &p.designs, &p.binding, p.run.time_step);
    }
    if let Some(mut bs) = world.get_resource_mut::<crate::process::blood::BloodSettings>() {
        bs.particles = p.particles.clone();
    }
    let plasma_volume = p.blood.plasma_volume();
    let mut errors = Vec::new();
    if let Some(mut pools) = world.get_resource_mut::<crate::process::plasma::PlasmaPools>() {
        for (s, pool) in pools.pools.iter_mut().enumerate() {
            match crate::vessels::pk::Elimination::of(&p.particles[s], plasma_volume) {
                Ok(e) => pool.elimination = e,
                Err(e) => errors.push(e),
            }
        }
    }
    if let Some(mut ex) = world.get_resource_mut::<crate::process::exchange::ExchangeParams>() {
        ex.0.designs = p.designs.clone();
        ex.0.particles = p.particles.clone();
        ex.0.binding = p.binding.clone();
    }
    let t = world.resource::<Clock>().time;
    let step = world.resource::<Clock>().step;
    let mut faults = world.resource_mut::<Faults>();
    for e in errors {
        faults.0.push(SimError::Invariant { time_s: t, step, what: format!("a scheduled change: {e}") });
    }
}

fn series(world: &World, out: &mut Vec<(&'static str, &'static str, f64)>) {
    let ivs = world.resource::<Interventions>();
    for (i, name) in ivs.series_names.iter().enumerate() {
        out.push((name, "1", ivs.level_in_force(i)));
    }
}

/// The timeline in every snapshot: each intervention's kind, start, end, the time of the update
/// in force and its level.
fn timeline_part(world: &World, w: &mut crate::io::SnapshotWriter<'_>) -> crate::error::SimResult<()> {
    use crate::io::{Column, ColumnData};
    let ivs = world.resource::<Interventions>();
    let n = ivs.list.len();
    let index: Vec<u32> = (0..n as u32).collect();
    let start: Vec<f64> = ivs.list.iter().map(|iv| iv.start).collect();
    let end: Vec<f64> = ivs.list.iter().map(|iv| iv.end.unwrap_or(f64::NAN)).collect();
    let applied: Vec<f64> = ivs.applied.iter().map(|a| a.unwrap_or(f64::NAN)).collect();
    let level: Vec<f64> = (0..n).map(|i| ivs.level_in_force(i)).collect();
    w.table(
        "interventions",
        &[
            Column {
                name: "index",
                units: "1",
                description: "intervention, in scenario order",
                data: ColumnData::U32(&index),
            },
            Column { name: "start", units: "s", description: "start", data: ColumnData::F64(&start) },
            Column {
                name: "end",
                units: "s",
                description: "end (NaN: the end of the run)",
                data: ColumnData::F64(&end),
            },
            Column {
                name: "updated",
                units: "s",
                description: "time of the update in force (NaN: not started)",
                data: ColumnData::F64(&applied),
            },
            Column {
                name: "level",
                units: "1",
                description: "degradation: ln-reduction k I(t) of the fibre fraction; normalisation: progress; \
                              heating: heat level; peptide, set: 1 in force",
                data: ColumnData::F64(&level),
            },
        ],
    )
}

/// The plan as text for the run file and the check command: one line per intervention.
pub fn describe(list: &[Intervention]) -> Vec<String> {
    list.iter()
        .enumerate()
        .map(|(i, iv)| {
            let end = iv.end.map_or("the end of the run".to_string(), |e| format!("{} h", e / 3600.0));
            let what = match &iv.action {
                Action::Set { key, value, .. } => format!(" {key} = {value}"),
                _ => String::new(),
            };
            format!("{i} {} {}: {} h to {end}, region {:?}{what}", iv.name, iv.kind(), iv.start / 3600.0, iv.place)
        })
        .collect()
}
