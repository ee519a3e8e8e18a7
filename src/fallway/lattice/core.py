"""The compiled core shared by the lattice kernels (numba; flat arrays, status codes).

The ordinary search (:mod:`fallway.lattice.kernel`) and the robust search
(:mod:`fallway.lattice.robust`) differ in what a label carries and how labels dominate
each other; everything else is here, once:

* the binary heap of pool indices keyed by float64 (:func:`heap_push`, :func:`heap_pop`);
* the growable label pool (:func:`new_pool`, :func:`grow`, :func:`grow_rows`,
  :func:`push_label`): parallel arrays ``Lt`` (time), ``Le`` (one squared speed per
  friction case: a ``(capacity, ncase)`` array, so a label's energies share a cache
  line), ``Lnode`` (window flat index, int32), ``Lpar`` (parent pool index, int32), ``Lhd``
  (stencil offset of the last step, int8) and ``Laux`` (one integer whose meaning is the
  kernel's: the via-leg, int8, in the ordinary search; the next settled label of the same
  state, int32, in the robust one);
* the edge walk (:func:`passable`, :func:`sub_count`, :func:`sub_segment`, :func:`law_step`);
* the compact state index (:func:`state_of`) and the A* bound (:func:`astar_bound`);
* the status codes, the cell codes of the ``blocked`` array and the counter layout.

The edge walk
-------------
An edge from cell ``n`` along stencil offset ``kk`` is passable when no cell it touches
is blocked (:func:`passable` returns the code of the first blocked cell, 0 when free).
It is then walked sub-segment by sub-segment: it is split where it crosses the lines
joining cell centres (:mod:`fallway.lattice.stencil`; :func:`sub_count` pieces), and
:func:`sub_segment` gives each piece's geometry - the bilinear height at its end, drop,
plan and 3D length, and whether its grade lies in the window - as plain scalars.  Each
kernel applies the closed-form segment law (:func:`law_step`, on
:func:`fallway._segment.segment_law`) to that geometry, once per friction case: the
ordinary kernel once, the robust kernel at HI, LO and nominal friction on the same
piece.  The walk loop itself is four lines in each kernel::

    zprev = z[n]
    for i in range(sub_count(brk_start, kk)):
        zprev, drop, plan, length, ok = sub_segment(z, n, m, kk, i, zprev, ...)
        ... the kernel's law(s) on (drop, plan, length) ...

No callback and no per-case function object: the helpers are inlined into each kernel
(numba ``inline="always"``) and the geometry stays in registers.  A walk that wrote the
whole edge's geometry into scratch arrays for the law to read back was measured 36 %
slower on the frictionless reach of ``scripts/bench_search.py`` (0.77 s -> 1.05 s CPU,
one process, alternating), so the geometry is handed over one piece at a time.

Order of the checks, piece by piece: the grade window, then the law (stall, speed
limit); the first failure stops the edge and is the one counted.

Label pool
----------
The pool and the heap double when full.  A kernel makes room once per popped label, for
that label's whole expansion (at most one push per stencil offset), before it expands
it; the pushes then write without testing the capacity.  The arrays grow one by one in
the kernel's own body (``Lt = grow(Lt, cap)``, then the next), so during a doubling only
one old array is alive beside the new ones: a helper that took and returned the whole
pool kept every old array alive until it returned, which measured 12 MB (10 %) more
peak memory on the robust corridor case of ``scripts/bench_robust.py --memory 1000``.

Blocked cells
-------------
``blocked`` (uint8, one per window cell) is 0 for a searchable cell, else a set of bits:
:data:`NODATA`, :data:`KEEPOUT`, :data:`OUTSIDE` (outside the search domain, e.g. a
corridor).  The hot test reads it as a truth value; only when an edge is rejected do the
kernels look at the bits of the first blocked cell and count them
(:func:`count_blocked`).  The failure diagnosis of the front uses those counts: if no
edge was ever stopped by a keep-out cell, lifting the keep-out changes nothing (the
search would run exactly the same), so it need not be tried.

Virtual edges
-------------
An exact end point is joined to nearby cell centres by virtual edges
(:mod:`fallway.lattice.ends`) given as flat arrays: per edge a static blocked code, the
flat indices of the cells it touches, and its sub-segments' drops and plan lengths.
:func:`virtual_edge` tests its cells, walks it with the grade window and
:func:`law_step` as a stencil edge is walked, and counts a stopped edge in the same
counters, so the failure diagnosis sees it too.

Compact state
-------------
``cidx`` (int32, one per window cell) maps a searchable cell to its compact index
``0 .. nact - 1`` and a blocked cell to -1; per-state arrays have ``nact`` entries (per
leg and heading).  With nothing blocked (``nact == rows * cols``) the index is the flat
index and ``cidx`` is not read (:func:`state_of`).

Examples
--------
>>> import numpy as np
>>> hkey, hidx = np.empty(4), np.empty(4, dtype=np.int32)
>>> size = 0
>>> for key, idx in ((3.0, 0), (1.0, 1), (2.0, 2)):
...     size = heap_push(hkey, hidx, size, key, idx)
>>> top, size = heap_pop(hkey, hidx, size)
>>> int(top), size
(1, 2)
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .._segment import segment_law
from .._traverse import corner_v2, turn_angle

__all__ = ["OK", "NOT_REACHED", "LABEL_BUDGET", "NODATA", "KEEPOUT", "OUTSIDE", "LAW_OK", "LAW_STALL",
           "LAW_SPEED", "LAW_GRADE", "N_COUNTERS", "heap_push", "heap_pop", "grow", "grow_rows", "new_pool",
           "push_label", "passable", "count_blocked", "sub_count", "sub_segment", "law_step", "state_of",
           "astar_bound", "count_law", "heading_slot", "turn_deg", "virtual_passable", "virtual_walk",
           "virtual_edge", "corner_step", "edge_tail"]

# -- search status ------------------------------------------------------------------------
#: The last target was settled.
OK = 0
#: The queue ran empty before the last target was settled.
NOT_REACHED = 1
#: The label budget was spent first.
LABEL_BUDGET = 2

# -- bits of the ``blocked`` array ------------------------------------------------------------
#: No height at the cell.
NODATA = 1
#: The cell is in a keep-out area.
KEEPOUT = 2
#: The cell lies outside the search domain (``allowed`` False).
OUTSIDE = 4

# -- outcome of the segment law over an edge ---------------------------------------------------
LAW_OK = 0
#: The mover stalls (or, without friction and drag, cannot climb).
LAW_STALL = 1
#: The exit speed exceeds the limit.
LAW_SPEED = 2
#: A sub-segment lies outside the grade window.
LAW_GRADE = 3

# -- counters (index into the int64 array a kernel returns) ------------------------------------
C_CREATED = 0
C_SETTLED = 1
C_DOMINATED = 2
C_GRID = 3
C_BLOCKED = 4
C_GRADE = 5
C_STALL = 6  # the robust search: a stall at HI friction (or at nominal friction)
C_SPEED = 7  # the robust search: over the speed limit (or a stall) at LO friction
C_TURN = 8
C_UPHILL = 9
C_CAPPED = 10
C_CUTOFF = 11
C_NODATA = 12  # edges stopped by a nodata cell (the first blocked cell they touch)
C_KEEPOUT = 13  # ... by a keep-out cell
C_OUTSIDE = 14  # ... by a cell outside the search domain
N_COUNTERS = 15


@njit(cache=True, nogil=True)
def heap_push(hkey, hidx, size, key, idx):
    """Push ``idx`` under ``key`` onto the binary min-heap of ``size`` entries; returns the new size.

    The caller makes sure there is room (module notes, "Label pool").
    """
    i = size
    while i > 0:
        p = (i - 1) >> 1
        if hkey[p] <= key:
            break
        hkey[i] = hkey[p]
        hidx[i] = hidx[p]
        i = p
    hkey[i] = key
    hidx[i] = idx
    return size + 1


@njit(cache=True, nogil=True)
def heap_pop(hkey, hidx, size):
    """Remove the entry of least key; returns ``(idx, new size)`` (the heap must not be empty)."""
    top = hidx[0]
    size -= 1
    if size > 0:
        key = hkey[size]
        idx = hidx[size]
        i = 0
        while True:
            c = 2 * i + 1
            if c >= size:
                break
            if c + 1 < size and hkey[c + 1] < hkey[c]:
                c += 1
            if hkey[c] >= key:
                break
            hkey[i] = hkey[c]
            hidx[i] = hidx[c]
            i = c
        hkey[i] = key
        hidx[i] = idx
    return top, size


@njit(cache=True, nogil=True)
def grow(a, n):
    """A copy of the 1-D array ``a`` with room for ``n`` entries (the tail uninitialised)."""
    b = np.empty(n, dtype=a.dtype)
    b[: a.shape[0]] = a
    return b


@njit(cache=True, nogil=True)
def grow_rows(a, n):
    """A copy of the 2-D array ``a`` with room for ``n`` rows (the tail uninitialised)."""
    b = np.empty((n, a.shape[1]), dtype=a.dtype)
    b[: a.shape[0]] = a
    return b


@njit(cache=True, nogil=True)
def new_pool(cap, ncase, aux_like):
    """An empty label pool and heap of capacity ``cap``.

    Returns ``(Lt, Le, Lnode, Lpar, Lhd, Laux, hkey, hidx)``: ``Le`` has ``ncase``
    columns (one squared speed per friction case); ``Laux`` has the dtype of the array
    ``aux_like`` (the kernel's own per-label integer).
    """
    Lt = np.empty(cap, dtype=np.float64)
    Le = np.empty((cap, ncase), dtype=np.float64)
    Lnode = np.empty(cap, dtype=np.int32)
    Lpar = np.empty(cap, dtype=np.int32)
    Lhd = np.empty(cap, dtype=np.int8)
    Laux = np.empty(cap, dtype=aux_like.dtype)
    hkey = np.empty(cap, dtype=np.float64)
    hidx = np.empty(cap, dtype=np.int32)
    return Lt, Le, Lnode, Lpar, Lhd, Laux, hkey, hidx


@njit(cache=True, nogil=True)
def push_label(Lt, Lnode, Lpar, Lhd, Laux, hkey, hidx, q, hsize, t, node, parent, hd, aux, key):
    """Write label ``q`` (all but its energies, which the kernel writes into ``Le[q]``) and
    queue it under ``key``; returns the heap size.

    No capacity test: the kernel makes room before it expands a label (module notes).
    """
    Lt[q] = t
    Lnode[q] = node
    Lpar[q] = parent
    Lhd[q] = hd
    Laux[q] = aux
    return heap_push(hkey, hidx, hsize, key, q)


@njit(cache=True, nogil=True, inline="always")
def passable(blocked, n, kk, tch_start, tch_flat):
    """0 when no cell the edge from ``n`` along offset ``kk`` touches is blocked, else the
    code of the first blocked one (bits :data:`NODATA`, :data:`KEEPOUT`, :data:`OUTSIDE`).

    ``tch_flat`` holds flat index offsets from the edge's start cell (every touched cell
    lies in the edge's bounding box, inside the grid when both ends are).
    """
    for q in range(tch_start[kk], tch_start[kk + 1]):
        b = blocked[n + tch_flat[q]]
        if b:
            return b
    return 0


@njit(cache=True, nogil=True, inline="always")
def count_blocked(counters, code):
    """Count a blocked edge, and which kinds of cell stopped it (the bits of ``code``)."""
    counters[C_BLOCKED] += 1
    if code & NODATA:
        counters[C_NODATA] += 1
    if code & KEEPOUT:
        counters[C_KEEPOUT] += 1
    if code & OUTSIDE:
        counters[C_OUTSIDE] += 1


@njit(cache=True, nogil=True, inline="always")
def sub_count(brk_start, kk):
    """Number of sub-segments of edge ``kk`` (its break points + 1)."""
    return brk_start[kk + 1] - brk_start[kk] + 1


@njit(cache=True, nogil=True, inline="always")
def sub_segment(z, n, m, kk, i, zprev, brk_start, brk_fa, brk_fb, brk_w, sub_plan, min_grade, max_grade):
    """Sub-segment ``i`` of the edge from cell ``n`` to cell ``m`` along offset ``kk``.

    ``zprev`` is the height where the sub-segment starts (``z[n]`` for ``i = 0``, else
    the ``z_end`` of sub-segment ``i - 1``).  Returns ``(z_end, drop, plan, length,
    grade_ok)``: the height at its end (the bilinear height ``w z[a] + (1 - w) z[b]`` of
    a break point on the line joining centres ``a`` and ``b``, or ``z[m]``), its drop
    (positive falling), plan and 3D lengths in metres, and whether its grade
    ``drop / plan`` lies in ``[min_grade, max_grade]``.  ``brk_fa``/``brk_fb`` are flat
    index offsets from ``n``; the plan length is ``sub_plan[brk_start[kk] + kk + i]``.
    """
    q = brk_start[kk] + i
    if q < brk_start[kk + 1]:
        zq = brk_w[q] * z[n + brk_fa[q]] + (1.0 - brk_w[q]) * z[n + brk_fb[q]]
    else:
        zq = z[m]
    p = sub_plan[q + kk]
    d = zprev - zq
    grade = d / p
    ok = not (grade < min_grade or grade > max_grade)
    return zq, d, p, math.sqrt(p * p + d * d), ok


@njit(cache=True, nogil=True, inline="always")
def law_step(v2, drop, plan, length, g, mu, kdrag, v2_stall, v2_max):
    """The closed-form segment law on one sub-segment for one friction case.

    Returns ``(v2_out, time, outcome)``: ``outcome`` is :data:`LAW_OK`,
    :data:`LAW_STALL` (:func:`fallway._segment.segment_law` reports a stall) or
    :data:`LAW_SPEED` (the exit v² exceeds ``v2_max``; v² is monotone within a straight
    sub-segment, so its ends are its extremes).  On failure ``v2_out`` is the entry v².
    """
    v2o, dt, st = segment_law(v2, drop, plan, length, g, mu, kdrag, v2_stall)
    if st >= 0.0:
        return v2, dt, LAW_STALL
    if v2o > v2_max:
        return v2, dt, LAW_SPEED
    return v2o, dt, LAW_OK


@njit(cache=True, nogil=True, inline="always")
def count_law(counters, law, mu, kdrag):
    """Count an edge the law stopped: grade, stall (uphill without friction and drag) or speed."""
    if law == LAW_GRADE:
        counters[C_GRADE] += 1
    elif law == LAW_STALL:
        if mu == 0.0 and kdrag == 0.0:
            counters[C_UPHILL] += 1
        else:
            counters[C_STALL] += 1
    else:
        counters[C_SPEED] += 1


@njit(cache=True, nogil=True, inline="always")
def heading_slot(use_heading, hd, nk):
    """The dominance slot of a label's heading: 0 without a turn limit, and for a label with
    no stencil heading (the start, ``hd < 0``, or a step along a virtual start edge,
    ``hd >= nk``); else ``hd + 1``."""
    if not use_heading or hd < 0 or hd >= nk:
        return 0
    return hd + 1


@njit(cache=True, nogil=True, inline="always")
def turn_deg(a_deg, b_deg):
    """The plan turn, degrees in [0, 180], from heading ``a_deg`` to heading ``b_deg``."""
    return abs((b_deg - a_deg + 180.0) % 360.0 - 180.0)


@njit(cache=True, nogil=True, inline="always")
def virtual_passable(blocked, j, vcode, vtch_start, vtch):
    """0 when virtual edge ``j`` is free, else its blocked code: its own ``vcode[j]`` (e.g.
    :data:`NODATA` where the smooth surface is undefined along it) or the bits of the first
    blocked cell it touches (``vtch``: flat cell indices)."""
    code = vcode[j]
    if code:
        return code
    for q in range(vtch_start[j], vtch_start[j + 1]):
        b = blocked[vtch[q]]
        if b:
            return b
    return 0


@njit(cache=True, nogil=True, inline="always")
def virtual_walk(j, v2, vsub_start, vdrop, vplan, g, mu, kdrag, v2_stall, v2_max, min_grade, max_grade,
                 corners, ux, uy, ax, ay, az, plan_a):
    """Walk virtual edge ``j`` (an exact end point joined to a cell centre) sub-segment by
    sub-segment: the grade window, then the law, as on a stencil edge.

    With ``corners`` every vertex pays the corner law (:func:`corner_step`): the first
    from the incoming unit direction ``(ax, ay, az)`` (``plan_a`` its run; ``plan_a < 0``:
    none, the edge starts the line), the others between the edge's sub-segments;
    ``(ux, uy)`` is the edge's plan unit direction.
    Returns ``(v2_out, time, outcome)`` (outcome as :func:`law_step`, or :data:`LAW_GRADE`).
    """
    te = 0.0
    for q in range(vsub_start[j], vsub_start[j + 1]):
        d = vdrop[q]
        p = vplan[q]
        grade = d / p
        if grade < min_grade or grade > max_grade:
            return v2, te, LAW_GRADE
        length = math.sqrt(p * p + d * d)
        if corners:
            bx, by, bz = ux * p / length, uy * p / length, -d / length
            if plan_a >= 0.0:
                v2 = corner_step(v2, ax, ay, az, plan_a, bx, by, bz, p, mu, g)
            ax, ay, az, plan_a = bx, by, bz, p
        v2, dt, law = law_step(v2, d, p, length, g, mu, kdrag, v2_stall, v2_max)
        if law != LAW_OK:
            return v2, te, law
        te += dt
    return v2, te, LAW_OK


@njit(cache=True, nogil=True, inline="always")
def corner_step(v2, ax, ay, az, plan_a, bx, by, bz, plan_b, mu, g):
    """v² after the sharp corner from unit direction ``a`` to ``b`` (runs ``plan_a``,
    ``plan_b`` in plan, metres): the reporting model's corner law
    (:func:`fallway._traverse.corner_v2` of :func:`fallway._traverse.turn_angle`), so that a
    lattice line costs in the search what :func:`fallway.physics.traverse` charges it."""
    phi = turn_angle(ax, ay, az, bx, by, bz)
    if phi == 0.0:
        return v2
    return corner_v2(v2, phi, mu, g, plan_a, plan_b)


@njit(cache=True, nogil=True)
def edge_tail(z, n, hd, cols, off_dr, off_dc, ucos, usin, brk_start, brk_fa, brk_fb, brk_w, sub_plan):
    """The last sub-segment of stencil edge ``hd`` that ends at cell ``n``: its unit
    direction and plan length ``(ax, ay, az, plan)`` (the incoming side of the corner at
    ``n``; heights as :func:`sub_segment` reads them)."""
    p = n - (off_dr[hd] * cols + off_dc[hd])
    last = sub_count(brk_start, hd) - 1
    if last == 0:
        z0 = z[p]
    else:
        q = brk_start[hd] + last - 1
        z0 = brk_w[q] * z[p + brk_fa[q]] + (1.0 - brk_w[q]) * z[p + brk_fb[q]]
    plan = sub_plan[brk_start[hd] + last + hd]
    d = z0 - z[n]
    length = math.sqrt(plan * plan + d * d)
    return ucos[hd] * plan / length, usin[hd] * plan / length, -d / length, plan


@njit(cache=True, nogil=True, inline="always")
def virtual_edge(counters, blocked, j, v2, vcode, vtch_start, vtch, vsub_start, vdrop, vplan, g, mu, kdrag,
                 v2_stall, v2_max, min_grade, max_grade, corners, ux, uy, ax, ay, az, plan_a):
    """Virtual edge ``j`` from entry energy ``v2``: its cells (:func:`virtual_passable`), then
    its walk (:func:`virtual_walk`); a stopped edge is counted as a stencil edge is.

    Returns ``(v2_out, time, ok)``.
    """
    code = virtual_passable(blocked, j, vcode, vtch_start, vtch)
    if code:
        count_blocked(counters, code)
        return v2, 0.0, False
    v2o, te, law = virtual_walk(j, v2, vsub_start, vdrop, vplan, g, mu, kdrag, v2_stall, v2_max, min_grade,
                                max_grade, corners, ux, uy, ax, ay, az, plan_a)
    if law != LAW_OK:
        count_law(counters, law, mu, kdrag)
        return v2, te, False
    return v2o, te, True


@njit(cache=True, nogil=True, inline="always")
def state_of(cidx, ident, n):
    """Compact index of the searchable cell ``n`` (``n`` itself when nothing is blocked)."""
    return n if ident else cidx[n]


@njit(cache=True, nogil=True)
def astar_bound(node, leg, cols, cell, z, tgt_r, tgt_c, tgt_z, remaining, inv_v):
    """The A* bound: (straight 3D distance to the leg's target + the remaining legs) / V.

    ``inv_v`` = 1 / V, V an upper bound of the speed anywhere (0 turns the bound off).
    Admissible and consistent (proof in :mod:`fallway.lattice.kernel`).
    """
    if inv_v == 0.0:
        return 0.0
    r = node // cols
    c = node - r * cols
    dx = (c - tgt_c[leg]) * cell
    dy = (r - tgt_r[leg]) * cell
    dz = z[node] - tgt_z[leg]
    return (math.sqrt(dx * dx + dy * dy + dz * dz) + remaining[leg]) * inv_v
