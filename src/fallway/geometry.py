"""Plane and space geometry of polylines: repeated vertices, resampling, bend radius.

One implementation of each measure, shared by the routing summary, the comparison of
lines and the refinement's limit checks.
"""

from __future__ import annotations

import math

import numpy as np

from .errors import ParameterError

__all__ = ["drop_repeats", "resample_plan", "circumradii", "min_radius_m", "plan_length_m", "raised_heights_m",
           "round_corners", "MAX_VERTEX_TURN_DEG", "MIN_EXPORT_SEGMENT_M"]

#: Vertices closer than this (m) are the same point.
SAME_POINT_M = 1e-6


def drop_repeats(points, tol_m: float = SAME_POINT_M) -> np.ndarray:
    """The polyline without vertices within ``tol_m`` (in all its columns) of the previous kept one.

    The last vertex is always kept (it replaces a kept vertex that repeats it).

    Examples
    --------
    >>> drop_repeats([(0, 0), (0, 0), (1, 0), (1, 1e-9)]).tolist()
    [[0.0, 0.0], [1.0, 1e-09]]
    """
    p = np.asarray(points, dtype=float)
    if len(p) <= 1:
        return p.copy()
    keep = [0]
    for i in range(1, len(p)):
        if np.linalg.norm(p[i] - p[keep[-1]]) > tol_m:
            keep.append(i)
        elif i == len(p) - 1 and len(keep) > 1:
            keep[-1] = i
    return p[keep]


def resample_plan(xy, spacing_m: float) -> np.ndarray:
    """Plan vertices at an even plan spacing of at most ``spacing_m`` along the polyline.

    Examples
    --------
    >>> resample_plan([(0, 0), (10, 0)], 4.0).tolist()
    [[0.0, 0.0], [3.3333333333333335, 0.0], [6.666666666666667, 0.0], [10.0, 0.0]]
    """
    xy = np.asarray(xy, dtype=float)[:, :2]
    spacing_m = float(spacing_m)
    if not (math.isfinite(spacing_m) and spacing_m > 0):
        raise ParameterError(f"spacing_m must be a finite number > 0, got {spacing_m!r}")
    seg = np.hypot(*np.diff(xy, axis=0).T)
    cum = np.concatenate([[0.0], np.cumsum(seg)])
    n = max(2, int(math.ceil(cum[-1] / spacing_m - 1e-9)) + 1)
    at = np.linspace(0.0, cum[-1], n)
    return np.column_stack([np.interp(at, cum, xy[:, 0]), np.interp(at, cum, xy[:, 1])])


def plan_length_m(points) -> float:
    """Plan length of a polyline, metres."""
    d = np.diff(np.asarray(points, dtype=float)[:, :2], axis=0)
    return float(np.hypot(d[:, 0], d[:, 1]).sum())


def circumradii(points, dims: int = 2) -> np.ndarray:
    """Radius of the circle through each vertex and its two neighbours, in plan or in 3D.

    Parameters
    ----------
    points : array_like (N, 2 or 3)
        Distinct consecutive vertices (see :func:`drop_repeats`).
    dims : {2, 3}
        2: plan (x, y); 3: along the line in space.

    Returns
    -------
    ndarray (N - 2,)
        ``inf`` where the three vertices are collinear and the line goes on, ``0`` where
        it doubles straight back (a 180° turn).

    Examples
    --------
    >>> a = np.linspace(0, np.pi / 2, 5)
    >>> np.round(circumradii(np.column_stack([30 * np.cos(a), 30 * np.sin(a)])), 9).tolist()
    [30.0, 30.0, 30.0]
    """
    if dims not in (2, 3):
        raise ParameterError(f"dims must be 2 or 3, got {dims!r}")
    p = np.asarray(points, dtype=float)[:, :dims]
    if len(p) < 3:
        return np.zeros(0)
    u = p[1:-1] - p[:-2]
    w = p[2:] - p[1:-1]
    ab = np.linalg.norm(u, axis=1)
    bc = np.linalg.norm(w, axis=1)
    ca = np.linalg.norm(p[2:] - p[:-2], axis=1)
    if dims == 2:
        cross = np.abs(u[:, 0] * w[:, 1] - u[:, 1] * w[:, 0])
    else:
        cross = np.linalg.norm(np.cross(u, w), axis=1)
    # |u x w| = ab * bc * sin(turn): a turn below 1e-9 rad is straight (radius beyond 1e9 legs)
    straight = cross <= 1e-9 * ab * bc
    dot = np.einsum("ij,ij->i", u, w)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):  # a radius past 1e308 m: inf
        return np.where(straight, np.where(dot < 0, 0.0, np.inf), ab * bc * ca / (2.0 * cross))


def min_radius_m(points, *, dims: int = 2, spacing_m: float | None = None) -> float:
    """Smallest bend radius of a polyline: the least circumradius of consecutive vertices.

    Parameters
    ----------
    points : array_like (N, 2 or 3)
    dims : {2, 3}
        Plan (2) or along the line in space (3).
    spacing_m : float, optional
        Resample the plan line at this spacing first (plan only).  A computed line's
        vertices are where an optimiser left them; resampled at one cell, millimetre
        wiggles between close vertices do not read as millimetre radii.

    Returns
    -------
    float
        Metres; ``inf`` for a straight line or fewer than three distinct vertices.

    Notes
    -----
    For vertices on a circle the circumradius is that circle's radius whatever their
    spacing; for two straights meeting at a corner of turn phi with legs L it is
    ``L / (2 sin(phi / 2))``.  A 3D circle of radius R drawn on a plane tilted by alpha has
    a plan radius down to ``R cos² alpha`` at the fall line.

    Examples
    --------
    >>> a = np.linspace(0, np.pi / 2, 7)
    >>> print(f"{min_radius_m(np.column_stack([30 * np.cos(a), 30 * np.sin(a)])):.6f}")
    30.000000
    >>> min_radius_m([(0, 0), (5, 0), (10, 0)])
    inf
    """
    p = drop_repeats(np.asarray(points, dtype=float)[:, :dims])
    if spacing_m is not None and len(p) >= 2:
        if dims != 2:
            raise ParameterError("spacing_m resamples the plan line: use it with dims=2")
        p = resample_plan(p, spacing_m)
    r = circumradii(p, dims)
    return float(r.min()) if len(r) else math.inf


def raised_heights_m(xy, start_height_m: float, end_height_m: float, clearance_m: tuple[float, float]) -> np.ndarray:
    """Heights above the ground of a raised line: linear in plan distance, held in the band.

    The start line of a raised line before the refinement frees its heights (and the line
    reported when refinement is off).

    Examples
    --------
    >>> raised_heights_m([(0, 0), (10, 0), (40, 0)], 8.0, 2.0, (2.0, 15.0)).tolist()
    [8.0, 6.5, 2.0]
    """
    xy = np.asarray(xy, dtype=float)[:, :2]
    seg = np.hypot(*np.diff(xy, axis=0).T)
    frac = np.concatenate([[0.0], np.cumsum(seg)])
    frac = frac / frac[-1] if frac[-1] > 0 else np.linspace(0.0, 1.0, len(frac))
    h = float(start_height_m) + (float(end_height_m) - float(start_height_m)) * frac
    return np.clip(h, float(clearance_m[0]), float(clearance_m[1]))


#: Largest turn (degrees) at one vertex of a route's exported line.
MAX_VERTEX_TURN_DEG = 5.0


#: Shortest segment (m) of a route's exported line: finer detail is not a buildable shape.
MIN_EXPORT_SEGMENT_M = 0.05


def round_corners(points, max_turn_deg: float = MAX_VERTEX_TURN_DEG, *, fixed_xy=(),
                  min_segment_m: float = 0.0, hold_circumradius: bool = False) -> np.ndarray:
    """The 3D polyline with every corner sharper than ``max_turn_deg`` replaced by an arc.

    First, with ``min_segment_m`` > 0, vertices closer than that to the previous kept
    one are dropped (ends and ``fixed_xy`` kept): detail finer than a built line can hold
    (a route uses :data:`MIN_EXPORT_SEGMENT_M`, 5 cm, a judgment).

    A vertex where the direction turns by ``phi > max_turn_deg`` becomes a circular arc
    tangent to both adjoining segments, in their plane, starting and ending at most half
    a segment from the vertex (tangent length ``t = min(s_prev, s_next) / 2``, radius
    ``t / tan(phi / 2)``, the largest arc that leaves the neighbouring corners room), and
    sampled by ``m = ceil(phi / max_turn_deg)`` chords: ``phi / m`` of turn at each arc
    vertex, ``phi / (2m)`` where the arc meets the straight.  The line's time under the
    sharp-corner reading (:func:`fallway.traverse`) then agrees with its smooth reading,
    and bend radius, lateral acceleration and lift-off read off consecutive vertices.
    End vertices and vertices at ``fixed_xy`` (via points, within 1 mm in plan) stay.

    With ``hold_circumradius`` the tangent length grows, where the segments leave room,
    until the arc's radius is the corner's 3D circumradius (the circle through the vertex
    and its two neighbours, the smooth reading the bend limits are judged on): ``t =
    max(t_half, min(R3 tan(phi / 2), room))``, ``room`` the part of each adjoining segment
    the corner at its other end leaves (its own tangent length when it is rounded, none when
    it is not, the whole segment at an end).  Half the shorter segment gives a radius of
    ``R3 cos(phi / 2)`` at best (equal segments) and about ``R3 s_short / s_long`` between
    unequal ones.  A vertex left as it is next to a rounded corner sees a shorter chord and
    a tighter circumradius: a caller holding a bend limit re-checks the result.

    Examples
    --------
    A right angle with 10 m legs becomes a 5 m-radius quarter arc in 18 chords of 5°:

    >>> line = round_corners([(0, 0, 0), (10, 0, 0), (10, 10, 0)])
    >>> len(line), round(float(np.hypot(*(line[10, :2] - (5, 5)))), 9)
    (21, 5.0)
    """
    P = drop_repeats(np.asarray(points, dtype=float))
    if P.ndim != 2 or P.shape[1] != 3:
        raise ParameterError(f"round_corners needs an (N, 3) polyline, got shape {P.shape}")
    fixed = np.asarray(fixed_xy, dtype=float).reshape(-1, 2)
    if min_segment_m > 0.0 and len(P) > 2:
        keep = [0]
        for i in range(1, len(P) - 1):
            pinned = len(fixed) and np.min(np.hypot(*(fixed - P[i, :2]).T)) < 1e-3
            if pinned or np.linalg.norm(P[i] - P[keep[-1]]) >= min_segment_m:
                keep.append(i)
        if len(keep) > 1 and np.linalg.norm(P[-1] - P[keep[-1]]) < min_segment_m and not (
                len(fixed) and np.min(np.hypot(*(fixed - P[keep[-1], :2]).T)) < 1e-3):
            keep.pop()
        P = P[keep + [len(P) - 1]]
    if len(P) < 3:
        return P.copy()
    lim = math.radians(float(max_turn_deg))
    d = np.diff(P, axis=0)
    s = np.linalg.norm(d, axis=1)
    T = d / s[:, None]
    n_in = len(P) - 2
    phis = np.array([math.atan2(float(np.linalg.norm(np.cross(T[i - 1], T[i]))), float(T[i - 1] @ T[i]))
                     for i in range(1, len(P) - 1)])
    half = 0.5 * np.minimum(s[:-1], s[1:])
    pins = np.array([bool(len(fixed) and np.min(np.hypot(*(fixed - P[i, :2]).T)) < 1e-3)
                     for i in range(1, len(P) - 1)])
    rounded = (phis > lim) & ~pins & (half > SAME_POINT_M) & (phis < math.pi - 1e-9)
    tan_len = np.where(rounded, half, 0.0)
    if hold_circumradius:
        need = circumradii(P, dims=3) * np.tan(0.5 * phis)
        for k in np.nonzero(rounded)[0]:
            # the previous corner's final tangent length, the next one's half-segment share
            room_prev = s[k] - (tan_len[k - 1] if k > 0 else 0.0)
            room_next = s[k + 1] - (tan_len[k + 1] if k + 1 < n_in else 0.0)
            tan_len[k] = max(half[k], min(need[k], room_prev, room_next))
    out = [P[0]]
    for i in range(1, len(P) - 1):
        a, b = T[i - 1], T[i]
        phi = float(phis[i - 1])
        t = float(tan_len[i - 1])
        if not rounded[i - 1]:
            out.append(P[i])
            continue
        n = b - (a @ b) * a
        n /= np.linalg.norm(n)
        r = t / math.tan(0.5 * phi)
        m = math.ceil(phi / lim - 1e-12)
        th = np.linspace(0.0, phi, m + 1)
        start = P[i] - t * a
        out.extend(start + r * np.sin(th)[:, None] * a + r * (1.0 - np.cos(th))[:, None] * n)
    out.append(P[-1])
    return drop_repeats(np.array(out))
