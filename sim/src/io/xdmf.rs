//! The XDMF 3 sidecar (`<run>.xmf`): an XML index that lets general visualisation tools open the
//! fields of the run file directly, as a time series of cell-centred attributes.
//!
//! Two topologies: explicit hexahedra (points and connectivity stored under `/mesh` in the run
//! file; understood by every XDMF reader) or the compact regular grid `3DCoRectMesh`
//! (origin and spacing only). The sidecar is rewritten atomically after each finished snapshot.
//! A run that grew its tumour before dosing has a second sidecar, `<run>.growth.xmf`, over the
//! frames of its `/growth` group.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use crate::error::{SimError, SimResult};
use crate::lattice::Lattice;

/// One field of one snapshot, as the sidecar references it.
#[derive(Debug, Clone)]
pub struct XdmfField {
    pub name: String,
    pub h5path: String,
    pub number_type: &'static str,
    pub precision: usize,
}

/// Keeps the list of finished frames (snapshots, or growth frames) and rewrites the sidecar.
pub struct XdmfWriter {
    path: PathBuf,
    h5name: String,
    lattice: Lattice,
    explicit: bool,
    /// Name of the temporal collection and prefix of its frames.
    collection: &'static str,
    frame: &'static str,
    steps: Vec<(f64, Vec<XdmfField>)>,
}

impl XdmfWriter {
    /// The snapshots' sidecar beside `h5_path`, with the same stem and the extension `.xmf`.
    pub fn new(h5_path: &Path, lattice: &Lattice, explicit: bool) -> Self {
        Self::with(h5_path.with_extension("xmf"), h5_path, lattice, explicit, "snapshots", "snapshot")
    }

    /// The growth frames' sidecar (`<run>.growth.xmf`): the frames of the run file's `/growth`
    /// group, times before dosing negative. A separate file, so that each sidecar is one time
    /// series (readers open the last temporal collection of a file).
    pub fn growth(h5_path: &Path, lattice: &Lattice, explicit: bool) -> Self {
        Self::with(h5_path.with_extension("growth.xmf"), h5_path, lattice, explicit, "growth", "growth")
    }

    fn with(
        path: PathBuf,
        h5_path: &Path,
        lattice: &Lattice,
        explicit: bool,
        collection: &'static str,
        frame: &'static str,
    ) -> Self {
        XdmfWriter {
            path,
            h5name: h5_path.file_name().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default(),
            lattice: lattice.clone(),
            explicit,
            collection,
            frame,
            steps: Vec::new(),
        }
    }

    /// Path of the sidecar.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// Whether the sidecar uses the explicit hexahedral mesh.
    pub fn explicit(&self) -> bool {
        self.explicit
    }

    /// Adds a finished snapshot (or growth frame).
    pub fn push_snapshot(&mut self, time_s: f64, mut fields: Vec<XdmfField>) {
        // Alphabetical order: the same sidecar whether a run was written in one go or resumed.
        fields.sort_by(|a, b| a.name.cmp(&b.name));
        self.steps.push((time_s, fields));
    }

    /// The XML text.
    pub fn render(&self) -> String {
        let l = &self.lattice;
        let [nx, ny, nz] = l.n;
        let h5 = xml_escape(&self.h5name);
        let mut s = String::new();
        s.push_str("<?xml version=\"1.0\"?>\n");
        s.push_str("<Xdmf Version=\"3.0\" xmlns:xi=\"http://www.w3.org/2001/XInclude\">\n<Domain>\n");
        s.push_str("<Grid Name=\"lattice\" GridType=\"Uniform\">\n");
        if self.explicit {
            let npts = (nx + 1) * (ny + 1) * (nz + 1);
            let _ = writeln!(
                s,
                "<Geometry GeometryType=\"XYZ\"><DataItem DataType=\"Float\" Precision=\"8\" Dimensions=\"{npts} 3\" Format=\"HDF\">{h5}:/mesh/points</DataItem></Geometry>"
            );
            let _ = writeln!(
                s,
                "<Topology TopologyType=\"Hexahedron\" NumberOfElements=\"{}\" NodesPerElement=\"8\"><DataItem DataType=\"UInt\" Precision=\"4\" Dimensions=\"{} 8\" Format=\"HDF\">{h5}:/mesh/hexahedra</DataItem></Topology>",
                l.len(),
                l.len()
            );
        } else {
            let _ = writeln!(
                s,
                "<Topology TopologyType=\"3DCoRectMesh\" Dimensions=\"{} {} {}\"/>",
                nz + 1,
                ny + 1,
                nx + 1
            );
            let _ = writeln!(
                s,
                "<Geometry GeometryType=\"ORIGIN_DXDYDZ\"><DataItem Dimensions=\"3\" Format=\"XML\">{:e} {:e} {:e}</DataItem><DataItem Dimensions=\"3\" Format=\"XML\">{:e} {:e} {:e}</DataItem></Geometry>",
                l.origin[2], l.origin[1], l.origin[0], l.h, l.h, l.h
            );
        }
        s.push_str("</Grid>\n");
        let _ = writeln!(s, "<Grid Name=\"{}\" GridType=\"Collection\" CollectionType=\"Temporal\">", self.collection);
        for (i, (t, fields)) in self.steps.iter().enumerate() {
            let _ = writeln!(s, "<Grid Name=\"{}_{i:06}\" GridType=\"Uniform\">", self.frame);
            s.push_str("<xi:include xpointer=\"xpointer(//Grid[@Name=&quot;lattice&quot;]/*[self::Topology or self::Geometry])\"/>\n");
            let _ = writeln!(s, "<Time Value=\"{t:e}\"/>");
            for f in fields {
                let _ = writeln!(
                    s,
                    "<Attribute Name=\"{}\" AttributeType=\"Scalar\" Center=\"Cell\"><DataItem DataType=\"{}\" Precision=\"{}\" Dimensions=\"{nz} {ny} {nx}\" Format=\"HDF\">{h5}:{}</DataItem></Attribute>",
                    xml_escape(&f.name),
                    f.number_type,
                    f.precision,
                    xml_escape(&f.h5path)
                );
            }
            s.push_str("</Grid>\n");
        }
        s.push_str("</Grid>\n</Domain>\n</Xdmf>\n");
        s
    }

    /// Writes the sidecar through a temporary file and a rename, so it is never half written.
    pub fn write(&self) -> SimResult<()> {
        let tmp = self.path.with_extension("xmf.tmp");
        std::fs::write(&tmp, self.render()).map_err(SimError::io(&tmp, "cannot write the XDMF sidecar"))?;
        std::fs::rename(&tmp, &self.path).map_err(SimError::io(&self.path, "cannot replace the XDMF sidecar"))
    }
}

fn xml_escape(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}
