"""Points given by the user: which CRS they are in and how they reach the terrain's."""

from __future__ import annotations

from pathlib import Path

from .errors import FallwayIOError, TerrainError

__all__ = ["dem_crs", "dem_header", "to_terrain_crs"]

WGS84 = "EPSG:4326"


def dem_header(path: str | Path) -> dict:
    """CRS, band count and bounds of a raster file, read from its header only (no pixels).

    Returns ``{"crs", "count", "bounds"}`` with bounds ``(left, bottom, right, top)``
    in the raster's CRS (left < right, bottom < top whatever the raster's orientation).
    """
    import rasterio
    from rasterio.errors import RasterioError

    p = Path(path)
    if not p.exists():
        raise FallwayIOError(f"DEM file not found: {p}")
    if p.is_dir():
        raise FallwayIOError(f"DEM path {p} is a folder; give a GeoTIFF file")
    try:
        with rasterio.open(p) as ds:
            crs, count, b = ds.crs, ds.count, ds.bounds
    except RasterioError as err:
        raise FallwayIOError(f"cannot read {p} as a raster (is it a GeoTIFF?): {str(err).splitlines()[0]}") from err
    if crs is None:
        raise TerrainError(f"{p} has no coordinate reference system; assign one first (e.g. gdal_edit.py -a_srs EPSG:XXXX)")
    bounds = (min(b.left, b.right), min(b.bottom, b.top), max(b.left, b.right), max(b.bottom, b.top))
    return {"crs": crs, "count": int(count), "bounds": bounds}


def dem_crs(path: str | Path):
    """The CRS of a raster file, read from its header only (no pixels are read)."""
    return dem_header(path)["crs"]


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
