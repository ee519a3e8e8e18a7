"""The lattice search of a raised line: plan cells times height layers above the ground.

A raised line (a trestle, an elevated chute, a flume on posts) is free in height within
its clearance band ``[c_min, c_max]`` above the ground, so its search runs on states
``(cell, layer)``: the cell centre at the height ``ground + h_k``, with ``L`` layers
``h_k = c_min + k (c_max - c_min) / (L - 1)`` spread evenly over the band.

Why layers above the ground, not a grid of absolute elevations: the band is what a line
must stay in, and layers tied to it cover it with the same ``L`` states per cell whatever
the relief (an absolute grid needs its step times the valley's depth of layers to hold
the same band, and most of them lie under the ground or above the band).  A straight line
across a valley is still a path of this lattice: its nodes sit high above the valley floor
and low on the flanks, and an edge may change layer freely.

Edges
-----
From state (a, h_a) to (b, h_b), ``b = a + offset`` of the plan stencil
(:mod:`fallway.lattice.stencil`), the line is the straight 3D segment between the two
points.  It is feasible only when along its whole length the clearance
``z_line(s) - ground(s)`` stays in ``[c_min, c_max]`` (to ``tol_m``), checked at
samples no more than half a cell apart (plan), with the ground the lattice's own bilinear
interpolant between cell centres (:meth:`fallway.Terrain.sample_linear`), and only when
every sample lies in a searchable cell (data, not keep-out, inside the corridor).  The
route judges the band on the smooth surface (:mod:`fallway.clearance`), which passes
through the same heights at the cell centres but differs between them; so at each sample
the band is narrowed by the largest gap between the two surfaces measured in that square
of four centres (:func:`surface_gap`, a 4 x 4 grid per square): a lattice line reported
without refinement meets the route's check too (to its 3 cm tolerance for the points the
measurement grid misses).  With
``d(s) = (1 - s) z_a + s z_b - ground(s)`` (the ground's chord above the ground) the
clearance is ``(1 - s) h_a + s h_b + d(s)``: linear in ``h_b``, so one pass over the
samples gives the interval of feasible ``h_b`` for a given ``h_a`` and every layer in it
is pushed.  The time is the gravity-normal segment law of the ground search
(:func:`fallway._segment.segment_law`) on the segment's drop, plan and 3D length; the
grade window applies to the segment's grade.  The per-step turn limit of the ground
search is not applied (the refinement holds the bend radius and the speed-aware limits).

The ends are exact: the start point (its plan position, at ``start_height_m`` above the
ground) joins every state of the cells one stencil step from its nearest cell (and that
cell) by a straight segment checked the same way; the end point likewise.

Labels and dominance are those of the ordinary search (:mod:`fallway.lattice.kernel`):
``(t, v²)`` labels, settled in order of ``t + h`` with the admissible, consistent bound
``h = D / V`` (``D`` the straight 3D distance to the end point, ``V`` the speed bound
from the highest start energy over the lowest point of the band), so a label is
dominated by a settled one at its state exactly when that state's highest settled v² is
at least its own (less the tolerance); a newcomer is also dropped when the earliest label
still queued at its state, or the fastest, is no later and no slower.  ``label_cap`` bounds the settled labels per state
(approximate, as in the ground search).

Cost
----
States are cells times layers: the search is restricted to a plan corridor around the
straight start-end line (half-width ``SearchOptions.corridor_m``, default
:data:`CORRIDOR_FRACTION` of the plan distance and at least :data:`CORRIDOR_MIN_CELLS`
cells) and to ``LineSpec.height_layers`` layers (default 16); the memory is estimated
before the search (:func:`raised_memory_bytes`).
"""

from __future__ import annotations

import dataclasses
import math
import time

import numpy as np
from numba import njit

from .._segment import segment_law
from ..errors import NoFeasibleLine, ParameterError, TerrainError
from ..params import Limits, LineSpec, Mover, SearchOptions
from ..physics import traverse
from ..results import LatticeLine
from ..scale import available_bytes
from .core import heap_pop, heap_push
from .stencil import make_stencil

__all__ = ["raised_lattice_line", "raised_memory_bytes", "surface_gap", "corridor_mask", "CORRIDOR_FRACTION", "CORRIDOR_MIN_CELLS",
           "CLEARANCE_TOL_M"]

#: Default corridor half-width as a fraction of the plan distance start -> end.
CORRIDOR_FRACTION = 0.25
#: ... and never narrower than this many cells.
CORRIDOR_MIN_CELLS = 8
#: Clearance tolerance of the lattice's edge test, metres (rounding only).
CLEARANCE_TOL_M = 1e-6
#: Labels per state the memory estimate allows for: on the demo site
#: (``scripts/bench_raised.py``) the search peaked at about 1.3 kB per state above the
#: process's baseline with 8 layers and 2.0 kB with 16 (about 14 and 22 labels' worth).
LABELS_PER_STATE = 24.0
_MAX_LABELS = 200_000_000

OK, NOT_REACHED, BUDGET = 0, 1, 2


def raised_memory_bytes(cells: int, layers: int, labels_per_state: float = LABELS_PER_STATE) -> int:
    """Estimated working memory of a raised search over ``cells`` searchable cells, bytes.

    Per state (cell x layer): the highest settled v² (8 bytes), the settled count (4) and
    the time and v² of the earliest and of the fastest queued label (32);
    per label: time, v², state, parent (28 bytes) and its heap entry (16), doubled for the
    pool's growth by doubling.

    Examples
    --------
    >>> print(f"{raised_memory_bytes(250_000, 16) / 1e6:.0f} MB")
    8624 MB
    """
    states = int(cells) * int(layers)
    return int(states * (44 + labels_per_state * (28 + 16) * 2))


@njit(cache=True, nogil=True, inline="always")
def _ground(z, r, c):
    """Bilinear height between cell centres at grid position (row r, col c); NaN off the grid."""
    rows, cols = z.shape
    if r < 0.0 or c < 0.0 or r > rows - 1 or c > cols - 1:
        return math.nan
    r0 = min(int(r), rows - 2) if rows > 1 else 0
    c0 = min(int(c), cols - 2) if cols > 1 else 0
    fr = r - r0
    fc = c - c0
    r1 = min(r0 + 1, rows - 1)
    c1 = min(c0 + 1, cols - 1)
    return ((1 - fr) * ((1 - fc) * z[r0, c0] + fc * z[r0, c1]) + fr * ((1 - fc) * z[r1, c0] + fc * z[r1, c1]))


@njit(cache=True, nogil=True, inline="always")
def _free_at(free, cols, r, c):
    return free[int(r + 0.5) * cols + int(c + 0.5)] != 0


@njit(cache=True, nogil=True, inline="always")
def _gap_at(gap, r, c):
    rows, cols = gap.shape
    return gap[min(int(r), rows - 1), min(int(c), cols - 1)]


@njit(cache=True, nogil=True)
def _segment_ok(z, gap, free, r0, c0, za, r1, c1, zb, cmin, cmax, tol):
    """True when the straight 3D segment (r0, c0, za) -> (r1, c1, zb) keeps its clearance in
    the band at samples <= half a cell apart over searchable cells (the first point, an
    exact end point whose height is given on the smooth surface, is not sampled)."""
    cols = z.shape[1]
    n = max(1, int(math.ceil(2.0 * math.hypot(r1 - r0, c1 - c0) - 1e-9)))
    for i in range(1, n + 1):
        s = i / n
        r = r0 + s * (r1 - r0)
        c = c0 + s * (c1 - c0)
        g = _ground(z, r, c)
        if not (g == g) or not _free_at(free, cols, r, c):
            return False
        h = za + s * (zb - za) - g
        e = _gap_at(gap, r, c)
        if h < cmin + e - tol or h > cmax - e + tol:
            return False
    return True


@njit(cache=True, nogil=True)
def _layer_range(z, gap, free, ra, ca, dr, dc, ha, hs, cmin, cmax, tol):
    """Layers of the end state reachable from (ra, ca) at height ``ha`` above ground by
    the stencil step (dr, dc): ``(k_lo, k_hi)``, empty when ``k_lo > k_hi``."""
    rows, cols = z.shape
    L = hs.shape[0]
    rb = ra + dr
    cb = ca + dc
    za = z[ra, ca]
    zb = z[rb, cb]
    lo = cmin - tol
    hi = cmax + tol
    n = max(1, int(math.ceil(2.0 * math.hypot(dr, dc) - 1e-9)))
    for i in range(1, n):
        s = i / n
        r = ra + s * dr
        c = ca + s * dc
        g = _ground(z, r, c)
        if not (g == g) or not _free_at(free, cols, r, c):
            return 1, 0
        d = (1 - s) * za + s * zb - g
        e = _gap_at(gap, r, c)
        # cmin + e - tol <= (1 - s) ha + s hb + d <= cmax - e + tol
        lo = max(lo, (cmin + e - tol - d - (1 - s) * ha) / s)
        hi = min(hi, (cmax - e + tol - d - (1 - s) * ha) / s)
    if lo > hi:
        return 1, 0
    if L == 1:
        return (0, 0) if (hs[0] >= lo and hs[0] <= hi) else (1, 0)
    step = (hs[L - 1] - hs[0]) / (L - 1)
    k_lo = max(0, int(math.ceil((lo - hs[0]) / step - 1e-9)))
    k_hi = min(L - 1, int(math.floor((hi - hs[0]) / step + 1e-9)))
    while k_lo <= k_hi and hs[k_lo] < lo:
        k_lo += 1
    while k_hi >= k_lo and hs[k_hi] > hi:
        k_hi -= 1
    return k_lo, k_hi


@njit(cache=True, nogil=True)
def _search(z, gap, free, hs, offs, cell, start, end, end_near, cmin, cmax, tol, g, mu, k, v2_0, v2_stall, v2_max,
            min_grade, max_grade, vbound, heuristic, max_labels, label_cap, e_tol):
    """The label-setting search; returns (status, t, v2, state, parent, final, created, settled).

    ``start``/``end``: (row, col, z) of the exact end points in grid coordinates (z
    absolute); ``end_near``: per cell, 1 where a state may join the end point.  States
    are ``cell * L + layer``; the end label has state -2."""
    rows, cols = z.shape
    L = hs.shape[0]
    nk = offs.shape[0]
    nstate = rows * cols * L
    emax = np.full(nstate, -1.0)
    nset = np.zeros(nstate, dtype=np.int32)
    open_t = np.full(nstate, math.inf)
    open_v = np.full(nstate, -1.0)
    fast_t = np.full(nstate, math.inf)  # the fastest (highest v²) label queued at the state
    fast_v = np.full(nstate, -1.0)
    cap = 1 << 16
    Lt = np.empty(cap)
    Lv = np.empty(cap)
    Ls = np.empty(cap, dtype=np.int64)
    Lp = np.empty(cap, dtype=np.int64)
    hkey = np.empty(cap)
    hidx = np.empty(cap, dtype=np.int64)
    q = 0
    hsize = 0
    free_slots = np.empty(cap, dtype=np.int64)  # pool slots of labels popped and dropped, for reuse
    nfree = 0
    created = 0
    settled = 0
    best_end = math.inf
    rs, cs, zs = start[0], start[1], start[2]
    re, ce, ze = end[0], end[1], end[2]
    inv_v = 1.0 / vbound if heuristic else 0.0
    # the start point's edges: its nearest cell and one stencil step from it
    r_c = int(rs + 0.5)
    c_c = int(cs + 0.5)
    for j in range(-1, nk):
        rb = r_c + (offs[j, 0] if j >= 0 else 0)
        cb = c_c + (offs[j, 1] if j >= 0 else 0)
        if rb < 0 or cb < 0 or rb >= rows or cb >= cols or free[rb * cols + cb] == 0:
            continue
        for kb in range(L):
            zb = z[rb, cb] + hs[kb]
            if not _segment_ok(z, gap, free, rs, cs, zs, rb, cb, zb, cmin, cmax, tol):
                continue
            plan = cell * math.hypot(rb - rs, cb - cs)
            drop = zs - zb
            if plan > 0 and (drop < min_grade * plan or drop > max_grade * plan):
                continue
            v2b, tb, stall = segment_law(v2_0, drop, plan, math.hypot(plan, drop), g, mu, k, v2_stall)
            if stall >= 0 or (v2_max >= 0 and v2b > v2_max):
                continue
            if q + 1 >= Lt.shape[0]:
                Lt, Lv, Ls, Lp, hkey, hidx = _grow(Lt, Lv, Ls, Lp, hkey, hidx)
            Lt[q] = tb
            Lv[q] = v2b
            Ls[q] = (rb * cols + cb) * L + kb
            Lp[q] = -1
            key = tb + inv_v * math.sqrt((cell * (rb - re)) ** 2 + (cell * (cb - ce)) ** 2 + (zb - ze) ** 2)
            hsize = heap_push(hkey, hidx, hsize, key, q)
            q += 1
            created += 1
    while hsize > 0:
        i, hsize = heap_pop(hkey, hidx, hsize)
        st = Ls[i]
        if st == -2:
            return OK, Lt, Lv, Ls, Lp, i, created, settled
        t = Lt[i]
        v2 = Lv[i]
        if emax[st] >= v2 - e_tol * v2 or (label_cap > 0 and nset[st] >= label_cap):
            if nfree == free_slots.shape[0]:
                free_slots = _grow1(free_slots)
            free_slots[nfree] = i  # no label descends from it: its slot is free again
            nfree += 1
            continue
        emax[st] = v2
        nset[st] += 1
        settled += 1
        if created >= max_labels:
            return BUDGET, Lt, Lv, Ls, Lp, -1, created, settled
        flat = st // L
        ka = st - flat * L
        ra = flat // cols
        ca = flat - ra * cols
        ha = hs[ka]
        za = z[ra, ca] + ha
        if q + nk * L + 2 >= Lt.shape[0]:
            Lt, Lv, Ls, Lp, hkey, hidx = _grow(Lt, Lv, Ls, Lp, hkey, hidx)
        if end_near[flat] and _segment_ok(z, gap, free, re, ce, ze, ra, ca, za, cmin, cmax, tol):
            plan = cell * math.hypot(re - ra, ce - ca)
            drop = za - ze
            if plan == 0 or (drop >= min_grade * plan and drop <= max_grade * plan):
                v2b, tb, stall = segment_law(v2, drop, plan, math.hypot(plan, drop), g, mu, k, v2_stall)
                if stall < 0 and not (v2_max >= 0 and v2b > v2_max) and t + tb < best_end:
                    best_end = t + tb
                    Lt[q] = t + tb
                    Lv[q] = v2b
                    Ls[q] = -2
                    Lp[q] = i
                    hsize = heap_push(hkey, hidx, hsize, t + tb, q)
                    q += 1
                    created += 1
        for j in range(nk):
            dr = offs[j, 0]
            dc = offs[j, 1]
            rb = ra + dr
            cb = ca + dc
            if rb < 0 or cb < 0 or rb >= rows or cb >= cols:
                continue
            fb = rb * cols + cb
            if free[fb] == 0:
                continue
            k_lo, k_hi = _layer_range(z, gap, free, ra, ca, dr, dc, ha, hs, cmin, cmax, tol)
            plan = cell * math.hypot(dr, dc)
            for kb in range(k_lo, k_hi + 1):
                sb = fb * L + kb
                zb = z[rb, cb] + hs[kb]
                drop = za - zb
                if drop < min_grade * plan or drop > max_grade * plan:
                    continue
                v2b, tb, stall = segment_law(v2, drop, plan, math.hypot(plan, drop), g, mu, k, v2_stall)
                if stall >= 0 or (v2_max >= 0 and v2b > v2_max):
                    continue
                if emax[sb] >= v2b - e_tol * v2b:
                    continue
                if open_t[sb] <= t + tb and open_v[sb] >= v2b - e_tol * v2b:
                    continue
                if fast_t[sb] <= t + tb and fast_v[sb] >= v2b - e_tol * v2b:
                    continue
                if t + tb < open_t[sb]:
                    open_t[sb] = t + tb
                    open_v[sb] = v2b
                if v2b > fast_v[sb]:
                    fast_t[sb] = t + tb
                    fast_v[sb] = v2b
                if nfree > 0:
                    nfree -= 1
                    slot = free_slots[nfree]
                else:
                    slot = q
                    q += 1
                Lt[slot] = t + tb
                Lv[slot] = v2b
                Ls[slot] = sb
                Lp[slot] = i
                key = t + tb + inv_v * math.sqrt((cell * (rb - re)) ** 2 + (cell * (cb - ce)) ** 2 + (zb - ze) ** 2)
                hsize = heap_push(hkey, hidx, hsize, key, slot)
                created += 1
    return NOT_REACHED, Lt, Lv, Ls, Lp, -1, created, settled


@njit(cache=True, nogil=True)
def _grow1(a):
    out = np.empty(2 * a.shape[0], dtype=a.dtype)
    out[: a.shape[0]] = a
    return out


@njit(cache=True, nogil=True)
def _grow(Lt, Lv, Ls, Lp, hkey, hidx):
    n = 2 * Lt.shape[0]
    out_t = np.empty(n)
    out_t[: Lt.shape[0]] = Lt
    out_v = np.empty(n)
    out_v[: Lv.shape[0]] = Lv
    out_s = np.empty(n, dtype=np.int64)
    out_s[: Ls.shape[0]] = Ls
    out_p = np.empty(n, dtype=np.int64)
    out_p[: Lp.shape[0]] = Lp
    out_k = np.empty(n)
    out_k[: hkey.shape[0]] = hkey
    out_i = np.empty(n, dtype=np.int64)
    out_i[: hidx.shape[0]] = hidx
    return out_t, out_v, out_s, out_p, out_k, out_i


# ----------------------------------------------------------------------------- the front

def _grid_rc(terrain, x: float, y: float) -> tuple[float, float]:
    r, c = terrain.rowcol(np.array([x], float), np.array([y], float))
    return float(r[0]), float(c[0])


def surface_gap(terrain, free=None, sub: int = 4) -> np.ndarray:
    """Per square between four cell centres, the largest |smooth - bilinear| height gap, m.

    Measured on a ``sub`` x ``sub`` grid of points per square (edges included), only for
    squares touching a searchable cell (``free``; 0 elsewhere and where a corner is
    nodata).  Shape ``(rows - 1, cols - 1)`` (at least 1 x 1).

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> plane = Terrain.from_array(np.add.outer(np.arange(6.0), 2 * np.arange(7.0)), (1.0, 0, 0, 0, -1.0, 6.0))
    >>> float(surface_gap(plane).max()) < 1e-12       # both surfaces are exact on a plane
    True
    """
    rows, cols = terrain.shape
    out = np.zeros((max(rows - 1, 1), max(cols - 1, 1)))
    if rows < 2 or cols < 2:
        return out
    use = np.ones((rows, cols), bool) if free is None else np.asarray(free, bool)
    sq = use[:-1, :-1] | use[1:, :-1] | use[:-1, 1:] | use[1:, 1:]
    if not sq.any():
        return out
    rr, cc = np.nonzero(sq)
    r0, r1, c0, c1 = rr.min(), rr.max() + 1, cc.min(), cc.max() + 1
    fr = np.linspace(r0, r1, (r1 - r0) * sub + 1)
    fc = np.linspace(c0, c1, (c1 - c0) * sub + 1)
    R, C = np.meshgrid(fr, fc, indexing="ij")
    x, y = terrain.cell_center(R, C)
    smooth = np.asarray(terrain.sample(x.ravel(), y.ravel()), float).reshape(R.shape)
    lin = np.asarray(terrain.sample_linear(x.ravel(), y.ravel()), float).reshape(R.shape)
    d = np.nan_to_num(np.abs(smooth - lin), nan=0.0)
    nr, nc = r1 - r0, c1 - c0
    # each square's points: rows k*sub .. (k+1)*sub of the fine grid (edges shared)
    blk = np.lib.stride_tricks.sliding_window_view(d, (sub + 1, sub + 1))[::sub, ::sub][:nr, :nc]
    out[r0:r1, c0:c1] = blk.max(axis=(2, 3))
    out[~sq] = 0.0
    return out


def _ground_at(terrain, x: float, y: float) -> float:
    """The ground under an end point: the smooth surface (as every reported ground height),
    bilinear where it is undefined (within two cells of nodata)."""
    z = float(np.asarray(terrain.sample(np.array([x]), np.array([y])), float).ravel()[0])
    return z if math.isfinite(z) else float(terrain.sample_linear(np.array([x]), np.array([y]))[0])


def corridor_mask(terrain, start_xy, end_xy, half_width_m: float) -> np.ndarray:
    """Cells whose centre lies within ``half_width_m`` of the plan segment start -> end.

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(np.zeros((5, 9)), (1.0, 0, 0, 0, -1.0, 5.0))
    >>> corridor_mask(t, (0.5, 2.5), (8.5, 2.5), 1.0).sum(axis=1).tolist()
    [0, 9, 9, 9, 0]
    """
    rows, cols = terrain.shape
    rr, cc = np.mgrid[0:rows, 0:cols]
    x, y = terrain.cell_center(rr.ravel(), cc.ravel())
    P = np.column_stack([np.asarray(x, float), np.asarray(y, float)])
    a = np.asarray(start_xy, float)
    d = np.asarray(end_xy, float) - a
    L2 = float(d @ d)
    s = np.clip(((P - a) @ d) / L2, 0.0, 1.0) if L2 > 0 else np.zeros(len(P))
    dist = np.hypot(*(P - a - s[:, None] * d).T)
    return (dist <= half_width_m).reshape(rows, cols)


def raised_lattice_line(terrain, start, end, mover: Mover, line: LineSpec, *, limits: Limits | None = None,
                        keepout=None, options: SearchOptions | None = None,
                        memory_limit_bytes: int | None = None) -> LatticeLine:
    """The minimum-time raised line on the lattice of cells times height layers (module notes).

    Parameters
    ----------
    terrain : Terrain
    start, end : (x, y)
        Exact end points in the terrain CRS; the line starts ``line.start_height_m`` and
        ends ``line.end_height_m`` above the ground there (the smooth surface).
    mover : Mover
        Physics (gravity-normal model, as the ground search).
    line : LineSpec
        A raised line: clearance band and ``height_layers``.
    limits : Limits, optional
        Grade window (per segment).
    keepout : bool mask or Keepout, optional
    options : SearchOptions, optional
        ``neighbours``, ``label_cap``, ``max_labels``, ``energy_tol``, ``heuristic``,
        ``corridor_m`` (the plan corridor's half-width; default module notes).
    memory_limit_bytes : int, optional
        Budget for the memory estimate (default: the memory available).

    Returns
    -------
    LatticeLine
        ``points`` the 3D polyline (start point, cell centres at their layer heights, end
        point); ``cells`` the cells; ``stats`` with labels, states, layers, corridor.

    Raises
    ------
    NoFeasibleLine
        No line in the band (``reason`` ``"unreachable"``), or the label budget is spent.
    TerrainError
        Its memory estimate (:func:`raised_memory_bytes`) is over the budget.

    Examples
    --------
    A flat floor, 20 m up at the start and 4 m at the end:

    >>> from numpy import zeros
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(zeros((12, 41)), (1.0, 0, 0, 0, -1.0, 12.0))
    >>> ln = raised_lattice_line(t, (0.5, 6.0), (40.5, 6.0), Mover(mu=0.0), LineSpec("raised", (0, 20), 20, 4))
    >>> ln.points[0].tolist(), ln.points[-1].tolist()
    ([0.5, 6.0, 20.0], [40.5, 6.0, 4.0])
    >>> bool(ln.points[1:-1, 2].min() < 4.0)  # dips below the end height: a falling then rising line
    True
    """
    t0 = time.perf_counter()
    limits = Limits() if limits is None else limits
    opts = SearchOptions() if options is None else options
    if line.kind != "raised":
        raise ParameterError("raised_lattice_line needs LineSpec('raised', ...)")
    rows, cols = terrain.shape
    cell = float(terrain.cell_size)
    sx, sy = (float(v) for v in start)
    ex, ey = (float(v) for v in end)
    dist = math.hypot(ex - sx, ey - sy)
    if dist <= 0:
        raise ParameterError(f"start and end are the same point ({sx:.3f}, {sy:.3f}); give two points")
    half = opts.corridor_m if opts.corridor_m is not None else max(CORRIDOR_FRACTION * dist, CORRIDOR_MIN_CELLS * cell)
    z = np.ascontiguousarray(terrain.z, dtype=float)
    free = np.isfinite(z) & corridor_mask(terrain, (sx, sy), (ex, ey), half)
    if keepout is not None:
        from .search import _keepout_mask

        free &= ~_keepout_mask(terrain, keepout)
    layers = int(line.height_layers)
    c_lo, c_hi = line.clearance_m
    hs = np.array([c_lo]) if c_hi <= c_lo or layers == 1 else np.linspace(c_lo, c_hi, layers)
    active = int(free.sum())
    need = raised_memory_bytes(active, len(hs))
    limit = memory_limit_bytes if memory_limit_bytes is not None else available_bytes()
    if limit is not None and need > limit:
        raise TerrainError(f"the raised-line search needs about {need / 1e9:.1f} GB ({active} cells x {len(hs)} "
                           f"height layers), over the {limit / 1e9:.1f} GB available; use fewer height layers "
                           "(--height-layers), a narrower corridor (corridor_m) or a coarser DEM")
    rs, cs = _grid_rc(terrain, sx, sy)
    re, ce = _grid_rc(terrain, ex, ey)
    for name, (r, c) in (("start", (rs, cs)), ("end", (re, ce))):
        if not (0 <= r <= rows - 1 and 0 <= c <= cols - 1) or not np.isfinite(terrain.sample_linear(
                np.array([sx if name == "start" else ex]), np.array([sy if name == "start" else ey]))[0]):
            raise NoFeasibleLine(f"the {name} point lies off the terrain's data (outside the cell centres or on "
                                 "nodata); move it onto the terrain", reason="nodata", closest=None)
    zs = _ground_at(terrain, sx, sy) + line.start_height_m
    ze = _ground_at(terrain, ex, ey) + line.end_height_m
    st = make_stencil(opts.neighbours)
    offs = np.ascontiguousarray(np.asarray(st.offsets, dtype=np.int64).reshape(-1, 2))
    near = np.zeros((rows, cols), dtype=np.uint8)
    rc, cc = int(re + 0.5), int(ce + 0.5)
    for dr, dc in [(0, 0)] + [(-a, -b) for a, b in offs]:
        if 0 <= rc + dr < rows and 0 <= cc + dc < cols:
            near[rc + dr, cc + dc] = 1
    g, mu, kd = float(mover.g), float(mover.mu), float(mover.drag)
    v2_0 = float(mover.v0) ** 2
    v2_stall = float(mover.stall_speed) ** 2
    v2_max = -1.0 if mover.max_speed is None else float(mover.max_speed) ** 2
    z_low = min(float(np.nanmin(np.where(free, z, np.nan))) + c_lo, ze)
    V2 = v2_0 + 2.0 * g * max(zs - z_low, 0.0)
    if kd > 0:  # the drive is at most g: above v² = g/k drag outweighs it (d(v²)/ds = 2a - 2kv² < 0)
        V2 = min(V2, max(v2_0, g / kd))
    if v2_max >= 0:
        V2 = min(V2, v2_max)
    vbound = math.sqrt(max(V2, 1e-12))
    e_tol = 1e-10 if opts.energy_tol is None else float(opts.energy_tol)
    max_labels = int(opts.max_labels) if opts.max_labels is not None else _MAX_LABELS
    gap = surface_gap(terrain, free)
    status, Lt, Lv, Ls, Lp, final, created, settled = _search(
        z, gap, free.ravel().astype(np.uint8), hs, offs, cell, np.array([rs, cs, zs]), np.array([re, ce, ze]),
        near.ravel(), float(c_lo), float(c_hi), CLEARANCE_TOL_M, g, mu, kd, v2_0, v2_stall, v2_max,
        float(limits.min_grade), float(limits.max_grade), vbound, bool(opts.heuristic), max_labels,
        int(opts.label_cap or 0), e_tol)
    if status == BUDGET:
        raise NoFeasibleLine(f"the raised-line search spent its label budget ({max_labels}); use fewer height "
                             "layers or a label cap (--label-cap)", reason="label_budget", closest=None)
    if status != OK:
        raise NoFeasibleLine(f"no raised line within the clearance band {c_lo:g}-{c_hi:g} m gets from start to end "
                             f"inside the {half:.0f} m corridor around the straight line ({len(hs)} height layers); "
                             "widen the band, change the end heights or lower the friction", reason="unreachable",
                             closest=None)
    chain = []
    i = int(Lp[final])
    while i >= 0:
        chain.append(int(Ls[i]))
        i = int(Lp[i])
    chain.reverse()
    L = len(hs)
    flat = np.array([s // L for s in chain], dtype=np.int64)
    kk = np.array([s % L for s in chain], dtype=np.int64)
    r, c = flat // cols, flat % cols
    x, y = terrain.cell_center(r, c)
    zc = z[r, c] + hs[kk]
    points = np.vstack([[sx, sy, zs], np.column_stack([np.asarray(x, float), np.asarray(y, float), zc]),
                        [ex, ey, ze]])
    profile = traverse(points, dataclasses.replace(mover, normal="gravity"))
    stats = {"labels_created": int(created), "labels_settled": int(settled), "exact": not opts.label_cap and mover.max_speed is None,
             "label_cap": opts.label_cap, "height_layers": int(L), "state_cells": active,
             "states": active * L, "corridor_m": float(half), "memory_estimate_bytes": int(need),
             "search_s": time.perf_counter() - t0, "exit_speed_m_s": float(math.sqrt(max(Lv[final], 0.0)))}
    for key, xy in (("start", (sx, sy)), ("end", (ex, ey))):
        stats[f"{key}_given_xy"] = [xy[0], xy[1]]
        stats[f"{key}_xy"] = [xy[0], xy[1]]
        stats[f"{key}_moved_m"] = 0.0
        stats[f"{key}_moved_why"] = None
    return LatticeLine(cells=np.column_stack([r, c]), points=points, profile=profile, time_s=float(Lt[final]),
                       stats=stats)
