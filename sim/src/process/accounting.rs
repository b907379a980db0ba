//! Accounting: where every injected particle is, exactly, at every snapshot.
//!
//! For each species, in whole particles:
//! `injected = plasma + cleared + free + bound to cells + bound to matrix + internalised +
//! drained by lymphatics + left through the faces`, where `free` counts the packets and the particles held at a voxel before they gather into a
//! packet. The run stops with a report if the identity ever fails or a packet position turns
//! non-finite. The per-voxel amounts are written as concentration fields (particles per m^3 of
//! tissue) and the totals as time series.

use bevy_ecs::prelude::*;

use crate::error::{SimError, SimResult};
use crate::field::{Field, FieldRef};
use crate::io::SnapshotWriter;
use crate::lattice::Lattice;
use crate::particles::{Designs, Packets};
use crate::process::binding::MatrixLoad;
use crate::process::output;
use crate::tissue::{Cell, CellLoad};
use crate::world::{Clock, SpeciesNames};

/// Running totals of what entered and what left the tissue, per species.
#[derive(Resource, Debug, Clone, Default, PartialEq)]
pub struct Ledger {
    /// Particles placed directly in the tissue (tests); doses given to the plasma are counted by
    /// the plasma pools.
    pub injected: Vec<u64>,
    /// Particles drained by lymphatics.
    pub drained: Vec<u64>,
    /// Particles that left through absorbing faces.
    pub left: Vec<u64>,
}

impl Ledger {
    /// A ledger for `n` species.
    pub fn new(n: usize) -> Self {
        Ledger { injected: vec![0; n], drained: vec![0; n], left: vec![0; n] }
    }

    /// Number of species.
    pub fn species(&self) -> usize {
        self.injected.len()
    }
}

/// Where one species is, in particles.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Balance {
    pub injected: u64,
    pub plasma: u64,
    /// The peripheral compartment of a two-compartment plasma model.
    pub peripheral: u64,
    pub cleared: u64,
    pub free: u64,
    pub bound_cells: u64,
    pub bound_matrix: u64,
    pub internalised: u64,
    pub drained: u64,
    pub left: u64,
}

impl Balance {
    /// Sum of every place the particles can be.
    pub fn accounted(&self) -> u64 {
        self.plasma
            + self.peripheral
            + self.cleared
            + self.free
            + self.bound_cells
            + self.bound_matrix
            + self.internalised
            + self.drained
            + self.left
    }
}

/// The balance of every species now.
pub fn balances(world: &World) -> Vec<Balance> {
    let ledger = world.resource::<Ledger>();
    let packets = world.resource::<Packets>();
    let mload = world.resource::<MatrixLoad>();
    let pools = world.get_resource::<crate::process::plasma::PlasmaPools>();
    let n = ledger.species();
    let mut out: Vec<Balance> = (0..n)
        .map(|s| {
            let pool = pools.map(|p| p.get(s));
            Balance {
                injected: ledger.injected[s] + pool.map_or(0, |p| p.dose),
                plasma: pool.map_or(0, |p| p.amount),
                peripheral: pool.map_or(0, |p| p.peripheral),
                cleared: pool.map_or(0, |p| p.cleared),
                free: packets.particles(s) + mload.held[s].iter().sum::<u64>(),
                bound_matrix: mload.bound[s].iter().sum(),
                drained: ledger.drained[s],
                left: ledger.left[s],
                ..Balance::default()
            }
        })
        .collect();
    for e in world.iter_entities() {
        if let Some(load) = e.get::<CellLoad>() {
            for (s, b) in out.iter_mut().enumerate() {
                b.bound_cells += load.bound[s];
                b.internalised += load.internalised[s];
                b.free += load.held[s];
            }
        }
    }
    // Gains the cells have not taken in yet.
    if let Some(g) = world.get_resource::<crate::process::binding::CellGains>() {
        for (s, b) in out.iter_mut().enumerate() {
            let [bound, inside] = g.pending(s);
            b.bound_cells += bound;
            b.internalised += inside;
        }
    }
    out
}

/// Checks the identity for every species and the finiteness of every packet position.
pub fn verify(world: &World) -> SimResult<Vec<Balance>> {
    let clock = world.resource::<Clock>();
    let packets = world.resource::<Packets>();
    if let Some(i) = packets.pos.iter().position(|p| !p.iter().all(|c| c.is_finite())) {
        return Err(SimError::Invariant {
            time_s: clock.time,
            step: clock.step,
            what: format!("packet {} has a non-finite position {:?}", packets.id[i], packets.pos[i]),
        });
    }
    let b = balances(world);
    let names = world.resource::<SpeciesNames>();
    for (s, bal) in b.iter().enumerate() {
        if bal.accounted() != bal.injected {
            return Err(SimError::Invariant {
                time_s: clock.time,
                step: clock.step,
                what: format!(
                    "particle accounting of species {} does not close: injected {} but found {} ({:?})",
                    names.0.get(s).map_or("?", |n| n.as_str()),
                    bal.injected,
                    bal.accounted(),
                    bal
                ),
            });
        }
    }
    Ok(b)
}

/// Dataset names of each species, made once per run (the writer takes `'static` names).
#[derive(Resource, Debug, Clone, Default)]
pub struct SpeciesLabels {
    /// `free_<s>`, `bound_<s>`, `internalised_<s>`, `matrix_bound_<s>`.
    pub fields: Vec<[&'static str; 4]>,
    /// Series names, in the order of [`SERIES`].
    pub series: Vec<[&'static str; 10]>,
}

/// The per-species time series, in order.
pub const SERIES: [&str; 10] = [
    "injected",
    "plasma",
    "peripheral",
    "cleared",
    "free",
    "bound_cells",
    "bound_matrix",
    "internalised",
    "drained",
    "left",
];

impl SpeciesLabels {
    fn new(names: &[String]) -> Self {
        // A bounded, once-per-run allocation: a few names per species.
        let leak = |s: String| -> &'static str { Box::leak(s.into_boxed_str()) };
        SpeciesLabels {
            fields: names
                .iter()
                .map(|n| {
                    [
                        leak(format!("free_{n}")),
                        leak(format!("bound_{n}")),
                        leak(format!("internalised_{n}")),
                        leak(format!("matrix_bound_{n}")),
                    ]
                })
                .collect(),
            series: names.iter().map(|n| SERIES.map(|w| leak(format!("{w}_{n}")))).collect(),
        }
    }
}

fn snapshot_part(world: &World, w: &mut SnapshotWriter<'_>) -> SimResult<()> {
    verify(world)?;
    let lattice = world.resource::<Lattice>();
    let packets = world.resource::<Packets>();
    let mload = world.resource::<MatrixLoad>();
    let labels = world.resource::<SpeciesLabels>();
    let n = lattice.len();
    let inv_vol = 1.0 / lattice.voxel_volume();
    let ns = labels.fields.len();
    let mut free = vec![vec![0.0; n]; ns];
    let mut bound = vec![vec![0.0; n]; ns];
    let mut inside = vec![vec![0.0; n]; ns];
    for (s, f) in free.iter_mut().enumerate() {
        packets.deposit(s, f);
        for (v, h) in mload.held[s].iter().enumerate() {
            f[v] += *h as f64;
        }
    }
    for e in world.iter_entities() {
        if let (Some(c), Some(load)) = (e.get::<Cell>(), e.get::<CellLoad>()) {
            let v = c.voxel as usize;
            for s in 0..ns {
                free[s][v] += load.held[s] as f64;
                bound[s][v] += load.bound[s] as f64;
                inside[s][v] += load.internalised[s] as f64;
            }
        }
    }
    if world.resource::<crate::params::OutputParams>().packet_tables {
        write_packet_table(packets, w)?;
    }
    let descriptions = [
        "free particles (packets and particles held at the voxel)",
        "particles bound to cell receptors",
        "particles internalised by cells",
        "particles adsorbed to the matrix",
    ];
    for s in 0..ns {
        let matrix: Vec<f64> = mload.bound[s].iter().map(|&b| b as f64).collect();
        let data =
            [std::mem::take(&mut free[s]), std::mem::take(&mut bound[s]), std::mem::take(&mut inside[s]), matrix];
        for (k, d) in data.into_iter().enumerate() {
            let f = Field {
                name: labels.fields[s][k],
                units: "m-3",
                description: descriptions[k],
                data: d.into_iter().map(|x| x * inv_vol).collect(),
            };
            w.field(FieldRef::F64(&f))?;
        }
    }
    Ok(())
}

fn write_packet_table(p: &Packets, w: &mut SnapshotWriter<'_>) -> SimResult<()> {
    use crate::io::{Column, ColumnData};
    let x: Vec<f64> = p.pos.iter().map(|q| q[0]).collect();
    let y: Vec<f64> = p.pos.iter().map(|q| q[1]).collect();
    let z: Vec<f64> = p.pos.iter().map(|q| q[2]).collect();
    w.table(
        "packets",
        &[
            Column { name: "id", units: "1", description: "packet id", data: ColumnData::U64(&p.id) },
            Column { name: "x", units: "m", description: "position x", data: ColumnData::F64(&x) },
            Column { name: "y", units: "m", description: "position y", data: ColumnData::F64(&y) },
            Column { name: "z", units: "m", description: "position z", data: ColumnData::F64(&z) },
            Column { name: "voxel", units: "1", description: "linear voxel index", data: ColumnData::U32(&p.voxel) },
            Column { name: "species", units: "1", description: "species index", data: ColumnData::U8(&p.species) },
            Column {
                name: "particles",
                units: "1",
                description: "particles in the packet",
                data: ColumnData::U64(&p.weight),
            },
        ],
    )
}

fn series_part(world: &World, out: &mut Vec<(&'static str, &'static str, f64)>) {
    let labels = world.resource::<SpeciesLabels>();
    for (s, bal) in balances(world).iter().enumerate() {
        let values = [
            bal.injected,
            bal.plasma,
            bal.peripheral,
            bal.cleared,
            bal.free,
            bal.bound_cells,
            bal.bound_matrix,
            bal.internalised,
            bal.drained,
            bal.left,
        ];
        for (k, v) in values.into_iter().enumerate() {
            out.push((labels.series[s][k], "particles", v as f64));
        }
    }
}

/// Adds the ledger and its outputs.
pub fn install(world: &mut World) {
    let names: Vec<String> = world.resource::<Designs>().0.iter().map(|d| d.name.clone()).collect();
    world.insert_resource(Ledger::new(names.len()));
    world.insert_resource(SpeciesLabels::new(&names));
    world.insert_resource(SpeciesNames(names));
    world.init_resource::<Packets>();
    output::add_part(world, snapshot_part);
    output::add_series(world, series_part);
}
