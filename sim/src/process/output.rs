//! Output: snapshots of fields, tables and time series into the run file.

use std::time::{SystemTime, UNIX_EPOCH};

use bevy_ecs::prelude::*;

use crate::error::{SimError, SimResult};
use crate::field::FieldRef;
use crate::io::{Column, ColumnData, RunWriter, SnapshotWriter};
use crate::lattice::Lattice;
use crate::params::{OutputParams, Params};
use crate::provenance;
use crate::scenario::LoadedScenario;
use crate::tissue::{Cell, CellLoad, Matrix, Receptors, Regions};
use crate::world::{Clock, Faults, Phase, Seed, Simulation};

/// Writes part of a snapshot from the world.
pub type SnapshotPart = fn(&World, &mut SnapshotWriter<'_>) -> SimResult<()>;
/// Adds named scalar values to the time series.
pub type SeriesPart = fn(&World, &mut Vec<(&'static str, &'static str, f64)>);

/// What each process contributes to a snapshot.
#[derive(Resource, Default)]
pub struct OutputParts {
    pub snapshot: Vec<SnapshotPart>,
    pub series: Vec<SeriesPart>,
}

/// Snapshot times besides the regular ones, s: the start and end of every intervention, so the
/// run file holds the state just before and after each change.
#[derive(Resource, Debug, Clone, Default)]
pub struct ExtraSnapshots(pub crate::world::Breakpoints);

/// The time of the next snapshot after `time`: the next multiple of the interval or the next
/// extra snapshot time, whichever comes first, at most the end.
fn next_snapshot_time(world: &World, time: f64) -> f64 {
    let interval = world.resource::<crate::params::RunParams>().snapshot_interval;
    let end = world.resource::<Clock>().end;
    let eps = 1e-9 * time.abs().max(1.0);
    let regular = ((time + eps) / interval).floor() + 1.0;
    let extra = world.get_resource::<ExtraSnapshots>().and_then(|e| e.0.next_after(time));
    (regular * interval).min(end).min(extra.unwrap_or(f64::INFINITY))
}

/// The open run file.
#[derive(Resource, Default)]
pub struct OutputFile(pub Option<RunWriter>);

/// Adds the output process: terrain fields and the cell table, then the snapshot system.
pub fn install(world: &mut World, schedule: &mut Schedule, _params: &Params) {
    let mut parts = world.remove_resource::<OutputParts>().unwrap_or_default();
    parts.snapshot.insert(0, terrain_part);
    parts.series.insert(0, clock_series);
    world.insert_resource(parts);
    world.init_resource::<OutputFile>();
    schedule.add_systems(snapshot_when_due.in_set(Phase::Output));
}

/// Registers a snapshot part (for processes installed after output).
pub fn add_part(world: &mut World, part: SnapshotPart) {
    world.get_resource_or_insert_with(OutputParts::default).snapshot.push(part);
}

/// Registers a time-series part.
pub fn add_series(world: &mut World, part: SeriesPart) {
    world.get_resource_or_insert_with(OutputParts::default).series.push(part);
}

fn terrain_part(world: &World, w: &mut SnapshotWriter<'_>) -> SimResult<()> {
    let regions = world.resource::<Regions>();
    let m = world.resource::<Matrix>();
    w.field(FieldRef::U8(&regions.region))?;
    w.field(FieldRef::F64(&m.collagen))?;
    w.field(FieldRef::F64(&m.gag))?;
    w.field(FieldRef::F64(&m.porosity))?;
    if world.resource::<OutputParams>().cell_tables {
        write_cell_table(world, w)?;
    }
    Ok(())
}

fn write_cell_table(world: &World, w: &mut SnapshotWriter<'_>) -> SimResult<()> {
    let lattice = world.resource::<Lattice>();
    let mut rows: Vec<(Cell, Receptors, CellLoad)> = Vec::new();
    for e in world.iter_entities() {
        if let (Some(c), Some(r), Some(l)) = (e.get::<Cell>(), e.get::<Receptors>(), e.get::<CellLoad>()) {
            rows.push((*c, *r, *l));
        }
    }
    rows.sort_by_key(|r| r.0.voxel);
    let voxel: Vec<u32> = rows.iter().map(|r| r.0.voxel).collect();
    let kind: Vec<u8> = rows.iter().map(|r| r.0.kind as u8).collect();
    let pos: Vec<[f64; 3]> = rows.iter().map(|r| lattice.centre(lattice.ijk(r.0.voxel as usize))).collect();
    let x: Vec<f64> = pos.iter().map(|p| p[0]).collect();
    let y: Vec<f64> = pos.iter().map(|p| p[1]).collect();
    let z: Vec<f64> = pos.iter().map(|p| p[2]).collect();
    let total: Vec<f64> = rows.iter().map(|r| r.1.total).collect();
    let free: Vec<f64> = rows.iter().map(|r| r.1.free).collect();
    let mut cols = vec![
        Column {
            name: "voxel",
            units: "1",
            description: "linear voxel index (x fastest)",
            data: ColumnData::U32(&voxel),
        },
        Column {
            name: "kind",
            units: "1",
            description: "0 host, 1 cancer, 2 stromal, 3 phagocyte",
            data: ColumnData::U8(&kind),
        },
        Column { name: "x", units: "m", description: "cell position x", data: ColumnData::F64(&x) },
        Column { name: "y", units: "m", description: "cell position y", data: ColumnData::F64(&y) },
        Column { name: "z", units: "m", description: "cell position z", data: ColumnData::F64(&z) },
        Column {
            name: "receptors_total",
            units: "1",
            description: "receptors per cell",
            data: ColumnData::F64(&total),
        },
        Column {
            name: "receptors_free",
            units: "1",
            description: "unoccupied receptors",
            data: ColumnData::F64(&free),
        },
    ];
    let species = world.get_resource::<crate::world::SpeciesNames>().map(|s| s.0.clone()).unwrap_or_default();
    let loads: Vec<(String, String, Vec<u64>, Vec<u64>)> = species
        .iter()
        .enumerate()
        .map(|(s, name)| {
            (
                format!("bound_{name}"),
                format!("internalised_{name}"),
                rows.iter().map(|r| r.2.bound[s]).collect(),
                rows.iter().map(|r| r.2.internalised[s]).collect(),
            )
        })
        .collect();
    for (bn, inn, b, i) in &loads {
        cols.push(Column {
            name: bn,
            units: "particles",
            description: "particles bound to the cell",
            data: ColumnData::U64(b),
        });
        cols.push(Column {
            name: inn,
            units: "particles",
            description: "particles internalised by the cell",
            data: ColumnData::U64(i),
        });
    }
    w.table("cells", &cols)
}

fn clock_series(world: &World, out: &mut Vec<(&'static str, &'static str, f64)>) {
    let c = world.resource::<Clock>();
    out.push(("time_s", "s", c.time));
    out.push(("step", "1", c.step as f64));
}

/// Creates the run file of a simulation and records provenance. Returns its path.
pub fn open_run_file(
    sim: &mut Simulation,
    loaded: &LoadedScenario,
    opts: &crate::world::RunOptions,
    threads: usize,
) -> SimResult<std::path::PathBuf> {
    let path = opts.out_dir.join(format!("{}.h5", sim.params.run.name));
    let started = SystemTime::now().duration_since(UNIX_EPOCH).map(|d| d.as_secs_f64()).unwrap_or(0.0);
    let seed = sim.world.resource::<Seed>().0;
    let prov = vec![
        ("software", "interstice".to_string()),
        ("version", provenance::VERSION.to_string()),
        ("git_commit", provenance::GIT_COMMIT.to_string()),
        ("rustc", provenance::RUSTC.to_string()),
        ("build_profile", provenance::PROFILE.to_string()),
        ("threads", threads.to_string()),
        ("seed", seed.to_string()),
        ("started_unix_s", format!("{started:.3}")),
        ("scenario_file", loaded.file.display().to_string()),
        ("wall_time_s", "running".to_string()),
    ];
    let resolved = loaded.scenario.to_string();
    let lattice = sim.lattice().clone();
    let explicit = sim.params.output_explicit_mesh();
    let writer = RunWriter::create(
        &path,
        &lattice,
        &prov,
        &loaded.text,
        &resolved,
        sim.params.output.compression_level,
        explicit,
    )?;
    crate::terrain::growth::write_history(&sim.world, writer.file(), &lattice, sim.params.output.compression_level)?;
    writer.index_growth()?;
    sim.world.resource_mut::<OutputFile>().0 = Some(writer);
    Ok(path)
}

/// Reopens the run file of an interrupted run, cut back to its first `keep` snapshots.
pub fn reopen_run_file(sim: &mut Simulation, path: &std::path::Path, keep: u64) -> SimResult<std::path::PathBuf> {
    let lattice = sim.lattice().clone();
    let explicit = sim.params.output_explicit_mesh();
    let mut writer = RunWriter::reopen(path, &lattice, keep, sim.params.output.compression_level, explicit)?;
    let t = sim.world.resource::<Clock>().time;
    writer.set_provenance("resumed_at_s", &format!("{t}"))?;
    sim.world.resource_mut::<OutputFile>().0 = Some(writer);
    Ok(path.to_path_buf())
}

/// Writes one snapshot of the world now.
pub fn write_snapshot(world: &mut World) -> SimResult<()> {
    crate::process::binding::hand_over_gains(world);
    let mut file = world.resource_mut::<OutputFile>().0.take().ok_or_else(|| SimError::Invariant {
        time_s: 0.0,
        step: 0,
        what: "no run file is open".into(),
    })?;
    let result = (|| -> SimResult<()> {
        let (time, step) = {
            let c = world.resource::<Clock>();
            (c.time, c.step)
        };
        let parts = world.resource::<OutputParts>();
        let mut w = file.begin_snapshot(time, step)?;
        for part in &parts.snapshot {
            part(world, &mut w)?;
        }
        let mut values = Vec::new();
        for part in &parts.series {
            part(world, &mut values);
        }
        w.series(&values)?;
        w.finish()
    })();
    world.resource_mut::<OutputFile>().0 = Some(file);
    result?;
    let next = next_snapshot_time(world, world.resource::<Clock>().time);
    let mut c = world.resource_mut::<Clock>();
    c.snapshots += 1;
    c.next_snapshot = next;
    Ok(())
}

/// Writes a snapshot when its time has come (and at the end of the run). A simulation stepped
/// without a run file (tests, embedding) writes nothing.
pub fn snapshot_when_due(world: &mut World) {
    let due = {
        let c = world.resource::<Clock>();
        c.time >= c.next_snapshot || c.done()
    };
    if due && world.resource::<OutputFile>().0.is_none() {
        let next = next_snapshot_time(world, world.resource::<Clock>().time);
        let mut c = world.resource_mut::<Clock>();
        c.snapshots += 1;
        c.next_snapshot = next;
        return;
    }
    if due && let Err(e) = write_snapshot(world) {
        world.resource_mut::<Faults>().0.push(e);
    }
}

/// Records the wall time, the time in each process set and the status, and closes the run file.
pub fn close_run_file(world: &mut World, status: &str, wall_time_s: f64) -> SimResult<()> {
    let times = world.get_resource::<crate::world::PhaseTimes>().map(|t| t.record());
    if let Some(mut f) = world.resource_mut::<OutputFile>().0.take() {
        f.set_provenance("wall_time_s", &format!("{wall_time_s:.3}"))?;
        if let Some(t) = times {
            f.set_provenance("process_wall_s", &t)?;
        }
        f.close(status)?;
    }
    Ok(())
}
