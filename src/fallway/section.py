"""The vertical section under a straight raised line (``LineSpec(straight_plan=True)``).

A raised line that cannot turn (a straight trestle or flume) has its plan fixed: the
straight segment from start to end.  Only its vertical profile is free.  The search and
the refinement then work on the *section*: the smooth ground sampled along the segment
every half cell (:meth:`fallway.Terrain.sample`; bilinear within two cells of nodata),
laid out as a small terrain of :data:`SECTION_ROWS` identical rows in local coordinates
``(u, v)`` (u along the line from the start, v across it, the line on the middle row
``v = 0``).  Across the rows the ground is level, so the search's corridor of half a
section cell keeps it on the middle row, and the refinement has no reason to leave it
(any sideways step only lengthens the line); its vertices are put back on ``v = 0`` to
the last bit before they are mapped back onto the map (:meth:`Section.to_map`).  A
raised line's time depends only on its own geometry, so times on the section are the
times on the map; its clearance is judged again on the map's own surface by the route's
one limit check.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .terrain import Terrain

__all__ = ["Section", "make_section", "SECTION_ROWS"]

#: Rows of the section terrain (identical; the line runs on the middle one).
SECTION_ROWS = 5


@dataclass(frozen=True, eq=False)
class Section:
    """The section terrain and its placement on the map.

    Attributes
    ----------
    terrain : Terrain
        The section in local coordinates (u, v), metres; no CRS.
    origin : (float, float)
        Map coordinates of the start (u = 0, v = 0).
    direction : (float, float)
        Unit plan vector from start to end.
    length_m : float
        Plan distance start -> end (the end is at u = length_m).
    """

    terrain: Terrain
    origin: tuple
    direction: tuple

    length_m: float

    def to_map(self, P) -> np.ndarray:
        """Local (u, v, z) vertices -> map (x, y, z), each put on the line (v = 0) first."""
        P = np.asarray(P, dtype=float)
        ux, uy = self.direction
        u = P[:, 0]
        return np.column_stack([self.origin[0] + u * ux, self.origin[1] + u * uy, P[:, 2]])

    def to_local(self, P) -> np.ndarray:
        """Map (x, y, z) vertices -> local (u, v, z)."""
        P = np.asarray(P, dtype=float)
        ux, uy = self.direction
        dx = P[:, 0] - self.origin[0]
        dy = P[:, 1] - self.origin[1]
        return np.column_stack([dx * ux + dy * uy, -dx * uy + dy * ux, P[:, 2]])


def make_section(terrain, start, end, spacing_m: float | None = None) -> Section:
    """The section under the straight plan line ``start`` -> ``end`` (module notes).

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> z = np.add.outer(np.zeros(20), 0.5 * np.arange(20.0))      # rising eastwards 0.5 m per m
    >>> t = Terrain.from_array(z, (1.0, 0, 0, 0, -1.0, 20.0))
    >>> sec = make_section(t, (2.5, 10.5), (14.5, 10.5))
    >>> sec.length_m, sec.terrain.shape[0]
    (12.0, 5)
    >>> float(sec.terrain.sample(np.array([6.0]), np.array([0.0]))[0])   # 6 m along: x = 8.5, z = 4
    4.0
    >>> sec.to_map([[6.0, 0.0, 9.0]]).tolist()
    [[8.5, 10.5, 9.0]]
    """
    x0, y0 = (float(v) for v in start)
    x1, y1 = (float(v) for v in end)
    D = math.hypot(x1 - x0, y1 - y0)
    ds = 0.5 * terrain.cell_size if spacing_m is None else float(spacing_m)
    ux, uy = (x1 - x0) / D, (y1 - y0) / D
    n = int(math.ceil(D / ds)) + 3
    u = -ds + ds * np.arange(n)
    x, y = x0 + u * ux, y0 + u * uy
    zg = np.asarray(terrain.sample(x, y), dtype=float).ravel()
    lin = np.asarray(terrain.sample_linear(x, y), dtype=float).ravel()
    zg = np.where(np.isfinite(zg), zg, lin)
    z = np.tile(zg, (SECTION_ROWS, 1))
    half = SECTION_ROWS / 2.0
    sec = Terrain.from_array(z, (ds, 0.0, -1.5 * ds, 0.0, -ds, half * ds))
    return Section(terrain=sec, origin=(x0, y0), direction=(ux, uy), length_m=D)
