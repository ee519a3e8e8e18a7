"""Which limit binds, and the nearest value of it that works: a bisection with the same search.

When no line meets the limits, :func:`fallway.routing.find_route` asks this module two
questions, each answered by running the route's own search again (``probe``):

1. **Which limits bind.**  Each candidate limit is lifted alone (the speed cap removed,
   the grade window opened on that side, friction set to zero, ...); a limit whose removal
   alone frees a line binds.  When no single removal frees a line but lifting all of them
   together does, they bind *together*, and each is then bisected with the others lifted
   (the message says so).
2. **The nearest workable value** of each binding limit: a bisection between the value
   that failed and a value that works.  The working end starts from what the line found
   with the limit lifted achieves (its highest speed, steepest and flattest grade,
   smallest bend radius; for friction the highest mu that line tolerates, from its
   energy balance) and is checked by a probe; if it fails the limit's loosest value
   (e.g. mu = 0) is used.  Every value probed is first rounded outward (looser) to three
   significant figures, so the value reported is one that was actually run and found
   to work, and rerunning with it gives the same answer (same inputs, same bytes).

The relaxations are a table (:data:`RELAXATIONS`): one :class:`Relaxation` per limit,
saying how to read it, how to set or lift it, which direction is looser, and what a line
achieves.  A new limit is one more entry.

Cost: at most ``max_probes`` probes and, once ``budget_s`` seconds are spent, no new
probe starts (the router sets the budget to a multiple of the failed search's time:
:data:`fallway.routing.WORKABLE_BUDGET_FACTOR`).  A bisection cut short by the budget still
reports its best verified value, marked as not narrowed.
"""

from __future__ import annotations

import dataclasses
import math
import time
from typing import Callable

import numpy as np

from .params import Limits, Mover

__all__ = ["Relaxation", "RELAXATIONS", "Finding", "find_workable", "relaxations_for", "round_looser",
           "describe"]


@dataclasses.dataclass(frozen=True)
class Relaxation:
    """How one limit is read, set, lifted and bracketed.

    Attributes
    ----------
    name : str
        Key in ``NoFeasibleLine.workable`` (the parameter's own name).
    label : str
        Words for the message ("speed cap").
    unit : str
        SI unit of the value, "" for a ratio.
    looser : int
        +1 when a larger value is looser (a speed cap), -1 when a smaller one is (a
        minimum grade, friction).
    get : callable (Mover, Limits) -> float or None
        The current value; None when the limit is off.
    put : callable (Mover, Limits, float or None) -> (Mover, Limits)
        Set the value; None lifts the limit.
    achieved : callable (Route, Mover) -> float or None
        What a line found with the limit lifted achieves (a first guess of a working
        value), or None.
    loosest : float or None
        The loosest value the limit can take while still set (mu: 0); None: lifting it is
        the loosest.
    lattice : bool
        The lattice search itself holds the limit (a search that fails with
        ``reason="limits"`` may be stopped by it).
    violations : tuple of str
        Names in ``RouteSummary.violated_limits`` that this limit explains.
    positive : bool
        The value is always above zero (a cap, a radius): it is stepped out by factors of
        two; otherwise (a grade) by steps of its own size, at least 0.05.
    ceiling : float or None
        The largest value the parameter takes (the turn per step: 180 degrees).
    """

    name: str
    label: str
    unit: str
    looser: int
    get: Callable
    put: Callable
    achieved: Callable
    loosest: float | None = None
    lattice: bool = False
    violations: tuple = ()
    positive: bool = True
    ceiling: float | None = None


def _limits_field(field: str, off):
    def get(mover, limits):
        v = getattr(limits, field)
        return None if v is None or v == off else float(v)

    def put(mover, limits, value):
        return mover, dataclasses.replace(limits, **{field: off if value is None else float(value)})

    return get, put


def _mover_field(field: str, off):
    def get(mover, limits):
        v = getattr(mover, field)
        return None if v is None or v == off else float(v)

    def put(mover, limits, value):
        return dataclasses.replace(mover, **{field: off if value is None else float(value)}), limits

    return get, put


def _max_speed(route, mover):
    return float(np.nanmax(route.profile.speed_m_s))


def _grades(route) -> np.ndarray:
    line = np.asarray(route.line, dtype=float)
    d = np.diff(line, axis=0)
    plan = np.hypot(d[:, 0], d[:, 1])
    ok = plan > 0
    return -d[ok, 2] / plan[ok]


def _min_grade(route, mover):
    g = _grades(route)
    return float(g.min()) if g.size else None


def _max_grade(route, mover):
    g = _grades(route)
    return float(g.max()) if g.size else None


def _min_radius(route, mover):
    r = route.summary.min_radius_3d_m
    return None if r is None or not math.isfinite(r) else float(r)


def _tolerated_mu(route, mover):
    """The highest mu at which the line still gets through, from its energy balance.

    Gravity-normal friction without drag (DESIGN §3): at vertex i the squared speed is
    v0² + 2 g (drop_i - mu plan_i); it stays positive for mu below
    (v0²/2g + drop_i) / plan_i at every vertex.  A first guess only (drag and the full
    normal force take more): the bisection checks it with a probe.
    """
    line = np.asarray(route.line, dtype=float)
    d = np.diff(line, axis=0)
    plan = np.cumsum(np.hypot(d[:, 0], d[:, 1]))
    drop = line[0, 2] - line[1:, 2]
    ok = plan > 0
    if not ok.any():
        return None
    v = (mover.v0 ** 2 / (2.0 * mover.g) + drop[ok]) / plan[ok]
    return float(max(v.min(), 0.0))


_get, _put = _mover_field("max_speed", None)
_SPEED = Relaxation("max_speed", "speed cap", "m/s", +1, _get, _put, _max_speed, lattice=True,
                    violations=("overspeed", "max_speed"))
_get, _put = _limits_field("min_grade", -math.inf)
_MIN_GRADE = Relaxation("min_grade", "smallest grade", "", -1, _get, _put, _min_grade, lattice=True,
                        violations=("grade",), positive=False)
_get, _put = _limits_field("max_grade", math.inf)
_MAX_GRADE = Relaxation("max_grade", "largest grade", "", +1, _get, _put, _max_grade, lattice=True,
                        violations=("grade",), positive=False)
_get, _put = _limits_field("max_step_turn_deg", None)
_TURN = Relaxation("max_step_turn_deg", "turn per lattice step", "deg", +1, _get, _put, lambda r, m: None,
                   lattice=True, ceiling=180.0)
_get, _put = _limits_field("min_radius_m", None)
_RADIUS = Relaxation("min_radius_m", "bend radius", "m", -1, _get, _put, _min_radius,
                     violations=("min_radius",))
_get, _put = _mover_field("mu", 0.0)
_MU = Relaxation("mu", "friction", "", -1, _get, _put, _tolerated_mu, loosest=0.0,
                 violations=("stalls", "stall"))
_get, _put = _limits_field("max_lateral_g", None)
_LATERAL = Relaxation("max_lateral_g", "lateral acceleration", "g", +1, _get, _put,
                      lambda r, m: r.summary.max_lateral_g, violations=("lateral_g",))
_get, _put = _limits_field("max_normal_g", None)
_NORMAL = Relaxation("max_normal_g", "normal load", "g", +1, _get, _put,
                     lambda r, m: r.summary.max_normal_g, violations=("normal_g",))
del _get, _put

#: Every limit the bisection knows, in the order they are tried and reported.  To add a
#: limit (e.g. a lateral acceleration limit on :class:`~fallway.params.Limits`), add one
#: entry: ``Relaxation("max_lateral_g", "lateral acceleration", "g", +1,
#: *_limits_field("max_lateral_g", None), achieved, violations=("lateral_g",))``.
RELAXATIONS: tuple[Relaxation, ...] = (_SPEED, _MIN_GRADE, _MAX_GRADE, _TURN, _RADIUS, _LATERAL, _NORMAL, _MU)


def relaxations_for(mover: Mover, limits: Limits, *, reason: str | None = None,
                    violated=()) -> list[Relaxation]:
    """The active limits that may explain a failure.

    ``reason`` is a lattice search's ``NoFeasibleLine.reason`` (``"limits"``: the limits
    the lattice holds; ``"stall"``: friction); ``violated`` the names a reported line
    breaks (``RouteSummary.violated_limits``).
    """
    out = []
    for rel in RELAXATIONS:
        if rel.get(mover, limits) is None:
            continue
        if reason == "limits" and rel.lattice:
            out.append(rel)
        elif reason == "stall" and rel.name == "mu":
            out.append(rel)
        elif any(v in rel.violations or v == rel.name for v in violated):
            out.append(rel)
    return out


def round_looser(value: float, looser: int, digits: int = 3) -> float:
    """``value`` rounded to ``digits`` significant figures, towards the looser side.

    Examples
    --------
    >>> round_looser(18.4321, +1), round_looser(0.29987, -1), round_looser(-0.0512, -1)
    (18.5, 0.299, -0.0513)
    """
    if value == 0.0 or not math.isfinite(value):
        return float(value)
    step = 10.0 ** (math.floor(math.log10(abs(value))) - (digits - 1))
    q = value / step
    n = math.ceil(q - 1e-9) if looser > 0 else math.floor(q + 1e-9)
    return float(round(n * step, 12))


@dataclasses.dataclass(frozen=True)
class Finding:
    """What the bisection found for one limit.

    Attributes
    ----------
    name, label, unit : str
        As the :class:`Relaxation`.
    value : float
        The value that failed.
    workable : float or None
        The nearest value found to work (probed), None when none was found.
    failing : float
        The nearest value found to fail (the other end of the bisection).
    narrowed : bool
        The bisection reached three significant figures (False: the budget ran out first).
    together : tuple of str
        Limits lifted while this one was bisected (they bind only together).
    """

    name: str
    label: str
    unit: str
    value: float
    workable: float | None
    failing: float
    narrowed: bool
    together: tuple = ()


def find_workable(probe, mover: Mover, limits: Limits, candidates, *, budget_s: float, max_probes: int = 24,
                  bisection_steps: int = 10):
    """Which candidate limits bind, and the nearest workable value of each.

    Parameters
    ----------
    probe : callable (Mover, Limits) -> Route or None
        Runs the search; returns the route when it gives a line that meets every limit,
        else None.  (Any other object counts as success too, without a first guess of
        the working value from the line.)
    mover, limits
        The settings that failed.
    candidates : sequence of Relaxation
        The active limits to try (:func:`relaxations_for`).
    budget_s : float
        No probe starts after this many seconds.
    max_probes : int
        At most this many probes in all.
    bisection_steps : int
        At most this many bisection probes per limit.

    Returns
    -------
    findings : list of Finding
        One per binding limit, in table order.
    stats : dict
        ``probes``, ``seconds``, ``together`` (bool), ``budget_spent`` (bool).

    Examples
    --------
    A toy probe: a line exists when the cap is at least 12.34 m/s.

    >>> from fallway.params import Mover, Limits
    >>> probe = lambda m, l: ("line" if m.max_speed is None or m.max_speed >= 12.34 else None)
    >>> f, st = find_workable(probe, Mover(max_speed=10.0), Limits(), relaxations_for(
    ...     Mover(max_speed=10.0), Limits(), reason="limits"), budget_s=10.0)
    >>> f[0].name, f[0].workable, f[0].narrowed
    ('max_speed', 12.4, True)
    """
    t0 = time.perf_counter()
    count = [0]

    def left() -> bool:
        return count[0] < max_probes and time.perf_counter() - t0 < budget_s

    def run(m, lim):
        count[0] += 1
        return probe(m, lim)

    lifted_routes = {}
    for rel in candidates:
        if not left():
            break
        r = run(*rel.put(mover, limits, rel.loosest))
        if r is not None:
            lifted_routes[rel.name] = r
    together = False
    binding = [rel for rel in candidates if rel.name in lifted_routes]
    if not binding and len(candidates) > 1 and left():
        m, lim = mover, limits
        for rel in candidates:
            m, lim = rel.put(m, lim, rel.loosest)
        r = run(m, lim)
        if r is not None:
            together = True
            binding = list(candidates)
            lifted_routes = {rel.name: r for rel in candidates}
    findings = []
    for rel in binding:
        m, lim = mover, limits
        others = ()
        if together:
            others = tuple(o.name for o in candidates if o is not rel)
            for o in candidates:
                if o is not rel:
                    m, lim = o.put(m, lim, o.loosest)
        findings.append(_bisect(rel, m, lim, lifted_routes[rel.name], run, left, bisection_steps, others))
    stats = {"probes": count[0], "seconds": time.perf_counter() - t0, "together": together,
             "budget_spent": not left()}
    return findings, stats


#: How many times a bisection steps out from the failing value to find a working one
#: (when the line found without the limit gives no first guess).
_EXPANSIONS = 3


def _bisect(rel: Relaxation, mover, limits, lifted, run, left, steps: int, others) -> Finding:
    bad = float(rel.get(mover, limits))
    good = None
    guess = rel.achieved(lifted, mover) if hasattr(lifted, "profile") else None  # not a Route: no first guess
    if guess is not None and math.isfinite(guess) and (guess - bad) * rel.looser > 0:
        g = round_looser(guess, rel.looser)
        if left() and run(*rel.put(mover, limits, g)) is not None:
            good = g
        elif (g - bad) * rel.looser > 0:
            bad = g  # fails too, and is nearer the working end
    if good is None and rel.loosest is not None:
        good = rel.loosest  # probed already: lifting the limit is setting it to its loosest value
    for k in range(_EXPANSIONS if good is None else 0):  # a finite working value: step out from the failing one
        if not left():
            break
        g = round_looser(bad * 2.0 ** rel.looser if rel.positive else bad + rel.looser * max(abs(bad), 0.05),
                         rel.looser)
        if rel.ceiling is not None:
            g = min(g, rel.ceiling)
        if g == bad:
            break
        if run(*rel.put(mover, limits, g)) is not None:
            good = g
            break
        bad = g
    narrowed = False
    if good is not None:
        for _ in range(steps):
            mid = round_looser(0.5 * (bad + good), rel.looser)
            if (mid - bad) * rel.looser <= 0 or (good - mid) * rel.looser <= 0:
                narrowed = True  # adjacent on the three-figure grid
                break
            if not left():
                break
            if run(*rel.put(mover, limits, mid)) is not None:
                good = mid
            else:
                bad = mid
        else:
            narrowed = round_looser(0.5 * (bad + good), rel.looser) in (bad, good)
    return Finding(name=rel.name, label=rel.label, unit=rel.unit, value=float(rel.get(mover, limits)),
                   workable=good, failing=bad, narrowed=narrowed, together=others)


def _fmt(v: float, unit: str) -> str:
    s = f"{v:.3g}" if abs(v) >= 1e-3 or v == 0 else f"{v:.3e}"
    return f"{s} {unit}" if unit else s


def describe(findings, stats, *, candidates=(), estimated_on: str | None = None) -> str:
    """One clause for the message: the binding limits and their nearest workable values.

    Examples
    --------
    >>> f = Finding("max_speed", "speed cap", "m/s", 10.0, 18.5, 18.4, True)
    >>> describe([f], {"together": False})
    'speed cap 10 m/s binds (lowest workable 18.5 m/s)'
    """
    if not findings:
        names = ", ".join(r.label for r in candidates)
        if not names:
            return "no limit that can be relaxed explains it"
        spent = " (the time budget ran out first)" if stats.get("budget_spent") else ""
        return f"lifting {names} does not free a line{spent}"
    parts = []
    for f in findings:
        rel = next(r for r in RELAXATIONS if r.name == f.name)
        word = "lowest" if rel.looser > 0 else "highest"
        if f.name == "mu":
            head = f"friction mu={_fmt(f.value, '')} stalls the mover"
        else:
            head = f"{f.label} {_fmt(f.value, f.unit)} binds"
        if f.workable is None:
            tail = "no workable value found within the budget"
        else:
            approx = "" if f.narrowed else "at most " if rel.looser > 0 else "at least "
            tail = f"{word} workable {approx}{_fmt(f.workable, f.unit)}"
        if f.together:
            lifted = ", ".join(next(r.label for r in RELAXATIONS if r.name == n) for n in f.together)
            tail += f", with {lifted} lifted"
        parts.append(f"{head} ({tail})")
    text = "; ".join(parts)
    if stats.get("together"):
        text = "the limits bind only together: " + text
    if estimated_on:
        text += f" [estimated on {estimated_on}]"
    return text
