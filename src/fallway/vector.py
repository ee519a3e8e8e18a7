"""Vector inputs: candidate lines from GeoJSON or GeoPackage files."""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Sequence

import numpy as np

from .errors import FallwayIOError, ParameterError
from .geometry import drop_repeats

__all__ = ["read_lines", "pick_layers", "may_hold", "first_line"]

# consecutive plan vertices closer than this (m) are one vertex
_SAME_POINT_M = 1e-6


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
    """Fill missing names with ``line-<k>`` (k = 1-based file order); suffix duplicates.

    Every name given in the file keeps its name where it first appears; a later
    duplicate gets the first suffix ``-2``, ``-3``... that no line in the file is called,
    so no row ever takes another line's name.

    Examples
    --------
    >>> _unique_names(["A", "A", "A-2", None, "line-4"])
    ['A', 'A-3', 'A-2', 'line-4-2', 'line-4']
    """
    given = [str(n).strip() if n is not None else "" for n in names]
    given = ["" if g.lower() == "nan" else g for g in given]
    taken = {g for g in given if g}  # reserved: nobody else may become one of these
    out: list[str] = []
    used: set[str] = set()
    for k, g in enumerate(given, start=1):
        base = g or f"line-{k}"
        name, j = base, 2
        while name in used or (name != g and name in taken):
            name = f"{base}-{j}"
            j += 1
        used.add(name)
        out.append(name)
    return out


def _drop_repeats(coords: np.ndarray, tol_m: float = _SAME_POINT_M) -> np.ndarray:
    """Remove vertices within ``tol_m`` of the last kept one (a GIS double click)."""
    return drop_repeats(coords, tol_m)


def first_line(err: BaseException) -> str:
    """The first line of an error's text (its type name when it has none)."""
    text = str(err).strip()
    return text.splitlines()[0] if text else type(err).__name__


def may_hold(kind: str, geometry: str) -> bool:
    """A layer type that holds ``geometry`` ("polygon", "linestring"), or may (mixed or unknown)."""
    k = kind.lower()
    return geometry in k or k in ("unknown", "geometry", "geometrycollection")


def pick_layers(what: str, listed, layer, *, geometry: str, option: str) -> list[str]:
    """The layers of a vector file to read: those named, else every layer with geometry.

    A file that also holds layers of other geometry must name its layers (no layer is
    silently left out).

    Parameters
    ----------
    what : str
        The file as the messages name it (e.g. ``"keep-out file x.gpkg"``).
    listed : sequence of (name, geometry type)
        ``pyogrio.list_layers`` of the file.
    layer : str, int, sequence or None
        The layers asked for (names or positions).
    geometry : {"polygon", "linestring"}
    option : str
        The option that names layers, for the message.
    """
    names = [n for n, _ in listed]
    if layer is not None:
        wanted = [layer] if isinstance(layer, (str, int)) else list(layer)
        out = []
        for w in wanted:
            w = names[w] if isinstance(w, int) and 0 <= w < len(names) else w
            if w not in names:
                raise ParameterError(f"{what} has no layer {w!r}; its layers: {', '.join(names)}")
            out.append(w)
        return out
    spatial = [(n, k) for n, k in listed if k is not None]
    other = [f"{n} ({k})" for n, k in spatial if not may_hold(k, geometry)]
    if other:
        ok = [n for n, k in spatial if may_hold(k, geometry)]
        plural = "polygons" if geometry == "polygon" else "lines"
        raise ParameterError(f"{what} holds layers of other geometry besides {plural}: {', '.join(other)}; name "
                             f"the layers to read with {option} ({plural[:-1]} layers: {', '.join(ok) or 'none'})")
    return [n for n, _ in spatial] or names[:1]


def read_lines(path: str | os.PathLike, *, crs=None, layer: str | int | Sequence[str] | None = None
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
    layer : str, int or sequence of str, optional
        The layers to read (CLI ``compare --lines-layer``, repeatable).  Default: every
        layer of lines, so no candidate is left out because it sits in a second layer;
        a file that also holds layers of other geometry (polygons, points) is refused
        unless the layers are named.  Tables without geometry are skipped.

    Returns
    -------
    list of (name, ndarray)
        In file order (layer by layer).  Each array is (N, 2) x, y, or (N, 3) x, y, z
        when the file holds heights (a raised line); z is in the file's units, not
        reprojected.  Names come from the ``name`` property (any case); a missing or
        empty name becomes ``line-<k>`` with k the line's 1-based position in what was
        read, and a repeated name gets the first suffix (``-2``, ``-3``...) that no line
        in the file is called.

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
    import pyogrio

    p = Path(path)
    if not p.exists():
        raise FallwayIOError(f"line file not found: {p}")
    if p.is_dir() and p.suffix.lower() not in (".gdb",):
        raise FallwayIOError(f"{p} is a folder; give the GeoJSON or GeoPackage file of the lines")
    try:
        listed = [(str(n), None if k is None else str(k)) for n, k in pyogrio.list_layers(p)]
    except Exception as err:  # pyogrio's DataSourceError and GDAL's decoding errors
        raise FallwayIOError(f"cannot read {p} as GeoJSON or GeoPackage ({first_line(err)}); check the file") from err
    layers = pick_layers(str(p), listed, layer, geometry="linestring", option="--lines-layer")
    dst = _crs_object(crs)
    raw_names: list = []
    lines: list[np.ndarray] = []
    for name in layers:
        where = f"{p}" if len(listed) == 1 else f"layer {name!r} of {p}"
        got_names, got_lines = _read_layer(p, name, where, dst)
        raw_names += got_names
        lines += got_lines
    if not lines:
        raise ParameterError(f"{p} holds no features; draw at least one LineString with a name property")
    names = _unique_names(raw_names)
    return list(zip(names, lines))


def _read_layer(p: Path, layer: str, where: str, dst) -> tuple[list, list[np.ndarray]]:
    """Names and coordinates (in ``dst`` when given) of the lines of one layer."""
    import pyogrio.raw
    import shapely

    try:
        meta, _fids, geoms, field_data = pyogrio.raw.read(p, layer=layer)
    except Exception as err:  # pyogrio's DataSource/DataLayer errors, GDAL's decoding errors
        raise FallwayIOError(f"cannot read {where} as GeoJSON or GeoPackage ({first_line(err)}); "
                             "check the file") from err
    if geoms is None or len(geoms) == 0:
        return [], []
    fields = [str(f) for f in meta.get("fields", [])]
    name_idx = next((i for i, f in enumerate(fields) if f == "name"),
                    next((i for i, f in enumerate(fields) if f.lower() == "name"), None))
    raw_names = list(field_data[name_idx]) if name_idx is not None else [None] * len(geoms)
    raw_names = [None if (n is None or (isinstance(n, float) and math.isnan(n))) else n for n in raw_names]
    src = _crs_object(meta.get("crs"))

    lines: list[np.ndarray] = []
    for i, wkb in enumerate(geoms):
        label = f"feature {i + 1}" + (f" '{raw_names[i]}'" if raw_names[i] not in (None, "") else "")
        if wkb is None:
            raise ParameterError(f"{label} in {where} has no geometry; give it a LineString or delete it")
        try:
            g = shapely.from_wkb(wkb)
        except shapely.errors.GEOSException as err:
            raise ParameterError(f"{label} in {where} cannot be decoded ({first_line(err)}); fix the geometry") from err
        kind = g.geom_type
        if kind == "MultiLineString" and len(g.geoms) == 1:
            g = g.geoms[0]
            kind = g.geom_type
        if kind == "MultiLineString":
            raise ParameterError(f"{label} in {where} is a MultiLineString of {len(g.geoms)} parts; "
                                 "merge it into one LineString or split it into named features")
        if kind != "LineString":
            raise ParameterError(f"{label} in {where} is a {kind}, not a LineString; "
                                 "give every feature a LineString geometry")
        c = shapely.get_coordinates(g, include_z=True)
        if not np.all(np.isfinite(c[:, :2])):
            raise ParameterError(f"{label} in {where} has non-finite coordinates; fix the geometry")
        z = c[:, 2]
        has_z = bool(np.all(np.isfinite(z))) and bool(np.any(z != 0.0))
        c = c if has_z else c[:, :2]
        c = _drop_repeats(c)
        if len(c) < 2:
            raise ParameterError(f"{label} in {where} has fewer than 2 distinct vertices; draw a line with a start "
                                 "and an end")
        if src is not None and src.is_geographic:
            if np.any(np.abs(c[:, 0]) > 360.0) or np.any(np.abs(c[:, 1]) > 90.0):
                raise ParameterError(
                    f"{label} in {where} has coordinates outside the longitude/latitude range "
                    f"(first vertex {c[0, 0]:.3f}, {c[0, 1]:.3f}): a GeoJSON must be in lon/lat (RFC 7946); "
                    "reproject it to EPSG:4326 or save it as a GeoPackage with its CRS")
        lines.append(c)

    if dst is not None:
        if src is None:
            raise ParameterError(f"{where} has no CRS information; assign the CRS of its coordinates "
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
                    raise ParameterError(f"a line in {where} cannot be projected into the terrain's CRS; "
                                         "check that it lies in the DEM's area")
                out.append(cc)
            lines = out
    return raw_names, lines
