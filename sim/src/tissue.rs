//! The terrain at the start of a run: tumour and host regions, matrix composition, cell agents.

use bevy_ecs::prelude::*;

use crate::field::Field;
use crate::lattice::Lattice;
use crate::params::{CellParams, MatrixParams, TumourGeometry};
use crate::rng::{Domain, stream};

/// Region label of a voxel.
pub const HOST: u8 = 0;
/// Region label of a tumour voxel.
pub const TUMOUR: u8 = 1;

/// Region of every voxel (0 host, 1 tumour), by the position of its centre.
#[derive(Resource, Debug, Clone)]
pub struct Regions {
    pub region: Field<u8>,
}

impl Regions {
    /// Labels each voxel by whether its centre lies inside the tumour.
    pub fn from_geometry(l: &Lattice, g: &TumourGeometry) -> Self {
        let mut region = Field::filled("region", "1", "0 host tissue, 1 tumour", l.len(), HOST);
        for (idx, r) in region.data.iter_mut().enumerate() {
            if g.contains(l.centre(l.ijk(idx))) {
                *r = TUMOUR;
            }
        }
        Regions { region }
    }

    /// Number of tumour voxels.
    pub fn tumour_voxels(&self) -> usize {
        self.region.data.iter().filter(|&&r| r == TUMOUR).count()
    }
}

/// Matrix composition per voxel.
#[derive(Resource, Debug, Clone)]
pub struct Matrix {
    /// Collagen fibre volume fraction.
    pub collagen: Field,
    /// Glycosaminoglycan volume fraction.
    pub gag: Field,
    /// Interstitial fluid volume fraction (porosity).
    pub porosity: Field,
}

impl Matrix {
    /// Host or tumour values per voxel.
    pub fn from_regions(regions: &Regions, p: &MatrixParams) -> Self {
        let n = regions.region.len();
        let mut m = Matrix {
            collagen: Field::filled("collagen_fraction", "1", "collagen fibre volume fraction", n, 0.0),
            gag: Field::filled("gag_fraction", "1", "glycosaminoglycan volume fraction", n, 0.0),
            porosity: Field::filled("porosity", "1", "interstitial fluid volume fraction", n, 0.0),
        };
        for (idx, &r) in regions.region.data.iter().enumerate() {
            let r = r as usize;
            m.collagen.data[idx] = p.collagen_fraction[r];
            m.gag.data[idx] = p.gag_fraction[r];
            m.porosity.data[idx] = p.porosity[r];
        }
        m
    }
}

/// Most species a run may carry.
pub const MAX_SPECIES: usize = 8;

/// Kind of a cell agent.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[repr(u8)]
pub enum CellKind {
    Host = 0,
    Cancer = 1,
    Stromal = 2,
    Phagocyte = 3,
}

/// A cell agent: its kind and the voxel it occupies.
#[derive(Component, Debug, Clone, Copy)]
pub struct Cell {
    pub kind: CellKind,
    pub voxel: u32,
}

/// Receptors of a cell: the number it maintains on its surface, how many are on the surface now
/// (bound ones internalise with their particle and return by recycling), and how many of those
/// are free.
#[derive(Component, Debug, Clone, Copy)]
pub struct Receptors {
    pub total: f64,
    pub surface: f64,
    pub free: f64,
}

impl Receptors {
    /// A cell with `n` free receptors on its surface.
    pub fn new(n: f64) -> Self {
        Receptors { total: n, surface: n, free: n }
    }
}

/// Particles held by a cell, per species (exact counts): bound to its receptors, internalised,
/// and detached but not yet gathered into a packet (`held`: free particles at the cell's voxel).
#[derive(Component, Debug, Clone, Copy, Default)]
pub struct CellLoad {
    pub bound: [u64; MAX_SPECIES],
    pub internalised: [u64; MAX_SPECIES],
    pub held: [u64; MAX_SPECIES],
    /// Simulated time of the cell's last kinetics update, s.
    pub updated_at: f64,
}

/// Voxel-to-cell lookup: the entity occupying each voxel, if any.
#[derive(Resource, Debug, Clone)]
pub struct Occupancy {
    pub cell: Vec<Option<Entity>>,
}

/// Places at most one cell per voxel: a voxel holds a cell with the region's probability, drawn
/// from the voxel's own random stream; a tumour cell is a phagocyte, else a stromal cell, else a
/// cancer cell, with the fractions given. Receptors are the kind's number times the voxel's
/// `receptor_factor` (1 without one). Cells are spawned in voxel order, so entity order and
/// every later table are reproducible.
pub fn place_cells(
    world: &mut World,
    lattice: &Lattice,
    regions: &Regions,
    p: &CellParams,
    seed: u64,
    stromal_fraction: f64,
    receptor_factor: Option<&[f64]>,
) {
    use rayon::prelude::*;
    let mut occ = Vec::new();
    // Decisions per voxel in parallel (each from its own stream), collected in voxel order.
    let batch: Vec<(Cell, Receptors, CellLoad)> = regions
        .region
        .data
        .par_iter()
        .enumerate()
        .filter_map(|(idx, &r)| {
            let mut s = stream(seed, Domain::Tissue, idx as u64, 0);
            if !s.chance(p.occupancy[r as usize]) {
                return None;
            }
            let kind = if r != TUMOUR {
                CellKind::Host
            } else if s.chance(p.tumour_phagocyte_fraction) {
                CellKind::Phagocyte
            } else if stromal_fraction > 0.0 && s.chance(stromal_fraction) {
                CellKind::Stromal
            } else {
                CellKind::Cancer
            };
            let receptors = match kind {
                CellKind::Cancer => p.receptors[1],
                CellKind::Host => p.receptors[0],
                _ => 0.0,
            } * receptor_factor.map_or(1.0, |f| f[idx]);
            Some((Cell { kind, voxel: idx as u32 }, Receptors::new(receptors), CellLoad::default()))
        })
        .collect();
    spawn_cells(world, lattice.len(), batch, &mut occ);
}

/// Spawns cells (in the order given) and inserts the [`Occupancy`] of the lattice.
pub fn spawn_cells(
    world: &mut World,
    voxels: usize,
    batch: Vec<(Cell, Receptors, CellLoad)>,
    occ: &mut Vec<Option<Entity>>,
) {
    occ.clear();
    occ.resize(voxels, None);
    let at: Vec<u32> = batch.iter().map(|b| b.0.voxel).collect();
    let entities: Vec<Entity> = world.spawn_batch(batch).collect();
    for (v, e) in at.into_iter().zip(entities) {
        occ[v as usize] = Some(e);
    }
    world.insert_resource(Occupancy { cell: std::mem::take(occ) });
}
