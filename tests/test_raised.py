"""Raised lines: the search in height (lattice/raised.py), clearance along every segment
(clearance.py, evaluate.limit_issues), the straight-plan option (section.py), end to end.

References (recomputed here, not copied):
- Brachistochrone, Johann Bernoulli 1696: cycloid through (L, H), T = phi sqrt(R / g).
- Friction brachistochrone with gravity-only normal force and a free-fall start:
  Ashby, Brittin, Love & Wyss, Am. J. Phys. 43 (1975) 902; Šalinić, Acta Mech. 208 (2009) 97
  (the arc y - mu x = C cos²(psi - beta), free fall C sin²(beta)); shared/CHECKS.md.
- Full normal force (N = g cos a + v² kappa): the singular arc of Pontryagin's principle in
  shared/CHECKS.md (literature: Van der Heijden & Diepstraten 1975, Hayen 2005 - from memory),
  v(a) = C cos a / [cos af + mu sin af + mu sin(af - 2a)], integrated with scipy's solve_ivp.
- V-shaped valley: analytic heights; clearance judged with scipy's RectBivariateSpline of
  the grid (cubic, s=0: the interpolating spline).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner
from scipy.integrate import quad, solve_ivp
from scipy.interpolate import RectBivariateSpline
from scipy.optimize import brentq, fsolve

from fallway import find_route
from fallway.cli import main
from fallway.clearance import CLEARANCE_TOL_M, clearance_along
from fallway.evaluate import limit_issues
from fallway.lattice.raised import raised_lattice_line
from fallway.params import Limits, LineSpec, Mover
from fallway.physics import traverse
from fallway.terrain import Terrain

from conftest import write_geotiff

G = 9.80665
L_M, H_M = 100.0, 40.0
# a flat valley floor; the line starts 70 m and ends 30 m above it (H = 40 m): the band
# [0, 100] leaves room for every optimum below to dip under its end height
START_H, END_H, BAND = 70.0, 30.0, (0.0, 100.0)


# --------------------------------------------------------------------------- references

def cycloid_time(L: float, H: float, g: float = G) -> float:
    """Bernoulli's brachistochrone from rest to (L across, H down)."""
    phi = brentq(lambda p: (p - math.sin(p)) / (1 - math.cos(p)) - L / H, 1e-6, 2 * math.pi - 1e-6)
    R = H / (1 - math.cos(phi))
    return phi * math.sqrt(R / g)


def friction_brachistochrone_time(L: float, H: float, mu: float, g: float = G) -> float:
    """Ashby et al. 1975 / Šalinić 2009: free fall C sin²(beta), then the arc (CHECKS.md)."""
    b = math.atan(mu)

    def dx(p, C):
        return -C * math.cos(b) * (math.cos(2 * p - b) + math.cos(b))

    def dy(p, C):
        return -2 * C * math.cos(b) * math.sin(p) * math.cos(p - b)

    def xy(C, pe):
        return quad(dx, math.pi / 2, pe, args=(C,))[0], C * math.sin(b) ** 2 + quad(dy, math.pi / 2, pe, args=(C,))[0]

    C, pe = fsolve(lambda v: np.array(xy(v[0], v[1])) - [L, H], [H, -0.5], xtol=1e-13)

    def dt(p):
        X = quad(dx, math.pi / 2, p, args=(C,))[0]
        Y = C * math.sin(b) ** 2 + quad(dy, math.pi / 2, p, args=(C,))[0]
        return math.hypot(dx(p, C), dy(p, C)) / math.sqrt(2 * g * (Y - mu * X))

    return math.sqrt(2 * C * math.sin(b) ** 2 / g) + quad(dt, pe, math.pi / 2, limit=200, epsabs=1e-12)[0]


def singular_arc_time(L: float, H: float, mu: float, g: float = G) -> float:
    """The full-normal-force optimum (CHECKS.md): x, y, t integrated in the tangent angle."""
    am = math.atan(mu)

    def run(af, C):
        def v(a):
            return C * math.cos(a) / (math.cos(af) + mu * math.sin(af) + mu * math.sin(af - 2 * a))

        def rhs(a, s):
            if abs(a - am) < 1e-7:  # the removable singularity at tan a = mu
                a = am + 1e-7
            h = 1e-7
            va = v(a)
            du = va * (v(a + h) - v(a - h)) / (2 * h)
            ds = (du - mu * va * va) / (g * (math.sin(a) - mu * math.cos(a)))
            return [math.cos(a) * ds, math.sin(a) * ds, ds / max(va, 1e-300)]

        return solve_ivp(rhs, [math.pi / 2 - 1e-9, af], [0, 0, 0], rtol=1e-11, atol=1e-12, method="DOP853").y[:, -1]

    af, C = fsolve(lambda p: run(*p)[:2] - [L, H], [math.radians(-25), 20.0])
    return float(run(af, C)[2])


def test_references_reproduce_the_worked_values():
    # shared/CHECKS.md worked values, recomputed by the functions above
    assert cycloid_time(100, 40) == pytest.approx(5.784069, abs=2e-6)
    assert friction_brachistochrone_time(100, 40, 0.1) == pytest.approx(6.0554116, abs=2e-6)
    assert friction_brachistochrone_time(120, 45, 0.2) == pytest.approx(7.06987, abs=2e-5)
    assert singular_arc_time(100, 40, 0.1) == pytest.approx(6.364218, abs=2e-5)


# --------------------------------------------------------------------------- flat floor, CLI

def _flat_tif(tmp_path):
    """A flat floor at 0 m, 1 m cells, 30 x 131, UTM 33N."""
    x0, y0 = 500_000.0, 4_000_000.0
    path = write_geotiff(tmp_path / "flat.tif", np.zeros((30, 131)), (1.0, 0, x0, 0, -1.0, y0), "EPSG:32633")
    return path, (x0 + 15.5, y0 - 15.0), (x0 + 15.5 + L_M, y0 - 15.0)


def _route_cli(tmp_path, mu, normal, *extra):
    dem, a, b = _flat_tif(tmp_path)
    out = tmp_path / "out"
    res = CliRunner().invoke(main, [str(v) for v in (
        "route", dem, "--start", *a, "--end", *b, "--mu", mu, "--normal", normal, "--line", "raised",
        "--clearance", *BAND, "--start-height", START_H, "--end-height", END_H, "--out", out, *extra)],
        catch_exceptions=False)
    assert res.exit_code == 0, res.output
    return json.loads((out / "summary.json").read_text()), out


@pytest.mark.slow
@pytest.mark.parametrize("mu", [0.0, 0.1, 0.3])
def test_flat_raised_route_is_the_brachistochrone(tmp_path, mu):
    # from rest over a flat floor: the cycloid (mu = 0) and the friction brachistochrone
    # with its free fall (Ashby 1975; Šalinić 2009), within 0.2 % and never below
    s, _ = _route_cli(tmp_path, mu, "gravity")
    ref = cycloid_time(L_M, H_M) if mu == 0 else friction_brachistochrone_time(L_M, H_M, mu)
    assert s["feasible"] and s["search_plan"] == "raised"
    assert ref * (1 - 1e-9) <= s["travel_time_s"] <= ref * 1.002
    assert s["lattice_time_s"] >= ref  # the lattice line is a feasible line: never below the optimum
    assert s["min_clearance_m"] >= BAND[0] - CLEARANCE_TOL_M and s["max_clearance_m"] <= BAND[1] + CLEARANCE_TOL_M


@pytest.mark.slow
def test_flat_raised_route_full_normal_force(tmp_path):
    # the singular-arc optimum of the full normal force (CHECKS.md), within 0.3 %
    s, _ = _route_cli(tmp_path, 0.1, "full")
    ref = singular_arc_time(L_M, H_M, 0.1)
    assert s["feasible"]
    assert ref * (1 - 1e-9) <= s["travel_time_s"] <= ref * 1.003


@pytest.mark.slow
def test_straight_plan_is_straight_within_a_centimetre(tmp_path):
    # --straight-plan: the exported plan (profile.csv) lies on the straight start-end line
    # to 1 cm (plane geometry: distance of each vertex from the line)
    dem, a, _ = _flat_tif(tmp_path)
    b = (a[0] + 90.0, a[1] - 12.0)  # a diagonal line
    out = tmp_path / "out"
    res = CliRunner().invoke(main, [str(v) for v in (
        "route", dem, "--start", *a, "--end", *b, "--mu", 0.1, "--normal", "gravity", "--line", "raised",
        "--clearance", 0, 60, "--start-height", 50, "--end-height", 20, "--straight-plan", "--out", out)],
        catch_exceptions=False)
    assert res.exit_code == 0, res.output
    rows = np.genfromtxt(out / "profile.csv", delimiter=",", names=True)
    d = np.array([b[0] - a[0], b[1] - a[1]]) / math.hypot(b[0] - a[0], b[1] - a[1])
    off = (rows["x"] - a[0]) * -d[1] + (rows["y"] - a[1]) * d[0]
    assert np.abs(off).max() <= 0.01
    s = json.loads((out / "summary.json").read_text())
    # a straight plan over a flat floor is the friction brachistochrone in that vertical plane
    ref = friction_brachistochrone_time(math.hypot(90.0, 12.0), 30.0, 0.1)
    assert s["feasible"] and ref * (1 - 1e-9) <= s["travel_time_s"] <= ref * 1.002


# --------------------------------------------------------------------------- a V-shaped valley

def v_valley(cell=2.0):
    """A V valley running north-south: z = 0.3 |x - 100| over 0..200 m (x), 0..80 m (y)."""
    cols, rows = 101, 41
    x = (np.arange(cols) + 0.5) * cell
    z = np.tile(0.3 * np.abs(x - 100.0), (rows, 1))
    return Terrain.from_array(z, (cell, 0, 0.0, 0, -cell, rows * cell))


def test_v_valley_raised_line_crosses_in_its_band():
    # a raised line across the V: the plan is (nearly) the straight crossing, and its dense
    # clearance, judged on scipy's own interpolating spline of the grid, stays in the band
    t = v_valley()
    a, b = (10.0, 41.0), (190.0, 41.0)
    band = (2.0, 40.0)
    r = find_route(t, a, b, Mover(mu=0.02, normal="gravity"), line=LineSpec("raised", band, 10.0, 5.0))
    s = r.summary
    assert s.feasible
    assert s.plan_length_m <= 1.03 * math.dist(a, b)
    rows, cols = t.shape
    xc, yc = t.cell_center(np.zeros(cols, int), np.arange(cols))[0], t.cell_center(np.arange(rows), np.zeros(rows, int))[1]
    spl = RectBivariateSpline(yc[::-1], xc, t.z[::-1], kx=3, ky=3, s=0)
    P = r.line
    n = np.maximum(1, np.ceil(np.hypot(*np.diff(P[:, :2], axis=0).T) / (0.25 * t.cell_size))).astype(int)
    Q = np.vstack([P[i] + np.linspace(0, 1, k, endpoint=False)[:, None] * (P[i + 1] - P[i]) for i, k in enumerate(n)]
                  + [P[-1:]])
    h = Q[:, 2] - spl.ev(Q[:, 1], Q[:, 0])
    assert h.min() >= band[0] - CLEARANCE_TOL_M and h.max() <= band[1] + CLEARANCE_TOL_M
    # the reported extremes are those of the line (to the sampling)
    assert s.min_clearance_m == pytest.approx(h.min(), abs=0.05)
    # and it does cross the valley above its floor (the floor is 30 m below the rims)
    assert float(np.min(P[:, 2] - 0.3 * np.abs(P[:, 0] - 100.0))) >= band[0] - CLEARANCE_TOL_M


# --------------------------------------------------------------------------- pieces

def test_clearance_check_samples_between_vertices():
    # two vertices 4 m up over a 1 m-cell plane with a 6 m ridge between them: the chord
    # passes 2 m under the ridge's top (plane geometry); limit_issues flags "clearance",
    # though every vertex is in the band
    z = np.zeros((9, 21))
    z[:, 10] = 6.0
    t = Terrain.from_array(z, (1.0, 0, 0, 0, -1.0, 9.0))
    line = np.array([(2.5, 4.5, 4.0), (18.5, 4.5, 4.0)])
    prof = traverse(line, Mover(mu=0.0, v0=5.0, normal="gravity"))
    assert limit_issues(t, line, prof, Limits(), clearance_m=(1.0, 10.0)) == ["clearance"]
    above = line + [0, 0, 4.0]  # 8 m up: 2 m over the ridge
    assert limit_issues(t, above, prof, Limits(), clearance_m=(1.0, 10.0)) == []
    s, h = clearance_along(t, line)
    assert h.min() == pytest.approx(4.0 - t.sample(np.array([10.5]), np.array([4.5]))[0], abs=1e-9)


def test_raised_search_edges_keep_the_band_over_a_ridge():
    # every edge of the raised lattice line, sampled finely on the lattice's bilinear
    # ground (Terrain.sample_linear), stays in the band; the ridge is 12 m high, the
    # band 1-5 m, so the line must climb over it within the band on both sides
    y, x = np.mgrid[0:20, 0:60].astype(float)
    z = 40.0 - 0.5 * x + 12.0 * np.exp(-((x - 30) / 4.0) ** 2)
    t = Terrain.from_array(z, (1.0, 0, 0, 0, -1.0, 20.0))
    ln = raised_lattice_line(t, (2.5, 10.5), (57.5, 10.5), Mover(mu=0.0, v0=12.0), LineSpec("raised", (1.0, 5.0), 3, 3))
    P = ln.points
    k = 64
    Q = np.vstack([P[i] + np.linspace(0, 1, k)[:, None] * (P[i + 1] - P[i]) for i in range(len(P) - 1)])
    h = Q[:, 2] - t.sample_linear(Q[:, 0], Q[:, 1])
    # half-cell samples leave the bilinear ground's curvature between them: a few cm on this ridge
    assert h.min() >= 1.0 - 0.05 and h.max() <= 5.0 + 0.05
    assert ln.time_s == pytest.approx(traverse(P, Mover(mu=0.0, v0=12.0, normal="gravity")).travel_time_s, rel=1e-9)


def test_more_layers_never_slower_on_a_flat_floor():
    # on a flat floor the layers of 2^k + 1 nest (every line of the coarser lattice is a
    # line of the finer): the lattice time cannot grow; the cycloid bounds it below
    t = Terrain.from_array(np.zeros((12, 105)), (1.0, 0, 0, 0, -1.0, 12.0))
    times = [raised_lattice_line(t, (2.5, 6.0), (102.5, 6.0), Mover(mu=0.0), LineSpec("raised", (0.0, 64.0), 60.0,
                                 20.0, height_layers=n)).time_s for n in (5, 9, 17, 33)]
    assert all(b <= a + 1e-12 for a, b in zip(times, times[1:]))
    assert times[-1] >= cycloid_time(100.0, 40.0)


def test_long_section_shades_the_band():
    # the long-section of a raised route draws its band as a strip ground + [min, max]
    # (the ground: scipy's spline of the grid, as in test_v_valley_raised_line_crosses_in_its_band)
    import matplotlib

    matplotlib.use("Agg")
    from fallway.plot import plot_profile

    t = v_valley()
    band = (2.0, 40.0)
    r = find_route(t, (10.0, 41.0), (190.0, 41.0), Mover(mu=0.02, normal="gravity"),
                   line=LineSpec("raised", band, 10.0, 5.0), refine=False, limits=Limits(allow_liftoff=True))
    ax = plot_profile(r, t)
    (strip,) = [c for c in ax.collections if c.get_gid() == "fallway-band"]
    y = np.concatenate([p.vertices[:, 1] for p in strip.get_paths()])
    # lowest: the valley floor (0 m at x = 100) + 2 m; highest: the rim under the start
    # (0.3 x 90 = 27 m, away from the kink the spline is exact on the linear flank) + 40 m
    assert y.min() == pytest.approx(band[0], abs=0.3)
    assert y.max() == pytest.approx(27.0 + band[1], abs=1e-6)
    assert not [c for c in ax.collections if c.get_gid() == "fallway-supports"]


def test_straight_plan_needs_a_raised_line(tmp_path):
    # a bad combination is one clear error line and a non-zero exit, nothing written
    dem, a, b = _flat_tif(tmp_path)
    out = tmp_path / "out"
    res = CliRunner().invoke(main, [str(v) for v in ("route", dem, "--start", *a, "--end", *b, "--straight-plan",
                                                      "--out", out)])
    assert res.exit_code != 0
    assert "straight_plan is for a raised line" in res.output and "Traceback" not in res.output
    assert not out.exists()
