"""Scaling of the large-terrain route search with grid size (issue 8).

For n x n DEMs of 0.25 M, 1 M, 4 M, 16 M and 25 M cells at 2 m (the generator of
``bench_large.py``, written to a tiled deflate GeoTIFF), a friction route corner to
corner (15 % in from opposite corners), 16 neighbours, ``max_per_cell`` labels, through
:func:`fallway.routing.find_route` with the corridor plan (coarse-to-fine).  Each size runs in its own
process: wall time and peak memory (VmHWM, see ``bench_large.peak_mb``).  The growth exponent is the
least-squares slope of log(time) against log(cells).

Run: ``python scripts/bench_scaling.py [--cap 4] [--refine] [--exact-up-to 4000000]``.
``--exact-up-to`` also times the exact full-grid search up to that many cells.

Measured 2026-12-02 after the compact kernel state (2 cores shared by three people, load
average ~3, wall times inflated; --cap 4, no refinement; peak = VmHWM of the child,
``bench_large.peak_mb``; 0.25 M cells is small enough for the auto coarse factor 1, i.e.
the full grid)::

       cells      mode   wall s  peak MB
      250000  corridor     3.01      269
     1000000  corridor     6.63      289
     4000000  corridor    13.84      372
    16000000  corridor    32.19      738
    25000000  corridor    59.14      972
    corridor: time ~ cells^0.62, peak memory ~ cells^0.28

Earlier (before 2026-12-02, an idle machine; peaks were ``ru_maxrss``, which in a child
includes the parent's peak - the parent writes the growing DEMs - so they overstate)::

       cells      mode   wall s  peak MB
      250000  corridor     1.86      248
     1000000  corridor     2.61      275     exact  5.78 s  380 MB (corridor answer 0.19 % slower)
     4000000  corridor     4.82      375     exact 31.13 s  791 MB (same answer)
    16000000  corridor    19.74      877
    25000000  corridor    24.68     1177
    corridor: time ~ cells^0.59, peak memory ~ cells^0.35; exact: time ~ cells^1.02
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

SIZES = (500, 1000, 2000, 4000, 5000)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--cap", type=int, default=4)
    ap.add_argument("--refine", action="store_true")
    ap.add_argument("--exact-up-to", type=int, default=0)
    ap.add_argument("--out", default=None)
    a = ap.parse_args()
    from bench_large import make_dem

    rows = []
    with tempfile.TemporaryDirectory() as d:
        for n in SIZES:
            path = os.path.join(d, f"dem{n}.tif")
            make_dem(n, path)
            modes = [False] + ([True] if n * n <= a.exact_up_to else [])
            for exact in modes:
                cmd = [sys.executable, os.path.join(os.path.dirname(__file__), "bench_large.py"), "--case", "s",
                       "--path", path, "--n", str(n), "--frac", "0.15", "--cap", str(a.cap)]
                cmd += (["--exact"] if exact else []) + ([] if a.refine else ["--no-refine"])
                out = subprocess.run(cmd, check=True, capture_output=True, text=True)
                res = json.loads(out.stdout.strip().splitlines()[-1])
                row = {"n": n, "cells": n * n, "mode": "exact" if exact else "corridor", "wall_s": res["wall_s"],
                       "peak_mb": res["peak_mb"], "lattice_time_s": res["lattice_time_s"],
                       "travel_time_s": res["travel_time_s"], "labels_created": res["labels_created"],
                       "steps": [(s["corridor_m"], s["cells"]) for s in (res["corridor"] or {}).get("steps", [])]}
                rows.append(row)
                print(json.dumps(row), flush=True)
    print(f"\n{'cells':>10} {'mode':>9} {'wall s':>8} {'peak MB':>8} {'travel s':>9}")
    for r in rows:
        print(f"{r['cells']:>10d} {r['mode']:>9} {r['wall_s']:8.2f} {r['peak_mb']:8.0f} {r['travel_time_s']:9.3f}")
    for mode in ("corridor", "exact"):
        sel = [r for r in rows if r["mode"] == mode]
        if len(sel) >= 2:
            x = np.log([r["cells"] for r in sel])
            y = np.log([r["wall_s"] for r in sel])
            slope = float(np.polyfit(x, y, 1)[0])
            ym = np.log([r["peak_mb"] for r in sel])
            print(f"{mode}: time ~ cells^{slope:.2f}, peak memory ~ cells^{float(np.polyfit(x, ym, 1)[0]):.2f}")
    if a.out:
        with open(a.out, "w") as fh:
            json.dump(rows, fh, indent=2)


if __name__ == "__main__":
    main()
