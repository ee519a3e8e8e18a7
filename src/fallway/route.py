"""Result types: a lattice line, a route and a reach map."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .physics import Mover, Profile
from .limits import Limits

__all__ = ["LatticeLine", "Route", "ReachMap"]


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
    """

    cells: np.ndarray
    points: np.ndarray
    profile: Profile
    time_s: float


@dataclass(frozen=True, eq=False)
class Route:
    """A minimum-time line from start to end, with its motion and numbers.

    Attributes
    ----------
    line : ndarray (N, 3)
        The final (refined, or lattice when refinement is off) polyline x, y, z.
    profile : Profile
        ``traverse(line, mover)``: the reported motion.
    lattice : LatticeLine
        The lattice answer on its own.
    summary : dict
        Plain numbers and strings (JSON-ready): travel_time_s, lattice_time_s,
        length_m, plan_length_m, drop_m, exit_speed_m_s, max_speed_m_s,
        min_radius_m, max_grade, search and refinement statistics.
    mover, limits : Mover, Limits
        The physics and the limits the route was found with.
    """

    line: np.ndarray
    profile: Profile
    lattice: LatticeLine
    summary: dict
    mover: Mover
    limits: Limits = field(default_factory=Limits)

    @property
    def travel_time_s(self) -> float:
        """Reported travel time, seconds."""
        return float(self.summary["travel_time_s"])


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
