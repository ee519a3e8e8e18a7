"""Hard-terrain benchmark of the lattice route search (issue 17), side by side with scipy.

The terrain: fractal relief by spectral synthesis (Gaussian noise filtered to a power
spectrum falling as k^-(beta+1), beta 2.6, the classic fractional-Brownian surface
construction; Saupe, "Algorithms for random fractals", in The Science of Fractal Images,
1988) scaled to ``--relief`` metres peak to peak, on a plane falling ``--slope`` along the
diagonal; 10 m cells; friction ``--mu`` = slope - 0.05; drag 0.002 /m; 16 neighbours;
start and end 5 % in from opposite corners; no refinement.

Cases, each in its own process so that its peak memory (``VmHWM``) is its own:

* ``scipy`` - graph build plus ``scipy.sparse.csgraph.dijkstra`` on the same lattice (the
  16-neighbour edges with their break points, static frictionless edge times; the figure the
  issue's target is set against: the search below must take at most 3 x this);
* ``route`` - :func:`fallway.lattice.search.lattice_line` with the certified gap target
  ``--gap`` (exact first search on its small budget, then the relaxed searches of
  :mod:`fallway.lattice.gap`), label budget ``--max-labels``: time, the gap reached, the
  rounds, peak memory;
* ``cap`` - the same search with ``label_cap=2`` (no bound), for reference.

Run: ``python scripts/bench_hard.py [--size 1000] [--gap 0.001] [--max-labels N]``.

Measured 2026-12-02 (2 cores shared by about six people: wall times inflated and noisy):
see DEVELOPERS.md, "Benchmarks".
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

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from bench_large import peak_mb  # noqa: E402

CELL = 10.0


def fractal_dem(n: int, *, seed: int = 7, relief: float = 40.0, slope: float = 0.2, beta: float = 2.6,
                cell: float = CELL, full: int = 1000) -> np.ndarray:
    """The hard hillside: a ``full`` x ``full`` fractal field (periodic FFT synthesis) on a
    falling plane, cropped to its ``n`` x ``n`` north-west corner when ``n < full``."""
    m = max(n, full)
    rng = np.random.default_rng(seed)
    k = np.hypot(np.fft.fftfreq(m)[:, None], np.fft.rfftfreq(m)[None, :])
    k[0, 0] = 1.0
    amp = k ** (-(beta + 1.0) / 2.0)
    amp[0, 0] = 0.0
    f = np.fft.irfft2(amp * (rng.normal(size=amp.shape) + 1j * rng.normal(size=amp.shape)), s=(m, m))
    f *= relief / (f.max() - f.min())
    r, c = np.mgrid[0:m, 0:m]
    z = 1000.0 + f - slope * cell * (r + c) / math.sqrt(2.0)
    return np.ascontiguousarray(z[:n, :n])


def ends(n: int):
    q = n // 20
    return (q, q), (n - 1 - q, n - 1 - q)


def case_scipy(a) -> dict:
    from bench_search import scipy_dijkstra

    z = fractal_dem(a.size, relief=a.relief, slope=a.slope)
    (r0, c0), _ = ends(a.size)
    out = scipy_dijkstra(z, CELL, a.v0, r0 * a.size + c0)
    out.pop("dist")
    return {"case": "scipy"} | out


def case_route(a, cap: bool) -> dict:
    from fallway.errors import FallwayError
    from fallway.lattice.search import lattice_line
    from fallway.params import SearchOptions
    from fallway.physics import Mover
    from fallway.terrain import Terrain

    n = a.size
    z = fractal_dem(n, relief=a.relief, slope=a.slope)
    t = Terrain.from_array(z, (CELL, 0, 0.0, 0, -CELL, n * CELL))
    mv = Mover(mu=a.slope - 0.05, drag=0.002, v0=a.v0, normal="gravity")
    small = Terrain.from_array(-0.3 * CELL * np.add.outer(np.arange(12.0), np.arange(12.0)),
                               (CELL, 0, 0.0, 0, -CELL, 12 * CELL))
    lattice_line(small, small.cell_center(0, 0), small.cell_center(11, 11), mv)  # compile outside the clock
    (r0, c0), (r1, c1) = ends(n)
    opts = SearchOptions(neighbours=16, label_cap=2) if cap else SearchOptions(neighbours=16, gap=a.gap,
                                                                                 max_labels=a.max_labels)
    t0 = time.perf_counter()
    try:
        ln = lattice_line(t, t.cell_center(r0, c0), t.cell_center(r1, c1), mv, options=opts)
    except FallwayError as err:  # recorded (e.g. the label budget spent), not hidden
        return {"case": "cap" if cap else "route", "error": str(err), "wall_s": time.perf_counter() - t0,
                "peak_mb": peak_mb()}
    wall = time.perf_counter() - t0
    st = ln.stats
    return {"case": "cap" if cap else "route", "wall_s": wall, "time_s": ln.time_s,
            "gap": st.get("optimality_gap"), "lower_bound_s": st.get("lower_bound_s"),
            "labels": st.get("labels_created"), "rounds": st.get("gap_rounds"), "peak_mb": peak_mb()}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--size", type=int, default=1000)
    ap.add_argument("--gap", type=float, default=0.001)
    ap.add_argument("--max-labels", type=int, default=None)
    ap.add_argument("--relief", type=float, default=40.0)
    ap.add_argument("--slope", type=float, default=0.2)
    ap.add_argument("--v0", type=float, default=2.0)
    ap.add_argument("--case", choices=["scipy", "route", "cap"])
    a = ap.parse_args()
    if a.case:
        out = case_scipy(a) if a.case == "scipy" else case_route(a, a.case == "cap")
        print(json.dumps(out))
        return
    rows = {}
    for case in ("scipy", "route", "cap"):
        args = [sys.executable, __file__, "--case", case] + sys.argv[1:]
        res = subprocess.run(args, capture_output=True, text=True, check=False)
        if res.returncode != 0:
            print(f"{case}: failed\n{res.stderr[-2000:]}")
            continue
        rows[case] = json.loads(res.stdout.strip().splitlines()[-1])
    base = rows.get("scipy", {}).get("total_s")
    print(f"hard hillside {a.size} x {a.size}, 16 neighbours, mu {a.slope - 0.05:g}, drag 0.002 /m")
    for case, r in rows.items():
        wall = r.get("total_s", r.get("wall_s"))
        ratio = f"{wall / base:6.2f} x scipy" if base else ""
        extra = ""
        if case != "scipy":
            extra = (f"  error: {r['error']}" if "error" in r else
                     f"  time {r['time_s']:.3f} s  gap {r['gap']}  labels {r['labels']}")
        print(f"{case:6s} {wall:8.2f} s {ratio}  peak {r['peak_mb']:.0f} MB{extra}")
        for rnd in r.get("rounds") or []:
            print(f"         round {rnd}")


if __name__ == "__main__":
    main()
