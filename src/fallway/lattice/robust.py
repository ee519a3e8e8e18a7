"""The exact robust search: fastest line at nominal friction that works over a friction range.

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
than the ordinary search's; ``max_labels`` bounds the work.
"""

from __future__ import annotations

import math
import time
from dataclasses import replace

import numpy as np
from numba import njit

from .._segment import segment_law
from ..errors import NoFeasibleLine, ParameterError
from ..params import Limits
from ..physics import Mover, check_mu_range, traverse
from .kernel import _grow_f8, _grow_i1, _grow_i4, _heap_pop, _heap_push
from .search import _cell_xy, _keepout_mask, _line_points, _Problem, _snap

__all__ = ["robust_lattice_line", "ROBUST_ENERGY_TOL"]

#: Declared dominance tolerance on each v², relative to the label's own v².
ROBUST_ENERGY_TOL = 1e-10

OK = 0
NOT_REACHED = 1
LABEL_BUDGET = 2

# counters
R_CREATED = 0
R_SETTLED = 1
R_DOMINATED = 2
R_BLOCKED = 3
R_GRADE = 4
R_STALL_HI = 5
R_SPEED_LO = 6
R_GRID = 7
R_TURN = 8
R_CAPPED = 9
N_R = 10

_INIT_CAP = 1 << 14
_DEFAULT_MAX_LABELS = 50_000_000


@njit(cache=True, nogil=True)
def _dominated(head, nxt, Llo, Lnom, Lhi, slot, lo, nom, hi, lo_safe, tol_abs, tol_rel, slack):
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
        if Lnom[q] >= nom - tn and Lhi[q] >= hi - th and Llo[q] <= lo_ok:
            return True
        q = nxt[q]
    return False


@njit(cache=True, nogil=True, inline="always")
def _passable(blocked, n, kk, tch_start, tch_flat):
    """True when no cell the edge from ``n`` along offset ``kk`` touches is blocked."""
    for q in range(tch_start[kk], tch_start[kk + 1]):
        if blocked[n + tch_flat[q]]:
            return False
    return True


@njit(cache=True, nogil=True)
def lo_floor(z, blocked, rows, cols, cell, off_dr, off_dc, off_plan,
             brk_start, brk_fa, brk_fb, brk_w, tch_start, tch_flat, mu_lo):
    """Per cell n: a lower bound of ``z_p + mu_lo * (plan distance n -> p)`` over every point p
    a lattice line from n can pass (cell centres and sub-segment break points).

    ``zlow[a]`` is the lowest of cell a's height and the break-point heights of the edges
    leaving it; ``E[n] = min_a (zlow[a] + mu_lo * d(n, a))`` with ``d`` the shortest plan
    distance over the lattice's own passable edges (a multi-source Dijkstra started from
    every cell at ``zlow``).  A line from n to a break point q on an edge leaving a is at
    least ``d(n, a)`` long in plan, so its LO energy gain there is at most
    ``2 g (z_n - E[n])`` (Coulomb friction takes ``2 g mu_lo`` per metre of plan, drag
    only more).  Within a sub-segment v² is monotone, so the extremes are at its ends.
    Blocked cells get ``inf``.
    """
    ncell = rows * cols
    nk = off_dr.shape[0]
    E = np.full(ncell, np.inf)
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
            if not _passable(blocked, n, kk, tch_start, tch_flat):
                continue
            for q in range(brk_start[kk], brk_start[kk + 1]):
                zq = brk_w[q] * z[n + brk_fa[q]] + (1.0 - brk_w[q]) * z[n + brk_fb[q]]
                if zq < lo:
                    lo = zq
        E[n] = lo
    hcap = max(ncell, 16)
    hkey = np.empty(hcap, dtype=np.float64)
    hidx = np.empty(hcap, dtype=np.int32)
    hsize = 0
    for n in range(ncell):
        if E[n] < np.inf:
            hsize = _heap_push(hkey, hidx, hsize, E[n], n)
    done = np.zeros(ncell, dtype=np.bool_)
    while hsize > 0:
        key = hkey[0]
        a, hsize = _heap_pop(hkey, hidx, hsize)
        if done[a] or key > E[a]:
            continue
        done[a] = True
        ra = a // cols
        ca = a - ra * cols
        for kk in range(nk):
            # the cells n with an edge n -> a along offset kk
            rn = ra - off_dr[kk]
            cn = ca - off_dc[kk]
            if rn < 0 or rn >= rows or cn < 0 or cn >= cols:
                continue
            n = rn * cols + cn
            if blocked[n] or done[n]:
                continue
            if not _passable(blocked, n, kk, tch_start, tch_flat):
                continue
            cand = E[a] + mu_lo * off_plan[kk] * cell
            if cand < E[n]:
                E[n] = cand
                if hsize >= hcap:
                    hcap *= 2
                    hkey = _grow_f8(hkey, hcap)
                    hidx = _grow_i4(hidx, hcap)
                hsize = _heap_push(hkey, hidx, hsize, cand, n)
    return E


@njit(cache=True, nogil=True)
def robust_search(z, blocked, rows, cols, cell,
                  off_dr, off_dc, off_plan,
                  brk_start, brk_u, brk_fa, brk_fb, brk_w,
                  tch_start, tch_flat, turn_ok, use_heading,
                  g, mu_lo, mu_nom, mu_hi, kdrag, v2_stall, v2_max, min_grade, max_grade,
                  start, v2_start, target, lo_safe, inv_v, tol_abs, tol_rel, max_labels, init_cap,
                  max_per_cell, slack):
    """Label-setting search with labels (t_nom, v2_lo, v2_nom, v2_hi) (module notes).

    ``lo_safe[n]``: a label at cell n whose LO v² is at most this can never exceed the
    speed limit from there on (``inf`` without a limit).  ``inv_v``: 1 / (an upper bound
    of the nominal speed) for the A* bound (0 turns it off).  ``use_heading``: states
    are (cell, heading of the last step) and ``turn_ok[i, j]`` says whether step j may
    follow step i.  ``max_per_cell`` > 0 keeps at most that many settled labels per
    state (the earliest; an approximation, counted in ``R_CAPPED``).  ``slack`` > 0: energies
    within that much (m²/s²) count as equal in dominance (approximate).

    Returns
    -------
    status, final, n_labels, t, v2_lo, v2_nom, v2_hi, node, parent, closest, counters
    """
    ncell = rows * cols
    nk = off_dr.shape[0]
    nh = nk + 1 if use_heading else 1
    counters = np.zeros(N_R, dtype=np.int64)
    cap = init_cap
    Lt = np.empty(cap, dtype=np.float64)
    Llo = np.empty(cap, dtype=np.float64)
    Lnom = np.empty(cap, dtype=np.float64)
    Lhi = np.empty(cap, dtype=np.float64)
    Lnode = np.empty(cap, dtype=np.int32)
    Lpar = np.empty(cap, dtype=np.int32)
    Lnext = np.empty(cap, dtype=np.int32)
    Lhd = np.empty(cap, dtype=np.int8)
    head = np.full(ncell * nh, -1, dtype=np.int32)
    capped = max_per_cell > 0
    nset = np.zeros(ncell * nh if capped else 1, dtype=np.int32)
    hcap = init_cap
    hkey = np.empty(hcap, dtype=np.float64)
    hidx = np.empty(hcap, dtype=np.int32)
    hsize = 0
    tr = target // cols
    tc = target - tr * cols
    tz = z[target]

    Lt[0] = 0.0
    Llo[0] = v2_start
    Lnom[0] = v2_start
    Lhi[0] = v2_start
    Lnode[0] = start
    Lpar[0] = -1
    Lnext[0] = -1
    Lhd[0] = -1
    n_lab = 1
    counters[R_CREATED] = 1
    hsize = _heap_push(hkey, hidx, hsize, 0.0, 0)
    status = NOT_REACHED
    final = -1
    closest = start
    closest_d = math.inf

    while hsize > 0:
        li, hsize = _heap_pop(hkey, hidx, hsize)
        n = Lnode[li]
        t0 = Lt[li]
        lo0 = Llo[li]
        nom0 = Lnom[li]
        hi0 = Lhi[li]
        hd = Lhd[li]
        slot = n * nh + (hd + 1 if use_heading else 0)
        if _dominated(head, Lnext, Llo, Lnom, Lhi, slot, lo0, nom0, hi0, lo_safe[n], tol_abs, tol_rel, slack):
            counters[R_DOMINATED] += 1
            continue
        if capped:
            if nset[slot] >= max_per_cell:
                counters[R_CAPPED] += 1
                continue
            nset[slot] += 1
        Lnext[li] = head[slot]
        head[slot] = li
        counters[R_SETTLED] += 1
        r = n // cols
        c = n - r * cols
        dd = math.sqrt((r - tr) * (r - tr) + (c - tc) * (c - tc))
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
                counters[R_TURN] += 1
                continue
            r2 = r + off_dr[kk]
            c2 = c + off_dc[kk]
            if r2 < 0 or r2 >= rows or c2 < 0 or c2 >= cols:
                counters[R_GRID] += 1
                continue
            m = r2 * cols + c2
            if not _passable(blocked, n, kk, tch_start, tch_flat):
                counters[R_BLOCKED] += 1
                continue
            vlo = lo0
            vnom = nom0
            vhi = hi0
            te = 0.0
            zprev = zn
            uprev = 0.0
            plan_k = off_plan[kk] * cell
            ok = True
            b0 = brk_start[kk]
            b1 = brk_start[kk + 1]
            for q in range(b0, b1 + 1):
                if q < b1:
                    zq = brk_w[q] * z[n + brk_fa[q]] + (1.0 - brk_w[q]) * z[n + brk_fb[q]]
                    uq = brk_u[q]
                else:
                    zq = z[m]
                    uq = 1.0
                plan = (uq - uprev) * plan_k
                drop = zprev - zq
                grade = drop / plan
                if grade < min_grade or grade > max_grade:
                    counters[R_GRADE] += 1
                    ok = False
                    break
                length = math.sqrt(plan * plan + drop * drop)
                h2, _dth, sth = segment_law(vhi, drop, plan, length, g, mu_hi, kdrag, v2_stall)
                if sth >= 0.0:
                    counters[R_STALL_HI] += 1
                    ok = False
                    break
                l2, _dtl, stl = segment_law(vlo, drop, plan, length, g, mu_lo, kdrag, v2_stall)
                if stl >= 0.0 or l2 > v2_max:
                    counters[R_SPEED_LO] += 1
                    ok = False
                    break
                n2, dt, stn = segment_law(vnom, drop, plan, length, g, mu_nom, kdrag, v2_stall)
                if stn >= 0.0:
                    counters[R_STALL_HI] += 1
                    ok = False
                    break
                vlo = l2
                vnom = n2
                vhi = h2
                te += dt
                zprev = zq
                uprev = uq
            if not ok:
                continue
            s2 = m * nh + (kk + 1 if use_heading else 0)
            if _dominated(head, Lnext, Llo, Lnom, Lhi, s2, vlo, vnom, vhi, lo_safe[m], tol_abs, tol_rel, slack):
                counters[R_DOMINATED] += 1
                continue
            if n_lab >= cap:
                cap *= 2
                Lt = _grow_f8(Lt, cap)
                Llo = _grow_f8(Llo, cap)
                Lnom = _grow_f8(Lnom, cap)
                Lhi = _grow_f8(Lhi, cap)
                Lnode = _grow_i4(Lnode, cap)
                Lpar = _grow_i4(Lpar, cap)
                Lnext = _grow_i4(Lnext, cap)
                Lhd = _grow_i1(Lhd, cap)
            q = n_lab
            n_lab += 1
            counters[R_CREATED] += 1
            tn = t0 + te
            Lt[q] = tn
            Llo[q] = vlo
            Lnom[q] = vnom
            Lhi[q] = vhi
            Lnode[q] = m
            Lpar[q] = li
            Lnext[q] = -1
            Lhd[q] = kk
            key = tn
            if inv_v > 0.0:
                dx = (c2 - tc) * cell
                dy = (r2 - tr) * cell
                dz = z[m] - tz
                key = tn + math.sqrt(dx * dx + dy * dy + dz * dz) * inv_v
            if hsize >= hcap:
                hcap *= 2
                hkey = _grow_f8(hkey, hcap)
                hidx = _grow_i4(hidx, hcap)
            hsize = _heap_push(hkey, hidx, hsize, key, q)

    return (status, final, n_lab, Lt, Llo, Lnom, Lhi, Lnode, Lpar, closest, counters)


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


def robust_lattice_line(terrain, start, end, mover: Mover, mu_lo: float, mu_hi: float, *, limits=None, keepout=None,
                        allowed=None, options=None, resolution: float = 0.0):
    from ..params import SearchOptions
    o = SearchOptions() if options is None else options
    return _robust_old(terrain, start, end, mover, mu_lo, mu_hi, neighbours=o.neighbours, limits=limits,
                       keepout=keepout, max_labels=o.max_labels, energy_tol=o.energy_tol, max_per_cell=o.label_cap,
                       heuristic=o.heuristic, resolution=resolution)


def _robust_old(terrain, start, end, mover: Mover, mu_lo: float, mu_hi: float, *,
                        neighbours: int = 16, limits: Limits | None = None, keepout=None,
                        max_labels: int | None = None, energy_tol: float | None = None,
                        max_per_cell: int | None = None, heuristic: bool = True,
                        resolution: float = 0.0):
    """The exact robust lattice line: fastest at nominal friction, feasible over [mu_lo, mu_hi].

    Among lattice lines from ``start`` to ``end`` that do not stall at ``mu_hi`` and stay
    within ``mover.max_speed`` at ``mu_lo``, the one with the least travel time at
    ``mover.mu`` (method: module notes).

    Parameters
    ----------
    terrain : Terrain
    start, end : (x, y)
        Map coordinates; they snap to the nearest cell centre.
    mover : Mover
        Nominal physics (gravity-normal model on the lattice); ``mu_lo <= mover.mu <= mu_hi``.
    mu_lo, mu_hi : float
        The friction range.
    neighbours : {8, 16, 32}
    limits : Limits, optional
        Grade window per sub-segment and turn limit between steps (as the ordinary
        search: the state is then the cell and the heading of the last step).
    keepout : Keepout or bool array, optional
    max_labels : int, optional
        Stop with :class:`NoFeasibleLine` after creating this many labels.
    energy_tol : float, optional
        Dominance tolerance relative to each v² (default :data:`ROBUST_ENERGY_TOL`).
    max_per_cell : int, optional
        Keep at most this many settled labels per state (the earliest): faster, no
        longer exact (``stats["exact"]`` False).  Default: the exact Pareto search.
    heuristic : bool
        Order the search by the A* bound (module notes); False: plain Dijkstra order.
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
        ``exit_speed_lo_m_s``, ``exit_speed_m_s``, ``exit_speed_hi_m_s`` and label counts.

    Raises
    ------
    NoFeasibleLine
        When no lattice line works over the whole range (``reason`` "stall" or
        "limits", or "unreachable").

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> z = -0.5 * np.add.outer(np.arange(5.0), np.arange(5.0))
    >>> t = Terrain.from_array(z, (1.0, 0, 0, 0, -1.0, 5.0))
    >>> ln = robust_lattice_line(t, (0.5, 4.5), (4.5, 0.5), Mover(mu=0.1), 0.05, 0.2, neighbours=8)
    >>> ln.cells[[0, -1]].tolist()
    [[0, 0], [4, 4]]
    """
    from ..results import LatticeLine

    if not isinstance(mover, Mover):
        raise ParameterError(f"mover must be a fallway.Mover, got {type(mover).__name__}")
    lo, hi = check_mu_range(mover, mu_lo, mu_hi)
    limits = Limits() if limits is None else limits
    keep = _keepout_mask(terrain, keepout)
    s = _snap(terrain, start, "start")
    e = _snap(terrain, end, "end")
    for flat, name in ((s, "start"), (e, "end")):
        if keep.ravel()[flat]:
            xy = _cell_xy(terrain, flat)
            raise NoFeasibleLine(f"{name} ({xy[0]:.1f}, {xy[1]:.1f}) lies in a keep-out area; move it out",
                                 reason="keepout", closest=None)
    if s == e:
        raise ParameterError("start and end snap to the same cell; give points at least one cell apart")
    prob = _Problem(terrain, mover, neighbours, limits, keep)
    v2_start = mover.v0 * mover.v0
    _check_end_window(mover, lo, hi, v2_start, float(prob.z[s] - prob.z[e]), prob.v2_max)
    v2_scale = v2_start + 2.0 * mover.g * max(prob.z[s] - prob.zmin, 0.0)
    tol_rel = ROBUST_ENERGY_TOL if energy_tol is None else float(energy_tol)
    if not (tol_rel >= 0.0 and math.isfinite(tol_rel)):
        raise ParameterError(f"energy_tol must be a finite number >= 0, got {energy_tol!r}")
    tol_abs = 1e-12 * max(v2_scale, 1e-300) if tol_rel > 0.0 else 0.0
    budget = _DEFAULT_MAX_LABELS if max_labels is None else int(max_labels)
    cap = 0 if max_per_cell is None else int(max_per_cell)
    if cap < 0:
        raise ParameterError(f"max_per_cell must be a positive number of labels, got {max_per_cell!r}")
    if not (math.isfinite(resolution) and resolution >= 0.0):
        raise ParameterError(f"resolution must be a fraction >= 0, got {resolution!r}")
    t0 = time.perf_counter()
    g = mover.g
    if math.isfinite(prob.v2_max):
        floor = lo_floor(prob.z, prob.blocked, prob.rows, prob.cols, prob.cell, prob.off_dr, prob.off_dc,
                         prob.off_plan, prob.brk_start, prob.brk_fa, prob.brk_fb, prob.brk_w,
                         prob.tch_start, prob.tch_flat, lo)
        lo_safe = prob.v2_max - 2.0 * g * (prob.z - floor)
    else:
        lo_safe = np.full(prob.z.shape, np.inf)
    # A* bound: the nominal speed never exceeds the LO speed (<= the cap), nor what the
    # drop from the start allows, nor (with drag) the terminal bound of the ordinary search
    v2_bound = v2_scale
    if mover.drag > 0.0:
        a_max = prob.a_max(mover)
        v2_bound = min(v2_bound, max(v2_start, a_max / mover.drag) if a_max > 0.0 else v2_start)
    v2_bound = min(v2_bound, prob.v2_max)
    inv_v = 1.0 / math.sqrt(v2_bound) if (heuristic and v2_bound > 0.0) else 0.0
    slack = float(resolution) * (prob.v2_max if math.isfinite(prob.v2_max) else v2_bound)
    out = robust_search(prob.z, prob.blocked, prob.rows, prob.cols, prob.cell,
                        prob.off_dr, prob.off_dc, prob.off_plan,
                        prob.brk_start, prob.brk_u, prob.brk_fa, prob.brk_fb, prob.brk_w,
                        prob.tch_start, prob.tch_flat, prob.turn_ok, prob.use_heading,
                        g, lo, mover.mu, hi, mover.drag, mover.stall_speed ** 2, prob.v2_max,
                        prob.min_grade, prob.max_grade, int(s), v2_start, int(e), lo_safe, inv_v,
                        tol_abs, tol_rel, budget, _INIT_CAP, cap, slack)
    elapsed = time.perf_counter() - t0
    status, final, n_lab, Lt, Llo, Lnom, Lhi, Lnode, Lpar, closest, cnt = out
    stats = {"labels_created": int(cnt[R_CREATED]), "labels_settled": int(cnt[R_SETTLED]),
             "labels_dominated": int(cnt[R_DOMINATED]), "rejected_grade": int(cnt[R_GRADE]),
             "rejected_stall_hi": int(cnt[R_STALL_HI]), "rejected_speed_lo": int(cnt[R_SPEED_LO]),
             "rejected_blocked": int(cnt[R_BLOCKED]), "rejected_turn": int(cnt[R_TURN]),
             "labels_capped": int(cnt[R_CAPPED]), "exact": (cap == 0 or int(cnt[R_CAPPED]) == 0) and slack == 0.0,
             "resolution": float(resolution),
             "label_cap": cap or None, "search_s": float(elapsed),
             "neighbours": int(prob.stencil.size), "energy_tol": float(tol_rel),
             "mu_lo": lo, "mu_nominal": float(mover.mu), "mu_hi": hi}
    if status == LABEL_BUDGET:
        raise NoFeasibleLine(f"label budget of {budget} exhausted before reaching the end; raise max_labels "
                             "or coarsen the grid", reason="label_budget", closest=_cell_xy(terrain, int(closest)))
    if status != OK:
        where = _cell_xy(terrain, int(closest))
        txt = f"closest reached cell ({where[0]:.1f}, {where[1]:.1f})"
        if cnt[R_STALL_HI] > 0 or cnt[R_SPEED_LO] > 0:
            raise NoFeasibleLine(f"no line works from mu={lo:g} to mu={hi:g} (every line stalls at high friction "
                                 f"or is too fast at low friction); {txt}; narrow the range or relax the speed limit",
                                 reason="stall" if cnt[R_SPEED_LO] == 0 else "limits", closest=where)
        raise NoFeasibleLine(f"no lattice line connects the points; {txt}", reason="unreachable", closest=where)
    nodes = []
    p = int(final)
    while p >= 0:
        nodes.append(int(Lnode[p]))
        p = int(Lpar[p])
    nodes.reverse()
    cells, points = _line_points(terrain, prob.stencil, nodes)
    stats["simple"] = len(set(nodes)) == len(nodes)
    stats["start_cell"] = [int(cells[0, 0]), int(cells[0, 1])]
    stats["end_cell"] = [int(cells[-1, 0]), int(cells[-1, 1])]
    stats["exit_speed_lo_m_s"] = float(math.sqrt(Llo[final]))
    stats["exit_speed_m_s"] = float(math.sqrt(Lnom[final]))
    stats["exit_speed_hi_m_s"] = float(math.sqrt(Lhi[final]))
    profile = traverse(points, replace(mover, normal="gravity"))
    return LatticeLine(cells=cells, points=points, profile=profile, time_s=float(Lt[final]), stats=stats)
