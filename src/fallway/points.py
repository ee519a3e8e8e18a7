"""Points given by the user: which CRS they are in and how they reach the terrain's."""

from __future__ import annotations

from pathlib import Path

from .errors import FallwayIOError, TerrainError

__all__ = ["dem_crs", "to_terrain_crs"]

WGS84 = "EPSG:4326"


def dem_crs(path: str | Path):
    """The CRS of a raster file, read from its header only (no pixels are read)."""
    import rasterio
    from rasterio.errors import RasterioIOError

    p = Path(path)
    if not p.exists():
        raise FallwayIOError(f"DEM file not found: {p}")
    try:
        with rasterio.open(p) as ds:
            crs = ds.crs
    except RasterioIOError as err:
        raise FallwayIOError(f"cannot read {p} as a raster (is it a GeoTIFF?): {str(err).splitlines()[0]}") from err
    if crs is None:
        raise TerrainError(f"{p} has no coordinate reference system; assign one first (e.g. gdal_edit.py -a_srs EPSG:XXXX)")
    return crs


def to_terrain_crs(points, src_crs, terrain_crs) -> list[tuple[float, float]]:
    """Transform (x, y) points from ``src_crs`` to ``terrain_crs`` with pyproj.

    Examples
    --------
    >>> to_terrain_crs([(15.0, 0.0)], "EPSG:4326", "EPSG:32633")
    [(500000.0, 0.0)]
    """
    from pyproj import CRS, Transformer

    pts = [tuple(map(float, p)) for p in points]
    if not pts:
        return []
    src = CRS.from_user_input(src_crs)
    dst = CRS.from_user_input(terrain_crs)
    if src == dst:
        return pts
    tr = Transformer.from_crs(src, dst, always_xy=True)
    xs, ys = tr.transform([p[0] for p in pts], [p[1] for p in pts])
    return [(round(float(x), 6), round(float(y), 6)) for x, y in zip(xs, ys)]
