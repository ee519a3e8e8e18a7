"""Typed fronts of the lattice search: validate, cast, call a kernel, explain failures.

* :func:`lattice_line` - the exact minimum-time line (through via points);
* :func:`reach` - earliest arrival time and speed at every cell;
* :func:`robust_lattice_line` - the fastest line at nominal friction that works over a
  friction range.

Each takes the search options as one :class:`~fallway.params.SearchOptions` (stencil,
label cap, label budget, energy tolerance, A* bound; the planning fields are the
router's and are not read here) and rejects an unknown keyword with a
:class:`~fallway.errors.ParameterError` (:func:`~fallway.params.checked_options`).  The
kernels are :mod:`fallway.lattice.kernel` and :mod:`fallway.lattice.robust`, on the
shared compiled core :mod:`fallway.lattice.core`.

End points given as map coordinates (x, y) in the terrain CRS are exact
(:mod:`fallway.lattice.ends`): the line starts and ends there, joined to nearby cell
centres by virtual edges the kernel walks like any edge; a point on nodata, in a keep-out
area or in the DEM's outer half cell moves to the nearest free cell centre and
``stats["start_moved_m"]`` / ``stats["start_moved_why"]`` (and ``end_...``) say so.  Via
points and the robust search's ends snap to the nearest cell centre (the robust search
records that as a move).  A point outside the grid raises
:class:`~fallway.errors.ParameterError`, one outside the search domain
:class:`~fallway.errors.NoFeasibleLine` (``"corridor"``); a via point on a nodata or
keep-out cell raises :class:`~fallway.errors.NoFeasibleLine`.

Physics on the lattice: the search times every sub-segment with the closed-form
segment law (friction work mu * g * plan length, drag k v²).  With the full normal-force
model (``mover.normal == "full"``) and a turn limit (``limits.max_step_turn_deg``, which
gives the search its heading state) every vertex of a lattice line -- the corner between
two steps and the vertical kinks between an edge's sub-segments -- also pays the corner
law of the reporting model (:func:`fallway._traverse.corner_v2`, the belt-friction law
of a sharp turn), so a lattice line costs in the search what
:func:`fallway.physics.traverse` charges it, and the search steers away from zig-zags
that would stall.  Without a turn limit the search has no heading state, cannot charge a
corner (its cost depends on the step that led to the cell) and times the line with the
gravity-normal law only; refinement and the final :func:`fallway.physics.traverse` of
the route apply the full model in every case.  The robust search never charges corners.

Energy tolerance: two labels at a cell whose squared speeds differ by less than
``energy_tol * v²`` (plus a floor of 1e-12 of the largest possible v²) count as equal for
dominance.  The default :data:`DEFAULT_ENERGY_TOL` = 1e-10 is far above the rounding noise
of a long chain of segments (so noise never multiplies labels: a frictionless search
settles exactly one label per cell) and changes the answer by far less than 1e-6
relative (checked against the exact search with zero tolerance in the tests).
``energy_tol=0`` gives the exact Pareto search.

Size: on rough terrain the exact Pareto set per cell grows with the distance from the
start (measured on the benchmark DEM with mu 0.25 and drag: ~20 labels per cell 25
cells out, ~300 at 50, ~3700 at 100).  ``SearchOptions.label_cap`` caps it (keeping the
earliest arrivals); ``stats["exact"]`` reports whether the cap - or ``max_speed`` - left
the answer possibly inexact.  ``label_cap=1`` is the time-only Dijkstra.
``SearchOptions.max_labels`` is the label budget of one search.

Search domain: ``allowed`` (a bool mask of the terrain's shape) is where the search may
go, e.g. a corridor around a coarse line.  Cells outside it are not searched and cost no
kernel state, like keep-out cells, but they are not a keep-out: a failure is diagnosed
inside the domain first, and blamed on the domain (reason ``"corridor"``) only when a
line exists once the domain is lifted.

Memory: the kernels' per-state arrays are sized for the searchable cells only (not
nodata, not keep-out, not outside the domain); :meth:`_Problem.index` builds the int32
compact index.  ``stats["state_cells"]`` is that count.  Estimate before a large run
with :func:`fallway.scale.search_memory_bytes`.

Time cut-off: ``reach(..., max_time_s=T)`` stops the search at ``T`` (labels later than
``T`` are never queued), with the arrivals up to ``T`` unchanged
(:mod:`fallway.lattice.kernel`, "Time cut-off").

Failure diagnosis
-----------------
When no line is found the front relaxes one obstacle at a time and searches again,
in this order, and names the first that frees a line (``NoFeasibleLine.reason``):
the keep-out inside the search domain (``"keepout"``); the grade, turn and speed limits
(``"limits"``); nodata cells, filled from their nearest neighbours (``"nodata"``); the
search domain (``"corridor"``).  A relaxation is tried only when the failed search was
stopped by that obstacle at least once: the kernels count the edges stopped by nodata,
keep-out and out-of-domain cells, and when that count is zero the relaxed search would
run exactly as the failed one did.  Without a line, the reason is ``"stall"``,
``"uphill"`` or ``"unreachable"`` from what stopped the edges.  A search that spends its
label budget raises ``reason="label_budget"`` at once.
"""

from __future__ import annotations

import math
import time
from dataclasses import replace

import numpy as np

from ..errors import NoFeasibleLine, ParameterError
from ..keepout import Keepout
from ..params import Limits, SearchOptions, checked_options
from ..physics import Mover, check_mu_range, traverse
from ..results import LatticeLine, ReachMap
from ..scale import CELL_BOUND_MAX_LEGS  # routes of more legs use the straight A* bound
from . import core as _c
from .core import virtual_passable as _virtual_passable
from .bound import _virtual_exit
from .bound import energy_ceiling as _energy_ceiling, time_to_go as _time_to_go
from .kernel import search as _search
from .ends import EndPoint, Virtual, no_virtual, parse_point, resolve_point, virtual_edges
from .gap import FIRST_GRID_FRACTION, GapResult, certify
from .robust import ROBUST_ENERGY_TOL, lo_floor, robust_search
from .stencil import make_stencil

__all__ = ["reach", "lattice_line", "lattice_lower_bound", "robust_lattice_line", "DEFAULT_ENERGY_TOL", "ROBUST_ENERGY_TOL"]

#: Declared dominance tolerance on v², relative to each label's own v².
DEFAULT_ENERGY_TOL = 1e-10

_INIT_CAP = 1 << 16
_DEFAULT_MAX_LABELS = 400_000_000
#: With a gap target the exact search runs first on a budget of this many labels plus
#: :data:`EXACT_FIRST_PER_STATE` per lattice state (:data:`EXACT_FIRST_PER_STATE_PLAIN`
#: where no per-cell A* bound guides it: the A* bound off, or more legs than
#: :data:`fallway.scale.CELL_BOUND_MAX_LEGS`); past it the relaxed searches bound the
#: answer (:mod:`fallway.lattice.gap`).
EXACT_FIRST_LABELS = 200_000
EXACT_FIRST_PER_STATE = 0.25
EXACT_FIRST_PER_STATE_PLAIN = 2.0
#: ... and a search keeping this many labels per state gives the first feasible line (T_UB;
#: 0: none, the relaxed searches' lines only).
INCUMBENT_LABEL_CAP = 2
_ROBUST_INIT_CAP = 1 << 14
_ROBUST_MAX_LABELS = 50_000_000


# ----------------------------------------------------------------------------- inputs

def _options(options) -> SearchOptions:
    if options is None:
        return SearchOptions()
    if not isinstance(options, SearchOptions):
        raise ParameterError(f"options must be a fallway.SearchOptions, got {type(options).__name__}")
    return options


def _check_mover(mover) -> None:
    if not isinstance(mover, Mover):
        raise ParameterError(f"mover must be a fallway.Mover, got {type(mover).__name__}")


def _snap(terrain, xy, name: str) -> int:
    x, y = parse_point(terrain, xy, name)
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


def _domain_mask(terrain, allowed) -> np.ndarray | None:
    """The search domain as a bool mask, or None when it is the whole terrain."""
    if allowed is None:
        return None
    m = np.asarray(allowed)
    if m.dtype != np.bool_:
        raise ParameterError(f"allowed must be a bool mask, got dtype {m.dtype}")
    rows, cols = terrain.shape
    if m.shape != (rows, cols):
        raise ParameterError(f"allowed mask must have the terrain's shape {rows}x{cols}, got {m.shape}")
    return None if bool(m.all()) else m


def _cell_xy(terrain, flat: int) -> tuple[float, float]:
    cols = terrain.shape[1]
    return terrain.cell_center(flat // cols, flat % cols)


def _check_points(terrain, keep, domain, points, names) -> None:
    """Raise when a point lies in a keep-out area or outside the search domain."""
    for flat, name in zip(points, names):
        xy = _cell_xy(terrain, flat)
        if keep.ravel()[flat]:
            raise NoFeasibleLine(f"{name} ({xy[0]:.1f}, {xy[1]:.1f}) lies in a keep-out area; move it out",
                                 reason="keepout", closest=None)
        if domain is not None and not domain.ravel()[flat]:
            raise NoFeasibleLine(f"{name} ({xy[0]:.1f}, {xy[1]:.1f}) lies outside the search domain; widen it "
                                 "(allowed) or move the point", reason="corridor", closest=None)


def _check_start_speed(mover, start: EndPoint) -> None:
    """Raise when the mover starts above its speed limit: a reported line is judged at every
    vertex, the first included (:func:`fallway.physics.traverse`), so every line breaks it."""
    if mover.max_speed is not None and mover.v0 > mover.max_speed:
        raise NoFeasibleLine(f"the mover starts at {mover.v0:g} m/s, above the speed limit of {mover.max_speed:g} m/s: "
                             "every line breaks it at the start; raise the limit to at least the start speed, or "
                             "lower v0", reason="limits", closest=start.xy)


def _check_uphill(mover, start: EndPoint, points) -> None:
    """Raise when a point (name, (x, y), z) lies above the start's energy height."""
    ceiling = start.z + mover.v0 ** 2 / (2.0 * mover.g)
    for name, xy, z in points:
        if z > ceiling + 1e-9:
            raise NoFeasibleLine(f"{name} ({xy[0]:.1f}, {xy[1]:.1f}) at {z:.2f} m lies above the start's energy "
                                 f"height {ceiling:.2f} m; a gravity line cannot climb there",
                                 reason="uphill", closest=start.xy)


def _point_stats(stats: dict, pt: EndPoint, key: str) -> None:
    """Record where an end point was given, where the line meets it, and any move."""
    stats[f"{key}_given_xy"] = [float(v) for v in pt.given_xy]
    stats[f"{key}_xy"] = [float(v) for v in pt.xy]
    stats[f"{key}_z"] = float(pt.z)
    stats[f"{key}_moved_m"] = float(pt.moved_m)
    stats[f"{key}_moved_why"] = pt.why


def _at_cell_centre(terrain, pt: EndPoint, why: str) -> EndPoint:
    """``pt`` moved to its nearest cell centre (for a search without virtual edges)."""
    if pt.at_centre:
        return pt
    cols = terrain.shape[1]
    r, c = divmod(pt.cell, cols)
    x, y = terrain.cell_center(r, c)
    gx, gy = pt.given_xy
    return replace(pt, xy=(x, y), z=float(terrain.z[r, c]), moved_m=float(math.hypot(x - gx, y - gy)),
                   why=why if pt.why is None else f"{pt.why}; {why}", at_centre=True)


# ----------------------------------------------------------------------------- kernel arrays

class _Problem:
    """Arrays the kernels need, built once per query.

    ``blocked`` (uint8 per window cell) carries the bits :data:`~fallway.lattice.core.NODATA`,
    :data:`~fallway.lattice.core.KEEPOUT` and :data:`~fallway.lattice.core.OUTSIDE`.
    """

    def __init__(self, terrain, mover: Mover, neighbours: int, limits: Limits | None, keep: np.ndarray,
                 domain: np.ndarray | None = None, z_override: np.ndarray | None = None, use_limits: bool = True):
        _check_mover(mover)
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
        blocked = nodata.view(np.uint8).ravel().copy()  # NODATA is bit 1
        np.bitwise_or(blocked, _c.KEEPOUT, out=blocked, where=keep.ravel())
        if domain is not None:
            np.bitwise_or(blocked, _c.OUTSIDE, out=blocked, where=~domain.ravel())
        self.blocked = blocked
        self.z = np.ascontiguousarray(np.where(nodata, 0.0, z).ravel(), dtype=np.float64)
        self.zmin = float(np.min(z[~nodata])) if (~nodata).any() else 0.0
        del nodata
        self.cell = terrain.cell_size
        off = st.offsets
        self.off_dr = np.ascontiguousarray(off[:, 0])
        self.off_dc = np.ascontiguousarray(off[:, 1])
        self.off_plan = np.ascontiguousarray(st.plan_cells)
        self.brk_start = np.ascontiguousarray(st.break_start)
        nb = len(st.break_u)
        self.brk_fa = np.ascontiguousarray(st.break_a[:, 0] * cols + st.break_a[:, 1]) if nb else np.zeros(0, np.int64)
        self.brk_fb = np.ascontiguousarray(st.break_b[:, 0] * cols + st.break_b[:, 1]) if nb else np.zeros(0, np.int64)
        self.brk_w = np.ascontiguousarray(st.break_w)
        # plan length of every sub-segment, metres: (u_q - u_{q-1}) * (edge plan length)
        nsub = np.diff(st.break_start) + 1
        self.sub_plan = np.ascontiguousarray(st.sub_du * np.repeat(st.plan_cells * self.cell, nsub))
        self.tch_start = np.ascontiguousarray(st.touch_start)
        self.tch_flat = np.ascontiguousarray(st.touch[:, 0] * cols + st.touch[:, 1])
        turn = limits.max_step_turn_deg if use_limits else None
        self.use_heading = turn is not None
        # the corner law needs the incoming step, i.e. the heading state (module notes)
        self.corners = bool(self.use_heading and mover.normal == "full")
        self.turn_ok = np.ascontiguousarray(st.turn_ok(turn))
        self.max_turn = 360.0 if turn is None else float(turn)
        self.sdir = np.ascontiguousarray(st.direction_deg, dtype=np.float64)
        self.min_grade = limits.min_grade if use_limits else -math.inf
        self.max_grade = limits.max_grade if use_limits else math.inf
        vmax = mover.max_speed if use_limits else None
        self.v2_max = math.inf if vmax is None else vmax * vmax
        self._cell_bound = None
        self._cell_bound_key = None
        self._cell_bound_s = 0.0

    def a_max(self, mover: Mover) -> float:
        """An upper bound of the drive g (G - mu) / sqrt(1 + G²) over every sub-segment."""
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
        the identity and a one-element dummy is returned (the kernels do not read it).
        """
        free = self.blocked == 0
        if free.size >= 2 ** 31:
            raise ParameterError(f"the grid has {free.size} cells; the lattice indexes cells with int32 (fewer than "
                                 "2**31): search a smaller area (the corridor plan) or coarsen the DEM")
        if bool(free.all()):  # the identity: the kernels do not read the map
            return np.zeros(1, dtype=np.int32), int(free.size)
        cidx = np.full(free.size, -1, dtype=np.int32)
        if compact:
            nact = int(np.count_nonzero(free))
            cidx[free] = np.arange(nact, dtype=np.int32)
        else:
            nact = int(free.size)
            cidx[free] = np.flatnonzero(free).astype(np.int32)
        return cidx, nact

    def _tolerance(self, z_start: float, energy_tol: float | None, default: float,
                   zmin: float | None = None) -> tuple[float, float, float]:
        m = self.mover
        v2_start = m.v0 * m.v0
        zmin = self.zmin if zmin is None else zmin
        v2_scale = v2_start + 2.0 * m.g * max(z_start - zmin, 0.0)
        tol_rel = default if energy_tol is None else float(energy_tol)
        # relative to each label's own v², with a floor far below any meaningful speed
        tol_abs = 1e-12 * max(v2_scale, 1e-300) if tol_rel > 0.0 else 0.0
        return tol_rel, tol_abs, v2_scale

    def _drag_bound(self, v2: float, virtual: Virtual | None = None) -> float:
        """With drag, v² falls wherever it exceeds a/k (d(v²)/ds = 2a - 2kv²), so v² <=
        max(v0², a_max/k).  a = g (G - mu)/sqrt(1 + G²) grows with the descent grade G of a
        sub-segment, and G <= |grad z| of the bilinear surface <= hypot(max |dz| along
        rows, max |dz| along columns) / cell."""
        m = self.mover
        v2_start = m.v0 * m.v0
        a_max = self.a_max(m)
        if virtual is not None:
            a_max = max(a_max, virtual.drive_max(m.g, m.mu))
        return min(v2, max(v2_start, a_max / m.drag) if a_max > 0.0 else v2_start)

    def v2_ceiling(self, v2_scale: float, virtual: Virtual | None = None) -> float:
        """The speed ceiling of the relaxed search and the per-cell bound: every energy of a
        feasible line lies under it -- the speed limit (tested at every sub-segment exit),
        the drag bound, and the start's own v0² (a mover may start above the limit and slow
        below it within its first sub-segment, so the limit alone does not bound it there)."""
        v2 = self.v2_max
        if self.mover.drag > 0.0:
            v2 = min(v2, self._drag_bound(v2_scale, virtual))
        return max(v2, self.mover.v0 * self.mover.v0)

    def v2_top(self, z_start: float, virtual: Virtual | None = None) -> float:
        """V²: no line from a start at height ``z_start`` is ever faster (energy, cap, drag)."""
        vt = no_virtual() if virtual is None else virtual
        zmin = min(self.zmin, vt.z_range()[0])
        v2 = self._tolerance(z_start, None, DEFAULT_ENERGY_TOL, zmin)[2]
        if self.mover.drag > 0.0:
            v2 = self._drag_bound(v2, vt)
        return min(v2, self.v2_max)

    def run(self, start: int, targets: list[int], *, heuristic: bool, energy_tol: float | None,
            max_labels: int | None, label_cap: int | None = None, max_time_s: float | None = None,
            compact: bool = True, virtual: Virtual | None = None, z_start: float | None = None,
            v2_grid: float = 0.0, key_max: float | None = None) -> dict:
        """Run the ordinary kernel; a dict of the status, the label pool and the stats.

        ``virtual``: the virtual edges of exact end points (:mod:`fallway.lattice.ends`),
        ``z_start`` the start point's height (default: the start cell's).  ``v2_grid`` > 0:
        the relaxed search (:mod:`fallway.lattice.gap`; dominance tolerance 0), its
        labels pruned above the A* key ``key_max``.
        """
        m = self.mover
        v2_start = m.v0 * m.v0
        vt = no_virtual() if virtual is None else virtual
        z_start = float(self.z[start]) if z_start is None else float(z_start)
        zmin = min(self.zmin, vt.z_range()[0])
        tol_rel, tol_abs, v2_scale = self._tolerance(z_start, energy_tol, DEFAULT_ENERGY_TOL, zmin)
        relaxed = v2_grid > 0.0
        if relaxed:
            tol_rel = tol_abs = 0.0
        tg = np.asarray(targets, dtype=np.int64)
        remaining = np.zeros(max(len(tg), 1), dtype=np.float64)
        cols = self.cols
        # target positions (row, col, z): cells, or the end point itself with a virtual end
        pos = [(float(a // cols), float(a % cols), float(self.z[a])) for a in tg]
        if vt.has_end and len(pos):
            pos[-1] = tuple(float(v) for v in vt.end_rcz)
        for i in range(len(tg) - 2, -1, -1):
            (ra, ca, za), (rb, cb, zb) = pos[i], pos[i + 1]
            dx = (ca - cb) * self.cell
            dy = (ra - rb) * self.cell
            dz = za - zb
            remaining[i] = remaining[i + 1] + math.sqrt(dx * dx + dy * dy + dz * dz)
        use_bound = bool(heuristic and len(tg))
        vbound = math.sqrt(v2_scale)
        if m.drag > 0.0 and use_bound:
            vbound = min(vbound, math.sqrt(self._drag_bound(v2_scale, vt)))
        if self.v2_max < math.inf:
            vbound = min(vbound, math.sqrt(max(self.v2_max, v2_start)))
        inv_v = 1.0 / vbound if (use_bound and vbound > 0.0) else 0.0
        v2_ceil = self.v2_ceiling(v2_scale, vt) if relaxed else max(self.v2_max, v2_start)
        budget = _DEFAULT_MAX_LABELS if max_labels is None else int(max_labels)
        t_max = math.inf if max_time_s is None else float(max_time_s)
        cidx, nact = self.index(compact)
        e_top = v2_start + 2.0 * m.g * z_start
        hgo = ucap = np.zeros(0)
        if use_bound and inv_v > 0.0 and len(tg) <= CELL_BOUND_MAX_LEGS:
            # the virtual edges by identity (kept alive with the key, so an id is never reused)
            vkey = vt if (vt.has_start or vt.has_end) else None
            key = (int(start), z_start, tuple(int(a) for a in tg), bool(compact))
            old = self._cell_bound_key
            if old is None or old[0] != key or old[1] is not vkey:
                self._cell_bound = None  # the old arrays are freed first
                tb = time.perf_counter()
                self._cell_bound = self._bounds(cidx, nact, int(start), z_start, tg, vt, e_top, v2_scale, inv_v)
                self._cell_bound_key = (key, vkey)
                self._cell_bound_s = time.perf_counter() - tb
            ucap, hgo = self._cell_bound
        t0 = time.perf_counter()
        out = _search(self.z, self.blocked, cidx, nact, self.rows, self.cols, self.cell,
                      self.off_dr, self.off_dc,
                      self.brk_start, self.brk_fa, self.brk_fb, self.brk_w, self.sub_plan,
                      self.tch_start, self.tch_flat, self.turn_ok, self.use_heading, self.corners,
                      m.g, m.mu, m.drag, m.stall_speed ** 2, self.v2_max, self.min_grade, self.max_grade,
                      int(start), v2_start, tg, remaining, inv_v, tol_abs, tol_rel, budget, _INIT_CAP,
                      int(label_cap or 0), t_max,
                      self.sdir, self.max_turn, int(vt.nvs), vt.cell, vt.dir_deg, vt.code, vt.sub_start, vt.drop,
                      vt.plan, vt.tch_start, vt.tch, vt.end_rcz, float(v2_grid), e_top,
                      v2_ceil, math.inf if key_max is None else float(key_max), hgo, ucap)
        elapsed = time.perf_counter() - t0
        (status, final, n_lab, Lt, Le, Lnode, Lpar, Lleg, best_t, best_v2, closest, counters) = out
        if len(tg) == 0 and nact < cidx.size:  # reach: compact index -> window cells
            sel = cidx >= 0
            bt = np.full(cidx.size, np.nan)
            bv = np.full(cidx.size, np.nan)
            bt[sel] = best_t[cidx[sel]]
            bv[sel] = best_v2[cidx[sel]]
            best_t, best_v2 = bt, bv
        del cidx
        stats = {
            "labels_created": int(counters[_c.C_CREATED]),
            "labels_settled": int(counters[_c.C_SETTLED]),
            "labels_dominated": int(counters[_c.C_DOMINATED]),
            "rejected_grade": int(counters[_c.C_GRADE]),
            "rejected_stall": int(counters[_c.C_STALL] + counters[_c.C_UPHILL]),
            "rejected_speed": int(counters[_c.C_SPEED]),
            "rejected_turn": int(counters[_c.C_TURN]),
            "rejected_blocked": int(counters[_c.C_BLOCKED]),
            "labels_capped": int(counters[_c.C_CAPPED]),
            "labels_cut_off": int(counters[_c.C_CUTOFF]),
            "state_cells": int(nact),
            "label_cap": None if not label_cap else int(label_cap),
            "exact": bool(counters[_c.C_CAPPED] == 0 and self.v2_max == math.inf),
            "search_s": float(elapsed),
            "neighbours": int(self.stencil.size),
            "energy_tol": float(tol_rel),
            "heuristic": bool(inv_v > 0.0),
            "cell_bound": bool(hgo.size > 0),
            "cell_bound_s": float(self._cell_bound_s if hgo.size > 0 else 0.0),
        }
        return dict(status=int(status), final=int(final), t=Lt, v2=Le[:, 0], node=Lnode, parent=Lpar,
                    best_t=best_t, best_v2=best_v2, closest=int(closest), counters=counters, stats=stats)

    def cell_bound(self, start: int, targets: list[int]) -> tuple[np.ndarray, np.ndarray]:
        """The per-cell A* bound of a query from cell ``start`` (no exact end points):
        ``(U, H)`` as window grids, U the energy ceiling (m²/s², -inf where no line
        arrives) and H of shape ``(legs, rows, cols)`` the time to go (s, inf where the
        target is out of reach, NaN on blocked cells); :mod:`fallway.lattice.bound`."""
        self.run(start, targets, heuristic=True, energy_tol=None, max_labels=1)
        U, H = self._cell_bound
        cidx, nact = self.index()
        if nact == self.rows * self.cols:
            return U.reshape(self.rows, self.cols), H.reshape(len(targets), self.rows, self.cols)
        sel = cidx >= 0
        Ug = np.full(cidx.size, np.nan)
        Ug[sel] = U[cidx[sel]]
        Hg = np.full((len(targets), cidx.size), np.nan)
        for i in range(len(targets)):
            Hg[i, sel] = H[i * nact:(i + 1) * nact][cidx[sel]]
        return Ug.reshape(self.rows, self.cols), Hg.reshape(len(targets), self.rows, self.cols)

    def _bounds(self, cidx, nact, start, z_start, tg, vt, e_top, v2_scale, inv_v):
        """The per-cell A* bound of :mod:`fallway.lattice.bound`: ``(U, H)``, H leg-major."""
        m = self.mover
        v2_ceil = self.v2_ceiling(v2_scale, vt)
        law_on = not self.corners
        common = (self.z, self.blocked, cidx, nact, self.rows, self.cols, self.off_dr, self.off_dc, self.brk_start,
                  self.brk_fa, self.brk_fb, self.brk_w, self.sub_plan, self.tch_start, self.tch_flat,
                  m.g, m.mu, m.drag, 0.0, v2_ceil, self.min_grade, self.max_grade, e_top,
                  1e-9 * max(v2_scale, 1e-300))  # stall at rest only: monotone in the entry (module notes)
        U = _energy_ceiling(*common, int(start), m.v0 * m.v0, float(z_start), int(vt.nvs), vt.cell, vt.code,
                            vt.sub_start, vt.drop, vt.plan, vt.tch_start, vt.tch, law_on)
        nlegs = len(tg)
        H = np.full(nlegs * nact, np.inf)
        rest = 0.0
        for i in range(nlegs - 1, -1, -1):
            target = -1 if (vt.has_end and i == nlegs - 1) else int(tg[i])
            h = H[i * nact:(i + 1) * nact]
            _time_to_go(*common, U, target, rest, int(vt.nvs), vt.cell, vt.code, vt.sub_start, vt.drop, vt.plan,
                        vt.tch_start, vt.tch, inv_v, law_on, h)
            if i > 0:
                prev = int(tg[i - 1])
                rest = float(h[prev if nact == self.rows * self.cols else int(cidx[prev])])
        return U, H

    def run_robust(self, start: int, end: int, mu_lo: float, mu_hi: float, *, heuristic: bool,
                   energy_tol: float | None, max_labels: int | None, label_cap: int | None,
                   resolution: float, compact: bool = True) -> dict:
        """Run the robust kernel; a dict of the status, the label pool and the stats."""
        m = self.mover
        g = m.g
        v2_start = m.v0 * m.v0
        tol_rel, tol_abs, v2_scale = self._tolerance(float(self.z[start]), energy_tol, ROBUST_ENERGY_TOL)
        budget = _ROBUST_MAX_LABELS if max_labels is None else int(max_labels)
        cap = int(label_cap or 0)
        cidx, nact = self.index(compact)
        t0 = time.perf_counter()
        if math.isfinite(self.v2_max):
            floor = lo_floor(self.z, self.blocked, cidx, nact, self.rows, self.cols, self.cell, self.off_dr,
                             self.off_dc, self.off_plan, self.brk_start, self.brk_fa, self.brk_fb, self.brk_w,
                             self.tch_start, self.tch_flat, mu_lo)
            zc = self.z if nact == self.z.size else self.z[cidx >= 0]
            floor -= zc  # in place: E - z, then the LO v² below which no overspeed is possible
            floor *= 2.0 * g
            floor += self.v2_max
            lo_safe = floor
            del zc
        else:
            lo_safe = np.full(nact, np.inf)
        # A* bound: the nominal speed never exceeds the LO speed (<= the cap), nor what the
        # drop from the start allows, nor (with drag) the terminal bound of the ordinary search
        v2_bound = v2_scale
        if m.drag > 0.0:
            v2_bound = self._drag_bound(v2_bound)
        v2_bound = min(v2_bound, self.v2_max)
        inv_v = 1.0 / math.sqrt(v2_bound) if (heuristic and v2_bound > 0.0) else 0.0
        slack = float(resolution) * (self.v2_max if math.isfinite(self.v2_max) else v2_bound)
        out = robust_search(self.z, self.blocked, cidx, nact, self.rows, self.cols, self.cell,
                            self.off_dr, self.off_dc,
                            self.brk_start, self.brk_fa, self.brk_fb, self.brk_w, self.sub_plan,
                            self.tch_start, self.tch_flat, self.turn_ok, self.use_heading,
                            g, mu_lo, m.mu, mu_hi, m.drag, m.stall_speed ** 2, self.v2_max,
                            self.min_grade, self.max_grade, int(start), v2_start, int(end), lo_safe, inv_v,
                            tol_abs, tol_rel, budget, _ROBUST_INIT_CAP, cap, slack)
        elapsed = time.perf_counter() - t0
        del cidx, lo_safe
        status, final, n_lab, Lt, Le, Lnode, Lpar, closest, cnt = out
        stats = {"labels_created": int(cnt[_c.C_CREATED]), "labels_settled": int(cnt[_c.C_SETTLED]),
                 "labels_dominated": int(cnt[_c.C_DOMINATED]), "rejected_grade": int(cnt[_c.C_GRADE]),
                 "rejected_stall_hi": int(cnt[_c.C_STALL]), "rejected_speed_lo": int(cnt[_c.C_SPEED]),
                 "rejected_blocked": int(cnt[_c.C_BLOCKED]), "rejected_turn": int(cnt[_c.C_TURN]),
                 "labels_capped": int(cnt[_c.C_CAPPED]),
                 "exact": (cap == 0 or int(cnt[_c.C_CAPPED]) == 0) and slack == 0.0,
                 "resolution": float(resolution), "label_cap": cap or None, "search_s": float(elapsed),
                 "state_cells": int(nact), "neighbours": int(self.stencil.size), "energy_tol": float(tol_rel),
                 "mu_lo": float(mu_lo), "mu_nominal": float(m.mu), "mu_hi": float(mu_hi)}
        return dict(status=int(status), final=int(final), t=Lt, e=Le, node=Lnode, parent=Lpar,
                    closest=int(closest), counters=cnt, stats=stats)


# ----------------------------------------------------------------------------- failures

def _budget_error(terrain, budget, closest) -> NoFeasibleLine:
    return NoFeasibleLine(f"label budget of {budget} exhausted before reaching the end (a route's budget is at "
                          "most what the memory holds); raise SearchOptions.max_labels or the gap target (--gap), "
                          "set a label_cap or coarsen the grid", reason="label_budget",
                          closest=_cell_xy(terrain, closest))


def _diagnose(terrain, closest_flat: int, counters, found, *, keep, domain, limits, mover, robust=False):
    """Find why no line exists: relax one obstacle at a time (module notes, "Failure diagnosis").

    ``found(**relax)`` reruns the failed search on a :class:`_Problem` built with the
    given changes (``keep``, ``domain``, ``z_override``, ``use_limits``) and says whether
    it reaches the end.
    """
    closest = _cell_xy(terrain, closest_flat)
    if counters[_c.C_KEEPOUT] > 0 and found(keep=np.zeros_like(keep)):
        return NoFeasibleLine("keep-out areas block every line; shrink the keep-out or move the points",
                              reason="keepout", closest=closest)
    lim = limits if limits is not None else Limits()
    if (lim != Limits() or mover.max_speed is not None) and found(use_limits=False):
        return NoFeasibleLine("the grade, turn or speed limits block every line; relax the limits",
                              reason="limits", closest=closest)
    nod = ~np.isfinite(terrain.z)
    if counters[_c.C_NODATA] > 0 and (~nod).any():
        from scipy import ndimage

        idx = ndimage.distance_transform_edt(nod, return_distances=False, return_indices=True)
        filled = terrain.z[tuple(idx)]
        del idx
        if found(z_override=filled):
            return NoFeasibleLine("nodata cells block every line; fill the DEM gaps or move the points",
                                  reason="nodata", closest=closest)
    if domain is not None and counters[_c.C_OUTSIDE] > 0 and found(domain=None):
        return NoFeasibleLine("the search domain (corridor) cuts every line, a line exists outside it; "
                              "widen the corridor", reason="corridor", closest=closest)
    if robust:
        if counters[_c.C_STALL] > 0 or counters[_c.C_SPEED] > 0:
            return NoFeasibleLine("no line works over the friction range (every line stalls at high friction or "
                                  "is too fast at low friction); narrow the range or relax the speed "
                                  "limit", reason="stall" if counters[_c.C_SPEED] == 0 else "limits",
                                  closest=closest)
    else:
        if counters[_c.C_STALL] > 0:
            return NoFeasibleLine("the mover stalls on every line (friction and drag take all its energy); "
                                  "lower mu or drag, or raise v0", reason="stall", closest=closest)
        if counters[_c.C_UPHILL] > 0:
            return NoFeasibleLine("every line would have to climb higher than the start energy allows",
                                  reason="uphill", closest=closest)
    return NoFeasibleLine("no lattice line connects the points", reason="unreachable", closest=closest)


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


def _chain(final: int, parent, node) -> list[int]:
    """Cells of the label chain ending at ``final``, start first (repeats of a cell in a row dropped)."""
    nodes: list[int] = []
    p = final
    while p >= 0:
        n = int(node[p])
        if not nodes or nodes[-1] != n:
            nodes.append(n)
        p = int(parent[p])
    nodes.reverse()
    return nodes


# ----------------------------------------------------------------------------- fronts

@checked_options
def lattice_line(terrain, start, end, mover: Mover, *, via=(), limits: Limits | None = None, keepout=None,
                 allowed: np.ndarray | None = None, options: SearchOptions | None = None) -> LatticeLine:
    """The exact minimum-time line on the terrain lattice.

    Parameters
    ----------
    terrain : Terrain
    start, end : (x, y)
        Map coordinates in the terrain CRS: the line starts and ends exactly there (module
        notes; a point on nodata, in a keep-out area or in the DEM's outer half cell moves
        to the nearest free cell centre, recorded in ``stats``).
    mover : Mover
        Physics; the lattice uses the gravity-normal friction model (module notes).
    via : sequence of (x, y)
        Points the line must pass through, in order; the energy carries through them.
        They snap to the nearest cell centre.
    limits : Limits, optional
        Grade window per sub-segment, max turn per step (``max_step_turn_deg``); the
        speed window comes from ``mover.stall_speed`` and ``mover.max_speed``.
    keepout : Keepout or bool array, optional
        No-go areas (a mask must have the terrain's shape).
    allowed : bool array, optional
        The search domain (e.g. a corridor), of the terrain's shape: cells where it is
        False are not searched.  Not a keep-out: a failure is blamed on it (reason
        ``"corridor"``) only when a line exists without it (module notes).
    options : SearchOptions, optional
        ``neighbours``, ``label_cap``, ``max_labels``, ``energy_tol``, ``heuristic``
        (None: the defaults).  ``label_cap`` keeps at most that many labels per state
        (the earliest arrivals): on rough terrain the exact Pareto set grows with
        distance (measured: ~20 labels per cell 25 cells from the start, ~300 at 50,
        ~3700 at 100), so large grids need a cap; ``stats["exact"]`` says whether the cap
        (or a binding ``max_speed``) made the answer approximate.  With
        ``mover.max_speed`` set the uncapped search runs first: its line is the exact
        answer when it stays under the speed limit (``stats["speed_cap_binding"]``
        False); otherwise the capped search runs, which is approximate (a faster label
        can be pruned that would later overspeed - dominance is then a heuristic).

    Returns
    -------
    LatticeLine
        With ``stats``: labels created/settled, ``label_cap``, ``exact``, search
        seconds, ``state_cells``, start/end cells, exit speed, and per end point
        ``start_given_xy``, ``start_xy``, ``start_z``, ``start_moved_m``,
        ``start_moved_why`` (``end_...`` alike).  ``points`` begins and ends with the end
        points and the break points of the virtual edges taken.

    Raises
    ------
    NoFeasibleLine
        With ``reason`` one of ``"stall"``, ``"limits"``, ``"keepout"``, ``"nodata"``,
        ``"uphill"``, ``"unreachable"``, ``"corridor"``, ``"label_budget"`` and
        ``closest`` the reached cell nearest to the target.
    ParameterError
        A bad argument, or an unknown keyword.

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.params import SearchOptions
    >>> from fallway.terrain import Terrain
    >>> z = -0.5 * np.add.outer(np.arange(6.0), np.arange(6.0))
    >>> t = Terrain.from_array(z, (1.0, 0, 0, 0, -1.0, 6.0))
    >>> ln = lattice_line(t, (0.5, 5.5), (5.5, 0.5), Mover(mu=0.1), options=SearchOptions(neighbours=8))
    >>> ln.cells[[0, -1]].tolist()
    [[0, 0], [5, 5]]
    """
    _check_mover(mover)
    opts = _options(options)
    if mover.max_speed is not None:
        # With a speed cap "more energy never hurts" fails (a faster label may overspeed
        # later), so the capped search is approximate.  The uncapped optimum is exact
        # whenever it respects the cap (the capped lines are a subset of the uncapped
        # ones), and when no uncapped line exists no capped one does either.
        free = _lattice_line(terrain, start, end, replace(mover, max_speed=None), via, limits, keepout, allowed, opts)
        if float(np.nanmax(free.profile.speed_m_s)) <= mover.max_speed:
            free.stats["speed_cap_binding"] = False
            return free
        capped = _lattice_line(terrain, start, end, mover, via, limits, keepout, allowed, opts)
        capped.stats["speed_cap_binding"] = True
        return capped
    return _lattice_line(terrain, start, end, mover, via, limits, keepout, allowed, opts)


def _lattice_line(terrain, start, end, mover: Mover, via, limits, keepout, allowed, opts: SearchOptions):
    limits = Limits() if limits is None else limits
    keep = _keepout_mask(terrain, keepout)
    domain = _domain_mask(terrain, allowed)
    if len(via) > 100:
        raise ParameterError(f"at most 100 via points are supported, got {len(via)}; split the route")
    nb = opts.neighbours
    prob = _Problem(terrain, mover, nb, limits, keep, domain)
    sp = resolve_point(terrain, start, "start", prob.blocked)
    vias = [_snap(terrain, p, f"via point {i + 1}") for i, p in enumerate(via)]
    ep = resolve_point(terrain, end, "end", prob.blocked)
    if sp.xy == ep.xy:
        raise ParameterError(f"start and end are the same point ({sp.xy[0]:.3f}, {sp.xy[1]:.3f}); give two points")
    vnames = [f"via point {i + 1}" for i in range(len(vias))]
    _check_points(terrain, keep, domain, vias, vnames)
    zs = terrain.z.ravel()
    _check_start_speed(mover, sp)
    _check_uphill(mover, sp, [(n, _cell_xy(terrain, v), float(zs[v])) for n, v in zip(vnames, vias)]
                  + [("end", ep.xy, ep.z)])
    virt = virtual_edges(terrain, prob.stencil, sp, ep)
    targets = vias + [ep.cell]
    run_kw = dict(heuristic=opts.heuristic, energy_tol=opts.energy_tol, max_labels=opts.max_labels,
                  label_cap=opts.label_cap, virtual=virt, z_start=sp.z)
    budget = opts.max_labels or _DEFAULT_MAX_LABELS
    certified = bool(opts.gap) and not opts.label_cap
    if certified:  # the exact search first, on a budget that small problems never spend
        legs = len(targets) * (prob.stencil.size + 1 if prob.use_heading else 1)
        guided = opts.heuristic and len(targets) <= CELL_BOUND_MAX_LEGS
        per_state = EXACT_FIRST_PER_STATE if guided else EXACT_FIRST_PER_STATE_PLAIN
        first = min(budget, int(EXACT_FIRST_LABELS + per_state * prob.index()[1] * legs))
        res = prob.run(sp.cell, targets, **(run_kw | dict(max_labels=first)))
    else:
        res = prob.run(sp.cell, targets, **run_kw)
    if res["status"] == _c.LABEL_BUDGET and not certified:
        raise _budget_error(terrain, budget, res["closest"])
    gap_stats: dict = {"optimality_gap": None if opts.label_cap else 0.0, "lower_bound_s": None, "gap_rounds": []}
    if certified and (res["status"] == _c.LABEL_BUDGET or (res["status"] == _c.OK and prob.v2_max < math.inf)):
        used = res["stats"]["labels_created"]
        incumbent = None
        if res["status"] == _c.OK:  # a capped search's line: exact only in principle (lattice_line notes)
            line = _build_line(terrain, prob, mover, virt, sp, ep, res)
            incumbent = (_exact_time(line, mover), line)
        res = {"status": res["status"], "closest": res["closest"]}  # its label pool is freed
        if incumbent is None and INCUMBENT_LABEL_CAP and budget > used:  # a cheap first line (no bound by itself)
            quick = prob.run(sp.cell, targets,
                             **(run_kw | dict(label_cap=INCUMBENT_LABEL_CAP, max_labels=budget - used)))
            used += quick["stats"]["labels_created"]
            if quick["status"] == _c.OK:
                line = _build_line(terrain, prob, mover, virt, sp, ep, quick)
                t_quick = _exact_time(line, mover)
                line.stats["label_cap"] = None  # the route's search has none; the gap says how good the line is
                if math.isfinite(t_quick):
                    incumbent = (t_quick, replace(line, time_s=t_quick))
            del quick
        relaxed = _certify(terrain, prob, mover, virt, sp, ep, targets, run_kw, opts.gap, budget - used, incumbent)
        gap_stats = {"optimality_gap": relaxed.gap, "lower_bound_s": relaxed.lower_s, "gap_rounds": relaxed.rounds}
        if relaxed.best is not None:
            line = relaxed.best
            line.stats.update(gap_stats)
            line.stats["exact"] = relaxed.gap == 0.0
            line.stats["labels_created"] = int(used + relaxed.labels)  # every search's labels, each counted once
            return line
        if res["status"] == _c.LABEL_BUDGET or relaxed.exhausted:
            raise _budget_error(terrain, budget, res["closest"])
        last = relaxed.rounds[-1] if relaxed.rounds else None
        if last is None or last["status"] != "none":  # relaxed lines found, none feasible: the exact search's view
            raise _budget_error(terrain, budget, res["closest"])
        res = prob.run(sp.cell, targets, **(run_kw | dict(v2_grid=FIRST_GRID_FRACTION * prob.v2_top(sp.z, virt))))
    if res["status"] != _c.OK:
        del prob

        def found(**relax) -> bool:
            kw = dict(keep=keep, domain=domain) | relax
            p = _Problem(terrain, mover, nb, limits, kw.pop("keep"), kw.pop("domain"), **kw)
            return p.run(sp.cell, targets, **run_kw)["status"] == _c.OK

        raise _diagnose(terrain, res["closest"], res["counters"], found, keep=keep, domain=domain, limits=limits,
                        mover=mover)
    line = _build_line(terrain, prob, mover, virt, sp, ep, res)
    line.stats.update(gap_stats)
    return line


def lattice_lower_bound(terrain, start, end, mover: Mover, *, via=(), limits: Limits | None = None, keepout=None,
                        neighbours: int = 16) -> float | None:
    """A proven lower bound of the exact minimum time over the whole terrain lattice.

    The per-cell A* bound of :mod:`fallway.lattice.bound` at the start: the time to go
    H of the start cell, or with an exact start point the least over its virtual start
    edges of (the edge's time bound from v0) + H of the cell it reaches.  H never exceeds
    the time of any line from a cell to the end (its admissibility), so no lattice line
    on this grid - in particular none inside a corridor of it - is faster.  Used for the
    corridor plan's gap (:func:`fallway.routing.find_route`): the corridor's line is a
    line of the whole lattice, so ``time / bound - 1`` bounds how far it can be from the
    whole lattice's optimum.

    Parameters
    ----------
    terrain, start, end, mover, via, limits, keepout
        As :func:`lattice_line`.
    neighbours : {8, 16, 32}

    Returns
    -------
    float or None
        Seconds; None for routes of more than
        :data:`fallway.scale.CELL_BOUND_MAX_LEGS` legs (no per-cell bound is computed);
        ``inf`` when no line exists.

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> z = 50.0 - 2.0 * np.add.outer(np.arange(10.0), np.arange(12.0))
    >>> t = Terrain.from_array(z, (5.0, 0.0, 0.0, 0.0, -5.0, 50.0))
    >>> a, b = t.cell_center(0, 0), t.cell_center(9, 11)
    >>> lb = lattice_lower_bound(t, a, b, Mover(mu=0.2, drag=0.01))
    >>> exact = lattice_line(t, a, b, Mover(mu=0.2, drag=0.01)).time_s
    >>> 0.9 * exact < lb <= exact
    True
    """
    limits = Limits() if limits is None else limits
    if len(via) + 1 > CELL_BOUND_MAX_LEGS:
        return None
    keep = _keepout_mask(terrain, keepout)
    prob = _Problem(terrain, mover, neighbours, limits, keep)
    sp = resolve_point(terrain, start, "start", prob.blocked)
    vias = [_snap(terrain, p, f"via point {i + 1}") for i, p in enumerate(via)]
    ep = resolve_point(terrain, end, "end", prob.blocked)
    virt = virtual_edges(terrain, prob.stencil, sp, ep)
    tg = np.asarray(vias + [ep.cell], dtype=np.int64)
    m = mover
    v2_start = m.v0 * m.v0
    zmin = min(prob.zmin, virt.z_range()[0])
    v2_scale = v2_start + 2.0 * m.g * max(sp.z - zmin, 0.0)
    v2_ceil = prob.v2_ceiling(v2_scale, virt)
    vbound = math.sqrt(min(v2_scale, v2_ceil))
    inv_v = 1.0 / vbound if vbound > 0.0 else 0.0
    e_top = v2_start + 2.0 * m.g * sp.z
    cidx, nact = prob.index()
    U, H = prob._bounds(cidx, nact, sp.cell, sp.z, tg, virt, e_top, v2_scale, inv_v)
    ident = nact == prob.rows * prob.cols

    def h_at(flat: int) -> float:
        return float(H[flat if ident else int(cidx[flat])])

    if not virt.has_start:
        return h_at(sp.cell)
    eps_abs = 1e-9 * max(v2_scale, 1e-300)
    best = math.inf
    for j in range(int(virt.nvs)):
        if _virtual_passable(prob.blocked, j, virt.code, virt.tch_start, virt.tch):
            continue
        _, te, ok = _virtual_exit(j, v2_start, float(sp.z), virt.sub_start, virt.drop, virt.plan, prob.min_grade,
                                  prob.max_grade, m.g, m.mu, m.drag, 0.0, v2_ceil, e_top, eps_abs,
                                  not prob.corners)
        if ok:
            best = min(best, float(te) + h_at(int(virt.cell[j])))
    return best


def _build_line(terrain, prob, mover, virt, sp, ep, res) -> LatticeLine:
    """The LatticeLine of a kernel run's final label (its kernel time as ``time_s``)."""
    nodes = _chain(res["final"], res["parent"], res["node"])
    if virt.has_end:
        nodes = nodes[:-1]  # the virtual end node
    if len(nodes) == 1 and not (virt.has_start or virt.has_end):
        raise ParameterError("start and end snap to the same cell; give points at least one cell apart")
    cells, points = _line_points(terrain, prob.stencil, nodes)
    points = _with_virtual(points, virt, nodes)
    t_final = float(res["t"][res["final"]])
    stats = dict(res["stats"])
    stats["start_cell"] = [int(cells[0, 0]), int(cells[0, 1])]
    stats["end_cell"] = [int(cells[-1, 0]), int(cells[-1, 1])]
    _point_stats(stats, sp, "start")
    _point_stats(stats, ep, "end")
    stats["exit_speed_m_s"] = float(math.sqrt(res["v2"][res["final"]]))
    profile = traverse(points, mover if prob.corners else replace(mover, normal="gravity"))
    return LatticeLine(cells=cells, points=points, profile=profile, time_s=t_final, stats=stats)


def _exact_time(line: LatticeLine, mover: Mover) -> float:
    """A lattice line's exact time by the segment law (its traverse), ``inf`` when it stalls
    or passes the speed limit."""
    prof = line.profile
    if not prof.feasible:
        return math.inf
    if mover.max_speed is not None and float(np.nanmax(prof.speed_m_s)) > mover.max_speed:
        return math.inf
    return float(prof.travel_time_s)


def _certify(terrain, prob, mover, virt, sp, ep, targets, run_kw, target, budget, incumbent) -> GapResult:
    """The relaxed searches of :func:`fallway.lattice.gap.certify` on this problem."""
    names = {_c.OK: "ok", _c.LABEL_BUDGET: "budget"}

    def run(grid, key_max, max_labels):
        res = prob.run(sp.cell, targets, **(run_kw | dict(max_labels=max_labels, v2_grid=grid,
                                                         key_max=None if key_max == math.inf else key_max)))
        status = names.get(res["status"], "none")
        lower = float(res["t"][res["final"]]) if status == "ok" else math.inf
        return status, lower, res["stats"]["labels_created"], res

    def retime(res):
        line = _build_line(terrain, prob, mover, virt, sp, ep, res)
        t = _exact_time(line, mover)
        if math.isfinite(t):
            line = replace(line, time_s=t)
            line.stats["exit_speed_m_s"] = float(line.profile.exit_speed_m_s)
        return t, line

    return certify(run, retime, target=float(target), v2_top=prob.v2_top(sp.z, virt), budget=max(int(budget), 0),
                   incumbent=incumbent)

def _with_virtual(points: np.ndarray, virt: Virtual, nodes: list[int]) -> np.ndarray:
    """The lattice polyline with the virtual start and end edges it took (exact end points)."""
    parts = [points]
    if virt.has_start:
        j = [k for k in range(virt.nvs) if virt.cell[k] == nodes[0]][0]
        parts.insert(0, virt.points[j][:-1])
    if virt.has_end:
        j = [k for k in range(virt.nvs, len(virt.cell)) if virt.cell[k] == nodes[-1]][0]
        parts.append(virt.points[j][1:])
    return np.vstack(parts) if len(parts) > 1 else points


@checked_options
def reach(terrain, start, mover: Mover, *, limits: Limits | None = None, keepout=None,
          allowed: np.ndarray | None = None, options: SearchOptions | None = None,
          max_time_s: float | None = None) -> ReachMap:
    """Earliest arrival time and its speed at every cell reachable from ``start``.

    Lines start exactly at ``start`` (module notes).  The speed is that of the earliest label
    (a later, faster arrival may exist).

    Parameters
    ----------
    terrain : Terrain
    start : (x, y)
    mover : Mover
    limits, keepout, allowed, options
        As for :func:`lattice_line` (``options.heuristic`` has no use without a target).
        When the label budget (``options.max_labels``) is spent the map holds what was
        settled so far and ``stats["complete"]`` is False.
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

    Raises
    ------
    NoFeasibleLine
        The start lies on nodata (``"nodata"``), in a keep-out area (``"keepout"``) or
        outside the search domain (``"corridor"``).

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.params import SearchOptions
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(-np.arange(4.0)[None, :].repeat(3, 0), (1.0, 0, 0, 0, -1.0, 3.0))
    >>> rm = reach(t, (0.5, 1.5), Mover(), options=SearchOptions(neighbours=8))
    >>> print(f"{rm.speed_m_s[1, 3]:.4f}")
    7.6707
    """
    _check_mover(mover)
    opts = _options(options)
    if max_time_s is not None and not float(max_time_s) > 0.0:
        raise ParameterError(f"max_time_s must be a positive number of seconds, got {max_time_s!r}")
    limits = Limits() if limits is None else limits
    keep = _keepout_mask(terrain, keepout)
    domain = _domain_mask(terrain, allowed)
    prob = _Problem(terrain, mover, opts.neighbours, limits, keep, domain)
    sp = resolve_point(terrain, start, "start", prob.blocked)
    res = prob.run(sp.cell, [], heuristic=False, energy_tol=opts.energy_tol, max_labels=opts.max_labels,
                   label_cap=opts.label_cap, max_time_s=max_time_s,
                   virtual=virtual_edges(terrain, prob.stencil, sp, None), z_start=sp.z)
    shape = terrain.shape
    tt = res["best_t"].reshape(shape)
    vv = np.sqrt(res["best_v2"]).reshape(shape)
    stats = dict(res["stats"])
    stats["cells_reached"] = int(np.isfinite(tt).sum())
    stats["complete"] = res["status"] != _c.LABEL_BUDGET
    stats["max_time_s"] = None if max_time_s is None else float(max_time_s)
    _point_stats(stats, sp, "start")
    return ReachMap(time_s=tt, speed_m_s=vv, transform=terrain.transform, crs=terrain.crs,
                    start=tuple(float(v) for v in sp.xy), stats=stats)


def _check_end_window(mover: Mover, lo: float, hi: float, v2_start: float, drop_m: float, v2_max: float) -> None:
    """Raise when no line of any shape can work: the plan-length window at the end is empty.

    Without drag the work-energy theorem fixes the energy at the end from the drop and
    the plan length P alone (gravity-normal Coulomb friction): ``v² = v0² + 2 g (drop -
    mu P)``.  Arriving under the speed limit at LO needs ``P >= (v0² + 2 g drop -
    vmax²) / (2 g mu_lo)``; arriving at all at HI needs ``P < (v0² + 2 g drop - v_stall²)
    / (2 g mu_hi)``.  When the first bound is not below the second no line exists.
    """
    if mover.drag != 0.0 or not math.isfinite(v2_max):
        return
    g = mover.g
    e_end = v2_start + 2.0 * g * drop_m
    p_hi = (e_end - mover.stall_speed ** 2) / (2.0 * g * hi) if hi > 0.0 else math.inf
    if e_end <= v2_max:
        return
    if lo == 0.0:
        raise NoFeasibleLine(f"no line can work: at mu={lo:g} the mover reaches the end at "
                             f"{math.sqrt(e_end):.1f} m/s whatever its shape, over the {math.sqrt(v2_max):g} m/s "
                             "limit; raise the speed limit or narrow the friction range", reason="limits")
    p_lo = (e_end - v2_max) / (2.0 * g * lo)
    if p_lo >= p_hi:
        raise NoFeasibleLine(f"no line can work from mu={lo:g} to mu={hi:g}: to arrive under "
                             f"{math.sqrt(v2_max):g} m/s at mu={lo:g} a line needs at least {p_lo:.0f} m of plan "
                             f"length, but at mu={hi:g} it gets to the end only if shorter than {p_hi:.0f} m "
                             "(work-energy balance, no drag); narrow the friction range, relax the speed limit "
                             "or move the end points", reason="limits")


@checked_options
def robust_lattice_line(terrain, start, end, mover: Mover, mu_lo: float, mu_hi: float, *,
                        limits: Limits | None = None, keepout=None, allowed: np.ndarray | None = None,
                        options: SearchOptions | None = None, resolution: float = 0.0) -> LatticeLine:
    """The exact robust lattice line: fastest at nominal friction, feasible over [mu_lo, mu_hi].

    Among lattice lines from ``start`` to ``end`` that do not stall at ``mu_hi`` and stay
    within ``mover.max_speed`` at ``mu_lo``, the one with the least travel time at
    ``mover.mu`` (method: :mod:`fallway.lattice.robust`).

    Parameters
    ----------
    terrain : Terrain
    start, end : (x, y)
        Map coordinates; the robust search starts and ends at the nearest cell centres
        (``stats["start_moved_m"]`` etc. record the distance).
    mover : Mover
        Nominal physics (gravity-normal model on the lattice); ``mu_lo <= mover.mu <= mu_hi``.
    mu_lo, mu_hi : float
        The friction range.
    limits : Limits, optional
        Grade window per sub-segment and turn limit between steps (as the ordinary
        search: the state is then the cell and the heading of the last step).
    keepout : Keepout or bool array, optional
    allowed : bool array, optional
        The search domain, as for :func:`lattice_line`.
    options : SearchOptions, optional
        ``neighbours``; ``max_labels`` (the label budget, default 50 million);
        ``energy_tol`` (default :data:`ROBUST_ENERGY_TOL`); ``label_cap``: keep at most
        this many settled labels per state (the earliest): faster, no longer exact
        (``stats["exact"]`` False); ``heuristic``: order the search by the A* bound
        (:mod:`fallway.lattice.robust`), False: plain Dijkstra order.
    resolution : float
        Approximate search: energies closer than this fraction of a reference v² (the
        speed limit squared, else the largest v² the drop allows) count as equal in the
        dominance test (``stats["exact"]`` False; the line returned is still checked
        against the true limits, so it is robust, only maybe not the fastest).  The
        exact Pareto set can grow without bound: where the speed limit binds at LO
        (with no drag the three energies of a label are set by its plan length alone,
        so two labels at a cell compare only when their lengths are equal) and with
        drag (three independent energies).  A resolution of about 1 % bounds it.
        Default 0: exact.

    Returns
    -------
    LatticeLine
        ``time_s`` is the nominal time; ``profile`` is the traverse of ``points`` at
        nominal friction (gravity-normal model); ``stats`` carries
        ``exit_speed_lo_m_s``, ``exit_speed_m_s``, ``exit_speed_hi_m_s``, label counts,
        ``label_cap``, ``exact``, ``simple`` (no cell repeats) and ``state_cells``.

    Raises
    ------
    NoFeasibleLine
        When no lattice line works over the whole range; ``reason`` as for
        :func:`lattice_line` (``"stall"``: every line stalls at HI friction;
        ``"limits"``: too fast at LO friction, or the grade or turn limits).
    ParameterError
        A bad argument, or an unknown keyword.

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.params import SearchOptions
    >>> from fallway.terrain import Terrain
    >>> z = -0.5 * np.add.outer(np.arange(5.0), np.arange(5.0))
    >>> t = Terrain.from_array(z, (1.0, 0, 0, 0, -1.0, 5.0))
    >>> ln = robust_lattice_line(t, (0.5, 4.5), (4.5, 0.5), Mover(mu=0.1), 0.05, 0.2,
    ...                          options=SearchOptions(neighbours=8))
    >>> ln.cells[[0, -1]].tolist()
    [[0, 0], [4, 4]]
    """
    _check_mover(mover)
    opts = _options(options)
    lo, hi = check_mu_range(mover, mu_lo, mu_hi)
    try:
        resolution = float(resolution)
    except (TypeError, ValueError):
        raise ParameterError(f"resolution must be a fraction >= 0, got {resolution!r}") from None
    if not (math.isfinite(resolution) and resolution >= 0.0):
        raise ParameterError(f"resolution must be a fraction >= 0, got {resolution!r}")
    limits = Limits() if limits is None else limits
    keep = _keepout_mask(terrain, keepout)
    domain = _domain_mask(terrain, allowed)
    nb = opts.neighbours
    prob = _Problem(terrain, mover, nb, limits, keep, domain)
    centres = "the robust search starts and ends at cell centres"
    sp = _at_cell_centre(terrain, resolve_point(terrain, start, "start", prob.blocked), centres)
    ep = _at_cell_centre(terrain, resolve_point(terrain, end, "end", prob.blocked), centres)
    s, e = sp.cell, ep.cell
    if s == e:
        raise ParameterError("start and end snap to the same cell; give points at least one cell apart")
    _check_end_window(mover, lo, hi, mover.v0 * mover.v0, float(prob.z[s] - prob.z[e]), prob.v2_max)
    run_kw = dict(heuristic=opts.heuristic, energy_tol=opts.energy_tol, max_labels=opts.max_labels,
                  label_cap=opts.label_cap, resolution=resolution)
    res = prob.run_robust(s, e, lo, hi, **run_kw)
    if res["status"] == _c.LABEL_BUDGET:
        raise _budget_error(terrain, opts.max_labels or _ROBUST_MAX_LABELS, res["closest"])
    if res["status"] != _c.OK:
        del prob

        def found(**relax) -> bool:
            kw = dict(keep=keep, domain=domain) | relax
            p = _Problem(terrain, mover, nb, limits, kw.pop("keep"), kw.pop("domain"), **kw)
            return p.run_robust(s, e, lo, hi, **run_kw)["status"] == _c.OK

        raise _diagnose(terrain, res["closest"], res["counters"], found, keep=keep, domain=domain, limits=limits,
                        mover=mover, robust=True)
    final = res["final"]
    nodes = []
    p = final
    while p >= 0:
        nodes.append(int(res["node"][p]))
        p = int(res["parent"][p])
    nodes.reverse()
    cells, points = _line_points(terrain, prob.stencil, nodes)
    stats = dict(res["stats"])
    stats["simple"] = len(set(nodes)) == len(nodes)
    stats["start_cell"] = [int(cells[0, 0]), int(cells[0, 1])]
    stats["end_cell"] = [int(cells[-1, 0]), int(cells[-1, 1])]
    _point_stats(stats, sp, "start")
    _point_stats(stats, ep, "end")
    en = res["e"][final]
    stats["exit_speed_lo_m_s"] = float(math.sqrt(en[0]))
    stats["exit_speed_m_s"] = float(math.sqrt(en[1]))
    stats["exit_speed_hi_m_s"] = float(math.sqrt(en[2]))
    profile = traverse(points, replace(mover, normal="gravity"))
    return LatticeLine(cells=cells, points=points, profile=profile, time_s=float(res["t"][final]), stats=stats)
