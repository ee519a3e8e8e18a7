"""Benchmark of the lattice search on a 1000 x 1000 DEM, 16 neighbours.

Cases (each in its own process so that the peak memory, ``VmHWM``, is its own):

* ``scipy``  - frictionless reach by ``scipy.sparse.csgraph.dijkstra`` on the same lattice
  (same 16-neighbour edges, same break points, static edge times
  t = sum 2 s / (v_a + v_b), v = sqrt(v0² + 2 g (z0 - z))); the graph build is timed.
* ``reach``  - :func:`fallway.lattice.search.reach`, frictionless, same start.
* ``route``  - :func:`fallway.lattice.search.lattice_line` corner to corner, mu 0.25, drag
  0.002 /m (A* on), with at most ``--cap`` labels per cell (the exact Pareto set grows
  too large on rough terrain at this size); the same cap is checked against the exact
  search on a 60 x 60 corner of the DEM.

Targets (issue 4): reach no slower than scipy; route at most 3 x the scipy figure; peak
memory under 2 GB each.  Run: ``python scripts/bench_search.py [--size 1000]``;
``--case reach`` or ``--case route`` runs one case in this process (after ``--case scipy``
has written the reference).  The script runs against this checkout's API
(``options=SearchOptions(...)``) or the one before it (``neighbours=``, ``max_per_cell=``),
so the same file times an older checkout for A/B comparisons (:func:`front_kw`).

Measured 2026-12-02, 1000 x 1000, on 2 cores shared by three people (large spread).
This script, before the compact state / time cut-off / one push helper: reach 1.03 s,
route 2.98 s; after (first version of the helper, at another moment of load): reach
1.24 s, route 3.79 s.  Cleaner: the old and the new kernel called alternately in one
process on the same arrays, 8 times each, CPU time (final version, ``_push_label``
without returned arrays, identity index when nothing is blocked): reach min 0.806 /
median 0.835 s old vs 0.832 / 0.884 s new (+3 to +6 %); route (cap 2) min 4.32 / median
5.10 s old vs 4.51 / 4.89 s new (within the noise).  A first helper that returned the
pool and heap arrays on every push measured about +5 % on the route median.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import subprocess
import sys
import time

import numpy as np

G = 9.80665


def make_dem(n: int, seed: int = 7):
    from scipy import ndimage

    rng = np.random.default_rng(seed)
    r, c = np.mgrid[0:n, 0:n]
    hills = ndimage.gaussian_filter(rng.normal(size=(n, n)), 15.0)
    hills *= 40.0 / np.abs(hills).max()
    return 5000.0 - 3.5 * (r + c) + hills, 10.0


def terrain(n):
    from fallway.terrain import Terrain

    z, cell = make_dem(n)
    return Terrain.from_array(z, (cell, 0, 0.0, 0, -cell, n * cell))


sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from bench_large import peak_mb  # noqa: E402  (one VmHWM reader for every benchmark)


def front_kw(fn, *, neighbours=16, label_cap=None, max_labels=None, heuristic=None, energy_tol=None) -> dict:
    """Search keywords for the lattice front ``fn`` in the API of the installed fallway.

    This checkout: one ``options=SearchOptions(...)``; before it (for A/B runs against an
    older checkout): ``neighbours=``, ``max_per_cell=``, ``max_labels=``, ...
    """
    import inspect

    opt = {k: v for k, v in dict(neighbours=neighbours, label_cap=label_cap, max_labels=max_labels,
                                  heuristic=heuristic, energy_tol=energy_tol).items() if v is not None}
    if "options" in inspect.signature(fn).parameters:
        from fallway.params import SearchOptions

        return {"options": SearchOptions(**opt)}
    if "label_cap" in opt:
        opt["max_per_cell"] = opt.pop("label_cap")
    return opt


def case_scipy(n):
    z, cell = make_dem(n)
    out = scipy_dijkstra(z, cell, 0.5, 0)
    np.save("/tmp/_bench_scipy_reach.npy", out.pop("dist"))
    return {"case": "scipy"} | out


def scipy_dijkstra(z, cell, v0, start):
    """Graph build plus one-source ``scipy.sparse.csgraph.dijkstra`` on the 16-neighbour lattice
    (static frictionless edge times); the seconds of each and the distances."""
    import scipy.sparse as sp
    from scipy.sparse.csgraph import dijkstra

    from fallway.lattice.stencil import make_stencil

    n = z.shape[0]
    t0 = time.perf_counter()
    e0 = v0 * v0 + 2 * G * z.ravel()[start]
    st = make_stencil(16)
    idx = np.arange(n * n, dtype=np.int32).reshape(n, n)
    src, dst, wts = [], [], []
    for k, (dr, dc) in enumerate(st.offsets.tolist()):
        rs = slice(max(0, -dr), n - max(0, dr))
        cs = slice(max(0, -dc), n - max(0, dc))

        def shifted(a, b):
            return z[rs.start + a:rs.stop + a, cs.start + b:cs.stop + b]

        pts = [(0.0, z[rs, cs])]
        for u, a, b, w in st.edge_points(k):
            pts.append((u, w * shifted(*a) + (1 - w) * shifted(*b)))
        pts.append((1.0, shifted(dr, dc)))
        plan = cell * math.hypot(dr, dc)
        tt = np.zeros(pts[0][1].shape)
        ok = e0 - 2 * G * pts[0][1] >= 0
        for (u0, z0), (u1, z1) in zip(pts[:-1], pts[1:]):
            va2 = e0 - 2 * G * z0
            vb2 = e0 - 2 * G * z1
            ok &= vb2 > 0
            s = np.sqrt(((u1 - u0) * plan) ** 2 + (z1 - z0) ** 2)
            tt += 2 * s / (np.sqrt(np.maximum(va2, 0)) + np.sqrt(np.maximum(vb2, 0)) + 1e-300)
        src.append(idx[rs, cs][ok])
        dst.append(shifted_idx(idx, rs, cs, dr, dc)[ok])
        wts.append(tt[ok])
    g = sp.csr_matrix((np.concatenate(wts), (np.concatenate(src), np.concatenate(dst))), shape=(n * n, n * n))
    del src, dst, wts
    t_build = time.perf_counter() - t0
    d = dijkstra(g, indices=start)
    total = time.perf_counter() - t0
    return {"build_s": t_build, "total_s": total, "edges": int(g.nnz), "peak_mb": peak_mb(), "dist": d}


def shifted_idx(idx, rs, cs, dr, dc):
    return idx[rs.start + dr:rs.stop + dr, cs.start + dc:cs.stop + dc]


def warm():
    from fallway.lattice.search import lattice_line, reach
    from fallway.physics import Mover

    t = terrain(12)
    reach(t, t.cell_center(0, 0), Mover(v0=0.5), **front_kw(reach))
    lattice_line(t, t.cell_center(0, 0), t.cell_center(11, 11), Mover(mu=0.25, drag=0.002), **front_kw(lattice_line))


def case_reach(n):
    from fallway.lattice.search import reach
    from fallway.physics import Mover

    t0 = time.perf_counter()
    warm()
    t_warm = time.perf_counter() - t0
    t = terrain(n)
    t0, c0 = time.perf_counter(), time.process_time()
    rm = reach(t, t.cell_center(0, 0), Mover(v0=0.5), **front_kw(reach))
    total, cpu = time.perf_counter() - t0, time.process_time() - c0
    ref = np.load("/tmp/_bench_scipy_reach.npy").reshape(n, n)
    ok = np.isfinite(ref)
    same = bool(np.array_equal(ok, np.isfinite(rm.time_s)))
    err = float(np.max(np.abs(rm.time_s[ok] - ref[ok]) / np.maximum(ref[ok], 1e-12)))
    return {"case": "reach", "total_s": total, "cpu_s": cpu, "kernel_s": rm.stats["search_s"], "warm_s": t_warm,
            "labels_created": rm.stats["labels_created"], "labels_settled": rm.stats["labels_settled"],
            "same_reached_cells": same, "max_rel_diff_vs_scipy": err, "peak_mb": peak_mb()}


def case_route(n, cap):
    from fallway.lattice.search import lattice_line
    from fallway.physics import Mover
    from fallway.terrain import Terrain

    warm()
    t = terrain(n)
    mover = Mover(mu=0.25, drag=0.002)
    t0, c0 = time.perf_counter(), time.process_time()
    ln = lattice_line(t, t.cell_center(0, 0), t.cell_center(n - 1, n - 1), mover,
                      **front_kw(lattice_line, label_cap=cap))
    total, cpu = time.perf_counter() - t0, time.process_time() - c0
    out = {"case": "route", "total_s": total, "cpu_s": cpu, "kernel_s": ln.stats["search_s"], "time_s": ln.time_s,
           "labels_created": ln.stats["labels_created"], "labels_settled": ln.stats["labels_settled"],
           "labels_capped": ln.stats["labels_capped"], "cap": cap, "peak_mb": peak_mb()}
    m = min(60, n)
    small = Terrain.from_array(t.z[:m, :m], t.transform, t.crs)
    a = lattice_line(small, small.cell_center(0, 0), small.cell_center(m - 1, m - 1), mover,
                     **front_kw(lattice_line, label_cap=cap))
    c0 = time.process_time()
    b = lattice_line(small, small.cell_center(0, 0), small.cell_center(m - 1, m - 1), mover, **front_kw(lattice_line))
    out["exact_60_cpu_s"] = time.process_time() - c0
    out["cap_vs_exact_rel_60"] = a.time_s / b.time_s - 1.0
    out["exact_60_s"] = b.stats["search_s"]
    out["exact_60_labels"] = b.stats["labels_created"]
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=1000)
    ap.add_argument("--case", choices=["scipy", "reach", "route"])
    ap.add_argument("--cap", type=int, default=2, help="labels kept per cell in the route case")
    a = ap.parse_args()
    if a.case:
        res = case_route(a.size, a.cap) if a.case == "route" else {"scipy": case_scipy, "reach": case_reach}[a.case](a.size)
        print(json.dumps(res))
        return
    res = {}
    for case in ("scipy", "reach", "route"):
        out = subprocess.run([sys.executable, __file__, "--size", str(a.size), "--case", case, "--cap", str(a.cap)],
                             capture_output=True, text=True, check=True)
        res[case] = json.loads(out.stdout.strip().splitlines()[-1])
        print(json.dumps(res[case]))
    sc = res["scipy"]["total_s"]
    print(f"\n{a.size} x {a.size}, 16 neighbours")
    print(f"scipy csgraph dijkstra (graph build {res['scipy']['build_s']:.2f} s incl.): {sc:.2f} s, "
          f"peak {res['scipy']['peak_mb']:.0f} MB")
    print(f"fallway reach, frictionless: {res['reach']['total_s']:.2f} s ({res['reach']['total_s'] / sc:.2f} x scipy), "
          f"peak {res['reach']['peak_mb']:.0f} MB, max rel diff {res['reach']['max_rel_diff_vs_scipy']:.1e}")
    print(f"fallway route mu 0.25 + drag: {res['route']['total_s']:.2f} s ({res['route']['total_s'] / sc:.2f} x scipy), "
          f"peak {res['route']['peak_mb']:.0f} MB, labels {res['route']['labels_created']}, cap {a.cap} per cell "
          f"(on 60 x 60: {res['route']['cap_vs_exact_rel_60']:+.1e} relative to the exact search, which took "
          f"{res['route']['exact_60_s']:.1f} s)")


if __name__ == "__main__":
    main()
