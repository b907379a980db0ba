"""Cross-check of the blood-pressure solve against SciPy's sparse direct solver.

Usage: python3 check_flow_scipy.py NODES.csv SEGMENTS.csv

NODES.csv: index,bc,value,pressure  (bc 0 interior, 1 imposed pressure [Pa], 2 imposed inflow
[m^3/s]; pressure is interstice's solution, nan where undefined).
SEGMENTS.csv: a,b,conductance,flow  (conductance m^3/(Pa s); flow is interstice's, a to b).

Builds the weighted graph Laplacian with SciPy, finds the pieces that touch an imposed pressure
(scipy.sparse.csgraph.connected_components), eliminates the imposed pressures and solves the
rest with scipy.sparse.linalg.spsolve (SuperLU). Prints the largest pressure difference relative
to the imposed pressure range and the largest flow difference relative to the largest flow;
exits 1 when either exceeds 1e-9.
"""
import sys

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.sparse.linalg import spsolve


def main():
    nodes = np.genfromtxt(sys.argv[1], delimiter=",", names=True)
    segs = np.genfromtxt(sys.argv[2], delimiter=",", names=True)
    n = len(nodes)
    a = segs["a"].astype(int)
    b = segs["b"].astype(int)
    g = segs["conductance"]
    adj = coo_matrix((np.ones(len(a)), (a, b)), shape=(n, n))
    ncomp, label = connected_components(adj, directed=False)
    bc = nodes["bc"].astype(int)
    val = nodes["value"]
    anchored_comp = np.zeros(ncomp, dtype=bool)
    anchored_comp[label[bc == 1]] = True
    anchored = anchored_comp[label]
    lap = coo_matrix(
        (np.concatenate([g, g, -g, -g]), (np.concatenate([a, b, a, b]), np.concatenate([a, b, b, a]))), shape=(n, n)
    ).tocsr()
    known = bc == 1
    unknown = anchored & ~known
    p = np.full(n, np.nan)
    p[known] = val[known]
    rhs = -lap[unknown][:, known] @ p[known]
    rhs += np.where(bc[unknown] == 2, val[unknown], 0.0)
    p[unknown] = spsolve(lap[unknown][:, unknown].tocsc(), rhs)
    ours = nodes["pressure"]
    if not np.array_equal(np.isnan(ours), np.isnan(p)):
        print("pressure is defined on different nodes")
        sys.exit(1)
    ok = ~np.isnan(p)
    span = val[known].max() - val[known].min()
    dp = np.max(np.abs(ours[ok] - p[ok])) / span
    q = g * (p[a] - p[b])
    fin = ~np.isnan(q)
    dq = np.max(np.abs(segs["flow"][fin] - q[fin])) / np.max(np.abs(q[fin]))
    print(f"{n} nodes, {len(a)} segments, {ncomp} pieces: max pressure difference {dp:.2e} of the range, "
          f"max flow difference {dq:.2e} of the largest flow")
    if dp > 1e-9 or dq > 1e-9:
        sys.exit(1)
    print("agree")


if __name__ == "__main__":
    main()
