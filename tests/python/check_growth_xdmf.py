"""Independent read-back of the growth sidecar of an interstice run file with meshio and h5py.

Usage: python3 check_growth_xdmf.py RUN.h5

Checks, without using any interstice code, that `<run>.growth.xmf`, read by meshio's XDMF time
series reader, lists one frame per group of the run file's `/growth`, at that group's `time_s`,
with the fields of the group, each equal to the HDF5 dataset. Exits 1 with a message on the
first disagreement.
"""
import sys
from pathlib import Path

import h5py
import meshio
import numpy as np


def fail(msg):
    print(f"check_growth_xdmf: {msg}")
    sys.exit(1)


def main():
    path = Path(sys.argv[1])
    xmf = path.with_suffix(".growth.xmf")
    f = h5py.File(path, "r")
    if "growth" not in f:
        fail("the run file has no /growth group")
    if not xmf.exists():
        fail(f"{xmf.name} is missing")
    growth = f["growth"]
    frames = sorted(k for k in growth if k != "series")
    with meshio.xdmf.TimeSeriesReader(str(xmf)) as r:
        r.read_points_cells()
        if r.num_steps != len(frames):
            fail(f"the sidecar lists {r.num_steps} frames, /growth holds {len(frames)}")
        for k in range(r.num_steps):
            t, _, cell_data = r.read_data(k)
            g = growth[frames[k]]
            if t != float(g.attrs["time_s"]):
                fail(f"frame {k}: time {t} != {g.attrs['time_s']}")
            if set(cell_data) != set(g.keys()):
                fail(f"frame {k}: fields {sorted(cell_data)} != {sorted(g.keys())}")
            for name, blocks in cell_data.items():
                if not np.array_equal(np.asarray(blocks[0]), g[name][()]):
                    fail(f"frame {k}: {name} differs from the HDF5 dataset")
    print(f"check_growth_xdmf: {xmf.name}: {len(frames)} frames, all checks passed")


if __name__ == "__main__":
    main()
