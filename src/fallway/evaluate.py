"""Evaluate given lines on the same physics, and test them against a friction range.

Engineers rarely build the one computed line: they have alignments drawn in GIS, limits
the tool does not know, and a material whose friction is uncertain.  This module puts
every candidate on the same footing:

* :func:`drape` lays a plan line on the ground (densified to at most half a cell,
  heights from the terrain's smooth interpolant);
* :func:`evaluate_line` times one 3D line with :func:`fallway.physics.traverse` and
  reduces the profile to one comparison row (:class:`LineResult`), with every limit it
  breaks;
* :func:`envelope` evaluates a line at low, nominal and high friction (:class:`Envelope`);
* :class:`Comparison` ranks rows (:func:`fallway.routing.compare` builds one, with the
  tool's own optimum added).

Conventions
-----------
- Stations, lengths and heights in metres, along the 3D line.  Grades are descent grades
  (drop / plan length, positive downhill), as in :class:`fallway.physics.Profile`.
- A row's ``travel_time_s`` and ``exit_speed_m_s`` are None when the mover stalls.
- Ranking: lines that meet every limit (status ``"ok"``, :func:`limit_issues`) first,
  fastest first; then lines that reach the end but break a limit, fastest first (a line
  over the speed limit still shows its time, and its status says why it is not
  acceptable); then lines that stall, the furthest stall first; then searches that found
  no feasible line.  The friction envelope does not change the order (it is in each row,
  and :attr:`Comparison.best` asks for it).
"""

from __future__ import annotations

import csv
import dataclasses
import math
import os
import re
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable

import numpy as np

from .clearance import outside_band
from .errors import FallwayIOError, ParameterError
from .geometry import drop_repeats, min_radius_m
from .loads import Loads, line_loads, load_status
from .params import Limits
from .physics import Mover, Profile, traverse
from .physics import check_mu_range as _check_mu_range
from .terrain import GROUND_TOLERANCE_M, lay_on_ground

__all__ = [
    "COMPARISON_COLUMNS",
    "ENVELOPE_COLUMNS",
    "COMPUTED_NAME",
    "Comparison",
    "Envelope",
    "LineResult",
    "as_named_lines",
    "drape",
    "lay_on_ground",
    "GROUND_TOLERANCE_M",
    "enters_keepout",
    "envelope",
    "evaluate_line",
    "limit_issues",
    "LIMIT_CHECKS",
    "row_for_line",
]

#: Columns of ``comparison.csv``, in order.
COMPARISON_COLUMNS = ("name", "travel_time_s", "length_m", "drop_m", "exit_speed_m_s",
                      "max_speed_m_s", "min_speed_m_s", "max_grade", "min_radius_m",
                      "min_radius_3d_m", "stalled_at_m", "overspeed_m", "liftoff_m", "status")
#: Extra columns written when a friction range is given.
ENVELOPE_COLUMNS = ("exit_speed_lo_mu_m_s", "exit_speed_hi_mu_m_s", "travel_time_lo_mu_s",
                    "travel_time_hi_mu_s", "max_speed_lo_mu_m_s", "stalled_at_hi_mu_m",
                    "envelope_status")
#: Name of the row that holds the tool's own optimum.
COMPUTED_NAME = "computed optimum"

# decimals of each numeric CSV column (fixed formatting, byte-stable files)
_DECIMALS = {"travel_time_s": 3, "length_m": 2, "drop_m": 2, "exit_speed_m_s": 3,
             "max_speed_m_s": 3, "min_speed_m_s": 3, "max_grade": 4, "min_radius_m": 2, "min_radius_3d_m": 2,
             "stalled_at_m": 2, "overspeed_m": 2, "liftoff_m": 2,
             "exit_speed_lo_mu_m_s": 3, "exit_speed_hi_mu_m_s": 3, "travel_time_lo_mu_s": 3,
             "travel_time_hi_mu_s": 3, "max_speed_lo_mu_m_s": 3, "stalled_at_hi_mu_m": 2}


# --------------------------------------------------------------------------- reading

#: A line whose vertices all lie within this of the ground counts as lying on it.
_ON_GROUND_M = 0.05


# --------------------------------------------------------------------------- draping

def _terrain_heights(terrain, x, y):
    """Heights on the terrain's smooth interpolant (NaN off the DEM or near nodata)."""
    return np.atleast_1d(np.asarray(terrain.sample(x, y), dtype=float))


def _densify(xy: np.ndarray, step_m: float) -> np.ndarray:
    """Insert evenly spaced vertices so no plan step exceeds ``step_m``; keeps the originals."""
    parts = []
    for a, b in zip(xy[:-1], xy[1:]):
        n = max(1, int(math.ceil(math.hypot(*(b - a)) / step_m - 1e-12)))
        f = np.arange(n)[:, None] / n
        parts.append(a + f * (b - a))
    parts.append(xy[-1:])
    return np.concatenate(parts)


def drape(terrain, xy, *, max_step_m: float | None = None, name: str = "line") -> np.ndarray:
    """Lay a plan line on the ground.

    Parameters
    ----------
    terrain : Terrain
    xy : array_like (N, 2)
        Plan vertices in the terrain's CRS (extra columns are ignored).
    max_step_m : float, optional
        Largest plan distance between vertices after densifying; default half a cell
        (and never more than half a cell).
    name : str
        Used in error messages.

    Returns
    -------
    ndarray (M, 3)
        The original vertices plus evenly spaced ones between them, with heights from
        :meth:`Terrain.sample` (the smooth interpolant).

    Raises
    ------
    ParameterError
        Fewer than two distinct vertices, or a vertex off the DEM or on nodata (the
        message names the line and the first such point).

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(np.tile(-0.5 * np.arange(8.0), (6, 1)), (2.0, 0, 0, 0, -2.0, 12.0))
    >>> pts = drape(t, [(1.0, 6.0), (13.0, 6.0)])
    >>> len(pts), f"{pts[0, 2]:.3f}", f"{pts[-1, 2]:.3f}"
    (13, '0.000', '-3.000')
    """
    a = np.asarray(xy, dtype=float)
    if a.ndim != 2 or a.shape[1] < 2:
        raise ParameterError(f"line '{name}' must be an (N, 2) array of x, y; got shape {a.shape}")
    a = drop_repeats(a[:, :2])
    if len(a) < 2:
        raise ParameterError(f"line '{name}' has fewer than 2 distinct vertices; give a start and an end")
    half = 0.5 * float(terrain.cell_size)
    step = half if max_step_m is None else min(float(max_step_m), half)
    if not (math.isfinite(step) and step > 0):
        raise ParameterError(f"max_step_m must be a finite number > 0, got {max_step_m!r}")
    d = _densify(a, step)
    z = _terrain_heights(terrain, d[:, 0], d[:, 1])
    _check_on_terrain(d, z, name)
    return np.column_stack([d, z])


def _check_on_terrain(xy: np.ndarray, z: np.ndarray, name: str) -> None:
    bad = ~np.isfinite(z)
    if bad.any():
        i = int(np.argmax(bad))
        st = float(np.sum(np.hypot(np.diff(xy[: i + 1, 0]), np.diff(xy[: i + 1, 1]))))
        raise ParameterError(f"line '{name}' leaves the DEM or crosses nodata at x={xy[i, 0]:.2f}, "
                             f"y={xy[i, 1]:.2f} (plan station {st:.1f} m); keep it inside the DEM's valid area "
                             "and check that it is in the DEM's CRS")


# --------------------------------------------------------------------------- one line

@dataclass(frozen=True, eq=False)
class LineResult:
    """One row of a comparison: a line timed on the common physics.

    Attributes
    ----------
    name : str
    travel_time_s : float or None
        Time to the end; None when the mover stalls.
    length_m, drop_m : float
        3D length and height lost from start to end.
    exit_speed_m_s : float or None
        Speed at the end; None when the mover stalls.
    max_speed_m_s, min_speed_m_s : float
        Highest and lowest speed at the vertices after the start (before a stall; the
        start speed is the mover's ``v0``).  A line that stalls has the stall speed as
        its minimum.
    max_grade : float
        Steepest descent grade of any segment (drop / plan).
    min_radius_m : float
        Smallest plan bend radius (:func:`fallway.geometry.min_radius_m`) of the line as
        drawn, inf if straight.
    min_radius_3d_m : float
        Smallest bend radius in 3D of the line as timed (draped: the ground's own
        curvature counts); the one ``Limits.min_radius_m`` is checked against, as for a
        route.
    stalled_at_m, overspeed_m, liftoff_m : float or None
        Station of the stall, of the first vertex over ``Mover.max_speed`` and of the
        first lift-off vertex; None when there is none.
    status : str
        ``"ok"`` or the first broken limit, from :func:`limit_issues` (the same check as
        a route's ``violated_limits``), in this order: ``"stalls"``, ``"keepout"`` (the
        line enters a no-go area), ``"overspeed"``, ``"liftoff"``, ``"grade"`` (a segment
        outside the grade window of the limits), ``"min_radius"`` (a 3D bend tighter
        than ``Limits.min_radius_m``); ``"no feasible line"`` when the search found none.
    profile : Profile or None
        The motion along ``points`` (None for a search without result).
    points : ndarray (N, 3) or None
        The 3D line that was timed.
    computed : bool
        True for the tool's own optimum.
    envelope : Envelope or None
        The friction envelope, when a friction range was given.
    message : str
        Why a search found no line (empty otherwise).
    issues : tuple of str
        Every failed check, in the order of ``status`` (``status`` is the first).
    """

    name: str
    travel_time_s: float | None
    length_m: float
    drop_m: float
    exit_speed_m_s: float | None
    max_speed_m_s: float
    min_speed_m_s: float
    max_grade: float
    min_radius_m: float
    min_radius_3d_m: float
    stalled_at_m: float | None
    overspeed_m: float | None
    liftoff_m: float | None
    status: str
    profile: Profile | None = field(default=None, repr=False)
    points: np.ndarray | None = field(default=None, repr=False)
    computed: bool = False
    envelope: "Envelope | None" = field(default=None, repr=False)
    message: str = ""
    issues: tuple = ()

    @property
    def reaches_end(self) -> bool:
        """True when the mover gets to the end of the line."""
        return self.travel_time_s is not None

    def record(self) -> dict:
        """The row as plain Python values (float, str, None, bool).

        NaN becomes None; ``min_radius_m`` stays ``inf`` for a straight line (strict JSON
        writers should map it to null, as :func:`fallway.export.to_jsonable` does).
        Envelope columns are added when the row has an envelope, and ``computed`` and
        ``issues`` (every failed check, joined by ``"; "``).
        """
        rec = {c: getattr(self, c) for c in COMPARISON_COLUMNS}
        rec["computed"] = self.computed
        rec["issues"] = "; ".join(self.issues)
        if self.envelope is not None:
            rec.update(self.envelope.columns())
        return {k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in rec.items()}


def enters_keepout(terrain, p: np.ndarray, keepout) -> bool:
    """True when the plan line enters a no-go area (touching its edge is allowed)."""
    if isinstance(keepout, np.ndarray):
        if terrain is None or keepout.shape != terrain.shape:
            raise ParameterError(f"a keep-out mask must have the terrain's shape {None if terrain is None else terrain.shape}")
        xy = _densify(p[:, :2], 0.5 * float(terrain.cell_size))
        r, c = terrain.rowcol(xy[:, 0], xy[:, 1])
        r = np.clip(np.rint(r).astype(int), 0, keepout.shape[0] - 1)
        c = np.clip(np.rint(c).astype(int), 0, keepout.shape[1] - 1)
        return bool(np.any(keepout[r, c]))
    import shapely

    geom = getattr(keepout, "geometry", keepout)
    if not isinstance(geom, shapely.Geometry):
        raise ParameterError(f"keepout must be a Keepout, a shapely geometry or a mask; got {type(keepout).__name__}")
    line = shapely.LineString(p[:, :2])
    return bool(line.intersects(geom) and not line.touches(geom))


#: The checks of :func:`limit_issues`, in the order they are reported.
LIMIT_CHECKS = ("stalls", "keepout", "overspeed", "liftoff", "lateral_g", "normal_g", "grade", "min_radius",
                "clearance")


def limit_issues(terrain, line, profile: Profile, limits: Limits, keepout=None, *,
                 loads: Loads | None = None, clearance_m: tuple[float, float] | None = None) -> list[str]:
    """The limits a timed line breaks: the one check behind a route's ``feasible`` and a row's status.

    :func:`fallway.routing.find_route` (``RouteSummary.violated_limits``) and
    :func:`evaluate_line` (a comparison row's ``status`` and ``issues``) both call this, so
    a line is judged the same way whether the tool found it or an engineer drew it.

    Parameters
    ----------
    terrain : Terrain or None
        For a keep-out mask (cells); not needed for polygon keep-outs.
    line : array_like (N, 3)
        The line as timed (x, y, z).
    profile : Profile
        Its motion (:func:`fallway.physics.traverse`), with the mover's speed window.
    limits : Limits
        Grade window, bend radius (``min_radius_m``, measured in 3D on ``line``) and the
        speed-dependent limits (lateral g, normal g, lift-off of an open line).
    keepout : Keepout, shapely geometry or bool mask, optional
    loads : Loads, optional
        The line's loads at its speeds (:func:`fallway.loads.line_loads`), on which the
        speed-dependent limits are judged (:func:`fallway.loads.load_status`); without
        them those limits are not judged.
    clearance_m : (float, float), optional
        A raised line's clearance band above the smooth ground: every segment is sampled
        at half-cell plan steps and must stay in the band to
        :data:`fallway.clearance.CLEARANCE_TOL_M` (``terrain`` needed).

    Returns
    -------
    list of str
        In the order of :data:`LIMIT_CHECKS`: ``"stalls"`` (the mover does not reach the
        end), ``"keepout"``, ``"overspeed"`` (over ``Mover.max_speed``), ``"liftoff"``,
        ``"lateral_g"``, ``"normal_g"``, ``"grade"`` (a segment outside the grade window), ``"min_radius"`` (a 3D bend
        radius below ``Limits.min_radius_m``), ``"clearance"`` (with ``clearance_m``: a sample
        outside the band); empty when the line meets every limit.

    Examples
    --------
    A straight 30 % descent at mu = 0.1 under a 10 m/s cap: it reaches 10 m/s after
    v²/(2a) = 100/(2 g (sin - mu cos)) = 26.6 m of its 104.4 m (any mechanics text):

    >>> from fallway.physics import Mover, traverse
    >>> line = np.array([(0.0, 0.0, 30.0), (100.0, 0.0, 0.0)])
    >>> mv = Mover(mu=0.1, max_speed=10.0, normal="gravity")
    >>> limit_issues(None, line, traverse(line, mv), Limits(max_grade=0.25))
    ['overspeed', 'grade']
    """
    p = np.asarray(line, dtype=float)
    out = []
    if not profile.feasible:
        out.append("stalls")
    if keepout is not None and enters_keepout(terrain, p, keepout):
        out.append("keepout")
    if len(profile.overspeed):
        out.append("overspeed")
    if loads is not None:
        broken = set(load_status(loads, limits, broken_only=True))
        out += [k for k in ("liftoff", "lateral_g", "normal_g") if k in broken]
    d = np.diff(p, axis=0)
    moving = np.linalg.norm(d, axis=1) > 0
    g = np.asarray(profile.grade[:-1], dtype=float)[moving]
    if g.size and (np.any(g < limits.min_grade - 1e-12) or np.any(g > limits.max_grade + 1e-12)):
        out.append("grade")
    if limits.min_radius_m is not None and min_radius_m(drop_repeats(p), dims=3) < limits.min_radius_m * (1 - 1e-9):
        out.append("min_radius")
    if clearance_m is not None and outside_band(terrain, p, clearance_m):
        out.append("clearance")
    return out


def _first(a) -> float | None:
    a = np.asarray(a, dtype=float).ravel()
    return float(a[0]) if a.size else None


def evaluate_line(terrain, points, mover: Mover, *, limits: Limits | None = None, name: str = "line",
                  radius_xy=None, radius_spacing_m: float | None = None, computed: bool = False,
                  keepout=None) -> LineResult:
    """Time one 3D line and reduce its profile to a comparison row.

    Parameters
    ----------
    terrain : Terrain or None
        Used to check that the line's plan lies on the DEM (skipped when None).
    points : array_like (N, 3)
        The line, x, y, z (a draped line from :func:`drape`, or a raised line).
    mover : Mover
    limits : Limits, optional
        Grade window and minimum bend radius to check (the status says which fails).
    name : str
    radius_xy : array_like (K, 2), optional
        The vertices the bend radius is measured on (the line as drawn, before
        densifying); default ``points``.
    radius_spacing_m : float, optional
        Resample ``radius_xy`` at this spacing before measuring the radius (see
        :func:`fallway.geometry.min_radius_m`).
    computed : bool
        Mark the row as the tool's own line.
    keepout : Keepout, shapely geometry or bool ndarray, optional
        No-go areas in the terrain's CRS (a :class:`fallway.keepout.Keepout`, polygons, or
        a mask of the terrain's shape, True = no-go); a line that enters one gets the
        status ``"keepout"``.

    Returns
    -------
    LineResult

    Examples
    --------
    A 30° incline, mu = 0.2, 50 m from rest (closed form t = sqrt(2 s / a),
    a = g (sin 30° - mu cos 30°)):

    >>> import math
    >>> from fallway.physics import Mover
    >>> th = math.radians(30.0)
    >>> pts = [(0, 0, 50 * math.sin(th)), (50 * math.cos(th), 0, 0)]
    >>> r = evaluate_line(None, pts, Mover(mu=0.2, normal="gravity"))
    >>> print(f"{r.travel_time_s:.6f} {r.status}")
    5.586014 ok
    """
    limits = Limits() if limits is None else limits
    p = np.asarray(points, dtype=float)
    if p.ndim != 2 or p.shape[1] != 3:
        raise ParameterError(f"line '{name}' must be an (N, 3) array of x, y, z; got shape {p.shape}")
    if not np.all(np.isfinite(p)):
        raise ParameterError(f"line '{name}' has non-finite coordinates; drape it on the terrain first")
    if terrain is not None:
        ok = np.atleast_1d(terrain.valid(p[:, 0], p[:, 1]))
        _check_on_terrain(p[:, :2], np.where(ok, 0.0, np.nan), name)
    normals = None
    if terrain is not None:
        # a line lying on the ground lifts off only over a crest of the ground, not in a
        # plan turn on a slope: judge lift-off against the ground's normal
        zg = np.atleast_1d(terrain.sample(p[:, 0], p[:, 1]))
        if np.all(np.abs(p[:, 2] - zg) < _ON_GROUND_M):
            normals = terrain.normal(p[:, 0], p[:, 1])
    try:
        prof = traverse(p, mover, surface_normal=normals)
    except ParameterError as err:
        raise ParameterError(f"line '{name}': {err}") from err
    d = np.diff(p, axis=0)
    plan = np.hypot(d[:, 0], d[:, 1])
    seg_grade = np.asarray(prof.grade[:-1], dtype=float)
    moving = np.hypot(plan, d[:, 2]) > 0
    g = seg_grade[moving] if moving.any() else seg_grade
    max_grade = float(np.max(g)) if g.size else 0.0
    stalled = prof.stalled_at_m
    sp = np.asarray(prof.speed_m_s, dtype=float)[1:]
    sp = sp[np.isfinite(sp)]
    v0 = float(prof.speed_m_s[0])
    max_speed = float(max(np.max(sp), v0)) if sp.size else v0
    min_speed = float(np.min(sp)) if sp.size else v0
    if stalled is not None:
        min_speed = float(mover.stall_speed)
    radius = min_radius_m(p if radius_xy is None else radius_xy, dims=2, spacing_m=radius_spacing_m)
    overspeed = _first(prof.overspeed)
    liftoff = _first(prof.liftoff)
    loads = line_loads(p, prof.speed_m_s, g=mover.g, surface_normal=normals)
    issues = tuple(limit_issues(terrain, p, prof, limits, keepout, loads=loads))
    status = issues[0] if issues else "ok"
    return LineResult(
        name=name,
        travel_time_s=None if stalled is not None else float(prof.travel_time_s),
        length_m=float(prof.station_m[-1]),
        drop_m=float(p[0, 2] - p[-1, 2]),
        exit_speed_m_s=None if stalled is not None else float(prof.exit_speed_m_s),
        max_speed_m_s=max_speed,
        min_speed_m_s=min_speed,
        max_grade=max_grade,
        min_radius_m=radius,
        min_radius_3d_m=min_radius_m(drop_repeats(p), dims=3),
        stalled_at_m=None if stalled is None else float(stalled),
        overspeed_m=overspeed,
        liftoff_m=liftoff,
        status=status,
        profile=prof,
        points=p,
        computed=computed,
        issues=issues,
    )


# --------------------------------------------------------------------------- envelope

_CASES = ("low", "nominal", "high")


@dataclass(frozen=True, eq=False)
class Envelope:
    """A line evaluated at low, nominal and high friction.

    Attributes
    ----------
    name : str
    mu_lo, mu_nominal, mu_hi : float
    low, nominal, high : LineResult
        The line at each friction (same line, same mover otherwise).
    verdict : str
        ``"robust"`` when the mover gets through at every friction, stays within
        ``Mover.max_speed`` and never lifts off; otherwise the failures joined by
        ``"; "``, each naming the frictions where it happens, e.g. ``"stalls at high
        friction"``, ``"too fast at low friction"``, ``"lifts off at low and nominal
        friction"``.  Grade and bend-radius limits do not depend on friction and are
        left to the row's status.
    """

    name: str
    mu_lo: float
    mu_nominal: float
    mu_hi: float
    low: LineResult = field(repr=False)
    nominal: LineResult = field(repr=False)
    high: LineResult = field(repr=False)
    verdict: str

    @property
    def robust(self) -> bool:
        """True when the line passes at every friction of the range."""
        return self.verdict == "robust"

    @property
    def exit_speed_range_m_s(self) -> tuple[float | None, float | None]:
        """(exit speed at high friction, exit speed at low friction); None where it stalls."""
        return self.high.exit_speed_m_s, self.low.exit_speed_m_s

    def columns(self) -> dict:
        """The envelope's CSV columns (:data:`ENVELOPE_COLUMNS`) as plain values."""
        return {"exit_speed_lo_mu_m_s": self.low.exit_speed_m_s,
                "exit_speed_hi_mu_m_s": self.high.exit_speed_m_s,
                "travel_time_lo_mu_s": self.low.travel_time_s,
                "travel_time_hi_mu_s": self.high.travel_time_s,
                "max_speed_lo_mu_m_s": self.low.max_speed_m_s,
                "stalled_at_hi_mu_m": self.high.stalled_at_m,
                "envelope_status": self.verdict}


def _verdict(res: dict[str, LineResult]) -> str:
    def where(pred) -> str | None:
        cases = [c for c in _CASES if pred(res[c])]
        if not cases:
            return None
        return "all frictions" if len(cases) == 3 else " and ".join(cases) + " friction"

    issues = []
    for text, pred in (("stalls at", lambda r: r.stalled_at_m is not None),
                       ("too fast at", lambda r: r.overspeed_m is not None),
                       ("lifts off at", lambda r: r.liftoff_m is not None)):
        w = where(pred)
        if w is not None:
            issues.append(f"{text} {w}")
    return "; ".join(issues) if issues else "robust"


def envelope(terrain, points, mover: Mover, mu_lo: float, mu_hi: float, *, limits: Limits | None = None,
             name: str = "line", radius_xy=None, radius_spacing_m: float | None = None,
             computed: bool = False, keepout=None) -> Envelope:
    """Evaluate one line at low, nominal (``mover.mu``) and high friction.

    Parameters
    ----------
    terrain : Terrain or None
        For the on-DEM check (see :func:`evaluate_line`).
    points : array_like (N, 3)
        The 3D line (draped or raised).
    mover : Mover
        The nominal mover; ``mu_lo <= mover.mu <= mu_hi``.
    mu_lo, mu_hi : float
        The friction range (e.g. new liner and dry material versus worn liner and wet).
    limits, name, radius_xy, radius_spacing_m, computed, keepout
        As for :func:`evaluate_line`.

    Returns
    -------
    Envelope

    Examples
    --------
    A 20 % descending grade entered at 3 m/s gets through at mu = 0.1 and stalls at
    mu = 0.3 (grade below the friction):

    >>> import math
    >>> from fallway.physics import Mover
    >>> pts = [(0, 0, 20.0), (100.0, 0, 0.0)]
    >>> env = envelope(None, pts, Mover(mu=0.15, v0=3.0, normal="gravity"), 0.1, 0.3)
    >>> env.verdict
    'stalls at high friction'
    """
    lo, hi = _check_mu_range(mover, mu_lo, mu_hi)
    res = {}
    for case, mu in zip(_CASES, (lo, mover.mu, hi)):
        m = mover if case == "nominal" else dataclasses.replace(mover, mu=mu)
        res[case] = evaluate_line(terrain, points, m, limits=limits,
                                  name=name, radius_xy=radius_xy, radius_spacing_m=radius_spacing_m,
                                  computed=computed, keepout=keepout)
    return Envelope(name=name, mu_lo=lo, mu_nominal=mover.mu, mu_hi=hi, low=res["low"],
                    nominal=res["nominal"], high=res["high"], verdict=_verdict(res))


# --------------------------------------------------------------------------- comparison

def _rank_key(r: LineResult):
    if r.travel_time_s is not None:
        return (0 if r.status == "ok" else 1, r.travel_time_s, r.name)
    if r.stalled_at_m is not None:
        return (2, -r.stalled_at_m, r.name)
    return (3, 0.0, r.name)


# a cell holding numbers only (a point "-120.5 35.2"): nothing a spreadsheet could run
_CSV_NUMBERS = re.compile(r"\s*[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?(\s+[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?)*\s*")


def csv_text(text: str) -> str:
    """Text for a CSV cell that a spreadsheet shows as text and never evaluates.

    OWASP's CSV-injection guidance: a cell starting with ``=``, ``+``, ``-``, ``@``, a tab
    or a carriage return is read as a formula by spreadsheet programs (a line named
    ``=HYPERLINK(...)`` in a candidate file would run), so such a cell gets a leading
    single quote.  A cell that holds only numbers (``-120.5 35.2``) is left as it is.

    Examples
    --------
    >>> [csv_text(t) for t in ("A", "=1+2", "@SUM(A1)", "-2+3+cmd|' /C calc'!A0", "-120.5 35.2")]
    ['A', "'=1+2", "'@SUM(A1)", "'-2+3+cmd|' /C calc'!A0", '-120.5 35.2']
    """
    text = str(text)
    if text.startswith(("=", "+", "-", "@", "\t", "\r")) and not _CSV_NUMBERS.fullmatch(text):
        return "'" + text
    return text


def _fmt(value, column: str) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float, np.floating, np.integer)):
        v = float(value)
        if not math.isfinite(v):
            return ""
        s = f"{v:.{_DECIMALS.get(column, 6)}f}"
        return s.lstrip("-") if float(s) == 0.0 else s  # no "-0.000"
    return csv_text(str(value))


@dataclass(frozen=True, eq=False)
class Comparison:
    """Candidate lines timed on the same physics, ranked.

    Attributes
    ----------
    rows : tuple of LineResult
        Ranked: lines that meet every limit, fastest first; then lines that reach the
        end but break a limit, fastest first; then lines that stall, the furthest stall
        first; then searches that found no line.
    mover : Mover
        The nominal physics.
    limits : Limits
    mu_range : tuple of float or None
        (LO, HI) when the friction envelope was evaluated (each row then has one).
    route : Route or None
        The tool's own optimum, when it was computed and found.

    Examples
    --------
    >>> from fallway.physics import Mover
    >>> a = evaluate_line(None, [(0, 0, 10.0), (40.0, 0, 0.0)], Mover(normal="gravity"), name="steep")
    >>> b = evaluate_line(None, [(0, 0, 10.0), (80.0, 0, 0.0)], Mover(normal="gravity"), name="long")
    >>> [r.name for r in Comparison.ranked([b, a], Mover()).rows]
    ['steep', 'long']
    """

    rows: tuple
    mover: Mover
    limits: Limits = field(default_factory=Limits)
    mu_range: tuple | None = None
    route: object = field(default=None, repr=False)

    @classmethod
    def ranked(cls, rows: Iterable[LineResult], mover: Mover, limits: Limits | None = None,
               mu_range: tuple | None = None, route=None) -> "Comparison":
        """Build a comparison from unordered rows (sorted as described above)."""
        return cls(tuple(sorted(rows, key=_rank_key)), mover, Limits() if limits is None else limits,
                   None if mu_range is None else (float(mu_range[0]), float(mu_range[1])), route)

    @property
    def columns(self) -> tuple[str, ...]:
        """The CSV columns: :data:`COMPARISON_COLUMNS`, plus :data:`ENVELOPE_COLUMNS` with a friction range."""
        return COMPARISON_COLUMNS + (ENVELOPE_COLUMNS if self.mu_range is not None else ())

    @property
    def best(self) -> LineResult | None:
        """The fastest row whose status is ``"ok"`` (and robust, with a friction range), or None."""
        for r in self.rows:
            if r.status == "ok" and (r.envelope is None or r.envelope.robust):
                return r
        return None

    def to_records(self) -> list[dict]:
        """One dict per row, ranked, with plain values (None where empty) plus ``computed``."""
        return [r.record() for r in self.rows]

    def to_csv(self, path: str | os.PathLike) -> Path:
        """Write ``comparison.csv`` (atomically: a temporary file in the same folder, then renamed).

        Empty cells stand for None and for non-finite numbers (a straight line's radius
        is inf: empty).  Numbers have fixed decimals, so the same input gives the same
        bytes.
        """
        path = Path(path)
        folder = path.parent
        if not folder.is_dir():
            raise FallwayIOError(f"cannot write {path}: folder {folder} does not exist; create it first")
        cols = self.columns
        tmp = folder / f".{path.stem}.{uuid.uuid4().hex[:12]}.tmp{path.suffix}"
        try:
            with open(tmp, "w", encoding="utf-8", newline="") as fh:
                w = csv.writer(fh, lineterminator="\n")
                w.writerow(cols)
                for rec in self.to_records():
                    w.writerow([_fmt(rec.get(c), c) for c in cols])
                fh.flush()
                os.fsync(fh.fileno())
            os.replace(tmp, path)
        except OSError as err:
            try:
                tmp.unlink()
            except OSError:
                pass
            raise FallwayIOError(f"cannot write {path}: {err.strerror or type(err).__name__}; "
                                 "choose another output folder or fix its permissions") from err
        return path


def as_named_lines(lines) -> list[tuple[str, np.ndarray]]:
    out = []
    for k, item in enumerate(lines, start=1):
        try:
            name, pts = item
        except (TypeError, ValueError):
            raise ParameterError(f"line {k} must be a (name, points) pair") from None
        a = np.asarray(pts, dtype=float)
        if a.ndim != 2 or a.shape[1] not in (2, 3) or len(a) < 2:
            raise ParameterError(f"line '{name}' must be an (N, 2) or (N, 3) array with N >= 2; got shape {a.shape}")
        out.append((str(name), a))
    names = [n for n, _ in out]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise ParameterError(f"line names must be unique; repeated: {', '.join(dup)}")
    return out


def row_for_line(terrain, name, pts, mover, limits, mu_range, *, computed=False, keepout=None):
    """Evaluate one line (and its envelope) with its bend radius on the drawn vertices.

    A plan line (N, 2) is draped; a 3D line keeps its own z.
    """
    line = drape(terrain, pts, name=name) if pts.shape[1] == 2 else pts
    kw = dict(limits=limits, name=name, radius_xy=pts[:, :2], computed=computed, keepout=keepout,
              radius_spacing_m=float(terrain.cell_size) if computed else None)
    if mu_range is None:
        return evaluate_line(terrain, line, mover, **kw)
    env = envelope(terrain, line, mover, mu_range[0], mu_range[1], **kw)
    return dataclasses.replace(env.nominal, envelope=env)
