"""Terrain: the elevation grid, its georeferencing and a smooth interpolant.

(Core value type; loading from GeoTIFF is added by the foundation work.)
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from affine import Affine

from .errors import TerrainError

__all__ = ["Terrain"]


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
        if z.ndim != 2 or min(z.shape) < 2:
            raise TerrainError(f"elevation grid must be 2D with at least 2x2 cells, got shape {z.shape}")
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
