//! Oxygen carried by the blood along the network's perfused segments
//! (`oxygen.blood_transport = "along-vessels"`).
//!
//! Blood holds oxygen dissolved and bound to haemoglobin: per volume of blood
//! `C(P) = alpha P + H S(P)`, `S(P) = P^n / (P^n + P50^n)` (the saturation curve of Hill 1910,
//! J Physiol 40:iv; `P50` about 26.8 mmHg for human blood, Severinghaus 1979, J Appl Physiol
//! 46:599, and `n` about 2.7, common practice; both from memory). Each perfused segment is one
//! well-mixed compartment of the flowing blood (first-order upwind finite volumes along the
//! network): with the content `C_in` of the blood entering it and its flow `Q`,
//!
//! `|Q| (C_in - C(P)) = sum_v P_w A_v (alpha P - c_v)`
//!
//! (the Fick principle for the segment: what the blood loses crosses its wall into the voxels
//! `v` it passes, of tissue level `c_v`, wall area `A_v` and oxygen permeability `P_w`), solved
//! for the segment's partial pressure `P` by Newton's method safeguarded by bisection: the left
//! side falls and the right side rises with `P`, so the root is unique, and it lies between 0 and
//! the larger of `C_in / alpha` and the tissue's partial pressures. Nodes are visited in descending blood pressure (blood
//! runs downhill, so every segment feeding a node is done before the node); a node mixes what
//! its perfused inflowing segments bring, flow-weighted, and blood entering from the boundary
//! has the inlet partial pressure. The tissue then sees each segment's wall at `alpha P`.

use crate::vessels::VesselRaster;
use crate::vessels::flow::BloodFlow;
use crate::vessels::network::{Network, NodeBc};

/// The oxygen content law of blood and the inlet level (SI: Pa, mol/m^3).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BloodOxygenLaw {
    /// Solubility, mol/(m^3 Pa).
    pub solubility: f64,
    /// Oxygen bound by saturated haemoglobin per volume of blood, mol/m^3.
    pub capacity: f64,
    /// Partial pressure of half saturation, Pa.
    pub p50: f64,
    /// Hill exponent.
    pub hill: f64,
    /// Partial pressure of the blood entering the network, Pa.
    pub inlet: f64,
}

impl BloodOxygenLaw {
    /// Haemoglobin saturation at partial pressure `p` (Hill 1910).
    #[inline]
    pub fn saturation(&self, p: f64) -> f64 {
        if p <= 0.0 {
            return 0.0;
        }
        let x = (p / self.p50).powf(self.hill);
        x / (1.0 + x)
    }

    /// `C(p)` and `dC/dP` at partial pressure `p` together (one power).
    #[inline]
    pub fn content_and_slope(&self, p: f64) -> (f64, f64) {
        if p <= 0.0 {
            return (0.0, self.solubility);
        }
        let x = (p / self.p50).powf(self.hill);
        let s = x / (1.0 + x);
        (self.solubility * p + self.capacity * s, self.solubility + self.capacity * self.hill * s / (p * (1.0 + x)))
    }

    /// Oxygen per volume of blood at partial pressure `p`, mol/m^3.
    #[inline]
    pub fn content(&self, p: f64) -> f64 {
        self.solubility * p + self.capacity * self.saturation(p)
    }
}

/// Each segment's wall in the voxels it passes: `(voxel, P_w A)` pairs, m^3/s (compressed rows).
#[derive(Debug, Clone, Default)]
pub struct SegmentVoxels {
    start: Vec<u32>,
    voxel: Vec<u32>,
    conductance: Vec<f64>,
}

impl SegmentVoxels {
    /// The raster turned around, with the wall conductance `permeability * area` of each entry;
    /// voxels where `open` is false (necrotic) exchange nothing.
    pub fn build(raster: &VesselRaster, segments: usize, permeability: f64, open: impl Fn(usize) -> bool) -> Self {
        let mut count = vec![0u32; segments + 1];
        let voxels = raster.start.len().saturating_sub(1);
        for v in 0..voxels {
            for (s, _) in raster.voxel(v) {
                count[s as usize + 1] += 1;
            }
        }
        for s in 0..segments {
            count[s + 1] += count[s];
        }
        let total = count[segments] as usize;
        let (mut voxel, mut conductance) = (vec![0u32; total], vec![0.0; total]);
        let mut next = count.clone();
        for v in 0..voxels {
            for (s, a) in raster.voxel(v) {
                let k = &mut next[s as usize];
                voxel[*k as usize] = v as u32;
                conductance[*k as usize] = if open(v) { permeability * a } else { 0.0 };
                *k += 1;
            }
        }
        SegmentVoxels { start: count, voxel, conductance }
    }

    /// The `(voxel, P_w A)` pairs of segment `s`.
    #[inline]
    pub fn of(&self, s: usize) -> impl Iterator<Item = (usize, f64)> + '_ {
        let (lo, hi) = (self.start[s] as usize, self.start[s + 1] as usize);
        self.voxel[lo..hi].iter().map(|&v| v as usize).zip(self.conductance[lo..hi].iter().copied())
    }
}

/// Oxygen the blood brings into the network and carries out of it, mol/s.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct BloodBalance {
    pub inflow: f64,
    pub outflow: f64,
}

impl BloodBalance {
    /// What the blood gave up on its way: the oxygen delivered to the tissue, mol/s.
    pub fn delivered(&self) -> f64 {
        self.inflow - self.outflow
    }
}

/// Partial pressure of the blood leaving a segment of flow `q` (m^3/s, > 0) fed with content
/// `c_in`, through walls `(voxel, P_w A)` to tissue levels `tissue` (see the module doc).
pub fn segment_pressure(
    law: &BloodOxygenLaw,
    q: f64,
    c_in: f64,
    walls: impl Iterator<Item = (usize, f64)>,
    tissue: &[f64],
) -> f64 {
    let a = law.solubility;
    let (mut k_sum, mut kc_sum, mut c_max) = (0.0, 0.0, 0.0f64);
    for (v, k) in walls {
        k_sum += k;
        kc_sum += k * tissue[v];
        c_max = c_max.max(tissue[v]);
    }
    // g(P) = Q (C_in - C(P)) - (K a P - sum k c), falling; its root by Newton's method kept
    // inside the bracket [lo, hi] (a bisection where a step would leave it).
    let g = |p: f64| {
        let (c, dc) = law.content_and_slope(p);
        (q * (c_in - c) - (k_sum * a * p - kc_sum), -q * dc - k_sum * a)
    };
    let (mut lo, mut hi) = (0.0, (c_in / a).max(c_max / a));
    if g(hi).0 >= 0.0 {
        return hi;
    }
    let mut x = 0.5 * hi;
    for _ in 0..100 {
        let (gx, dg) = g(x);
        if gx > 0.0 {
            lo = x;
        } else {
            hi = x;
        }
        let newton = x - gx / dg;
        let next = if newton > lo && newton < hi && dg < 0.0 { newton } else { 0.5 * (lo + hi) };
        if (next - x).abs() <= 1e-13 * hi.max(1e-300) || next == x {
            return next;
        }
        x = next;
    }
    x
}

/// The order a march visits the network in: the segments at each node ([`Network::incidence`])
/// and the nodes from the highest blood pressure down. It depends on the network and its flow
/// only, so it is made once for all the rounds of a solve.
#[derive(Debug, Clone, Default)]
pub struct MarchOrder {
    at: Vec<usize>,
    list: Vec<u32>,
    nodes: Vec<u32>,
}

impl MarchOrder {
    pub fn new(net: &Network, flow: &BloodFlow) -> Self {
        let (at, list) = net.incidence();
        let p = &flow.node_pressure;
        let mut nodes: Vec<u32> = (0..net.nodes.len() as u32).filter(|&i| p[i as usize].is_finite()).collect();
        nodes.sort_by(|&i, &j| p[j as usize].total_cmp(&p[i as usize]).then(i.cmp(&j)));
        MarchOrder { at, list, nodes }
    }
}

/// The partial pressure of the blood in every segment (Pa; 0 in unperfused ones), marched from
/// the inlets in `order` with the tissue field `tissue` (mol/m^3); returns the network's oxygen
/// balance.
pub fn march(
    net: &Network,
    flow: &BloodFlow,
    order: &MarchOrder,
    walls: &SegmentVoxels,
    tissue: &[f64],
    law: &BloodOxygenLaw,
    out: &mut Vec<f64>,
) -> BloodBalance {
    out.clear();
    out.resize(net.segments.len(), 0.0);
    let MarchOrder { at, list, nodes } = order;
    let mut balance = BloodBalance::default();
    let c_inlet = law.content(law.inlet);
    // Flow of segment `s` into node `n` (positive in, negative out).
    let into = |s: usize, n: u32| {
        let seg = &net.segments[s];
        if seg.b == n { flow.flow[s] } else { -flow.flow[s] }
    };
    for &n in nodes {
        let segs = &list[at[n as usize]..at[n as usize + 1]];
        let (mut q_in, mut content, mut q_out) = (0.0, 0.0, 0.0);
        for &s in segs {
            let s = s as usize;
            if !flow.perfused[s] {
                continue;
            }
            let q = into(s, n);
            if q > 0.0 {
                q_in += q;
                content += q * law.content(out[s]);
            } else {
                q_out -= q;
            }
        }
        let boundary = !matches!(net.bc[n as usize], NodeBc::None);
        if q_out > q_in && (boundary || q_in == 0.0) {
            // Blood entering the network here.
            balance.inflow += (q_out - q_in) * c_inlet;
            content += (q_out - q_in) * c_inlet;
            q_in = q_out;
        }
        if q_in <= 0.0 {
            continue;
        }
        let mixed = content / q_in;
        if boundary && q_in > q_out {
            balance.outflow += (q_in - q_out) * mixed;
        }
        for &s in segs {
            let s = s as usize;
            if !flow.perfused[s] {
                continue;
            }
            let q = -into(s, n);
            if q > 0.0 {
                out[s] = segment_pressure(law, q, mixed, walls.of(s), tissue);
            }
        }
    }
    balance
}
