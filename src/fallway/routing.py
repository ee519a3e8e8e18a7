"""The one routing path: plan the search, search, refine, time and summarise.

Every entry point (the command line's ``route``, ``compare`` and ``demo``, batch runs,
the Python API) finds its line through :func:`find_route`::

    source ──► plan (full grid | corridor | robust) ──► LatticeLine
           ──► refinement (candidates, "fastest line that meets the limits")
           ──► traverse with the route's model ──► Route + RouteSummary

Plans (``SearchOptions.plan``)
------------------------------
``"full"``
    One lattice search on the area around the points: the whole in-memory terrain, or
    for a GeoTIFF the bounding box of the points plus
    :data:`fallway.terrain.DEFAULT_MARGIN_M` (only that window is read).
``"corridor"``
    Coarse-to-fine (:mod:`fallway.scale`, module notes): a search on a block-mean coarse
    copy of the area, then the fine grid inside a corridor around the coarse line, the
    corridor doubled until the lattice time stops improving.  The corridor is the
    search's *domain*, not a keep-out: a step that fails inside it is diagnosed as
    ``reason="corridor"`` and widened.  The best step's lattice line is the answer (it
    is not searched again).
``"auto"`` (default)
    The full grid when the area has at most :data:`FULL_GRID_MAX_CELLS` cells, its
    time estimate (:func:`fallway.scale.search_seconds`, the measured cost per cell scaled
    by stencil and legs) is at most :data:`FULL_GRID_MAX_SECONDS` and its memory
    estimate (:func:`fallway.scale.search_memory_bytes`) fits the memory available, else
    the corridor (which refuses, with the numbers and the options, when even its
    windows do not fit: :func:`fallway.scale.check_memory`).
With a friction range and ``robust=True`` the robust plan runs (:func:`_plan_robust`),
on the full grid only.  A raised line (``LineSpec("raised", ...)``) always runs the plan
``"raised"``: the search over cells times height layers in a corridor around the straight
line (:mod:`fallway.lattice.raised`), on the area of the full plan.
"""

from __future__ import annotations

import dataclasses
import math
import time
import warnings

import numpy as np

from .cable.route import cable_route
from .caution import CAUTION
from .clearance import clearance_extremes
from .errors import InputWarning, NoFeasibleLine, ParameterError, RefinementWarning, TerrainError
from .evaluate import (COMPUTED_NAME, Comparison, Envelope, as_named_lines, envelope, lay_on_ground, limit_issues,
                       row_for_line)
from .geometry import MIN_EXPORT_SEGMENT_M, drop_repeats, min_radius_m, raised_heights_m, round_corners
from .loads import Loads, line_loads
from .keepout import Keepout
from .lattice.raised import raised_lattice_line
from .lattice.gap import gap_of
from .lattice.search import lattice_line, lattice_lower_bound, robust_lattice_line
from .lattice.search import reach as lattice_reach
from .params import MAX_LABELS, Limits, LineSpec, Mover, SearchOptions, checked_options
from .physics import check_mu_range, traverse
from .refine import refine_line
from .relax import describe, find_workable, relaxations_for
from .results import LatticeLine, ReachMap, RefineResult, Route, RouteSummary
from .scale import (CELL_BOUND_MAX_LEGS, DEFAULT_COARSE_CELLS, available_bytes, bound_memory_bytes, box_around,
                    check_memory, corridor_outside, fit_label_budget, lowest_within, search_memory_bytes,
                    search_seconds, terrain_source)
from .section import make_section
from .terrain import DEFAULT_MARGIN_M, MIN_GRID_CELLS, Terrain

__all__ = ["find_route", "reach", "compare", "FULL_GRID_MAX_CELLS", "FULL_GRID_MAX_SECONDS", "MAX_AREA_CELLS",
           "WORKABLE_MAX_PROBES",
           "WORKABLE_BUDGET_FACTOR", "WORKABLE_MAX_CELLS"]

#: ``plan="auto"`` searches the full grid up to this many cells of search area ...
FULL_GRID_MAX_CELLS = 4_000_000
#: ... and while its estimated search time (:func:`fallway.scale.search_seconds`) is at
#: most this many seconds; beyond either, the coarse-to-fine corridor.
FULL_GRID_MAX_SECONDS = 30.0

#: The largest search area (cells of the DEM) a route takes; beyond it, coarsen the DEM.
MAX_AREA_CELLS = 200_000_000

#: The search for the nearest workable limit values (:mod:`fallway.relax`) runs at most
#: this many searches ...
WORKABLE_MAX_PROBES = 16
#: ... and starts none after this multiple of the failed run's own time (at least
#: :data:`WORKABLE_MIN_BUDGET_S`), whichever comes first.  On small sites the probe count
#: binds (the answer is then deterministic); on the demo site the time can (values the time
#: cut short are marked "at most" / "at least" in the message).
WORKABLE_BUDGET_FACTOR = 4.0
WORKABLE_MIN_BUDGET_S = 5.0
#: Above this many cells of search area the bisection searches a block-mean coarse copy
#: of the area (its values are then estimates, and the message says so).
WORKABLE_MAX_CELLS = DEFAULT_COARSE_CELLS

# --------------------------------------------------------------------------- the entry

@checked_options
def find_route(terrain, start, end, mover: Mover, *, via=(), limits: Limits | None = None, keepout=None,
               line: LineSpec | None = None, search: SearchOptions | None = None, refine: bool = True,
               mu_range: tuple[float, float] | None = None, robust: bool = False,
               memory_limit_bytes: int | None = None, workable: bool = True, points_crs=None) -> Route:
    """The minimum-time line from ``start`` to ``end``: plan, lattice search, refinement.

    Parameters
    ----------
    terrain : Terrain or path
        An in-memory terrain, or a GeoTIFF in a projected CRS (only the windows the plan
        needs are read).
    start, end : (x, y)
        Map coordinates in the terrain's CRS.  The line starts and ends exactly there
        (heights from the smooth surface; :mod:`fallway.lattice.ends`); a point on nodata,
        in a keep-out area or in the DEM's outer half cell moves to the nearest free cell
        centre (with a warning).  The robust plan starts and ends at cell centres.
        Via points snap to the nearest cell centre.
    mover : Mover
        Physics and speed window.
    via : sequence of (x, y)
        Points to pass through in order (energy carried through them).
    limits : Limits, optional
        Grade window, turn per lattice step, bend radius.
    keepout : Keepout or bool mask, optional
        No-go areas (a mask, of the terrain's shape, only with an in-memory terrain).
    line : LineSpec, optional
        Ground (default) or raised, with its clearance band and end heights; or a cable
        on supports (``LineSpec("cable", cable=CableSpec(...))``: :mod:`fallway.cable`;
        the points are the stations, via points the angle stations).
    search : SearchOptions, optional
        Stencil, label cap and budget, plan (module notes).
    refine : bool
        Refine the lattice line (the discrete Euler–Lagrange optimum).
    mu_range : (float, float), optional
        Friction range (LO, HI): the route's line is evaluated at LO, nominal and HI
        friction (``Route.envelope``).
    robust : bool
        With ``mu_range``: the fastest line at nominal friction that still gets through
        at HI and stays under the speed limit at LO (:func:`_plan_robust`).
    memory_limit_bytes : int, optional
        Budget for the memory estimates (default: the memory available).
    workable : bool
        When the limits cannot all be met, find which bind and the nearest workable value
        of each (a bisection with the same search, :mod:`fallway.relax`; at most
        :data:`WORKABLE_MAX_PROBES` searches) and put them on the error.
    points_crs : CRS or str, optional
        The CRS the caller gave the points in, for messages only (the points themselves
        are in the terrain's CRS); default the terrain's.

    Returns
    -------
    Route
        With a :class:`~fallway.results.RouteSummary` of fixed fields; always a line that
        meets every limit (``summary.feasible`` is True).

    Warns
    -----
    InputWarning
        A point lay on nodata, in a keep-out area or in the DEM's outer half cell and the
        line starts or ends elsewhere (where, and how far: ``start_moved_m``, ...).

    Raises
    ------
    NoFeasibleLine
        No line satisfies the physics and the limits (``reason`` says why), or the line
        found breaks a limit (``reason`` ``"limits"``, or ``"stall"`` when the mover
        stalls on it; ``err.route`` holds that line for inspection).  With ``workable``
        and ``reason`` ``"limits"`` or ``"stall"``: ``err.binding`` names the binding
        limits and ``err.workable`` their nearest workable values, also in the message.
    TerrainError
        The search would not fit in memory.

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> z = -0.5 * np.add.outer(np.arange(6.0), np.arange(6.0))
    >>> t = Terrain.from_array(z, (1.0, 0, 0, 0, -1.0, 6.0))
    >>> r = find_route(t, (0.5, 5.5), (5.5, 0.5), Mover(mu=0.1, normal="gravity"), refine=False)
    >>> print(f"{r.summary.lattice_time_s:.4f} {r.summary.drop_m:.1f} {r.summary.search_plan}")
    1.8876 5.0 full
    """
    t_start = time.perf_counter()
    if not isinstance(mover, Mover):
        raise ParameterError(f"mover must be a fallway.Mover, got {type(mover).__name__}")
    limits = Limits() if limits is None else limits
    line = LineSpec() if line is None else line
    search = SearchOptions() if search is None else search
    for name, value, kind in (("limits", limits, Limits), ("line", line, LineSpec),
                              ("search", search, SearchOptions)):
        if not isinstance(value, kind):
            raise ParameterError(f"{name} must be a fallway.{kind.__name__}, got {type(value).__name__}")
    if mu_range is not None:
        mu_range = check_mu_range(mover, *mu_range)
    if robust and mu_range is None:
        raise ParameterError("robust=True needs a friction range: mu_range=(LO, HI)")
    if robust and line.kind == "raised":
        raise ParameterError("the robust search is for ground lines; leave robust off for a raised line")
    points = [_xy(start, "start")] + [_xy(p, f"via point {i + 1}") for i, p in enumerate(via)] + [_xy(end, "end")]
    src = terrain_source(terrain, keepout)
    try:
        if line.kind == "cable":  # supports placed by search over the span graph (fallway.cable)
            if mu_range is not None or robust:
                raise ParameterError("a friction range and the robust search are not available for cable lines yet")
            route = cable_route(src, points, mover, limits, line, search)
            return dataclasses.replace(route, compute_s={**route.compute_s, "total": time.perf_counter() - t_start})
        plan = _choose_plan(src, points, limits, search, robust, memory_limit_bytes)
        job = _Job(mover=mover, limits=limits, line=line, search=search, refine=bool(refine), via=tuple(points[1:-1]))
        explain = bool(workable) and plan != "robust"
        try:
            if plan == "robust":
                route = _plan_robust(src, points, job, mu_range, memory_limit_bytes)
            else:
                found = (_plan_raised if line.kind == "raised" else _plan_full if plan == "full" else _plan_corridor)(
                    src, points, job, memory_limit_bytes)
                route = _finish(found, job)
                if mu_range is not None:
                    route = dataclasses.replace(route, envelope=_envelope_of(route, mu_range))
        except NoFeasibleLine as err:
            if not explain or err.reason not in ("limits", "stall") or err.binding:
                raise
            raise _explained(err, src, points, job, memory_limit_bytes, time.perf_counter() - t_start) from err
        warn_moved_points(route.summary.to_dict(), route.terrain.crs, points_crs)
        if not route.summary.feasible:
            broken = route.summary.violated_limits
            err = NoFeasibleLine(f"the line found breaks {'its limits' if broken else 'the physics'} "
                                 f"({', '.join(broken) or 'the mover stalls'}); no line meeting them was found",
                                 reason="stall" if set(broken) <= {"stalls"} else "limits", route=route)
            if explain:
                err = _explained(err, src, points, job, memory_limit_bytes, time.perf_counter() - t_start, route=route)
            raise err
    except NoFeasibleLine as err:  # say where the search got closest in the caller's CRS
        if err.closest is not None and err.closest_text is None:
            err.closest_text = _closest_text(err.closest, src.crs, points_crs)
        raise
    compute = dict(route.compute_s)
    compute["total"] = time.perf_counter() - t_start
    return dataclasses.replace(route, compute_s=compute)


def _explained(err: NoFeasibleLine, src, points, job: _Job, memory_limit_bytes, failed_s: float,
               route: Route | None = None) -> NoFeasibleLine:
    """``err`` with the binding limits and their nearest workable values (:mod:`fallway.relax`).

    Each probe is the route's own pipeline (full-grid search, refinement when the run
    refines, the limits checked on the reported line) with one limit changed; on an area
    of more than :data:`WORKABLE_MAX_CELLS` cells it runs on a block-mean coarse copy.
    """
    violated = route.summary.violated_limits if route is not None else ()
    cands = relaxations_for(job.mover, job.limits, reason=None if route is not None else err.reason,
                            violated=violated)
    psrc, estimated = _probe_source(src, points)

    def probe(mover: Mover, limits: Limits):
        j = dataclasses.replace(job, mover=mover, limits=limits)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RefinementWarning)
                r = _finish((_plan_raised if j.line.kind == "raised" else _plan_full)(psrc, points, j,
                                                                                    memory_limit_bytes), j)
        except NoFeasibleLine:
            return None
        return r if r.summary.feasible else None

    budget = max(WORKABLE_BUDGET_FACTOR * failed_s, WORKABLE_MIN_BUDGET_S)
    findings, stats = find_workable(probe, job.mover, job.limits, cands, budget_s=budget,
                                    max_probes=WORKABLE_MAX_PROBES)
    clause = describe(findings, stats, candidates=cands, estimated_on=estimated)
    if "liftoff" in violated and not findings:
        s = route.summary
        clause = (f"an open line lifts off over a crest (bed force {s.min_liftoff_margin_g:.2f} g at "
                  f"{s.min_liftoff_margin_station_m:.0f} m); for an enclosed chute or pipe give --allow-liftoff "
                  "(limits.allow_liftoff)" + ("" if not cands else "; " + clause))
    msg = f"{str(err).rstrip('; ')}: {clause}" if clause else str(err)
    return NoFeasibleLine(msg, reason=err.reason, closest=err.closest, route=route if route is not None else err.route,
                          binding=tuple(f.name for f in findings),
                          workable={f.name: f.workable for f in findings})


def _probe_source(src, points):
    """Where the bisection searches: the area itself, or a block-mean copy when it is large."""
    box = _full_window(src, points)
    cells = _cells(box, src.cell)
    if cells <= WORKABLE_MAX_CELLS:
        return src, None
    factor = math.ceil(math.sqrt(cells / WORKABLE_MAX_CELLS))
    coarse, keep = src.window(box, factor)
    return terrain_source(coarse, keep), f"a copy coarsened to {coarse.cell_size:g} m cells"


def _xy(p, name: str) -> tuple[float, float]:
    try:
        x, y = (float(v) for v in p)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a pair (x, y) of map coordinates, got {p!r}") from None
    if not (math.isfinite(x) and math.isfinite(y)):
        raise ParameterError(f"{name} must be finite, got {p!r}")
    return (x, y)


@dataclasses.dataclass(frozen=True)
class _Job:
    """What every plan shares: the physics, the limits, the line kind and the options."""

    mover: Mover
    limits: Limits
    line: LineSpec
    search: SearchOptions
    refine: bool
    via: tuple


@dataclasses.dataclass(frozen=True, eq=False)
class _Found:
    """A plan's answer: the lattice line, the terrain window it is on, and how it was found."""

    terrain: Terrain
    keepout: object
    lattice: LatticeLine
    plan: str
    corridor: dict | None = None
    compute_s: dict = dataclasses.field(default_factory=dict)
    section: object = None  # a straight-plan raised line: the section it was searched on


# --------------------------------------------------------------------------- planning

def _search_area(src, points):
    """The area a corridor plan may search: the points' box plus half its larger side, clipped."""
    cell = src.cell
    box = box_around(points, 0.0)
    span = max(box[2] - box[0], box[3] - box[1], cell)
    area = box_around(points, 0.5 * span)
    bl, bb, br, bt = src.bounds
    return (max(area[0], bl), max(area[1], bb), min(area[2], br), min(area[3], bt))


def _full_window(src, points):
    """The window a full-grid plan searches: everything in memory, else the points' box plus the margin."""
    if src.in_memory:
        return src.bounds
    box = box_around(points, DEFAULT_MARGIN_M)
    bl, bb, br, bt = src.bounds
    return (max(box[0], bl), max(box[1], bb), min(box[2], br), min(box[3], bt))


def _cells(box, cell) -> int:
    return int(max(box[2] - box[0], cell) * max(box[3] - box[1], cell) / cell ** 2)


def _memory_kw(job: _Job, cell: float, memory_limit_bytes):
    return dict(neighbours=job.search.neighbours, legs=1 + len(job.via),
                turn_limit=job.limits.max_step_turn_deg is not None, max_per_cell=job.search.label_cap,
                memory_limit_bytes=memory_limit_bytes, cell_m=cell)


def _check_area(src, points) -> None:
    """Refuse an area larger than one route searches (:data:`MAX_AREA_CELLS`), in plain terms."""
    area = _search_area(src, points)
    rows = int(round((area[3] - area[1]) / src.cell))
    cols = int(round((area[2] - area[0]) / src.cell))
    if rows * cols > MAX_AREA_CELLS:
        fit = src.cell * math.sqrt(rows * cols / MAX_AREA_CELLS) * 1.05
        raise TerrainError(f"the points span {rows} x {cols} cells of {src.cell:g} m, more than the "
                           f"{MAX_AREA_CELLS / 1e6:.0f} M cells one route searches; put them closer together, or "
                           f"resample the DEM first ({math.ceil(fit):d} m cells or coarser fit; "
                           "e.g. gdalwarp -tr N N in.tif out.tif)")


def _choose_plan(src, points, limits, search, robust, memory_limit_bytes) -> str:
    _check_area(src, points)
    if robust:
        if search.plan == "corridor":
            raise ParameterError("the robust search runs on the full grid: leave plan='auto' or 'full'")
        return "robust"
    if search.plan != "auto":
        return search.plan
    cells = _cells(_full_window(src, points), src.cell)
    seconds = search_seconds(cells, neighbours=search.neighbours, legs=len(points) - 1)
    if cells > FULL_GRID_MAX_CELLS or seconds > FULL_GRID_MAX_SECONDS:
        return "corridor"
    need = search_memory_bytes(cells, neighbours=search.neighbours, legs=len(points) - 1,
                               turn_limit=limits.max_step_turn_deg is not None, max_per_cell=search.label_cap)
    limit = memory_limit_bytes if memory_limit_bytes is not None else available_bytes()
    return "corridor" if (limit is not None and need > 0.8 * limit) else "full"


def _plan_full(src, points, job: _Job, memory_limit_bytes) -> _Found:
    """One search on the whole area around the points."""
    box = _full_window(src, points)
    check_memory(_cells(box, src.cell), "the full-grid search", **_memory_kw(job, src.cell, memory_limit_bytes))
    t0 = time.perf_counter()
    terrain, keep = src.window(box)
    t1 = time.perf_counter()
    lat = lattice_line(terrain, points[0], points[-1], job.mover, via=job.via, limits=job.limits, keepout=keep,
                       options=_memory_budget(job, terrain.z.size, memory_limit_bytes))
    t2 = time.perf_counter()
    return _Found(terrain=terrain, keepout=keep, lattice=lat, plan="full",
                  compute_s={"read": t1 - t0, "search": t2 - t1})


def _memory_budget(job: _Job, cells: int, memory_limit_bytes) -> SearchOptions:
    """The search options with the label budget cut to what the memory holds
    (:func:`fallway.scale.fit_label_budget`): a hard search stops on its budget (with the
    gap reached, or ``reason="label_budget"``) before it passes the machine's memory."""
    limit = memory_limit_bytes if memory_limit_bytes is not None else available_bytes()
    fit = fit_label_budget(cells, limit, legs=1 + len(job.via), turn_limit=job.limits.max_step_turn_deg is not None,
                           neighbours=job.search.neighbours)
    if fit is None or (job.search.max_labels is not None and job.search.max_labels <= fit):
        return job.search
    return dataclasses.replace(job.search, max_labels=max(min(fit, MAX_LABELS), 1))


def _plan_raised(src, points, job: _Job, memory_limit_bytes) -> _Found:
    """A raised line: the search over cells times height layers (:mod:`fallway.lattice.raised`),
    in its plan corridor around the straight start-end line."""
    if job.via:
        raise ParameterError("via points are not supported on a raised line; route each leg on its own")
    t0 = time.perf_counter()
    terrain, keep = src.window(_full_window(src, points))
    t1 = time.perf_counter()
    if not job.line.straight_plan:
        lat = raised_lattice_line(terrain, points[0], points[-1], job.mover, job.line, limits=job.limits,
                                  keepout=keep, options=job.search, memory_limit_bytes=memory_limit_bytes)
        return _Found(terrain=terrain, keepout=keep, lattice=lat, plan="raised",
                      compute_s={"read": t1 - t0, "search": time.perf_counter() - t1})
    # the plan fixed straight: search the section under it (fallway.section)
    sec = make_section(terrain, points[0], points[-1])
    opts = dataclasses.replace(job.search, corridor_m=0.25 * sec.terrain.cell_size)
    loc = raised_lattice_line(sec.terrain, (0.0, 0.0), (sec.length_m, 0.0), job.mover, job.line, limits=job.limits,
                              options=opts, memory_limit_bytes=memory_limit_bytes)
    P = sec.to_map(loc.points)
    r, c = terrain.rowcol(P[:, 0], P[:, 1])
    lat = dataclasses.replace(loc, points=P, cells=np.column_stack([np.rint(r), np.rint(c)]).astype(int))
    return _Found(terrain=terrain, keepout=keep, lattice=lat, plan="raised", section=sec,
                  compute_s={"read": t1 - t0, "search": time.perf_counter() - t1})


def _plan_corridor(src, points, job: _Job, memory_limit_bytes) -> _Found:
    """Coarse search, then the fine grid in a widening corridor (module notes of :mod:`fallway.scale`)."""
    s = job.search
    area = _search_area(src, points)
    cell = src.cell
    mem_kw = _memory_kw(job, cell, memory_limit_bytes)
    factor = s.coarse_factor or max(1, math.ceil(math.sqrt(_cells(area, cell) / DEFAULT_COARSE_CELLS)))
    most = max(1, int(min(area[2] - area[0], area[3] - area[1]) // (cell * MIN_GRID_CELLS)))
    if factor > most:  # only a given factor can: the default keeps about DEFAULT_COARSE_CELLS
        raise ParameterError(f"coarse_factor {factor} leaves fewer than {MIN_GRID_CELLS} x {MIN_GRID_CELLS} coarse "
                             f"cells over the {area[2] - area[0]:.0f} x {area[3] - area[1]:.0f} m search area; give "
                             f"at most {most} (--coarse), or leave it to the default")
    compute: dict = {}
    if factor == 1:  # a small area: the corridor would be the whole grid
        found = _plan_full(src, points, job, memory_limit_bytes)
        return dataclasses.replace(found, plan="corridor",
                                   corridor={"coarse_factor": 1, "cell_m": float(cell), "coarse_cell_m": None,
                                             "coarse_time_s": None, "corridor_m": None, "steps": []})
    t0 = time.perf_counter()
    coarse, ckeep = src.window(area, factor)
    check_memory(coarse.z.size, "the coarse search", **{**mem_kw, "cell_m": coarse.cell_size})
    try:
        cl = lattice_line(coarse, points[0], points[-1], job.mover, via=job.via, limits=job.limits, keepout=ckeep,
                          options=_memory_budget(job, coarse.z.size, memory_limit_bytes))
    except NoFeasibleLine as err:
        raise NoFeasibleLine(f"coarse grid ({coarse.cell_size:g} m cells): {err}; set a smaller coarse factor "
                             "or plan='full'", reason=err.reason, closest=err.closest) from err
    compute["coarse_search"] = time.perf_counter() - t0
    width = s.corridor_m if s.corridor_m is not None else 4.0 * coarse.cell_size
    steps: list[dict] = []
    best: tuple | None = None
    last_err: NoFeasibleLine | None = None
    line_xy = np.vstack([cl.points[:, :2], np.asarray(points)])
    for k in range(s.max_widen + 1):
        w = width * 2.0 ** k
        t0 = time.perf_counter()
        box = box_around(line_xy, w + 2.0 * cell)
        box = (max(box[0], area[0]), max(box[1], area[1]), min(box[2], area[2]), min(box[3], area[3]))
        fine, keep = src.window(box)
        outside = corridor_outside(fine, cl.points, w)
        whole = box == area and not outside.any()
        free = int(np.count_nonzero(~outside))
        check_memory(fine.z.size, f"the corridor search ({w:g} m)", active_cells=free, **mem_kw)
        try:
            ln = lattice_line(fine, points[0], points[-1], job.mover, via=job.via, limits=job.limits, keepout=keep,
                              allowed=~outside, options=_memory_budget(job, fine.z.size, memory_limit_bytes))
        except NoFeasibleLine as err:  # a wider corridor may have the passage: widen
            steps.append({"corridor_m": w, "time_s": None, "cells": free, "feasible": False, "reason": err.reason})
            last_err = err
            prev = None
        else:
            steps.append({"corridor_m": w, "time_s": float(ln.time_s), "cells": free, "feasible": True,
                          "reason": None})
            prev = best
            if best is None or ln.time_s < best[2].time_s:
                best = (fine, keep, ln, w)
        compute[f"corridor_{k}"] = time.perf_counter() - t0
        if whole:
            break
        if prev is not None and prev[2].time_s - steps[-1]["time_s"] <= s.widen_tol * steps[-1]["time_s"]:
            break
    if best is None:
        raise NoFeasibleLine(f"no line inside corridors up to {steps[-1]['corridor_m']:g} m around the coarse line "
                             f"({last_err}); raise corridor_m or max_widen, or use plan='full'",
                             reason=last_err.reason if last_err is not None else "corridor",
                             closest=getattr(last_err, "closest", None))
    fine, keep, ln, w = best
    t0 = time.perf_counter()
    lower, why = _whole_grid_bound(src, area, points, job, memory_limit_bytes)
    compute["whole_grid_bound"] = time.perf_counter() - t0
    if lower is not None and lower > float(ln.time_s) * (1.0 + 1e-9):
        # a lower bound above a line that exists contradicts its proof: no gap is claimed
        lower, why = None, (f"the whole-grid bound ({lower:.6f} s) came out above the line found "
                            f"({float(ln.time_s):.6f} s); no gap is claimed")
    gap = None if lower is None else gap_of(float(ln.time_s), lower)
    ln.stats.update(optimality_gap=gap, lower_bound_s=lower)
    info = {"coarse_factor": int(factor), "cell_m": float(fine.cell_size), "coarse_cell_m": float(coarse.cell_size),
            "coarse_time_s": float(cl.time_s), "corridor_m": float(w), "steps": steps,
            "lower_bound_s": lower, "lower_bound_note": why}
    return _Found(terrain=fine, keepout=keep, lattice=ln, plan="corridor", corridor=info, compute_s=compute)


def _whole_grid_bound(src, area, points, job: _Job, memory_limit_bytes) -> tuple[float | None, str | None]:
    """A lower bound of the exact lattice optimum over the whole search area
    (:func:`fallway.lattice.search.lattice_lower_bound`), so that the corridor's line gets a
    certified gap; ``(None, why)`` when it is not computed."""
    legs = 1 + len(job.via)
    if not job.search.gap:
        return None, "no gap asked (gap 0): the whole-grid bound is not computed"
    if legs > CELL_BOUND_MAX_LEGS:
        return None, f"no whole-grid bound for more than {CELL_BOUND_MAX_LEGS} legs"
    if not job.search.heuristic:
        return None, "no whole-grid bound with the A* bound off"
    need = bound_memory_bytes(_cells(area, src.cell), legs=legs)
    limit = memory_limit_bytes if memory_limit_bytes is not None else available_bytes()
    if limit is not None and need > 0.8 * limit:
        return None, (f"the whole-grid bound needs about {need / 1e9:.1f} GB, more than 80 % of the "
                      f"{limit / 1e9:.1f} GB available")
    terrain, keep = src.window(area)
    lb = lattice_lower_bound(terrain, points[0], points[-1], job.mover, via=job.via, limits=job.limits,
                             keepout=keep, neighbours=job.search.neighbours)
    if lb is None or not math.isfinite(lb) or lb <= 0.0:  # inf would contradict the corridor's line
        return None, f"the whole-grid bound gave no usable value ({lb})"
    return float(lb), None


# --------------------------------------------------------------------------- finishing

def _bed_normals(terrain, points: np.ndarray, kind: str):
    """The ground's upward normals under a ground line (None for a raised line, or off the surface)."""
    if kind != "ground":
        return None
    n = terrain.normal(points[:, 0], points[:, 1])
    return n if np.isfinite(n).all() else None


def _timed(terrain, points: np.ndarray, mover: Mover, kind: str):
    """``traverse`` of a route's line; a ground line's lift-off is judged against the ground normal."""
    return traverse(points, mover, surface_normal=_bed_normals(terrain, points, kind))


def _loads(terrain, points: np.ndarray, profile, mover: Mover, kind: str) -> Loads:
    """The loads of a reported line (its smooth reading) at the profile's vertex speeds."""
    return line_loads(points, profile.speed_m_s, g=mover.g, surface_normal=_bed_normals(terrain, points, kind))


def _num(v) -> float | None:
    v = float(v)
    return None if not math.isfinite(v) else v


def _exported(terrain, line, job: _Job) -> np.ndarray:
    """A line as a route exports it: corners sampled as arcs (<= 5° of turn per vertex,
    detail under 5 cm dropped); a ground line then kept within
    :data:`~fallway.terrain.GROUND_TOLERANCE_M` of the ground along every segment (a
    straight chord between far-apart vertices would cut through a convex slope:
    :func:`~fallway.terrain.lay_on_ground`) and its new bends sampled the same way.  Its
    time is the reported one."""
    P = round_corners(np.asarray(line, dtype=float), fixed_xy=job.via, min_segment_m=MIN_EXPORT_SEGMENT_M)
    if job.line.kind == "ground":
        P = round_corners(lay_on_ground(terrain, P), fixed_xy=job.via)
    return P


def _refine(found: _Found, job: _Job, mover: Mover):
    """Run the refinement on a plan's lattice line (polygon keep-outs only: a cell mask has no distance).

    With via points the line is refined leg by leg between its fixed points: each leg
    starts with the speed the refined leg before it delivers (arriving at the via point),
    and the legs are joined there.  The joint optimum could trade a slower earlier leg for
    a faster later one; leg by leg is the stated approximation.
    """
    ko = found.keepout if isinstance(found.keepout, Keepout) else None
    pts = np.asarray(found.lattice.points, dtype=float)
    if found.section is not None:  # a straight plan: the profile refined on the section, mapped back
        sec = found.section
        rr = refine_line(sec.terrain, sec.to_local(pts), mover, limits=job.limits, line=job.line, keep_heights=True)
        return dataclasses.replace(rr, line=sec.to_map(rr.line))
    if not job.via:
        return refine_line(found.terrain, pts, mover, limits=job.limits, keepout=ko, line=job.line,
                           keep_heights=job.line.kind == "raised")
    cuts = [0] + [int(np.argmin(np.hypot(pts[:, 0] - x, pts[:, 1] - y))) for x, y in job.via] + [len(pts) - 1]
    spec = job.line
    if spec.kind == "raised":
        above = raised_heights_m(pts, spec.start_height_m, spec.end_height_m, spec.clearance_m)
    legs, v0 = [], mover.v0
    for i, (a, b) in enumerate(zip(cuts[:-1], cuts[1:])):
        leg_spec = spec if spec.kind != "raised" else dataclasses.replace(
            spec, start_height_m=float(above[a]), end_height_m=float(above[b]))
        rr = refine_line(found.terrain, pts[a:b + 1], dataclasses.replace(mover, v0=v0), limits=job.limits,
                         keepout=ko, line=leg_spec)
        legs.append(rr)
        v_end = float(rr.profile.speed_m_s[-1])
        v0 = v_end if math.isfinite(v_end) else 0.0
    return _joined(legs, pts, mover)


def _joined(legs, start_line: np.ndarray, mover: Mover) -> RefineResult:
    """One :class:`RefineResult` of a line refined leg by leg (``legs`` in order)."""
    line = np.vstack([legs[0].line] + [np.asarray(r.line)[1:] for r in legs[1:]])
    profile = traverse(line, mover)
    rank = {"inactive": 0, "active": 1, "violated": 2}
    limits: dict = {}
    for r in legs:
        for k, v in (r.limits or {}).items():
            if rank.get(v, 0) >= rank.get(limits.get(k, "inactive"), 0):
                limits[k] = v
    tag = [f"leg {i + 1}" for i in range(len(legs))]
    return RefineResult(
        line=line, profile=profile, iterations=int(sum(r.iterations for r in legs)),
        residual=float(max(r.residual for r in legs)), converged=all(r.converged for r in legs),
        time_before_s=float(traverse(start_line, mover).travel_time_s), time_after_s=float(profile.travel_time_s),
        message="; ".join(f"{t}: {r.message}" for t, r in zip(tag, legs)), limits=limits,
        polish="; ".join(f"{t}: {r.polish}" for t, r in zip(tag, legs) if r.polish),
        chosen="; ".join(f"{t}: {r.chosen}" for t, r in zip(tag, legs)),
        candidates=tuple(dataclasses.replace(c, name=f"{t}: {c.name}") for t, r in zip(tag, legs)
                         for c in r.candidates))


def _finish(found: _Found, job: _Job, *, refine: bool | None = None) -> Route:
    """Refinement, timing with the route's model, the fixed summary."""
    terrain, lat, mover = found.terrain, found.lattice, job.mover
    refine = job.refine if refine is None else refine
    compute = dict(found.compute_s)
    rr = None
    final = lat.points
    if refine:
        t0 = time.perf_counter()
        rr = _refine(found, job, mover)
        compute["refine"] = time.perf_counter() - t0
        final = _exported(terrain, rr.line, job)
    on_ground = None  # (time of the refined line on the ground, of the lattice line) when the lattice line wins
    if rr is not None and job.line.kind == "ground":
        # the refinement sees the ground only at its vertices: laid on the ground, its line
        # can be slower than the lattice line laid the same way; the faster one that meets
        # the limits is reported
        alt = _exported(terrain, lat.points, job)
        judged = []   # (points, profile, loads, broken limits) of each, timed and judged once
        for P in (final, alt):
            prof = _timed(terrain, P, mover, "ground")
            ld = _loads(terrain, P, prof, mover, "ground")
            judged.append((P, prof, ld, _violated(terrain, P, prof, job.limits, found.keepout, ld)))
        rank = [(len(bad), prof.travel_time_s if prof.feasible else math.inf) for _, prof, _, bad in judged]
        if rank[1] < rank[0]:
            on_ground = (rank[0][1], rank[1][1])
        final, profile, loads, violated = judged[1 if on_ground is not None else 0]
    else:
        profile = _timed(terrain, final, mover, job.line.kind)
        loads = _loads(terrain, final, profile, mover, job.line.kind)
        violated = _violated(terrain, final, profile, job.limits, found.keepout, loads,
                             clearance_m=job.line.clearance_m if job.line.kind == "raised" else None)
    lattice_profile = lat.profile if mover.normal == "gravity" else _timed(terrain, lat.points, mover, job.line.kind)
    if rr is not None and on_ground is None:
        violated += [k for k, v in (rr.limits or {}).items() if v == "violated" and k not in violated]
    d = np.diff(final, axis=0)
    plan = np.hypot(d[:, 0], d[:, 1])
    st = lat.stats
    summary = RouteSummary(
        line_kind=job.line.kind,
        feasible=bool(profile.feasible) and not violated,
        travel_time_s=_num(profile.travel_time_s),
        exit_speed_m_s=_num(profile.exit_speed_m_s),
        max_speed_m_s=_num(np.nanmax(profile.speed_m_s)),
        length_m=float(np.sqrt(plan ** 2 + d[:, 2] ** 2).sum()),
        plan_length_m=float(plan.sum()),
        drop_m=float(final[0, 2] - final[-1, 2]),
        min_radius_plan_m=min_radius_m(final, dims=2),
        min_radius_3d_m=min_radius_m(final, dims=3),
        max_grade=_num(np.nanmax(profile.grade)),
        violated_limits=violated,
        start_xyz=[float(v) for v in final[0]],
        end_xyz=[float(v) for v in final[-1]],
        via_xy=[[float(a), float(b)] for a, b in job.via],
        lattice_time_s=_num(lattice_profile.travel_time_s),
        lattice_model_time_s=float(lat.time_s),
        neighbours=int(job.search.neighbours),
        search_plan=found.plan,
        search_exact=bool(st.get("exact", True)),
        label_cap=job.search.label_cap,
        labels_created=int(st.get("labels_created", 0)),
        labels_settled=int(st.get("labels_settled", 0)),
        corridor=found.corridor,
        refined=rr is not None,
        refine_choice=None if rr is None else ("lattice line, on the ground" if on_ground else (rr.chosen or None)),
        refine_converged=None if rr is None else bool(rr.converged),
        refine_iterations=None if rr is None else int(rr.iterations),
        refine_residual_s_per_m=None if rr is None else _num(rr.residual),
        refine_message=None if rr is None else str(rr.message) + (
            "" if on_ground is None else f"; laid on the ground the refined line takes {on_ground[0]:.3f} s, the "
                                         f"lattice line {on_ground[1]:.3f} s: the lattice line is reported"),
        refine_limits=None if rr is None else dict(rr.limits or {}),
        refine_candidates=None if rr is None else [dataclasses.asdict(c) for c in rr.candidates],
        robust_method=None,
        robust_mu_range=None,
        robust_note=None,
        robust_candidates=None,
        caution=CAUTION,
        **_load_fields(loads, profile),
        **_point_fields(st, final),
        optimality_gap=st.get("optimality_gap") if found.plan in ("full", "corridor") else None,
        **(clearance_extremes(terrain, final) if job.line.kind == "raised" else {}),
    )
    return Route(line=final, profile=profile, lattice=lat, summary=summary, mover=mover, limits=job.limits,
                 line_spec=job.line, search=job.search, refinement=rr, terrain=terrain, keepout=found.keepout,
                 compute_s=compute)


def _point_fields(stats: dict, line: np.ndarray) -> dict:
    """The summary's end-point fields from the lattice line's stats (:mod:`fallway.lattice.ends`)."""
    out = {}
    for key, vertex in (("start", line[0]), ("end", line[-1])):
        given = stats.get(f"{key}_given_xy")
        out[f"{key}_given_xy"] = [float(v) for v in (vertex[:2] if given is None else given)]
        out[f"{key}_moved_m"] = float(stats.get(f"{key}_moved_m", 0.0))
        out[f"{key}_moved_why"] = stats.get(f"{key}_moved_why")
    return out


def _closest_text(xy, terrain_crs, points_crs) -> str:
    """Where a failed search got closest, for a message: ``lon .., lat ..`` when the caller
    gave lon/lat, else ``x=.., y=..`` in the caller's CRS (the terrain's by default)."""
    x, y, geographic = _caller_xy(xy, terrain_crs, points_crs)
    return f"lon {x:.6f}, lat {y:.6f}" if geographic else f"x={x:.1f}, y={y:.1f}"


def _describe_xy(xy, terrain_crs, points_crs) -> str:
    """A point for a message, in the caller's CRS (lon/lat when that is geographic)."""
    x, y, geographic = _caller_xy(xy, terrain_crs, points_crs)
    return f"(lon {x:.6f}, lat {y:.6f})" if geographic else f"({x:.1f}, {y:.1f})"


def _caller_xy(xy, terrain_crs, points_crs) -> tuple[float, float, bool]:
    """``xy`` (terrain CRS) in the caller's CRS, and whether that CRS is geographic."""
    x, y = float(xy[0]), float(xy[1])
    if points_crs is None or terrain_crs is None:
        return x, y, False
    from pyproj import CRS

    from .points import to_terrain_crs

    dst = CRS.from_user_input(points_crs)
    (px, py), = to_terrain_crs([(x, y)], terrain_crs, dst)
    return float(px), float(py), bool(dst.is_geographic)


def warn_moved_points(stats, terrain_crs, points_crs=None) -> None:
    """One :class:`~fallway.errors.InputWarning` per end point the line does not start or end at.

    ``stats`` is a :class:`~fallway.results.RouteSummary` (as a dict) or a search's
    stats; coordinates are given in ``points_crs`` (the caller's; default the terrain's).
    """
    from .errors import InputWarning

    for key in ("start", "end"):
        moved = stats.get(f"{key}_moved_m")
        if not moved:
            continue
        given = stats[f"{key}_given_xy"]
        now = stats.get(f"{key}_xy") or stats.get(f"{key}_xyz")
        verb = "starts" if key == "start" else "ends"
        warnings.warn(InputWarning(
            f"{key} {_describe_xy(given, terrain_crs, points_crs)} {stats.get(f'{key}_moved_why')}: the line "
            f"{verb} {moved:.1f} m away, at {_describe_xy(now, terrain_crs, points_crs)}"), stacklevel=3)


def _load_fields(loads: Loads, profile) -> dict:
    """The summary's achieved loads: extremes over the vertices and where they occur."""
    lat, lat_at = loads.extreme("lateral_g")
    nrm, nrm_at = loads.extreme("normal_g")
    lift, lift_at = loads.extreme("liftoff_margin_g", largest=False)
    g = np.asarray(profile.grade[:-1], dtype=float)
    g = g[np.isfinite(g)]
    return dict(max_lateral_g=lat, max_lateral_g_station_m=lat_at, max_normal_g=nrm, max_normal_g_station_m=nrm_at,
                min_liftoff_margin_g=lift, min_liftoff_margin_station_m=lift_at,
                min_grade=float(g.min()) if g.size else None)


def _violated(terrain, line: np.ndarray, profile, limits: Limits, keepout, loads: Loads | None = None,
              clearance_m=None) -> list[str]:
    """The limits a reported line breaks: :func:`fallway.evaluate.limit_issues`, the check
    every comparison row gets too (the speed-dependent ones on ``loads``, the line's
    smooth reading; a raised line's band along every segment)."""
    return limit_issues(terrain, line, profile, limits, keepout, loads=loads, clearance_m=clearance_m)



def _envelope_of(route: Route, mu_range) -> Envelope:
    return envelope(route.terrain, route.line, route.mover, *mu_range, limits=route.limits, name="route",
                    computed=True, keepout=route.keepout)


# --------------------------------------------------------------------------- robust plan

def _plan_robust(src, points, job: _Job, mu_range, memory_limit_bytes) -> Route:
    """The fastest line at nominal friction that works across the friction range.

    Robust means: the mover gets through at HI friction, stays under ``mover.max_speed``
    and never lifts off at LO, nominal and HI friction, judged by
    :func:`fallway.evaluate.envelope` (``traverse`` with the route's model).  In order:

    1. the exact nominal lattice optimum, when it is robust on the lattice model: every
       robust line is a feasible line of the nominal search, so it is the robust optimum;
    2. the exact robust lattice search (labels carry the nominal time and one energy per
       friction case; :mod:`fallway.lattice.robust`) within the label budget
       (``SearchOptions.max_labels``, default 2 M here);
    3. when that budget is spent (``reason="label_budget"``), the same search at a 1 %
       energy resolution (approximate: ``robust_method="approximate"``);
    4. when neither gives a robust line, single-friction candidates: the optimum at
       nominal friction, at HI friction, at HI with speed caps tightened by the LO
       overshoot, and at LO with the speed limit (``robust_method`` ends
       ``"+candidates"``).
    Each lattice line is refined at nominal friction; when the refined line is not
    robust the lattice line itself is checked.  The robust line with the least nominal
    time is returned; when none is robust, :class:`NoFeasibleLine` (``reason="limits"``).
    With via points step 4 runs alone (the robust search has one leg).
    """
    if len(points) > 2:
        notes = ["via points: the robust lattice search has one leg, so single-friction candidates were used"]
        tried: list[dict] = []
        return _robust_candidates(src, points, job, mu_range, memory_limit_bytes, "candidates", notes, tried)
    box = _full_window(src, points)
    check_memory(_cells(box, src.cell), "the robust search", **_memory_kw(job, src.cell, memory_limit_bytes))
    terrain, keep = src.window(box)
    lo, hi = mu_range
    mover = job.mover
    opts = job.search if job.search.max_labels is not None else dataclasses.replace(job.search, max_labels=2_000_000)
    notes: list[str] = []
    tried: list[dict] = []
    method = "exact"
    for name, resolution in (("nominal optimum", None), ("robust search", 0.0), ("robust search, 1 % resolution", 0.01)):
        try:
            if resolution is None:
                lat = _nominal_if_robust(terrain, points, job, keep, lo, hi)
                if lat is None:
                    tried.append(_tried(name, mover, "not robust on the lattice model (or not exact)"))
                    continue
            else:
                lat = robust_lattice_line(terrain, points[0], points[-1], mover, lo, hi, limits=job.limits,
                                          keepout=keep, options=opts, resolution=resolution)
        except NoFeasibleLine as err:
            tried.append(_tried(name, mover, str(err)))
            if err.reason == "label_budget":
                notes.append(f"{name}: label budget of {opts.max_labels} spent")
                method = "approximate"
                continue
            if resolution == 0.0 and not job.search.label_cap:
                raise NoFeasibleLine(f"no line works from mu={lo:g} to mu={hi:g}: {err}", reason=err.reason,
                                     closest=err.closest) from err
            break
        if not lat.stats.get("simple", True):
            notes.append(f"{name}: the robust lattice line revisits a cell (a loop that sheds energy)")
        if not lat.stats.get("exact", True):
            method = "approximate"
        found = _Found(terrain=terrain, keepout=keep, lattice=lat, plan="robust")
        best = _robust_variants(found, job, mu_range, name, notes, tried)
        if best is not None:
            return _mark_robust(best, method, mu_range, notes, tried)
    notes.append("the robust lattice search gave no robust line; single-friction candidates were tried too")
    return _robust_candidates(src, points, job, mu_range, memory_limit_bytes, f"{method}+candidates", notes, tried)


def _tried(label: str, mover: Mover, verdict: str, env: Envelope | None = None) -> dict:
    return {"label": label, "mu": mover.mu, "max_speed": mover.max_speed, "verdict": verdict,
            "travel_time_s": None if env is None else env.nominal.travel_time_s, "envelope": env}


def _nominal_if_robust(terrain, points, job: _Job, keep, lo, hi):
    """The exact nominal lattice optimum when it is robust on the lattice model, else None."""
    lat = lattice_line(terrain, points[0], points[-1], job.mover, limits=job.limits, keepout=keep,
                       options=job.search)
    if not lat.stats.get("exact", True):
        return None
    g_model = dataclasses.replace(job.mover, normal="gravity")
    at_hi = traverse(lat.points, dataclasses.replace(g_model, mu=hi, max_speed=None))
    at_lo = traverse(lat.points, dataclasses.replace(g_model, mu=lo))
    if at_hi.stalled_at_m is not None or len(at_lo.overspeed) or at_lo.stalled_at_m is not None:
        return None
    return lat


def _robust_variants(found: _Found, job: _Job, mu_range, name, notes, tried) -> Route | None:
    """The refined line, else the lattice line, if robust with the reporting model."""
    variants = [("refined", True)] if job.refine else []
    variants.append(("lattice line", False))
    for vname, ref in variants:
        with warnings.catch_warnings():
            if not ref:
                warnings.simplefilter("ignore", RefinementWarning)
            r = _finish(found, job, refine=ref)
        env = _envelope_of(r, mu_range)
        tried.append(_tried(f"{name}, {vname}", job.mover, env.verdict, env))
        if env.robust:
            return dataclasses.replace(r, envelope=env)
        notes.append(f"{name}, {vname}: {env.verdict} with the reporting model")
    return None


def _robust_candidates(src, points, job: _Job, mu_range, memory_limit_bytes, method, notes, tried) -> Route:
    """Single-friction searches; the robust one with the least nominal time (see :func:`_plan_robust`)."""
    best = _candidate_searches(src, points, job, mu_range, memory_limit_bytes, tried)
    if best is not None:
        return _mark_robust(best, method, mu_range, notes, tried)
    lo, hi = mu_range
    what = "; ".join(f"{c['label']}: {c['verdict']}" for c in tried)
    raise NoFeasibleLine(f"no line found that works from mu={lo:g} to mu={hi:g} ({what}); narrow the friction "
                         "range, relax the speed limit or move the end points", reason="limits")


def _candidate_searches(src, points, job: _Job, mu_range, memory_limit_bytes, tried) -> Route | None:
    """The optimum at nominal, HI (with tightened speed caps) and LO friction; the fastest robust one.

    Appends one dict per search to ``tried``: ``label``, ``mu``, ``max_speed`` it ran
    with, ``verdict`` (the envelope's, or "no feasible line"), nominal
    ``travel_time_s`` and ``envelope`` (or None).
    """
    lo, hi = mu_range
    mover = job.mover
    found: list[Route] = []

    def attempt(label: str, m: Mover):
        entry = {"label": label, "mu": m.mu, "max_speed": m.max_speed, "verdict": "no feasible line",
                 "travel_time_s": None, "envelope": None}
        tried.append(entry)
        try:
            f = _plan_full(src, points, dataclasses.replace(job, mover=m), memory_limit_bytes)
        except NoFeasibleLine as err:
            entry["verdict"] = f"no feasible line ({err.reason})"
            return None
        r = _finish(dataclasses.replace(f, plan="robust"), job)  # refined and timed at nominal friction
        env = _envelope_of(r, mu_range)
        entry.update(verdict=env.verdict, travel_time_s=env.nominal.travel_time_s, envelope=env)
        if env.robust:
            found.append(dataclasses.replace(r, envelope=env))
        return env

    env = attempt("nominal", mover)
    if env is None or not env.robust:
        env = attempt("high friction", dataclasses.replace(mover, mu=hi))
        if mover.max_speed is not None:
            cap = mover.max_speed
            for _ in range(3):
                if env is None or env.low.overspeed_m is None:
                    break
                # scale the previous line's speed at HI by its overshoot at LO (2 % margin)
                cap = min(cap, env.high.max_speed_m_s) * mover.max_speed / env.low.max_speed_m_s * 0.98
                if cap <= mover.stall_speed:
                    break
                env = attempt(f"high friction, cap {cap:.2f} m/s", dataclasses.replace(mover, mu=hi, max_speed=cap))
            attempt("low friction", dataclasses.replace(mover, mu=lo))
    return min(found, key=lambda r: r.envelope.nominal.travel_time_s) if found else None


def _mark_robust(route: Route, method: str, mu_range, notes, tried) -> Route:
    listed = [{k: v for k, v in c.items() if k != "envelope"} for c in tried]
    s = dataclasses.replace(route.summary, robust_method=method, robust_mu_range=[float(v) for v in mu_range],
                            robust_note="; ".join(notes), robust_candidates=listed)
    return dataclasses.replace(route, summary=s)


# --------------------------------------------------------------------------- reach

@checked_options
def reach(terrain, start, mover: Mover, *, limits: Limits | None = None, keepout=None,
          search: SearchOptions | None = None, max_time_s: float | None = None, max_distance_m: float | None = None,
          memory_limit_bytes: int | None = None, points_crs=None) -> ReachMap:
    """Earliest arrival time and its speed at every cell reachable from ``start``.

    Parameters
    ----------
    terrain : Terrain or path
        An in-memory terrain, or a GeoTIFF in a projected CRS (only the window needed is read).
    start : (x, y)
        Map coordinates in the terrain's CRS: the lines start exactly there, or at the
        nearest free cell centre when the point lies on nodata, in a keep-out area or in
        the DEM's outer half cell (with an :class:`~fallway.errors.InputWarning`; the
        map's ``start`` and ``stats["start_moved_m"]`` say where).
    mover, limits, keepout, search
        As :func:`find_route`.
    max_time_s : float, optional
        Map arrivals up to this time: the window read is the free-fall disc of radius
        ``sqrt(v0² + 2 g (z_start - z_min)) * max_time_s`` and the search stops at the
        cut-off (exact up to it, NaN beyond).
    max_distance_m : float, optional
        Confine lines to the disc of this plan radius around the start.
    memory_limit_bytes : int, optional
    points_crs : CRS or str, optional
        The CRS the caller gave the start in, for messages only.

    Returns
    -------
    ReachMap
        On the window searched; ``stats["cutoff"]`` says which bounds applied.

    Examples
    --------
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(-0.5 * np.arange(50.0)[None, :].repeat(50, 0), (1.0, 0, 0, 0, -1.0, 50.0))
    >>> rm = reach(t, (0.5, 25.5), Mover(), max_distance_m=10.0, search=SearchOptions(neighbours=8))
    >>> rm.time_s.shape, bool(np.isnan(rm.time_s[10, -1]))
    ((23, 12), True)
    """
    if not isinstance(mover, Mover):
        raise ParameterError(f"mover must be a fallway.Mover, got {type(mover).__name__}")
    limits = Limits() if limits is None else limits
    search = SearchOptions() if search is None else search
    for name, v in (("max_time_s", max_time_s), ("max_distance_m", max_distance_m)):
        if v is not None and not (isinstance(v, (int, float)) and float(v) > 0 and math.isfinite(float(v))):
            raise ParameterError(f"{name} must be a positive finite number, got {v!r}")
    x, y = _xy(start, "start")
    src = terrain_source(terrain, keepout)
    if max_time_s is None and max_distance_m is None:
        win, keep = src.window(src.bounds if src.in_memory else box_around([(x, y)], DEFAULT_MARGIN_M))
        check_memory(win.z.size, "the reach search", neighbours=search.neighbours, legs=1,
                     turn_limit=limits.max_step_turn_deg is not None, max_per_cell=search.label_cap,
                     memory_limit_bytes=memory_limit_bytes, cell_m=win.cell_size, reach=True)
        rm = lattice_reach(win, (x, y), mover, limits=limits, keepout=keep, options=search)
        warn_moved_points(rm.stats, win.crs, points_crs)
        return _reached_something(rm, lambda m, lim: lattice_reach(win, (x, y), m, limits=lim, keepout=keep,
                                                                     options=search), mover, limits)
    radius = math.inf if max_distance_m is None else float(max_distance_m)
    if max_time_s is not None:
        # energy height over the lowest cell: no mover is faster (friction only takes energy)
        probe, _ = src.window(box_around([(x, y)], 2.0 * src.cell))
        pr, pc = probe.nearest_cell(x, y)
        z0 = float(probe.z[min(max(pr, 0), probe.shape[0] - 1), min(max(pc, 0), probe.shape[1] - 1)])
        if not math.isfinite(z0):
            raise NoFeasibleLine("start falls on a nodata cell; move it onto the terrain", reason="nodata", closest=None)
        zmin = lowest_within(src, (x, y), float(max_time_s), z0, mover)
        v = math.sqrt(mover.v0 ** 2 + 2.0 * mover.g * max(z0 - zmin, 0.0))
        if mover.max_speed is not None:
            v = min(v, mover.max_speed)
        radius = min(radius, v * float(max_time_s) + 2.0 * src.cell)
    win, keep = src.window(box_around([(x, y)], radius + src.cell))
    rr, cc = np.mgrid[0:win.shape[0], 0:win.shape[1]]
    cx, cy = win.cell_center(rr, cc)
    inside = np.hypot(cx - x, cy - y) <= radius
    del rr, cc, cx, cy
    check_memory(win.z.size, "the reach search", neighbours=search.neighbours, legs=1,
                 turn_limit=limits.max_step_turn_deg is not None, max_per_cell=search.label_cap,
                 memory_limit_bytes=memory_limit_bytes, cell_m=win.cell_size, reach=True,
                 active_cells=int(np.count_nonzero(inside)))
    rm = lattice_reach(win, (x, y), mover, limits=limits, keepout=keep, allowed=inside, options=search,
                       max_time_s=max_time_s)
    rm = _reached_something(rm, lambda m, lim: lattice_reach(win, (x, y), m, limits=lim, keepout=keep, allowed=inside,
                                                             options=search, max_time_s=max_time_s), mover, limits)
    stats = dict(rm.stats)
    stats["cutoff"] = {"radius_m": float(radius), "max_time_s": max_time_s, "max_distance_m": max_distance_m,
                       "window_shape": list(win.shape),
                       "bound": "area window and kernel time cut-off" if max_time_s is not None else "area window"}
    warn_moved_points(stats, win.crs, points_crs)
    return dataclasses.replace(rm, stats=stats)


def _reached_something(rm: ReachMap, again, mover: Mover, limits: Limits) -> ReachMap:
    """``rm`` when it reaches a cell beyond the start; else NoFeasibleLine naming the binding limits.

    ``again(mover, limits)`` reruns the same reach; the bisection (:mod:`fallway.relax`)
    finds the nearest values that reach at least one more cell.
    """
    if int(np.isfinite(rm.time_s).sum()) > 1:
        return rm
    t0 = time.perf_counter()

    def probe(m: Mover, lim: Limits):
        r = again(m, lim)
        return r if int(np.isfinite(r.time_s).sum()) > 1 else None

    cands = relaxations_for(mover, limits, reason="limits") + relaxations_for(mover, limits, reason="stall")
    findings, stats = find_workable(probe, mover, limits, cands,
                                    budget_s=max(WORKABLE_BUDGET_FACTOR * (time.perf_counter() - t0),
                                                 WORKABLE_MIN_BUDGET_S), max_probes=WORKABLE_MAX_PROBES)
    clause = describe(findings, stats, candidates=cands)
    reason = "stall" if [f.name for f in findings] == ["mu"] or not findings else "limits"
    raise NoFeasibleLine(f"the mover reaches no cell beyond the start: {clause}", reason=reason,
                         binding=tuple(f.name for f in findings), workable={f.name: f.workable for f in findings})


# --------------------------------------------------------------------------- compare

@checked_options
def compare(terrain, lines, mover: Mover, *, limits: Limits | None = None, keepout=None, optimum: bool = True,
            search: SearchOptions | None = None, refine: bool = True, mu_range: tuple[float, float] | None = None,
            route: Route | None = None) -> Comparison:
    """Time candidate lines on the same terrain and physics, and rank them.

    Parameters
    ----------
    terrain : Terrain
    lines : sequence of (name, points)
        Plan lines (N, 2) are draped on the ground (:func:`fallway.evaluate.drape`); 3D
        lines (N, 3) keep their own z.  All in the terrain's CRS.
    mover : Mover
        The nominal physics.
    limits : Limits, optional
        Checked on every line (status) and given to the search.
    keepout : Keepout, shapely geometry or bool mask, optional
        No-go areas: given to the search, and a line that enters one gets the status
        ``"keepout"``.
    optimum : bool
        Add the tool's own optimum, marked ``computed``: :func:`find_route` (a ground
        line, the same mover, limits and keep-out) between the first line's end points,
        passed on exactly as drawn; when no line is found the row has status
        ``"no feasible line"``.  A line whose ends lie more than 1 % of a cell from
        those points is named in an :class:`~fallway.errors.InputWarning` (its time is
        not for the same task).
    search : SearchOptions, optional
    refine : bool
        Refine the computed optimum (default), with the same limits.
    mu_range : (float, float), optional
        Friction range: every row carries an :class:`~fallway.evaluate.Envelope`.
    route : Route, optional
        An optimum already found: used as the computed row instead of a new search.

    Returns
    -------
    Comparison
        Rows ranked: lines that meet every limit fastest first, then the others with
        their status (:class:`~fallway.evaluate.Comparison`).

    Examples
    --------
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(np.tile(-0.5 * np.arange(30.0), (10, 1)), (2.0, 0, 0, 0, -2.0, 20.0))
    >>> lines = [("straight", [(1.0, 10.0), (57.0, 10.0)]), ("dogleg", [(1.0, 10.0), (29.0, 18.0), (57.0, 10.0)])]
    >>> cmp = compare(t, lines, Mover(mu=0.1, normal="gravity"), optimum=False)
    >>> [(r.name, r.status) for r in cmp.rows]
    [('straight', 'ok'), ('dogleg', 'ok')]
    """
    limits = Limits() if limits is None else limits
    items = as_named_lines(lines)
    if mu_range is not None:
        mu_range = check_mu_range(mover, *mu_range)
    if not items and optimum and route is None:
        raise ParameterError("give at least one line: the computed optimum uses the first line's end points")
    rows = [row_for_line(terrain, name, pts, mover, limits, mu_range, keepout=keepout) for name, pts in items]
    if optimum:
        taken = {n for n, _ in items}
        name = COMPUTED_NAME
        j = 2
        while name in taken:
            name = f"{COMPUTED_NAME}-{j}"
            j += 1
        ends = (items[0][1][0, :2], items[0][1][-1, :2]) if route is None else (route.line[0, :2],
                                                                               route.line[-1, :2])
        _warn_other_ends(items, ends, float(terrain.cell_size))
        if route is None:
            try:
                route = find_route(terrain, tuple(ends[0]), tuple(ends[1]), mover, limits=limits,
                                   keepout=keepout, search=search, refine=refine, workable=False)
            except NoFeasibleLine as err:
                if err.route is None:
                    rows.append(_failed_row(name, str(err)))
                route = err.route  # a line that breaks a limit: its row carries the status
        if route is not None:
            pts = drop_repeats(np.asarray(route.line, dtype=float))
            rows.append(row_for_line(terrain, name, pts, mover, limits, mu_range, computed=True, keepout=keepout))
    return Comparison.ranked(rows, mover, limits, mu_range, route)


def _warn_other_ends(items, ends, cell_m: float) -> None:
    """Name the candidate lines that do not run between the computed optimum's end points."""
    tol = 0.01 * cell_m
    off = []
    for name, pts in items:
        d0 = float(np.hypot(*(pts[0, :2] - ends[0])))
        d1 = float(np.hypot(*(pts[-1, :2] - ends[1])))
        if max(d0, d1) > tol:
            off.append(f"'{name}' ({d0:.2f} m at the start, {d1:.2f} m at the end)")
    if off:
        warnings.warn(f"the computed optimum runs from ({ends[0][0]:.2f}, {ends[0][1]:.2f}) to "
                      f"({ends[1][0]:.2f}, {ends[1][1]:.2f}); these lines have other end points, so their times "
                      f"are not for the same task: {', '.join(off)}", InputWarning, stacklevel=3)


def _failed_row(name: str, message: str):
    from .evaluate import LineResult

    return LineResult(name=name, travel_time_s=None, length_m=math.nan, drop_m=math.nan, exit_speed_m_s=None,
                      max_speed_m_s=math.nan, min_speed_m_s=math.nan, max_grade=math.nan, min_radius_m=math.nan,
                      min_radius_3d_m=math.nan, stalled_at_m=None, overspeed_m=None, liftoff_m=None, status="no feasible line",
                      computed=True, message=message)


