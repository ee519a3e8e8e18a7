"""Benchmark the robust lattice search (fallway.lattice.robust) on seeded rough DEMs.

Usage: python scripts/bench_robust.py [--sizes 60 100] [--budget 5000000]

For each size it times: no drag, no speed limit; with drag; with a speed limit that binds
at LO friction, exact and at an energy resolution of 1 %.  Prints labels and seconds (best of
one run: the robust search is long; the machine may be shared).
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from fallway.errors import NoFeasibleLine
from fallway.lattice.robust import robust_lattice_line
from fallway.physics import Mover
from fallway.terrain import Terrain


def dem(n: int, seed: int = 1) -> Terrain:
    rng = np.random.default_rng(seed)
    base = -0.35 * np.add.outer(np.arange(n), 1.2 * np.arange(n)) * 2.0
    bumps = rng.normal(0.0, 0.4, (n, n))
    from scipy.ndimage import gaussian_filter

    z = base + 6.0 * gaussian_filter(bumps, 3.0)
    return Terrain.from_array(z, (2.0, 0, 0, 0, -2.0, 2.0 * n))


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", type=int, nargs="+", default=[60, 100])
    ap.add_argument("--budget", type=int, default=5_000_000)
    a = ap.parse_args()
    for n in a.sizes:
        t = dem(n)
        s, e = t.cell_center(0, 0), t.cell_center(n - 1, n - 1)
        cases = [("no drag", Mover(mu=0.15, normal="gravity"), 0.0),
                 ("drag 0.004, exact", Mover(mu=0.15, drag=0.004, normal="gravity"), 0.0),
                 ("drag 0.004, res 1 %", Mover(mu=0.15, drag=0.004, normal="gravity"), 0.01)]
        free = robust_lattice_line(t, s, e, Mover(mu=0.15, normal="gravity"), 0.1, 0.25)
        from fallway.physics import traverse

        vlo = float(np.max(traverse(free.points, Mover(mu=0.1, normal="gravity")).speed_m_s))
        cap = 0.97 * vlo
        cases += [(f"limit {cap:.1f} m/s, exact", Mover(mu=0.15, max_speed=cap, normal="gravity"), 0.0),
                  (f"limit {cap:.1f} m/s, res 1 %", Mover(mu=0.15, max_speed=cap, normal="gravity"), 0.01)]
        for name, m, res in cases:
            t0 = time.perf_counter()
            try:
                ln = robust_lattice_line(t, s, e, m, 0.1, 0.25, max_labels=a.budget, resolution=res)
                what = f"{ln.time_s:9.4f} s nominal, {ln.stats['labels_created']:>9} labels"
            except NoFeasibleLine as err:
                what = f"none: {str(err)[:60]}"
            print(f"{n:>4}x{n:<4} {name:<28} {time.perf_counter() - t0:7.2f} s wall  {what}", flush=True)


if __name__ == "__main__":
    main()
