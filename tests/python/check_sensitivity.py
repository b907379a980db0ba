"""Recomputes a sweep's sensitivity indices with SALib (PyPI) on the same samples and outputs.

Reads the aggregate table (`table.csv`: one row per run, the parameter columns, the output
column) and our indices (`sensitivity.csv`), runs SALib's `sobol.analyze` (Saltelli 2002;
Saltelli et al. 2010) or `morris.analyze` (Morris 1991; Campolongo et al. 2007) on the same rows,
and compares:

- the indices themselves: the same estimators on the same numbers, so they may differ only by
  floating-point summation order: |ours - SALib| <= --value-tol (default 1e-9; the rounding of a
  sum of n <= 1e5 terms of size <= 1 in double precision is below n * 2.2e-16 = 2.2e-11);
- the bootstrap confidence half-widths: both are z * sd over B resamples, but drawn with
  different random generators, so they agree only statistically: the relative standard error of
  a standard deviation estimated from B normal resamples is 1 / sqrt(2 (B - 1)), the difference
  of two independent ones has relative sd 1 / sqrt(B - 1), and --conf-sigmas (default 5) of it
  is the tolerance.

Usage: check_sensitivity.py TABLE SENS --method sobol|morris --params a,b,c --output Y
       [--levels 4] [--second-order] [--resamples B] [--confidence 0.95]
Prints one line per index and exits 1 when any check fails.
"""
import argparse
import csv
import math
import sys

import numpy as np
from SALib.analyze import morris, sobol


def read_table(path):
    with open(path, newline="") as f:
        rows = list(csv.DictReader(f))
    return rows


def num(s):
    return float("nan") if s in ("NA", "") else float(s)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("table")
    ap.add_argument("sens")
    ap.add_argument("--method", required=True, choices=["sobol", "morris"])
    ap.add_argument("--params", required=True)
    ap.add_argument("--output", required=True)
    ap.add_argument("--levels", type=int, default=4)
    ap.add_argument("--second-order", action="store_true")
    ap.add_argument("--resamples", type=int, default=1000)
    ap.add_argument("--confidence", type=float, default=0.95)
    ap.add_argument("--value-tol", type=float, default=1e-9)
    ap.add_argument("--conf-sigmas", type=float, default=5.0)
    a = ap.parse_args()

    params = a.params.split(",")
    rows = read_table(a.table)
    X = np.array([[num(r[p]) for p in params] for r in rows], dtype=float)
    Y = np.array([num(r[a.output]) for r in rows], dtype=float)
    if not np.all(np.isfinite(Y)):
        print("the output has missing values: this check needs every run")
        return 1
    problem = {
        "num_vars": len(params),
        "names": params,
        "bounds": [[float(X[:, k].min()), float(X[:, k].max()) + 1e-300] for k in range(len(params))],
    }
    ours = {}
    with open(a.sens, newline="") as f:
        for r in csv.DictReader(f):
            if r["output"] != a.output:
                continue
            ours[(r["index"], r["parameter"], r["parameter2"])] = (num(r["value"]), num(r["conf"]))

    checks = []  # (name, ours, salib, conf ours, conf salib)
    if a.method == "sobol":
        s = sobol.analyze(
            problem,
            Y,
            calc_second_order=a.second_order,
            num_resamples=a.resamples,
            conf_level=a.confidence,
            seed=12345,
        )
        for k, p in enumerate(params):
            for idx in ("S1", "ST"):
                checks.append((f"{idx} {p}", ours.get((idx, p, "")), s[idx][k], s[idx + "_conf"][k]))
        if a.second_order:
            for j in range(len(params)):
                for k in range(j + 1, len(params)):
                    key = ("S2", params[j], params[k])
                    checks.append((f"S2 {params[j]} x {params[k]}", ours.get(key), s["S2"][j, k], s["S2_conf"][j, k]))
    else:
        s = morris.analyze(
            problem,
            X,
            Y,
            num_resamples=a.resamples,
            conf_level=a.confidence,
            num_levels=a.levels,
            seed=12345,
        )
        for k, p in enumerate(params):
            checks.append((f"mu {p}", ours.get(("mu", p, "")), s["mu"][k], None))
            checks.append((f"mu_star {p}", ours.get(("mu_star", p, "")), s["mu_star"][k], s["mu_star_conf"][k]))
            checks.append((f"sigma {p}", ours.get(("sigma", p, "")), s["sigma"][k], None))

    conf_tol = a.conf_sigmas / math.sqrt(a.resamples - 1)
    bad = 0
    for name, mine, ref, ref_conf in checks:
        if mine is None:
            print(f"FAIL {name}: missing from {a.sens}")
            bad += 1
            continue
        v, c = mine
        ok = abs(v - ref) <= a.value_tol
        line = f"{name}: ours {v:.12g} SALib {ref:.12g}"
        if ref_conf is not None:
            if ref_conf == 0.0 and c == 0.0:
                cok = True
            else:
                cok = abs(c / ref_conf - 1.0) <= conf_tol
            line += f"; conf ours {c:.6g} SALib {ref_conf:.6g} (relative tolerance {conf_tol:.3f})"
            ok = ok and cok
        print(("ok   " if ok else "FAIL ") + line)
        bad += 0 if ok else 1
    print(f"SALib comparison: {len(checks) - bad} agreed, {bad} differed")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
