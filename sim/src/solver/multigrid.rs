//! Geometric multigrid V-cycle for cell-centred 7-point operators (Trottenberg, Oosterlee and
//! Schuller 2001, Multigrid, Academic Press: sec. 2.8 cell-centred grids, ch. 7 variable
//! coefficients).
//!
//! - Coarsening: each axis of more than one cell halves, `n_c = ceil(n / 2)` (an odd axis leaves
//!   one coarse cell of a single fine cell), until at most [`COARSEST_MAX`] cells remain; the
//!   coarsest level is solved exactly by a dense Cholesky factorisation.
//! - Coarse operators are re-discretised, not Galerkin products, so every level is a 7-point
//!   operator of the same kind: a coarse face conducts like the fine "tubes" crossing it, each a
//!   series of the half of the interior fine face inside the left coarse cell, the fine face on
//!   the coarse face, and the half of the interior fine face inside the right coarse cell (exact
//!   for a uniform coefficient, and harmonic-mean-like across jumps); tubes add in parallel, and
//!   the coarse diagonal term is the sum of its children's.
//! - Transfers: trilinear prolongation between cell centres (weights from the centre positions;
//!   constant beyond the boundary), and restriction its exact transpose, so that the V-cycle with
//!   red-black Gauss-Seidel pre-smoothing and the reversed colour order in post-smoothing is a
//!   symmetric positive definite preconditioner for conjugate gradients (Tatebe 1993, Copper
//!   Mountain Conference on Multigrid Methods, "The multigrid preconditioned conjugate gradient
//!   method").
//!
//! - Storage: every level's operator (faces and inverse diagonal) in single precision, scaled by
//!   a power of two; arithmetic in double precision. The multigrid operator of a level is exactly
//!   the one these numbers describe, so the V-cycle stays a symmetric linear operator; the
//!   conjugate-gradient products use the double-precision operator.
//!
//! All storage is allocated when the hierarchy is built; [`Multigrid::update`] refreshes the
//! coefficients in place and a V-cycle allocates nothing.

use rayon::prelude::*;

use super::SolveError;
use super::grid::{Grid, zeros};
use super::kernels::{self, SmoothView};
use super::stencil::Stencil7;

/// Most cells of the coarsest level (solved densely).
pub const COARSEST_MAX: usize = 256;

/// Interpolation of one fine cell along an axis: `wp` of its parent plus `wn` of a neighbour.
#[derive(Debug, Clone, Copy)]
struct FineRow {
    parent: usize,
    wp: f64,
    /// The coarse neighbour (the parent itself, with `wn = 0`, when there is none).
    nb: usize,
    wn: f64,
}

/// Linear interpolation along one axis from coarse to fine cell centres.
#[derive(Debug, Clone)]
struct AxisTransfer {
    /// Per fine cell.
    fine: Vec<FineRow>,
    /// Per coarse cell: the fine cells that interpolate from it, with their weights.
    coarse: Vec<Vec<(usize, f64)>>,
}

impl AxisTransfer {
    fn new(nf: usize, nc: usize) -> Self {
        let mut t = AxisTransfer { fine: Vec::with_capacity(nf), coarse: vec![Vec::with_capacity(4); nc] };
        t.set(nf, nc, [1.0, 1.0]);
        t
    }

    /// Fills the tables (no allocation after the first call). `wall[side]` is the weight of the
    /// parent for a fine cell between its parent's centre and the lower (`side` 0) or upper (1)
    /// boundary, where no coarse neighbour exists: 1 extrapolates a constant (zero flux), 1/2
    /// goes linearly to zero on the face (fixed value).
    fn set(&mut self, nf: usize, nc: usize, wall: [f64; 2]) {
        // Centres in units of the fine spacing: fine i at i + 1/2; a coarse cell at the mean of
        // its children's centres.
        let children = |c: usize| if 2 * c + 1 < nf { 2 } else { 1 };
        let centre = |c: usize| if children(c) == 2 { 2.0 * c as f64 + 1.0 } else { 2.0 * c as f64 + 0.5 };
        self.fine.clear();
        for i in 0..nf {
            let parent = i / 2;
            let x = i as f64 + 0.5;
            let xc = centre(parent);
            let alone = |wp: f64| FineRow { parent, wp, nb: parent, wn: 0.0 };
            let row = if x < xc && parent > 0 {
                let w = (x - xc).abs() / (centre(parent - 1) - xc).abs();
                FineRow { parent, wp: 1.0 - w, nb: parent - 1, wn: w }
            } else if x > xc && parent + 1 < nc {
                let w = (x - xc).abs() / (centre(parent + 1) - xc).abs();
                FineRow { parent, wp: 1.0 - w, nb: parent + 1, wn: w }
            } else if x < xc {
                alone(wall[0])
            } else if x > xc {
                alone(wall[1])
            } else {
                alone(1.0)
            };
            self.fine.push(row);
        }
        for c in &mut self.coarse {
            c.clear();
        }
        for (i, r) in self.fine.iter().enumerate() {
            self.coarse[r.parent].push((i, r.wp));
            if r.wn > 0.0 {
                self.coarse[r.nb].push((i, r.wn));
            }
        }
    }
}

/// The operator of one level in the form the smoother streams: faces and inverse diagonal in
/// single precision (see [`SmoothView`]).
#[derive(Debug, Clone)]
struct Coeffs {
    t: [Vec<f32>; 3],
    inv_d: Vec<f32>,
}

impl Coeffs {
    fn zeros(g: &Grid) -> Self {
        Coeffs { t: [vec![0.0; g.len], vec![0.0; g.len], vec![0.0; g.len]], inv_d: vec![0.0; g.len] }
    }

    fn view(&self, g: Grid) -> SmoothView<'_> {
        SmoothView { g, tx: &self.t[0], ty: &self.t[1], tz: &self.t[2], inv_d: &self.inv_d }
    }

    fn bytes(&self) -> usize {
        4 * (self.t.iter().map(Vec::len).sum::<usize>() + self.inv_d.len())
    }
}

/// One coarse level: its operator, vectors and the transfer from the level above.
#[derive(Debug, Clone)]
struct Level {
    g: Grid,
    op: Coeffs,
    /// Diagonal term `c` (sum of the children's), for coarsening further.
    c: Vec<f64>,
    u: Vec<f64>,
    f: Vec<f64>,
    r: Vec<f64>,
    /// Transfer between this level and the finer one above it.
    transfer: [AxisTransfer; 3],
    /// Row buffers: one fine row per coarse plane (restriction), one coarse row per fine plane
    /// (prolongation).
    rbuf: Vec<f64>,
    pbuf: Vec<f64>,
}

/// Dense Cholesky factor of the coarsest level.
#[derive(Debug, Clone)]
struct Dense {
    m: usize,
    /// Padded index of each unknown.
    map: Vec<usize>,
    /// Row-major lower factor.
    l: Vec<f64>,
    y: Vec<f64>,
}

impl Dense {
    fn new(g: &Grid) -> Self {
        let m = g.cells();
        let mut map = Vec::with_capacity(m);
        for k in 0..g.n[2] {
            for j in 0..g.n[1] {
                for i in 0..g.n[0] {
                    map.push(g.pad(i, j, k));
                }
            }
        }
        Dense { m, map, l: vec![0.0; m * m], y: vec![0.0; m] }
    }

    fn factor(&mut self, op: &SmoothView<'_>) -> Result<(), SolveError> {
        let m = self.m;
        let g = op.g;
        let l = &mut self.l;
        l.iter_mut().for_each(|v| *v = 0.0);
        for (row, &p) in self.map.iter().enumerate() {
            l[row * m + row] = 1.0 / f64::from(op.inv_d[p]);
            let [i, j, k] = [row % g.n[0], (row / g.n[0]) % g.n[1], row / (g.n[0] * g.n[1])];
            // Lower neighbours only (the factor is lower triangular).
            if i > 0 {
                l[row * m + row - 1] = -f64::from(op.tx[p]);
            }
            if j > 0 {
                l[row * m + row - g.n[0]] = -f64::from(op.ty[p]);
            }
            if k > 0 {
                l[row * m + row - g.n[0] * g.n[1]] = -f64::from(op.tz[p]);
            }
        }
        for j in 0..m {
            let ajj = l[j * m + j];
            let mut s = ajj;
            for q in 0..j {
                s -= l[j * m + q] * l[j * m + q];
            }
            if s.is_nan() || s <= 1e-12 * ajj || !s.is_finite() {
                return Err(SolveError::Singular {
                    what: "the operator has no diagonal term and no conducting boundary face (or a \
                           disconnected part without either)"
                        .into(),
                });
            }
            let djj = s.sqrt();
            l[j * m + j] = djj;
            for i in j + 1..m {
                let mut s = l[i * m + j];
                for q in 0..j {
                    s -= l[i * m + q] * l[j * m + q];
                }
                l[i * m + j] = s / djj;
            }
        }
        Ok(())
    }

    fn solve(&mut self, f: &[f64], u: &mut [f64]) {
        let m = self.m;
        let l = &self.l;
        let y = &mut self.y;
        for i in 0..m {
            let mut s = f[self.map[i]];
            for q in 0..i {
                s -= l[i * m + q] * y[q];
            }
            y[i] = s / l[i * m + i];
        }
        for i in (0..m).rev() {
            let mut s = y[i];
            for q in i + 1..m {
                s -= l[q * m + i] * y[q];
            }
            y[i] = s / l[i * m + i];
        }
        for i in 0..m {
            u[self.map[i]] = y[i];
        }
    }
}

/// The multigrid hierarchy below a fine operator.
///
/// The hierarchy preconditions `s A` for a power of two `s` that brings the largest diagonal
/// entry of the fine operator near one (so the single-precision coefficients stay far from the
/// ends of their range); conjugate gradients do not see a constant factor of the
/// preconditioner, and a power of two scales exactly.
#[derive(Debug, Clone)]
pub struct Multigrid {
    fine: Grid,
    /// The fine operator as the smoother streams it.
    fine_op: Coeffs,
    /// The power of two `s`.
    scale: f64,
    /// Fine residual.
    r0: Vec<f64>,
    levels: Vec<Level>,
    dense: Dense,
    /// Red-black sweeps before and after the coarse correction.
    pub sweeps: usize,
}

/// Cells of the next coarser level.
fn coarse_dims(n: [usize; 3]) -> [usize; 3] {
    n.map(|v| v.div_ceil(2))
}

impl Multigrid {
    /// Allocates the hierarchy of `op` and computes its coefficients.
    pub fn new(op: &Stencil7, sweeps: usize) -> Result<Self, SolveError> {
        let fine = op.g;
        let mut levels: Vec<Level> = Vec::new();
        let mut n = fine.n;
        let mut above = fine;
        while n.iter().product::<usize>() > COARSEST_MAX && n.iter().any(|&v| v > 1) {
            let nc = coarse_dims(n);
            let g = Grid::new(nc);
            let transfer = [0, 1, 2].map(|a| AxisTransfer::new(n[a], nc[a]));
            levels.push(Level {
                g,
                op: Coeffs::zeros(&g),
                c: zeros(&g),
                u: zeros(&g),
                f: zeros(&g),
                r: zeros(&g),
                transfer,
                rbuf: vec![0.0; (nc[2] + 2) * above.n[0]],
                pbuf: vec![0.0; (above.n[2] + 2) * nc[0]],
            });
            n = nc;
            above = g;
        }
        let dense = Dense::new(&Grid::new(n));
        let fine_op = Coeffs::zeros(&fine);
        let mut mg = Multigrid { fine, fine_op, scale: 1.0, r0: zeros(&fine), levels, dense, sweeps };
        mg.update(op)?;
        Ok(mg)
    }

    /// Cells per level, finest first.
    pub fn dims(&self) -> Vec<[usize; 3]> {
        std::iter::once(self.fine.n).chain(self.levels.iter().map(|l| l.g.n)).collect()
    }

    /// Bytes held by the hierarchy (fine coefficients, vectors and coarse operators).
    pub fn memory_bytes(&self) -> usize {
        let mut b = 8 * self.r0.len() + self.fine_op.bytes();
        for l in &self.levels {
            b += l.op.bytes() + 8 * (l.c.len() + l.u.len() + l.f.len() + l.r.len() + l.rbuf.len() + l.pbuf.len());
            for t in &l.transfer {
                b += 32 * t.fine.len() + t.coarse.iter().map(|c| 24 + 16 * c.len()).sum::<usize>();
            }
        }
        b + 8 * (self.dense.l.len() + self.dense.y.len() + self.dense.map.len())
    }

    /// Recomputes every level from the fine operator (same dimensions), in place.
    pub fn update(&mut self, op: &Stencil7) -> Result<(), SolveError> {
        if op.g != self.fine {
            return Err(SolveError::Shape { expected: self.fine.n, found: op.g.n });
        }
        let g = op.g;
        // The scale: largest diagonal entry of s A in [1, 2). A maximum does not depend on the
        // order of the planes.
        let plane_max = |k: usize| {
            let mut m = 0.0f64;
            for j in 1..=g.n[1] {
                for i in 1..=g.n[0] {
                    m = m.max(diagonal(&op.t, &op.c, &g, g.sz * k + g.sy * j + i));
                }
            }
            m
        };
        let dmax = if g.parallel() {
            (1..=g.n[2]).into_par_iter().map(plane_max).reduce(|| 0.0, f64::max)
        } else {
            (1..=g.n[2]).map(plane_max).fold(0.0, f64::max)
        };
        if !(dmax.is_finite() && dmax > 0.0) {
            return Err(SolveError::Singular {
                what: "the operator has no diagonal term and no conducting face anywhere (or a coefficient that \
                       is not finite)"
                    .into(),
            });
        }
        self.scale = 2f64.powi(-(dmax.log2().floor() as i32));
        let s = self.scale;
        single_precision(&g, &op.t, &op.c, s, &mut self.fine_op)?;
        for l in 0..self.levels.len() {
            let (above, below) = self.levels.split_at_mut(l);
            let lev = &mut below[0];
            match above.last() {
                Some(a) => coarsen(&a.g, |ax, p| f64::from(a.op.t[ax][p]), |p| a.c[p], lev)?,
                None => coarsen(&g, |ax, p| s * op.t[ax][p], |p| s * op.c[p], lev)?,
            }
            let gf = above.last().map_or(g, |a| a.g);
            for a in 0..3 {
                let w = wall_weights(&lev.g, &lev.op.t[a], a);
                lev.transfer[a].set(gf.n[a], lev.g.n[a], w);
            }
        }
        match self.levels.last() {
            Some(l) => self.dense.factor(&l.op.view(l.g)),
            None => self.dense.factor(&self.fine_op.view(g)),
        }
    }

    /// One V-cycle for `A u = f` from `u = 0`: writes `u` (padded; ghosts stay zero), an
    /// approximation of `(s A)^-1 f`.
    pub fn vcycle(&mut self, f: &[f64], u: &mut [f64]) {
        let nu = self.sweeps;
        let fine = self.fine_op.view(self.fine);
        if self.levels.is_empty() {
            self.dense.solve(f, u);
            return;
        }
        kernels::pre_smooth(&fine, u, f, nu, &mut self.r0);
        let nl = self.levels.len();
        restrict(&self.fine, &self.r0, &mut self.levels[0]);
        for l in 0..nl - 1 {
            let (a, b) = self.levels.split_at_mut(l + 1);
            let lev = &mut a[l];
            let view = lev.op.view(lev.g);
            kernels::pre_smooth(&view, &mut lev.u, &lev.f, nu, &mut lev.r);
            restrict(&lev.g, &lev.r, &mut b[0]);
        }
        {
            let last = &mut self.levels[nl - 1];
            self.dense.solve(&last.f, &mut last.u);
        }
        for l in (0..nl - 1).rev() {
            let (a, b) = self.levels.split_at_mut(l + 1);
            let lev = &mut a[l];
            prolong_add(&mut b[0], &lev.g, &mut lev.u);
            let view = lev.op.view(lev.g);
            kernels::post_smooth(&view, &mut lev.u, &lev.f, nu);
        }
        prolong_add(&mut self.levels[0], &self.fine, u);
        kernels::post_smooth(&fine, u, f, nu);
    }

    /// The fine operator as the smoother sees it (tests).
    #[cfg(test)]
    pub fn fine_view(&self) -> SmoothView<'_> {
        self.fine_op.view(self.fine)
    }
}

/// `c + sum of the six faces` of padded cell `p`.
#[inline]
fn diagonal(t: &[Vec<f64>; 3], c: &[f64], g: &Grid, p: usize) -> f64 {
    c[p] + t[0][p] + t[0][p + 1] + t[1][p] + t[1][p + g.sy] + t[2][p] + t[2][p + g.sz]
}

/// Fills the single-precision operator of `s A`: every face (boundary faces included) and the
/// inverse diagonal of the interior; fails at a cell that nothing ties down.
fn single_precision(g: &Grid, t: &[Vec<f64>; 3], c: &[f64], s: f64, out: &mut Coeffs) -> Result<(), SolveError> {
    let g = *g;
    for (oa, ta) in out.t.iter_mut().zip(t) {
        let convert = |(o, v): (&mut [f32], &[f64])| {
            for (o, &v) in o.iter_mut().zip(v) {
                *o = (s * v) as f32;
            }
        };
        if g.parallel() {
            oa.par_chunks_mut(g.sz).zip(ta.par_chunks(g.sz)).for_each(convert);
        } else {
            oa.chunks_mut(g.sz).zip(ta.chunks(g.sz)).for_each(convert);
        }
    }
    g.planes(&mut out.inv_d, |k, pl| {
        for j in 1..=g.n[1] {
            for i in 1..=g.n[0] {
                let p = g.sz * k + g.sy * j + i;
                let d = s * diagonal(t, c, &g, p);
                pl[p - g.sz * k] = if d > 0.0 { (1.0 / d) as f32 } else { f32::NAN };
            }
        }
    });
    check_diagonal(&g, &out.inv_d)
}

fn check_diagonal(g: &Grid, d: &[f32]) -> Result<(), SolveError> {
    for k in 1..=g.n[2] {
        for j in 1..=g.n[1] {
            let p0 = g.sz * k + g.sy * j + 1;
            if let Some(i) = d[p0..p0 + g.n[0]].iter().position(|&v| !(v.is_finite() && v > 0.0)) {
                return Err(SolveError::Singular {
                    what: format!(
                        "cell ({i}, {}, {}) of a {:?} level has no diagonal term and no conducting face \
                         (or a coefficient that is not finite)",
                        j - 1,
                        k - 1,
                        g.n
                    ),
                });
            }
        }
    }
    Ok(())
}

/// Prolongation weights of the parent next to each boundary of `axis` (see
/// [`AxisTransfer::set`]): linear extrapolation towards the value held beyond the face. For a
/// boundary face of conductance `T_b` in series with material like the interior, the held value
/// sits a distance `s` beyond the face with `s + h/2 = h T_in / T_b` (`T_in` the next interior
/// face), so the fine cell a quarter coarse spacing from the face gets
/// `(s + h/4) / (s + h/2) = 1 - T_b / (4 T_in)` of its parent: 1 for zero flux, 1/2 for a fixed
/// value. Averaged over the face, within [1/2, 1].
fn wall_weights(g: &Grid, t: &[f32], axis: usize) -> [f64; 2] {
    let n = g.n;
    if n[axis] < 2 {
        return [1.0, 1.0];
    }
    let (u1, u2) = match axis {
        0 => (1, 2),
        1 => (0, 2),
        _ => (0, 1),
    };
    let mut out = [1.0; 2];
    for (side, o) in out.iter_mut().enumerate() {
        // Faces: the boundary face and the first interior face from it.
        let (inner, outer) = if side == 0 { (1, 0) } else { (n[axis] - 1, n[axis]) };
        let (mut sum, mut count) = (0.0, 0usize);
        for b in 0..n[u2] {
            for a in 0..n[u1] {
                let mut f = [0; 3];
                f[u1] = a;
                f[u2] = b;
                f[axis] = outer;
                let tb = f64::from(t[g.pad(f[0], f[1], f[2])]);
                f[axis] = inner;
                let ti = f64::from(t[g.pad(f[0], f[1], f[2])]);
                if ti > 0.0 {
                    sum += tb / ti;
                    count += 1;
                }
            }
        }
        if count > 0 {
            *o = (1.0 - 0.25 * sum / count as f64).clamp(0.5, 1.0);
        }
    }
    out
}

/// Children of coarse cell `c` along an axis of `nf` fine cells: (first, count).
#[inline]
fn children(c: usize, nf: usize) -> (usize, usize) {
    (2 * c, if 2 * c + 1 < nf { 2 } else { 1 })
}

/// Re-discretised coarse faces and diagonal from the fine level (see the module notes).
///
/// `tf(axis, p)` is the fine face on the lower side of padded fine cell `p` along `axis` and
/// `cf(p)` its diagonal term. The coarse faces are stored in single precision and the coarse
/// diagonal `c + sum of those faces` is inverted from them.
fn coarsen(
    gf: &Grid,
    tf: impl Fn(usize, usize) -> f64 + Sync,
    cf: impl Fn(usize) -> f64 + Sync,
    lev: &mut Level,
) -> Result<(), SolveError> {
    let gc = lev.g;
    let nf = gf.n;
    let nc = gc.n;
    // Diagonal terms: sum of children.
    {
        let c = &mut lev.c;
        gc.planes(c, |kc, pl| {
            let (k0, kn) = children(kc - 1, nf[2]);
            for jc in 0..nc[1] {
                let (j0, jn) = children(jc, nf[1]);
                for ic in 0..nc[0] {
                    let (i0, inn) = children(ic, nf[0]);
                    let mut s = 0.0;
                    for k in k0..k0 + kn {
                        for j in j0..j0 + jn {
                            for i in i0..i0 + inn {
                                s += cf(gf.pad(i, j, k));
                            }
                        }
                    }
                    pl[gc.pad(ic, jc, kc - 1) - gc.sz * kc] = s;
                }
            }
        });
    }
    for axis in 0..3 {
        let (u1, u2) = match axis {
            0 => (1, 2),
            1 => (0, 2),
            _ => (0, 1),
        };
        let t = &mut lev.op.t[axis];
        let fine_face = |f: [usize; 3]| tf(axis, gf.pad(f[0], f[1], f[2]));
        // Coarse faces: coordinate along `axis` in 0..=nc[axis], the others interior. Planes of
        // the padded array run over z; a face plane along z may be the ghost plane nc[2] + 1.
        let kmax = if axis == 2 { nc[2] + 1 } else { nc[2] };
        let body = |kc: usize, pl: &mut [f32]| {
            if kc == 0 || kc > kmax {
                return;
            }
            for jc in 0..nc[1] + usize::from(axis == 1) {
                for ic in 0..nc[0] + usize::from(axis == 0) {
                    let cc = [ic, jc, kc - 1];
                    let a = cc[axis];
                    if cc[u1] >= nc[u1] || cc[u2] >= nc[u2] {
                        continue;
                    }
                    let (b0, bn) = children(cc[u1], nf[u1]);
                    let (e0, en) = children(cc[u2], nf[u2]);
                    // Fine face on the coarse face.
                    let mid = (2 * a).min(nf[axis]);
                    let left_two = a > 0 && children(a - 1, nf[axis]).1 == 2;
                    let right_two = a < nc[axis] && children(a, nf[axis]).1 == 2;
                    let mut total = 0.0;
                    for e in e0..e0 + en {
                        for b in b0..b0 + bn {
                            let mut f = [0; 3];
                            f[u1] = b;
                            f[u2] = e;
                            f[axis] = mid;
                            let tm = fine_face(f);
                            if tm <= 0.0 {
                                continue;
                            }
                            let mut res = 1.0 / tm;
                            if left_two {
                                f[axis] = mid - 1;
                                let tl = fine_face(f);
                                if tl <= 0.0 {
                                    continue;
                                }
                                res += 0.5 / tl;
                            }
                            if right_two {
                                f[axis] = mid + 1;
                                let tr = fine_face(f);
                                if tr <= 0.0 {
                                    continue;
                                }
                                res += 0.5 / tr;
                            }
                            total += 1.0 / res;
                        }
                    }
                    let p = gc.pad(cc[0], cc[1], cc[2]);
                    pl[p - gc.sz * kc] = total as f32;
                }
            }
        };
        if gc.parallel() {
            t.par_chunks_mut(gc.sz).enumerate().for_each(|(kc, pl)| body(kc, pl));
        } else {
            t.chunks_mut(gc.sz).enumerate().for_each(|(kc, pl)| body(kc, pl));
        }
    }
    let (t, c) = (&lev.op.t, &lev.c);
    gc.planes(&mut lev.op.inv_d, |k, pl| {
        for j in 1..=nc[1] {
            for i in 1..=nc[0] {
                let p = gc.sz * k + gc.sy * j + i;
                let d = c[p]
                    + f64::from(t[0][p])
                    + f64::from(t[0][p + 1])
                    + f64::from(t[1][p])
                    + f64::from(t[1][p + gc.sy])
                    + f64::from(t[2][p])
                    + f64::from(t[2][p + gc.sz]);
                pl[p - gc.sz * k] = if d > 0.0 { (1.0 / d) as f32 } else { f32::NAN };
            }
        }
    });
    check_diagonal(&gc, &lev.op.inv_d)
}

/// `lev.f = R r` with `R` the transpose of the trilinear prolongation.
fn restrict(gf: &Grid, r: &[f64], lev: &mut Level) {
    let gc = lev.g;
    let nxf = gf.n[0];
    let [tx, ty, tz] = &lev.transfer;
    let body = |kc: usize, (pl, buf): (&mut [f64], &mut [f64])| {
        if kc == 0 || kc > gc.n[2] {
            return;
        }
        for jc in 0..gc.n[1] {
            buf.iter_mut().for_each(|v| *v = 0.0);
            for &(k, wk) in &tz.coarse[kc - 1] {
                for &(j, wj) in &ty.coarse[jc] {
                    let w = wj * wk;
                    let p0 = gf.pad(0, j, k);
                    let row = &r[p0..p0 + nxf];
                    for (b, &v) in buf.iter_mut().zip(row) {
                        *b += w * v;
                    }
                }
            }
            let o = gc.pad(0, jc, kc - 1) - gc.sz * kc;
            for (ic, list) in tx.coarse.iter().enumerate() {
                let mut s = 0.0;
                for &(i, wi) in list {
                    s += wi * buf[i];
                }
                pl[o + ic] = s;
            }
        }
    };
    let f = &mut lev.f;
    let rbuf = &mut lev.rbuf;
    if gc.parallel() {
        f.par_chunks_mut(gc.sz).zip(rbuf.par_chunks_mut(nxf)).enumerate().for_each(|(k, x)| body(k, x));
    } else {
        f.chunks_mut(gc.sz).zip(rbuf.chunks_mut(nxf)).enumerate().for_each(|(k, x)| body(k, x));
    }
}

/// `u += P lev.u`: trilinear interpolation of the coarse correction to the fine level `gf`.
fn prolong_add(lev: &mut Level, gf: &Grid, u: &mut [f64]) {
    let gc = lev.g;
    let ncx = gc.n[0];
    let [tx, ty, tz] = &lev.transfer;
    let uc = &lev.u;
    let body = |k: usize, (pl, buf): (&mut [f64], &mut [f64])| {
        if k == 0 || k > gf.n[2] {
            return;
        }
        let rz = tz.fine[k - 1];
        for j in 0..gf.n[1] {
            let ry = ty.fine[j];
            let rows = [
                (ry.parent, rz.parent, ry.wp * rz.wp),
                (ry.nb, rz.parent, ry.wn * rz.wp),
                (ry.parent, rz.nb, ry.wp * rz.wn),
                (ry.nb, rz.nb, ry.wn * rz.wn),
            ];
            buf.iter_mut().for_each(|v| *v = 0.0);
            for (jc, kc, w) in rows {
                if w == 0.0 {
                    continue;
                }
                let p0 = gc.pad(0, jc, kc);
                for (b, &v) in buf.iter_mut().zip(&uc[p0..p0 + ncx]) {
                    *b += w * v;
                }
            }
            let o = gf.pad(0, j, k - 1) - gf.sz * k;
            for (i, r) in tx.fine.iter().enumerate() {
                pl[o + i] += r.wp * buf[r.parent] + r.wn * buf[r.nb];
            }
        }
    };
    let pbuf = &mut lev.pbuf;
    if gf.parallel() {
        u.par_chunks_mut(gf.sz).zip(pbuf.par_chunks_mut(ncx)).enumerate().for_each(|(k, x)| body(k, x));
    } else {
        u.chunks_mut(gf.sz).zip(pbuf.chunks_mut(ncx)).enumerate().for_each(|(k, x)| body(k, x));
    }
}
