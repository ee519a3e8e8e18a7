"""Loads along a line (fallway.loads): lateral acceleration, normal load, lift-off margin,
and the speed-aware bend limits held by the refinement and checked on routes (issue 14).

Each check names its source beside it.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from fallway.errors import NoFeasibleLine
from affine import Affine
from scipy.integrate import solve_ivp

from fallway import Limits, Mover, ParameterError, find_route
from fallway.loads import curvature_caps, line_loads, load_status, required_radius_m
from fallway.terrain import Terrain

G = 9.80665


def _level_arc(radius_m: float, n: int = 37, sweep_rad: float = math.pi / 2) -> np.ndarray:
    a = np.linspace(0.0, sweep_rad, n)
    return np.column_stack([radius_m * np.cos(a), radius_m * np.sin(a), np.zeros(n)])


def test_level_arc_lateral_acceleration_and_normal_load():
    # Centripetal acceleration v²/R (any mechanics text); level bend N = sqrt(g² + (v²/R)²)
    # (CHECKS.md "Level bend": gravity and the centripetal force are perpendicular)
    R, v = 40.0, 17.0
    P = _level_arc(R)
    ld = line_loads(P, np.full(len(P), v), g=G)
    inner = slice(1, -1)
    assert ld.lateral_g[inner] == pytest.approx(np.full(len(P) - 2, v * v / R / G), rel=1e-9)
    assert 1.0 / ld.plan_curvature_1_m[inner] == pytest.approx(np.full(len(P) - 2, R), rel=1e-9)
    assert ld.normal_g[inner] == pytest.approx(np.full(len(P) - 2, math.hypot(G, v * v / R) / G), rel=1e-9)
    assert ld.vertical_curvature_1_m[inner] == pytest.approx(np.zeros(len(P) - 2), abs=1e-12)
    assert ld.liftoff_margin_g[inner] == pytest.approx(np.ones(len(P) - 2), rel=1e-9)
    # the ends carry no curvature (the line starts and ends along its segments)
    assert ld.lateral_g[0] == 0.0 and ld.lateral_g[-1] == 0.0


def test_allowed_radius_grows_with_the_square_of_the_speed():
    # CHECKS.md "Buildable lines": at 25 m/s and 1 g sideways, R >= v²/(n g) = 63.7 m
    P = _level_arc(100.0, n=9)
    lim = Limits(max_lateral_g=1.0, allow_liftoff=True)
    r25 = required_radius_m(P, np.full(9, 25.0), lim, g=G)
    assert r25 == pytest.approx(np.full(7, 25.0 ** 2 / G), rel=1e-9)
    assert round(float(r25[0]), 1) == 63.7
    r50 = required_radius_m(P, np.full(9, 50.0), lim, g=G)
    assert r50 == pytest.approx(4.0 * r25, rel=1e-12)
    # an arc at the allowed radius reads exactly the limit (independent re-measure)
    Q = _level_arc(float(r25[0]))
    assert np.max(line_loads(Q, np.full(len(Q), 25.0), g=G).lateral_g) == pytest.approx(1.0, rel=1e-9)
    # a bend radius limit larger than the speed's need governs
    lim2 = Limits(min_radius_m=80.0, max_lateral_g=1.0, allow_liftoff=True)
    assert required_radius_m(P, np.full(9, 25.0), lim2, g=G) == pytest.approx(np.full(7, 80.0))


def test_lateral_acceleration_on_a_slope_is_the_horizontal_speed_squared_over_the_plan_radius():
    # Kinematics of a helix (any mechanics text): a point on a helix of plan radius R and
    # pitch angle θ at speed v has horizontal acceleration (v cos θ)²/R towards the axis
    R, theta, v = 30.0, math.radians(20.0), 12.0
    a = np.linspace(0.0, math.pi, 181)
    P = np.column_stack([R * np.cos(a), R * np.sin(a), -R * a * math.tan(theta)])
    ld = line_loads(P, np.full(len(P), v), g=G)
    want = (v * math.cos(theta)) ** 2 / R / G
    assert ld.lateral_g[1:-1] == pytest.approx(np.full(len(P) - 2, want), rel=1e-4)


def test_sag_normal_load_and_its_cap():
    # Concave chute: N = g cos θ + v²/R (Roberts 1969, CHECKS.md "Curved chute"), θ the slope
    R, v = 20.0, 15.0
    th = np.radians(np.linspace(-40.0, 40.0, 161))  # slope angle along a sag in the x-z plane
    P = np.column_stack([R * np.sin(th), np.zeros(len(th)), R * (1.0 - np.cos(th))])
    ld = line_loads(P, np.full(len(P), v), g=G)
    want = (G * np.cos(th) + v * v / R) / G
    assert ld.normal_g[1:-1] == pytest.approx(want[1:-1], rel=1e-4)
    assert np.all(ld.vertical_curvature_1_m[1:-1] > 0)  # a sag reads positive
    # the cap for max_normal_g is the curvature where N/g reaches it at the bottom:
    # g + v² kappa = n g  ->  kappa = (n - 1) g / v²
    lim = Limits(max_normal_g=2.0, allow_liftoff=True)
    caps = curvature_caps(P, np.full(len(P), v), lim, g=G)
    mid = len(P) // 2
    assert caps[mid] == pytest.approx((2.0 - 1.0) * G / v ** 2, rel=1e-6)


def _convex_arc_speeds(R, mu, v0, th0_deg, th1_deg):
    """Speed on a convex arc of radius R from the slope angle th0 (CHECKS.md "Curved chute":
    v dv/ds = g sin θ - mu (g cos θ - v²/R), s = R θ), integrated with scipy's solve_ivp."""
    def rhs(th, u):  # u = v²
        return [R * (2 * G * math.sin(th) - 2 * mu * (G * math.cos(th) - u[0] / R))]

    def lift(th, u):
        return u[0] - G * R * math.cos(th)
    lift.terminal = False
    sol = solve_ivp(rhs, (math.radians(th0_deg), math.radians(th1_deg)), [v0 ** 2], rtol=1e-12, atol=1e-12,
                    dense_output=True, events=lift)
    return sol


def test_liftoff_margin_changes_sign_where_the_convex_arc_loses_contact():
    # CHECKS.md "Curved chute": convex arc R = 5 m, mu = 0.3, 1 m/s at 30° -> lift-off at
    # 57.47306°, 5.134685 m/s (where v² > g R cos(slope))
    R, mu = 5.0, 0.3
    sol = _convex_arc_speeds(R, mu, 1.0, 30.0, 75.0)
    th_lift = math.degrees(sol.t_events[0][0])
    assert th_lift == pytest.approx(57.47306, abs=2e-5)
    assert math.sqrt(sol.y_events[0][0][0]) == pytest.approx(5.134685, abs=2e-6)
    # the arc as a dense polyline in a vertical plane (x across, z up; slope angle th)
    th = np.radians(np.arange(30.0, 75.0 + 1e-9, 0.25))
    P = np.column_stack([R * np.sin(th), np.zeros(len(th)), R * np.cos(th)])
    v = np.sqrt(sol.sol(th)[0])
    ld = line_loads(P, v, g=G)
    m = ld.liftoff_margin_g[1:-1]
    # the margin is (g cos θ - v²/R)/g on the arc
    assert m == pytest.approx((G * np.cos(th) - v * v / R)[1:-1] / G, abs=1e-4)
    assert np.all(ld.vertical_curvature_1_m[1:-1] < 0)  # a crest reads negative
    deg = np.degrees(th[1:-1])
    assert np.all(m[deg < th_lift - 0.25] > 0) and np.all(m[deg > th_lift + 0.25] < 0)
    k = np.flatnonzero(np.diff(np.sign(m)))[0]
    cross = deg[k] + (deg[k + 1] - deg[k]) * m[k] / (m[k] - m[k + 1])
    assert cross == pytest.approx(57.47306, abs=0.02)
    # the status of an open line, and of an enclosed one
    assert load_status(ld, Limits())["liftoff"] == "violated"
    assert "liftoff" not in load_status(ld, Limits(allow_liftoff=True))
    # the crest cap: at the cap the margin is zero (kappa = g cos θ / v²)
    caps = curvature_caps(P, v, Limits(), g=G)
    i = 10
    assert caps[i] == pytest.approx(G * math.cos(th[i]) / v[i] ** 2, rel=1e-6)


def test_limits_validation():
    for kw in ({"max_lateral_g": 0.0}, {"max_lateral_g": math.inf}, {"max_normal_g": -1.0},
               {"max_normal_g": 0.5}, {"allow_liftoff": "yes"}):
        with pytest.raises(ParameterError):
            Limits(**kw)
    with pytest.raises(ParameterError, match="speed_m_s"):
        line_loads(_level_arc(10.0, n=5), [1.0, 2.0])


# --------------------------------------------------------------------------- routes


def _crest_site():
    """A ridge across the fall line: a steep slope into a sharp convex break, then flat-ish."""
    cell = 2.0
    x = np.arange(60) * cell
    z = np.where(x < 40.0, 100.0 - 0.05 * x, 98.0 - 0.9 * (x - 40.0))
    z = np.where(x > 70.0, 71.0 - 0.05 * (x - 70.0), z)
    Z = np.tile(z, (9, 1))
    return Terrain.from_array(Z, Affine(cell, 0, 0.0, 0, -cell, 9 * cell), "EPSG:32633"), cell


def test_route_flags_liftoff_on_a_crest_unless_allowed():
    # DESIGN §3: an open chute on a convex crest lifts off where v² kappa_v > g cos θ;
    # the route's margin is re-measured here from the reported vertices and speeds
    t, cell = _crest_site()
    mover = Mover(mu=0.05, v0=14.0, normal="gravity")
    a, b = (1.0, 9.0), (115.0, 9.0)
    with pytest.raises(NoFeasibleLine) as err:  # a line that breaks a limit is never returned
        find_route(t, a, b, mover, refine=False)
    assert "lifts off" in str(err.value) and "--allow-liftoff" in str(err.value)  # says what to do
    open_line = err.value.route
    s = open_line.summary
    assert s.min_liftoff_margin_g is not None and s.min_liftoff_margin_g < 0
    assert "liftoff" in s.violated_limits and not s.feasible
    ld = line_loads(open_line.line, open_line.profile.speed_m_s, g=G,
                    surface_normal=t.normal(open_line.line[:, 0], open_line.line[:, 1]))
    assert s.min_liftoff_margin_g == pytest.approx(float(np.nanmin(ld.liftoff_margin_g)), rel=1e-12)
    enclosed = find_route(t, a, b, mover, refine=False, limits=Limits(allow_liftoff=True))
    assert "liftoff" not in enclosed.summary.violated_limits and enclosed.summary.feasible
    assert enclosed.summary.min_liftoff_margin_g == pytest.approx(s.min_liftoff_margin_g)


def _bend_site():
    """A plane falling east; the start and end sit so that the line has to turn."""
    cell = 5.0
    n = 41
    yy, xx = np.mgrid[0:n, 0:n] * cell
    Z = 200.0 - 0.35 * xx + 0.0 * yy
    return Terrain.from_array(Z, Affine(cell, 0, 0.0, 0, -cell, n * cell), "EPSG:32633")


def test_refined_line_meets_max_lateral_g_remeasured_from_the_exported_vertices():
    # v²/R <= n g (CHECKS.md "Buildable lines"), re-measured here from the reported vertices
    # and speeds with the circumradius in plan and the horizontal speed (helix kinematics)
    t = _bend_site()
    mover = Mover(mu=0.1, normal="gravity")
    # from the top corner across to low on the far side: the fastest line drops down the
    # fall line first and then bends across it (the brachistochrone in the plane)
    a, b = (10.0, 190.0), (190.0, 20.0)
    n_g = 0.2
    free = find_route(t, a, b, mover, limits=Limits(allow_liftoff=True))
    held = find_route(t, a, b, mover, limits=Limits(max_lateral_g=n_g))
    assert free.summary.max_lateral_g > 1.2 * n_g  # the limit binds on this site
    P = held.line
    v = held.profile.speed_m_s
    r_plan = np.array([_circumradius(P[i - 1, :2], P[i, :2], P[i + 1, :2]) for i in range(1, len(P) - 1)])
    d = np.diff(P, axis=0)
    th = np.arctan2(-(d[:-1, 2] + d[1:, 2]), np.hypot(d[:-1, 0] + d[1:, 0], d[:-1, 1] + d[1:, 1]))
    lateral = (v[1:-1] * np.cos(th)) ** 2 / r_plan / G
    assert held.summary.feasible, held.summary.violated_limits
    assert float(np.max(lateral)) <= n_g * (1 + 1e-3)
    assert held.summary.max_lateral_g == pytest.approx(float(np.max(lateral)), rel=1e-3)
    assert held.summary.refine_limits.get("lateral_g") in ("active", "inactive")


def _circumradius(A, B, C) -> float:
    # R = abc / (4 area) (Heron/any geometry text)
    a, b, c = np.linalg.norm(B - C), np.linalg.norm(A - C), np.linalg.norm(A - B)
    area = 0.5 * abs((B[0] - A[0]) * (C[1] - A[1]) - (B[1] - A[1]) * (C[0] - A[0]))
    return math.inf if area == 0 else a * b * c / (4 * area)


def test_summary_has_the_load_fields_whatever_the_options():
    t, _ = _crest_site()
    r = find_route(t, (1.0, 9.0), (115.0, 9.0), Mover(mu=0.05, v0=5.0, normal="gravity"), refine=False)
    d = r.summary.to_dict()
    for k in ("max_lateral_g", "max_lateral_g_station_m", "max_normal_g", "max_normal_g_station_m",
              "min_liftoff_margin_g", "min_liftoff_margin_station_m", "min_grade"):
        assert k in d
    keys = list(d)
    assert keys.index("max_lateral_g") < keys.index("min_grade")  # the load fields, then the least grade
