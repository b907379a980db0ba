//! Steady blood flow in the vessel network.
//!
//! Each segment is a Poiseuille tube of conductance `G = pi r^4 / (8 mu_app L)` (Poiseuille
//! 1840s; Sutera and Skalak 1993, Annu Rev Fluid Mech 25:1, for its history), with the apparent
//! viscosity `mu_app = mu_plasma mu_rel(D, H)` of [`super::viscosity`]. Conservation of blood at
//! every node without an imposed pressure gives `sum_j G_ij (p_i - p_j) = q_i` (the imposed
//! inflow, zero at interior nodes): a sparse symmetric positive definite system (a weighted graph
//! Laplacian with the pressure nodes eliminated, an M-matrix). It is solved by the conjugate
//! gradient method (Hestenes and Stiefel 1952, J Res Nat Bur Stand 49:409) preconditioned with
//! the incomplete Cholesky factorisation without fill, IC(0), which exists for every M-matrix
//! (Meijerink and van der Vorst 1977, Math Comp 31:148).
//!
//! Per segment: flow `Q = G (p_a - p_b)`, mean velocity `Q / (pi r^2)`, wall shear stress
//! `4 mu_app |Q| / (pi r^3)` and the mid-segment pressure `(p_a + p_b) / 2` (exact: the pressure
//! falls linearly along a Poiseuille tube). A piece of the network with no pressure boundary has
//! no defined pressure (NaN) and no flow; a segment whose mean speed is below the threshold is
//! flagged unperfused.

use bevy_ecs::prelude::Resource;

use super::network::{Network, NodeBc};
use super::viscosity::relative_viscosity;
use crate::error::{SimError, SimResult};
use crate::scenario::ViscosityLaw;

/// Settings of one blood-flow solve.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlowOptions {
    pub law: ViscosityLaw,
    /// Discharge haematocrit of every segment (no phase separation at bifurcations).
    pub haematocrit: f64,
    /// Plasma viscosity, Pa s.
    pub plasma_viscosity: f64,
    /// Relative residual `|b - A p| / |b|` at which CG stops.
    pub tolerance: f64,
    /// Slowest mean speed of a perfused segment, m/s.
    pub min_velocity: f64,
}

/// The solved blood flow of a network revision.
#[derive(Resource, Debug, Clone, Default, PartialEq)]
pub struct BloodFlow {
    /// Revision of the network this solves.
    pub revision: u64,
    /// Pressure of every node, Pa (NaN in a piece without a pressure boundary).
    pub node_pressure: Vec<f64>,
    /// Per segment: apparent viscosity (Pa s), conductance (m^3/(Pa s)), flow a to b (m^3/s),
    /// mean velocity (m/s), wall shear stress (Pa), mid-segment pressure (Pa).
    pub viscosity: Vec<f64>,
    pub conductance: Vec<f64>,
    pub flow: Vec<f64>,
    pub velocity: Vec<f64>,
    pub wall_shear: Vec<f64>,
    pub mid_pressure: Vec<f64>,
    pub perfused: Vec<bool>,
    /// Blood entering the network through its boundary nodes, m^3/s.
    pub total_inflow: f64,
    /// CG iterations and final relative residual.
    pub iterations: usize,
    pub residual: f64,
}

impl BloodFlow {
    /// Fraction of segments that are perfused (0 for an empty network).
    pub fn perfused_fraction(&self) -> f64 {
        if self.perfused.is_empty() {
            return 0.0;
        }
        self.perfused.iter().filter(|&&p| p).count() as f64 / self.perfused.len() as f64
    }

    /// Net blood leaving each node into its segments minus the imposed inflow, m^3/s: zero at
    /// every node without an imposed pressure when blood is conserved.
    pub fn node_imbalance(&self, net: &Network) -> Vec<f64> {
        let mut out = vec![0.0; net.nodes.len()];
        for (s, seg) in net.segments.iter().enumerate() {
            out[seg.a as usize] += self.flow[s];
            out[seg.b as usize] -= self.flow[s];
        }
        for (i, bc) in net.bc.iter().enumerate() {
            if let NodeBc::Inflow(q) = bc {
                out[i] -= q;
            }
        }
        out
    }
}

/// A symmetric sparse matrix in compressed rows, columns ascending, diagonal included.
#[derive(Debug, Clone, Default)]
pub struct Csr {
    pub n: usize,
    pub start: Vec<usize>,
    pub col: Vec<u32>,
    pub val: Vec<f64>,
}

impl Csr {
    /// `y = A x`.
    pub fn mul(&self, x: &[f64], y: &mut [f64]) {
        for (i, yi) in y.iter_mut().enumerate().take(self.n) {
            let mut s = 0.0;
            for k in self.start[i]..self.start[i + 1] {
                s += self.val[k] * x[self.col[k] as usize];
            }
            *yi = s;
        }
    }

    /// Builds from per-row lists of (column, value); duplicates are summed.
    fn from_rows(n: usize, mut rows: Vec<Vec<(u32, f64)>>) -> Self {
        let mut start = Vec::with_capacity(n + 1);
        let mut col = Vec::new();
        let mut val = Vec::new();
        start.push(0);
        for row in rows.iter_mut() {
            row.sort_unstable_by_key(|e| e.0);
            for &(c, v) in row.iter() {
                if col.len() > *start.last().unwrap() && *col.last().unwrap() == c {
                    *val.last_mut().unwrap() += v;
                } else {
                    col.push(c);
                    val.push(v);
                }
            }
            start.push(col.len());
        }
        Csr { n, start, col, val }
    }
}

/// Incomplete Cholesky factor without fill: `L` by rows (lower triangle, diagonal last).
struct Ic0 {
    start: Vec<usize>,
    col: Vec<u32>,
    val: Vec<f64>,
}

impl Ic0 {
    fn new(a: &Csr) -> Self {
        let n = a.n;
        let mut start = Vec::with_capacity(n + 1);
        let mut col = Vec::new();
        let mut val = Vec::new();
        start.push(0);
        for i in 0..n {
            for k in a.start[i]..a.start[i + 1] {
                if a.col[k] as usize <= i {
                    col.push(a.col[k]);
                    val.push(a.val[k]);
                }
            }
            start.push(col.len());
        }
        let mut pos = vec![usize::MAX; n];
        for i in 0..n {
            let (lo, hi) = (start[i], start[i + 1]);
            for e in lo..hi {
                pos[col[e] as usize] = e;
            }
            let mut sq = 0.0;
            for e in lo..hi - 1 {
                let k = col[e] as usize;
                let mut v = val[e];
                // Subtract sum_j L_ij L_kj over the columns j < k shared by rows i and k.
                for f in start[k]..start[k + 1] - 1 {
                    let j = col[f] as usize;
                    let p = pos[j];
                    if p != usize::MAX && p < e {
                        v -= val[p] * val[f];
                    }
                }
                v /= val[start[k + 1] - 1];
                val[e] = v;
                sq += v * v;
            }
            let d = val[hi - 1] - sq;
            // Exists for M-matrices (Meijerink and van der Vorst 1977); guard rounding anyway.
            val[hi - 1] = if d > 1e-12 * val[hi - 1] { d.sqrt() } else { val[hi - 1].sqrt() };
            for e in lo..hi {
                pos[col[e] as usize] = usize::MAX;
            }
        }
        Ic0 { start, col, val }
    }

    /// `z = (L L^T)^-1 r`.
    fn apply(&self, r: &[f64], z: &mut [f64]) {
        let n = r.len();
        for i in 0..n {
            let (lo, hi) = (self.start[i], self.start[i + 1]);
            let mut s = r[i];
            for e in lo..hi - 1 {
                s -= self.val[e] * z[self.col[e] as usize];
            }
            z[i] = s / self.val[hi - 1];
        }
        for i in (0..n).rev() {
            let (lo, hi) = (self.start[i], self.start[i + 1]);
            let zi = z[i] / self.val[hi - 1];
            z[i] = zi;
            for e in lo..hi - 1 {
                z[self.col[e] as usize] -= self.val[e] * zi;
            }
        }
    }
}

#[inline]
fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

/// Solves `A x = b` by IC(0)-preconditioned conjugate gradients from the guess in `x`.
/// Returns (iterations, relative residual).
pub fn pcg(a: &Csr, b: &[f64], x: &mut [f64], tol: f64, max_iter: usize) -> SimResult<(usize, f64)> {
    let n = a.n;
    let bnorm = dot(b, b).sqrt();
    if n == 0 {
        return Ok((0, 0.0));
    }
    let pre = Ic0::new(a);
    let mut r = vec![0.0; n];
    a.mul(x, &mut r);
    for i in 0..n {
        r[i] = b[i] - r[i];
    }
    let scale = if bnorm > 0.0 { bnorm } else { 1.0 };
    let mut z = vec![0.0; n];
    pre.apply(&r, &mut z);
    let mut p = z.clone();
    let mut q = vec![0.0; n];
    let mut rz = dot(&r, &z);
    let mut res = dot(&r, &r).sqrt() / scale;
    let mut it = 0;
    while res > tol {
        if it >= max_iter {
            return Err(SimError::Solver {
                what: "blood pressure in the vessel network".into(),
                iterations: it,
                residual: res,
                tolerance: tol,
            });
        }
        a.mul(&p, &mut q);
        let alpha = rz / dot(&p, &q);
        for i in 0..n {
            x[i] += alpha * p[i];
            r[i] -= alpha * q[i];
        }
        pre.apply(&r, &mut z);
        let rz_new = dot(&r, &z);
        let beta = rz_new / rz;
        rz = rz_new;
        for i in 0..n {
            p[i] = z[i] + beta * p[i];
        }
        res = dot(&r, &r).sqrt() / scale;
        it += 1;
    }
    Ok((it, res))
}

/// Poiseuille conductance `pi r^4 / (8 mu L)`, m^3/(Pa s).
#[inline]
pub fn poiseuille_conductance(radius: f64, length: f64, viscosity: f64) -> f64 {
    std::f64::consts::PI * radius.powi(4) / (8.0 * viscosity * length)
}

/// The linear system of the node pressures: matrix, right-hand side, the unknown index of each
/// node (`u32::MAX` for imposed-pressure and unanchored nodes), and whether each node's piece has
/// a pressure boundary.
pub struct PressureSystem {
    pub matrix: Csr,
    pub rhs: Vec<f64>,
    pub unknown: Vec<u32>,
    pub anchored: Vec<bool>,
}

/// Assembles the pressure system of `net` for segment conductances `g`.
pub fn assemble(net: &Network, g: &[f64]) -> PressureSystem {
    let n = net.nodes.len();
    let (piece, count) = net.pieces();
    let mut has_p = vec![false; count];
    for (i, bc) in net.bc.iter().enumerate() {
        if matches!(bc, NodeBc::Pressure(_)) {
            has_p[piece[i] as usize] = true;
        }
    }
    let anchored: Vec<bool> = (0..n).map(|i| has_p[piece[i] as usize]).collect();
    let mut unknown = vec![u32::MAX; n];
    let mut m = 0u32;
    for i in 0..n {
        if anchored[i] && !matches!(net.bc[i], NodeBc::Pressure(_)) {
            unknown[i] = m;
            m += 1;
        }
    }
    let m = m as usize;
    let mut rows: Vec<Vec<(u32, f64)>> = vec![Vec::new(); m];
    let mut rhs = vec![0.0; m];
    for (i, bc) in net.bc.iter().enumerate() {
        if let (NodeBc::Inflow(q), u) = (bc, unknown[i])
            && u != u32::MAX
        {
            rhs[u as usize] += q;
        }
    }
    for (s, seg) in net.segments.iter().enumerate() {
        let (a, b) = (seg.a as usize, seg.b as usize);
        let (ua, ub) = (unknown[a], unknown[b]);
        let gs = g[s];
        let pressure = |i: usize| match net.bc[i] {
            NodeBc::Pressure(p) => p,
            _ => 0.0,
        };
        if ua != u32::MAX {
            rows[ua as usize].push((ua, gs));
            if ub != u32::MAX {
                rows[ua as usize].push((ub, -gs));
            } else if anchored[b] {
                rhs[ua as usize] += gs * pressure(b);
            }
        }
        if ub != u32::MAX {
            rows[ub as usize].push((ub, gs));
            if ua != u32::MAX {
                rows[ub as usize].push((ua, -gs));
            } else if anchored[a] {
                rhs[ub as usize] += gs * pressure(a);
            }
        }
    }
    PressureSystem { matrix: Csr::from_rows(m, rows), rhs, unknown, anchored }
}

/// Solves the blood flow of `net`.
pub fn solve(net: &Network, opt: &FlowOptions) -> SimResult<BloodFlow> {
    net.check().map_err(|what| SimError::Invariant {
        time_s: 0.0,
        step: 0,
        what: format!("vessel network: {what}"),
    })?;
    let ns = net.segments.len();
    let viscosity: Vec<f64> = net
        .segments
        .iter()
        .map(|s| opt.plasma_viscosity * relative_viscosity(opt.law, s.radius, opt.haematocrit))
        .collect();
    let conductance: Vec<f64> =
        net.segments.iter().zip(&viscosity).map(|(s, &mu)| poiseuille_conductance(s.radius, s.length, mu)).collect();
    let sys = assemble(net, &conductance);
    // Start from the mean imposed pressure: the solution lies between the extremes.
    let (mut sum, mut cnt) = (0.0, 0usize);
    for bc in &net.bc {
        if let NodeBc::Pressure(p) = bc {
            sum += p;
            cnt += 1;
        }
    }
    let guess = if cnt > 0 { sum / cnt as f64 } else { 0.0 };
    let mut x = vec![guess; sys.matrix.n];
    let max_iter = 20 * (sys.matrix.n as f64).sqrt() as usize + 1000;
    let (iterations, residual) = pcg(&sys.matrix, &sys.rhs, &mut x, opt.tolerance, max_iter)?;
    let node_pressure: Vec<f64> = (0..net.nodes.len())
        .map(|i| match (net.bc[i], sys.unknown[i]) {
            (NodeBc::Pressure(p), _) => p,
            (_, u) if u != u32::MAX => x[u as usize],
            _ => f64::NAN,
        })
        .collect();
    let mut out = BloodFlow {
        revision: net.revision,
        node_pressure,
        viscosity,
        conductance,
        flow: vec![0.0; ns],
        velocity: vec![0.0; ns],
        wall_shear: vec![0.0; ns],
        mid_pressure: vec![f64::NAN; ns],
        perfused: vec![false; ns],
        total_inflow: 0.0,
        iterations,
        residual,
    };
    let mut vmax: f64 = 0.0;
    for (s, seg) in net.segments.iter().enumerate() {
        let (pa, pb) = (out.node_pressure[seg.a as usize], out.node_pressure[seg.b as usize]);
        if !(pa.is_finite() && pb.is_finite()) {
            continue;
        }
        let q = out.conductance[s] * (pa - pb);
        let area = std::f64::consts::PI * seg.radius * seg.radius;
        out.flow[s] = q;
        out.velocity[s] = q / area;
        out.wall_shear[s] = 4.0 * out.viscosity[s] * q.abs() / (std::f64::consts::PI * seg.radius.powi(3));
        out.mid_pressure[s] = 0.5 * (pa + pb);
        vmax = vmax.max(out.velocity[s].abs());
    }
    // Below a billionth of the fastest segment the flow is rounding noise (dead ends).
    let threshold = opt.min_velocity.max(1e-9 * vmax);
    for s in 0..ns {
        out.perfused[s] = out.velocity[s].abs() >= threshold && out.velocity[s] != 0.0;
    }
    let imbalance = out.node_imbalance(net);
    for (i, bc) in net.bc.iter().enumerate() {
        match bc {
            NodeBc::Pressure(_) if imbalance[i] > 0.0 => out.total_inflow += imbalance[i],
            NodeBc::Inflow(q) if *q > 0.0 && sys.anchored[i] => out.total_inflow += q,
            _ => {}
        }
    }
    Ok(out)
}
