"""The one routing path: summary fields, profile = traverse(line), refinement, plans, options; reach output."""

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
from fallway.params import Limits, LineSpec, SearchOptions
from fallway.physics import Mover, traverse
from fallway.results import RouteSummary
from fallway.routing import find_route, reach
from fallway.terrain import Terrain

#: Lift-off is not the subject here (tests/test_loads.py checks it): an enclosed line.
ENCLOSED = Limits(allow_liftoff=True)


def valley(rows=16, cols=18, cell=5.0):
    rng = np.random.default_rng(2)
    r, c = np.mgrid[0:rows, 0:cols]
    z = 120.0 - 2.2 * c - 1.5 * r + 0.08 * (r - rows / 2) ** 2 + rng.normal(scale=0.3, size=(rows, cols))
    return Terrain.from_array(z, Affine(cell, 0, 600_000.0, 0, -cell, 5_000_000.0), CRS.from_epsg(32632))


def test_lattice_route_summary_and_profile():
    t = valley()
    mover = Mover(mu=0.15, drag=0.005, v0=0.5)  # full normal model for the report
    r = find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), mover, refine=False, limits=ENCLOSED)
    json.dumps(r.summary.to_dict())  # JSON-ready
    assert r.summary.refined is False
    np.testing.assert_array_equal(r.line, r.lattice.points)
    # the reported motion is traverse of the line with the mover as given
    assert r.summary.travel_time_s == pytest.approx(traverse(r.line, mover).travel_time_s, rel=1e-12)
    assert r.summary.lattice_model_time_s == r.lattice.time_s
    # unrefined, the route is the lattice line: both timed with the same (full) model
    assert r.summary.lattice_time_s == pytest.approx(r.summary.travel_time_s, rel=1e-12)
    d = np.diff(r.line, axis=0)
    assert r.summary.length_m == pytest.approx(np.linalg.norm(d, axis=1).sum())
    assert r.summary.drop_m == pytest.approx(t.z[1, 1] - t.z[14, 16])
    assert r.summary.start_xyz[:2] == list(t.cell_center(1, 1))
    # gravity-normal mover: the route's time is the lattice's own
    g = Mover(mu=0.15, drag=0.005, v0=0.5, normal="gravity")
    rg = find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), g, refine=False, limits=ENCLOSED)
    assert rg.summary.travel_time_s == pytest.approx(rg.summary.lattice_time_s, rel=1e-9)


def test_refined_route_is_not_slower():
    t = valley()
    mover = Mover(mu=0.15, normal="gravity")
    r = find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), mover, search=SearchOptions(neighbours=8), limits=ENCLOSED)
    assert r.summary.refined is True and r.refinement is not None
    assert r.summary.travel_time_s <= r.summary.lattice_time_s * (1 + 1e-9)
    assert r.summary.travel_time_s == pytest.approx(traverse(r.line, mover).travel_time_s, rel=1e-12)


def test_bad_line_kind():
    t = valley()
    with pytest.raises(ParameterError, match="ground, raised"):
        find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), Mover(mu=0.1), line=LineSpec("floating"), limits=ENCLOSED)
    with pytest.raises(ParameterError, match="must be a fallway.LineSpec"):
        find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), Mover(mu=0.1), line="raised", limits=ENCLOSED)


def test_unknown_option_is_a_parameter_error():
    t = valley()
    with pytest.raises(ParameterError, match="unknown option bogus_option"):
        find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), Mover(mu=0.1), refine=False, bogus_option=1, limits=ENCLOSED)


def test_raised_line_without_refinement_is_raised():
    # a raised line reported without refinement is the raised search's line: in its band
    # above the ground at every vertex, at the given end heights (not a ground line)
    t = valley()
    spec = LineSpec("raised", (2.0, 15.0), 8.0, 3.0)
    r = find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), Mover(mu=0.1), line=spec, refine=False, limits=ENCLOSED)
    h = r.line[:, 2] - t.sample(r.line[:, 0], r.line[:, 1])
    assert r.summary.line_kind == "raised" and r.line_spec == spec
    assert h[0] == pytest.approx(8.0) and h[-1] == pytest.approx(3.0)
    assert np.all(h >= 2.0 - 1e-9) and np.all(h <= 15.0 + 1e-9)


def test_summary_fields_are_fixed():
    # the same fields, in the same order, whatever the options (absent values None)
    t = valley()
    a = find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), Mover(mu=0.1), refine=False, limits=ENCLOSED)
    b = find_route(t, t.cell_center(1, 1), t.cell_center(14, 16), Mover(mu=0.1, max_speed=40.0), limits=ENCLOSED,
                   search=SearchOptions(plan="corridor", coarse_factor=2), mu_range=(0.05, 0.15))
    names = [f for f in RouteSummary.__dataclass_fields__]
    assert list(a.summary.to_dict()) == names == list(b.summary.to_dict())
    assert a.summary.refine_converged is None and a.summary.corridor is None
    assert b.summary.corridor is not None and b.summary.search_plan == "corridor" and b.envelope is not None


def test_corridor_search_is_not_repeated(monkeypatch):
    # the best corridor step's lattice line is the route's: the fine grid is not searched again
    import fallway.routing as routing

    calls = []
    real = routing.lattice_line

    def counting(*args, **kw):
        calls.append(kw.get("allowed") is not None)
        return real(*args, **kw)

    monkeypatch.setattr(routing, "lattice_line", counting)
    t = valley(40, 44)
    r = find_route(t, t.cell_center(2, 2), t.cell_center(36, 40), Mover(mu=0.1), refine=False, limits=ENCLOSED,
                   search=SearchOptions(plan="corridor", coarse_factor=2))
    steps = r.summary.corridor["steps"]
    assert calls[0] is False and calls[1:] == [True] * len(steps)  # one coarse search, one per step


def test_reach_geotiff_round_trip(tmp_path):
    t = valley()
    rm = reach(t, t.cell_center(8, 9), Mover(mu=0.2, drag=0.01))
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




def test_refined_line_passes_its_via_points():
    # a via point is a fixed point of the line (the user's requirement): the refined line
    # must pass through it, not only the lattice line
    t = valley(24, 26)
    via = t.cell_center(4, 18)
    r = find_route(t, t.cell_center(1, 1), t.cell_center(21, 23), Mover(mu=0.1), via=[via], limits=ENCLOSED)
    assert r.summary.refined
    assert np.hypot(r.line[:, 0] - via[0], r.line[:, 1] - via[1]).min() < 1e-9
    assert r.summary.travel_time_s == pytest.approx(traverse(r.line, Mover(mu=0.1)).travel_time_s, rel=1e-12)


def test_auto_plan_weighs_the_time_estimate_as_well_as_the_cell_count():
    # 1900 x 1900 cells (3.61 M, under the 4 M cell cap): the 16-neighbour search is
    # estimated at 3.61 M x 4.5 µs = 16 s and runs on the full grid; with 32 neighbours
    # (twice the edges per cell) 32.5 s, over the 30 s a full-grid search may take, so the
    # corridor; so also with a via point (two legs: the grid searched twice)
    from fallway.routing import FULL_GRID_MAX_SECONDS, _choose_plan
    from fallway.scale import SEARCH_SECONDS_PER_CELL, search_seconds, terrain_source

    n = 1900
    t = Terrain.from_array(np.zeros((n, n), np.float32), Affine(1.0, 0, 0.0, 0, -1.0, float(n)), "EPSG:32633")
    src = terrain_source(t)
    ends = [(0.5, n - 0.5), (n - 0.5, 0.5)]
    via = [(n / 2, n / 2)]
    assert search_seconds(n * n) == pytest.approx(n * n * SEARCH_SECONDS_PER_CELL)
    assert search_seconds(n * n) <= FULL_GRID_MAX_SECONDS < search_seconds(n * n, neighbours=32)

    def plan(points, neighbours):
        return _choose_plan(src, points, Limits(), SearchOptions(neighbours=neighbours), False, 64 * 2 ** 30)

    assert plan(ends, 16) == "full"
    assert plan(ends, 32) == "corridor"
    assert plan([ends[0]] + via + [ends[1]], 16) == "corridor"
