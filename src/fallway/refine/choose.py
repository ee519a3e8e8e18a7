"""The one place that picks the refinement's line among its candidates.

Rule: **the fastest line that meets the limits** - the mover gets through (with the
route's own normal-force model) and no limit's status is ``"violated"``.  Every candidate
is timed with :func:`fallway.physics.traverse` and judged by
:meth:`fallway.refine.problem.Problem.violations` with that model.  At equal times a
refined line goes before the rounded start, and that before the start line.  When no
candidate meets the limits, the one breaking the fewest limits (then the fastest) is
returned with a :class:`~fallway.errors.RefinementWarning` and its broken limits'
status ``"violated"``.  Candidates whose stage failed are reported with the cause.
:func:`improves` tells the caller whether any candidate so far beats the start line (with
the full model, when none does, a gravity-normal run's optimum is made and added).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from ..errors import RefinementWarning
from ..physics import Mover, Profile, traverse
from ..results import RefineCandidate, RefineResult
from .problem import Problem
from .stages import GravityRun, PolishRun

__all__ = ["Candidate", "judge", "improves", "choose"]


@dataclass
class Candidate:
    """A line to choose from (``line`` None when its stage failed: ``error`` says why).

    ``refined``: made by the optimiser (a gravity optimum or a polished line), as opposed
    to the start line and its rounded version; ``run``: the gravity stage it comes from.
    ``converged``: the solver that made this line stopped on its stationarity test (not on
    an iteration cap); ``repaired``: its bends were eased after the solver (so the line is
    no stationary point); ``laid``: a ground line laid on the ground after the solver, where
    a long chord strayed from it (no stationary point either); ``residual``: that solver's
    largest projected-gradient component, s/m.  ``judge`` fills ``profile``, ``status`` and
    ``meets``.
    """

    name: str
    line: np.ndarray | None
    error: str | None = None
    refined: bool = False
    run: GravityRun | None = None
    converged: bool = False
    residual: float = math.inf
    repaired: bool = False
    laid: bool = False
    profile: Profile | None = field(default=None, init=False)
    status: dict = field(default_factory=dict, init=False)
    meets: bool = field(default=False, init=False)
    judged: bool = field(default=False, init=False)

    @classmethod
    def refined_line(cls, name: str, solved, line, converged: bool, residual: float, run, error=None) -> "Candidate":
        """A line made by a solver (``solved``) and then perhaps repaired (``line``): a
        repaired line is not the solver's stationary point, so it is not converged."""
        repaired = line is not None and solved is not None and line is not solved
        return cls(name, line, error, True, run, bool(converged), float(residual), repaired)

    def judge(self, prob: Problem, mover: Mover) -> None:
        """Time and limit status with the route's model (``profile``, ``status``, ``meets``)."""
        self.judged = True
        if self.line is None:
            return
        self.profile = traverse(self.line, mover)
        self.status = prob.violations(self.line, mover.normal)
        self.meets = bool(self.profile.feasible) and not self.broken()

    def broken(self) -> list:
        return [k for k, v in self.status.items() if v == "violated"]

    @property
    def time(self) -> float:
        return self.profile.travel_time_s if self.profile is not None else math.inf

    def rank(self) -> int:
        return 0 if self.refined else (1 if self.name == "rounded" else 2)

    def record(self) -> RefineCandidate:
        t = self.time
        return RefineCandidate(self.name, t if math.isfinite(t) else None, self.meets, tuple(self.broken()),
                               self.error)


def judge(prob: Problem, cands: list, mover: Mover) -> None:
    """Time and judge every candidate not judged yet."""
    for c in cands:
        if not c.judged:
            c.judge(prob, mover)


def improves(cands: list) -> bool:
    """True when a judged candidate that meets the limits is faster than the start line."""
    start = next(c for c in cands if c.name == "start")
    return any(c.meets and c.time < start.time for c in cands)


def choose(prob: Problem, cands: list, mover: Mover, pol: PolishRun | None) -> RefineResult:
    """The fastest candidate that meets the limits, as a :class:`RefineResult` (see the module notes)."""
    judge(prob, cands, mover)
    start = next(c for c in cands if c.name == "start")
    lines = [c for c in cands if c.line is not None]
    good = [c for c in lines if c.meets]
    runs = list({id(c.run): c.run for c in cands if c.run is not None}.values())
    iters = sum(r.iterations for r in runs) + (pol.iterations if pol is not None else 0)
    if good:
        best = min(good, key=lambda c: (c.time, c.rank()))
    else:
        fin = [c for c in lines if math.isfinite(c.time)] or lines
        best = min(fin, key=lambda c: (len(c.broken()), c.time, c.rank()))
    run = best.run if best.run is not None else (runs[0] if runs else GravityRun(None))
    notes = list(run.notes) + _polish_notes(cands, pol)
    if good:
        msg = _message(best, start, cands, iters, notes)
        if best.refined and best.laid:
            msg += "; not converged: laid on the ground after the solver, where a long chord strayed from it"
        if best.refined and best.repaired:
            # the bends were eased to the radius limit after the solver (repair_radius): a
            # line that meets the limits, but no stationary point
            msg += "; not converged: bends eased to the radius limit after the solver"
        if best.refined and not best.converged:
            warnings.warn(f"refinement did not converge (stopped before its stationarity test passed, residual "
                          f"{best.residual:.3g} s/m); returning the best line found", RefinementWarning, stacklevel=3)
    else:
        bad = best.broken() or (["speed window / stall"] if not best.profile.feasible else [])
        msg = (f"no line meeting the limits was found; returning the {best.name} line, which breaks "
               f"{', '.join(bad)} ({_time_text(start.time)} -> {_time_text(best.time)})")
        warnings.warn(msg, RefinementWarning, stacklevel=3)
    polish_note = next((n for n in notes if n.startswith("full-model polish")), "")
    converged = bool(best.refined and good and best.converged and not best.repaired and not best.laid)
    residual = best.residual if best.refined else run.residual
    return RefineResult(best.line.copy(), best.profile, iters, residual, converged, start.time, best.time, msg,
                        best.status, polish_note, best.name, tuple(c.record() for c in cands))


def _time_text(time_s: float) -> str:
    """A line's time for a message: seconds, or "stalls" for a line the mover does not finish."""
    return f"{time_s:.6f} s" if np.isfinite(time_s) else "stalls"


def _message(best: Candidate, start: Candidate, cands: list, iters: int, notes: list) -> str:
    refined = [c for c in cands if c.refined and c.line is not None]
    if best is start:
        if not refined:
            failed = next((c for c in cands if c.refined and c.error), None)
            why = f"the refinement could not run ({failed.error})" if failed else "no refined line"
        else:
            ok = [c for c in refined if c.meets]
            why = (f"the refined line is not faster ({min(c.time for c in ok):.6g} s vs {start.time:.6g} s)" if ok
                   else "the refined line breaks a limit: " + ", ".join(_first_broken(refined)))
        return f"kept the start line: {why}"
    active = [k for k, v in best.status.items() if v == "active"]
    if best.name == "gravity optimum, full-model timed":
        what = ("refined on the gravity-normal model and timed with the full model (the full-model stages "
                "gained nothing):")
    elif best.refined:
        what = "refined"
    else:
        what = ("kept the start line with its corners rounded (the refined line breaks a limit: "
                + ", ".join(_first_broken(refined)) + ");")
    msg = (f"{what} {len(best.line)} vertices in {iters} iterations: {start.time:.6f} s -> {best.time:.6f} s"
           + (f"; active limits: {', '.join(active)}" if active else ""))
    if not start.meets and best.time > start.time:
        msg += (f"; slower than the start line, which breaks {', '.join(start.broken()) or 'a limit'}: "
                f"the returned line meets the limits")
    if notes:
        msg += f"; {'; '.join(notes)}"
    return msg


def _first_broken(refined: list) -> list:
    """What the fastest refined line breaks (its stall when it breaks no limit)."""
    if not refined:
        return ["(no refined line)"]
    c = min(refined, key=lambda c: c.time)
    return c.broken() or (["speed window / stall"] if c.profile is not None and not c.profile.feasible else [])


def _polish_notes(cands: list, pol: PolishRun | None) -> list:
    """What the full-model polish achieved, in the words of the message."""
    if pol is None:
        return []
    polished = [c for c in cands if c.name.startswith("full polish") and c.line is not None]
    best = min((c for c in polished if c.meets), key=lambda c: c.time, default=None)
    if best is None or not (math.isfinite(pol.t_gravity) and best.time < pol.t_gravity):
        return ["full-model polish of the gravity-normal optimum: nothing faster than it"]
    notes = []
    finest = next((c for c in polished if c.name == "full polish"), None)
    if best is not finest and finest is not None:
        notes.append(f"the {best.name} is faster under the full model than the finest "
                     f"({best.time:.6f} s vs {finest.time:.6f} s) and is returned")
    notes.append(f"full-model polish {pol.t_gravity:.6f} s -> {best.time:.6f} s in {pol.iterations} iterations"
                 + ("" if pol.ok else f" (stopped at its iteration budget, residual {pol.residual:.2g} s/m)"))
    return notes
