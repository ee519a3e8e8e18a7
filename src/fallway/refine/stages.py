"""Stages of the refinement; each makes candidate lines for :mod:`fallway.refine.choose`.

* :func:`rounded_start` - the start line with its corners rounded to the bend radius.
* :func:`gravity_stage` - coarse-to-fine levels on the gravity-normal time, then stronger
  penalties while a limit is still broken: the gravity-normal optimum.  Its first level's
  vertex distribution and its limit checks use the speeds of a given model: with the
  gravity-normal model it is the very line a gravity-normal run returns.
* :func:`polish_stage` - the full-model polish, coarse to fine again from the gravity
  optimum: one polished line per level.
* :func:`polish_start_line` - the same polish from the (rounded) start line, with stronger
  penalties while a limit is broken: a second seed beside the gravity optimum.
* :func:`repair_radius` - a refined line left with a few too tight bends, smoothed locally.

A stage that cannot run says why (``error``); it never raises on numbers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..geometry import circumradii
from ..loads import required_radius_m
from .chain import full_chain
from .fields import curvature
from .problem import Problem
from .shape import fillet_plan, monitor, refine_density, resample, resample_smooth
from .solve import STAT_TOL_COARSE, polish, solve

__all__ = ["Plan", "GravityRun", "PolishRun", "rounded_start", "repair_radius", "gravity_stage", "polish_stage",
           "polish_start_line"]

#: full-model polish: iteration budget of a level, in vertex-iterations
_POLISH_BUDGET = 20_000
#: relative gain of the polish on the coarsest level below which only the finest line is
#: polished (the gravity optimum is then already close to the full-model one)
_POLISH_GAIN = 1e-3
#: why the gravity stage cannot start from a line whose interior is off the smooth surface
OFF_SURFACE = ("the start line runs where the smooth ground surface is undefined (within one cell of "
               "nodata or of the grid's edge): the refinement needs heights and slopes of the bicubic "
               "surface at every vertex")


@dataclass(frozen=True)
class Plan:
    """How the stages run: vertices per level (coarse to fine), the time/length blend of
    the vertex distribution, the iteration cap per level and the gradient tolerance."""

    sizes: tuple
    blend: float
    max_iter: int
    gtol: float


@dataclass
class GravityRun:
    """The gravity stage's line (None when it could not run, ``error`` says why)."""

    line: np.ndarray | None
    error: str | None = None
    iterations: int = 0
    converged: bool = False
    residual: float = math.inf
    notes: list = field(default_factory=list)


@dataclass
class PolishRun:
    """The polished lines, finest first: ``(name, line, converged, residual)`` with each
    level's own optimiser status (its stationarity test passed) and projected-gradient
    residual (s/m); iterations; the finest level's status and residual; the full-model
    time of the gravity optimum it started from."""

    lines: list
    iterations: int
    ok: bool
    residual: float
    t_gravity: float


def raised_heights(xy: np.ndarray, zg: np.ndarray, prob: Problem, h0: float, h1: float) -> np.ndarray:
    """Heights of a raised line: above the ground by ``h0`` at the start to ``h1`` at the
    end, linear in plan length, clipped to the clearance band."""
    seg = np.hypot(*np.diff(xy, axis=0).T)
    frac = np.concatenate([[0.0], np.cumsum(seg)])
    frac = frac / frac[-1] if frac[-1] > 0 else np.linspace(0, 1, len(frac))
    return zg + np.clip(float(h0) + (float(h1) - float(h0)) * frac, prob.c_min, prob.c_max)


def rounded_start(prob: Problem, P_start: np.ndarray, r_min: float, h0: float, h1: float) -> np.ndarray | None:
    """The start line with its corners replaced by arcs (:func:`fillet_plan`) so that the 3D
    circumradius of consecutive vertices is at least ``r_min`` where the geometry allows;
    the arc radius is raised when the terrain's own curvature (or the slope's
    foreshortening) tightens the 3D bend.  None when the rounded line leaves the surface."""
    f = 1.02
    best = None
    for _ in range(5):
        xy, rad = fillet_plan(P_start[:, :2], r_min * f, prob.cell)
        zg = prob.gr.z(xy[:, 0], xy[:, 1])
        if not np.all(np.isfinite(zg)):
            return best
        z = zg if prob.line == "ground" else raised_heights(xy, zg, prob, h0, h1)
        P = np.column_stack([xy, z])
        P[0], P[-1] = P_start[0], P_start[-1]
        # the penalty's own measure of the 3D radius (equal to geometry.circumradii to
        # rounding): the radius-limited optimisation is chaotic, and this keeps the
        # rounded start, and so every result after it, to the bit
        r3 = 1.0 / max(float(np.max(curvature(P[:-2], P[1:-1], P[2:]))), 1e-300)
        best = P
        if r3 >= r_min * (1 + 2e-3) or rad < r_min * f * (1 - 1e-6):
            break  # met, or the room between corners is what limits it
        f *= max(1.05, 1.02 * r_min / r3)
    return best


def repair_radius(prob: Problem, P: np.ndarray | None, P_start: np.ndarray, sweeps: int = 400,
                  rounds: int = 4, model: str | None = None) -> np.ndarray | None:
    """A refined line whose bends are too tight, repaired: the penalty leaves a few tight
    triples, smoothed out locally.  Each vertex needs the radius of
    :func:`fallway.loads.required_radius_m` at its speed (the bend radius limit, and the
    lateral g, normal g and lift-off limits at the speeds of the mover's model).  The
    vertices whose circumradius (with their two neighbours, :func:`fallway.geometry.circumradii`
    in 3D) is below it (plus a 0.2 % margin) and their neighbours move halfway to the
    midpoint of their neighbours, which spreads the bend over more vertices; ends stay
    fixed, heights follow the ground (or the clearance band).  Speeds change with the
    line, so the required radii are measured again after each round of sweeps (at most
    ``rounds``).  Speeds with ``model`` (default the mover's own).  A line that breaks no
    bend limit (or None) is returned as it is."""
    lim = prob.limits
    bend = ("min_radius", "lateral_g", "normal_g", "liftoff")
    model = prob.mover.normal if model is None else model
    if P is None or (lim.min_radius_m is None and not lim.speed_aware):
        return P
    for _ in range(rounds):
        if not any(prob.violations(P, model).get(k) == "violated" for k in bend):
            break
        v = np.sqrt(np.maximum(prob.speeds(P, model), 0.0))
        need = required_radius_m(P, v, lim, g=prob.mover.g, surface_normal=prob.bed_normals(P))
        P = P.copy()
        for _ in range(sweeps):
            bad = np.nonzero(circumradii(P, dims=3) < need * (1 + 2e-3))[0] + 1
            if bad.size == 0:
                break
            idx = np.unique(np.clip(np.concatenate([bad - 1, bad, bad + 1]), 1, len(P) - 2))
            Q = P.copy()
            Q[idx] += 0.5 * (0.5 * (P[idx - 1] + P[idx + 1]) - P[idx])
            if prob.line == "ground":
                Q[idx, 2] = prob.gr.z(Q[idx, 0], Q[idx, 1])
            P = prob.project(Q, P_start)
    return P


def _first_level(prob: Problem, P_seed, P_start, plan: Plan, model: str):
    """The first level's line: the seed resampled finely, its vertices then re-distributed
    by the time/length monitor of the speeds with ``model``; None off the surface."""
    smooth = prob.round_bends
    n0 = plan.sizes[0]
    if smooth:
        P = resample_smooth(P_seed, max(len(P_seed), 4 * n0))
    else:
        P = resample(P_seed, max(len(P_seed) * 4, 4 * n0))
    P = prob.project(P, P_start)
    if not np.all(np.isfinite(P)):
        return None
    u = prob.speeds(P, model)
    P = prob.project((resample_smooth if smooth else resample)(P, n0, monitor(P, u, plan.blend)), P_start)
    return P if np.all(np.isfinite(P)) else None


def gravity_stage(prob: Problem, P_seed: np.ndarray, P_start: np.ndarray, plan: Plan, model: str) -> GravityRun:
    """Coarse-to-fine L-BFGS-B on the gravity-normal time, penalties strengthened while a
    limit is broken, tight bends repaired.

    ``model`` (``"gravity"`` or ``"full"``) gives the speeds of the first level's vertex
    distribution and of the limit checks between rounds: with ``"gravity"`` the line is
    the gravity-normal optimum of a gravity-normal run; ``"full"`` seeds it with the full
    model's speeds (often the better start for the polish, sometimes a worse local optimum).
    """
    P = _first_level(prob, P_seed, P_start, plan, model)
    if P is None:
        return GravityRun(None, OFF_SURFACE)
    run = GravityRun(P)
    smooth = prob.round_bends
    for li, n in enumerate(plan.sizes):
        if li > 0:
            Pn = prob.project(refine_density(P, n, smooth), P_start)
            if not np.all(np.isfinite(Pn)):
                run.notes.append(f"level {li + 1} ({n} vertices) not run: its resampled line leaves the smooth "
                                 f"ground surface; the level {li} line is kept")
                break
            P = Pn
        # a level before the last only has to give the next one its shape: a looser
        # stationarity test there (the slow tangential sliding of its vertices is redone
        # on the finer level anyway)
        last = li == len(plan.sizes) - 1
        prob.update_bends(P, model)
        P, it, res, ok, msg = solve(prob, P, plan.max_iter, plan.gtol, stat_tol=None if last else STAT_TOL_COARSE)
        run.iterations += it
        run.converged, run.residual = ok, res
        if not ok and last:
            run.notes.append(f"level {li + 1} ({n} vertices): {msg}")
    w0 = prob.w_pen
    P = _strengthen(prob, P, plan, run, model)
    run.line = _resolve_repaired(prob, P, P_start, plan, run, model, w0)
    return run


#: rounds of repair and re-solve after the strengthened penalties (gravity stage)
_REPAIR_ROUNDS = 3
_BENDS = ("min_radius", "lateral_g", "normal_g", "liftoff")


def _resolve_repaired(prob: Problem, P: np.ndarray, P_start: np.ndarray, plan: Plan, run: GravityRun, model: str,
                      w0: float) -> np.ndarray:
    """While the line still breaks a bend limit: repair it (:func:`repair_radius`), freeze
    the required radii of the repaired line and solve again from it at the stage's own
    penalty weight (then stronger ones).  The curvature penalty is a barrier the solver
    cannot cross: a loop (the lattice's detour to a via point, or a fold left by a level)
    must tighten before it can shrink, so the solver stays on it; the repair's smoothing
    crosses it, and the re-solve makes the repaired line stationary again with the limits
    held at the new speeds (a repaired line alone often misses them: straightening a bend
    raises its speed).  The line comes from the solver unless no round ran."""
    for _ in range(_REPAIR_ROUNDS):
        if not any(prob.violations(P, model).get(k) == "violated" for k in _BENDS):
            break
        Q = repair_radius(prob, P, P_start, model=model)
        if Q is P or not np.all(np.isfinite(Q)):
            break
        prob.w_pen = w0
        prob.update_bends(Q, model)
        P, it, res, ok, _ = solve(prob, Q, plan.max_iter, plan.gtol)
        run.iterations += it
        run.converged, run.residual = ok, res
        P = _strengthen(prob, P, plan, run, model)
    return P


def _stiffen(prob: Problem, P: np.ndarray, model: str) -> bool:
    """When ``P`` breaks a limit: a wider keep-out margin (x4) for the keep-out, a heavier
    penalty weight (x100) for any other, the required radii frozen from ``P``; True.
    False (nothing changed) when it breaks none."""
    viol = prob.violations(P, model)
    if not any(v == "violated" for v in viol.values()):
        return False
    if viol.get("keepout") == "violated":
        # a segment cuts a corner between the sampled points: keep a wider berth
        prob.margin *= 4.0
    if any(v == "violated" for k, v in viol.items() if k != "keepout"):
        prob.w_pen *= 100.0
    prob.update_bends(P, model)
    return True


def _strengthen(prob: Problem, P: np.ndarray, plan: Plan, run: GravityRun, model: str) -> np.ndarray:
    """Stronger penalties while a limit is still violated (at most four rounds)."""
    for _ in range(4):
        if not _stiffen(prob, P, model):
            break
        P, it, res, ok, msg = solve(prob, P, plan.max_iter, plan.gtol)
        run.iterations += it
        run.converged, run.residual = ok, res
    return P


def _full_time(prob: Problem, P: np.ndarray) -> float:
    mv = prob.mover
    return full_chain(P, mv.v0 ** 2, mv.g, mv.mu, mv.drag, 0.0, -1.0, -1.0, False)[0]


def polish_stage(prob: Problem, P: np.ndarray, P_start: np.ndarray, plan: Plan) -> PolishRun:
    """The full-model polish, coarse to fine: each level starts from the previous level's
    polished line with its vertex density kept.  When the first level gains less than
    ``_POLISH_GAIN`` only the finest line is polished, from the gravity optimum.  Every
    level's polished line is kept (on a long line whose finest level stops at its budget a
    coarser level can be faster); a ground line's coarser level counts only with vertices
    at most two cells apart (a longer chord bridges or cuts the terrain between its ends)."""
    t_grav = _full_time(prob, P)
    Pf, iters, ok, res, gain0 = None, 0, True, math.inf, 1.0
    levels = []  # (level index, line)
    sizes = plan.sizes
    for li, n in enumerate(sizes):
        if li == 1 and gain0 < _POLISH_GAIN:
            cap = max(50, min(plan.max_iter, _POLISH_BUDGET // max(len(P), 1)))
            prob.update_bends(P, "full")
            Pf, it, res, ok, _ = polish(prob, P, cap, plan.gtol, (0.0,))
            iters += it
            levels.append((len(sizes) - 1, Pf, ok, res))
            break
        Pn = prob.project(refine_density(P if Pf is None else Pf, n, True), P_start)
        if Pf is None and n == len(P):
            Pn = P
        # the smoothing continuation on the first level only; later levels start close to
        # their optimum and get an iteration budget by size
        cap = max(50, min(plan.max_iter, _POLISH_BUDGET // max(n, 1)))
        t0 = _full_time(prob, Pn) if li == 0 else None
        prob.update_bends(Pn, "full")
        Pn, it, res, ok, _ = polish(prob, Pn, cap, plan.gtol, (0.1, 0.01, 0.0) if li == 0 else (0.0,))
        if li == 0:
            t1 = _full_time(prob, Pn)
            gain0 = (t0 - t1) / t0 if math.isfinite(t0) and math.isfinite(t1) else 1.0
        iters += it
        Pf = Pn
        levels.append((li, Pn, ok, res))
    finest = len(levels) - 1
    lines = []
    for i, (li, L, ok_i, res_i) in enumerate(levels):
        if i == finest:
            lines.append(("full polish", L, ok_i, res_i))
            continue
        spacing = float(np.sum(np.hypot(*np.diff(L[:, :2], axis=0).T))) / max(len(L) - 1, 1)
        if prob.line != "ground" or spacing <= 2.0 * prob.cell:
            lines.append((f"full polish, level {li + 1} of {len(sizes)} ({len(L)} vertices)", L, ok_i, res_i))
    return PolishRun(lines[::-1], iters, ok, res, t_grav)


#: rounds of stronger penalties after the polish of the start line
_POLISH_ROUNDS = 3


def polish_start_line(prob: Problem, P_seed: np.ndarray, P_start: np.ndarray, plan: Plan) -> PolishRun:
    """The full-model polish from the start line (rounded when there is a bend limit)
    instead of the gravity optimum, then stronger penalties on its finest line while a
    limit is still broken (as the gravity stage's rounds: keep-out margin x4, penalty
    weight x100; at most three rounds of up to ``plan.max_iter`` iterations each: a
    stiffer penalty is a worse-conditioned problem).

    A second seed for the polish.  The gravity stage runs at gravity-normal speeds, which
    miss the friction of the bends: under a speed cap it is held to the cap at those
    speeds, its line is too slow and can stall under the full model, and its polish with
    it.  The start line already runs at the full model's speeds."""
    run = polish_stage(prob, P_seed, P_start, plan)
    name, L, ok, res = run.lines[0]
    iters = run.iterations
    for _ in range(_POLISH_ROUNDS):
        if not _stiffen(prob, L, "full"):
            break
        L, it, res, ok, _ = polish(prob, L, plan.max_iter, plan.gtol, (0.0,))
        iters += it
    return PolishRun([(name, L, ok, res)] + run.lines[1:], iters, ok, res, run.t_gravity)
