"""Evaluating and comparing lines: reading candidate lines, draping, timing, ranking, envelope, robust plan.

References (outside the project) are named beside each check:
- incline with Coulomb friction, any mechanics text: a = g (sin t - mu cos t),
  t = (sqrt(v0² + 2 a s) - v0) / a, stop after s = v0² / (2 |a|) when a < 0;
- an independent drape (scipy.interpolate.RegularGridInterpolator, cubic) and
  re-integration (scipy.integrate.solve_ivp) of d(v²)/dp along the plan line with
  gravity-normal friction and quadratic drag, written in this file;
- circumscribed circle of a triangle, R = abc / (4 K) (Euclid IV.5; any geometry text);
- pyproj for the reference coordinate transforms; RFC 7946 for GeoJSON (lon/lat).
"""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from rasterio.crs import CRS

from fallway.errors import FallwayIOError, InputWarning, NoFeasibleLine, ParameterError
from fallway.evaluate import COMPARISON_COLUMNS, ENVELOPE_COLUMNS, drape, envelope, evaluate_line
from fallway.geometry import min_radius_m
from fallway.params import Limits, SearchOptions
from fallway.physics import Mover
from fallway.routing import compare, find_route
from fallway.terrain import Terrain
from fallway.vector import read_lines


def min_bend_radius_m(xy, spacing_m=None):
    return min_radius_m(xy, dims=2, spacing_m=spacing_m)


def robust(t, s0, e0, mover, lo, hi, **kw):
    """The robust plan of find_route (raises NoFeasibleLine when no line works)."""
    return find_route(t, s0, e0, mover, mu_range=(lo, hi), robust=True, **kw)


def by_candidates(t, s0, e0, mover, lo, hi, *, refine=False):
    """The single-friction candidate searches on their own (the robust plan's fallback)."""
    from fallway.params import Limits, LineSpec
    from fallway.routing import _candidate_searches, _Job
    from fallway.scale import terrain_source

    job = _Job(mover=mover, limits=Limits(), line=LineSpec(), search=SearchOptions(), refine=refine, via=())
    tried = []
    best = _candidate_searches(terrain_source(t), [tuple(s0), tuple(e0)], job, (lo, hi), None, tried)
    return best, tried

G0 = 9.80665  # standard gravity (3rd CGPM, 1901)
UTM33 = CRS.from_epsg(32633)
X0, Y0 = 500_000.0, 4_000_000.0


def plane_terrain(gx: float, gy: float, rows: int = 40, cols: int = 40, cell: float = 5.0, z0: float = 300.0):
    """A tilted plane z = z0 + gx (x - X0) + gy (y - Y0), heights exact at cell centres."""
    r, c = np.mgrid[0:rows, 0:cols]
    x = X0 + (c + 0.5) * cell
    y = Y0 - (r + 0.5) * cell
    return Terrain.from_array(z0 + gx * (x - X0) + gy * (y - Y0), Affine(cell, 0, X0, 0, -cell, Y0), UTM33)


def incline_time(v0: float, s: float, sin_t: float, cos_t: float, mu: float, g: float = G0) -> tuple[float, float]:
    """Closed-form time and exit speed on an incline (any mechanics text)."""
    a = g * (sin_t - mu * cos_t)
    v = math.sqrt(v0 * v0 + 2.0 * a * s)
    return (v - v0) / a, v


def plane_segment(g_vec, p, q):
    """Length, sin and cos of the slope of the straight 3D segment over plan p -> q on the plane."""
    d = np.asarray(q, float) - np.asarray(p, float)
    plan = math.hypot(*d)
    dz = float(np.dot(g_vec, d))
    s = math.hypot(plan, dz)
    return s, -dz / s, plan / s


# --------------------------------------------------------------------------- incline

@pytest.mark.parametrize("normal", ["gravity", "full"])
def test_straight_line_on_incline_matches_closed_form(normal):
    # an oblique straight line drawn as three collinear segments: the drape adds vertices,
    # the line stays one straight 3D segment on the plane
    gvec = (-0.15, 0.35)
    t = plane_terrain(*gvec)
    p0, p3 = np.array([X0 + 30.0, Y0 - 12.0]), np.array([X0 + 160.0, Y0 - 185.0])
    xy = np.array([p0, p0 + 0.3 * (p3 - p0), p0 + 0.55 * (p3 - p0), p3])
    mover = Mover(mu=0.12, v0=1.5, normal=normal)
    pts = drape(t, xy)
    assert np.max(np.hypot(*np.diff(pts[:, :2], axis=0).T)) <= 0.5 * t.cell_size + 1e-9
    r = evaluate_line(t, pts, mover, name="oblique")
    s, sin_t, cos_t = plane_segment(gvec, p0, p3)
    t_ref, v_ref = incline_time(1.5, s, sin_t, cos_t, 0.12)  # any mechanics text
    assert r.travel_time_s == pytest.approx(t_ref, rel=1e-6)
    assert r.exit_speed_m_s == pytest.approx(v_ref, rel=1e-6)
    assert r.length_m == pytest.approx(s, rel=1e-9)
    assert r.min_radius_m == math.inf and r.status == "ok"


def test_dogleg_on_incline_chains_closed_form():
    # two straight segments of different slope; gravity-normal model: no loss at the corner,
    # each leg is an incline entered at the previous leg's exit speed (any mechanics text)
    gvec = (0.0, 0.3)
    t = plane_terrain(*gvec)
    a, b, c = (X0 + 20.0, Y0 - 15.0), (X0 + 60.0, Y0 - 110.0), (X0 + 150.0, Y0 - 170.0)
    mover = Mover(mu=0.1, normal="gravity")
    r = evaluate_line(t, drape(t, [a, b, c]), mover, radius_xy=[a, b, c])
    s1, sn1, cs1 = plane_segment(gvec, a, b)
    s2, sn2, cs2 = plane_segment(gvec, b, c)
    t1, v1 = incline_time(0.0, s1, sn1, cs1, 0.1)
    t2, v2 = incline_time(v1, s2, sn2, cs2, 0.1)
    assert r.travel_time_s == pytest.approx(t1 + t2, rel=1e-6)
    assert r.exit_speed_m_s == pytest.approx(v2, rel=1e-6)
    # plan bend radius: circumradius through the three drawn vertices, R = abc / (4 K)
    la, lb, lc = (math.dist(a, b), math.dist(b, c), math.dist(c, a))
    area = abs((b[0] - a[0]) * (c[1] - a[1]) - (b[1] - a[1]) * (c[0] - a[0])) / 2.0
    assert r.min_radius_m == pytest.approx(la * lb * lc / (4.0 * area), rel=1e-12)
    assert r.max_grade == pytest.approx(max(0.3 * 95 / math.dist(a, b), 0.3 * 60 / math.dist(b, c)), rel=1e-9)


# --------------------------------------------------------------------------- independent re-integration

SITE_CELL = 5.0


def site_z(x, y):
    """A smooth valley: falling south, a trough along x = X0 + 200, a bump in the east."""
    xl = np.asarray(x) - X0
    yl = np.asarray(y) - Y0
    return (400.0 + 0.35 * yl + 0.0015 * (xl - 200.0) ** 2 + 6.0 * np.sin(xl / 45.0) * np.cos(yl / 70.0))


def site_terrain():
    rows, cols = 80, 80
    r, c = np.mgrid[0:rows, 0:cols]
    x = X0 + (c + 0.5) * SITE_CELL
    y = Y0 - (r + 0.5) * SITE_CELL
    return Terrain.from_array(site_z(x, y), Affine(SITE_CELL, 0, X0, 0, -SITE_CELL, Y0), UTM33)


def independent_run(terrain_z, transform, xy, mu, k, v0, g=G0, stall=0.0):
    """Independent drape and integration along a plan polyline.

    Heights from scipy's cubic RegularGridInterpolator on the cell centres; along each
    straight plan leg (plan distance p) with gravity-normal friction (friction work mu g dp)
    and drag k v²: d(v²)/dp = 2 g (-dz/dp - mu) - 2 k v² ds/dp, dt/dp = (ds/dp) / v,
    ds/dp = sqrt(1 + (dz/dp)²).  Returns (time or None, 3D station of the stall or None).
    """
    from scipy.integrate import solve_ivp
    from scipy.interpolate import CubicSpline, RegularGridInterpolator

    rows, cols = terrain_z.shape
    xs = transform.c + (np.arange(cols) + 0.5) * transform.a
    ys = transform.f + (np.arange(rows) + 0.5) * transform.e  # descending
    f = RegularGridInterpolator((ys[::-1], xs), terrain_z[::-1], method="cubic")

    u, t_acc, s_acc = v0 * v0, 0.0, 0.0
    for a, b in zip(xy[:-1], xy[1:]):
        a, b = np.asarray(a, float), np.asarray(b, float)
        L = math.dist(a, b)
        # z(p) along the leg: the grid interpolant sampled every 0.1 m, then a cubic spline in p
        p_s = np.linspace(0.0, L, int(math.ceil(L / 0.1)) + 1)
        q = a + p_s[:, None] * (b - a) / L
        zp_spline = CubicSpline(p_s, f(q[:, ::-1])).derivative()

        def rhs(p, y):
            zp = float(zp_spline(p))
            sp = math.sqrt(1.0 + zp * zp)
            uu = max(y[0], 1e-300)
            return [2 * g * (-zp - mu) - 2 * k * uu * sp, sp / math.sqrt(uu), sp]

        def stalled(p, y):
            return y[0] - stall * stall - 1e-12
        stalled.terminal = True
        stalled.direction = -1
        sol = solve_ivp(rhs, (0.0, L), [u, t_acc, s_acc], method="DOP853", rtol=1e-10, atol=1e-10,
                        events=stalled, max_step=SITE_CELL)
        if sol.status == 1:
            return None, float(sol.y_events[0][0][2])
        u, t_acc, s_acc = sol.y[:, -1]
    return float(t_acc), None


SITE_LINES = [
    # straight down the valley side
    ("direct", [(X0 + 120.0, Y0 - 20.0), (X0 + 190.0, Y0 - 330.0)]),
    # a swing east over the bump and back
    ("swing", [(X0 + 120.0, Y0 - 20.0), (X0 + 260.0, Y0 - 150.0), (X0 + 190.0, Y0 - 330.0)]),
    # down into the valley, then doubling back uphill to the north: must stall
    ("doubles back", [(X0 + 120.0, Y0 - 20.0), (X0 + 180.0, Y0 - 160.0), (X0 + 230.0, Y0 - 40.0)]),
]


def test_ranking_and_times_match_independent_integration():
    t = site_terrain()
    mover = Mover(mu=0.2, drag=0.004, v0=1.0, normal="gravity")
    cmp = compare(t, SITE_LINES, mover, optimum=False)
    ref = {name: independent_run(t.z, t.transform, xy, 0.2, 0.004, 1.0) for name, xy in SITE_LINES}
    rows = {r.name: r for r in cmp.rows}
    # feasible lines: the times agree with scipy's integration (chords of half a cell vs
    # the smooth line and two different cubic interpolants: measured 5e-5)
    for name in ("direct", "swing"):
        t_ref, stall_ref = ref[name]
        assert stall_ref is None and rows[name].travel_time_s == pytest.approx(t_ref, rel=2e-4)
    # the line that doubles back stalls where the independent integration does, within a cell
    t_ref, stall_ref = ref["doubles back"]
    assert t_ref is None and rows["doubles back"].status == "stalls"
    assert rows["doubles back"].travel_time_s is None
    assert abs(rows["doubles back"].stalled_at_m - stall_ref) < SITE_CELL
    # ranking: the independent times sorted, the stalled line last
    order = sorted((n for n in ref if ref[n][0] is not None), key=lambda n: ref[n][0]) + ["doubles back"]
    assert [r.name for r in cmp.rows] == order


def test_stalled_lines_rank_by_stall_station():
    t = plane_terrain(0.0, 0.1)
    mover = Mover(mu=0.2, v0=4.0, normal="gravity")
    # on a 10 % plane with mu = 0.2 every downhill line decelerates: a = g (sin - mu cos) < 0;
    # a steeper line stalls later (any mechanics text: s = v0² / (2 |a|))
    lines = [("across", [(X0 + 20.0, Y0 - 20.0), (X0 + 180.0, Y0 - 20.0)]),
             ("down", [(X0 + 20.0, Y0 - 20.0), (X0 + 20.0, Y0 - 180.0)])]
    cmp = compare(t, lines, mover, optimum=False)
    assert [r.name for r in cmp.rows] == ["down", "across"]
    th = math.atan(0.1)
    a = G0 * (math.sin(th) - 0.2 * math.cos(th))
    assert cmp.rows[0].stalled_at_m == pytest.approx(16.0 / (2 * -a), abs=1e-6)
    assert cmp.rows[1].stalled_at_m == pytest.approx(16.0 / (2 * 0.2 * G0), abs=1e-6)


# --------------------------------------------------------------------------- envelope

@settings(max_examples=30, deadline=None)
@given(grade=st.floats(0.05, 1.2), mus=st.lists(st.floats(0.0, 0.5), min_size=3, max_size=3),
       v0=st.floats(0.5, 6.0))
def test_envelope_on_plane_is_monotone_in_mu(grade, mus, v0):
    lo, mid, hi = sorted(mus)
    pts = np.array([[0.0, 0.0, 40.0 * grade], [40.0, 0.0, 0.0]])
    env = envelope(None, pts, Mover(mu=mid, v0=v0), lo, hi)
    th = math.atan(grade)
    res = [env.low, env.nominal, env.high]
    for r, mu in zip(res, (lo, mid, hi)):
        a = G0 * (math.sin(th) - mu * math.cos(th))
        v2 = v0 * v0 + 2 * a * math.hypot(40.0, 40.0 * grade)  # any mechanics text
        if v2 > 1e-9:
            assert r.exit_speed_m_s == pytest.approx(math.sqrt(v2), rel=1e-9, abs=1e-9)
        elif v2 < -1e-9:
            assert r.stalled_at_m is not None
    speeds = [-1.0 if r.exit_speed_m_s is None else r.exit_speed_m_s for r in res]
    assert speeds[0] >= speeds[1] - 1e-12 and speeds[1] >= speeds[2] - 1e-12
    stalls = [r.stalled_at_m is not None for r in res]
    assert stalls == sorted(stalls)  # a stall at some friction means a stall at every higher one


def test_line_feasible_at_low_friction_stalling_at_high_is_reported():
    # a 20 % grade entered at 3 m/s: accelerates at mu = 0.1, decelerates at mu = 0.3
    t = plane_terrain(0.0, 0.2)
    xy = [(X0 + 100.0, Y0 - 10.0), (X0 + 100.0, Y0 - 190.0)]
    mover = Mover(mu=0.15, v0=3.0, normal="gravity")
    env = envelope(t, drape(t, xy), mover, 0.1, 0.3, name="gentle")
    assert env.low.status == "ok" and env.nominal.status == "ok"
    assert env.high.status == "stalls"
    assert env.verdict == "stalls at high friction" and not env.robust
    th = math.atan(0.2)
    a_hi = G0 * (math.sin(th) - 0.3 * math.cos(th))
    assert env.high.stalled_at_m == pytest.approx(9.0 / (2 * -a_hi), rel=1e-6)  # s = v0²/(2|a|)
    s, sn, cs = plane_segment((0.0, 0.2), *xy)
    assert env.exit_speed_range_m_s[1] == pytest.approx(incline_time(3.0, s, sn, cs, 0.1)[1], rel=1e-6)
    assert env.exit_speed_range_m_s[0] is None


def test_too_fast_at_low_friction_is_reported_with_station():
    t = plane_terrain(0.0, 0.5)
    xy = [(X0 + 100.0, Y0 - 10.0), (X0 + 100.0, Y0 - 190.0)]
    mover = Mover(mu=0.45, max_speed=14.0, normal="gravity")
    env = envelope(t, drape(t, xy), mover, 0.2, 0.48)
    assert env.verdict == "too fast at low friction"
    assert env.nominal.status == "ok" and env.low.status == "overspeed"
    th = math.atan(0.5)
    a = G0 * (math.sin(th) - 0.2 * math.cos(th))
    s_limit = 196.0 / (2 * a)  # v² = 2 a s reaches 14² (any mechanics text)
    step = math.hypot(0.5 * t.cell_size, 0.5 * 0.5 * t.cell_size)
    assert s_limit <= env.low.overspeed_m <= s_limit + step


def test_mu_range_must_hold_nominal():
    with pytest.raises(ParameterError, match="must lie in the range"):
        envelope(None, [(0, 0, 10.0), (20.0, 0, 0)], Mover(mu=0.5), 0.1, 0.3)
    with pytest.raises(ParameterError, match="LO <= HI"):
        envelope(None, [(0, 0, 10.0), (20.0, 0, 0)], Mover(mu=0.2), 0.3, 0.1)


# --------------------------------------------------------------------------- CSV and records

def test_csv_columns_ranking_and_envelope(tmp_path):
    t = site_terrain()
    mover = Mover(mu=0.2, drag=0.004, v0=1.0, normal="gravity")
    cmp = compare(t, SITE_LINES, mover, optimum=False, mu_range=(0.15, 0.3))
    out = cmp.to_csv(tmp_path / "comparison.csv")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["comparison.csv"]  # no temporary left
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    assert tuple(rows[0]) == COMPARISON_COLUMNS + ENVELOPE_COLUMNS
    body = [dict(zip(rows[0], r)) for r in rows[1:]]
    assert [r["name"] for r in body] == [r.name for r in cmp.rows]
    times = [float(r["travel_time_s"]) for r in body if r["travel_time_s"]]
    assert times == sorted(times) and len(times) == 2
    stalled = body[-1]
    assert stalled["status"] == "stalls" and stalled["travel_time_s"] == "" and stalled["exit_speed_m_s"] == ""
    assert float(stalled["stalled_at_m"]) == pytest.approx(cmp.rows[-1].stalled_at_m, abs=0.005)
    # fixed formatting: 3 decimals for times, 2 for lengths
    assert all(len(r["travel_time_s"].split(".")[1]) == 3 for r in body if r["travel_time_s"])
    assert all(len(r["length_m"].split(".")[1]) == 2 for r in body)
    # the same independent solution ranks the frictions: exit speed at HI below LO
    for r in body[:-1]:
        if r["exit_speed_hi_mu_m_s"]:
            assert float(r["exit_speed_hi_mu_m_s"]) < float(r["exit_speed_lo_mu_m_s"])
    rec = cmp.to_records()
    assert rec[0]["computed"] is False and set(COMPARISON_COLUMNS) <= set(rec[0])
    json.dumps(rec)  # JSON-ready


def test_csv_without_range_has_base_columns(tmp_path):
    t = plane_terrain(0.0, 0.3)
    cmp = compare(t, [("a", [(X0 + 50.0, Y0 - 10.0), (X0 + 50.0, Y0 - 150.0)])], Mover(mu=0.1), optimum=False)
    with open(cmp.to_csv(tmp_path / "c.csv"), newline="") as fh:
        rows = list(csv.reader(fh))
    assert tuple(rows[0]) == COMPARISON_COLUMNS and len(rows) == 2
    assert rows[1][COMPARISON_COLUMNS.index("min_radius_m")] == ""  # straight: inf -> empty cell
    with pytest.raises(FallwayIOError, match="does not exist"):
        cmp.to_csv(tmp_path / "missing" / "c.csv")


# --------------------------------------------------------------------------- bend radius

@settings(max_examples=40, deadline=None)
@given(radius=st.floats(2.0, 500.0), angles=st.lists(st.floats(0.05, 0.6), min_size=2, max_size=8))
def test_bend_radius_of_vertices_on_a_circle(radius, angles):
    # every triangle inscribed in a circle has that circle as circumcircle (Euclid IV.5)
    a = np.concatenate([[0.0], np.cumsum(angles)])
    xy = np.column_stack([radius * np.cos(a), radius * np.sin(a)])
    assert min_bend_radius_m(xy) == pytest.approx(radius, rel=1e-9)


def test_bend_radius_corner_and_hairpin():
    L, phi = 40.0, math.radians(60.0)
    xy = [(0.0, 0.0), (L, 0.0), (L + L * math.cos(phi), L * math.sin(phi))]
    # circumradius of an isosceles triangle with legs L and apex angle pi - phi: L / (2 sin(phi/2))
    assert min_bend_radius_m(xy) == pytest.approx(L / (2 * math.sin(phi / 2)), rel=1e-12)
    assert min_bend_radius_m([(0, 0), (10, 0), (3, 0)]) == 0.0
    assert min_bend_radius_m([(0, 0), (10, 0), (10, 0), (20, 0)]) == math.inf
    # resampled at a fixed spacing, a densely drawn arc with a 5 mm wiggle keeps the arc's
    # radius (30 m to within 1 %); on the raw vertices the wiggle reads as a ~2 m bend
    a = np.linspace(0.0, np.pi / 2, 400)
    arc = np.column_stack([30 * np.cos(a), 30 * np.sin(a)])
    assert min_bend_radius_m(arc, spacing_m=5.0) == pytest.approx(30.0, rel=1e-3)  # points on chords
    arc[200] += (0.005, 0.0)
    assert min_bend_radius_m(arc) < 5.0
    assert min_bend_radius_m(arc, spacing_m=5.0) == pytest.approx(30.0, rel=1e-2)


# --------------------------------------------------------------------------- reading lines

def _fc(features):
    return {"type": "FeatureCollection", "features": features}


def _feature(coords, props=None, kind="LineString"):
    return {"type": "Feature", "properties": props if props is not None else {},
            "geometry": {"type": kind, "coordinates": coords}}


def test_read_geojson_lonlat_reprojects_back_within_mm(tmp_path):
    from pyproj import Transformer

    utm = [np.array([[X0 + 10.0, Y0 - 20.0], [X0 + 80.5, Y0 - 150.25], [X0 + 140.0, Y0 - 190.0]]),
           np.array([[X0 + 12.0, Y0 - 22.0], [X0 + 120.0, Y0 - 180.0]]),
           np.array([[X0 + 14.0, Y0 - 24.0], [X0 + 130.0, Y0 - 170.0]]),
           np.array([[X0 + 16.0, Y0 - 26.0, 410.0], [X0 + 110.0, Y0 - 160.0, 380.5]]),
           np.array([[X0 + 18.0, Y0 - 28.0], [X0 + 100.0, Y0 - 140.0]])]
    to_ll = Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True)
    feats = []
    props = [{"name": "A"}, {}, {"name": ""}, {"name": "A"}, {"name": None}]
    for c, pr in zip(utm, props):
        lon, lat = to_ll.transform(c[:, 0], c[:, 1])
        coords = [[round(o, 10), round(a, 10)] + ([float(zz)] if c.shape[1] == 3 else [])
                  for o, a, zz in zip(lon, lat, c[:, 2] if c.shape[1] == 3 else lon)]
        feats.append(_feature(coords, pr))
    p = tmp_path / "lines.geojson"
    p.write_text(json.dumps(_fc(feats)))
    got = read_lines(p, crs=UTM33)
    assert [n for n, _ in got] == ["A", "line-2", "line-3", "A-2", "line-5"]
    for (_, xy), ref in zip(got, utm):
        assert xy.shape == ref.shape
        assert np.max(np.abs(xy[:, :2] - ref[:, :2])) < 1e-3  # within a millimetre
    assert np.array_equal(got[3][1][:, 2], utm[3][:, 2])  # z kept for a raised line
    # without a target CRS the coordinates stay lon/lat
    raw = read_lines(p)
    assert raw[0][1][0, 0] == pytest.approx(15.0, abs=0.01)


def _write_gpkg(path, geoms, names, crs):
    import pyogrio.raw
    import shapely

    wkb = np.array([shapely.to_wkb(g) for g in geoms], dtype=object)
    pyogrio.raw.write(path, wkb, [np.array(names, dtype=object)], ["name"], driver="GPKG",
                      geometry_type="Unknown", crs=crs)


def test_read_geopackage_native_crs_and_reprojection(tmp_path):
    import shapely
    from pyproj import Transformer

    a = [(X0 + 10.0, Y0 - 20.0), (X0 + 100.0, Y0 - 150.0)]
    b = [(X0 + 30.0, Y0 - 20.0), (X0 + 60.0, Y0 - 90.0), (X0 + 100.0, Y0 - 170.0)]
    p = tmp_path / "lines.gpkg"
    _write_gpkg(p, [shapely.LineString(a), shapely.MultiLineString([b])], ["upper", "lower"], "EPSG:32633")
    got = read_lines(p, crs="EPSG:32633")
    assert [n for n, _ in got] == ["upper", "lower"]
    assert np.array_equal(got[0][1], np.array(a)) and np.array_equal(got[1][1], np.array(b))
    got34 = read_lines(p, crs="EPSG:32634")
    ref = np.column_stack(Transformer.from_crs("EPSG:32633", "EPSG:32634", always_xy=True)
                          .transform(np.array(b)[:, 0], np.array(b)[:, 1]))
    assert np.max(np.abs(got34[1][1] - ref)) < 1e-6


def test_read_lines_errors(tmp_path):
    import shapely

    with pytest.raises(FallwayIOError, match="not found"):
        read_lines(tmp_path / "nope.geojson")
    empty = tmp_path / "empty.geojson"
    empty.write_text("")
    with pytest.raises(FallwayIOError, match="cannot read"):
        read_lines(empty)
    none = tmp_path / "none.geojson"
    none.write_text(json.dumps(_fc([])))
    with pytest.raises(ParameterError, match="no features"):
        read_lines(none)
    pt = tmp_path / "point.geojson"
    pt.write_text(json.dumps(_fc([_feature([[15.0, 45.0], [15.001, 44.999]], {"name": "ok"}),
                                  _feature([15.0, 45.0], {"name": "loading bay"}, kind="Point")])))
    with pytest.raises(ParameterError, match=r"feature 2 'loading bay' .* is a Point, not a LineString"):
        read_lines(pt)
    short = tmp_path / "short.geojson"
    short.write_text(json.dumps(_fc([_feature([[15.0, 45.0], [15.0, 45.0]], {"name": "dot"})])))
    with pytest.raises(ParameterError, match="'dot' .* fewer than 2 distinct vertices"):
        read_lines(short)
    # a UTM line saved as GeoJSON with no CRS: read as lon/lat, out of range, named
    utm = tmp_path / "utm.geojson"
    utm.write_text(json.dumps(_fc([_feature([[X0 + 1.0, Y0 - 1.0], [X0 + 90.0, Y0 - 80.0]], {"name": "chute"})])))
    with pytest.raises(ParameterError, match="'chute' .* outside the longitude/latitude range"):
        read_lines(utm, crs=UTM33)
    multi = tmp_path / "multi.gpkg"
    _write_gpkg(multi, [shapely.MultiLineString([[(0, 0), (1, 1)], [(2, 2), (3, 3)]])], ["split"], "EPSG:32633")
    with pytest.raises(ParameterError, match="'split' .* 2 parts"):
        read_lines(multi)
    nocrs = tmp_path / "nocrs.gpkg"
    with pytest.warns(UserWarning, match="crs"):  # pyogrio warns about a file without CRS
        _write_gpkg(nocrs, [shapely.LineString([(0, 0), (1, 1)])], ["x"], None)
    with pytest.raises(ParameterError, match="no CRS information"):
        read_lines(nocrs, crs=UTM33)


def test_errors_are_one_line_and_name_the_line(tmp_path):
    t = plane_terrain(0.0, 0.3)
    off = [(X0 + 50.0, Y0 - 10.0), (X0 + 50.0, Y0 - 500.0)]  # the grid is 200 m tall
    with pytest.raises(ParameterError, match="line 'far' leaves the DEM") as ei:
        compare(t, [("far", off)], Mover(), optimum=False)
    assert "\n" not in str(ei.value)
    z = t.z.copy()
    z[20, 10] = np.nan
    holey = Terrain.from_array(z, t.transform, t.crs)
    across = [(X0 + 10.0, Y0 - 102.5), (X0 + 150.0, Y0 - 102.5)]
    with pytest.raises(ParameterError, match="line 'wet' .*nodata"):
        drape(holey, across, name="wet")
    raised = np.array([[X0 + 50.0, Y0 - 10.0, 500.0], [X0 + 50.0, Y0 - 500.0, 300.0]])
    with pytest.raises(ParameterError, match="line 'cable' leaves the DEM"):
        compare(t, [("cable", raised)], Mover(), optimum=False)
    with pytest.raises(ParameterError, match="unique"):
        compare(t, [("a", off), ("a", off)], Mover(), optimum=False)


def test_raised_line_keeps_its_own_z():
    t = plane_terrain(0.0, 0.3)
    # a cable chord above the ground: straight 3D segment from 350 m to 290 m
    raised = np.array([[X0 + 50.0, Y0 - 10.0, 350.0], [X0 + 50.0, Y0 - 190.0, 290.0]])
    cmp = compare(t, [("cable", raised)], Mover(mu=0.05, normal="gravity"), optimum=False)
    r = cmp.rows[0]
    assert r.drop_m == pytest.approx(60.0) and len(r.points) == 2
    s = math.hypot(180.0, 60.0)
    t_ref, _ = incline_time(0.0, s, 60.0 / s, 180.0 / s, 0.05)  # any mechanics text
    assert r.travel_time_s == pytest.approx(t_ref, rel=1e-9)


# --------------------------------------------------------------------------- with the search

def test_compare_adds_computed_optimum_on_plane():
    # down the fall line of a plane the straight line is the fastest (the incline is the
    # plane's own brachistochrone for a target straight downhill): the computed row matches
    # the closed-form incline time, as does the drawn straight line
    t = plane_terrain(0.0, 0.4, rows=30, cols=30)
    s0, e0 = t.cell_center(1, 15), t.cell_center(27, 15)
    mover = Mover(mu=0.1, normal="gravity")
    cmp = compare(t, [("drawn", [s0, e0])], mover, refine=False)
    rows = {r.name: r for r in cmp.rows}
    assert rows["computed optimum"].computed and not rows["drawn"].computed
    plan = 26 * 5.0
    s = math.hypot(plan, 0.4 * plan)
    t_ref, _ = incline_time(0.0, s, 0.4 * plan / s, plan / s, 0.1)  # any mechanics text
    assert rows["drawn"].travel_time_s == pytest.approx(t_ref, rel=1e-6)
    assert rows["computed optimum"].travel_time_s == pytest.approx(t_ref, rel=1e-6)
    assert cmp.route is not None


def test_compare_refines_its_optimum_past_a_drawn_straight_line():
    # mu = 0 on a 30 % plane: a line lying on the plane feels g sin(alpha) along the fall
    # line, so the fastest line is Bernoulli's cycloid in plane coordinates and the drawn
    # chord's time is the incline's closed form (CHECKS.md, "On an inclined plane" and
    # "Incline with Coulomb friction").  The 8-neighbour lattice line is slower than the
    # chord (metrication); refined, the optimum beats it and lands on the cycloid.
    from references import cycloid

    slope = 0.3
    t = plane_terrain(0.0, slope)
    s0, e0 = t.cell_center(2, 4), t.cell_center(36, 12)
    mover = Mover(mu=0.0, normal="gravity")
    search = SearchOptions(neighbours=8)
    across, down_plan = e0[0] - s0[0], s0[1] - e0[1]
    alpha = math.atan(slope)
    g_plane = G0 * math.sin(alpha)
    drop = slope * down_plan
    s3 = math.sqrt(across ** 2 + down_plan ** 2 + drop ** 2)
    t_chord, _ = incline_time(0.0, s3, drop / s3, math.hypot(across, down_plan) / s3, 0.0)
    t_cycloid = cycloid(across, down_plan / math.cos(alpha), g=g_plane).time_s
    lines = [("straight", [s0, e0])]
    lattice = compare(t, lines, mover, search=search, refine=False)
    assert [r.name for r in lattice.rows] == ["straight", "computed optimum"]
    assert lattice.rows[0].travel_time_s == pytest.approx(t_chord, rel=1e-6)
    assert lattice.rows[1].travel_time_s > t_chord * (1 + 1e-3)
    refined = compare(t, lines, mover, search=search)  # refining is the default
    assert [r.name for r in refined.rows] == ["computed optimum", "straight"]
    opt = refined.rows[0]
    assert opt.status == "ok" and refined.route.summary.refined
    # measured 3e-6 above the cycloid (39 vertices)
    assert t_cycloid * (1 - 1e-6) < opt.travel_time_s < t_cycloid * (1 + 1e-4) < t_chord
    # the computed optimum runs between the drawn line's own end points
    np.testing.assert_allclose(opt.points[[0, -1], :2], [s0, e0], atol=1e-9)


def test_overspeeding_line_ranks_after_every_line_that_meets_the_limits():
    # gravity-normal friction does work mu g x plan length (CHECKS.md), so from rest the
    # exit speed is v = sqrt(2 g (drop - mu plan)): the straight line exits faster than a
    # dogleg to the same point and is faster; a speed cap between the two exit speeds
    # makes the straight line overspeed.  It must rank after the slower, feasible dogleg.
    t = plane_terrain(0.0, 0.4, rows=30, cols=30)
    s0, e0 = t.cell_center(1, 15), t.cell_center(27, 15)
    mid = t.cell_center(14, 4)
    mu = 0.1
    drop = 0.4 * (s0[1] - e0[1])

    def exit_speed(plan):
        return math.sqrt(2 * G0 * (drop - mu * plan))

    v_straight = exit_speed(s0[1] - e0[1])
    v_dogleg = exit_speed(math.dist(s0, mid) + math.dist(mid, e0))
    assert v_dogleg < v_straight - 1.0
    mover = Mover(mu=mu, normal="gravity", max_speed=0.5 * (v_straight + v_dogleg))
    lines = [("straight", [s0, e0]), ("dogleg", [s0, mid, e0])]
    cmp = compare(t, lines, mover, optimum=False)
    rows = {r.name: r for r in cmp.rows}
    assert rows["straight"].exit_speed_m_s == pytest.approx(v_straight, rel=1e-6)
    assert rows["dogleg"].exit_speed_m_s == pytest.approx(v_dogleg, rel=1e-6)
    assert rows["straight"].travel_time_s < rows["dogleg"].travel_time_s
    assert rows["straight"].status == "overspeed" and rows["dogleg"].status == "ok"
    assert [r.name for r in cmp.rows] == ["dogleg", "straight"]
    assert cmp.best.name == "dogleg"
    # with the computed optimum (held under the cap by the search and the refinement): every
    # row that meets the limits comes before every row that does not
    full = compare(t, lines, mover, refine=False)
    ok = [r.status == "ok" for r in full.rows]
    assert ok == sorted(ok, reverse=True) and full.rows[-1].name == "straight"
    # the route's own verdict and its row's status are the same check
    assert full.route.summary.violated_limits == list(
        next(r for r in full.rows if r.computed).issues)


def test_lines_with_other_end_points_are_named():
    t = plane_terrain(0.0, 0.4, rows=30, cols=30)
    s0, e0 = t.cell_center(1, 15), t.cell_center(27, 15)
    other = t.cell_center(27, 18)
    with pytest.warns(InputWarning, match=r"'elsewhere' \(0.00 m at the start, 15.00 m at the end\)"):
        compare(t, [("drawn", [s0, e0]), ("elsewhere", [s0, other])], Mover(mu=0.1, normal="gravity"),
                refine=False)


def test_no_feasible_optimum_gets_a_row():
    t = plane_terrain(0.0, 0.3, rows=20, cols=20)
    # drawn uphill: the line stalls at once and the search finds nothing
    up = [t.cell_center(18, 10), t.cell_center(2, 10)]
    cmp = compare(t, [("uphill", up)], Mover(mu=0.1), refine=False)
    assert [r.status for r in cmp.rows] == ["stalls", "no feasible line"]
    assert cmp.rows[1].computed and cmp.rows[1].message
    assert cmp.best is None


def test_robust_route_returns_a_line_that_passes_the_envelope():
    t = plane_terrain(0.0, 0.4, rows=30, cols=30)
    s0, e0 = t.cell_center(1, 15), t.cell_center(27, 15)
    mover = Mover(mu=0.1, normal="gravity")
    best, tried = by_candidates(t, s0, e0, mover, 0.05, 0.2)
    assert [c["label"] for c in tried] == ["nominal"] and best.envelope.robust
    # the same line checked again, independently of the search, at both ends of the range
    for mu in (0.05, 0.2):
        again = evaluate_line(t, np.asarray(best.line), Mover(mu=mu, normal="gravity"))
        assert again.status == "ok"


def test_robust_route_replaces_a_nominal_optimum_that_stalls_at_high_friction():
    # across a 30 % plane and a little down: at mu = 0.03 the fastest line dives and climbs
    # back, which at mu = 0.075 stalls; the search at high friction keeps a gentler line.
    # Independent check, work-energy theorem (any mechanics text) with gravity-normal
    # friction and no drag: v² = 2 g (drop - mu * plan) at every vertex.
    t = plane_terrain(0.0, 0.3, rows=40, cols=40)
    s0, e0 = t.cell_center(2, 2), t.cell_center(12, 37)
    mover = Mover(mu=0.03, normal="gravity")

    def v2_along(line, mu):
        line = np.asarray(line)
        plan = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(line[:, :2], axis=0).T))])
        return 2 * G0 * ((line[0, 2] - line[:, 2]) - mu * plan)

    best, tried = by_candidates(t, s0, e0, mover, 0.0, 0.075)
    nominal = tried[0]
    assert nominal["label"] == "nominal" and nominal["verdict"] == "stalls at high friction"
    assert best.envelope.robust and best.envelope.high.status == "ok"
    assert np.all(v2_along(best.line, 0.075)[1:] > 0.0)
    # never faster at nominal friction than the unconstrained nominal optimum
    assert best.envelope.nominal.travel_time_s >= nominal["travel_time_s"]

    first = find_route(t, s0, e0, mover, refine=False)
    assert np.min(v2_along(first.line, 0.075)[1:]) < 0.0  # the nominal optimum does stall at HI


def test_comparison_figure_draws_every_line(tmp_path):
    from fallway.plot import comparison_figure

    t = site_terrain()
    cmp = compare(t, SITE_LINES, Mover(mu=0.2, drag=0.004, v0=1.0, normal="gravity"), optimum=False)
    fig = comparison_figure(t, cmp)
    ax_map = fig.axes[0]
    gids = [ln.get_gid() for ln in ax_map.lines if ln.get_gid() and ln.get_gid().startswith("fallway-compare")]
    assert gids == [f"fallway-compare-{k}" for k in (1, 2, 3)]
    # the map shows each line's own plan vertices
    for ln, r in zip([ln for ln in ax_map.lines if ln.get_gid() in gids], cmp.rows):
        assert np.array_equal(ln.get_xdata(), r.points[:, 0])
    out = tmp_path / "comparison.png"
    fig.savefig(out, format="png", dpi=60)
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_line_entering_keepout_is_flagged():
    import shapely

    t = plane_terrain(0.0, 0.3)
    a = [(X0 + 52.5, Y0 - 10.0), (X0 + 52.5, Y0 - 180.0)]  # along the centres of column 10
    b = [(X0 + 152.5, Y0 - 10.0), (X0 + 152.5, Y0 - 180.0)]
    pond = shapely.box(X0 + 30.0, Y0 - 120.0, X0 + 70.0, Y0 - 90.0)  # across line a only
    cmp = compare(t, [("a", a), ("b", b)], Mover(mu=0.1), optimum=False, keepout=pond)
    assert {r.name: r.status for r in cmp.rows} == {"a": "keepout", "b": "ok"}
    mask = np.zeros(t.shape, bool)
    mask[20, 10] = True  # the cell under line a at y = Y0 - 102.5 (row 20, column 10)
    cmp = compare(t, [("a", a), ("b", b)], Mover(mu=0.1), optimum=False, keepout=mask)
    assert {r.name: r.status for r in cmp.rows} == {"a": "keepout", "b": "ok"}


def test_read_lines_reads_every_line_layer_or_the_named_ones(tmp_path):
    # issue 19.4, the keep-out rule applied to candidate lines: no line is left out
    # because it sits in a second layer, and a file with layers of other geometry must
    # name the layers to read
    import pyogrio.raw
    import shapely

    p = tmp_path / "site.gpkg"
    line = np.array([shapely.to_wkb(shapely.LineString([(X0, Y0 - 5.0), (X0 + 50.0, Y0 - 90.0)]))], dtype=object)
    pt = np.array([shapely.to_wkb(shapely.Point(X0, Y0 - 5.0))], dtype=object)
    pyogrio.raw.write(p, line, [np.array(["east"], dtype=object)], ["name"], layer="lines", driver="GPKG",
                      geometry_type="LineString", crs="EPSG:32633")
    pyogrio.raw.write(p, line, [np.array(["west"], dtype=object)], ["name"], layer="more", driver="GPKG",
                      geometry_type="LineString", crs="EPSG:32633", append=True)
    assert [n for n, _ in read_lines(p)] == ["east", "west"]  # both line layers
    assert [n for n, _ in read_lines(p, layer="more")] == ["west"]
    pyogrio.raw.write(p, pt, [np.array(["bay"], dtype=object)], ["name"], layer="points", driver="GPKG",
                      geometry_type="Point", crs="EPSG:32633", append=True)
    with pytest.raises(ParameterError, match=r"points \(Point\).*--lines-layer.*line layers: lines, more"):
        read_lines(p)
    assert [n for n, _ in read_lines(p, layer=["lines", "more"])] == ["east", "west"]
    with pytest.raises(ParameterError, match="no layer 'roads'"):
        read_lines(p, layer="roads")


def test_sample_site_candidates_behave_as_its_readme_says():
    # the shipped invented site (sample_terrain/README.md), with the demo scenario's mover
    # (mu 0.25, 12 m/s cap, 1 g lateral): the direct line runs through the protected trees
    # (keep-out), the line east of the trees overspeeds on its straight fall, and the one
    # west of them turns too sharply for its speed; no hand-drawn line meets the limits
    from importlib.resources import as_file, files

    from fallway.keepout import Keepout
    from fallway.terrain import load_terrain

    with as_file(files("fallway.sample_terrain")) as d:
        t = load_terrain(d / "site.tif")
        lines = read_lines(d / "lines.geojson", crs=t.crs)
        ko = Keepout.from_file(d / "keepout.geojson").in_crs(t.crs)
    cmp = compare(t, lines, Mover(mu=0.25, max_speed=12.0), limits=Limits(max_lateral_g=1.0), keepout=ko,
                  optimum=False, mu_range=(0.2, 0.3))
    rows = {r.name: r for r in cmp.rows}
    assert set(rows) == {"direct", "east of the trees", "west of the trees"}
    assert "keepout" in rows["direct"].issues and rows["direct"].travel_time_s is not None
    assert rows["east of the trees"].status == "overspeed" and rows["east of the trees"].travel_time_s is not None
    assert "lateral_g" in rows["west of the trees"].issues and rows["west of the trees"].travel_time_s is not None
    assert all(r.status != "ok" for r in cmp.rows)
    # none meets the limits, so all rank by time
    times = [r.travel_time_s for r in cmp.rows]
    assert times == sorted(times)


def test_robust_route_against_a_speed_limit_tightens_its_searches():
    # a 50 % plane, mu 0.3 in a range 0.2..0.33, speed limit 30 m/s: the straight fall line
    # reaches sqrt(2 g (drop - mu plan)) = 26.9 m/s at nominal friction but 33 m/s at LO
    # (work-energy theorem, any mechanics text), so the nominal optimum is too fast at LO
    t = plane_terrain(0.0, 0.5, rows=40, cols=40)
    s0, e0 = t.cell_center(1, 20), t.cell_center(38, 20)
    mover = Mover(mu=0.3, max_speed=30.0, normal="gravity")
    plan = 37 * 5.0
    assert math.sqrt(2 * G0 * (0.5 * plan - 0.2 * plan)) > 30.0 > math.sqrt(2 * G0 * (0.5 * plan - 0.3 * plan))
    best, tried = by_candidates(t, s0, e0, mover, 0.2, 0.33)
    labels = [c["label"] for c in tried]
    assert labels[0] == "nominal" and "too fast at low friction" in tried[0]["verdict"]
    assert labels[1] == "high friction" and labels[-1] == "low friction"
    caps = [c["max_speed"] for c in tried[1:-1]]
    assert caps[0] == 30.0 and all(b < a for a, b in zip(caps, caps[1:]))  # each round tighter
    # the search at LO with the limit keeps every vertex under it (work-energy, no drag)
    low = tried[-1]["envelope"]
    assert low is not None and low.low.overspeed_m is None
    line = low.low.points
    plan_cum = np.concatenate([[0.0], np.cumsum(np.hypot(*np.diff(line[:, :2], axis=0).T))])
    v2 = 2 * G0 * ((line[0, 2] - line[:, 2]) - 0.2 * plan_cum)
    assert np.max(v2) <= 30.0 ** 2 * (1 + 1e-9)
    if best is not None:
        assert best.envelope.robust


def test_read_geojson_with_legacy_crs_member(tmp_path):
    # GeoJSON 2008 allowed a "crs" member; GDAL honours it, so a projected file that says
    # so is read in its own CRS, not mistaken for lon/lat
    fc = _fc([_feature([[X0 + 1.0, Y0 - 1.0], [X0 + 90.0, Y0 - 80.0]], {"name": "chute"})])
    fc["crs"] = {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}}
    p = tmp_path / "legacy.geojson"
    p.write_text(json.dumps(fc))
    (name, xy), = read_lines(p, crs=UTM33)
    assert name == "chute" and np.allclose(xy, [[X0 + 1.0, Y0 - 1.0], [X0 + 90.0, Y0 - 80.0]], atol=1e-9)


@pytest.mark.slow
def test_exact_robust_route_is_robust_and_no_slower_than_the_candidates():
    # the cases of the candidate-method tests above, now with the robust lattice search:
    # its line passes the envelope (traverse at the three frictions) and, being the
    # lattice optimum under the same constraints, is no slower at nominal friction than
    # any candidate the heuristic finds (same stencil, no refinement, gravity-normal)
    cases = [(plane_terrain(0.0, 0.3, rows=40, cols=40), (2, 2), (12, 37), Mover(mu=0.03, normal="gravity"),
              0.0, 0.075),
             (plane_terrain(0.0, 0.5, rows=40, cols=40), (1, 20), (38, 20),
              Mover(mu=0.3, max_speed=30.0, normal="gravity"), 0.2, 0.33)]
    for t, a, b, mover, lo, hi in cases:
        s0, e0 = t.cell_center(*a), t.cell_center(*b)
        ex = robust(t, s0, e0, mover, lo, hi, refine=False)
        cand, _ = by_candidates(t, s0, e0, mover, lo, hi)
        assert ex.summary.robust_method in ("exact", "approximate") and ex.summary.search_plan == "robust"
        assert ex.envelope.robust and ex.summary.feasible
        for mu in (lo, hi):  # independently re-timed at both ends of the range
            again = evaluate_line(t, np.asarray(ex.line), Mover(mu=mu, max_speed=mover.max_speed,
                                                                 normal="gravity"))
            assert again.status == "ok"
        if cand is not None:
            assert ex.envelope.nominal.travel_time_s <= cand.envelope.nominal.travel_time_s * (1 + 1e-9)


def test_exact_robust_route_proves_an_empty_end_window():
    # work-energy theorem, no drag (any mechanics text): at the end v² = 2 g (drop - mu P)
    # for plan length P.  A 50 % plane, 37 cells of 5 m down the fall line, limit 20 m/s:
    # under 20 m/s at mu 0.1 needs P >= (2 g drop - 400) / (2 g 0.1); getting there at
    # mu 0.45 needs P < drop / 0.45.  Here the first exceeds the second: no line works.
    t = plane_terrain(0.0, 0.5, rows=40, cols=40)
    s0, e0 = t.cell_center(1, 20), t.cell_center(38, 20)
    drop = 0.5 * 37 * 5.0
    p_lo = (2 * G0 * drop - 400.0) / (2 * G0 * 0.1)
    p_hi = drop / 0.45
    assert p_lo > p_hi
    mover = Mover(mu=0.3, max_speed=20.0, normal="gravity")
    with pytest.raises(NoFeasibleLine, match=f"at least {p_lo:.0f} m .* shorter than {p_hi:.0f} m"):
        robust(t, s0, e0, mover, 0.1, 0.45, refine=False)
    # with via points the robust lattice search does not apply: the candidate method runs
    rr = robust(t, s0, e0, Mover(mu=0.1, normal="gravity"), 0.05, 0.2, refine=False, via=[t.cell_center(20, 20)])
    assert rr.summary.robust_method == "candidates" and "via" in rr.summary.robust_note


def test_exact_robust_route_takes_a_robust_nominal_optimum_at_once():
    # with drag: the ordinary exact search's optimum is robust here (checked independently
    # by the work-energy ordering: it does not stall at HI, no limit at LO), and no robust
    # line can beat the unconstrained optimum, so it is the answer, found without the
    # (three-energy) robust search
    t = plane_terrain(0.0, 0.4, rows=30, cols=30)
    s0, e0 = t.cell_center(1, 15), t.cell_center(27, 15)
    mover = Mover(mu=0.1, drag=0.01, normal="gravity")
    rr = robust(t, s0, e0, mover, 0.05, 0.2, refine=False)
    assert rr.summary.robust_method == "exact" and rr.envelope.robust
    assert rr.summary.robust_candidates[0]["label"].startswith("nominal optimum")
    plain = find_route(t, s0, e0, mover, refine=False)
    assert rr.travel_time_s == pytest.approx(plain.travel_time_s, rel=1e-12)
    again = evaluate_line(t, np.asarray(rr.line), Mover(mu=0.2, drag=0.01, normal="gravity"))
    assert again.status == "ok"


def test_lay_on_ground_keeps_every_segment_near_the_ground():
    # the ground: scipy's interpolating bicubic spline through the cell centres (the surface
    # Terrain.sample reproduces, tests/test_terrain.py); a chord across a wavy slope must be
    # given vertices until no point of it, sampled at a tenth of a cell, strays more than the
    # tolerance (+0.05 m between the half-cell checks) from that spline
    from scipy.interpolate import RectBivariateSpline

    from fallway.evaluate import GROUND_TOLERANCE_M, lay_on_ground
    from fallway.terrain import Terrain

    n, cell = 40, 5.0
    r, c = np.mgrid[0:n, 0:n]
    z = 300.0 - 1.5 * cell * c + 6.0 * np.sin(c / 3.0) * np.cos(r / 4.0)
    t = Terrain.from_array(z, (cell, 0, 0.0, 0, -cell, n * cell))
    spline = RectBivariateSpline(np.arange(n) * cell + cell / 2, np.arange(n) * cell + cell / 2, z[::-1],
                                 kx=3, ky=3, s=0)
    line = lay_on_ground(t, [(12.0, 150.0, 0.0), (180.0, 20.0, 0.0)])
    assert len(line) > 2
    for a, b in zip(line[:-1], line[1:]):
        f = np.linspace(0.0, 1.0, max(2, int(np.hypot(*(b[:2] - a[:2])) / (cell / 10)) + 1))
        x, y = a[0] + f * (b[0] - a[0]), a[1] + f * (b[1] - a[1])
        ground = spline.ev(y, x)
        assert np.max(np.abs(a[2] + f * (b[2] - a[2]) - ground)) <= GROUND_TOLERANCE_M + 0.05
