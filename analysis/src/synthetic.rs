//! Small run files written to the layout of [`crate::runfile`], with values the caller chooses:
//! known answers for tests, inputs for benchmarks and examples. Not a simulator: nothing here
//! computes physics.

use std::path::Path;
use std::str::FromStr;

use hdf5::types::VarLenUnicode;

use crate::runfile::{FORMAT, Lattice};

/// Values of a field or table column.
#[derive(Debug, Clone, PartialEq)]
pub enum Values {
    /// 64-bit floats.
    F64(Vec<f64>),
    /// Bytes (labels, flags).
    U8(Vec<u8>),
    /// 32-bit unsigned integers (voxel indices).
    U32(Vec<u32>),
    /// 64-bit unsigned integers (particle counts).
    U64(Vec<u64>),
}

impl Values {
    fn len(&self) -> usize {
        match self {
            Values::F64(v) => v.len(),
            Values::U8(v) => v.len(),
            Values::U32(v) => v.len(),
            Values::U64(v) => v.len(),
        }
    }
}

/// A named field or column with units.
#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    /// Name.
    pub name: String,
    /// Units.
    pub units: String,
    /// Values.
    pub values: Values,
}

impl Column {
    /// A float column.
    pub fn f64(name: &str, units: &str, v: Vec<f64>) -> Column {
        Column { name: name.into(), units: units.into(), values: Values::F64(v) }
    }
    /// A byte column.
    pub fn u8(name: &str, units: &str, v: Vec<u8>) -> Column {
        Column { name: name.into(), units: units.into(), values: Values::U8(v) }
    }
    /// A 32-bit integer column.
    pub fn u32(name: &str, units: &str, v: Vec<u32>) -> Column {
        Column { name: name.into(), units: units.into(), values: Values::U32(v) }
    }
    /// A 64-bit integer column.
    pub fn u64(name: &str, units: &str, v: Vec<u64>) -> Column {
        Column { name: name.into(), units: units.into(), values: Values::U64(v) }
    }
}

/// One snapshot to write.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Snapshot {
    /// Simulated time, s.
    pub time_s: f64,
    /// Step number.
    pub step: u64,
    /// Written as complete (`complete` = 1).
    pub complete: bool,
    /// Lattice fields, x fastest.
    pub fields: Vec<Column>,
    /// The cell table, when present.
    pub cells: Option<Vec<Column>>,
    /// The vessel table, when present.
    pub vessels: Option<Vec<Column>>,
}

/// A whole run file to write.
#[derive(Debug, Clone, PartialEq)]
pub struct Run {
    /// The lattice.
    pub lattice: Lattice,
    /// Root `status`.
    pub status: String,
    /// Root `finished_snapshots`; `None`: the number of complete snapshots.
    pub finished_snapshots: Option<u64>,
    /// `/provenance/scenario_toml`.
    pub scenario_toml: String,
    /// `/provenance/resolved_toml`.
    pub resolved_toml: String,
    /// `/provenance` string attributes.
    pub provenance: Vec<(String, String)>,
    /// Snapshots in order.
    pub snapshots: Vec<Snapshot>,
    /// Time series: name, units, values.
    pub series: Vec<(String, String, Vec<f64>)>,
}

/// A resolved scenario naming the run and its particle designs (name, dose in particles).
pub fn resolved_toml(run: &str, particles: &[(&str, f64)]) -> String {
    let mut s = format!("[run]\nname = \"{run}\"\nseed = 1\n");
    for (name, dose) in particles {
        s.push_str(&format!(
            "\n[[particle]]\nname = \"{name}\"\nhydrodynamic_radius_nm = 50.0\ndose_particles = {dose:?}\n"
        ));
    }
    s
}

fn str_attr(loc: &hdf5::Location, name: &str, value: &str) -> hdf5::Result<()> {
    let v = VarLenUnicode::from_str(value).map_err(|e| hdf5::Error::from(e.to_string().as_str()))?;
    loc.new_attr::<VarLenUnicode>().shape(()).create(name)?.write_scalar(&v)
}

fn put(g: &hdf5::Group, c: &Column, shape: &[usize]) -> hdf5::Result<()> {
    let ds = match &c.values {
        Values::F64(v) => {
            let ds = g.new_dataset::<f64>().shape(shape).create(c.name.as_str())?;
            ds.write_raw(v)?;
            ds
        }
        Values::U8(v) => {
            let ds = g.new_dataset::<u8>().shape(shape).create(c.name.as_str())?;
            ds.write_raw(v)?;
            ds
        }
        Values::U32(v) => {
            let ds = g.new_dataset::<u32>().shape(shape).create(c.name.as_str())?;
            ds.write_raw(v)?;
            ds
        }
        Values::U64(v) => {
            let ds = g.new_dataset::<u64>().shape(shape).create(c.name.as_str())?;
            ds.write_raw(v)?;
            ds
        }
    };
    str_attr(&ds, "units", &c.units)?;
    str_attr(&ds, "description", "synthetic")
}

fn table(g: &hdf5::Group, name: &str, cols: &[Column]) -> hdf5::Result<()> {
    let t = g.create_group(name)?;
    let rows = cols.first().map_or(0, |c| c.values.len());
    t.new_attr::<u64>().shape(()).create("rows")?.write_scalar(&(rows as u64))?;
    for c in cols {
        put(&t, c, &[c.values.len()])?;
    }
    Ok(())
}

impl Run {
    /// A run on `lattice` with no snapshot yet, status "finished".
    pub fn new(lattice: Lattice, name: &str, particles: &[(&str, f64)]) -> Run {
        Run {
            lattice,
            status: "finished".into(),
            finished_snapshots: None,
            scenario_toml: format!("[run]\nname = \"{name}\"\n"),
            resolved_toml: resolved_toml(name, particles),
            provenance: vec![
                ("software".into(), "interstice".into()),
                ("version".into(), "synthetic".into()),
                ("seed".into(), "1".into()),
            ],
            snapshots: Vec::new(),
            series: Vec::new(),
        }
    }

    /// Writes the file (replacing any file at `path`).
    pub fn write(&self, path: &Path) -> hdf5::Result<()> {
        let f = hdf5::File::create(path)?;
        let root = f.as_group()?;
        str_attr(&root, "format", FORMAT)?;
        root.new_attr::<u32>().shape(()).create("format_version")?.write_scalar(&1u32)?;
        str_attr(&root, "status", &self.status)?;
        let finished = self.finished_snapshots.unwrap_or(self.snapshots.iter().filter(|s| s.complete).count() as u64);
        root.new_attr::<u64>().shape(()).create("finished_snapshots")?.write_scalar(&finished)?;
        str_attr(&root, "caution", crate::CAUTION)?;
        let l = f.create_group("lattice")?;
        let shape: Vec<u64> = self.lattice.shape_xyz.iter().map(|&n| n as u64).collect();
        l.new_attr::<u64>().shape(3).create("shape_xyz")?.write_raw(&shape)?;
        l.new_attr::<f64>().shape(()).create("voxel_size")?.write_scalar(&self.lattice.voxel_size_m)?;
        l.new_attr::<f64>().shape(3).create("origin")?.write_raw(&self.lattice.origin_m)?;
        let p = f.create_group("provenance")?;
        for (k, v) in &self.provenance {
            str_attr(&p, k, v)?;
        }
        for (name, text) in [("scenario_toml", &self.scenario_toml), ("resolved_toml", &self.resolved_toml)] {
            let v = VarLenUnicode::from_str(text).map_err(|e| hdf5::Error::from(e.to_string().as_str()))?;
            p.new_dataset::<VarLenUnicode>().shape(()).create(name)?.write_scalar(&v)?;
        }
        let sg = f.create_group("snapshots")?;
        let [nx, ny, nz] = self.lattice.shape_xyz;
        for (i, s) in self.snapshots.iter().enumerate() {
            let g = sg.create_group(&format!("{i:06}"))?;
            g.new_attr::<f64>().shape(()).create("time_s")?.write_scalar(&s.time_s)?;
            g.new_attr::<u64>().shape(()).create("step")?.write_scalar(&s.step)?;
            g.new_attr::<u8>().shape(()).create("complete")?.write_scalar(&(s.complete as u8))?;
            let fg = g.create_group("fields")?;
            for c in &s.fields {
                put(&fg, c, &[nz, ny, nx])?;
            }
            if let Some(cells) = &s.cells {
                table(&g, "cells", cells)?;
            }
            if let Some(v) = &s.vessels {
                table(&g, "vessels", v)?;
            }
        }
        let se = f.create_group("series")?;
        for (name, units, v) in &self.series {
            let ds = se.new_dataset::<f64>().shape(v.len()).create(name.as_str())?;
            ds.write_raw(v)?;
            str_attr(&ds, "units", units)?;
        }
        f.close()
    }
}

/// Parameters of [`example`]: every value is invented for testing, not measured.
#[derive(Debug, Clone, PartialEq)]
pub struct Example {
    /// Voxels per side of the cubic lattice.
    pub n: usize,
    /// Voxel edge, m.
    pub h: f64,
    /// Snapshot times, s.
    pub times_s: Vec<f64>,
    /// Dose of species `a`, particles.
    pub dose_a: f64,
    /// Dose of species `b`, particles.
    pub dose_b: f64,
    /// Run name.
    pub name: String,
}

impl Default for Example {
    fn default() -> Self {
        Example {
            n: 24,
            h: 10e-6,
            times_s: vec![0.0, 1800.0, 3600.0, 7200.0],
            dose_a: 1e10,
            dose_b: 4e10,
            name: "example".into(),
        }
    }
}

/// Radius of the perfused vessel of [`example`], m.
pub const EXAMPLE_VESSEL_RADIUS_M: f64 = 4e-6;

/// Wall distance of point `p` to the perfused vessel of [`example`] (a line along x through
/// the lattice centre), m.
pub fn example_vessel_distance(e: &Example, p: [f64; 3]) -> f64 {
    let c = 0.5 * e.n as f64 * e.h;
    (((p[1] - c).powi(2) + (p[2] - c).powi(2)).sqrt() - EXAMPLE_VESSEL_RADIUS_M).max(0.0)
}

/// A small example run: a spherical tumour (radius 0.35 of the lattice side) in host tissue,
/// a perfused straight vessel along x through the centre and an unperfused one off-centre;
/// species `a` with free and cell-bound fields decaying with distance from the perfused vessel
/// (bound more steeply), a uniform matrix-bound field and internalised loads only in the cell
/// table; species `b` with only a free field, uniform in the tumour and a quarter of that in the
/// host. A cell sits in every other voxel (cancer cells in the tumour, host cells outside).
/// Series: the particle stocks of `a` (they add up to the dose) and two fluid series.
pub fn example(e: &Example) -> Run {
    let n = e.n;
    let lattice = Lattice { shape_xyz: [n, n, n], voxel_size_m: e.h, origin_m: [0.0; 3] };
    let len = lattice.len();
    let c = 0.5 * n as f64 * e.h;
    let radius = 0.35 * n as f64 * e.h;
    let centres: Vec<[f64; 3]> = (0..len).map(|v| lattice.centre(lattice.ijk(v))).collect();
    let region: Vec<u8> = centres
        .iter()
        .map(|p| u8::from((p[0] - c).powi(2) + (p[1] - c).powi(2) + (p[2] - c).powi(2) <= radius * radius))
        .collect();
    let dist: Vec<f64> = centres.iter().map(|&p| example_vessel_distance(e, p)).collect();
    let tmax = e.times_s.iter().copied().fold(0.0, f64::max).max(1.0);
    let cell_voxels: Vec<usize> = (0..len).filter(|&v| v % 2 == 0).collect();
    let mut run = Run::new(lattice.clone(), &e.name, &[("a", e.dose_a), ("b", e.dose_b)]);
    let mut injected = Vec::new();
    let mut stocks: Vec<Vec<f64>> = vec![Vec::new(); 4];
    for (i, &t) in e.times_s.iter().enumerate() {
        // Rises to its top at the last time: g(t) = t / t_max (0 at t = 0).
        let g = t / tmax;
        let free_a: Vec<f64> = dist.iter().map(|d| 2e15 * g * (-d / 40e-6).exp()).collect();
        let bound_a: Vec<f64> = dist.iter().map(|d| 5e15 * g * (-d / 15e-6).exp()).collect();
        let matrix_a = vec![1e14 * g; len];
        let free_b: Vec<f64> = region.iter().map(|&r| if r == 1 { 3e15 * g } else { 0.75e15 * g }).collect();
        let internalised: Vec<u64> =
            cell_voxels.iter().map(|&v| (2000.0 * g * (-dist[v] / 30e-6).exp()).floor() as u64).collect();
        let bound_cells: Vec<u64> = cell_voxels.iter().map(|&v| (bound_a[v] * e.h.powi(3)).round() as u64).collect();
        let kind: Vec<u8> = cell_voxels.iter().map(|&v| region[v]).collect();
        let cells = vec![
            Column::u32("voxel", "1", cell_voxels.iter().map(|&v| v as u32).collect()),
            Column::u8("kind", "1", kind),
            Column::f64("x", "m", cell_voxels.iter().map(|&v| centres[v][0]).collect()),
            Column::f64("y", "m", cell_voxels.iter().map(|&v| centres[v][1]).collect()),
            Column::f64("z", "m", cell_voxels.iter().map(|&v| centres[v][2]).collect()),
            Column::f64("receptors_total", "1", vec![1e5; cell_voxels.len()]),
            Column::f64("receptors_free", "1", vec![5e4; cell_voxels.len()]),
            Column::u64("bound_a", "particles", bound_cells),
            Column::u64("internalised_a", "particles", internalised.clone()),
        ];
        let side = n as f64 * e.h;
        let vessels = vec![
            Column::f64("x0", "m", vec![0.0, 0.8 * side]),
            Column::f64("y0", "m", vec![c, 0.0]),
            Column::f64("z0", "m", vec![c, 0.2 * side]),
            Column::f64("x1", "m", vec![side, 0.8 * side]),
            Column::f64("y1", "m", vec![c, side]),
            Column::f64("z1", "m", vec![c, 0.2 * side]),
            Column::f64("radius", "m", vec![EXAMPLE_VESSEL_RADIUS_M, 6e-6]),
            Column::u8("perfused", "1", vec![1, 0]),
        ];
        let vol = e.h.powi(3);
        let tissue: f64 =
            free_a.iter().chain(&bound_a).chain(&matrix_a).sum::<f64>() * vol + internalised.iter().sum::<u64>() as f64;
        injected.push(e.dose_a);
        let cleared = 0.3 * e.dose_a * g;
        stocks[0].push(e.dose_a - cleared - tissue); // plasma
        stocks[1].push(cleared);
        stocks[2].push(free_a.iter().sum::<f64>() * vol);
        stocks[3].push(tissue - free_a.iter().sum::<f64>() * vol);
        run.snapshots.push(Snapshot {
            time_s: t,
            step: i as u64 * 60,
            complete: true,
            fields: vec![
                Column::u8("region", "1", region.clone()),
                Column::f64("porosity", "1", region.iter().map(|&r| if r == 1 { 0.4 } else { 0.2 }).collect()),
                Column::f64("free_a", "m-3", free_a),
                Column::f64("bound_a", "m-3", bound_a),
                Column::f64("matrix_bound_a", "m-3", matrix_a),
                Column::f64("free_b", "m-3", free_b),
            ],
            cells: Some(cells),
            vessels: Some(vessels),
        });
    }
    let steps: Vec<f64> = (0..e.times_s.len()).map(|i| i as f64 * 60.0).collect();
    run.series = vec![
        ("time_s".into(), "s".into(), e.times_s.clone()),
        ("step".into(), "1".into(), steps),
        ("injected_a".into(), "particles".into(), injected),
        ("plasma_a".into(), "particles".into(), stocks[0].clone()),
        ("cleared_a".into(), "particles".into(), stocks[1].clone()),
        ("free_a".into(), "particles".into(), stocks[2].clone()),
        ("bound_cells_a".into(), "particles".into(), stocks[3].clone()),
        (
            "fluid_leakage_m3_per_s".into(),
            "m3 s-1".into(),
            e.times_s.iter().map(|t| 1e-15 * (1.0 + t / tmax)).collect(),
        ),
        (
            "fluid_drainage_m3_per_s".into(),
            "m3 s-1".into(),
            e.times_s.iter().map(|t| 0.8e-15 * (1.0 + t / tmax)).collect(),
        ),
    ];
    run
}
