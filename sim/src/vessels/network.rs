//! The vessel network: nodes with boundary conditions, segments with geometry and wall
//! properties, in one contiguous resource for the solvers; segments are also ECS entities.

use bevy_ecs::prelude::*;

/// Type of a vessel: sets its wall defaults and its protein reflection.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[repr(u8)]
pub enum VesselKind {
    /// A normal host capillary.
    Host = 0,
    /// A tumour vessel.
    Tumour = 1,
}

impl VesselKind {
    /// 0 for host, 1 for tumour (the index of the per-type parameter arrays).
    #[inline]
    pub fn index(self) -> usize {
        self as usize
    }
}

/// Blood-flow boundary condition of a node.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum NodeBc {
    /// An interior node: blood is conserved.
    None,
    /// Imposed blood pressure, Pa.
    Pressure(f64),
    /// Imposed blood inflow into the network, m^3/s (negative: outflow).
    Inflow(f64),
}

/// One vessel segment between two nodes, straight between its end points.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Segment {
    /// End nodes; positive flow runs from `a` to `b`.
    pub a: u32,
    pub b: u32,
    /// Lumen radius, m.
    pub radius: f64,
    /// Length along the vessel, m (at least the distance between the end nodes).
    pub length: f64,
    /// Wall (pore) thickness, m.
    pub wall_thickness: f64,
    /// Pore radius, m.
    pub pore_radius: f64,
    /// Fraction of the wall area open as pores.
    pub pore_fraction: f64,
    /// Maturity in [0, 1]: 1 for a normal vessel, lower for a leaky immature one.
    pub maturity: f64,
    pub kind: VesselKind,
}

impl Segment {
    /// Lateral wall area `2 pi r L`, m^2.
    #[inline]
    pub fn wall_area(&self) -> f64 {
        2.0 * std::f64::consts::PI * self.radius * self.length
    }
}

/// The network: positions and boundary conditions of nodes, and segments. Edit it through
/// [`Network::touch`] so the blood-flow solve, the raster and the wall coefficients follow.
#[derive(Resource, Debug, Clone, Default, PartialEq)]
pub struct Network {
    /// Node positions, m.
    pub nodes: Vec<[f64; 3]>,
    /// Boundary condition of each node.
    pub bc: Vec<NodeBc>,
    pub segments: Vec<Segment>,
    /// Segments closed (pruned) by an intervention, by index (empty: none). A closed segment
    /// carries a millionth of its open conductance, counts as unperfused and exchanges nothing.
    pub closed: Vec<bool>,
    /// Changes whenever the network does; solvers compare it with their own.
    pub revision: u64,
}

impl Network {
    /// Whether segment `s` is closed.
    #[inline]
    pub fn is_closed(&self, s: usize) -> bool {
        self.closed.get(s).copied().unwrap_or(false)
    }

    /// Marks the network as changed.
    pub fn touch(&mut self) {
        self.revision += 1;
    }

    /// The segments at each node (compressed rows): those of node `i` are
    /// `list[start[i]..start[i + 1]]`, in segment order (a loop segment appears twice).
    pub fn incidence(&self) -> (Vec<usize>, Vec<u32>) {
        let n = self.nodes.len();
        let mut start = vec![0usize; n + 1];
        for s in &self.segments {
            start[s.a as usize + 1] += 1;
            start[s.b as usize + 1] += 1;
        }
        for i in 0..n {
            start[i + 1] += start[i];
        }
        let mut fill = start.clone();
        let mut list = vec![0u32; 2 * self.segments.len()];
        for (k, s) in self.segments.iter().enumerate() {
            for end in [s.a, s.b] {
                list[fill[end as usize]] = k as u32;
                fill[end as usize] += 1;
            }
        }
        (start, list)
    }

    /// Adds a node, returns its index.
    pub fn add_node(&mut self, x: [f64; 3], bc: NodeBc) -> u32 {
        self.nodes.push(x);
        self.bc.push(bc);
        (self.nodes.len() - 1) as u32
    }

    /// End points of segment `s`, m.
    #[inline]
    pub fn ends(&self, s: usize) -> ([f64; 3], [f64; 3]) {
        let seg = &self.segments[s];
        (self.nodes[seg.a as usize], self.nodes[seg.b as usize])
    }

    /// Straight distance between the end nodes of segment `s`, m.
    pub fn chord(&self, s: usize) -> f64 {
        let (p, q) = self.ends(s);
        dist(p, q)
    }

    /// Midpoint of segment `s`, m.
    pub fn midpoint(&self, s: usize) -> [f64; 3] {
        let (p, q) = self.ends(s);
        [(p[0] + q[0]) / 2.0, (p[1] + q[1]) / 2.0, (p[2] + q[2]) / 2.0]
    }

    /// Connected pieces: the piece of every node, and the number of pieces (nodes without
    /// segments are pieces of their own).
    pub fn pieces(&self) -> (Vec<u32>, usize) {
        let n = self.nodes.len();
        let mut parent: Vec<u32> = (0..n as u32).collect();
        fn find(p: &mut [u32], mut x: u32) -> u32 {
            while p[x as usize] != x {
                p[x as usize] = p[p[x as usize] as usize];
                x = p[x as usize];
            }
            x
        }
        for s in &self.segments {
            let (ra, rb) = (find(&mut parent, s.a), find(&mut parent, s.b));
            if ra != rb {
                let (lo, hi) = if ra < rb { (ra, rb) } else { (rb, ra) };
                parent[hi as usize] = lo;
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

    /// Number of segments at each node.
    pub fn degrees(&self) -> Vec<u32> {
        let mut d = vec![0u32; self.nodes.len()];
        for s in &self.segments {
            d[s.a as usize] += 1;
            d[s.b as usize] += 1;
        }
        d
    }

    /// Removes nodes that no segment uses, keeping the order of the others.
    pub fn drop_unused_nodes(&mut self) {
        let deg = self.degrees();
        let mut map = vec![u32::MAX; self.nodes.len()];
        let mut nodes = Vec::with_capacity(self.nodes.len());
        let mut bc = Vec::with_capacity(self.nodes.len());
        for (i, &d) in deg.iter().enumerate() {
            if d > 0 {
                map[i] = nodes.len() as u32;
                nodes.push(self.nodes[i]);
                bc.push(self.bc[i]);
            }
        }
        for s in &mut self.segments {
            s.a = map[s.a as usize];
            s.b = map[s.b as usize];
        }
        self.nodes = nodes;
        self.bc = bc;
    }

    /// Checks what a solver relies on: indices in range, distinct ends, positive finite sizes.
    /// Returns the first problem as a sentence naming the segment.
    pub fn check(&self) -> Result<(), String> {
        if self.nodes.len() != self.bc.len() {
            return Err("node and boundary-condition lists differ in length".into());
        }
        for (i, s) in self.segments.iter().enumerate() {
            let n = self.nodes.len() as u32;
            if s.a >= n || s.b >= n {
                return Err(format!("segment {i} refers to node {} of {n}", s.a.max(s.b)));
            }
            if s.a == s.b {
                return Err(format!("segment {i} starts and ends at node {}", s.a));
            }
            let finite_pos = [s.radius, s.length, s.wall_thickness, s.pore_radius];
            if finite_pos.iter().any(|v| !(v.is_finite() && *v > 0.0)) {
                return Err(format!("segment {i} has a size that is not a positive number: {s:?}"));
            }
            if !(0.0..=1.0).contains(&s.pore_fraction) || !(0.0..=1.0).contains(&s.maturity) {
                return Err(format!("segment {i} has a pore fraction or maturity outside [0, 1]"));
            }
        }
        Ok(())
    }
}

/// Euclidean distance, m.
#[inline]
pub fn dist(p: [f64; 3], q: [f64; 3]) -> f64 {
    ((p[0] - q[0]).powi(2) + (p[1] - q[1]).powi(2) + (p[2] - q[2]).powi(2)).sqrt()
}

/// A vessel segment entity: its index in [`Network::segments`] and its type.
#[derive(Component, Debug, Clone, Copy, PartialEq, Eq)]
pub struct VesselSegment {
    pub index: u32,
    pub kind: VesselKind,
}

/// Geometry of a segment entity (a copy of the network's, refreshed after each change).
#[derive(Component, Debug, Clone, Copy, PartialEq)]
pub struct SegmentGeometry {
    pub a: [f64; 3],
    pub b: [f64; 3],
    pub radius: f64,
    pub length: f64,
    pub wall_thickness: f64,
}

/// Wall pores of a segment entity.
#[derive(Component, Debug, Clone, Copy, PartialEq)]
pub struct SegmentPores {
    pub pore_radius: f64,
    pub pore_fraction: f64,
    pub maturity: f64,
    /// Hydraulic conductivity of the wall in use, m/(Pa s).
    pub lp: f64,
}

/// Blood flow in a segment entity.
#[derive(Component, Debug, Clone, Copy, PartialEq)]
pub struct SegmentFlow {
    /// Volume flow from end `a` to end `b`, m^3/s.
    pub flow: f64,
    /// Mean velocity, m/s.
    pub velocity: f64,
    /// Wall shear stress, Pa.
    pub wall_shear: f64,
    /// Blood pressure at the middle of the segment, Pa.
    pub mid_pressure: f64,
    pub perfused: bool,
}
