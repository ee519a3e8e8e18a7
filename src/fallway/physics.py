"""Motion of a point mass along a 3D line: gravity, Coulomb friction, drag, curvature.

The public front of the motion model: :class:`Mover` (what moves), :func:`segment` (one
straight segment, closed form), :func:`traverse` (a whole polyline, returning a
:class:`Profile`) and :func:`normal_gravity` (local gravity, WGS 84).  The numerical work
is done by jitted kernels in :mod:`fallway._segment` and :mod:`fallway._traverse`, which
the lattice search and the refinement call directly.

Normal-force models
-------------------
``"gravity"``
    The normal force is gravity's component across the path, ``g * plan / length`` on a
    straight segment, so friction work is ``mu * g * plan length``.  Exact closed form
    per segment (with and without drag).
``"full"``
    The normal force is the vector the line supplies, ``N = v² kappa n - g_perp``, and
    friction is ``mu * |N|``.  Curvature is the limit of a smooth interpolant of the
    vertices: each interior vertex's turning angle ``phi`` is spread over the two
    half-segments around it (``|kappa| = phi / l`` with ``l`` the mean of the adjoining
    segment lengths), so a densely sampled curve converges to the continuous answer
    and a short sharp corner is a capstan: ``v_out = v_in * exp(-mu * phi)``.  See
    :func:`traverse`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import ParameterError
from .params import STANDARD_GRAVITY, Mover, check_number

__all__ = ["Mover", "Profile", "SegmentResult", "STANDARD_GRAVITY", "normal_gravity", "segment",
           "traverse"]

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
        Speed at each vertex (NaN at the vertices after a stall; every vertex before
        the stall has a finite value).
    time_s : ndarray (N,)
        Cumulative time at each vertex (NaN after a stall).
    grade : ndarray (N,)
        Descent grade (drop / plan length) of the segment that *leaves* each vertex
        (the last entry repeats the last segment's); positive downhill, +-inf on a
        vertical segment.
    normal_ratio : ndarray (N,)
        Normal force over g at each vertex: ``"gravity"`` model, gravity's cross
        component on the segment leaving the vertex (``plan / length``); ``"full"``
        model, the resultant of bed and wall forces ``|v² kappa n - g_perp| / g`` as
        :func:`fallway.loads.line_loads` reads it (``normal_g``; NaN after a stall).
    stalled_at_m : float or None
        Station where the mover stalls, or None.
    liftoff : ndarray of float
        Stations of the vertices where an open chute would need a pulling normal force:
        on a convex crest in the vertical plane ``v² kappa_vertical`` exceeds gravity's
        cross component ``g cos(slope)`` and the mass would leave the ground: a negative
        ``liftoff_margin_g`` of :func:`fallway.loads.line_loads` (computed with either
        normal model; after lift-off the profile assumes the line still guides the mass,
        as a closed chute or a cable would).
    overspeed : ndarray of float
        Stations where the speed exceeds ``Mover.max_speed``: vertices, and with the
        ``"full"`` model segment midpoints (where a bend's peak can lie).
    departing_speed_m_s : ndarray (N,)
        Speed leaving each vertex: with the ``"full"`` model after the corner law at an
        interior vertex (the speed the next segment starts with), otherwise equal to
        ``speed_m_s``; at the end the arriving speed; NaN after a stall.
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
    departing_speed_m_s: np.ndarray

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


# ---------------------------------------------------------------------------
# one straight segment

@dataclass(frozen=True)
class SegmentResult:
    """Motion along one straight segment.

    Attributes
    ----------
    v_out_m_s : float
        Speed at the end (NaN when the mover stalls).
    time_s : float
        Time to the end (inf when the mover stalls).
    stalled_at_m : float or None
        Distance along the segment where the mover stalls, or None.
    length_m : float
        3D length of the segment.
    """

    v_out_m_s: float
    time_s: float
    stalled_at_m: float | None
    length_m: float

    @property
    def feasible(self) -> bool:
        """True when the mover reaches the end of the segment."""
        return self.stalled_at_m is None


def segment(v_in_m_s: float, drop_m: float, plan_m: float, mover: "Mover") -> SegmentResult:
    """Closed-form motion along one straight segment.

    On a straight segment both normal models agree (no curvature): the along-path
    acceleration without drag is ``a = g (drop - mu plan) / length`` and with drag
    ``d(v²)/dσ = 2a - 2k v²`` is solved exactly (:func:`fallway._segment.segment_law`,
    the jitted kernel the lattice search shares).

    Parameters
    ----------
    v_in_m_s : float
        Speed at the start, m/s (>= 0).
    drop_m : float
        Height lost along the segment, m (negative uphill).
    plan_m : float
        Horizontal length, m (>= 0).
    mover : Mover
        Friction, drag, gravity and stall speed (``mover.v0`` is not used).

    Returns
    -------
    SegmentResult

    Examples
    --------
    30° incline, mu = 0.2, 50 m from rest (a = g (sin 30° - 0.2 cos 30°)):

    >>> import math
    >>> r = segment(0.0, 25.0, 50 * math.cos(math.radians(30)), Mover(mu=0.2))
    >>> print(f"{r.v_out_m_s:.4f} m/s in {r.time_s:.4f} s")
    17.9019 m/s in 5.5860 s
    >>> segment(1.0, -1.0, 10.0, Mover(mu=0.1)).stalled_at_m is not None
    True
    """
    from ._segment import segment_law

    _check_mover(mover)
    check_number("v_in_m_s", v_in_m_s)
    check_number("plan_m", plan_m)
    check_number("drop_m", drop_m, low=-math.inf)
    v_in, drop, plan = float(v_in_m_s), float(drop_m), float(plan_m)
    length = math.hypot(drop, plan)
    v2, t, at = segment_law(v_in * v_in, drop, plan, length, mover.g, mover.mu, mover.drag,
                            mover.stall_speed ** 2)
    if at >= 0.0:
        return SegmentResult(math.nan, math.inf, float(at), length)
    return SegmentResult(math.sqrt(v2), float(t), None, length)


# ---------------------------------------------------------------------------
# a whole line

#: Consecutive points closer than this (m) are one vertex (a zero-length segment).
MIN_SEGMENT_M = 1e-9


def _check_mover(mover) -> None:
    if not isinstance(mover, Mover):
        raise ParameterError(f"mover must be a fallway.physics.Mover, got {type(mover).__name__}")


def _readonly(a: np.ndarray) -> np.ndarray:
    a.flags.writeable = False
    return a


def traverse(points, mover: Mover, *, surface_normal=None) -> Profile:
    """Speed and time of a point mass along a 3D polyline.

    Parameters
    ----------
    points : array_like (N, 3)
        Vertices x, y, z in metres (projected CRS, z up), N >= 2, all finite.
        Consecutive repeated points (closer than 1 nm) are one vertex: zero-length
        segments are skipped, and the repeated rows get the values of the vertex they
        repeat.
    mover : Mover
        Friction, drag, start speed, gravity, normal-force model and speed window.
    surface_normal : array_like (N, 3), optional
        Upward unit normal of the ground under each vertex, for a line lying on the
        ground (e.g. from :meth:`fallway.Terrain.normal`).  Lift-off is then judged
        against the ground: only curvature *out of* the ground surface (a crest) can
        lift the mass, not a plan turn on a slope.  Without it, lift-off is judged
        against the up direction in the vertical plane of the line (right for a line
        in a vertical plane, or a raised line).

    Returns
    -------
    Profile
        One entry per input row (see :class:`Profile`).

    Raises
    ------
    ParameterError
        Fewer than two distinct points, NaN/inf coordinates, a wrong shape, or a mover
        that is not a :class:`Mover`.

    Notes
    -----
    Along the line ``d(v²)/dσ = 2 g drop/s - 2 mu |N| - 2 k v²``.

    ``normal="gravity"``: ``|N| = g plan / s`` per straight segment; the exact
    closed-form segment law is chained over the segments.

    ``normal="full"``: the sharp-corner (channel) reading of the polyline as given:
    the exact segment law on each straight segment (the bed carries gravity's normal
    part), and at each interior vertex the belt-friction (capstan) law of
    Euler–Eytelwein, ``v_out = v_in exp(-mu phi)`` for a turn of 3D angle ``phi`` that
    presses the mover into its bed or walls; a crest relieves the bed instead (the turn's
    downward part counts negative, the gain bounded by the gravity-normal friction of
    the half-segments beside it, which binds exactly where the mover would lift off).
    The time is a property of the shape: adding collinear vertices changes nothing.  In
    the continuous limit friction is ``mu (|g_perp| + v² |kappa|)``: exact for a channel
    with bed and walls, conservative against a point mass on one banked surface
    (``mu |v² kappa n - g_perp|``).  A line meant as a smooth curve must therefore be
    sampled densely where it bends; route lines are (<= 5° of turn per vertex).  The
    speed at a vertex is the arriving speed.  ``normal_ratio`` (full model) and lift-off
    are :func:`fallway.loads.line_loads`' reading of the vertices and their speeds (the
    curvature of the circle through each vertex and its neighbours): the load is the
    resultant of bed and wall forces, ``|v² kappa n - g_perp| / g``, and a vertex lifts off
    where its lift-off margin is negative -- the same reading a route's limits and
    summary use.

    Stalls: the mover stalls where it slows below ``stall_speed`` (or comes to rest).
    A line that starts at rest (or below the stall speed) on an upslope or a level
    segment with friction stalls at station 0.  That is a result, not an error:
    ``stalled_at_m`` is set, ``speed_m_s`` and ``time_s`` are NaN at every vertex after
    the stall and finite at every vertex before it.

    Examples
    --------
    A 30° incline, mu = 0.2, 50 m from rest, in five collinear pieces:

    >>> import numpy as np
    >>> c, s = np.cos(np.radians(30)), np.sin(np.radians(30))
    >>> pts = np.outer(np.linspace(0, 50, 6), [c, 0, -s])
    >>> p = traverse(pts, Mover(mu=0.2))
    >>> print(f"{p.exit_speed_m_s:.4f} m/s, {p.travel_time_s:.4f} s")
    17.9019 m/s, 5.5860 s
    >>> traverse([[0, 0, 0], [10, 0, 1]], Mover(mu=0.1)).stalled_at_m
    0.0
    """
    from ._traverse import traverse_kernel
    from .loads import line_loads

    _check_mover(mover)
    try:
        pts = np.array(points, dtype=np.float64)
    except (TypeError, ValueError):
        raise ParameterError("points must be an (N, 3) array of numbers x, y, z in metres") from None
    if pts.ndim != 2 or pts.shape[1] != 3:
        raise ParameterError(f"points must have shape (N, 3) (x, y, z in metres), got {pts.shape}")
    n = pts.shape[0]
    if n < 2:
        raise ParameterError(f"points needs at least two vertices, got {n}")
    bad = ~np.isfinite(pts).all(axis=1)
    if bad.any():
        raise ParameterError(f"points row {int(np.flatnonzero(bad)[0])} has a NaN or infinite "
                             "coordinate; drop or fill it first")
    seg = np.sqrt((np.diff(pts, axis=0) ** 2).sum(axis=1))
    keep = np.empty(n, dtype=bool)
    keep[0] = True
    keep[1:] = seg > MIN_SEGMENT_M
    uniq = np.ascontiguousarray(pts[keep])
    m = uniq.shape[0]
    if m < 2:
        raise ParameterError("points has fewer than two distinct vertices; give a line with some length")
    station = np.empty(m)
    v2 = np.empty(m)
    time = np.empty(m)
    grade = np.empty(m)
    v2_mid = np.empty(m - 1)
    v2_dep = np.empty(m)
    surf = None
    if surface_normal is not None:
        surf = np.array(surface_normal, dtype=np.float64)
        if surf.shape != pts.shape or not np.isfinite(surf).all():
            raise ParameterError(f"surface_normal must be a finite (N, 3) array like points {pts.shape}, "
                                 f"got shape {surf.shape}")
        norm = np.sqrt((surf ** 2).sum(axis=1))
        if (norm <= 0).any():
            raise ParameterError("surface_normal has a zero vector; give unit upward normals")
        surf = np.ascontiguousarray((surf / norm[:, None])[keep])
    stall = traverse_kernel(uniq, mover.g, mover.mu, mover.drag, mover.v0 ** 2, mover.stall_speed ** 2,
                            mover.normal == "full", station, v2, time, grade, v2_mid, v2_dep)
    speed = np.sqrt(v2)
    loads = line_loads(uniq, speed, g=mover.g, surface_normal=surf)
    if mover.normal == "full":
        ratio = np.asarray(loads.normal_g, dtype=float)
    else:  # gravity's cross component on the segment leaving each vertex
        d = np.diff(uniq, axis=0)
        cos = np.hypot(d[:, 0], d[:, 1]) / np.sqrt((d ** 2).sum(axis=1))
        ratio = np.append(cos, cos[-1])
    with np.errstate(invalid="ignore"):  # NaN after a stall: not judged
        liftoff = station[np.asarray(loads.liftoff_margin_g) < 0.0]
    if mover.max_speed is None:
        overspeed = np.empty(0)
    else:
        vmax2 = mover.max_speed ** 2
        with np.errstate(invalid="ignore"):
            over = np.concatenate([station[v2 > vmax2],
                                   (0.5 * (station[:-1] + station[1:]))[v2_mid > vmax2]])
        overspeed = np.unique(over)
    idx = np.cumsum(keep) - 1
    return Profile(
        points=_readonly(pts),
        station_m=_readonly(station[idx]),
        speed_m_s=_readonly(speed[idx]),
        time_s=_readonly(time[idx]),
        grade=_readonly(grade[idx]),
        normal_ratio=_readonly(ratio[idx]),
        stalled_at_m=None if stall < 0.0 else float(stall),
        liftoff=_readonly(liftoff),
        overspeed=_readonly(overspeed),
        departing_speed_m_s=_readonly(np.sqrt(v2_dep)[idx]),
    )


# ---------------------------------------------------------------------------
# local gravity

#: WGS 84 normal-gravity constants (NIMA TR8350.2, 3rd ed., 2000, ch. 3-4).
_WGS84_A = 6378137.0                 # semi-major axis, m
_WGS84_F = 1.0 / 298.257223563       # flattening
_WGS84_M = 0.00344978650684          # m = omega² a² b / GM
_GAMMA_E = 9.7803253359              # normal gravity at the equator, m/s²
_SOMIGLIANA_K = 0.00193185265241     # Somigliana constant
_WGS84_E2 = 0.00669437999013         # first eccentricity squared


def normal_gravity(lat_deg: float, height_m: float = 0.0) -> float:
    """WGS 84 normal gravity (m/s²) at a geodetic latitude and ellipsoidal height.

    Somigliana's closed formula on the ellipsoid (NIMA TR8350.2 eq. 4-1)::

        gamma = gamma_e (1 + k sin² lat) / sqrt(1 - e² sin² lat)

    and the second-order free-air series above it (TR8350.2 eq. 4-3)::

        gamma_h = gamma [1 - (2/a)(1 + f + m - 2 f sin² lat) h + (3/a²) h²]

    meant for heights near the Earth's surface.  The default gravity of a
    :class:`Mover` stays standard gravity (9.80665 m/s²); pass
    ``Mover(g=normal_gravity(lat_deg, height_m))`` for local gravity.

    Parameters
    ----------
    lat_deg : float
        Geodetic latitude in degrees, -90 to 90.
    height_m : float
        Height above the WGS 84 ellipsoid, m (-20 km to 20 km).

    Examples
    --------
    >>> print(f"{normal_gravity(0.0):.9f} {normal_gravity(90.0):.9f}")
    9.780325336 9.832184938
    >>> print(f"{normal_gravity(45.0, 1000.0):.6f}")
    9.803113
    """
    check_number("lat_deg", lat_deg, low=-90.0)
    if float(lat_deg) > 90.0:
        raise ParameterError(f"lat_deg must be a latitude between -90 and 90 degrees, got {lat_deg!r}")
    check_number("height_m", height_m, low=-20000.0)
    if float(height_m) > 20000.0:
        raise ParameterError(f"height_m must be between -20000 and 20000 m (near the surface), "
                             f"got {height_m!r}")
    s2 = math.sin(math.radians(float(lat_deg))) ** 2
    gamma = _GAMMA_E * (1.0 + _SOMIGLIANA_K * s2) / math.sqrt(1.0 - _WGS84_E2 * s2)
    h = float(height_m)
    a, f = _WGS84_A, _WGS84_F
    return gamma * (1.0 - (2.0 / a) * (1.0 + f + _WGS84_M - 2.0 * f * s2) * h + 3.0 * h * h / (a * a))


def check_mu_range(mover: Mover, mu_lo, mu_hi) -> tuple[float, float]:
    """Validate a friction range (LO, HI) around ``mover.mu``; returns it as floats."""
    try:
        lo, hi = float(mu_lo), float(mu_hi)
    except (TypeError, ValueError):
        raise ParameterError(f"the friction range must be two numbers, got {mu_lo!r}, {mu_hi!r}") from None
    if not (math.isfinite(lo) and math.isfinite(hi) and 0.0 <= lo <= hi):
        raise ParameterError(f"the friction range must satisfy 0 <= LO <= HI, got {mu_lo!r}, {mu_hi!r}")
    if not (lo - 1e-12 <= mover.mu <= hi + 1e-12):
        raise ParameterError(f"the nominal friction mu={mover.mu:g} must lie in the range [{lo:g}, {hi:g}]; "
                             "widen the range or change --mu")
    return lo, hi
