"""Motion of a point mass along a 3D line: gravity, Coulomb friction, drag, curvature.

(Parameter and result types; ``traverse`` is filled in by the motion-model work.)
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import ParameterError

__all__ = ["Mover", "Profile", "STANDARD_GRAVITY"]

#: Standard acceleration of gravity, m/s² (3rd CGPM, 1901).
STANDARD_GRAVITY = 9.80665

_NORMAL_MODELS = ("gravity", "full")


def _check_number(name: str, value, *, low: float = 0.0, allow_none: bool = False,
                  strictly_positive: bool = False) -> None:
    if value is None and allow_none:
        return
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a number, got {value!r}") from None
    if not math.isfinite(v) or v < low or (strictly_positive and v <= low):
        rng = f"> {low:g}" if strictly_positive else f">= {low:g}"
        raise ParameterError(f"{name} must be a finite number {rng}, got {value!r}")


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
        Acceleration of gravity, m/s² (standard gravity by default).
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
        _check_number("mu", self.mu)
        _check_number("drag", self.drag)
        _check_number("v0", self.v0)
        _check_number("g", self.g, strictly_positive=True)
        _check_number("stall_speed", self.stall_speed)
        _check_number("max_speed", self.max_speed, allow_none=True, strictly_positive=True)
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
        _check_number("cda_m2", cda_m2)
        _check_number("mass_kg", mass_kg, strictly_positive=True)
        _check_number("air_density", air_density)
        return cls(drag=air_density * cda_m2 / (2.0 * mass_kg), **kwargs)


@dataclass(frozen=True, eq=False)
class Profile:
    """Motion along a line, one entry per vertex.

    Attributes
    ----------
    points : ndarray (N, 3)
        The vertices x, y, z (m) the profile was computed on.
    station_m : ndarray (N,)
        Distance along the 3D line from the start.
    speed_m_s : ndarray (N,)
        Speed at each vertex (NaN after a stall).
    time_s : ndarray (N,)
        Cumulative time at each vertex (NaN after a stall).
    grade : ndarray (N,)
        Descent grade (drop / plan length) of the segment that *leaves* each vertex
        (the last entry repeats the last segment's); positive downhill.
    normal_ratio : ndarray (N,)
        Normal force over g at each vertex.
    stalled_at_m : float or None
        Station where the mover stalls, or None.
    liftoff : ndarray of float
        Stations where an open chute would need a pulling normal force (convex crest).
    overspeed : ndarray of float
        Stations where the speed exceeds ``Mover.max_speed``.
    """

    points: np.ndarray
    station_m: np.ndarray
    speed_m_s: np.ndarray
    time_s: np.ndarray
    grade: np.ndarray
    normal_ratio: np.ndarray
    stalled_at_m: float | None
    liftoff: np.ndarray
    overspeed: np.ndarray

    @property
    def feasible(self) -> bool:
        """True when the mover reaches the end."""
        return self.stalled_at_m is None

    @property
    def travel_time_s(self) -> float:
        """Time to the end (inf after a stall)."""
        return float(self.time_s[-1]) if self.feasible else math.inf

    @property
    def exit_speed_m_s(self) -> float:
        """Speed at the end (NaN after a stall)."""
        return float(self.speed_m_s[-1])
