"""Tests of fallway.terrain: loading GeoTIFFs, the smooth interpolant, the errors.

References used below:
* matplotlib's bundled sample data (``mpl-data/sample_data``): ``jacksboro_fault_dem.npz``
  (SRTM 3 arc-second, public domain) and ``topobathy.npz``;
* pyproj's geodesic (Karney's algorithm) for ground distances;
* the UTM zone rule (zone = floor((lon + 180) / 6) + 1, NGA/DMA TM 8358.2);
* spline theory: an interpolating cubic spline reproduces every polynomial of degree <= 3
  (de Boor, A Practical Guide to Splines, ch. on spline interpolation); bilinear and
  area-average resampling reproduce planes (the mean of a linear function over a
  symmetric cell equals its value at the centre).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import rasterio
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from pyproj import CRS as PCRS
from pyproj import Geod, Transformer

from conftest import plane, write_geotiff
from fallway.errors import FallwayIOError, ParameterError, TerrainError
from fallway._surface import TILE, TILE_PAD
from fallway.terrain import Terrain, load_terrain


def _sample_npz(name):
    from matplotlib import cbook

    return np.load(cbook.get_sample_data(name, asfileobj=False))


# --------------------------------------------------------------------------------------
# real open data: SRTM tile shipped with matplotlib
# --------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def jacksboro():
    d = _sample_npz("jacksboro_fault_dem.npz")
    return {k: d[k] for k in d.files}


@pytest.fixture(scope="module")
def jacksboro_tif(jacksboro, tmp_path_factory):
    d = jacksboro
    t = Affine(float(d["dx"]), 0, float(d["xmin"]), 0, -float(d["dy"]), float(d["ymin"]))
    path = write_geotiff(tmp_path_factory.mktemp("srtm") / "jacksboro.tif", d["elevation"], t, "EPSG:4326")
    return path, t


@pytest.fixture(scope="module")
def jacksboro_terrain(jacksboro_tif):
    return load_terrain(jacksboro_tif[0])


def test_jacksboro_layout(jacksboro):
    # source: the file itself -- xmin/xmax and ymin/ymax are outer edges 3" apart per
    # cell, and ymin is the *north* edge (ymin > ymax), so row 0 is north
    d = jacksboro
    rows, cols = d["elevation"].shape
    assert d["dx"] == pytest.approx(3 / 3600) and d["dy"] == pytest.approx(3 / 3600)
    assert (d["xmax"] - d["xmin"]) / d["dx"] == pytest.approx(cols)
    assert (d["ymin"] - d["ymax"]) / d["dy"] == pytest.approx(rows)
    assert d["ymin"] > d["ymax"]


def test_jacksboro_becomes_local_utm(jacksboro, jacksboro_terrain):
    t = jacksboro_terrain
    crs = PCRS.from_user_input(t.crs.to_wkt())
    assert crs.is_projected
    lon_c = 0.5 * (float(jacksboro["xmin"]) + float(jacksboro["xmax"]))
    # UTM zone rule (NGA/DMA TM 8358.2): zone = floor((lon + 180) / 6) + 1, north hemisphere
    zone = math.floor((lon_c + 180) / 6) + 1
    assert t.crs.to_epsg() == 32600 + zone == 32616
    # heights remain metres: same range as the source (bilinear cannot overshoot)
    z = t.z[np.isfinite(t.z)]
    assert jacksboro["elevation"].min() - 1e-6 <= z.min() and z.max() <= jacksboro["elevation"].max() + 1e-6


def test_jacksboro_cell_size_is_3_arcsec_on_the_ground(jacksboro, jacksboro_terrain):
    # reference: pyproj's geodesic distance of 3" of longitude and of latitude at the
    # tile's centre; the loader keeps the smaller (east-west) edge so no detail is lost
    lat_c = 0.5 * (float(jacksboro["ymin"]) + float(jacksboro["ymax"]))
    lon_c = 0.5 * (float(jacksboro["xmin"]) + float(jacksboro["xmax"]))
    geod = Geod(ellps="WGS84")
    d = 3 / 3600
    _, _, ew = geod.inv(lon_c - d / 2, lat_c, lon_c + d / 2, lat_c)
    _, _, ns = geod.inv(lon_c, lat_c - d / 2, lon_c, lat_c + d / 2)
    assert ew < ns
    # UTM grid scale within a zone is 0.9996..1.001, so grid metres match ground metres to 0.2 %
    assert jacksboro_terrain.cell_size == pytest.approx(ew, rel=2e-3)
    assert 70 < jacksboro_terrain.cell_size < 80


def test_jacksboro_heights_survive(jacksboro, jacksboro_terrain):
    # source: the SRTM heights of the npz at the lon/lat of their own cell centres,
    # transformed to the UTM CRS with pyproj
    d = jacksboro
    el = d["elevation"].astype(float)
    rr, cc = np.meshgrid(np.arange(3, 341, 11), np.arange(3, 400, 13), indexing="ij")
    lon = float(d["xmin"]) + (cc + 0.5) * float(d["dx"])
    lat = float(d["ymin"]) - (rr + 0.5) * float(d["dy"])
    tr = Transformer.from_crs("EPSG:4326", jacksboro_terrain.crs.to_wkt(), always_xy=True)
    x, y = tr.transform(lon, lat)
    s = jacksboro_terrain.sample(x, y)
    assert np.isfinite(s).all()
    err = s - el[rr, cc]
    # bilinear reprojection at ~1:1 plus the spline: a few metres on 3" SRTM
    assert np.median(np.abs(err)) < 3.0
    # every value stays inside the range of its 3 x 3 source neighbourhood (+1 m)
    lo = np.min([el[rr + i, cc + j] for i in (-1, 0, 1) for j in (-1, 0, 1)], axis=0)
    hi = np.max([el[rr + i, cc + j] for i in (-1, 0, 1) for j in (-1, 0, 1)], axis=0)
    assert np.all((s >= lo - 1.0) & (s <= hi + 1.0))
    # a north-south flip would be caught: the flipped source differs by ~100 m here
    assert np.median(np.abs(s - el[::-1][rr, cc])) > 30.0


def test_jacksboro_window_matches_full_read(jacksboro, jacksboro_tif, jacksboro_terrain):
    # a window given in the DEM's own CRS (degrees) + 500 m margin: same heights inside
    lon0, lat0 = -84.30, 36.55
    part = load_terrain(jacksboro_tif[0], bounds=(lon0, lat0, lon0 + 0.05, lat0 + 0.04), margin_m=500)
    assert part.crs == jacksboro_terrain.crs
    assert part.z.size < jacksboro_terrain.z.size / 10
    tr = Transformer.from_crs("EPSG:4326", part.crs.to_wkt(), always_xy=True)
    lon, lat = np.meshgrid(np.linspace(lon0, lon0 + 0.05, 7), np.linspace(lat0, lat0 + 0.04, 5))
    x, y = tr.transform(lon, lat)
    a, b = part.sample(x, y), jacksboro_terrain.sample(x, y)
    assert np.isfinite(a).all()
    # both are bilinear warps of the same cells onto (slightly) shifted UTM grids
    assert np.median(np.abs(a - b)) < 3.0


def test_jacksboro_coarse_resolution(jacksboro_tif):
    t = load_terrain(jacksboro_tif[0], resolution_m=300.0)
    assert t.cell_size == pytest.approx(300.0)
    # tile is ~30 km x 32 km on the ground (403 x 74.6 m, 344 x 92.6 m)
    assert 95 <= t.shape[1] <= 115 and 100 <= t.shape[0] <= 120


# --------------------------------------------------------------------------------------
# topobathy.npz: bottom-up rows, 0-360 longitudes, Mercator-spaced latitudes
# --------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def topobathy():
    d = _sample_npz("topobathy.npz")
    return d["topo"].astype(float), d["longitude"].astype(float), d["latitude"].astype(float)


def test_topobathy_layout(topobathy):
    # source: the file itself -- rows run south to north (latitude ascending), longitudes
    # are 0-360 degrees east (234..238 = 126..122 W), and latitudes are evenly spaced in
    # spherical-Mercator y = ln tan(pi/4 + lat/2), not in degrees
    topo, lon, lat = topobathy
    assert np.all(np.diff(lat) > 0) and lon.min() > 180
    dlat = np.diff(lat)
    assert dlat.max() / dlat.min() > 1.03
    ym = np.log(np.tan(np.pi / 4 + np.radians(lat) / 2))
    assert np.diff(ym).std() / np.diff(ym).mean() < 1e-3


def _topobathy_check(t, topo, lon, lat, rows):
    tr = Transformer.from_crs("EPSG:4326", t.crs.to_wkt(), always_xy=True)
    for r in rows:
        x, y = tr.transform(lon[4:-4] - 360.0, np.full(lon.size - 8, lat[r]))
        s = t.sample(x, y)
        assert np.isfinite(s).all()
        ref = topo[r, 4:-4]
        lo = np.min([topo[r + i, 3 + j:lon.size - 5 + j] for i in (-1, 0, 1) for j in (0, 1, 2)], axis=0)
        hi = np.max([topo[r + i, 3 + j:lon.size - 5 + j] for i in (-1, 0, 1) for j in (0, 1, 2)], axis=0)
        # 2.4 km cells over coastal mountains: compare with the 3 x 3 neighbourhood range
        assert np.mean((s >= lo - 5) & (s <= hi + 5)) > 0.9
        assert np.median(np.abs(s - ref)) < 0.25 * np.median(hi - lo) + 5


def test_topobathy_web_mercator_south_up(topobathy, tmp_path):
    # written exactly as the file describes it: Web Mercator (EPSG:3857) x, y of the cell
    # centres, rows south-up (positive y step). Web Mercator "metres" are 1/cos(49 deg) =
    # 1.52 x ground metres here, so the loader must reproject to the local UTM zone.
    topo, lon, lat = topobathy
    R = 6378137.0
    xm = R * np.radians(lon - 360.0)
    ym = R * np.log(np.tan(np.pi / 4 + np.radians(lat) / 2))
    dx = (xm[-1] - xm[0]) / (xm.size - 1)
    dy = (ym[-1] - ym[0]) / (ym.size - 1)
    path = write_geotiff(tmp_path / "tb3857.tif", topo, Affine(dx, 0, xm[0] - dx / 2, 0, dy, ym[0] - dy / 2),
                         "EPSG:3857")
    t = load_terrain(path)
    # UTM zone rule: lon -124 (centre) -> zone 10 north
    assert t.crs.to_epsg() == 32610
    # ground size of one cell from pyproj's geodesic: 0.0333 deg of longitude at 49 N
    _, _, ew = Geod(ellps="WGS84").inv(-124.0, 49.0, -124.0 + (lon[-1] - lon[0]) / (lon.size - 1), 49.0)
    assert t.cell_size == pytest.approx(ew, rel=5e-3)
    assert t.cell_size < dx / 1.4
    _topobathy_check(t, topo, lon, lat, rows=(3, 45, 87))


def test_topobathy_geographic_0_360_south_up(topobathy, tmp_path):
    # written as EPSG:4326, south-up, longitudes left as 0-360, on the mean latitude step
    # (the file's own georeference is then the reference for where each cell lies)
    topo, lon, lat = topobathy
    dlon = (lon[-1] - lon[0]) / (lon.size - 1)
    dlat = (lat[-1] - lat[0]) / (lat.size - 1)
    tf = Affine(dlon, 0, lon[0] - dlon / 2, 0, dlat, lat[0] - dlat / 2)
    path = write_geotiff(tmp_path / "tb4326.tif", topo, tf, "EPSG:4326")
    t = load_terrain(path)
    assert t.crs.to_epsg() == 32610
    # x inside UTM zone 10's false-easting range: longitudes were normalised, not shifted
    left, bottom, right, top = t.bounds
    assert 100_000 < left < right < 900_000 and 5.2e6 < bottom < top < 5.6e6
    lat_grid = lat[0] + dlat * np.arange(lat.size)
    _topobathy_check(t, topo, lon, lat_grid, rows=(3, 45, 87))
    # orientation against the real world: the north-east corner is the Coast Mountains,
    # the south-west corner the Pacific off Vancouver Island
    tr = Transformer.from_crs("EPSG:4326", t.crs.to_wkt(), always_xy=True)
    ne = t.sample(*tr.transform(-122.2, 49.8))
    sw = t.sample(*tr.transform(-125.8, 48.2))
    assert ne > 500 and sw < -500


# --------------------------------------------------------------------------------------
# synthetic planes and polynomials: the interpolant
# --------------------------------------------------------------------------------------

def _interior_points(t, n, rng, inset=0.0):
    left, bottom, right, top = t.bounds
    h = t.cell_size * (0.5 + inset)
    return rng.uniform(left + h, right - h, n), rng.uniform(bottom + h, top - h, n)


def test_plane_sample_and_gradient_exact():
    # an interpolating cubic spline reproduces planes exactly (de Boor)
    z, tf = plane(30, 40, 2.0, 0.3, -0.15)
    t = Terrain.from_array(z, tf, "EPSG:32633")
    rng = np.random.default_rng(1)
    x, y = _interior_points(t, 500, rng)
    want = 100.0 + 0.3 * (x - tf.c) - 0.15 * (y - tf.f)
    np.testing.assert_allclose(t.sample(x, y), want, rtol=0, atol=1e-9)
    gx, gy = t.gradient(x, y)
    np.testing.assert_allclose(gx, 0.3, atol=1e-9)
    np.testing.assert_allclose(gy, -0.15, atol=1e-9)
    # the lattice's bilinear interpolation agrees on a plane
    np.testing.assert_allclose(t.sample_linear(x, y), want, atol=1e-9)


def test_gradient_points_north_for_a_surface_rising_north():
    # map convention: x east, y north; row 0 is the north edge
    z, tf = plane(10, 10, 1.0, 0.0, 0.5)
    t = Terrain.from_array(z, tf)
    assert z[0, 0] > z[-1, 0]
    gx, gy = t.gradient(*t.cell_center(5, 5))
    assert gy == pytest.approx(0.5, abs=1e-12) and gx == pytest.approx(0.0, abs=1e-12)


@settings(max_examples=25, deadline=None)
@given(gx=st.floats(-2, 2), gy=st.floats(-2, 2), z0=st.floats(-500, 3000),
       cell=st.sampled_from([0.5, 1.0, 2.0, 30.0]), u=st.floats(0, 1), v=st.floats(0, 1))
def test_plane_exact_property(gx, gy, z0, cell, u, v):
    z, tf = plane(6, 7, cell, gx, gy, z0=z0)
    t = Terrain.from_array(z, tf)
    left, bottom, right, top = t.bounds
    x = left + cell / 2 + u * (right - left - cell)
    y = bottom + cell / 2 + v * (top - bottom - cell)
    want = z0 + gx * (x - tf.c) + gy * (y - tf.f)
    assert t.sample(x, y) == pytest.approx(want, abs=1e-8 * (1 + abs(z0)))
    assert t.gradient(x, y) == pytest.approx((gx, gy), abs=1e-8)


def test_cubic_polynomial_exact():
    # a bicubic interpolating spline reproduces any polynomial of degree <= 3 per axis
    rows, cols = np.mgrid[0:12, 0:15].astype(float)
    tf = Affine(1.0, 0, 0.0, 0, -1.0, 12.0)
    x, y = cols + 0.5, 12.0 - (rows + 0.5)
    f = lambda x, y: 0.01 * x**3 - 0.02 * x * y**2 + 0.3 * y**2 - x + 4  # noqa: E731
    t = Terrain.from_array(f(x, y), tf)
    rng = np.random.default_rng(2)
    px, py = rng.uniform(0.5, 14.5, 200), rng.uniform(0.5, 11.5, 200)
    np.testing.assert_allclose(t.sample(px, py), f(px, py), atol=1e-9)
    gx, gy = t.gradient(px, py)
    np.testing.assert_allclose(gx, 0.03 * px**2 - 0.02 * py**2 - 1, atol=1e-8)
    np.testing.assert_allclose(gy, -0.04 * px * py + 0.6 * py, atol=1e-8)


def test_gradient_matches_finite_differences_on_smooth_surface():
    # central differences of sample() converge to gradient() (O(h^2))
    rows, cols = np.mgrid[0:40, 0:40].astype(float)
    t = Terrain.from_array(20 * np.sin(cols / 6) * np.cos(rows / 9), Affine(2.0, 0, 0, 0, -2.0, 80.0))
    x, y = np.array([13.3, 40.1, 61.7]), np.array([17.9, 44.4, 60.2])
    h = 1e-4
    gx, gy = t.gradient(x, y)
    np.testing.assert_allclose(gx, (t.sample(x + h, y) - t.sample(x - h, y)) / (2 * h), atol=1e-6)
    np.testing.assert_allclose(gy, (t.sample(x, y + h) - t.sample(x, y - h)) / (2 * h), atol=1e-6)


def test_nodata_hole_keeps_plane_exact_and_is_nan_nearby():
    z, tf = plane(30, 30, 1.0, 0.4, 0.25)
    z[12:16, 10:15] = np.nan     # an interior hole
    z[:, :3] = np.nan            # a nodata band along the west edge
    t = Terrain.from_array(z, tf)
    cx, cy = t.cell_center(*np.mgrid[0:30, 0:30].reshape(2, -1))
    ok = t.valid(cx, cy)
    s = t.sample(cx, cy)
    want = 100 + 0.4 * (cx - tf.c) + 0.25 * (cy - tf.f)
    # defined right up to one cell from the nodata, exact there too
    assert ok.sum() > 500
    np.testing.assert_allclose(s[ok], want[ok], atol=1e-9)
    gx, gy = t.gradient(cx[ok], cy[ok])
    np.testing.assert_allclose(gx, 0.4, atol=1e-9)
    np.testing.assert_allclose(gy, 0.25, atol=1e-9)
    assert np.isnan(s[~ok]).all()
    # a point is valid when its 4 x 4 block of cells holds data: the hole starts at row 12,
    # so the centre of row 10 (block rows 9..12) is not valid, that of row 9 is
    assert not t.valid(*t.cell_center(13, 12)) and not t.valid(*t.cell_center(10, 12))
    assert t.valid(*t.cell_center(9, 12))
    assert not t.valid(*t.cell_center(20, 3)) and t.valid(*t.cell_center(20, 4))
    # outside the hull of cell centres: NaN
    assert math.isnan(t.sample(tf.c + 0.2, tf.f - 15))


def test_sample_shapes_and_scalars():
    z, tf = plane(8, 9, 1.0, 0.1, 0.1)
    t = Terrain.from_array(z, tf)
    assert isinstance(t.sample(4.0 + tf.c, tf.f - 4.0), float)
    xx = tf.c + np.full((3, 4), 4.0)
    assert t.sample(xx, tf.f - 4.0).shape == (3, 4)
    assert t.gradient(xx, tf.f - 4.0)[0].shape == (3, 4)
    assert t.valid(xx, tf.f - 4.0).shape == (3, 4)


# --------------------------------------------------------------------------------------
# loading synthetic GeoTIFFs
# --------------------------------------------------------------------------------------

def test_plane_tif_round_trip(plane_tif):
    path, z, tf, (gx, gy) = plane_tif
    t = load_terrain(path)
    assert t.transform == tf and t.crs.to_epsg() == 32633
    np.testing.assert_array_equal(t.z, z)
    assert t.gradient(*t.cell_center(20, 25)) == pytest.approx((gx, gy), abs=1e-9)


def test_south_up_loads_as_north_up(plane_tif, tmp_path):
    path, z, tf, _ = plane_tif
    rows = z.shape[0]
    south_up = Affine(tf.a, 0, tf.c, 0, -tf.e, tf.f + rows * tf.e)   # origin at the south edge
    p2 = write_geotiff(tmp_path / "south_up.tif", z[::-1], south_up, "EPSG:32633")
    a, b = load_terrain(path), load_terrain(p2)
    assert b.transform == a.transform
    np.testing.assert_array_equal(b.z, a.z)
    x, y = _interior_points(a, 50, np.random.default_rng(3))
    np.testing.assert_allclose(b.sample(x, y), a.sample(x, y), atol=1e-9)


def test_window_read_matches_full_read(plane_tif):
    path, z, tf, _ = plane_tif
    full = load_terrain(path)
    bounds = (tf.c + 60, tf.f - 150, tf.c + 120, tf.f - 90)
    part = load_terrain(path, bounds=bounds, margin_m=20)
    # window: (60 + 2 x 20) / 5 = 20 cols, same rows
    assert part.shape == (20, 20)
    assert part.bounds == pytest.approx((tf.c + 40, tf.f - 170, tf.c + 140, tf.f - 70))
    x, y = np.meshgrid(np.linspace(bounds[0], bounds[2], 9), np.linspace(bounds[1], bounds[3], 9))
    np.testing.assert_allclose(part.sample(x, y), full.sample(x, y), atol=1e-9)
    # margin reaching past the raster edge is clipped to the raster
    edge = load_terrain(path, bounds=(tf.c + 1, tf.f - 10, tf.c + 20, tf.f - 1), margin_m=500)
    assert edge.shape == z.shape


@pytest.mark.parametrize("kind", ["value", "nan", "mask"])
def test_nodata_becomes_nan(tmp_path, kind):
    z, tf = plane(20, 20, 2.0, 0.1, 0.0)
    z = z.astype(np.float32)
    hole = (slice(5, 8), slice(6, 10))
    path = tmp_path / f"nodata_{kind}.tif"
    if kind == "value":
        z[hole] = -9999
        write_geotiff(path, z, tf, "EPSG:32633", nodata=-9999)
    elif kind == "nan":
        z[hole] = np.nan
        write_geotiff(path, z, tf, "EPSG:32633", nodata=float("nan"))
    else:
        write_geotiff(path, z, tf, "EPSG:32633")
        with rasterio.Env(GDAL_TIFF_INTERNAL_MASK=True), rasterio.open(path, "r+") as ds:
            m = np.full(z.shape, 255, np.uint8)
            m[hole] = 0
            ds.write_mask(m)
    t = load_terrain(path)
    want = np.zeros(z.shape, bool)
    want[hole] = True
    np.testing.assert_array_equal(np.isnan(t.z), want)
    assert np.isfinite(t.sample(*t.cell_center(15, 15)))
    assert math.isnan(t.sample(*t.cell_center(6, 8)))


def test_resolution_m_coarsens_by_area_average(plane_tif):
    path, z, tf, (gx, gy) = plane_tif
    t = load_terrain(path, resolution_m=10.0)
    assert t.shape == (20, 25) and t.cell_size == 10.0
    assert t.bounds == pytest.approx(load_terrain(path).bounds)
    # the mean of a plane over a square cell is its value at the centre
    cx, cy = t.cell_center(*np.mgrid[0:20, 0:25])
    np.testing.assert_allclose(t.z, 100 + gx * (cx - tf.c) + gy * (cy - tf.f), atol=1e-6)
    # a non-integer ratio
    t2 = load_terrain(path, resolution_m=12.5)
    assert t2.cell_size == 12.5 and t2.shape == (16, 20)


def test_non_square_cells_resampled_to_square(tmp_path):
    tf = Affine(5.0, 0, 500_000.0, 0, -4.0, 4_000_000.0)
    r, c = np.mgrid[0:30, 0:24]
    x, y = 500_000.0 + (c + 0.5) * 5.0, 4_000_000.0 - (r + 0.5) * 4.0
    z = 50 + 0.2 * (x - 500_000) - 0.1 * (y - 4_000_000)
    t = load_terrain(write_geotiff(tmp_path / "rect.tif", z, tf, "EPSG:32633"))
    assert t.cell_size == 4.0 and t.transform.e == -4.0
    assert t.bounds == pytest.approx((500_000.0, 3_999_880.0, 500_120.0, 4_000_000.0))
    # bilinear is exact on a plane; GDAL renormalises its weights in the outermost half
    # cell, and the spline carries that (decaying ~0.27 per cell) a few cells inwards
    px = np.linspace(500_002.0, 500_118.0, 30)
    py = np.linspace(3_999_998.0, 3_999_882.0, 30)
    want = 50 + 0.2 * (px - 500_000) - 0.1 * (py - 4_000_000)
    s = t.sample(px, py)
    np.testing.assert_allclose(s, want, atol=0.1)
    inner = (px > 500_020) & (px < 500_100)
    np.testing.assert_allclose(s[inner], want[inner], atol=1e-5)


def test_z_scale_feet(plane_tif):
    # international foot = 0.3048 m exactly (1959 international yard and pound agreement)
    path, z, _, _ = plane_tif
    t = load_terrain(path, z_scale=0.3048)
    np.testing.assert_allclose(t.z, z * 0.3048)


def test_feet_crs_reprojected_to_metres(tmp_path):
    # EPSG:2229 (NAD83 / California zone 5, US survey feet): cells of 10 ftUS = 3.048006 m
    tf = Affine(10.0, 0, 6_400_000.0, 0, -10.0, 1_900_000.0)
    z = np.add.outer(np.arange(30.0), np.arange(40.0))
    t = load_terrain(write_geotiff(tmp_path / "ft.tif", z, tf, "EPSG:2229"))
    assert PCRS.from_user_input(t.crs.to_wkt()).axis_info[0].unit_name == "metre"
    assert t.cell_size == pytest.approx(1200 / 3937 * 10, rel=2e-3)


def test_multiband_uses_band_one(tmp_path):
    z, tf = plane(10, 12, 2.0, 0.1, 0.2)
    path = write_geotiff(tmp_path / "bands.tif", z, tf, "EPSG:32633", count=3)
    np.testing.assert_allclose(load_terrain(path).z, z)


def test_from_array_validates():
    with pytest.raises(TerrainError, match="2D"):
        Terrain.from_array(np.zeros(5), Affine.identity())
    with pytest.raises(TerrainError, match="square"):
        Terrain.from_array(np.zeros((3, 3)), Affine(2, 0, 0, 0, -1, 0))


# --------------------------------------------------------------------------------------
# every bad input: a clear error saying what to do
# --------------------------------------------------------------------------------------

def test_missing_file(tmp_path):
    with pytest.raises(FallwayIOError, match="not found.*check the path"):
        load_terrain(tmp_path / "nope.tif")


def test_folder_instead_of_file(tmp_path):
    with pytest.raises(FallwayIOError, match="folder"):
        load_terrain(tmp_path)


def test_not_a_raster(tmp_path):
    p = tmp_path / "notes.tif"
    p.write_text("this is not a raster\n")
    with pytest.raises(FallwayIOError, match="cannot read .* as a raster.*GeoTIFF") as info:
        load_terrain(p)
    assert isinstance(info.value.__cause__, rasterio.errors.RasterioError)
    assert isinstance(info.value, OSError)


def test_no_crs(tmp_path):
    z, tf = plane(5, 5, 1.0, 0, 0)
    p = write_geotiff(tmp_path / "nocrs.tif", z, tf, None)
    with pytest.raises(TerrainError, match="no CRS.*a_srs"):
        load_terrain(p)


@pytest.mark.parametrize("tf", [Affine.translation(500_000, 4_000_000) @ Affine.rotation(10) @ Affine.scale(2, -2),
                                Affine(2, 0.5, 500_000, 0, -2, 4_000_000)])
def test_rotated_or_sheared(tmp_path, tf):
    p = write_geotiff(tmp_path / "rot.tif", np.zeros((5, 5)), tf, "EPSG:32633")
    with pytest.raises(TerrainError, match="rotated or sheared.*gdalwarp"):
        load_terrain(p)


def test_all_nodata(tmp_path):
    _, tf = plane(6, 6, 1.0, 0, 0)
    p = write_geotiff(tmp_path / "empty.tif", np.full((6, 6), -9999.0), tf, "EPSG:32633", nodata=-9999)
    with pytest.raises(TerrainError, match="no valid heights.*nodata"):
        load_terrain(p)


def test_bounds_outside(plane_tif):
    path, _, tf, _ = plane_tif
    with pytest.raises(TerrainError, match="do not overlap.*raster's CRS"):
        load_terrain(path, bounds=(0, 0, 10, 10), margin_m=0)


def test_crossing_antimeridian(tmp_path):
    tf = Affine(0.01, 0, 179.9, 0, -0.01, 10.0)
    p = write_geotiff(tmp_path / "dateline.tif", np.zeros((10, 20)), tf, "EPSG:4326")
    with pytest.raises(TerrainError, match="antimeridian.*bounds"):
        load_terrain(p)


@pytest.fixture(scope="module")
def huge_sparse_tif(tmp_path_factory):
    """A 100 000 x 100 000 float32 GeoTIFF (40 GB if read) stored sparse: a few MB on disk."""
    p = tmp_path_factory.mktemp("huge") / "huge.tif"
    tf = Affine(1.0, 0, 300_000.0, 0, -1.0, 5_000_000.0)
    with rasterio.open(p, "w", driver="GTiff", width=100_000, height=100_000, count=1, dtype="float32",
                       crs="EPSG:32633", transform=tf, nodata=-9999, tiled=True, blockxsize=512,
                       blockysize=512, sparse_ok=True, compress="deflate") as ds:
        r, c = np.mgrid[0:512, 0:512]
        ds.write((200 + 0.05 * c - 0.02 * r).astype(np.float32), 1, window=rasterio.windows.Window(0, 0, 512, 512))
    return p, tf


def test_too_large_is_refused_before_reading(huge_sparse_tif, monkeypatch):
    path, _ = huge_sparse_tif
    # prove no read is attempted: any read would fail the test
    monkeypatch.setattr(rasterio.io.DatasetReader, "read",
                        lambda *a, **k: pytest.fail("read attempted"), raising=True)
    with pytest.raises(TerrainError, match=r"10000.0 M cells \(100000 x 100000 read.*GB.*bounds=.*resolution_m=.*about \d+ m or more fits"):
        load_terrain(path)
    with pytest.raises(TerrainError, match="over the limit of 0.1 M cells"):
        load_terrain(path, bounds=(300_000, 4_999_000, 301_000, 5_000_000), max_cells=100_000)


def test_huge_raster_window_is_read(huge_sparse_tif):
    path, tf = huge_sparse_tif
    t = load_terrain(path, bounds=(300_100, 4_999_700, 300_300, 4_999_900), margin_m=50)
    assert t.shape == (300, 300)
    assert t.gradient(300_200.0, 4_999_800.0) == pytest.approx((0.05, 0.02), abs=1e-5)


@pytest.mark.parametrize("kwargs, match", [
    ({"z_scale": 0}, "z_scale must be a positive"),
    ({"z_scale": float("nan")}, "z_scale must be a positive"),
    ({"resolution_m": -1}, "resolution_m must be a positive"),
    ({"resolution_m": 1.0}, "finer than the raster's 5 m.*omit it"),
    ({"margin_m": -5}, "margin_m must be a finite number >= 0"),
    ({"bounds": (10, 10, 0, 0)}, "left < right"),
    ({"bounds": "here"}, "bounds must be"),
    ({"max_cells": 0}, "max_cells must be a positive"),
])
def test_bad_parameters(plane_tif, kwargs, match):
    with pytest.raises(ParameterError, match=match):
        load_terrain(plane_tif[0], **kwargs)


# --------------------------------------------------------------------------------------
# the bundled sample site
# --------------------------------------------------------------------------------------

SITE_CRS = "EPSG:32633"


def _site_file(name):
    from importlib.resources import files

    return files("fallway.sample_terrain") / name


def _site_points():
    import tomllib

    sc = tomllib.loads(_site_file("scenario.toml").read_text())
    return tuple(sc["points"]["start"]), tuple(sc["points"]["end"])


def _features(name):
    import json

    return json.loads(_site_file(name).read_text())


def _to_site(coords):
    tr = Transformer.from_crs("EPSG:4326", SITE_CRS, always_xy=True)
    lon, lat = np.asarray(coords, dtype=float).T
    return np.column_stack(tr.transform(lon, lat))


def test_sample_site_matches_its_generator(tmp_path):
    import importlib.util
    from pathlib import Path

    script = Path(__file__).resolve().parents[1] / "scripts" / "make_sample_site.py"
    if not script.exists():
        pytest.skip("scripts/ not present (installed package only)")
    spec = importlib.util.spec_from_file_location("make_sample_site", script)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    mod.write_site(tmp_path)
    with rasterio.open(tmp_path / "site.tif") as a, rasterio.open(str(_site_file("site.tif"))) as b:
        np.testing.assert_array_equal(a.read(1), b.read(1))
        assert a.transform == b.transform and a.crs == b.crs
    for name in ("keepout.geojson", "lines.geojson", "scenario.toml"):
        assert (tmp_path / name).read_text() == _site_file(name).read_text(), name


def test_sample_site_terrain():
    path = str(_site_file("site.tif"))
    import os

    assert os.path.getsize(path) < 2_000_000
    with rasterio.open(path) as ds:
        assert ds.dtypes[0] == "float32" and ds.compression is not None
    t = load_terrain(path)
    assert t.crs.to_epsg() == 32633 and t.shape == (300, 400) and t.cell_size == 2.0
    assert np.isfinite(t.z).all()
    (sx, sy), (ex, ey) = _site_points()
    drop = t.sample(sx, sy) - t.sample(ex, ey)
    plan_m = math.hypot(ex - sx, ey - sy)
    assert 60 <= drop <= 120 and 250 <= plan_m <= 600
    # feasible at the scenario's mu in principle: with gravity-normal Coulomb friction the
    # friction work is mu g times the plan length (Ashby et al., Am. J. Phys. 43 (1975) 902),
    # so a line reaches the end from rest only if drop > mu * plan
    import tomllib

    mu = tomllib.loads(_site_file("scenario.toml").read_text())["mover"]["mu"]
    assert drop > mu * plan_m


def test_sample_site_geojson_is_rfc7946():
    from shapely.geometry import LinearRing

    for name in ("keepout.geojson", "lines.geojson"):
        fc = _features(name)
        # RFC 7946 sec. 4: no "crs" member; WGS 84 lon/lat
        assert fc["type"] == "FeatureCollection" and "crs" not in fc
        for f in fc["features"]:
            coords = np.asarray(f["geometry"]["coordinates"][0] if f["geometry"]["type"] == "Polygon"
                                else f["geometry"]["coordinates"])
            assert np.all(np.abs(coords[:, 0]) <= 180) and np.all(np.abs(coords[:, 1]) <= 90)
            if f["geometry"]["type"] == "Polygon":
                ring = f["geometry"]["coordinates"][0]
                # RFC 7946 sec. 3.1.6: closed, exterior ring counterclockwise
                assert ring[0] == ring[-1] and LinearRing(ring).is_ccw


def test_sample_site_lines_and_keepout():
    from shapely.geometry import LineString, Point, Polygon

    (sx, sy), (ex, ey) = _site_points()
    keep = [Polygon(_to_site(f["geometry"]["coordinates"][0])) for f in _features("keepout.geojson")["features"]]
    assert {f["properties"]["kind"] for f in _features("keepout.geojson")["features"]} == {"building", "trees"}
    assert not any(p.contains(Point(sx, sy)) or p.contains(Point(ex, ey)) for p in keep)
    lines = {f["properties"]["name"]: _to_site(f["geometry"]["coordinates"])
             for f in _features("lines.geojson")["features"]}
    assert set(lines) == {"direct", "east of the trees", "west of the trees"}
    for xy in lines.values():
        assert np.hypot(*(xy[0] - (sx, sy))) < 0.01 and np.hypot(*(xy[-1] - (ex, ey))) < 0.01
    # the straight line is not the answer: it runs through the protected trees
    assert LineString(lines["direct"]).intersects(keep[1])
    for name in ("east of the trees", "west of the trees"):
        assert not any(LineString(lines[name]).intersects(k) for k in keep), name
    # energy check along each line (work-energy with gravity-normal Coulomb friction, as
    # above): every line keeps its head at the scenario's mu 0.25 and runs out of it at the
    # top of the envelope, mu 0.3
    t = load_terrain(str(_site_file("site.tif")))

    def stalls(xy, mu):
        pts = [xy[0]]
        for a, b in zip(xy[:-1], xy[1:]):
            n = max(1, int(np.hypot(*(b - a))))
            pts.extend(a + (b - a) * k / n for k in range(1, n + 1))
        pts = np.array(pts)
        z = t.sample_linear(pts[:, 0], pts[:, 1])
        plan = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(pts, axis=0).T))])
        head = (z[0] - z) - mu * plan
        return bool(np.any(head[1:] <= 0))

    for name, xy in lines.items():
        assert not stalls(xy, 0.25) and stalls(xy, 0.3), name


# --------------------------------------------------------------------------------------
# the tiled spline on grids larger than one tile
# --------------------------------------------------------------------------------------

def test_tiled_interpolant_matches_global_spline():
    # reference: scipy's RectBivariateSpline over the whole grid; the tiled, blended
    # interpolant must agree with it, most of all across tile seams
    from scipy.interpolate import RectBivariateSpline
    from scipy.ndimage import gaussian_filter

    n = 2 * TILE + 40
    rng = np.random.default_rng(5)
    z = 50 * gaussian_filter(rng.standard_normal((n, n + 17)), 6, mode="reflect")
    t = Terrain.from_array(z, Affine(1.0, 0, 0.0, 0, -1.0, float(n)))
    ref = RectBivariateSpline(np.arange(n, dtype=float), np.arange(n + 17, dtype=float), z, s=0)
    seam = float(TILE)
    rr = np.concatenate([np.linspace(seam - 8, seam + 8, 161), rng.uniform(2, n - 3, 300)])
    cc = np.concatenate([rng.uniform(2, n + 14, 161), np.full(300, seam + 0.37)])
    x, y = cc + 0.5, n - (rr + 0.5)
    s = t.sample(x, y)
    scale = np.std(z)
    np.testing.assert_allclose(s, ref.ev(rr, cc), atol=1e-6 * scale)
    gx, gy = t.gradient(x, y)
    np.testing.assert_allclose(gx, ref.ev(rr, cc, dy=1), atol=1e-6 * scale)
    np.testing.assert_allclose(gy, -ref.ev(rr, cc, dx=1), atol=1e-6 * scale)


def test_tiled_interpolant_smooth_and_exact_across_seams():
    n = TILE + 30
    rows, cols = np.mgrid[0:n, 0:n].astype(float)
    x, y = cols + 0.5, n - (rows + 0.5)
    f = lambda x, y: 1e-5 * x**3 - 2e-5 * x * y**2 + 0.3 * y - x + 4  # noqa: E731
    t = Terrain.from_array(f(x, y), Affine(1.0, 0, 0.0, 0, -1.0, float(n)))
    seam_x = TILE + 0.5          # the column boundary, in map x
    px = np.linspace(seam_x - 9, seam_x + 9, 73)
    py = np.full_like(px, 70.3)
    # polynomial of degree <= 3: exact in every tile, so exact through the blend too
    np.testing.assert_allclose(t.sample(px, py), f(px, py), atol=1e-8)
    # gradient equals central differences of sample() across the seam (C1 blend)
    zz = 20 * np.sin(cols / 7.0) * np.cos(rows / 11.0)
    t2 = Terrain.from_array(zz, Affine(1.0, 0, 0.0, 0, -1.0, float(n)))
    h = 1e-4
    gx, gy = t2.gradient(px, py)
    np.testing.assert_allclose(gx, (t2.sample(px + h, py) - t2.sample(px - h, py)) / (2 * h), atol=1e-6)
    np.testing.assert_allclose(gy, (t2.sample(px, py + h) - t2.sample(px, py - h)) / (2 * h), atol=1e-6)


def test_geographic_bounds_in_either_longitude_convention(topobathy, tmp_path):
    # the file counts 0..360 degrees east; bounds given as -180..180 (and as 0..360) work
    topo, lon, lat = topobathy
    dlon = (lon[-1] - lon[0]) / (lon.size - 1)
    dlat = (lat[-1] - lat[0]) / (lat.size - 1)
    tf = Affine(dlon, 0, lon[0] - dlon / 2, 0, dlat, lat[0] - dlat / 2)
    path = write_geotiff(tmp_path / "tb.tif", topo, tf, "EPSG:4326")
    a = load_terrain(path, bounds=(-125.0, 48.5, -124.0, 49.2), margin_m=0)
    b = load_terrain(path, bounds=(235.0, 48.5, 236.0, 49.2), margin_m=0)
    assert a.transform == b.transform and a.shape == b.shape
    assert a.z.size < 0.2 * topo.size


def test_geographic_too_wide_for_one_zone(tmp_path):
    tf = Affine(0.5, 0, 0.0, 0, -0.5, 50.0)
    p = write_geotiff(tmp_path / "wide.tif", np.zeros((10, 40)), tf, "EPSG:4326")
    with pytest.raises(TerrainError, match="20.0 degrees of longitude.*bounds="):
        load_terrain(p)


def test_truncated_raster(plane_tif, tmp_path):
    # a GeoTIFF cut short: the header opens, the pixel data is gone
    path = plane_tif[0]
    data = path.read_bytes()
    bad = tmp_path / "cut.tif"
    bad.write_bytes(data[: len(data) // 3])
    with pytest.raises(FallwayIOError, match=r"cut.tif.*(as a raster|failed).*") as info:
        load_terrain(bad)
    assert isinstance(info.value.__cause__, rasterio.errors.RasterioError)


# --------------------------------------------------------------------------------------
# the compiled surface against scipy's FITPACK splines (an independent implementation)
# --------------------------------------------------------------------------------------

def test_one_tile_surface_equals_scipy_interpolating_spline():
    # reference: scipy.interpolate.RectBivariateSpline(s=0) on the whole grid, evaluated by
    # FITPACK's fpbisp/pardeu (the surface's own evaluation is compiled code); a grid within
    # one tile is one spline, so they agree to rounding.  Independently of FITPACK: the
    # surface interpolates every cell height (de Boor, the defining property)
    from scipy.interpolate import RectBivariateSpline

    rng = np.random.default_rng(11)
    for rows, cols in ((60, 90), (3, 7), (2, 5), (4, 5)):
        z = 300.0 + 40.0 * rng.standard_normal((rows, cols))
        t = Terrain.from_array(z, Affine(2.0, 0, 500.0, 0, -2.0, 900.0))
        ref = RectBivariateSpline(np.arange(rows, dtype=float), np.arange(cols, dtype=float), z,
                                  kx=min(3, rows - 1), ky=min(3, cols - 1), s=0)
        rr = rng.uniform(0.0, rows - 1.0, 400)
        cc = rng.uniform(0.0, cols - 1.0, 400)
        x, y = 500.0 + 2.0 * (cc + 0.5), 900.0 - 2.0 * (rr + 0.5)
        scale = 1e-12 * np.max(np.abs(z))
        np.testing.assert_allclose(t.sample(x, y), ref.ev(rr, cc), rtol=0, atol=scale)
        np.testing.assert_allclose(t.sample(*t.cell_center(*np.mgrid[0:rows, 0:cols])), z, rtol=0, atol=scale)
        if min(rows, cols) < 3:
            continue  # FITPACK's pardeu gives no derivative of a linear spline
        gx, gy = t.gradient(x, y)
        np.testing.assert_allclose(gx, ref.ev(rr, cc, dy=1) / 2.0, rtol=0, atol=scale)
        np.testing.assert_allclose(gy, -ref.ev(rr, cc, dx=1) / 2.0, rtol=0, atol=scale)


def test_tile_away_from_seams_equals_scipy_spline_of_its_block():
    # a tile's spline interpolates its block (the tile plus TILE_PAD cells of context);
    # away from the blend zones the surface is that spline alone: RectBivariateSpline(s=0)
    # of the same block is the reference (scipy/FITPACK)
    from scipy.interpolate import RectBivariateSpline
    from scipy.ndimage import gaussian_filter

    n = TILE + 60
    rng = np.random.default_rng(12)
    z = 100.0 + 30.0 * gaussian_filter(rng.standard_normal((n, n)), 3.0)
    t = Terrain.from_array(z, Affine(1.0, 0, 0.0, 0, -1.0, float(n)))
    r0 = TILE - TILE_PAD  # the block of tile (1, 1) starts here
    block = z[r0:, r0:]
    ref = RectBivariateSpline(np.arange(block.shape[0], dtype=float), np.arange(block.shape[1], dtype=float),
                              block, s=0)
    rr = rng.uniform(TILE + 7.0, n - 1.0, 300)
    cc = rng.uniform(TILE + 7.0, n - 1.0, 300)
    s = t.sample(cc + 0.5, n - (rr + 0.5))
    np.testing.assert_allclose(s, ref.ev(rr - r0, cc - r0), rtol=0, atol=1e-12 * np.max(np.abs(z)))


def test_surface_is_built_lazily():
    # only the tiles a query touches are built (DEVELOPERS.md: a long line builds only the
    # tiles it touches)
    n = 3 * TILE
    t = Terrain.from_array(np.zeros((n, n)), Affine(1.0, 0, 0.0, 0, -1.0, float(n)))
    assert t.sample(10.0, n - 10.0) == 0.0
    slot = t.surface().tables.slot
    assert (slot >= 0).sum() == 1 and slot[0, 0] >= 0
    t.sample(np.array([10.0, 2.5 * TILE]), np.array([n - 10.0, 0.5 * TILE]))
    assert (slot >= 0).sum() == 2
