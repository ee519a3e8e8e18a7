"""Same inputs, same bytes: two runs of the command line give identical result files.

Every file every command writes is compared (route, compare, reach, batch, demo), not a
chosen few.  summary.json and route.geojson hold no timestamps and no wall-clock figures
(the search seconds go to run.json, only with ``route --timings``); floats are written
with Python's shortest round-trip repr (JSON) or fixed decimals (CSV); SVG figures use a
fixed ``svg.hashsalt`` (matplotlib otherwise draws random clip-path ids); the GeoPackage's
``last_change`` comes from ``OGR_CURRENT_DATE`` (GDAL's GPKG driver otherwise stamps the
current time).  The runs are a second apart, so any clock reading would show.
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from conftest import plane, write_geotiff

CRS = "EPSG:32633"
X0, Y0 = 500_000.0, 4_000_000.0


def _dem(tmp_path):
    # a bowl-shaped slope with a ridge, so the line bends and refinement has work to do
    z, t = plane(16, 16, 5.0, -0.3, 0.05)
    r, c = np.mgrid[0:16, 0:16]
    z = z + 4.0 * np.exp(-((r - 8.0) ** 2 + (c - 8.0) ** 2) / 6.0)
    return write_geotiff(tmp_path / "dem.tif", z, t, CRS)


def _route(dem, out, *extra):
    args = [sys.executable, "-m", "fallway.cli", "route", str(dem), "--start", str(X0 + 2.5), str(Y0 - 40.0),
            "--end", str(X0 + 77.5), str(Y0 - 40.0), "--mu", "0.1", "--out", str(out), *extra]
    p = subprocess.run(args, capture_output=True, text=True, timeout=120)
    assert p.returncode == 0, p.stderr
    return p


def _files(folder: Path) -> dict:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def _same_files(a: Path, b: Path, expected) -> None:
    fa, fb = _files(a), _files(b)
    assert sorted(fa) == sorted(fb) == sorted(expected)
    differ = [n for n in fa if fa[n] != fb[n]]
    assert not differ, f"{differ} differ between two identical runs"


def _cli(*args):
    p = subprocess.run([sys.executable, "-m", "fallway.cli", *map(str, args)], capture_output=True, text=True,
                       timeout=300)
    assert p.returncode == 0, p.stderr
    return p


@pytest.mark.slow
@pytest.mark.parametrize("refine", [False, True], ids=["lattice", "refined"])
def test_two_runs_byte_identical(tmp_path, refine):
    from fallway.app import ROUTE_FILES

    dem = _dem(tmp_path)
    flags = [] if refine else ["--no-refine"]
    _route(dem, tmp_path / "a", *flags)
    time.sleep(1.1)
    _route(dem, tmp_path / "b", *flags)
    _same_files(tmp_path / "a", tmp_path / "b", ROUTE_FILES)
    doc = json.loads((tmp_path / "a" / "summary.json").read_text())
    assert doc["refined"] is refine
    assert "compute_s" not in doc and "search_s" not in doc
    props = json.loads((tmp_path / "a" / "route.geojson").read_text())["features"][0]["properties"]
    assert "compute_s" not in props and "search_s" not in props
    assert not (tmp_path / "a" / "run.json").exists()


@pytest.mark.slow
def test_timings_go_to_run_json(tmp_path):
    dem = _dem(tmp_path)
    _route(dem, tmp_path / "a", "--no-refine")
    _route(dem, tmp_path / "t", "--no-refine", "--timings")
    run = json.loads((tmp_path / "t" / "run.json").read_text())
    assert run["search"] > 0.0 and run["total"] >= run["search"]
    # asking for timings does not change the reproducible files
    for name in ("summary.json", "route.geojson"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "t" / name).read_bytes()


@pytest.mark.slow
def test_overwrite_without_timings_drops_stale_run_json(tmp_path):
    dem = _dem(tmp_path)
    _route(dem, tmp_path / "a", "--no-refine", "--timings")
    _route(dem, tmp_path / "a", "--no-refine", "--overwrite")
    assert not (tmp_path / "a" / "run.json").exists()


def test_in_process_repeat_identical(tmp_path):
    # the library itself: the same search twice gives the same line and times, bit for bit
    from fallway.physics import Mover
    from fallway.routing import find_route
    from fallway.terrain import load_terrain

    ter = load_terrain(_dem(tmp_path))
    a = find_route(ter, (X0 + 2.5, Y0 - 40.0), (X0 + 77.5, Y0 - 40.0), Mover(mu=0.1), refine=False)
    b = find_route(ter, (X0 + 2.5, Y0 - 40.0), (X0 + 77.5, Y0 - 40.0), Mover(mu=0.1), refine=False)
    assert np.array_equal(a.line, b.line)
    assert a.profile.travel_time_s == b.profile.travel_time_s
    assert np.array_equal(a.profile.time_s, b.profile.time_s)


@pytest.mark.slow
def test_compare_and_reach_byte_identical(tmp_path):
    from fallway.app import COMPARE_FILES

    dem = _dem(tmp_path)
    lines = tmp_path / "lines.geojson"
    lines.write_text(json.dumps({"type": "FeatureCollection",
                                 "crs": {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}},
                                 "features": [{"type": "Feature", "properties": {"name": "straight"},
                                               "geometry": {"type": "LineString", "coordinates": [
                                                   [X0 + 2.5, Y0 - 40.0], [X0 + 77.5, Y0 - 40.0]]}}]}))
    for name in ("a", "b"):
        _cli("compare", dem, lines, "--mu", "0.1", "--out", tmp_path / name)
        _cli("reach", dem, "--start", X0 + 2.5, Y0 - 40.0, "--mu", "0.1", "--out", tmp_path / name / "r" / "reach.tif")
        time.sleep(1.1)
    _same_files(tmp_path / "a", tmp_path / "b", [*COMPARE_FILES, "r/reach.tif", "r/reach.png"])


@pytest.mark.slow
def test_batch_byte_identical(tmp_path):
    dem = _dem(tmp_path)
    f = tmp_path / "batch.toml"
    f.write_text(f'[base]\ndem = "{dem.name}"\n[base.points]\nstart = [{X0 + 2.5}, {Y0 - 40.0}]\n'
                 f'end = [{X0 + 77.5}, {Y0 - 40.0}]\n[base.search]\nrefine = false\n[vary]\nmover.mu = [0.05, 0.1]\n')
    _cli("batch", f, "--out", tmp_path / "a", "--workers", 1)
    time.sleep(1.1)
    _cli("batch", f, "--out", tmp_path / "b", "--workers", 2)
    _same_files(tmp_path / "a", tmp_path / "b", ["batch.csv"] + [f"run-00{i}/{n}" for i in (1, 2)
                                                                 for n in ("profile.csv", "route.geojson",
                                                                           "summary.json")])


@pytest.mark.slow
def test_demo_byte_identical(tmp_path, demo_run):
    from fallway.app import DEMO_CABLE_DIR, DEMO_FILES, ROUTE_FILES

    first, p = demo_run  # an earlier run (the shared one, in another process)
    assert p.returncode == 0, p.stderr
    time.sleep(1.1)
    _cli("demo", "--out", tmp_path / "b")
    cable = [f"{DEMO_CABLE_DIR}/{n}" for n in ROUTE_FILES + ("supports.csv", "spans.csv")]
    _same_files(first, tmp_path / "b", DEMO_FILES + tuple(cable))
