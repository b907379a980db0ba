//! The hot loops: operator application, residual and red-black Gauss-Seidel, on padded storage.
//!
//! Rows are processed on fixed-length slices (or fixed-size chunks) so that bounds checks leave
//! the inner loops and the compiler can vectorise them; on processors with AVX2 the same loops
//! run from a second build with four lanes (chosen at run time, same results).
//!
//! Smoothing ([`smooth`]) pipelines its red-black half-sweeps and the residual over the z-planes,
//! so each array is streamed once per smoothing step; threads own slabs of planes and never read
//! what another thread is writing (the rules are stated at [`smooth`]). Results are those of
//! plain colour-by-colour sweeps, bit for bit, for any number of threads.

use rayon::prelude::*;

use super::grid::Grid;

/// A 7-point operator as the conjugate-gradient matrix products see it: face transmissibilities
/// per axis and the diagonal term `c`, padded, in double precision.
#[derive(Clone, Copy)]
pub struct OpView<'a> {
    pub g: Grid,
    pub tx: &'a [f64],
    pub ty: &'a [f64],
    pub tz: &'a [f64],
    pub c: &'a [f64],
}

impl OpView<'_> {
    fn check(&self) {
        let n = self.g.len;
        assert!(self.tx.len() == n && self.ty.len() == n && self.tz.len() == n && self.c.len() == n);
    }
}

/// A 7-point operator as the multigrid sees it: face transmissibilities and the inverse diagonal
/// `1 / d`, padded, stored in single precision (half the bytes to stream) and used in double
/// precision arithmetic. The operator is the one with exactly these faces and diagonal
/// `d = 1 / inv_d`, so smoothing and residuals agree to double-precision rounding.
#[derive(Clone, Copy)]
pub struct SmoothView<'a> {
    pub g: Grid,
    pub tx: &'a [f32],
    pub ty: &'a [f32],
    pub tz: &'a [f32],
    pub inv_d: &'a [f32],
}

impl SmoothView<'_> {
    fn check(&self) {
        let n = self.g.len;
        assert!(self.tx.len() == n && self.ty.len() == n && self.tz.len() == n && self.inv_d.len() == n);
    }
}

/// Cells per chunk of a vectorised row update.
const CHUNK: usize = 64;

/// `(A u)` along one row: `out[i] = c u + sum_f T_f (u - u_f)` for the `nx = out.len()` cells
/// starting at padded index `p0`.
#[inline(always)]
fn row_apply(op: &OpView<'_>, u: &[f64], p0: usize, out: &mut [f64]) {
    let nx = out.len();
    let (sy, sz) = (op.g.sy, op.g.sz);
    let uc = &u[p0 - 1..p0 + nx + 1];
    let us = &u[p0 - sy..p0 - sy + nx];
    let un = &u[p0 + sy..p0 + sy + nx];
    let ud = &u[p0 - sz..p0 - sz + nx];
    let uu = &u[p0 + sz..p0 + sz + nx];
    let tx = &op.tx[p0..p0 + nx + 1];
    let tys = &op.ty[p0..p0 + nx];
    let tyn = &op.ty[p0 + sy..p0 + sy + nx];
    let tzd = &op.tz[p0..p0 + nx];
    let tzu = &op.tz[p0 + sz..p0 + sz + nx];
    let c = &op.c[p0..p0 + nx];
    for i in 0..nx {
        let v = uc[i + 1];
        out[i] = c[i] * v
            + tx[i] * (v - uc[i])
            + tx[i + 1] * (v - uc[i + 2])
            + tys[i] * (v - us[i])
            + tyn[i] * (v - un[i])
            + tzd[i] * (v - ud[i])
            + tzu[i] * (v - uu[i]);
    }
}

/// Whether the AVX2 builds of the row loops can run on this processor. They compute exactly what
/// the portable builds compute (the same operations in the same order, no fused multiply-add),
/// only four lanes at a time.
#[inline]
fn wide() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::arch::is_x86_feature_detected!("avx2")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// `A u` on the rows of padded plane `k` into that plane's slice `pl`; returns `u . (A u)` over
/// the plane when `dot`.
#[inline(always)]
fn plane_apply_body(op: &OpView<'_>, u: &[f64], k: usize, pl: &mut [f64], dot: bool) -> f64 {
    let g = op.g;
    let nx = g.n[0];
    let mut s = 0.0;
    for j in 1..=g.n[1] {
        let p0 = g.sz * k + g.sy * j + 1;
        let o = g.sy * j + 1;
        let row = &mut pl[o..o + nx];
        row_apply(op, u, p0, row);
        if dot {
            s += dot_row(&u[p0..p0 + nx], row);
        }
    }
    s
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn plane_apply_wide(op: &OpView<'_>, u: &[f64], k: usize, pl: &mut [f64], dot: bool) -> f64 {
    plane_apply_body(op, u, k, pl, dot)
}

fn plane_apply(op: &OpView<'_>, u: &[f64], k: usize, pl: &mut [f64], dot: bool) -> f64 {
    #[cfg(target_arch = "x86_64")]
    if wide() {
        // SAFETY: the processor has AVX2 (checked just above).
        return unsafe { plane_apply_wide(op, u, k, pl, dot) };
    }
    plane_apply_body(op, u, k, pl, dot)
}

/// `out = A u` on the interior; ghosts of `out` untouched.
pub fn apply(op: &OpView<'_>, u: &[f64], out: &mut [f64]) {
    op.check();
    op.g.planes(out, |k, pl| {
        plane_apply(op, u, k, pl, false);
    });
}

/// `out = A u`; returns `u . out` (partials per plane, added in plane order).
pub fn apply_dot(op: &OpView<'_>, u: &[f64], out: &mut [f64], partials: &mut [f64]) -> f64 {
    op.check();
    op.g.planes_sum(out, partials, |k, pl| plane_apply(op, u, k, pl, true))
}

/// `r = f - A u` on the interior, for a multigrid operator (tests).
#[cfg(test)]
pub fn residual_smooth(op: &SmoothView<'_>, u: &[f64], f: &[f64], r: &mut [f64]) {
    op.check();
    let g = op.g;
    let nx = g.n[0];
    g.planes(r, |k, pl| {
        for j in 1..=g.n[1] {
            let p0 = g.sz * k + g.sy * j + 1;
            let o = g.sy * j + 1;
            let row = &mut pl[o..o + nx];
            row_apply_smooth(op, u, p0, row);
            let fr = &f[p0..p0 + nx];
            for i in 0..nx {
                row[i] = fr[i] - row[i];
            }
        }
    });
}

/// Four-way unrolled dot product of two equal slices (fixed association order).
#[inline]
pub fn dot_row(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len();
    let b = &b[..n];
    let mut s = [0.0f64; 4];
    let chunks = n / 4;
    for c in 0..chunks {
        for l in 0..4 {
            s[l] += a[4 * c + l] * b[4 * c + l];
        }
    }
    let mut tail = 0.0;
    for i in 4 * chunks..n {
        tail += a[i] * b[i];
    }
    (s[0] + s[1]) + (s[2] + s[3]) + tail
}

/// Pointers to vectors that several threads write at disjoint cells during a sweep.
#[derive(Clone, Copy)]
struct Shared {
    u: *mut f64,
    r: *mut f64,
}
// SAFETY: only `sweep` dereferences these, under the ownership rules stated there.
unsafe impl Send for Shared {}
unsafe impl Sync for Shared {}

/// How a row update may read the vector.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Read {
    /// Whole rows of planes `k - 1..=k + 1`, which the calling thread owns in this phase.
    Rows,
    /// Only the cells of the other colour (which no thread writes in this phase).
    OtherColour,
    /// Nothing: the vector is zero before this sweep (first colour of a sweep from zero).
    Zero,
}

/// Updates the cells of one colour in the row of interior coordinates `(j, k)` (padded plane
/// `kp = k + 1`, padded row `jp`) to `(f + sum T u_nb) / d`.
///
/// # Safety
/// `u` points to a padded vector of `op.g.len` values; the caller guarantees the [`Read`]
/// contract: no other thread writes a value this call reads, and no other thread reads or writes
/// a cell of this colour in this row.
#[inline(always)]
unsafe fn row_colour(op: &SmoothView<'_>, u: *mut f64, f: &[f64], kp: usize, jp: usize, colour: usize, read: Read) {
    let g = op.g;
    let nx = g.n[0];
    let (sy, sz) = (g.sy, g.sz);
    let first = (colour + (jp - 1) + (kp - 1)) % 2; // interior i of the first cell of the colour
    let row0 = sz * kp + sy * jp + 1; // padded index of interior i = 0
    match read {
        Read::Zero => {
            let mut i = first;
            while i < nx {
                let p = row0 + i;
                // SAFETY: p is an interior cell of this row (contract above).
                unsafe { *u.add(p) = f[p] * f64::from(op.inv_d[p]) };
                i += 2;
            }
        }
        Read::OtherColour => {
            let mut i = first;
            while i < nx {
                let p = row0 + i;
                // SAFETY: p and its six neighbours lie in the padded vector; the neighbours are of
                // the other colour (or ghosts), which no thread writes now (contract above).
                unsafe {
                    let s = f[p]
                        + f64::from(op.tx[p]) * *u.add(p - 1)
                        + f64::from(op.tx[p + 1]) * *u.add(p + 1)
                        + f64::from(op.ty[p]) * *u.add(p - sy)
                        + f64::from(op.ty[p + sy]) * *u.add(p + sy)
                        + f64::from(op.tz[p]) * *u.add(p - sz)
                        + f64::from(op.tz[p + sz]) * *u.add(p + sz);
                    *u.add(p) = s * f64::from(op.inv_d[p]);
                }
                i += 2;
            }
        }
        Read::Rows => {
            let mut v = [0.0f64; CHUNK];
            let mut i0 = 0;
            while i0 < nx {
                let m = CHUNK.min(nx - i0);
                let p0 = row0 + i0;
                {
                    // SAFETY: planes kp - 1..=kp + 1 belong to this thread in this phase, so no
                    // other thread writes these rows while the shared slices live; the writes of
                    // this thread happen after the slices are dropped.
                    let (uc, us, un, ud, uu) = unsafe {
                        (
                            std::slice::from_raw_parts(u.add(p0 - 1), m + 2),
                            std::slice::from_raw_parts(u.add(p0 - sy), m),
                            std::slice::from_raw_parts(u.add(p0 + sy), m),
                            std::slice::from_raw_parts(u.add(p0 - sz), m),
                            std::slice::from_raw_parts(u.add(p0 + sz), m),
                        )
                    };
                    let tx = &op.tx[p0..p0 + m + 1];
                    let tys = &op.ty[p0..p0 + m];
                    let tyn = &op.ty[p0 + sy..p0 + sy + m];
                    let tzd = &op.tz[p0..p0 + m];
                    let tzu = &op.tz[p0 + sz..p0 + sz + m];
                    let fr = &f[p0..p0 + m];
                    let id = &op.inv_d[p0..p0 + m];
                    let v = &mut v[..m];
                    for i in 0..m {
                        let s = fr[i]
                            + f64::from(tx[i]) * uc[i]
                            + f64::from(tx[i + 1]) * uc[i + 2]
                            + f64::from(tys[i]) * us[i]
                            + f64::from(tyn[i]) * un[i]
                            + f64::from(tzd[i]) * ud[i]
                            + f64::from(tzu[i]) * uu[i];
                        v[i] = s * f64::from(id[i]);
                    }
                }
                // Keep the cells of this colour. A cell of the other colour in this chunk was
                // computed from a neighbour that may just have changed: it is discarded.
                let mut i = (first + i0) % 2;
                while i < m {
                    // SAFETY: interior cell of this thread's plane.
                    unsafe { *u.add(p0 + i) = v[i] };
                    i += 2;
                }
                i0 += m;
            }
        }
    }
}

/// `(A u)` along one row of a [`SmoothView`] operator (diagonal `1 / inv_d`), like [`row_apply`].
#[inline(always)]
fn row_apply_smooth(op: &SmoothView<'_>, u: &[f64], p0: usize, out: &mut [f64]) {
    let nx = out.len();
    let (sy, sz) = (op.g.sy, op.g.sz);
    let uc = &u[p0 - 1..p0 + nx + 1];
    let us = &u[p0 - sy..p0 - sy + nx];
    let un = &u[p0 + sy..p0 + sy + nx];
    let ud = &u[p0 - sz..p0 - sz + nx];
    let uu = &u[p0 + sz..p0 + sz + nx];
    let tx = &op.tx[p0..p0 + nx + 1];
    let tys = &op.ty[p0..p0 + nx];
    let tyn = &op.ty[p0 + sy..p0 + sy + nx];
    let tzd = &op.tz[p0..p0 + nx];
    let tzu = &op.tz[p0 + sz..p0 + sz + nx];
    let id = &op.inv_d[p0..p0 + nx];
    for i in 0..nx {
        out[i] = uc[i + 1] / f64::from(id[i])
            - (f64::from(tx[i]) * uc[i]
                + f64::from(tx[i + 1]) * uc[i + 2]
                + f64::from(tys[i]) * us[i]
                + f64::from(tyn[i]) * un[i]
                + f64::from(tzd[i]) * ud[i]
                + f64::from(tzu[i]) * uu[i]);
    }
}

/// Residual `f - A u` in the row `(jp, kp)` at the cells of `colour`, zero at the other cells
/// (where the sweep just solved the equations exactly, up to rounding).
///
/// # Safety
/// `u` and `r` point to padded vectors of `op.g.len` values; no other thread writes planes
/// `kp - 1..=kp + 1` of `u` or this row of `r` during the call.
#[inline(always)]
unsafe fn row_residual(
    op: &SmoothView<'_>,
    u: *const f64,
    f: &[f64],
    r: *mut f64,
    kp: usize,
    jp: usize,
    colour: usize,
) {
    let g = op.g;
    let nx = g.n[0];
    let p0 = g.sz * kp + g.sy * jp + 1;
    let base = g.sz * (kp - 1);
    // SAFETY: see the contract above: the three planes of `u` are only read, and the row of `r`
    // belongs to this call.
    let (uu, out) =
        unsafe { (std::slice::from_raw_parts(u.add(base), 3 * g.sz), std::slice::from_raw_parts_mut(r.add(p0), nx)) };
    // The row operator indexes `u` from the start of plane kp - 1; the coefficients are indexed
    // absolutely, so shift them by the same offset.
    let shifted =
        SmoothView { g, tx: &op.tx[base..], ty: &op.ty[base..], tz: &op.tz[base..], inv_d: &op.inv_d[base..] };
    row_apply_smooth(&shifted, uu, p0 - base, out);
    let fr = &f[p0..p0 + nx];
    let first = (colour + (jp - 1) + (kp - 1)) % 2;
    for i in 0..nx {
        out[i] = if i % 2 == first { fr[i] - out[i] } else { 0.0 };
    }
}

/// [`row_colour`] over the rows of plane `kp`.
///
/// # Safety
/// As [`row_colour`], for every row of the plane.
#[inline(always)]
unsafe fn plane_colour_body(op: &SmoothView<'_>, u: *mut f64, f: &[f64], kp: usize, colour: usize, read: Read) {
    for jp in 1..=op.g.n[1] {
        // SAFETY: the caller's contract.
        unsafe { row_colour(op, u, f, kp, jp, colour, read) };
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn plane_colour_wide(op: &SmoothView<'_>, u: *mut f64, f: &[f64], kp: usize, colour: usize, read: Read) {
    // SAFETY: the caller's contract.
    unsafe { plane_colour_body(op, u, f, kp, colour, read) }
}

/// # Safety
/// As [`row_colour`], for every row of the plane.
unsafe fn plane_colour(op: &SmoothView<'_>, u: *mut f64, f: &[f64], kp: usize, colour: usize, read: Read) {
    #[cfg(target_arch = "x86_64")]
    if wide() {
        // SAFETY: AVX2 is present; the rest is the caller's contract.
        return unsafe { plane_colour_wide(op, u, f, kp, colour, read) };
    }
    // SAFETY: the caller's contract.
    unsafe { plane_colour_body(op, u, f, kp, colour, read) }
}

/// [`row_residual`] over the rows of plane `kp`.
///
/// # Safety
/// As [`row_residual`], for every row of the plane.
#[inline(always)]
unsafe fn plane_residual_body(op: &SmoothView<'_>, u: *const f64, f: &[f64], r: *mut f64, kp: usize, colour: usize) {
    for jp in 1..=op.g.n[1] {
        // SAFETY: the caller's contract.
        unsafe { row_residual(op, u, f, r, kp, jp, colour) };
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn plane_residual_wide(op: &SmoothView<'_>, u: *const f64, f: &[f64], r: *mut f64, kp: usize, colour: usize) {
    // SAFETY: the caller's contract.
    unsafe { plane_residual_body(op, u, f, r, kp, colour) }
}

/// # Safety
/// As [`row_residual`], for every row of the plane.
unsafe fn plane_residual(op: &SmoothView<'_>, u: *const f64, f: &[f64], r: *mut f64, kp: usize, colour: usize) {
    #[cfg(target_arch = "x86_64")]
    if wide() {
        // SAFETY: AVX2 is present; the rest is the caller's contract.
        return unsafe { plane_residual_wide(op, u, f, r, kp, colour) };
    }
    // SAFETY: the caller's contract.
    unsafe { plane_residual_body(op, u, f, r, kp, colour) }
}

/// Most red-black sweeps one call of [`smooth`] pipelines.
pub const MAX_SWEEPS: usize = 4;

/// One stage of a smoothing pipeline, applied plane by plane.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Stage {
    /// Gauss-Seidel update of one colour; `zero`: the vector is zero before (first stage of a
    /// smoothing from zero).
    Colour { colour: usize, zero: bool },
    /// Residual at the cells of `colour`, zero at the others.
    Residual { colour: usize },
}

/// `sweeps` red-black Gauss-Seidel sweeps, each colour `c1` then `1 - c1` (the colour of interior
/// cell `(i, j, k)` is `(i + j + k) % 2`), and with `r` the residual `f - A u` afterwards (zero at
/// the cells of the colour updated last, where the last half-sweep solved the equations). With
/// `from_zero`, `u` is taken as zero before (its content is ignored).
///
/// The stages (colour updates, then the residual) run as one pipeline over the z-planes: at step
/// `t` stage `i` works on plane `t - i`, so each array is streamed once for all the sweeps; stage
/// `i` on plane `k` needs stage `i - 1` on planes `k - 1..=k + 1` and must run before stage
/// `i + 1` overwrites them, which this order gives. The result is that of plain sweeps, colour by
/// colour over the whole lattice, bit for bit: every update is the same expression of the same
/// values.
///
/// In parallel, threads own slabs of planes `[lo, hi)`, at least `2 m + 2` planes thick for `m`
/// stages. Phase 1: each slab runs the pipeline on a trapezoid, stage `i` on
/// `[lo + i, hi - i)` (not shrunk at the ends of the lattice); only stage 0 touches the planes next
/// to another slab, and there it reads only cells of the other colour, which no thread writes in
/// this phase. Phase 2: around each boundary `b` between slabs, one thread runs the pipeline on
/// the wedge, stage `i` on `[b - i, b + i)`; the wedges are too far apart to read each other's
/// planes, and phase 1 wrote nothing a wedge still reads.
pub fn smooth(
    op: &SmoothView<'_>,
    u: &mut [f64],
    f: &[f64],
    c1: usize,
    sweeps: usize,
    from_zero: bool,
    r: Option<&mut [f64]>,
) {
    op.check();
    let g = op.g;
    assert!(u.len() == g.len && f.len() == g.len);
    assert!((1..=MAX_SWEEPS).contains(&sweeps), "1 to {MAX_SWEEPS} sweeps");
    let want_r = r.is_some();
    let rptr = match r {
        Some(r) => {
            assert_eq!(r.len(), g.len);
            r.as_mut_ptr()
        }
        None => std::ptr::null_mut(),
    };
    let sh = Shared { u: u.as_mut_ptr(), r: rptr };
    let mut stages = [Stage::Residual { colour: c1 }; 2 * MAX_SWEEPS + 1];
    for (i, st) in stages.iter_mut().take(2 * sweeps).enumerate() {
        *st = Stage::Colour { colour: if i % 2 == 0 { c1 } else { 1 - c1 }, zero: from_zero && i == 0 };
    }
    let m = 2 * sweeps + usize::from(want_r);
    let stages = &stages[..m];
    let nz = g.n[2];
    let slabs = if g.parallel() { rayon::current_num_threads().clamp(1, (nz / (2 * m + 2)).max(1)) } else { 1 };
    // Padded planes 1..=nz; slab s covers [lo, hi).
    let bounds = move |s: usize| (1 + s * nz / slabs, 1 + (s + 1) * nz / slabs);
    let run_stage = move |stage: Stage, kp: usize, read: Read| {
        let sh = sh;
        match stage {
            // SAFETY: the phase structure above gives the contract of `row_colour`.
            Stage::Colour { colour, zero } => unsafe {
                plane_colour(op, sh.u, f, kp, colour, if zero { Read::Zero } else { read })
            },
            // SAFETY: planes kp - 1..=kp + 1 of u are final for this call and written by no other
            // thread while this stage runs; the row of r belongs to this stage.
            Stage::Residual { colour } => unsafe { plane_residual(op, sh.u, f, sh.r, kp, colour) },
        }
    };
    // Phase 1: the trapezoids.
    let phase1 = |s: usize| {
        let (lo, hi) = bounds(s);
        let (first, last) = (s == 0, s + 1 == slabs);
        for t in lo..hi + m {
            for (i, &stage) in stages.iter().enumerate() {
                let Some(k) = t.checked_sub(i) else { continue };
                let klo = if first { lo } else { lo + i };
                let khi = if last { hi } else { hi - i };
                if k < klo || k >= khi {
                    continue;
                }
                let edge = (k == lo && !first) || (k + 1 == hi && !last);
                run_stage(stage, k, if edge { Read::OtherColour } else { Read::Rows });
            }
        }
    };
    // Phase 2: the wedges around the slab boundaries.
    let phase2 = |b: usize| {
        let (edge, _) = bounds(b);
        for t in edge - m..edge + 2 * m {
            for (i, &stage) in stages.iter().enumerate() {
                let Some(k) = t.checked_sub(i) else { continue };
                if k + i < edge || k >= edge + i {
                    continue;
                }
                run_stage(stage, k, Read::Rows);
            }
        }
    };
    if slabs > 1 {
        (0..slabs).into_par_iter().for_each(phase1);
        (1..slabs).into_par_iter().for_each(phase2);
    } else {
        phase1(0);
    }
}

/// Pre-smoothing from `u = 0`: `sweeps` sweeps colour 0 then 1; the residual after them goes to
/// `r`.
pub fn pre_smooth(op: &SmoothView<'_>, u: &mut [f64], f: &[f64], sweeps: usize, r: &mut [f64]) {
    smooth(op, u, f, 0, sweeps, true, Some(r));
}

/// Post-smoothing, the adjoint of [`pre_smooth`]: `sweeps` sweeps colour 1 then 0.
pub fn post_smooth(op: &SmoothView<'_>, u: &mut [f64], f: &[f64], sweeps: usize) {
    smooth(op, u, f, 1, sweeps, false, None);
}

/// Two-pass reference sweep (colour `c1` on every plane, then `1 - c1`), for tests.
#[cfg(test)]
pub fn sweep_two_pass(op: &SmoothView<'_>, u: &mut [f64], f: &[f64], c1: usize) {
    let g = op.g;
    let p = u.as_mut_ptr();
    for colour in [c1, 1 - c1] {
        for kp in 1..=g.n[2] {
            for jp in 1..=g.n[1] {
                // SAFETY: single thread.
                unsafe { row_colour(op, p, f, kp, jp, colour, Read::OtherColour) };
            }
        }
    }
}

#[cfg(all(test, target_arch = "x86_64"))]
mod tests {
    use super::*;

    #[test]
    fn wide_and_portable_row_loops_agree_bit_for_bit() {
        if !wide() {
            return; // nothing to compare on this processor
        }
        let (op, f0) = crate::solver::tests::random_problem([37, 11, 6], 31);
        let g = op.g;
        let mg = crate::solver::multigrid::Multigrid::new(&op, 1).unwrap();
        let v = mg.fine_view();
        let mut f = crate::solver::grid::zeros(&g);
        crate::solver::grid::scatter(&g, &f0, &mut f);
        let mut a = f.iter().map(|x| 0.3 * x).collect::<Vec<_>>();
        let mut b = a.clone();
        let (mut ra, mut rb) = (crate::solver::grid::zeros(&g), crate::solver::grid::zeros(&g));
        for kp in 1..=g.n[2] {
            // SAFETY: single thread; AVX2 checked above.
            unsafe {
                plane_colour_body(&v, a.as_mut_ptr(), &f, kp, 0, Read::Rows);
                plane_colour_wide(&v, b.as_mut_ptr(), &f, kp, 0, Read::Rows);
            }
        }
        assert!(a.iter().zip(&b).all(|(x, y)| x.to_bits() == y.to_bits()));
        for kp in 1..=g.n[2] {
            // SAFETY: as above.
            unsafe {
                plane_residual_body(&v, a.as_ptr(), &f, ra.as_mut_ptr(), kp, 1);
                plane_residual_wide(&v, b.as_ptr(), &f, rb.as_mut_ptr(), kp, 1);
            }
        }
        assert!(ra.iter().zip(&rb).all(|(x, y)| x.to_bits() == y.to_bits()));
        let ov = op.view();
        let (mut qa, mut qb) = (crate::solver::grid::zeros(&g), crate::solver::grid::zeros(&g));
        for k in 1..=g.n[2] {
            let o = g.sz * k;
            let da = plane_apply_body(&ov, &a, k, &mut qa[o..o + g.sz], true);
            // SAFETY: AVX2 checked above.
            let db = unsafe { plane_apply_wide(&ov, &a, k, &mut qb[o..o + g.sz], true) };
            assert_eq!(da.to_bits(), db.to_bits());
        }
        assert!(qa.iter().zip(&qb).all(|(x, y)| x.to_bits() == y.to_bits()));
    }
}
