//! The 7-point operator `A u = -div(T grad u) + c u` on a Cartesian cell lattice.
//!
//! Cell-centred finite volumes (for example Patankar 1980, Numerical Heat Transfer and Fluid Flow,
//! ch. 4): the equation of cell `P` is
//!
//! `sum_f T_f (u_P - u_f) + c_P u_P = f_P`
//!
//! over its six faces, where `u_f` is the neighbour across an interior face and the boundary value
//! across a boundary face. A face transmissibility `T` (coefficient times face area over the
//! distance between the two centres) is the conductance of the face: the flux through it is
//! `T (u_P - u_f)`. Built from a cell coefficient `k` on cubic cells of edge `h`, an interior face
//! gets `T = h * 2 k_P k_N / (k_P + k_N)` (the harmonic mean: the two half-cells act as
//! resistances in series, Patankar 1980 sec. 4.2-3), and a boundary face `T = k_P h^2 / (h/2 + s)`
//! for a boundary value held a distance `s` beyond the face (`s = 0`: a fixed value; no face
//! conductance: zero flux).
//!
//! Boundary values enter the right-hand side as `T_b u_b` ([`Stencil7::add_boundary_source`]); the
//! operator itself is linear and, with `c >= 0`, symmetric positive semi-definite (definite as soon
//! as one `c > 0` or one boundary face conducts).

use crate::lattice::Face;

use super::grid::Grid;

/// How the lattice box meets the outside along one boundary face.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Wall {
    /// No flux through the face.
    ZeroFlux,
    /// The value is fixed on the face itself.
    Fixed(f64),
    /// The value `value` is held a distance `distance` (m) beyond the face, through material of the
    /// boundary cell's coefficient: a Robin condition.
    Exterior { value: f64, distance: f64 },
}

/// The boundary values beyond each boundary face (zero where a face does not conduct).
#[derive(Debug, Clone, PartialEq)]
pub struct Boundary {
    /// `values[face.index()]`, indexed by the two other coordinates, the lower axis fastest.
    values: [Vec<f64>; 6],
    n: [usize; 3],
}

impl Boundary {
    /// All boundary values zero.
    pub fn zeros(n: [usize; 3]) -> Self {
        let values = Face::ALL.map(|f| vec![0.0; face_cells(n, f.axis)]);
        Boundary { values, n }
    }

    /// Value beyond boundary face `face` of cell `ijk`.
    #[inline]
    pub fn value(&self, face: Face, ijk: [usize; 3]) -> f64 {
        self.values[face.index()][face_slot(self.n, face.axis, ijk)]
    }

    /// Sets the value beyond boundary face `face` of cell `ijk`.
    pub fn set(&mut self, face: Face, ijk: [usize; 3], value: f64) {
        let s = face_slot(self.n, face.axis, ijk);
        self.values[face.index()][s] = value;
    }
}

fn face_cells(n: [usize; 3], axis: usize) -> usize {
    match axis {
        0 => n[1] * n[2],
        1 => n[0] * n[2],
        _ => n[0] * n[1],
    }
}

fn face_slot(n: [usize; 3], axis: usize, ijk: [usize; 3]) -> usize {
    match axis {
        0 => ijk[1] + n[1] * ijk[2],
        1 => ijk[0] + n[0] * ijk[2],
        _ => ijk[0] + n[0] * ijk[1],
    }
}

/// A 7-point variable-coefficient operator: face transmissibilities per axis (boundary faces
/// included) and a non-negative diagonal term per cell. Cells are numbered x fastest, like
/// [`crate::lattice::Lattice::idx`].
#[derive(Debug, Clone, PartialEq)]
pub struct Stencil7 {
    pub(crate) g: Grid,
    /// `t[axis][p]`: the face on the lower side of padded cell `p` along `axis`.
    pub(crate) t: [Vec<f64>; 3],
    /// The diagonal term `c` per padded cell.
    pub(crate) c: Vec<f64>,
}

impl Stencil7 {
    /// The operator of `n` cells with every coefficient zero.
    pub fn zeros(n: [usize; 3]) -> Self {
        assert!(n.iter().all(|&v| v > 0), "a stencil needs at least one cell along each axis");
        let g = Grid::new(n);
        Stencil7 { g, t: [vec![0.0; g.len], vec![0.0; g.len], vec![0.0; g.len]], c: vec![0.0; g.len] }
    }

    /// Cells along x, y, z.
    pub fn dims(&self) -> [usize; 3] {
        self.g.n
    }

    /// Number of cells (unknowns).
    pub fn len(&self) -> usize {
        self.g.cells()
    }

    /// Whether the operator has no cell (never true).
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Transmissibility of the face on the lower side of cell `ijk` along `axis`;
    /// `ijk[axis] == n[axis]` names the upper boundary face of the last cell.
    #[inline]
    pub fn face(&self, axis: usize, ijk: [usize; 3]) -> f64 {
        self.t[axis][self.g.pad(ijk[0], ijk[1], ijk[2])]
    }

    /// Sets a face transmissibility (see [`Stencil7::face`] for the numbering); must be `>= 0`.
    #[inline]
    pub fn set_face(&mut self, axis: usize, ijk: [usize; 3], t: f64) {
        debug_assert!(t >= 0.0);
        let p = self.g.pad(ijk[0], ijk[1], ijk[2]);
        self.t[axis][p] = t;
    }

    /// Transmissibility of a boundary face of cell `ijk`.
    pub fn boundary_face(&self, face: Face, ijk: [usize; 3]) -> f64 {
        let mut f = ijk;
        if face.upper {
            f[face.axis] += 1;
        }
        self.face(face.axis, f)
    }

    /// Sets the transmissibility of a boundary face of cell `ijk`.
    pub fn set_boundary_face(&mut self, face: Face, ijk: [usize; 3], t: f64) {
        let mut f = ijk;
        if face.upper {
            f[face.axis] += 1;
        }
        self.set_face(face.axis, f, t);
    }

    /// The diagonal term of cell `ijk`.
    #[inline]
    pub fn diagonal(&self, ijk: [usize; 3]) -> f64 {
        self.c[self.g.pad(ijk[0], ijk[1], ijk[2])]
    }

    /// Sets the diagonal term of cell `ijk`; must be `>= 0`.
    #[inline]
    pub fn set_diagonal(&mut self, ijk: [usize; 3], c: f64) {
        debug_assert!(c >= 0.0);
        let p = self.g.pad(ijk[0], ijk[1], ijk[2]);
        self.c[p] = c;
    }

    /// Sets the diagonal term of every cell from a plain cell vector.
    pub fn set_diagonals(&mut self, c: &[f64]) {
        assert_eq!(c.len(), self.len());
        super::grid::scatter(&self.g, c, &mut self.c);
    }

    /// `-div(k grad u) + c u` on cubic cells of edge `h` (m) from a cell coefficient `k`
    /// (harmonic mean on interior faces) and diagonal `c`; each boundary face of the box gets its
    /// [`Wall`] from `wall(face, cell)`. Returns the operator and the boundary values.
    pub fn from_conductivity(
        n: [usize; 3],
        h: f64,
        k: &[f64],
        c: &[f64],
        wall: impl Fn(Face, [usize; 3]) -> Wall,
    ) -> (Self, Boundary) {
        let mut s = Stencil7::zeros(n);
        let len = s.len();
        assert_eq!(k.len(), len, "one coefficient per cell");
        s.set_diagonals(c);
        let idx = |i: usize, j: usize, kk: usize| i + n[0] * (j + n[1] * kk);
        for axis in 0..3 {
            for kk in 0..n[2] {
                for j in 0..n[1] {
                    for i in 0..n[0] {
                        let ijk = [i, j, kk];
                        if ijk[axis] == 0 {
                            continue;
                        }
                        let mut lo = ijk;
                        lo[axis] -= 1;
                        let a = k[idx(lo[0], lo[1], lo[2])];
                        let b = k[idx(i, j, kk)];
                        s.set_face(axis, ijk, h * harmonic_mean(a, b));
                    }
                }
            }
        }
        let mut bnd = Boundary::zeros(n);
        for face in Face::ALL {
            let (ua, ub) = match face.axis {
                0 => (1, 2),
                1 => (0, 2),
                _ => (0, 1),
            };
            for b in 0..n[ub] {
                for a in 0..n[ua] {
                    let mut ijk = [0; 3];
                    ijk[ua] = a;
                    ijk[ub] = b;
                    ijk[face.axis] = if face.upper { n[face.axis] - 1 } else { 0 };
                    let kc = k[idx(ijk[0], ijk[1], ijk[2])];
                    let (t, v) = match wall(face, ijk) {
                        Wall::ZeroFlux => (0.0, 0.0),
                        Wall::Fixed(v) => (2.0 * kc * h, v),
                        Wall::Exterior { value, distance } => {
                            if distance.is_finite() {
                                (kc * h * h / (0.5 * h + distance), value)
                            } else {
                                (0.0, 0.0)
                            }
                        }
                    };
                    s.set_boundary_face(face, ijk, t);
                    bnd.set(face, ijk, v);
                }
            }
        }
        (s, bnd)
    }

    /// Adds the boundary sources `T_b u_b` to a right-hand side (plain cell vector).
    pub fn add_boundary_source(&self, bnd: &Boundary, f: &mut [f64]) {
        let n = self.g.n;
        self.each_boundary_face(|face, ijk, t| {
            f[ijk[0] + n[0] * (ijk[1] + n[1] * ijk[2])] += t * bnd.value(face, ijk);
        });
    }

    /// Net flux out through the boundary faces, `sum T_b (u - u_b)`, for a plain cell vector `u`;
    /// added in a fixed order.
    pub fn boundary_outflow(&self, bnd: &Boundary, u: &[f64]) -> f64 {
        let n = self.g.n;
        let mut total = 0.0;
        self.each_boundary_face(|face, ijk, t| {
            total += t * (u[ijk[0] + n[0] * (ijk[1] + n[1] * ijk[2])] - bnd.value(face, ijk));
        });
        total
    }

    /// Calls `f(face, cell, T_b)` for every boundary face, faces in [`Face::ALL`] order.
    pub fn each_boundary_face(&self, mut f: impl FnMut(Face, [usize; 3], f64)) {
        let n = self.g.n;
        for face in Face::ALL {
            let (ua, ub) = match face.axis {
                0 => (1, 2),
                1 => (0, 2),
                _ => (0, 1),
            };
            for b in 0..n[ub] {
                for a in 0..n[ua] {
                    let mut ijk = [0; 3];
                    ijk[ua] = a;
                    ijk[ub] = b;
                    ijk[face.axis] = if face.upper { n[face.axis] - 1 } else { 0 };
                    f(face, ijk, self.boundary_face(face, ijk));
                }
            }
        }
    }

    /// The flux `T (u_lo - u_hi)` through every face normal to `axis`, positive along `+axis`,
    /// into `out` of `(n[axis] + 1)` faces along the axis (x fastest); boundary faces use the
    /// boundary values.
    pub fn face_flux(&self, bnd: &Boundary, u: &[f64], axis: usize, out: &mut [f64]) {
        let n = self.g.n;
        let mut m = n;
        m[axis] += 1;
        assert_eq!(out.len(), m[0] * m[1] * m[2]);
        let cell = |ijk: [usize; 3]| u[ijk[0] + n[0] * (ijk[1] + n[1] * ijk[2])];
        for k in 0..m[2] {
            for j in 0..m[1] {
                for i in 0..m[0] {
                    let f = [i, j, k];
                    let t = self.face(axis, f);
                    let c = f[axis];
                    let q = if c == 0 {
                        let face = Face { axis, upper: false };
                        t * (bnd.value(face, f) - cell(f))
                    } else if c == n[axis] {
                        let mut lo = f;
                        lo[axis] -= 1;
                        let face = Face { axis, upper: true };
                        t * (cell(lo) - bnd.value(face, lo))
                    } else {
                        let mut lo = f;
                        lo[axis] -= 1;
                        t * (cell(lo) - cell(f))
                    };
                    out[i + m[0] * (j + m[1] * k)] = q;
                }
            }
        }
    }

    /// `out = A u` for plain cell vectors (boundary values zero).
    pub fn apply(&self, u: &[f64], out: &mut [f64]) {
        let g = &self.g;
        let mut up = super::grid::zeros(g);
        let mut op = super::grid::zeros(g);
        super::grid::scatter(g, u, &mut up);
        super::kernels::apply(&self.view(), &up, &mut op);
        super::grid::gather(g, &op, out);
    }

    /// The matrix as (row, column, value) triplets, rows in cell order, the diagonal first in
    /// each row, then the neighbours x-, x+, y-, y+, z-, z+ that exist.
    pub fn triplets(&self) -> Vec<(usize, usize, f64)> {
        let n = self.g.n;
        let d = self.matrix_diagonal();
        let mut out = Vec::with_capacity(7 * self.len());
        for k in 0..n[2] {
            for j in 0..n[1] {
                for i in 0..n[0] {
                    let row = i + n[0] * (j + n[1] * k);
                    let ijk = [i, j, k];
                    out.push((row, row, d[row]));
                    for axis in 0..3 {
                        let stride = [1, n[0], n[0] * n[1]][axis];
                        if ijk[axis] > 0 {
                            out.push((row, row - stride, -self.face(axis, ijk)));
                        }
                        if ijk[axis] + 1 < n[axis] {
                            let mut hi = ijk;
                            hi[axis] += 1;
                            out.push((row, row + stride, -self.face(axis, hi)));
                        }
                    }
                }
            }
        }
        out
    }

    /// The diagonal of the matrix, `c + sum of the six face transmissibilities`, per cell.
    pub fn matrix_diagonal(&self) -> Vec<f64> {
        let g = self.g;
        let [tx, ty, tz] = &self.t;
        let mut out = Vec::with_capacity(self.len());
        for k in 1..=g.n[2] {
            for j in 1..=g.n[1] {
                for i in 1..=g.n[0] {
                    let p = g.sz * k + g.sy * j + i;
                    out.push(self.c[p] + tx[p] + tx[p + 1] + ty[p] + ty[p + g.sy] + tz[p] + tz[p + g.sz]);
                }
            }
        }
        out
    }

    /// A borrowed view for the kernels.
    pub(crate) fn view(&self) -> super::kernels::OpView<'_> {
        super::kernels::OpView { g: self.g, tx: &self.t[0], ty: &self.t[1], tz: &self.t[2], c: &self.c }
    }
}

/// `2 a b / (a + b)`, zero when either is zero.
#[inline]
pub fn harmonic_mean(a: f64, b: f64) -> f64 {
    if a <= 0.0 || b <= 0.0 { 0.0 } else { 2.0 * a * b / (a + b) }
}
