"""Benchmark of the coarse-to-fine search on a large DEM (issue 8).

* ``large``   - 5000 x 5000 cells at 2 m (synthetic, deterministic, written as a tiled
  deflate GeoTIFF), friction route across ~7 km (diagonal), 16 neighbours, refinement
  on, through :func:`fallway.routing.find_route` with the corridor plan (windowed reads).  Targets: wall
  time < 300 s, peak memory (peak resident set of the process, VmHWM) < 8 GB.
* ``check``   - a 2000 x 2000 DEM (same generator): the corridor answer against the exact
  full-grid search (``plan="full"``), same search options.  Target: within 0.5 %.
* ``--hard``  - instead, the hard 5000 x 5000 case: the fractal hillside of
  ``scripts/bench_hard.py`` at 2 m cells (relief 30 m on a plane falling 0.25 along the
  diagonal), mu 0.2, drag 0.002 /m, the same 7.07 km route, run as a user runs it: plain
  ``fallway route`` (the command line in its own process: plan chosen by the tool, label
  budget from the memory, certified gap, refinement on).  Targets: wall < 300 s, peak
  < 8 GB, the gap reported.

Every case runs in its own process and reports its own peak (``VmHWM``; ``ru_maxrss``
of a child includes its parent's peak, which made the figures before 2026-12-02
include the DEM generation of the parent).  Run:
``python scripts/bench_large.py [--cap 4] [--out results.json]``, or
``python scripts/bench_large.py --hard``.

Measured 2026-12-02 after the compact kernel state (2 cores shared by three people,
load average ~3, so the wall time is inflated; --cap 4; peak = VmHWM):

* 5000 x 5000, 7.07 km straight: wall 633.5 s, peak 0.65 GB (663 MB); coarse read and
  search 0.7 + 1.2 s, corridors 80 m (287 412 cells) 0.9 + 3.3 s and 160 m (587 354
  cells) 1.2 + 6.9 s, the final find_route 619 s - the refinement (which did not
  report convergence: ``refine_converged`` False; it had changed since the figures
  below).  Travel time 280.676 s, lattice 281.838 s.  The search stages alone (no
  refinement) peak at 669 MB with the compact state and 851 MB with the full-window
  state (``scripts/bench_state.py``).

Re-measured 2026-12-02 04:50 UTC on a quiet machine (one process; --cap 4; VmHWM):
5000 x 5000, 7.07 km: wall 35.3-37.2 s, peak 0.70 GB; the search stages as above.  The
refinement (full normal-force model, 3536 vertices) kept the lattice line, 281.838 s: its
gravity-normal optimum stalls under the full model and the full-model polish of the
finest level stops at its budget (the 633 s run above returned a different, faster
line from a refinement version in the middle of being changed).

Measured 2026-12-03 on a quiet machine, ``--hard`` (the final code of that day): wall 85.1 s,
peak 1.28 GB, certified gap 0.0046 %; plan chosen by the tool: the corridor (coarse 1.2 s,
corridors 80 m and 160 m 5.6 s, whole-grid lower bound 70 s, refinement 2.8 s: it kept the
lattice line, 501.611 s).

Earlier figures (before 2026-12-02; their peaks are ``ru_maxrss``, which in a child
started by subprocess includes the parent's own peak - here the DEM generation - so
they overstate the case's memory; --cap 4, mu 0.2, drag 0.001 /m):

* 5000 x 5000, 7.07 km straight: wall 133 s, peak RSS 1.07 GB; of this the coarse read and
  search (500 x 500 at 20 m) 1.1 s, corridors 80 m (287 k cells) and 160 m (587 k cells)
  1.3 + 5.9 s read + search, the final find_route (the lattice search again + the
  refinement) 125 s - almost all of it the refinement.
* 2000 x 2000: corridor 176.6868 s lattice (53.6 s wall, 0.38 GB), exact full grid the
  same line (71.3 s wall, 0.79 GB); travel time 177.5488 s both: difference 0.0000 %.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time

import numpy as np

CELL = 2.0
X0, Y0 = 500_000.0, 5_200_000.0


def make_dem(n: int, path: str, seed: int = 11) -> None:
    """Regional fall to the south-east (grade 0.28 along the diagonal) plus smooth hills."""
    import rasterio
    from rasterio.transform import from_origin
    from scipy import ndimage

    rng = np.random.default_rng(seed)
    # hills: smoothed noise on a 4x coarser grid, upsampled (keeps the generation fast)
    m = n // 4 + 1
    h = ndimage.gaussian_filter(rng.normal(size=(m, m)), 12.0)
    h = ndimage.zoom(h, 4, order=3)[:n, :n]
    h *= 25.0 / np.abs(h).max()
    r, c = np.mgrid[0:n, 0:n].astype(np.float64)
    z = 3000.0 - 0.2 * CELL * (c + r) + h
    z = z.astype(np.float32)
    prof = dict(driver="GTiff", width=n, height=n, count=1, dtype="float32", crs="EPSG:32633",
                transform=from_origin(X0, Y0 + n * CELL, CELL, CELL), tiled=True, blockxsize=512,
                blockysize=512, compress="deflate", nodata=-9999.0)
    with rasterio.open(path, "w", **prof) as dst:
        dst.write(z, 1)


def make_hard_dem(n: int, path: str) -> None:
    """The hard hillside of ``scripts/bench_hard.py`` at 2 m cells, written like :func:`make_dem`'s."""
    import rasterio
    from rasterio.transform import from_origin

    sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
    from bench_hard import fractal_dem

    z = fractal_dem(n, relief=30.0, slope=0.25, cell=CELL, full=n).astype(np.float32)
    prof = dict(driver="GTiff", width=n, height=n, count=1, dtype="float32", crs="EPSG:32633",
                transform=from_origin(X0, Y0 + n * CELL, CELL, CELL), tiled=True, blockxsize=512,
                blockysize=512, compress="deflate", nodata=-9999.0)
    with rasterio.open(path, "w", **prof) as dst:
        dst.write(z, 1)


def cli_case(path, n, frac):
    """``fallway route`` as a user types it, in this process: wall time, peak, the summary."""
    from fallway.cli import main as cli

    start, end = points(n, frac)
    out = os.path.join(os.path.dirname(path), "route-out")
    args = ["route", path, "--start", str(start[0]), str(start[1]), "--end", str(end[0]), str(end[1]),
            "--mu", "0.2", "--drag", "0.002", "--out", out, "--overwrite", "--timings"]
    t0 = time.perf_counter()
    try:
        cli.main(args=args, standalone_mode=False)
    except SystemExit as e:  # the command line's failure exit (its message is on stderr)
        return {"wall_s": time.perf_counter() - t0, "peak_mb": peak_mb(), "exit": e.code}
    wall = time.perf_counter() - t0
    with open(os.path.join(out, "summary.json")) as fh:
        s = json.load(fh)
    with open(os.path.join(out, "run.json")) as fh:
        run = json.load(fh)
    keys = ("travel_time_s", "lattice_time_s", "optimality_gap", "search_plan", "corridor", "labels_created",
            "refine_choice", "refine_converged", "feasible", "search_exact")
    return {"wall_s": wall, "peak_mb": peak_mb(), "exit": 0, "run": run, **{k: s.get(k) for k in keys}}


def points(n: int, frac: float):
    """Start and end on the diagonal, ``frac`` of the side from each corner."""
    side = n * CELL
    a = frac * side
    return (X0 + a, Y0 + side - a), (X0 + side - a, Y0 + a)


def peak_mb() -> float:
    """Peak resident memory of this process, MB.

    ``VmHWM`` of /proc/self/status on Linux: a child started by ``subprocess`` (vfork +
    exec) inherits its parent's peak in ``ru_maxrss``, but not in ``VmHWM``.
    """
    try:
        with open("/proc/self/status") as fh:
            return int(next(ln for ln in fh if ln.startswith("VmHWM:")).split()[1]) / 1024.0
    except (OSError, StopIteration):
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def case(path, n, frac, cap, exact, refine):
    from fallway.params import SearchOptions
    from fallway.physics import Mover
    from fallway.routing import find_route

    start, end = points(n, frac)
    mover = Mover(mu=0.2, drag=0.001)
    t0 = time.perf_counter()
    search = SearchOptions(neighbours=16, label_cap=cap, plan="full" if exact else "corridor")
    r = find_route(path, start, end, mover, search=search, refine=refine)
    wall = time.perf_counter() - t0
    s = r.summary
    return {"wall_s": wall, "peak_mb": peak_mb(), "travel_time_s": s.travel_time_s,
            "lattice_time_s": s.lattice_time_s, "plan_length_m": s.plan_length_m, "search_plan": s.search_plan,
            "corridor": s.corridor, "compute_s": r.compute_s, "labels_created": s.labels_created,
            "refined": s.refined, "refine_converged": s.refine_converged, "feasible": s.feasible}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--case", default=None)
    ap.add_argument("--path")
    ap.add_argument("--n", type=int)
    ap.add_argument("--frac", type=float)
    ap.add_argument("--cap", type=int, default=4)
    ap.add_argument("--exact", action="store_true")
    ap.add_argument("--no-refine", action="store_true")
    ap.add_argument("--out", default=None)
    ap.add_argument("--skip-large", action="store_true")
    ap.add_argument("--skip-check", action="store_true", help="skip the 2000 x 2000 corridor-vs-exact check")
    ap.add_argument("--hard", action="store_true", help="the hard 5000 x 5000 case through plain fallway route")
    a = ap.parse_args()
    if a.case == "cli":
        print(json.dumps(cli_case(a.path, a.n, a.frac)))
        return
    if a.case:
        print(json.dumps(case(a.path, a.n, a.frac, a.cap, a.exact, not a.no_refine)))
        return
    if a.hard:
        with tempfile.TemporaryDirectory() as d:
            p5 = os.path.join(d, "hard5000.tif")
            t0 = time.perf_counter()
            make_hard_dem(5000, p5)
            print(f"hard dem 5000 written in {time.perf_counter() - t0:.1f} s", flush=True)
            out = subprocess.run([sys.executable, __file__, "--case", "cli", "--path", p5, "--n", "5000",
                                  "--frac", "0.25"], capture_output=True, text=True)
            sys.stderr.write(out.stderr[-2000:])
            res = json.loads(out.stdout.strip().splitlines()[-1])
            print("hard", json.dumps(res), flush=True)
            print(f"5000 x 5000 hard, plain fallway route: wall {res['wall_s']:.1f} s (target < 300), peak "
                  f"{res['peak_mb'] / 1024:.2f} GB (target < 8), gap {res.get('optimality_gap')}, exit {res['exit']}")
            if a.out:
                with open(a.out, "w") as fh:
                    json.dump({"hard": res}, fh, indent=2)
        return
    results = {}
    with tempfile.TemporaryDirectory() as d:
        def child(name, path, n, frac, exact, refine=True):
            cmd = [sys.executable, __file__, "--case", name, "--path", path, "--n", str(n), "--frac", str(frac),
                   "--cap", str(a.cap)] + (["--exact"] if exact else []) + ([] if refine else ["--no-refine"])
            out = subprocess.run(cmd, check=True, capture_output=True, text=True)
            res = json.loads(out.stdout.strip().splitlines()[-1])
            results[name] = res
            print(name, json.dumps(res), flush=True)

        # 2000 x 2000: corridor against exact, both on the full-resolution DEM
        if not a.skip_check:
            p2 = os.path.join(d, "dem2000.tif")
            t0 = time.perf_counter()
            make_dem(2000, p2)
            print(f"dem 2000 written in {time.perf_counter() - t0:.1f} s", flush=True)
            child("check_corridor", p2, 2000, 0.15, False)
            child("check_exact", p2, 2000, 0.15, True)
            c, e = results["check_corridor"], results["check_exact"]
            for k in ("lattice_time_s", "travel_time_s"):
                rel = (c[k] - e[k]) / e[k]
                results[f"check_rel_{k}"] = rel
                print(f"2000 x 2000: {k} corridor {c[k]:.4f} s, exact {e[k]:.4f} s, rel diff {100 * rel:+.4f} %")
        if not a.skip_large:
            p5 = os.path.join(d, "dem5000.tif")
            t0 = time.perf_counter()
            make_dem(5000, p5)
            print(f"dem 5000 written in {time.perf_counter() - t0:.1f} s "
                  f"({os.path.getsize(p5) / 1e6:.0f} MB)", flush=True)
            # a quarter of the side in from opposite corners: 0.5 * 10 km * sqrt(2) = 7.07 km straight
            child("large", p5, 5000, 0.25, False)
            L = results["large"]
            print(f"5000 x 5000: wall {L['wall_s']:.1f} s (target < 300), peak {L['peak_mb'] / 1024:.2f} GB "
                  f"(target < 8), travel time {L['travel_time_s']:.3f} s")
    if a.out:
        with open(a.out, "w") as fh:
            json.dump(results, fh, indent=2)


if __name__ == "__main__":
    main()
