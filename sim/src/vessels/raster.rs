//! Segments rasterised onto the lattice: the wall area each segment has in each voxel.
//!
//! The centre line of a segment is traversed voxel by voxel (Amanatides and Woo 1987, "A fast
//! voxel traversal algorithm for ray tracing", Eurographics '87) and the segment's lateral wall
//! area `2 pi r L` is shared among the voxels in proportion to the length of centre line inside
//! each one. The shares of a segment add up to its whole area (less any part outside the
//! lattice). A vessel wider than a voxel still puts its wall in the voxels of its centre line.

use bevy_ecs::prelude::Resource;

use super::network::Network;
use crate::field::Field;
use crate::lattice::Lattice;

/// Per voxel, the segments whose walls lie in it and their wall area there (compressed rows:
/// the entries of voxel `v` are `start[v]..start[v + 1]`, segment indices ascending).
#[derive(Resource, Debug, Clone, Default, PartialEq)]
pub struct VesselRaster {
    /// Revision of the network this rasterises.
    pub revision: u64,
    pub start: Vec<u32>,
    pub segment: Vec<u32>,
    /// Wall area, m^2.
    pub area: Vec<f64>,
}

impl VesselRaster {
    /// The (segment index, wall area m^2) pairs of voxel `v`.
    #[inline]
    pub fn voxel(&self, v: usize) -> impl Iterator<Item = (u32, f64)> + '_ {
        let (lo, hi) = (self.start[v] as usize, self.start[v + 1] as usize);
        self.segment[lo..hi].iter().copied().zip(self.area[lo..hi].iter().copied())
    }

    /// Total wall area on the lattice, m^2.
    pub fn total_area(&self) -> f64 {
        self.area.iter().sum()
    }

    /// Vessel wall surface per tissue volume of each voxel, 1/m.
    pub fn surface_field(&self, l: &Lattice) -> Field {
        let vol = l.voxel_volume();
        let mut f = Field::filled("vessel_surface", "m-1", "vessel wall surface per tissue volume", l.len(), 0.0);
        for (v, x) in f.data.iter_mut().enumerate() {
            *x = self.voxel(v).map(|e| e.1).sum::<f64>() / vol;
        }
        f
    }

    /// Rasterises every segment of `net` onto `l`.
    pub fn build(net: &Network, l: &Lattice) -> Self {
        let mut entries: Vec<(u32, u32, f64)> = Vec::with_capacity(net.segments.len() * 4);
        let mut pieces = Vec::new();
        for (s, seg) in net.segments.iter().enumerate() {
            let (p, q) = net.ends(s);
            pieces.clear();
            traverse(l, p, q, &mut pieces);
            let area = seg.wall_area();
            for &(v, frac) in &pieces {
                entries.push((v, s as u32, area * frac));
            }
        }
        // Counting sort by voxel; entries of one voxel keep segment order.
        let n = l.len();
        let mut start = vec![0u32; n + 1];
        for e in &entries {
            start[e.0 as usize + 1] += 1;
        }
        for v in 0..n {
            start[v + 1] += start[v];
        }
        let mut fill = start.clone();
        let mut segment = vec![0u32; entries.len()];
        let mut area = vec![0.0; entries.len()];
        for e in &entries {
            let k = fill[e.0 as usize] as usize;
            segment[k] = e.1;
            area[k] = e.2;
            fill[e.0 as usize] += 1;
        }
        VesselRaster { revision: net.revision, start, segment, area }
    }
}

/// The voxels the straight line from `p` to `q` (m) passes through, each with the fraction of
/// the line's length inside it. Parts outside the lattice are left out.
pub fn traverse(l: &Lattice, p: [f64; 3], q: [f64; 3], out: &mut Vec<(u32, f64)>) {
    // Lattice coordinates: voxel (i, j, k) covers [i, i+1) x [j, j+1) x [k, k+1).
    let u0 = [0, 1, 2].map(|a| (p[a] - l.origin[a]) / l.h);
    let u1 = [0, 1, 2].map(|a| (q[a] - l.origin[a]) / l.h);
    let d = [u1[0] - u0[0], u1[1] - u0[1], u1[2] - u0[2]];
    // Clip the parameter range [0, 1] to the box (Liang and Barsky 1984).
    let (mut t0, mut t1) = (0.0f64, 1.0f64);
    for a in 0..3 {
        let hi = l.n[a] as f64;
        if d[a] == 0.0 {
            if u0[a] < 0.0 || u0[a] > hi {
                return;
            }
        } else {
            let (ta, tb) = ((0.0 - u0[a]) / d[a], (hi - u0[a]) / d[a]);
            let (lo_t, hi_t) = if ta < tb { (ta, tb) } else { (tb, ta) };
            t0 = t0.max(lo_t);
            t1 = t1.min(hi_t);
        }
    }
    if t1 <= t0 {
        return;
    }
    let tm = 0.5 * (t0 + t1);
    // Start in the voxel containing the point just after t0 (the midpoint direction decides ties).
    let mut cell = [0i64; 3];
    let mut step = [0i64; 3];
    let mut t_max = [f64::INFINITY; 3];
    let mut t_delta = [f64::INFINITY; 3];
    for a in 0..3 {
        let x = u0[a] + d[a] * (t0 + 1e-12 * (tm - t0).max(0.0));
        let c = (x.floor() as i64).clamp(0, l.n[a] as i64 - 1);
        cell[a] = c;
        if d[a] > 0.0 {
            step[a] = 1;
            t_max[a] = ((c + 1) as f64 - u0[a]) / d[a];
            t_delta[a] = 1.0 / d[a];
        } else if d[a] < 0.0 {
            step[a] = -1;
            t_max[a] = (c as f64 - u0[a]) / d[a];
            t_delta[a] = -1.0 / d[a];
        }
    }
    let mut t = t0;
    loop {
        let a = if t_max[0] <= t_max[1] && t_max[0] <= t_max[2] {
            0
        } else if t_max[1] <= t_max[2] {
            1
        } else {
            2
        };
        let t_next = t_max[a].min(t1);
        if t_next > t {
            let v = l.idx(cell[0] as usize, cell[1] as usize, cell[2] as usize) as u32;
            match out.last_mut() {
                Some(last) if last.0 == v => last.1 += t_next - t,
                _ => out.push((v, t_next - t)),
            }
            t = t_next;
        }
        if t >= t1 {
            break;
        }
        cell[a] += step[a];
        if cell[a] < 0 || cell[a] >= l.n[a] as i64 {
            break;
        }
        t_max[a] += t_delta[a];
    }
}
