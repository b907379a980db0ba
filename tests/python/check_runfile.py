"""Independent read-back of an interstice run file with h5py (and its XDMF sidecar with meshio).

Usage: python3 check_runfile.py RUN.h5 [--min-snapshots N]

Checks, without using any interstice code:
  - the root, lattice and provenance records are present;
  - every finished snapshot is marked complete, its fields have shape [nz, ny, nx] and every
    dataset has a `units` attribute;
  - the region field matches the tumour geometry recomputed here from the stored scenario, and
    the matrix fields hold the host and tumour values of that scenario;
  - the time series agrees with the snapshot times;
  - the XDMF sidecar, read by meshio, points at datasets that exist and equal the HDF5 data.
Exits 1 with a message on the first disagreement.
"""
import sys
import tomllib
from pathlib import Path

import h5py
import numpy as np


def fail(msg):
    print(f"check_runfile: {msg}")
    sys.exit(1)


def main():
    path = Path(sys.argv[1])
    min_snaps = 1
    if "--min-snapshots" in sys.argv:
        min_snaps = int(sys.argv[sys.argv.index("--min-snapshots") + 1])
    f = h5py.File(path, "r")
    if f.attrs["format"] != "interstice-run":
        fail("format attribute")
    finished = int(f.attrs["finished_snapshots"])
    if finished < min_snaps:
        fail(f"only {finished} finished snapshots")
    lat = f["lattice"]
    nx, ny, nz = (int(v) for v in lat.attrs["shape_xyz"])
    h = float(lat.attrs["voxel_size"])
    origin = np.asarray(lat.attrs["origin"], dtype=float)
    prov = f["provenance"]
    for key in ["version", "git_commit", "threads", "seed", "wall_time_s"]:
        if key not in prov.attrs:
            fail(f"provenance lacks {key}")
    def text(v):
        return v.decode() if isinstance(v, bytes) else str(v)

    if text(f.attrs["status"]) == "finished":
        # Seconds per process set: the eight sets of a step, none negative, together at most the
        # run's wall time (the rest is set-up and output outside the steps).
        parts = dict(p.split("=") for p in text(prov.attrs["process_wall_s"]).split())
        sets = ["blood", "pressure", "exchange", "transport", "binding", "interventions", "advance", "output"]
        if list(parts) != sets:
            fail(f"process_wall_s names {list(parts)}")
        secs = [float(v) for v in parts.values()]
        if min(secs) < 0 or sum(secs) > float(text(prov.attrs["wall_time_s"])) + 0.01:
            fail(f"process_wall_s {secs} against wall_time_s {text(prov.attrs['wall_time_s'])}")
    scen = tomllib.loads(prov["resolved_toml"][()].decode())
    # Tumour geometry recomputed from the stored scenario.
    t = scen["tumour"]
    um = 1e-6
    ext = np.array([nx, ny, nz]) * h
    centre = np.array(t["centre_um"]) * um if "centre_um" in t else origin + ext / 2
    semi = np.array([t["radius_um"]] * 3) * um if t["shape"] == "sphere" else np.array(t["semi_axes_um"]) * um
    zc, yc, xc = np.meshgrid(*(origin[a] + (np.arange(n) + 0.5) * h for a, n in [(2, nz), (1, ny), (0, nx)]), indexing="ij")
    inside = ((xc - centre[0]) / semi[0]) ** 2 + ((yc - centre[1]) / semi[1]) ** 2 + ((zc - centre[2]) / semi[2]) ** 2 <= 1.0
    m = scen["matrix"]
    snaps = f["snapshots"]
    names = sorted(snaps)
    times = []
    for name in names[:finished]:
        g = snaps[name]
        if int(g.attrs["complete"]) != 1:
            fail(f"snapshot {name} not complete")
        times.append(float(g.attrs["time_s"]))
        fields = g["fields"]
        for fname, ds in fields.items():
            if ds.shape != (nz, ny, nx):
                fail(f"{name}/{fname} has shape {ds.shape}")
            if "units" not in ds.attrs:
                fail(f"{name}/{fname} has no units")
            if not np.all(np.isfinite(ds[()])):
                fail(f"{name}/{fname} has non-finite values")
        region = fields["region"][()]
        if not np.array_equal(region == 1, inside):
            fail(f"{name}: region field disagrees with the tumour geometry ({np.sum((region == 1) != inside)} voxels)")
        for key, fname in [("porosity", "porosity"), ("collagen_fraction", "collagen_fraction"), ("gag_fraction", "gag_fraction")]:
            data = fields[fname][()]
            if "porosity" in key:
                host, tum = m["host_porosity"], m["tumour_porosity"]
            else:
                host, tum = m[f"host_{key}"], m[f"tumour_{key}"]
            if name == names[0] and not (np.allclose(data[inside], tum, rtol=0, atol=0) and np.allclose(data[~inside], host, rtol=0, atol=0)):
                fail(f"{name}/{fname} does not hold the scenario's host and tumour values")
        for table in ["cells", "vessels", "packets"]:
            if table in g:
                for cname, ds in g[table].items():
                    if "units" not in ds.attrs:
                        fail(f"{name}/{table}/{cname} has no units")
                    if ds.shape != (int(g[table].attrs["rows"]),):
                        fail(f"{name}/{table}/{cname} has shape {ds.shape}")
        if "cells" in g:
            vox = g["cells/voxel"][()]
            if len(np.unique(vox)) != len(vox):
                fail("two cells share a voxel")
            kinds = g["cells/kind"][()]
            reg_flat = region.reshape(-1)
            # Cancer cells (1) and tumour phagocytes (3) sit in tumour voxels, host cells (0) outside.
            if not np.all(np.isin(kinds, [1, 3]) == (reg_flat[vox] == 1)):
                fail("tumour cells do not coincide with tumour voxels")
    series = f["series"]
    for sname, ds in series.items():
        if "units" not in ds.attrs:
            fail(f"series {sname} has no units")
        if ds.shape[0] < finished:
            fail(f"series {sname} has {ds.shape[0]} values for {finished} snapshots")
    if not np.allclose(series["time_s"][:finished], times, rtol=0, atol=0):
        fail("series time_s disagrees with the snapshot times")
    # Particle accounting (exact integers in float64 series): every injected particle is somewhere.
    places = ["plasma", "peripheral", "cleared", "free", "bound_cells", "bound_matrix", "internalised", "drained", "left"]
    for sname in [k[len("injected_"):] for k in series if k.startswith("injected_")]:
        inj = series[f"injected_{sname}"][:finished]
        total = sum(series[f"{p}_{sname}"][:finished] for p in places)
        if not np.array_equal(inj, total):
            fail(f"accounting of {sname} does not close: {inj} vs {total}")
        # The per-voxel fields hold the same tissue amounts (fields are per m^3 of tissue).
        vol = h ** 3
        for k, name in enumerate(names[:finished]):
            f_ = snaps[name]["fields"]
            tissue = sum(float(np.sum(f_[f"{c}_{sname}"][()])) * vol for c in ["free", "bound", "internalised", "matrix_bound"])
            expect = sum(float(series[f"{p}_{sname}"][k]) for p in ["free", "bound_cells", "internalised", "bound_matrix"])
            if abs(tissue - expect) > 1e-9 * max(expect, 1.0):
                fail(f"{name}: fields of {sname} hold {tissue} particles, the series {expect}")
    xmf = path.with_suffix(".xmf")
    if xmf.exists():
        import meshio

        with meshio.xdmf.TimeSeriesReader(str(xmf)) as r:
            pts, cells = r.read_points_cells()
            if r.num_steps != finished:
                fail(f"XDMF lists {r.num_steps} snapshots, the file {finished}")
            if pts.shape != ((nx + 1) * (ny + 1) * (nz + 1), 3) or cells[0].data.shape != (nx * ny * nz, 8):
                fail("XDMF mesh has the wrong size")
            for k in range(r.num_steps):
                tk, _, cd = r.read_data(k)
                if tk != times[k]:
                    fail(f"XDMF time {tk} != {times[k]}")
                for fname, blocks in cd.items():
                    ref = snaps[names[k]]["fields"][fname][()]
                    if not np.array_equal(np.asarray(blocks[0]), ref):
                        fail(f"XDMF {fname} at step {k} differs from the HDF5 dataset")
    print(f"check_runfile: {path.name}: {finished} snapshots, {len(names)} groups, all checks passed")


if __name__ == "__main__":
    main()
