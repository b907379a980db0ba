//! Seeded network generators: a host capillary bed fed and drained at two opposite faces of the
//! lattice box, and tumour vessels inside the tumour (dilated, tortuous, dense at the rim,
//! sparse in a necrotic core, with a pore radius drawn per segment).
//!
//! Every random decision draws from `rng::stream(seed, Domain::Vessels, id, 0)` with an `id`
//! that names the node or segment it concerns, so a network depends only on the seed and the
//! parameters.
//!
//! Host bed: capillaries run along the flow axis in parallel lines spaced `capillary_spacing`
//! apart (intercapillary distances of about 50 to 150 um are usual in tissues; common practice),
//! from a node on the inlet face to a node on the outlet face, with nodes every spacing along the
//! way, displaced at random by up to `position_jitter` spacings; neighbouring lines are
//! cross-connected with probability `cross_link_probability` per node. Inlet nodes hold the inlet
//! pressure, outlet nodes the outlet pressure. Radii are log-normal.
//!
//! Tumour: with `rho` the normalised distance from the tumour centre (0 at the centre, 1 on its
//! surface), segments reaching into the necrotic core (`rho < necrotic_core_fraction` at an end
//! or the middle) survive with probability `core_vessel_survival`; extra nodes fill the rim shell (`rho > 1 -
//! rim_thickness_fraction`) at `rim_density_factor - 1` times the bed's node density, each joined
//! to its three nearest nodes (angiogenic sprouts); every segment whose midpoint is in the tumour
//! becomes a tumour vessel with a log-normal radius, is bent at two kinks displaced sideways by up
//! to `tortuosity` times its length, and gets a pore radius from the configured distribution and
//! a maturity that falls as its pore radius rises (`1 - ln(r/r_min) / ln(r_max/r_min)`).

use super::network::{Network, NodeBc, Segment, VesselKind, dist};
use super::viscosity::MIN_RADIUS;
use crate::lattice::Lattice;
use crate::params::{NetworkParams, TumourGeometry};
use crate::rng::{Domain, Stream, stream};
use crate::scenario::PoreDistribution;

const TAG_BED_NODE: u64 = 1 << 56;
const TAG_BED_LINK: u64 = 2 << 56;
const TAG_CORE: u64 = 3 << 56;
const TAG_RIM: u64 = 4 << 56;
const TAG_TUMOUR_SEGMENT: u64 = 5 << 56;

fn rs(seed: u64, id: u64) -> Stream {
    stream(seed, Domain::Vessels, id, 0)
}

/// A host segment between nodes `a` and `b` of `net` with radius `radius`.
fn host_segment(net: &Network, a: u32, b: u32, radius: f64, p: &NetworkParams) -> Segment {
    Segment {
        a,
        b,
        radius,
        length: dist(net.nodes[a as usize], net.nodes[b as usize]),
        wall_thickness: p.wall_thickness[0],
        pore_radius: p.host_pore_radius,
        pore_fraction: p.pore_fraction[0],
        maturity: 1.0,
        kind: VesselKind::Host,
    }
}

fn clamp_to_box(l: &Lattice, x: &mut [f64; 3]) {
    let e = l.extent();
    for a in 0..3 {
        x[a] = x[a].clamp(l.origin[a], l.origin[a] + e[a]);
    }
}

/// The host capillary bed filling the lattice box.
pub fn capillary_bed(l: &Lattice, p: &NetworkParams, seed: u64) -> Network {
    let ax = p.flow_axis;
    let (bx, cx) = ((ax + 1) % 3, (ax + 2) % 3);
    let e = l.extent();
    let s = p.capillary_spacing;
    let na = ((e[ax] / s).round() as usize + 1).max(2);
    let nb = ((e[bx] / s).round() as usize).max(1);
    let nc = ((e[cx] / s).round() as usize).max(1);
    let (da, db, dc) = (e[ax] / (na - 1) as f64, e[bx] / nb as f64, e[cx] / nc as f64);
    let mut net = Network::default();
    let id = |i: usize, j: usize, k: usize| (i + na * (j + nb * k)) as u32;
    for k in 0..nc {
        for j in 0..nb {
            for i in 0..na {
                let mut r = rs(seed, TAG_BED_NODE | id(i, j, k) as u64);
                let face = i == 0 || i + 1 == na;
                let mut x = [0.0; 3];
                let ja = if face { 0.0 } else { p.position_jitter * s * (2.0 * r.uniform() - 1.0) };
                let jb = p.position_jitter * s * (2.0 * r.uniform() - 1.0);
                let jc = p.position_jitter * s * (2.0 * r.uniform() - 1.0);
                x[ax] = l.origin[ax] + i as f64 * da + ja;
                x[bx] = l.origin[bx] + (j as f64 + 0.5) * db + jb;
                x[cx] = l.origin[cx] + (k as f64 + 0.5) * dc + jc;
                clamp_to_box(l, &mut x);
                let bc = if i == 0 {
                    NodeBc::Pressure(p.inlet_pressure)
                } else if i + 1 == na {
                    NodeBc::Pressure(p.outlet_pressure)
                } else {
                    NodeBc::None
                };
                net.add_node(x, bc);
            }
        }
    }
    let r0 = p.capillary_radius;
    let (rmin, rmax) = ((r0 / 3.0).max(MIN_RADIUS), 3.0 * r0);
    for k in 0..nc {
        for j in 0..nb {
            for i in 0..na {
                let a = id(i, j, k);
                let face = i == 0 || i + 1 == na;
                let candidates = [
                    (i + 1 < na).then(|| id(i + 1, j, k)),
                    (j + 1 < nb && !face).then(|| id(i, j + 1, k)),
                    (k + 1 < nc && !face).then(|| id(i, j, k + 1)),
                ];
                for (dir, b) in candidates.into_iter().enumerate() {
                    let Some(b) = b else { continue };
                    let mut r = rs(seed, TAG_BED_LINK | (3 * a as u64 + dir as u64));
                    let keep = r.uniform();
                    if dir > 0 && keep >= p.cross_link_probability {
                        continue;
                    }
                    let radius = (r0 * (p.capillary_radius_spread * r.normal()).exp()).clamp(rmin, rmax);
                    let seg = host_segment(&net, a, b, radius, p);
                    net.segments.push(seg);
                }
            }
        }
    }
    net
}

/// A uniform grid of node indices for nearest-neighbour queries.
struct Grid {
    origin: [f64; 3],
    cell: f64,
    dims: [usize; 3],
    cells: Vec<Vec<u32>>,
}

impl Grid {
    fn new(l: &Lattice, cell: f64) -> Self {
        let e = l.extent();
        let dims = [0, 1, 2].map(|a| ((e[a] / cell).ceil() as usize).max(1));
        Grid { origin: l.origin, cell, dims, cells: vec![Vec::new(); dims[0] * dims[1] * dims[2]] }
    }
    fn coord(&self, x: [f64; 3]) -> [usize; 3] {
        [0, 1, 2].map(|a| (((x[a] - self.origin[a]) / self.cell).floor().max(0.0) as usize).min(self.dims[a] - 1))
    }
    fn insert(&mut self, i: u32, x: [f64; 3]) {
        let c = self.coord(x);
        self.cells[c[0] + self.dims[0] * (c[1] + self.dims[1] * c[2])].push(i);
    }
    /// The `k` nearest nodes within one cell of `x` that `ok` accepts, nearest first (ties by index).
    fn nearest(&self, nodes: &[[f64; 3]], x: [f64; 3], k: usize, ok: impl Fn([f64; 3]) -> bool) -> Vec<u32> {
        let c = self.coord(x);
        let mut found: Vec<(f64, u32)> = Vec::new();
        for dz in -1i64..=1 {
            for dy in -1i64..=1 {
                for dx in -1i64..=1 {
                    let q = [c[0] as i64 + dx, c[1] as i64 + dy, c[2] as i64 + dz];
                    if (0..3).any(|a| q[a] < 0 || q[a] >= self.dims[a] as i64) {
                        continue;
                    }
                    let idx = q[0] as usize + self.dims[0] * (q[1] as usize + self.dims[1] * q[2] as usize);
                    for &n in &self.cells[idx] {
                        let d = dist(nodes[n as usize], x);
                        if d > 1e-9 && d <= self.cell && ok(nodes[n as usize]) {
                            found.push((d, n));
                        }
                    }
                }
            }
        }
        found.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        found.into_iter().take(k).map(|f| f.1).collect()
    }
}

/// A tumour pore radius and the maturity it implies.
fn draw_pore(r: &mut Stream, p: &NetworkParams) -> (f64, f64) {
    let (lo, hi) = (p.tumour_pore_min, p.tumour_pore_max);
    let radius = match p.tumour_pore_distribution {
        PoreDistribution::Fixed => p.tumour_pore_median,
        PoreDistribution::Uniform => lo + (hi - lo) * r.uniform(),
        PoreDistribution::LogNormal => {
            let mut v = p.tumour_pore_median;
            // Truncation by rejection; after 100 rejections (a very narrow window) clamp.
            for _ in 0..100 {
                let x = p.tumour_pore_median * (p.tumour_pore_spread * r.normal()).exp();
                v = x.clamp(lo, hi);
                if (lo..=hi).contains(&x) {
                    break;
                }
            }
            v
        }
    };
    let maturity = if hi > lo { 1.0 - (radius / lo).ln() / (hi / lo).ln() } else { 0.5 };
    (radius, maturity.clamp(0.0, 1.0))
}

/// Normalised distance from the tumour centre: 0 at the centre, 1 on the surface.
fn rho(g: &TumourGeometry, x: [f64; 3]) -> f64 {
    g.level(x).sqrt()
}

/// Turns the part of a host bed inside the tumour into tumour vessels (see the module
/// documentation).
pub fn add_tumour_vessels(net: &mut Network, l: &Lattice, g: &TumourGeometry, p: &NetworkParams, seed: u64) {
    // 1. The necrotic core loses most of the vessels that reach into it.
    let before = std::mem::take(&mut net.segments);
    for (s, seg) in before.into_iter().enumerate() {
        let (m, a, b) = (mid(net, &seg), net.nodes[seg.a as usize], net.nodes[seg.b as usize]);
        let inner = rho(g, m).min(rho(g, a)).min(rho(g, b));
        if inner < p.necrotic_core_fraction && rs(seed, TAG_CORE | s as u64).uniform() >= p.core_vessel_survival {
            continue;
        }
        net.segments.push(seg);
    }
    // 2. Sprouts fill the rim.
    let s = p.capillary_spacing;
    let inner = (1.0 - p.rim_thickness_fraction).max(p.necrotic_core_fraction);
    let [a, b, c] = g.semi_axes;
    let shell = 4.0 / 3.0 * std::f64::consts::PI * a * b * c * (1.0 - inner.powi(3));
    let extra = ((p.rim_density_factor - 1.0) * shell / s.powi(3)).round() as u64;
    if extra > 0 {
        let mut grid = Grid::new(l, 2.0 * s);
        for (i, &x) in net.nodes.iter().enumerate() {
            grid.insert(i as u32, x);
        }
        let r0 = p.tumour_radius;
        for k in 0..extra {
            let mut r = rs(seed, TAG_RIM | k);
            let mut x = g.centre;
            let mut placed = false;
            for _ in 0..1000 {
                for (ax, xa) in x.iter_mut().enumerate() {
                    *xa = g.centre[ax] + g.semi_axes[ax] * (2.0 * r.uniform() - 1.0);
                }
                let q = rho(g, x);
                if (inner..=1.0).contains(&q) {
                    placed = true;
                    break;
                }
            }
            if !placed {
                continue;
            }
            clamp_to_box(l, &mut x);
            // Sprouts join nodes outside the necrotic core.
            let near = grid.nearest(&net.nodes, x, 3, |y| rho(g, y) >= p.necrotic_core_fraction);
            if near.is_empty() {
                continue;
            }
            let n = net.add_node(x, NodeBc::None);
            grid.insert(n, x);
            for m in near {
                let seg = host_segment(net, n, m, r0, p);
                net.segments.push(seg);
            }
        }
    }
    // 3. Segments in the tumour become tumour vessels: radius, pores, kinks.
    let before = std::mem::take(&mut net.segments);
    for (s, seg) in before.into_iter().enumerate() {
        let mid = mid(net, &seg);
        if !g.contains(mid) {
            net.segments.push(seg);
            continue;
        }
        let mut r = rs(seed, TAG_TUMOUR_SEGMENT | s as u64);
        let radius = (p.tumour_radius * (p.tumour_radius_spread * r.normal()).exp()).clamp(MIN_RADIUS, 50e-6);
        let (pore_radius, maturity) = draw_pore(&mut r, p);
        let (pa, pb) = (net.nodes[seg.a as usize], net.nodes[seg.b as usize]);
        let len = dist(pa, pb);
        let dir = [(pb[0] - pa[0]) / len, (pb[1] - pa[1]) / len, (pb[2] - pa[2]) / len];
        let mut chain = vec![seg.a];
        for t in [1.0 / 3.0, 2.0 / 3.0] {
            // A random sideways offset: a random vector with its component along the segment removed.
            let v = [2.0 * r.uniform() - 1.0, 2.0 * r.uniform() - 1.0, 2.0 * r.uniform() - 1.0];
            let along = v[0] * dir[0] + v[1] * dir[1] + v[2] * dir[2];
            let mut x = [0.0; 3];
            for ax in 0..3 {
                x[ax] = pa[ax] + t * (pb[ax] - pa[ax]) + p.tortuosity * len * (v[ax] - along * dir[ax]);
            }
            clamp_to_box(l, &mut x);
            chain.push(net.add_node(x, NodeBc::None));
        }
        chain.push(seg.b);
        for w in chain.windows(2) {
            let length = dist(net.nodes[w[0] as usize], net.nodes[w[1] as usize]);
            if length <= 1e-9 {
                continue;
            }
            net.segments.push(Segment {
                a: w[0],
                b: w[1],
                radius,
                length,
                wall_thickness: p.wall_thickness[1],
                pore_radius,
                pore_fraction: p.pore_fraction[1],
                maturity,
                kind: VesselKind::Tumour,
            });
        }
    }
    net.drop_unused_nodes();
}

fn mid(net: &Network, seg: &Segment) -> [f64; 3] {
    let (p, q) = (net.nodes[seg.a as usize], net.nodes[seg.b as usize]);
    [(p[0] + q[0]) / 2.0, (p[1] + q[1]) / 2.0, (p[2] + q[2]) / 2.0]
}

/// The network of a generator source: the bed, with tumour vessels when asked.
pub fn generate(l: &Lattice, g: &TumourGeometry, p: &NetworkParams, seed: u64, tumour: bool) -> Network {
    let mut net = capillary_bed(l, p, seed);
    if tumour {
        add_tumour_vessels(&mut net, l, g, p, seed);
    }
    net.drop_unused_nodes();
    net
}
