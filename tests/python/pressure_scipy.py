"""Independent assembly of the interstitial pressure problem and a sparse direct solve with SciPy.

Usage: python3 pressure_scipy.py CASE.h5

The case file holds the physical inputs per voxel (conductivity K, wall terms lp_s and drive,
lymphatic drainage LpL SL/V and pressure), the boundary code of each box face (0 fixed pressure,
1 zero flux, 2 host equilibrium), and interstice's assembled matrix (COO triplets), right-hand
side and solution. This script assembles the finite-volume system from the inputs alone, as the
documentation of interstice.process.pressure describes it:

  voxel equation (m^3/s):  sum_faces T (p - p_nb) + (lp_s + D V) p = drive + D V p_L
  interior face:            T = h * 2 K_a K_b / (K_a + K_b)
  fixed face:               T = 2 K h, boundary value the fixed pressure
  host-equilibrium face:    T = K h^2 / (h/2 + lambda), lambda = sqrt(K / a), a = (lp_s + D V) / V,
                            boundary value p_eq = (drive + D V p_L) / (lp_s + D V)
  zero-flux face:           T = 0

then compares matrix and right-hand side with interstice's (relative difference of rounding size),
solves with scipy.sparse.linalg.spsolve and compares the solutions (relative 2-norm difference
under 1e-8, and under the bound cond(A) * (tolerance + eps) that interstice's residual allows).
Exits 1 on the first disagreement.
"""
import sys

import h5py
import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla


def fail(msg):
    print(f"pressure_scipy: {msg}")
    sys.exit(1)


def main():
    f = h5py.File(sys.argv[1], "r")
    nx, ny, nz = (int(v) for v in f["shape"][()])
    h = float(f["h"][0])
    K = f["conductivity"][()]
    lps = f["lp_s"][()]
    drive = f["drive"][()]
    D = f["drainage"][()]
    pL = float(f["lymph_pressure"][0])
    pfix = float(f["fixed_pressure"][0])
    walls = [int(v) for v in f["walls"][()]]
    vol = h ** 3
    N = nx * ny * nz
    idx = lambda i, j, k: i + nx * (j + ny * k)
    c = lps + D * vol
    b0 = drive + D * vol * pL
    b = b0.copy()
    rows, cols, vals = [], [], []
    diag = c.copy()
    dims = (nx, ny, nz)
    for k in range(nz):
        for j in range(ny):
            for i in range(nx):
                v = idx(i, j, k)
                ijk = (i, j, k)
                for axis in range(3):
                    for upper in (False, True):
                        nb = list(ijk)
                        nb[axis] += 1 if upper else -1
                        if 0 <= nb[axis] < dims[axis]:
                            w = idx(*nb)
                            T = h * 2 * K[v] * K[w] / (K[v] + K[w])
                            rows.append(v)
                            cols.append(w)
                            vals.append(-T)
                            diag[v] += T
                        else:
                            code = walls[2 * axis + int(upper)]
                            if code == 0:
                                T, pb = 2 * K[v] * h, pfix
                            elif code == 1:
                                T, pb = 0.0, 0.0
                            else:
                                a = c[v] / vol
                                lam = np.sqrt(K[v] / a)
                                T, pb = K[v] * h * h / (0.5 * h + lam), b0[v] / c[v]
                            diag[v] += T
                            b[v] += T * pb
    A = sp.coo_matrix((vals + list(diag), (rows + list(range(N)), cols + list(range(N)))), shape=(N, N)).tocsr()
    ours = sp.coo_matrix((f["vals"][()], (f["rows"][()].astype(int), f["cols"][()].astype(int))), shape=(N, N)).tocsr()
    dA = abs(A - ours).max() / abs(A).max()
    # Same formulas, a handful of roundings each: entries agree to a few eps.
    if dA > 1e-13:
        fail(f"matrices differ: max relative entry difference {dA:.3e}")
    rhs = f["rhs"][()]
    db = np.max(np.abs(b - rhs)) / np.max(np.abs(b))
    if db > 1e-13:
        fail(f"right-hand sides differ: {db:.3e}")
    x = spla.spsolve(A.tocsc(), b)
    p = f["pressure"][()]
    rel = np.linalg.norm(p - x) / np.linalg.norm(x)
    cond = np.linalg.cond(A.toarray())
    tol = float(f["tolerance"][0])
    bound = cond * (tol + 10 * np.finfo(float).eps)
    if not (rel < 1e-8 and rel <= bound):
        fail(f"solutions differ: relative difference {rel:.3e} (cond {cond:.3e}, bound {bound:.3e})")
    print(f"pressure_scipy: {N} unknowns: matrix {dA:.1e}, rhs {db:.1e}, solution {rel:.2e} "
          f"(cond {cond:.2e}): interstice and SciPy agree")


if __name__ == "__main__":
    main()
