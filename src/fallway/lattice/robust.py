"""The robust search kernel: fastest line at nominal friction that works over a friction range.

This module is the compiled kernel (numba; flat arrays, status codes) and the LO-energy
floor it uses; the typed front is :func:`fallway.lattice.search.robust_lattice_line`
(also importable from here).  The heap, the label pool, the edge walk and the compact
index are the shared compiled core (:mod:`fallway.lattice.core`); the walk of an edge
is done once and the segment law applied to it at each of the three frictions.

Problem
-------
Given a friction range ``mu_lo <= mu <= mu_hi`` (``mu`` = ``mover.mu``, the nominal
value), find the lattice line from start to end with the least travel time at nominal
friction among the lines on which the mover

* gets through at ``mu_hi`` (never stalls: speed kept above ``mover.stall_speed``), and
* stays within ``mover.max_speed`` at ``mu_lo`` (when a speed limit is set),

with the grade window of :class:`~fallway.params.Limits` on every sub-segment and
keep-out / nodata cells impassable, exactly as in the ordinary search
(:mod:`fallway.lattice.kernel`: same stencil, same sub-segments with bilinear heights,
same gravity-normal segment law :func:`fallway._segment.segment_law`).

Labels
------
A label carries ``(t, v2_lo, v2_nom, v2_hi)``: the nominal arrival time and the squared
speed at each friction, all three on the *same* line.  An edge step applies the segment
law with each friction to each energy, sub-segment by sub-segment.  The step is
infeasible when the HI case stalls or the LO case exceeds ``max_speed²``.

Ordering of the three cases.  On one segment the exit v² falls as mu rises (the drive
``a = g (drop - mu plan) / length`` falls) and rises with the entry v² (the ODE
``d(v²)/ds = 2a - 2k v²`` has ordered solutions), so along any line
``v2_lo >= v2_nom >= v2_hi`` at every point.  Hence

* a line that does not stall at HI does not stall at nominal or LO friction (no stall
  check is needed there, though the kernel still rejects one for safety), and
* a line within the speed limit at LO is within it at nominal and HI friction: the
  speed limit is checked at LO only.  This matters for exactness: were the cap also
  applied to the nominal energy, "more nominal energy never hurts" would fail (it could
  overspeed later); checked only at LO it is implied for the nominal case anyway, and
  the nominal energy is left free of any upper bound.

Dominance.  At the same cell label A dominates label B when ``t_A <= t_B``,
``v2_nom_A >= v2_nom_B``, ``v2_hi_A >= v2_hi_B`` and ``v2_lo_A <= v2_lo_B``.  It is sound:
for any continuation of B that is feasible, the same continuation of A is feasible (more
energy at HI never makes the HI case stall - the exit v² is monotone in the entry v² and
the stall rule with it; less energy at LO never makes the LO case overspeed) and no
slower at nominal friction (time falls and exit energy rises with entry energy, and the
nominal case carries no constraint of its own).  Labels settle in order of nominal time
(Dijkstra order, no A* bound), so every settled label at a cell is no later than any
label still to come there; a label is dropped when a settled label at its cell dominates
it in the three energies (a linear scan of the cell's settled list).  The first label
settled at the end cell is the robust optimum.

LO energy that cannot matter.  Mechanical energy never grows along a line (friction and
drag only remove it), so from a cell at height ``z`` the LO speed can never exceed
``v2_lo + 2 g (z - z_min)`` (``z_min``: the lowest cell with data; break-point heights interpolate between centres, so none is lower).  A label for which that
stays within ``max_speed²`` - every label when no speed limit is set - can never
overspeed at LO, so its LO energy is ignored in the dominance test: it dominates on
``(t, v2_nom, v2_hi)`` alone.  Without a speed limit the search is therefore a
two-energy Pareto search.

Tolerance: energies within ``tol_abs + tol_rel * v²`` count as equal in the dominance
test (the declared tolerance, :data:`ROBUST_ENERGY_TOL` relative, default), so rounding
noise alone cannot multiply labels.  ``energy_tol=0`` gives the exact Pareto search.

Lattice walks: the search is over walks on the lattice (cells may repeat).  A walk that
returns to a cell has lost energy at every friction, which never pays without a speed
limit (the loop-free prefix dominates it) but can pay when the LO speed limit binds: a
loop sheds LO energy.  The tests found such optima on small random DEMs.  The result
says so in ``stats["simple"]`` (False when a cell repeats); a line that crosses itself
is rarely buildable, so callers should treat it as "no simple robust line found here".

Size: the Pareto set per cell is three-dimensional in energy, so it can be far larger
than the ordinary search's; the label budget (``SearchOptions.max_labels``) bounds the
work.

Compact state
-------------
As in the ordinary kernel (:mod:`fallway.lattice.kernel`, "Compact state"): the
per-state arrays - the head of each state's list of settled labels (int32), the settled
count under a label cap (int32) and ``lo_safe`` (float64) - and the LO floor's arrays
hold one entry per *searchable* cell (× heading), reached through the int32 map ``cidx``
(-1 where blocked; not read when nothing is blocked).  Labels store the window flat
index of their node, their parent and the next settled label of their state as int32;
the heap holds int32 pool indices.  The same labels are created in the same order as
with the full-window layout (checked in the tests).

Order of the checks on an edge, sub-segment by sub-segment: the grade window, then the
law at HI friction (stall), at LO friction (stall or over the limit), at nominal
friction; the first that fails is counted (``C_STALL`` for HI and nominal, ``C_SPEED``
for LO).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .core import (C_CAPPED, C_CREATED, C_DOMINATED, C_GRADE, C_GRID, C_SETTLED, C_SPEED, C_STALL, C_TURN,
                   LABEL_BUDGET, LAW_GRADE, LAW_OK, LAW_SPEED, LAW_STALL, N_COUNTERS, NOT_REACHED, OK, astar_bound,
                   count_blocked, grow, grow_rows, heap_pop, heap_push, law_step, new_pool, passable, push_label,
                   state_of, sub_count, sub_segment)

__all__ = ["robust_search", "lo_floor", "ROBUST_ENERGY_TOL"]

#: Declared dominance tolerance on each v², relative to the label's own v².
ROBUST_ENERGY_TOL = 1e-10

#: Columns of the label energies ``Le``: LO, nominal and HI friction.
E_LO = 0
E_NOM = 1
E_HI = 2


@njit(cache=True, nogil=True)
def _dominated(head, nxt, Le, slot, lo, nom, hi, lo_safe, tol_abs, tol_rel, slack):
    """True when a settled label at state ``slot`` dominates (lo, nom, hi) (times are ordered).

    A settled label with ``v2_lo <= lo_safe`` can never exceed the speed limit at LO from
    this cell on, so its LO energy is no handicap whatever the newcomer's.  ``slack``
    (0 for the exact search) lets a settled label up to that much worse in each v²
    count as dominating: the resolution of the approximate search.
    """
    q = head[slot]
    tl = tol_abs + tol_rel * lo + slack
    tn = tol_abs + tol_rel * nom + slack
    th = tol_abs + tol_rel * hi + slack
    lo_ok = max(lo + tl, lo_safe)
    while q >= 0:
        if Le[q, E_NOM] >= nom - tn and Le[q, E_HI] >= hi - th and Le[q, E_LO] <= lo_ok:
            return True
        q = nxt[q]
    return False


@njit(cache=True, nogil=True)
def lo_floor(z, blocked, cidx, nact, rows, cols, cell, off_dr, off_dc, off_plan,
             brk_start, brk_fa, brk_fb, brk_w, tch_start, tch_flat, mu_lo):
    """Per searchable cell n: a lower bound of ``z_p + mu_lo * (plan distance n -> p)`` over
    every point p a lattice line from n can pass (cell centres and sub-segment break points).

    ``zlow[a]`` is the lowest of cell a's height and the break-point heights of the edges
    leaving it; ``E[n] = min_a (zlow[a] + mu_lo * d(n, a))`` with ``d`` the shortest plan
    distance over the lattice's own passable edges (a multi-source Dijkstra started from
    every cell at ``zlow``).  A line from n to a break point q on an edge leaving a is at
    least ``d(n, a)`` long in plan, so its LO energy gain there is at most
    ``2 g (z_n - E[n])`` (Coulomb friction takes ``2 g mu_lo`` per metre of plan, drag
    only more).  Within a sub-segment v² is monotone, so the extremes are at its ends.

    Returns ``E`` indexed by compact index (``cidx``, ``nact``: as the kernels; with
    ``nact == rows * cols`` the flat index).
    """
    ncell = rows * cols
    ident = nact == ncell
    nk = off_dr.shape[0]
    E = np.full(nact, np.inf)
    for n in range(ncell):
        if blocked[n]:
            continue
        r = n // cols
        c = n - r * cols
        lo = z[n]
        for kk in range(nk):
            r2 = r + off_dr[kk]
            c2 = c + off_dc[kk]
            if r2 < 0 or r2 >= rows or c2 < 0 or c2 >= cols:
                continue
            if passable(blocked, n, kk, tch_start, tch_flat):
                continue
            for q in range(brk_start[kk], brk_start[kk + 1]):
                zq = brk_w[q] * z[n + brk_fa[q]] + (1.0 - brk_w[q]) * z[n + brk_fb[q]]
                if zq < lo:
                    lo = zq
        E[state_of(cidx, ident, n)] = lo
    # the heap holds window flat indices (int32) keyed by E
    hcap = max(nact, 16)
    hkey = np.empty(hcap, dtype=np.float64)
    hidx = np.empty(hcap, dtype=np.int32)
    hsize = 0
    for n in range(ncell):
        if not blocked[n]:
            hsize = heap_push(hkey, hidx, hsize, E[state_of(cidx, ident, n)], n)
    done = np.zeros(nact, dtype=np.bool_)
    while hsize > 0:
        key = hkey[0]
        a, hsize = heap_pop(hkey, hidx, hsize)
        ca_ = state_of(cidx, ident, a)
        if done[ca_] or key > E[ca_]:
            continue
        done[ca_] = True
        ra = a // cols
        ca = a - ra * cols
        for kk in range(nk):
            # the cells n with an edge n -> a along offset kk
            rn = ra - off_dr[kk]
            cn = ca - off_dc[kk]
            if rn < 0 or rn >= rows or cn < 0 or cn >= cols:
                continue
            n = rn * cols + cn
            if blocked[n]:
                continue
            sn = state_of(cidx, ident, n)
            if done[sn]:
                continue
            if passable(blocked, n, kk, tch_start, tch_flat):
                continue
            cand = E[ca_] + mu_lo * off_plan[kk] * cell
            if cand < E[sn]:
                E[sn] = cand
                if hsize >= hcap:
                    hcap *= 2
                    hkey = grow(hkey, hcap)
                    hidx = grow(hidx, hcap)
                hsize = heap_push(hkey, hidx, hsize, cand, n)
    return E


@njit(cache=True, nogil=True)
def robust_search(z, blocked, cidx, nact, rows, cols, cell,
                  off_dr, off_dc,
                  brk_start, brk_fa, brk_fb, brk_w, sub_plan,
                  tch_start, tch_flat, turn_ok, use_heading,
                  g, mu_lo, mu_nom, mu_hi, kdrag, v2_stall, v2_max, min_grade, max_grade,
                  start, v2_start, target, lo_safe, inv_v, tol_abs, tol_rel, max_labels, init_cap,
                  label_cap, slack):
    """Label-setting search with labels (t_nom, v2_lo, v2_nom, v2_hi) (module notes).

    ``cidx``/``nact``: the compact index of the searchable cells, as in
    :func:`fallway.lattice.kernel.search`; ``lo_safe`` is indexed by it: a label at cell
    n whose LO v² is at most ``lo_safe[cidx[n]]`` can never exceed the speed limit from
    there on (``inf`` without a limit).  ``inv_v``: 1 / (an upper bound of the nominal
    speed) for the A* bound (0 turns it off).  ``use_heading``: states are (cell, heading
    of the last step) and ``turn_ok[i, j]`` says whether step j may follow step i.
    ``label_cap`` > 0 keeps at most that many settled labels per state (the earliest;
    an approximation, counted in ``C_CAPPED``).  ``slack`` > 0: energies within that
    much (m²/s²) count as equal in dominance (approximate).

    Returns
    -------
    status, final, n_labels, t, e, node, parent, closest, counters
        ``e`` is the pool's energy array ``Le``, columns :data:`E_LO`, :data:`E_NOM`,
        :data:`E_HI`.
    """
    ncell = rows * cols
    ident = nact == ncell
    nk = off_dr.shape[0]
    nh = nk + 1 if use_heading else 1
    counters = np.zeros(N_COUNTERS, dtype=np.int64)
    Lt, Le, Lnode, Lpar, Lhd, Lnext, hkey, hidx = new_pool(init_cap, 3, np.empty(0, dtype=np.int32))
    head = np.full(nact * nh, -1, dtype=np.int32)
    capped = label_cap > 0
    nset = np.zeros(nact * nh if capped else 1, dtype=np.int32)
    hsize = 0
    tgt_r = np.full(1, target // cols, dtype=np.int64)
    tgt_c = np.full(1, target - tgt_r[0] * cols, dtype=np.int64)
    tgt_z = np.full(1, z[target])
    rest = np.zeros(1)

    Le[0, E_LO] = v2_start
    Le[0, E_NOM] = v2_start
    Le[0, E_HI] = v2_start
    hsize = push_label(Lt, Lnode, Lpar, Lhd, Lnext, hkey, hidx, 0, hsize, 0.0, start, -1, -1, -1, 0.0)
    n_lab = 1
    counters[C_CREATED] = 1
    status = NOT_REACHED
    final = -1
    closest = start
    closest_d = math.inf

    while hsize > 0:
        if n_lab + nk + 1 > Lt.shape[0]:  # room for this label's expansion: the pool grows
            cap = 2 * Lt.shape[0]         # array by array, so only one old array is alive at a time
            Lt = grow(Lt, cap)
            Le = grow_rows(Le, cap)
            Lnode = grow(Lnode, cap)
            Lpar = grow(Lpar, cap)
            Lhd = grow(Lhd, cap)
            Lnext = grow(Lnext, cap)
        if hsize + nk + 1 > hkey.shape[0]:
            hcap = 2 * hkey.shape[0]
            hkey = grow(hkey, hcap)
            hidx = grow(hidx, hcap)
        li, hsize = heap_pop(hkey, hidx, hsize)
        n = Lnode[li]
        t0 = Lt[li]
        lo0 = Le[li, E_LO]
        nom0 = Le[li, E_NOM]
        hi0 = Le[li, E_HI]
        hd = Lhd[li]
        cn = state_of(cidx, ident, n)
        slot = cn * nh + (hd + 1 if use_heading else 0)
        if _dominated(head, Lnext, Le, slot, lo0, nom0, hi0, lo_safe[cn], tol_abs, tol_rel, slack):
            counters[C_DOMINATED] += 1
            continue
        if capped:
            if nset[slot] >= label_cap:
                counters[C_CAPPED] += 1
                continue
            nset[slot] += 1
        Lnext[li] = head[slot]
        head[slot] = li
        counters[C_SETTLED] += 1
        r = n // cols
        c = n - r * cols
        dd = math.sqrt((r - tgt_r[0]) * (r - tgt_r[0]) + (c - tgt_c[0]) * (c - tgt_c[0]))
        if dd < closest_d:
            closest_d = dd
            closest = n
        if n == target:
            status = OK
            final = li
            break
        if n_lab >= max_labels:
            status = LABEL_BUDGET
            break
        zn = z[n]
        for kk in range(nk):
            if use_heading and hd >= 0 and not turn_ok[hd, kk]:
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
            # the core's walk; on each sub-segment the law at each friction: HI may not
            # stall, LO may not stall or overspeed, nominal gives the time
            vlo = lo0
            vnom = nom0
            vhi = hi0
            te = 0.0
            zprev = zn
            law = LAW_OK
            for i in range(sub_count(brk_start, kk)):
                zprev, drop, plan, length, ok = sub_segment(z, n, m, kk, i, zprev, brk_start, brk_fa, brk_fb, brk_w,
                                                            sub_plan, min_grade, max_grade)
                if not ok:
                    law = LAW_GRADE
                    break
                vhi, _dth, law = law_step(vhi, drop, plan, length, g, mu_hi, kdrag, v2_stall, math.inf)
                if law != LAW_OK:
                    break
                vlo, _dtl, law = law_step(vlo, drop, plan, length, g, mu_lo, kdrag, v2_stall, v2_max)
                if law != LAW_OK:
                    law = LAW_SPEED  # a stall at LO counts with the speed limit, as a LO failure
                    break
                vnom, dt, law = law_step(vnom, drop, plan, length, g, mu_nom, kdrag, v2_stall, math.inf)
                if law != LAW_OK:
                    law = LAW_STALL
                    break
                te += dt
            if law != LAW_OK:
                if law == LAW_GRADE:
                    counters[C_GRADE] += 1
                elif law == LAW_SPEED:
                    counters[C_SPEED] += 1
                else:
                    counters[C_STALL] += 1
                continue
            cm = state_of(cidx, ident, m)
            s2 = cm * nh + (kk + 1 if use_heading else 0)
            if _dominated(head, Lnext, Le, s2, vlo, vnom, vhi, lo_safe[cm], tol_abs, tol_rel, slack):
                counters[C_DOMINATED] += 1
                continue
            tn = t0 + te
            key = tn + astar_bound(m, 0, cols, cell, z, tgt_r, tgt_c, tgt_z, rest, inv_v)
            Le[n_lab, E_LO] = vlo
            Le[n_lab, E_NOM] = vnom
            Le[n_lab, E_HI] = vhi
            hsize = push_label(Lt, Lnode, Lpar, Lhd, Lnext, hkey, hidx, n_lab, hsize, tn, m, li, kk, -1, key)
            n_lab += 1
            counters[C_CREATED] += 1

    return (status, final, n_lab, Lt, Le, Lnode, Lpar, closest, counters)
