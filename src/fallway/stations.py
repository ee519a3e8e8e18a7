"""The chainage table: the reported line read at a fixed interval and at its points of interest.

:func:`station_table` reads a :class:`~fallway.results.Route` at every multiple of a
station step (metres along the 3D line, as ``profile.csv``'s ``station_m``) and at every
point of interest -- the start and end, the vertex of highest speed, the stations the
summary names (largest lateral acceleration and normal load, smallest lift-off margin),
where the mover stalls, overspeeds or lifts off, and stations a caller adds (supports of a
cable line).  It returns a :class:`StationTable` of arrays, which
:func:`fallway.export.write_stations_csv` writes as ``stations.csv`` and figures and
reports can read.

Speeds and times are the route's own reading of its line, not an interpolation: at a
vertex the profile's values (``physics.traverse`` on the exported vertices); inside a
straight segment the exact segment law (:func:`fallway._segment.segment_law`) from the
speed leaving the vertex before it.  With the full normal-force model that speed is the
arriving speed after the vertex's corner law (:func:`fallway._traverse.corner_v2`, with
the friction angle and straight runs the traverse kernel uses).  Since a collinear vertex
turns by 0, cutting the line at the stations and traversing it gives the same speeds and
times; ``tests/test_stations.py`` checks exactly that.

Normal load: at a vertex the smooth reading of :func:`fallway.loads.line_loads` (the one
the summary's ``max_normal_g`` and the limits use); inside a straight segment, which has
no curvature, gravity's cross component ``plan / length``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import ParameterError

__all__ = ["DEFAULT_STATION_STEP_M", "MIN_STATION_STEP_M", "StationTable", "check_station_step", "station_table"]

#: Default interval of the chainage table, metres along the line.
DEFAULT_STATION_STEP_M = 10.0
#: Smallest station step, metres: the table's precision (1 cm).
MIN_STATION_STEP_M = 0.01
#: Most rows a table may have (a step far too small for the line's length is refused).
MAX_STATIONS = 1_000_000
# stations closer than this (m) are one row: a regular station on a vertex of interest
_MERGE_M = 1e-3

_FIELDS = ("station_m", "x_m", "y_m", "lon_deg", "lat_deg", "ground_z_m", "line_z_m", "clearance_m", "grade",
           "grade_deg", "speed_m_s", "time_s", "normal_load_ratio")


@dataclass(frozen=True, eq=False)
class StationTable:
    """The line at its stations: one entry per row, start to end.

    Attributes
    ----------
    station_m : ndarray
        Distance along the line (3D) from the start, m.
    x_m, y_m : ndarray
        Map coordinates in the terrain's CRS, m.
    lon_deg, lat_deg : ndarray
        WGS 84 longitude and latitude (NaN when the terrain has no CRS).
    ground_z_m : ndarray
        Ground height under the station (the smooth surface, :meth:`Terrain.sample`;
        NaN where it is undefined).
    line_z_m : ndarray
        Height of the line.
    clearance_m : ndarray
        ``line_z_m - ground_z_m``.
    grade : ndarray
        Descent grade of the segment the station lies on (at a vertex: the segment
        leaving it; at the end: the last segment), a fraction (0.3 = 30 %), positive
        downhill.
    grade_deg : ndarray
        The same grade as an angle, degrees.
    speed_m_s, time_s : ndarray
        Speed and time from the start (NaN after a stall).
    normal_load_ratio : ndarray
        Normal load over g (see the module notes).
    flags : tuple of str
        Per row the points of interest there, joined by ``;`` (``start``, ``end``,
        ``max_speed``, ``max_lateral_g``, ``max_normal_g``, ``min_liftoff_margin``,
        ``stall``, ``overspeed``, ``liftoff``, and a caller's labels); empty for a plain
        station.
    is_vertex : ndarray of bool
        The row lies on a vertex of the line.
    step_m : float
        The station step.
    """

    station_m: np.ndarray
    x_m: np.ndarray
    y_m: np.ndarray
    lon_deg: np.ndarray
    lat_deg: np.ndarray
    ground_z_m: np.ndarray
    line_z_m: np.ndarray
    clearance_m: np.ndarray
    grade: np.ndarray
    grade_deg: np.ndarray
    speed_m_s: np.ndarray
    time_s: np.ndarray
    normal_load_ratio: np.ndarray
    flags: tuple
    is_vertex: np.ndarray
    step_m: float

    def __len__(self) -> int:
        return int(self.station_m.size)

    def columns(self) -> dict:
        """The table's columns in order (``flags`` last), as written to ``stations.csv``."""
        out = {name: getattr(self, name) for name in _FIELDS}
        out["flags"] = self.flags
        return out


def check_station_step(step_m) -> float:
    """The station step as a float, at least :data:`MIN_STATION_STEP_M`; ParameterError otherwise.

    Examples
    --------
    >>> check_station_step(10)
    10.0
    >>> check_station_step(0)
    Traceback (most recent call last):
    ...
    fallway.errors.ParameterError: the station step must be a finite number of metres >= 0.01, got 0; e.g. --station-step 10
    """
    try:
        step = float(step_m)
    except (TypeError, ValueError):
        raise ParameterError(f"the station step must be a number of metres, got {step_m!r}") from None
    if not (math.isfinite(step) and step >= MIN_STATION_STEP_M):
        raise ParameterError(f"the station step must be a finite number of metres >= {MIN_STATION_STEP_M:g}, "
                             f"got {step_m!r}; e.g. --station-step 10")
    return step


def _stations(length_m: float, step_m: float, marks: list) -> tuple[np.ndarray, list]:
    """Sorted stations with their flags: the multiples of the step, the end, and the marks."""
    n = int(math.floor(length_m / step_m + 1e-9))
    if n + 2 > MAX_STATIONS:
        raise ParameterError(f"a station step of {step_m:g} m gives {n + 1} stations along {length_m:.1f} m; "
                             f"choose a step of at least {length_m / MAX_STATIONS:.3g} m")
    items = [(k * step_m, "") for k in range(n + 1)]
    items += [(float(s), f) for s, f in marks if s is not None and math.isfinite(s) and 0.0 <= s <= length_m]
    items.append((length_m, ""))
    items.sort(key=lambda it: it[0])
    stations: list[float] = []
    flags: list[list[str]] = []
    for s, f in items:
        if stations and s - stations[-1] <= _MERGE_M:
            if f and f not in flags[-1]:
                flags[-1].append(f)
            if f:  # a point of interest keeps its own station
                stations[-1] = s
            continue
        stations.append(s)
        flags.append([f] if f else [])
    return np.array(stations), [";".join(f) for f in flags]


def station_table(route, step_m: float = DEFAULT_STATION_STEP_M, *, extra=()) -> StationTable:
    """The route's line read at every ``step_m`` metres and at its points of interest.

    Parameters
    ----------
    route : Route
        The route (its ``profile``, ``mover``, ``terrain``, ``line_spec`` and summary).
    step_m : float
        Station interval, metres along the 3D line (default 10 m, at least 1 cm).
    extra : sequence of (station_m, label)
        More stations to list with their label as flag (e.g. supports).

    Returns
    -------
    StationTable

    Raises
    ------
    ParameterError
        A step that is not a number >= 0.01 m, or one that would make more than a
        million rows.

    Examples
    --------
    50 m down a 30° plane with mu = 0.2: every 20 m, the end, and the closed-form
    incline law at 20 m (v² = 2 g (sin 30° - 0.2 cos 30°) 20 m):

    >>> from fallway.export import _example_route
    >>> route, _ = _example_route()
    >>> t = station_table(route, 20.0)
    >>> t.station_m.tolist(), t.flags
    ([0.0, 20.0, 40.0, 50.0], ('start', '', '', 'end;max_speed'))
    >>> import math
    >>> a = 9.80665 * (0.5 - 0.2 * math.cos(math.radians(30)))
    >>> print(f"{t.speed_m_s[1]:.6f} {math.sqrt(2 * a * 20):.6f} {t.grade_deg[1]:.4f}")
    11.322126 11.322126 30.0000
    """
    from ._segment import segment_law
    from .loads import line_loads
    from .physics import MIN_SEGMENT_M

    step = check_station_step(step_m)
    prof, mover, terrain = route.profile, route.mover, route.terrain
    pts_all = np.asarray(prof.points, dtype=float)
    seg_all = np.sqrt((np.diff(pts_all, axis=0) ** 2).sum(axis=1))
    keep = np.concatenate([[True], seg_all > MIN_SEGMENT_M])
    P = pts_all[keep]
    S = np.asarray(prof.station_m, dtype=float)[keep]
    V = np.asarray(prof.speed_m_s, dtype=float)[keep]
    T = np.asarray(prof.time_s, dtype=float)[keep]
    G = np.asarray(prof.grade, dtype=float)[keep]
    m = len(P)
    length = float(S[-1])
    u0 = (np.asarray(prof.departing_speed_m_s, dtype=float)[keep] ** 2)[:-1]  # each segment's start
    normals = None
    if getattr(route.line_spec, "kind", "ground") == "ground":
        n = terrain.normal(P[:, 0], P[:, 1])
        normals = n if np.isfinite(n).all() else None
    vertex_load = line_loads(P, V, g=mover.g, surface_normal=normals).normal_g

    summary = route.summary
    marks: list = [(0.0, "start"), (length, "end")]
    if np.isfinite(V).any():
        marks.append((float(S[int(np.nanargmax(V))]), "max_speed"))
    for attr, label in (("max_lateral_g_station_m", "max_lateral_g"), ("max_normal_g_station_m", "max_normal_g"),
                        ("min_liftoff_margin_station_m", "min_liftoff_margin")):
        marks.append((getattr(summary, attr, None), label))
    if prof.stalled_at_m is not None:
        marks.append((float(prof.stalled_at_m), "stall"))
    marks += [(float(s), "overspeed") for s in np.asarray(prof.overspeed, dtype=float)]
    marks += [(float(s), "liftoff") for s in np.asarray(prof.liftoff, dtype=float)]
    for s, label in extra:
        if not isinstance(label, str) or not label or ";" in label or "," in label:
            raise ParameterError(f"a station label must be a non-empty name without ';' or ',', got {label!r}")
        marks.append((float(s), label))
    st, flags = _stations(length, step, marks)

    k = st.size
    xyz = np.empty((k, 3))
    speed = np.full(k, np.nan)
    time = np.full(k, np.nan)
    grade = np.empty(k)
    load = np.empty(k)
    on_vertex = np.zeros(k, dtype=bool)
    for r, s in enumerate(st):
        j = min(int(np.searchsorted(S, s, side="right")) - 1, m - 2)
        sigma = s - S[j]
        seg = S[j + 1] - S[j]
        if sigma <= 1e-9 or s >= length - 1e-9:
            i = j if sigma <= 1e-9 else m - 1
            xyz[r], speed[r], time[r], grade[r], load[r] = P[i], V[i], T[i], G[i], vertex_load[i]
            on_vertex[r] = True
            continue
        f = sigma / seg
        xyz[r] = P[j] + f * (P[j + 1] - P[j])
        drop = P[j, 2] - P[j + 1, 2]
        plan = math.sqrt(max(seg * seg - drop * drop, 0.0))
        grade[r] = G[j]
        load[r] = plan / seg
        if math.isfinite(u0[j]) and math.isfinite(T[j]):
            w2, t, at = segment_law(u0[j], f * drop, f * plan, sigma, mover.g, mover.mu, mover.drag,
                                    mover.stall_speed ** 2)
            if at < 0.0:
                speed[r], time[r] = math.sqrt(w2), T[j] + t
    if mover.max_speed is not None:
        with np.errstate(invalid="ignore"):
            over = speed > mover.max_speed
        flags = [f if not over[i] or "overspeed" in f.split(";") else ";".join(filter(None, [f, "overspeed"]))
                 for i, f in enumerate(flags)]
    ground = np.atleast_1d(np.asarray(terrain.sample(xyz[:, 0], xyz[:, 1]), dtype=float))
    lon, lat = _lonlat(xyz, terrain.crs)
    with np.errstate(invalid="ignore"):
        grade_deg = np.degrees(np.arctan(grade))
    return StationTable(station_m=st, x_m=xyz[:, 0].copy(), y_m=xyz[:, 1].copy(), lon_deg=lon, lat_deg=lat,
                        ground_z_m=ground, line_z_m=xyz[:, 2].copy(), clearance_m=xyz[:, 2] - ground, grade=grade,
                        grade_deg=grade_deg, speed_m_s=speed, time_s=time, normal_load_ratio=load,
                        flags=tuple(flags), is_vertex=on_vertex, step_m=step)


def _lonlat(xyz: np.ndarray, crs) -> tuple[np.ndarray, np.ndarray]:
    """WGS 84 longitude and latitude of map points (NaN without a CRS)."""
    if crs is None:
        nan = np.full(len(xyz), np.nan)
        return nan, nan.copy()
    import pyproj

    tr = pyproj.Transformer.from_crs(pyproj.CRS.from_user_input(crs), pyproj.CRS.from_epsg(4326), always_xy=True)
    lon, lat = tr.transform(xyz[:, 0], xyz[:, 1])
    return np.asarray(lon, dtype=float), np.asarray(lat, dtype=float)
