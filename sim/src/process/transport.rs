//! Transport: packets move by hindered diffusion and advection with the interstitial fluid.
//!
//! A packet's position follows the Ito stochastic differential equation of advection-diffusion
//! in a porous medium,
//!
//! `dX = (f_c u(X) + grad(a D)(X) / a(X)) dt + sqrt(2 D(X)) dW`,
//!
//! whose Fokker-Planck equation is `d(aC)/dt = div(a D grad C) - div(f_c u a C)` for the
//! concentration `C` in the accessible fluid, with `a = porosity x steric partition` the fluid
//! fraction a particle can reach, `D = D0 x hindrance` the hindered diffusion coefficient,
//! `u` the interstitial fluid velocity (Darcy flux over porosity) and `f_c` the convective
//! hindrance. The drift term `grad(a D)/a` is the Ito correction that keeps a uniform `C`
//! uniform where `D` and `a` vary (the well-mixed condition: Thomson 1987, J Fluid Mech 180:529;
//! for discontinuous coefficients LaBolle, Fogg and Tompson 1996, Water Resour Res 32:583).
//! `a D` and `a` are interpolated trilinearly between voxel centres, so a jump between voxels is
//! seen as a steep but continuous ramp the sub-steps resolve (a well-mixed cloud keeps a density
//! proportional to that ramp: beside a jump in `a` a voxel holds `(a[i-1] + 6 a[i] + a[i+1]) / 8`
//! along the jump's axis, not `a[i]`); `u` is interpolated linearly
//! between the faces of the voxel along each axis (Pollock 1988, Ground Water 26:743), which
//! keeps it divergence-free.
//!
//! `D0` is the Stokes-Einstein coefficient; hindrance is steric (Ogston et al. 1973, collagen
//! fibres) times hydrodynamic (Brinkman medium of the Jackson-James permeability of collagen
//! and glycosaminoglycans; Phillips, Deen and Brady 1989), multiplied as in Phillips 2000
//! (AIChE J 46:1466). Glycosaminoglycan chains are flexible and enter only through the
//! permeability (the model's choice). The partition coefficient is Ogston's (1958).
//!
//! Time stepping. Where the coefficients vary around a packet it takes fine sub-steps that keep
//! its move below `max_step_voxels` of a voxel edge (the Euler scheme; uniform increments give
//! the simplified weak Euler scheme of Kloeden and Platen 1992, section 14.1, whose moves are
//! bounded): the diffusive reach `sqrt(6 D h)` at most 3/4 of it, reach plus drift at most all
//! of it, and the change of the fluid velocity across the voxel times `h` at most a tenth of a
//! voxel edge ([`substeps`]). Where they are uniform (the uniform radius of the dual grid,
//! [`MotionFields::uniform_radius`], says how far) the diffusion needs no resolving: a step
//! that moves the packet at most 1.25 voxel edges is one step of uniform increments, and longer
//! ones are Gaussian sub-steps as long as the uniform region around the packet allows
//! (Euler-Maruyama with constant coefficients is exact in law for any step length; the drift
//! keeps the fine criteria). A packet switches between the two as it moves (see the kernel), so
//! small fast particles, which need hundreds of fine sub-steps a step, take them only near the
//! places where the matrix changes. Faces reflect or absorb. Every packet draws from its own
//! stream (seed, packet id, step), so the result is the same for any number of threads.
//!
//! The kernel reads the coefficients packed per voxel in `f32` and lattice units
//! ([`MotionCache`]), rebuilt only when the fields or the fluid velocity change.

use bevy_ecs::prelude::*;
use rayon::prelude::*;

use crate::lattice::Lattice;
use crate::params::Params;
use crate::particles::hindrance::{
    brinkman_diffusion, jackson_james, mixed_permeability, ogston_diffusion, ogston_partition,
};
use crate::particles::packets::{PREFETCH_AHEAD, prefetch};
use crate::particles::{Designs, Packets};
use crate::rng::{Domain, Streams};
use crate::scenario::{FaceRule, Increments, MatrixHindrance};
use crate::tissue::{MAX_SPECIES, Matrix};
use crate::world::{Clock, Phase, Seed};

/// Parameters of motion (SI).
#[derive(Resource, Debug, Clone, PartialEq)]
pub struct TransportParams {
    pub hindrance: MatrixHindrance,
    pub steric_partition: bool,
    /// Largest move in one sub-step, in voxel edges.
    pub max_step_voxels: f64,
    pub increments: Increments,
    pub faces: FaceRule,
    pub sort_interval_steps: u64,
    /// Collagen and glycosaminoglycan fibre radii, m.
    pub collagen_fibre_radius: f64,
    pub gag_fibre_radius: f64,
}

impl TransportParams {
    /// From a resolved scenario.
    pub fn from_params(p: &Params) -> Self {
        p.transport.clone()
    }
}

/// Motion coefficients of each species per voxel.
#[derive(Resource, Debug, Clone, Default)]
pub struct MotionFields {
    /// `a D`: accessible fraction times hindered diffusion coefficient, m^2/s, per species.
    pub ad: Vec<Vec<f64>>,
    /// `a`: fluid fraction accessible to the species (porosity times partition), per species.
    pub a: Vec<Vec<f64>>,
    /// Convective hindrance per species.
    pub fc: Vec<f64>,
    /// Largest `D` of each species, m^2/s.
    pub d_max: Vec<f64>,
    /// Per species, on the dual grid of the lattice, the uniform radius of each dual cell: the
    /// Chebyshev distance, in dual cells, to the nearest dual cell whose eight corners do not all
    /// have the same `a D` and `a` (0 for such a cell), capped by [`MAX_UNIFORM_RADIUS`], the
    /// smallest lattice dimension and, with absorbing faces, the distance to the faces. A dual
    /// cell is the box between eight voxel centres: [`DualGrid`] numbers them. Within a cell of
    /// radius `R` and the `R - 1` layers of cells around it the trilinear interpolation of the
    /// coefficients is constant. Empty: unknown (every packet takes the fine sub-steps). Set by
    /// [`MotionFields::mark_uniform`]; anything that changes `ad` or `a` afterwards must mark again.
    pub uniform_radius: Vec<Vec<u8>>,
}

/// Largest uniform radius recorded ([`MotionFields::uniform_radius`]): a packet in the middle of
/// a uniform region moves up to `MAX_UNIFORM_RADIUS - 1` voxel edges in one sub-step.
pub const MAX_UNIFORM_RADIUS: u8 = 32;

/// The dual grid of a lattice of `n` voxels: `(nx + 1)(ny + 1)(nz + 1)` dual cells, cell
/// `(i, j, k)` spanning lattice coordinates (voxel edges from the origin) `[i - 1/2, i + 1/2]`
/// along x and likewise along y and z: between the centres of voxels `i - 1` and `i`, the
/// half cells at the faces reaching the outermost centres, beyond which the coefficients are
/// extended as constants. Its corners are voxels `i - 1` and `i` along each axis, clamped into
/// the lattice.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct DualGrid {
    pub n: [usize; 3],
}

impl DualGrid {
    /// Cells along each axis.
    pub fn dims(self) -> [usize; 3] {
        [self.n[0] + 1, self.n[1] + 1, self.n[2] + 1]
    }

    /// Number of dual cells.
    pub fn len(self) -> usize {
        self.dims().iter().product()
    }

    /// Whether the grid has no cells (never: a lattice has a voxel).
    pub fn is_empty(self) -> bool {
        self.len() == 0
    }

    /// Index of dual cell `q` (x fastest).
    #[inline]
    pub fn index(self, q: [usize; 3]) -> usize {
        let [dx, dy, _] = self.dims();
        q[0] + dx * (q[1] + dy * q[2])
    }

    /// The dual cell holding lattice coordinates `u`.
    #[inline]
    pub fn cell(self, u: &[f64; 3]) -> [usize; 3] {
        std::array::from_fn(|a| ((u[a] + 0.5).max(0.0) as usize).min(self.n[a]))
    }

    /// Linear indices of the eight corner voxels of dual cell `q`.
    pub fn corners(self, l: &Lattice, q: [usize; 3]) -> [usize; 8] {
        let lo: [usize; 3] = std::array::from_fn(|a| q[a].saturating_sub(1).min(self.n[a] - 1));
        let hi: [usize; 3] = std::array::from_fn(|a| q[a].min(self.n[a] - 1));
        std::array::from_fn(|c| {
            let pick = |a: usize, bit: usize| if c & bit == 0 { lo[a] } else { hi[a] };
            l.idx(pick(0, 1), pick(1, 2), pick(2, 4))
        })
    }
}

/// Interstitial fluid velocity on voxel faces, m/s (Darcy flux density over face porosity).
/// Face `i` of the x array lies at `x = origin + i h`: index `i + (nx + 1) (j + ny k)`; the y and z
/// arrays likewise. Zero where no pressure field is computed.
#[derive(Resource, Debug, Clone)]
pub struct FaceVelocity {
    pub x: Vec<f64>,
    pub y: Vec<f64>,
    pub z: Vec<f64>,
}

impl FaceVelocity {
    /// A still fluid.
    pub fn zero(l: &Lattice) -> Self {
        let [nx, ny, nz] = l.n;
        FaceVelocity {
            x: vec![0.0; (nx + 1) * ny * nz],
            y: vec![0.0; nx * (ny + 1) * nz],
            z: vec![0.0; nx * ny * (nz + 1)],
        }
    }

    /// A uniform velocity `u` (m/s) on every face.
    pub fn uniform(l: &Lattice, u: [f64; 3]) -> Self {
        let mut f = Self::zero(l);
        f.x.iter_mut().for_each(|v| *v = u[0]);
        f.y.iter_mut().for_each(|v| *v = u[1]);
        f.z.iter_mut().for_each(|v| *v = u[2]);
        f
    }
}

/// Hindered diffusion coefficient ratio `D/D0` and partition coefficient of a sphere of radius
/// `rs` in a matrix of collagen fraction `phi_c` and glycosaminoglycan fraction `phi_g`.
pub fn matrix_hindrance(p: &TransportParams, rs: f64, phi_c: f64, phi_g: f64) -> (f64, f64) {
    let steric = ogston_diffusion(rs, p.collagen_fibre_radius, phi_c);
    let partition = if p.steric_partition { ogston_partition(rs, p.collagen_fibre_radius, phi_c) } else { 1.0 };
    let ratio = match p.hindrance {
        MatrixHindrance::None => 1.0,
        MatrixHindrance::Ogston => steric,
        MatrixHindrance::OgstonBrinkman => {
            let kappa = mixed_permeability(
                jackson_james(p.collagen_fibre_radius, phi_c),
                jackson_james(p.gag_fibre_radius, phi_g),
            );
            steric * brinkman_diffusion(rs, kappa)
        }
    };
    (ratio, partition)
}

impl MotionFields {
    /// Coefficients of every species from the matrix composition.
    pub fn build(p: &TransportParams, designs: &Designs, m: &Matrix) -> Self {
        let mut f = MotionFields::default();
        for d in &designs.0 {
            let n = m.porosity.len();
            let mut ad = vec![0.0; n];
            let mut a = vec![0.0; n];
            ad.par_iter_mut().zip(a.par_iter_mut()).enumerate().for_each(|(v, (adv, av))| {
                let (ratio, part) = matrix_hindrance(p, d.radius, m.collagen.data[v], m.gag.data[v]);
                *av = m.porosity.data[v] * part;
                *adv = *av * d.d0 * ratio;
            });
            let d_max = ad.iter().zip(&a).map(|(g, a)| if *a > 0.0 { g / a } else { 0.0 }).fold(0.0, f64::max);
            f.ad.push(ad);
            f.a.push(a);
            f.fc.push(d.convective_hindrance);
            f.d_max.push(d_max);
        }
        f
    }

    /// Uniform coefficients (tests, analytic checks): diffusion `d`, accessible fraction `a`.
    pub fn uniform(l: &Lattice, d: f64, a: f64) -> Self {
        MotionFields {
            ad: vec![vec![a * d; l.len()]],
            a: vec![vec![a; l.len()]],
            fc: vec![1.0],
            d_max: vec![d],
            uniform_radius: Vec::new(),
        }
    }

    /// Computes the uniform radius of every dual cell for each species
    /// ([`MotionFields::uniform_radius`]): cells whose corners differ get 0; the Chebyshev
    /// distance to them is the minimum over them of the largest per-axis offset, found by three
    /// separable passes (x, then y, then z) of `r(i) = min_j max(|i - j|, r(j))` along each line;
    /// with absorbing `faces` it is capped by `min(i, n - i)` along each axis, which keeps every
    /// constant-coefficient move inside the lattice.
    pub fn mark_uniform(&mut self, l: &Lattice, faces: FaceRule) {
        let dual = DualGrid { n: l.n };
        let dims = dual.dims();
        let cap = MAX_UNIFORM_RADIUS.min(l.n.iter().copied().min().unwrap_or(1).min(255) as u8);
        self.uniform_radius = (0..self.ad.len())
            .map(|s| {
                let (ad, a) = (&self.ad[s], &self.a[s]);
                let mut r: Vec<u8> = (0..dual.len())
                    .into_par_iter()
                    .map(|q| {
                        let q = [q % dims[0], (q / dims[0]) % dims[1], q / (dims[0] * dims[1])];
                        let c = dual.corners(l, q);
                        let same = c.iter().all(|&v| ad[v] == ad[c[0]] && a[v] == a[c[0]]);
                        if same { cap } else { 0 }
                    })
                    .collect();
                for ax in 0..3 {
                    chebyshev_pass(dims, ax, &mut r);
                }
                if faces == FaceRule::Absorb {
                    r.par_iter_mut().enumerate().for_each(|(q, r)| {
                        let q = [q % dims[0], (q / dims[0]) % dims[1], q / (dims[0] * dims[1])];
                        for (qa, n) in q.into_iter().zip(l.n) {
                            *r = (*r).min(qa.min(n - qa).min(255) as u8);
                        }
                    });
                }
                r
            })
            .collect();
    }
}

/// One pass of the separable Chebyshev distance along axis `ax` of a grid of `dims` cells (x
/// fastest): every line of `r` becomes `r(i) = min_j max(|i - j|, r(j))` (values are capped
/// already, so a search stops at the best so far).
fn chebyshev_pass(dims: [usize; 3], ax: usize, r: &mut [u8]) {
    let stride = [1, dims[0], dims[0] * dims[1]][ax];
    let len = dims[ax];
    let src = r.to_vec();
    r.par_iter_mut().enumerate().for_each(|(v, out)| {
        let c = (v / stride) % len;
        let mut best = src[v];
        let mut k = 1usize;
        while k < best as usize {
            if c >= k {
                best = best.min((k as u8).max(src[v - k * stride]));
            }
            if c + k < len {
                best = best.min((k as u8).max(src[v + k * stride]));
            }
            k += 1;
        }
        *out = best;
    });
}

/// Largest change of the fluid velocity across one voxel, times a sub-step, in voxel edges:
/// two packets a voxel apart drift apart by at most this much per sub-step, which bounds the
/// local error of the Euler advective step (`0.5 h^2 |u du/dx|`) to 5 % of the drift.
const VELOCITY_CHANGE_PER_SUBSTEP: f64 = 0.1;

/// The motion coefficients in the kernel's packed form: lattice units (lengths in voxel edges),
/// `f32`, one record per voxel, so that a packet's look-up reads one or two cache lines instead
/// of one per array. Rebuilt by [`transport_system`] whenever [`MotionFields`] or
/// [`FaceVelocity`] change. The `f32` rounding (relative 6e-8) is far below the statistical
/// error of any packet estimate.
#[derive(Resource, Debug, Clone, Default)]
pub struct MotionCache {
    /// Per species and voxel: `[a D / h^2 (1/s), a]`.
    coef: Vec<Vec<[f32; 2]>>,
    /// Per voxel: fluid velocity on its six faces, voxel edges per second,
    /// `[x-, x+, y-, y+, z-, z+]`.
    faces: Vec<[f32; 6]>,
    /// Per species and voxel: the diffusion coefficient `D = g / a` (voxel edges^2 per second),
    /// for the constant-coefficient steps; empty when the uniform radii are unknown. Those steps
    /// read only this, the radius and the faces.
    coarse: Vec<Vec<f64>>,
    /// Per species and dual cell: the uniform radius ([`MotionFields::uniform_radius`]).
    radius: Vec<Vec<u8>>,
    /// Per species and voxel: the smallest uniform radius `R` of the eight dual cells that share
    /// its centre, so that anywhere in the voxel the budget ([`uniform_budget`]) is at least
    /// `R - 1`: the single-step test reads this one byte instead of computing the budget.
    voxel_radius: Vec<Vec<u8>>,
    fc: Vec<f64>,
    n: [usize; 3],
}

impl MotionCache {
    /// Packs `fields` and `vel` for lattice `l`.
    pub fn build(l: &Lattice, fields: &MotionFields, vel: &FaceVelocity) -> Self {
        let mut c = MotionCache::default();
        c.rebuild(l, fields, vel);
        c
    }

    /// Packs again into the existing buffers.
    pub fn rebuild(&mut self, l: &Lattice, fields: &MotionFields, vel: &FaceVelocity) {
        let [nx, ny, _] = l.n;
        let inv_h = 1.0 / l.h;
        let inv_h2 = inv_h * inv_h;
        let n = l.len();
        self.n = l.n;
        self.coef.resize_with(fields.ad.len(), Vec::new);
        for (s, out) in self.coef.iter_mut().enumerate() {
            out.resize(n, [0.0; 2]);
            let (ad, a) = (&fields.ad[s], &fields.a[s]);
            out.par_iter_mut().enumerate().for_each(|(v, c)| *c = [(ad[v] * inv_h2) as f32, a[v] as f32]);
        }
        self.faces.resize(n, [0.0; 6]);
        self.faces.par_chunks_mut(nx).enumerate().for_each(|(row, out)| {
            let (j, k) = (row % ny, row / ny);
            for (i, f) in out.iter_mut().enumerate() {
                let xi = i + (nx + 1) * (j + ny * k);
                let yi = i + nx * (j + (ny + 1) * k);
                let zi = i + nx * (j + ny * k);
                *f = [
                    (vel.x[xi] * inv_h) as f32,
                    (vel.x[xi + 1] * inv_h) as f32,
                    (vel.y[yi] * inv_h) as f32,
                    (vel.y[yi + nx] * inv_h) as f32,
                    (vel.z[zi] * inv_h) as f32,
                    (vel.z[zi + nx * ny] * inv_h) as f32,
                ];
            }
        });
        self.coarse.resize_with(fields.uniform_radius.len(), Vec::new);
        self.radius.clone_from(&fields.uniform_radius);
        let dual = DualGrid { n: l.n };
        self.voxel_radius.resize_with(fields.uniform_radius.len(), Vec::new);
        for (s, out) in self.voxel_radius.iter_mut().enumerate() {
            out.resize(n, 0);
            let radius = &fields.uniform_radius[s];
            out.par_iter_mut().enumerate().for_each(|(v, r)| {
                let c = l.ijk(v);
                *r = (0..8)
                    .map(|k| radius[dual.index([c[0] + (k & 1), c[1] + ((k >> 1) & 1), c[2] + ((k >> 2) & 1)])])
                    .min()
                    .unwrap_or(0);
            });
        }
        for (s, out) in self.coarse.iter_mut().enumerate() {
            out.resize(n, 0.0);
            let coef = &self.coef[s];
            out.par_iter_mut().enumerate().for_each(|(v, d)| {
                let [g, a] = coef[v];
                *d = if a > 0.0 { (f64::from(g) / f64::from(a)).max(0.0) } else { 0.0 };
            });
        }
        self.fc.clone_from(&fields.fc);
    }
}

/// The lattice in the kernel's own units (voxel edges), precomputed once per step.
struct Grid {
    n: [usize; 3],
    hi: [f64; 3],
    /// Index strides of the interpolation corners (0 along an axis one voxel thick).
    corner: [usize; 3],
    nx: usize,
    nxy: usize,
}

impl Grid {
    fn new(n: [usize; 3]) -> Self {
        Grid {
            n,
            hi: [n[0] as f64, n[1] as f64, n[2] as f64],
            corner: [usize::from(n[0] > 1), if n[1] > 1 { n[0] } else { 0 }, if n[2] > 1 { n[0] * n[1] } else { 0 }],
            nx: n[0],
            nxy: n[0] * n[1],
        }
    }

    /// Voxel holding lattice coordinates `u` (clamped into the box).
    #[inline]
    fn cell(&self, u: &[f64; 3]) -> [usize; 3] {
        std::array::from_fn(|a| (u[a].max(0.0) as usize).min(self.n[a] - 1))
    }

    #[inline]
    fn index(&self, c: &[usize; 3]) -> usize {
        c[0] + self.nx * c[1] + self.nxy * c[2]
    }

    /// Trilinear interpolation of `g = a D / h^2` and `a` at lattice coordinates `u`, with the
    /// gradient of `g` per voxel edge. Beyond the outermost voxel centres the fields are
    /// extended as constants (zero gradient).
    #[inline]
    fn interpolate(&self, coef: &[[f32; 2]], u: &[f64; 3]) -> (f64, [f64; 3], f64) {
        let mut base = [0usize; 3];
        let mut t = [0.0f64; 3];
        let mut slope = [1.0f64; 3];
        for ax in 0..3 {
            let c = u[ax] - 0.5;
            let top = self.hi[ax] - 1.0;
            if c <= 0.0 {
                slope[ax] = 0.0;
            } else if c >= top {
                base[ax] = self.n[ax].saturating_sub(2);
                t[ax] = if self.n[ax] >= 2 { 1.0 } else { 0.0 };
                slope[ax] = 0.0;
            } else {
                let b = (c as usize).min(self.n[ax] - 2);
                base[ax] = b;
                t[ax] = c - b as f64;
            }
        }
        let [sx, sy, sz] = self.corner;
        let b = base[0] + self.nx * base[1] + self.nxy * base[2];
        let idx = [b, b + sx, b + sy, b + sx + sy, b + sz, b + sx + sz, b + sy + sz, b + sx + sy + sz];
        let cv: [[f32; 2]; 8] = std::array::from_fn(|c| coef[idx[c]]);
        let g: [f64; 8] = std::array::from_fn(|c| f64::from(cv[c][0]));
        let av: [f64; 8] = std::array::from_fn(|c| f64::from(cv[c][1]));
        let [tx, ty, tz] = t;
        let (ux, uy, uz) = (1.0 - tx, 1.0 - ty, 1.0 - tz);
        let w = [
            ux * uy * uz,
            tx * uy * uz,
            ux * ty * uz,
            tx * ty * uz,
            ux * uy * tz,
            tx * uy * tz,
            ux * ty * tz,
            tx * ty * tz,
        ];
        let mut gi = 0.0;
        let mut ai = 0.0;
        for c in 0..8 {
            gi += w[c] * g[c];
            ai += w[c] * av[c];
        }
        let dx = uy * uz * (g[1] - g[0]) + ty * uz * (g[3] - g[2]) + uy * tz * (g[5] - g[4]) + ty * tz * (g[7] - g[6]);
        let dy = ux * uz * (g[2] - g[0]) + tx * uz * (g[3] - g[1]) + ux * tz * (g[6] - g[4]) + tx * tz * (g[7] - g[5]);
        let dz = ux * uy * (g[4] - g[0]) + tx * uy * (g[5] - g[1]) + ux * ty * (g[6] - g[2]) + tx * ty * (g[7] - g[3]);
        (gi, [dx * slope[0], dy * slope[1], dz * slope[2]], ai)
    }
}

/// Fluid velocity (voxel edges per second) at lattice coordinates `u` in voxel `c` of faces
/// `f`: linear between the voxel's faces along each axis (Pollock 1988).
#[inline]
fn velocity(f: &[f32; 6], c: &[usize; 3], u: &[f64; 3]) -> [f64; 3] {
    let lerp = |a: f32, b: f32, t: f64| {
        let a = f64::from(a);
        a + (f64::from(b) - a) * t.clamp(0.0, 1.0)
    };
    [lerp(f[0], f[1], u[0] - c[0] as f64), lerp(f[2], f[3], u[1] - c[1] as f64), lerp(f[4], f[5], u[2] - c[2] as f64)]
}

/// Largest change of the velocity across voxel faces `f`, per second.
#[inline]
fn velocity_change(f: &[f32; 6]) -> f64 {
    f64::from((f[1] - f[0]).abs().max((f[3] - f[2]).abs()).max((f[5] - f[4]).abs()))
}

/// A coordinate `x` that left `[0, hi]` mirrored back into it (a move is at most the box size).
#[inline]
fn mirror(x: f64, hi: f64) -> f64 {
    let x = if x < 0.0 { -x } else { x };
    let x = if x > hi { 2.0 * hi - x } else { x };
    x.clamp(0.0, hi)
}

/// How far a packet at lattice coordinates `u` (in voxel `c`) can move seeing constant
/// interpolated coefficients, voxel edges, from the uniform radii `r` of the dual grid `dual`: in its dual
/// cell `q` of radius `R` and the `R - 1` layers around it the interpolation is constant, a box
/// `[q - R + 1/2, q + R - 1/2]` along each axis; the budget is the distance from `u` to that
/// box's nearest face, `R - 1/2 - max |u - q|` (at most 0 for `R = 0`).
#[inline]
fn uniform_budget(dual: DualGrid, r: &[u8], c: &[usize; 3], u: &[f64; 3]) -> f64 {
    // The dual cell from the voxel `c` holding `u` (`Grid::cell`): the voxel's own index, or the
    // next one in the voxel's upper half along each axis.
    // (Without branches: which half a packet is in is a coin toss for the branch predictor.)
    let f: [f64; 3] = std::array::from_fn(|a| u[a] - c[a] as f64);
    let q: [usize; 3] = std::array::from_fn(|a| c[a] + usize::from(f[a] >= 0.5));
    let off = f.iter().fold(0.0f64, |m, &f| m.max(f.min(1.0 - f)));
    f64::from(r[dual.index(q)]) - 0.5 - off
}

/// Standard deviations of a Gaussian constant-coefficient sub-step's move kept within the
/// uniform radius: a one-dimensional Brownian path exceeds 6 standard deviations of its end
/// point within the sub-step with probability `4 P(Z > 6) = 3.9e-9` (reflection principle, both
/// directions), below 1.2e-8 for the three axes.
const GAUSSIAN_SPREAD: f64 = 6.0;

/// Length of the next Gaussian constant-coefficient sub-step (at most `t_left`) of a packet
/// with diffusion `d` (voxel edges^2 per second), drift speed `w` and velocity change `g`
/// (voxel edges per second) whose move may reach `budget` voxel edges: the spread plus drift
/// `6 sqrt(2 d h) + w h` at most `budget` ([`GAUSSIAN_SPREAD`]), drift `w h` at most `lmax` and
/// `g h` at most [`VELOCITY_CHANGE_PER_SUBSTEP`]. The whole `t_left` when it fits.
#[inline]
fn gaussian_substep(d: f64, w: f64, g: f64, budget: f64, lmax: f64, t_left: f64) -> f64 {
    let spread = GAUSSIAN_SPREAD * (2.0 * d).sqrt();
    // Largest x = sqrt(h) with w x^2 + spread x <= budget (the stable root form).
    let x = 2.0 * budget / (spread + (spread * spread + 4.0 * w * budget).sqrt());
    let mut h = if x.is_finite() { x * x } else { t_left };
    if w > 0.0 {
        h = h.min(lmax / w);
    }
    if g > 0.0 {
        h = h.min(VELOCITY_CHANGE_PER_SUBSTEP / g);
    }
    h.min(t_left)
}

/// Whether the Ito drift term is applied (switched off only to show that it is needed).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Drift {
    Ito,
    /// No `grad(aD)/a` term: walkers then pile up where `D` is low (a deliberate error, for tests).
    Omitted,
}

/// Number of sub-steps of a step `dt` for a packet whose starting voxel has diffusion `d`
/// (voxel edges^2 per second), drift speed `w` and velocity change `g` across the voxel (both
/// in voxel edges per second), with largest move `lmax` (voxel edges): the smallest `n` with
/// diffusive reach `sqrt(6 d dt / n)` at most `3/4 lmax`, reach plus drift
/// `sqrt(6 d dt / n) + w dt / n` at most `lmax`, and `g dt / n` at most
/// [`VELOCITY_CHANGE_PER_SUBSTEP`].
#[inline]
pub fn substeps(d: f64, w: f64, g: f64, dt: f64, lmax: f64) -> u64 {
    let reach = (6.0 * d * dt).sqrt();
    let drift = w * dt;
    // Largest x = 1/sqrt(n) with drift x^2 + reach x <= lmax (the stable root form).
    let x = 2.0 * lmax / (reach + (reach * reach + 4.0 * drift * lmax).sqrt());
    let n_move = if x.is_finite() { 1.0 / (x * x) } else { 1.0 };
    let n_diff = reach * reach / (0.5625 * lmax * lmax);
    let n_change = g * dt / VELOCITY_CHANGE_PER_SUBSTEP;
    n_move.max(n_diff).max(n_change).ceil().clamp(1.0, 1.0e6) as u64
}

/// Moves every packet through one step of length `dt`; returns the particles that left through
/// absorbing faces, per species. Packs the coefficients first (see [`move_packets_packed`] to
/// reuse a packing across steps).
#[allow(clippy::too_many_arguments)]
pub fn move_packets(
    l: &Lattice,
    fields: &MotionFields,
    vel: &FaceVelocity,
    p: &TransportParams,
    packets: &mut Packets,
    seed: u64,
    step: u64,
    dt: f64,
    drift: Drift,
) -> [u64; MAX_SPECIES] {
    if dt <= 0.0 || packets.is_empty() {
        return [0; MAX_SPECIES];
    }
    let cache = MotionCache::build(l, fields, vel);
    move_packets_packed(l, &cache, p, packets, seed, step, dt, drift)
}

/// [`move_packets`] on packed coefficients.
#[allow(clippy::too_many_arguments)]
pub fn move_packets_packed(
    l: &Lattice,
    cache: &MotionCache,
    p: &TransportParams,
    packets: &mut Packets,
    seed: u64,
    step: u64,
    dt: f64,
    drift: Drift,
) -> [u64; MAX_SPECIES] {
    if dt <= 0.0 || packets.is_empty() {
        return [0; MAX_SPECIES];
    }
    assert_eq!(cache.n, l.n, "motion coefficients packed for another lattice");
    let grid = Grid::new(l.n);
    let dual = DualGrid { n: l.n };
    let inv_h = 1.0 / l.h;
    // Everything below is in lattice units: lengths in voxel edges.
    let lmax = p.max_step_voxels;
    let hi = grid.hi;
    let origin = l.origin;
    let absorb = p.faces == FaceRule::Absorb;
    let uniform_increments = p.increments == Increments::Uniform;
    let ito = drift == Drift::Ito;
    let streams = Streams::new(seed, Domain::Transport);
    const CHUNK: usize = 2048;
    let Packets { id, pos, voxel, species, weight, .. } = packets;
    pos.par_chunks_mut(CHUNK)
        .zip(voxel.par_chunks_mut(CHUNK))
        .zip(weight.par_chunks_mut(CHUNK))
        .zip(id.par_chunks(CHUNK))
        .zip(species.par_chunks(CHUNK))
        .map(|((((pos, vox), wt), ids), sp)| {
            let mut left = [0u64; MAX_SPECIES];
            for i in 0..pos.len() {
                if let Some(&ahead) = vox.get(i + PREFETCH_AHEAD) {
                    let (a, t) = (ahead as usize, sp[i + PREFETCH_AHEAD] as usize);
                    prefetch(&cache.faces[a]);
                    prefetch(&cache.coef[t][a]);
                    if let Some(f) = cache.coarse.get(t) {
                        prefetch(&f[a]);
                    }
                }
                if wt[i] == 0 {
                    continue;
                }
                let s = sp[i] as usize;
                let coef = &cache.coef[s];
                let fc = cache.fc[s];
                let mut u =
                    [(pos[i][0] - origin[0]) * inv_h, (pos[i][1] - origin[1]) * inv_h, (pos[i][2] - origin[2]) * inv_h];
                let mut rng = streams.at(ids[i], step);
                let mut t_left = dt;
                let mut gone = false;
                let uniform = cache.coarse.get(s).zip(cache.radius.get(s));
                // One step of bounded uniform increments where the interpolated coefficients
                // are constant around the packet as far as the whole step can move it for every
                // draw (|xi| <= sqrt 3), and that is at most 1.25 voxel edges (a single step's
                // uniform increments keep their excess kurtosis, so they stay short); the drift
                // keeps the fine criteria (at most `lmax`, the velocity change bound). Exact for
                // the diffusion: constant coefficients, no interpolation, no Ito drift. The
                // distance is taken as `R - 1` from the voxel's smallest surrounding uniform
                // radius (a lower bound of [`uniform_budget`] anywhere in the voxel).
                if uniform_increments && let Some(vr) = cache.voxel_radius.get(s) {
                    let c0 = grid.cell(&u);
                    let v0 = grid.index(&c0);
                    let budget = f64::from(vr[v0]) - 1.0;
                    if budget > 0.0 {
                        let dc = &cache.coarse[s];
                        let d0 = dc[v0];
                        let f0 = &cache.faces[v0];
                        let w0 = velocity(f0, &c0, &u);
                        let umax = w0.iter().fold(0.0f64, |m, x| m.max(x.abs())) * fc.abs();
                        let change = velocity_change(f0) * fc.abs();
                        if umax * dt <= lmax
                            && change * dt <= VELOCITY_CHANGE_PER_SUBSTEP
                            && (6.0 * d0 * dt).sqrt() + umax * dt <= budget.min(1.25)
                        {
                            let amp = (2.0 * d0 * dt).sqrt();
                            let xi = rng.unit_variance_uniform3();
                            for ax in 0..3 {
                                u[ax] += fc * w0[ax] * dt + amp * xi[ax];
                                if u[ax] < 0.0 || u[ax] > hi[ax] {
                                    gone |= absorb;
                                    u[ax] = mirror(u[ax], hi[ax]);
                                }
                            }
                            t_left = 0.0;
                        }
                    }
                }
                // Otherwise sub-steps, each chosen where the packet is: a Gaussian
                // constant-coefficient sub-step where the interpolated coefficients are
                // constant far enough around it ([`uniform_budget`]) for one longer than a fine
                // sub-step, else a run of fine sub-steps, which the packet leaves as soon as a
                // constant-coefficient one is possible again. A Gaussian sub-step is exact in law
                // for constant coefficients at any length, so sub-steps sized by position add no
                // error; it keeps its move within six standard deviations of the budget
                // ([`gaussian_substep`]). (Long sub-steps of bounded uniform increments would
                // not do: their excess kurtosis, changing with the sub-step length from voxel to
                // voxel, biases a uniform density; see the well-mixed test with long steps.)
                // A fine run keeps one sub-step length, `t_left / n` with `n` from
                // [`substeps`] at its first voxel.
                let (mut run_h, mut run_left) = (0.0f64, 0u64);
                while t_left > 0.0 && !gone {
                    let c = grid.cell(&u);
                    let v = grid.index(&c);
                    if let Some((dc, rc)) = uniform
                        && let budget = uniform_budget(dual, rc, &c, &u)
                        && budget > 0.0
                    {
                        let d = dc[v];
                        let f = &cache.faces[v];
                        let w = velocity(f, &c, &u);
                        let umax = w.iter().fold(0.0f64, |m, x| m.max(x.abs())) * fc.abs();
                        let change = velocity_change(f) * fc.abs();
                        let h = gaussian_substep(d, umax, change, budget, lmax, t_left);
                        let fine =
                            if run_left > 0 { run_h } else { t_left / substeps(d, umax, change, t_left, lmax) as f64 };
                        if h > fine {
                            let sd = (2.0 * d * h).sqrt();
                            let xi = [rng.normal(), rng.normal(), rng.normal()];
                            for ax in 0..3 {
                                let x = u[ax] + (fc * w[ax] * h + sd * xi[ax]);
                                u[ax] = x;
                                if x < 0.0 || x > hi[ax] {
                                    gone |= absorb;
                                    u[ax] = mirror(x, hi[ax]);
                                }
                            }
                            t_left = if h >= t_left { 0.0 } else { t_left - h };
                            run_left = 0;
                            continue;
                        }
                    }
                    if run_left == 0 {
                        let f0 = &cache.faces[v];
                        let w0 = velocity(f0, &c, &u);
                        let umax = w0.iter().fold(0.0f64, |m, x| m.max(x.abs())) * fc.abs();
                        let change = velocity_change(f0) * fc.abs();
                        let [g0, a0] = coef[v];
                        let d_here = if a0 > 0.0 { (f64::from(g0) / f64::from(a0)).max(0.0) } else { 0.0 };
                        run_left = substeps(d_here, umax, change, t_left, lmax);
                        run_h = t_left / run_left as f64;
                    }
                    let h = run_h;
                    let (g, grad, a) = grid.interpolate(coef, &u);
                    let d = if a > 0.0 { (g / a).max(0.0) } else { 0.0 };
                    let w = velocity(&cache.faces[v], &c, &u);
                    let amp = (2.0 * d * h).sqrt();
                    let xi = if uniform_increments {
                        rng.unit_variance_uniform3()
                    } else {
                        let (a1, a2) = rng.normal_pair();
                        [a1, a2, rng.normal()]
                    };
                    let ito_scale = if ito && a > 0.0 { 1.0 / a } else { 0.0 };
                    for ax in 0..3 {
                        let drift_v = fc * w[ax] + grad[ax] * ito_scale;
                        let x = u[ax] + drift_v * h + amp * xi[ax];
                        u[ax] = x;
                        if x < 0.0 || x > hi[ax] {
                            gone |= absorb;
                            u[ax] = mirror(x, hi[ax]);
                        }
                    }
                    run_left -= 1;
                    t_left = if run_left == 0 { 0.0 } else { run_h * run_left as f64 };
                }
                if gone {
                    left[s] += wt[i];
                    wt[i] = 0;
                    continue;
                }
                pos[i] = [origin[0] + u[0] * l.h, origin[1] + u[1] * l.h, origin[2] + u[2] * l.h];
                vox[i] = grid.index(&grid.cell(&u)) as u32;
            }
            left
        })
        .reduce(
            || [0u64; MAX_SPECIES],
            |mut a, b| {
                for s in 0..MAX_SPECIES {
                    a[s] += b[s];
                }
                a
            },
        )
}

/// The transport system: moves packets, books those that left, re-sorts periodically.
#[allow(clippy::too_many_arguments)] // a system's parameters are the resources it reads
pub fn transport_system(
    lattice: Res<Lattice>,
    fields: Res<MotionFields>,
    vel: Res<FaceVelocity>,
    params: Res<TransportParams>,
    clock: Res<Clock>,
    seed: Res<Seed>,
    mut cache: Local<MotionCache>,
    mut packets: ResMut<Packets>,
    mut ledger: ResMut<crate::process::accounting::Ledger>,
) {
    if fields.is_changed() || vel.is_changed() || cache.n != lattice.n {
        cache.rebuild(&lattice, &fields, &vel);
    }
    let left = move_packets_packed(&lattice, &cache, &params, &mut packets, seed.0, clock.step, clock.dt, Drift::Ito);
    for (s, n) in left.iter().enumerate().take(ledger.species()) {
        ledger.left[s] += n;
    }
    packets.compact();
    if clock.step.is_multiple_of(params.sort_interval_steps) {
        packets.sort_by_voxel();
    }
}

/// Adds the transport process.
pub fn install(world: &mut World, schedule: &mut Schedule, params: &Params) {
    let tp = TransportParams::from_params(params);
    let designs = world.resource::<Designs>().clone();
    let fields = MotionFields::build(&tp, &designs, world.resource::<Matrix>());
    let lattice = world.resource::<Lattice>().clone();
    let mut fields = fields;
    fields.mark_uniform(&lattice, tp.faces);
    world.insert_resource(fields);
    if !world.contains_resource::<FaceVelocity>() {
        world.insert_resource(FaceVelocity::zero(&lattice));
    }
    world.insert_resource(tp);
    schedule.add_systems(transport_system.in_set(Phase::Transport));
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A small lattice with two boxes of a larger `a D` and one of a smaller `a` at random places.
    fn blocky_fields(l: &Lattice) -> MotionFields {
        let mut f = MotionFields::uniform(l, 1.0, 1.0);
        let mut r = crate::rng::stream(1, Domain::Tissue, 0, 0);
        for b in 0..3 {
            let lo: [usize; 3] = std::array::from_fn(|ax| (r.uniform() * l.n[ax] as f64) as usize);
            let hi: [usize; 3] = std::array::from_fn(|ax| (lo[ax] + 1 + (r.uniform() * 4.0) as usize).min(l.n[ax]));
            for v in 0..l.len() {
                let c = l.ijk(v);
                if (0..3).all(|ax| c[ax] >= lo[ax] && c[ax] < hi[ax]) {
                    if b < 2 {
                        f.ad[0][v] = 2.0;
                    } else {
                        f.a[0][v] = 0.5;
                    }
                }
            }
        }
        f
    }

    /// The uniform radius against its definition, by brute force: the Chebyshev distance over
    /// the dual grid to the nearest dual cell whose corners differ, capped by the smallest
    /// lattice dimension and, with absorbing faces, by `min(q, n - q)` along each axis.
    #[test]
    fn uniform_radius_is_the_chebyshev_distance_to_a_change() {
        let l = Lattice::new([13, 9, 11], 1.0, [0.0; 3]);
        let mut f = blocky_fields(&l);
        let dual = DualGrid { n: l.n };
        let dims = dual.dims();
        let cells: Vec<[usize; 3]> =
            (0..dual.len()).map(|q| [q % dims[0], (q / dims[0]) % dims[1], q / (dims[0] * dims[1])]).collect();
        let varying: Vec<[usize; 3]> = cells
            .iter()
            .copied()
            .filter(|&q| {
                let c = dual.corners(&l, q);
                c.iter().any(|&v| f.ad[0][v] != f.ad[0][c[0]] || f.a[0][v] != f.a[0][c[0]])
            })
            .collect();
        assert!(!varying.is_empty() && varying.len() < cells.len() / 2);
        for faces in [FaceRule::Reflect, FaceRule::Absorb] {
            f.mark_uniform(&l, faces);
            for &q in &cells {
                let mut want =
                    varying.iter().map(|w| (0..3).map(|ax| q[ax].abs_diff(w[ax])).max().unwrap()).min().unwrap().min(9);
                if faces == FaceRule::Absorb {
                    for (&qa, &n) in q.iter().zip(&l.n) {
                        want = want.min(qa.min(n - qa));
                    }
                }
                assert_eq!(usize::from(f.uniform_radius[0][dual.index(q)]), want, "dual cell {q:?}, {faces:?}");
            }
        }
    }

    /// Within its budget of a packet's position, the trilinear interpolation of the coefficients
    /// (the fine path's [`Grid::interpolate`]) is the same everywhere (up to rounding): random positions, and
    /// random points within the budget of each (Chebyshev distance, mirrored at the faces as the
    /// kernel mirrors a move).
    #[test]
    fn coefficients_are_constant_within_the_budget() {
        let l = Lattice::new([13, 9, 11], 1.0, [0.0; 3]);
        let mut f = blocky_fields(&l);
        f.mark_uniform(&l, FaceRule::Reflect);
        let cache = MotionCache::build(&l, &f, &FaceVelocity::zero(&l));
        let (grid, dual) = (Grid::new(l.n), DualGrid { n: l.n });
        let mut r = crate::rng::stream(2, Domain::Tissue, 0, 0);
        let mut tried = 0;
        for _ in 0..20_000 {
            let u: [f64; 3] = std::array::from_fn(|ax| r.uniform() * l.n[ax] as f64);
            let budget = uniform_budget(dual, &f.uniform_radius[0], &grid.cell(&u), &u);
            if budget <= 0.0 {
                continue;
            }
            tried += 1;
            let (g0, _, a0) = grid.interpolate(&cache.coef[0], &u);
            for _ in 0..20 {
                let p: [f64; 3] = std::array::from_fn(|ax| {
                    let x = u[ax] + budget * (2.0 * r.uniform() - 1.0);
                    mirror(x, l.n[ax] as f64)
                });
                let (g, _, a) = grid.interpolate(&cache.coef[0], &p);
                // Equal up to the rounding of the interpolation weights (a change would be of
                // order one here: the boxes double `a D` or halve `a`).
                let same = |x: f64, y: f64| (x - y).abs() <= 1e-12 * y.abs();
                assert!(same(g, g0) && same(a, a0), "at {p:?}, {budget} from {u:?}: ({g}, {a}) against ({g0}, {a0})");
            }
        }
        assert!(tried > 5_000, "too few positions with a budget: {tried}");
    }

    /// A Gaussian constant-coefficient sub-step takes the whole rest of the step when it fits,
    /// and otherwise the longest that keeps each bound.
    #[test]
    fn gaussian_substep_keeps_its_bounds() {
        let (d, w, g, budget, lmax) = (0.05, 0.02, 0.001, 4.25, 0.25);
        assert_eq!(gaussian_substep(d, w, g, budget, lmax, 1.0), 1.0);
        let h = gaussian_substep(d, w, g, budget, lmax, 100.0);
        let reach = |h: f64| GAUSSIAN_SPREAD * (2.0 * d * h).sqrt() + w * h;
        assert!(h < 100.0 && reach(h) <= budget * (1.0 + 1e-12));
        assert!(w * h <= lmax && g * h <= VELOCITY_CHANGE_PER_SUBSTEP);
        // The reach bound is the binding one here, and met with equality.
        assert!((reach(h) - budget).abs() < 1e-9);
        // A fast drift: the fine drift bound binds.
        let h = gaussian_substep(0.0, 2.0, 0.0, budget, lmax, 10.0);
        assert!((h - lmax / 2.0).abs() < 1e-15);
    }
}
