//! Import of measured networks: a pair of CSV tables (nodes, segments) or a VTK legacy polydata
//! file of polylines. Both formats are documented in DEVELOPERS.md ("Network files"). Every
//! problem is a [`SimError::Input`] naming the file and the line.

use std::collections::HashMap;
use std::path::Path;

use super::network::{Network, NodeBc, Segment, VesselKind, dist};
use super::viscosity::MIN_RADIUS;
use crate::error::{SimError, SimResult};
use crate::params::{NetworkParams, TumourGeometry};
use crate::units::{MMHG, NM, UM};

fn err(path: &Path, what: impl Into<String>) -> SimError {
    SimError::Input { path: path.to_path_buf(), what: what.into() }
}

fn read(path: &Path) -> SimResult<String> {
    std::fs::read_to_string(path).map_err(SimError::io(path, "cannot read the network file"))
}

/// Per-segment values a file may leave out.
#[derive(Debug, Clone, Copy, Default)]
struct Optional {
    length: Option<f64>,
    wall_thickness: Option<f64>,
    pore_radius: Option<f64>,
    pore_fraction: Option<f64>,
    maturity: Option<f64>,
    kind: Option<VesselKind>,
}

/// A segment as read: node indices, radius, optional values, its id and line for messages.
struct RawSegment {
    a: u32,
    b: u32,
    radius: f64,
    opt: Optional,
    id: String,
    line: usize,
}

/// Completes the segments with per-type defaults and checks the network.
fn build(
    path: &Path,
    nodes: Vec<[f64; 3]>,
    mut bc: Vec<NodeBc>,
    raw: Vec<RawSegment>,
    p: &NetworkParams,
    g: &TumourGeometry,
) -> SimResult<Network> {
    if raw.is_empty() {
        return Err(err(path, "the network has no segments"));
    }
    let mut segments = Vec::with_capacity(raw.len());
    for r in &raw {
        let (pa, pb) = (nodes[r.a as usize], nodes[r.b as usize]);
        let at = format!("line {}: segment {}", r.line, r.id);
        if r.a == r.b {
            return Err(err(path, format!("{at} starts and ends at the same node")));
        }
        if !(r.radius.is_finite() && r.radius > 0.0) {
            return Err(err(path, format!("{at} has radius {} um: expected a radius > 0", r.radius / UM)));
        }
        if r.radius < MIN_RADIUS {
            return Err(err(
                path,
                format!(
                    "{at} has radius {} um: expected at least {} um (the range of the blood viscosity law)",
                    r.radius / UM,
                    MIN_RADIUS / UM
                ),
            ));
        }
        let chord = dist(pa, pb);
        if chord <= 0.0 {
            return Err(err(path, format!("{at} joins two nodes at the same position (length 0)")));
        }
        let length = match r.opt.length {
            Some(l) if !(l.is_finite() && l > 0.0) => {
                return Err(err(path, format!("{at} has length {} um: expected a length > 0", l / UM)));
            }
            Some(l) if l < chord * (1.0 - 1e-9) => {
                return Err(err(
                    path,
                    format!("{at} has length {} um, shorter than the {} um between its nodes", l / UM, chord / UM),
                ));
            }
            Some(l) => l,
            None => chord,
        };
        let midp = [(pa[0] + pb[0]) / 2.0, (pa[1] + pb[1]) / 2.0, (pa[2] + pb[2]) / 2.0];
        let kind = r.opt.kind.unwrap_or(if g.contains(midp) { VesselKind::Tumour } else { VesselKind::Host });
        let k = kind.index();
        let default_pore = if k == 0 { p.host_pore_radius } else { p.tumour_pore_median };
        let seg = Segment {
            a: r.a,
            b: r.b,
            radius: r.radius,
            length,
            wall_thickness: r.opt.wall_thickness.unwrap_or(p.wall_thickness[k]),
            pore_radius: r.opt.pore_radius.unwrap_or(default_pore),
            pore_fraction: r.opt.pore_fraction.unwrap_or(p.pore_fraction[k]),
            maturity: r.opt.maturity.unwrap_or(if k == 0 { 1.0 } else { 0.5 }),
            kind,
        };
        for (name, v, ok) in [
            ("wall_thickness_um", seg.wall_thickness / UM, seg.wall_thickness > 0.0),
            ("pore_radius_nm", seg.pore_radius / NM, seg.pore_radius > 0.0),
            ("pore_fraction", seg.pore_fraction, (0.0..=1.0).contains(&seg.pore_fraction)),
            ("maturity", seg.maturity, (0.0..=1.0).contains(&seg.maturity)),
        ] {
            if !(ok && v.is_finite()) {
                let want = if name == "pore_fraction" || name == "maturity" { "in [0, 1]" } else { "> 0" };
                return Err(err(path, format!("{at} has {name} = {v}: expected a value {want}")));
            }
        }
        segments.push(seg);
    }
    let mut net = Network { nodes, bc: std::mem::take(&mut bc), segments, closed: Vec::new(), revision: 0 };
    // Disconnected pieces.
    let (piece, count) = net.pieces();
    let deg = net.degrees();
    let mut seg_count = vec![0usize; count];
    for s in &net.segments {
        seg_count[piece[s.a as usize] as usize] += 1;
    }
    let used: Vec<usize> = (0..count).filter(|&c| seg_count[c] > 0).collect();
    if used.len() > 1 && !p.keep_disconnected {
        let mut sizes: Vec<(usize, usize)> = used.iter().map(|&c| (seg_count[c], c)).collect();
        sizes.sort_by(|x, y| y.0.cmp(&x.0).then(x.1.cmp(&y.1)));
        let small: Vec<String> = sizes[1..]
            .iter()
            .take(5)
            .map(|&(_, c)| {
                let i = net.segments.iter().position(|s| piece[s.a as usize] as usize == c).unwrap();
                format!("segment {} (line {})", raw[i].id, raw[i].line)
            })
            .collect();
        let list: Vec<String> = sizes.iter().take(6).map(|s| s.0.to_string()).collect();
        return Err(err(
            path,
            format!(
                "the network falls into {} disconnected pieces of {} segments; the smaller pieces include {}; \
                 connect or remove them, or set vessels.network.keep_disconnected = true",
                used.len(),
                list.join(", "),
                small.join(", ")
            ),
        ));
    }
    // Boundary conditions: as given, or on the dead ends along the flow axis.
    if !net.bc.iter().any(|b| !matches!(b, NodeBc::None)) {
        let ax = p.flow_axis;
        let ends: Vec<usize> = (0..net.nodes.len()).filter(|&i| deg[i] == 1).collect();
        if ends.len() < 2 {
            return Err(err(
                path,
                "the file gives no boundary conditions and the network has fewer than two dead ends to put them on",
            ));
        }
        let lo = ends.iter().map(|&i| net.nodes[i][ax]).fold(f64::INFINITY, f64::min);
        let hi = ends.iter().map(|&i| net.nodes[i][ax]).fold(f64::NEG_INFINITY, f64::max);
        for &i in &ends {
            let t = if hi > lo { (net.nodes[i][ax] - lo) / (hi - lo) } else { 0.5 };
            net.bc[i] = NodeBc::Pressure((1.0 - t) * p.inlet_pressure + t * p.outlet_pressure);
        }
    }
    net.drop_unused_nodes();
    net.check().map_err(|w| err(path, w))?;
    Ok(net)
}

/// Splits a CSV line (no quoting) into trimmed cells.
fn cells(line: &str) -> Vec<&str> {
    line.split(',').map(str::trim).collect()
}

/// Data lines of a CSV text: (1-based line number, cells), comments and blank lines skipped.
fn csv_lines(text: &str) -> impl Iterator<Item = (usize, Vec<&str>)> {
    text.lines().enumerate().filter_map(|(i, l)| {
        let t = l.trim();
        (!t.is_empty() && !t.starts_with('#')).then(|| (i + 1, cells(t)))
    })
}

struct Header {
    names: Vec<String>,
    line: usize,
}

impl Header {
    fn col(&self, path: &Path, name: &str) -> SimResult<usize> {
        self.names.iter().position(|n| n == name).ok_or_else(|| {
            err(
                path,
                format!("line {}: the header lacks the column `{name}` (it has {})", self.line, self.names.join(", ")),
            )
        })
    }
    fn opt(&self, name: &str) -> Option<usize> {
        self.names.iter().position(|n| n == name)
    }
    fn check_known(&self, path: &Path, known: &[&str]) -> SimResult<()> {
        for n in &self.names {
            if !known.contains(&n.as_str()) {
                return Err(err(
                    path,
                    format!("line {}: unknown column `{n}`: expected columns among {}", self.line, known.join(", ")),
                ));
            }
        }
        Ok(())
    }
}

fn number(path: &Path, line: usize, name: &str, cell: Option<&&str>) -> SimResult<Option<f64>> {
    match cell {
        None => Err(err(path, format!("line {line}: the row has no `{name}` value"))),
        Some(&"") => Ok(None),
        Some(c) => c
            .parse::<f64>()
            .ok()
            .filter(|v| v.is_finite())
            .map(Some)
            .ok_or_else(|| err(path, format!("line {line}: `{name}` = {c:?} is not a finite number"))),
    }
}

fn required(path: &Path, line: usize, name: &str, cell: Option<&&str>) -> SimResult<f64> {
    number(path, line, name, cell)?.ok_or_else(|| err(path, format!("line {line}: `{name}` is empty")))
}

const NODE_COLUMNS: &[&str] = &["id", "x_um", "y_um", "z_um", "pressure_mmHg", "inflow_um3_per_s"];
const SEGMENT_COLUMNS: &[&str] = &[
    "id",
    "node_a",
    "node_b",
    "radius_um",
    "length_um",
    "wall_thickness_um",
    "pore_radius_nm",
    "pore_fraction",
    "maturity",
    "kind",
];

/// Reads a network from a node table and a segment table (CSV, see DEVELOPERS.md).
pub fn read_csv(nodes_path: &Path, segments_path: &Path, p: &NetworkParams, g: &TumourGeometry) -> SimResult<Network> {
    let text = read(nodes_path)?;
    let mut rows = csv_lines(&text);
    let (hl, h) = rows.next().ok_or_else(|| err(nodes_path, "the node table is empty"))?;
    let head = Header { names: h.iter().map(|s| s.to_string()).collect(), line: hl };
    head.check_known(nodes_path, NODE_COLUMNS)?;
    let (ci, cx, cy, cz) = (
        head.col(nodes_path, "id")?,
        head.col(nodes_path, "x_um")?,
        head.col(nodes_path, "y_um")?,
        head.col(nodes_path, "z_um")?,
    );
    let (cp, cq) = (head.opt("pressure_mmHg"), head.opt("inflow_um3_per_s"));
    let mut index: HashMap<String, (u32, usize)> = HashMap::new();
    let mut nodes = Vec::new();
    let mut bc = Vec::new();
    for (line, c) in rows {
        if c.len() != head.names.len() {
            return Err(err(nodes_path, format!("line {line}: {} values for {} columns", c.len(), head.names.len())));
        }
        let id = c[ci].to_string();
        if id.is_empty() {
            return Err(err(nodes_path, format!("line {line}: empty node id")));
        }
        let x = [
            required(nodes_path, line, "x_um", c.get(cx))? * UM,
            required(nodes_path, line, "y_um", c.get(cy))? * UM,
            required(nodes_path, line, "z_um", c.get(cz))? * UM,
        ];
        let pr = match cp {
            Some(k) => number(nodes_path, line, "pressure_mmHg", c.get(k))?,
            None => None,
        };
        let q = match cq {
            Some(k) => number(nodes_path, line, "inflow_um3_per_s", c.get(k))?,
            None => None,
        };
        let b = match (pr, q) {
            (Some(_), Some(_)) => {
                return Err(err(nodes_path, format!("line {line}: node {id} has both a pressure and an inflow")));
            }
            (Some(v), None) => NodeBc::Pressure(v * MMHG),
            (None, Some(v)) => NodeBc::Inflow(v * UM * UM * UM),
            (None, None) => NodeBc::None,
        };
        if let Some((_, first)) = index.insert(id.clone(), (nodes.len() as u32, line)) {
            return Err(err(nodes_path, format!("line {line}: node id {id} is already used on line {first}")));
        }
        nodes.push(x);
        bc.push(b);
    }
    let text = read(segments_path)?;
    let mut rows = csv_lines(&text);
    let (hl, h) = rows.next().ok_or_else(|| err(segments_path, "the segment table is empty"))?;
    let head = Header { names: h.iter().map(|s| s.to_string()).collect(), line: hl };
    head.check_known(segments_path, SEGMENT_COLUMNS)?;
    let sp = segments_path;
    let (ci, ca, cb, cr) =
        (head.col(sp, "id")?, head.col(sp, "node_a")?, head.col(sp, "node_b")?, head.col(sp, "radius_um")?);
    let mut raw = Vec::new();
    let mut seen: HashMap<String, usize> = HashMap::new();
    for (line, c) in rows {
        if c.len() != head.names.len() {
            return Err(err(sp, format!("line {line}: {} values for {} columns", c.len(), head.names.len())));
        }
        let id = c[ci].to_string();
        if let Some(first) = seen.insert(id.clone(), line) {
            return Err(err(sp, format!("line {line}: segment id {id} is already used on line {first}")));
        }
        let node = |k: usize, name: &str| -> SimResult<u32> {
            index.get(c[k]).map(|v| v.0).ok_or_else(|| {
                err(
                    sp,
                    format!(
                        "line {line}: segment {id} refers to node {:?} ({name}), which the node table does not define",
                        c[k]
                    ),
                )
            })
        };
        let (a, b) = (node(ca, "node_a")?, node(cb, "node_b")?);
        let radius = required(sp, line, "radius_um", c.get(cr))? * UM;
        let get = |name: &str| -> SimResult<Option<f64>> {
            match head.opt(name) {
                Some(k) => number(sp, line, name, c.get(k)),
                None => Ok(None),
            }
        };
        let kind = match head.opt("kind").map(|k| c[k]) {
            None | Some("") => None,
            Some("host") => Some(VesselKind::Host),
            Some("tumour") => Some(VesselKind::Tumour),
            Some(other) => {
                return Err(err(sp, format!("line {line}: kind = {other:?}: expected \"host\", \"tumour\" or empty")));
            }
        };
        let opt = Optional {
            length: get("length_um")?.map(|v| v * UM),
            wall_thickness: get("wall_thickness_um")?.map(|v| v * UM),
            pore_radius: get("pore_radius_nm")?.map(|v| v * NM),
            pore_fraction: get("pore_fraction")?,
            maturity: get("maturity")?,
            kind,
        };
        raw.push(RawSegment { a, b, radius, opt, id, line });
    }
    build(sp, nodes, bc, raw, p, g)
}

/// Tokens of a VTK text with their line numbers.
struct Tokens<'a> {
    toks: Vec<(usize, &'a str)>,
    at: usize,
    path: &'a Path,
}

impl<'a> Tokens<'a> {
    fn next(&mut self, what: &str) -> SimResult<(usize, &'a str)> {
        let t = self
            .toks
            .get(self.at)
            .copied()
            .ok_or_else(|| err(self.path, format!("the file ends where {what} was expected")))?;
        self.at += 1;
        Ok(t)
    }
    fn peek(&self) -> Option<&'a str> {
        self.toks.get(self.at).map(|t| t.1)
    }
    fn count(&mut self, what: &str) -> SimResult<usize> {
        let (l, t) = self.next(what)?;
        t.parse().map_err(|_| err(self.path, format!("line {l}: {what} = {t:?} is not a whole number")))
    }
    fn float(&mut self, what: &str) -> SimResult<(usize, f64)> {
        let (l, t) = self.next(what)?;
        let v: f64 = t.parse().map_err(|_| err(self.path, format!("line {l}: {what} = {t:?} is not a number")))?;
        Ok((l, v))
    }
    fn keyword(&mut self, want: &str) -> SimResult<usize> {
        let (l, t) = self.next(want)?;
        if !t.eq_ignore_ascii_case(want) {
            return Err(err(self.path, format!("line {l}: expected `{want}`, found `{t}`")));
        }
        Ok(l)
    }
}

/// Reads a network from VTK legacy polydata (ASCII; see DEVELOPERS.md).
pub fn read_vtk(path: &Path, p: &NetworkParams, g: &TumourGeometry) -> SimResult<Network> {
    let text = read(path)?;
    let mut lines = text.lines();
    let first = lines.next().unwrap_or("");
    if !first.starts_with("# vtk DataFile Version") {
        return Err(err(path, "line 1: expected the VTK legacy header `# vtk DataFile Version ...`"));
    }
    let _title = lines.next();
    let fmt = lines.next().unwrap_or("").trim();
    if !fmt.eq_ignore_ascii_case("ASCII") {
        return Err(err(path, format!("line 3: format {fmt:?}: only ASCII VTK files are read")));
    }
    let toks: Vec<(usize, &str)> =
        text.lines().enumerate().skip(3).flat_map(|(i, l)| l.split_whitespace().map(move |t| (i + 1, t))).collect();
    let mut t = Tokens { toks, at: 0, path };
    t.keyword("DATASET")?;
    let (l, kind) = t.next("the dataset type")?;
    if !kind.eq_ignore_ascii_case("POLYDATA") {
        return Err(err(path, format!("line {l}: dataset {kind}: expected POLYDATA")));
    }
    let mut points: Vec<[f64; 3]> = Vec::new();
    let mut lines_cells: Vec<(usize, Vec<u32>)> = Vec::new();
    let mut point_data: HashMap<String, Vec<f64>> = HashMap::new();
    let mut cell_data: HashMap<String, Vec<f64>> = HashMap::new();
    let mut section = "";
    while let Some(word) = t.peek() {
        let (l, word) = (t.next("a keyword")?.0, word.to_ascii_uppercase());
        match word.as_str() {
            "POINTS" => {
                let n = t.count("the number of points")?;
                let _ty = t.next("the point type")?;
                for _ in 0..n {
                    let x = t.float("a coordinate")?.1;
                    let y = t.float("a coordinate")?.1;
                    let z = t.float("a coordinate")?.1;
                    points.push([x * p.vtk_length_unit, y * p.vtk_length_unit, z * p.vtk_length_unit]);
                }
            }
            "LINES" => {
                let n = t.count("the number of lines")?;
                let size = t.count("the size of the line list")?;
                if t.peek().is_some_and(|w| w.eq_ignore_ascii_case("OFFSETS")) {
                    // VTK 5.1 layout: OFFSETS and CONNECTIVITY arrays.
                    t.keyword("OFFSETS")?;
                    let _ty = t.next("the offset type")?;
                    let offs: Vec<usize> = (0..n).map(|_| t.count("an offset")).collect::<SimResult<_>>()?;
                    t.keyword("CONNECTIVITY")?;
                    let _ty = t.next("the connectivity type")?;
                    let mut conn = Vec::with_capacity(size);
                    for _ in 0..size {
                        let (ll, v) = t.next("a point index")?;
                        conn.push((
                            ll,
                            v.parse::<u32>().map_err(|_| err(path, format!("line {ll}: point index {v:?}")))?,
                        ));
                    }
                    for w in offs.windows(2) {
                        if w[1] < w[0] || w[1] > conn.len() {
                            return Err(err(
                                path,
                                format!("line {l}: offsets are not increasing within the connectivity"),
                            ));
                        }
                        let ll = conn.get(w[0]).map_or(l, |c| c.0);
                        lines_cells.push((ll, conn[w[0]..w[1]].iter().map(|c| c.1).collect()));
                    }
                } else {
                    let mut used = 0;
                    for _ in 0..n {
                        let (ll, k) = t.next("a line's point count")?;
                        let k: usize = k.parse().map_err(|_| err(path, format!("line {ll}: point count {k:?}")))?;
                        let mut ids = Vec::with_capacity(k);
                        for _ in 0..k {
                            let (lp, v) = t.next("a point index")?;
                            ids.push(v.parse::<u32>().map_err(|_| err(path, format!("line {lp}: point index {v:?}")))?);
                        }
                        used += k + 1;
                        lines_cells.push((ll, ids));
                    }
                    if used != size {
                        return Err(err(path, format!("line {l}: LINES says {size} values, the lines hold {used}")));
                    }
                }
            }
            "POINT_DATA" | "CELL_DATA" => {
                let n = t.count("the number of values")?;
                let want = if word == "POINT_DATA" { points.len() } else { lines_cells.len() };
                if n != want {
                    return Err(err(
                        path,
                        format!(
                            "line {l}: {word} {n} for {want} {}",
                            if word == "POINT_DATA" { "points" } else { "lines" }
                        ),
                    ));
                }
                section = if word == "POINT_DATA" { "point" } else { "cell" };
            }
            "SCALARS" => {
                let (_, name) = t.next("the array name")?;
                let _ty = t.next("the array type")?;
                if t.peek().is_some_and(|w| w.parse::<usize>().is_ok()) {
                    let (lc, c) = t.next("components")?;
                    if c != "1" {
                        return Err(err(path, format!("line {lc}: array {name} has {c} components: expected 1")));
                    }
                }
                if t.peek().is_some_and(|w| w.eq_ignore_ascii_case("LOOKUP_TABLE")) {
                    t.next("LOOKUP_TABLE")?;
                    t.next("the table name")?;
                }
                let (n, map) = match section {
                    "point" => (points.len(), &mut point_data),
                    "cell" => (lines_cells.len(), &mut cell_data),
                    _ => return Err(err(path, format!("line {l}: SCALARS before POINT_DATA or CELL_DATA"))),
                };
                let vals: Vec<f64> = (0..n).map(|_| t.float(name).map(|v| v.1)).collect::<SimResult<_>>()?;
                map.insert(name.to_string(), vals);
            }
            "FIELD" => {
                let _name = t.next("the field name")?;
                let arrays = t.count("the number of arrays")?;
                for _ in 0..arrays {
                    let (la, name) = t.next("the array name")?;
                    let comps = t.count("components")?;
                    let tuples = t.count("tuples")?;
                    let _ty = t.next("the array type")?;
                    let vals: Vec<f64> =
                        (0..comps * tuples).map(|_| t.float(name).map(|v| v.1)).collect::<SimResult<_>>()?;
                    if comps != 1 {
                        continue;
                    }
                    let map = match section {
                        "point" => &mut point_data,
                        "cell" => &mut cell_data,
                        _ => return Err(err(path, format!("line {la}: FIELD before POINT_DATA or CELL_DATA"))),
                    };
                    map.insert(name.to_string(), vals);
                }
            }
            "METADATA" => {
                // Skip until a blank-separated keyword we know.
                while let Some(w) = t.peek() {
                    if ["POINT_DATA", "CELL_DATA", "LINES", "SCALARS", "FIELD"]
                        .contains(&w.to_ascii_uppercase().as_str())
                    {
                        break;
                    }
                    t.next("metadata")?;
                }
            }
            "VERTICES" | "POLYGONS" | "TRIANGLE_STRIPS" => {
                return Err(err(path, format!("line {l}: {word}: a vessel network holds LINES only")));
            }
            other => return Err(err(path, format!("line {l}: unexpected `{other}`"))),
        }
    }
    if points.is_empty() {
        return Err(err(path, "the file has no POINTS"));
    }
    let np = points.len();
    let mut bc = vec![NodeBc::None; np];
    let pres = point_data.get("pressure_mmHg");
    let infl = point_data.get("inflow_um3_per_s");
    for i in 0..np {
        let pr = pres.map(|v| v[i]).filter(|v| !v.is_nan());
        let q = infl.map(|v| v[i]).filter(|v| !v.is_nan() && *v != 0.0);
        bc[i] = match (pr, q) {
            (Some(_), Some(_)) => return Err(err(path, format!("point {i} has both a pressure and an inflow"))),
            (Some(v), None) => NodeBc::Pressure(v * MMHG),
            (None, Some(v)) => NodeBc::Inflow(v * UM * UM * UM),
            _ => NodeBc::None,
        };
    }
    let point_radius = point_data.get("radius_um");
    let cell_radius = cell_data.get("radius_um");
    if point_radius.is_none() && cell_radius.is_none() {
        return Err(err(path, "the file has no `radius_um` array (POINT_DATA or CELL_DATA)"));
    }
    let cell_opt = |name: &str, c: usize| cell_data.get(name).map(|v| v[c]);
    let mut raw = Vec::new();
    for (c, (line, ids)) in lines_cells.iter().enumerate() {
        if ids.len() < 2 {
            return Err(err(path, format!("line {line}: line {c} has {} point(s): expected at least 2", ids.len())));
        }
        for &i in ids {
            if i as usize >= np {
                return Err(err(path, format!("line {line}: line {c} refers to point {i} of {np}")));
            }
        }
        let kind = match cell_opt("kind", c) {
            None => None,
            Some(0.0) => Some(VesselKind::Host),
            Some(1.0) => Some(VesselKind::Tumour),
            Some(v) => return Err(err(path, format!("line {c} has kind = {v}: expected 0 (host) or 1 (tumour)"))),
        };
        for (k, w) in ids.windows(2).enumerate() {
            let radius = match (cell_radius, point_radius) {
                (Some(v), _) => v[c],
                (None, Some(v)) => 0.5 * (v[w[0] as usize] + v[w[1] as usize]),
                _ => unreachable!(),
            } * UM;
            let opt = Optional {
                length: None,
                wall_thickness: cell_opt("wall_thickness_um", c).map(|v| v * UM),
                pore_radius: cell_opt("pore_radius_nm", c).map(|v| v * NM),
                pore_fraction: cell_opt("pore_fraction", c),
                maturity: cell_opt("maturity", c),
                kind,
            };
            raw.push(RawSegment { a: w[0], b: w[1], radius, opt, id: format!("{c}.{k}"), line: *line });
        }
    }
    build(path, points, bc, raw, p, g)
}
