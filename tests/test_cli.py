"""The command line end to end: route, reach, compare, demo (click's CliRunner and subprocess).

Bad input and failures have their own matrix in test_bad_input.py.
"""

from __future__ import annotations

import csv
import json
import math
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest
import rasterio
from click.testing import CliRunner

from conftest import plane, write_geotiff
from fallway.cli import main
from fallway.physics import Mover, traverse

G = 9.80665


def _incline_time(s, theta, mu, v0=0.0):
    # any mechanics text: a = g (sin θ − μ cos θ), t = (sqrt(v0² + 2 a s) − v0) / a
    a = G * (math.sin(theta) - mu * math.cos(theta))
    return (math.sqrt(v0 * v0 + 2 * a * s) - v0) / a


@pytest.fixture
def ramp(tmp_path):
    """A plane falling 0.3 m per metre east, 30 x 60 cells at 2 m, EPSG:32633."""
    z, t = plane(30, 60, 2.0, -0.3, 0.0, z0=200.0)
    path = write_geotiff(tmp_path / "ramp.tif", z, t, "EPSG:32633")
    # cell centres of row 15: x = 500001 + 2 c, y = 4000000 - 31
    return path, (500_005.0, 3_999_969.0), (500_105.0, 3_999_969.0)


def _run(args):
    res = CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)
    return res


def test_help_lists_the_commands():
    out = subprocess.run([sys.executable, "-m", "fallway.cli", "--help"], capture_output=True, text=True,
                         check=True).stdout
    for cmd in ("route", "reach", "compare", "demo"):
        assert cmd in out


def test_route_down_the_fall_line_matches_the_incline_formula(tmp_path, ramp):
    dem, start, end = ramp
    out = tmp_path / "run"
    res = _run(["route", dem, "--start", *start, "--end", *end, "--mu", 0.1, "--normal", "gravity",
                "--out", out])
    assert res.exit_code == 0, res.output
    for name in ("route.geojson", "route.gpkg", "profile.csv", "summary.json", "map.png", "map.svg",
                 "profile.png", "profile.svg", "report.html", "scenario.toml"):
        assert (out / name).is_file(), name
    summary = json.loads((out / "summary.json").read_text())
    # 100 m of plan down a 0.3 grade: the straight fall line is the fastest line here
    theta = math.atan(0.3)
    expected = _incline_time(100.0 / math.cos(theta), theta, 0.1)
    assert summary["travel_time_s"] == pytest.approx(expected, rel=1e-6)
    assert "qualified engineer" in summary["caution"]
    # profile.csv re-timed with traverse on its own z_line column
    with open(out / "profile.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    pts = np.array([[float(r["x"]), float(r["y"]), float(r["z_line"])] for r in rows])
    again = traverse(pts, Mover(mu=0.1, normal="gravity"))
    assert again.travel_time_s == pytest.approx(summary["travel_time_s"], rel=1e-6)
    assert float(rows[-1]["time_s"]) == pytest.approx(summary["travel_time_s"], rel=1e-6)
    # GeoJSON: RFC 7946 lon/lat, with z
    gj = json.loads((out / "route.geojson").read_text())
    assert "crs" not in gj
    coords = gj["features"][0]["geometry"]["coordinates"]
    assert all(len(c) == 3 and -180 <= c[0] <= 180 and -90 <= c[1] <= 90 for c in coords)
    assert "travel time" in res.output


def test_scenario_file_with_flag_override_and_resolved_copy(tmp_path, ramp):
    dem, start, end = ramp
    sc = tmp_path / "run.toml"
    sc.write_text(f'dem = "{dem.name}"\n[points]\nstart = [{start[0]}, {start[1]}]\nend = [{end[0]}, {end[1]}]\n'
                  '[mover]\nmu = 0.25\nnormal = "gravity"\n[search]\nneighbours = 8\nrefine = false\n')
    out = tmp_path / "run"
    res = _run(["route", "--scenario", sc, "--mu", 0.05, "--out", out])
    assert res.exit_code == 0, res.output
    summary = json.loads((out / "summary.json").read_text())
    assert summary["mover"]["mu"] == 0.05                      # the flag wins
    resolved = tomllib.loads((out / "scenario.toml").read_text())
    assert resolved["mover"]["mu"] == 0.05 and resolved["search"]["neighbours"] == 8
    # the resolved scenario alone reproduces the run
    out2 = tmp_path / "again"
    res = _run(["route", "--scenario", out / "scenario.toml", "--out", out2])
    assert res.exit_code == 0, res.output
    again = json.loads((out2 / "summary.json").read_text())
    assert again["travel_time_s"] == summary["travel_time_s"]


def test_reach_geotiff_two_bands_match_the_incline_formula(tmp_path, ramp):
    dem, start, end = ramp
    out = tmp_path / "reach.tif"
    res = _run(["reach", dem, "--start", *start, "--mu", 0.1, "--normal", "gravity", "--neighbours", 8,
                "--out", out])
    assert res.exit_code == 0, res.output
    with rasterio.open(out) as ds:
        assert ds.count == 2 and ds.dtypes == ("float32", "float32")
        t = ds.read(1)
        v = ds.read(2)
        r, c = ds.index(*end)
    theta = math.atan(0.3)
    s = 100.0 / math.cos(theta)
    assert t[r, c] == pytest.approx(_incline_time(s, theta, 0.1), rel=1e-5)
    a = G * (math.sin(theta) - 0.1 * math.cos(theta))
    assert v[r, c] == pytest.approx(math.sqrt(2 * a * s), rel=1e-5)
    # uphill of the start (west) nothing is reachable from rest
    assert np.isnan(t[15, 0])
    # the isochrone map beside it (PNG spec, ISO/IEC 15948 section 5.2: the signature)
    assert (tmp_path / "reach.png").read_bytes().startswith(b"\x89PNG\r\n\x1a\n")
    assert "reach.png" in res.output
    # a second run refuses to replace the file without --overwrite
    res = _run(["reach", dem, "--start", *start, "--mu", 0.1, "--out", out])
    assert res.exit_code == 1 and "--overwrite" in res.output


def test_compare_ranks_drawn_lines_and_the_computed_optimum(tmp_path, ramp):
    dem, start, end = ramp
    from pyproj import Transformer

    tr = Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True)
    straight = [tr.transform(*start), tr.transform(*end)]
    mid = (start[0] + 50.0, start[1] + 20.0)
    dogleg = [tr.transform(*start), tr.transform(*mid), tr.transform(*end)]
    fc = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"name": "dogleg"},
         "geometry": {"type": "LineString", "coordinates": dogleg}},
        {"type": "Feature", "properties": {"name": "straight"},
         "geometry": {"type": "LineString", "coordinates": straight}}]}
    lines = tmp_path / "lines.geojson"
    lines.write_text(json.dumps(fc))
    out = tmp_path / "cmp"
    res = _run(["compare", dem, lines, "--mu", 0.1, "--normal", "gravity", "--mu-range", 0.05, 0.2,
                "--out", out])
    assert res.exit_code == 0, res.output
    with open(out / "comparison.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    names = [r["name"] for r in rows]
    assert set(names) == {"straight", "dogleg", "computed optimum"}
    # straight down the fall line beats the dogleg (closed form for the straight one)
    assert names.index("straight") < names.index("dogleg")
    theta = math.atan(0.3)
    t_straight = float(rows[names.index("straight")]["travel_time_s"])
    assert t_straight == pytest.approx(_incline_time(100.0 / math.cos(theta), theta, 0.1), rel=1e-4)
    assert "envelope_status" in rows[0]
    for name in ("comparison.png", "comparison.svg", "report.html"):
        assert (out / name).is_file()


@pytest.mark.slow
def test_real_dem_end_to_end(tmp_path):
    # SRTM 3 arc-second tile shipped with matplotlib (public domain): a geographic DEM,
    # so the points are lon/lat and the terrain is reprojected to UTM on load.
    from matplotlib import cbook

    d = cbook.get_sample_data("jacksboro_fault_dem.npz")
    z = np.asarray(d["elevation"], dtype=np.float32)
    dx, dy = float(d["dx"]), float(d["dy"])
    # ymin is the north edge and row 0 is north (see test_terrain.py)
    from affine import Affine

    t = Affine(dx, 0, d["xmin"], 0, -dy, d["ymin"])
    dem = write_geotiff(tmp_path / "srtm.tif", z, t, "EPSG:4326")
    # the highest cell and a cell about 1.5 km away that is 150 m or more lower
    r0, c0 = np.unravel_index(np.argmax(z), z.shape)
    rr, cc = np.mgrid[0:z.shape[0], 0:z.shape[1]]
    near = (np.hypot(rr - r0, cc - c0) > 15) & (np.hypot(rr - r0, cc - c0) < 22) & (z < z[r0, c0] - 150)
    assert near.any()
    r1, c1 = np.argwhere(near)[0]
    lon0, lat0 = t @ (c0 + 0.5, r0 + 0.5)
    lon1, lat1 = t @ (c1 + 0.5, r1 + 0.5)
    out = tmp_path / "run"
    res = _run(["route", dem, "--start", lon0, lat0, "--end", lon1, lat1, "--mu", 0.05, "--out", out])
    assert res.exit_code in (0, 3), res.output
    if res.exit_code == 3:
        pytest.fail(f"no line on the real DEM: {res.output}")
    gj = json.loads((out / "route.geojson").read_text())
    coords = np.array(gj["features"][0]["geometry"]["coordinates"])
    # ends within one 3-arc-second cell of the requested lon/lat
    assert abs(coords[0, 0] - lon0) < dx and abs(coords[0, 1] - lat0) < dy
    assert abs(coords[-1, 0] - lon1) < dx and abs(coords[-1, 1] - lat1) < dy
    summary = json.loads((out / "summary.json").read_text())
    assert summary["crs"].startswith("EPSG:326")              # local UTM zone
    assert summary["drop_m"] > 150.0


@pytest.mark.slow
def test_demo_writes_every_output(demo_run):
    out, p = demo_run
    assert p.returncode == 0, p.stderr
    for name in ("route.geojson", "route.gpkg", "profile.csv", "summary.json", "map.png", "profile.png",
                 "report.html", "reach.tif", "comparison.csv", "comparison.png", "scenario.toml"):
        assert (out / name).is_file(), name
    assert "qualified engineer" in p.stdout
    with open(out / "comparison.csv", newline="") as fh:
        names = [r["name"] for r in csv.DictReader(fh)]
    assert {"direct", "east of the trees", "west of the trees", "computed optimum"} <= set(names)
    # the reported line is the faster of the refined and the lattice line as laid on the
    # ground (both timed with the same full model), and the exported profile re-times to
    # the reported figure
    summary = json.loads((out / "summary.json").read_text())
    assert summary["refine_choice"]
    assert summary["feasible"] and not summary["violated_limits"]
    with open(out / "profile.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert float(rows[-1]["time_s"]) == pytest.approx(summary["travel_time_s"], rel=1e-6)
    # the second scenario: a cable line on supports in its own folder, with its own report;
    # the carrier path in profile.csv is re-timed by the incline law span by span in
    # tests/test_cable_route.py, here the files agree with each other
    cable = out / "cable"
    for name in ("route.geojson", "profile.csv", "summary.json", "report.html", "supports.csv", "spans.csv",
                 "profile.pdf", "stations.csv", "route.dxf"):
        assert (cable / name).is_file(), name
    cs = json.loads((cable / "summary.json").read_text())
    assert cs["line_kind"] == "cable" and cs["feasible"]
    with open(cable / "spans.csv", newline="") as fh:
        spans = list(csv.DictReader(fh))
    assert sum(float(r["time_s"]) for r in spans) == pytest.approx(cs["travel_time_s"], abs=1e-3 * len(spans))
    assert len(spans) == cs["cable"]["support_count"] + 1
    assert "cable" in p.stdout


@pytest.mark.slow
def test_demo_line_meets_every_limit_of_its_scenario(demo_run):
    # issue: the demo's refined line meets the realistic open-chute limits its scenario
    # carries.  Each limit is read twice: from summary.json, and independently from the
    # exported route.gpkg, re-timed by the sharp-corner reading (incline law + capstan law,
    # tests/references.py) and, for the loads, by the circle through each vertex and its
    # neighbours (v^2/R; N = v^2 kappa n - g_perp; mechanics texts, CHECKS "Buildable lines")
    import pyogrio
    from shapely import from_wkb

    from references import sharp_corner_reading, sharp_corner_speeds, smooth_reading, vertex_loads

    out, p = demo_run
    assert p.returncode == 0, p.stderr
    sc = tomllib.loads((out / "scenario.toml").read_text())
    mv, lim = sc["mover"], sc["limits"]
    # the scenario is an open chute with every buildability limit set
    assert lim["allow_liftoff"] is False and mv["normal"] == "full"
    for key in ("max_lateral_g", "max_normal_g", "min_grade", "max_grade"):
        assert key in lim, key
    assert mv["max_speed"] is not None
    s = json.loads((out / "summary.json").read_text())
    assert s["feasible"] and not s["violated_limits"]
    assert s["max_speed_m_s"] <= mv["max_speed"]
    assert s["max_lateral_g"] <= lim["max_lateral_g"]
    assert s["max_normal_g"] <= lim["max_normal_g"]
    assert s["min_liftoff_margin_g"] > 0.0
    assert lim["min_grade"] <= s["min_grade"] and s["max_grade"] <= lim["max_grade"]
    # the exported line itself
    _, _, geom, _ = pyogrio.raw.read(out / "route.gpkg", layer="line")
    P = np.array(from_wkb(geom[0]).coords, dtype=float)
    d = np.diff(P, axis=0)
    grade = -d[:, 2] / np.hypot(d[:, 0], d[:, 1])
    assert lim["min_grade"] <= grade.min() and grade.max() <= lim["max_grade"]
    mu = mv["mu"]
    t_sharp, v_exit = sharp_corner_reading(P, mu)
    assert t_sharp == pytest.approx(s["travel_time_s"], rel=5e-3)
    assert v_exit == pytest.approx(s["exit_speed_m_s"], rel=5e-3)
    t_smooth, v_smooth = smooth_reading(P, mu)
    assert t_smooth == pytest.approx(s["travel_time_s"], rel=5e-3)
    assert v_smooth == pytest.approx(s["exit_speed_m_s"], rel=5e-3)
    pieces = sharp_corner_speeds(P, mu)
    assert pieces.max() <= mv["max_speed"]
    at_vertex = np.maximum(pieces[:-1, 1], pieces[1:, 0])   # arriving at / leaving each interior vertex
    lateral_g, normal_g, bed_g = vertex_loads(P, np.r_[0.0, at_vertex, 0.0])
    assert lateral_g.max() <= lim["max_lateral_g"]
    assert normal_g.max() <= lim["max_normal_g"]
    assert bed_g.min() > 0.0                                  # no lift-off anywhere on the open bed
    # the keep-out: the exported line's segments against the shipped polygons, moved to the
    # DEM's CRS by pyproj and tested by shapely
    from importlib.resources import as_file, files

    from pyproj import Transformer
    from shapely.geometry import LineString, Polygon

    with as_file(files("fallway.sample_terrain")) as d:
        ko = json.loads((Path(d) / "keepout.geojson").read_text())
    tr = Transformer.from_crs("EPSG:4326", s["crs"], always_xy=True)
    line = LineString(P[:, :2])
    for f in ko["features"]:
        lon, lat = np.asarray(f["geometry"]["coordinates"][0]).T
        assert not line.intersects(Polygon(np.column_stack(tr.transform(lon, lat)))), f["properties"]["name"]


def test_exit_speeds_in_words():
    # the friction range's exit speeds as the route and demo print them: both ends, a stall
    # at either end, a stall at both
    from types import SimpleNamespace

    from fallway.cli import _exit_speeds

    def env(at_hi, at_lo):
        return SimpleNamespace(mu_lo=0.2, mu_hi=0.3, exit_speed_range_m_s=(at_hi, at_lo))

    assert _exit_speeds(env(9.5, 14.25)) == "exit speed 14.25 to 9.50 m/s"
    assert _exit_speeds(env(None, 18.9)) == "exit speed 18.90 m/s at 0.2, stalls at 0.3"
    assert _exit_speeds(env(3.0, None)) == "stalls at 0.2, exit speed 3.00 m/s at 0.3"
    assert _exit_speeds(env(None, None)) == "stalls at both ends of the range"


def test_route_corridor_plan_matches_the_incline_formula(tmp_path, ramp):
    # the coarse-to-fine path through the CLI: same closed form as the plain search
    dem, start, end = ramp
    out = tmp_path / "large"
    res = _run(["route", dem, "--start", *start, "--end", *end, "--mu", 0.1, "--normal", "gravity",
                "--plan", "corridor", "--coarse", 3, "--no-refine", "--out", out])
    assert res.exit_code == 0, res.output
    summary = json.loads((out / "summary.json").read_text())
    theta = math.atan(0.3)
    assert summary["travel_time_s"] == pytest.approx(_incline_time(100.0 / math.cos(theta), theta, 0.1), rel=1e-6)
    assert summary["search_plan"] == "corridor" and summary["corridor"]["steps"]
    assert not any("compute" in k for k in summary)  # seconds of computing stay out of summary.json


def test_reach_with_a_time_cut_off(tmp_path, ramp):
    dem, start, end = ramp
    full = tmp_path / "full.tif"
    cut = tmp_path / "cut.tif"
    assert _run(["reach", dem, "--start", *start, "--mu", 0.1, "--normal", "gravity", "--neighbours", 8,
                 "--out", full]).exit_code == 0
    res = _run(["reach", dem, "--start", *start, "--mu", 0.1, "--normal", "gravity", "--neighbours", 8,
                "--max-time", 4.0, "--out", cut, "--no-plot"])
    assert res.exit_code == 0, res.output
    assert (tmp_path / "full.png").is_file() and not (tmp_path / "cut.png").exists()  # --no-plot
    with rasterio.open(full) as a, rasterio.open(cut) as b:
        tf = a.read(1)
        tc = b.read(1)
        # compare the cells the cut-off map covers, in map coordinates
        rows, cols = np.nonzero(np.isfinite(tc))
        xs, ys = rasterio.transform.xy(b.transform, rows, cols)
        ra, ca = rasterio.transform.rowcol(a.transform, xs, ys)
    assert np.all(tc[np.isfinite(tc)] <= 4.0 + 1e-6)
    np.testing.assert_allclose(tc[rows, cols], tf[ra, ca], rtol=1e-6)
    # every cell the full map reaches within 4 s is in the cut-off map
    assert np.isfinite(tc).sum() == (tf <= 4.0).sum()


def test_batch_command_collects_a_table(tmp_path, ramp):
    dem, start, end = ramp
    f = tmp_path / "batch.toml"
    f.write_text(f'[base]\ndem = "{dem.name}"\n[base.points]\nstart = [{start[0]}, {start[1]}]\n'
                 f'end = [{end[0]}, {end[1]}]\n[base.mover]\nnormal = "gravity"\n[base.search]\nrefine = false\n'
                 '[vary]\nmover.mu = [0.05, 0.1]\n')
    out = tmp_path / "b"
    res = _run(["batch", f, "--out", out, "--workers", 1])
    assert res.exit_code == 0, res.output
    with open(out / "batch.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    theta = math.atan(0.3)
    s = 100.0 / math.cos(theta)
    got = sorted(float(r["travel_time_s"]) for r in rows)
    want = sorted(_incline_time(s, theta, mu) for mu in (0.05, 0.1))
    assert got == pytest.approx(want, rel=1e-6)


def test_route_robust_keeps_the_low_friction_speed_under_the_limit(tmp_path, ramp):
    # 100 m of plan down a 0.3 grade (30 m drop), mu 0.1 in 0.05..0.2, limit 22 m/s.  The
    # straight fall line reaches sqrt(2 g (30 - 0.05 * 100)) = 22.1 m/s at LO, so the
    # robust line must be longer: work-energy theorem (any mechanics text, no drag), under
    # 22 m/s at the end at mu 0.05 needs a plan length P >= (2 g 30 - 22²) / (2 g 0.05)
    dem, start, end = ramp
    out = tmp_path / "robust"
    res = _run(["route", dem, "--start", *start, "--end", *end, "--mu", 0.1, "--normal", "gravity",
                "--max-speed", 22.0, "--mu-range", 0.05, 0.2, "--robust", "--no-refine", "--out", out])
    assert res.exit_code == 0, res.output
    summary = json.loads((out / "summary.json").read_text())
    assert summary["robust_method"] == "exact" and summary["robust_mu_range"] == [0.05, 0.2]
    assert summary["friction_envelope"]["envelope_status"] == "robust"
    with open(out / "profile.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    pts = np.array([[float(r["x"]), float(r["y"]), float(r["z_line"])] for r in rows])
    plan = float(np.hypot(*np.diff(pts[:, :2], axis=0).T).sum())
    assert plan >= (2 * G * 30.0 - 22.0 ** 2) / (2 * G * 0.05) * (1 - 1e-9)
    lo = traverse(pts, Mover(mu=0.05, normal="gravity"))
    hi = traverse(pts, Mover(mu=0.2, normal="gravity"))
    assert float(np.max(lo.speed_m_s)) <= 22.0 * (1 + 1e-9) and hi.stalled_at_m is None
    # the ordinary optimum is faster and too fast at LO: robustness costs time
    plain = tmp_path / "plain"
    assert _run(["route", dem, "--start", *start, "--end", *end, "--mu", 0.1, "--normal", "gravity",
                 "--no-refine", "--out", plain]).exit_code == 0
    assert json.loads((plain / "summary.json").read_text())["travel_time_s"] < summary["travel_time_s"]
