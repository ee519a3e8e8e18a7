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

Scaling: ``python scripts/bench_hard.py --scaling 500 1000 2000 3000 5000 [--scipy-up-to 4000000]``
runs ``route`` (and ``scipy`` up to that many cells: its graph of 16 edges per cell takes
about 0.5 kB per cell to build) at each size, each in its own process, and prints the
table with the growth exponents (least-squares slope of log time and log peak memory
against log cells).  Sizes above 1000 synthesise their own field of that size (the same
spectrum, relief and plane), so the terrain statistics match.

Measured 2026-12-03 (2 cores shared; wall times noisy), figures in DEVELOPERS.md
("Certified optimality gap"): 1000 x 1000 exact (gap 0) in 3.63 s = 2.13 x scipy's 1.71 s,
257 MB; the scaling table 0.25 M - 25 M cells, time ~ cells^1.08, gap <= 0.093 %.
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
    falling plane, cropped to its ``n`` x ``n`` north-west corner when ``n < full``; a
    larger ``n`` synthesises its own field, its relief scaled by ``(n / full)^H`` (``H =
    (beta - 1) / 2``, the fBm growth of relief with size) so that the local slopes keep
    the statistics of the ``full`` field."""
    m = max(n, full)
    rng = np.random.default_rng(seed)
    k = np.hypot(np.fft.fftfreq(m)[:, None], np.fft.rfftfreq(m)[None, :])
    k[0, 0] = 1.0
    amp = k ** (-(beta + 1.0) / 2.0)
    amp[0, 0] = 0.0
    f = np.fft.irfft2(amp * (rng.normal(size=amp.shape) + 1j * rng.normal(size=amp.shape)), s=(m, m))
    # a field larger than ``full`` keeps the local roughness of the ``full`` one: fBm relief
    # grows with size as size^H, H = (beta - 1) / 2
    f *= relief * (m / full) ** ((beta - 1.0) / 2.0) / (f.max() - f.min())
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
    return {"case": "cap" if cap else "route", "wall_s": wall, "time_s": ln.time_s, "bound_s": st.get("cell_bound_s"),
            "gap": st.get("optimality_gap"), "lower_bound_s": st.get("lower_bound_s"),
            "labels": st.get("labels_created"), "rounds": st.get("gap_rounds"), "peak_mb": peak_mb()}


def _child(case: str, size: int, a) -> dict:
    args = [sys.executable, __file__, "--case", case, "--size", str(size), "--gap", str(a.gap),
            "--relief", str(a.relief), "--slope", str(a.slope), "--v0", str(a.v0)]
    if a.max_labels:
        args += ["--max-labels", str(a.max_labels)]
    res = subprocess.run(args, capture_output=True, text=True, check=False)
    if res.returncode != 0:
        return {"case": case, "error": res.stderr.strip().splitlines()[-1] if res.stderr.strip() else "failed"}
    return json.loads(res.stdout.strip().splitlines()[-1])


def scaling(a) -> None:
    """The scaling table on the hard hillside (route with the certified gap; scipy where it fits)."""
    rows = []
    print(f"hard hillside, 16 neighbours, mu {a.slope - 0.05:g}, drag 0.002 /m, gap target {a.gap:g}")
    print(f"{'cells':>10s} {'route s':>9s} {'peak MB':>8s} {'gap':>9s} {'labels':>9s} {'scipy s':>8s} "
          f"{'scipy MB':>8s} {'ratio':>6s}")
    for n in a.scaling:
        r = _child("route", n, a)
        sc = _child("scipy", n, a) if n * n <= a.scipy_up_to else None
        rows.append((n * n, r))
        if "error" in r:
            print(f"{n * n:>10d} route failed: {r['error']}")
            continue
        sct = sc.get("total_s") if sc and "error" not in sc else None
        scm = sc.get("peak_mb") if sc and "error" not in sc else None
        print(f"{n * n:>10d} {r['wall_s']:9.2f} {r['peak_mb']:8.0f} {r['gap']!s:>9.9s} {r['labels']:>9d} "
              + (f"{sct:8.2f} {scm:8.0f} {r['wall_s'] / sct:6.2f}" if sct else f"{'-':>8s} {'-':>8s} {'-':>6s}"),
              flush=True)
    ok = [(c, r) for c, r in rows if "error" not in r]
    if len(ok) >= 2:
        lc = np.log([c for c, _ in ok])
        et = np.polyfit(lc, np.log([r["wall_s"] for _, r in ok]), 1)[0]
        em = np.polyfit(lc, np.log([r["peak_mb"] for _, r in ok]), 1)[0]
        print(f"route: time ~ cells^{et:.2f}, peak memory ~ cells^{em:.2f}")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--size", type=int, default=1000)
    ap.add_argument("--gap", type=float, default=0.001)
    ap.add_argument("--max-labels", type=int, default=None)
    ap.add_argument("--relief", type=float, default=40.0)
    ap.add_argument("--slope", type=float, default=0.2)
    ap.add_argument("--v0", type=float, default=2.0)
    ap.add_argument("--case", choices=["scipy", "route", "cap"])
    ap.add_argument("--scaling", type=int, nargs="+", default=None, help="sizes (n of n x n) for the scaling table")
    ap.add_argument("--scipy-up-to", type=int, default=4_000_000)
    a = ap.parse_args()
    if a.scaling:
        scaling(a)
        return
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
