//! The 3D Cartesian lattice: cubic voxels of edge `h`, `n[0] x n[1] x n[2]` of them, x fastest.

use bevy_ecs::prelude::Resource;

/// A lattice axis.
pub const AXES: [usize; 3] = [0, 1, 2];

/// One of the six faces of the lattice box.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct Face {
    /// 0 = x, 1 = y, 2 = z.
    pub axis: usize,
    /// `false` for the lower face, `true` for the upper one.
    pub upper: bool,
}

impl Face {
    /// The six faces, in the order x-, x+, y-, y+, z-, z+.
    pub const ALL: [Face; 6] = [
        Face { axis: 0, upper: false },
        Face { axis: 0, upper: true },
        Face { axis: 1, upper: false },
        Face { axis: 1, upper: true },
        Face { axis: 2, upper: false },
        Face { axis: 2, upper: true },
    ];

    /// Index 0..6 in [`Face::ALL`].
    pub fn index(self) -> usize {
        2 * self.axis + usize::from(self.upper)
    }
}

/// Geometry of the lattice. Positions are in metres; voxel `(i, j, k)` covers
/// `origin + h * [i, i+1) x [j, j+1) x [k, k+1)`.
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct Lattice {
    /// Voxel counts along x, y, z.
    pub n: [usize; 3],
    /// Voxel edge, m.
    pub h: f64,
    /// Lower corner, m.
    pub origin: [f64; 3],
}

impl Lattice {
    /// A lattice of `n` voxels of edge `h` metres with its lower corner at `origin` metres.
    pub fn new(n: [usize; 3], h: f64, origin: [f64; 3]) -> Self {
        assert!(n.iter().all(|&v| v > 0) && h > 0.0, "lattice needs positive sizes");
        Lattice { n, h, origin }
    }

    /// Number of voxels.
    #[inline]
    pub fn len(&self) -> usize {
        self.n[0] * self.n[1] * self.n[2]
    }

    /// Whether the lattice has no voxels (never true for a constructed lattice).
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Linear index of voxel `(i, j, k)`; x varies fastest.
    #[inline]
    pub fn idx(&self, i: usize, j: usize, k: usize) -> usize {
        debug_assert!(i < self.n[0] && j < self.n[1] && k < self.n[2]);
        i + self.n[0] * (j + self.n[1] * k)
    }

    /// Voxel coordinates of a linear index.
    #[inline]
    pub fn ijk(&self, idx: usize) -> [usize; 3] {
        let i = idx % self.n[0];
        let r = idx / self.n[0];
        [i, r % self.n[1], r / self.n[1]]
    }

    /// Stride of the linear index along `axis`.
    #[inline]
    pub fn stride(&self, axis: usize) -> usize {
        match axis {
            0 => 1,
            1 => self.n[0],
            _ => self.n[0] * self.n[1],
        }
    }

    /// Volume of one voxel, m^3.
    #[inline]
    pub fn voxel_volume(&self) -> f64 {
        self.h * self.h * self.h
    }

    /// Edge lengths of the whole box, m.
    pub fn extent(&self) -> [f64; 3] {
        [self.n[0] as f64 * self.h, self.n[1] as f64 * self.h, self.n[2] as f64 * self.h]
    }

    /// Centre of the whole box, m.
    pub fn box_centre(&self) -> [f64; 3] {
        let e = self.extent();
        [self.origin[0] + e[0] / 2.0, self.origin[1] + e[1] / 2.0, self.origin[2] + e[2] / 2.0]
    }

    /// Centre of voxel `(i, j, k)`, m.
    #[inline]
    pub fn centre(&self, ijk: [usize; 3]) -> [f64; 3] {
        [
            self.origin[0] + (ijk[0] as f64 + 0.5) * self.h,
            self.origin[1] + (ijk[1] as f64 + 0.5) * self.h,
            self.origin[2] + (ijk[2] as f64 + 0.5) * self.h,
        ]
    }

    /// Voxel containing a point, or `None` outside the box. Points on an upper face belong to
    /// the last voxel.
    #[inline]
    pub fn voxel_of(&self, x: [f64; 3]) -> Option<[usize; 3]> {
        let mut out = [0usize; 3];
        for a in AXES {
            let u = (x[a] - self.origin[a]) / self.h;
            if !(u >= 0.0 && u <= self.n[a] as f64) {
                return None;
            }
            out[a] = (u as usize).min(self.n[a] - 1);
        }
        Some(out)
    }

    /// Neighbour of `idx` one voxel along `axis` (`upper` = +1, else -1), or `None` at the boundary.
    #[inline]
    pub fn neighbour(&self, idx: usize, axis: usize, upper: bool) -> Option<usize> {
        let c = self.ijk(idx)[axis];
        if upper {
            (c + 1 < self.n[axis]).then(|| idx + self.stride(axis))
        } else {
            (c > 0).then(|| idx - self.stride(axis))
        }
    }

    /// The face(s) of the box that voxel `ijk` touches.
    pub fn boundary_faces(&self, ijk: [usize; 3]) -> impl Iterator<Item = Face> + '_ {
        Face::ALL.into_iter().filter(
            move |f| {
                if f.upper { ijk[f.axis] + 1 == self.n[f.axis] } else { ijk[f.axis] == 0 }
            },
        )
    }

    /// Number of voxel faces on the box boundary.
    pub fn boundary_face_count(&self) -> usize {
        2 * (self.n[0] * self.n[1] + self.n[1] * self.n[2] + self.n[0] * self.n[2])
    }
}

/// Morton (Z-order) code of voxel coordinates, 21 bits per axis: keeps nearby voxels nearby in
/// memory when packets or cells are sorted by it.
#[inline]
pub fn morton(ijk: [usize; 3]) -> u64 {
    #[inline]
    fn spread(v: u64) -> u64 {
        let mut x = v & 0x1f_ffff;
        x = (x | (x << 32)) & 0x1f_0000_0000_ffff;
        x = (x | (x << 16)) & 0x1f_0000_ff00_00ff;
        x = (x | (x << 8)) & 0x100f_00f0_0f00_f00f;
        x = (x | (x << 4)) & 0x10c3_0c30_c30c_30c3;
        x = (x | (x << 2)) & 0x1249_2492_4924_9249;
        x
    }
    spread(ijk[0] as u64) | (spread(ijk[1] as u64) << 1) | (spread(ijk[2] as u64) << 2)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn index_round_trip_and_strides() {
        let l = Lattice::new([5, 4, 3], 1e-5, [0.0; 3]);
        for idx in 0..l.len() {
            let [i, j, k] = l.ijk(idx);
            assert_eq!(l.idx(i, j, k), idx);
        }
        assert_eq!(l.idx(1, 0, 0) - l.idx(0, 0, 0), l.stride(0));
        assert_eq!(l.idx(0, 1, 0) - l.idx(0, 0, 0), l.stride(1));
        assert_eq!(l.idx(0, 0, 1) - l.idx(0, 0, 0), l.stride(2));
    }

    #[test]
    fn neighbours_stop_at_the_boundary() {
        let l = Lattice::new([3, 3, 3], 1.0, [0.0; 3]);
        let c = l.idx(1, 1, 1);
        for a in AXES {
            assert!(l.neighbour(c, a, true).is_some());
            assert!(l.neighbour(c, a, false).is_some());
        }
        assert_eq!(l.neighbour(l.idx(0, 1, 1), 0, false), None);
        assert_eq!(l.neighbour(l.idx(2, 1, 1), 0, true), None);
        assert_eq!(l.boundary_faces([0, 0, 1]).count(), 2);
        assert_eq!(l.boundary_faces([1, 1, 1]).count(), 0);
    }

    #[test]
    fn points_map_to_voxels() {
        let l = Lattice::new([4, 4, 4], 2.0, [-4.0, 0.0, 0.0]);
        assert_eq!(l.voxel_of([-4.0, 0.0, 0.0]), Some([0, 0, 0]));
        assert_eq!(l.voxel_of([3.9, 7.9, 8.0]), Some([3, 3, 3]));
        assert_eq!(l.voxel_of([-4.1, 0.0, 0.0]), None);
        assert_eq!(l.centre([0, 0, 0]), [-3.0, 1.0, 1.0]);
        assert_eq!(l.voxel_of(l.centre([2, 1, 3])), Some([2, 1, 3]));
    }

    #[test]
    fn morton_interleaves_bits() {
        assert_eq!(morton([1, 0, 0]), 1);
        assert_eq!(morton([0, 1, 0]), 2);
        assert_eq!(morton([0, 0, 1]), 4);
        assert_eq!(morton([3, 3, 3]), 63);
        // Ordering is total and injective on a small cube.
        let mut codes: Vec<u64> = (0..512).map(|i| morton([i % 8, (i / 8) % 8, i / 64])).collect();
        codes.sort_unstable();
        codes.dedup();
        assert_eq!(codes.len(), 512);
    }
}
