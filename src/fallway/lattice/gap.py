"""A certified optimality gap: bracket the exact lattice optimum between two times.

The exact (time, energy) Pareto search can need a label set per cell that grows without
bound on rough terrain with friction.  This module bounds the answer instead:

* **Lower bound T_LB.**  The *relaxed* search of :mod:`fallway.lattice.kernel`
  (``v2_grid = δ``) rounds each label's v² UP to a multiple of δ at every node and keeps,
  per state, at most one label per multiple (plus the ceiling), so at most
  ``V² / δ + 1`` labels settle per (leg, cell[, heading]).  Its optimum is a lower bound of
  the exact lattice optimum T*: proof sketch below.
* **Upper bound T_UB.**  The relaxed search's line re-timed exactly (the segment law along
  it from the true start speed, the speed window checked) is a feasible lattice line
  when it neither stalls nor overspeeds; its time is then at least T*.  An exact or
  capped search's line is an incumbent too.
* **Gap** ``T_UB / T_LB - 1`` bounds how much slower the returned line can be than T*.
  δ is divided by 4 until the gap is at most the target or the label budget is spent;
  each relaxed run prunes every label whose A* key exceeds the best T_UB so far (such a
  label cannot lead below T_UB; when nothing is left the incumbent is optimal: gap 0).

Proof sketch (the relaxation contains the true problem)
-------------------------------------------------------
Take any feasible lattice line L (no stall, no overspeed, grade and turn limits met,
through the via points) with true energies v²ᵢ and time T(L) at its nodes.  Run L
through the relaxed rules; by induction over its nodes the relaxed energy ``w²ᵢ >= v²ᵢ``
and the relaxed time ``τᵢ <= tᵢ``:

1. *Monotone segment law.*  On a straight sub-segment the exit v² rises and the time
   falls with the entry v² (gravity, Coulomb friction with the gravity normal and drag
   are all monotone), so from ``w² >= v²`` the relaxed exit is no lower and its time no
   longer.  A stall needs a low entry, so when L does not stall the relaxed line does not.
   With the full model and a turn limit every vertex also pays the corner law (kernel
   notes, "Corners"): monotone in the entry v² wherever the exact search's dominance is
   exact, so the relaxation holds exactly where the exact search does.  The corner law
   never returns more than the friction the adjoining runs were charged, so step 3's
   energy ceiling still holds.
2. *Rounding up* keeps ``w² >= v²``.
3. *Clamping* to ``min(V_c², e_top - 2 g z)`` keeps ``w² >= v²`` because every true energy
   lies under it: mechanical energy never grows (``v² <= v0² + 2 g (z_start - z)`` =
   ``e_top - 2 g z``), the speed cap holds on L, and with drag v² never passes
   ``max(v0², a_max / k)`` (kernel notes, "A* bound").
4. *The speed cap* is the one rule where more energy hurts: a relaxed label above the cap
   may belong to a true line below it.  So the relaxed search never rejects for speed; it
   clamps to the cap instead (step 3).  Overspeeding lines are thereby admitted: a
   superset, so still a lower bound.
5. *Time floor.*  Each sub-segment takes at least its length over the highest true speed
   on it (the ceiling at its lower end), so ``max(law time, length / V_here)`` is still no
   more than L's time there; the floor keeps the A* bound consistent for the relaxed
   energies.
6. *Stall, grade and turn limits, via points*: the grade and turn tests depend on the
   geometry only, the state (leg, cell, heading) is the exact search's, and a via point
   passes the whole relaxed Pareto set on as in the exact search.

So L has a relaxed twin no later than T(L).  In the relaxed problem "higher v², earlier t"
dominance is exact (steps 1 and 4: no rule rejects more energy), so the label-setting
search with the consistent A* bound returns the relaxed optimum, at most T(L) for every
feasible L, hence T_LB <= T*.  Pruning at ``key > T_UB`` removes only labels whose every
completion is later than a known feasible line.  The dominance tolerance is 0 in the
relaxed search (its energies lie on the grid).  Floating-point rounding of the segment
law (relative 1e-15 per step) is outside the proof.

The A* bound
------------
Both the straight-line bound and the per-cell bound of :mod:`fallway.lattice.bound`
(used for routes of up to eight legs) serve the relaxed search.  The per-cell bound is
consistent for every label whose energy is at most the ceiling U of its cell; the relaxed
search clamps its node energies to U as well (U bounds every true energy, so step 3 still
holds), which keeps that condition.  So the relaxed optimum is still found by label
setting, and pruning at ``key > T_UB`` still removes only labels that cannot lead below
T_UB.  The per-cell bound also gives a lower bound by itself: its value at the start is
at most the exact optimum (admissibility), which is how the corridor plan gets a gap
against the whole grid (:func:`fallway.lattice.search.lattice_lower_bound`).

The robust search (three frictions per label) is not covered: its labels carry
energies at LO and HI friction whose overspeed (LO) and stall (HI) tests pull in
opposite directions, so rounding one energy up is not a relaxation of both; its label
sets are bounded instead by its ``resolution`` (no certified gap).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable

__all__ = ["GapResult", "certify", "FIRST_GRID_FRACTION", "GRID_SHRINK", "MIN_GRID_FRACTION"]

#: The first relaxed search rounds v² up to multiples of this fraction of V².
FIRST_GRID_FRACTION = 1.0 / 256.0
#: Each further relaxed search divides the grid by this factor.
GRID_SHRINK = 4.0
#: No relaxed search runs with a finer grid than this fraction of V².
MIN_GRID_FRACTION = 1e-9


@dataclass(frozen=True)
class GapResult:
    """What :func:`certify` reached.

    Attributes
    ----------
    best : object or None
        The payload of the fastest feasible line found (None: none).
    upper_s : float
        Its exact time T_UB (``inf`` without a line).
    lower_s : float
        The proven lower bound T_LB of the exact lattice optimum (0 when none was proven).
    gap : float
        ``upper_s / lower_s - 1`` (``inf`` without both bounds).
    rounds : list of dict
        One entry per relaxed search: ``grid_v2`` (δ, m²/s²), ``status`` ("ok",
        "pruned" - nothing below T_UB, "budget", "none"), ``lower_s``, ``upper_s``,
        ``labels``.
    labels : int
        Labels created by the relaxed searches.
    exhausted : bool
        The label budget ran out before the target gap.
    """

    best: Any
    upper_s: float
    lower_s: float
    gap: float
    rounds: list
    labels: int
    exhausted: bool


def gap_of(upper_s: float, lower_s: float) -> float:
    """``upper_s / lower_s - 1``, 0 when the bounds meet, ``inf`` without both.

    Examples
    --------
    >>> gap_of(10.01, 10.0) < 0.0011
    True
    >>> gap_of(float("inf"), 3.0)
    inf
    """
    if not (math.isfinite(upper_s) and lower_s > 0.0):
        return math.inf
    return max(upper_s / lower_s - 1.0, 0.0)


def certify(run: Callable, retime: Callable, *, target: float, v2_top: float, budget: int,
            incumbent: tuple[float, Any] | None = None, first_fraction: float = FIRST_GRID_FRACTION) -> GapResult:
    """Tighten the relaxed search until the gap is at most ``target`` or the budget is spent.

    Parameters
    ----------
    run : callable
        ``run(v2_grid, key_max, max_labels) -> (status, lower_s, labels, result)``: one
        relaxed search; ``status`` is "ok" (``lower_s`` its optimum), "none" (no line
        with a key up to ``key_max``) or "budget"; ``result`` is handed to ``retime``.
    retime : callable
        ``retime(result) -> (time_s, payload)``: the relaxed line's exact time (``inf``
        when it stalls or overspeeds) and what to return for it.
    target : float
        The gap to reach (> 0).
    v2_top : float
        V², the largest squared speed any line can have (the grid is a fraction of it).
    budget : int
        Labels the relaxed searches may create in all.
    incumbent : (time_s, payload), optional
        A feasible line already known (its exact time).
    first_fraction : float
        δ of the first relaxed search as a fraction of ``v2_top``.

    Returns
    -------
    GapResult

    Examples
    --------
    A toy problem whose relaxed optimum approaches 10 s from below as the grid shrinks,
    and whose relaxed line re-times to 10.004 s:

    >>> def run(grid, key_max, max_labels):
    ...     lb = 10.0 - 1e3 * grid
    ...     return ("ok", lb, 100, None) if lb <= key_max else ("none", math.inf, 100, None)
    >>> r = certify(run, lambda res: (10.004, "line"), target=1e-3, v2_top=1.0, budget=10_000)
    >>> r.best, r.gap <= 1e-3, len(r.rounds)
    ('line', True, 6)
    """
    best = None
    ub = math.inf
    if incumbent is not None and math.isfinite(incumbent[0]):
        ub, best = float(incumbent[0]), incumbent[1]
    lb = 0.0
    used = 0
    rounds: list[dict] = []
    frac = float(first_fraction)
    exhausted = False
    while frac >= MIN_GRID_FRACTION:
        left = budget - used
        if left <= 0:
            exhausted = True
            break
        grid = frac * v2_top
        status, lower, labels, res = run(grid, ub, left)
        used += int(labels)
        entry = {"grid_v2": float(grid), "status": status, "lower_s": None, "upper_s": None, "labels": int(labels)}
        rounds.append(entry)
        if status == "budget":
            exhausted = True
            break
        if status == "none":
            if math.isfinite(ub):  # every relaxed line is later than the incumbent: it is optimal
                lb = ub
                entry["status"] = "pruned"
            break
        lb = max(lb, float(lower))
        entry["lower_s"] = float(lower)
        t, payload = retime(res)
        res = None  # the round's label pool is freed before the next round allocates its own
        entry["upper_s"] = float(t) if math.isfinite(t) else None
        if t < ub:
            ub, best = float(t), payload
        if gap_of(ub, lb) <= target:
            break
        frac /= GRID_SHRINK
    return GapResult(best=best, upper_s=ub, lower_s=lb, gap=gap_of(ub, lb), rounds=rounds, labels=used,
                     exhausted=exhausted)
