//! Writing run files.

use std::path::{Path, PathBuf};
use std::str::FromStr;

use hdf5::types::VarLenUnicode;
use hdf5::{File, Group, H5Type};

use super::xdmf::{XdmfField, XdmfWriter};
use super::{FORMAT, FORMAT_VERSION};
use crate::error::{SimError, SimResult};
use crate::field::FieldRef;
use crate::lattice::Lattice;

/// Writes a UTF-8 string attribute.
pub fn write_string_attr(loc: &hdf5::Location, name: &str, value: &str) -> hdf5::Result<()> {
    let v = VarLenUnicode::from_str(value).map_err(|e| hdf5::Error::from(e.to_string().as_str()))?;
    if loc.attr(name).is_ok() {
        loc.delete_attr(name)?;
    }
    loc.new_attr::<VarLenUnicode>().shape(()).create(name)?.write_scalar(&v)
}

/// Reads a UTF-8 string attribute.
pub fn read_string_attr(loc: &hdf5::Location, name: &str) -> hdf5::Result<String> {
    let v: VarLenUnicode = loc.attr(name)?.read_scalar()?;
    Ok(v.as_str().to_string())
}

fn write_scalar_attr<T: H5Type>(loc: &hdf5::Location, name: &str, value: T) -> hdf5::Result<()> {
    if loc.attr(name).is_ok() {
        loc.delete_attr(name)?;
    }
    loc.new_attr::<T>().shape(()).create(name)?.write_scalar(&value)
}

fn write_array_attr<T: H5Type + Copy>(loc: &hdf5::Location, name: &str, value: &[T]) -> hdf5::Result<()> {
    if loc.attr(name).is_ok() {
        loc.delete_attr(name)?;
    }
    loc.new_attr::<T>().shape(value.len()).create(name)?.write_raw(value)
}

fn write_string_dataset(g: &Group, name: &str, value: &str) -> hdf5::Result<()> {
    let v = VarLenUnicode::from_str(value).map_err(|e| hdf5::Error::from(e.to_string().as_str()))?;
    g.new_dataset::<VarLenUnicode>().shape(()).create(name)?.write_scalar(&v)
}

/// Values of one table column.
pub enum ColumnData<'a> {
    F64(&'a [f64]),
    U64(&'a [u64]),
    U32(&'a [u32]),
    U8(&'a [u8]),
    I64(&'a [i64]),
}

impl ColumnData<'_> {
    fn len(&self) -> usize {
        match self {
            ColumnData::F64(v) => v.len(),
            ColumnData::U64(v) => v.len(),
            ColumnData::U32(v) => v.len(),
            ColumnData::U8(v) => v.len(),
            ColumnData::I64(v) => v.len(),
        }
    }
}

/// One column of a table (cells, vessels, packets): name, units, one-line description, values.
pub struct Column<'a> {
    pub name: &'a str,
    pub units: &'a str,
    pub description: &'a str,
    pub data: ColumnData<'a>,
}

/// The open run file of a running simulation.
pub struct RunWriter {
    file: File,
    path: PathBuf,
    lattice: Lattice,
    compression: u8,
    finished: u64,
    series_len: usize,
    xdmf: XdmfWriter,
}

impl RunWriter {
    /// Creates `path` (replacing any earlier file) and writes lattice, provenance and mesh.
    ///
    /// `explicit_mesh` asks for the hexahedral mesh that every XDMF reader understands;
    /// otherwise the sidecar uses the compact regular-grid topology.
    pub fn create(
        path: &Path,
        lattice: &Lattice,
        provenance: &[(&str, String)],
        scenario_toml: &str,
        resolved_toml: &str,
        compression: u8,
        explicit_mesh: bool,
    ) -> SimResult<Self> {
        let err = |what: &str| SimError::hdf5(path, what.to_string());
        if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
            std::fs::create_dir_all(dir).map_err(SimError::io(dir, "cannot create the output folder"))?;
        }
        let file = File::create(path).map_err(err("cannot create the run file"))?;
        let root = file.as_group().map_err(err("cannot open the root group"))?;
        (|| -> hdf5::Result<()> {
            write_string_attr(&root, "format", FORMAT)?;
            write_scalar_attr(&root, "format_version", FORMAT_VERSION)?;
            write_string_attr(&root, "status", "running")?;
            write_scalar_attr(&root, "finished_snapshots", 0u64)?;
            write_string_attr(&root, "caution", crate::provenance::CAUTION)?;
            let lg = file.create_group("lattice")?;
            let shape: Vec<u64> = lattice.n.iter().map(|&v| v as u64).collect();
            write_array_attr(&lg, "shape_xyz", &shape)?;
            write_scalar_attr(&lg, "voxel_size", lattice.h)?;
            write_string_attr(&lg, "voxel_size_units", "m")?;
            write_array_attr(&lg, "origin", &lattice.origin)?;
            write_string_attr(&lg, "origin_units", "m")?;
            write_string_attr(&lg, "index_order", "datasets are [z][y][x]; x varies fastest")?;
            let pg = file.create_group("provenance")?;
            for (k, v) in provenance {
                write_string_attr(&pg, k, v)?;
            }
            write_string_dataset(&pg, "scenario_toml", scenario_toml)?;
            write_string_dataset(&pg, "resolved_toml", resolved_toml)?;
            file.create_group("snapshots")?;
            file.create_group("series")?;
            Ok(())
        })()
        .map_err(err("cannot write the run header"))?;
        if explicit_mesh {
            write_mesh(&file, lattice, compression).map_err(err("cannot write the mesh"))?;
        }
        file.flush().map_err(err("cannot flush the run file"))?;
        let xdmf = XdmfWriter::new(path, lattice, explicit_mesh);
        Ok(RunWriter {
            file,
            path: path.to_path_buf(),
            lattice: lattice.clone(),
            compression,
            finished: 0,
            series_len: 0,
            xdmf,
        })
    }

    /// Reopens an interrupted run file to continue it after its first `keep` snapshots: later
    /// snapshot groups are removed, the time series cut to `keep` values, and the XDMF sidecar
    /// rebuilt from what remains. The caller restores the simulation to the state of snapshot
    /// `keep - 1` (a checkpoint written right after it).
    pub fn reopen(path: &Path, lattice: &Lattice, keep: u64, compression: u8, explicit_mesh: bool) -> SimResult<Self> {
        let err = |what: &str| SimError::hdf5(path, what.to_string());
        let file = File::open_rw(path).map_err(err("cannot reopen the run file to resume it"))?;
        let mut xdmf = XdmfWriter::new(path, lattice, explicit_mesh);
        (|| -> hdf5::Result<()> {
            let root = file.as_group()?;
            let snaps = file.group("snapshots")?;
            let mut names = snaps.member_names()?;
            names.sort();
            for name in &names {
                let idx: u64 = name.parse().unwrap_or(u64::MAX);
                if idx >= keep {
                    snaps.unlink(name)?;
                    continue;
                }
                let g = snaps.group(name)?;
                let t: f64 = g.attr("time_s")?.read_scalar()?;
                let fields = match g.group("fields") {
                    Ok(fg) => xdmf_fields(&fg, &format!("/snapshots/{name}/fields"))?,
                    Err(_) => Vec::new(),
                };
                xdmf.push_snapshot(t, fields);
            }
            let series = file.group("series")?;
            for name in series.member_names()? {
                let ds = series.dataset(&name)?;
                if ds.shape()[0] as u64 > keep {
                    ds.resize(keep as usize)?;
                }
            }
            write_string_attr(&root, "status", "running")?;
            write_scalar_attr(&root, "finished_snapshots", keep)?;
            Ok(())
        })()
        .map_err(err("cannot cut the run file back to its checkpoint"))?;
        file.flush().map_err(err("cannot flush the run file"))?;
        xdmf.write()?;
        Ok(RunWriter {
            file,
            path: path.to_path_buf(),
            lattice: lattice.clone(),
            compression,
            finished: keep,
            series_len: keep as usize,
            xdmf,
        })
    }

    /// Path of the run file.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The open HDF5 file (for groups other than the snapshots, such as `/growth`).
    pub fn file(&self) -> &File {
        &self.file
    }

    /// Writes the growth frames' XDMF sidecar ([`XdmfWriter::growth`]) from the run file's
    /// `/growth` group; nothing when the run did not grow.
    pub fn index_growth(&self) -> SimResult<()> {
        if !self.file.link_exists("growth") {
            return Ok(());
        }
        let mut x = XdmfWriter::growth(&self.path, &self.lattice, self.xdmf.explicit());
        (|| -> hdf5::Result<()> {
            let root = self.file.group("growth")?;
            let mut names = root.member_names()?;
            names.retain(|n| n != "series");
            names.sort();
            for name in names {
                let g = root.group(&name)?;
                let t: f64 = g.attr("time_s")?.read_scalar()?;
                x.push_snapshot(t, xdmf_fields(&g, &format!("/growth/{name}"))?);
            }
            Ok(())
        })()
        .map_err(SimError::hdf5(&self.path, "cannot index the growth frames"))?;
        x.write()
    }

    /// Number of snapshots written completely.
    pub fn finished_snapshots(&self) -> u64 {
        self.finished
    }

    /// Starts snapshot number `self.finished_snapshots()` at simulated time `time_s`.
    pub fn begin_snapshot(&mut self, time_s: f64, step: u64) -> SimResult<SnapshotWriter<'_>> {
        let name = format!("{:06}", self.finished);
        let err = SimError::hdf5(&self.path, format!("cannot start snapshot {name}"));
        let group = (|| -> hdf5::Result<Group> {
            let snaps = self.file.group("snapshots")?;
            if snaps.link_exists(&name) {
                // Left over from an interrupted write of this snapshot: replace it.
                snaps.unlink(&name)?;
            }
            let g = snaps.create_group(&name)?;
            write_scalar_attr(&g, "time_s", time_s)?;
            write_scalar_attr(&g, "step", step)?;
            write_scalar_attr(&g, "complete", 0u8)?;
            Ok(g)
        })()
        .map_err(err)?;
        Ok(SnapshotWriter { run: self, group, name, time_s, fields: Vec::new() })
    }

    /// Appends one value to each time series (creating the series on first use).
    pub fn append_series(&mut self, values: &[(&str, &str, f64)]) -> SimResult<()> {
        let n = self.series_len + 1;
        let err = SimError::hdf5(&self.path, "cannot append to the time series");
        (|| -> hdf5::Result<()> {
            let g = self.file.group("series")?;
            for (name, units, v) in values {
                let ds = if g.link_exists(name) {
                    g.dataset(name)?
                } else {
                    let ds = g.new_dataset::<f64>().shape(0..).chunk(256).create(*name)?;
                    write_string_attr(&ds, "units", units)?;
                    ds.resize(self.series_len)?;
                    if self.series_len > 0 {
                        ds.write_slice(&vec![f64::NAN; self.series_len], 0..self.series_len)?;
                    }
                    ds
                };
                ds.resize(n)?;
                ds.write_slice(&[*v], n - 1..n)?;
            }
            Ok(())
        })()
        .map_err(err)?;
        self.series_len = n;
        Ok(())
    }

    /// Records a string attribute on `/provenance` (wall time and the like), flushed.
    pub fn set_provenance(&mut self, key: &str, value: &str) -> SimResult<()> {
        let err = SimError::hdf5(&self.path, format!("cannot record provenance {key}"));
        let g = self.file.group("provenance").map_err(SimError::hdf5(&self.path, "no provenance group"))?;
        write_string_attr(&g, key, value).map_err(err)
    }

    /// Writes `status` ("finished" or "failed: ...") and closes the file.
    pub fn close(self, status: &str) -> SimResult<()> {
        let err = SimError::hdf5(&self.path, "cannot close the run file");
        let root = self.file.as_group().map_err(SimError::hdf5(&self.path, "no root group"))?;
        write_string_attr(&root, "status", status).map_err(err)?;
        self.file.flush().map_err(SimError::hdf5(&self.path, "cannot flush the run file"))?;
        self.file.close().map_err(SimError::hdf5(&self.path, "cannot close the run file"))
    }
}

fn write_mesh(file: &File, l: &Lattice, compression: u8) -> hdf5::Result<()> {
    let g = file.create_group("mesh")?;
    let [nx, ny, nz] = l.n;
    let (px, py) = (nx + 1, ny + 1);
    let mut pts = Vec::with_capacity(px * py * (nz + 1) * 3);
    for k in 0..=nz {
        for j in 0..=ny {
            for i in 0..=nx {
                pts.push(l.origin[0] + i as f64 * l.h);
                pts.push(l.origin[1] + j as f64 * l.h);
                pts.push(l.origin[2] + k as f64 * l.h);
            }
        }
    }
    let p = |i: usize, j: usize, k: usize| (i + px * (j + py * k)) as u32;
    let mut hex = Vec::with_capacity(l.len() * 8);
    for k in 0..nz {
        for j in 0..ny {
            for i in 0..nx {
                hex.extend_from_slice(&[
                    p(i, j, k),
                    p(i + 1, j, k),
                    p(i + 1, j + 1, k),
                    p(i, j + 1, k),
                    p(i, j, k + 1),
                    p(i + 1, j, k + 1),
                    p(i + 1, j + 1, k + 1),
                    p(i, j + 1, k + 1),
                ]);
            }
        }
    }
    let npts = pts.len() / 3;
    let ds = g
        .new_dataset::<f64>()
        .shape([npts, 3])
        .chunk([npts.clamp(1, 65536), 3])
        .deflate(compression)
        .create("points")?;
    ds.write_raw(&pts)?;
    write_string_attr(&ds, "units", "m")?;
    let ds = g
        .new_dataset::<u32>()
        .shape([l.len(), 8])
        .chunk([l.len().clamp(1, 65536), 8])
        .shuffle()
        .deflate(compression)
        .create("hexahedra")?;
    ds.write_raw(&hex)?;
    write_string_attr(&ds, "units", "1")?;
    Ok(())
}

/// One snapshot being written; [`SnapshotWriter::finish`] marks it complete.
pub struct SnapshotWriter<'a> {
    run: &'a mut RunWriter,
    group: Group,
    name: String,
    time_s: f64,
    fields: Vec<XdmfField>,
}

impl SnapshotWriter<'_> {
    fn err(&self, what: String) -> impl FnOnce(hdf5::Error) -> SimError + use<> {
        SimError::hdf5(self.run.path.clone(), what)
    }

    /// Writes one lattice field under `fields/`.
    pub fn field(&mut self, f: FieldRef<'_>) -> SimResult<()> {
        let (name, units, description) = f.meta();
        let [nx, ny, nz] = self.run.lattice.n;
        let chunk = [nz.min(16), ny.min(64), nx.min(64)];
        let level = self.run.compression;
        let e = self.err(format!("cannot write field {name} in snapshot {}", self.name));
        let group = &self.group;
        let precision = (|| -> hdf5::Result<usize> {
            let g = if group.link_exists("fields") { group.group("fields")? } else { group.create_group("fields")? };
            let (ds, precision) = match f {
                FieldRef::F64(f) => {
                    let mut b = g.new_dataset::<f64>().shape([nz, ny, nx]).chunk(chunk);
                    if level > 0 {
                        b = b.shuffle().deflate(level);
                    }
                    let ds = b.create(name)?;
                    ds.write_raw(&f.data)?;
                    (ds, 8)
                }
                FieldRef::U8(f) => {
                    let mut b = g.new_dataset::<u8>().shape([nz, ny, nx]).chunk(chunk);
                    if level > 0 {
                        b = b.deflate(level);
                    }
                    let ds = b.create(name)?;
                    ds.write_raw(&f.data)?;
                    (ds, 1)
                }
            };
            write_string_attr(&ds, "units", units)?;
            write_string_attr(&ds, "description", description)?;
            Ok(precision)
        })()
        .map_err(e)?;
        let number_type = if precision == 1 { "UChar" } else { "Float" };
        self.fields.push(XdmfField {
            name: name.to_string(),
            h5path: format!("/snapshots/{}/fields/{name}", self.name),
            number_type,
            precision,
        });
        Ok(())
    }

    /// Writes a table (`cells`, `vessels`, `packets`) as one dataset per column.
    pub fn table(&mut self, table: &str, columns: &[Column<'_>]) -> SimResult<()> {
        let level = self.run.compression;
        let e = self.err(format!("cannot write table {table} in snapshot {}", self.name));
        let group = &self.group;
        (|| -> hdf5::Result<()> {
            let g = group.create_group(table)?;
            let rows = columns.first().map_or(0, |c| c.data.len());
            write_scalar_attr(&g, "rows", rows as u64)?;
            for c in columns {
                assert_eq!(c.data.len(), rows, "column {} of table {table} has the wrong length", c.name);
                let chunk = rows.clamp(1, 1 << 16);
                macro_rules! put {
                    ($t:ty, $v:expr) => {{
                        let mut b = g.new_dataset::<$t>().shape(rows).chunk(chunk);
                        if level > 0 && rows > 0 {
                            b = b.shuffle().deflate(level);
                        }
                        let ds = b.create(c.name)?;
                        ds.write_raw($v)?;
                        ds
                    }};
                }
                let ds = match &c.data {
                    ColumnData::F64(v) => put!(f64, *v),
                    ColumnData::U64(v) => put!(u64, *v),
                    ColumnData::U32(v) => put!(u32, *v),
                    ColumnData::U8(v) => put!(u8, *v),
                    ColumnData::I64(v) => put!(i64, *v),
                };
                write_string_attr(&ds, "units", c.units)?;
                write_string_attr(&ds, "description", c.description)?;
            }
            Ok(())
        })()
        .map_err(e)
    }

    /// Appends this snapshot's values to the time series; they are flushed with the snapshot.
    pub fn series(&mut self, values: &[(&str, &str, f64)]) -> SimResult<()> {
        self.run.append_series(values)
    }

    /// Writes an attribute on the snapshot group (a scalar summary).
    pub fn scalar(&mut self, name: &str, value: f64) -> SimResult<()> {
        let e = self.err(format!("cannot write {name} in snapshot {}", self.name));
        write_scalar_attr(&self.group, name, value).map_err(e)
    }

    /// Marks the snapshot complete, flushes the file to disk and updates the XDMF sidecar.
    pub fn finish(self) -> SimResult<()> {
        let path = self.run.path.clone();
        let e = |what: &str| SimError::hdf5(&path, format!("{what} (snapshot {})", self.name));
        write_scalar_attr(&self.group, "complete", 1u8).map_err(e("cannot mark the snapshot complete"))?;
        self.run.finished += 1;
        let root = self.run.file.as_group().map_err(e("no root group"))?;
        write_scalar_attr(&root, "finished_snapshots", self.run.finished).map_err(e("cannot count the snapshot"))?;
        self.run.file.flush().map_err(e("cannot flush the run file"))?;
        self.run.xdmf.push_snapshot(self.time_s, self.fields);
        self.run.xdmf.write()?;
        Ok(())
    }
}

/// The datasets of `group` (at `h5path` in the file) as sidecar fields, in name order (creation
/// order is not tracked; the writer's order is alphabetical within each part): one-byte
/// datasets as unsigned chars, the others as 8-byte floats.
fn xdmf_fields(group: &hdf5::Group, h5path: &str) -> hdf5::Result<Vec<XdmfField>> {
    let mut names = group.member_names()?;
    names.sort();
    names
        .into_iter()
        .map(|f| {
            let size = group.dataset(&f)?.dtype()?.size();
            let (number_type, precision) = if size == 1 { ("UChar", 1) } else { ("Float", 8) };
            Ok(XdmfField { h5path: format!("{h5path}/{f}"), name: f, number_type, precision })
        })
        .collect()
}
