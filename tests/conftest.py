"""Shared test fixtures: small GeoTIFFs written in ``tmp_path``.

Use the ``write_geotiff`` fixture (or import nothing and call it through the fixture)::

    def test_x(tmp_path, write_geotiff):
        path = write_geotiff(tmp_path / "dem.tif", z, Affine(2, 0, 0, 0, -2, 100), "EPSG:32633")
"""

from __future__ import annotations

import warnings
from pathlib import Path

import os

import numpy as np
import pytest
from affine import Affine
from hypothesis import settings

# CI runs the property tests with a fixed seed, so a green main stays green; local runs keep
# exploring new examples (and hypothesis's example database replays any failure found).
settings.register_profile("ci", derandomize=True, database=None)
if os.environ.get("CI"):
    settings.load_profile("ci")


def write_geotiff(path, z, transform, crs, nodata=None, *, dtype=None, count=1, **profile) -> Path:
    """Write ``z`` (2D, or 3D bands-first) as a GeoTIFF and return the path.

    ``transform`` is an :class:`affine.Affine` (or 6 numbers), ``crs`` anything rasterio
    accepts (``"EPSG:32633"``, a CRS, or None for a raster without CRS).  With ``count``
    > 1 a 2D ``z`` is repeated into every band (band k holds ``z + 1000 k``).
    Extra ``profile`` keys (``compress=...``, ``tiled=True``) go to rasterio.
    """
    import rasterio
    from rasterio.errors import NotGeoreferencedWarning

    z = np.asarray(z)
    bands = z[None] if z.ndim == 2 else z
    if z.ndim == 2 and count > 1:
        bands = np.stack([z + 1000.0 * k for k in range(count)])
    dtype = dtype or (bands.dtype if bands.dtype != np.float16 else np.float32)
    if not isinstance(transform, Affine):
        transform = Affine(*tuple(transform)[:6])
    meta = dict(driver="GTiff", width=bands.shape[2], height=bands.shape[1], count=bands.shape[0],
                dtype=np.dtype(dtype).name, transform=transform, crs=crs, nodata=nodata)
    meta.update(profile)
    path = Path(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        with rasterio.open(path, "w", **meta) as dst:
            dst.write(bands.astype(dtype))
    return path


@pytest.fixture(name="write_geotiff")
def write_geotiff_fixture():
    """The :func:`write_geotiff` helper, as a fixture."""
    return write_geotiff


def plane(rows: int, cols: int, cell_m: float, gx: float, gy: float, z0: float = 100.0,
          x0: float = 500_000.0, y0: float = 4_000_000.0):
    """A tilted plane z = z0 + gx (x - x0) + gy (y - y0) on a north-up grid.

    Returns ``(z, transform)``; ``(x0, y0)`` is the top-left corner, cell centres at
    half-cell offsets, so heights are exact at the centres.
    """
    t = Affine(cell_m, 0.0, x0, 0.0, -cell_m, y0)
    r, c = np.mgrid[0:rows, 0:cols]
    x = x0 + (c + 0.5) * cell_m
    y = y0 - (r + 0.5) * cell_m
    return z0 + gx * (x - x0) + gy * (y - y0), t


@pytest.fixture
def plane_tif(tmp_path):
    """A 40 x 50 plane GeoTIFF at 5 m in EPSG:32633 rising 0.1 east and 0.2 north.

    Returns ``(path, z, transform, (gx, gy))``.
    """
    z, t = plane(40, 50, 5.0, 0.1, 0.2)
    path = write_geotiff(tmp_path / "plane.tif", z, t, "EPSG:32633")
    return path, z, t, (0.1, 0.2)


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory):
    """One ``fallway demo`` run in a fresh process, shared by the tests that read its files:
    ``(output folder, completed process)``."""
    import subprocess
    import sys

    out = tmp_path_factory.mktemp("demo") / "demo"
    p = subprocess.run([sys.executable, "-m", "fallway.cli", "demo", "--out", str(out)], capture_output=True,
                       text=True, timeout=900)
    return out, p
