"""Heights that cannot be misread: band scale and offset, declared units, --z-scale, --band.

Through the command line (subprocess), where a user meets them, on the 12 x 12 plane of
test_bad_input (5 m cells falling 0.3 east: the end cells lie 16.5 m apart in height).
References: GDAL's raster data model ("units value = (raw value * scale) + offset",
GDALGetRasterScale / GDALGetRasterOffset); the international foot (0.3048 m exactly) and
the US survey foot (1200/3937 m), NIST SP 811 appendix B.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import rasterio

from conftest import plane, write_geotiff
from fallway.terrain import load_terrain
from test_bad_input import CELL, CRS, END, N, START, _pts, run_cli

DROP = 0.3 * (END[0] - START[0])  # 16.5 m between the end cells


def _summary(out):
    return json.loads((out / "summary.json").read_text())


def _tags(path, **tags):
    with rasterio.open(path, "r+") as ds:
        for k, v in tags.items():
            setattr(ds, k, v)
    return path


@pytest.mark.slow
def test_scale_and_offset_tags_are_applied(tmp_path):
    # issue 19.5: an int16 DEM stored in decimetres with scale 0.1 gave a 164 m drop
    z, t = plane(N, N, CELL, -0.3, 0.0)
    stored = np.round((z - 50.0) * 10.0).astype(np.int16)
    dem = _tags(write_geotiff(tmp_path / "dm.tif", stored, t, CRS, dtype="int16"), scales=(0.1,), offsets=(50.0,))
    p = run_cli("route", dem, *_pts(), "--no-refine", "--out", tmp_path / "out")
    assert p.returncode == 0, p.stderr
    s = _summary(tmp_path / "out")
    # the stored decimetres between the end cells (row 5, columns 0 and 11), times the scale
    assert s["drop_m"] == pytest.approx((stored[5, 0] - stored[5, 11]) * 0.1, abs=1e-9)
    assert s["drop_m"] == pytest.approx(DROP, abs=0.15)  # not the 165 m of unscaled values
    # absolute heights too: raw * scale + offset at the start cell
    assert s["start_xyz"][2] == pytest.approx(stored[5, 0] * 0.1 + 50.0, abs=1e-9)


@pytest.mark.parametrize("unit, metres", [("ft", 0.3048), ("foot", 0.3048), ("US survey foot", 1200 / 3937),
                                          ("ftUS", 1200 / 3937), ("metre", 1.0), ("m", 1.0)])
@pytest.mark.slow
def test_declared_height_units_are_converted(tmp_path, unit, metres):
    # issue 19.5: a band whose unit says feet was read as metres
    z, t = plane(N, N, CELL, -0.3, 0.0)
    dem = _tags(write_geotiff(tmp_path / "u.tif", z / metres, t, CRS), units=(unit,))
    p = run_cli("route", dem, *_pts(), "--no-refine", "--out", tmp_path / "out")
    assert p.returncode == 0, p.stderr
    assert _summary(tmp_path / "out")["drop_m"] == pytest.approx(DROP, rel=1e-9)


def test_vertical_crs_in_feet_is_converted(tmp_path):
    # a compound CRS with NAVD88 height (ft) (EPSG:8228): GDAL reports the band unit from it
    z, t = plane(N, N, CELL, -0.3, 0.0)
    dem = write_geotiff(tmp_path / "v.tif", z / 0.3048, t, "EPSG:32633+8228")
    assert rasterio.open(dem).units == ("foot",)
    t2 = load_terrain(dem)
    np.testing.assert_allclose(t2.z, z, rtol=1e-12)


@pytest.mark.slow
def test_z_scale_option_reads_an_undeclared_unit(tmp_path):
    # --z-scale: metres per stored unit; it also stands for an unknown declared unit
    z, t = plane(N, N, CELL, -0.3, 0.0)
    dem = _tags(write_geotiff(tmp_path / "fur.tif", z / 201.168, t, CRS), units=("furlong",))
    p = run_cli("route", dem, *_pts(), "--no-refine", "--z-scale", "201.168", "--out", tmp_path / "out")
    assert p.returncode == 0, p.stderr
    assert _summary(tmp_path / "out")["drop_m"] == pytest.approx(DROP, rel=1e-9)
    assert "z_scale = 201.168" in (tmp_path / "out" / "scenario.toml").read_text()  # reproducible
    # contradicting a known declared unit: used, and said
    ft = _tags(write_geotiff(tmp_path / "ft.tif", z / 0.3048, t, CRS), units=("ft",))
    p = run_cli("route", ft, *_pts(), "--no-refine", "--z-scale", "0.3048", "--out", tmp_path / "same")
    assert p.returncode == 0 and p.stderr == "", p.stderr
    p = run_cli("route", ft, *_pts(), "--no-refine", "--z-scale", "1", "--out", tmp_path / "other")
    assert p.returncode == 0, p.stderr
    assert "declares its heights in 'ft'" in p.stderr and "z_scale 1 is used" in p.stderr, p.stderr


@pytest.mark.slow
def test_band_option_and_the_band_one_note(tmp_path):
    # issue 19.12: a multi-band DEM silently used band 1
    z, t = plane(N, N, CELL, -0.3, 0.0)
    dem = write_geotiff(tmp_path / "bands.tif", z, t, CRS, count=3)  # band k+1 holds z + 1000 k
    p = run_cli("route", dem, *_pts(), "--no-refine", "--out", tmp_path / "one")
    assert p.returncode == 0, p.stderr
    assert "has 3 bands; heights are read from band 1" in p.stderr and "--band" in p.stderr, p.stderr
    p = run_cli("route", dem, *_pts(), "--no-refine", "--band", "2", "--out", tmp_path / "two")
    assert p.returncode == 0 and "bands" not in p.stderr, p.stderr
    one, two = _summary(tmp_path / "one"), _summary(tmp_path / "two")
    assert two["start_xyz"][2] - one["start_xyz"][2] == pytest.approx(1000.0, abs=1e-9)
    assert two["drop_m"] == pytest.approx(DROP, rel=1e-9)


@pytest.mark.parametrize("resolution_m", [None, 10.0])
def test_scale_and_offset_commute_with_resampling(tmp_path, resolution_m):
    # library level: averaging (coarser cells) then scaling equals scaling the heights first
    z, t = plane(40, 40, 5.0, 0.1, 0.2)
    stored = np.round(z * 100.0).astype(np.int32)
    scaled = _tags(write_geotiff(tmp_path / "cm.tif", stored, t, CRS, dtype="int32"), scales=(0.01,),
                   offsets=(-3.0,))
    plain = write_geotiff(tmp_path / "m.tif", stored * 0.01 - 3.0, t, CRS)
    a = load_terrain(scaled, resolution_m=resolution_m)
    b = load_terrain(plain, resolution_m=resolution_m)
    np.testing.assert_allclose(a.z, b.z, rtol=0, atol=1e-9)
