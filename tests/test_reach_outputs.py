"""`fallway reach` on a geographic DEM with --max-time and --max-distance, and its file mode.

References: the bounded maps are checked against the unbounded reach map of the same
DEM (the search with a time cut-off settles labels in time order, so every cell it keeps
has the unbounded arrival time: Dijkstra's label-setting property), and the cell
straight down the fall line against the closed-form incline law
t = sqrt(2 s / a), a = g (sin θ - μ cos θ) (any mechanics text; from memory).  The mode
0644 is what ``open()`` gives under the common umask 022 (POSIX creat: 0666 & ~umask),
as for every other output.
"""

from __future__ import annotations

import math
import os
import stat

import numpy as np
import pytest
import rasterio
from affine import Affine
from click.testing import CliRunner

from conftest import plane, write_geotiff
from fallway.cli import main

G = 9.80665


@pytest.fixture(scope="module")
def geo_dem(tmp_path_factory):
    """1 arc-second cells at 47 N, a plane falling east by 0.3 m per metre of ground (about)."""
    d = tmp_path_factory.mktemp("geo")
    rows, cols = 60, 80
    dx = 1.0 / 3600.0 * math.radians(1.0) * 6_371_000.0 * math.cos(math.radians(47.0))  # ~21 m
    z = 900.0 - 0.3 * dx * np.tile(np.arange(cols, dtype=float), (rows, 1))
    path = write_geotiff(d / "geo.tif", z, Affine(1 / 3600, 0, 14.0, 0, -1 / 3600, 47.01), "EPSG:4326")
    return path


def _reach(dem, out, *extra):
    args = ["reach", dem, "--start", 14.003, 47.0, "--mu", 0.1, "--normal", "gravity", "--out", out, *extra]
    res = CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)
    assert res.exit_code == 0, res.output
    with rasterio.open(out) as ds:
        return ds.read(1), ds.transform, ds.crs


def _values_at(time, transform, x, y):
    col, row = ~transform @ (x, y)
    return time[np.floor(row).astype(int), np.floor(col).astype(int)]


@pytest.fixture(scope="module")
def full_map(geo_dem, tmp_path_factory):
    return _reach(geo_dem, tmp_path_factory.mktemp("full") / "reach.tif")


def test_max_time_on_a_geographic_dem(geo_dem, full_map, tmp_path):
    t_full, tr_full, crs_full = full_map
    t, tr, crs = _reach(geo_dem, tmp_path / "reach.tif", "--max-time", 20)
    assert crs == crs_full and crs.to_epsg() == 32633  # reprojected to the local UTM zone, as `route` does
    kept = np.isfinite(t)
    assert kept.sum() > 50 and np.nanmax(t) <= 20.0
    rows, cols = np.nonzero(kept)
    x, y = tr @ (cols + 0.5, rows + 0.5)
    np.testing.assert_allclose(t[kept], _values_at(t_full, tr_full, x, y), rtol=1e-9)
    # and nothing the unbounded map reaches within 20 s is missing
    assert kept.sum() == int(np.sum(t_full <= 20.0))


def test_max_distance_on_a_geographic_dem(geo_dem, full_map, tmp_path):
    t_full, tr_full, _ = full_map
    t, tr, crs = _reach(geo_dem, tmp_path / "reach.tif", "--max-distance", 300)
    assert crs.to_epsg() == 32633
    rows, cols = np.nonzero(np.isfinite(t))
    x, y = tr @ (cols + 0.5, rows + 0.5)
    with rasterio.open(tmp_path / "reach.tif") as ds:
        sx, sy = float(ds.tags()["start_x"]), float(ds.tags()["start_y"])
    assert np.hypot(x - sx, y - sy).max() <= 300.0
    assert len(x) > 100
    # lines confined to the disc are never faster than the unbounded ones
    full = _values_at(t_full, tr_full, x, y)
    assert np.all(t[rows, cols] >= full * (1 - 1e-12))
    # east of the start, down the fall line: the straight line, timed by the incline law
    east = (np.abs(y - sy) < 0.5 * tr.a) & (x > sx + 50.0)
    assert east.any()
    th = math.atan(0.3)
    a = G * (math.sin(th) - 0.1 * math.cos(th))
    s = np.hypot(x[east] - sx, y[east] - sy) / math.cos(th)
    np.testing.assert_allclose(t[rows, cols][east], np.sqrt(2 * s / a), rtol=0.03)


def test_reach_tif_has_the_mode_of_every_other_output(tmp_path):
    z, t = plane(30, 60, 2.0, -0.3, 0.0, z0=200.0)
    dem = write_geotiff(tmp_path / "ramp.tif", z, t, "EPSG:32633")
    old = os.umask(0o022)
    try:
        res = CliRunner().invoke(main, ["reach", str(dem), "--start", "500005", "3999969", "--mu", "0.1",
                                        "--out", str(tmp_path / "out" / "reach.tif")])
    finally:
        os.umask(old)
    assert res.exit_code == 0, res.output
    assert stat.S_IMODE(os.stat(tmp_path / "out" / "reach.tif").st_mode) == 0o644
