//! Reading run files: the layout written by the engine, and nothing of the engine's code.
//!
//! ```text
//! /                      format = "interstice-run", format_version, status, finished_snapshots, caution
//! /lattice               shape_xyz [nx, ny, nz], voxel_size (m), origin [3] (m)
//! /provenance            string attributes; datasets scenario_toml, resolved_toml
//! /snapshots/NNNNNN      time_s, step, complete; fields/<name> [nz][ny][nx], cells/<column>, vessels/<column>
//! /series/<name>         one value per finished snapshot, attribute units
//! ```
//!
//! A killed run is read over its finished snapshots: the longest run of snapshot groups
//! `000000, 000001, ...` whose `complete` attribute is 1, and at most `finished_snapshots` of them.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use hdf5::types::{FixedAscii, FixedUnicode, TypeDescriptor, VarLenAscii, VarLenUnicode};

use crate::error::{AnalysisError, Result};

/// Value of the root attribute `format`.
pub const FORMAT: &str = "interstice-run";
/// Highest `format_version` this reader understands.
pub const SUPPORTED_FORMAT_VERSION: u32 = 1;

/// The Cartesian lattice of a run: x varies fastest in every field.
#[derive(Debug, Clone, PartialEq)]
pub struct Lattice {
    /// Voxels along x, y, z.
    pub shape_xyz: [usize; 3],
    /// Edge of a cubic voxel, m.
    pub voxel_size_m: f64,
    /// Corner of voxel (0, 0, 0), m.
    pub origin_m: [f64; 3],
}

impl Lattice {
    /// Number of voxels.
    pub fn len(&self) -> usize {
        self.shape_xyz.iter().product()
    }

    /// True for a lattice without voxels.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Volume of one voxel, m3.
    pub fn voxel_volume_m3(&self) -> f64 {
        self.voxel_size_m.powi(3)
    }

    /// Indices (i, j, k) of linear voxel `v`.
    pub fn ijk(&self, v: usize) -> [usize; 3] {
        let [nx, ny, _] = self.shape_xyz;
        [v % nx, (v / nx) % ny, v / (nx * ny)]
    }

    /// Linear index of voxel (i, j, k).
    pub fn index(&self, [i, j, k]: [usize; 3]) -> usize {
        let [nx, ny, _] = self.shape_xyz;
        i + nx * (j + ny * k)
    }

    /// Centre of voxel (i, j, k), m: origin + (index + 0.5) * h.
    pub fn centre(&self, ijk: [usize; 3]) -> [f64; 3] {
        let h = self.voxel_size_m;
        [0, 1, 2].map(|a| self.origin_m[a] + (ijk[a] as f64 + 0.5) * h)
    }
}

/// One finished snapshot.
#[derive(Debug, Clone, PartialEq)]
pub struct SnapshotInfo {
    /// Position among the finished snapshots (0-based), equal to the group number.
    pub index: usize,
    /// Group name (`000000`...).
    pub name: String,
    /// Simulated time, s.
    pub time_s: f64,
    /// Step number.
    pub step: u64,
}

/// A particle design listed in the resolved scenario.
#[derive(Debug, Clone, PartialEq)]
pub struct ParticleDesign {
    /// Species name.
    pub name: String,
    /// Particles given in the bolus (`dose_particles`), when the scenario says.
    pub dose_particles: Option<f64>,
    /// Hydrodynamic radius, nm, when the scenario says.
    pub hydrodynamic_radius_nm: Option<f64>,
}

/// A lattice field of one snapshot, converted to f64.
#[derive(Debug, Clone)]
pub struct FieldData {
    /// Field name.
    pub name: String,
    /// Units (UDUNITS spelling; `1` for dimensionless).
    pub units: String,
    /// One-line description, empty when the file has none.
    pub description: String,
    /// Values, x fastest.
    pub data: Vec<f64>,
}

/// A table of one snapshot (`cells`, `vessels`), every column converted to f64.
#[derive(Debug, Clone, Default)]
pub struct Table {
    /// Number of rows.
    pub rows: usize,
    /// Column name -> (units, values).
    pub columns: BTreeMap<String, (String, Vec<f64>)>,
}

impl Table {
    /// Values of a column, when present.
    pub fn column(&self, name: &str) -> Option<&[f64]> {
        self.columns.get(name).map(|(_, v)| v.as_slice())
    }
}

/// One time series, cut to the finished snapshots.
#[derive(Debug, Clone, PartialEq)]
pub struct Series {
    /// Series name.
    pub name: String,
    /// Units.
    pub units: String,
    /// One value per finished snapshot.
    pub values: Vec<f64>,
}

/// An open run file.
pub struct RunFile {
    path: PathBuf,
    file: hdf5::File,
    /// `format_version` of the file.
    pub format_version: u32,
    /// `status` of the run: "running", "finished", "failed: ...".
    pub status: String,
    /// The caution the engine wrote, when present.
    pub caution: Option<String>,
    /// The `finished_snapshots` attribute.
    pub finished_attr: u64,
    /// Snapshot groups found under `/snapshots`, finished or not.
    pub snapshot_groups: usize,
    /// The lattice.
    pub lattice: Lattice,
    /// `/provenance` attributes, sorted by name.
    pub provenance: Vec<(String, String)>,
    /// The scenario as written, when stored.
    pub scenario_toml: Option<String>,
    /// The resolved scenario (every key), when stored.
    pub resolved_toml: Option<String>,
    /// The snapshots to analyse, in order.
    pub snapshots: Vec<SnapshotInfo>,
    /// Particle designs from the resolved scenario.
    pub particles: Vec<ParticleDesign>,
}

/// Reads a string attribute whatever string type it was written with.
fn string_attr(loc: &hdf5::Location, name: &str) -> Option<String> {
    let a = loc.attr(name).ok()?;
    let d = a.dtype().ok()?.to_descriptor().ok()?;
    match d {
        TypeDescriptor::VarLenUnicode => a.read_scalar::<VarLenUnicode>().ok().map(|v| v.as_str().to_string()),
        TypeDescriptor::VarLenAscii => a.read_scalar::<VarLenAscii>().ok().map(|v| v.as_str().to_string()),
        TypeDescriptor::FixedAscii(_) => a.read_scalar::<FixedAscii<4096>>().ok().map(|v| v.as_str().to_string()),
        TypeDescriptor::FixedUnicode(_) => a.read_scalar::<FixedUnicode<4096>>().ok().map(|v| v.as_str().to_string()),
        _ => None,
    }
}

/// Reads a scalar string dataset.
fn string_dataset(g: &hdf5::Group, name: &str) -> Option<String> {
    let ds = g.dataset(name).ok()?;
    let d = ds.dtype().ok()?.to_descriptor().ok()?;
    match d {
        TypeDescriptor::VarLenUnicode => ds.read_scalar::<VarLenUnicode>().ok().map(|v| v.as_str().to_string()),
        TypeDescriptor::VarLenAscii => ds.read_scalar::<VarLenAscii>().ok().map(|v| v.as_str().to_string()),
        _ => None,
    }
}

fn scalar_attr<T: hdf5::H5Type>(loc: &hdf5::Location, name: &str) -> Option<T> {
    loc.attr(name).ok()?.read_scalar::<T>().ok()
}

fn array_attr<T: hdf5::H5Type>(loc: &hdf5::Location, name: &str) -> Option<Vec<T>> {
    loc.attr(name).ok()?.read_raw::<T>().ok()
}

impl RunFile {
    /// Opens and checks a run file; lists its finished snapshots.
    pub fn open(path: &Path) -> Result<RunFile> {
        if !path.exists() {
            return Err(AnalysisError::NotFound { path: path.to_path_buf() });
        }
        let not_run = |why: &str| AnalysisError::NotARunFile { path: path.to_path_buf(), why: why.to_string() };
        let file = match hdf5::File::open(path) {
            Ok(f) => f,
            // A run still being written holds a lock: read it without locking, over the
            // snapshots it has finished (each is flushed before it is marked complete).
            Err(e) if e.to_string().contains("lock") => hdf5::File::with_options()
                .with_fapl(|p| p.file_locking(false))
                .open(path)
                .map_err(|e| AnalysisError::NotHdf5 { path: path.to_path_buf(), reason: e.to_string() })?,
            Err(e) => return Err(AnalysisError::NotHdf5 { path: path.to_path_buf(), reason: e.to_string() }),
        };
        let root = file.as_group().map_err(AnalysisError::read(path, "the root group"))?;
        let format = string_attr(&root, "format").ok_or_else(|| not_run("no root attribute `format`"))?;
        if format != FORMAT {
            return Err(not_run(&format!("root attribute `format` is \"{format}\", expected \"{FORMAT}\"")));
        }
        let format_version: u32 =
            scalar_attr(&root, "format_version").ok_or_else(|| not_run("no root attribute `format_version`"))?;
        if format_version > SUPPORTED_FORMAT_VERSION {
            return Err(AnalysisError::UnsupportedVersion {
                path: path.to_path_buf(),
                found: format_version,
                supported: SUPPORTED_FORMAT_VERSION,
            });
        }
        let status = string_attr(&root, "status").unwrap_or_else(|| "unknown".into());
        let caution = string_attr(&root, "caution");
        let finished_attr: u64 = scalar_attr(&root, "finished_snapshots")
            .ok_or_else(|| not_run("no root attribute `finished_snapshots`"))?;

        let lg = file.group("lattice").map_err(|_| not_run("no /lattice group"))?;
        let shape: Vec<u64> =
            array_attr(&lg, "shape_xyz").ok_or_else(|| not_run("no /lattice attribute `shape_xyz`"))?;
        if shape.len() != 3 || shape.contains(&0) {
            return Err(not_run(&format!("/lattice `shape_xyz` is {shape:?}, expected three positive counts")));
        }
        let voxel_size_m: f64 =
            scalar_attr(&lg, "voxel_size").ok_or_else(|| not_run("no /lattice attribute `voxel_size`"))?;
        if !(voxel_size_m.is_finite() && voxel_size_m > 0.0) {
            return Err(not_run(&format!("/lattice `voxel_size` is {voxel_size_m}, expected a positive length in m")));
        }
        let origin: Vec<f64> = array_attr(&lg, "origin").unwrap_or_else(|| vec![0.0; 3]);
        if origin.len() != 3 {
            return Err(not_run("/lattice `origin` does not have three coordinates"));
        }
        let lattice = Lattice {
            shape_xyz: [shape[0] as usize, shape[1] as usize, shape[2] as usize],
            voxel_size_m,
            origin_m: [origin[0], origin[1], origin[2]],
        };

        let mut provenance = Vec::new();
        let (mut scenario_toml, mut resolved_toml) = (None, None);
        if let Ok(pg) = file.group("provenance") {
            for name in pg.attr_names().unwrap_or_default() {
                if let Some(v) = string_attr(&pg, &name) {
                    provenance.push((name, v));
                }
            }
            provenance.sort();
            scenario_toml = string_dataset(&pg, "scenario_toml");
            resolved_toml = string_dataset(&pg, "resolved_toml");
        }

        let sg = file.group("snapshots").map_err(|_| not_run("no /snapshots group"))?;
        let names = sg.member_names().map_err(AnalysisError::read(path, "the snapshot list"))?;
        let snapshot_groups = names.len();
        let mut snapshots = Vec::new();
        for index in 0..(finished_attr as usize).min(snapshot_groups) {
            let name = format!("{index:06}");
            let Ok(g) = sg.group(&name) else { break };
            let complete: u8 = scalar_attr(&g, "complete").unwrap_or(0);
            if complete != 1 {
                break;
            }
            let time_s: f64 = scalar_attr(&g, "time_s").ok_or_else(|| AnalysisError::BadDataset {
                path: path.to_path_buf(),
                what: format!("snapshot {name} has no `time_s`"),
            })?;
            let step: u64 = scalar_attr(&g, "step").unwrap_or(0);
            snapshots.push(SnapshotInfo { index, name, time_s, step });
        }

        let particles = resolved_toml.as_deref().map(particles_of).unwrap_or_default();
        Ok(RunFile {
            path: path.to_path_buf(),
            file,
            format_version,
            status,
            caution,
            finished_attr,
            snapshot_groups,
            lattice,
            provenance,
            scenario_toml,
            resolved_toml,
            snapshots,
            particles,
        })
    }

    /// Path of the file.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Name of the run: `[run].name` of the resolved scenario, else the file stem.
    pub fn name(&self) -> String {
        self.resolved_toml
            .as_deref()
            .and_then(|t| t.parse::<toml::Table>().ok())
            .and_then(|t| t.get("run")?.get("name")?.as_str().map(str::to_string))
            .unwrap_or_else(|| self.path.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default())
    }

    /// A provenance attribute.
    pub fn provenance(&self, key: &str) -> Option<&str> {
        self.provenance.iter().find(|(k, _)| k == key).map(|(_, v)| v.as_str())
    }

    /// True when every snapshot group of the file is analysed and the run says it finished.
    pub fn is_complete(&self) -> bool {
        self.status == "finished" && self.snapshots.len() == self.snapshot_groups
    }

    /// The snapshots, or [`AnalysisError::NoSnapshots`] when none finished.
    pub fn require_snapshots(&self) -> Result<&[SnapshotInfo]> {
        if self.snapshots.is_empty() {
            return Err(AnalysisError::NoSnapshots { path: self.path.clone(), status: self.status.clone() });
        }
        Ok(&self.snapshots)
    }

    /// The finished snapshot at `index`.
    pub fn snapshot(&self, index: usize) -> Result<&SnapshotInfo> {
        self.snapshots.get(index).ok_or(AnalysisError::NoSuchSnapshot {
            path: self.path.clone(),
            index,
            finished: self.snapshots.len(),
        })
    }

    fn snapshot_group(&self, snap: &SnapshotInfo) -> Result<hdf5::Group> {
        self.file
            .group(&format!("snapshots/{}", snap.name))
            .map_err(AnalysisError::read(&self.path, format!("snapshot {}", snap.name)))
    }

    /// Names of the fields of a snapshot, sorted.
    pub fn field_names(&self, snap: &SnapshotInfo) -> Result<Vec<String>> {
        let g = self.snapshot_group(snap)?;
        if !g.link_exists("fields") {
            return Ok(Vec::new());
        }
        let mut names = g
            .group("fields")
            .and_then(|f| f.member_names())
            .map_err(AnalysisError::read(&self.path, format!("the fields of snapshot {}", snap.name)))?;
        names.sort();
        Ok(names)
    }

    /// Reads a field of a snapshot; `None` when the snapshot does not hold it.
    pub fn field(&self, snap: &SnapshotInfo, name: &str) -> Result<Option<FieldData>> {
        let g = self.snapshot_group(snap)?;
        if !g.link_exists("fields") {
            return Ok(None);
        }
        let fg =
            g.group("fields").map_err(AnalysisError::read(&self.path, format!("snapshot {} fields", snap.name)))?;
        if !fg.link_exists(name) {
            return Ok(None);
        }
        let what = format!("field {name} of snapshot {}", snap.name);
        let ds = fg.dataset(name).map_err(AnalysisError::read(&self.path, what.clone()))?;
        let [nx, ny, nz] = self.lattice.shape_xyz;
        if ds.shape() != [nz, ny, nx] {
            return Err(AnalysisError::BadDataset {
                path: self.path.clone(),
                what: format!("{what} has shape {:?}, expected [nz, ny, nx] = [{nz}, {ny}, {nx}]", ds.shape()),
            });
        }
        let data = ds.read_raw::<f64>().map_err(AnalysisError::read(&self.path, what))?;
        let units = string_attr(&ds, "units").unwrap_or_else(|| "1".into());
        let description = string_attr(&ds, "description").unwrap_or_default();
        Ok(Some(FieldData { name: name.to_string(), units, description, data }))
    }

    /// Reads a field that must be there, else [`AnalysisError::MissingField`].
    pub fn require_field(&self, snap: &SnapshotInfo, name: &str) -> Result<FieldData> {
        match self.field(snap, name)? {
            Some(f) => Ok(f),
            None => Err(AnalysisError::MissingField {
                path: self.path.clone(),
                snapshot: snap.name.clone(),
                field: name.to_string(),
                available: self.field_names(snap)?.join(", "),
            }),
        }
    }

    /// Reads a table (`cells`, `vessels`) of a snapshot; `None` when absent.
    pub fn table(&self, snap: &SnapshotInfo, table: &str) -> Result<Option<Table>> {
        let g = self.snapshot_group(snap)?;
        if !g.link_exists(table) {
            return Ok(None);
        }
        let what = format!("table {table} of snapshot {}", snap.name);
        let tg = g.group(table).map_err(AnalysisError::read(&self.path, what.clone()))?;
        let names = tg.member_names().map_err(AnalysisError::read(&self.path, what.clone()))?;
        let mut out = Table::default();
        let mut rows: Option<usize> = scalar_attr::<u64>(&tg, "rows").map(|r| r as usize);
        for name in names {
            let Ok(ds) = tg.dataset(&name) else { continue };
            let v =
                ds.read_raw::<f64>().map_err(AnalysisError::read(&self.path, format!("column {name} of {what}")))?;
            match rows {
                Some(r) if r != v.len() => {
                    return Err(AnalysisError::BadDataset {
                        path: self.path.clone(),
                        what: format!("column {name} of {what} has {} rows, the table says {r}", v.len()),
                    });
                }
                _ => rows = Some(v.len()),
            }
            let units = string_attr(&ds, "units").unwrap_or_else(|| "1".into());
            out.columns.insert(name, (units, v));
        }
        out.rows = rows.unwrap_or(0);
        Ok(Some(out))
    }

    /// Every time series, cut to the analysed snapshots, sorted by name.
    pub fn series(&self) -> Result<Vec<Series>> {
        let n = self.snapshots.len();
        let Ok(g) = self.file.group("series") else { return Ok(Vec::new()) };
        let mut names = g.member_names().map_err(AnalysisError::read(&self.path, "the time series"))?;
        names.sort();
        let mut out = Vec::new();
        for name in names {
            let Ok(ds) = g.dataset(&name) else { continue };
            if ds.ndim() != 1 {
                continue;
            }
            let mut values = ds.read_raw::<f64>().map_err(AnalysisError::read(&self.path, format!("series {name}")))?;
            values.truncate(n);
            values.resize(n, f64::NAN);
            let units = string_attr(&ds, "units").unwrap_or_else(|| "1".into());
            out.push(Series { name, units, values });
        }
        Ok(out)
    }

    /// Particle species of the run: the designs of the resolved scenario, then any species that
    /// only the data name (`free_<s>` fields, `internalised_<s>` cell columns, `injected_<s>` series).
    pub fn species(&self) -> Result<Vec<String>> {
        let mut out: Vec<String> = self.particles.iter().map(|p| p.name.clone()).collect();
        let mut push = |s: &str| {
            if !s.is_empty() && !out.iter().any(|o| o == s) {
                out.push(s.to_string());
            }
        };
        if let Some(first) = self.snapshots.first() {
            for f in self.field_names(first)? {
                for p in ["free_", "bound_", "internalised_", "matrix_bound_"] {
                    if let Some(s) = f.strip_prefix(p) {
                        push(s);
                    }
                }
            }
            if let Some(t) = self.table(first, "cells")? {
                for c in t.columns.keys() {
                    if let Some(s) = c.strip_prefix("internalised_").or_else(|| c.strip_prefix("bound_")) {
                        push(s);
                    }
                }
            }
        }
        for s in self.series()? {
            if let Some(sp) = s.name.strip_prefix("injected_") {
                push(sp);
            }
        }
        Ok(out)
    }
}

/// The `[[particle]]` tables of a resolved scenario.
pub fn particles_of(resolved_toml: &str) -> Vec<ParticleDesign> {
    let Ok(t) = resolved_toml.parse::<toml::Table>() else { return Vec::new() };
    let Some(list) = t.get("particle").and_then(|p| p.as_array()) else { return Vec::new() };
    let num =
        |v: &toml::Value, k: &str| v.get(k).and_then(|x| x.as_float().or_else(|| x.as_integer().map(|i| i as f64)));
    list.iter()
        .filter_map(|p| {
            Some(ParticleDesign {
                name: p.get("name")?.as_str()?.to_string(),
                dose_particles: num(p, "dose_particles"),
                hydrodynamic_radius_nm: num(p, "hydrodynamic_radius_nm"),
            })
        })
        .collect()
}
