"""Independent recomputation of the delivery metrics of an interstice run file with h5py, NumPy
and SciPy, compared with the tables `interstice metrics` wrote.

Usage: python3 check_metrics.py RUN.h5 TABLES_DIR [--threshold N] [--density G_PER_ML] [--svg DIR]

Uses no interstice code. From the file alone it recomputes, per species and finished snapshot:
tumour and host amounts per compartment, %ID and %ID/g, the tumour-to-host ratio; distances to
the nearest perfused vessel wall by brute force over every segment (clamped projection onto each
centre line) and depths below the tumour surface with SciPy's cKDTree over tumour/host face
centres; the binned profiles, amount-weighted mean distances, d50, d90 and perivascular indices;
coverage at every threshold of coverage.csv; the coefficient of variation and the Gini
coefficient (double-sum definition) across cancer cells; AUC (trapezoid), peak and time to peak;
the particle balance from the series. Every value must agree with the tables to rounding.
With --svg, every .svg file in DIR must parse as XML with a width and a height.
Exits 1 with the first disagreements.
"""
import csv
import math
import sys
import tomllib
import xml.etree.ElementTree as ET
from pathlib import Path

import h5py
import numpy as np
from scipy.spatial import cKDTree

REL = 1e-9
failures = []
checked = 0


def check(what, got, want, atol=0.0):
    global checked
    checked += 1
    if want is None or (isinstance(want, float) and not math.isfinite(want)):
        if got is not None and math.isfinite(got):
            failures.append(f"{what}: table has {got}, expected no value")
        return
    if got is None:
        failures.append(f"{what}: missing from the tables (expected {want})")
        return
    tol = REL * max(abs(want), abs(got)) + atol + 1e-300
    if abs(got - want) > tol:
        failures.append(f"{what}: table {got!r}, recomputed {want!r}")


def arg(name, default):
    return sys.argv[sys.argv.index(name) + 1] if name in sys.argv else default


def read_csv(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def val(s):
    return None if s == "NA" else float(s)


def main():
    run_path, tables = Path(sys.argv[1]), Path(sys.argv[2])
    threshold = float(arg("--threshold", "1000"))
    density_g_per_m3 = float(arg("--density", "1")) * 1e6
    f = h5py.File(run_path, "r")
    assert f.attrs["format"] == "interstice-run"
    finished = int(f.attrs["finished_snapshots"])
    lat = f["lattice"]
    nx, ny, nz = (int(v) for v in lat.attrs["shape_xyz"])
    h = float(lat.attrs["voxel_size"])
    origin = np.asarray(lat.attrs["origin"], dtype=float)
    vol = h ** 3
    snaps = []
    for i in range(min(finished, len(f["snapshots"]))):
        name = f"{i:06d}"
        if name not in f["snapshots"] or int(f["snapshots"][name].attrs["complete"]) != 1:
            break
        snaps.append(f["snapshots"][name])
    scen = tomllib.loads(f["provenance/resolved_toml"][()].decode())
    run_name = scen["run"]["name"]
    series = {k: np.asarray(f["series"][k][: len(snaps)], dtype=float) for k in f.get("series", {})}
    species = [p["name"] for p in scen.get("particle", [])]
    toml_dose = {p["name"]: p.get("dose_particles") for p in scen.get("particle", [])}

    # Voxel centres, flattened x fastest (the datasets are [z][y][x]).
    k, j, i = np.meshgrid(np.arange(nz), np.arange(ny), np.arange(nx), indexing="ij")
    centres = np.stack([origin[0] + (i.ravel() + 0.5) * h, origin[1] + (j.ravel() + 0.5) * h, origin[2] + (k.ravel() + 0.5) * h], axis=1)

    metrics = {}
    for r in read_csv(tables / "metrics.csv"):
        assert r["run"] == run_name
        metrics[(r["species"], None if r["time_s"] == "NA" else float(r["time_s"]), r["quantity"])] = val(r["value"])
    summary = {(r["species"], r["quantity"]): val(r["value"]) for r in read_csv(tables / "summary.csv")}
    profiles = {}
    for r in read_csv(tables / "profiles.csv"):
        profiles[(r["species"], float(r["time_s"]), r["reference"], float(r["bin_lo_m"]), r["quantity"])] = val(r["value"])
    coverage = {}
    for r in read_csv(tables / "coverage.csv"):
        coverage.setdefault((r["species"], float(r["time_s"])), []).append((float(r["threshold_particles"]), val(r["value"])))

    def m(s, t, q):
        return metrics.get((s, t, q))

    dose = {}
    for s in species:
        inj = series.get(f"injected_{s}")
        last = inj[np.isfinite(inj)][-1] if inj is not None and np.isfinite(inj).any() else None
        dose[s] = last if last is not None and last > 0 else toml_dose.get(s)
        check(f"{s} dose", summary.get((s, "dose_injected")), dose[s])

    pct_per_g = {s: [] for s in species}
    pct = {s: [] for s in species}
    amounts = {s: [] for s in species}
    times = []
    for si, g in enumerate(snaps):
        t = float(g.attrs["time_s"])
        times.append(t)
        fields = g["fields"]
        region = fields["region"][()].ravel().astype(float)
        tumour, host = region == 1, region == 0
        vt, vh = tumour.sum() * vol, host.sum() * vol
        check(f"tumour volume at {t}", m("", t, "tumour_volume"), vt)
        cells = g["cells"] if "cells" in g else None

        # Distances to perfused vessel walls, brute force over segments.
        vdist = None
        if "vessels" in g:
            v = g["vessels"]
            a = np.stack([v["x0"][()], v["y0"][()], v["z0"][()]], axis=1)
            b = np.stack([v["x1"][()], v["y1"][()], v["z1"][()]], axis=1)
            rad = v["radius"][()] if "radius" in v else np.zeros(len(a))
            perf = v["perfused"][()] != 0 if "perfused" in v else np.ones(len(a), bool)
            best = np.full(len(centres), np.inf)
            for s_a, s_b, s_r in zip(a[perf], b[perf], rad[perf]):
                ab = s_b - s_a
                l2 = ab @ ab
                tt = np.clip(((centres - s_a) @ ab) / l2, 0, 1) if l2 > 0 else np.zeros(len(centres))
                d = np.linalg.norm(centres - (s_a + tt[:, None] * ab), axis=1) - s_r
                best = np.minimum(best, d)
            if perf.any():
                vdist = np.maximum(best, 0.0)
        # Depth below the tumour surface: nearest tumour/host face centre (SciPy k-d tree).
        grid = tumour.reshape(nz, ny, nx)
        faces = []
        for axis, step in [(2, np.array([0.5 * h, 0, 0])), (1, np.array([0, 0.5 * h, 0])), (0, np.array([0, 0, 0.5 * h]))]:
            lo = [slice(None)] * 3
            hi = [slice(None)] * 3
            lo[axis] = slice(0, -1)
            hi[axis] = slice(1, None)
            diff = grid[tuple(lo)] != grid[tuple(hi)]
            kk, jj, ii = np.nonzero(diff)
            c = np.stack([origin[0] + (ii + 0.5) * h, origin[1] + (jj + 0.5) * h, origin[2] + (kk + 0.5) * h], axis=1)
            faces.append(c + step)
        faces = np.concatenate(faces)
        depth = cKDTree(faces).query(centres)[0] if len(faces) else None

        for s in species:
            def comp(field, col):
                if field in fields:
                    return fields[field][()].ravel().astype(float)
                if col and cells is not None and col in cells:
                    out = np.zeros(len(region))
                    np.add.at(out, cells["voxel"][()].astype(int), cells[col][()].astype(float) / vol)
                    return out
                return None

            comps = {
                "free": comp(f"free_{s}", None),
                "bound_cells": comp(f"bound_{s}", f"bound_{s}"),
                "internalised": comp(f"internalised_{s}", f"internalised_{s}"),
                "bound_matrix": comp(f"matrix_bound_{s}", None),
            }
            present = {k: c for k, c in comps.items() if c is not None}
            if not present:
                continue
            total = sum(present.values())
            tt, ht = total[tumour].sum() * vol, total[host].sum() * vol
            check(f"{s} tumour_total at {t}", m(s, t, "tumour_total"), tt)
            check(f"{s} host_total at {t}", m(s, t, "host_total"), ht)
            for k, c in present.items():
                check(f"{s} tumour_{k} at {t}", m(s, t, f"tumour_{k}"), c[tumour].sum() * vol)
            p = 100 * tt / dose[s]
            check(f"{s} %ID at {t}", m(s, t, "tumour_percent_id"), p)
            check(f"{s} %ID/g at {t}", m(s, t, "tumour_percent_id_per_g"), p / (vt * density_g_per_m3))
            check(f"{s} host %ID/g at {t}", m(s, t, "host_percent_id_per_g"), 100 * ht / dose[s] / (vh * density_g_per_m3))
            ratio = (tt / vt) / (ht / vh) if ht > 0 else None
            check(f"{s} tumour/host at {t}", m(s, t, "tumour_to_host_ratio"), ratio)
            pct[s].append(p)
            pct_per_g[s].append(p / (vt * density_g_per_m3))
            amounts[s].append(tt)

            for ref, dist in [("vessel", vdist), ("surface", depth)]:
                if dist is None:
                    continue
                d = dist[tumour]
                w = total[tumour]
                width = h
                nb = int(math.floor(d.max() / width)) + 1
                bins = np.minimum(np.floor(d / width).astype(int), nb - 1)
                for bi in range(nb):
                    sel = bins == bi
                    key = (s, t, ref, bi * width)
                    check(f"{s} {ref} bin {bi} voxels at {t}", profiles.get(key + ("voxels",)), float(sel.sum()))
                    if sel.any():
                        check(f"{s} {ref} bin {bi} mean at {t}", profiles.get(key + ("mean_total",)), w[sel].mean())
                        check(f"{s} {ref} bin {bi} amount at {t}", profiles.get(key + ("amount_total",)), w[sel].sum() * vol)
                if w.sum() > 0:
                    check(f"{s} {ref} mean distance at {t}", m(s, t, f"{ref}_mean_distance"), (w * d).sum() / w.sum())
                    order = np.argsort(d, kind="stable")
                    cum = np.cumsum(w[order])
                    for q, name in [(0.5, "d50"), (0.9, "d90")]:
                        check(f"{s} {ref} {name} at {t}", m(s, t, f"{ref}_{name}"), d[order][np.searchsorted(cum, q * cum[-1])])

                def index(q):
                    if q.sum() > 0 and d.sum() > 0:
                        return 1 - ((q * d).sum() / q.sum()) / d.mean()
                    return None

                # Indices are 1 - ratio: absolute tolerance, as they cancel near 0.
                check(f"{s} {ref} index at {t}", m(s, t, f"{ref}_index_total"), index(w), 1e-12)
                if comps["free"] is not None:
                    check(f"{s} {ref} free index at {t}", m(s, t, f"{ref}_index_free"), index(comps["free"][tumour]), 1e-12)
                if comps["bound_cells"] is not None:
                    check(f"{s} bsb index {ref} at {t}", m(s, t, f"bsb_index_{ref}"), index(comps["bound_cells"][tumour]), 1e-12)

            if cells is not None and f"internalised_{s}" in cells:
                cancer = cells["kind"][()] == 1
                x = cells[f"internalised_{s}"][()][cancer].astype(float)
                check(f"{s} coverage at {t}", m(s, t, "coverage_fraction"), float((x > threshold).mean()))
                for thr, frac in coverage.get((s, t), []):
                    check(f"{s} coverage curve {thr} at {t}", frac, float((x > thr).mean()))
                if not coverage.get((s, t)):
                    failures.append(f"{s}: no coverage curve at {t}")
                mean = x.mean()
                check(f"{s} cv at {t}", m(s, t, "cv_internalised"), x.std() / mean if mean > 0 else None)
                gini = np.abs(x[:, None] - x[None, :]).sum() / (2 * len(x) ** 2 * mean) if mean > 0 else None
                check(f"{s} gini at {t}", m(s, t, "gini_internalised"), gini)
                if f"bound_{s}" in cells:
                    y = x + cells[f"bound_{s}"][()][cancer].astype(float)
                    gy = np.abs(y[:, None] - y[None, :]).sum() / (2 * len(y) ** 2 * y.mean()) if y.mean() > 0 else None
                    check(f"{s} gini cell-associated at {t}", m(s, t, "gini_cell_associated"), gy)

            inj = series.get(f"injected_{s}")
            if inj is not None:
                stocks = [series[f"{k}_{s}"][si] for k in ["plasma", "cleared", "free", "bound_cells", "bound_matrix", "internalised", "drained", "left"] if f"{k}_{s}" in series]
                if stocks:
                    check(f"{s} balance residual at {t}", m(s, t, "balance_residual"), inj[si] - sum(stocks))

    for s in species:
        if not pct_per_g[s]:
            continue
        tt = np.asarray(times[: len(pct_per_g[s])])
        y = np.asarray(pct_per_g[s])
        check(f"{s} AUC", summary.get((s, "auc_tumour_percent_id_per_g")), float(np.sum(0.5 * np.diff(tt) * (y[1:] + y[:-1]))))
        check(f"{s} peak", summary.get((s, "peak_tumour_percent_id_per_g")), float(y.max()))
        check(f"{s} time to peak", summary.get((s, "time_to_peak")), float(tt[int(np.argmax(y))]))
        check(f"{s} peak %ID", summary.get((s, "peak_tumour_percent_id")), float(max(pct[s])))

    svg_dir = arg("--svg", None)
    if svg_dir:
        n_svg = 0
        for p in sorted(Path(svg_dir).glob("*.svg")):
            root = ET.parse(p).getroot()
            if not root.tag.endswith("svg") or float(root.get("width", 0)) <= 0 or float(root.get("height", 0)) <= 0:
                failures.append(f"{p}: not an SVG image with a size")
            n_svg += 1
        if n_svg == 0:
            failures.append(f"no SVG file in {svg_dir}")

    if failures:
        print(f"check_metrics: {len(failures)} disagreements of {checked} values:")
        for x in failures[:40]:
            print("  " + x)
        sys.exit(1)
    print(f"check_metrics: all metrics agree ({checked} values checked)")


if __name__ == "__main__":
    main()
