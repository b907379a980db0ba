//! Checkpoints: the whole dynamic state of a run at a snapshot, to resume it bit for bit.
//!
//! Random numbers are drawn from streams derived from (seed, process, id, step), so no generator
//! state needs saving: a run's future is a function of its scenario, its seed and the state below.
//! A checkpoint is written right after a snapshot into `<name>.ckpt.h5` beside the run file
//! (through a temporary file and a rename, so a killed run never leaves half a checkpoint). To
//! resume, the world is rebuilt from the scenario, the dynamic state is read back, and the run
//! file is cut back to the checkpoint's snapshot count.
//!
//! Saved: the clock; the packet table in its current order; every cell (kind, voxel, receptors,
//! loads, the time of its last kinetics update, whether it is active); matrix adsorption; the
//! ledger; the plasma pools with the bolus cohorts of measured curves (their dose schedules are a
//! function of the scenario, and what a step receives of them a function of the restored clock:
//! nothing of theirs needs saving); the carried fractions of packets at each wall site; the matrix
//! fields; the interstitial pressure and its solve count; the oxygen field with its cell states,
//! solve record, blood levels along the vessels and whether a solve was due. A process that adds dynamic state adds it here.

use std::path::{Path, PathBuf};

use bevy_ecs::prelude::*;
use hdf5::{File, Group, H5Type};

use crate::error::{SimError, SimResult};
use crate::particles::Packets;
use crate::process::accounting::Ledger;
use crate::process::binding::{ActiveCells, CellGains, CellSites, MatrixLoad};
use crate::process::exchange::WallExchange;
use crate::process::oxygen::{BloodBalance, Oxygen, OxygenReport};
use crate::process::plasma::PlasmaPools;
use crate::tissue::{Cell, CellKind, CellLoad, MAX_SPECIES, Matrix, Occupancy, Receptors};
use crate::world::Clock;

/// Format name in the checkpoint's root attribute `format`.
pub const FORMAT: &str = "interstice-checkpoint";
/// Layout version.
pub const VERSION: u32 = 1;

/// The checkpoint path of a run file.
pub fn path_for(run_file: &Path) -> PathBuf {
    run_file.with_extension("ckpt.h5")
}

/// A 64-bit fingerprint of the scenario text and the engine version: a checkpoint is only
/// resumed by the same scenario and engine.
pub fn fingerprint(scenario_text: &str) -> String {
    let mut h = crate::rng::mix64(0x1234_5678);
    for chunk in scenario_text.as_bytes().chunks(8).chain(crate::provenance::VERSION.as_bytes().chunks(8)) {
        let mut w = [0u8; 8];
        w[..chunk.len()].copy_from_slice(chunk);
        h = crate::rng::mix64(h ^ u64::from_le_bytes(w));
    }
    format!("{h:016x}")
}

fn put<T: H5Type + Copy>(g: &Group, name: &str, v: &[T]) -> hdf5::Result<()> {
    g.new_dataset::<T>().shape(v.len()).create(name)?.write_raw(v)
}

fn get<T: H5Type + Copy>(g: &Group, name: &str) -> hdf5::Result<Vec<T>> {
    g.dataset(name)?.read_raw::<T>()
}

fn attr<T: H5Type>(g: &hdf5::Location, name: &str, v: T) -> hdf5::Result<()> {
    g.new_attr::<T>().shape(()).create(name)?.write_scalar(&v)
}

fn read_attr<T: H5Type>(g: &hdf5::Location, name: &str) -> hdf5::Result<T> {
    g.attr(name)?.read_scalar()
}

/// Writes the checkpoint of `world` for the scenario with fingerprint `fp`.
pub fn write(world: &mut World, path: &Path, fp: &str) -> SimResult<()> {
    crate::process::binding::hand_over_gains(world);
    let tmp = path.with_extension("tmp");
    let err = |what: &str| SimError::hdf5(path, what.to_string());
    {
        let f = File::create(&tmp).map_err(err("cannot create the checkpoint"))?;
        save(world, &f, fp).map_err(err("cannot write the checkpoint"))?;
        f.close().map_err(err("cannot close the checkpoint"))?;
    }
    std::fs::rename(&tmp, path).map_err(SimError::io(path, "cannot put the checkpoint in place"))
}

fn save(world: &mut World, f: &File, fp: &str) -> hdf5::Result<()> {
    let root = f.as_group()?;
    crate::io::write_string_attr(&root, "format", FORMAT)?;
    attr(&root, "version", VERSION)?;
    crate::io::write_string_attr(&root, "fingerprint", fp)?;
    let c = world.resource::<Clock>().clone();
    let g = f.create_group("clock")?;
    attr(&g, "time", c.time)?;
    attr(&g, "dt", c.dt)?;
    attr(&g, "step", c.step)?;
    attr(&g, "next_snapshot", c.next_snapshot)?;
    attr(&g, "snapshots", c.snapshots)?;

    let p = world.resource::<Packets>();
    let g = f.create_group("packets")?;
    attr(&g, "next_id", p.next_id)?;
    put(&g, "id", &p.id)?;
    for a in 0..3 {
        let x: Vec<f64> = p.pos.iter().map(|q| q[a]).collect();
        put(&g, ["x", "y", "z"][a], &x)?;
    }
    put(&g, "voxel", &p.voxel)?;
    put(&g, "species", &p.species)?;
    put(&g, "weight", &p.weight)?;

    // Cells in voxel order.
    let active = world.resource::<ActiveCells>().cells.clone();
    let mut q = world.query::<(Entity, &Cell, &Receptors, &CellLoad)>();
    let mut rows: Vec<(Cell, Receptors, CellLoad, bool)> =
        q.iter(world).map(|(e, c, r, l)| (*c, *r, *l, active.contains(&e))).collect();
    rows.sort_by_key(|r| r.0.voxel);
    let g = f.create_group("cells")?;
    put(&g, "voxel", &rows.iter().map(|r| r.0.voxel).collect::<Vec<u32>>())?;
    put(&g, "kind", &rows.iter().map(|r| r.0.kind as u8).collect::<Vec<u8>>())?;
    put(&g, "total", &rows.iter().map(|r| r.1.total).collect::<Vec<f64>>())?;
    put(&g, "surface", &rows.iter().map(|r| r.1.surface).collect::<Vec<f64>>())?;
    put(&g, "free", &rows.iter().map(|r| r.1.free).collect::<Vec<f64>>())?;
    put(&g, "updated_at", &rows.iter().map(|r| r.2.updated_at).collect::<Vec<f64>>())?;
    put(&g, "active", &rows.iter().map(|r| u8::from(r.3)).collect::<Vec<u8>>())?;
    for s in 0..MAX_SPECIES {
        put(&g, &format!("bound_{s}"), &rows.iter().map(|r| r.2.bound[s]).collect::<Vec<u64>>())?;
        put(&g, &format!("internalised_{s}"), &rows.iter().map(|r| r.2.internalised[s]).collect::<Vec<u64>>())?;
        put(&g, &format!("held_{s}"), &rows.iter().map(|r| r.2.held[s]).collect::<Vec<u64>>())?;
    }

    let l = world.resource::<Ledger>();
    let g = f.create_group("ledger")?;
    put(&g, "injected", &l.injected)?;
    put(&g, "drained", &l.drained)?;
    put(&g, "left", &l.left)?;

    let m = world.resource::<MatrixLoad>();
    let g = f.create_group("matrix_load")?;
    for (s, (b, h)) in m.bound.iter().zip(&m.held).enumerate() {
        put(&g, &format!("bound_{s}"), b)?;
        put(&g, &format!("held_{s}"), h)?;
    }

    if let Some(pools) = world.get_resource::<PlasmaPools>() {
        let g = f.create_group("plasma")?;
        let col = |k: fn(&crate::vessels::pk::PlasmaPool) -> u64| pools.pools.iter().map(k).collect::<Vec<u64>>();
        put(&g, "dose", &col(|p| p.dose))?;
        put(&g, "amount", &col(|p| p.amount))?;
        put(&g, "peripheral", &col(|p| p.peripheral))?;
        put(&g, "cleared", &col(|p| p.cleared))?;
        put(&g, "cleared_renal", &col(|p| p.cleared_renal))?;
        put(&g, "to_tissue", &col(|p| p.to_tissue))?;
        put(&g, "from_tissue", &col(|p| p.from_tissue))?;
        // Cohorts of measured curves: pool index, bolus time, particles.
        let cohorts: Vec<(u64, crate::vessels::pk::Cohort)> =
            pools.pools.iter().enumerate().flat_map(|(s, p)| p.cohorts.iter().map(move |c| (s as u64, *c))).collect();
        put(&g, "cohort_pool", &cohorts.iter().map(|c| c.0).collect::<Vec<u64>>())?;
        put(&g, "cohort_start", &cohorts.iter().map(|c| c.1.start).collect::<Vec<f64>>())?;
        put(&g, "cohort_amount", &cohorts.iter().map(|c| c.1.amount).collect::<Vec<u64>>())?;
    }
    if let Some(ex) = world.get_resource::<WallExchange>() {
        let g = f.create_group("exchange")?;
        for (s, c) in ex.carry.iter().enumerate() {
            put(&g, &format!("carry_{s}"), c)?;
        }
    }
    let mx = world.resource::<Matrix>();
    let g = f.create_group("matrix")?;
    put(&g, "collagen", &mx.collagen.data)?;
    put(&g, "gag", &mx.gag.data)?;
    put(&g, "porosity", &mx.porosity.data)?;
    if let Some(fl) = world.get_resource::<crate::process::pressure::InterstitialFluid>() {
        let g = f.create_group("pressure")?;
        attr(&g, "solves", fl.solves)?;
        put(&g, "pressure", &fl.pressure.data)?;
    }
    if let Some(ox) = world.get_resource::<Oxygen>() {
        let g = f.create_group("oxygen")?;
        attr(&g, "solves", ox.solves)?;
        attr(&g, "current", u8::from(crate::process::oxygen::is_current(world)))?;
        attr(&g, "newton_iterations", ox.report.newton_iterations as u64)?;
        attr(&g, "linear_iterations", ox.report.linear_iterations as u64)?;
        attr(&g, "last_change", ox.report.last_change)?;
        attr(&g, "blood_iterations", ox.report.blood_iterations as u64)?;
        attr(&g, "blood_inflow", ox.balance.inflow)?;
        attr(&g, "blood_outflow", ox.balance.outflow)?;
        put(&g, "blood_pressure", &ox.blood_pressure)?;
        put(&g, "concentration", &ox.concentration.data)?;
        put(&g, "kinds", &ox.kinds.data)?;
        put(&g, "states", &ox.states.data)?;
    }
    Ok(())
}

fn kind_of(k: u8) -> CellKind {
    match k {
        0 => CellKind::Host,
        1 => CellKind::Cancer,
        2 => CellKind::Stromal,
        _ => CellKind::Phagocyte,
    }
}

/// Restores the dynamic state of a world built from the same scenario. Returns the number of
/// snapshots the checkpoint follows.
pub fn read(world: &mut World, path: &Path, fp: &str) -> SimResult<u64> {
    let bad = |what: String| SimError::Input { path: path.to_path_buf(), what };
    let f = File::open(path).map_err(SimError::hdf5(path, "cannot open the checkpoint"))?;
    let root = f.as_group().map_err(SimError::hdf5(path, "no root group"))?;
    let format = crate::io::read_string_attr(&root, "format").unwrap_or_default();
    if format != FORMAT {
        return Err(bad(format!("not an interstice checkpoint (format {format:?})")));
    }
    let theirs = crate::io::read_string_attr(&root, "fingerprint").unwrap_or_default();
    if theirs != fp {
        return Err(bad(format!(
            "written for another scenario or engine version (fingerprint {theirs}, this run {fp}): \
             start the run afresh or remove the checkpoint"
        )));
    }
    load(world, &f).map_err(SimError::hdf5(path, "cannot read the checkpoint"))
}

fn load(world: &mut World, f: &File) -> hdf5::Result<u64> {
    let g = f.group("clock")?;
    let snapshots: u64 = read_attr(&g, "snapshots")?;
    {
        let mut c = world.resource_mut::<Clock>();
        c.time = read_attr(&g, "time")?;
        c.dt = read_attr(&g, "dt")?;
        c.step = read_attr(&g, "step")?;
        c.next_snapshot = read_attr(&g, "next_snapshot")?;
        c.snapshots = snapshots;
    }

    let g = f.group("packets")?;
    let xs: [Vec<f64>; 3] = [get(&g, "x")?, get(&g, "y")?, get(&g, "z")?];
    let mut p = Packets::default();
    p.id = get(&g, "id")?;
    p.voxel = get(&g, "voxel")?;
    p.species = get(&g, "species")?;
    p.weight = get(&g, "weight")?;
    p.next_id = read_attr(&g, "next_id")?;
    p.pos = (0..p.id.len()).map(|i| [xs[0][i], xs[1][i], xs[2][i]]).collect();
    world.insert_resource(p);

    // Cells: replace every cell entity by the saved ones.
    let old: Vec<Entity> = world.query_filtered::<Entity, With<Cell>>().iter(world).collect();
    for e in old {
        world.despawn(e);
    }
    let g = f.group("cells")?;
    let voxel: Vec<u32> = get(&g, "voxel")?;
    let kind: Vec<u8> = get(&g, "kind")?;
    let total: Vec<f64> = get(&g, "total")?;
    let surface: Vec<f64> = get(&g, "surface")?;
    let free: Vec<f64> = get(&g, "free")?;
    let updated: Vec<f64> = get(&g, "updated_at")?;
    let act: Vec<u8> = get(&g, "active")?;
    let mut bound = Vec::new();
    let mut inside = Vec::new();
    let mut held = Vec::new();
    for s in 0..MAX_SPECIES {
        bound.push(get::<u64>(&g, &format!("bound_{s}"))?);
        inside.push(get::<u64>(&g, &format!("internalised_{s}"))?);
        held.push(get::<u64>(&g, &format!("held_{s}"))?);
    }
    let batch: Vec<_> = (0..voxel.len())
        .map(|i| {
            let mut load = CellLoad { updated_at: updated[i], ..CellLoad::default() };
            for s in 0..MAX_SPECIES {
                load.bound[s] = bound[s][i];
                load.internalised[s] = inside[s][i];
                load.held[s] = held[s][i];
            }
            (
                Cell { kind: kind_of(kind[i]), voxel: voxel[i] },
                Receptors { total: total[i], surface: surface[i], free: free[i] },
                load,
            )
        })
        .collect();
    let entities: Vec<Entity> = world.spawn_batch(batch).collect();
    let n = world.resource::<crate::lattice::Lattice>().len();
    let mut occ = vec![None; n];
    let mut active = ActiveCells::default();
    for (i, e) in entities.iter().enumerate() {
        occ[voxel[i] as usize] = Some(*e);
        if act[i] == 1 {
            active.insert(*e, voxel[i]);
        }
    }
    world.insert_resource(Occupancy { cell: occ });
    world.insert_resource(active);
    // The checkpoint was written with every gain handed over to its cell.
    let species = world.resource::<crate::particles::Designs>().len();
    world.insert_resource(CellGains::new(species, n));
    let mut sites = CellSites::new(n);
    let mut q = world.query::<(&Cell, &Receptors)>();
    sites.rebuild(q.iter(world));
    world.insert_resource(sites);

    let g = f.group("ledger")?;
    world.insert_resource(Ledger {
        injected: get(&g, "injected")?,
        drained: get(&g, "drained")?,
        left: get(&g, "left")?,
    });

    let g = f.group("matrix_load")?;
    let species = world.resource::<Ledger>().species();
    let mut m = MatrixLoad::default();
    for s in 0..species {
        m.bound.push(get(&g, &format!("bound_{s}"))?);
        m.held.push(get(&g, &format!("held_{s}"))?);
    }
    world.insert_resource(m);

    if let (Ok(g), Some(mut pools)) = (f.group("plasma"), world.get_resource_mut::<PlasmaPools>()) {
        let cols = ["dose", "amount", "peripheral", "cleared", "cleared_renal", "to_tissue", "from_tissue"];
        let v: Vec<Vec<u64>> = cols.iter().map(|c| get::<u64>(&g, c)).collect::<hdf5::Result<_>>()?;
        for (s, pool) in pools.pools.iter_mut().enumerate() {
            pool.dose = v[0][s];
            pool.amount = v[1][s];
            pool.peripheral = v[2][s];
            pool.cleared = v[3][s];
            pool.cleared_renal = v[4][s];
            pool.to_tissue = v[5][s];
            pool.from_tissue = v[6][s];
            pool.cohorts.clear();
        }
        let (which, start, amount): (Vec<u64>, Vec<f64>, Vec<u64>) =
            (get(&g, "cohort_pool")?, get(&g, "cohort_start")?, get(&g, "cohort_amount")?);
        for ((s, start), amount) in which.into_iter().zip(start).zip(amount) {
            if let Some(pool) = pools.pools.get_mut(s as usize) {
                pool.cohorts.push(crate::vessels::pk::Cohort { start, amount });
            }
        }
    }

    let g = f.group("matrix")?;
    let (collagen, gag, porosity) = (get(&g, "collagen")?, get(&g, "gag")?, get(&g, "porosity")?);
    let changed = {
        let mx = world.resource::<Matrix>();
        mx.collagen.data != collagen || mx.gag.data != gag || mx.porosity.data != porosity
    };
    if changed {
        let mut mx = world.resource_mut::<Matrix>();
        mx.collagen.data = collagen;
        mx.gag.data = gag;
        mx.porosity.data = porosity;
    }
    // Interventions in force at the restored time: network and motion coefficients.
    crate::process::interventions::catch_up(world);
    let revisions = (
        world.get_resource::<crate::vessels::network::Network>().map(|n| n.revision),
        world.get_resource::<crate::vessels::flow::BloodFlow>().map(|f| f.revision),
    );
    if let (Some(a), Some(b)) = revisions
        && a != b
    {
        crate::process::blood::update_blood(world);
    }
    // Pressure: a run that has re-solved since its start gets the saved field back; solving again
    // from it stops at once (it is already converged for the restored inputs) and re-derives the
    // flows from it.
    if let (Ok(g), true) =
        (f.group("pressure"), world.contains_resource::<crate::process::pressure::InterstitialFluid>())
    {
        let solves: u64 = read_attr(&g, "solves")?;
        let saved: Vec<f64> = get(&g, "pressure")?;
        let fresh = world.resource::<crate::process::pressure::InterstitialFluid>().solves;
        if solves != fresh || changed {
            world.resource_mut::<crate::process::pressure::InterstitialFluid>().pressure.data = saved;
            if let Err(e) = crate::process::pressure::solve_now(world) {
                return Err(hdf5::Error::from(format!("re-deriving the pressure: {e}").as_str()));
            }
            world.resource_mut::<crate::process::pressure::InterstitialFluid>().solves = solves;
        }
    }
    // Oxygen: the saved field, cell states and solve record, and whether a solve was due (the
    // restored cells and network would otherwise look changed and trigger one the uninterrupted
    // run never made, from a different starting field).
    if let (Ok(g), true) = (f.group("oxygen"), world.contains_resource::<Oxygen>()) {
        let current: u8 = read_attr(&g, "current")?;
        {
            let mut ox = world.resource_mut::<Oxygen>();
            ox.solves = read_attr(&g, "solves")?;
            ox.report = OxygenReport {
                newton_iterations: read_attr::<u64>(&g, "newton_iterations")? as usize,
                linear_iterations: read_attr::<u64>(&g, "linear_iterations")? as usize,
                last_change: read_attr(&g, "last_change")?,
                blood_iterations: read_attr::<u64>(&g, "blood_iterations")? as usize,
            };
            ox.balance =
                BloodBalance { inflow: read_attr(&g, "blood_inflow")?, outflow: read_attr(&g, "blood_outflow")? };
            ox.blood_pressure = get(&g, "blood_pressure")?;
            ox.concentration.data = get(&g, "concentration")?;
            ox.kinds.data = get(&g, "kinds")?;
            ox.states.data = get(&g, "states")?;
        }
        crate::process::oxygen::restored(world, current == 1);
    }
    // Wall exchange: coefficients re-derived from the restored pressure, then the carried fractions.
    if world.contains_resource::<WallExchange>() {
        crate::process::exchange::refresh_exchange(world);
        if let Ok(g) = f.group("exchange") {
            let mut ex = world.resource_mut::<WallExchange>();
            for s in 0..ex.carry.len() {
                ex.carry[s] = get(&g, &format!("carry_{s}"))?;
            }
        }
    }
    Ok(snapshots)
}
