"""Large terrain: coarse-to-fine search, windowed reading, memory estimates, reach cut-offs.

Coarse-to-fine (:func:`find_route_large`)
-----------------------------------------
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
   window).  The lattice search runs on that window with the corridor as keep-out.
3. *Widening rule.*  The corridor is doubled and the search repeated.  It stops at the
   first step ``k >= 1`` where both steps ``k - 1`` and ``k`` found a line and step
   ``k`` improved on the best lattice time so far by no more than ``widen_tol``
   (relative): ``T_best - T[k] <= widen_tol * T[k]``; or when the corridor covers the
   whole search area (the answer is then the full-grid answer there); or after
   ``max_widen`` widenings.  A step without a feasible line (the corridor cut every
   passage) always widens.  The accepted answer is the step with the least lattice
   time (the first of equals), refined as by :func:`find_route`.  The steps are in
   ``summary["corridor_steps"]``.

   Since the corridors are nested, the exact lattice time never rises from one step to
   the next; with ``max_per_cell`` (a label cap: an approximate search) it can - a
   wider corridor lets more early labels crowd a cell - which is why the least time,
   not the last, is kept.  The rule stops once the extra room is no longer used.  It
   is a heuristic stop (a better line far outside the corridor can in principle
   exist); ``exact=True`` searches the whole area when it fits.

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
* reach adds 16 B per searchable cell (best time and v², compact) + 24 B per window
  cell (the window-shaped time and speed maps and a transient copy);
* per label 26 B (t, v² float64; node, parent int32; leg, heading int8) + 12 B of heap,
  times 2 for the doubling growth: during the copy the old (full) array and the new one
  are both resident; the unused half of the new one is never written, and pages never
  written cost no memory (measured: 3 overestimated the peak by about half).

The number of labels is not known in advance: the estimate takes ``labels_per_cell``
labels per state (default ``max_per_cell`` when given, else 4 - measured 1 to 3 on the
benchmark DEMs with a small cap; the exact Pareto search on rough terrain can need far
more).  ``tests/test_scale.py`` checks the estimate against the peak resident memory of
a search in a fresh process (with the label count of that search).

Reach cut-off (:func:`reach_limited`)
-------------------------------------
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
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import NoFeasibleLine, ParameterError, TerrainError
from .keepout import Keepout
from .params import Limits
from .physics import Mover

__all__ = ["find_route_large", "reach_limited", "search_memory_bytes", "DEFAULT_COARSE_CELLS"]

#: The auto coarse factor aims at about this many cells on the coarse grid.
DEFAULT_COARSE_CELLS = 250_000

_B_CELL = 8 + 8 + 3 + 4 + 8
_B_STATE = 24
_B_LABEL = 26 + 12
_B_REACH_ACTIVE = 16
_B_REACH_CELL = 24
_GROWTH = 2.0


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
        Label cap; expected labels per state (default the cap, else 4).
    reach : bool
        Reach mode (adds the best-time and best-speed grids).

    Examples
    --------
    >>> print(f"{search_memory_bytes(1_000_000) / 1e6:.0f} MB")
    359 MB
    >>> print(f"{search_memory_bytes(1_000_000, active_cells=100_000) / 1e6:.0f} MB")
    64 MB
    """
    cells = int(cells)
    active = cells if active_cells is None else min(int(active_cells), cells)
    nh = neighbours + 1 if turn_limit else 1
    states = active * max(int(legs), 1) * nh
    lpc = float(labels_per_cell if labels_per_cell is not None else (max_per_cell or 4))
    b = cells * _B_CELL + states * (_B_STATE + (4 if max_per_cell else 0))
    if reach:
        b += _B_REACH_ACTIVE * active + _B_REACH_CELL * cells
    b += int(states * lpc * _B_LABEL * _GROWTH)
    return int(b)


def _available_bytes() -> int | None:
    try:
        from .terrain import _available_memory_bytes
        return _available_memory_bytes()
    except Exception:  # noqa: BLE001 - no estimate on this platform
        return None


def _check_memory(cells, what, *, neighbours, legs, turn_limit, max_per_cell, memory_limit_bytes, cell_m,
                  reach=False, active_cells=None):
    need = search_memory_bytes(cells, active_cells=active_cells, neighbours=neighbours, legs=legs,
                               turn_limit=turn_limit, max_per_cell=max_per_cell, reach=reach)
    limit = memory_limit_bytes if memory_limit_bytes is not None else _available_bytes()
    if limit is not None and need > limit:
        k = math.ceil(math.sqrt(need / (0.8 * limit)))
        raise TerrainError(f"{what} needs about {need / 1e9:.1f} GB for {cells / 1e6:.1f} M cells, over the "
                           f"{limit / 1e9:.1f} GB available; coarsen (cells of {k * cell_m:.3g} m or more fit), "
                           "use the corridor search (exact=False) or pass a smaller area")
    return need


# ------------------------------------------------------------------ terrain sources
class _ArraySource:
    """Windows and block-mean coarsening of an in-memory terrain."""

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
        return Terrain.from_array(z, tr, self.crs), mask


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

    def __init__(self, path, keepout):
        import rasterio

        self.path = Path(os.fspath(path))
        if not self.path.exists():
            from .errors import FallwayIOError
            raise FallwayIOError(f"terrain file not found: {self.path}; check the path")
        with rasterio.open(self.path) as src:
            self.crs = src.crs
            self.bounds = tuple(src.bounds)
            self.cell = float(min(abs(src.transform.a), abs(src.transform.e)))
            self.shape = (src.height, src.width)
            geographic = bool(src.crs is not None and src.crs.is_geographic)
        if geographic:
            raise ParameterError(f"{self.path} is in a geographic CRS; the large-terrain search needs a projected "
                                 "DEM in metres (gdalwarp -t_srs EPSG:326xx) - or load it with load_terrain first")
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
        return t, None


# ------------------------------------------------------------------ helpers
@dataclass(frozen=True, eq=False)
class _CorridorKeepout(Keepout):
    """A polygon keep-out whose lattice mask also blocks cells outside a corridor.

    The refinement sees only the polygons (``geometry``), the lattice both.
    """

    extra: object = field(default=None)

    def mask(self, terrain) -> np.ndarray:  # noqa: D102
        m = super().mask(terrain)
        return m | self.extra if self.extra is not None else m


def _keep_for(src, terrain, mask_extra):
    """What to pass as ``keepout`` on ``terrain``: user areas plus an extra cell mask."""
    if src.keepout is not None:
        if mask_extra is None:
            return src.keepout
        return _CorridorKeepout(src.keepout.geometry, src.keepout.crs, extra=mask_extra)
    return mask_extra


def _box(points, pad):
    xs = [p[0] for p in points]
    ys = [p[1] for p in points]
    return (min(xs) - pad, min(ys) - pad, max(xs) + pad, max(ys) + pad)


def _corridor_mask(terrain, line_xy, corridor_m):
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


def _route_kw(kw):
    # search options that lattice_line understands (the rest goes to the refinement)
    names = ("neighbours", "limits", "heuristic", "energy_tol", "max_labels", "max_per_cell")
    return {k: kw[k] for k in names if k in kw}


def find_route_large(source, start, end, mover: Mover, *, via=(), keepout=None, coarse_factor: int | None = None,
                     corridor_m: float | None = None, exact: bool = False, max_widen: int = 3,
                     widen_tol: float = 1e-3, search_margin_m: float | None = None,
                     memory_limit_bytes: int | None = None, **find_route_kwargs):
    """Minimum-time route on a large DEM: coarse search, then the fine grid in a corridor.

    Parameters
    ----------
    source : Terrain or path
        An in-memory terrain or a GeoTIFF (projected CRS in metres; only windows of it
        are read).  Points are map coordinates in its CRS.
    start, end : (x, y)
    mover : Mover
    via : sequence of (x, y)
    keepout : Keepout or bool mask, optional
        A mask (terrain shape) only with an in-memory terrain.
    coarse_factor : int, optional
        Coarse cell = ``coarse_factor`` fine cells.  Default: the smallest factor that
        brings the search area to about :data:`DEFAULT_COARSE_CELLS` cells; 1 (a small
        area) searches the fine grid directly.
    corridor_m : float, optional
        Half-width of the first corridor, metres (default 4 coarse cells).
    exact : bool
        Search the whole area on the fine grid (no coarse step, no corridor); a
        :class:`~fallway.errors.TerrainError` when its memory estimate does not fit.
    max_widen : int
        Most corridor doublings after the first corridor.
    widen_tol : float
        Relative lattice-time improvement below which widening stops (module notes).
    search_margin_m : float, optional
        Margin around the bounding box of the points that the search may use (default
        half the larger side of that box, at least 50 coarse cells... clipped by the DEM).
    memory_limit_bytes : int, optional
        Budget for the memory check (default: the available memory).
    **find_route_kwargs
        Passed to :func:`fallway.route.find_route` (``neighbours``, ``limits``, ``line``,
        ``refine``, ``max_per_cell``, ... refinement options).

    Returns
    -------
    Route
        ``summary`` adds ``scale`` (mode, coarse factor and cell size, coarse lattice
        time, search area) and ``corridor_steps`` (list of ``{"corridor_m", "time_s",
        "cells", "feasible"}``; time_s is the lattice time, None when infeasible), and
        ``scale_timings_s`` (wall seconds of each stage: not reproducible).

    Raises
    ------
    TerrainError
        The search would not fit in memory (the message says how far to coarsen).
    NoFeasibleLine
        No line within the widest corridor (or on the coarse grid).

    Examples
    --------
    >>> from fallway.terrain import Terrain
    >>> z = 100.0 - 0.3 * np.add.outer(np.arange(40.0), np.arange(40.0))
    >>> t = Terrain.from_array(z, (2.0, 0, 0, 0, -2.0, 80.0))
    >>> r = find_route_large(t, (1, 79), (79, 1), Mover(mu=0.1), coarse_factor=4, refine=False)
    >>> r.summary["scale"]["mode"], len(r.summary["corridor_steps"]) >= 2
    ('corridor', True)
    """
    from .lattice.search import lattice_line
    from .params import SearchOptions
    from .route import find_route
    from .terrain import Terrain

    if isinstance(source, Terrain):
        src = _ArraySource(source, keepout)
    else:
        src = _FileSource(source, keepout)
    if not isinstance(mover, Mover):
        raise ParameterError(f"mover must be a fallway.Mover, got {type(mover).__name__}")
    if max_widen < 0 or not math.isfinite(widen_tol) or widen_tol < 0:
        raise ParameterError("max_widen must be >= 0 and widen_tol a finite number >= 0")
    pts = [tuple(map(float, start))] + [tuple(map(float, p)) for p in via] + [tuple(map(float, end))]
    neighbours = int(find_route_kwargs.get("neighbours", 16))
    limits = find_route_kwargs.get("limits") or Limits()
    turn = limits.max_step_turn_deg is not None
    cap = find_route_kwargs.get("max_per_cell")
    legs = 1 + len(via)
    cell = src.cell
    timings: dict = {}

    span = max(_box(pts, 0.0)[2] - _box(pts, 0.0)[0], _box(pts, 0.0)[3] - _box(pts, 0.0)[1], cell)
    margin = 0.5 * span if search_margin_m is None else float(search_margin_m)
    area = _box(pts, margin)
    bl, bb, br, bt = src.bounds
    area = (max(area[0], bl), max(area[1], bb), min(area[2], br), min(area[3], bt))
    area_cells = int(max(area[2] - area[0], cell) * max(area[3] - area[1], cell) / cell ** 2)
    mem_kw = dict(neighbours=neighbours, legs=legs, turn_limit=turn, max_per_cell=cap,
                  memory_limit_bytes=memory_limit_bytes, cell_m=cell)
    if coarse_factor is None:
        coarse_factor = max(1, math.ceil(math.sqrt(area_cells / DEFAULT_COARSE_CELLS)))
    coarse_factor = int(coarse_factor)
    if coarse_factor < 1:
        raise ParameterError(f"coarse_factor must be an integer >= 1, got {coarse_factor}")

    if exact or coarse_factor == 1:
        _check_memory(area_cells, "the full-grid search", **mem_kw)
        t0 = time.perf_counter()
        fine, m = src.window(area)
        timings["read_s"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        r = find_route(fine, start, end, mover, via=via, keepout=_keep_for(src, fine, m), **find_route_kwargs)
        timings["route_s"] = time.perf_counter() - t0
        r.summary["scale"] = {"mode": "exact", "coarse_factor": 1, "cell_m": float(fine.cell_size),
                              "area_cells": int(fine.z.size), "area_bounds": [float(v) for v in fine.bounds]}
        r.summary["corridor_steps"] = []
        r.summary["scale_timings_s"] = timings
        return r

    # -- coarse --------------------------------------------------------------------------
    t0 = time.perf_counter()
    coarse, cmask = src.window(area, coarse_factor)
    timings["coarse_read_s"] = time.perf_counter() - t0
    _check_memory(coarse.z.size, "the coarse search", **{**mem_kw, "cell_m": coarse.cell_size})
    search_kw = _route_kw(find_route_kwargs)
    t0 = time.perf_counter()
    try:
        cl = lattice_line(coarse, start, end, mover, via=via, keepout=_keep_for(src, coarse, cmask),
                          limits=search_kw.get("limits"),
                          options=SearchOptions(neighbours=search_kw.get("neighbours", 16),
                                                heuristic=search_kw.get("heuristic", True),
                                                energy_tol=search_kw.get("energy_tol"),
                                                max_labels=search_kw.get("max_labels"),
                                                label_cap=search_kw.get("max_per_cell")))
    except NoFeasibleLine as err:
        raise NoFeasibleLine(f"coarse grid ({coarse.cell_size:g} m cells): {err}; try a smaller coarse_factor "
                             "or exact=True", reason=err.reason, closest=err.closest) from err
    timings["coarse_search_s"] = time.perf_counter() - t0
    if corridor_m is None:
        corridor_m = 4.0 * coarse.cell_size
    corridor_m = float(corridor_m)
    if not (corridor_m > 0 and math.isfinite(corridor_m)):
        raise ParameterError(f"corridor_m must be a positive number of metres, got {corridor_m!r}")

    # -- corridor steps --------------------------------------------------------------------
    steps: list[dict] = []
    best = None
    last_err = None
    line_xy = np.vstack([cl.points[:, :2], np.asarray(pts)])
    for k in range(max_widen + 1):
        w = corridor_m * 2.0 ** k
        t0 = time.perf_counter()
        box = _box(line_xy, w + 2.0 * cell)
        box = (max(box[0], area[0]), max(box[1], area[1]), min(box[2], area[2]), min(box[3], area[3]))
        fine, m = src.window(box)
        out = _corridor_mask(fine, cl.points, w)
        whole = box == area and not out.any()
        if m is not None:
            out |= m
        cells = int((~out).sum())
        _check_memory(fine.z.size, f"the corridor search ({w:g} m)", active_cells=cells, **mem_kw)
        timings[f"corridor_{k}_read_s"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        try:
            ln = lattice_line(fine, start, end, mover, via=via, keepout=_keep_for(src, fine, out),
                              limits=search_kw.get("limits"),
                              options=SearchOptions(neighbours=search_kw.get("neighbours", 16),
                                                    heuristic=search_kw.get("heuristic", True),
                                                    energy_tol=search_kw.get("energy_tol"),
                                                    max_labels=search_kw.get("max_labels"),
                                                    label_cap=search_kw.get("max_per_cell")))
            steps.append({"corridor_m": w, "time_s": float(ln.time_s), "cells": cells, "feasible": True})
            prev = best
            if best is None or ln.time_s < best[2].time_s:
                best = (fine, out, ln, w)
        except NoFeasibleLine as err:
            steps.append({"corridor_m": w, "time_s": None, "cells": cells, "feasible": False})
            last_err = err
            prev = None
        timings[f"corridor_{k}_search_s"] = time.perf_counter() - t0
        if whole:
            break
        if (prev is not None and steps[-1]["feasible"]
                and prev[2].time_s - steps[-1]["time_s"] <= widen_tol * steps[-1]["time_s"]):
            break
    if best is None:
        raise NoFeasibleLine(f"no line inside corridors up to {steps[-1]['corridor_m']:g} m around the coarse line "
                             f"({last_err}); raise corridor_m or max_widen, or use exact=True",
                             reason=getattr(last_err, "reason", "unreachable"), closest=getattr(last_err, "closest", None))
    fine, out, ln, w = best
    t0 = time.perf_counter()
    r = find_route(fine, start, end, mover, via=via, keepout=_keep_for(src, fine, out), **find_route_kwargs)
    timings["final_route_s"] = time.perf_counter() - t0
    r.summary["scale"] = {"mode": "corridor", "coarse_factor": coarse_factor, "cell_m": float(fine.cell_size),
                          "coarse_cell_m": float(coarse.cell_size), "coarse_time_s": float(cl.time_s),
                          "coarse_cells": int(coarse.z.size), "corridor_m": w,
                          "area_bounds": [float(v) for v in area], "window_bounds": [float(v) for v in fine.bounds],
                          "window_cells": int(fine.z.size)}
    r.summary["corridor_steps"] = steps
    r.summary["scale_timings_s"] = timings
    return r


def reach_limited(source, start, mover: Mover, *, max_time_s: float | None = None,
                  max_distance_m: float | None = None, keepout=None, memory_limit_bytes: int | None = None,
                  **reach_kwargs):
    """Reach map of a large DEM within a time or plan-distance cut-off (module notes).

    Parameters
    ----------
    source : Terrain or path
        In-memory terrain or projected GeoTIFF (only the window is read).
    start : (x, y)
    mover : Mover
    max_time_s : float, optional
        Map arrivals up to this time: the window read is the free-fall disc of radius
        ``sqrt(v0² + 2 g (z_start - z_min)) * max_time_s`` and the search itself stops
        at the cut-off (exact up to it, NaN beyond).
    max_distance_m : float, optional
        Confine lines to the disc of this plan radius around the start.
    keepout : Keepout or bool mask, optional
    memory_limit_bytes : int, optional
    **reach_kwargs
        Passed to :func:`fallway.lattice.search.reach` (``neighbours``, ``limits``, ...).

    Returns
    -------
    ReachMap
        On the window; ``stats`` adds ``cutoff`` (radius_m, max_time_s, max_distance_m,
        window shape, which bounds applied).  With ``max_time_s`` the kernel stops at
        the cut-off (``stats["labels_cut_off"]`` labels were not queued).

    Examples
    --------
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(-0.5 * np.arange(50.0)[None, :].repeat(50, 0), (1.0, 0, 0, 0, -1.0, 50.0))
    >>> rm = reach_limited(t, (0.5, 25.5), Mover(), max_distance_m=10.0, neighbours=8)
    >>> rm.time_s.shape, bool(np.isnan(rm.time_s[10, -1]))
    ((23, 12), True)
    """
    from .lattice.search import reach
    from .params import SearchOptions
    from .route import ReachMap
    from .terrain import Terrain

    if max_time_s is None and max_distance_m is None:
        raise ParameterError("give max_time_s or max_distance_m (or use fallway.lattice.search.reach)")
    for name, v in (("max_time_s", max_time_s), ("max_distance_m", max_distance_m)):
        if v is not None and not (float(v) > 0 and math.isfinite(float(v))):
            raise ParameterError(f"{name} must be a positive finite number, got {v!r}")
    src = _ArraySource(source, keepout) if isinstance(source, Terrain) else _FileSource(source, keepout)
    x, y = (float(v) for v in start)
    radius = math.inf if max_distance_m is None else float(max_distance_m)
    if max_time_s is not None:
        # energy height over the lowest cell: no mover gets faster (friction only takes energy)
        probe, _ = src.window(_box([(x, y)], 2.0 * src.cell))
        pr, pc = probe.nearest_cell(x, y)
        z0 = float(probe.z[min(max(pr, 0), probe.shape[0] - 1), min(max(pc, 0), probe.shape[1] - 1)])
        if not math.isfinite(z0):
            raise NoFeasibleLine("start falls on a nodata cell; move it onto the terrain", reason="nodata", closest=None)
        zmin = _lowest(src, (x, y), float(max_time_s), z0, mover)
        v = math.sqrt(mover.v0 ** 2 + 2.0 * mover.g * max(z0 - zmin, 0.0))
        if mover.max_speed is not None:
            v = min(v, mover.max_speed)
        radius = min(radius, v * float(max_time_s) + 2.0 * src.cell)
    neighbours = int(reach_kwargs.get("neighbours", 16))
    limits = reach_kwargs.get("limits") or Limits()
    win, m = src.window(_box([(x, y)], radius + src.cell))
    rr, cc = np.mgrid[0:win.shape[0], 0:win.shape[1]]
    cx, cy = win.cell_center(rr, cc)
    out = np.hypot(cx - x, cy - y) > radius
    del rr, cc, cx, cy
    if m is not None:
        out |= m
    _check_memory(win.z.size, "the reach search", neighbours=neighbours, legs=1,
                  turn_limit=limits.max_step_turn_deg is not None, max_per_cell=reach_kwargs.get("max_per_cell"),
                  memory_limit_bytes=memory_limit_bytes, cell_m=win.cell_size, reach=True,
                  active_cells=int(np.count_nonzero(~out)))
    rm = reach(win, start, mover, keepout=_keep_for(src, win, out), max_time_s=max_time_s,
               limits=reach_kwargs.get("limits"),
               options=SearchOptions(neighbours=reach_kwargs.get("neighbours", 16),
                                     energy_tol=reach_kwargs.get("energy_tol"),
                                     max_labels=reach_kwargs.get("max_labels"),
                                     label_cap=reach_kwargs.get("max_per_cell")))
    tt, vv = rm.time_s, rm.speed_m_s
    stats = dict(rm.stats)
    stats["cutoff"] = {"radius_m": float(radius), "max_time_s": max_time_s, "max_distance_m": max_distance_m,
                       "window_shape": list(win.shape),
                       "bound": "area window and kernel time cut-off" if max_time_s is not None else "area window"}
    stats["cells_reached"] = int(np.isfinite(tt).sum())
    return ReachMap(time_s=tt, speed_m_s=vv, transform=rm.transform, crs=rm.crs, start=rm.start, stats=stats)


def _lowest(src, xy, t_s, z0, mover):
    """Lowest height within the free-fall disc: grow the disc until its minimum holds."""
    zmin = z0
    for _ in range(20):
        v = math.sqrt(mover.v0 ** 2 + 2.0 * mover.g * max(z0 - zmin, 0.0))
        if mover.max_speed is not None:
            v = min(v, mover.max_speed)
        win, _ = src.window(_box([xy], v * t_s + 2.0 * src.cell))
        new = float(np.nanmin(win.z)) if np.isfinite(win.z).any() else zmin
        if new >= zmin - 1e-9:
            return zmin
        zmin = new
    return zmin
