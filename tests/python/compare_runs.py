"""Compares every dataset and snapshot attribute of two interstice run files, bit for bit.

Usage: python3 compare_runs.py A.h5 B.h5
Provenance (thread count, wall time, start time, file names) is expected to differ and is skipped.
"""
import sys

import h5py
import numpy as np


def walk(group, prefix=""):
    for name, obj in group.items():
        path = f"{prefix}/{name}"
        if path.startswith("/provenance"):
            continue
        if isinstance(obj, h5py.Group):
            yield path, None, dict(obj.attrs)
            yield from walk(obj, path)
        else:
            yield path, obj[()], dict(obj.attrs)


def main():
    a, b = (h5py.File(p, "r") for p in sys.argv[1:3])
    ea, eb = dict((p, (d, at)) for p, d, at in walk(a)), dict((p, (d, at)) for p, d, at in walk(b))
    if set(ea) != set(eb):
        print("compare_runs: different objects:", sorted(set(ea) ^ set(eb))[:10])
        sys.exit(1)
    for p in sorted(ea):
        (da, ata), (db, atb) = ea[p], eb[p]
        if da is not None and not (da.shape == db.shape and da.dtype == db.dtype and np.array_equal(da, db, equal_nan=True)):
            print(f"compare_runs: {p} differs")
            sys.exit(1)
        if set(ata) != set(atb) or any(not np.array_equal(np.asarray(ata[k]), np.asarray(atb[k])) for k in ata):
            print(f"compare_runs: attributes of {p} differ")
            sys.exit(1)
    print(f"compare_runs: {len(ea)} objects identical")


if __name__ == "__main__":
    main()
