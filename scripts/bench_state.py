"""Compact kernel state and the reach time cut-off, measured (issue 8).

Cases, each in its own process (peak memory = ``VmHWM`` of that process):

* ``corridor`` - the route of ``bench_large.py`` (n x n DEM at 2 m, the same generator
  and end points, mu 0.2, drag 0.001 /m, 16 neighbours, ``--cap`` labels per cell)
  through :func:`fallway.scale.find_route_large` *without refinement*, so the peak is
  the search's.  Run twice: with the compact per-state arrays (the default) and with
  the full-window layout (``_Problem.run(compact=False)``: the layout before the
  change, same labels).  The answers must be identical.
* ``reach`` - :func:`fallway.scale.reach_limited` with ``max_time_s`` on the same kind
  of DEM: with the kernel time cut-off (the default) and with the area window alone
  (the search fills the free-fall disc, then the later arrivals are masked: the
  behaviour before the change).  The maps must be identical.

Each case first runs a small search to compile (or load) the kernels.  Run:
``python scripts/bench_state.py [--n 5000] [--reach-n 2000] [--reach-t 40]``; a single case
with ``--case reach|corridor --path DEM.tif [--flag 0|1]`` (for A/B runs).

Measured 2026-12-02 (2 cores shared with other work - load average 2.4 to 3.8 - so wall
times are indicative; --cap 4):

* reach, 2000 x 2000 DEM, start 15 % in from the north-west corner, t <= 40 s (the
  free-fall disc covers the whole 2000 x 2000 window): with the kernel cut-off
  search 0.61 s (wall 2.2 s), peak 510 MB, 237 675 labels; area window alone search
  47.5 s (wall 49.1 s), peak 1266 MB, 28 772 195 labels; 23 064 cells reached by
  40 s in both, maps identical.  (A first run: 0.92 s vs 51.99 s, 526 vs 1265 MB.)
* corridor route, 5000 x 5000 (window 6 702 921 cells, corridors 80 m: 287 412 cells,
  160 m: 587 354 cells), no refinement: compact state wall 17.9 s, peak 669 MB;
  full-window state wall 21.5 s, peak 851 MB; the same line (lattice time
  281.8384 s).  The 182 MB saved is the 28 B per state (``emax``, ``open_t``,
  ``open_v2``, ``nset``) of the 6.1 M cells outside the corridor.  What is left of the
  peak is not the search: the process holds ~170 MB after its imports and ~490 MB
  before the last corridor is read (windows, the coarse read through GDAL, its block
  cache); the corridor mask (distance transform) peaks at ~650 MB.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))


from bench_large import peak_mb  # noqa: E402  (one VmHWM reader for every benchmark)


def _force_layout(compact: bool) -> None:
    import fallway.lattice.search as S

    run = S._Problem.run
    S._Problem.run = lambda self, *a, **k: run(self, *a, **{**k, "compact": compact})


def _warm():
    """Compile (or load) the kernels on a small grid, so that the timed case does not."""
    from fallway.physics import Mover
    from fallway.scale import find_route_large, reach_limited
    from fallway.terrain import Terrain

    t = Terrain.from_array(100.0 - 0.3 * np.add.outer(np.arange(40.0), np.arange(40.0)), (2.0, 0, 0, 0, -2.0, 80.0))
    find_route_large(t, (1, 79), (79, 1), Mover(mu=0.2, drag=0.001), coarse_factor=4, neighbours=16, max_per_cell=4,
                     refine=False)
    reach_limited(t, (1, 79), Mover(mu=0.2, drag=0.001), max_time_s=5.0, neighbours=16, max_per_cell=4)


def case_corridor(path, n, cap, compact):
    from bench_large import points

    from fallway.physics import Mover
    from fallway.scale import find_route_large

    _warm()
    _force_layout(compact)
    start, end = points(n, 0.25)
    t0, c0 = time.perf_counter(), time.process_time()
    r = find_route_large(path, start, end, Mover(mu=0.2, drag=0.001), neighbours=16, max_per_cell=cap, refine=False)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    s = r.summary
    return {"wall_s": wall, "cpu_s": cpu, "peak_mb": peak_mb(), "lattice_time_s": s["lattice_time_s"],
            "cells": [int(v) for v in np.asarray(r.lattice.cells).ravel()],
            "window_cells": s["scale"]["window_cells"], "corridor_steps": s["corridor_steps"],
            "labels_created": s["labels_created"]}


def case_reach(path, n, t_max, cap, kernel_cutoff):
    from bench_large import points

    import fallway.lattice.search as S
    from fallway.physics import Mover
    from fallway.scale import reach_limited

    _warm()
    if not kernel_cutoff:  # the area window alone: search everything in it, mask afterwards
        reach = S.reach
        S.reach = lambda *a, **k: reach(*a, **{**k, "max_time_s": None})
    start, _ = points(n, 0.15)
    t0, c0 = time.perf_counter(), time.process_time()
    rm = reach_limited(path, start, Mover(mu=0.2, drag=0.001), max_time_s=t_max, neighbours=16, max_per_cell=cap)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    tt = rm.time_s.copy()
    if not kernel_cutoff:
        tt[~(tt <= t_max)] = np.nan
    np.save(path + f".reach{int(kernel_cutoff)}.npy", tt)
    return {"wall_s": wall, "cpu_s": cpu, "search_s": rm.stats["search_s"], "peak_mb": peak_mb(),
            "window_shape": rm.stats["cutoff"]["window_shape"], "cells_reached_by_t": int(np.isfinite(tt).sum()),
            "labels_created": rm.stats["labels_created"], "labels_settled": rm.stats["labels_settled"]}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--case", choices=["corridor", "reach"])
    ap.add_argument("--path")
    ap.add_argument("--n", type=int, default=5000)
    ap.add_argument("--reach-n", type=int, default=2000)
    ap.add_argument("--reach-t", type=float, default=40.0)
    ap.add_argument("--cap", type=int, default=4)
    ap.add_argument("--flag", type=int, default=1)
    ap.add_argument("--skip-corridor", action="store_true")
    a = ap.parse_args()
    if a.case == "corridor":
        print(json.dumps(case_corridor(a.path, a.n, a.cap, bool(a.flag))))
        return
    if a.case == "reach":
        print(json.dumps(case_reach(a.path, a.reach_n, a.reach_t, a.cap, bool(a.flag))))
        return
    from bench_large import make_dem

    def child(*args):
        out = subprocess.run([sys.executable, __file__, *map(str, args)], check=True, capture_output=True, text=True)
        return json.loads(out.stdout.strip().splitlines()[-1])

    with tempfile.TemporaryDirectory() as d:
        p2 = os.path.join(d, f"dem{a.reach_n}.tif")
        make_dem(a.reach_n, p2)
        res = {f: child("--case", "reach", "--path", p2, "--reach-n", a.reach_n, "--reach-t", a.reach_t,
                        "--cap", a.cap, "--flag", f)
               for f in (1, 0)}
        same = np.array_equal(np.load(p2 + ".reach1.npy"), np.load(p2 + ".reach0.npy"), equal_nan=True)
        for f, name in ((1, "kernel cut-off"), (0, "area window only")):
            r = res[f]
            print(f"reach {a.reach_n}^2, t <= {a.reach_t:g} s, {name}: window {r['window_shape']}, "
                  f"wall {r['wall_s']:.2f} s (search {r['search_s']:.2f} s), peak {r['peak_mb']:.0f} MB, "
                  f"labels {r['labels_created']}, cells reached {r['cells_reached_by_t']}", flush=True)
        print(f"reach maps identical: {same}", flush=True)
        if a.skip_corridor:
            return
        p5 = os.path.join(d, f"dem{a.n}.tif")
        make_dem(a.n, p5)
        res = {f: child("--case", "corridor", "--path", p5, "--n", a.n, "--cap", a.cap, "--flag", f) for f in (1, 0)}
        for f, name in ((1, "compact state"), (0, "full-window state")):
            r = res[f]
            print(f"corridor route {a.n}^2, {name}: wall {r['wall_s']:.1f} s, peak {r['peak_mb']:.0f} MB, "
                  f"lattice time {r['lattice_time_s']:.4f} s, window {r['window_cells']} cells, "
                  f"corridor steps {[(s['corridor_m'], s['cells']) for s in r['corridor_steps']]}", flush=True)
        print(f"identical lines: {res[1]['cells'] == res[0]['cells'] and res[1]['lattice_time_s'] == res[0]['lattice_time_s']}")


if __name__ == "__main__":
    main()
