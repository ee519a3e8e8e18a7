"""Benchmark: fallway.physics.traverse on a 10,000-vertex 3D line, both normal models.

Target (issue 3): under 20 ms per call after compilation.  Reports the median (and the
best) of repeated calls, measured after a warm-up call that compiles the kernels.

    python scripts/bench_traverse.py [--vertices 10000] [--repeats 50]
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

from fallway.physics import Mover, traverse


def winding_line(n: int) -> np.ndarray:
    """A descending, winding, undulating 3D line (about 1 m spacing, 20 % mean grade)."""
    s = np.linspace(0.0, n - 1.0, n)
    x = s
    y = 60.0 * np.sin(s / 90.0) + 5.0 * np.sin(s / 7.0)
    z = 3000.0 - 0.2 * s + 1.5 * np.sin(s / 25.0)
    return np.column_stack([x, y, z])


def bench(points: np.ndarray, mover: Mover, repeats: int) -> tuple[float, float, object]:
    profile = traverse(points, mover)  # warm-up: compile (or load the cache)
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        traverse(points, mover)
        times.append(time.perf_counter() - t0)
    return statistics.median(times), min(times), profile


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--vertices", type=int, default=10_000)
    ap.add_argument("--repeats", type=int, default=50)
    args = ap.parse_args()
    pts = winding_line(args.vertices)
    print(f"traverse on {args.vertices} vertices, {args.repeats} repeats after warm-up")
    for normal in ("gravity", "full"):
        mover = Mover(mu=0.08, drag=0.002, v0=3.0, normal=normal)
        med, best, p = bench(pts, mover, args.repeats)
        status = f"exit {p.exit_speed_m_s:.3f} m/s, {p.travel_time_s:.2f} s" if p.feasible \
            else f"stalled at {p.stalled_at_m:.1f} m"
        print(f"  normal={normal:8s} median {med * 1e3:7.3f} ms   best {best * 1e3:7.3f} ms   ({status})")


if __name__ == "__main__":
    main()
