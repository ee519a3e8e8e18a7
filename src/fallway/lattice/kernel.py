"""The ordinary label-setting search on the terrain lattice (numba; flat arrays, status codes).

One kernel serves the reach map (no target), point-to-point queries and chains of via
points.  Nothing here raises or allocates Python objects per edge; the Python front
(:mod:`fallway.lattice.search`) validates the inputs and translates the status.  The
heap, the label pool, the edge walk and the compact index are the shared compiled core
(:mod:`fallway.lattice.core`); this module holds what is the ordinary search's own:
labels with one energy, the O(1) dominance test, via legs, the reach mode and the time
cut-off.

Labels
------
A label is (t, v², node, parent, leg, heading): arrival time, squared speed, the flat cell
index, the label it was extended from, the index of the via-leg it belongs to and the
stencil offset of the step that led to it (-1 at the start; used only with a turn
limit).  Labels live in the core's pool of parallel arrays that doubles when full (the
energy in ``Le[:, 0]``, the leg in the int8 ``Laux``); the binary heap holds pool indices
keyed by t (+ the A* bound).

Dominance: label 1 dominates label 2 at the same (leg, node [, heading]) when
``t1 <= t2`` and ``v2_1 >= v2_2 - tol``.  It is sound because on every segment the exit
speed rises and the time falls with the entry speed (gravity, Coulomb friction and drag
losses are monotone; so is the corner law, see "Corners"), so whatever label 2 can still
do, label 1 does no later.  Labels
settle at a state in order of t, so the settled Pareto set of a state is summarised by
its highest settled v² (``emax``): a label is dominated by a settled one exactly when
``emax >= v² - tol`` - an O(1) test, no per-cell lists.  Newcomers are also dropped when
the earliest label still queued at their state is no later and no slower.  ``tol``
(``tol_abs + tol_rel * v²``, the *declared* energy tolerance) stops floating-point noise
alone from keeping twin labels; it may drop a label better by less than ``tol`` in v².
With ``max_speed`` set dominance is no longer exact in principle (more speed can
overspeed later where less would not); overspeeding labels are pruned.

Corners
-------
With ``corners`` (the full normal-force model with a turn limit: the front's choice)
every vertex of a line pays the corner law of the reporting model
(:func:`fallway.lattice.core.corner_step`): at a popped label the incoming side is the
last sub-segment of the step that led to it (:func:`fallway.lattice.core.edge_tail`, or
of its virtual start edge), and each outgoing sub-segment turns from the one before.  The
corner's cost depends only on the two directions and their plan runs, and the incoming
direction is fixed by (node, heading) -- the dominance state -- so dominance stays exact
wherever the corner law is monotone in the entry v²: always at a sag or plan turn
(v² e^(-2 mu phi)); at a crest whose relief exceeds its cap (an enclosed line past
lift-off) the law ``u + 2 cap - gain`` still rises with u while ``mu |phi| < ln 2 / 2``.
The crest cap takes the adjoining sub-segments as the runs either side (the sharp-corner
reading takes the runs to the neighbouring corners): identical on rough ground, and on a
plane the lattice then charges a crest no less than the reading does.  The result: the
time of a lattice line equals :func:`fallway.physics.traverse` of its points (checked
against an independent sharp-corner reading and an exhaustive Pareto search in the tests).

A* bound
--------
Mechanical energy never grows along a line (friction and drag only remove it), so at any
point ``v² <= v0² + 2 g (z_start - z)`` <= ``V² = v0² + 2 g (z_start - z_min)``, and never
more than ``max_speed²`` when that is set.  Any line from node n to the target is at
least the straight 3D distance ``D(n)`` long, so its time is at least ``h(n) = D(n) / V``:
admissible.  Along an edge n->m of 3D length ``s`` (>= |D(n) - D(m)| by the triangle
inequality) the time is at least ``s / V``, so ``h(n) <= c(n, m) + h(m)``: consistent.
With drag the front also caps ``V²`` by ``max(v0², a_max / k)``: wherever v² exceeds
a/k drag outweighs the drive, d(v²)/ds = 2a - 2kv² < 0, so no line ever gets faster
than that (``a_max`` bounds the drive over every sub-segment; see the front).
The keys ``t + h`` therefore never fall along a line, labels settle in key order, and
the first label settled at the target is optimal (dominance only removes labels whose
every continuation is matched by the dominating label).  For via legs ``D`` adds the
straight distances of the remaining legs, which keeps both properties (at the switch
from leg i to i+1 at via point i the bound is unchanged).

Via points: a leg-i label settled at via point i is copied into leg i+1 (same t, v²,
heading), so the whole Pareto set of arrivals at a via point seeds the next leg, not just
the fastest one.

Compact state
-------------
The per-state arrays (``emax``, ``open_t``, ``open_v2``, ``nset``) and, in reach mode,
``best_t``/``best_v2`` hold one entry per *searchable* cell (× leg × heading), not per
cell of the window: ``cidx`` (int32, one per window cell) maps a cell to its compact
index, -1 where it is blocked (nodata, keep-out, outside a corridor).  A corridor a tenth
of its bounding window thus needs a tenth of the state.  The window-sized inputs are the
heights (float64), the blocked codes (uint8, read on the hot edge test because a byte
array is kinder to the cache than the int32 map) and ``cidx``.  Labels store the window
flat index of their node (int32) and their parent's pool index (int32); the heap holds
int32 pool indices.  A blocked cell is never the end of an edge (its touched cells
include both ends), so the compact index is only ever looked up for searchable cells.
The relabelling changes nothing else: the same labels are created, in the same order,
as with the full-window layout (``cidx`` = flat index; checked in the tests).  With
nothing blocked the compact index is the flat index: the kernel then skips the lookup
(``nact == rows * cols``) and the front passes a one-element dummy map.

Pushing a label is one helper, :func:`fallway.lattice.core.push_label` (write the pool
entry, queue it), with no capacity test: after each pop the kernel makes room for that
label's whole expansion (at most ``nk`` pushes, or one at a via point), growing the pool
and the heap array by array (:func:`fallway.lattice.core.grow`), so only one old array is
alive during a doubling and no array is returned on the hot path.

Float precision: all times, squared speeds and heap keys stay float64.  ``emax`` and
``open_v2`` are compared with a tolerance of ``1e-10`` relative (default), far below
float32 resolution (6e-8), and ``t`` accumulates over thousands of segments; in float32
the dominance tests and the times - so the answer - would change.  Saving is done by
sizing, not by precision.

Virtual end points
------------------
Exact end points (:mod:`fallway.lattice.ends`) enter as virtual edges, walked sub-segment
by sub-segment with the same grade window and segment law as stencil edges
(:func:`fallway.lattice.core.virtual_edge`).  The start point is a virtual source: the
search begins with one label per cell its edges reach (heading ``nk + j``, edge ``j``:
the turn limit from it is judged on the edge's own direction; its dominance slot is the
"no heading" one, which no stencil step uses).  The end point is a virtual node
(index ``rows * cols``): a label settled at a cell joined to it in the last leg pushes an
arrival there, keyed by its time (the A* bound is 0 at the end); the first arrival
popped is optimal, because the A* bound to the end point's exact position and height is
still a lower bound along a virtual edge (its 3D length is at least the straight
distance).  The front includes the virtual edges' heights and drives in the speed bound
V.  Only the earliest arrival so far is queued (an end has no continuation).

Time cut-off
------------
``t_max``: a label later than ``t_max`` is neither queued nor settled, so a reach stops
expanding at the cut-off.  The arrivals up to ``t_max`` are those of the uncut search:
time only grows along a line, so every label up to ``t_max`` descends from labels up to
``t_max``, and all of those pop before any later label (keys are times in reach mode);
the decrease-key test at a state sees the same earlier labels whenever one of them is
up to ``t_max``.  (Exact ties in time may be broken in another order; the times are the
same.)
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .core import (C_CAPPED, C_CREATED, C_CUTOFF, C_DOMINATED, C_GRID, C_SETTLED, C_TURN, LABEL_BUDGET, LAW_GRADE,
                   LAW_OK, N_COUNTERS, NOT_REACHED, OK, astar_bound, count_blocked, count_law, grow, grow_rows,
                   corner_step, edge_tail, heading_slot, heap_pop, law_step, new_pool, passable, push_label, state_of,
                   sub_count, sub_segment, turn_deg, virtual_edge)

__all__ = ["search", "OK", "NOT_REACHED", "LABEL_BUDGET"]


@njit(cache=True, nogil=True)
def search(z, blocked, cidx, nact, rows, cols, cell,
           off_dr, off_dc,
           brk_start, brk_fa, brk_fb, brk_w, sub_plan,
           tch_start, tch_flat,
           turn_ok, use_heading, corners,
           g, mu, kdrag, v2_stall, v2_max, min_grade, max_grade,
           start, v2_start, targets, remaining, inv_v,
           tol_abs, tol_rel, max_labels, init_cap, label_cap, t_max,
           sdir, max_turn, nvs, vcell, vdir, vcode, vsub_start, vdrop, vplan, vtch_start, vtch, end_rcz,
           v2_grid, e_top, v2_ceil, key_max, hgo, ucap):
    """Run the label-setting search.

    ``cidx`` (int32, one per cell of the window) is the compact index of each searchable
    cell (``0 .. nact - 1``) and -1 for a blocked one (``blocked`` nonzero: nodata,
    keep-out, outside the search domain); the per-state arrays have ``nact`` entries per
    leg and heading.  With ``nact == rows * cols`` (nothing blocked) the index is the
    flat index and ``cidx`` is not read (it may be a one-element dummy).
    ``targets`` empty: reach mode (every cell, no heuristic; ``best_t``/``best_v2`` are
    indexed by compact index).  Otherwise the legs end at ``targets[i]`` (flat
    indices) and the search stops at the first label settled at the last target.
    ``brk_fa``/``brk_fb``/``tch_flat`` are flat index offsets from the edge's start cell
    (valid because every referenced cell lies inside the edge's bounding box, which is
    inside the grid when both ends are); ``sub_plan`` the plan length of every
    sub-segment (:func:`fallway.lattice.core.sub_segment`).  The dominance tolerance on v²
    is ``tol_abs + tol_rel * v²``.  ``label_cap`` > 0 keeps at most that many settled
    labels per (leg, node[, heading]) - the earliest ones - and drops later arrivals (an
    approximation, counted in ``C_CAPPED``); 0 keeps the exact Pareto set.  Labels
    later than ``t_max`` are neither queued nor settled (``C_CUTOFF``; ``inf``: none).

    Exact end points ("Virtual end points" in the module notes): virtual edges
    ``0 .. nvs - 1`` join the start point to cells ``vcell[j]``, edges ``nvs ..`` join cells
    to the end point; ``vdir`` their plan headings (degrees, as ``sdir`` of the stencil
    offsets), ``vcode`` a static blocked code, ``vsub_start``/``vdrop``/``vplan`` their
    sub-segments, ``vtch_start``/``vtch`` the flat indices of the cells they touch.  With
    ``nvs == 0`` the search starts at cell ``start``; otherwise ``start`` is only the
    nearest cell (where ``closest`` starts).  With end edges the last leg ends at the
    virtual node ``rows * cols`` (``targets[-1]`` is then ignored) and ``end_rcz`` is the
    end point's fractional (row, col) and height, for the A* bound.  ``max_turn`` is the
    turn limit in degrees (used for virtual edges; ``turn_ok`` for stencil steps).
    ``corners`` (needs ``use_heading``): every vertex of a line pays the corner law of the
    reporting model ("Corners" in the module notes).

    ``v2_grid`` > 0 runs the *relaxed* search (module notes, "Relaxed search"): v² rounded
    up to multiples of ``v2_grid`` at every node and clamped to the energy ceiling
    ``min(v2_ceil, e_top - 2 g z)``, no overspeed test, every sub-segment at least its
    length over the ceiling speed at its lower end; its optimum is a lower bound of the
    exact lattice optimum.  Labels whose key exceeds ``key_max`` are not queued (a
    point-to-point search only; ``inf``: none).

    ``hgo`` (float64, ``nlegs * nact`` entries, or empty): the per-cell A* bound of
    :mod:`fallway.lattice.bound` (leg-major, compact index), used instead of the straight
    bound when given; ``ucap`` (``nact`` entries, or empty): its energy ceiling U, which
    also clamps the relaxed search's node energies.

    Returns
    -------
    status, final_label, n_labels, t, v2, node, parent, leg, best_t, best_v2,
    closest_node, counters
        ``v2`` is the pool's energy array ``Le`` (one column).
    """
    ncell = rows * cols
    nk = off_dr.shape[0]
    nlegs = targets.shape[0]
    reach_mode = nlegs == 0
    ident = nact == ncell  # nothing blocked: the compact index is the flat index
    nstate = nact if reach_mode else nact * nlegs
    nh = nk + 1 if use_heading else 1
    counters = np.zeros(N_COUNTERS, dtype=np.int64)
    relaxed = v2_grid > 0.0
    v2_lim = math.inf if relaxed else v2_max  # the relaxed search never rejects for speed
    two_g = 2.0 * g
    # plan unit directions of the stencil steps and the virtual edges (for the corner law)
    ucos = np.cos(np.radians(sdir))
    usin = np.sin(np.radians(sdir))
    vcos = np.cos(np.radians(vdir))
    vsin = np.sin(np.radians(vdir))

    nve = vcell.shape[0] - nvs
    vend = nve > 0 and not reach_mode  # the last leg ends at the virtual end node
    vnode = ncell
    tgt_r = np.empty(max(nlegs, 1), dtype=np.float64)
    tgt_c = np.empty(max(nlegs, 1), dtype=np.float64)
    tgt_z = np.empty(max(nlegs, 1), dtype=np.float64)
    for i in range(nlegs):
        tgt_r[i] = targets[i] // cols
        tgt_c[i] = targets[i] - tgt_r[i] * cols
        tgt_z[i] = z[targets[i]]
    if vend:
        tgt_r[nlegs - 1] = end_rcz[0]
        tgt_c[nlegs - 1] = end_rcz[1]
        tgt_z[nlegs - 1] = end_rcz[2]
    # cells joined to the end point lie within this box around the end's nearest cell
    er0 = 0
    ec0 = 0
    ebox = -1
    if vend:
        er0 = vcell[nvs] // cols
        ec0 = vcell[nvs] - er0 * cols
        for j in range(nvs, nvs + nve):
            ebox = max(ebox, abs(vcell[j] // cols - er0), abs(vcell[j] - (vcell[j] // cols) * cols - ec0))
    best_end_t = math.inf

    Lt, Le, Lnode, Lpar, Lhd, Lleg, hkey, hidx = new_pool(init_cap, 1, np.empty(0, dtype=np.int8))
    hsize = 0
    n_lab = 0
    # Highest v² settled so far per (leg, node[, heading]).  Labels settle at a node in
    # order of t (the heuristic is a function of the node), so every settled label is no
    # later than any label still to come there: a newcomer is dominated exactly when
    # this maximum reaches its v² (within the tolerance).  O(1) per label.
    emax = np.full(nstate * nh, -np.inf)
    # the earliest label still queued per state and its v²: a newcomer no earlier and no
    # faster is dominated by it (Dijkstra's decrease-key, generalised to two criteria)
    open_t = np.full(nstate * nh, np.inf)
    open_v2 = np.full(nstate * nh, -np.inf)
    capped = label_cap > 0
    nset = np.zeros(nstate * nh if capped else 1, dtype=np.int32)
    if reach_mode:
        best_t = np.full(nact, np.nan)
        best_v2 = np.full(nact, np.nan)
    else:
        best_t = np.full(1, np.nan)
        best_v2 = np.full(1, np.nan)

    if nvs == 0:
        key0 = 0.0
        if not reach_mode:
            key0 = bound_at(hgo, nact, state_of(cidx, ident, start), start, 0, cols, cell, z, tgt_r, tgt_c, tgt_z,
                            remaining, inv_v)
        Le[0, 0] = v2_start
        hsize = push_label(Lt, Lnode, Lpar, Lhd, Lleg, hkey, hidx, n_lab, hsize, 0.0, start, -1, -1, 0, key0)
        n_lab += 1
        counters[C_CREATED] = 1
    else:
        # the virtual start edges: one label per cell joined to the start point (distinct
        # cells, so none dominates another), heading nk + j (no stencil heading)
        if nvs + 1 > Lt.shape[0]:
            Lt = grow(Lt, 2 * nvs + 2)
            Le = grow_rows(Le, 2 * nvs + 2)
            Lnode = grow(Lnode, 2 * nvs + 2)
            Lpar = grow(Lpar, 2 * nvs + 2)
            Lhd = grow(Lhd, 2 * nvs + 2)
            Lleg = grow(Lleg, 2 * nvs + 2)
            hkey = grow(hkey, 2 * nvs + 2)
            hidx = grow(hidx, 2 * nvs + 2)
        for j in range(nvs):
            v2, te, ok = virtual_edge(counters, blocked, j, v2_start, vcode, vtch_start, vtch, vsub_start, vdrop,
                                      vplan, g, mu, kdrag, v2_stall, v2_lim, min_grade, max_grade,
                                      corners, vcos[j], vsin[j], 0.0, 0.0, 0.0, -1.0)
            if not ok:
                continue
            m = vcell[j]
            cm = state_of(cidx, ident, m)
            if relaxed:
                te = max(te, relaxed_floor_s(j, vsub_start, vdrop, vplan, inv_v))
                v2 = relaxed_node_v2(v2, v2_grid, v2_ceil, e_top - two_g * z[m])
                if ucap.shape[0] > 0:
                    v2 = min(v2, ucap[cm])
            if te > t_max:
                counters[C_CUTOFF] += 1
                continue
            key = te
            if not reach_mode:
                key += bound_at(hgo, nact, cm, m, 0, cols, cell, z, tgt_r, tgt_c, tgt_z, remaining, inv_v)
            if key > key_max:
                counters[C_CUTOFF] += 1
                continue
            Le[n_lab, 0] = v2
            hsize = push_label(Lt, Lnode, Lpar, Lhd, Lleg, hkey, hidx, n_lab, hsize, te, m, -1,
                               nk + j if use_heading else -1, 0, key)
            n_lab += 1
            counters[C_CREATED] += 1

    status = NOT_REACHED
    final = -1
    closest = start
    closest_leg = 0
    closest_d = math.inf

    while hsize > 0:
        if n_lab + nk + nve + 1 > Lt.shape[0]:  # room for this label's expansion: the pool grows
            cap = 2 * Lt.shape[0]         # array by array, so only one old array is alive at a time
            Lt = grow(Lt, cap)
            Le = grow_rows(Le, cap)
            Lnode = grow(Lnode, cap)
            Lpar = grow(Lpar, cap)
            Lhd = grow(Lhd, cap)
            Lleg = grow(Lleg, cap)
        if hsize + nk + nve + 1 > hkey.shape[0]:
            hcap = 2 * hkey.shape[0]
            hkey = grow(hkey, hcap)
            hidx = grow(hidx, hcap)
        li, hsize = heap_pop(hkey, hidx, hsize)
        n = Lnode[li]
        if n == vnode:  # the earliest arrival at the end point (its A* bound is 0)
            status = OK
            final = li
            break
        leg = Lleg[li]
        t0 = Lt[li]
        v20 = Le[li, 0]
        hd = Lhd[li]
        cn = state_of(cidx, ident, n)
        s = cn if reach_mode else leg * nact + cn
        slot = s * nh + heading_slot(use_heading, hd, nk)
        if emax[slot] >= v20 - (tol_abs + tol_rel * v20):
            counters[C_DOMINATED] += 1
            continue
        if capped:
            if nset[slot] >= label_cap:
                counters[C_CAPPED] += 1
                continue
            nset[slot] += 1
        emax[slot] = v20
        counters[C_SETTLED] += 1
        r = n // cols
        c = n - r * cols
        # the incoming side of the corner at n: the last sub-segment of the label's step
        ax = 0.0
        ay = 0.0
        az = 0.0
        pa = -1.0
        if corners and hd >= 0:
            if hd < nk:
                ax, ay, az, pa = edge_tail(z, n, hd, cols, off_dr, off_dc, ucos, usin, brk_start, brk_fa, brk_fb,
                                           brk_w, sub_plan)
            else:
                q = vsub_start[hd - nk + 1] - 1
                pa = vplan[q]
                ln = math.sqrt(pa * pa + vdrop[q] * vdrop[q])
                ax = vcos[hd - nk] * pa / ln
                ay = vsin[hd - nk] * pa / ln
                az = -vdrop[q] / ln

        if reach_mode:
            if math.isnan(best_t[cn]):
                best_t[cn] = t0
                best_v2[cn] = v20
        else:
            dr_ = r - tgt_r[leg]
            dc_ = c - tgt_c[leg]
            dd = math.sqrt(dr_ * dr_ + dc_ * dc_)
            if leg > closest_leg or (leg == closest_leg and dd < closest_d):
                closest_leg = leg
                closest_d = dd
                closest = n
            if vend and leg == nlegs - 1 and abs(r - er0) <= ebox and abs(c - ec0) <= ebox:
                # a cell joined to the end point: the virtual end edge, walked like any edge
                for j in range(nvs, nvs + nve):
                    if vcell[j] != n:
                        continue
                    if use_heading and hd >= 0:
                        if turn_deg(sdir[hd] if hd < nk else vdir[hd - nk], vdir[j]) > max_turn + 1e-9:
                            counters[C_TURN] += 1
                            continue
                    v2, te, ok = virtual_edge(counters, blocked, j, v20, vcode, vtch_start, vtch, vsub_start,
                                              vdrop, vplan, g, mu, kdrag, v2_stall, v2_lim, min_grade, max_grade,
                                              corners, vcos[j], vsin[j], ax, ay, az, pa)
                    if not ok:
                        continue
                    if relaxed:
                        te = max(te, relaxed_floor_s(j, vsub_start, vdrop, vplan, inv_v))
                    tn = t0 + te
                    if tn > key_max:
                        counters[C_CUTOFF] += 1
                        continue
                    if tn >= best_end_t:  # a later arrival at the end is of no use
                        counters[C_DOMINATED] += 1
                        continue
                    best_end_t = tn
                    Le[n_lab, 0] = v2
                    hsize = push_label(Lt, Lnode, Lpar, Lhd, Lleg, hkey, hidx, n_lab, hsize, tn, vnode, li, -1, leg,
                                       tn)
                    n_lab += 1
                    counters[C_CREATED] += 1
            if n == targets[leg] and not (vend and leg == nlegs - 1):
                if leg == nlegs - 1:
                    status = OK
                    final = li
                    break
                # switch legs: seed the next leg with this arrival (the whole Pareto
                # set at the via point passes through here, one label at a time)
                nleg = leg + 1
                s2 = ((nleg * nact + cn) * nh) + heading_slot(use_heading, hd, nk)
                if emax[s2] >= v20 - (tol_abs + tol_rel * v20):
                    counters[C_DOMINATED] += 1
                    continue
                key = t0 + bound_at(hgo, nact, cn, n, nleg, cols, cell, z, tgt_r, tgt_c, tgt_z, remaining, inv_v)
                Le[n_lab, 0] = v20
                hsize = push_label(Lt, Lnode, Lpar, Lhd, Lleg, hkey, hidx, n_lab, hsize, t0, n, li, hd, nleg, key)
                n_lab += 1
                counters[C_CREATED] += 1
                continue

        if n_lab >= max_labels:
            status = LABEL_BUDGET
            break

        zn = z[n]
        for kk in range(nk):
            if use_heading and hd >= 0:
                if (not turn_ok[hd, kk]) if hd < nk else turn_deg(vdir[hd - nk], sdir[kk]) > max_turn + 1e-9:
                    counters[C_TURN] += 1
                    continue
            r2 = r + off_dr[kk]
            c2 = c + off_dc[kk]
            if r2 < 0 or r2 >= rows or c2 < 0 or c2 >= cols:
                counters[C_GRID] += 1
                continue
            m = r2 * cols + c2
            code = passable(blocked, n, kk, tch_start, tch_flat)
            if code:
                count_blocked(counters, code)
                continue
            # walk the sub-segments of the edge (the core's walk), the law on each
            v2 = v20
            te = 0.0
            zprev = zn
            law = LAW_OK
            bx_, by_, bz_, pb_ = ax, ay, az, pa
            for i in range(sub_count(brk_start, kk)):
                za = zprev
                zprev, drop, plan, length, ok = sub_segment(z, n, m, kk, i, zprev, brk_start, brk_fa, brk_fb, brk_w,
                                                            sub_plan, min_grade, max_grade)
                if not ok:
                    law = LAW_GRADE
                    break
                if corners:
                    tx = ucos[kk] * plan / length
                    ty = usin[kk] * plan / length
                    tz = -drop / length
                    if pb_ >= 0.0:
                        v2 = corner_step(v2, bx_, by_, bz_, pb_, tx, ty, tz, plan, mu, g)
                    bx_, by_, bz_, pb_ = tx, ty, tz, plan
                v2, dt, law = law_step(v2, drop, plan, length, g, mu, kdrag, v2_stall, v2_lim)
                if law != LAW_OK:
                    break
                if relaxed:
                    # the ceiling at the sub-segment's lower end bounds the speed all along it
                    hi = min(v2_ceil, e_top - two_g * min(za, zprev))
                    if hi > 0.0:
                        dt = max(dt, length / math.sqrt(hi))
                    v2 = min(v2, v2_ceil, max(e_top - two_g * zprev, 0.0))
                te += dt
            if law != LAW_OK:
                count_law(counters, law, mu, kdrag)
                continue
            cm = state_of(cidx, ident, m)
            if relaxed:
                v2 = relaxed_node_v2(v2, v2_grid, v2_ceil, e_top - two_g * z[m])
                if ucap.shape[0] > 0:
                    v2 = min(v2, ucap[cm])
            tn = t0 + te
            if tn > t_max:
                counters[C_CUTOFF] += 1
                continue
            sm = (cm if reach_mode else leg * nact + cm) * nh + (kk + 1 if use_heading else 0)
            if emax[sm] >= v2 - (tol_abs + tol_rel * v2):
                counters[C_DOMINATED] += 1
                continue
            if capped and nset[sm] >= label_cap:
                counters[C_CAPPED] += 1
                continue
            if tn >= open_t[sm] and v2 <= open_v2[sm] + (tol_abs + tol_rel * v2):
                counters[C_DOMINATED] += 1
                continue
            if tn < open_t[sm]:
                open_t[sm] = tn
                open_v2[sm] = v2
            key = tn
            if not reach_mode:
                key += bound_at(hgo, nact, cm, m, leg, cols, cell, z, tgt_r, tgt_c, tgt_z, remaining, inv_v)
                if key > key_max:
                    counters[C_CUTOFF] += 1
                    continue
            Le[n_lab, 0] = v2
            hsize = push_label(Lt, Lnode, Lpar, Lhd, Lleg, hkey, hidx, n_lab, hsize, tn, m, li, kk, leg, key)
            n_lab += 1
            counters[C_CREATED] += 1

    return (status, final, n_lab, Lt, Le, Lnode, Lpar, Lleg, best_t, best_v2,
            closest, counters)


@njit(cache=True, nogil=True, inline="always")
def relaxed_node_v2(v2, v2_grid, v2_ceil, e_here):
    """The relaxed search's energy at a node: v² rounded UP to the grid, then clamped to
    the ceiling ``min(v2_ceil, e_here)`` (an upper bound of every true line's v² there)."""
    up = v2_grid * math.ceil(v2 / v2_grid)
    if up < v2:  # floating rounding of the product: never round down
        up = v2
    return min(up, v2_ceil, max(e_here, 0.0))


@njit(cache=True, nogil=True, inline="always")
def relaxed_floor_s(j, vsub_start, vdrop, vplan, inv_v):
    """The least time of virtual edge ``j`` at the speed bound V: its 3D length / V."""
    s = 0.0
    for q in range(vsub_start[j], vsub_start[j + 1]):
        s += math.sqrt(vplan[q] * vplan[q] + vdrop[q] * vdrop[q])
    return s * inv_v


@njit(cache=True, nogil=True, inline="always")
def bound_at(hgo, nact, cn, n, leg, cols, cell, z, tgt_r, tgt_c, tgt_z, remaining, inv_v):
    """The A* bound of a label of leg ``leg`` at cell ``n`` (compact index ``cn``): the
    per-cell bound ``hgo`` when given (:mod:`fallway.lattice.bound`), else the straight one."""
    if hgo.shape[0] > 0:
        return hgo[leg * nact + cn]
    return astar_bound(n, leg, cols, cell, z, tgt_r, tgt_c, tgt_z, remaining, inv_v)
