"""No-go areas: polygons a line must not enter (:class:`Keepout`)."""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np

from .errors import FallwayIOError, ParameterError
from .vector import first_line, pick_layers

__all__ = ["Keepout"]


_POLYGONAL = ("Polygon", "MultiPolygon")
# what a polygon without area is, in the messages
_FLAT = "empty, or its corners repeat or lie on one line"


def _to_pyproj(crs):
    import pyproj

    if crs is None:
        return None
    if isinstance(crs, pyproj.CRS):
        return crs
    try:
        return pyproj.CRS.from_user_input(crs)
    except pyproj.exceptions.CRSError:
        if hasattr(crs, "to_wkt"):
            return pyproj.CRS.from_wkt(crs.to_wkt())
        raise ParameterError(f"cannot read the CRS {crs!r}; give an EPSG code or WKT") from None


@dataclass(frozen=True, eq=False)
class Keepout:
    """No-go areas: polygons the line must not enter.

    Parameters
    ----------
    geometry : shapely Polygon or MultiPolygon
        The areas (invalid rings are repaired with ``shapely.make_valid``).
    crs : pyproj.CRS, rasterio CRS, EPSG code or WKT, or None
        CRS of the coordinates; None means "the terrain's CRS".

    Notes
    -----
    On the lattice a cell is blocked when the polygons *touch* it at all
    (``rasterio.features.rasterize`` with ``all_touched=True``): a keep-out is never
    entered by a cell centre nor cut across by a lattice edge, at the price of blocking up
    to one cell beyond its boundary.

    Examples
    --------
    >>> import shapely
    >>> k = Keepout(shapely.box(0, 0, 10, 10), None)
    >>> k.signed_distance([5.0, 15.0], [5.0, 5.0]).tolist()
    [-5.0, 5.0]
    """

    geometry: object
    crs: object = None

    def __post_init__(self) -> None:
        import shapely

        g = self.geometry
        if not isinstance(g, shapely.Geometry):
            raise ParameterError(f"keep-out geometry must be a shapely geometry, got {type(g).__name__}")
        if g.geom_type == "GeometryCollection":
            parts = [p for p in shapely.get_parts(g)]
            bad = sorted({p.geom_type for p in parts if p.geom_type not in _POLYGONAL})
            if bad:
                raise ParameterError(f"keep-out areas must be polygons, got {', '.join(bad)}; buffer lines or points first")
            g = shapely.union_all(parts) if parts else shapely.Polygon()
        if g.geom_type not in _POLYGONAL:
            raise ParameterError(f"keep-out areas must be polygons, got {g.geom_type}; buffer lines or points first")
        if g.is_empty:
            raise ParameterError("keep-out geometry is empty; give at least one polygon")
        if not np.all(np.isfinite(shapely.get_coordinates(g))):
            raise ParameterError("keep-out polygons have non-finite coordinates; fix the geometry")
        if not g.is_valid:
            g = shapely.make_valid(g)
            polys = [p for p in shapely.get_parts(g) if p.geom_type in _POLYGONAL]
            g = shapely.union_all(polys) if polys else shapely.Polygon()
        with np.errstate(over="ignore", invalid="ignore"):  # polygons of 1e308 m: area inf or NaN, not zero
            flat = g.area == 0.0
        if flat:
            raise ParameterError(f"keep-out polygons enclose no area ({_FLAT}); give polygons with an area")
        object.__setattr__(self, "geometry", g)
        object.__setattr__(self, "crs", _to_pyproj(self.crs))

    @classmethod
    def from_file(cls, path, layer=None) -> "Keepout":
        """Read polygons from a GeoJSON or GeoPackage file (all features, unioned).

        Every polygon layer is read: a no-go area is never left out because it sits in a
        second layer.  A file that also holds layers of other geometry (lines, points)
        is refused unless ``layer`` names the layers to read; tables without geometry
        are skipped.  GeoJSON without a CRS is lon/lat (RFC 7946: WGS 84, EPSG:4326), and
        coordinates outside that range are refused (a file saved in map coordinates).

        Parameters
        ----------
        path : path-like
        layer : str or sequence of str, optional
            The layers to read (CLI ``--keepout-layer``, repeatable); default every
            polygon layer.

        Raises
        ------
        FallwayIOError
            The file is missing or unreadable.
        ParameterError
            It holds no features, non-polygon geometry, a layer of other geometry when
            no layer is named, a named layer it does not have, or lon/lat coordinates
            out of range.
        """
        import pyogrio
        import shapely

        p = os.fspath(path)
        if not os.path.exists(p):
            raise FallwayIOError(f"keep-out file not found: {p}")
        if os.path.isdir(p):
            raise FallwayIOError(f"keep-out path {p} is a folder; give a GeoJSON or GeoPackage of polygons")
        try:
            listed = [(str(n), None if k is None else str(k)) for n, k in pyogrio.list_layers(p)]
        except Exception as err:  # pyogrio raises several DataSource error types
            raise FallwayIOError(f"cannot read keep-out file {p}: {first_line(err)}; give a GeoJSON or "
                                 "GeoPackage of polygons") from err
        layers = pick_layers(f"keep-out file {p}", listed, layer, geometry="polygon", option="--keepout-layer")
        shapes, crs = [], None
        for name in layers:
            try:
                meta, _, geoms, _ = pyogrio.raw.read(p, layer=name, read_geometry=True, columns=[])
            except Exception as err:  # pyogrio's DataSource/DataLayer errors, GDAL decoding errors
                raise FallwayIOError(f"cannot read layer {name!r} of keep-out file {p}: {first_line(err)}") from err
            where = p if len(listed) == 1 else f"layer {name!r} of {p}"
            if geoms is None or len(geoms) == 0:
                continue
            try:
                got = shapely.from_wkb(geoms)
            except shapely.errors.GEOSException as err:
                raise ParameterError(f"keep-out {where} holds a geometry that cannot be decoded: "
                                     f"{first_line(err)}") from err
            number = np.flatnonzero(~shapely.is_missing(got)) + 1  # feature numbers, from 1
            got = got[number - 1]
            kinds = sorted({g.geom_type for g in got if g.geom_type not in _POLYGONAL})
            if kinds:
                raise ParameterError(f"keep-out {where} holds {', '.join(kinds)}; only polygons can be keep-out "
                                     "areas (buffer lines or points first)")
            finite = np.array([np.all(np.isfinite(shapely.get_coordinates(g))) for g in got], dtype=bool)
            if not finite.all():
                raise ParameterError(f"keep-out {where}: feature {number[~finite][0]} has non-finite coordinates; "
                                     "fix or delete it")
            with np.errstate(over="ignore", invalid="ignore"):  # as in __post_init__
                flat = shapely.area(shapely.make_valid(got)) == 0.0 if len(got) else np.zeros(0, dtype=bool)
            if flat.any():
                raise ParameterError(f"keep-out {where}: feature {number[flat][0]} is a polygon without area "
                                     f"({_FLAT}); fix or delete it")
            layer_crs = meta.get("crs")
            if layer_crs is None and p.lower().endswith((".geojson", ".json")):
                layer_crs = "EPSG:4326"
            if crs is not None and layer_crs is not None and _to_pyproj(layer_crs) != _to_pyproj(crs):
                raise ParameterError(f"the layers of keep-out file {p} are in different CRSs; reproject them to one")
            crs = crs if crs is not None else layer_crs
            if len(got) and layer_crs is not None and _to_pyproj(layer_crs).is_geographic:
                xy = shapely.get_coordinates(got)
                if np.any(~np.isfinite(xy)) or np.any(np.abs(xy[:, 0]) > 360.0) or np.any(np.abs(xy[:, 1]) > 90.0):
                    bad = xy[(np.abs(xy[:, 0]) > 360.0) | (np.abs(xy[:, 1]) > 90.0) | ~np.isfinite(xy).all(axis=1)][0]
                    raise ParameterError(
                        f"keep-out {where} has coordinates outside the longitude/latitude range (vertex "
                        f"{bad[0]:.3f}, {bad[1]:.3f}): a GeoJSON must be in lon/lat (RFC 7946); reproject it to "
                        "EPSG:4326 or save it as a GeoPackage with its CRS")
            shapes.extend(got)
        if not shapes:
            raise ParameterError(f"keep-out file {p} holds no features; add at least one polygon")
        # drop a third coordinate: keep-out areas are plan polygons
        shapes = shapely.force_2d(np.asarray(shapes, dtype=object))
        try:
            return cls(shapely.union_all(shapes), crs)
        except shapely.errors.GEOSException as err:
            raise ParameterError(f"the polygons of keep-out file {p} cannot be combined ({first_line(err)}); "
                                 "repair them in a GIS (e.g. 'Fix geometries')") from err

    def in_crs(self, crs) -> "Keepout":
        """The same areas in another CRS (no-op when either CRS is None or both agree)."""
        import pyproj
        import shapely

        target = _to_pyproj(crs)
        if target is None or self.crs is None or target == self.crs:
            return self if target is None or self.crs is None else Keepout(self.geometry, target)
        tr = pyproj.Transformer.from_crs(self.crs, target, always_xy=True)

        def fn(xy):
            x, y = tr.transform(xy[:, 0], xy[:, 1])
            return np.column_stack([x, y])

        # densify first so that long lon/lat edges follow their true shape once projected
        g = self.geometry
        if self.crs.is_geographic:
            g = shapely.segmentize(g, 0.0005)
        moved = shapely.transform(g, fn)
        if not np.all(np.isfinite(shapely.get_coordinates(moved))):
            raise ParameterError(f"the keep-out areas cannot be projected from {self.crs.name} into the terrain's "
                                 f"CRS {target.name}: they lie far outside its area; check the keep-out file's CRS")
        return Keepout(moved, target)

    def mask(self, terrain) -> np.ndarray:
        """Bool array of the terrain's shape, True on every cell the areas touch."""
        from rasterio import features

        k = self.in_crs(terrain.crs) if terrain.crs is not None else self
        out = features.rasterize([(k.geometry, 1)], out_shape=terrain.shape, transform=terrain.transform,
                                 fill=0, all_touched=True, dtype="uint8")
        return out.astype(bool)

    def signed_distance(self, x, y) -> np.ndarray:
        """Distance from points to the area boundary: positive outside, negative inside."""
        import shapely

        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        pts = shapely.points(x, y)
        d = shapely.distance(self.geometry.boundary, pts)
        inside = shapely.contains_xy(self.geometry, x, y)
        return np.where(inside, -d, d)
