"""Limits hold or the run fails clearly: exit 3, no outputs, the binding limit and its nearest workable value.

Through the command line (subprocess), as a user meets it; the nearest workable values are
checked against closed forms for a plane (CHECKS.md, "Incline with Coulomb friction"), and
the bisection itself (:mod:`fallway.relax`) against a toy search with a known threshold.
"""

from __future__ import annotations

import csv
import json
import math
import re
import subprocess
import sys

import numpy as np
import pytest

from conftest import plane, write_geotiff
from fallway.errors import NoFeasibleLine
from fallway.params import Limits, Mover
from fallway.relax import RELAXATIONS, find_workable, relaxations_for, round_looser

G = 9.80665
GRADE = 0.3  # the plane falls 0.3 m per metre east


@pytest.fixture
def strip(tmp_path):
    """A plane falling GRADE east, 9 x 41 cells of 5 m (EPSG:32633); start and end on its middle row, 200 m apart."""
    z, t = plane(9, 41, 5.0, -GRADE, 0.0, z0=200.0)
    path = write_geotiff(tmp_path / "strip.tif", z, t, "EPSG:32633")
    y = 4_000_000.0 - 22.5
    return path, (500_002.5, y), (500_202.5, y)


def _route(dem, start, end, out, *flags):
    args = [sys.executable, "-m", "fallway.cli", "route", str(dem), "--start", *map(str, start), "--end",
            *map(str, end), "--out", str(out), *map(str, flags)]
    return subprocess.run(args, capture_output=True, text=True, timeout=600)


def _workable(stderr: str, word: str) -> float:
    m = re.search(rf"{word} workable (?:at (?:most|least) )?(-?[0-9.e+-]+)", stderr)
    assert m, stderr
    return float(m.group(1))


def _assert_no_outputs(out):
    assert not out.exists() or not any(out.iterdir()), sorted(p.name for p in out.iterdir())


def test_speed_cap_too_low_exits_3_names_the_cap_and_a_workable_one(tmp_path, strip):
    dem, start, end = strip
    out = tmp_path / "run"
    p = _route(dem, start, end, out, "--mu", 0, "--max-speed", 10)
    assert p.returncode == 3, p.stderr
    assert len(p.stderr.strip().splitlines()) == 1 and "speed cap 10 m/s binds" in p.stderr, p.stderr
    _assert_no_outputs(out)
    cap = _workable(p.stderr, "lowest")
    # energy conservation (CHECKS.md incline formula with mu = 0): on any path without
    # friction or drag the speed at the end is sqrt(2 g drop), so no cap below it works,
    # and the straight line never goes faster; the bisection's grid is 3 figures (0.1 m/s)
    exact = math.sqrt(2 * G * GRADE * 200.0)
    assert exact <= cap <= exact + 0.1 + 1e-9, (cap, exact)
    p2 = _route(dem, start, end, out, "--mu", 0, "--max-speed", cap)
    assert p2.returncode == 0, p2.stderr
    s = json.loads((out / "summary.json").read_text())
    assert s["feasible"] is True and s["max_speed_m_s"] <= cap * (1 + 1e-9)


@pytest.mark.slow
def test_friction_that_stalls_names_the_highest_workable_mu(tmp_path, strip):
    dem, start, end = strip
    out = tmp_path / "run"
    p = _route(dem, start, end, out, "--mu", 0.35)
    assert p.returncode == 3 and "mu=0.35 stalls" in p.stderr, p.stderr
    _assert_no_outputs(out)
    mu = _workable(p.stderr, "highest")
    # CHECKS.md incline: from rest a = g (sin θ − μ cos θ) > 0 only while μ < tan θ; no line
    # on the plane is steeper than its fall line (tan θ = GRADE), so every μ >= GRADE stalls;
    # the bisection's grid is 3 figures (0.001 here)
    assert GRADE - 0.001 - 1e-12 <= mu < GRADE, mu
    p2 = _route(dem, start, end, out, "--mu", mu)
    assert p2.returncode == 0, p2.stderr


@pytest.mark.slow
def test_grade_window_names_the_widest_window_needed(tmp_path, strip):
    dem, start, end = strip
    out = tmp_path / "run"
    p = _route(dem, start, end, out, "--mu", 0.1, "--min-grade", 0.4)
    assert p.returncode == 3 and "smallest grade 0.4 binds" in p.stderr, p.stderr
    _assert_no_outputs(out)
    g = _workable(p.stderr, "highest")
    # geometry of a plane: no segment on it is steeper than the fall line (grade GRADE), and
    # the straight fall line from start to end has exactly that grade everywhere
    assert g == pytest.approx(GRADE, abs=1e-9)
    p2 = _route(dem, start, end, out, "--mu", 0.1, "--min-grade", g)
    assert p2.returncode == 0, p2.stderr


def _menger_radii(xyz: np.ndarray) -> np.ndarray:
    """Circumradius of each three consecutive vertices (R = abc / 4 area), written out here."""
    a = np.linalg.norm(xyz[1:-1] - xyz[:-2], axis=1)
    b = np.linalg.norm(xyz[2:] - xyz[1:-1], axis=1)
    c = np.linalg.norm(xyz[2:] - xyz[:-2], axis=1)
    area2 = np.linalg.norm(np.cross(xyz[1:-1] - xyz[:-2], xyz[2:] - xyz[:-2]), axis=1)
    with np.errstate(divide="ignore"):
        return np.where(area2 > 0, a * b * c / (2.0 * area2), np.inf)


@pytest.mark.slow
def test_refined_line_that_breaks_the_radius_exits_3_and_writes_nothing(tmp_path, write_geotiff):
    # a bowl 40 x 40 cells of 5 m; a via point forces a turn of the line
    n, cell = 40, 5.0
    z, t = plane(n, n, cell, 0.0, 0.0, z0=0.0)
    r, c = np.mgrid[0:n, 0:n]
    z = 100.0 - 0.35 * cell * c + 0.002 * ((r - n / 2) * cell) ** 2
    dem = write_geotiff(tmp_path / "bowl.tif", z, t, "EPSG:32633")
    start, via, end = (500_002.5, 3_999_902.5), (500_102.5, 3_999_982.5), (500_197.5, 3_999_902.5)
    out = tmp_path / "run"
    args = ["--mu", 0.1, "--via", *via, "--min-radius", 400]
    p = _route(dem, start, end, out, *args)
    assert p.returncode == 3, p.stderr
    assert "min_radius" in p.stderr and "bend radius 400 m binds" in p.stderr, p.stderr
    _assert_no_outputs(out)
    radius = _workable(p.stderr, "highest")
    assert 0 < radius < 400
    p2 = _route(dem, start, end, out, "--mu", 0.1, "--via", *via, "--min-radius", radius)
    assert p2.returncode == 0, p2.stderr
    with (out / "profile.csv").open(newline="") as fh:
        rows = list(csv.DictReader(fh))
    xyz = np.array([[float(row["x"]), float(row["y"]), float(row["z_line"])] for row in rows])
    # the written line meets the radius it was given (circumradius, computed here); vertices
    # within 1 mm of the previous kept one are skipped: the refined line can bunch a few
    # vertices 0.2 mm apart (seen here), where a circumradius measures rounding, not shape
    keep = [0]
    for i in range(1, len(xyz)):
        if np.linalg.norm(xyz[i] - xyz[keep[-1]]) >= 1e-3:
            keep.append(i)
    assert _menger_radii(xyz[keep]).min() >= radius * (1 - 1e-3)


# --------------------------------------------------------------------------- the bisection alone

def test_bisection_finds_a_known_threshold_on_the_three_figure_grid():
    # a toy search whose answer is known: a line exists when the cap is at least 12.34 m/s
    # and the smallest grade at most 0.0567 (both binding only together)
    def probe(m, lim):
        cap_ok = m.max_speed is None or m.max_speed >= 12.34
        grade_ok = lim.min_grade <= 0.0567
        return "line" if cap_ok and grade_ok else None

    mover, limits = Mover(max_speed=10.0), Limits(min_grade=0.1)
    cands = relaxations_for(mover, limits, reason="limits")
    assert [c.name for c in cands] == ["max_speed", "min_grade"]
    found, stats = find_workable(probe, mover, limits, cands, budget_s=60.0, max_probes=40)
    assert stats["together"] and {f.name: f.workable for f in found} == {"max_speed": 12.4, "min_grade": 0.0567}
    assert all(f.narrowed for f in found)


def test_every_relaxation_lifts_and_sets_its_own_parameter():
    m, lim = Mover(mu=0.2, max_speed=20.0), Limits(min_grade=0.1, max_grade=0.5, max_step_turn_deg=30.0, max_lateral_g=0.5, max_normal_g=2.0,
                                                       min_radius_m=12.0)
    for rel in RELAXATIONS:
        before = rel.get(m, lim)
        assert before is not None, rel.name
        m2, lim2 = rel.put(m, lim, rel.loosest)
        assert rel.get(m2, lim2) is None or rel.get(m2, lim2) == rel.loosest
        m3, lim3 = rel.put(m, lim, before * 0.5 if before else 1.0)
        assert rel.get(m3, lim3) == pytest.approx(before * 0.5 if before else 1.0)


def test_the_python_api_keeps_the_line_on_the_error():
    from fallway import find_route
    from fallway.terrain import Terrain

    # a 10 m/s cap on a frictionless plane that drops 30 m: no line arrives under sqrt(2 g 30)
    z = 100.0 - 0.3 * 5.0 * np.arange(21.0)[None, :].repeat(5, 0)
    t = Terrain.from_array(z, (5.0, 0, 0, 0, -5.0, 25.0))
    with pytest.raises(NoFeasibleLine) as ei:
        find_route(t, (2.5, 12.5), (102.5, 12.5), Mover(mu=0.0, max_speed=10.0), refine=False)
    err = ei.value
    assert err.reason == "limits" and err.binding == ("max_speed",)
    assert math.sqrt(2 * G * 30.0) <= err.workable["max_speed"] <= math.sqrt(2 * G * 30.0) + 0.1


def test_reach_that_reaches_nothing_exits_3_and_names_a_workable_friction(tmp_path, strip):
    dem, start, _ = strip
    out = tmp_path / "reach.tif"
    args = [sys.executable, "-m", "fallway.cli", "reach", str(dem), "--start", *map(str, start), "--mu", "0.35",
            "--out", str(out)]
    p = subprocess.run(args, capture_output=True, text=True, timeout=600)
    assert p.returncode == 3 and "reaches no cell" in p.stderr and "mu=0.35 stalls" in p.stderr, p.stderr
    assert not out.exists()
    # CHECKS.md incline: from rest the mover starts only while mu < tan θ = GRADE (the fall line)
    assert GRADE - 0.001 - 1e-12 <= _workable(p.stderr, "highest") < GRADE
