"""Constraints on a line: grade window, turn and bend limits, no-go areas.

(Parameter types; keep-out reading and rasterising are filled in by the lattice work.)
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .errors import ParameterError

__all__ = ["Limits"]


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
    max_turn_deg : float or None
        Largest change of plan heading between consecutive lattice steps, degrees.
    min_radius_m : float or None
        Smallest bend radius of the refined line, metres.

    Examples
    --------
    >>> Limits(min_grade=0.05, max_grade=0.6).min_grade
    0.05
    >>> Limits(min_grade=0.5, max_grade=0.1)
    Traceback (most recent call last):
    ...
    fallway.errors.ParameterError: min_grade (0.5) must not exceed max_grade (0.1)
    """

    min_grade: float = -math.inf
    max_grade: float = math.inf
    max_turn_deg: float | None = None
    min_radius_m: float | None = None

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
        if self.max_turn_deg is not None:
            v = float(self.max_turn_deg)
            if not (0.0 < v <= 180.0):
                raise ParameterError(f"max_turn_deg must be in (0, 180], got {self.max_turn_deg!r}")
            object.__setattr__(self, "max_turn_deg", v)
        if self.min_radius_m is not None:
            v = float(self.min_radius_m)
            if not (math.isfinite(v) and v > 0.0):
                raise ParameterError(f"min_radius_m must be a finite number > 0, got {self.min_radius_m!r}")
            object.__setattr__(self, "min_radius_m", v)
