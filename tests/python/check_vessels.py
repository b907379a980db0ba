"""Independent read-back of the vessel table and vessel surface of a run file with h5py.

Usage: python3 check_vessels.py RUN.h5

Checks, without using any interstice code, in the last snapshot:
  - every column of the `vessels` table has one value per segment, end points lie in the lattice;
  - Poiseuille: flow = pi r^4 (p_a - p_b) / (8 mu L) and mid_pressure = (p_a + p_b) / 2;
  - blood is conserved at every node not on the inlet or outlet face (nodes found by their
    coordinates), to 1e-9 of the total inflow;
  - the `vessel_surface` field (1/m) integrates to the wall area 2 pi r L of all segments;
  - the plasma series never increase (no dosing after t = 0 and no exchange yet).
"""
import sys
from collections import defaultdict

import h5py
import numpy as np


def fail(msg):
    print(f"check_vessels: {msg}")
    sys.exit(1)


def main():
    f = h5py.File(sys.argv[1], "r")
    lat = f["lattice"]
    nx, ny, nz = (int(v) for v in lat.attrs["shape_xyz"])
    h = float(lat.attrs["voxel_size"])
    origin = np.asarray(lat.attrs["origin"], dtype=float)
    ext = np.array([nx, ny, nz]) * h
    snap = f["snapshots"][sorted(f["snapshots"])[-1]]
    v = snap["vessels"]
    rows = int(v.attrs["rows"])
    cols = {k: v[k][()] for k in v}
    if any(len(c) != rows for c in cols.values()):
        fail("columns of different lengths")
    p0 = np.stack([cols["x0"], cols["y0"], cols["z0"]], axis=1)
    p1 = np.stack([cols["x1"], cols["y1"], cols["z1"]], axis=1)
    tol = 1e-12
    for p in (p0, p1):
        if np.any(p < origin - tol) or np.any(p > origin + ext + tol):
            fail("an end point lies outside the lattice")
    r, L, mu = cols["radius"], cols["length"], cols["viscosity"]
    pa, pb, q = cols["pressure_a"], cols["pressure_b"], cols["flow"]
    ok = np.isfinite(pa) & np.isfinite(pb)
    want = np.pi * r**4 * (pa - pb) / (8 * mu * L)
    if np.max(np.abs(q[ok] - want[ok])) > 1e-9 * np.max(np.abs(q)):
        fail("flows do not follow Poiseuille's law")
    if np.max(np.abs(cols["mid_pressure"][ok] - 0.5 * (pa + pb)[ok])) > 1e-9 * np.max(pa[ok]):
        fail("mid-segment pressures are not the mean of the end pressures")
    net = defaultdict(float)
    key = lambda x: tuple(np.round(x / 1e-9).astype(np.int64))  # nodes to the nanometre
    for i in range(rows):
        net[key(p0[i])] += q[i]
        net[key(p1[i])] -= q[i]
    inflow = f["series/vessels_total_inflow"][-1]
    worst = 0.0
    for k, x in net.items():
        xcoord = k[0] * 1e-9
        if abs(xcoord - origin[0]) < 1e-7 or abs(xcoord - origin[0] - ext[0]) < 1e-7:
            continue  # inlet and outlet faces carry imposed pressures
        worst = max(worst, abs(x))
    if worst > 1e-9 * abs(inflow):
        fail(f"blood is not conserved at a node: {worst} of {inflow}")
    surf = snap["fields/vessel_surface"][()]
    area = np.sum(2 * np.pi * r * L)
    if abs(surf.sum() * h**3 - area) > 1e-9 * area:
        fail(f"vessel_surface integrates to {surf.sum() * h**3}, the walls have {area}")
    for name, ds in f["series"].items():
        if name.startswith("plasma_") and np.any(np.diff(ds[()]) > 0):
            fail(f"{name} increases")
    print(f"{rows} segments, inflow {inflow:.3e} m3/s: vessel checks passed")


if __name__ == "__main__":
    main()
