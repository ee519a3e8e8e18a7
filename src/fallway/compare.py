"""Compare candidate lines on the same physics, and test them against a friction range.

Engineers rarely build the one computed line: they have alignments drawn in GIS, limits
the tool does not know, and a material whose friction is uncertain.  This module puts
every candidate on the same footing:

* :func:`read_lines` reads LineStrings from a GeoJSON (RFC 7946, lon/lat) or GeoPackage
  file into the terrain's CRS;
* :func:`drape` lays a plan line on the ground (densified to at most half a cell,
  heights from the terrain's smooth interpolant);
* :func:`evaluate_line` times one 3D line with :func:`fallway.physics.traverse` and
  reduces the profile to one comparison row (:class:`LineResult`);
* :func:`compare` does this for a list of lines, adds the tool's own optimum for the
  first line's end points, ranks them and returns a :class:`Comparison` (CSV, records);
* :func:`envelope` evaluates a line at low, nominal and high friction
  (:class:`Envelope`), and :func:`robust_route` looks for the fastest line at nominal
  friction that passes that envelope (a heuristic over a few searches; see its notes).

Conventions
-----------
- Stations, lengths and heights in metres, along the 3D line.  Grades are descent grades
  (drop / plan length, positive downhill), as in :class:`fallway.physics.Profile`.
- A row's ``travel_time_s`` and ``exit_speed_m_s`` are None when the mover stalls.
- Ranking: lines that reach the end first, fastest first (whatever their status: a line
  over the speed limit still shows its time, and its status says why it is not
  acceptable); then lines that stall, the furthest stall first; then searches that found
  no feasible line.
"""

from __future__ import annotations

import csv
import dataclasses
import math
import os
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np

from .errors import FallwayIOError, NoFeasibleLine, ParameterError
from .params import Limits
from .physics import Mover, Profile, traverse
from .physics import check_mu_range as _check_mu_range

__all__ = [
    "COMPARISON_COLUMNS",
    "ENVELOPE_COLUMNS",
    "Comparison",
    "Envelope",
    "LineResult",
    "RobustRoute",
    "compare",
    "comparison_figure",
    "drape",
    "envelope",
    "evaluate_line",
    "min_bend_radius_m",
    "read_lines",
    "robust_route",
]

#: Columns of ``comparison.csv``, in order.
COMPARISON_COLUMNS = ("name", "travel_time_s", "length_m", "drop_m", "exit_speed_m_s",
                      "max_speed_m_s", "min_speed_m_s", "max_grade", "min_radius_m",
                      "stalled_at_m", "overspeed_m", "liftoff_m", "status")
#: Extra columns written when a friction range is given.
ENVELOPE_COLUMNS = ("exit_speed_lo_mu_m_s", "exit_speed_hi_mu_m_s", "travel_time_lo_mu_s",
                    "travel_time_hi_mu_s", "max_speed_lo_mu_m_s", "stalled_at_hi_mu_m",
                    "envelope_status")
#: Name of the row that holds the tool's own optimum.
COMPUTED_NAME = "computed optimum"

# decimals of each numeric CSV column (fixed formatting, byte-stable files)
_DECIMALS = {"travel_time_s": 3, "length_m": 2, "drop_m": 2, "exit_speed_m_s": 3,
             "max_speed_m_s": 3, "min_speed_m_s": 3, "max_grade": 4, "min_radius_m": 2,
             "stalled_at_m": 2, "overspeed_m": 2, "liftoff_m": 2,
             "exit_speed_lo_mu_m_s": 3, "exit_speed_hi_mu_m_s": 3, "travel_time_lo_mu_s": 3,
             "travel_time_hi_mu_s": 3, "max_speed_lo_mu_m_s": 3, "stalled_at_hi_mu_m": 2}
# consecutive plan vertices closer than this (m) are one vertex
_SAME_POINT_M = 1e-6


# --------------------------------------------------------------------------- reading

#: A line whose vertices all lie within this of the ground counts as lying on it.
_ON_GROUND_M = 0.05


def _crs_object(crs):
    """A pyproj CRS from anything rasterio or pyproj accept (None stays None)."""
    if crs is None:
        return None
    from pyproj import CRS

    if isinstance(crs, CRS):
        return crs
    to_wkt = getattr(crs, "to_wkt", None)
    try:
        return CRS.from_user_input(to_wkt() if callable(to_wkt) else crs)
    except Exception as err:  # pyproj raises its own CRSError
        raise ParameterError(f"cannot use {crs!r} as a CRS: {str(err).splitlines()[0]}") from err


def _unique_names(names: Sequence[str | None]) -> list[str]:
    """Fill missing names with ``line-<k>`` (k = 1-based file order); suffix duplicates."""
    out: list[str] = []
    seen: set[str] = set()
    for k, n in enumerate(names, start=1):
        base = str(n).strip() if n is not None else ""
        if not base or base.lower() == "nan":
            base = f"line-{k}"
        name, j = base, 2
        while name in seen:
            name = f"{base}-{j}"
            j += 1
        seen.add(name)
        out.append(name)
    return out


def _drop_repeats(coords: np.ndarray, tol_m: float = _SAME_POINT_M) -> np.ndarray:
    """Remove vertices within ``tol_m`` of the last kept one (a GIS double click).

    The last vertex is always kept (it is the end point); a kept vertex too close to it
    gives way instead.
    """
    if len(coords) < 2:
        return coords
    keep = [0]
    for i in range(1, len(coords)):
        if np.linalg.norm(coords[i] - coords[keep[-1]]) > tol_m:
            keep.append(i)
    if keep[-1] != len(coords) - 1:
        if len(keep) > 1:
            keep[-1] = len(coords) - 1
        else:
            keep.append(len(coords) - 1)
    out = coords[keep]
    if len(out) == 2 and np.linalg.norm(out[1] - out[0]) <= tol_m:
        return out[:1]
    return out


def _line_layer(p: Path):
    """The layer to read when none is named: the only one, or the only one with lines."""
    import pyogrio

    layers = pyogrio.list_layers(p)
    if len(layers) <= 1:
        return None
    lines = [str(n) for n, kind in layers if kind is None or "line" in str(kind).lower() or kind == "Unknown"]
    if len(lines) == 1:
        return lines[0]
    names = ", ".join(str(n) for n, _ in layers)
    raise ParameterError(f"{p} holds {len(layers)} layers ({names}); put the candidate lines in one layer "
                         "or name the layer to read")


def read_lines(path: str | os.PathLike, *, crs=None, layer: str | int | None = None
               ) -> list[tuple[str, np.ndarray]]:
    """Read named LineStrings from a GeoJSON or GeoPackage file.

    Parameters
    ----------
    path : path-like
        A GeoJSON file (RFC 7946: longitude/latitude on WGS 84) or a GeoPackage (any
        CRS, read from the file), or anything else GDAL reads as vector data.
    crs : CRS, optional
        Target CRS (the terrain's; rasterio or pyproj CRS, or an ``"EPSG:..."`` string).
        The lines are reprojected into it; without it they stay in the file's CRS.
    layer : str or int, optional
        Layer of a multi-layer file.  Default: the only layer, or the only layer with
        line (or unknown) geometry; a file with several such layers is an error.

    Returns
    -------
    list of (name, ndarray)
        In file order.  Each array is (N, 2) x, y, or (N, 3) x, y, z when the file holds
        heights (a raised line); z is in the file's units, not reprojected.  Names come
        from the ``name`` property (any case); a missing or empty name becomes
        ``line-<k>`` with k the feature's 1-based position in the file, and a repeated
        name gets a suffix (``A``, ``A-2``).

    Raises
    ------
    FallwayIOError
        The file is missing or GDAL cannot read it.
    ParameterError
        No features, a feature that is not a LineString (a MultiLineString of one part
        is accepted), a line with fewer than two distinct vertices, coordinates outside
        the longitude/latitude range in a file whose CRS is geographic (a projected line
        saved without CRS information), or no CRS while ``crs`` is given.

    Notes
    -----
    Heights that are all exactly 0 (or missing) are taken as a 2D line: many GIS tools
    write 0 where a drawn line has no height.  Consecutive repeated vertices are merged.

    Examples
    --------
    >>> import json, pathlib, tempfile
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "lines.geojson"
    >>> fc = {"type": "FeatureCollection", "features": [
    ...     {"type": "Feature", "properties": {"name": "A"},
    ...      "geometry": {"type": "LineString", "coordinates": [[15, 45], [15.001, 44.999]]}},
    ...     {"type": "Feature", "properties": {},
    ...      "geometry": {"type": "LineString", "coordinates": [[15, 45], [15.002, 44.999]]}}]}
    >>> _ = p.write_text(json.dumps(fc))
    >>> [(name, xy.shape) for name, xy in read_lines(p, crs="EPSG:32633")]
    [('A', (2, 2)), ('line-2', (2, 2))]
    """
    import pyogrio.raw
    import shapely
    from pyogrio.errors import DataLayerError, DataSourceError

    p = Path(path)
    if not p.exists():
        raise FallwayIOError(f"line file not found: {p}")
    if p.is_dir() and p.suffix.lower() not in (".gdb",):
        raise FallwayIOError(f"{p} is a folder; give the GeoJSON or GeoPackage file of the lines")
    try:
        if layer is None:
            layer = _line_layer(p)
        meta, _fids, geoms, field_data = pyogrio.raw.read(p, layer=layer)
    except (DataSourceError, DataLayerError) as err:
        msg = str(err).splitlines()[0] if str(err) else type(err).__name__
        raise FallwayIOError(f"cannot read {p} as GeoJSON or GeoPackage ({msg}); check the file") from err
    if geoms is None or len(geoms) == 0:
        raise ParameterError(f"{p} holds no features; draw at least one LineString with a name property")
    fields = [str(f) for f in meta.get("fields", [])]
    name_idx = next((i for i, f in enumerate(fields) if f == "name"),
                    next((i for i, f in enumerate(fields) if f.lower() == "name"), None))
    raw_names = list(field_data[name_idx]) if name_idx is not None else [None] * len(geoms)
    raw_names = [None if (n is None or (isinstance(n, float) and math.isnan(n))) else n for n in raw_names]
    src = _crs_object(meta.get("crs"))
    dst = _crs_object(crs)

    lines: list[np.ndarray] = []
    for i, wkb in enumerate(geoms):
        label = f"feature {i + 1}" + (f" '{raw_names[i]}'" if raw_names[i] not in (None, "") else "")
        if wkb is None:
            raise ParameterError(f"{label} in {p} has no geometry; give it a LineString or delete it")
        g = shapely.from_wkb(wkb)
        kind = g.geom_type
        if kind == "MultiLineString" and len(g.geoms) == 1:
            g = g.geoms[0]
            kind = g.geom_type
        if kind == "MultiLineString":
            raise ParameterError(f"{label} in {p} is a MultiLineString of {len(g.geoms)} parts; "
                                 "merge it into one LineString or split it into named features")
        if kind != "LineString":
            raise ParameterError(f"{label} in {p} is a {kind}, not a LineString; "
                                 "give every feature a LineString geometry")
        c = shapely.get_coordinates(g, include_z=True)
        if not np.all(np.isfinite(c[:, :2])):
            raise ParameterError(f"{label} in {p} has non-finite coordinates; fix the geometry")
        z = c[:, 2]
        has_z = bool(np.all(np.isfinite(z))) and bool(np.any(z != 0.0))
        c = c if has_z else c[:, :2]
        c = _drop_repeats(c)
        if len(c) < 2:
            raise ParameterError(f"{label} in {p} has fewer than 2 distinct vertices; draw a line with a start and an end")
        if src is not None and src.is_geographic:
            if np.any(np.abs(c[:, 0]) > 360.0) or np.any(np.abs(c[:, 1]) > 90.0):
                raise ParameterError(
                    f"{label} in {p} has coordinates outside the longitude/latitude range "
                    f"(first vertex {c[0, 0]:.3f}, {c[0, 1]:.3f}): a GeoJSON must be in lon/lat (RFC 7946); "
                    "reproject it to EPSG:4326 or save it as a GeoPackage with its CRS")
        lines.append(c)

    if dst is not None:
        if src is None:
            raise ParameterError(f"{p} has no CRS information; assign the CRS of its coordinates "
                                 "(or save it as GeoJSON in lon/lat)")
        if not src.equals(dst):
            from pyproj import Transformer

            tr = Transformer.from_crs(src, dst, always_xy=True)
            out = []
            for c in lines:
                x, y = tr.transform(c[:, 0], c[:, 1])
                cc = c.copy()
                cc[:, 0] = x
                cc[:, 1] = y
                if not np.all(np.isfinite(cc[:, :2])):
                    raise ParameterError(f"a line in {p} cannot be projected into the terrain's CRS; "
                                         "check that it lies in the DEM's area")
                out.append(cc)
            lines = out
    names = _unique_names(raw_names)
    return list(zip(names, lines))


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
    a = _drop_repeats(a[:, :2])
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

def _resample_plan(xy: np.ndarray, spacing_m: float) -> np.ndarray:
    """Points at equal plan distance along a polyline, both ends included."""
    seg = np.hypot(*np.diff(xy, axis=0).T)
    cum = np.concatenate([[0.0], np.cumsum(seg)])
    n = max(2, int(math.ceil(cum[-1] / spacing_m - 1e-9)) + 1)
    at = np.linspace(0.0, cum[-1], n)
    return np.column_stack([np.interp(at, cum, xy[:, 0]), np.interp(at, cum, xy[:, 1])])


def min_bend_radius_m(xy, *, spacing_m: float | None = None) -> float:
    """Smallest plan bend radius of a polyline, from the circle through each vertex and its neighbours.

    Parameters
    ----------
    xy : array_like (N, 2+)
        Plan vertices as drawn (extra columns ignored).
    spacing_m : float, optional
        Resample the line at this plan spacing first (for computed lines, whose vertex
        spacing is the optimiser's, not a designer's); default: the vertices as given.

    Returns
    -------
    float
        The smallest circumradius of three consecutive (distinct) plan vertices, m;
        ``inf`` for a straight line or fewer than three vertices; 0 where the line
        doubles straight back on itself (a 180° turn).

    Notes
    -----
    A drawn polyline has no radius of its own: its corners are sharp.  What an engineer
    reads from it is the curve the alignment implies when built through its vertices.
    For a curve sampled by its vertices (the usual way a bend is drawn in GIS) the
    circumradius of consecutive vertices is that curve's radius -- exact for vertices on
    a circle, whatever their spacing.  For two long straights meeting at a corner of turn
    phi with legs L it is ``L / (2 sin(phi / 2))``, between the largest tangent arcs that
    fit in half of each leg (``L / (2 tan(phi/2))``) and in the whole leg.  It must be
    taken on the vertices as drawn: densified vertices would put a tiny circle at each
    corner (radius of the order of the densifying step) and collinear ones none at all.
    A computed line is resampled at one cell (``spacing_m``): its vertices are where the
    optimiser left them, unevenly spaced, and millimetre wiggles between close vertices
    would read as millimetre radii; one cell is the shortest length the terrain model
    resolves, so the figure is the bend radius at the DEM's own resolution.

    Examples
    --------
    >>> import numpy as np
    >>> a = np.linspace(0, np.pi / 2, 7)
    >>> print(f"{min_bend_radius_m(np.column_stack([30 * np.cos(a), 30 * np.sin(a)])):.6f}")
    30.000000
    >>> min_bend_radius_m([(0, 0), (5, 0), (10, 0)])
    inf
    """
    p = _drop_repeats(np.asarray(xy, dtype=float)[:, :2])
    if spacing_m is not None and len(p) >= 2:
        if not (math.isfinite(float(spacing_m)) and float(spacing_m) > 0):
            raise ParameterError(f"spacing_m must be a finite number > 0, got {spacing_m!r}")
        p = _resample_plan(p, float(spacing_m))
    if len(p) < 3:
        return math.inf
    a = p[:-2]
    b = p[1:-1]
    c = p[2:]
    ab = np.hypot(*(b - a).T)
    bc = np.hypot(*(c - b).T)
    ca = np.hypot(*(a - c).T)
    cross = (b - a)[:, 0] * (c - a)[:, 1] - (b - a)[:, 1] * (c - a)[:, 0]  # twice the area
    # |cross| = ab * bc * sin(turn): a turn below 1e-9 rad is straight (radius beyond 1e9 legs)
    straight = np.abs(cross) <= 1e-9 * ab * bc
    dot = np.einsum("ij,ij->i", b - a, c - b)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.where(straight, np.where(dot < 0, 0.0, np.inf), ab * bc * ca / (2.0 * np.abs(cross)))
    return float(np.min(r))


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
        Smallest plan bend radius (:func:`min_bend_radius_m`), inf if straight.
    stalled_at_m, overspeed_m, liftoff_m : float or None
        Station of the stall, of the first vertex over ``Mover.max_speed`` and of the
        first lift-off vertex; None when there is none.
    status : str
        ``"ok"`` or the first failed check in this order: ``"stalls"``, ``"keepout"``
        (the line enters a no-go area), ``"overspeed"``, ``"liftoff"``, ``"grade"`` (a
        segment outside the grade window of the limits), ``"radius"`` (a bend tighter
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


def _enters_keepout(terrain, p: np.ndarray, keepout) -> bool:
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
        :func:`min_bend_radius_m`).
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
    radius = min_bend_radius_m(p if radius_xy is None else radius_xy, spacing_m=radius_spacing_m)
    overspeed = _first(prof.overspeed)
    liftoff = _first(prof.liftoff)
    checks = (("stalls", stalled is not None),
              ("keepout", keepout is not None and _enters_keepout(terrain, p, keepout)),
              ("overspeed", overspeed is not None),
              ("liftoff", liftoff is not None),
              ("grade", bool(g.size) and bool(np.any(g < limits.min_grade - 1e-12)
                                              or np.any(g > limits.max_grade + 1e-12))),
              ("radius", limits.min_radius_m is not None and radius < limits.min_radius_m))
    issues = tuple(k for k, failed in checks if failed)
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
        return (0, r.travel_time_s, r.name)
    if r.stalled_at_m is not None:
        return (1, -r.stalled_at_m, r.name)
    return (2, 0.0, r.name)


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
    return str(value)


@dataclass(frozen=True, eq=False)
class Comparison:
    """Candidate lines timed on the same physics, ranked.

    Attributes
    ----------
    rows : tuple of LineResult
        Ranked: lines that reach the end, fastest first; then lines that stall, the
        furthest stall first; then searches that found no line.
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


def _as_lines(lines) -> list[tuple[str, np.ndarray]]:
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


def _row(terrain, name, pts, mover, limits, mu_range, *, computed=False, keepout=None):
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


def _failed_row(name: str, message: str) -> LineResult:
    return LineResult(name=name, travel_time_s=None, length_m=math.nan, drop_m=math.nan, exit_speed_m_s=None,
                      max_speed_m_s=math.nan, min_speed_m_s=math.nan, max_grade=math.nan, min_radius_m=math.nan,
                      stalled_at_m=None, overspeed_m=None, liftoff_m=None, status="no feasible line",
                      computed=True, message=message)


def compare(terrain, lines, mover: Mover, *, limits: Limits | None = None, keepout=None, optimum: bool = True,
            neighbours: int = 16, refine: bool = True, mu_range: tuple[float, float] | None = None,
            route_kwargs: dict | None = None, route=None) -> Comparison:
    """Time candidate lines on the same terrain and physics, and rank them.

    Parameters
    ----------
    terrain : Terrain
    lines : sequence of (name, points)
        Plan lines (N, 2) are draped on the ground (:func:`drape`); 3D lines (N, 3) are
        raised lines and keep their own z.  All in the terrain's CRS
        (:func:`read_lines` with ``crs=terrain.crs``).
    mover : Mover
        The nominal physics.
    limits : Limits, optional
        Checked on every line (status) and given to the search.
    keepout : Keepout, shapely geometry or bool mask, optional
        No-go areas in the terrain's CRS: given to the search, and every line that
        enters one gets the status ``"keepout"``.
    optimum : bool
        Add the tool's own optimum between the first line's end points
        (:func:`fallway.route.find_route`, a ground line; the search snaps each end to
        the nearest cell centre, so its ends may differ from the drawn ones by up to
        half a cell diagonal), marked ``computed``; when the search finds no line the
        row has status ``"no feasible line"``.  The computed line is timed like the
        others (its vertices closer than 1 % of a cell merged) and its bend radius is
        measured at one-cell spacing (:func:`min_bend_radius_m`).
    neighbours : {8, 16, 32}
        Lattice stencil of the search.
    refine : bool
        Refine the searched line.
    mu_range : (float, float), optional
        Friction range (LO, HI): every row then carries an :class:`Envelope` and the CSV
        the envelope columns.  The search itself runs at nominal friction (see
        :func:`robust_route` for a search against the range).
    route_kwargs : dict, optional
        Further keyword arguments for ``find_route``.
    route : Route, optional
        An optimum already found (e.g. with via points or a raised line): used as the
        computed row instead of a new search (``optimum`` must be True).

    Returns
    -------
    Comparison

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.physics import Mover
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(np.tile(-0.5 * np.arange(30.0), (10, 1)), (2.0, 0, 0, 0, -2.0, 20.0))
    >>> lines = [("straight", [(1.0, 10.0), (57.0, 10.0)]), ("dogleg", [(1.0, 10.0), (29.0, 18.0), (57.0, 10.0)])]
    >>> cmp = compare(t, lines, Mover(mu=0.1, normal="gravity"), optimum=False)
    >>> [(r.name, r.status) for r in cmp.rows]
    [('straight', 'ok'), ('dogleg', 'ok')]
    """
    limits = Limits() if limits is None else limits
    items = _as_lines(lines)
    if mu_range is not None:
        mu_range = _check_mu_range(mover, *mu_range)
    if not items and optimum and route is None:
        raise ParameterError("give at least one line: the computed optimum uses the first line's end points")
    rows = [_row(terrain, name, pts, mover, limits, mu_range, keepout=keepout) for name, pts in items]
    given = route
    route = None
    if optimum:
        taken = {n for n, _ in items}
        name = COMPUTED_NAME
        j = 2
        while name in taken:
            name = f"{COMPUTED_NAME}-{j}"
            j += 1
        try:
            if given is not None:
                route = given
            else:
                from .route import find_route

                first = items[0][1]
                start = (float(first[0, 0]), float(first[0, 1]))
                end = (float(first[-1, 0]), float(first[-1, 1]))
                kw = dict(limits=limits, keepout=keepout, neighbours=neighbours, refine=refine)
                kw.update(route_kwargs or {})
                route = find_route(terrain, start, end, mover, **kw)
        except NoFeasibleLine as err:
            rows.append(_failed_row(name, str(err)))
        else:
            # vertices the refinement left within 1 % of a cell of each other are one
            # vertex: they carry no geometry, only a spurious kink
            line = _drop_repeats(np.asarray(route.line, dtype=float), 0.01 * float(terrain.cell_size))
            rows.append(_row(terrain, name, line, mover, limits, mu_range, computed=True, keepout=keepout))
    return Comparison.ranked(rows, mover, limits, mu_range, route)


# --------------------------------------------------------------------------- robust search

@dataclass(frozen=True, eq=False)
class RobustRoute:
    """The outcome of :func:`robust_route`.

    Attributes
    ----------
    route : Route or None
        The chosen line: the fastest at nominal friction among the robust candidates;
        with ``found`` False (``strict=False`` only), the nominal optimum (or None when
        no search found any line).
    envelope : Envelope or None
        The chosen line at low, nominal and high friction.
    candidates : tuple of dict
        Every search made, in order: ``label``, the ``mu`` and ``max_speed`` it ran
        with, ``verdict`` (``"no feasible line"`` when the search found none), nominal
        ``travel_time_s`` (None if none or it stalls) and the candidate's ``envelope``
        (or None).
    nominal_is_robust : bool
        True when the unconstrained nominal optimum already passes the envelope (then it
        is the robust optimum, as far as the search itself is optimal).
    found : bool
        True when a robust line was found.
    """

    route: object
    envelope: Envelope | None
    candidates: tuple
    nominal_is_robust: bool
    found: bool = True
    method: str = "candidates"
    note: str = ""


#: Search options of the ordinary lattice search that the robust one does not take.
_SEARCH_ONLY = ("heuristic", "energy_tol", "max_labels", "max_per_cell", "via")


def robust_route(terrain, start, end, mover: Mover, mu_lo: float, mu_hi: float, *, limits: Limits | None = None,
                 max_rounds: int = 3, strict: bool = True, search=None, method: str = "exact",
                 max_labels: int = 2_000_000, resolution: float = 0.01, **kw) -> RobustRoute:
    """Fastest line at nominal friction that stays feasible at HI and within the speed limit at LO.

    ``method="exact"`` (default) runs the robust lattice search
    (:func:`fallway.lattice.robust.robust_lattice_line`: labels carry one energy per
    friction case), refines its line and checks the result; ``"candidates"`` is the
    older heuristic over a few ordinary searches (Notes).

    Parameters
    ----------
    terrain : Terrain
    start, end : (float, float)
        Map coordinates in the terrain's CRS.
    mover : Mover
        Nominal physics; ``mover.max_speed`` is the speed limit checked at LO.
    mu_lo, mu_hi : float
        The friction range, ``mu_lo <= mover.mu <= mu_hi``.
    limits : Limits, optional
    max_rounds : int
        Number of searches with a tightened speed cap (each is one search).
    strict : bool
        Raise when no candidate is robust (default); otherwise return the nominal
        optimum with ``found=False``.
    search : callable, optional
        ``search(terrain, start, end, mover, **kw) -> Route`` for the candidate
        method; default :func:`fallway.route.find_route`.
    method : {"exact", "candidates"}
        See Notes.  With via points the candidate method is used (the robust lattice
        search has one leg).
    max_labels : int
        Label budget of each robust lattice search.
    resolution : float
        When the exact robust search runs out of labels (a speed limit that binds at
        LO, or drag), it is repeated at this energy resolution (approximate; see
        :func:`~fallway.lattice.robust.robust_lattice_line`).
    **kw
        Passed to the searches (neighbours, keepout, refine, max_per_cell, ...).

    Returns
    -------
    RobustRoute

    Raises
    ------
    NoFeasibleLine
        With ``strict``: no candidate passes the envelope (``reason="limits"``).

    Notes
    -----
    Exact method.  The robust lattice search finds the lattice line with the least
    nominal time among those that get through at ``mu_hi`` and stay within the speed
    limit at ``mu_lo`` (gravity-normal model, exact Pareto labels over the three
    energies; module notes of :mod:`fallway.lattice.robust`).  Its line is refined at
    nominal friction and the refined line checked with :func:`envelope` (the reporting
    model); if the refinement made it lose robustness the lattice line itself is
    checked and kept.  When the search exhausts ``max_labels`` it is repeated at the
    energy resolution ``resolution`` (then ``method`` reads ``"approximate"``); when
    that finds nothing robust either, the candidate method below runs and the best
    robust line of all is returned.  A robust lattice line may revisit a cell (a loop
    sheds energy at LO); the note says so.  When the exact search proves that no
    lattice line works, no candidates are tried.

    Candidate method.  Every candidate is judged by the same check as :func:`envelope`:
    :func:`fallway.physics.traverse` along the candidate line at ``mu_lo``, ``mover.mu``
    and ``mu_hi``; a candidate is *robust* when it does not stall and neither exceeds
    the speed limit nor lifts off at any of the three.  Candidates, in order:

    1. the optimum at nominal friction.  If it is robust it is returned at once: no
       robust line can be faster at nominal friction than the unconstrained nominal
       optimum;
    2. the optimum searched at ``mu_hi`` (the search enforces its hard speed window at
       that friction).  Speeds fall as friction rises (for both normal-force models:
       at equal speed the rate of change of v² is lower at higher friction, so by
       comparison of the ODEs v² is lower everywhere), so a line that gets through at
       HI also gets through at nominal and LO friction;
    3. with a speed limit, while the last HI candidate is too fast at LO, up to
       ``max_rounds`` more searches at ``mu_hi`` with a tightened speed cap: the cap is
       the previous candidate's top speed at HI times ``max_speed / (its top speed at
       LO)``, less 2 %, so the lines found are gentler and their speed at LO moves
       under the limit;
    4. with a speed limit, the optimum searched at ``mu_lo`` with the speed limit,
       which the search keeps at LO by construction, checked for stalls at HI.

    The robust candidate with the shortest nominal time is returned.

    What it guarantees: the returned line is robust as measured by ``traverse`` at the
    three frictions (an exact check of that line with the reporting model, not of the
    search's lattice model); when the nominal optimum is robust the answer is optimal to
    the extent the nominal search is.  What it does not: when the nominal optimum
    fails, the answer is only the best of at most ``3 + max_rounds`` candidates.  The
    true robust optimum may be a line that no single-friction search returns (at
    nominal friction a label that is slower but keeps more energy at HI is discarded by
    a dominance test on one energy), and the method may report no line although a
    robust one exists.  The exact search keeps per label the nominal time and the three
    energies (e_lo >= e_nom >= e_hi); a label dominates another only when it is no
    slower, has no less energy at nominal and at HI friction and no more energy at LO
    (extra energy at LO can only push the speed over the limit; the stall check at LO
    is implied by the one at HI, energies being ordered in friction).  Lift-off, which
    also grows with speed, would need the LO energy too and is only checked afterwards.
    """
    lo, hi = _check_mu_range(mover, mu_lo, mu_hi)
    limits = Limits() if limits is None else limits
    if method not in ("exact", "candidates"):
        raise ParameterError(f"method must be 'exact' or 'candidates', got {method!r}")
    if search is None:
        from .route import find_route as search
    candidates: list[dict] = []
    found: dict[str, tuple] = {}
    notes: list[str] = []
    used = "candidates"
    if method == "exact" and kw.get("via"):
        notes.append("via points: the robust lattice search has one leg, so the candidate method was used")
    elif method == "exact":
        out = _robust_exact(terrain, start, end, mover, lo, hi, limits, max_labels, resolution, kw,
                            candidates, found, notes)
        used = out["method"]
        robust = [(r, e) for r, e in found.values() if e.robust]
        if robust or out["proved_none"]:
            if robust:
                r, e = min(robust, key=lambda re: re[1].nominal.travel_time_s)
                _mark(r, used, lo, hi, notes)
                return RobustRoute(route=r, envelope=e, candidates=tuple(candidates),
                                   nominal_is_robust=False, method=used, note="; ".join(notes))
            if strict:
                raise NoFeasibleLine(out["message"], reason="limits")
            return RobustRoute(route=None, envelope=None, candidates=tuple(candidates), nominal_is_robust=False,
                               found=False, method=used, note="; ".join(notes + [out["message"]]))
        notes.append("the robust lattice search gave no robust line; the candidate method was tried too")
        used = f"{used}+candidates"

    def attempt(label: str, m: Mover):
        entry = {"label": label, "mu": m.mu, "max_speed": m.max_speed, "verdict": "no feasible line",
                 "travel_time_s": None, "envelope": None}
        candidates.append(entry)
        try:
            r = search(terrain, start, end, m, limits=limits, **kw)
        except NoFeasibleLine:
            return None
        env = envelope(terrain, np.asarray(r.line, dtype=float), mover, lo, hi, limits=limits, name=label,
                       computed=True)
        entry.update(verdict=env.verdict, travel_time_s=env.nominal.travel_time_s, envelope=env)
        found[label] = (r, env)
        return env

    e0 = attempt("nominal", mover)
    nominal_ok = e0 is not None and e0.robust
    if not nominal_ok:
        env = attempt("high friction", dataclasses.replace(mover, mu=hi))
        if mover.max_speed is not None:
            cap = mover.max_speed
            for _ in range(max(0, int(max_rounds))):
                if env is None or env.low.overspeed_m is None:
                    break
                # scale the previous line's speed at HI by its overshoot at LO (2 % margin)
                cap = min(cap, env.high.max_speed_m_s) * mover.max_speed / env.low.max_speed_m_s * 0.98
                if cap <= mover.stall_speed:
                    break
                env = attempt(f"high friction, cap {cap:.2f} m/s", dataclasses.replace(mover, mu=hi, max_speed=cap))
            attempt("low friction", dataclasses.replace(mover, mu=lo))
    robust = [(r, e) for r, e in found.values() if e.robust]
    if robust:
        r, e = min(robust, key=lambda re: re[1].nominal.travel_time_s)
        _mark(r, used, lo, hi, notes)
        return RobustRoute(route=r, envelope=e, candidates=tuple(candidates), nominal_is_robust=nominal_ok,
                           method=used, note="; ".join(notes))
    if strict:
        tried = "; ".join(f"{c['label']}: {c['verdict']}" for c in candidates)
        raise NoFeasibleLine(f"no line found that works from mu={lo:g} to mu={hi:g} ({tried}); "
                             "narrow the friction range, relax the speed limit or move the end points",
                             reason="limits")
    r, e = found.get("nominal", next(iter(found.values()), (None, None)))
    return RobustRoute(route=r, envelope=e, candidates=tuple(candidates), nominal_is_robust=False, found=False,
                       method=used, note="; ".join(notes))


def _mark(route, method: str, lo: float, hi: float, notes: list[str]) -> None:
    """Record in the route's summary how its robustness was established."""
    route.summary.update({"robust_method": method, "robust_mu_range": [lo, hi],
                          "robust_note": "; ".join(notes)})


def _nominal_if_robust(terrain, start, end, mover, lo, hi, limits, lat_kw, kw):
    """The ordinary nominal lattice optimum when it is exact and robust on the lattice model, else None."""
    from .lattice.search import lattice_line
    from .params import SearchOptions

    lat = lattice_line(terrain, start, end, mover, limits=limits, keepout=lat_kw.get("keepout"),
                       options=SearchOptions(neighbours=lat_kw.get("neighbours", 16), max_labels=kw.get("max_labels"),
                                             label_cap=kw.get("max_per_cell")))
    if not lat.stats.get("exact", True):
        return None
    g_model = dataclasses.replace(mover, normal="gravity")
    at_hi = traverse(lat.points, dataclasses.replace(g_model, mu=hi, max_speed=None))
    at_lo = traverse(lat.points, dataclasses.replace(g_model, mu=lo))
    if at_hi.stalled_at_m is not None or len(at_lo.overspeed) or at_lo.stalled_at_m is not None:
        return None
    return lat


def _robust_exact(terrain, start, end, mover, lo, hi, limits, max_labels, resolution, kw, candidates, found,
                  notes) -> dict:
    """The exact method of :func:`robust_route`: fills ``candidates``/``found``; see its Notes."""
    from .lattice.robust import robust_lattice_line
    from .params import SearchOptions
    from .route import route_from_lattice

    lat_kw = {k: kw[k] for k in ("neighbours", "keepout") if k in kw}
    route_kw = {k: v for k, v in kw.items() if k not in _SEARCH_ONLY}
    tries = [("nominal", None), ("exact", 0.0)]
    if resolution > 0.0:
        tries.append(("approximate", float(resolution)))
    used, message = "exact", ""
    for name, res in tries:
        used = "exact" if name == "nominal" else name
        label = ("nominal optimum" if res is None else "robust search" if res == 0.0
                 else f"robust search, resolution {res:g}")
        entry = {"label": label, "mu": mover.mu, "max_speed": mover.max_speed, "verdict": "no feasible line",
                 "travel_time_s": None, "envelope": None}
        candidates.append(entry)
        try:
            if res is None:
                # every robust line is a feasible line of the ordinary nominal search, so
                # an exact nominal optimum that is robust on the lattice model is the
                # robust optimum: no need for the (larger) robust search
                lat = _nominal_if_robust(terrain, start, end, mover, lo, hi, limits, lat_kw, kw)
                if lat is None:
                    entry["verdict"] = "not robust on the lattice model (or not exact)"
                    continue
            else:
                lat = robust_lattice_line(terrain, start, end, mover, lo, hi, limits=limits,
                                          keepout=lat_kw.get("keepout"), resolution=res,
                                          options=SearchOptions(neighbours=lat_kw.get("neighbours", 16),
                                                                max_labels=max_labels,
                                                                label_cap=kw.get("max_per_cell")))
        except NoFeasibleLine as err:
            message = str(err)
            entry["verdict"] = message
            if "label budget" in message:
                notes.append(f"{label}: label budget of {max_labels} exhausted")
                continue
            exact = res == 0.0 and not kw.get("max_per_cell")
            return {"method": used, "proved_none": exact, "message": message}
        if not lat.stats.get("simple", True):
            notes.append(f"{label}: the robust lattice line revisits a cell (a loop that sheds energy)")
        if not lat.stats.get("exact", True):
            used = "approximate"
        variants = [("refined", route_kw.get("refine", True))] if route_kw.get("refine", True) else []
        variants.append(("lattice line", False))
        for vname, ref in variants:
            r = route_from_lattice(terrain, lat, mover, limits=limits, **{**route_kw, "refine": ref})
            r.summary.update({"search_exact": bool(lat.stats.get("exact", True)),
                              "labels_created": int(lat.stats["labels_created"]),
                              "labels_settled": int(lat.stats["labels_settled"]),
                              "search_s": float(lat.stats["search_s"])})
            env = envelope(terrain, np.asarray(r.line, dtype=float), mover, lo, hi, limits=limits,
                           name=f"{label}, {vname}", computed=True)
            e2 = dict(entry) if vname != variants[0][0] else entry
            e2.update(label=f"{label}, {vname}", verdict=env.verdict, travel_time_s=env.nominal.travel_time_s,
                      envelope=env)
            if e2 is not entry:
                candidates.append(e2)
            found[e2["label"]] = (r, env)
            if env.robust:
                break
            notes.append(f"{label}, {vname}: {env.verdict} with the reporting model")
        return {"method": used, "proved_none": False, "message": ""}
    return {"method": used, "proved_none": False, "message": message}


# --------------------------------------------------------------------------- figure

def comparison_figure(terrain, comparison: Comparison, *, keepout=None, figsize=(14.0, 6.0)):
    """One page: the lines on the hillshade (left) and their long-sections (right).

    Parameters
    ----------
    terrain : Terrain
    comparison : Comparison
    keepout : optional
        No-go areas drawn on the map (as :func:`fallway.plot.plot_map` takes them).
    figsize : (float, float)
        Inches.

    Returns
    -------
    matplotlib.figure.Figure
        Made without pyplot (rendered by Agg); each line's artists carry the gid
        ``"fallway-compare-<rank>"`` (rank from 1, map and long-section alike).  The
        long-section shows the line heights (solid, left axis) and speeds (dotted, right
        axis) against station; a stall is marked with a cross.

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.physics import Mover
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(np.tile(-0.5 * np.arange(30.0), (10, 1)), (2.0, 0, 0, 0, -2.0, 20.0))
    >>> cmp = compare(t, [("a", [(1.0, 10.0), (57.0, 10.0)])], Mover(mu=0.1), optimum=False)
    >>> fig = comparison_figure(t, cmp)
    >>> sorted({ln.get_gid() for ax in fig.axes for ln in ax.lines if ln.get_gid()})
    ['fallway-compare-1']
    """
    import matplotlib
    from matplotlib.figure import Figure

    from .plot import plot_map

    fig = Figure(figsize=figsize, layout="constrained")
    ax_map, ax_z = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1.0, 1.3]})
    plot_map(terrain, keepout=keepout, ax=ax_map)
    ax_v = ax_z.twinx()
    colours = matplotlib.colormaps["tab10"]
    for rank, r in enumerate(comparison.rows, start=1):
        if r.points is None or r.profile is None:
            continue
        c = colours((rank - 1) % 10)
        gid = f"fallway-compare-{rank}"
        if r.travel_time_s is not None:
            label = f"{rank}. {r.name} ({r.travel_time_s:.1f} s, {r.status})"
        else:
            label = f"{rank}. {r.name} (stalls at {r.stalled_at_m:.0f} m)"
        lw = 2.6 if r.computed else 1.8
        pts = r.points
        st_m = np.asarray(r.profile.station_m, dtype=float)
        ax_map.plot(pts[:, 0], pts[:, 1], color=c, linewidth=lw, zorder=6, label=label, gid=gid)
        ax_z.plot(st_m, pts[:, 2], color=c, linewidth=lw, label=label, gid=gid)
        ax_v.plot(st_m, r.profile.speed_m_s, color=c, linewidth=1.0, linestyle=":", gid=gid)
        if r.stalled_at_m is not None:
            zs = float(np.interp(r.stalled_at_m, st_m, pts[:, 2]))
            ax_z.plot([r.stalled_at_m], [zs], marker="x", color=c, markersize=9, linestyle="none", gid=gid)
    first = next((r for r in comparison.rows if r.points is not None), None)
    if first is not None:
        ax_map.plot([first.points[0, 0]], [first.points[0, 1]], marker="^", color="white", markeredgecolor="black",
                    markersize=10, linestyle="none", zorder=7, label="start")
    ax_map.legend(loc="upper left", fontsize=7, framealpha=0.85)
    ax_z.set_xlabel("station along the line (m)")
    ax_z.set_ylabel("height (m), solid")
    ax_v.set_ylabel("speed (m/s), dotted")
    ax_z.grid(True, linewidth=0.4, alpha=0.5)
    title = "Candidate lines"
    if comparison.mu_range is not None:
        title += f" (friction {comparison.mover.mu:g}, range {comparison.mu_range[0]:g} to {comparison.mu_range[1]:g})"
    else:
        title += f" (friction {comparison.mover.mu:g})"
    fig.suptitle(title, fontsize=11)
    return fig
