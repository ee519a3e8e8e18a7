"""Result types: fixed fields whatever the options (absent values are None).

A leaf module: it holds values only and imports no other part of fallway at run time,
so every stage can return these types and every consumer can read them.

* :class:`LatticeLine` - the best line on the terrain lattice.
* :class:`ReachMap` - earliest arrival time and speed at every cell.
* :class:`RefineCandidate`, :class:`RefineResult` - the refinement's candidate lines
  and the one it chose.
* :class:`RouteSummary` - the numbers of a route, written to ``summary.json`` in field
  order.
* :class:`Route` - a line with its motion, its lattice answer, its inputs and its summary.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # annotations only: this module imports nothing of fallway at run time
    from .physics import Profile

__all__ = ["LatticeLine", "ReachMap", "RefineCandidate", "RefineResult", "RouteSummary", "Route"]


@dataclass(frozen=True, eq=False)
class LatticeLine:
    """The exact best line on the terrain lattice.

    Attributes
    ----------
    cells : ndarray of int (M, 2)
        (row, col) of the visited cell centres, start to end.
    points : ndarray (K, 3)
        The 3D polyline the search timed: cell centres plus the points where long
        stencil edges cross cell boundaries (heights bilinear between centres).
    profile : Profile
        Motion along ``points`` with the gravity-normal model the search uses.
    time_s : float
        Travel time found by the search.
    stats : dict
        Search statistics (labels created/settled/dominated, rejections, seconds).
    """

    cells: np.ndarray
    points: np.ndarray
    profile: Profile
    time_s: float
    stats: dict = field(default_factory=dict)


@dataclass(frozen=True, eq=False)
class ReachMap:
    """Earliest arrival time and its speed for every cell reachable from a start.

    Attributes
    ----------
    time_s, speed_m_s : ndarray (rows, cols) float
        NaN where the mover cannot get to.
    transform, crs
        The terrain's georeferencing.
    start : tuple of float
        (x, y) of the start.
    stats : dict
        Search statistics (labels created and settled, seconds).
    """

    time_s: np.ndarray
    speed_m_s: np.ndarray
    transform: object
    crs: object
    start: tuple
    stats: dict



@dataclass(frozen=True)
class RefineCandidate:
    """One line the refinement considered.

    Attributes
    ----------
    name : str
        ``"start"`` (the lattice line), ``"rounded"`` (its corners rounded to the bend
        radius), ``"gravity optimum"`` (the gravity-normal optimum), ``"full polish"``
        (polished on the full normal-force model), ``"gravity optimum, full-model timed"``,
        ``"rounded start, full polish"`` or ``"start, full polish"`` (the rounded start, or
        the start line without a bend limit, polished on the full model: a second seed for
        the polish); a polished line of a coarser level adds ``", level i of n (k vertices)"``.
    time_s : float or None
        Travel time with the route's model; None when the stage failed or the mover stalls.
    meets_limits : bool
        The mover gets through and no limit is violated.
    violated : tuple of str
        The limits it breaks.
    error : str or None
        Why the stage that makes this line failed (then ``time_s`` is None).
    """

    name: str
    time_s: float | None
    meets_limits: bool
    violated: tuple = ()
    error: str | None = None


@dataclass(frozen=True, eq=False)
class RefineResult:
    """The refined line and how the refinement went.

    Attributes
    ----------
    line : ndarray (N, 3)
        Refined vertices x, y, z (m); straight segments between them.
    profile : Profile
        ``traverse(line, mover)`` with the mover's own normal-force model.
    iterations : int
        Quasi-Newton iterations over all refinement levels.
    residual : float
        The returned line's solver residual, s/m: the largest component of the projected
        gradient of its objective (the travel time, s, plus the limits' exterior
        penalties, also in s) with respect to the vertex coordinates it moves (plan x and
        y, and height for a raised line, in m); ``inf`` when no solver made the line.
    converged : bool
        True only when the returned line is a refined line whose own solver stopped on
        its stationarity test (the time fell by less than a relative 1e-9, 1e-8 in the polish, over 25
        iterations, L-BFGS-B met its own tolerance, or the residual is at most
        ``max(100 gtol, 1e-7)`` s/m) and that meets the limits: False when an iteration
        cap (``max_iter``, the polish's budget) stopped it, when its bends were repaired
        after the solver, or when the start or rounded line is returned.  For a gravity
        stage's line the test is on the gravity-normal time, for a polished line on the
        full-model time.
    time_before_s, time_after_s : float
        Travel time of the start line and of ``line`` (same model).
    message : str
        What happened, including active or violated limits.
    limits : dict
        Per limit (``keepout``, ``grade``, ``max_speed``, ``stall``, ``min_radius``,
        ``extent``, ``clearance``): ``"inactive"``, ``"active"`` (at its bound within the
        margin) or ``"violated"``.  ``min_radius`` is judged on the 3D circumradius of
        consecutive vertices.
    polish : str
        Outcome of the full-model polish (``Mover(normal="full")``), e.g.
        ``"full-model polish 8.463 s -> 8.027 s in 1868 iterations"``; empty when it did
        not run.
    chosen : str
        The name of the candidate returned (:class:`RefineCandidate`).
    candidates : tuple of RefineCandidate
        Every line considered, with its time, its limit status and any failure.
    """

    line: np.ndarray
    profile: Profile
    iterations: int
    residual: float
    converged: bool
    time_before_s: float
    time_after_s: float
    message: str
    limits: dict = field(default_factory=dict)
    polish: str = ""
    chosen: str = ""
    candidates: tuple = ()




@dataclass(frozen=True)
class RouteSummary:
    """The numbers of a route: the same fields whatever the options (absent ones None).

    Written to ``summary.json`` in this order.  Lengths in metres, times in seconds of
    travel, speeds in m/s; ``compute_*`` fields are seconds of computing and are kept
    out of ``summary.json`` (so the same inputs give the same bytes).

    Attributes
    ----------
    line_kind : str
        ``"ground"`` or ``"raised"``.
    feasible : bool
        The mover reaches the end and the line meets every limit (the speed window,
        grade, bend radius, keep-out, clearance); False when any is broken.
    travel_time_s, exit_speed_m_s, max_speed_m_s : float or None
        Of the reported line with the route's model (None after a stall).
    length_m, plan_length_m, drop_m : float
        3D length, plan length and height lost.
    min_radius_plan_m, min_radius_3d_m : float
        Smallest bend radius in plan and along the line in space (inf when straight).
    max_grade : float or None
        Steepest descent grade of a segment (drop / plan; 0.3 = 30 %).
    violated_limits : list of str
        The limits the reported line breaks (``"stalls"``, ``"keepout"``, ``"overspeed"``,
        ``"grade"``, ``"radius"``, and the refinement's own checks); empty when it meets all.
    start_xyz, end_xyz : list of float
        The line's first and last vertex (x, y, z) in the terrain's CRS.
    via_xy : list of list of float
        The via points (x, y) in the terrain's CRS.
    lattice_time_s : float or None
        The lattice line timed with the route's model (compare with ``travel_time_s``).
    lattice_model_time_s : float
        The lattice search's own figure (gravity-normal friction on the lattice line).
    neighbours : int
        The lattice stencil.
    search_plan : str
        ``"full"`` (one search on the whole area), ``"corridor"`` (coarse-to-fine) or
        ``"robust"`` (the robust search over a friction range) or ``"raised"`` (a raised
        line's search in height and plan).
    search_exact : bool
        False when a label cap, a binding speed cap or an energy resolution made the
        lattice answer approximate.
    label_cap : int or None
        The label cap per lattice state, if any.
    labels_created, labels_settled : int
        Of the search that found the line.
    corridor : dict or None
        Corridor plan: coarse factor and cell size, corridor width, the steps tried.
    refined : bool
        The line is the refinement's (not the lattice line as found).
    refine_choice : str or None
        Which candidate the refinement returned (:class:`RefineCandidate`).
    refine_converged : bool or None
        The returned line passed its solver's stationarity test
        (:attr:`RefineResult.converged`): False when an iteration cap stopped it.
    refine_iterations : int or None
    refine_residual_s_per_m : float or None
        The returned line's solver residual: the largest component of the projected
        gradient of the (penalised) travel time, seconds per metre of vertex motion
        (:attr:`RefineResult.residual`).
    refine_message : str or None
    refine_limits : dict or None
        Per limit ``"inactive"``, ``"active"`` or ``"violated"``.
    refine_candidates : list of dict or None
        Every candidate line: name, time, limit status, failure.
    robust_method, robust_mu_range, robust_note
        The robust plan: how robustness was established, the friction range, notes.
    robust_candidates : list of dict or None
        Every line the robust plan tried: label, friction and speed cap of its search,
        verdict across the range, nominal travel time.
    caution : str
        The safety note every output carries.
    max_lateral_g, max_lateral_g_station_m : float or None
        Largest sideways (horizontal, across the plan direction) acceleration of the
        reported line in g, and the station (m along the line) where it occurs
        (:func:`fallway.loads.line_loads`: the smooth reading at the vertices; None after
        a stall before the second vertex).
    max_normal_g, max_normal_g_station_m : float or None
        Largest normal load ratio N/g and where.
    min_liftoff_margin_g, min_liftoff_margin_station_m : float or None
        Smallest normal force along the bed's outward normal, in g, and where: negative
        where an open bed would have to pull the mass (lift-off; ``"liftoff"`` in
        ``violated_limits`` unless the limits allow it).
    min_grade : float or None
        Smallest descent grade of a segment (negative = rising).
    min_clearance_m, min_clearance_station_m, max_clearance_m, max_clearance_station_m : float or None
        A raised line: its smallest and largest height above the smooth ground along the
        whole line (every segment sampled at half-cell plan steps,
        :mod:`fallway.clearance`) and their stations (m along the line); None for a
        ground line.
    start_given_xy, end_given_xy : list of float
        The start and end points as given (x, y), in the terrain's CRS; the line starts
        and ends exactly there (``start_xyz``, ``end_xyz``) unless a point had to move.
    start_moved_m, end_moved_m : float
        How far (plan, m) the line's start or end lies from the point given: 0 unless
        the point lay on nodata, in a keep-out area or in the DEM's outer half cell
        (moved to the nearest free cell centre), or the robust search, which starts and
        ends at cell centres, ran.
    start_moved_why, end_moved_why : str or None
        Why the point moved (None when it did not).
    optimality_gap : float or None
        Proven bound on how much slower (as a fraction) the lattice line found is than
        the exact lattice optimum on the searched grid: 0.0 when the search was exact,
        ``T_UB / T_LB - 1`` from the relaxed searches otherwise
        (:mod:`fallway.lattice.gap`; ``inf`` when the budget ran out before any lower
        bound).  With the corridor plan: ``time / T_LB - 1`` against a lower bound of the
        whole area's lattice optimum (:func:`fallway.lattice.search.lattice_lower_bound`;
        None when it was not computed: ``corridor["lower_bound_note"]`` says why).  None
        when no bound holds: a label cap (``label_cap``) on the full grid, or the robust
        plan.
    cable : dict or None
        A cable line's layout (:meth:`fallway.cable.CableLayout.to_dict`: objective,
        support count, supports, spans); None for other kinds.
    """

    line_kind: str
    feasible: bool
    travel_time_s: float | None
    exit_speed_m_s: float | None
    max_speed_m_s: float | None
    length_m: float
    plan_length_m: float
    drop_m: float
    min_radius_plan_m: float
    min_radius_3d_m: float
    max_grade: float | None
    violated_limits: list
    start_xyz: list
    end_xyz: list
    via_xy: list
    lattice_time_s: float | None
    lattice_model_time_s: float
    neighbours: int
    search_plan: str
    search_exact: bool
    label_cap: int | None
    labels_created: int
    labels_settled: int
    corridor: dict | None
    refined: bool
    refine_choice: str | None
    refine_converged: bool | None
    refine_iterations: int | None
    refine_residual_s_per_m: float | None
    refine_message: str | None
    refine_limits: dict | None
    refine_candidates: list | None
    robust_method: str | None
    robust_mu_range: list | None
    robust_note: str | None
    robust_candidates: list | None
    caution: str
    start_given_xy: list
    end_given_xy: list
    start_moved_m: float
    end_moved_m: float
    start_moved_why: str | None
    end_moved_why: str | None
    max_lateral_g: float | None = None
    max_lateral_g_station_m: float | None = None
    max_normal_g: float | None = None
    max_normal_g_station_m: float | None = None
    min_liftoff_margin_g: float | None = None
    min_liftoff_margin_station_m: float | None = None
    min_grade: float | None = None
    optimality_gap: float | None = None
    min_clearance_m: float | None = None
    min_clearance_station_m: float | None = None
    max_clearance_m: float | None = None
    max_clearance_station_m: float | None = None
    cable: dict | None = None

    def to_dict(self) -> dict[str, Any]:
        """The fields in order, as plain values (what ``summary.json`` holds)."""
        return {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}


@dataclass(frozen=True, eq=False)
class Route:
    """A minimum-time line from start to end, with its motion, inputs and numbers.

    Attributes
    ----------
    line : ndarray (N, 3)
        The reported polyline x, y, z (refined, or the lattice line).
    profile : Profile
        ``traverse(line, mover)``: the reported motion.
    lattice : LatticeLine
        The lattice answer on its own.
    summary : RouteSummary
    mover : Mover
    limits : Limits
    line_spec : LineSpec
    search : SearchOptions
    refinement : RefineResult or None
        None when refinement was off.
    terrain : Terrain
        The terrain (window) the line was found on.
    keepout : Keepout or None
    envelope : Envelope or None
        The line at low, nominal and high friction, when a friction range was given.
    compute_s : dict
        Seconds of computing per stage (not travel times): ``search``, ``refine``,
        ``total``, and the corridor steps.
    cable : CableLayout or None
        A cable line's supports, spans and carrier run (:mod:`fallway.cable`); None for
        other kinds.
    """

    line: np.ndarray
    profile: Any
    lattice: LatticeLine
    summary: RouteSummary
    mover: Any
    limits: Any
    line_spec: Any
    search: Any
    refinement: RefineResult | None
    terrain: Any
    keepout: Any = None
    envelope: Any = None
    compute_s: dict = field(default_factory=dict)
    cable: Any = None

    @property
    def travel_time_s(self) -> float | None:
        """Reported travel time, seconds (None after a stall)."""
        return self.summary.travel_time_s
