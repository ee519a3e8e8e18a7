"""Parameters of a run: what moves, the limits, the line kind and the search options.

Frozen dataclasses validated at construction: a bad value raises
:class:`~fallway.errors.ParameterError` naming the value and the allowed range.

* :class:`Mover` - the physics of what moves (friction, drag, start speed, gravity,
  normal-force model) and its **speed window** (stall speed, speed limit).  The speed
  window stays on the mover, not on :class:`Limits`, because every motion profile
  flags it: a profile knows its mover, not the route's limits.
* :class:`Limits` - the geometric and load limits of a line (grade window, turn per
  lattice step, bend radius, lateral and normal acceleration, lift-off).
* :class:`LineSpec` - the kind of line (on the ground, or raised within a clearance
  band) with its end heights.
* :class:`SearchOptions` - how the lattice is searched (stencil, label cap, budget,
  energy tolerance, A* bound) and planned (full grid or coarse-to-fine corridor).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .errors import ParameterError

__all__ = ["STANDARD_GRAVITY", "RANGES", "check_param", "Mover", "Limits", "LineSpec", "SearchOptions", "LINE_KINDS", "NEIGHBOURHOODS",
           "PLANS", "checked_options"]

#: Standard acceleration of gravity, m/s² (3rd CGPM, 1901).
STANDARD_GRAVITY = 9.80665

_NORMAL_MODELS = ("gravity", "full")

#: Line kinds: on the terrain surface, raised within a clearance band, or a cable on supports.
LINE_KINDS = ("ground", "raised", "cable")
#: Lattice stencils.
NEIGHBOURHOODS = (8, 16, 32)
#: Search plans: chosen from the estimate ("auto"), the full grid, or coarse-to-fine.
PLANS = ("auto", "full", "corridor")


#: Plausible range of every physical parameter of a run: name -> (low, high, unit).  One
#: rule wherever a value enters - these dataclasses, so scenario files, batch runs and the
#: command line alike: a value must be finite and within its range, and the message names
#: the parameter and the range.  ``low`` itself is allowed except for the names in
#: :data:`ABOVE_LOW`.  The upper bounds are a judgment, not a standard: each lies far
#: beyond any real chute, conveyor, slide or cable line, so only a slip (a missing decimal
#: point, a unit mix-up) meets it, and each keeps the arithmetic clear of floating-point
#: overflow (speeds enter squared, heights as energies g h).  Speeds: a free fall from
#: 8.8 km (the highest mountain) ends near 415 m/s (v = sqrt(2 g h)); 1e4 m/s is 24 times
#: that.  Gravity: the Sun's surface gravity is 274 m/s², more than any planet's.  Heights
#: of a raised line: no structure stands 10 km above the ground.  Friction and drag have
#: no upper bound: a high value makes the mover stall or crawl, which a run reports.
RANGES: dict[str, tuple[float, float, str]] = {
    "mu": (0.0, math.inf, ""),
    "drag": (0.0, math.inf, "1/m"),
    "v0": (0.0, 1e4, "m/s"),
    "g": (0.0, 1e3, "m/s²"),
    "stall_speed": (0.0, 1e4, "m/s"),
    "max_speed": (0.0, 1e4, "m/s"),
    "clearance_m": (0.0, 1e4, "m"),
    "start_height_m": (0.0, 1e4, "m"),
    "end_height_m": (0.0, 1e4, "m"),
    "min_radius_m": (0.0, math.inf, "m"),
    "corridor_m": (0.0, math.inf, "m"),
    # cable lines (fallway.cable): heights of supports and clearance as for a raised line;
    # a span of 10 km and a tension of 1e5 kN lie beyond any cable line built
    "support_height_m": (0.0, 1e4, "m"),
    "height_step_m": (0.0, 1e4, "m"),
    "max_span_m": (0.0, 1e4, "m"),
    "cable_tension_kn": (0.0, 1e5, "kN"),
    "carrier_load_kn": (0.0, 1e5, "kN"),
    "cable_weight_n_m": (0.0, 1e5, "N/m"),
    "max_break_over_deg": (0.0, 90.0, "°"),
}
#: The most labels a search can hold: the kernel counts them in int32 (the bound of
#: ``label_cap`` and ``max_labels``).
MAX_LABELS = 2 ** 31 - 1
#: Parameters whose range excludes its lower end.
ABOVE_LOW = frozenset({"g", "max_speed", "min_radius_m", "corridor_m", "height_step_m", "max_span_m",
                       "cable_tension_kn", "max_break_over_deg"})


def check_number(name: str, value, *, low: float = 0.0, allow_none: bool = False,
                  strictly_positive: bool = False, high: float = math.inf, unit: str = "") -> None:
    if value is None and allow_none:
        return
    try:
        v = float(value)
    except (TypeError, ValueError, OverflowError):
        raise ParameterError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(v) or v < low or (strictly_positive and v <= low) or v > high:
        rng = f"> {low:g}" if strictly_positive else f">= {low:g}"
        if math.isfinite(high):
            rng += f" and <= {high:g}"
        raise ParameterError(f"{name} must be a finite number {rng}{' ' + unit if unit else ''}, got {value!r}")


def check_param(name: str, value, *, allow_none: bool = False) -> None:
    """``value`` checked against the plausible range of parameter ``name`` (:data:`RANGES`).

    Examples
    --------
    >>> check_param("v0", 12.0)
    >>> check_param("v0", 1e308)
    Traceback (most recent call last):
    ...
    fallway.errors.ParameterError: v0 must be a finite number >= 0 and <= 10000 m/s, got 1e+308
    """
    low, high, unit = RANGES[name]
    check_number(name, value, low=low, high=high, unit=unit, allow_none=allow_none,
                 strictly_positive=name in ABOVE_LOW)


@dataclass(frozen=True)
class Mover:
    """What moves down the line and how it loses energy.

    Parameters
    ----------
    mu : float
        Coulomb (sliding or rolling) friction coefficient, >= 0.
    drag : float
        Quadratic drag coefficient k in 1/m (k = rho * C_d * A / (2 m)), >= 0.
    v0 : float
        Speed at the start, m/s.
    g : float
        Acceleration of gravity, m/s² (standard gravity by default; for local gravity
        use ``Mover(g=normal_gravity(lat_deg, height_m))``).
    normal : {"full", "gravity"}
        ``"gravity"``: the normal force is gravity's component across the path, so
        friction work is mu * g * plan length.  ``"full"``: the normal force is the
        vector the line must supply, N = v² kappa n - g_perp, including the centripetal
        part on curved lines.
    stall_speed : float
        The mover stops when it slows below this speed, m/s.
    max_speed : float or None
        Highest allowed speed, m/s; a hard limit for the search, a flag in profiles.

    Examples
    --------
    >>> Mover(mu=0.2, drag=0.01).normal
    'full'
    >>> Mover(mu=-1)
    Traceback (most recent call last):
    ...
    fallway.errors.ParameterError: mu must be a finite number >= 0, got -1
    """

    mu: float = 0.0
    drag: float = 0.0
    v0: float = 0.0
    g: float = STANDARD_GRAVITY
    normal: str = "full"
    stall_speed: float = 0.0
    max_speed: float | None = None

    def __post_init__(self) -> None:
        for name in ("mu", "drag", "v0", "g", "stall_speed"):
            check_param(name, getattr(self, name))
        check_param("max_speed", self.max_speed, allow_none=True)
        if self.normal not in _NORMAL_MODELS:
            raise ParameterError(f"normal must be one of {', '.join(_NORMAL_MODELS)}; got {self.normal!r}")
        for name in ("mu", "drag", "v0", "g", "stall_speed"):
            object.__setattr__(self, name, float(getattr(self, name)))
        if self.max_speed is not None:
            object.__setattr__(self, "max_speed", float(self.max_speed))
            if self.max_speed <= self.stall_speed:
                raise ParameterError(f"max_speed ({self.max_speed:g} m/s) must exceed stall_speed ({self.stall_speed:g} m/s)")

    @classmethod
    def from_drag_area(cls, cda_m2: float, mass_kg: float, air_density: float = 1.225, **kwargs) -> "Mover":
        """Build a mover from its drag area C_d·A (m²) and mass (kg): k = rho·C_d·A / (2 m).

        Examples
        --------
        >>> round(Mover.from_drag_area(0.5, 80.0).drag, 6)
        0.003828
        """
        check_number("cda_m2", cda_m2)
        check_number("mass_kg", mass_kg, strictly_positive=True)
        check_number("air_density", air_density)
        return cls(drag=air_density * cda_m2 / (2.0 * mass_kg), **kwargs)


@dataclass(frozen=True)
class Limits:
    """Geometric limits every segment of a line must respect.

    The speed window (stall speed, max speed) lives on :class:`fallway.Mover`, because
    profiles flag it too.

    Parameters
    ----------
    min_grade, max_grade : float
        Window for the descent grade of every segment (drop / plan length; 0.1 = 10 %
        falling; negative = rising).  Defaults: no limit.
    max_step_turn_deg : float or None
        Largest change of plan heading from one lattice step to the next, degrees: a limit
        of the lattice search only (it steers the search towards gentle lines); the
        refined line is held by ``min_radius_m``.
    min_radius_m : float or None
        Smallest bend radius of the refined line, metres, measured along the line in 3D
        (circumradius of consecutive vertices; the refinement holds it).  On a slope the
        plan radius differs (a plan circle of radius R draped on a plane tilted by α has a
        3D radius down to R cos α); route summaries report both, ``min_radius_m`` (plan)
        and ``min_radius_3d_m``.
    max_lateral_g : float or None
        Largest sideways (horizontal, across the plan direction) acceleration, in units
        of g: ``v_h² κ_plan <= max_lateral_g * g`` with ``v_h`` the horizontal speed
        (``v² / R`` on a level bend, so the smallest allowed plan radius is
        ``v² / (max_lateral_g * g)``: it grows with the square of the speed).  Measured
        at every vertex of the line (:func:`fallway.loads.line_loads`); the refinement
        holds it as a bend radius that depends on the local speed.
    max_normal_g : float or None
        Largest normal load ratio N/g, N the force per unit mass the bed supplies
        (``|v² κ n - g_perp|``, the full model's normal force; 1 on a level straight).
        Must be >= 1 when given (a line at rest on level ground already carries 1 g).
    allow_liftoff : bool
        False (default): the line is an open chute or conveyor, and a line on which the
        bed would have to pull the mass (a crest taken too fast: ``v² κ_crest > g cos θ``)
        is not feasible.  True: an enclosed chute or pipe, which can hold the mass on a
        crest; the lift-off margin is still reported.

    Examples
    --------
    >>> Limits(min_grade=0.05, max_grade=0.6).min_grade
    0.05
    >>> Limits(max_lateral_g=0.5).speed_aware
    True
    >>> Limits(max_normal_g=0.8)
    Traceback (most recent call last):
    ...
    fallway.errors.ParameterError: max_normal_g must be >= 1 (a level straight line already carries 1 g), got 0.8
    >>> Limits(min_grade=0.5, max_grade=0.1)
    Traceback (most recent call last):
    ...
    fallway.errors.ParameterError: min_grade (0.5) must not exceed max_grade (0.1)
    """

    min_grade: float = -math.inf
    max_grade: float = math.inf
    max_step_turn_deg: float | None = None
    min_radius_m: float | None = None
    max_lateral_g: float | None = None
    max_normal_g: float | None = None
    allow_liftoff: bool = False

    def __post_init__(self) -> None:
        for name in ("min_grade", "max_grade"):
            v = getattr(self, name)
            try:
                v = float(v)
            except (TypeError, ValueError):
                raise ParameterError(f"{name} must be a number, got {v!r}") from None
            if math.isnan(v):
                raise ParameterError(f"{name} must be a number, got NaN")
            object.__setattr__(self, name, v)
        if self.min_grade > self.max_grade:
            raise ParameterError(f"min_grade ({self.min_grade:g}) must not exceed max_grade ({self.max_grade:g})")
        if self.max_step_turn_deg is not None:
            v = float(self.max_step_turn_deg)
            if not (0.0 < v <= 180.0):
                raise ParameterError(f"max_step_turn_deg must be in (0, 180], got {self.max_step_turn_deg!r}")
            object.__setattr__(self, "max_step_turn_deg", v)
        if self.min_radius_m is not None:
            check_param("min_radius_m", self.min_radius_m)
            object.__setattr__(self, "min_radius_m", float(self.min_radius_m))
        for name in ("max_lateral_g", "max_normal_g"):
            check_number(name, getattr(self, name), allow_none=True, strictly_positive=True)
            if getattr(self, name) is not None:
                object.__setattr__(self, name, float(getattr(self, name)))
        if self.max_normal_g is not None and self.max_normal_g < 1.0:
            raise ParameterError(f"max_normal_g must be >= 1 (a level straight line already carries 1 g), "
                                 f"got {self.max_normal_g!r}")
        if not isinstance(self.allow_liftoff, bool):
            raise ParameterError(f"allow_liftoff must be True or False, got {self.allow_liftoff!r}")
        object.__setattr__(self, "allow_liftoff", bool(self.allow_liftoff))

    @property
    def speed_aware(self) -> bool:
        """True when a limit depends on the speed along the line (lateral g, normal g,
        lift-off of an open line)."""
        return self.max_lateral_g is not None or self.max_normal_g is not None or not self.allow_liftoff




@dataclass(frozen=True)
class LineSpec:
    """The kind of line and, for a raised line, where it may run above the ground.

    Parameters
    ----------
    kind : {"ground", "raised", "cable"}
        ``"ground"``: the line lies on the terrain surface (an open chute, a conveyor on
        the ground).  ``"raised"``: a trestle, an elevated chute or a flume on posts, its
        height free within the clearance band.  ``"cable"``: a carrier on a tensioned
        cable, straight in plan between its stations, on supports placed by search
        (:mod:`fallway.cable`).
    clearance_m : (float, float)
        ``(min, max)`` height of a raised line above the ground, metres, ``0 <= min <= max``.
    start_height_m, end_height_m : float or None
        Height of a raised line above the ground at its two ends, metres, within the
        band.  None (default): the band's lower edge for a raised or cable line, 0 for a
        ground line; after construction both are numbers.
    cable : fallway.cable.CableSpec or None
        The cable's parameters (kind ``"cable"`` only; None: :class:`~fallway.cable.CableSpec`
        defaults with this spec's band and end heights).  When given, its band and end
        heights are this spec's.
    height_layers : int
        Raised line: height layers of the lattice search, spread evenly over the band
        (:mod:`fallway.lattice.raised`); 2 to 256, default 16.
    straight_plan : bool
        Raised line: the plan is the straight line from start to end, only the vertical
        profile is free (a line that cannot turn).

    Examples
    --------
    >>> LineSpec().kind
    'ground'
    >>> LineSpec("raised", (0.5, 15.0), 8.0, 2.0).clearance_m
    (0.5, 15.0)
    >>> LineSpec("rope")
    Traceback (most recent call last):
    ...
    fallway.errors.ParameterError: line kind must be one of ground, raised, cable; got 'rope'
    """

    kind: str = "ground"
    clearance_m: tuple[float, float] = (0.0, 0.0)
    start_height_m: float | None = None
    end_height_m: float | None = None
    height_layers: int = 16
    straight_plan: bool = False
    cable: object = None

    def __post_init__(self) -> None:
        if isinstance(self.height_layers, bool) or not isinstance(self.height_layers, int) \
                or not 2 <= self.height_layers <= 256:
            raise ParameterError(f"height_layers must be a whole number from 2 to 256, got {self.height_layers!r}")
        if self.straight_plan not in (True, False):
            raise ParameterError(f"straight_plan must be True or False, got {self.straight_plan!r}")
        if self.kind not in LINE_KINDS:
            raise ParameterError(f"line kind must be one of {', '.join(LINE_KINDS)}; got {self.kind!r}")
        if self.straight_plan and self.kind != "raised":
            raise ParameterError("straight_plan is for a raised line (kind 'raised', --line raised)")
        if self.cable is not None:
            if self.kind != "cable":
                raise ParameterError(f"cable parameters are for a line of kind 'cable', not {self.kind!r}")
            for name in ("clearance_m", "start_height_m", "end_height_m"):
                object.__setattr__(self, name, getattr(self.cable, name))
        try:
            lo, hi = (float(v) for v in self.clearance_m)
        except (TypeError, ValueError):
            raise ParameterError(f"clearance_m must be a pair (min, max) of metres, got {self.clearance_m!r}") from None
        if not (math.isfinite(lo) and math.isfinite(hi) and 0.0 <= lo <= hi):
            raise ParameterError(f"clearance_m must be (min, max) with 0 <= min <= max, got ({lo:g}, {hi:g})")
        check_param("clearance_m", hi)
        object.__setattr__(self, "clearance_m", (lo, hi))
        for name in ("start_height_m", "end_height_m"):
            if getattr(self, name) is None:
                object.__setattr__(self, name, lo if self.kind in ("raised", "cable") else 0.0)
            check_param(name, getattr(self, name))
            h = float(getattr(self, name))
            object.__setattr__(self, name, h)
            if self.kind == "raised" and not (lo - 1e-9 <= h <= hi + 1e-9):
                raise ParameterError(f"{name} ({h:g} m) must lie in the clearance band [{lo:g}, {hi:g}] m")


@dataclass(frozen=True)
class SearchOptions:
    """How the lattice is searched and planned.

    Parameters
    ----------
    neighbours : {8, 16, 32}
        Lattice stencil (worst metrication 8.2 %, 2.7 %, 1.3 %).
    label_cap : int or None
        Keep at most this many labels per lattice state (the earliest arrivals): an
        approximate search, faster on large rough DEMs; None is the exact Pareto search.
    max_labels : int or None
        Label budget of one search; when spent the search stops with
        ``NoFeasibleLine(reason="label_budget")``.  None: the kernel's own ceiling.
    energy_tol : float or None
        Dominance tolerance on v², relative to each label's own v² (None: the default
        1e-10; 0: exact to the last bit).
    heuristic : bool
        Order the search by the admissible A* bound (same answer, fewer labels).
    plan : {"auto", "full", "corridor"}
        ``"full"``: one search on the whole area around the points.  ``"corridor"``: a
        coarse search, then the fine grid inside a widening corridor around the coarse
        line.  ``"auto"``: the full grid when its memory estimate fits, else the corridor.
    coarse_factor : int or None
        Corridor plan: coarsening factor of the first search (None: about 250 k coarse cells).
    corridor_m : float or None
        Corridor plan: first corridor half-width, metres (None: four coarse cells).
    max_widen : int
        Corridor plan: how many times the corridor may double.
    widen_tol : float
        Corridor plan: relative gain below which widening stops.
    gap : float or None
        Certified optimality gap to reach (default 0.001, i.e. 0.1 %): when the exact
        search does not finish on a small label budget, relaxed searches bound the exact
        lattice optimum from below and the line returned is proven at most this fraction
        slower (or the gap reached when the label budget runs out;
        :mod:`fallway.lattice.gap`).  0 or None: the exact search only.  Not used with
        ``label_cap`` (no bound then holds).

    Examples
    --------
    >>> SearchOptions(neighbours=32, label_cap=4).label_cap
    4
    >>> SearchOptions(neighbours=12)
    Traceback (most recent call last):
    ...
    fallway.errors.ParameterError: neighbours must be one of 8, 16, 32; got 12
    """

    neighbours: int = 16
    label_cap: int | None = None
    max_labels: int | None = None
    energy_tol: float | None = None
    heuristic: bool = True
    plan: str = "auto"
    coarse_factor: int | None = None
    corridor_m: float | None = None
    max_widen: int = 4
    widen_tol: float = 0.002
    gap: float | None = 0.001

    def __post_init__(self) -> None:
        if isinstance(self.neighbours, bool) or self.neighbours not in NEIGHBOURHOODS:
            raise ParameterError(f"neighbours must be one of 8, 16, 32; got {self.neighbours!r}")
        object.__setattr__(self, "neighbours", int(self.neighbours))
        for name in ("label_cap", "max_labels", "coarse_factor"):
            v = getattr(self, name)
            if v is not None and (isinstance(v, bool) or not isinstance(v, int) or v < 1):
                raise ParameterError(f"{name} must be a whole number >= 1 or None; got {v!r}")
        for name in ("label_cap", "max_labels"):
            v = getattr(self, name)
            if v is not None and v > MAX_LABELS:
                raise ParameterError(f"{name} must be a whole number from 1 to {MAX_LABELS} (the labels a search can "
                                     f"count) or None; got {v!r}")
        if self.energy_tol is not None:
            check_number("energy_tol", self.energy_tol)
            object.__setattr__(self, "energy_tol", float(self.energy_tol))
        if not isinstance(self.heuristic, bool):
            raise ParameterError(f"heuristic must be True or False; got {self.heuristic!r}")
        if self.plan not in PLANS:
            raise ParameterError(f"plan must be one of {', '.join(PLANS)}; got {self.plan!r}")
        if self.corridor_m is not None:
            check_param("corridor_m", self.corridor_m)
            object.__setattr__(self, "corridor_m", float(self.corridor_m))
        if isinstance(self.max_widen, bool) or not isinstance(self.max_widen, int) or self.max_widen < 0:
            raise ParameterError(f"max_widen must be a whole number >= 0; got {self.max_widen!r}")
        check_number("widen_tol", self.widen_tol)
        object.__setattr__(self, "widen_tol", float(self.widen_tol))
        if self.gap is not None:
            check_number("gap", self.gap, high=1.0)
            object.__setattr__(self, "gap", float(self.gap))


def checked_options(fn):
    """Make an unknown keyword argument of a public function a :class:`ParameterError`.

    Python's own ``TypeError`` names the argument but not the ones allowed; this says
    both, in the project's error tree.

    Examples
    --------
    >>> @checked_options
    ... def f(a, *, speed_m_s=1.0):
    ...     return a * speed_m_s
    >>> f(2, speed_m_s=3.0)
    6.0
    >>> f(2, speed=3.0)
    Traceback (most recent call last):
    ...
    fallway.errors.ParameterError: f: unknown option speed; allowed: speed_m_s
    """
    import functools
    import inspect

    sig = inspect.signature(fn)
    names = [p.name for p in sig.parameters.values()
             if p.kind in (p.KEYWORD_ONLY, p.POSITIONAL_OR_KEYWORD)]

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        unknown = [k for k in kwargs if k not in names]
        if unknown:
            allowed = [p.name for p in sig.parameters.values() if p.kind == p.KEYWORD_ONLY] or names
            raise ParameterError(f"{fn.__name__}: unknown option {unknown[0]}; allowed: {', '.join(allowed)}")
        return fn(*args, **kwargs)

    return wrapper
