//! Padded cell storage shared by the operator and the multigrid levels, and the plane-parallel
//! loops every kernel is written with.
//!
//! A grid of `n[0] x n[1] x n[2]` cells is stored with one ghost layer on every side, x fastest:
//! padded cell `(i + 1, j + 1, k + 1)` holds cell `(i, j, k)`. Ghost values of vectors are always
//! zero, so kernels need no branch at the boundary. Face arrays use the same layout: entry `p`
//! holds the face on the lower side of padded cell `p` along the array's axis, so the upper
//! boundary face of the last cell of a row is the entry of the ghost cell beyond it.
//!
//! Loops run over padded z-planes, in parallel when the grid is large. Reductions add one partial
//! sum per plane, then the partials in plane order: the result never depends on the threads.

use rayon::prelude::*;

/// Padded cell counts at or above which loops run in parallel.
const PARALLEL_MIN: usize = 1 << 14;

/// Dimensions and strides of a padded cell grid.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Grid {
    /// Cells along x, y, z.
    pub n: [usize; 3],
    /// Stride of the padded index along y.
    pub sy: usize,
    /// Stride of the padded index along z (one padded plane).
    pub sz: usize,
    /// Padded length.
    pub len: usize,
}

impl Grid {
    /// The padded grid of `n` cells.
    pub fn new(n: [usize; 3]) -> Self {
        let sy = n[0] + 2;
        let sz = sy * (n[1] + 2);
        Grid { n, sy, sz, len: sz * (n[2] + 2) }
    }

    /// Number of (interior) cells.
    #[inline]
    pub fn cells(&self) -> usize {
        self.n[0] * self.n[1] * self.n[2]
    }

    /// Padded index of cell `(i, j, k)`; a coordinate may be `n[a]` to name the upper face.
    #[inline]
    pub fn pad(&self, i: usize, j: usize, k: usize) -> usize {
        (i + 1) + self.sy * (j + 1) + self.sz * (k + 1)
    }

    /// Whether loops over this grid run in parallel.
    #[inline]
    pub fn parallel(&self) -> bool {
        self.len >= PARALLEL_MIN
    }

    /// Calls `f(k, plane)` for every interior padded plane `k` in `1..=n[2]`, with `plane` the
    /// slice of `out` that holds it.
    pub fn planes<T, F>(&self, out: &mut [T], f: F)
    where
        T: Send,
        F: Fn(usize, &mut [T]) + Sync + Send,
    {
        debug_assert_eq!(out.len(), self.len);
        let nz = self.n[2];
        if self.parallel() {
            out.par_chunks_mut(self.sz).enumerate().skip(1).take(nz).for_each(|(k, pl)| f(k, pl));
        } else {
            out.chunks_mut(self.sz).enumerate().skip(1).take(nz).for_each(|(k, pl)| f(k, pl));
        }
    }

    /// Like [`Grid::planes`], where `f` returns a partial sum; returns the sum of the partials in
    /// plane order. `partials` holds at least `n[2] + 2` values.
    pub fn planes_sum<F>(&self, out: &mut [f64], partials: &mut [f64], f: F) -> f64
    where
        F: Fn(usize, &mut [f64]) -> f64 + Sync + Send,
    {
        debug_assert_eq!(out.len(), self.len);
        let nz = self.n[2];
        let parts = &mut partials[..nz + 2];
        if self.parallel() {
            out.par_chunks_mut(self.sz)
                .zip(parts.par_iter_mut())
                .enumerate()
                .skip(1)
                .take(nz)
                .for_each(|(k, (pl, s))| *s = f(k, pl));
        } else {
            out.chunks_mut(self.sz)
                .zip(parts.iter_mut())
                .enumerate()
                .skip(1)
                .take(nz)
                .for_each(|(k, (pl, s))| *s = f(k, pl));
        }
        parts[1..=nz].iter().sum()
    }

    /// Sum over planes of `f(k)` for the interior planes, partials added in plane order.
    pub fn sum<F>(&self, partials: &mut [f64], f: F) -> f64
    where
        F: Fn(usize) -> f64 + Sync + Send,
    {
        let nz = self.n[2];
        let parts = &mut partials[1..=nz];
        if self.parallel() {
            parts.par_iter_mut().enumerate().for_each(|(k, s)| *s = f(k + 1));
        } else {
            parts.iter_mut().enumerate().for_each(|(k, s)| *s = f(k + 1));
        }
        parts.iter().sum()
    }
}

/// A padded vector with zero ghosts.
pub fn zeros(g: &Grid) -> Vec<f64> {
    vec![0.0; g.len]
}

/// Copies a plain cell vector (x fastest, no ghosts) into a padded one.
pub fn scatter(g: &Grid, plain: &[f64], padded: &mut [f64]) {
    let [nx, ny, _] = g.n;
    g.planes(padded, |k, pl| {
        for j in 0..ny {
            let src = nx * (j + ny * (k - 1));
            let dst = g.sy * (j + 1) + 1;
            pl[dst..dst + nx].copy_from_slice(&plain[src..src + nx]);
        }
    });
}

/// Copies the interior of a padded vector into a plain cell vector.
pub fn gather(g: &Grid, padded: &[f64], plain: &mut [f64]) {
    let [nx, ny, _] = g.n;
    for (k, out) in plain.chunks_mut(nx * ny).enumerate() {
        for j in 0..ny {
            let src = g.sz * (k + 1) + g.sy * (j + 1) + 1;
            out[nx * j..nx * (j + 1)].copy_from_slice(&padded[src..src + nx]);
        }
    }
}
