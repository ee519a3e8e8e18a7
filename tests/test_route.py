"""find_route: summary, profile = traverse(line), refinement hook; reach GeoTIFF output."""

from __future__ import annotations

import json
import math
import os

import numpy as np
import pytest
import rasterio
from affine import Affine
from rasterio.crs import CRS

from fallway.errors import ParameterError
from fallway.lattice.search import reach
from fallway.params import SearchOptions
from fallway.physics import Mover, traverse
from fallway.route import _min_radius, find_route
from fallway.terrain import Terrain

KEYS = {"travel_time_s", "lattice_time_s", "length_m", "plan_length_m", "drop_m", "exit_speed_m_s",
        "max_speed_m_s", "min_radius_m", "max_grade", "labels_created", "labels_settled", "search_s",
        "start", "end", "refined"}


def valley(rows=16, cols=18, cell=5.0):
    rng = np.random.default_rng(2)
    r, c = np.mgrid[0:rows, 0:cols]
    z = 120.0 - 2.2 * c - 1.5 * r + 0.08 * (r - rows / 2) ** 2 + rng.normal(scale=0.3, size=(rows, cols))
    return Terrain.from_array(z, Affine(cell, 0, 600_000.0, 0, -cell, 5_000_000.0), CRS.from_epsg(32632))


def test_lattice_route_summary_and_profile():
    t = valley()
    mover = Mover(mu=0.15, drag=0.005, v0=0.5)  # full normal model for the report
    r = find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), mover, refine=False)
    assert KEYS <= set(r.summary)
    json.dumps(r.summary)  # JSON-ready
    assert r.summary["refined"] is False
    np.testing.assert_array_equal(r.line, r.lattice.points)
    # the reported motion is traverse of the line with the mover as given
    assert r.summary["travel_time_s"] == pytest.approx(traverse(r.line, mover).travel_time_s, rel=1e-12)
    assert r.summary["lattice_search_time_s"] == r.lattice.time_s
    # unrefined, the route is the lattice line: both timed with the same (full) model
    assert r.summary["lattice_time_s"] == pytest.approx(r.summary["travel_time_s"], rel=1e-12)
    d = np.diff(r.line, axis=0)
    assert r.summary["length_m"] == pytest.approx(np.linalg.norm(d, axis=1).sum())
    assert r.summary["drop_m"] == pytest.approx(t.z[1, 1] - t.z[14, 16])
    assert r.summary["start"] == list(t.cell_center(1, 1))
    # gravity-normal mover: the route's time is the lattice's own
    g = Mover(mu=0.15, drag=0.005, v0=0.5, normal="gravity")
    rg = find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), g, refine=False)
    assert rg.summary["travel_time_s"] == pytest.approx(rg.summary["lattice_time_s"], rel=1e-9)


def test_refined_route_is_not_slower():
    t = valley()
    mover = Mover(mu=0.15, normal="gravity")
    r = find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), mover, neighbours=8, levels=1, n_vertices=24)
    pytest.importorskip("fallway.refine")
    assert r.summary["refined"] is True
    assert r.summary["travel_time_s"] <= r.summary["lattice_time_s"] * (1 + 1e-9)
    assert r.summary["travel_time_s"] == pytest.approx(traverse(r.line, mover).travel_time_s, rel=1e-12)


def test_min_radius_circumradius():
    # points on a circle of radius 40 m: every circumradius is 40 (elementary geometry)
    a = np.linspace(0, 1.2, 9)
    pts = np.column_stack([40 * np.cos(a), 40 * np.sin(a), np.zeros_like(a)])
    assert _min_radius(pts) == pytest.approx(40.0, rel=1e-9)
    assert _min_radius(np.array([[0, 0, 0], [1, 1, 0], [2, 2, 0.0]])) == math.inf


def test_bad_line_kind():
    t = valley()
    with pytest.raises(ParameterError, match="ground, raised"):
        find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), Mover(mu=0.1), line="floating")


def test_reach_geotiff_round_trip(tmp_path):
    t = valley()
    rm = reach(t, t.cell_center(8, 9), Mover(mu=0.2, drag=0.01), options=SearchOptions(neighbours=16))
    assert np.isnan(rm.time_s).any() and np.isfinite(rm.time_s).sum() > 10
    out = tmp_path / "reach.tif"
    from fallway.export import write_reach_geotiff

    write_reach_geotiff(rm, out)
    assert os.listdir(tmp_path) == ["reach.tif"]  # no temporary left behind
    with rasterio.open(out) as src:
        assert src.count == 2 and src.dtypes == ("float32", "float32")
        assert src.descriptions == ("arrival_time_s", "arrival_speed_m_s")
        assert src.crs == t.crs and src.transform == t.transform
        assert math.isnan(src.nodata)
        np.testing.assert_array_equal(src.read(1), rm.time_s.astype(np.float32))
        np.testing.assert_array_equal(src.read(2), rm.speed_m_s.astype(np.float32))


def test_min_radius_in_plan_and_in_3d_on_a_tilted_circle():
    # vertices on a circle of radius 10 m in a plane tilted 30° about the x axis: the 3D
    # circumradius of any three is 10 m (a circle through three of its points); in plan
    # the circle is an ellipse with semi-axes 10 and 10 cos 30°, whose smallest radius
    # of curvature is b²/a = 10 cos² 30° = 7.5 m, at the ends of the major axis
    from fallway.route import _min_radius

    phi = np.linspace(0.0, np.pi, 721)
    tilt = np.radians(30.0)
    pts = np.column_stack([10 * np.cos(phi), 10 * np.sin(phi) * np.cos(tilt), 10 * np.sin(phi) * np.sin(tilt)])
    assert _min_radius(pts, 3) == pytest.approx(10.0, rel=1e-9)
    assert _min_radius(pts) == pytest.approx(7.5, rel=1e-3)
