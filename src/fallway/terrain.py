"""Terrain: the elevation grid, its georeferencing and a smooth interpolant.

:class:`Terrain` is the value every other module works on (float64 heights in metres,
NaN = nodata, row 0 north, square cells, projected CRS).  :func:`load_terrain` reads a
GeoTIFF (or any raster GDAL reads) into one: it reads only the window that is needed,
turns nodata into NaN, reprojects a geographic (or non-metre) CRS to the local UTM zone
and resamples to square cells.

Two interpolants live on a terrain:

* :meth:`Terrain.sample_linear` -- bilinear between cell centres, the lattice search's
  own interpolation;
* :meth:`Terrain.sample` / :meth:`Terrain.gradient` / :meth:`Terrain.normal` /
  :meth:`Terrain.valid` -- the smooth surface (:meth:`Terrain.surface`): interpolating
  bicubic splines for the continuous refinement and for draping, exact on planes (a
  cubic spline reproduces every polynomial of degree <= 3).  Splines are built lazily
  per tile of 128 x 128 cells with 12 cells of context and blended smoothly at tile
  seams, so a large grid costs only the tiles a line touches and the result matches one
  global spline to ~1e-9 of the relief.  Nodata cells are filled for the splines only,
  by linear extrapolation from the nearest valid cell, so a plane stays exact right up
  to a hole; points whose 4 x 4 cell neighbourhood touches nodata, or that lie outside
  the hull of cell centres, give NaN (see :meth:`Terrain.valid`).  One compiled
  implementation (:mod:`fallway._surface`) serves these methods and the refinement.
"""

from __future__ import annotations

import math
import os
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from affine import Affine

from ._surface import SmoothSurface
from .errors import FallwayIOError, ParameterError, TerrainError

__all__ = ["Terrain", "load_terrain", "lay_on_ground", "DEFAULT_MARGIN_M", "DEFAULT_MAX_CELLS", "MIN_GRID_CELLS",
           "GROUND_TOLERANCE_M"]

#: Margin (m) added around ``bounds`` when reading a window, so that lines that bulge a
#: little beyond the start/end box still lie on data.
DEFAULT_MARGIN_M = 200.0
#: The smallest grid the tool accepts: this many cells along each side (bilinear
#: interpolation and the lattice need two cell centres per axis; a 1 x N raster is refused
#: when it is read, and a resampling that would leave less is refused too).
MIN_GRID_CELLS = 2
#: Upper limit on the cells of a loaded grid unless memory is tighter (200 M cells is
#: 1.6 GB of float64 heights before working arrays).
DEFAULT_MAX_CELLS = 200_000_000
# bytes per cell: read buffer (value + mask) and float64 working arrays (heights, filled
# copy for the spline, spline coefficients, masks) -- a deliberate overestimate.
_READ_BYTES_PER_CELL = 16
_OUT_BYTES_PER_CELL = 40
# widest geographic window reprojected to one UTM zone (two zones' width; the scale error
# at 6 degrees from the central meridian is about 0.6 %)
_MAX_LON_SPAN_DEG = 12.0


@dataclass(frozen=True, eq=False)
class Terrain:
    """An elevation model on a square, north-up grid in a projected CRS.

    Parameters
    ----------
    z : ndarray of float, shape (rows, cols)
        Heights in metres, NaN where there is no data; row 0 is the north edge.
    transform : affine.Affine
        Maps (col, row) of the cell *corner* to map coordinates (x east, y north).
    crs : rasterio.crs.CRS or None
        Coordinate reference system of the map coordinates.

    Examples
    --------
    >>> import numpy as np
    >>> from affine import Affine
    >>> t = Terrain.from_array(np.zeros((3, 4)), Affine(2.0, 0, 100.0, 0, -2.0, 50.0), None)
    >>> t.cell_size, t.shape
    (2.0, (3, 4))
    >>> t.cell_center(0, 0)
    (101.0, 49.0)
    """

    z: np.ndarray
    transform: Affine
    crs: object = None
    _cache: dict = field(default_factory=dict, init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        z = np.array(self.z, dtype=np.float64, copy=True)
        if z.ndim != 2 or min(z.shape) < MIN_GRID_CELLS:
            raise TerrainError(f"elevation grid must be 2D with at least {MIN_GRID_CELLS} x {MIN_GRID_CELLS} cells, "
                               f"got shape {z.shape}")
        z.setflags(write=False)
        object.__setattr__(self, "z", z)
        t = self.transform
        if t.b != 0 or t.d != 0:
            raise TerrainError("the raster transform is rotated or sheared; warp it to a north-up grid first (e.g. gdalwarp)")
        if not (t.a > 0 and t.e < 0):
            raise TerrainError("the transform must be north-up with positive x resolution; flip the array first")
        if abs(t.a + t.e) > 1e-9 * t.a:
            raise TerrainError(f"cells must be square, got {t.a} x {-t.e}; resample with resolution_m")

    @classmethod
    def from_array(cls, z, transform, crs=None) -> "Terrain":
        """Build a terrain from an array and an affine transform (for tests and scripts)."""
        return cls(np.asarray(z, dtype=np.float64), Affine(*tuple(transform)[:6]), crs)

    @property
    def shape(self) -> tuple[int, int]:
        """(rows, cols) of the grid."""
        return self.z.shape

    @property
    def cell_size(self) -> float:
        """Edge length of a (square) cell in metres."""
        return float(self.transform.a)

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """(left, bottom, right, top) of the grid's outer edges in map units."""
        t = self.transform
        rows, cols = self.shape
        return (t.c, t.f + rows * t.e, t.c + cols * t.a, t.f)

    def cell_center(self, row, col):
        """Map coordinates (x, y) of cell centres (vectorised)."""
        t = self.transform
        x = t.c + (np.asarray(col) + 0.5) * t.a
        y = t.f + (np.asarray(row) + 0.5) * t.e
        if np.ndim(x) == 0:
            return float(x), float(y)
        return x, y

    def rowcol(self, x, y):
        """Fractional (row, col) in cell-centre units: centre of cell (0, 0) is (0.0, 0.0)."""
        t = self.transform
        col = (np.asarray(x, dtype=float) - t.c) / t.a - 0.5
        row = (np.asarray(y, dtype=float) - t.f) / t.e - 0.5
        return row, col

    def nearest_cell(self, x, y) -> tuple[int, int]:
        """(row, col) of the cell whose centre is nearest to (x, y)."""
        r, c = self.rowcol(x, y)
        return int(np.rint(r)), int(np.rint(c))

    def sample_linear(self, x, y):
        """Bilinear heights between cell centres (the lattice's own interpolation).

        NaN outside the hull of cell centres or where a corner cell is nodata.
        """
        r, c = self.rowcol(x, y)
        r = np.atleast_1d(r).astype(float)
        c = np.atleast_1d(c).astype(float)
        rows, cols = self.shape
        out = np.full(np.broadcast(r, c).shape, np.nan)
        r, c = np.broadcast_arrays(r, c)
        ok = (r >= -1e-9) & (r <= rows - 1 + 1e-9) & (c >= -1e-9) & (c <= cols - 1 + 1e-9)
        rr = np.clip(r[ok], 0, rows - 1)
        cc = np.clip(c[ok], 0, cols - 1)
        r0 = np.minimum(np.floor(rr).astype(int), rows - 2)
        c0 = np.minimum(np.floor(cc).astype(int), cols - 2)
        fr = rr - r0
        fc = cc - c0
        z = self.z
        out[ok] = ((1 - fr) * (1 - fc) * z[r0, c0] + (1 - fr) * fc * z[r0, c0 + 1]
                   + fr * (1 - fc) * z[r0 + 1, c0] + fr * fc * z[r0 + 1, c0 + 1])
        if np.ndim(x) == 0 and np.ndim(y) == 0:
            return float(out[0])
        return out

    # -- smooth surface ---------------------------------------------------------------

    def surface(self) -> SmoothSurface:
        """The smooth surface of this grid (:class:`fallway._surface.SmoothSurface`).

        Built on first use and kept with the terrain; its tiles are built as points need
        them.  :meth:`sample`, :meth:`gradient`, :meth:`normal` and :meth:`valid` evaluate
        it; the compiled refinement passes its ``tables`` to its own kernels.

        Examples
        --------
        >>> import numpy as np
        >>> from affine import Affine
        >>> t = Terrain.from_array(np.zeros((4, 300)), Affine(1.0, 0, 0.0, 0, -1.0, 4.0))
        >>> t.sample(10.5, 2.0), int((t.surface().tables.slot >= 0).sum())   # one of three tiles built
        (0.0, 1)
        """
        surf = self._cache.get("surface")
        if surf is None:
            t = self.transform
            surf = self._cache["surface"] = SmoothSurface(self.z, t.a, t.c, t.e, t.f)
        return surf

    def _smooth(self, x, y, grad: bool):
        shape = np.broadcast(np.asarray(x), np.asarray(y)).shape
        out = self.surface().evaluate(x, y, grad)
        if not grad:
            return float(out[0]) if shape == () else out.reshape(shape)
        if shape == ():
            return float(out[1][0]), float(out[2][0])
        return out[1].reshape(shape), out[2].reshape(shape)

    def valid(self, x, y):
        """True where :meth:`sample` and :meth:`gradient` are defined (vectorised).

        A point is valid when it lies inside the hull of cell centres and no nodata cell
        is in the 4 x 4 block of cells around it.

        Examples
        --------
        >>> import numpy as np
        >>> from affine import Affine
        >>> z = np.zeros((8, 8)); z[0, 0] = np.nan
        >>> t = Terrain.from_array(z, Affine(1.0, 0, 0.0, 0, -1.0, 8.0))
        >>> t.valid([0.6, 6.5, 9.0], [7.4, 1.5, 1.5]).tolist()
        [False, True, False]
        """
        shape = np.broadcast(np.asarray(x), np.asarray(y)).shape
        ok = self.surface().valid(x, y)
        return bool(ok[0]) if shape == () else ok.reshape(shape)

    def sample(self, x, y):
        """Heights (m) at map points on the smooth (bicubic spline) interpolant.

        Vectorised over broadcastable ``x`` and ``y``; NaN where :meth:`valid` is False.
        The spline passes through every cell-centre height and is exact on planes.

        Examples
        --------
        >>> import numpy as np
        >>> from affine import Affine
        >>> rows, cols = np.mgrid[0:6, 0:7]
        >>> t = Terrain.from_array(10.0 - 0.5 * cols, Affine(2.0, 0, 0.0, 0, -2.0, 12.0))
        >>> print(f"{t.sample(6.0, 6.0):.6f}")
        8.750000
        """
        return self._smooth(x, y, grad=False)

    def gradient(self, x, y):
        """Slope components ``(dz/dx, dz/dy)`` of the smooth interpolant (vectorised).

        ``x`` points east and ``y`` north, both in map units (m), so a surface rising
        to the north has ``dz/dy > 0``.  NaN where :meth:`valid` is False.

        Examples
        --------
        >>> import numpy as np
        >>> from affine import Affine
        >>> rows, cols = np.mgrid[0:6, 0:7]
        >>> t = Terrain.from_array(0.25 * cols - 0.5 * rows, Affine(2.0, 0, 0.0, 0, -2.0, 12.0))
        >>> gx, gy = t.gradient(5.0, 6.0)
        >>> print(f"{gx:.4f} {gy:.4f}")
        0.1250 0.2500
        """
        return self._smooth(x, y, grad=True)

    def normal(self, x, y) -> np.ndarray:
        """Upward unit normals of the smooth surface at (x, y): an (N, 3) array.

        ``(-dz/dx, -dz/dy, 1)`` normalised; NaN where :meth:`gradient` is NaN.

        Examples
        --------
        >>> import numpy as np
        >>> from affine import Affine
        >>> z = -0.5 * np.tile(np.arange(8.0), (8, 1))     # falls 0.5 m per metre east
        >>> t = Terrain.from_array(z, Affine(1.0, 0, 0, 0, -1.0, 8.0))
        >>> np.round(t.normal([3.0], [4.0]), 6)
        array([[0.447214, 0.      , 0.894427]])
        """
        _, gx, gy = self.surface().evaluate(x, y, grad=True)
        n = np.column_stack([-gx, -gy, np.ones(gx.size)])
        return n / np.sqrt((n ** 2).sum(axis=1))[:, None]


# -- loading ----------------------------------------------------------------------------

def _available_memory_bytes() -> int | None:
    """MemAvailable from /proc/meminfo (Linux), else physical pages; None if unknown."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return None


def _positive(name: str, value, allow_none: bool = False) -> float | None:
    if value is None and allow_none:
        return None
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a positive number, got {value!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise ParameterError(f"{name} must be a positive finite number, got {value!r}")
    return v


def _cell_size_m(transform: Affine, crs, cx: float, cy: float) -> tuple[float, float]:
    """Ground size (dx_m, dy_m) of one cell at map point (cx, cy), by pyproj geodesics."""
    from pyproj import CRS as PCRS, Geod, Transformer

    pcrs = PCRS.from_user_input(crs.to_wkt())
    geo = pcrs.geodetic_crs
    tr = Transformer.from_crs(pcrs, geo, always_xy=True)
    a, e = abs(transform.a), abs(transform.e)
    xs = np.array([cx - a / 2, cx + a / 2, cx, cx])
    ys = np.array([cy, cy, cy - e / 2, cy + e / 2])
    lon, lat = tr.transform(xs, ys)
    geod = Geod(ellps="WGS84") if geo.ellipsoid is None else geo.get_geod()
    _, _, dx = geod.inv(lon[0], lat[0], lon[1], lat[1])
    _, _, dy = geod.inv(lon[2], lat[2], lon[3], lat[3])
    return float(dx), float(dy)


def _utm_crs(lon: float, lat: float):
    """The UTM CRS (WGS 84) of the zone holding (lon, lat), via pyproj's query."""
    from pyproj.aoi import AreaOfInterest
    from pyproj.database import query_utm_crs_info
    from rasterio.crs import CRS

    lon = (lon + 180.0) % 360.0 - 180.0
    info = query_utm_crs_info(datum_name="WGS 84",
                              area_of_interest=AreaOfInterest(lon, lat, lon, lat))
    if not info:
        raise TerrainError(f"no UTM zone covers lon {lon:.4f}, lat {lat:.4f} (polar?); "
                           "reproject the DEM to a local projected CRS in metres first")
    return CRS.from_epsg(int(info[0].code))


def load_terrain(path, *, bounds=None, margin_m: float = DEFAULT_MARGIN_M,
                 resolution_m: float | None = None, z_scale: float | None = None, band: int = 1,
                 max_cells: int | None = None) -> Terrain:
    """Read a GeoTIFF (any raster GDAL reads) into a :class:`Terrain`.

    Parameters
    ----------
    path : str or path-like
        The raster.  ``band`` holds the heights; other bands are ignored.
    bounds : (left, bottom, right, top), optional
        Area of interest in the raster's own CRS (degrees for a geographic raster).
        Only this box plus ``margin_m`` on every side is read.
    margin_m : float, default 200
        Margin around ``bounds`` in metres (converted to degrees for geographic rasters).
    resolution_m : float, optional
        Coarser cell size in metres.  Coarsening uses area-weighted *average*
        resampling (every source cell contributes, so small bumps do not alias into the
        coarse grid and nodata cells are left out); otherwise cells keep their native
        size (the smaller edge of non-square cells).
    z_scale : float, optional
        Metres per height unit (0.3048 for international feet), after the band's scale
        and offset.  Default: from the unit the band declares (GDAL's unit type:
        metres, international feet, US survey feet, centimetres, millimetres; none
        declared is taken as metres); a unit it does not know is refused.  Given, it
        replaces the declared unit (with an :class:`~fallway.errors.InputWarning` when
        the two disagree).
    band : int, default 1
        The band that holds the heights (1-based, as GDAL counts).
    max_cells : int, optional
        Largest grid accepted; default the smaller of 200 M cells and what fits in half
        the available memory.  The check is made on an estimate *before* any read.

    Notes
    -----
    Heights are ``(stored value * scale + offset) * metres per unit``: the band's scale
    and offset tags are applied as GDAL defines them (``GDALGetRasterScale`` /
    ``GDALGetRasterOffset``: "units value = (raw value * scale) + offset"), after nodata
    is masked on the stored values, so an int16 DEM of decimetres with scale 0.1 reads
    in metres.

    Returns
    -------
    Terrain
        Heights in metres (float64, NaN = nodata), north-up, square cells, in the
        raster's CRS if that is projected in metres, else in the local UTM zone (WGS 84),
        reprojected with *bilinear* resampling (or average when coarsening).

    Raises
    ------
    FallwayIOError
        The file is missing or is not a raster GDAL can read.
    TerrainError
        No CRS, a rotated or sheared transform, bounds outside the raster, no valid
        heights, or a grid too large for memory (the message gives the size and the
        options ``bounds`` and ``resolution_m``).
    ParameterError
        A bad ``margin_m``, ``resolution_m``, ``z_scale``, ``band`` or ``max_cells``.

    Examples
    --------
    >>> from importlib.resources import files
    >>> t = load_terrain(files("fallway.sample_terrain") / "site.tif")
    >>> t.crs.to_epsg(), t.shape, t.cell_size
    (32633, (300, 400), 2.0)
    >>> print(f"{t.sample(448321.0, 5212467.0):.2f} m")
    408.19 m
    """
    import rasterio
    from rasterio.errors import NotGeoreferencedWarning, RasterioError

    z_scale = _positive("z_scale", z_scale, allow_none=True)
    if isinstance(band, bool) or not isinstance(band, (int, np.integer)) or band < 1:
        raise ParameterError(f"band must be a whole number >= 1 (bands count from 1), got {band!r}")
    band = int(band)
    resolution_m = _positive("resolution_m", resolution_m, allow_none=True)
    try:
        margin_m = float(margin_m)
    except (TypeError, ValueError):
        raise ParameterError(f"margin_m must be a number >= 0, got {margin_m!r}") from None
    if not (math.isfinite(margin_m) and margin_m >= 0):
        raise ParameterError(f"margin_m must be a finite number >= 0, got {margin_m!r}")
    if max_cells is not None:
        max_cells = int(_positive("max_cells", max_cells))

    p = Path(os.fspath(path))
    if not p.exists():
        raise FallwayIOError(f"terrain file not found: {p}; check the path")
    if p.is_dir():
        raise FallwayIOError(f"terrain path is a folder, not a raster: {p}; give a GeoTIFF file")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        # rasterio 1.4 multiplies affines with `*`, which affine 3 flags as pending
        # deprecation; not ours to fix, keep it out of the caller's warnings
        warnings.filterwarnings("ignore", message="Use `@` matmul", category=PendingDeprecationWarning)
        try:
            src = rasterio.open(p)
        except RasterioError as err:
            raise FallwayIOError(f"cannot read {p} as a raster ({_first_line(err)}); give a GeoTIFF or "
                                 "another GDAL-readable DEM") from err
        try:
            with src:
                return _load_open(src, p, bounds, margin_m, resolution_m, z_scale, band, max_cells)
        except RasterioError as err:
            raise FallwayIOError(f"reading or reprojecting {p} failed ({_first_line(err)}); check the file "
                                 "is complete (gdalinfo -checksum) and its CRS is valid") from err


def _first_line(err: BaseException) -> str:
    """First line of GDAL's own message (rasterio chains it as the cause)."""
    while err.__cause__ is not None and "previous exception" in str(err):
        err = err.__cause__
    text = str(err).strip()
    return text.splitlines()[0] if text else type(err).__name__


def _load_open(src, p, bounds, margin_m, resolution_m, z_scale, band, max_cells) -> Terrain:
    import rasterio.windows
    from rasterio.enums import Resampling

    if src.count < 1:
        raise TerrainError(f"{p} has no raster bands; give a single-band elevation raster")
    if band > src.count:
        raise ParameterError(f"{p} has {src.count} band{'s' if src.count > 1 else ''}; there is no band {band}")
    if min(src.width, src.height) < MIN_GRID_CELLS:
        raise TerrainError(f"{p} is {src.height} x {src.width} cells; a DEM needs at least {MIN_GRID_CELLS} x "
                           f"{MIN_GRID_CELLS} cells")
    scale, offset, to_m = _height_units(src, p, band, z_scale)
    if src.crs is None:
        raise TerrainError(f"{p} has no CRS; assign the right one first "
                           "(e.g. gdal_edit.py -a_srs EPSG:32633 file.tif)")
    t = src.transform
    if t.b != 0 or t.d != 0:
        raise TerrainError(f"{p} has a rotated or sheared transform; warp it to a north-up grid "
                           "first (e.g. gdalwarp -t_srs <its CRS> in.tif out.tif)")
    if t.a == 0 or t.e == 0:
        raise TerrainError(f"{p} has a degenerate transform (zero cell size); fix its georeferencing")
    geographic = bool(src.crs.is_geographic)
    units = None
    if not geographic:
        try:
            units = float(src.crs.linear_units_factor[1])
        except Exception:  # noqa: BLE001 - CRS without usable linear units
            units = None

    # -- window ------------------------------------------------------------------
    full = rasterio.windows.Window(0, 0, src.width, src.height)
    if bounds is None:
        window = full
    else:
        try:
            left, bottom, right, top = (float(v) for v in bounds)
        except (TypeError, ValueError):
            raise ParameterError(f"bounds must be (left, bottom, right, top), got {bounds!r}") from None
        # a degenerate box (points on one row or column) is fine: the margin widens it
        if not (left <= right and bottom <= top) or (margin_m == 0 and not (left < right and bottom < top)):
            raise ParameterError(f"bounds must satisfy left < right and bottom < top, got {bounds!r}")
        if geographic:
            lat_mid = math.radians(0.5 * (bottom + top))
            mx = margin_m / (111_320.0 * max(math.cos(lat_mid), 1e-6))
            my = margin_m / 110_574.0
        else:
            mx = my = margin_m / (units or 1.0)
        inv = ~t
        # geographic rasters may count longitude 0..360 while bounds use -180..180 (or the
        # reverse): try the bounds as given, then shifted by a full turn
        for shift in ((0.0, 360.0, -360.0) if geographic else (0.0,)):
            cols_, rows_ = zip(*(inv @ (x + shift, y) for x in (left - mx, right + mx)
                                 for y in (bottom - my, top + my)))
            c0 = max(0, math.floor(min(cols_)))
            c1 = min(src.width, math.ceil(max(cols_)))
            r0 = max(0, math.floor(min(rows_)))
            r1 = min(src.height, math.ceil(max(rows_)))
            if c1 - c0 >= 2 and r1 - r0 >= 2:
                break
        if c1 - c0 < 2 or r1 - r0 < 2:
            lb, bb, rb, tb = src.bounds
            raise TerrainError(f"bounds {tuple(bounds)} do not overlap {p} (its bounds are "
                               f"{lb:.6g}, {bb:.6g}, {rb:.6g}, {tb:.6g} in its CRS); give bounds in the raster's CRS")
        window = rasterio.windows.Window(c0, r0, c1 - c0, r1 - r0)
    # (rasterio.windows.transform multiplies affines with `*`, deprecated in affine 3)
    wt = Affine(t.a, 0.0, t.c + window.col_off * t.a, 0.0, t.e, t.f + window.row_off * t.e)
    h, w = int(window.height), int(window.width)

    # -- target grid and size estimate (before any read) -------------------------------
    cx, cy = wt @ (w / 2, h / 2)
    try:
        dx_m, dy_m = _cell_size_m(wt, src.crs, cx, cy)
    except Exception as err:  # noqa: BLE001 - pyproj cannot place the raster on the Earth
        if units is None:
            raise TerrainError(f"{p}: cannot relate its CRS to the Earth ({err}); "
                               "reproject it to a projected CRS in metres first") from err
        dx_m, dy_m = abs(t.a) * units, abs(t.e) * units
    # keep the raster's own CRS only when it is in metres and true to ground distance here
    # (UTM, national grids); geographic, feet-based or strongly distorting CRSs (Web
    # Mercator away from the equator) are reprojected to the local UTM zone
    metric = (units is not None and abs(units - 1.0) < 1e-12
              and abs(dx_m / abs(t.a) - 1.0) < 5e-3 and abs(dy_m / abs(t.e) - 1.0) < 5e-3)
    if metric:
        dx_m, dy_m = abs(t.a), abs(t.e)
    native_m = min(dx_m, dy_m)
    if resolution_m is not None and resolution_m < native_m * (1 - 1e-6):
        raise ParameterError(f"resolution_m={resolution_m:g} is finer than the raster's {native_m:.4g} m "
                             "cells; omit it (upsampling adds no information) or give a coarser value")
    target_m = resolution_m if resolution_m is not None else native_m
    # decimated read when coarsening by 2x or more: GDAL averages while reading
    kx = max(1, int(target_m // dx_m)) if resolution_m is not None else 1
    ky = max(1, int(target_m // dy_m)) if resolution_m is not None else 1
    read_h, read_w = math.ceil(h / ky), math.ceil(w / kx)
    out_cells = (w * dx_m) * (h * dy_m) / target_m ** 2
    read_cells = read_h * read_w
    need = _READ_BYTES_PER_CELL * read_cells + _OUT_BYTES_PER_CELL * out_cells
    avail = _available_memory_bytes()
    limit = max_cells if max_cells is not None else DEFAULT_MAX_CELLS
    if max_cells is None and avail is not None:
        limit = min(limit, int(0.5 * avail / _OUT_BYTES_PER_CELL))
    cells = max(read_cells, out_cells)
    if cells > limit or (avail is not None and need > avail):
        fit_cells = min(limit, avail / (_READ_BYTES_PER_CELL + _OUT_BYTES_PER_CELL)) if avail else limit
        fit_m = target_m * math.sqrt(cells / max(fit_cells, 1.0)) * 1.05
        raise TerrainError(
            f"{p}: loading needs about {cells / 1e6:.1f} M cells ({read_h} x {read_w} read, "
            f"{target_m:.3g} m cells, ~{need / 1e9:.1f} GB working memory), over the limit of "
            f"{limit / 1e6:.1f} M cells"
            + (f" / {avail / 1e9:.1f} GB available" if avail is not None else "")
            + f"; pass bounds=(left, bottom, right, top) to read a window around the site, "
            f"or a coarser resolution_m= (about {math.ceil(fit_m):d} m or more fits)")

    # -- read ----------------------------------------------------------------------------
    if (kx, ky) == (1, 1):
        data = src.read(band, window=window, masked=True)
        rt = wt
    else:
        data = src.read(band, window=window, masked=True, out_shape=(read_h, read_w),
                        resampling=Resampling.average)
        rt = wt @ Affine.scale(w / read_w, h / read_h)
    z = np.ma.filled(data.astype(np.float64), np.nan)
    z[~np.isfinite(z)] = np.nan
    del data
    # south-up (positive y step) and east-to-west rasters: flip to north-up, west-left
    if rt.e > 0:
        z = z[::-1]
        rt = Affine(rt.a, 0.0, rt.c, 0.0, -rt.e, rt.f + z.shape[0] * rt.e)
    if rt.a < 0:
        z = z[:, ::-1]
        rt = Affine(-rt.a, 0.0, rt.c + z.shape[1] * rt.a, 0.0, rt.e, rt.f)
    if not np.isfinite(z).any():
        raise TerrainError(f"{p} holds no valid heights in the window read (all nodata); "
                           "check the bounds and the raster's nodata value")

    src_crs = src.crs
    if geographic:
        # longitudes given as 0..360: shift so the grid's centre lies in [-180, 180)
        lon_c = rt.c + 0.5 * z.shape[1] * rt.a
        shift = 360.0 * math.floor((lon_c + 180.0) / 360.0)
        if shift:
            rt = Affine(rt.a, 0.0, rt.c - shift, 0.0, rt.e, rt.f)
        west, east = rt.c, rt.c + z.shape[1] * rt.a
        if west < -180.0 - 1e-9 or east > 180.0 + 1e-9:
            raise TerrainError(f"{p} crosses the antimeridian (longitudes {west:.4f}..{east:.4f}); "
                               "pass bounds= on one side of it")
        if east - west > _MAX_LON_SPAN_DEG:
            raise TerrainError(f"{p} spans {east - west:.1f} degrees of longitude, too wide for one UTM "
                               f"zone (at most {_MAX_LON_SPAN_DEG:g}); pass bounds= around the site")

    square = abs(rt.a - abs(rt.e)) <= 1e-9 * rt.a
    if not metric:
        lon_c, lat_c = _center_lonlat(rt, z.shape, src_crs)
        dst_crs = _utm_crs(lon_c, lat_c)
        z, rt = _warp(z, rt, src_crs, dst_crs, target_m, resolution_m is not None and (kx, ky) == (1, 1)
                      and target_m >= 2 * max(dx_m, dy_m))
        crs = dst_crs
    elif resolution_m is not None or not square:
        res_units = target_m / units
        if abs(rt.a - res_units) > 1e-9 * res_units or abs(abs(rt.e) - res_units) > 1e-9 * res_units:
            coarsen = resolution_m is not None and res_units >= 1.5 * max(rt.a, abs(rt.e))
            z, rt = _warp(z, rt, src_crs, src_crs, res_units, coarsen)
        crs = src_crs
    else:
        crs = src_crs
    if not np.isfinite(z).any():
        raise TerrainError(f"{p} holds no valid heights after resampling; check the bounds")
    # scale, offset and unit are affine, so applying them after averaging or bilinear
    # resampling gives the same heights as applying them first
    if (scale, offset, to_m) != (1.0, 0.0, 1.0):
        with np.errstate(over="ignore", invalid="ignore"):
            z = (z * scale + offset) * to_m
        if not np.all(np.isfinite(z[~np.isnan(z)])):
            raise TerrainError(f"{p}: heights overflow after scale {scale:g}, offset {offset:g} and unit "
                               f"factor {to_m:g}; check the band's scale/offset tags and --z-scale")
    return Terrain(z, rt, crs)


#: Height units a band may declare (GDAL's unit type), normalised (lower case, no
#: spaces, '-', '_', '.', '(' or ')'), as metres per unit.  The international foot is
#: 0.3048 m exactly and the US survey foot 1200/3937 m (NIST SP 811, appendix B).
_HEIGHT_UNITS = {
    **dict.fromkeys(("m", "metre", "metres", "meter", "meters"), 1.0),
    **dict.fromkeys(("ft", "foot", "feet", "internationalfoot", "internationalfeet", "footinternational",
                     "ftintl", "intlfoot"), 0.3048),
    **dict.fromkeys(("ftus", "usft", "ussurveyfoot", "ussurveyfeet", "surveyfoot", "footus", "footussurvey",
                     "usfoot", "usfeet"), 1200.0 / 3937.0),
    **dict.fromkeys(("cm", "centimetre", "centimetres", "centimeter", "centimeters"), 0.01),
    **dict.fromkeys(("mm", "millimetre", "millimetres", "millimeter", "millimeters"), 0.001),
}


def _height_units(src, p, band: int, z_scale: float | None) -> tuple[float, float, float]:
    """(scale, offset, metres per unit) of the height band, from its tags or ``z_scale``."""
    import re

    scale = float(src.scales[band - 1]) if src.scales else 1.0
    offset = float(src.offsets[band - 1]) if src.offsets else 0.0
    if not (math.isfinite(scale) and math.isfinite(offset)) or scale == 0.0:
        raise TerrainError(f"band {band} of {p} has the scale {scale:g} and offset {offset:g}; heights need a "
                           "finite, non-zero scale (fix with gdal_edit.py -scale / -offset)")
    unit = (src.units[band - 1] if src.units else "") or ""
    key = re.sub(r"[\s\-_.()]", "", unit.lower())
    declared = _HEIGHT_UNITS.get(key) if key else 1.0
    if z_scale is not None:
        if declared is not None and key and abs(declared - z_scale) > 1e-12 * declared:
            from .errors import InputWarning

            warnings.warn(InputWarning(f"band {band} of {p} declares its heights in {unit!r} "
                                       f"({declared:g} m per unit); the given z_scale {z_scale:g} is used "
                                       "instead"), stacklevel=3)
        return scale, offset, z_scale
    if declared is None:
        raise TerrainError(f"band {band} of {p} declares its heights in {unit!r}, a unit fallway cannot "
                           "convert; give the metres per unit (--z-scale) or fix the unit "
                           "(gdal_edit.py -units m)")
    return scale, offset, declared


def _center_lonlat(rt: Affine, shape, crs) -> tuple[float, float]:
    from pyproj import CRS as PCRS, Transformer

    cx, cy = rt @ (shape[1] / 2, shape[0] / 2)
    pcrs = PCRS.from_user_input(crs.to_wkt())
    if pcrs.is_geographic:
        return float(cx), float(cy)
    tr = Transformer.from_crs(pcrs, pcrs.geodetic_crs, always_xy=True)
    lon, lat = tr.transform(cx, cy)
    return float(lon), float(lat)


def _warp(z, rt, src_crs, dst_crs, res, average: bool):
    """Reproject/resample ``z`` onto square ``res`` cells (NaN = nodata both sides)."""
    from rasterio.enums import Resampling
    from rasterio.warp import calculate_default_transform, reproject

    rows, cols = z.shape
    left, top = rt.c, rt.f
    right, bottom = rt.c + cols * rt.a, rt.f + rows * rt.e
    if src_crs == dst_crs:
        # same CRS: keep the outer edges (to the nearest whole cell)
        dw = max(1, int(round((right - left) / res)))
        dh = max(1, int(round((top - bottom) / res)))
        dt = Affine(res, 0.0, left, 0.0, -res, top)
    else:
        dt, dw, dh = calculate_default_transform(src_crs, dst_crs, cols, rows, left, bottom, right, top,
                                                 resolution=(res, res))
    if min(dw, dh) < MIN_GRID_CELLS:
        raise TerrainError(f"resolution {res:g} leaves fewer than {MIN_GRID_CELLS} x {MIN_GRID_CELLS} cells; "
                           "choose a finer resolution_m")
    dst = np.full((dh, dw), np.nan)
    reproject(z, dst, src_transform=rt, src_crs=src_crs, src_nodata=np.nan,
              dst_transform=dt, dst_crs=dst_crs, dst_nodata=np.nan,
              resampling=Resampling.average if average else Resampling.bilinear)
    return dst, dt


#: How far (m) a ground line's straight segment may run above or below the smooth ground
#: surface before a vertex is added on the ground: a judgment (a chute or conveyor laid on
#: the ground is bedded on a few decimetres of packing or cut), not a standard.
GROUND_TOLERANCE_M = 0.25


def lay_on_ground(terrain, points, *, tol_m: float = GROUND_TOLERANCE_M) -> np.ndarray:
    """A 3D polyline whose vertices lie on the ground, with vertices added (on the ground)
    wherever a straight segment strays more than ``tol_m`` from it.

    Each segment is checked against :meth:`Terrain.sample` (the smooth surface) at steps of
    at most half a cell; where the largest gap exceeds ``tol_m`` the segment is split at
    that point, laid on the ground, and both halves are checked again.  So no point of
    the returned line, sampled at half a cell, is more than ``tol_m`` off the ground
    (within the sampling), while gentle ground keeps long segments.  Where the smooth
    surface is undefined (near nodata or the DEM's edge) vertices keep their own heights
    and the segment is not checked there.

    Examples
    --------
    A chord across a ridge gets a vertex on the crest:

    >>> import numpy as np
    >>> z = 10.0 - 0.5 * np.abs(np.arange(9.0) - 4.0)
    >>> t = Terrain.from_array(np.tile(z, (5, 1)), (2.0, 0, 0, 0, -2.0, 10.0))
    >>> line = lay_on_ground(t, [(1.0, 5.0, 8.0), (17.0, 5.0, 8.0)])
    >>> len(line) > 2, bool(np.abs(line[:, 2] - t.sample(line[:, 0], line[:, 1])).max() < 1e-9)
    (True, True)
    """
    P = np.array(points, dtype=float)
    zs = np.atleast_1d(np.asarray(terrain.sample(P[:, 0], P[:, 1]), dtype=float))
    # where the smooth surface is undefined (within reach of nodata or the DEM's edge) the
    # vertex keeps its own height and the ground there goes unchecked
    P[:, 2] = np.where(np.isfinite(zs), zs, P[:, 2])
    half = 0.5 * float(terrain.cell_size)
    out = [P[0]]
    for a, b in zip(P[:-1], P[1:]):
        todo = [(a, b)]
        while todo:
            u, w = todo.pop()
            plan = float(np.hypot(*(w[:2] - u[:2])))
            n = max(2, int(math.ceil(plan / half)) + 1)
            f = np.linspace(0.0, 1.0, n)[1:-1]
            if f.size:
                xy = u[:2] + np.outer(f, w[:2] - u[:2])
                zg = np.atleast_1d(np.asarray(terrain.sample(xy[:, 0], xy[:, 1]), dtype=float))
                gap = np.abs(u[2] + f * (w[2] - u[2]) - zg)
                gap[~np.isfinite(gap)] = 0.0
                k = int(np.argmax(gap))
                if gap[k] > tol_m:
                    m = np.array([xy[k, 0], xy[k, 1], zg[k]])
                    todo.append((m, w))
                    todo.append((u, m))
                    continue
            out.append(w)
    return np.array(out)
