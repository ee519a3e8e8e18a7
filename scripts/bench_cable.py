"""Benchmark of the cable support search: a 2 km line on a rough synthetic profile.

The profile: a DEM strip 2.1 km long at 5 m cells falling 15 % on average, with rough
relief (Gaussian-filtered noise, about +-15 m) and a 25 m ridge at two thirds of the way;
the line runs along the strip's middle row.  Search: candidate sites every 25 m (81
sites), support heights 4 to 20 m in 1 m steps (17 per site), spans up to 300 m,
clearance band 2-25 m, H = 60 kN, P = 5 kN, q = 20 N/m, a carrier with mu = 0.02 and
drag 0.0012 /m (no speed cap: an exact search, or ``--resolution`` m/s: the approximate
one).  Either objective.  Wall time of
:func:`fallway.cable.place_supports` and the process's peak memory (``VmHWM``).

Run: ``.venv/bin/python scripts/bench_cable.py [--step 25] [--objective time] [--resolution 0.05]``.

Measured 2026-12-02 on 2 cores shared by about six people: see DEVELOPERS.md.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from bench_large import peak_mb  # noqa: E402  (one VmHWM reader for every benchmark)


def strip(seed: int = 11):
    from affine import Affine
    from scipy import ndimage

    from fallway.terrain import Terrain

    cell, cols, rows = 5.0, 420, 12
    x = (np.arange(cols) + 0.5) * cell
    rng = np.random.default_rng(seed)
    rough = ndimage.gaussian_filter1d(rng.normal(size=cols), 4.0)
    rough *= 15.0 / np.abs(rough).max()
    z = 600.0 - 0.15 * x + rough + 25.0 * np.exp(-(((x - 1400.0) / 60.0) ** 2))
    return Terrain.from_array(np.tile(z, (rows, 1)), Affine(cell, 0, 0, 0, -cell, rows * cell)), cell, rows


def main() -> None:
    from fallway.cable import CableSpec, place_supports
    from fallway.physics import Mover

    ap = argparse.ArgumentParser()
    ap.add_argument("--step", type=float, default=25.0, help="station step, m")
    ap.add_argument("--objective", choices=["time", "supports"], default="time")
    ap.add_argument("--resolution", type=float, default=None, help="speed resolution, m/s (default: exact)")
    a = ap.parse_args()
    terrain, cell, rows = strip()
    y = rows * cell / 2
    start, end = (25.0, y), (2025.0, y)
    spec = CableSpec(start_height_m=8, end_height_m=6, support_height_m=(4, 20), height_step_m=1, max_span_m=300,
                     clearance_m=(2, 25), cable_tension_kn=60, carrier_load_kn=5, cable_weight_n_m=20,
                     station_step_m=a.step, objective=a.objective, speed_resolution_m_s=a.resolution)
    mover = Mover(mu=0.02, drag=0.0012)
    place_supports(terrain, [start, (start[0] + 60, y)], spec, mover)  # compile the kernels first
    t0 = time.perf_counter()
    lay = place_supports(terrain, [start, end], spec, mover)
    dt = time.perf_counter() - t0
    print(f"objective {a.objective}, step {a.step:g} m, resolution {a.resolution}: {dt:.2f} s, peak {peak_mb():.0f} MB; "
          f"{lay.support_count} supports, carrier {lay.travel_time_s:.2f} s, exit {lay.profile.speed_m_s[-1]:.2f} m/s, "
          f"exact {lay.exact}; {lay.stats}")


if __name__ == "__main__":
    main()
