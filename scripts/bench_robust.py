"""Benchmark the robust lattice search (fallway.lattice.robust) on seeded rough DEMs.

Usage: ``python scripts/bench_robust.py [--sizes 60 100] [--budget 5000000]``

For each size it times: no drag, no speed limit; with drag; with a speed limit that binds
at LO friction, exact and at an energy resolution of 1 %.  Prints labels and seconds (one
run each: the robust search is long; the machine may be shared), after a small search
that compiles the kernels.  ``--json`` prints one JSON record per case instead, with the
CPU seconds too (for A/B runs).

``--memory N``: the peak memory of one robust search on an N x N DEM whose diagonal
corridor (a fifth of the window) is the only searchable area (the rest keep-out), no
drag, a speed limit of 200 m/s (finite, so the LO floor runs, but so far above what the
drop allows that no label's LO energy counts in dominance: the label sets stay those of
the free search and the state's share of the peak shows) at a 1 % resolution, in a fresh
process per layout:
``VmHWM`` after the search minus ``VmRSS`` before it (the peak reset through
``/proc/self/clear_refs`` once the kernels are compiled).  ``--layout full`` forces the
full-window kernel state (``_Problem.run_robust(compact=False)``) where the checkout
has it.

The script runs against this checkout's API (``options=SearchOptions(...)``) or the one
before it, so the same file times an older checkout (``bench_search.front_kw``).
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import subprocess
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from bench_search import front_kw  # noqa: E402  (the API adapter for A/B runs)

from fallway.errors import NoFeasibleLine  # noqa: E402
from fallway.physics import Mover  # noqa: E402
from fallway.terrain import Terrain  # noqa: E402

try:  # the front lives in lattice.search in this checkout, in lattice.robust before it
    from fallway.lattice.search import robust_lattice_line
except ImportError:
    from fallway.lattice.robust import robust_lattice_line


def dem(n: int, seed: int = 1) -> Terrain:
    rng = np.random.default_rng(seed)
    base = -0.35 * np.add.outer(np.arange(n), 1.2 * np.arange(n)) * 2.0
    bumps = rng.normal(0.0, 0.4, (n, n))
    from scipy.ndimage import gaussian_filter

    z = base + 6.0 * gaussian_filter(bumps, 3.0)
    return Terrain.from_array(z, (2.0, 0, 0, 0, -2.0, 2.0 * n))


def robust(t, s, e, m, lo, hi, *, max_labels=None, resolution=0.0, keepout=None):
    return robust_lattice_line(t, s, e, m, lo, hi, resolution=resolution, keepout=keepout,
                               **front_kw(robust_lattice_line, max_labels=max_labels))


def _status(key: str) -> int:
    with open("/proc/self/status") as fh:
        line = next(ln for ln in fh if ln.startswith(key + ":"))
    return int(line.split()[1]) * 1024


def case_memory(n: int, layout: str) -> dict:
    """One robust search on a corridor of an n x n DEM; its own peak memory (module notes)."""
    t = dem(n)
    r, c = np.mgrid[0:n, 0:n]
    keep = np.abs(r - c) / np.sqrt(2.0) > 0.07 * n
    del r, c
    s, e = t.cell_center(0, 0), t.cell_center(n - 1, n - 1)
    m = Mover(mu=0.15, normal="gravity", max_speed=200.0)
    small = dem(12)
    robust(small, small.cell_center(0, 0), small.cell_center(11, 11), m, 0.1, 0.25, resolution=0.01)
    if layout == "full":
        import fallway.lattice.search as S

        run = S._Problem.run_robust
        S._Problem.run_robust = lambda self, *a, **k: run(self, *a, **{**k, "compact": False})
    gc.collect()
    with open("/proc/self/clear_refs", "w") as fh:  # reset the peak (VmHWM) to the current RSS
        fh.write("5")
    base = _status("VmRSS")
    t0 = time.perf_counter()
    ln = robust(t, s, e, m, 0.1, 0.25, resolution=0.01, keepout=keep)
    wall = time.perf_counter() - t0
    return {"n": n, "layout": layout, "window_cells": n * n, "active_cells": int((~keep).sum()),
            "state_cells": ln.stats.get("state_cells"), "peak_mb": (_status("VmHWM") - base) / 1e6,
            "labels_created": ln.stats["labels_created"], "time_s": ln.time_s, "wall_s": wall}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", type=int, nargs="+", default=[60, 100])
    ap.add_argument("--budget", type=int, default=5_000_000)
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--memory", type=int, metavar="N")
    ap.add_argument("--layout", choices=["compact", "full"], default="compact")
    ap.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.memory:
        if a.child:
            print(json.dumps(case_memory(a.memory, a.layout)))
            return
        out = subprocess.run([sys.executable, __file__, "--memory", str(a.memory), "--layout", a.layout, "--child"],
                             capture_output=True, text=True, check=True)
        print(out.stdout.strip().splitlines()[-1])
        return
    small = dem(12)  # compile (or load) the kernels before timing
    robust(small, small.cell_center(0, 0), small.cell_center(11, 11), Mover(mu=0.15, max_speed=20.0, normal="gravity"),
           0.1, 0.25, resolution=0.01)
    for n in a.sizes:
        t = dem(n)
        s, e = t.cell_center(0, 0), t.cell_center(n - 1, n - 1)
        cases = [("no drag", Mover(mu=0.15, normal="gravity"), 0.0),
                 ("drag 0.004, exact", Mover(mu=0.15, drag=0.004, normal="gravity"), 0.0),
                 ("drag 0.004, res 1 %", Mover(mu=0.15, drag=0.004, normal="gravity"), 0.01)]
        free = robust(t, s, e, Mover(mu=0.15, normal="gravity"), 0.1, 0.25)
        from fallway.physics import traverse

        vlo = float(np.max(traverse(free.points, Mover(mu=0.1, normal="gravity")).speed_m_s))
        cap = 0.97 * vlo
        cases += [(f"limit {cap:.1f} m/s, exact", Mover(mu=0.15, max_speed=cap, normal="gravity"), 0.0),
                  (f"limit {cap:.1f} m/s, res 1 %", Mover(mu=0.15, max_speed=cap, normal="gravity"), 0.01)]
        for name, m, res in cases:
            t0, c0 = time.perf_counter(), time.process_time()
            rec = {"n": n, "case": name}
            try:
                ln = robust(t, s, e, m, 0.1, 0.25, max_labels=a.budget, resolution=res)
                rec.update(time_s=ln.time_s, labels=ln.stats["labels_created"], kernel_s=ln.stats["search_s"])
                what = f"{ln.time_s:9.4f} s nominal, {ln.stats['labels_created']:>9} labels"
            except NoFeasibleLine as err:
                rec.update(time_s=None, error=str(err)[:60])
                what = f"none: {str(err)[:60]}"
            rec["wall_s"], rec["cpu_s"] = time.perf_counter() - t0, time.process_time() - c0
            if a.json:
                print(json.dumps(rec), flush=True)
            else:
                print(f"{n:>4}x{n:<4} {name:<28} {rec['wall_s']:7.2f} s wall  {what}", flush=True)


if __name__ == "__main__":
    main()
