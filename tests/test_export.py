"""Exports: RFC 7946 GeoJSON, GeoPackage, profile CSV, summary JSON, atomic output sets."""

from __future__ import annotations

import dataclasses

import csv
import json
import math

import numpy as np
import pytest
from affine import Affine
from hypothesis import given, settings, strategies as st
from rasterio.crs import CRS

from fallway._segment import segment_law
from fallway.caution import CAUTION
from fallway.errors import FallwayIOError, OutputExistsError
from fallway.export import (OutputSet, atomic_path, atomic_write, profile_flags, to_jsonable,
                            write_profile_csv, write_route_geojson, write_route_gpkg, write_summary_json)
from fallway.params import Limits
from fallway.physics import Mover, Profile
from fallway.results import LatticeLine, Route, RouteSummary
from fallway.params import LineSpec, SearchOptions
from fallway.terrain import Terrain

X0, Y0, CELL = 452_000.0, 5_301_000.0, 5.0


# --------------------------------------------------------------------------- fixtures

def make_terrain(crs=CRS.from_epsg(32633), x0=X0, y0=Y0):
    """A 48 x 40-cell slope falling south at 45 % with a shallow east-west trough."""
    rows, cols = 48, 40
    x = x0 + (np.arange(cols) + 0.5) * CELL
    y = y0 - (np.arange(rows) + 0.5) * CELL
    xx, yy = np.meshgrid(x, y)
    z = 500.0 - 0.45 * (y0 - yy) + 0.004 * (xx - x.mean()) ** 2
    return Terrain.from_array(z, Affine(CELL, 0, x0, 0, -CELL, y0), crs)


def make_profile(points, mover, *, liftoff=(), overspeed=()):
    """Motion along straight segments with the gravity-normal segment law."""
    pts = np.asarray(points, dtype=float)
    d = np.diff(pts, axis=0)
    plan = np.hypot(d[:, 0], d[:, 1])
    length = np.sqrt(plan ** 2 + d[:, 2] ** 2)
    n = len(pts)
    v2 = np.empty(n)
    t = np.empty(n)
    v2[0], t[0] = mover.v0 ** 2, 0.0
    stalled = None
    for i in range(n - 1):
        v2o, dt, at = segment_law(v2[i], -d[i, 2], plan[i], length[i], mover.g, mover.mu, mover.drag,
                                  mover.stall_speed ** 2)
        if at >= 0:
            stalled = float(np.sum(length[:i]) + at)
            v2[i + 1:] = np.nan
            t[i + 1:] = np.nan
            break
        v2[i + 1], t[i + 1] = v2o, t[i] + dt
    station = np.concatenate([[0.0], np.cumsum(length)])
    grade = np.append(-d[:, 2] / plan, -d[-1, 2] / plan[-1])
    ratio = np.append(plan / length, plan[-1] / length[-1])
    return Profile(pts, station, np.sqrt(v2), t, grade, ratio, stalled,
                   np.asarray(liftoff, float), np.asarray(overspeed, float), np.sqrt(v2))


def make_route(terrain=None, mover=None, *, raised=0.0, n=31):
    terrain = terrain or make_terrain()
    mover = mover or Mover(mu=0.1, drag=0.004, v0=0.5, normal="gravity", max_speed=40.0)
    s = np.linspace(0.0, 1.0, n)
    x = X0 + 100.0 + 25.0 * np.sin(np.pi * s)
    y = Y0 - 12.0 - 200.0 * s
    z = terrain.sample(x, y) + raised * np.sin(np.pi * s)  # on (or above) the smooth surface, as a refined line
    line = np.column_stack([x, y, z])
    prof = make_profile(line, mover)
    rows = np.rint(np.linspace(2, 41, 12)).astype(int)
    cols = np.array([19, 19, 20, 21, 22, 23, 24, 24, 23, 22, 21, 20])
    cx, cy = terrain.cell_center(rows, cols)
    lat_pts = np.column_stack([cx, cy, terrain.z[rows, cols]])
    lat_prof = make_profile(lat_pts, mover)
    lattice = LatticeLine(np.column_stack([rows, cols]), lat_pts, lat_prof, lat_prof.travel_time_s)
    d = np.diff(line, axis=0)
    summary = RouteSummary(
        line_kind="ground", feasible=True, travel_time_s=prof.travel_time_s, exit_speed_m_s=prof.exit_speed_m_s,
        max_speed_m_s=float(np.nanmax(prof.speed_m_s)), length_m=float(prof.station_m[-1]),
        plan_length_m=float(np.hypot(d[:, 0], d[:, 1]).sum()), drop_m=float(line[0, 2] - line[-1, 2]),
        min_radius_plan_m=31.5, min_radius_3d_m=31.0, max_grade=float(np.max(prof.grade)), violated_limits=[],
        start_xyz=line[0].tolist(), end_xyz=line[-1].tolist(), via_xy=[], lattice_time_s=lattice.time_s,
        lattice_model_time_s=lattice.time_s, neighbours=16, search_plan="full", search_exact=True, label_cap=None,
        labels_created=1234, labels_settled=1000, corridor={"steps": [{"corridor_m": 40.0, "feasible": True}]},
        refined=True, refine_choice="gravity optimum", refine_converged=True, refine_iterations=17,
        refine_residual_s_per_m=1.5e-7, refine_message="refined", refine_limits={"grade": "inactive"},
        refine_candidates=None, robust_method=None, robust_mu_range=None, robust_note=None,
        robust_candidates=None, caution=CAUTION, start_given_xy=line[0, :2].tolist(),
        end_given_xy=line[-1, :2].tolist(), start_moved_m=0.0, end_moved_m=0.0, start_moved_why=None,
        end_moved_why=None)
    return Route(line=line, profile=prof, lattice=lattice, summary=summary, mover=mover,
                 limits=Limits(min_grade=0.05, max_step_turn_deg=45.0), line_spec=LineSpec(), search=SearchOptions(),
                 refinement=None, terrain=terrain)


@pytest.fixture
def terrain():
    return make_terrain()


@pytest.fixture
def route(terrain):
    return make_route(terrain)


# --------------------------------------------------------------------------- GeoJSON

def _positions(geom):
    if geom["type"] == "LineString":
        return [geom["coordinates"]]
    assert geom["type"] == "MultiLineString"
    return geom["coordinates"]


def check_rfc7946(doc):
    """Rules of RFC 7946 that a route file must satisfy (sections 3, 3.1, 4, 5)."""
    assert "crs" not in doc  # §4: the crs member was removed
    assert doc["type"] in ("Feature", "FeatureCollection")  # §3
    feats = doc["features"] if doc["type"] == "FeatureCollection" else [doc]
    assert len(feats) == 1
    f = feats[0]
    assert f["type"] == "Feature" and "properties" in f and "geometry" in f  # §3.2
    assert "crs" not in f
    for part in _positions(f["geometry"]):
        assert len(part) >= 2  # §3.1.4: two or more positions
        for pos in part:
            assert len(pos) == 3 and all(isinstance(v, (int, float)) for v in pos)  # §3.1.1 with z
            assert -180.0 <= pos[0] <= 180.0 and -90.0 <= pos[1] <= 90.0
    if "bbox" in doc:  # §5: [west, south, zmin, east, north, zmax]
        assert len(doc["bbox"]) == 6
    return f


def test_geojson_is_rfc7946_and_round_trips_with_pyproj(route, tmp_path):
    import pyproj

    p = write_route_geojson(route, tmp_path / "route.geojson", route_crs := CRS.from_epsg(32633))
    doc = json.loads(p.read_text(encoding="utf-8"))
    f = check_rfc7946(doc)
    assert f["geometry"]["type"] == "LineString"
    lonlatz = np.array(f["geometry"]["coordinates"])
    # back to UTM 33N with pyproj (independent of the writer's direction of transform)
    back = pyproj.Transformer.from_crs("EPSG:4326", route_crs.to_wkt(), always_xy=True)
    x, y = back.transform(lonlatz[:, 0], lonlatz[:, 1])
    # 7 decimals: rounding moves a point by at most 5e-8 deg, 5.6 mm of latitude
    np.testing.assert_allclose(x, route.line[:, 0], atol=6e-3)
    np.testing.assert_allclose(y, route.line[:, 1], atol=6e-3)
    np.testing.assert_allclose(lonlatz[:, 2], route.line[:, 2], atol=6e-4)
    # UTM 33N has its central meridian at 15 E; x = 452 km lies west of it, near 47.8 N
    assert 14.0 < lonlatz[0, 0] < 15.0 and 47.0 < lonlatz[0, 1] < 48.5
    props = f["properties"]
    assert props["travel_time_s"] == pytest.approx(route.summary.travel_time_s, rel=1e-15)
    assert props["labels_created"] == 1234 and props["corridor"]["steps"][0]["corridor_m"] == 40.0
    # bbox covers the coordinates
    # GDAL reads it back as a WGS 84 LineString Z (its GeoJSON driver follows RFC 7946)
    import pyogrio

    info = pyogrio.read_info(p)
    assert info["geometry_type"] == "LineString Z" and info["features"] == 1
    # (GDAL names WGS 84 with heights EPSG:4979, the 3D form of EPSG:4326)
    assert pyproj.CRS.from_user_input(info["crs"]).to_epsg() in (4326, 4979)
    w, s, zmin, e, n, zmax = doc["bbox"]
    assert w <= lonlatz[:, 0].min() and e >= lonlatz[:, 0].max()
    assert s <= lonlatz[:, 1].min() and n >= lonlatz[:, 1].max()


def test_geojson_byte_identical_and_strict_json(route, tmp_path):
    a = write_route_geojson(route, tmp_path / "a.geojson", "EPSG:32633").read_bytes()
    b = write_route_geojson(route, tmp_path / "b.geojson", CRS.from_epsg(32633)).read_bytes()
    assert a == b

    def refuse(name):
        raise AssertionError(f"non-standard JSON constant {name}")

    json.loads(a, parse_constant=refuse)


def test_geojson_splits_at_the_antimeridian(tmp_path):
    import pyproj

    # UTM 60N: central meridian 177 E; at 52 N, 3 degrees of longitude are about 205 km
    t = make_terrain(CRS.from_epsg(32660), x0=650_000.0, y0=5_770_000.0)
    to_utm = pyproj.Transformer.from_crs("EPSG:4326", "EPSG:32660", always_xy=True)
    xw, yw = to_utm.transform(179.9, 52.0)
    xe, ye = to_utm.transform(-179.9, 52.0)
    line = np.array([[xw - 2000.0, yw, 300.0], [xw, yw, 290.0], [xe, ye, 280.0], [xe + 2000.0, ye, 270.0]])
    r = make_route(t)
    r = dataclasses.replace(r, line=line, profile=make_profile(line, r.mover))
    doc = json.loads(write_route_geojson(r, tmp_path / "am.geojson", "EPSG:32660").read_text())
    f = check_rfc7946(doc)
    assert f["geometry"]["type"] == "MultiLineString"  # RFC 7946 §3.1.9
    west, east = f["geometry"]["coordinates"]
    assert west[-1][0] == 180.0 and east[0][0] == -180.0
    assert west[-1][1] == pytest.approx(east[0][1], abs=1e-7)
    assert all(p[0] > 179 for p in west) and all(p[0] < -179 for p in east)


def test_geojson_matches_gdal_rfc7946_writer(route, tmp_path):
    # reference: GDAL's own RFC 7946 mode (it reprojects to WGS 84 itself), through pyogrio
    import pyogrio.raw
    import shapely

    ref = tmp_path / "gdal.geojson"
    wkb = np.array([shapely.to_wkb(shapely.linestrings(route.line), output_dimension=3)], dtype=object)
    pyogrio.raw.write(ref, wkb, [np.array([1])], ["id"], driver="GeoJSON", geometry_type="LineString Z",
                      crs="EPSG:32633", layer_options={"RFC7946": "YES", "COORDINATE_PRECISION": 10})
    gdal = np.array(json.loads(ref.read_text())["features"][0]["geometry"]["coordinates"])
    ours = json.loads(write_route_geojson(route, tmp_path / "ours.geojson", "EPSG:32633").read_text())
    ours = np.array(ours["features"][0]["geometry"]["coordinates"])
    np.testing.assert_allclose(ours[:, :2], gdal[:, :2], atol=5.1e-8)  # degrees: our 7 decimals, ~6 mm
    np.testing.assert_allclose(ours[:, 2], gdal[:, 2], atol=6e-4)


@given(st.lists(st.tuples(st.floats(200_000, 800_000), st.floats(10_000, 9_000_000), st.floats(-400, 8000)),
                min_size=2, max_size=6))
@settings(max_examples=25, deadline=None)
def test_geojson_round_trip_anywhere_in_the_zone(tmp_path_factory, pts):
    # property: lon/lat stay in range and come back to the map coordinates within millimetres
    import pyproj

    line = np.array(pts, dtype=float)
    base = make_route()
    r = dataclasses.replace(base, line=line, profile=Profile(
        line, np.zeros(len(line)), np.zeros(len(line)), np.zeros(len(line)), np.zeros(len(line)),
        np.ones(len(line)), None, np.array([]), np.array([]), np.zeros(len(line))))
    path = tmp_path_factory.mktemp("rt") / "r.geojson"
    f = check_rfc7946(json.loads(write_route_geojson(r, path, "EPSG:32633").read_text()))
    lonlat = np.array(f["geometry"]["coordinates"])
    x, y = pyproj.Transformer.from_crs("EPSG:4326", "EPSG:32633", always_xy=True).transform(lonlat[:, 0],
                                                                                          lonlat[:, 1])
    np.testing.assert_allclose(x, line[:, 0], atol=8e-3)  # 7 decimals of a degree: 5.6 mm, turned by the grid convergence
    np.testing.assert_allclose(y, line[:, 1], atol=8e-3)


# --------------------------------------------------------------------------- GeoPackage

def test_gpkg_two_layers_native_crs(route, tmp_path):
    import pyogrio
    import pyogrio.raw
    import pyproj
    import shapely

    p = write_route_gpkg(route, tmp_path / "route.gpkg", CRS.from_epsg(32633))
    layers = {name: gtype for name, gtype in pyogrio.list_layers(p)}
    assert layers == {"line": "LineString Z", "lattice": "LineString Z"}
    for layer, expect in (("line", route.line), ("lattice", route.lattice.points)):
        info = pyogrio.read_info(p, layer=layer)
        assert pyproj.CRS.from_user_input(info["crs"]) == pyproj.CRS.from_epsg(32633)
        meta, _, geom, fields = pyogrio.raw.read(p, layer=layer)
        g = shapely.from_wkb(geom[0])
        assert g.geom_type == "LineString" and g.has_z
        np.testing.assert_array_equal(shapely.get_coordinates(g, include_z=True), expect)
        cols = dict(zip(meta["fields"], fields))
        if layer == "line":
            assert cols["travel_time_s"][0] == route.summary.travel_time_s
            assert cols["labels_created"][0] == 1234
            assert bool(cols["refine_converged"][0]) is True
        else:
            assert cols["time_s"][0] == route.lattice.time_s


def test_gpkg_into_missing_folder_is_a_clear_error(route, tmp_path):
    with pytest.raises(FallwayIOError, match="does not exist"):
        write_route_gpkg(route, tmp_path / "nope" / "route.gpkg", "EPSG:32633")


# --------------------------------------------------------------------------- CSV

def incline_time(v0, a, k, s):
    """Time and exit speed on a straight incline (CHECKS.md, 'Incline with Coulomb friction').

    a = g(sin θ − μ cos θ) for the gravity-normal model; k = 0: t = (√(v0² + 2as) − v0)/a;
    k > 0: v² = v_t² + (v0² − v_t²)e^(−2ks), t = (v_t/a)[artanh(v/v_t) − artanh(v0/v_t)],
    and the arcoth form when the mover enters faster than its terminal speed.
    """
    if k == 0.0:
        v = math.sqrt(v0 * v0 + 2.0 * a * s)
        return (v - v0) / a if a != 0 else s / v0, v
    assert a > 0.0
    vt = math.sqrt(a / k)
    v = math.sqrt(vt * vt + (v0 * v0 - vt * vt) * math.exp(-2.0 * k * s))
    if v0 < vt:
        return (vt / a) * (math.atanh(v / vt) - math.atanh(v0 / vt)), v
    return (vt / a) * (math.atanh(vt / v0) - math.atanh(vt / v)), v


def test_incline_oracle_matches_published_examples():
    # CHECKS.md worked examples: 30 deg, mu 0.2, 50 m from rest
    g = 9.80665
    a = g * (math.sin(math.radians(30)) - 0.2 * math.cos(math.radians(30)))
    t, v = incline_time(0.0, a, 0.0, 50.0)
    assert t == pytest.approx(5.5860139, abs=1e-7) and v == pytest.approx(17.9018530, abs=1e-7)
    t, v = incline_time(0.0, a, 0.01, 50.0)
    assert t == pytest.approx(6.0610402, abs=1e-7) and v == pytest.approx(14.2330490, abs=1e-7)


def _read_csv(path):
    with open(path, newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    return rows


@pytest.mark.parametrize("raised", [0.0, 4.0])
def test_profile_csv_retimed_independently(terrain, tmp_path, raised):
    r = make_route(terrain, raised=raised)
    p = write_profile_csv(r, terrain, tmp_path / "profile.csv")
    header = p.read_text().splitlines()[0]
    assert header == "station_m,x,y,z_ground,z_line,grade,speed_m_s,time_s,normal_ratio,flags"
    rows = _read_csv(p)
    assert len(rows) == len(r.line)
    xyz = np.array([[float(row["x"]), float(row["y"]), float(row["z_line"])] for row in rows])
    m = r.mover
    t = 0.0
    v = m.v0
    times = [0.0]
    for a_pt, b_pt in zip(xyz[:-1], xyz[1:]):
        plan = math.hypot(*(b_pt[:2] - a_pt[:2]))
        drop = a_pt[2] - b_pt[2]
        s = math.sqrt(plan ** 2 + drop ** 2)
        acc = m.g * (drop - m.mu * plan) / s
        dt, v = incline_time(v, acc, m.drag, s)
        t += dt
        times.append(t)
    col = np.array([float(row["time_s"]) for row in rows])
    np.testing.assert_allclose(col, times, rtol=1e-6, atol=2e-6)
    speeds = np.array([float(row["speed_m_s"]) for row in rows])
    assert speeds[-1] == pytest.approx(v, rel=1e-6)
    # ground: the smooth surface the line lies on, recomputed with scipy's interpolating
    # bicubic spline (FITPACK, RectBivariateSpline kx = ky = 3, s = 0; the grid is within
    # one tile of the surface, so it is one spline: test_terrain.py)
    from scipy.interpolate import RectBivariateSpline, RegularGridInterpolator

    tr = terrain.transform  # cell centres from the affine transform (GDAL's corner convention)
    spline = RectBivariateSpline(np.arange(terrain.shape[0], dtype=float), np.arange(terrain.shape[1], dtype=float),
                                 terrain.z, kx=3, ky=3, s=0)
    rr = (xyz[:, 1] - tr.f) / tr.e - 0.5
    cc = (xyz[:, 0] - tr.c) / tr.a - 0.5
    zg = spline.ev(rr, cc)
    np.testing.assert_allclose([float(row["z_ground"]) for row in rows], zg, rtol=0, atol=1e-6)
    # not the bilinear heights of the lattice (they differ here by centimetres: the ground
    # is curved across the slope), so the check above tells the two surfaces apart
    rows_y = (tr.f + (np.arange(terrain.shape[0]) + 0.5) * tr.e)[::-1]
    cols_x = tr.c + (np.arange(terrain.shape[1]) + 0.5) * tr.a
    bilinear = RegularGridInterpolator((rows_y, cols_x), terrain.z[::-1], method="linear")
    assert np.max(np.abs(bilinear(np.column_stack([xyz[:, 1], xyz[:, 0]])) - zg)) > 1e-3
    clearance = xyz[:, 2] - zg
    assert clearance.max() == pytest.approx(raised, abs=0.02)
    # station is the 3D length along the written vertices
    seg = np.linalg.norm(np.diff(xyz, axis=0), axis=1)
    np.testing.assert_allclose([float(row["station_m"]) for row in rows], np.r_[0, np.cumsum(seg)], atol=1e-5)
    assert all(row["flags"] == "" for row in rows)


def test_profile_csv_flags_and_empty_cells(terrain, tmp_path):
    # the line starts across the trough flank, shallower than mu = 0.44: the mover slows and stalls
    mover = Mover(mu=0.44, v0=7.0, normal="gravity", stall_speed=0.3, max_speed=6.5)
    r = make_route(terrain, mover)
    prof = r.profile
    assert prof.stalled_at_m is not None
    prof = Profile(prof.points, prof.station_m, prof.speed_m_s, prof.time_s, prof.grade, prof.normal_ratio,
                   prof.stalled_at_m, np.array([prof.station_m[2] + 0.1]), np.array([]), prof.departing_speed_m_s)
    r = dataclasses.replace(r, profile=prof, mover=mover)
    rows = _read_csv(write_profile_csv(r, terrain, tmp_path / "profile.csv"))
    flags = [row["flags"] for row in rows]
    i_stall = int(np.searchsorted(prof.station_m, prof.stalled_at_m)) - 1
    assert i_stall > 3 and flags[2] == "liftoff"
    assert all("stall" in f for f in flags[i_stall:]) and not any("stall" in f for f in flags[:i_stall])
    # speeds above max_speed are flagged overspeed (the 7 m/s entry)
    sp = np.array([float(x["speed_m_s"]) if x["speed_m_s"] else np.nan for x in rows])
    with np.errstate(invalid="ignore"):
        over = sp > 6.5
    assert over[:2].all() and [("overspeed" in f) for f in flags] == list(over)
    assert rows[-1]["time_s"] == "" and rows[-1]["speed_m_s"] == ""


@given(st.lists(st.floats(0.0, 100.0), min_size=0, max_size=5))
@settings(max_examples=30, deadline=None)
def test_flags_mark_the_nearest_vertex(stations):
    # property: every listed lift-off station flags exactly the vertex nearest to it
    s = np.linspace(0.0, 100.0, 11)
    p = Profile(np.zeros((11, 3)), s, np.ones(11), s, s, s, None, np.array(stations), np.array([]), np.ones(11))
    flags = profile_flags(p)
    expect = {int(np.argmin(np.abs(s - x))) for x in stations}
    got = {i for i, f in enumerate(flags) if f == "liftoff"}
    # ties (exactly half way) may go either side
    ties = {i for x in stations for i in range(11) if abs(abs(s[i] - x) - 5.0) < 1e-9}
    assert got - ties == expect - ties


# --------------------------------------------------------------------------- summary JSON

def test_summary_json_stable_valid_and_complete(route, tmp_path):
    a = write_summary_json(route, tmp_path / "a.json", {"scenario": {"name": "test"}}, crs=CRS.from_epsg(32633))
    b = write_summary_json(route, tmp_path / "b.json", {"scenario": {"name": "test"}}, crs=CRS.from_epsg(32633))
    assert a.read_bytes() == b.read_bytes()
    text = a.read_text(encoding="utf-8")
    assert "NaN" not in text and "Infinity" not in text

    def refuse(name):
        raise AssertionError(f"non-standard JSON constant {name}")

    doc = json.loads(text, parse_constant=refuse)
    fields = list(RouteSummary.__dataclass_fields__)
    # the summary's fields in their fixed order, then the inputs, the CRS and the extra entries
    assert list(doc) == fields + ["mover", "limits", "line_spec", "search", "crs", "scenario"]
    assert doc["caution"] == CAUTION
    assert doc["crs"] == "EPSG:32633"
    assert doc["limits"]["max_grade"] is None  # inf = no limit -> null
    assert doc["limits"]["min_grade"] == 0.05
    assert doc["mover"]["mu"] == 0.1 and doc["mover"]["normal"] == "gravity"
    assert doc["start_xyz"] == pytest.approx(route.line[0].tolist())
    assert doc["end_xyz"] == pytest.approx(route.line[-1].tolist())


def test_summary_json_after_stall_has_no_nan(terrain, tmp_path):
    r = make_route(terrain, Mover(mu=0.6, v0=2.0, normal="gravity"))
    summary = dataclasses.replace(r.summary, exit_speed_m_s=float("nan"), travel_time_s=float("inf"))
    r = dataclasses.replace(r, summary=summary)
    doc = json.loads(write_summary_json(r, tmp_path / "s.json").read_text())
    assert doc["exit_speed_m_s"] is None and doc["travel_time_s"] is None


@given(st.recursive(st.none() | st.booleans() | st.integers(-10**6, 10**6) | st.floats(allow_nan=True)
                    | st.text(max_size=5),
                    lambda kids: st.lists(kids, max_size=3) | st.dictionaries(st.text(max_size=3), kids, max_size=3),
                    max_leaves=10))
@settings(max_examples=60, deadline=None)
def test_to_jsonable_always_gives_strict_json(value):
    # property: whatever the summary holds, the result is strict JSON (RFC 8259 has no NaN/inf)
    json.dumps(to_jsonable(value), allow_nan=False)


# --------------------------------------------------------------------------- atomic files

def test_atomic_path_leaves_old_file_on_failure(tmp_path):
    target = tmp_path / "x.txt"
    target.write_text("old")
    with pytest.raises(RuntimeError):
        with atomic_write(target) as f:
            f.write("half")
            raise RuntimeError("writer failed")
    assert target.read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["x.txt"]
    with pytest.raises(KeyboardInterrupt):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            raise KeyboardInterrupt
    assert sorted(p.name for p in tmp_path.iterdir()) == ["x.txt"]


def _write_all(out, route, terrain):
    write_route_geojson(route, out.path("route.geojson"), "EPSG:32633")
    write_route_gpkg(route, out.path("route.gpkg"), "EPSG:32633")
    write_profile_csv(route, terrain, out.path("profile.csv"))
    write_summary_json(route, out.path("summary.json"), crs="EPSG:32633")


def test_output_set_writes_complete_set(route, terrain, tmp_path):
    d = tmp_path / "run" / "one"
    with OutputSet(d) as out:
        _write_all(out, route, terrain)
        assert not (d / "summary.json").exists()  # nothing in place before the end
    assert sorted(p.name for p in d.iterdir()) == ["profile.csv", "route.geojson", "route.gpkg", "summary.json"]


def test_output_set_refuses_existing_results(route, terrain, tmp_path):
    d = tmp_path / "run"
    d.mkdir()
    (d / "summary.json").write_text("old")
    (d / "notes.txt").write_text("mine")
    with pytest.raises(OutputExistsError) as err:
        with OutputSet(d) as out:
            _write_all(out, route, terrain)
    msg = str(err.value)
    assert "summary.json" in msg and "--overwrite" in msg and "\n" not in msg
    assert (d / "summary.json").read_text() == "old"
    assert sorted(p.name for p in d.iterdir()) == ["notes.txt", "summary.json"]


def test_output_set_leaves_nothing_on_failure(route, terrain, tmp_path):
    d = tmp_path / "run"
    d.mkdir()
    (d / "notes.txt").write_text("mine")
    with pytest.raises(ZeroDivisionError):
        with OutputSet(d) as out:
            write_route_geojson(route, out.path("route.geojson"), "EPSG:32633")
            write_profile_csv(route, terrain, out.path("profile.csv"))
            1 / 0  # a failure mid-run
    assert sorted(p.name for p in d.iterdir()) == ["notes.txt"]
    # a folder the set created is removed again, also on KeyboardInterrupt
    fresh = tmp_path / "fresh"
    with pytest.raises(KeyboardInterrupt):
        with OutputSet(fresh) as out:
            write_summary_json(route, out.path("summary.json"))
            raise KeyboardInterrupt
    assert not fresh.exists()


def test_output_set_overwrite_replaces_and_drops_stale(route, terrain, tmp_path):
    d = tmp_path / "run"
    d.mkdir()
    (d / "summary.json").write_text("old")
    (d / "map.svg").write_text("stale")
    (d / "notes.txt").write_text("mine")
    with OutputSet(d, overwrite=True) as out:
        _write_all(out, route, terrain)
    assert json.loads((d / "summary.json").read_text())["caution"] == CAUTION
    assert not (d / "map.svg").exists()  # from the earlier run: would mix two runs
    assert (d / "notes.txt").read_text() == "mine"
    assert not any(p.name.startswith(".") for p in d.iterdir())


def test_output_set_unwritable_folder(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    with pytest.raises(FallwayIOError) as err:
        with OutputSet(blocker / "sub"):
            pass
    assert "\n" not in str(err.value) and str(blocker) in str(err.value)
    with pytest.raises(FallwayIOError, match="is a file"):
        with OutputSet(blocker):
            pass


def test_profile_csv_carries_a_traverse_profile(terrain, tmp_path):
    # the columns are the motion model's own numbers, to the written precision
    from fallway import physics

    r = make_route(terrain)
    mover = Mover(mu=0.1, drag=0.004, v0=0.5, normal="full")
    prof = physics.traverse(r.line, mover)
    r = dataclasses.replace(r, profile=prof, mover=mover)
    rows = _read_csv(write_profile_csv(r, terrain, tmp_path / "profile.csv"))
    for col, ref in (("station_m", prof.station_m), ("speed_m_s", prof.speed_m_s), ("time_s", prof.time_s),
                     ("grade", prof.grade), ("normal_ratio", prof.normal_ratio)):
        np.testing.assert_allclose([float(row[col]) for row in rows], ref, atol=5e-7, err_msg=col)
    assert [row["flags"] for row in rows] == profile_flags(prof, mover)
