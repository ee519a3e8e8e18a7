"""The refinement's public entry, :func:`refine_line`: checks its inputs, runs the stages
(:mod:`fallway.refine.stages`) and returns the choice of :mod:`fallway.refine.choose`."""

from __future__ import annotations

import math

import numpy as np

from ..errors import ParameterError
from ..params import Limits, LineSpec, checked_options
from ..physics import Mover
from ..results import RefineResult
from ..terrain import lay_on_ground
from .choose import Candidate, choose, improves, judge
from .fields import DistanceField
from .problem import Ground, Problem
from .stages import (GravityRun, Plan, gravity_stage, polish_stage, polish_start_line, raised_heights, repair_radius,
                     rounded_start)

__all__ = ["refine_line"]


@checked_options
def refine_line(terrain, points, mover: Mover, *, limits: Limits | None = None, keepout=None,
                line: LineSpec | None = None, n_vertices: int | None = None, levels: int = 8, blend: float = 0.5,
                max_iter: int = 4000, gtol: float = 1e-9, margin_m: float | None = None,
                penalty: float = 1e4, keep_heights: bool = False) -> RefineResult:
    """Move the vertices of a line continuously until its travel time is stationary.

    Parameters
    ----------
    terrain : Terrain
        The elevation model; a ground line follows its smooth surface
        (:meth:`~fallway.terrain.Terrain.surface`).
    points : array_like (K, 3)
        Start line (the lattice polyline), x, y and ground z in metres.
    mover : Mover
        Physics.  ``normal="gravity"``: the gravity-normal time is minimised.
        ``normal="full"``: the gravity-normal optimum is also polished on the full
        model's own time (centripetal part of the normal force, the discrete
        turning-angle curvature of :func:`fallway.physics.traverse`), with the exact chain
        of the full-model recursion in reverse for the gradient; the polish is coarse to
        fine with an iteration budget per level and moves vertices normal to the line
        only (their spacing stays the gravity optimum's).
    limits : Limits, optional
        Grade window, minimum bend radius and the speed-aware limits (lateral g, normal
        g, lift-off of an open line; the speed window is on ``mover``).  The speed-aware
        limits are held as a bend radius per vertex,
        ``max(min_radius_m, v² / (max_lateral_g g), ...)`` at the vertex's speed
        (:func:`fallway.loads.required_radius_m`), frozen for each solve from the line it
        starts from and measured again before the next (levels, stronger penalties,
        repair rounds); their status is in ``limits`` like ``min_radius``.  With
        ``min_radius_m`` the start is the lattice line with its corners replaced by arcs
        of that radius (where the room between corners allows), lines are resampled on
        splines between levels, and tight vertex triples left by the penalty are smoothed
        locally; the radius held is the 3D circumradius of consecutive vertices
        (:func:`fallway.geometry.min_radius_m`).
    keepout : Keepout or shapely geometry, optional
        No vertex or segment of the result may enter it.
    line : LineSpec, optional
        The kind of line (default: on the ground).  ``LineSpec("raised", (c_min, c_max),
        start_height_m, end_height_m)``: heights are free within ``[ground + c_min,
        ground + c_max]`` and start and end at the given heights above the ground.
    keep_heights : bool, default False
        Raised line: start from the heights of ``points`` (a raised lattice line; held in
        the band over the smooth surface) instead of the ramp from the start height to
        the end height.
    n_vertices : int, optional
        Vertices of the finest level (default: one per cell of plan length, at least 33).
    levels : int, default 8
        Coarse-to-fine levels at most (each halves the vertices, down to about 16).
    blend : float, default 0.5
        Weight of time against length in the vertex distribution of the first level.
    max_iter : int, default 4000
        Iterations per level.
    gtol : float, default 1e-9
        Gradient tolerance of the optimiser, s/m.
    margin_m : float, optional
        Keep-out safety distance (default 10 % of a cell).
    penalty : float, default 1e4
        Weight of the exterior penalties on the limits.

    Returns
    -------
    RefineResult
        The fastest candidate line that meets the limits (:mod:`fallway.refine.choose`):
        the start line, its rounded version (``min_radius_m``), the gravity-normal optimum
        and, with the full model, the polish's lines and - when none of those beats the
        start line - the optimum of a gravity-normal run (``"gravity optimum, full-model
        timed"``); with the full model also the rounded start (the start line without a
        bend limit) polished on the full model (``"rounded start, full polish"``,
        ``"start, full polish"``; penalties strengthened while a limit is broken).  Every
        candidate is timed with the mover's own model, a ground line laid on the ground
        where a long chord strays from it (:func:`fallway.terrain.lay_on_ground`, as a
        route exports it).  ``candidates`` lists them all with their times, limit status
        and any failure, ``chosen`` names the one returned.  Never slower than the start
        line among lines that meet the limits: when the start line itself breaks one
        (typically the bend radius at its lattice corners) the fastest line that meets them
        is returned even if slower, and ``message`` says so.

    Raises
    ------
    ParameterError
        A bad option, an unknown option, or a raised start line off the terrain.

    Warns
    -----
    RefinementWarning
        The final level did not converge (the best line found is returned), or no line
        meeting the limits was found (the fastest, breaking the fewest limits, is
        returned, ``message`` starting "no line meeting the limits was found" and the
        broken limits' status ``"violated"``).

    Examples
    --------
    >>> import numpy as np
    >>> from affine import Affine
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(20.0 - 1.0 * np.mgrid[0:21, 0:21][1], Affine(1.0, 0, 0.0, 0, -1.0, 21.0))
    >>> res = refine_line(t, [[0.5, 10.5, 20.0], [20.5, 0.5, 0.0]], Mover(normal="gravity"))
    >>> res.time_after_s < res.time_before_s, res.chosen
    (True, 'gravity optimum')
    >>> [c.name for c in res.candidates]
    ['start', 'gravity optimum']
    """
    spec = _line_spec(line)
    limits = Limits() if limits is None else limits
    if not isinstance(mover, Mover):
        raise ParameterError(f"mover must be a fallway.Mover, got {type(mover).__name__}")
    if not isinstance(limits, Limits):
        raise ParameterError(f"limits must be a fallway.Limits, got {type(limits).__name__}")
    P_in = _points(points)
    margin = _number("margin_m", 0.1 * terrain.cell_size if margin_m is None else margin_m, low=0.0)
    w_pen = _number("penalty", penalty, low=0.0, strict=True)
    plan = _plan(terrain, P_in, n_vertices, levels, blend, max_iter, gtol)
    ground = Ground(terrain)
    keep = DistanceField(keepout, terrain.crs) if keepout is not None else None
    nodata = DistanceField(nodata_terrain=terrain) if not np.all(np.isfinite(terrain.z)) else None

    def problem() -> Problem:
        return Problem(ground, mover, limits, spec, keep, nodata, margin, w_pen)

    prob = problem()
    P_start = _start_line(prob, P_in, spec, bool(keep_heights))

    def refined(name, solved, converged, residual, run, error=None) -> Candidate:
        # a refined line as it is judged: tight bends eased (repair_radius) and, on the
        # ground, laid on it between far-apart vertices (the solvers see the ground at the
        # vertices only; a long chord may cut a convex slope or span a hollow, and the
        # route exports the line laid on the ground)
        c = Candidate.refined_line(name, solved, repair_radius(prob, solved, P_start), converged, residual, run,
                                   error)
        if spec.kind == "ground":
            laid = _laid(terrain, c.line)
            if laid is not c.line:
                c.line, c.laid = laid, True
        return c

    cands = [Candidate("start", P_start)]
    seed = P_start
    P_round = None
    r_round = _rounding_radius(prob, P_start)
    if r_round is not None:
        # a bend limit: start from the lattice line with its corners rounded
        P_round = rounded_start(prob, P_start, r_round, spec.start_height_m, spec.end_height_m)
        cands.append(Candidate("rounded", P_round, None if P_round is not None else
                               "the rounded start leaves the smooth ground surface"))
        seed = P_start if P_round is None else P_round
    grav = gravity_stage(prob, seed, P_start, plan, mover.normal)
    pol = None
    if mover.normal == "full" and grav.line is not None and len(grav.line) >= 3:
        pol = polish_stage(prob, grav.line, P_start, plan)
    cands.append(refined("gravity optimum", grav.line, grav.converged, grav.residual, grav, grav.error))
    if pol is not None:
        cands += [refined(nm, L, ok, res, grav) for nm, L, ok, res in pol.lines]
    if mover.normal == "full" and grav.line is not None:
        judge(prob, cands, mover)
        if not improves(cands):
            # the full-model stages gained nothing: the optimum of a gravity-normal run
            # (first level distributed and limits checked with gravity-normal speeds)
            alt = gravity_stage(problem(), seed, P_start, plan, "gravity")
            cands.append(refined("gravity optimum, full-model timed", alt.line, alt.converged, alt.residual, alt,
                                 alt.error))
    if mover.normal == "full" and grav.line is not None and len(P_start) >= 3:
        # the gravity stage runs at gravity-normal speeds, which miss the bends' friction:
        # under a speed cap its line is held to the cap at those speeds, too slow, and can
        # stall under the full model; elsewhere it can land in another local optimum.  The
        # (rounded) start polished on the full model is a second seed.
        seed_name, P_seed = ("rounded start", P_round) if P_round is not None else ("start", P_start)
        pr = polish_start_line(problem(), P_seed, P_start, plan)
        run = GravityRun(None, iterations=pr.iterations, converged=pr.ok, residual=pr.residual,
                         notes=[f"the {seed_name} polished on the full model as well"])
        cands += [refined(f"{seed_name}, {nm}", L, ok, res, run) for nm, L, ok, res in pr.lines]
    return choose(prob, cands, mover, pol)


def _laid(terrain, L: np.ndarray | None) -> np.ndarray | None:
    """``L`` laid on the ground where a segment strays from it (:func:`fallway.terrain.lay_on_ground`);
    ``L`` itself when nothing changes."""
    if L is None or not np.all(np.isfinite(L)):
        return L
    Q = lay_on_ground(terrain, L)
    return L if len(Q) == len(L) and np.array_equal(Q, L) else Q


def _rounding_radius(prob: Problem, P_start: np.ndarray) -> float | None:
    """The arc radius of the rounded start: the bend radius limit, or with a lateral
    acceleration limit the radius it needs at the start line's highest speed (gravity-normal
    speeds: an upper bound on the full model's), whichever is larger; None without a plan
    bend limit."""
    lim = prob.limits
    r = lim.min_radius_m
    if lim.max_lateral_g is not None:
        vmax2 = float(np.nanmax(prob.speeds(P_start, "gravity")))
        r_lat = vmax2 / (lim.max_lateral_g * prob.mover.g)
        r = r_lat if r is None else max(r, r_lat)
    return r if r is not None and r > 0 else None


def _line_spec(line) -> LineSpec:
    if line is None:
        return LineSpec()
    if not isinstance(line, LineSpec):
        raise ParameterError(f"line must be a fallway.LineSpec (e.g. LineSpec('raised', (0.5, 15.0), 8.0, 2.0)), "
                             f"got {line!r}")
    return line


def _points(points) -> np.ndarray:
    try:
        P = np.array(points, dtype=float)
    except (TypeError, ValueError):
        raise ParameterError("points must be an (K, 3) array of numbers") from None
    if P.ndim != 2 or P.shape[0] < 2 or P.shape[1] not in (2, 3):
        raise ParameterError(f"points must be an (K, 3) array with K >= 2, got shape {P.shape}")
    if not np.all(np.isfinite(P)):
        raise ParameterError("points must be finite; drop NaN vertices first")
    return P


def _number(name: str, value, *, low: float, high: float = math.inf, strict: bool = False) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a number, got {value!r}") from None
    if isinstance(value, bool) or not (math.isfinite(v) and (v > low if strict else v >= low) and v <= high):
        rng = f"{'>' if strict else '>='} {low:g}" + (f" and <= {high:g}" if math.isfinite(high) else "")
        raise ParameterError(f"{name} must be a finite number {rng}, got {value!r}")
    return v


def _whole(name: str, value, low: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
        raise ParameterError(f"{name} must be a whole number >= {low}, got {value!r}")
    return int(value)


def _plan(terrain, P_in, n_vertices, levels, blend, max_iter, gtol) -> Plan:
    plan_len = float(np.sum(np.hypot(*np.diff(P_in[:, :2], axis=0).T)))
    n = (max(33, int(math.ceil(plan_len / terrain.cell_size)) + 1) if n_vertices is None
         else _whole("n_vertices", n_vertices, 3))
    levels = _whole("levels", levels, 1)
    sizes = [n]
    while len(sizes) < levels and sizes[0] > 16:
        sizes.insert(0, (sizes[0] - 1) // 2 + 1)
    return Plan(tuple(sizes), _number("blend", blend, low=0.0, high=1.0), _whole("max_iter", max_iter, 1),
                _number("gtol", gtol, low=0.0, strict=True))


def _start_line(prob: Problem, P_in: np.ndarray, spec: LineSpec, keep_heights: bool = False) -> np.ndarray:
    """The start line with heights: as given on the ground (the lattice's own), or raised
    from the start height to the end height above the smooth ground."""
    xy = P_in[:, :2]
    zg = prob.gr.z(xy[:, 0], xy[:, 1])
    if spec.kind == "ground":
        return P_in if P_in.shape[1] == 3 else np.column_stack([xy, zg])
    if not np.all(np.isfinite(zg)):
        raise ParameterError("the start line leaves the terrain; keep it inside the DEM's valid area")
    if keep_heights and P_in.shape[1] == 3:
        P = np.column_stack([xy, zg + np.clip(P_in[:, 2] - zg, prob.c_min, prob.c_max)])
        P[0, 2] = zg[0] + spec.start_height_m
        P[-1, 2] = zg[-1] + spec.end_height_m
        return P
    return np.column_stack([xy, raised_heights(xy, zg, prob, spec.start_height_m, spec.end_height_m)])
