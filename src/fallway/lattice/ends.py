"""Exact end points: a line starts and ends at the given (x, y), not at the nearest cell centre.

A point is *resolved* once (:func:`resolve_point`): it keeps its (x, y) when it is usable,
and its height is read from the smooth terrain surface the refined line lies on
(:meth:`fallway.Terrain.sample`; within two cells of nodata, where that surface is
undefined, the bilinear surface of the lattice, :meth:`fallway.Terrain.sample_linear`).
A point must move when it lies on nodata, in a keep-out area, or in the DEM's outer half
cell (outside the hull of cell centres, where no height is interpolated): it moves to the
nearest free cell centre (nearest in plan; a cell centre is the nearest location the
lattice can certify), and :class:`EndPoint` records where from, how far and why.  A point
outside the search domain (a corridor) is not moved: the domain is the caller's choice.

Virtual edges
-------------
A point that is not a cell centre is joined to its nearest cell centre and to the centres
one stencil step from that cell (9, 17 or 33 cells) by straight plan segments
(:func:`virtual_edges`).  Each is built like a stencil edge: split where it crosses the
lines joining cell centres, heights at the break points from the same surface as the
point (the smooth surface passes through every cell-centre height, so an edge ends
exactly on the lattice's height at its cell), passable only when every cell its closed
squares touch is free (:func:`fallway.lattice.stencil.touched_cells`).  The kernel walks
them with the same grade window and segment law as any edge
(:func:`fallway.lattice.core.virtual_walk`): the start point is a virtual source whose
edges seed the search, the end point a virtual target node.  An edge whose heights are
undefined (a break point within two cells of nodata *and* next to a nodata centre)
carries the static code NODATA.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import NoFeasibleLine, ParameterError
from . import core as _c
from .stencil import touched_cells

__all__ = ["EndPoint", "Virtual", "parse_point", "resolve_point", "virtual_edges", "no_virtual"]

# a point closer than this fraction of a cell to a cell centre is that centre
_AT_CENTRE = 1e-9


@dataclass(frozen=True)
class EndPoint:
    """A resolved end point.

    Attributes
    ----------
    name : str
        ``"start"``, ``"end"``, ``"via point N"``.
    given_xy : (float, float)
        As given, in the terrain's CRS.
    xy : (float, float)
        Where the line starts or ends (``given_xy`` unless moved).
    z : float
        Height there (smooth surface, module notes).
    moved_m : float
        Plan distance from ``given_xy`` to ``xy`` (0 when not moved).
    why : str or None
        Why it moved (None when not moved).
    cell : int
        Flat index of the nearest cell centre to ``xy``.
    at_centre : bool
        ``xy`` is that cell's centre: no virtual edges are needed.
    """

    name: str
    given_xy: tuple
    xy: tuple
    z: float
    moved_m: float
    why: str | None
    cell: int
    at_centre: bool


def _height(terrain, x: float, y: float) -> float:
    z = terrain.sample(x, y)
    if not math.isfinite(z):
        z = terrain.sample_linear(x, y)
    return float(z)


def _heights(terrain, x, y) -> np.ndarray:
    z = np.asarray(terrain.sample(x, y), dtype=float).reshape(-1)
    bad = ~np.isfinite(z)
    if bad.any():
        z[bad] = np.asarray(terrain.sample_linear(np.asarray(x)[bad], np.asarray(y)[bad]), dtype=float).reshape(-1)
    return z


def _problem(terrain, x: float, y: float, blocked_cell) -> str | None:
    """Why a line cannot start or end at (x, y), or None."""
    rows, cols = terrain.shape
    r, c = terrain.rowcol(x, y)
    r, c = float(r), float(c)
    tol = 1e-9
    if not (-tol <= r <= rows - 1 + tol and -tol <= c <= cols - 1 + tol):
        return "lies in the DEM's outer half cell, outside the cell centres, where no height is interpolated"
    codes = 0
    for i, j in touched_cells(r, c, r, c):
        if 0 <= i < rows and 0 <= j < cols:
            codes |= blocked_cell(i * cols + j)
    if codes & _c.OUTSIDE:
        return "outside"
    if codes & _c.NODATA:
        return "lies on a nodata cell"
    if codes & _c.KEEPOUT:
        return "lies in a keep-out area"
    if not math.isfinite(_height(terrain, x, y)):
        return "lies next to nodata, where no height is interpolated"
    return None


def parse_point(terrain, xy, name: str) -> tuple[float, float]:
    """``xy`` as two floats; a :class:`~fallway.errors.ParameterError` when it is not a pair
    of numbers or lies outside the terrain."""
    try:
        x, y = (float(v) for v in xy)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a pair (x, y) of map coordinates, got {xy!r}") from None
    left, bottom, right, top = terrain.bounds
    if not (left <= x <= right and bottom <= y <= top):
        raise ParameterError(f"{name} ({x:.3f}, {y:.3f}) lies outside the terrain "
                             f"[{left:.3f}, {right:.3f}] x [{bottom:.3f}, {top:.3f}]; give a point on the grid")
    return x, y


def resolve_point(terrain, xy, name: str, blocked: np.ndarray) -> EndPoint:
    """Where a line starts or ends for the point ``xy`` given in the terrain's CRS.

    ``blocked`` is the uint8 cell code array of the search (bits
    :data:`~fallway.lattice.core.NODATA`, :data:`~fallway.lattice.core.KEEPOUT`,
    :data:`~fallway.lattice.core.OUTSIDE`).

    Raises
    ------
    ParameterError
        ``xy`` is not a pair of numbers or lies outside the terrain.
    NoFeasibleLine
        The point lies outside the search domain (``reason="corridor"``), or there is no
        free cell to move it to.
    """
    x, y = parse_point(terrain, xy, name)
    rows, cols = terrain.shape
    flat = blocked.reshape(-1)
    why = _problem(terrain, x, y, lambda k: int(flat[k]))
    if why == "outside":
        raise NoFeasibleLine(f"{name} ({x:.1f}, {y:.1f}) lies outside the search domain; widen it "
                             "(allowed) or move the point", reason="corridor", closest=None)
    nx, ny = x, y
    if why is not None:
        free = np.flatnonzero(flat == 0)
        if free.size == 0:
            reason = "keepout" if "keep-out" in why else "nodata"
            raise NoFeasibleLine(f"{name} ({x:.1f}, {y:.1f}) {why}, and no free cell is left to move it to",
                                 reason=reason, closest=None)
        cx, cy = terrain.cell_center(free // cols, free % cols)
        k = int(np.argmin(np.hypot(cx - x, cy - y)))
        nx, ny = float(cx[k]), float(cy[k])
    r, c = terrain.rowcol(nx, ny)
    rr = min(max(int(np.rint(r)), 0), rows - 1)
    cc = min(max(int(np.rint(c)), 0), cols - 1)
    at_centre = abs(float(r) - rr) <= _AT_CENTRE and abs(float(c) - cc) <= _AT_CENTRE
    z = float(terrain.z[rr, cc]) if at_centre else _height(terrain, nx, ny)
    return EndPoint(name=name, given_xy=(x, y), xy=(nx, ny), z=z, moved_m=float(math.hypot(nx - x, ny - y)),
                    why=why, cell=rr * cols + cc, at_centre=at_centre)


@dataclass(frozen=True, eq=False)
class Virtual:
    """The virtual edges of one search, packed for the kernel (:func:`fallway.lattice.kernel.search`).

    Edges ``0 .. nvs - 1`` join the start point to cells, the rest join cells to the end
    point.  ``points[j]`` is edge ``j``'s polyline (x, y, z), in travel order.
    """

    nvs: int
    cell: np.ndarray
    dir_deg: np.ndarray
    code: np.ndarray
    sub_start: np.ndarray
    drop: np.ndarray
    plan: np.ndarray
    tch_start: np.ndarray
    tch: np.ndarray
    end_rcz: np.ndarray
    points: tuple

    @property
    def has_start(self) -> bool:
        return self.nvs > 0

    @property
    def has_end(self) -> bool:
        return len(self.cell) > self.nvs

    def z_range(self) -> tuple[float, float]:
        """Lowest and highest height on the virtual edges (inf, -inf without any)."""
        zs = [p[:, 2] for p in self.points if np.isfinite(p[:, 2]).all()]
        if not zs:
            return math.inf, -math.inf
        z = np.concatenate(zs)
        return float(z.min()), float(z.max())

    def drive_max(self, g: float, mu: float) -> float:
        """The largest drive g (G - mu) / sqrt(1 + G²) over the virtual sub-segments (-inf without any)."""
        ok = np.isfinite(self.drop)
        if not ok.any():
            return -math.inf
        grade = self.drop[ok] / self.plan[ok]
        return float(np.max(g * (grade - mu) / np.sqrt(1.0 + grade * grade)))


def _edge(terrain, p_xy, p_rc, p_z, cell_rc):
    """Polyline (x, y, z) from the point (fractional row, col) to a cell centre, split where it
    crosses the lines joining cell centres."""
    (pr, pc), (R, C) = p_rc, cell_rc
    us = set()
    for a, b in ((pr, R), (pc, C)):
        if b != a:
            lo, hi = min(a, b), max(a, b)
            for k in range(math.floor(lo) + 1, math.ceil(hi)):
                us.add((k - a) / (b - a))
    us = np.array(sorted(u for u in us if 1e-9 < u < 1.0 - 1e-9))
    rr = np.concatenate([[pr], pr + us * (R - pr), [R]])
    cc = np.concatenate([[pc], pc + us * (C - pc), [C]])
    x, y = terrain.cell_center(rr, cc)
    x[0], y[0] = p_xy  # exactly as given (no round trip through cell units)
    z = np.empty(len(rr))
    z[0] = p_z
    if len(us):
        z[1:-1] = _heights(terrain, x[1:-1], y[1:-1])
    z[-1] = terrain.z[R, C]
    return np.column_stack([x, y, z])


def virtual_edges(terrain, stencil, start: EndPoint | None, end: EndPoint | None) -> Virtual:
    """The virtual edges joining ``start`` and ``end`` (None or at a cell centre: none) to the lattice."""
    rows, cols = terrain.shape
    offsets = [(0, 0)] + [(int(a), int(b)) for a, b in stencil.offsets]
    cells, dirs, codes, sub_start, drops, plans, tch_start, tch, pts = [], [], [], [0], [], [], [0], [], []
    nvs = 0
    end_rcz = np.zeros(3)
    for which, pt in (("start", start), ("end", end)):
        if pt is None or pt.at_centre:
            continue
        pr, pc = (float(v) for v in terrain.rowcol(*pt.xy))
        r0, c0 = pt.cell // cols, pt.cell % cols
        if which == "end":
            end_rcz = np.array([pr, pc, pt.z])
        for dr, dc in offsets:
            R, C = r0 + dr, c0 + dc
            if not (0 <= R < rows and 0 <= C < cols):
                continue
            touched = touched_cells(pr, pc, float(R), float(C))
            if any(not (0 <= i < rows and 0 <= j < cols) for i, j in touched):
                continue  # the edge leaves the grid
            P = _edge(terrain, pt.xy, (pr, pc), pt.z, (R, C))
            if which == "end":
                P = P[::-1].copy()
            d = np.diff(P, axis=0)
            plan = np.hypot(d[:, 0], d[:, 1])
            keep = plan > 1e-12 * terrain.cell_size
            if not keep.any():
                continue
            head = P[-1] - P[0]
            cells.append(R * cols + C)
            dirs.append(math.degrees(math.atan2(head[1], head[0])) % 360.0)
            codes.append(0 if np.isfinite(P[:, 2]).all() else _c.NODATA)
            drops.extend((-d[keep, 2]).tolist())
            plans.extend(plan[keep].tolist())
            sub_start.append(len(plans))
            tch.extend(i * cols + j for i, j in touched)
            tch_start.append(len(tch))
            pts.append(P)
        if which == "start":
            nvs = len(cells)
    return Virtual(nvs=nvs, cell=np.array(cells, dtype=np.int64), dir_deg=np.array(dirs, dtype=np.float64),
                   code=np.array(codes, dtype=np.uint8), sub_start=np.array(sub_start, dtype=np.int64),
                   drop=np.array(drops, dtype=np.float64), plan=np.array(plans, dtype=np.float64),
                   tch_start=np.array(tch_start, dtype=np.int64), tch=np.array(tch, dtype=np.int64),
                   end_rcz=end_rcz, points=tuple(pts))


def no_virtual() -> Virtual:
    """No virtual edges: the search starts and ends at cells."""
    return Virtual(nvs=0, cell=np.zeros(0, np.int64), dir_deg=np.zeros(0), code=np.zeros(0, np.uint8),
                   sub_start=np.zeros(1, np.int64), drop=np.zeros(0), plan=np.zeros(0),
                   tch_start=np.zeros(1, np.int64), tch=np.zeros(0, np.int64), end_rcz=np.zeros(3), points=())
