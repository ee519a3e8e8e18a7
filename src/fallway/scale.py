"""Large terrain: windows of a DEM, coarse copies, corridors, memory estimates.

The plans that use these live in :mod:`fallway.routing` (the one orchestrator).

Coarse-to-fine (the corridor plan of :func:`fallway.routing.find_route`)
-----------------------------------------------------------------------
1. *Coarse grid.*  The DEM around the end points (their bounding box plus a search
   margin) is read at ``coarse_factor`` times the native cell size.  Heights are the
   block **mean** of the fine cells (what :func:`fallway.terrain.load_terrain`'s average
   resampling gives for a file; the same block mean for an in-memory terrain).  The mean
   is the right choice: it keeps the heights - so the drops and the mean slopes that
   drive the motion - unbiased, and the coarse travel time is then an estimate of the
   fine one, not a bound.  A block *minimum* would lower every cell to its deepest fine
   point, so every coarse segment would start and end "in the holes": drops between
   neighbouring blocks become noise of the relief within a block, mean slopes are
   distorted, and flats turn into chains of pits that cost speed in the search but not
   in reality.  The coarse line only has to find the right valley, not the exact time.
   Keep-out cells of the coarse grid are those whose fine cells are *all* blocked (an
   optimistic coarse grid never closes a passage the fine grid has; thin walls it
   cannot see are handled by the corridor widening below).
2. *Corridor.*  On the fine grid, cells farther than ``corridor_m`` (plan distance) from
   the coarse line are blocked (the line is rasterised with
   ``rasterio.features.rasterize(all_touched=True)`` and the distance comes from
   ``scipy.ndimage.distance_transform_edt``), and only the bounding box of the corridor
   (plus two cells) is read from the file (``load_terrain(bounds=...)``: a rasterio
   window).  The lattice search runs on that window with the corridor as its *domain*
   (``allowed``), not as a keep-out: a step that fails is diagnosed inside the corridor
   (``reason="corridor"`` when only the corridor blocks).
3. *Widening rule.*  The corridor is doubled and the search repeated.  It stops at the
   first step ``k >= 1`` where both steps ``k - 1`` and ``k`` found a line and step
   ``k`` improved on the best lattice time so far by no more than ``widen_tol``
   (relative): ``T_best - T[k] <= widen_tol * T[k]``; or when the corridor covers the
   whole search area (the answer is then the full-grid answer there); or after
   ``max_widen`` widenings.  A step without a feasible line (the corridor cut every
   passage) always widens.  The accepted answer is the step with the least lattice
   time (the first of equals); its lattice line is refined (not searched again).  The
   steps are in ``summary.corridor["steps"]``.

   Since the corridors are nested, the exact lattice time never rises from one step to
   the next; with ``label_cap`` (a label cap: an approximate search) it can - a
   wider corridor lets more early labels crowd a cell - which is why the least time,
   not the last, is kept.  The rule stops once the extra room is no longer used.  It
   is a heuristic stop (a better line far outside the corridor can in principle
   exist); ``SearchOptions(plan="full")`` searches the whole area when it fits.

Memory (:func:`search_memory_bytes`)
-------------------------------------
The kernel's per-state arrays are sized for the *searchable* cells only (the corridor
minus nodata and keep-out; :mod:`fallway.lattice.kernel`, "Compact state"), so a
corridor search on a large window pays the window price only for its grids.  Counted
from what the kernel and its Python front allocate:

* per window cell, 31 B: 8 (Terrain heights) + 8 (flat float64 heights) + 3 (nodata,
  keep-out, blocked flags) + 4 (int32 compact index) + 8 (transient masks and copies
  while the problem is built);
* per search state (searchable cell × via-leg × heading when a turn limit is set),
  24 B (``emax``, ``open_t``, ``open_v2`` float64) + 4 B when ``max_per_cell`` caps
  the labels;
* a point-to-point search of up to 8 legs adds its per-cell A* bound
  (:mod:`fallway.lattice.bound`): 8 B per searchable cell (the energy ceiling U) + 8 B
  per cell and leg (the time to go H) + 20 B per searchable cell for the passes'
  indexed queue (key, cell, compact cell, position) + 16 B of margin, not itemised (the
  1000² corridor probe of ``tests/test_memory.py``, a search the bound keeps to 22 k
  labels, peaked 9 B per searchable cell above the itemised count);
* reach adds 16 B per searchable cell (best time and v², compact) + 24 B per window
  cell (the window-shaped time and speed maps and a transient copy);
* per label 26 B (t, v² float64; node, parent int32; leg, heading int8) + 12 B of heap,
  times 2 for the doubling growth: during the copy the old (full) array and the new one
  are both resident; the unused half of the new one is never written, and pages never
  written cost no memory (measured: 3 overestimated the peak by about half).

The number of labels is not known in advance: the estimate takes ``labels_per_cell``
labels per state (default 4 - measured 1 to 3 on the benchmark DEMs with a small cap;
the exact Pareto search on rough terrain can need far more - or ``max_per_cell`` when that
is smaller: a cap only removes labels, so a cap above the default never raises the
estimate over the uncapped search's).  ``tests/test_scale.py`` checks the estimate against the peak resident memory of
a search in a fresh process (with the label count of that search).

Reach cut-off (:func:`fallway.routing.reach`)
---------------------------------------------
Two bounds work together.  The *area* bounds what is read: a window around the start,
cells outside a disc blocked.  With ``max_time_s = t`` the disc radius is ``V t`` with
``V = sqrt(v0² + 2 g (z_start - z_min))`` (energy height over the lowest cell: no mover
is faster), so every line that arrives within ``t`` lies inside the disc.  The *time*
bounds the search: the kernel neither queues nor settles labels later than ``t``
(:func:`fallway.lattice.search.reach` ``max_time_s``), so it stops expanding at the
cut-off instead of filling the disc; the map is exact up to ``t`` and NaN beyond.  With
``max_distance_m = R`` lines are *confined* to the disc of plan radius ``R``: times
are exact for cells whose best line stays inside it, and the map may miss cells (or
give a later time) where the best line would leave the disc.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np

from .errors import ParameterError, TerrainError
from .keepout import Keepout
from .physics import Mover

__all__ = ["search_memory_bytes", "search_seconds", "SEARCH_SECONDS_PER_CELL", "bound_memory_bytes", "check_memory",
           "available_bytes", "terrain_source", "box_around", "corridor_outside", "lowest_within",
           "DEFAULT_COARSE_CELLS"]

#: The auto coarse factor aims at about this many cells on the coarse grid.
DEFAULT_COARSE_CELLS = 250_000

_B_CELL = 8 + 8 + 3 + 4 + 8
_B_STATE = 24
_B_LABEL = 26 + 12
_B_REACH_ACTIVE = 16
_B_REACH_CELL = 24
_B_BOUND_ACTIVE = 8 + 20 + 16
_B_BOUND_LEG = 8
#: The per-cell A* bound (:mod:`fallway.lattice.bound`: one float64 array per leg and
#: cell) is computed for routes of up to this many legs; longer chains use the straight bound.
CELL_BOUND_MAX_LEGS = 8
_GROWTH = 2.0


#: Wall seconds of a full-grid route search per cell of its window (16 neighbours, one
#: leg): the two bound passes and the label search on the hard hillside of
#: ``scripts/bench_hard.py``, 3.3-4.3 µs per cell from 1 M to 9 M cells on this project's
#: 2-core machine (DEVELOPERS.md, "Benchmarks"), rounded up.  A planning figure, not a promise.
SEARCH_SECONDS_PER_CELL = 4.5e-6


def search_seconds(cells: int, *, neighbours: int = 16, legs: int = 1) -> float:
    """Rough wall time of a full-grid route search over ``cells`` cells, seconds.

    The measured cost per cell (:data:`SEARCH_SECONDS_PER_CELL`) scaled with the stencil
    (edges per cell) and the legs (each leg searches the grid again).

    Examples
    --------
    >>> round(search_seconds(1_000_000), 1), round(search_seconds(1_000_000, neighbours=32, legs=2), 1)
    (4.5, 18.0)
    """
    return float(cells) * SEARCH_SECONDS_PER_CELL * (neighbours / 16.0) * max(int(legs), 1)


def search_memory_bytes(cells: int, *, active_cells: int | None = None, neighbours: int = 16, legs: int = 1,
                        turn_limit: bool = False, max_per_cell: int | None = None,
                        labels_per_cell: float | None = None, reach: bool = False) -> int:
    """Estimate the working memory of one lattice search, in bytes (see module notes).

    Parameters
    ----------
    cells : int
        Cells of the window searched (the grid the kernel indexes).
    active_cells : int, optional
        Searchable cells of the window (not nodata, keep-out or outside the corridor):
        what the per-state arrays and the labels are sized for.  Default ``cells``.
    neighbours : {8, 16, 32}
        Not used by the estimate (the stencil tables are tiny); kept for the callers.
    legs : int
        Via legs (1 + number of via points); 1 for reach.
    turn_limit : bool
        A turn limit multiplies the states by ``neighbours + 1`` (one per heading).
    max_per_cell, labels_per_cell
        Label cap; expected labels per state (default 4, or the cap when it is smaller).
    reach : bool
        Reach mode (adds the best-time and best-speed grids).

    Examples
    --------
    >>> print(f"{search_memory_bytes(1_000_000) / 1e6:.0f} MB")
    411 MB
    >>> print(f"{search_memory_bytes(1_000_000, active_cells=100_000) / 1e6:.0f} MB")
    69 MB
    """
    cells = int(cells)
    active = cells if active_cells is None else min(int(active_cells), cells)
    nh = neighbours + 1 if turn_limit else 1
    states = active * max(int(legs), 1) * nh
    lpc = float(labels_per_cell if labels_per_cell is not None else min(max_per_cell or 4, 4))
    b = cells * _B_CELL + states * (_B_STATE + (4 if max_per_cell else 0))
    if reach:
        b += _B_REACH_ACTIVE * active + _B_REACH_CELL * cells
    elif int(legs) <= CELL_BOUND_MAX_LEGS:
        b += active * (_B_BOUND_ACTIVE + _B_BOUND_LEG * max(int(legs), 1))
    b += int(states * lpc * _B_LABEL * _GROWTH)
    return int(b)


def bound_memory_bytes(cells: int, *, legs: int = 1) -> int:
    """The working memory of :func:`fallway.lattice.search.lattice_lower_bound` on a window
    of ``cells`` cells, bytes: the per-cell arrays of the problem and of the two bound
    passes (module notes, "Memory"), no labels.

    Examples
    --------
    >>> print(f"{bound_memory_bytes(1_000_000) / 1e6:.0f} MB")
    83 MB
    """
    return int(cells) * (_B_CELL + _B_BOUND_ACTIVE + _B_BOUND_LEG * max(int(legs), 1))


def label_budget_bytes(cells: int, max_labels: int, *, active_cells: int | None = None, legs: int = 1,
                       turn_limit: bool = False, neighbours: int = 16) -> int:
    """The memory a point-to-point search can reach when it creates ``max_labels`` labels.

    A bound, not a guess: the label pool and the heap never hold more than the labels
    created (the pool doubles, so its capacity is under twice that, with one old array
    alive while it grows), and the relaxed searches of a certified gap
    (:mod:`fallway.lattice.gap`) run one after another on what is left of one budget,
    each freeing its pool before the next.  On hard terrain the exact Pareto set, or
    the relaxed set (at most V²/δ + 1 labels per state), is far larger than the typical
    count :func:`search_memory_bytes` assumes; the budget is what bounds it.

    Examples
    --------
    >>> print(f"{label_budget_bytes(1_000_000, 10_000_000) / 1e6:.0f} MB")
    947 MB
    """
    fixed = search_memory_bytes(cells, active_cells=active_cells, neighbours=neighbours, legs=legs,
                                turn_limit=turn_limit, labels_per_cell=0.0)
    return int(fixed + int(max_labels) * (_B_LABEL * _GROWTH + 8))


def fit_label_budget(cells: int, memory_limit_bytes: int | None, *, active_cells: int | None = None,
                     legs: int = 1, turn_limit: bool = False, neighbours: int = 16,
                     share: float = 0.8) -> int | None:
    """The largest label budget whose :func:`label_budget_bytes` fits ``share`` of the
    memory limit (None: no limit known; 0: not even the per-cell arrays fit).

    Examples
    --------
    >>> b = fit_label_budget(1_000_000, 2_000_000_000)
    >>> label_budget_bytes(1_000_000, b) <= 0.8 * 2_000_000_000 < label_budget_bytes(1_000_000, b + 100)
    True
    """
    if memory_limit_bytes is None:
        return None
    fixed = label_budget_bytes(cells, 0, active_cells=active_cells, legs=legs, turn_limit=turn_limit,
                               neighbours=neighbours)
    room = share * float(memory_limit_bytes) - fixed
    return max(int(room // (_B_LABEL * _GROWTH + 8)), 0)


def available_bytes() -> int | None:
    """Memory available to this process, bytes (None when the platform does not say)."""
    try:
        from .terrain import _available_memory_bytes
        return _available_memory_bytes()
    except Exception:  # noqa: BLE001 - no estimate on this platform
        return None


def check_memory(cells, what, *, neighbours, legs, turn_limit, max_per_cell, memory_limit_bytes, cell_m,
                  reach=False, active_cells=None):
    need = search_memory_bytes(cells, active_cells=active_cells, neighbours=neighbours, legs=legs,
                               turn_limit=turn_limit, max_per_cell=max_per_cell, reach=reach)
    limit = memory_limit_bytes if memory_limit_bytes is not None else available_bytes()
    if limit is not None and need > limit:
        k = math.ceil(math.sqrt(need / (0.8 * limit)))
        raise TerrainError(f"{what} needs about {need / 1e9:.1f} GB for {cells / 1e6:.1f} M cells, over the "
                           f"{limit / 1e9:.1f} GB available; coarsen (cells of {k * cell_m:.3g} m or more fit), "
                           "use the corridor plan (SearchOptions(plan='corridor')) or pass a smaller area")
    return need


# ------------------------------------------------------------------ terrain sources
def terrain_source(terrain, keepout=None):
    """Windows of an in-memory terrain or of a GeoTIFF, with the keep-out for each window.

    ``source.window(box, factor=1)`` returns ``(Terrain, keep)``: the terrain inside
    ``box`` (block means of ``factor`` x ``factor`` cells when ``factor > 1``) and the
    keep-out to search it with (the polygons, or the window of a cell mask).
    """
    from .terrain import Terrain

    return _ArraySource(terrain, keepout) if isinstance(terrain, Terrain) else _FileSource(terrain, keepout)


class _ArraySource:
    """Windows and block-mean coarsening of an in-memory terrain."""

    in_memory = True

    def __init__(self, terrain, keepout):
        self.terrain = terrain
        self.cell = terrain.cell_size
        self.crs = terrain.crs
        self.bounds = terrain.bounds
        self.shape = terrain.shape
        self.mask = None
        self.keepout = keepout
        if keepout is not None and not isinstance(keepout, Keepout):
            m = np.asarray(keepout, dtype=bool)
            if m.shape != terrain.shape:
                raise ParameterError(f"keepout mask must have the terrain's shape {terrain.shape}, got {m.shape}")
            self.mask = m
            self.keepout = None

    def _slices(self, box):
        left, bottom, right, top = box
        t = self.terrain
        r_a, c_a = t.rowcol(left, top)
        r_b, c_b = t.rowcol(right, bottom)
        rows, cols = t.shape
        r0 = max(0, int(math.floor(min(r_a, r_b))))
        r1 = min(rows, int(math.ceil(max(r_a, r_b))) + 1)
        c0 = max(0, int(math.floor(min(c_a, c_b))))
        c1 = min(cols, int(math.ceil(max(c_a, c_b))) + 1)
        return r0, r1, c0, c1

    def window(self, box, factor: int = 1):
        from .terrain import Terrain

        r0, r1, c0, c1 = self._slices(box)
        k = int(factor)
        if k > 1:  # whole blocks only
            r1 = r0 + max(1, (r1 - r0) // k) * k
            c1 = c0 + max(1, (c1 - c0) // k) * k
            r1 = min(r1, self.shape[0])
            c1 = min(c1, self.shape[1])
        z = self.terrain.z[r0:r1, c0:c1]
        a = self.terrain.transform
        tr = (a.a * k, 0.0, a.c + c0 * a.a, 0.0, a.e * k, a.f + r0 * a.e)
        mask = None if self.mask is None else self.mask[r0:r1, c0:c1]
        if k > 1:
            z, mask = _block_mean(z, k, mask)
        return Terrain.from_array(z, tr, self.crs), (mask if mask is not None else self.keepout)


def _block_mean(z, k, mask):
    rows, cols = z.shape
    R, C = rows // k, cols // k
    zb = z[: R * k, : C * k].reshape(R, k, C, k)
    ok = np.isfinite(zb)
    n = ok.sum(axis=(1, 3))
    s = np.where(ok, zb, 0.0).sum(axis=(1, 3))
    out = np.full((R, C), np.nan)
    np.divide(s, n, out=out, where=n > 0)
    if mask is not None:
        mask = mask[: R * k, : C * k].reshape(R, k, C, k).all(axis=(1, 3))
    return out, mask


class _FileSource:
    """Windows of a GeoTIFF read through :func:`fallway.terrain.load_terrain`."""

    in_memory = False

    def __init__(self, path, keepout):
        import rasterio

        self.path = Path(os.fspath(path))
        if not self.path.exists():
            from .errors import FallwayIOError
            raise FallwayIOError(f"terrain file not found: {self.path}; check the path")
        with rasterio.open(self.path) as src:
            self.crs = src.crs
            b = src.bounds  # a south-up raster has bottom > top
            self.bounds = (min(b.left, b.right), min(b.bottom, b.top), max(b.left, b.right), max(b.bottom, b.top))
            self.cell = float(min(abs(src.transform.a), abs(src.transform.e)))
            self.shape = (src.height, src.width)
            geographic = bool(src.crs is not None and src.crs.is_geographic)
        if geographic:
            raise ParameterError(f"{self.path} is in a geographic CRS; windows are read from a projected DEM in "
                                 "metres: load it with load_terrain first (it reprojects) or reproject the file "
                                 "(gdalwarp -t_srs EPSG:326xx)")
        if keepout is not None and not isinstance(keepout, Keepout):
            raise ParameterError("with a DEM file, keepout must be a fallway.Keepout (polygons), not a cell mask")
        self.keepout = keepout
        self.mask = None

    def window(self, box, factor: int = 1):
        from .terrain import load_terrain

        left, bottom, right, top = box
        bl, bb, br, bt = self.bounds
        box = (max(left, bl), max(bottom, bb), min(right, br), min(top, bt))
        res = self.cell * factor if factor > 1 else None
        t = load_terrain(self.path, bounds=box, margin_m=0.0 if box[0] < box[2] and box[1] < box[3] else self.cell,
                         resolution_m=res)
        return t, self.keepout


# ------------------------------------------------------------------ helpers
def box_around(points, pad: float) -> tuple[float, float, float, float]:
    """The bounding box of (x, y) points grown by ``pad`` metres: (left, bottom, right, top)."""
    xs = [p[0] for p in points]
    ys = [p[1] for p in points]
    return (min(xs) - pad, min(ys) - pad, max(xs) + pad, max(ys) + pad)


def corridor_outside(terrain, line_xy, corridor_m: float) -> np.ndarray:
    """True outside the corridor: cells farther than ``corridor_m`` from the polyline."""
    import shapely
    from rasterio import features
    from scipy.ndimage import distance_transform_edt

    xy = np.asarray(line_xy, dtype=float)[:, :2]
    geom = shapely.LineString(xy) if len(xy) > 1 else shapely.Point(xy[0])
    on = features.rasterize([(geom, 1)], out_shape=terrain.shape, transform=terrain.transform, fill=0,
                            all_touched=True, dtype="uint8").astype(bool)
    if not on.any():
        raise ParameterError("the coarse line does not cross the fine window; check the end points")
    d = distance_transform_edt(~on) * terrain.cell_size
    return d > corridor_m


def lowest_within(src, xy, t_s: float, z0: float, mover: Mover) -> float:
    """Lowest height within the free-fall disc: grow the disc until its minimum holds."""
    zmin = z0
    for _ in range(20):
        v = math.sqrt(mover.v0 ** 2 + 2.0 * mover.g * max(z0 - zmin, 0.0))
        if mover.max_speed is not None:
            v = min(v, mover.max_speed)
        win, _ = src.window(box_around([xy], v * t_s + 2.0 * src.cell))
        new = float(np.nanmin(win.z)) if np.isfinite(win.z).any() else zmin
        if new >= zmin - 1e-9:
            return zmin
        zmin = new
    return zmin
