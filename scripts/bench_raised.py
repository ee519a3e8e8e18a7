"""Benchmark: the raised-line search (cells x height layers), time and memory; the lattice
line's time error against the refined line as the layers grow.

Cases (each configuration in its own process, peak memory from its own VmHWM):
  grid500: a 500 x 500 grid of 2 m cells, a tilted V valley (z = 200 + 0.15 |x - 500|
           - 0.08 x, plus gentle waves), a raised line across it (900 m, band 2-60 m,
           20 m up at the start, 5 m at the end, mu = 0.05), default corridor;
  demo:    the bundled sample site (fallway.sample_terrain, 300 x 400 cells of 2 m), from
           the bench lip to the valley hopper (the cable line's points), band 2-30 m,
           10 m -> 3 m, mu = 0.15;
  each with 8, 16 and 32 height layers (16 neighbours).  Search time is measured after a
  warm-up search (numba compile excluded); memory is the process's peak.
Error against the layers: the flat-floor friction brachistochrone (L = 100 m, H = 40 m,
mu = 0.1; Ashby et al. 1975, T = 6.0554116 s, shared/CHECKS.md) and the demo case: the
lattice time over the refined time (find_route) minus 1, for 4 to 64 layers.

Run: python scripts/bench_raised.py            (all; a few minutes)
     python scripts/bench_raised.py grid500 16  (one configuration, JSON on stdout)
     python scripts/bench_raised.py errors flat (the error against the layers, one case)
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
import warnings
from pathlib import Path

import numpy as np

from fallway.params import LineSpec, Mover, SearchOptions
from fallway.terrain import Terrain


def peak_mb() -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024.0
    return float("nan")


def grid500():
    n, cell = 500, 2.0
    y, x = (np.mgrid[0:n, 0:n] + 0.5) * cell
    z = 200.0 + 0.15 * np.abs(x - 500.0) - 0.08 * x + 2.0 * np.sin(x / 37.0) * np.cos(y / 53.0)
    t = Terrain.from_array(z, (cell, 0, 0.0, 0, -cell, n * cell))
    return t, (50.0, 500.0), (950.0, 500.0), Mover(mu=0.05, normal="gravity"), ((2.0, 60.0), 20.0, 5.0)


def demo():
    from importlib.resources import as_file, files

    from fallway.terrain import load_terrain

    with as_file(files("fallway.sample_terrain") / "site.tif") as p:
        t = load_terrain(str(p))
    return t, (448321.0, 5212467.0), (448561.0, 5212151.0), Mover(mu=0.15, normal="gravity"), ((2.0, 30.0), 10.0, 3.0)


def flat():
    t = Terrain.from_array(np.zeros((30, 131)), (1.0, 0, 0.0, 0, -1.0, 30.0))
    return t, (15.5, 15.0), (115.5, 15.0), Mover(mu=0.1, normal="gravity"), ((0.0, 100.0), 70.0, 30.0)


CASES = {"grid500": grid500, "demo": demo, "flat": flat}


def one(case: str, layers: int) -> dict:
    from fallway.lattice.raised import raised_lattice_line

    t, a, b, mover, (band, h0, h1) = CASES[case]()
    spec = LineSpec("raised", band, h0, h1, height_layers=layers)
    small = Terrain.from_array(np.zeros((6, 12)), (1.0, 0, 0, 0, -1.0, 6.0))
    raised_lattice_line(small, (0.5, 3.0), (11.5, 3.0), Mover(mu=0.0), LineSpec("raised", (0, 5), 5, 1))  # compile
    t0 = time.perf_counter()
    ln = raised_lattice_line(t, a, b, mover, spec, options=SearchOptions(neighbours=16))
    dt = time.perf_counter() - t0
    st = ln.stats
    return {"case": case, "layers": layers, "search_s": round(dt, 3), "peak_mb": round(peak_mb(), 1),
            "estimate_mb": round(st["memory_estimate_bytes"] / 2 ** 20, 1), "cells": st["state_cells"],
            "states": st["states"], "labels_created": st["labels_created"], "labels_settled": st["labels_settled"],
            "lattice_time_s": round(ln.time_s, 4)}


def error_vs_layers(case: str) -> list[dict]:
    from fallway import find_route
    from fallway.errors import RefinementWarning
    from fallway.params import Limits

    t, a, b, mover, (band, h0, h1) = CASES[case]()
    rows = []
    for layers in (4, 8, 16, 32, 64):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RefinementWarning)
            r = find_route(t, a, b, mover, line=LineSpec("raised", band, h0, h1, height_layers=layers),
                           limits=Limits(allow_liftoff=True), workable=False)
        s = r.summary
        rows.append({"case": case, "layers": layers, "lattice_s": round(s.lattice_time_s, 4),
                     "refined_s": round(s.travel_time_s, 4),
                     "lattice_over_refined": round(s.lattice_time_s / s.travel_time_s - 1, 4)})
    return rows


def main(argv):
    if len(argv) == 3 and argv[1] in CASES:
        print(json.dumps(one(argv[1], int(argv[2]))))
        return
    if len(argv) >= 2 and argv[1] == "errors":
        for case in argv[2:] or ("flat", "demo"):
            for row in error_vs_layers(case):
                print(json.dumps(row))
        return
    for case in ("grid500", "demo"):
        for layers in (8, 16, 32):
            out = subprocess.run([sys.executable, __file__, case, str(layers)], capture_output=True, text=True)
            print(out.stdout.strip() or out.stderr.strip().splitlines()[-1])
    out = subprocess.run([sys.executable, __file__, "errors"], capture_output=True, text=True)
    print(out.stdout.strip() or out.stderr.strip().splitlines()[-1])


if __name__ == "__main__":
    main(sys.argv)
