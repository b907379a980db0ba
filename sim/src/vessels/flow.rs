//! Steady blood flow in the vessel network.
//!
//! Each segment is a Poiseuille tube of conductance `G = pi r^4 / (8 mu_app L)` (Poiseuille
//! 1840s; Sutera and Skalak 1993, Annu Rev Fluid Mech 25:1, for its history), with the apparent
//! viscosity `mu_app = mu_plasma mu_rel(D, H)` of [`super::viscosity`]. Conservation of blood at
//! every node without an imposed pressure gives `sum_j G_ij (p_i - p_j) = q_i` (the imposed
//! inflow, zero at interior nodes): a sparse symmetric positive definite system (a weighted graph
//! Laplacian with the pressure nodes eliminated, an M-matrix). It is solved by the conjugate
//! gradient method (Hestenes and Stiefel 1952, J Res Nat Bur Stand 49:409) preconditioned with one
//! V-cycle of smoothed-aggregation algebraic multigrid ([`super::amg`]).
//!
//! Per segment: flow `Q = G (p_a - p_b)`, mean velocity `Q / (pi r^2)`, wall shear stress
//! `4 mu_app |Q| / (pi r^3)` and the mid-segment pressure `(p_a + p_b) / 2` (exact: the pressure
//! falls linearly along a Poiseuille tube). A piece of the network with no pressure boundary has
//! no defined pressure (NaN) and no flow; a segment whose mean speed is below the threshold is
//! flagged unperfused.

use bevy_ecs::prelude::Resource;

use super::amg::{Amg, Sparse, dot, par_rows};
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
        par_rows(&mut y[..self.n], |i, _| {
            let mut s = 0.0;
            for k in self.start[i]..self.start[i + 1] {
                s += self.val[k] * x[self.col[k] as usize];
            }
            s
        });
    }

    /// Builds from (row, column, value) entries in any order; duplicates are summed in the
    /// order they come, so the result does not depend on anything but the entries.
    fn from_entries(n: usize, entries: &[(u32, u32, f64)]) -> Self {
        // Counting sort by row (stable), then each short row sorted by column.
        let mut count = vec![0usize; n + 1];
        for e in entries {
            count[e.0 as usize + 1] += 1;
        }
        for i in 0..n {
            count[i + 1] += count[i];
        }
        let mut fill = count.clone();
        let mut sorted = vec![(0u32, 0.0f64); entries.len()];
        for e in entries {
            sorted[fill[e.0 as usize]] = (e.1, e.2);
            fill[e.0 as usize] += 1;
        }
        let mut start = Vec::with_capacity(n + 1);
        let mut col = Vec::with_capacity(entries.len());
        let mut val = Vec::with_capacity(entries.len());
        start.push(0);
        for i in 0..n {
            let row = &mut sorted[count[i]..count[i + 1]];
            row.sort_by_key(|e| e.0);
            for &(c, v) in row.iter() {
                if col.len() > start[i] && *col.last().unwrap() == c {
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

/// Solves `A x = b` by conjugate gradients preconditioned with algebraic multigrid, from the
/// guess in `x`. Returns (iterations, relative residual).
pub fn pcg(a: &Csr, b: &[f64], x: &mut [f64], tol: f64, max_iter: usize) -> SimResult<(usize, f64)> {
    let n = a.n;
    let bnorm = dot(b, b).sqrt();
    if n == 0 {
        return Ok((0, 0.0));
    }
    let mut pre = Amg::new(Sparse { rows: n, cols: n, start: a.start.clone(), col: a.col.clone(), val: a.val.clone() });
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
        par_rows(x, |i, xi| xi + alpha * p[i]);
        par_rows(&mut r, |i, ri| ri - alpha * q[i]);
        pre.apply(&r, &mut z);
        let rz_new = dot(&r, &z);
        let beta = rz_new / rz;
        rz = rz_new;
        par_rows(&mut p, |i, pi| z[i] + beta * pi);
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

/// Assembles the pressure system of a graph: node positions (for the numbering only), boundary
/// conditions, edges `(a, b)` and their conductances `g`.
pub fn assemble(nodes: &[[f64; 3]], bc: &[NodeBc], edges: &[(u32, u32)], g: &[f64]) -> PressureSystem {
    let n = nodes.len();
    let (piece, count) = pieces(n, edges);
    let mut has_p = vec![false; count];
    for (i, b) in bc.iter().enumerate() {
        if matches!(b, NodeBc::Pressure(_)) {
            has_p[piece[i] as usize] = true;
        }
    }
    let anchored: Vec<bool> = (0..n).map(|i| has_p[piece[i] as usize]).collect();
    // Unknowns numbered along a Morton (Z-order) curve through the node positions: neighbours in
    // space are neighbours in memory, which the solver's sweeps and its aggregates profit from.
    let mut lo = [f64::INFINITY; 3];
    let mut hi = [f64::NEG_INFINITY; 3];
    for x in nodes {
        for a in 0..3 {
            lo[a] = lo[a].min(x[a]);
            hi[a] = hi[a].max(x[a]);
        }
    }
    let span = (0..3).map(|a| hi[a] - lo[a]).fold(0.0f64, f64::max).max(1e-30);
    let scale = ((1u64 << 21) - 1) as f64 / span;
    let mut order: Vec<(u64, u32)> = (0..n)
        .filter(|&i| anchored[i] && !matches!(bc[i], NodeBc::Pressure(_)))
        .map(|i| {
            let x = nodes[i];
            let q = [0, 1, 2].map(|a| ((x[a] - lo[a]) * scale) as usize);
            (crate::lattice::morton(q), i as u32)
        })
        .collect();
    order.sort_unstable();
    let mut unknown = vec![u32::MAX; n];
    for (k, &(_, i)) in order.iter().enumerate() {
        unknown[i as usize] = k as u32;
    }
    let m = order.len();
    let mut entries: Vec<(u32, u32, f64)> = Vec::with_capacity(4 * edges.len());
    let mut rhs = vec![0.0; m];
    for (i, b) in bc.iter().enumerate() {
        if let (NodeBc::Inflow(q), u) = (b, unknown[i])
            && u != u32::MAX
        {
            rhs[u as usize] += q;
        }
    }
    let pressure = |i: usize| match bc[i] {
        NodeBc::Pressure(p) => p,
        _ => 0.0,
    };
    for (&(a, b), &gs) in edges.iter().zip(g) {
        let (a, b) = (a as usize, b as usize);
        if a == b {
            continue;
        }
        let (ua, ub) = (unknown[a], unknown[b]);
        if ua != u32::MAX {
            entries.push((ua, ua, gs));
            if ub != u32::MAX {
                entries.push((ua, ub, -gs));
            } else if anchored[b] {
                rhs[ua as usize] += gs * pressure(b);
            }
        }
        if ub != u32::MAX {
            entries.push((ub, ub, gs));
            if ua != u32::MAX {
                entries.push((ub, ua, -gs));
            } else if anchored[a] {
                rhs[ub as usize] += gs * pressure(a);
            }
        }
    }
    PressureSystem { matrix: Csr::from_entries(m, &entries), rhs, unknown, anchored }
}

/// Connected pieces of a graph of `n` nodes: the piece of every node and their number.
fn pieces(n: usize, edges: &[(u32, u32)]) -> (Vec<u32>, usize) {
    let mut parent: Vec<u32> = (0..n as u32).collect();
    fn find(p: &mut [u32], mut x: u32) -> u32 {
        while p[x as usize] != x {
            p[x as usize] = p[p[x as usize] as usize];
            x = p[x as usize];
        }
        x
    }
    for &(a, b) in edges {
        let (ra, rb) = (find(&mut parent, a), find(&mut parent, b));
        if ra != rb {
            parent[ra.max(rb) as usize] = ra.min(rb);
        }
    }
    let mut label = vec![u32::MAX; n];
    let mut piece = vec![0u32; n];
    let mut count = 0usize;
    for (i, p) in piece.iter_mut().enumerate() {
        let r = find(&mut parent, i as u32) as usize;
        if label[r] == u32::MAX {
            label[r] = count as u32;
            count += 1;
        }
        *p = label[r];
    }
    (piece, count)
}

/// A chain of segments through nodes of degree two without boundary condition, from node `from`
/// to node `to`: such nodes only pass blood on, so the chain acts as one conductance in series.
struct Chain {
    from: u32,
    to: u32,
    /// Segments in order from `from`, and whether each is traversed from its `a` end.
    segments: Vec<(u32, bool)>,
    /// Series conductance `1 / sum(1 / g)`.
    conductance: f64,
}

/// Contracts every chain of degree-two nodes into one edge (exact for a linear network).
fn contract(net: &Network, g: &[f64]) -> (Vec<bool>, Vec<Chain>) {
    let n = net.nodes.len();
    let (start, inc) = net.incidence();
    let passing: Vec<bool> = (0..n)
        .map(|i| {
            net.bc[i] == NodeBc::None && start[i + 1] - start[i] == 2 && {
                let (s0, s1) = (&net.segments[inc[start[i]] as usize], &net.segments[inc[start[i] + 1] as usize]);
                s0.a != s0.b && s1.a != s1.b
            }
        })
        .collect();
    let mut used = vec![false; net.segments.len()];
    let mut chains = Vec::new();
    for u in 0..n {
        if passing[u] {
            continue;
        }
        for e in start[u]..start[u + 1] {
            let first = inc[e] as usize;
            if used[first] {
                continue;
            }
            let mut segments = Vec::new();
            let mut resistance = 0.0;
            let (mut cur, mut s) = (u as u32, first);
            loop {
                used[s] = true;
                let seg = &net.segments[s];
                let forward = seg.a == cur;
                segments.push((s as u32, forward));
                resistance += 1.0 / g[s];
                cur = if forward { seg.b } else { seg.a };
                if !passing[cur as usize] {
                    break;
                }
                let c = cur as usize;
                let (x, y) = (inc[start[c]] as usize, inc[start[c] + 1] as usize);
                s = if x == s { y } else { x };
            }
            chains.push(Chain { from: u as u32, to: cur, segments, conductance: 1.0 / resistance });
        }
    }
    (passing, chains)
}

/// Solves the blood flow of `net`.
/// Factor on the resistance of a closed segment: it keeps the network connected for the solve and
/// carries no flow to speak of.
pub const CLOSED_FACTOR: f64 = 1e6;

pub fn solve(net: &Network, opt: &FlowOptions) -> SimResult<BloodFlow> {
    net.check().map_err(|what| SimError::Invariant {
        time_s: 0.0,
        step: 0,
        what: format!("vessel network: {what}"),
    })?;
    let ns = net.segments.len();
    let viscosity: Vec<f64> = {
        use rayon::prelude::*;
        net.segments
            .par_iter()
            .enumerate()
            .map(|(i, s)| {
                let closed = if net.is_closed(i) { CLOSED_FACTOR } else { 1.0 };
                closed * opt.plasma_viscosity * relative_viscosity(opt.law, s.radius, opt.haematocrit)
            })
            .collect()
    };
    let conductance: Vec<f64> =
        net.segments.iter().zip(&viscosity).map(|(s, &mu)| poiseuille_conductance(s.radius, s.length, mu)).collect();
    // Series chains through pass-through nodes become single edges; their inner pressures follow.
    let (passing, chains) = contract(net, &conductance);
    let edges: Vec<(u32, u32)> = chains.iter().map(|c| (c.from, c.to)).collect();
    let g_chain: Vec<f64> = chains.iter().map(|c| c.conductance).collect();
    let sys = assemble(&net.nodes, &net.bc, &edges, &g_chain);
    // Start from the mean imposed pressure: the residual is then confined to the rows next to
    // the boundary (a plane fitted through the boundary pressures starts with a larger one).
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
    let mut node_pressure: Vec<f64> = (0..net.nodes.len())
        .map(|i| match (net.bc[i], sys.unknown[i]) {
            (NodeBc::Pressure(p), _) => p,
            (_, u) if u != u32::MAX && !passing[i] => x[u as usize],
            _ => f64::NAN,
        })
        .collect();
    for c in &chains {
        let (p0, p1) = (node_pressure[c.from as usize], node_pressure[c.to as usize]);
        if !(p0.is_finite() && p1.is_finite()) {
            continue;
        }
        let q = if c.from == c.to { 0.0 } else { c.conductance * (p0 - p1) };
        let mut p = p0;
        for &(s, forward) in &c.segments[..c.segments.len() - 1] {
            let seg = &net.segments[s as usize];
            p -= q / conductance[s as usize];
            node_pressure[if forward { seg.b } else { seg.a } as usize] = p;
        }
    }
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
        out.perfused[s] = out.velocity[s].abs() >= threshold && out.velocity[s] != 0.0 && !net.is_closed(s);
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
