"""Bad input and failure through the command line (subprocess): clear errors, nothing left.

Every case runs ``python -m fallway.cli`` on small synthetic rasters written in
``tmp_path`` and checks the exit code (0 success, 1 clear error, 2 usage, 3 no feasible
line), key words of the one-line message, that no traceback reaches stderr, and that the
output folder holds no result and no temporary file afterwards.

Atomic writes of a whole run are checked in-process (click's CliRunner) by making one
writer fail part way through the run.
"""

from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from affine import Affine

from conftest import plane, write_geotiff
from fallway.export import RESULT_FILES

CRS = "EPSG:32633"
X0, Y0, CELL = 500_000.0, 4_000_000.0, 5.0
N = 12
# a 12 x 12 plane at 5 m falling 0.3 to the east: centres x 500002.5..500057.5,
# y 3999997.5..3999942.5
START = (X0 + 2.5, Y0 - 30.0)
END = (X0 + 57.5, Y0 - 30.0)


def _pts(start=START, end=END) -> list[str]:
    return ["--start", repr(start[0]), repr(start[1]), "--end", repr(end[0]), repr(end[1])]


def run_cli(*args, timeout=120, **kw) -> subprocess.CompletedProcess:
    env = dict(os.environ, COLUMNS="200")
    return subprocess.run([sys.executable, "-m", "fallway.cli", *map(str, args)], capture_output=True,
                          text=True, timeout=timeout, env=env, **kw)


def leftovers(folder: Path) -> list[str]:
    """Result or temporary files in ``folder`` (recursively); [] when it does not exist."""
    folder = Path(folder)
    if not folder.exists():
        return []
    if folder.is_file():
        return [folder.name]
    bad = []
    for p in folder.rglob("*"):
        if p.name in RESULT_FILES or p.name.startswith(".") or ".tmp" in p.name or p.is_dir():
            bad.append(str(p.relative_to(folder)))
    return sorted(bad)


def _plane_tif(path, **kw) -> Path:
    z, t = plane(N, N, CELL, -0.3, 0.0)
    return write_geotiff(path, z, t, CRS, **kw)


# --------------------------------------------------------------------------- case builders
# each builder gets tmp_path and returns the CLI arguments (the output folder is tmp/out)

def c_missing_file(tmp):
    return ["route", tmp / "nothing_here.tif", *_pts(), "--no-refine"]


def c_text_named_tif(tmp):
    p = tmp / "notes.tif"
    p.write_text("these are survey notes, not a raster\n")
    return ["route", p, *_pts(), "--no-refine"]


def c_truncated_tif(tmp):
    full = _plane_tif(tmp / "full.tif")
    data = full.read_bytes()
    p = tmp / "cut.tif"
    p.write_bytes(data[: len(data) // 3])
    return ["route", p, *_pts(), "--no-refine"]


def c_all_nodata(tmp):
    z = np.full((N, N), -9999.0)
    p = write_geotiff(tmp / "void.tif", z, Affine(CELL, 0, X0, 0, -CELL, Y0), CRS, nodata=-9999.0)
    return ["route", p, *_pts(), "--no-refine"]


def c_no_crs(tmp):
    z, t = plane(N, N, CELL, -0.3, 0.0)
    p = write_geotiff(tmp / "nocrs.tif", z, t, None)
    return ["route", p, *_pts(), "--no-refine"]


def c_rotated(tmp):
    z, _ = plane(N, N, CELL, -0.3, 0.0)
    p = write_geotiff(tmp / "rot.tif", z, Affine(CELL, 1.0, X0, 1.0, -CELL, Y0), CRS)
    return ["route", p, *_pts(), "--no-refine"]


def c_start_outside(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(start=(X0 - 5000.0, Y0 - 30.0)), "--no-refine"]


def c_end_outside(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(end=(X0 + 57.5, Y0 + 9000.0)), "--no-refine"]


def _holed_tif(tmp, row, col):
    z, t = plane(N, N, CELL, -0.3, 0.0)
    z = z.copy()
    z[row - 1:row + 2, col - 1:col + 2] = -9999.0
    return write_geotiff(tmp / "holed.tif", z, t, CRS, nodata=-9999.0)


def c_start_on_nodata(tmp):
    return ["route", _holed_tif(tmp, 5, 1), *_pts(start=(X0 + 7.5, Y0 - 27.5)), "--no-refine"]


def c_end_on_nodata(tmp):
    return ["route", _holed_tif(tmp, 5, 10), *_pts(end=(X0 + 52.5, Y0 - 27.5)), "--no-refine"]


def c_start_equals_end(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(end=START), "--no-refine"]


def c_end_uphill(tmp):
    # the end lies 16.5 m above the start on a plane rising east; nothing can get there
    z, t = plane(N, N, CELL, 0.3, 0.0)
    p = write_geotiff(tmp / "up.tif", z, t, CRS)
    return ["route", p, *_pts(), "--no-refine", "--mu", "0.1"]


def c_negative_mu(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--mu", "-0.2"]


def c_nan_drag(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--drag", "nan"]


def c_negative_v0(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--v0", "-3"]


def c_text_v0(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--v0", "fast"]


def c_inf_max_speed(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--max-speed", "-inf"]


def c_unknown_neighbours(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--neighbours", "12"]


def c_clearance_inverted(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--line", "raised",
            "--clearance", "10", "2"]


def c_broken_keepout(tmp):
    k = tmp / "keepout.geojson"
    k.write_text('{"type": "FeatureCollection", "features": [{"type": "Feature", "geom')
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--keepout", k]


def c_keepout_on_start(tmp):
    from pyproj import Transformer

    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    ring = [tr.transform(x, y) for x, y in ((X0, Y0 - 20), (X0 + 15, Y0 - 20), (X0 + 15, Y0 - 40),
                                           (X0, Y0 - 40), (X0, Y0 - 20))]
    k = tmp / "keepout.geojson"
    k.write_text(json.dumps({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {}, "geometry": {"type": "Polygon", "coordinates": [ring]}}]}))
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--keepout", k]


def c_huge_raster(tmp):
    # 200000 x 200000 cells of 1 m declared in a small sparse tiled file (no tile written)
    import rasterio

    p = tmp / "huge.tif"
    with rasterio.open(p, "w", driver="GTiff", width=200_000, height=200_000, count=1, dtype="float32",
                       crs=CRS, transform=Affine(1.0, 0, X0, 0, -1.0, Y0), nodata=-9999.0, tiled=True,
                       blockxsize=1024, blockysize=1024, compress="deflate", sparse_ok=True, BIGTIFF="YES"):
        pass
    assert p.stat().st_size < 5_000_000
    return ["route", p, *_pts(start=(X0 + 10, Y0 - 10), end=(X0 + 199_990, Y0 - 199_990)), "--no-refine"]


def c_missing_out(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "@no-out"]


def c_robust_without_range(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--robust"]


def c_broken_scenario(tmp):
    s = tmp / "scenario.toml"
    s.write_text("[mover\nmu = 0.2\n")
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--scenario", s]


def c_scenario_unknown_key(tmp):
    s = tmp / "scenario.toml"
    s.write_text("[mover]\nmu = 0.2\nfriction = 0.3\n")
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--scenario", s]


def c_reach_start_outside(tmp):
    return ["reach", _plane_tif(tmp / "dem.tif"), "--start", X0 - 900, Y0 + 900, "@out-file"]


def c_no_start(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), "--end", *END, "--no-refine"]


# -- issue 19: no-go areas that must not be ignored, messages that name the right cause

def _gpkg_layers(path, layers):
    """A GeoPackage in the DEM's CRS with one feature per layer: [(name, shapely geometry, type)]."""
    import pyogrio.raw
    import shapely

    for i, (name, geom, kind) in enumerate(layers):
        pyogrio.raw.write(path, np.array([shapely.to_wkb(geom)], dtype=object), [np.array([name], dtype=object)],
                          ["name"], layer=name, driver="GPKG", geometry_type=kind, crs=CRS, append=i > 0)
    return path


def c_keepout_second_layer_covers_start(tmp):
    # issue 19.4: the polygon in layer 2 covers the start; the first layer alone was read
    import shapely

    k = _gpkg_layers(tmp / "nogo.gpkg", [("sheds", shapely.box(X0 + 30, Y0 - 10, X0 + 40, Y0 - 5), "Polygon"),
                                        ("quarry", shapely.box(X0, Y0 - 40, X0 + 15, Y0 - 20), "Polygon")])
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--keepout", k]


def c_keepout_with_a_line_layer(tmp):
    # a layer of lines beside the polygons: not silently skipped, the user names the layers
    import shapely

    k = _gpkg_layers(tmp / "nogo.gpkg", [("sheds", shapely.box(X0 + 30, Y0 - 10, X0 + 40, Y0 - 5), "Polygon"),
                                        ("fence", shapely.LineString([(X0, Y0 - 50), (X0 + 50, Y0 - 50)]),
                                         "LineString")])
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--keepout", k]


def c_keepout_layer_missing(tmp):
    import shapely

    k = _gpkg_layers(tmp / "nogo.gpkg", [("sheds", shapely.box(X0 + 30, Y0 - 10, X0 + 40, Y0 - 5), "Polygon")])
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--keepout", k,
            "--keepout-layer", "quarry"]


def c_keepout_geojson_in_utm(tmp):
    # issue 19.11: reported as "must be polygons, got GeometryCollection"
    ring = [[X0, Y0 - 20], [X0 + 15, Y0 - 20], [X0 + 15, Y0 - 40], [X0, Y0 - 40], [X0, Y0 - 20]]
    k = tmp / "keepout.geojson"
    k.write_text(json.dumps({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {}, "geometry": {"type": "Polygon", "coordinates": [ring]}}]}))
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--keepout", k]



# -- issue 19: heights that cannot be misread

def _tagged_tif(path, z, **tags):
    """The plane's heights with band tags set afterwards (scales, offsets, units), as gdal_edit.py does."""
    import rasterio

    _, t = plane(N, N, CELL, -0.3, 0.0)
    write_geotiff(path, z, t, CRS)
    with rasterio.open(path, "r+") as ds:
        for k, v in tags.items():
            setattr(ds, k, v)
    return path


def c_unknown_height_unit(tmp):
    z, _ = plane(N, N, CELL, -0.3, 0.0)
    return ["route", _tagged_tif(tmp / "fur.tif", z, units=("furlong",)), *_pts(), "--no-refine"]


def c_one_row_dem(tmp):
    # issue 19.11: a 1 x N DEM was reported as "bounds do not overlap" (no bounds were given)
    z, t = plane(N, N, CELL, -0.3, 0.0)
    return ["route", write_geotiff(tmp / "row.tif", z[:1], t, CRS), *_pts(start=(X0 + 2.5, Y0 - 2.5),
                                                                         end=(X0 + 57.5, Y0 - 2.5)), "--no-refine"]


def c_band_missing(tmp):
    z, t = plane(N, N, CELL, -0.3, 0.0)
    return ["route", write_geotiff(tmp / "bands.tif", z, t, CRS, count=3), *_pts(), "--no-refine", "--band", "4"]


def c_zero_z_scale(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--z-scale", "0"]


def c_nan_z_scale(tmp):
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--z-scale", "nan"]


def c_lines_miss_the_dem(tmp):
    lines = tmp / "far.geojson"
    lines.write_text(json.dumps({"type": "FeatureCollection",
                                 "crs": {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}},
                                 "features": [{"type": "Feature", "properties": {"name": "far"},
                                               "geometry": {"type": "LineString",
                                                            "coordinates": [[X0 + 9000, Y0], [X0 + 9100, Y0]]}}]}))
    return ["compare", _plane_tif(tmp / "dem.tif"), lines]



def c_scenario_number_as_text(tmp):
    # issue 19.12: mu = "0.2" was accepted (read as 0.2) while neighbours = 16.0 was refused
    s = tmp / "scenario.toml"
    s.write_text('[mover]\nmu = "0.2"\n')
    return ["route", _plane_tif(tmp / "dem.tif"), *_pts(), "--no-refine", "--scenario", s]

# case id -> (builder, exit code, key words in stderr (lower case, all must appear))
CASES = {
    "missing file": (c_missing_file, 1, ["not found", "nothing_here.tif"]),
    "text file named .tif": (c_text_named_tif, 1, ["cannot read", "geotiff"]),
    "truncated geotiff": (c_truncated_tif, 1, ["cut.tif"]),
    "all nodata": (c_all_nodata, 1, ["nodata"]),
    "no crs": (c_no_crs, 1, ["crs"]),
    "rotated transform": (c_rotated, 1, ["rotated", "north-up"]),
    "start outside the dem": (c_start_outside, 1, ["start", "outside"]),
    "end outside the dem": (c_end_outside, 1, ["end", "outside"]),
    # an end point on nodata moves to the nearest free cell centre (10 m: two cells of the
    # 3 x 3 hole), said in one line; the run succeeds
    "start on nodata": (c_start_on_nodata, 0, ["start", "nodata", "starts 10.0 m away"]),
    "end on nodata": (c_end_on_nodata, 0, ["end", "nodata", "ends 10.0 m away"]),
    "start equals end": (c_start_equals_end, 1, ["start", "end"]),
    "end uphill": (c_end_uphill, 3, ["closest", "x=", "y="]),
    "negative mu": (c_negative_mu, 1, ["mu"]),
    "nan drag": (c_nan_drag, 1, ["drag"]),
    "negative v0": (c_negative_v0, 1, ["v0"]),
    "non-numeric v0": (c_text_v0, 2, ["--v0", "fast"]),
    "minus infinite max speed": (c_inf_max_speed, 1, ["max_speed"]),
    "unknown neighbourhood": (c_unknown_neighbours, 2, ["--neighbours", "12"]),
    "clearance min > max": (c_clearance_inverted, 1, ["clearance"]),
    "broken keep-out file": (c_broken_keepout, 1, ["keep-out", "keepout.geojson"]),
    "keep-out covers start": (c_keepout_on_start, 0, ["start", "keep-out", "m away"]),
    "huge raster": (c_huge_raster, 1, ["200000 x 200000", "m cells", "closer", "gdalwarp"]),
    "no --out": (c_missing_out, 2, ["--out"]),
    "--robust without range": (c_robust_without_range, 2, ["--mu-range"]),
    "broken scenario toml": (c_broken_scenario, 1, ["scenario", "toml"]),
    "unknown scenario key": (c_scenario_unknown_key, 1, ["friction"]),
    "no start point": (c_no_start, 1, ["start"]),
    "reach start outside": (c_reach_start_outside, 1, ["start", "outside"]),
    "keep-out in a second layer covers start": (c_keepout_second_layer_covers_start, 0, ["start", "keep-out",
                                                                                          "m away"]),
    "keep-out file with a line layer": (c_keepout_with_a_line_layer, 1, ["fence (linestring)", "--keepout-layer",
                                                                         "polygon layers: sheds"]),
    "keep-out layer missing": (c_keepout_layer_missing, 1, ["no layer 'quarry'", "sheds"]),
    "keep-out geojson in utm": (c_keepout_geojson_in_utm, 1, ["longitude/latitude", "500000.000", "rfc 7946"]),
    "scenario number as text": (c_scenario_number_as_text, 1, ["mover.mu must be a number", "'0.2' (a string)"]),
    "unknown height unit": (c_unknown_height_unit, 1, ["furlong", "--z-scale"]),
    "one-row dem": (c_one_row_dem, 1, ["row.tif is 1 x 12 cells", "at least 2 x 2"]),
    "band that does not exist": (c_band_missing, 1, ["3 bands", "no band 4"]),
    "zero --z-scale": (c_zero_z_scale, 2, ["--z-scale"]),
    "nan --z-scale": (c_nan_z_scale, 1, ["z_scale", "finite"]),
    "candidate lines miss the dem": (c_lines_miss_the_dem, 1, ["candidate lines lie outside", "dem.tif"]),
}


@pytest.mark.parametrize("case", list(CASES), ids=list(CASES))
def test_bad_input_matrix(case, tmp_path):
    build, code, words = CASES[case]
    args = build(tmp_path)
    out = tmp_path / "out"
    if "@no-out" in args:
        args = [a for a in args if a != "@no-out"]
    elif "@out-file" in args:
        out = tmp_path / "out" / "reach.tif"
        args = [a for a in args if a != "@out-file"] + ["--out", out]
    else:
        args = args + ["--out", out]
    p = run_cli(*args)
    err = p.stderr
    assert p.returncode == code, f"exit {p.returncode}, stderr: {err}"
    assert "Traceback" not in err, err
    low = err.lower()
    for w in words:
        assert w in low, f"{w!r} not in: {err}"
    if code == 1 or code == 3:
        assert err.startswith("fallway: error: "), err
        assert len(err.strip().splitlines()) == 1, err  # one line
        assert leftovers(tmp_path / "out") == []
    elif code == 0:  # a moved point: one line says so, the results are written
        assert len(err.strip().splitlines()) == 1, err
        assert (tmp_path / "out" / "summary.json").exists()


# --------------------------------------------------------------------------- must work

def _assert_complete(out: Path) -> None:
    names = sorted(p.name for p in out.iterdir())
    for n in ("route.geojson", "route.gpkg", "profile.csv", "summary.json", "scenario.toml", "report.html",
              "map.png", "profile.png"):
        assert n in names, names
    assert not [n for n in names if n.startswith(".") or ".tmp" in n], names


@pytest.mark.slow
def test_south_up_raster_works(tmp_path):
    # rows stored south to north (positive y step): the terrain flips it; the answer
    # must equal the north-up raster's: the same plane, so the same heights at the ends
    z, _ = plane(N, N, CELL, -0.3, 0.0)
    up = write_geotiff(tmp_path / "south_up.tif", z[::-1], Affine(CELL, 0, X0, 0, CELL, Y0 - N * CELL), CRS)
    north = _plane_tif(tmp_path / "north_up.tif")
    res = []
    for dem, name in ((up, "a"), (north, "b")):
        p = run_cli("route", dem, *_pts(), "--no-refine", "--out", tmp_path / name)
        assert p.returncode == 0, p.stderr
        assert "Traceback" not in p.stderr
        _assert_complete(tmp_path / name)
        res.append(json.loads((tmp_path / name / "summary.json").read_text()))
    a, b = res
    assert a["start_xyz"] == b["start_xyz"] and a["end_xyz"] == b["end_xyz"]
    # plane falling 0.3 east over 55 m: 16.5 m drop between the end cells (geometry)
    assert a["drop_m"] == pytest.approx(16.5, abs=1e-6)
    assert a["travel_time_s"] == pytest.approx(b["travel_time_s"], rel=1e-12)


@pytest.mark.slow
def test_geographic_dem_works(tmp_path):
    # a lon/lat raster near 15 E 36 N (1e-4 degree cells, about 9 x 11 m), falling east
    lon0, lat0, d = 15.0, 36.0, 1e-4
    r, c = np.mgrid[0:N, 0:N]
    z = 200.0 - 2.0 * c + 0.0 * r
    dem = write_geotiff(tmp_path / "geo.tif", z, Affine(d, 0, lon0, 0, -d, lat0), "EPSG:4326")
    s = (lon0 + 0.5 * d, lat0 - 5.5 * d)
    e = (lon0 + (N - 0.5) * d, lat0 - 5.5 * d)
    p = run_cli("route", dem, *_pts(s, e), "--no-refine", "--out", tmp_path / "out")
    assert p.returncode == 0, p.stderr
    assert "Traceback" not in p.stderr
    _assert_complete(tmp_path / "out")
    doc = json.loads((tmp_path / "out" / "summary.json").read_text())
    # 11 columns of 2 m fall between the end cells (the raster's own heights)
    assert doc["drop_m"] == pytest.approx(22.0, abs=0.5)


def test_closest_reach_is_said_in_lon_lat_when_the_points_were(tmp_path):
    # the same lon/lat raster with friction the 0.2 fall cannot overcome: the failure says
    # where the search got closest in the system the points were given in (lon/lat), not
    # in the UTM zone the DEM was reprojected to
    lon0, lat0, d = 15.0, 36.0, 1e-4
    r, c = np.mgrid[0:N, 0:N]
    dem = write_geotiff(tmp_path / "geo.tif", 200.0 - 2.0 * c + 0.0 * r, Affine(d, 0, lon0, 0, -d, lat0), "EPSG:4326")
    s = (lon0 + 0.5 * d, lat0 - 5.5 * d)
    e = (lon0 + (N - 0.5) * d, lat0 - 5.5 * d)
    p = run_cli("route", dem, *_pts(s, e), "--mu", "0.9", "--no-refine", "--out", tmp_path / "out")
    assert p.returncode == 3, p.stderr
    m = re.search(r"closest reach: lon (-?[0-9.]+), lat (-?[0-9.]+)\)", p.stderr)
    assert m, p.stderr
    lon, lat = float(m.group(1)), float(m.group(2))
    assert lon0 <= lon <= lon0 + N * d and lat0 - N * d <= lat <= lat0, (lon, lat)


# --------------------------------------------------------------------------- output folder

@pytest.mark.slow
def test_existing_results_refused_and_untouched(tmp_path):
    dem = _plane_tif(tmp_path / "dem.tif")
    out = tmp_path / "out"
    out.mkdir()
    old = {"summary.json": b'{"old": true}\n', "route.geojson": b"old line\n", "notes.txt": b"mine\n"}
    for n, b in old.items():
        (out / n).write_bytes(b)
    p = run_cli("route", dem, *_pts(), "--no-refine", "--out", out)
    assert p.returncode == 1, p.stderr
    assert "Traceback" not in p.stderr
    assert "--overwrite" in p.stderr and "summary.json" in p.stderr
    assert sorted(x.name for x in out.iterdir()) == sorted(old)
    for n, b in old.items():
        assert (out / n).read_bytes() == b
    # with --overwrite the run replaces the results and keeps the user's own file
    p = run_cli("route", dem, *_pts(), "--no-refine", "--out", out, "--overwrite")
    assert p.returncode == 0, p.stderr
    assert (out / "notes.txt").read_bytes() == b"mine\n"
    assert json.loads((out / "summary.json").read_text()).get("old") is None


def test_reach_existing_output_refused(tmp_path):
    dem = _plane_tif(tmp_path / "dem.tif")
    out = tmp_path / "reach.tif"
    out.write_bytes(b"keep me")
    p = run_cli("reach", dem, "--start", *START, "--out", out)
    assert p.returncode == 1 and "--overwrite" in p.stderr and "Traceback" not in p.stderr, p.stderr
    assert out.read_bytes() == b"keep me"


def test_unwritable_output_folder(tmp_path):
    # a folder below a regular file cannot be created, not even by root
    dem = _plane_tif(tmp_path / "dem.tif")
    blocker = tmp_path / "plain_file"
    blocker.write_text("x")
    p = run_cli("route", dem, *_pts(), "--no-refine", "--out", blocker / "sub")
    assert p.returncode == 1, p.stderr
    assert "Traceback" not in p.stderr
    assert "cannot write" in p.stderr and "plain_file" in p.stderr, p.stderr
    assert blocker.read_text() == "x"


def test_output_folder_is_a_file(tmp_path):
    dem = _plane_tif(tmp_path / "dem.tif")
    f = tmp_path / "out"
    f.write_text("x")
    p = run_cli("route", dem, *_pts(), "--no-refine", "--out", f)
    # click checks the option itself: a usage error
    assert p.returncode == 2 and "is a file" in p.stderr and "Traceback" not in p.stderr, p.stderr
    assert f.read_text() == "x"


def test_reach_unwritable(tmp_path):
    dem = _plane_tif(tmp_path / "dem.tif")
    blocker = tmp_path / "plain_file"
    blocker.write_text("x")
    p = run_cli("reach", dem, "--start", *START, "--out", blocker / "reach.tif")
    assert p.returncode == 1, p.stderr
    assert "Traceback" not in p.stderr and "plain_file" in p.stderr, p.stderr


# --------------------------------------------------------------------------- interruption

@pytest.mark.slow
def test_sigint_during_search_leaves_nothing(tmp_path):
    # 150 x 150 cells of rough ground, 32 neighbours: the search takes several seconds
    rng = np.random.default_rng(1)
    n = 150
    z, t = plane(n, n, CELL, -0.3, -0.1)
    z = z + rng.normal(0.0, 2.0, z.shape)
    dem = write_geotiff(tmp_path / "rough.tif", z, t, CRS)
    s = (X0 + 2.5, Y0 - 2.5)
    e = (X0 + (n - 0.5) * CELL, Y0 - (n - 0.5) * CELL)
    out = tmp_path / "out"
    proc = subprocess.Popen([sys.executable, "-m", "fallway.cli", "route", str(dem), *_pts(s, e),
                             "--neighbours", "32", "--mu", "0.2", "--no-refine", "--out", str(out)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    # wait until the output set exists (the run is past parsing and into the work)
    t0 = time.monotonic()
    while time.monotonic() - t0 < 30 and not out.exists() and proc.poll() is None:
        time.sleep(0.05)
    time.sleep(1.0)
    assert proc.poll() is None, "the run ended before it could be interrupted; use a larger grid"
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode != 0
    assert "Traceback" not in err, err
    assert "interrupted" in err.lower(), err
    assert not out.exists() or leftovers(out) == []


# --------------------------------------------------------------------------- atomic run (in-process)

def _invoke(args):
    from click.testing import CliRunner

    from fallway.cli import main

    return CliRunner().invoke(main, [str(a) for a in args])


@pytest.mark.parametrize("target", ["fallway.report.write_report_html", "fallway.plot.save_figure",
                                    "fallway.export.write_profile_csv"])
def test_writer_failing_mid_run_leaves_nothing(tmp_path, monkeypatch, target):
    # the writer writes half a file and then fails, as a full disk would
    import importlib

    from fallway.errors import FallwayIOError

    mod_name, fn_name = target.rsplit(".", 1)
    mod = importlib.import_module(mod_name)

    def half_then_fail(*args, **kwargs):
        path = Path(args[1] if fn_name == "save_figure" else args[2])  # (fig, path) or (route, terrain, path)
        path.write_text("half a fi")
        raise FallwayIOError(f"cannot write {path}: No space left on device")

    monkeypatch.setattr(mod, fn_name, half_then_fail)
    dem = _plane_tif(tmp_path / "dem.tif")
    # a fresh folder: gone again afterwards
    res = _invoke(["route", dem, *_pts(), "--no-refine", "--out", tmp_path / "fresh"])
    assert res.exit_code == 1, res.output
    assert "No space left" in res.output
    assert not (tmp_path / "fresh").exists()
    # a folder holding the user's files: exactly those files afterwards, unchanged
    kept = tmp_path / "kept"
    kept.mkdir()
    (kept / "notes.txt").write_bytes(b"mine\n")
    res = _invoke(["route", dem, *_pts(), "--no-refine", "--out", kept])
    assert res.exit_code == 1, res.output
    assert [p.name for p in kept.iterdir()] == ["notes.txt"]
    assert (kept / "notes.txt").read_bytes() == b"mine\n"


def test_overwrite_run_failing_keeps_old_results(tmp_path, monkeypatch):
    import fallway.report

    from fallway.errors import FallwayIOError

    dem = _plane_tif(tmp_path / "dem.tif")
    out = tmp_path / "out"
    res = _invoke(["route", dem, *_pts(), "--no-refine", "--out", out])
    assert res.exit_code == 0, res.output
    before = {p.name: p.read_bytes() for p in out.iterdir()}

    def fail(*a, **k):
        raise FallwayIOError("cannot write report.html: disk full")

    monkeypatch.setattr(fallway.report, "write_report_html", fail)
    res = _invoke(["route", dem, *_pts(), "--no-refine", "--mu", "0.05", "--out", out, "--overwrite"])
    assert res.exit_code == 1 and "disk full" in res.output, res.output
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before


def test_reach_writer_failing_leaves_nothing(tmp_path, monkeypatch):
    from fallway.errors import FallwayIOError
    import fallway.export

    def half_then_fail(reach_map, path):
        Path(path).write_bytes(b"II*\x00")
        raise FallwayIOError(f"cannot write {path}: No space left on device")

    monkeypatch.setattr(fallway.export, "write_reach_geotiff", half_then_fail)
    dem = _plane_tif(tmp_path / "dem.tif")
    out_dir = tmp_path / "maps"
    out_dir.mkdir()
    res = _invoke(["reach", dem, "--start", *START, "--out", out_dir / "reach.tif"])
    assert res.exit_code == 1, res.output
    assert list(out_dir.iterdir()) == []


# --------------------------------------------------------------------------- result sets (issue 19)
# A result set changes all at once or not at all; --overwrite replaces only the command's
# own files.  These drive the command line as a user would and look at the folder.

def _snapshot(folder: Path) -> dict:
    """Every entry below ``folder``: file bytes, or None for a folder."""
    return {str(p.relative_to(folder)): (None if p.is_dir() else p.read_bytes())
            for p in sorted(folder.rglob("*"))}


def test_overwrite_onto_a_folder_named_like_a_result_changes_nothing(tmp_path):
    # issue 19.1: report.html exists as a folder; the old run replaced four files before failing
    dem = _plane_tif(tmp_path / "dem.tif")
    out = tmp_path / "out"
    assert run_cli("route", dem, *_pts(), "--no-refine", "--out", out).returncode == 0
    (out / "report.html").unlink()
    (out / "report.html").mkdir()
    before = _snapshot(out)
    p = run_cli("route", dem, *_pts(), "--no-refine", "--mu", "0.05", "--out", out, "--overwrite")
    assert p.returncode == 1, p.stderr
    assert "Traceback" not in p.stderr and len(p.stderr.strip().splitlines()) == 1, p.stderr
    assert "report.html" in p.stderr and "folder" in p.stderr, p.stderr
    assert _snapshot(out) == before


@pytest.mark.parametrize("fail_at", [1, 5, 10], ids=["first", "fifth", "last"])
def test_overwrite_failing_at_any_move_restores_the_old_set(tmp_path, monkeypatch, fail_at):
    # issue 19.1: a move into place fails part way (here the fail_at-th new file of ten);
    # every old file must be back, byte for byte, and no working folder left
    import fallway.export

    dem = _plane_tif(tmp_path / "dem.tif")
    out = tmp_path / "out"
    assert _invoke(["route", dem, *_pts(), "--no-refine", "--out", out]).exit_code == 0
    (out / "notes.txt").write_bytes(b"mine\n")
    before = _snapshot(out)
    real = os.replace
    placed = []

    def flaky(src, dst):
        # a finished result moving into place: into the output folder, from the working
        # folder (not back from the backup folder, not a writer's temporary file, whose
        # name starts with a dot)
        src, dst = Path(src), Path(dst)
        if (dst.parent == out and src.parent != out and not src.parent.name.startswith(".fallway-old")
                and not src.name.startswith(".")):
            placed.append(Path(dst).name)
            if len(placed) == fail_at:
                raise OSError(28, "No space left on device")
        return real(src, dst)

    monkeypatch.setattr(fallway.export.os, "replace", flaky)
    res = _invoke(["route", dem, *_pts(), "--no-refine", "--mu", "0.05", "--out", out, "--overwrite"])
    assert res.exit_code == 1, res.output
    assert "No space left on device" in res.output and placed[-1] in res.output, res.output
    assert _snapshot(out) == before


@pytest.mark.slow
def test_compare_overwrite_keeps_the_route_files(tmp_path):
    # issue 19.3: compare --overwrite in a route folder removed nine route files it never writes
    dem = _plane_tif(tmp_path / "dem.tif")
    out = tmp_path / "out"
    assert run_cli("route", dem, *_pts(), "--no-refine", "--out", out).returncode == 0
    route_files = {n: (out / n).read_bytes() for n in os.listdir(out) if n != "report.html"}
    lines = tmp_path / "lines.geojson"
    lines.write_text(json.dumps({"type": "FeatureCollection",
                                 "crs": {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}},
                                 "features": [{"type": "Feature", "properties": {"name": "straight"},
                                               "geometry": {"type": "LineString",
                                                            "coordinates": [list(START), list(END)]}}]}))
    p = run_cli("compare", dem, lines, "--no-optimum", "--out", out)
    assert p.returncode == 1 and "report.html" in p.stderr and "--overwrite" in p.stderr, p.stderr
    p = run_cli("compare", dem, lines, "--no-optimum", "--out", out, "--overwrite")
    assert p.returncode == 0, p.stderr
    for n, b in route_files.items():
        assert (out / n).read_bytes() == b, n
    assert {"comparison.csv", "comparison.png", "comparison.svg", "report.html"} <= set(os.listdir(out))
    assert not [n for n in os.listdir(out) if n.startswith(".")]


def test_failed_run_into_a_new_nested_folder_removes_every_folder_it_made(tmp_path):
    # issue 19.12: a failed run into a new a/b/c removed c but left a/b
    dem = _plane_tif(tmp_path / "dem.tif")
    p = run_cli("route", dem, *_pts(end=(X0 + 57.5, Y0 + 9000.0)), "--no-refine", "--out", tmp_path / "a" / "b" / "c")
    assert p.returncode == 1, p.stderr
    assert not (tmp_path / "a").exists()


def test_reach_out_must_be_a_tif_name(tmp_path):
    # issue 19.12: reach --out x.txt wrote a GeoTIFF under a text name
    dem = _plane_tif(tmp_path / "dem.tif")
    p = run_cli("reach", dem, "--start", *START, "--out", tmp_path / "x.txt")
    assert p.returncode == 2 and "--out" in p.stderr and ".tif" in p.stderr and "Traceback" not in p.stderr, p.stderr
    assert not (tmp_path / "x.txt").exists()



# --------------------------------------------------------------------------- candidate names and CSV cells (issue 19)

def test_duplicate_candidate_names_never_take_another_lines_name(tmp_path):
    # issue 19.12: A, A, A-2 became A, A-2, A-2-2: the second A took the third line's name
    import csv as _csv

    dem = _plane_tif(tmp_path / "dem.tif")
    mid = (X0 + 30.0, Y0 - 30.0)
    feats = [("A", [START, END]), ("A", [START, (mid[0], mid[1] - 10.0), END]),
             ("A-2", [START, (mid[0], mid[1] + 10.0), END])]
    lines = tmp_path / "lines.geojson"
    lines.write_text(json.dumps({"type": "FeatureCollection",
                                 "crs": {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}},
                                 "features": [{"type": "Feature", "properties": {"name": n},
                                               "geometry": {"type": "LineString", "coordinates": [list(q) for q in c]}}
                                              for n, c in feats]}))
    p = run_cli("compare", dem, lines, "--no-optimum", "--out", tmp_path / "out")
    assert p.returncode == 0, p.stderr
    with open(tmp_path / "out" / "comparison.csv", newline="") as fh:
        rows = {r["name"]: r for r in _csv.DictReader(fh)}
    assert sorted(rows) == ["A", "A-2", "A-3"]
    # the line drawn as "A-2" (north of the straight line, bulging +10 m) keeps its name;
    # both detours have the same length, the straight "A" is shorter
    assert float(rows["A"]["length_m"]) < float(rows["A-2"]["length_m"])
    assert rows["A-2"]["length_m"] == rows["A-3"]["length_m"]


def test_csv_cells_that_a_spreadsheet_would_run_are_neutralised(tmp_path):
    # OWASP "CSV Injection": cells starting with = + - @ get a leading single quote
    import csv as _csv

    dem = _plane_tif(tmp_path / "dem.tif")
    names = ["=HYPERLINK(\"http://example.invalid\")", "+1+cmd|' /C calc'!A0", "-2+3", "@SUM(A1:A2)", "plain"]
    lines = tmp_path / "lines.geojson"
    lines.write_text(json.dumps({"type": "FeatureCollection",
                                 "crs": {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}},
                                 "features": [{"type": "Feature", "properties": {"name": n},
                                               "geometry": {"type": "LineString",
                                                            "coordinates": [list(START), [X0 + 30.0, Y0 - 30 - k],
                                                                            list(END)]}}
                                              for k, n in enumerate(names)]}))
    p = run_cli("compare", dem, lines, "--no-optimum", "--out", tmp_path / "out")
    assert p.returncode == 0, p.stderr
    with open(tmp_path / "out" / "comparison.csv", newline="") as fh:
        got = sorted(r["name"] for r in _csv.DictReader(fh))
    assert got == sorted(["'" + n for n in names[:4]] + ["plain"])



@pytest.mark.slow
def test_named_keepout_and_line_layers_are_read(tmp_path):
    # issue 19.4: with --keepout-layer only the named layers count; compare reads every
    # line layer of a GeoPackage (here two), or the one --lines-layer names
    import shapely

    dem = _plane_tif(tmp_path / "dem.tif")
    k = _gpkg_layers(tmp_path / "nogo.gpkg", [
        ("quarry", shapely.box(X0, Y0 - 40, X0 + 15, Y0 - 20), "Polygon"),
        ("fence", shapely.LineString([(X0, Y0 - 50), (X0 + 50, Y0 - 50)]), "LineString")])
    p = run_cli("route", dem, *_pts(), "--no-refine", "--keepout", k, "--keepout-layer", "fence", "--out",
                tmp_path / "a")
    assert p.returncode == 1 and "only polygons" in p.stderr, p.stderr
    p = run_cli("route", dem, *_pts(), "--no-refine", "--keepout", k, "--keepout-layer", "quarry", "--out",
                tmp_path / "b")
    assert p.returncode == 0 and "lies in a keep-out area" in p.stderr, p.stderr  # the quarry covers the start
    lines = _gpkg_layers(tmp_path / "lines.gpkg", [
        ("east", shapely.LineString([START, END]), "LineString"),
        ("bend", shapely.LineString([START, (X0 + 30.0, Y0 - 40.0), END]), "LineString")])
    import csv as _csv

    p = run_cli("compare", dem, lines, "--no-optimum", "--out", tmp_path / "c")
    assert p.returncode == 0, p.stderr
    with open(tmp_path / "c" / "comparison.csv", newline="") as fh:
        assert sorted(r["name"] for r in _csv.DictReader(fh)) == ["bend", "east"]
    p = run_cli("compare", dem, lines, "--no-optimum", "--lines-layer", "bend", "--out", tmp_path / "d")
    assert p.returncode == 0, p.stderr
    with open(tmp_path / "d" / "comparison.csv", newline="") as fh:
        assert [r["name"] for r in _csv.DictReader(fh)] == ["bend"]


# --------------------------------------------------------------------------- a full disk (issue 19.11)

@pytest.fixture
def tiny_disk(tmp_path):
    """A 400 kB tmpfs mounted in tmp_path (needs root and a kernel that allows it; else skip).

    Returns ``fill(free_kb)``, which fills it up to ``free_kb`` kB of free space.
    """
    import shutil as _shutil

    mnt = tmp_path / "tiny"
    mnt.mkdir()
    if os.geteuid() != 0 or _shutil.which("mount") is None:
        pytest.skip("mounting a small filesystem needs root")
    p = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=400k", "tmpfs", str(mnt)], capture_output=True, text=True)
    if p.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {p.stderr.strip()}")

    def fill(free_kb):
        total = _shutil.disk_usage(mnt).total
        with open(mnt / "filler", "wb") as fh:
            fh.write(b"\0" * (total - free_kb * 1024))
        return mnt

    try:
        yield fill
    finally:
        subprocess.run(["umount", str(mnt)], capture_output=True)


def test_full_disk_is_named_as_such(tmp_path, tiny_disk):
    # with ~28 kB free the GeoPackage is the first file that does not fit: SQLite then
    # reported "no such table: gpkg_contents"
    dem = _plane_tif(tmp_path / "dem.tif")
    disk = tiny_disk(28)
    p = run_cli("route", dem, *_pts(), "--no-refine", "--out", disk / "out")
    assert p.returncode == 1, p.stderr
    assert "Traceback" not in p.stderr and len(p.stderr.strip().splitlines()) == 1, p.stderr
    assert "no space left on device" in p.stderr.lower() and "route.gpkg" in p.stderr, p.stderr
    assert ".fallway-" not in p.stderr  # the file is named where it was to go
    assert sorted(x.name for x in disk.iterdir()) == ["filler"]


def test_full_disk_fails_the_reach_map(tmp_path, tiny_disk):
    # GDAL's libtiff reported the failed writes on stderr only: the run "succeeded" with a
    # broken GeoTIFF
    dem = _plane_tif(tmp_path / "dem.tif")
    disk = tiny_disk(2)
    p = run_cli("reach", dem, "--start", *START, "--out", disk / "reach.tif")
    assert p.returncode == 1, p.stderr
    assert "Traceback" not in p.stderr and len(p.stderr.strip().splitlines()) == 1, p.stderr
    assert "no space left on device" in p.stderr.lower(), p.stderr
    assert sorted(x.name for x in disk.iterdir()) == ["filler"]


@pytest.mark.slow
def test_a_crawling_line_is_said_to_crawl(tmp_path):
    # issue 19.12: --drag 1e9 "succeeded" with a line of 1e6 s at 5e-5 m/s, unremarked.
    # On the 0.3 plane the mover is held at its terminal speed with quadratic drag,
    # v_t = sqrt(g sin(theta) / k) (any mechanics text): 5.3e-5 m/s for k = 1e9 1/m
    import math
    import re

    dem = _plane_tif(tmp_path / "dem.tif")
    # points on cell centres in one row: a straight line (START lies on a cell edge, and the
    # kink where its exact start joins the lattice makes the full model's RK4 substeps stiff
    # at k = 1e9 1/m: it reports a stall there, not a crawl)
    pts = _pts(start=(X0 + 2.5, Y0 - 27.5), end=(X0 + 57.5, Y0 - 27.5))
    p = run_cli("route", dem, *pts, "--no-refine", "--drag", "1e9", "--out", tmp_path / "crawl")
    assert p.returncode == 0, p.stderr
    lines = [ln for ln in p.stderr.splitlines() if "crawls" in ln]
    assert len(lines) == 1 and "drag (1e+09 1/m)" in lines[0], p.stderr
    mean = float(re.search(r"mean speed of ([0-9.e+-]+) m/s", lines[0]).group(1))
    v_t = math.sqrt(9.80665 * math.sin(math.atan(0.3)) / 1e9)
    assert mean == pytest.approx(v_t, rel=0.02)
    p = run_cli("route", dem, *_pts(), "--no-refine", "--drag", "0.01", "--out", tmp_path / "fine")
    assert p.returncode == 0 and "crawl" not in p.stderr, p.stderr
