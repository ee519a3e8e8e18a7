"""The clearance of a raised line along its whole length, not only at its vertices.

A raised line is a chain of straight segments; between two vertices the ground can rise
into a segment (a chord across a ridge) or fall away from it (a chord over a gully).  Every
check of the clearance band therefore samples each segment at plan steps of at most half a
cell (:func:`sample_segments`), with the ground the terrain's smooth surface
(:meth:`fallway.Terrain.sample`, the one ground surface every reported height uses).  The
band is held to :data:`CLEARANCE_TOL_M`.

Used by the one limit check (:func:`fallway.evaluate.limit_issues`, limit ``"clearance"``),
the route summary (smallest and largest clearance and their stations) and the refinement's
penalty (:mod:`fallway.refine.problem`).
"""

from __future__ import annotations

import numpy as np

__all__ = ["CLEARANCE_TOL_M", "sample_segments", "clearance_along", "clearance_extremes", "outside_band"]

#: Tolerance of the clearance band along a reported line, metres: a few centimetres, below
#: what a survey of the ground or the build of a trestle resolves.
CLEARANCE_TOL_M = 0.03


def sample_segments(line, step_m: float):
    """Points along every segment of ``line`` at plan steps of at most ``step_m``.

    Returns
    -------
    (Q, seg, frac)
        ``Q`` (M, 3) the sample points (every vertex included, in order), ``seg`` the
        segment index of each (the last vertex belongs to the last segment) and ``frac``
        its position along the segment (0 at its first vertex, 1 at the last vertex).

    Examples
    --------
    >>> Q, seg, frac = sample_segments([(0, 0, 10), (2, 0, 8), (2.5, 0, 8)], 1.0)
    >>> Q[:, 0].tolist(), seg.tolist()
    ([0.0, 1.0, 2.0, 2.5], [0, 0, 1, 1])
    """
    P = np.asarray(line, dtype=float)
    d = np.diff(P, axis=0)
    plan = np.hypot(d[:, 0], d[:, 1])
    n = np.maximum(1, np.ceil(plan / float(step_m) - 1e-9).astype(int))
    seg = np.repeat(np.arange(len(d)), n)
    start = np.concatenate([[0], np.cumsum(n)[:-1]])
    frac = (np.arange(int(n.sum())) - np.repeat(start, n)) / np.repeat(n, n)
    seg = np.append(seg, len(d) - 1)
    frac = np.append(frac, 1.0)
    Q = P[seg] + frac[:, None] * d[seg]
    return Q, seg, frac


def clearance_along(terrain, line, step_m: float | None = None):
    """Stations (3D, m from the start) and clearance above the smooth ground (m) along ``line``,
    sampled at plan steps of at most ``step_m`` (default half a cell).

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(np.zeros((8, 8)), (1.0, 0, 0, 0, -1.0, 8.0))
    >>> s, h = clearance_along(t, [(0.5, 4.0, 5.0), (6.5, 4.0, 2.0)])
    >>> len(h), float(h.min()), float(h.max())
    (13, 2.0, 5.0)
    """
    P = np.asarray(line, dtype=float)
    step = 0.5 * terrain.cell_size if step_m is None else float(step_m)
    Q, seg, frac = sample_segments(P, step)
    seg_len = np.linalg.norm(np.diff(P, axis=0), axis=1)
    station = np.concatenate([[0.0], np.cumsum(seg_len)])[seg] + frac * seg_len[seg]
    h = Q[:, 2] - np.asarray(terrain.sample(Q[:, 0], Q[:, 1]), dtype=float).ravel()
    return station, h


def clearance_extremes(terrain, line, step_m: float | None = None) -> dict:
    """Smallest and largest clearance along ``line`` and their stations (m); None where
    the ground is undefined at every sample.

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(np.zeros((8, 8)), (1.0, 0, 0, 0, -1.0, 8.0))
    >>> e = clearance_extremes(t, [(0.5, 4.0, 5.0), (6.5, 4.0, 2.0)])
    >>> e["min_clearance_m"], round(e["min_clearance_station_m"], 3), e["max_clearance_station_m"]
    (2.0, 6.708, 0.0)
    """
    s, h = clearance_along(terrain, line, step_m)
    ok = np.isfinite(h)
    if not ok.any():
        return dict(min_clearance_m=None, min_clearance_station_m=None, max_clearance_m=None,
                    max_clearance_station_m=None)
    i = int(np.flatnonzero(ok)[np.argmin(h[ok])])
    j = int(np.flatnonzero(ok)[np.argmax(h[ok])])
    return dict(min_clearance_m=float(h[i]), min_clearance_station_m=float(s[i]), max_clearance_m=float(h[j]),
                max_clearance_station_m=float(s[j]))


def outside_band(terrain, line, clearance_m, tol_m: float = CLEARANCE_TOL_M, step_m: float | None = None) -> bool:
    """True when some sample of ``line`` (half-cell plan steps) lies more than ``tol_m``
    outside the band ``clearance_m = (min, max)`` above the smooth ground, or over no
    ground at all.

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> z = np.zeros((8, 8)); z[:, 4] = 3.0        # a 3 m wall across the line
    >>> t = Terrain.from_array(z, (1.0, 0, 0, 0, -1.0, 8.0))
    >>> line = [(0.5, 4.0, 2.5), (7.5, 4.0, 2.5)]   # 2.5 m up at both vertices ...
    >>> outside_band(t, line[:1] + [(2.5, 4.0, 2.5)], (1.0, 5.0))
    False
    >>> outside_band(t, line, (1.0, 5.0))           # ... but the wall is in the way
    True
    """
    lo, hi = (float(v) for v in clearance_m)
    _, h = clearance_along(terrain, line, step_m)
    return bool(np.any(~np.isfinite(h)) or np.any(h < lo - tol_m) or np.any(h > hi + tol_m))
