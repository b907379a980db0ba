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
        let finished =
            self.finished_snapshots.unwrap_or(self.snapshots.iter().filter(|s| s.complete).count() as u64);
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
