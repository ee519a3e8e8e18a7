"""A per-cell A* bound for the point-to-point searches: two Dijkstra passes on the lattice.

The straight-line bound of :mod:`fallway.lattice.kernel` (3D distance over one global speed
bound V) is weak on long rough descents with drag: V is set by the steepest patch
anywhere, while a line mostly runs near its local terminal speed.  This module computes,
once per query, a tighter bound that is still admissible and consistent:

1. **Energy ceiling U(n)** (:func:`energy_ceiling`): an upper bound of v² at cell ``n``
   over every lattice line from the start.  It is a *post-fixpoint* of the segment law:
   ``U(start) >= v0²`` (or, with an exact start point, ``U(c) >= f_j(v0²)`` for the cell
   ``c`` of each virtual start edge ``j``) and ``U(m) >= f_e(U(n))`` for every edge
   ``e = n -> m``, where ``f_e`` is the walk of the edge's sub-segments by the segment law
   with no speed test and every sub-segment's exit v² clamped to the ceiling
   ``min(V_c², e_top - 2 g z)`` (the cap / drag bound and the energy balance; kernel notes,
   "A* bound"), and ``f_e = -inf`` when the law stalls or the grade window or a blocked
   cell rejects the edge.  Since ``f_e`` is monotone in its entry v² (gravity, Coulomb
   friction and drag; kernel notes, "Dominance"), induction over the nodes of any
   feasible line gives ``v² <= U`` at each of them.  The pass is a label-correcting search
   that pops cells in order of falling energy head ``U + 2 g z`` (the head never grows
   along an edge, so each cell is popped about once) and queues a cell again whenever its
   U rises; when the queue is empty every edge satisfies the inequality.  Stall, turn
   limits and via points are ignored (a superset of lines: still an upper bound).  The
   passes stall a mover only when it comes to rest (stall speed 0): that test is monotone
   in the entry v² (a higher entry never stops where a lower one gets through), while
   "decelerating below a positive stall speed" is not quite (with drag a fast entry
   may decelerate below it where a slow one accelerates); ignoring the stall speed
   only admits more lines.
   With the corner law (full normal model with a turn limit) a crest may *add* v²
   (:func:`fallway._traverse.corner_v2`), so the law is not propagated: U is the
   ceiling itself.
2. **Time to go H(n)** (:func:`time_to_go`): a backward Dijkstra from the leg's target with
   edge cost ``c(n -> m)`` = the time of the edge walked from entry ``U(n)`` with the same
   clamps, each sub-segment at least its 3D length over the ceiling speed at its lower
   end (the relaxed search's floor).  Any label at ``n`` has ``v² <= U(n)``, and the
   time of a straight sub-segment falls as its entry v² rises, so the label's edge time is
   at least ``c(n -> m)``; an edge whose walk stalls from ``U(n)`` stalls for every label
   (cost ``inf``).  A virtual end edge costs its walk from ``U`` likewise, and at least its
   3D length over V.  Hence ``H(n)`` (the least sum of costs to the target) is at most the
   time of any line from ``n`` to the target: **admissible**; and ``H(n) <= c(n -> m) +
   H(m) <=`` (the label's edge time) ``+ H(m)``: **consistent**, so keys never fall along a
   line and the first label settled at the target is optimal, exactly as with the
   straight bound.  Cells the backward pass does not reach have ``H = inf`` (no line from
   them reaches the target).
3. **Via legs**: leg ``i`` uses ``H_i + R_i`` with ``R_i = H_{i+1}(target_i) + R_{i+1}``,
   so at the switch from leg ``i`` to ``i + 1`` at via point ``i`` the bound is unchanged.
   U covers every leg (a line's prefix is a line from the start).

For the relaxed search (:mod:`fallway.lattice.gap`) the same holds with one addition: its
node energies are clamped to ``U`` as well (U bounds every true energy there, so step 3
of the relaxation proof keeps ``w² >= v²``), which keeps every relaxed label at or below
``U`` - the condition the consistency argument needs.

Rounding
--------
The passes decide stalls and grade at the very boundary a true line may touch (a line
that climbs back to the start's height with no energy left); the energies of U come
from another order of floating-point operations than a label's, so a bare U could sit an
ulp below a true energy and stall where the line does not.  Every energy the passes
carry is therefore raised by a slack (:data:`SLACK_REL` relative plus ``eps_abs``, 1e-9 of
the largest v², far above the accumulated rounding of a line and far below any physical
effect) at each sub-segment; so is the ceiling speed of the time floors.  Raising the
entry only lowers the time bounds and raises U: the argument above holds for the raised
values.  The slack could let energy creep up around a loop that loses less than it; the
ceiling clamp bounds U regardless, so the pass ends.

Cost: each pass walks every edge of every reached cell once (about the work of one
label per cell), and holds two float64 arrays per searchable cell (U, and H per leg) and an
indexed queue (decrease-key, so no stale entries: 20 B per cell).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .._segment import _TINY_KS
from .core import (LAW_OK, law_step, passable, state_of, sub_count, sub_segment,
                   virtual_passable)

__all__ = ["energy_ceiling", "time_to_go"]


#: Relative slack added to every energy the passes carry (module notes, "Rounding").
SLACK_REL = 1e-9


@njit(cache=True, nogil=True, inline="always")
def _up(v2, eps_abs):
    """``v2`` raised by the rounding slack (module notes, "Rounding")."""
    return v2 + SLACK_REL * abs(v2) + eps_abs


@njit(cache=True, nogil=True, inline="always")
def _clamp(v2, v2_ceil, e_top, two_g, zq):
    return min(v2, v2_ceil, max(e_top - two_g * zq, 0.0))


@njit(cache=True, nogil=True)
def _iheap_set(hkey, hnode, hcell, pos, size, key, n, cn):
    """Insert cell ``cn`` (flat ``n``) under ``key`` into the indexed min-heap, or lower its
    key when it is queued (``pos[cn] >= 0``); returns the heap size."""
    i = pos[cn]
    if i < 0:
        i = size
        size += 1
    while i > 0:
        p = (i - 1) >> 1
        if hkey[p] <= key:
            break
        hkey[i] = hkey[p]
        hnode[i] = hnode[p]
        hcell[i] = hcell[p]
        pos[hcell[i]] = i
        i = p
    hkey[i] = key
    hnode[i] = n
    hcell[i] = cn
    pos[cn] = i
    return size


@njit(cache=True, nogil=True)
def _iheap_pop(hkey, hnode, hcell, pos, size):
    """Remove the least key: ``(flat node, compact cell, new size)``."""
    n0 = hnode[0]
    c0 = hcell[0]
    pos[c0] = -1
    size -= 1
    if size > 0:
        key = hkey[size]
        n = hnode[size]
        cn = hcell[size]
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
            hnode[i] = hnode[c]
            hcell[i] = hcell[c]
            pos[hcell[i]] = i
            i = c
        hkey[i] = key
        hnode[i] = n
        hcell[i] = cn
        pos[cn] = i
    return n0, c0, size


@njit(cache=True, nogil=True, inline="always")
def _exit_v2(v2_in, drop, plan, s, g, mu, k, v2_stall):
    """The exit v² of :func:`fallway._segment.segment_law` (same formulas and stall test),
    without its time; ``-1`` when the mover stalls."""
    if s <= 0.0:
        return v2_in
    if v2_in < 0.0:
        v2_in = 0.0
    a = g * (drop - mu * plan) / s
    ks = k * s
    if ks >= _TINY_KS:
        v2_out = v2_in * math.exp(-2.0 * ks) - (a / k) * math.expm1(-2.0 * ks)
    else:
        v2_out = v2_in + 2.0 * a * s
    if v2_in <= 0.0 and a <= 0.0:
        return -1.0
    if v2_out < v2_in and v2_out < v2_stall:
        return -1.0
    return max(v2_out, 0.0)


@njit(cache=True, nogil=True)
def _ceiling_exit(z, n, m, kk, w, brk_start, brk_fa, brk_fb, brk_w, sub_plan, min_grade, max_grade,
                  g, mu, kdrag, v2_stall, v2_ceil, e_top, eps_abs):
    """The exit v² of :func:`_edge_exit` without the times (the energy pass); ``-1``
    when the edge is stopped."""
    two_g = 2.0 * g
    zprev = z[n]
    w = _up(w, eps_abs)
    for i in range(sub_count(brk_start, kk)):
        zprev, drop, plan, length, ok = sub_segment(z, n, m, kk, i, zprev, brk_start, brk_fa, brk_fb, brk_w,
                                                    sub_plan, min_grade, max_grade)
        if not ok:
            return -1.0
        w = _exit_v2(w, drop, plan, length, g, mu, kdrag, v2_stall)
        if w < 0.0:
            return -1.0
        w = _up(_clamp(w, v2_ceil, e_top, two_g, zprev), eps_abs)
    return w


@njit(cache=True, nogil=True)
def _edge_exit(z, n, m, kk, w, brk_start, brk_fa, brk_fb, brk_w, sub_plan, min_grade, max_grade,
               g, mu, kdrag, v2_stall, v2_ceil, e_top, eps_abs, law_on):
    """Walk stencil edge ``kk`` from ``n`` to ``m`` from entry v² ``w`` (clamped after each
    sub-segment); ``law_on`` False: the ceiling floors alone (the corner-law case).
    Returns ``(exit v², time lower bound, ok)``."""
    zprev = z[n]
    te = 0.0
    w = _up(w, eps_abs)
    for i in range(sub_count(brk_start, kk)):
        za = zprev
        zprev, drop, plan, length, ok = sub_segment(z, n, m, kk, i, zprev, brk_start, brk_fa, brk_fb, brk_w,
                                                    sub_plan, min_grade, max_grade)
        if not ok:
            return w, te, False
        w, dt, ok = _bound_step(w, za, zprev, drop, plan, length, g, mu, kdrag, v2_stall, v2_ceil, e_top, eps_abs,
                                law_on)
        if not ok:
            return w, te, False
        te += dt
    return w, te, True


@njit(cache=True, nogil=True, inline="always")
def _bound_step(w, za, zb, drop, plan, length, g, mu, kdrag, v2_stall, v2_ceil, e_top, eps_abs, law_on):
    """One sub-segment of an edge walk, from height ``za`` to ``zb``: the segment law from
    entry v² ``w`` (``law_on`` False: none, the ceiling alone), a time floor of its length
    over the ceiling speed, the exit clamped to the ceiling.  Returns ``(exit v², time
    lower bound, ok)``; ok False when the mover stalls or overspeeds."""
    two_g = 2.0 * g
    dt = 0.0
    if law_on:
        w, dt, law = law_step(w, drop, plan, length, g, mu, kdrag, v2_stall, math.inf)
        if law != LAW_OK:
            return w, dt, False
    else:
        w = math.inf
    hi = _up(min(v2_ceil, e_top - two_g * min(za, zb)), eps_abs)
    if hi > 0.0:
        dt = max(dt, length / math.sqrt(hi))
    return _up(_clamp(w, v2_ceil, e_top, two_g, zb), eps_abs), dt, True


@njit(cache=True, nogil=True)
def _virtual_exit(j, w, z0, vsub_start, vdrop, vplan, min_grade, max_grade, g, mu, kdrag, v2_stall, v2_ceil, e_top,
                  eps_abs, law_on):
    """Walk virtual edge ``j`` (starting at height ``z0``) from entry v² ``w``, as
    :func:`_edge_exit`.  Returns ``(exit v², time lower bound, ok)``."""
    zprev = z0
    te = 0.0
    w = _up(w, eps_abs)
    for q in range(vsub_start[j], vsub_start[j + 1]):
        d = vdrop[q]
        p = vplan[q]
        grade = d / p
        if grade < min_grade or grade > max_grade:
            return w, te, False
        za = zprev
        zprev = za - d
        w, dt, ok = _bound_step(w, za, zprev, d, p, math.sqrt(p * p + d * d), g, mu, kdrag, v2_stall, v2_ceil, e_top,
                                eps_abs, law_on)
        if not ok:
            return w, te, False
        te += dt
    return w, te, True


@njit(cache=True, nogil=True)
def energy_ceiling(z, blocked, cidx, nact, rows, cols, off_dr, off_dc, brk_start, brk_fa, brk_fb, brk_w, sub_plan,
                   tch_start, tch_flat, g, mu, kdrag, v2_stall, v2_ceil, min_grade, max_grade, e_top,
                   eps_abs, start, v2_start, z_start, nvs, vcell, vcode, vsub_start, vdrop, vplan, vtch_start, vtch,
                   propagate):
    """U: an upper bound of v² at every searchable cell (compact index) over every lattice
    line from the start (module notes, step 1); ``-inf`` where no line arrives.

    ``propagate`` False: U is the ceiling ``min(v2_ceil, e_top - 2 g z)`` everywhere (and
    ``v2_start`` at the start cell), no segment law (the corner-law case).
    """
    ncell = rows * cols
    ident = nact == ncell
    nk = off_dr.shape[0]
    two_g = 2.0 * g
    U = np.full(nact, -np.inf)
    if not propagate:
        for n in range(ncell):
            if blocked[n] == 0:
                U[state_of(cidx, ident, n)] = _up(_clamp(math.inf, v2_ceil, e_top, two_g, z[n]), eps_abs)
        if nvs == 0:
            cs = state_of(cidx, ident, start)
            U[cs] = max(U[cs], v2_start)
        return U
    hkey = np.empty(nact, dtype=np.float64)
    hnode = np.empty(nact, dtype=np.int32)
    hcell = np.empty(nact, dtype=np.int32)
    pos = np.full(nact, -1, dtype=np.int32)
    hsize = 0
    if nvs == 0:
        cs = state_of(cidx, ident, start)
        U[cs] = v2_start  # the start label is never clamped
        hsize = _iheap_set(hkey, hnode, hcell, pos, hsize, -(v2_start + two_g * z[start]), start, cs)
    else:
        for j in range(nvs):
            if virtual_passable(blocked, j, vcode, vtch_start, vtch):
                continue
            w, te, ok = _virtual_exit(j, v2_start, z_start, vsub_start, vdrop, vplan, min_grade, max_grade,
                                      g, mu, kdrag, v2_stall, v2_ceil, e_top, eps_abs, True)
            if not ok:
                continue
            m = vcell[j]
            cm = state_of(cidx, ident, m)
            if w > U[cm]:
                U[cm] = w
                hsize = _iheap_set(hkey, hnode, hcell, pos, hsize, -(w + two_g * z[m]), m, cm)
    while hsize > 0:
        n, cn, hsize = _iheap_pop(hkey, hnode, hcell, pos, hsize)
        w0 = U[cn]
        r = n // cols
        c = n - r * cols
        for kk in range(nk):
            r2 = r + off_dr[kk]
            c2 = c + off_dc[kk]
            if r2 < 0 or r2 >= rows or c2 < 0 or c2 >= cols:
                continue
            if passable(blocked, n, kk, tch_start, tch_flat):
                continue
            m = r2 * cols + c2
            w = _ceiling_exit(z, n, m, kk, w0, brk_start, brk_fa, brk_fb, brk_w, sub_plan, min_grade,
                              max_grade, g, mu, kdrag, v2_stall, v2_ceil, e_top, eps_abs)
            if w < 0.0:
                continue
            cm = state_of(cidx, ident, m)
            if w > U[cm]:
                U[cm] = w
                hsize = _iheap_set(hkey, hnode, hcell, pos, hsize, -(w + two_g * z[m]), m, cm)
    return U


@njit(cache=True, nogil=True)
def time_to_go(z, blocked, cidx, nact, rows, cols, off_dr, off_dc, brk_start, brk_fa, brk_fb, brk_w, sub_plan,
               tch_start, tch_flat, g, mu, kdrag, v2_stall, v2_ceil, min_grade, max_grade, e_top, eps_abs, U,
               target, rest_s, nvs, vcell, vcode, vsub_start, vdrop, vplan, vtch_start, vtch, inv_v, law_on, h):
    """Fill ``h`` (compact index, ``inf`` on entry) with ``rest_s`` + the least time from each
    cell to the target (module notes, step 2): the cell ``target``, or with ``target < 0``
    the end point through the virtual end edges ``nvs ..``.  ``law_on`` False: edge costs
    are the ceiling floors alone (the corner law may add v² at a crest inside an edge)."""
    ncell = rows * cols
    ident = nact == ncell
    nk = off_dr.shape[0]
    hkey = np.empty(nact, dtype=np.float64)
    hnode = np.empty(nact, dtype=np.int32)
    hcell = np.empty(nact, dtype=np.int32)
    pos = np.full(nact, -1, dtype=np.int32)
    hsize = 0
    if target >= 0:
        ct = state_of(cidx, ident, target)
        h[ct] = rest_s
        hsize = _iheap_set(hkey, hnode, hcell, pos, hsize, rest_s, target, ct)
    else:
        for j in range(nvs, vcell.shape[0]):
            if virtual_passable(blocked, j, vcode, vtch_start, vtch):
                continue
            n = vcell[j]
            cn = state_of(cidx, ident, n)
            if U[cn] == -np.inf:
                continue
            w, te, ok = _virtual_exit(j, U[cn], z[n], vsub_start, vdrop, vplan, min_grade, max_grade,
                                      g, mu, kdrag, v2_stall, v2_ceil, e_top, eps_abs, law_on)
            if not ok:
                continue
            s = 0.0
            for q in range(vsub_start[j], vsub_start[j + 1]):
                s += math.sqrt(vplan[q] * vplan[q] + vdrop[q] * vdrop[q])
            te = rest_s + max(te, s * inv_v)
            if te < h[cn]:
                h[cn] = te
                hsize = _iheap_set(hkey, hnode, hcell, pos, hsize, te, n, cn)
    while hsize > 0:
        m, cm, hsize = _iheap_pop(hkey, hnode, hcell, pos, hsize)
        hm = h[cm]
        r = m // cols
        c = m - r * cols
        for kk in range(nk):
            r0 = r - off_dr[kk]
            c0 = c - off_dc[kk]
            if r0 < 0 or r0 >= rows or c0 < 0 or c0 >= cols:
                continue
            n = r0 * cols + c0
            if blocked[n] or passable(blocked, n, kk, tch_start, tch_flat):
                continue
            cn = state_of(cidx, ident, n)
            w0 = U[cn]
            if w0 == -np.inf:
                continue
            w, te, ok = _edge_exit(z, n, m, kk, w0, brk_start, brk_fa, brk_fb, brk_w, sub_plan, min_grade,
                                   max_grade, g, mu, kdrag, v2_stall, v2_ceil, e_top, eps_abs, law_on)
            if not ok:
                continue
            cand = hm + te
            if cand < h[cn]:
                h[cn] = cand
                hsize = _iheap_set(hkey, hnode, hcell, pos, hsize, cand, n, cn)
    return h
