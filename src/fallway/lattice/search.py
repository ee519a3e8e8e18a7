"""Python front of the lattice search: validate, cast, call the kernel, explain failures.

Points given as map coordinates (x, y) in the terrain CRS snap to the *nearest cell
centre*; a point outside the grid raises :class:`~fallway.errors.ParameterError`, one on
a nodata or keep-out cell raises :class:`~fallway.errors.NoFeasibleLine`.

Physics on the lattice: the search times every sub-segment with the closed-form
gravity-normal segment law (friction work mu * g * plan length, drag k v²) even when
``mover.normal == "full"``: the centripetal part of the normal force needs the curvature
of a smooth line, which a polyline of lattice steps does not have.  Refinement and the
final :func:`fallway.physics.traverse` of the route apply the full model.

Energy tolerance: two labels at a cell whose squared speeds differ by less than
``energy_tol * v²`` (plus a floor of 1e-12 of the largest possible v²) count as equal for
dominance.  The default :data:`DEFAULT_ENERGY_TOL` = 1e-10 is far above the rounding noise
of a long chain of segments (so noise never multiplies labels: a frictionless search
settles exactly one label per cell) and changes the answer by far less than 1e-6
relative (checked against the exact search with zero tolerance in the tests).
``energy_tol=0`` gives the exact Pareto search.

Size: on rough terrain the exact Pareto set per cell grows with the distance from the
start (measured on the benchmark DEM with mu 0.25 and drag: ~20 labels per cell 25
cells out, ~300 at 50, ~3700 at 100).  ``max_per_cell`` caps it (keeping the earliest
arrivals); ``stats["exact"]`` reports whether the cap - or ``max_speed`` - left the
answer possibly inexact.  ``max_per_cell=1`` is the time-only Dijkstra.

Memory: the kernel's per-state arrays are sized for the searchable cells only (not
nodata, not keep-out - so a corridor given as keep-out costs state only inside the
corridor); :meth:`_Problem.index` builds the int32 compact index.  ``stats["state_cells"]``
is that count.  Estimate before a large run with :func:`fallway.scale.search_memory_bytes`.

Time cut-off: ``reach(..., max_time_s=T)`` stops the search at ``T`` (labels later than
``T`` are never queued), with the arrivals up to ``T`` unchanged
(:mod:`fallway.lattice.kernel`, "Time cut-off").
"""

from __future__ import annotations

import math
import time
from dataclasses import replace

import numpy as np

from ..errors import NoFeasibleLine, ParameterError
from ..keepout import Keepout
from ..params import Limits
from ..physics import Mover, traverse
from ..results import LatticeLine, ReachMap
from . import kernel as _k
from .stencil import make_stencil

__all__ = ["reach", "lattice_line", "DEFAULT_ENERGY_TOL"]

#: Declared dominance tolerance on v², relative to each label's own v².
DEFAULT_ENERGY_TOL = 1e-10

_INIT_CAP = 1 << 16
_DEFAULT_MAX_LABELS = 400_000_000


def _snap(terrain, xy, name: str) -> int:
    try:
        x, y = (float(v) for v in xy)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a pair (x, y) of map coordinates, got {xy!r}") from None
    left, bottom, right, top = terrain.bounds
    if not (left <= x <= right and bottom <= y <= top):
        raise ParameterError(f"{name} ({x:.3f}, {y:.3f}) lies outside the terrain "
                             f"[{left:.3f}, {right:.3f}] x [{bottom:.3f}, {top:.3f}]; give a point on the grid")
    rows, cols = terrain.shape
    r, c = terrain.nearest_cell(x, y)
    r = min(max(r, 0), rows - 1)
    c = min(max(c, 0), cols - 1)
    if not np.isfinite(terrain.z[r, c]):
        raise NoFeasibleLine(f"{name} ({x:.3f}, {y:.3f}) falls on a nodata cell; move it onto the terrain",
                             reason="nodata", closest=None)
    return r * cols + c


def _keepout_mask(terrain, keepout) -> np.ndarray:
    rows, cols = terrain.shape
    if keepout is None:
        return np.zeros((rows, cols), dtype=np.bool_)
    if isinstance(keepout, Keepout):
        return keepout.mask(terrain)
    m = np.asarray(keepout, dtype=np.bool_)
    if m.shape != (rows, cols):
        raise ParameterError(f"keepout mask must have the terrain's shape {rows}x{cols}, got {m.shape}")
    return m


class _Problem:
    """Arrays the kernel needs, built once per query."""

    def __init__(self, terrain, mover: Mover, neighbours: int, limits: Limits | None, keep: np.ndarray,
                 z_override: np.ndarray | None = None, use_limits: bool = True):
        if not isinstance(mover, Mover):
            raise ParameterError(f"mover must be a fallway.Mover, got {type(mover).__name__}")
        limits = Limits() if limits is None else limits
        if not isinstance(limits, Limits):
            raise ParameterError(f"limits must be a fallway.Limits, got {type(limits).__name__}")
        self.terrain = terrain
        self.mover = mover
        self.limits = limits
        self.stencil = st = make_stencil(neighbours)
        rows, cols = terrain.shape
        self.rows, self.cols = rows, cols
        z = terrain.z if z_override is None else z_override
        nodata = ~np.isfinite(z)
        self.nodata = nodata
        self.keep = keep
        self.blocked = np.ascontiguousarray((nodata | keep).ravel())
        self.z = np.ascontiguousarray(np.where(nodata, 0.0, z).ravel(), dtype=np.float64)
        self.zmin = float(np.min(z[~nodata])) if (~nodata).any() else 0.0
        self.cell = terrain.cell_size
        off = st.offsets
        self.off_dr = np.ascontiguousarray(off[:, 0])
        self.off_dc = np.ascontiguousarray(off[:, 1])
        self.off_plan = np.ascontiguousarray(st.plan_cells)
        self.brk_start = np.ascontiguousarray(st.break_start)
        self.brk_u = np.ascontiguousarray(st.break_u)
        self.brk_fa = np.ascontiguousarray(st.break_a[:, 0] * cols + st.break_a[:, 1]) if len(st.break_u) else np.zeros(0, np.int64)
        self.brk_fb = np.ascontiguousarray(st.break_b[:, 0] * cols + st.break_b[:, 1]) if len(st.break_u) else np.zeros(0, np.int64)
        self.brk_w = np.ascontiguousarray(st.break_w)
        self.tch_start = np.ascontiguousarray(st.touch_start)
        self.tch_flat = np.ascontiguousarray(st.touch[:, 0] * cols + st.touch[:, 1])
        turn = limits.max_step_turn_deg if use_limits else None
        self.use_heading = turn is not None
        self.turn_ok = np.ascontiguousarray(st.turn_ok(turn))
        self.min_grade = limits.min_grade if use_limits else -math.inf
        self.max_grade = limits.max_grade if use_limits else math.inf
        vmax = mover.max_speed if use_limits else None
        self.v2_max = math.inf if vmax is None else vmax * vmax

    def a_max(self, mover: Mover) -> float:
        z = self.terrain.z

        def steepest(axis: int) -> float:
            d = np.abs(np.diff(z, axis=axis)) if z.shape[axis] > 1 else np.zeros(0)
            d = d[np.isfinite(d)]  # nodata pairs carry no slope (an all-nodata pair set is fine)
            return float(d.max()) if d.size else 0.0

        gmax = math.hypot(steepest(1), steepest(0)) / self.cell
        return mover.g * (gmax - mover.mu) / math.sqrt(1.0 + gmax * gmax)

    def index(self, compact: bool = True) -> tuple[np.ndarray, int]:
        """Compact index of the searchable cells (int32, -1 where blocked) and their count.

        ``compact=False`` gives the full-window layout (index = flat cell index, count =
        all cells of the window): the same search, the per-state arrays sized for the
        whole window (kept for tests and benchmarks).  With nothing blocked the index is
        the identity and a one-element dummy is returned (the kernel does not read it).
        """
        free = ~self.blocked
        if free.size >= 2 ** 31:
            raise ParameterError(f"the grid has {free.size} cells; the lattice indexes cells with int32 (fewer than "
                                 "2**31): search a smaller area (fallway.scale.find_route_large) or coarsen the DEM")
        if bool(free.all()):  # the identity: the kernel does not read the map
            return np.zeros(1, dtype=np.int32), int(free.size)
        cidx = np.full(free.size, -1, dtype=np.int32)
        if compact:
            nact = int(np.count_nonzero(free))
            cidx[free] = np.arange(nact, dtype=np.int32)
        else:
            nact = int(free.size)
            cidx[free] = np.flatnonzero(free).astype(np.int32)
        return cidx, nact

    def run(self, start: int, targets: list[int], *, heuristic: bool, energy_tol: float | None,
            max_labels: int | None, max_per_cell: int | None = None, max_time_s: float | None = None,
            compact: bool = True):
        m = self.mover
        v2_start = m.v0 * m.v0
        v2_scale = v2_start + 2.0 * m.g * max(self.z[start] - self.zmin, 0.0)
        tol_rel = DEFAULT_ENERGY_TOL if energy_tol is None else float(energy_tol)
        if not (tol_rel >= 0.0 and math.isfinite(tol_rel)):
            raise ParameterError(f"energy_tol must be a finite number >= 0, got {energy_tol!r}")
        # relative to each label's own v², with a floor far below any meaningful speed
        tol_abs = 1e-12 * max(v2_scale, 1e-300) if tol_rel > 0.0 else 0.0
        tg = np.asarray(targets, dtype=np.int64)
        remaining = np.zeros(max(len(tg), 1), dtype=np.float64)
        cols = self.cols
        for i in range(len(tg) - 2, -1, -1):
            a, b = tg[i], tg[i + 1]
            dx = (a % cols - b % cols) * self.cell
            dy = (a // cols - b // cols) * self.cell
            dz = self.z[a] - self.z[b]
            remaining[i] = remaining[i + 1] + math.sqrt(dx * dx + dy * dy + dz * dz)
        vbound = math.sqrt(v2_scale)
        if m.drag > 0.0 and inv_v_wanted(heuristic, tg):
            # With drag, v² falls wherever it exceeds a/k (d(v²)/ds = 2a - 2kv²), so
            # v² <= max(v0², a_max/k).  a = g (G - mu)/sqrt(1 + G²) grows with the descent
            # grade G of a sub-segment, and G <= |grad z| of the bilinear surface <=
            # hypot(max |dz| along rows, max |dz| along columns) / cell.
            a_max = self.a_max(m)
            vt2 = max(v2_start, a_max / m.drag) if a_max > 0.0 else v2_start
            vbound = min(vbound, math.sqrt(vt2))
        if self.v2_max < math.inf:
            vbound = min(vbound, math.sqrt(self.v2_max))
        inv_v = 1.0 / vbound if (heuristic and len(tg) and vbound > 0.0) else 0.0
        budget = _DEFAULT_MAX_LABELS if max_labels is None else int(max_labels)
        t_max = math.inf if max_time_s is None else float(max_time_s)
        if not t_max > 0.0:
            raise ParameterError(f"max_time_s must be a positive number of seconds, got {max_time_s!r}")
        cidx, nact = self.index(compact)
        t0 = time.perf_counter()
        out = _k.search(self.z, self.blocked, cidx, nact, self.rows, self.cols, self.cell,
                        self.off_dr, self.off_dc, self.off_plan,
                        self.brk_start, self.brk_u, self.brk_fa, self.brk_fb, self.brk_w,
                        self.tch_start, self.tch_flat, self.turn_ok, self.use_heading,
                        m.g, m.mu, m.drag, m.stall_speed ** 2, self.v2_max, self.min_grade, self.max_grade,
                        int(start), v2_start, tg, remaining, inv_v, tol_abs, tol_rel, budget, _INIT_CAP,
                        int(max_per_cell or 0), t_max)
        elapsed = time.perf_counter() - t0
        (status, final, n_lab, Lt, Lv2, Lnode, Lpar, Lleg, best_t, best_v2, closest, counters) = out
        if len(tg) == 0 and nact < cidx.size:  # reach: compact index -> window cells
            sel = cidx >= 0
            bt = np.full(cidx.size, np.nan)
            bv = np.full(cidx.size, np.nan)
            bt[sel] = best_t[cidx[sel]]
            bv[sel] = best_v2[cidx[sel]]
            best_t, best_v2 = bt, bv
        del cidx
        stats = {
            "labels_created": int(counters[_k.C_CREATED]),
            "labels_settled": int(counters[_k.C_SETTLED]),
            "labels_dominated": int(counters[_k.C_DOMINATED]),
            "rejected_grade": int(counters[_k.C_GRADE]),
            "rejected_stall": int(counters[_k.C_STALL] + counters[_k.C_UPHILL]),
            "rejected_speed": int(counters[_k.C_SPEED]),
            "rejected_turn": int(counters[_k.C_TURN]),
            "rejected_blocked": int(counters[_k.C_BLOCKED]),
            "labels_capped": int(counters[_k.C_CAPPED]),
            "labels_cut_off": int(counters[_k.C_CUTOFF]),
            "state_cells": int(nact),
            "max_per_cell": int(max_per_cell or 0),
            "exact": bool(counters[_k.C_CAPPED] == 0 and self.v2_max == math.inf),
            "search_s": float(elapsed),
            "neighbours": int(self.stencil.size),
            "energy_tol": float(tol_rel),
            "heuristic": bool(inv_v > 0.0),
        }
        return dict(status=int(status), final=int(final), t=Lt, v2=Lv2, node=Lnode, parent=Lpar,
                    best_t=best_t, best_v2=best_v2, closest=int(closest), counters=counters, stats=stats)


def inv_v_wanted(heuristic: bool, targets) -> bool:
    return bool(heuristic and len(targets))


def _cell_xy(terrain, flat: int) -> tuple[float, float]:
    cols = terrain.shape[1]
    return terrain.cell_center(flat // cols, flat % cols)


def _diagnose(terrain, mover, neighbours, limits, keep, start, targets, first, heuristic, energy_tol, max_labels,
              max_per_cell):
    """Find why no line exists by relaxing one obstacle at a time."""
    closest = _cell_xy(terrain, first["closest"])
    where = f"closest reached cell ({closest[0]:.1f}, {closest[1]:.1f})"
    if keep.any():
        p = _Problem(terrain, mover, neighbours, limits, np.zeros_like(keep))
        if p.run(start, targets, heuristic=heuristic, energy_tol=energy_tol, max_labels=max_labels, max_per_cell=max_per_cell)["status"] == _k.OK:
            return NoFeasibleLine(f"keep-out areas block every line; {where}; shrink the keep-out or move the points",
                                  reason="keepout", closest=closest)
    lim = limits if limits is not None else Limits()
    if lim != Limits() or mover.max_speed is not None:
        p = _Problem(terrain, mover, neighbours, limits, keep, use_limits=False)
        if p.run(start, targets, heuristic=heuristic, energy_tol=energy_tol, max_labels=max_labels, max_per_cell=max_per_cell)["status"] == _k.OK:
            return NoFeasibleLine(f"the grade, turn or speed limits block every line; {where}; relax the limits",
                                  reason="limits", closest=closest)
    nod = ~np.isfinite(terrain.z)
    if nod.any() and (~nod).any():
        from scipy import ndimage
        idx = ndimage.distance_transform_edt(nod, return_distances=False, return_indices=True)
        filled = terrain.z[tuple(idx)]
        p = _Problem(terrain, mover, neighbours, limits, keep, z_override=filled)
        if p.run(start, targets, heuristic=heuristic, energy_tol=energy_tol, max_labels=max_labels, max_per_cell=max_per_cell)["status"] == _k.OK:
            return NoFeasibleLine(f"nodata cells block every line; {where}; fill the DEM gaps or move the points",
                                  reason="nodata", closest=closest)
    c = first["counters"]
    if c[_k.C_STALL] > 0:
        return NoFeasibleLine(f"the mover stalls on every line (friction and drag take all its energy); {where}; "
                              "lower mu or drag, or raise v0", reason="stall", closest=closest)
    if c[_k.C_UPHILL] > 0:
        return NoFeasibleLine(f"every line would have to climb higher than the start energy allows; {where}",
                              reason="uphill", closest=closest)
    return NoFeasibleLine(f"no lattice line connects the points; {where}", reason="unreachable", closest=closest)


def _check_uphill(terrain, mover, start, points, names):
    cols = terrain.shape[1]
    zs = terrain.z.ravel()
    ceiling = zs[start] + mover.v0 ** 2 / (2.0 * mover.g)
    for p, name in zip(points, names):
        if zs[p] > ceiling + 1e-9:
            xy = _cell_xy(terrain, p)
            raise NoFeasibleLine(f"{name} ({xy[0]:.1f}, {xy[1]:.1f}) at {zs[p]:.2f} m lies above the start's energy "
                                 f"height {ceiling:.2f} m; a gravity line cannot climb there",
                                 reason="uphill", closest=_cell_xy(terrain, start))


def _line_points(terrain, stencil, nodes: list[int]) -> tuple[np.ndarray, np.ndarray]:
    rows, cols = terrain.shape
    z = terrain.z
    lookup = {(int(a), int(b)): k for k, (a, b) in enumerate(stencil.offsets)}
    cells = np.array([(n // cols, n % cols) for n in nodes], dtype=np.int64).reshape(-1, 2)
    rc = [(float(cells[0, 0]), float(cells[0, 1]), float(z[cells[0, 0], cells[0, 1]]))]
    for (r0, c0), (r1, c1) in zip(cells[:-1], cells[1:]):
        k = lookup[(int(r1 - r0), int(c1 - c0))]
        for u, a, b, w in stencil.edge_points(k):
            za = z[r0 + a[0], c0 + a[1]]
            zb = z[r0 + b[0], c0 + b[1]]
            rc.append((r0 + u * (r1 - r0), c0 + u * (c1 - c0), w * za + (1.0 - w) * zb))
        rc.append((float(r1), float(c1), float(z[r1, c1])))
    rc = np.array(rc)
    x, y = terrain.cell_center(rc[:, 0], rc[:, 1])
    return cells, np.column_stack([x, y, rc[:, 2]])


def lattice_line(terrain, start, end, mover: Mover, *, via=(), limits: Limits | None = None, keepout=None,
                 allowed=None, options=None):
    from ..params import SearchOptions
    o = SearchOptions() if options is None else options
    if allowed is not None:
        keepout = _keepout_mask(terrain, keepout) | ~np.asarray(allowed, bool)
    return _lattice_line_old(terrain, start, end, mover, via=via, neighbours=o.neighbours, limits=limits,
                             keepout=keepout, heuristic=o.heuristic, energy_tol=o.energy_tol, max_labels=o.max_labels,
                             max_per_cell=o.label_cap)


def _lattice_line_old(terrain, start, end, mover: Mover, *, via=(), neighbours: int = 16, limits: Limits | None = None,
                 keepout=None, heuristic: bool = True, energy_tol: float | None = None,
                 max_labels: int | None = None, max_per_cell: int | None = None):
    """The exact minimum-time line on the terrain lattice.

    Parameters
    ----------
    terrain : Terrain
    start, end : (x, y)
        Map coordinates in the terrain CRS; they snap to the nearest cell centre.
    mover : Mover
        Physics; the lattice uses the gravity-normal friction model (module notes).
    via : sequence of (x, y)
        Points the line must pass through, in order; the energy carries through them.
    neighbours : {8, 16, 32}
    limits : Limits, optional
        Grade window per sub-segment, max turn per step; the speed window comes from
        ``mover.stall_speed`` and ``mover.max_speed``.
    keepout : Keepout or bool array, optional
        No-go areas (a mask must have the terrain's shape).
    heuristic : bool
        Use the A* bound (same answer, fewer labels).
    energy_tol : float, optional
        Dominance tolerance relative to a label's v² (default
        :data:`DEFAULT_ENERGY_TOL`; 0 = exact).
    max_labels : int, optional
        Stop with :class:`NoFeasibleLine` after creating this many labels.
    max_per_cell : int, optional
        Keep at most this many non-dominated labels per cell (the earliest arrivals).
        None (default): the exact Pareto search.  On rough terrain the exact Pareto
        set grows with distance (measured: ~20 labels per cell 25 cells from the start,
        ~300 at 50, ~3700 at 100), so large grids need a cap; ``stats["exact"]`` says
        whether the cap (or a binding ``max_speed``) made the answer approximate.
        With ``mover.max_speed`` set the uncapped search runs first: its line is the
        exact answer when it stays under the speed limit (``stats["speed_cap_binding"]``
        False); otherwise the capped search runs, which is approximate (a faster label
        can be pruned that would later overspeed - dominance is then a heuristic).

    Returns
    -------
    LatticeLine
        With ``stats``: labels created/settled, search seconds, start/end cells.

    Raises
    ------
    NoFeasibleLine
        With ``reason`` one of "stall", "limits", "keepout", "nodata", "uphill",
        "unreachable" and ``closest`` the reached cell nearest to the target.

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> z = -0.5 * np.add.outer(np.arange(6.0), np.arange(6.0))
    >>> t = Terrain.from_array(z, (1.0, 0, 0, 0, -1.0, 6.0))
    >>> ln = lattice_line(t, (0.5, 5.5), (5.5, 0.5), Mover(mu=0.1), neighbours=8)
    >>> ln.cells[[0, -1]].tolist()
    [[0, 0], [5, 5]]
    """
    if mover.max_speed is not None:
        # With a speed cap "more energy never hurts" fails (a faster label may overspeed
        # later), so the capped search is approximate.  The uncapped optimum is exact
        # whenever it respects the cap (the capped lines are a subset of the uncapped
        # ones), and when no uncapped line exists no capped one does either.
        free = _lattice_line(terrain, start, end, replace(mover, max_speed=None), via=via,
                             neighbours=neighbours, limits=limits, keepout=keepout, heuristic=heuristic,
                             energy_tol=energy_tol, max_labels=max_labels, max_per_cell=max_per_cell)
        if float(np.nanmax(free.profile.speed_m_s)) <= mover.max_speed:
            free.stats["speed_cap_binding"] = False
            return free
        capped = _lattice_line(terrain, start, end, mover, via=via, neighbours=neighbours, limits=limits,
                               keepout=keepout, heuristic=heuristic, energy_tol=energy_tol,
                               max_labels=max_labels, max_per_cell=max_per_cell)
        capped.stats["speed_cap_binding"] = True
        return capped
    return _lattice_line(terrain, start, end, mover, via=via, neighbours=neighbours, limits=limits,
                         keepout=keepout, heuristic=heuristic, energy_tol=energy_tol, max_labels=max_labels,
                         max_per_cell=max_per_cell)


def _lattice_line(terrain, start, end, mover: Mover, *, via, neighbours, limits, keepout, heuristic, energy_tol,
                  max_labels, max_per_cell):

    limits = Limits() if limits is None else limits
    keep = _keepout_mask(terrain, keepout)
    s = _snap(terrain, start, "start")
    if len(via) > 100:
        raise ParameterError(f"at most 100 via points are supported, got {len(via)}; split the route")
    vias = [_snap(terrain, p, f"via point {i + 1}") for i, p in enumerate(via)]
    e = _snap(terrain, end, "end")
    targets = vias + [e]
    for flat, name in zip(targets, [f"via point {i + 1}" for i in range(len(vias))] + ["end"]):
        if keep.ravel()[flat]:
            xy = _cell_xy(terrain, flat)
            raise NoFeasibleLine(f"{name} ({xy[0]:.1f}, {xy[1]:.1f}) lies in a keep-out area; move it out",
                                 reason="keepout", closest=None)
    if keep.ravel()[s]:
        xy = _cell_xy(terrain, s)
        raise NoFeasibleLine(f"start ({xy[0]:.1f}, {xy[1]:.1f}) lies in a keep-out area; move it out",
                             reason="keepout", closest=None)
    _check_uphill(terrain, mover, s, targets, [f"via point {i + 1}" for i in range(len(vias))] + ["end"])
    prob = _Problem(terrain, mover, neighbours, limits, keep)
    res = prob.run(s, targets, heuristic=heuristic, energy_tol=energy_tol, max_labels=max_labels, max_per_cell=max_per_cell)
    if res["status"] == _k.LABEL_BUDGET:
        raise NoFeasibleLine(f"label budget of {max_labels} exhausted before reaching the end; raise max_labels "
                             "or coarsen the grid", reason="label_budget", closest=_cell_xy(terrain, res["closest"]))
    if res["status"] != _k.OK:
        raise _diagnose(terrain, mover, neighbours, limits, keep, s, targets, res, heuristic, energy_tol, max_labels,
                        max_per_cell)
    nodes = []
    p = res["final"]
    parent, node = res["parent"], res["node"]
    while p >= 0:
        n = int(node[p])
        if not nodes or nodes[-1] != n:
            nodes.append(n)
        p = int(parent[p])
    nodes.reverse()
    if len(nodes) == 1:
        raise ParameterError("start and end snap to the same cell; give points at least one cell apart")
    cells, points = _line_points(terrain, prob.stencil, nodes)
    t_final = float(res["t"][res["final"]])
    stats = dict(res["stats"])
    stats["start_cell"] = [int(cells[0, 0]), int(cells[0, 1])]
    stats["end_cell"] = [int(cells[-1, 0]), int(cells[-1, 1])]
    stats["exit_speed_m_s"] = float(math.sqrt(res["v2"][res["final"]]))
    profile = traverse(points, replace(mover, normal="gravity"))
    return LatticeLine(cells=cells, points=points, profile=profile, time_s=t_final, stats=stats)


def reach(terrain, start, mover: Mover, *, limits: Limits | None = None, keepout=None, allowed=None, options=None,
          max_time_s: float | None = None):
    from ..params import SearchOptions
    o = SearchOptions() if options is None else options
    if allowed is not None:
        keepout = _keepout_mask(terrain, keepout) | ~np.asarray(allowed, bool)
    return _reach_old(terrain, start, mover, neighbours=o.neighbours, limits=limits, keepout=keepout,
                      energy_tol=o.energy_tol, max_labels=o.max_labels, max_per_cell=o.label_cap, max_time_s=max_time_s)


def _reach_old(terrain, start, mover: Mover, *, neighbours: int = 16, limits: Limits | None = None, keepout=None,
          energy_tol: float | None = None, max_labels: int | None = None, max_per_cell: int | None = None,
          max_time_s: float | None = None):
    """Earliest arrival time and its speed at every cell reachable from ``start``.

    Parameters are those of :func:`lattice_line` (``start`` snaps to the nearest cell
    centre).  The speed is that of the earliest label (a later, faster arrival may exist).

    Parameters
    ----------
    max_time_s : float, optional
        Time cut-off: labels later than this are neither queued nor settled, so the
        search stops expanding at the cut-off.  Every arrival up to ``max_time_s`` is
        the one the uncut search finds (a line's time only grows along it, so every
        label up to the cut-off descends from labels up to the cut-off, and all of them
        are settled before any later one); cells reached later are NaN.

    Returns
    -------
    ReachMap
        ``time_s`` and ``speed_m_s`` (NaN where unreachable), the terrain's transform
        and CRS, and search statistics (``labels_cut_off``: labels dropped by the
        cut-off; ``state_cells``: cells the per-state arrays were sized for).

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(-np.arange(4.0)[None, :].repeat(3, 0), (1.0, 0, 0, 0, -1.0, 3.0))
    >>> rm = reach(t, (0.5, 1.5), Mover(), neighbours=8)
    >>> print(f"{rm.speed_m_s[1, 3]:.4f}")
    7.6707
    """

    limits = Limits() if limits is None else limits
    keep = _keepout_mask(terrain, keepout)
    s = _snap(terrain, start, "start")
    if keep.ravel()[s]:
        xy = _cell_xy(terrain, s)
        raise NoFeasibleLine(f"start ({xy[0]:.1f}, {xy[1]:.1f}) lies in a keep-out area; move it out",
                             reason="keepout", closest=None)
    prob = _Problem(terrain, mover, neighbours, limits, keep)
    res = prob.run(s, [], heuristic=False, energy_tol=energy_tol, max_labels=max_labels, max_per_cell=max_per_cell,
                   max_time_s=max_time_s)
    shape = terrain.shape
    tt = res["best_t"].reshape(shape)
    vv = np.sqrt(res["best_v2"]).reshape(shape)
    stats = dict(res["stats"])
    stats["cells_reached"] = int(np.isfinite(tt).sum())
    stats["complete"] = res["status"] != _k.LABEL_BUDGET
    stats["max_time_s"] = None if max_time_s is None else float(max_time_s)
    return ReachMap(time_s=tt, speed_m_s=vv, transform=terrain.transform, crs=terrain.crs,
                    start=tuple(float(v) for v in _cell_xy(terrain, s)), stats=stats)
