"""Continuous refinement: the discrete Euler–Lagrange optimum of a descent line.

The lattice line is resampled and its interior vertices move continuously until the
travel time is stationary, ∂T/∂xᵢ = 0 — the discrete Euler–Lagrange equations of the
time functional on a polyline.  :func:`refine_line` is the entry; the package holds

* :mod:`~fallway.refine.chain` - the compiled chains: gravity-normal time and its adjoint
  gradient, full-model time and its adjoint, a ground line's whole objective in one pass;
* :mod:`~fallway.refine.fields`, :mod:`~fallway.refine.problem` - the optimisation
  problem: variables and bounds, exterior penalties (keep-out and nodata distance fields,
  grade, bend radius), the limit checks;
* :mod:`~fallway.refine.solve`, :mod:`~fallway.refine.shape`,
  :mod:`~fallway.refine.stages` - L-BFGS-B with restarts, the resampling between
  coarse-to-fine levels, and the stages: rounded start, gravity-normal levels with
  penalty strengthening and radius repair, full-model polish;
* :mod:`~fallway.refine.choose` - the one rule that picks the returned line among the
  candidates: the fastest that meets the limits.

Vertex placement is part of the problem: plan positions are free, so vertices slide along
the line, and between levels they are re-distributed so that each segment takes a
similar share of a blend of time and length.  Limits enter as exterior quadratic
penalties with a small safety margin and are verified on every candidate.

Full normal-force model (``Mover(normal="full")``): after the gravity-normal optimum a
polish minimises the full model's time itself, vertices moving normal to the line only
(free tangential motion lets the optimiser bunch vertices so that the discrete curvature
undercharges a bend), with the kink of the friction of a vertical free fall smoothed
(plan length sqrt(plan² + eps²), eps lowered to 0).
"""

from ..results import RefineCandidate, RefineResult
from .api import refine_line

__all__ = ["refine_line", "RefineResult", "RefineCandidate"]
