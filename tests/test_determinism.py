"""Same inputs, same bytes: two runs of the command line give identical result files.

summary.json and route.geojson hold no timestamps and no wall-clock figures (the search
seconds go to run.json, only with ``route --timings``); floats are written with Python's
shortest round-trip repr (JSON) or fixed decimals (CSV), so the bytes repeat exactly.
"""

from __future__ import annotations

import json
import subprocess
import sys

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


@pytest.mark.parametrize("refine", [False, pytest.param(True, marks=pytest.mark.slow)], ids=["lattice", "refined"])
def test_two_runs_byte_identical(tmp_path, refine):
    dem = _dem(tmp_path)
    flags = [] if refine else ["--no-refine"]
    _route(dem, tmp_path / "a", *flags)
    _route(dem, tmp_path / "b", *flags)
    for name in ("summary.json", "route.geojson", "profile.csv", "scenario.toml"):
        a = (tmp_path / "a" / name).read_bytes()
        b = (tmp_path / "b" / name).read_bytes()
        assert a == b, f"{name} differs between two identical runs"
    doc = json.loads((tmp_path / "a" / "summary.json").read_text())
    assert doc["refined"] is refine
    assert "compute_s" not in doc and "search_s" not in doc
    props = json.loads((tmp_path / "a" / "route.geojson").read_text())["features"][0]["properties"]
    assert "compute_s" not in props and "search_s" not in props
    assert not (tmp_path / "a" / "run.json").exists()


def test_timings_go_to_run_json(tmp_path):
    dem = _dem(tmp_path)
    _route(dem, tmp_path / "a", "--no-refine")
    _route(dem, tmp_path / "t", "--no-refine", "--timings")
    run = json.loads((tmp_path / "t" / "run.json").read_text())
    assert run["search"] > 0.0 and run["total"] >= run["search"]
    # asking for timings does not change the reproducible files
    for name in ("summary.json", "route.geojson"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "t" / name).read_bytes()


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
