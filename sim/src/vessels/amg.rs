//! Smoothed-aggregation algebraic multigrid (Vanek, Mandel and Brezina 1996, Computing 56:179),
//! used as the preconditioner of the conjugate-gradient blood-pressure solve.
//!
//! Setup, level by level until at most [`COARSEST`] unknowns remain: strong connections
//! `|a_ij| >= theta sqrt(a_ii a_jj)`; aggregates by the three greedy passes of Vanek et al.;
//! the piecewise-constant tentative prolongator `P0`; the smoothed prolongator
//! `P = (I - omega D^-1 A) P0` with `omega = 4 / (3 rho)` and `rho` the Gershgorin bound of
//! `D^-1 A`; restriction `R = P^T`; the Galerkin coarse operator `R A P`. The coarsest level is
//! solved by dense Cholesky. One V-cycle with a forward Gauss-Seidel sweep before and a backward
//! sweep after the coarse correction is a symmetric positive definite preconditioner, as
//! conjugate gradients needs. Everything runs in a fixed order: results do not depend on threads.

/// Largest system solved directly.
pub const COARSEST: usize = 200;
/// Strength threshold of connections.
const THETA: f64 = 0.08;

/// A sparse matrix in compressed rows.
#[derive(Debug, Clone, Default)]
pub struct Sparse {
    pub rows: usize,
    pub cols: usize,
    pub start: Vec<usize>,
    pub col: Vec<u32>,
    pub val: Vec<f64>,
}

/// Rows per parallel task.
const CHUNK: usize = 4096;
/// Vectors up to this length are handled on one thread (waking threads costs more).
const SERIAL: usize = 1 << 16;

/// Sets `y[i] = f(i)` for every row, in parallel over fixed chunks: each value is computed by
/// the same sequential expression whatever the number of threads.
pub fn par_rows(y: &mut [f64], f: impl Fn(usize, f64) -> f64 + Sync) {
    if y.len() <= SERIAL {
        for (i, yi) in y.iter_mut().enumerate() {
            *yi = f(i, *yi);
        }
        return;
    }
    use rayon::prelude::*;
    y.par_chunks_mut(CHUNK).enumerate().for_each(|(c, ys)| {
        for (k, yi) in ys.iter_mut().enumerate() {
            *yi = f(c * CHUNK + k, *yi);
        }
    });
}

/// `sum a_i b_i` over fixed chunks added in order: the same bits for any number of threads.
pub fn dot(a: &[f64], b: &[f64]) -> f64 {
    use rayon::prelude::*;
    if a.len() <= SERIAL {
        return a
            .chunks(CHUNK)
            .zip(b.chunks(CHUNK))
            .map(|(x, y)| x.iter().zip(y).map(|(p, q)| p * q).sum::<f64>())
            .sum();
    }
    let partial: Vec<f64> =
        a.par_chunks(CHUNK).zip(b.par_chunks(CHUNK)).map(|(x, y)| x.iter().zip(y).map(|(p, q)| p * q).sum()).collect();
    partial.iter().sum()
}

impl Sparse {
    #[inline]
    fn row_dot(&self, i: usize, x: &[f64]) -> f64 {
        let mut s = 0.0;
        for k in self.start[i]..self.start[i + 1] {
            s += self.val[k] * x[self.col[k] as usize];
        }
        s
    }

    /// `y = A x`.
    pub fn mul(&self, x: &[f64], y: &mut [f64]) {
        par_rows(&mut y[..self.rows], |i, _| self.row_dot(i, x));
    }

    fn diagonal(&self) -> Vec<f64> {
        (0..self.rows)
            .map(|i| {
                (self.start[i]..self.start[i + 1]).find(|&k| self.col[k] as usize == i).map_or(0.0, |k| self.val[k])
            })
            .collect()
    }

    fn transpose(&self) -> Sparse {
        let mut count = vec![0usize; self.cols + 1];
        for &c in &self.col {
            count[c as usize + 1] += 1;
        }
        for j in 0..self.cols {
            count[j + 1] += count[j];
        }
        let mut fill = count.clone();
        let mut col = vec![0u32; self.col.len()];
        let mut val = vec![0.0; self.val.len()];
        for i in 0..self.rows {
            for k in self.start[i]..self.start[i + 1] {
                let c = self.col[k] as usize;
                col[fill[c]] = i as u32;
                val[fill[c]] = self.val[k];
                fill[c] += 1;
            }
        }
        Sparse { rows: self.cols, cols: self.rows, start: count, col, val }
    }

    /// `A B` (Gustavson's row-by-row product with a dense accumulator; columns sorted).
    fn product(&self, b: &Sparse) -> Sparse {
        let mut start = Vec::with_capacity(self.rows + 1);
        let mut col = Vec::new();
        let mut val = Vec::new();
        let mut acc = vec![0.0; b.cols];
        let mut mark = vec![usize::MAX; b.cols];
        let mut touched: Vec<u32> = Vec::new();
        start.push(0);
        for i in 0..self.rows {
            touched.clear();
            for k in self.start[i]..self.start[i + 1] {
                let (j, a) = (self.col[k] as usize, self.val[k]);
                for m in b.start[j]..b.start[j + 1] {
                    let c = b.col[m] as usize;
                    if mark[c] != i {
                        mark[c] = i;
                        acc[c] = 0.0;
                        touched.push(c as u32);
                    }
                    acc[c] += a * b.val[m];
                }
            }
            touched.sort_unstable();
            for &c in &touched {
                col.push(c);
                val.push(acc[c as usize]);
            }
            start.push(col.len());
        }
        Sparse { rows: self.rows, cols: b.cols, start, col, val }
    }
}

/// Aggregate of a node left out of the coarse level.
const ISOLATED: u32 = u32::MAX - 1;

/// Aggregates of the strong-connection graph (Vanek, Mandel and Brezina 1996, three passes).
/// Returns the aggregate of every unknown ([`ISOLATED`] for nodes without strong connections)
/// and the number of aggregates.
fn aggregate(a: &Sparse, diag: &[f64]) -> (Vec<u32>, usize) {
    let n = a.rows;
    const NONE: u32 = u32::MAX;
    let strong = |i: usize, k: usize| is_strong(a, diag, i, k);
    let mut agg = vec![NONE; n];
    let mut count = 0u32;
    // Nodes without strong connections (dominated by their diagonal) stay out of the coarse
    // level: the smoother alone resolves them (their prolongator rows are zero).
    for (i, g) in agg.iter_mut().enumerate() {
        if !(a.start[i]..a.start[i + 1]).any(|k| strong(i, k)) {
            *g = ISOLATED;
        }
    }
    // Pass 1: a node whose strong neighbours are all free starts an aggregate with them.
    for i in 0..n {
        if agg[i] != NONE {
            continue;
        }
        let free = (a.start[i]..a.start[i + 1]).all(|k| !strong(i, k) || agg[a.col[k] as usize] == NONE);
        if free {
            agg[i] = count;
            for k in a.start[i]..a.start[i + 1] {
                if strong(i, k) {
                    agg[a.col[k] as usize] = count;
                }
            }
            count += 1;
        }
    }
    // Pass 2: the rest join the aggregate of their strongest aggregated neighbour.
    let first = agg.clone();
    for (i, g) in agg.iter_mut().enumerate() {
        if *g != NONE {
            continue;
        }
        let mut best = (0.0, NONE);
        for k in a.start[i]..a.start[i + 1] {
            let j = a.col[k] as usize;
            if strong(i, k) && first[j] < ISOLATED && a.val[k].abs() > best.0 {
                best = (a.val[k].abs(), first[j]);
            }
        }
        *g = best.1;
    }
    // Pass 3: what is left forms aggregates with its free strong neighbours.
    for i in 0..n {
        if agg[i] != NONE {
            continue;
        }
        agg[i] = count;
        for k in a.start[i]..a.start[i + 1] {
            let j = a.col[k] as usize;
            if strong(i, k) && agg[j] == NONE {
                agg[j] = count;
            }
        }
        count += 1;
    }
    (agg, count as usize)
}

/// Whether entry `k` of row `i` is a strong off-diagonal connection.
#[inline]
fn is_strong(a: &Sparse, diag: &[f64], i: usize, k: usize) -> bool {
    let j = a.col[k] as usize;
    j != i && a.val[k] * a.val[k] >= THETA * THETA * (diag[i] * diag[j]).abs()
}

/// `P = (I - omega (D^F)^-1 A^F) P0` for the piecewise-constant `P0` of `agg`, with the filtered
/// matrix `A^F` (weak connections dropped and lumped into the diagonal; Vanek et al. 1996), which
/// keeps the coarse operators sparse.
fn smoothed_prolongator(a: &Sparse, diag: &[f64], agg: &[u32], nc: usize) -> Sparse {
    let n = a.rows;
    // Filtered diagonal.
    let dfil: Vec<f64> = (0..n)
        .map(|i| {
            let weak: f64 = (a.start[i]..a.start[i + 1])
                .filter(|&k| a.col[k] as usize != i && !is_strong(a, diag, i, k))
                .map(|k| a.val[k])
                .sum();
            diag[i] + weak
        })
        .collect();
    let rho = (0..n)
        .map(|i| {
            let off: f64 =
                (a.start[i]..a.start[i + 1]).filter(|&k| is_strong(a, diag, i, k)).map(|k| a.val[k].abs()).sum();
            (dfil[i].abs() + off) / dfil[i]
        })
        .fold(0.0f64, f64::max)
        .max(1e-300);
    let omega = 4.0 / (3.0 * rho);
    let mut start = Vec::with_capacity(n + 1);
    let mut col = Vec::new();
    let mut val = Vec::new();
    let mut acc = vec![0.0; nc];
    let mut mark = vec![usize::MAX; nc];
    let mut touched: Vec<u32> = Vec::new();
    start.push(0);
    for i in 0..n {
        touched.clear();
        let mut add = |c: usize, v: f64, touched: &mut Vec<u32>| {
            if mark[c] != i {
                mark[c] = i;
                acc[c] = 0.0;
                touched.push(c as u32);
            }
            acc[c] += v;
        };
        let s = omega / dfil[i];
        if agg[i] < ISOLATED {
            add(agg[i] as usize, 1.0 - omega, &mut touched);
        }
        for k in a.start[i]..a.start[i + 1] {
            let g = agg[a.col[k] as usize];
            if g < ISOLATED && is_strong(a, diag, i, k) {
                add(g as usize, -s * a.val[k], &mut touched);
            }
        }
        touched.sort_unstable();
        for &c in &touched {
            let v = acc[c as usize];
            if v != 0.0 {
                col.push(c);
                val.push(v);
            }
        }
        start.push(col.len());
    }
    Sparse { rows: n, cols: nc, start, col, val }
}

/// Dense Cholesky factor of a small symmetric positive definite matrix.
#[derive(Debug, Clone, Default)]
struct Dense {
    n: usize,
    l: Vec<f64>,
}

impl Dense {
    fn factor(a: &Sparse) -> Self {
        let n = a.rows;
        let mut l = vec![0.0; n * n];
        for i in 0..n {
            for k in a.start[i]..a.start[i + 1] {
                l[i * n + a.col[k] as usize] = a.val[k];
            }
        }
        for j in 0..n {
            let mut d = l[j * n + j];
            for k in 0..j {
                d -= l[j * n + k] * l[j * n + k];
            }
            let d = if d > 0.0 { d.sqrt() } else { l[j * n + j].abs().sqrt().max(1e-300) };
            l[j * n + j] = d;
            for i in j + 1..n {
                let mut s = l[i * n + j];
                for k in 0..j {
                    s -= l[i * n + k] * l[j * n + k];
                }
                l[i * n + j] = s / d;
            }
        }
        Dense { n, l }
    }

    fn solve(&self, b: &[f64], x: &mut [f64]) {
        let n = self.n;
        for i in 0..n {
            let row = &self.l[i * n..i * n + i];
            let s = b[i] - row.iter().zip(&x[..i]).map(|(l, x)| l * x).sum::<f64>();
            x[i] = s / self.l[i * n + i];
        }
        for i in (0..n).rev() {
            let mut s = x[i];
            for (k, xk) in x.iter().enumerate().skip(i + 1) {
                s -= self.l[k * n + i] * xk;
            }
            x[i] = s / self.l[i * n + i];
        }
    }
}

/// A sparse matrix in single precision, for the cycle (the setup is in double precision).
#[derive(Debug, Clone, Default)]
struct Sparse32 {
    rows: usize,
    start: Vec<usize>,
    col: Vec<u32>,
    val: Vec<f32>,
}

impl Sparse32 {
    fn from(a: &Sparse) -> Self {
        Sparse32 {
            rows: a.rows,
            start: a.start.clone(),
            col: a.col.clone(),
            val: a.val.iter().map(|&v| v as f32).collect(),
        }
    }

    #[inline]
    fn row_dot(&self, i: usize, x: &[f32]) -> f32 {
        let mut s = 0.0f32;
        for k in self.start[i]..self.start[i + 1] {
            s += self.val[k] * x[self.col[k] as usize];
        }
        s
    }

    /// `y = A x` or `y += A x`.
    fn mul(&self, x: &[f32], y: &mut [f32], add: bool) {
        par_rows32(&mut y[..self.rows], |i, yi| if add { yi + self.row_dot(i, x) } else { self.row_dot(i, x) });
    }
}

/// [`par_rows`] for single precision.
fn par_rows32(y: &mut [f32], f: impl Fn(usize, f32) -> f32 + Sync) {
    if y.len() <= SERIAL {
        for (i, yi) in y.iter_mut().enumerate() {
            *yi = f(i, *yi);
        }
        return;
    }
    use rayon::prelude::*;
    y.par_chunks_mut(CHUNK).enumerate().for_each(|(c, ys)| {
        for (k, yi) in ys.iter_mut().enumerate() {
            *yi = f(c * CHUNK + k, *yi);
        }
    });
}

/// One level of the cycle, in single precision: a V-cycle is a preconditioner, its rounding
/// only changes how fast the double-precision conjugate gradients converge, not their result.
#[derive(Debug, Clone)]
struct Level {
    a: Sparse32,
    inv_diag: Vec<f32>,
    /// Position of the diagonal entry in each row (columns are sorted).
    dpos: Vec<usize>,
    p: Sparse32,
    r: Sparse32,
    /// Work vectors: solution, right-hand side, residual of this level.
    x: Vec<f32>,
    b: Vec<f32>,
    res: Vec<f32>,
}

/// The multigrid hierarchy of one matrix.
#[derive(Debug, Clone)]
pub struct Amg {
    levels: Vec<Level>,
    coarse: Dense,
    coarse_b: Vec<f64>,
    coarse_x: Vec<f64>,
    coarse_b32: Vec<f32>,
    coarse_x32: Vec<f32>,
}

impl Amg {
    /// Builds the hierarchy of a symmetric positive definite M-matrix.
    pub fn new(a: Sparse) -> Self {
        let mut levels = Vec::new();
        let mut cur = a;
        while cur.rows > COARSEST && levels.len() < 25 {
            let diag = cur.diagonal();
            let (agg, nc) = aggregate(&cur, &diag);
            if nc as f64 > 0.9 * cur.rows as f64 || nc == 0 {
                break;
            }
            let p = smoothed_prolongator(&cur, &diag, &agg, nc);
            let r = p.transpose();
            let coarse = r.product(&cur.product(&p));
            let n = cur.rows;
            let dpos = (0..n)
                .map(|i| (cur.start[i]..cur.start[i + 1]).find(|&k| cur.col[k] as usize == i).unwrap_or(cur.start[i]))
                .collect();
            levels.push(Level {
                a: Sparse32::from(&cur),
                inv_diag: diag.iter().map(|&d| (1.0 / d) as f32).collect(),
                dpos,
                p: Sparse32::from(&p),
                r: Sparse32::from(&r),
                x: vec![0.0; n],
                b: vec![0.0; n],
                res: vec![0.0; n],
            });
            cur = coarse;
        }
        let n = cur.rows;
        Amg {
            levels,
            coarse: Dense::factor(&cur),
            coarse_b: vec![0.0; n],
            coarse_x: vec![0.0; n],
            coarse_b32: vec![0.0; n],
            coarse_x32: vec![0.0; n],
        }
    }

    /// Number of levels, the direct coarsest one included.
    pub fn depth(&self) -> usize {
        self.levels.len() + 1
    }

    /// `z = M^-1 r`: one V-cycle from a zero guess.
    pub fn apply(&mut self, r: &[f64], z: &mut [f64]) {
        if self.levels.is_empty() {
            self.coarse.solve(r, z);
            return;
        }
        // Scaled into single precision's range; the cycle is linear, so the scale comes back out.
        let scale = r.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        if scale == 0.0 {
            z.iter_mut().for_each(|v| *v = 0.0);
            return;
        }
        for (b, &v) in self.levels[0].b.iter_mut().zip(r) {
            *b = (v / scale) as f32;
        }
        self.cycle(0);
        for (zi, &x) in z.iter_mut().zip(&self.levels[0].x) {
            *zi = x as f64 * scale;
        }
    }

    fn cycle(&mut self, k: usize) {
        let (head, tail) = self.levels.split_at_mut(k + 1);
        let lv = &mut head[k];
        // Forward Gauss-Seidel from x = 0 is forward substitution with the lower triangle, and
        // leaves the residual -U x (the upper triangle's part): half the work of a sweep plus a
        // residual.
        forward_from_zero(&lv.a, &lv.dpos, &lv.inv_diag, &lv.b, &mut lv.x);
        upper_residual(&lv.a, &lv.dpos, &lv.x, &mut lv.res);
        if let Some(next) = tail.first_mut() {
            lv.r.mul(&lv.res, &mut next.b, false);
            self.cycle(k + 1);
            let (head, tail) = self.levels.split_at_mut(k + 1);
            head[k].p.mul(&tail[0].x, &mut head[k].x, true);
        } else {
            lv.r.mul(&lv.res, &mut self.coarse_b32, false);
            for (b, &v) in self.coarse_b.iter_mut().zip(&self.coarse_b32) {
                *b = v as f64;
            }
            self.coarse.solve(&self.coarse_b, &mut self.coarse_x);
            for (x32, &v) in self.coarse_x32.iter_mut().zip(&self.coarse_x) {
                *x32 = v as f32;
            }
            lv.p.mul(&self.coarse_x32, &mut lv.x, true);
        }
        let lv = &mut self.levels[k];
        backward_gauss_seidel(&lv.a, &lv.inv_diag, &lv.b, &mut lv.x);
    }
}

/// Forward Gauss-Seidel sweep from a zero guess: `x_i = (b_i - sum_{j<i} a_ij x_j) / a_ii`.
fn forward_from_zero(a: &Sparse32, dpos: &[usize], inv_diag: &[f32], b: &[f32], x: &mut [f32]) {
    for i in 0..a.rows {
        let mut s = b[i];
        for k in a.start[i]..dpos[i] {
            s -= a.val[k] * x[a.col[k] as usize];
        }
        x[i] = s * inv_diag[i];
    }
}

/// The residual `b - A x` after [`forward_from_zero`]: `-sum_{j>i} a_ij x_j`.
fn upper_residual(a: &Sparse32, dpos: &[usize], x: &[f32], res: &mut [f32]) {
    par_rows32(&mut res[..a.rows], |i, _| {
        let mut s = 0.0f32;
        for k in dpos[i] + 1..a.start[i + 1] {
            s -= a.val[k] * x[a.col[k] as usize];
        }
        s
    });
}

/// One backward Gauss-Seidel sweep.
fn backward_gauss_seidel(a: &Sparse32, inv_diag: &[f32], b: &[f32], x: &mut [f32]) {
    for i in (0..a.rows).rev() {
        let mut s = b[i];
        for k in a.start[i]..a.start[i + 1] {
            let j = a.col[k] as usize;
            if j != i {
                s -= a.val[k] * x[j];
            }
        }
        x[i] = s * inv_diag[i];
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The 7-point Laplacian of an `m^3` grid with Dirichlet boundaries (an M-matrix), with
    /// conductances varying by three orders of magnitude.
    fn grid(m: usize) -> Sparse {
        let id = |i: usize, j: usize, k: usize| i + m * (j + m * k);
        let g = |a: usize, b: usize| 10f64.powf(3.0 * (((a * 7919 + b * 104_729) % 1000) as f64 / 1000.0));
        let mut rows: Vec<Vec<(u32, f64)>> = vec![Vec::new(); m * m * m];
        for k in 0..m {
            for j in 0..m {
                for i in 0..m {
                    let a = id(i, j, k);
                    let mut diag = 0.0;
                    for (di, dj, dk) in [(1i64, 0i64, 0i64), (-1, 0, 0), (0, 1, 0), (0, -1, 0), (0, 0, 1), (0, 0, -1)] {
                        let (x, y, z) = (i as i64 + di, j as i64 + dj, k as i64 + dk);
                        let inside = [x, y, z].iter().all(|&c| c >= 0 && c < m as i64);
                        // Boundary links get a key of their own beyond the grid.
                        let b = if inside { id(x as usize, y as usize, z as usize) } else { m * m * m + a };
                        let w = g(a.min(b), a.max(b));
                        diag += w;
                        if inside {
                            rows[a].push((b as u32, -w));
                        }
                    }
                    rows[a].push((a as u32, diag));
                }
            }
        }
        let mut s = Sparse { rows: m * m * m, cols: m * m * m, start: vec![0], col: vec![], val: vec![] };
        for mut r in rows {
            r.sort_by_key(|e| e.0);
            for (c, v) in r {
                s.col.push(c);
                s.val.push(v);
            }
            s.start.push(s.col.len());
        }
        s
    }

    #[test]
    fn multigrid_preconditioned_cg_matches_a_direct_solve() {
        // Reference: dense Cholesky of the same matrix (Golub and Van Loan, Matrix Computations,
        // algorithm 4.2.1); the multigrid hierarchy must have several levels at this size.
        let a = grid(10);
        let n = a.rows;
        let b: Vec<f64> = (0..n).map(|i| ((i * 37) % 11) as f64 - 5.0).collect();
        let mut want = vec![0.0; n];
        Dense::factor(&a).solve(&b, &mut want);
        let amg = Amg::new(a.clone());
        assert!(amg.depth() >= 2, "{} levels", amg.depth());
        let csr = crate::vessels::flow::Csr { n, start: a.start.clone(), col: a.col.clone(), val: a.val.clone() };
        let mut x = vec![0.0; n];
        let (it, res) = crate::vessels::flow::pcg(&csr, &b, &mut x, 1e-12, 500).unwrap();
        assert!(res <= 1e-12 && it < 60, "{it} iterations, residual {res}");
        let scale = want.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        for i in 0..n {
            assert!((x[i] - want[i]).abs() <= 1e-8 * scale, "{i}: {} {}", x[i], want[i]);
        }
    }
}
