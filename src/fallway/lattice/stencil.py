"""Neighbourhoods of the terrain lattice and the geometry of their edges.

Geometry
--------
Nodes are cell centres, addressed by (row, col); row grows southwards, col eastwards,
and one step is one cell size.  A stencil is a table of offsets (drow, dcol):

* 8 neighbours: the king moves (0, ±1), (±1, 0), (±1, ±1);
* 16 neighbours: the 8 plus the knight moves (±1, ±2), (±2, ±1);
* 32 neighbours: the 16 plus (±1, ±3), (±3, ±1), (±2, ±3), (±3, ±2).

Every offset is primitive (gcd 1), so an edge never passes through another cell centre.

An edge is the straight plan segment from one centre to the other.  Heights along it come
from the bilinear interpolant between cell centres (:meth:`fallway.Terrain.sample_linear`).
That interpolant is bilinear on each square whose corners are four neighbouring centres,
and on the grid lines joining centres (integer row or integer col) it reduces to linear
interpolation between the two centres on that line.  An edge is therefore split where it
crosses those grid lines: at fractional position ``u`` (0 at the start, 1 at the end) it
crosses column line ``j`` at ``u = j / dcol`` or row line ``i`` at ``u = i / drow``, and the
height there is ``w * z[a] + (1 - w) * z[b]`` with ``a``, ``b`` the two centres on the
crossed line.  The line follows the ground through these break points; the 8-neighbour
edges cross no grid line between their end centres and are single straight segments.
Inside one bilinear square the ground between break points is a (slightly) curved
quadric; the lattice uses the chord, which is what the search times and what
:class:`fallway.LatticeLine` records.

An edge is passable only when every cell it *touches* (closed cell squares, corners
included, so a diagonal step cannot slip between two blocked cells) and every centre
its heights use are passable: inside the grid, not nodata, not keep-out.

Metrication: with Δ the widest angle between neighbouring stencil directions, the
longest lattice path between two far points is 1/cos(Δ/2) times the straight distance:
1.0824 (8), 1.0275 (16), 1.0131 (32).  Refinement removes this.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from ..errors import ParameterError

__all__ = ["Stencil", "make_stencil", "STENCIL_SIZES", "touched_cells"]

STENCIL_SIZES = (8, 16, 32)

_FAMILIES = {
    8: [(0, 1), (1, 1)],
    16: [(0, 1), (1, 1), (1, 2)],
    32: [(0, 1), (1, 1), (1, 2), (1, 3), (2, 3)],
}


def _offsets(n: int) -> list[tuple[int, int]]:
    out = set()
    for a, b in _FAMILIES[n]:
        for p, q in ((a, b), (b, a)):
            for sp in (1, -1):
                for sq in (1, -1):
                    out.add((sp * p, sq * q))
    # sort by plan direction angle, measured from east counter-clockwise (north up)
    return sorted(out, key=lambda o: math.atan2(-o[0], o[1]) % (2 * math.pi))


def _crossings(dr: int, dc: int):
    """Break points of edge (0,0)->(dr,dc): list of (u, (ra, ca), (rb, cb), w)."""
    pts = {}
    for j in range(1, abs(dc)):
        u = Fraction(j, abs(dc))
        col = int(math.copysign(j, dc))
        row = u * dr
        if row.denominator == 1:
            continue
        r0 = math.floor(row)
        w = 1 - (row - r0)  # weight of the centre at row r0
        pts[u] = ((r0, col), (r0 + 1, col), w)
    for i in range(1, abs(dr)):
        u = Fraction(i, abs(dr))
        row = int(math.copysign(i, dr))
        col = u * dc
        if col.denominator == 1:
            continue
        c0 = math.floor(col)
        w = 1 - (col - c0)
        pts[u] = ((row, c0), (row, c0 + 1), w)
    return [(float(u), a, b, float(w)) for u, (a, b, w) in sorted(pts.items())]


def touched_cells(r0: float, c0: float, r1: float, c1: float) -> list[tuple[int, int]]:
    """Cells whose closed square meets the segment (r0, c0)->(r1, c1) in fractional cell
    units (centre of cell (i, j) at (i, j)): L-inf distance <= 1/2 (1e-12 slack)."""
    dr, dc = r1 - r0, c1 - c0
    cells = []
    for i in range(math.floor(min(r0, r1)) - 1, math.ceil(max(r0, r1)) + 2):
        for j in range(math.floor(min(c0, c1)) - 1, math.ceil(max(c0, c1)) + 2):
            # f(u) = max(|r0 + u dr - i|, |c0 + u dc - j|) is convex piecewise linear in u:
            # its minimum is at 0, 1 or a breakpoint of one of the pieces.
            a, b = r0 - i, c0 - j
            cand = [0.0, 1.0]
            for d, k in ((dr, a), (dc, b)):
                if d:
                    cand += [(0.5 - k) / d, (-0.5 - k) / d, -k / d]
            if dr != dc:
                cand.append((b - a) / (dr - dc))
            if dr != -dc:
                cand.append(-(a + b) / (dr + dc))
            fmin = min(max(abs(a + u * dr), abs(b + u * dc)) for u in cand if 0.0 <= u <= 1.0)
            if fmin <= 0.5 + 1e-12:
                cells.append((i, j))
    return cells


def _touched_cells(dr: int, dc: int) -> list[tuple[int, int]]:
    """Cells whose closed square meets the stencil edge (0,0)->(dr,dc)."""
    return touched_cells(0.0, 0.0, float(dr), float(dc))


@dataclass(frozen=True, eq=False)
class Stencil:
    """Offsets and edge geometry of a lattice neighbourhood.

    Attributes
    ----------
    size : int
        8, 16 or 32.
    offsets : ndarray of int (K, 2)
        (drow, dcol) of every edge, sorted by plan direction.
    plan_cells : ndarray (K,)
        Plan length of each edge in cell sizes.
    direction_deg : ndarray (K,)
        Plan direction of each edge, degrees counter-clockwise from east.
    break_start : ndarray of int (K + 1,)
        Edge ``k``'s break points are entries ``break_start[k]:break_start[k + 1]`` of
        the ``break_*`` arrays.
    break_u : ndarray (B,)
        Fractional position of each break point along its edge (0..1, increasing).
    break_a, break_b : ndarray of int (B, 2)
        The two centres (offsets from the edge's start) whose heights give the break
        point's height ``break_w * z[a] + (1 - break_w) * z[b]``.
    break_w : ndarray (B,)
        Weight of centre ``a``.
    touch_start : ndarray of int (K + 1,)
        Edge ``k`` touches cells ``touch[touch_start[k]:touch_start[k + 1]]``.
    touch : ndarray of int (T, 2)
        Offsets of the cells an edge touches (start and end included) plus the centres
        its break points use; all must be passable.
    sub_du : ndarray (B + K,)
        Length of each sub-segment as a fraction of its edge: edge ``k``'s
        ``break_start[k + 1] - break_start[k] + 1`` sub-segments are entries
        ``break_start[k] + k`` onwards (``u`` of a break point minus ``u`` of the one
        before; they sum to 1 per edge).

    Examples
    --------
    >>> s = make_stencil(16)
    >>> len(s.offsets), int(s.break_start[-1]), len(s.sub_du)
    (16, 8, 24)
    >>> print(f"{s.worst_metrication():.4f}")
    1.0275
    """

    size: int
    offsets: np.ndarray
    plan_cells: np.ndarray
    direction_deg: np.ndarray
    break_start: np.ndarray
    break_u: np.ndarray
    break_a: np.ndarray
    break_b: np.ndarray
    break_w: np.ndarray
    touch_start: np.ndarray
    touch: np.ndarray
    sub_du: np.ndarray

    def widest_gap_deg(self) -> float:
        """Widest angle between neighbouring stencil directions, degrees."""
        d = np.sort(self.direction_deg)
        gaps = np.diff(np.concatenate([d, [d[0] + 360.0]]))
        return float(gaps.max())

    def worst_metrication(self) -> float:
        """Worst ratio of lattice path length to straight distance, 1/cos(Δ/2)."""
        return 1.0 / math.cos(math.radians(self.widest_gap_deg()) / 2.0)

    def edge_points(self, k: int):
        """Break points of edge ``k`` as (u, a, b, w) rows (for building lines)."""
        s, e = int(self.break_start[k]), int(self.break_start[k + 1])
        return [(float(self.break_u[i]), tuple(self.break_a[i]), tuple(self.break_b[i]), float(self.break_w[i]))
                for i in range(s, e)]

    def turn_ok(self, max_step_turn_deg: float | None) -> np.ndarray:
        """(K, K) bool: may a step along offset j follow a step along offset i?"""
        k = len(self.offsets)
        if max_step_turn_deg is None:
            return np.ones((k, k), dtype=np.bool_)
        d = self.direction_deg
        diff = np.abs((d[None, :] - d[:, None] + 180.0) % 360.0 - 180.0)
        return diff <= max_step_turn_deg + 1e-9


_CACHE: dict[int, Stencil] = {}


def make_stencil(neighbours: int) -> Stencil:
    """The stencil of 8, 16 or 32 neighbours (cached, read-only arrays).

    Examples
    --------
    >>> make_stencil(8).offsets[:3].tolist()
    [[0, 1], [-1, 1], [-1, 0]]
    """
    if neighbours not in STENCIL_SIZES:
        raise ParameterError(f"neighbours must be one of 8, 16, 32; got {neighbours!r}")
    if neighbours in _CACHE:
        return _CACHE[neighbours]
    offs = _offsets(neighbours)
    bstart, bu, ba, bb, bw = [0], [], [], [], []
    tstart, touch = [0], []
    du = []
    for dr, dc in offs:
        cr = _crossings(dr, dc)
        uprev = 0.0
        for u, a, b, w in cr:
            bu.append(u)
            ba.append(a)
            bb.append(b)
            bw.append(w)
            du.append(u - uprev)
            uprev = u
        du.append(1.0 - uprev)
        bstart.append(len(bu))
        cells = set(_touched_cells(dr, dc))
        for _, a, b, _ in cr:
            cells.add(a)
            cells.add(b)
        # check the far centre first: the cheapest rejection on a nodata edge
        touch.extend(sorted(cells, key=lambda c: (c != (dr, dc), c)))
        tstart.append(len(touch))
    offsets = np.array(offs, dtype=np.int64)
    arrays = dict(
        offsets=offsets,
        plan_cells=np.hypot(offsets[:, 0], offsets[:, 1]).astype(np.float64),
        direction_deg=np.degrees(np.arctan2(-offsets[:, 0], offsets[:, 1])) % 360.0,
        break_start=np.array(bstart, dtype=np.int64),
        break_u=np.array(bu, dtype=np.float64),
        break_a=np.array(ba, dtype=np.int64).reshape(-1, 2),
        break_b=np.array(bb, dtype=np.int64).reshape(-1, 2),
        break_w=np.array(bw, dtype=np.float64),
        touch_start=np.array(tstart, dtype=np.int64),
        touch=np.array(touch, dtype=np.int64).reshape(-1, 2),
        sub_du=np.array(du, dtype=np.float64),
    )
    for a in arrays.values():
        a.setflags(write=False)
    st = Stencil(size=neighbours, **arrays)
    _CACHE[neighbours] = st
    return st
