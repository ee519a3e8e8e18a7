"""The chainage table (stations.py) and stations.csv.

References: the station speeds and times are checked against ``physics.traverse`` of the
same line cut at the stations (a collinear vertex turns by 0, so cutting a straight
segment changes nothing in the model: the property DEVELOPERS.md states and
tests/test_physics.py checks); the straight incline against the closed-form incline law
v² = 2 g (sin θ - μ cos θ) s (any mechanics text, e.g. Meriam & Kraige, Dynamics, the
block on an incline; from memory); lon/lat against pyproj's own transform; ground heights
against ``Terrain.sample``.
"""

from __future__ import annotations

import csv
import dataclasses
import math

import numpy as np
import pyproj
import pytest
from affine import Affine

from fallway.errors import ParameterError
from fallway.export import _example_route, write_stations_csv
from fallway.params import LineSpec, Mover
from fallway.physics import traverse
from fallway.stations import station_table
from fallway.terrain import Terrain

X0, Y0, CELL = 452_000.0, 5_301_000.0, 5.0


def _terrain():
    """A 60 x 40-cell slope falling south at 40 % with rolls (crests and sags), UTM 33N."""
    rows, cols = 60, 40
    x = X0 + (np.arange(cols) + 0.5) * CELL
    y = Y0 - (np.arange(rows) + 0.5) * CELL
    xx, yy = np.meshgrid(x, y)
    z = 600.0 - 0.4 * (Y0 - yy) + 3.0 * np.sin((Y0 - yy) / 17.0) + 0.003 * (xx - x.mean()) ** 2
    return Terrain.from_array(z, Affine(CELL, 0, X0, 0, -CELL, Y0), "EPSG:32633")


def _route(mover, *, raised=0.0, rise=0.0, n=41):
    """A winding line on (or above) the rolling slope, timed with ``traverse`` as a route's is."""
    terrain = _terrain()
    s = np.linspace(0.0, 1.0, n)
    x = X0 + 100.0 + 30.0 * np.sin(2.0 * np.pi * s)
    y = Y0 - 15.0 - 250.0 * s
    z = terrain.sample(x, y) + rise * 250.0 * s * 0.42
    if raised:  # a raised line: the chord between the end heights, with waves (crests and sags)
        z = np.linspace(z[0], z[-1], n) + raised + 1.0 * np.sin(6.0 * np.pi * s)
    line = np.column_stack([x, y, z])
    kind = "ground" if raised == 0.0 and rise == 0.0 else "raised"
    normals = terrain.normal(x, y) if kind == "ground" else None
    prof = traverse(line, mover, surface_normal=normals)
    base, _ = _example_route()
    return dataclasses.replace(base, line=line, profile=prof, mover=mover, terrain=terrain,
                               line_spec=LineSpec(kind=kind, clearance_m=(0.0, 50.0)))


def _cut_traverse(route, table):
    """The route's line with a vertex at every station, timed by ``traverse``; values at the stations."""
    P = np.asarray(route.profile.points)
    S = np.asarray(route.profile.station_m)
    st = table.station_m
    inside = ~table.is_vertex
    pts = np.concatenate([P, np.column_stack([table.x_m, table.y_m, table.line_z_m])[inside]])
    key = np.concatenate([S, st[inside]])
    order = np.argsort(key, kind="stable")
    cut = traverse(pts[order], route.mover)
    pos = np.empty(len(order), dtype=int)
    pos[order] = np.arange(len(order))
    rows = np.empty(len(st), dtype=int)
    rows[inside] = pos[len(P):]
    # a station on a vertex: that vertex's row
    vi = np.flatnonzero(table.is_vertex)
    rows[vi] = pos[np.searchsorted(S, st[vi] - 1e-9)]
    return cut.speed_m_s[rows], cut.time_s[rows], cut.station_m[rows]


@pytest.mark.parametrize("normal", ["full", "gravity"])
@pytest.mark.parametrize("drag", [0.0, 0.02])
@pytest.mark.parametrize("raised", [0.0, 12.0])
def test_station_speeds_and_times_match_traverse_of_the_cut_line(normal, drag, raised):
    route = _route(Mover(mu=0.2, drag=drag, v0=3.0, normal=normal), raised=raised)
    assert route.profile.stalled_at_m is None
    table = station_table(route, 7.3)
    assert (~table.is_vertex).sum() > 20  # most stations lie inside segments
    speed, time, station = _cut_traverse(route, table)
    np.testing.assert_allclose(station, table.station_m, rtol=0, atol=1e-9)
    np.testing.assert_allclose(table.speed_m_s, speed, rtol=1e-8, atol=1e-9)
    np.testing.assert_allclose(table.time_s, time, rtol=1e-8, atol=1e-9)
    # the full model's corners cost speed: the stations inside segments must carry it
    if normal == "full":
        prof = route.profile
        arriving = dataclasses.replace(prof, departing_speed_m_s=prof.speed_m_s)
        plain = station_table(dataclasses.replace(route, profile=arriving), 7.3)
        assert np.nanmax(np.abs(plain.speed_m_s - table.speed_m_s)) > 1e-3


def test_stall_rows_are_empty_after_the_stall_and_flagged():
    # a rising line with friction from 6 m/s: the mover stops part way
    route = _route(Mover(mu=0.3, v0=6.0, normal="full"), rise=1.0)
    stall = route.profile.stalled_at_m
    assert stall is not None
    table = station_table(route, 2.0)
    before = table.station_m < stall - 1e-6
    after = table.station_m > stall + 1e-6
    assert np.isfinite(table.speed_m_s[before]).all() and np.isnan(table.speed_m_s[after]).all()
    assert np.isnan(table.time_s[after]).all()
    i = int(np.argmin(np.abs(table.station_m - stall)))
    assert "stall" in table.flags[i].split(";")
    speed, time, _ = _cut_traverse(route, table)
    np.testing.assert_allclose(table.speed_m_s[before], speed[before], rtol=1e-8, atol=1e-9)
    np.testing.assert_allclose(table.time_s[before], time[before], rtol=1e-8, atol=1e-9)


def test_incline_closed_form_and_regular_stations():
    # 50 m down a 30 degree plane, mu = 0.2, from rest: v² = 2 g (sin 30° - 0.2 cos 30°) s
    route, terrain = _example_route()
    table = station_table(route, 3.0)
    k = np.arange(17)
    np.testing.assert_allclose(table.station_m, np.append(3.0 * k, 50.0))
    g, th = 9.80665, math.radians(30.0)
    a = g * (math.sin(th) - 0.2 * math.cos(th))
    np.testing.assert_allclose(table.speed_m_s, np.sqrt(2 * a * table.station_m), rtol=1e-12)
    np.testing.assert_allclose(table.time_s, np.sqrt(2 * table.station_m / a), rtol=1e-12)
    np.testing.assert_allclose(table.grade_deg, 30.0, rtol=1e-12)
    np.testing.assert_allclose(table.normal_load_ratio, math.cos(th), rtol=1e-12)
    assert table.flags[0] == "start" and set(table.flags[-1].split(";")) == {"end", "max_speed"}


def test_points_of_interest_and_caller_stations():
    mover = Mover(mu=0.25, v0=1.0, normal="full", max_speed=12.0)
    route = _route(mover)
    summary = dataclasses.replace(route.summary, max_normal_g_station_m=float(route.profile.station_m[7]))
    route = dataclasses.replace(route, summary=summary)
    table = station_table(route, 10.0, extra=[(33.3, "support 1")])
    flags = dict(zip(np.round(table.station_m, 6), table.flags))
    vmax_at = float(route.profile.station_m[int(np.nanargmax(route.profile.speed_m_s))])
    assert "max_speed" in flags[round(vmax_at, 6)].split(";")
    assert "max_normal_g" in flags[round(float(route.profile.station_m[7]), 6)].split(";")
    assert "support 1" in flags[33.3]
    # every row faster than the limit says so, and every overspeed station of the profile is a row
    over = table.speed_m_s > 12.0
    assert over.any()
    assert all("overspeed" in f.split(";") for f, o in zip(table.flags, over) if o)
    for s in route.profile.overspeed:
        assert "overspeed" in flags[round(float(s), 6)].split(";")


@pytest.mark.parametrize("step", [0.0, -1.0, float("nan"), float("inf"), "ten", 0.001])
def test_bad_station_step_is_a_parameter_error(step):
    route, _ = _example_route()
    with pytest.raises(ParameterError, match="station step"):
        station_table(route, step)


def test_a_step_too_small_for_the_line_is_refused():
    # 44.7 km of line at 1 cm would be 4.5 million rows
    route, _ = _example_route()
    long = dataclasses.replace(route, profile=traverse(np.array([[0, 0, 20000.0], [40000.0, 0, 0]]), route.mover))
    with pytest.raises(ParameterError, match="choose a step of at least"):
        station_table(long, 0.01)


def test_stations_csv_reads_back(tmp_path):
    route = _route(Mover(mu=0.2, drag=0.01, v0=3.0, normal="full"), raised=8.0)
    table = station_table(route, 10.0)
    path = write_stations_csv(table, tmp_path / "stations.csv")
    with open(path, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0]) == ["station_m", "x_m", "y_m", "lon_deg", "lat_deg", "ground_z_m", "line_z_m",
                             "clearance_m", "grade", "grade_deg", "speed_m_s", "time_s", "normal_load_ratio", "flags"]
    assert len(rows) == len(table)

    def col(name):
        return np.array([float(r[name]) for r in rows])

    for name, tol in (("station_m", 5e-4), ("x_m", 5e-4), ("line_z_m", 5e-4), ("speed_m_s", 5e-5),
                      ("time_s", 5e-5), ("grade", 5e-7)):
        np.testing.assert_allclose(col(name), getattr(table, name), rtol=0, atol=tol)
    tr = pyproj.Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True)
    lon, lat = tr.transform(table.x_m, table.y_m)
    np.testing.assert_allclose(col("lon_deg"), lon, rtol=0, atol=6e-8)
    np.testing.assert_allclose(col("lat_deg"), lat, rtol=0, atol=6e-8)
    ground = route.terrain.sample(table.x_m, table.y_m)
    np.testing.assert_allclose(col("ground_z_m"), ground, rtol=0, atol=5e-4)
    np.testing.assert_allclose(col("clearance_m"), table.line_z_m - ground, rtol=0, atol=1e-3)
    np.testing.assert_allclose(np.tan(np.radians(col("grade_deg"))), col("grade"), rtol=1e-3, atol=1e-5)
    assert rows[0]["flags"] == "start" and "end" in rows[-1]["flags"].split(";")


@pytest.mark.slow
def test_route_command_writes_stations_at_the_step_given(tmp_path):
    # a plane falling 0.3 m per metre east: the fall line, timed by the incline law at every station
    from click.testing import CliRunner

    from conftest import plane, write_geotiff
    from fallway.cli import main

    z, t = plane(30, 60, 2.0, -0.3, 0.0, z0=200.0)
    dem = write_geotiff(tmp_path / "ramp.tif", z, t, "EPSG:32633")
    out = tmp_path / "run"
    args = ["route", dem, "--start", 500_005.0, 3_999_969.0, "--end", 500_105.0, 3_999_969.0, "--mu", 0.1,
            "--normal", "gravity", "--station-step", 7.0, "--out", out]
    res = CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)
    assert res.exit_code == 0, res.output
    with open(out / "stations.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    st = np.array([float(r["station_m"]) for r in rows])
    length = 100.0 * math.hypot(1.0, 0.3)
    regular = np.append(7.0 * np.arange(15), length)
    assert np.abs(st[:, None] - regular[None, :]).min(axis=0).max() < 5e-4  # every multiple of 7 m is a row
    marked = [r["flags"] != "" for r in rows]  # the other rows are the summary's stations
    assert all(m for s_, m in zip(st, marked) if np.abs(regular - s_).min() > 5e-4)
    th = math.atan(0.3)
    a = 9.80665 * (math.sin(th) - 0.1 * math.cos(th))
    np.testing.assert_allclose([float(r["speed_m_s"]) for r in rows], np.sqrt(2 * a * st), atol=2e-4)
    assert tomllib_load(out / "scenario.toml")["outputs"]["station_step"] == 7.0
    res = CliRunner().invoke(main, [str(a) for a in args[:-3] + ["0", "--out", tmp_path / "bad"]])
    assert res.exit_code != 0 and "station step" in res.output


def tomllib_load(path):
    import tomllib

    return tomllib.loads(path.read_text())
