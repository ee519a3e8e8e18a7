"""Motion along 3D lines against closed forms (mechanics, Roberts 1969, Bernoulli 1696,
Euler–Eytelwein, Perla et al. 1980, NIMA TR8350.2) and scipy's solve_ivp."""

import math

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from fallway.errors import ParameterError
from fallway.physics import (STANDARD_GRAVITY, Mover, Profile, SegmentResult, normal_gravity, segment,
                             traverse)

G = STANDARD_GRAVITY
MODELS = ("gravity", "full")


def incline_points(theta_deg, length_m, n=6, azimuth_deg=30.0):
    """n collinear vertices down a straight incline in 3D (any azimuth)."""
    th, az = math.radians(theta_deg), math.radians(azimuth_deg)
    d = np.array([math.cos(th) * math.cos(az), math.cos(th) * math.sin(az), -math.sin(th)])
    return np.array([100.0, 200.0, 50.0]) + np.outer(np.linspace(0.0, length_m, n), d)


def ivp_along(rate, s_end, v2_0, events=None):
    """Reference: integrate d(v²)/ds = rate(s, v²) and dt/ds = 1/v with scipy (DOP853)."""
    def rhs(s, y):
        return [rate(s, y[0]), 1.0 / math.sqrt(max(y[0], 1e-300))]
    return solve_ivp(rhs, [0.0, s_end], [v2_0, 0.0], rtol=1e-12, atol=1e-12, method="DOP853",
                     events=events)


# ---------------------------------------------------------------- straight lines

@pytest.mark.parametrize("normal", MODELS)
@pytest.mark.parametrize("v0", [0.0, 3.0])
def test_incline_with_friction(normal, v0):
    # any mechanics text: a = g(sin θ − μ cos θ), v² = v0² + 2as, t = (v − v0)/a
    th, mu, s = math.radians(30), 0.2, 50.0
    a = G * (math.sin(th) - mu * math.cos(th))
    v = math.sqrt(v0 * v0 + 2 * a * s)
    p = traverse(incline_points(30, s), Mover(mu=mu, v0=v0, normal=normal))
    assert p.feasible
    assert p.exit_speed_m_s == pytest.approx(v, rel=1e-12)
    assert p.travel_time_s == pytest.approx((v - v0) / a, rel=1e-12)
    assert p.station_m[-1] == pytest.approx(s, rel=1e-12)
    stations = np.linspace(0, s, 6)
    np.testing.assert_allclose(p.speed_m_s, np.sqrt(v0 * v0 + 2 * a * stations), rtol=1e-12)
    np.testing.assert_allclose(p.grade, math.tan(th), rtol=1e-12)
    np.testing.assert_allclose(p.normal_ratio, math.cos(th), rtol=1e-12)
    if v0 == 0.0:  # CHECKS example (recomputed above)
        assert p.travel_time_s == pytest.approx(5.5860139, abs=1e-7)


@pytest.mark.parametrize("normal", MODELS)
def test_incline_with_drag_from_rest(normal):
    # derived from dv/dt = a − k v²: v_t = √(a/k), v² = v_t²(1 − e^(−2ks)), t = artanh(v/v_t)/(k v_t);
    # confirmed here with solve_ivp
    th, mu, k, s = math.radians(30), 0.2, 0.01, 50.0
    a = G * (math.sin(th) - mu * math.cos(th))
    vt = math.sqrt(a / k)
    v = vt * math.sqrt(-math.expm1(-2 * k * s))
    t = math.atanh(v / vt) / (k * vt)
    def arrive(t_, y):
        return y[0] - s
    arrive.terminal = True
    sol = solve_ivp(lambda t_, y: [y[1], a - k * y[1] ** 2], [0, 100], [0.0, 0.0], events=arrive,
                    rtol=1e-12, atol=1e-12, method="DOP853")
    assert sol.y_events[0][0][1] == pytest.approx(v, rel=1e-9)
    assert sol.t_events[0][0] == pytest.approx(t, rel=1e-9)
    p = traverse(incline_points(30, s, n=11), Mover(mu=mu, drag=k, normal=normal))
    assert p.exit_speed_m_s == pytest.approx(v, rel=1e-12)
    assert p.travel_time_s == pytest.approx(t, rel=1e-12)
    assert (p.travel_time_s, p.exit_speed_m_s) == pytest.approx((6.0610402, 14.2330490), abs=1e-7)


def test_perla_cheng_mcclung_avalanche():
    # Perla, Cheng & McClung (1980): point mass, friction μ and drag D/M:
    # v² = (M/D) g (sin ψ − μ cos ψ)(1 − e^(−2 D L / M)); μ 0.25, M/D 100 m, 50 m of a 40° slope
    psi, mu, md, length = math.radians(40), 0.25, 100.0, 50.0
    v = math.sqrt(md * G * (math.sin(psi) - mu * math.cos(psi)) * (1 - math.exp(-2 * length / md)))
    assert v == pytest.approx(16.7255980, abs=1e-6)
    p = traverse(incline_points(40, length, n=3), Mover(mu=mu, drag=1 / md))
    assert p.exit_speed_m_s == pytest.approx(v, rel=1e-12)


def test_segment_wrapper():
    th, mu = math.radians(20), 0.1
    a = G * (math.sin(th) - mu * math.cos(th))
    r = segment(2.0, 40 * math.sin(th), 40 * math.cos(th), Mover(mu=mu))
    assert isinstance(r, SegmentResult) and r.feasible
    assert r.length_m == pytest.approx(40.0)
    assert r.v_out_m_s == pytest.approx(math.sqrt(4 + 2 * a * 40), rel=1e-12)
    # uphill at 5 m/s, mechanics: stops after v0²/(2|a|)
    up = segment(5.0, -40 * math.sin(th), 40 * math.cos(th), Mover(mu=mu))
    a_up = G * (math.sin(th) + mu * math.cos(th))
    assert not up.feasible and up.time_s == math.inf and math.isnan(up.v_out_m_s)
    assert up.stalled_at_m == pytest.approx(25 / (2 * a_up), rel=1e-12)
    with pytest.raises(ParameterError, match="v_in_m_s"):
        segment(-1.0, 1.0, 1.0, Mover())
    with pytest.raises(ParameterError, match="mover"):
        segment(1.0, 1.0, 1.0, None)


# ---------------------------------------------------------------- curved lines, full model

def concave_arc(radius, n):
    """Quarter circle in a vertical plane from the vertical wall (θ = 0) to the bottom (θ = 90°)."""
    th = np.linspace(0.0, math.pi / 2, n + 1)
    return np.column_stack([-radius * np.cos(th), np.zeros_like(th), -radius * np.sin(th)])


def test_roberts_curved_chute_closed_form_against_solve_ivp():
    # Roberts (1969) curved chute, constant R, θ from the horizontal radius:
    # d(v²)/dθ = 2gR(cos θ − μ sin θ) − 2μ v², solved by
    # v² = [2gR/(1+4μ²)]·[(1 − 2μ²) sin θ + 3μ cos θ] + K e^(−2μθ)
    R, mu, v0 = 5.0, 0.4, 2.0
    A = 2 * G * R / (1 + 4 * mu * mu)
    K = v0 * v0 - A * 3 * mu
    th = np.linspace(0, math.pi / 2, 7)
    closed = A * ((1 - 2 * mu * mu) * np.sin(th) + 3 * mu * np.cos(th)) + K * np.exp(-2 * mu * th)
    sol = solve_ivp(lambda t, y: [2 * G * R * (math.cos(t) - mu * math.sin(t)) - 2 * mu * y[0]],
                    [0, math.pi / 2], [v0 * v0], t_eval=th, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(closed, sol.y[0], rtol=1e-9)
    assert math.sqrt(closed[-1]) == pytest.approx(4.6236049, abs=1e-7)  # CHECKS, recomputed


def test_concave_arc_full_normal_force():
    R, mu, v0 = 5.0, 0.4, 2.0
    A = 2 * G * R / (1 + 4 * mu * mu)
    v_exit = math.sqrt(A * (1 - 2 * mu * mu) + (v0 * v0 - A * 3 * mu) * math.exp(-mu * math.pi))
    # time from solve_ivp along s = Rθ with N = g sin θ + v²/R
    sol = ivp_along(lambda s, v2: 2 * (G * math.cos(s / R) - mu * (G * math.sin(s / R) + v2 / R)),
                    R * math.pi / 2, v0 * v0)
    assert math.sqrt(sol.y[0, -1]) == pytest.approx(v_exit, rel=1e-9)
    errs = []
    for n in (1000, 4000):
        p = traverse(concave_arc(R, n), Mover(mu=mu, v0=v0))
        # The polyline's end chords miss half a step of turning at each end: a missing bend of
        # Δθ costs at most a capstan factor e^(−μΔθ), the tolerance below.
        tol = mu * (math.pi / 2 / n)
        assert p.exit_speed_m_s == pytest.approx(v_exit, rel=tol)
        assert p.travel_time_s == pytest.approx(sol.y[1, -1], rel=tol)
        errs.append(abs(p.exit_speed_m_s - v_exit))
    assert errs[1] < errs[0] / 3  # converges as the sampling gets denser
    # the gravity-only model ignores v²/R: clearly faster at the exit here
    pg = traverse(concave_arc(R, 1000), Mover(mu=mu, v0=v0, normal="gravity"))
    assert pg.exit_speed_m_s > v_exit * 1.1


def test_convex_arc_liftoff():
    # convex arc R 5 m, μ 0.3, 1 m/s at a 30° slope, slope α growing along s = R(α − 30°):
    # d(v²)/ds = 2g sin α − 2μ(g cos α − v²/R); lift-off where v² = gR cos α (solve_ivp event)
    R, mu, v0, a0 = 5.0, 0.3, 1.0, math.radians(30)

    def lift(a, y):
        return y[0] - G * R * math.cos(a)
    lift.terminal = True
    sol = solve_ivp(lambda a, y: [2 * R * (G * math.sin(a) - mu * (G * math.cos(a) - y[0] / R))],
                    [a0, math.radians(89)], [v0 * v0], events=lift, rtol=1e-12, atol=1e-12)
    a_lift = sol.t_events[0][0]
    assert math.degrees(a_lift) == pytest.approx(57.47306, abs=1e-5)  # CHECKS, recomputed
    assert math.sqrt(sol.y_events[0][0][0]) == pytest.approx(5.134685, abs=1e-6)
    n = 500
    a = np.linspace(a0, math.radians(80), n + 1)
    pts = np.column_stack([R * np.sin(a), np.zeros_like(a), R * np.cos(a)])
    p = traverse(pts, Mover(mu=mu, v0=v0))
    step = (a[1] - a[0]) * R
    first = a0 + p.liftoff[0] / R
    # the first flagged vertex is the first one at or past the lift-off angle (within one step)
    assert a_lift - 1e-9 <= first <= a_lift + (a[1] - a[0]) * 1.01
    # every vertex past it is flagged too (the speed keeps rising on the steepening crest)
    assert p.liftoff[-1] == pytest.approx(p.station_m[-2], abs=1e-9)
    assert np.all(np.diff(p.liftoff) == pytest.approx(step, rel=1e-6))
    # speed before lift-off follows solve_ivp with the reduced normal force
    i = int(np.searchsorted(a, a_lift)) - 1
    ref = solve_ivp(lambda a_, y: [2 * R * (G * math.sin(a_) - mu * (G * math.cos(a_) - y[0] / R))],
                    [a0, a[i]], [v0 * v0], rtol=1e-12, atol=1e-12)
    assert p.speed_m_s[i] == pytest.approx(math.sqrt(ref.y[0, -1]), rel=mu * (a[1] - a[0]))
    # on the same arc travelled slowly (no lift-off) nothing is flagged
    slow = traverse(pts[: n // 10], Mover(mu=mu, v0=v0))
    assert slow.liftoff.size == 0


def level_bend(radius, n):
    a = np.linspace(0, math.pi / 2, n + 1)
    return np.column_stack([radius * np.sin(a), radius * (1 - np.cos(a)), np.full_like(a, 7.0)])


def test_level_bend_channel_reading():
    # The reported (full) model reads a line as a channel: the bed carries gravity's normal
    # part, the walls the centripetal force, each with Coulomb friction, so the friction
    # is μ(g + v²/R) on a level bend — the continuous limit of straight pieces with the
    # belt-friction (capstan) law at each corner (Euler–Eytelwein).  CHECKS "Level bend":
    # 10 m/s into a 15 m quarter bend at μ 0.15 exits at ≈ 2.67 m/s this way; a point mass
    # on one banked surface (N = √(g² + (v²/R)²)) would keep ≈ 4.93 m/s.
    R, mu, v0 = 15.0, 0.15, 10.0
    length = R * math.pi / 2
    chan = ivp_along(lambda s, v2: -2 * mu * (G + v2 / R), length, v0 * v0)
    v_chan = math.sqrt(chan.y[0, -1])
    assert v_chan == pytest.approx(2.67, abs=0.01)  # CHECKS: ≈ 2.67 m/s
    vec = ivp_along(lambda s, v2: -2 * mu * math.sqrt(G * G + (v2 / R) ** 2), length, v0 * v0)
    assert math.sqrt(vec.y[0, -1]) == pytest.approx(4.93, abs=0.01)  # CHECKS: ≈ 4.93 m/s
    n = 4000
    p = traverse(level_bend(R, n), Mover(mu=mu, v0=v0))
    # the polyline turns (n − 1)·Δθ at its interior vertices, Δθ short of the arc: 2μΔθ of
    # v² at up to v0², i.e. a relative error in v of about μΔθ (v0/v_exit)²
    tol = mu * (math.pi / 2 / n) * (v0 / v_chan) ** 2
    assert p.exit_speed_m_s == pytest.approx(v_chan, rel=tol)
    assert p.travel_time_s == pytest.approx(chan.y[1, -1], rel=tol)
    # the load on the structure is the resultant of bed and wall forces: √(1 + (v²/(gR))²)
    mid = ivp_along(lambda s, v2: -2 * mu * (G + v2 / R), length / 2, v0 * v0)
    assert p.normal_ratio[n // 2] == pytest.approx(math.sqrt(1 + (mid.y[0, -1] / (G * R)) ** 2), rel=1e-3)
    # and the gravity-only model (N = g) is too fast
    pg = traverse(level_bend(R, n), Mover(mu=mu, v0=v0, normal="gravity"))
    # (friction work μ g × plan length, the polyline's own length)
    assert pg.exit_speed_m_s == pytest.approx(math.sqrt(v0 * v0 - 2 * mu * G * pg.station_m[-1]), rel=1e-12)
    assert pg.exit_speed_m_s > p.exit_speed_m_s + 0.3


def test_descending_helix_3d():
    # helix x = r cos t, y = r sin t, z = −c t: κ = r/(r² + c²), principal normal horizontal
    # (towards the axis), gravity's normal part g cos α, tan α = c/r (differential geometry
    # of the helix).  Channel reading: |N| = g cos α + v²κ; reference by solve_ivp
    r, c, mu, k, v0 = 12.0, 2.5, 0.2, 0.004, 6.0
    kappa = r / (r * r + c * c)
    alpha = math.atan2(c, r)
    turns = 1.5
    length = 2 * math.pi * turns * math.hypot(r, c)
    sol = ivp_along(lambda s, v2: 2 * G * math.sin(alpha)
                    - 2 * mu * (v2 * kappa + G * math.cos(alpha)) - 2 * k * v2, length, v0 * v0)
    n = 6000
    t = np.linspace(0, 2 * math.pi * turns, n + 1)
    pts = np.column_stack([r * np.cos(t), r * np.sin(t), 500.0 - c * t])
    p = traverse(pts, Mover(mu=mu, drag=k, v0=v0))
    tol = 2 * mu * (t[1] - t[0])  # the turn missing at the ends, and chords vs arc
    assert p.exit_speed_m_s == pytest.approx(math.sqrt(sol.y[0, -1]), rel=tol)
    assert p.travel_time_s == pytest.approx(sol.y[1, -1], rel=tol)
    assert p.liftoff.size == 0


def test_segments_and_curvature_of_a_regular_polygon():
    # an inscribed regular polygon has chords 2R sin(Δθ/2) and every three consecutive
    # vertices lie on its circle (elementary geometry): the segment geometry of the traverse
    # kernel, and the curvature 1/R with the normal towards the centre that a profile's
    # loads are read with (fallway.loads.line_loads)
    from fallway._traverse import segment_geometry
    from fallway.loads import line_loads
    R, n = 7.0, 12
    th = np.linspace(0, 2 * math.pi * (n - 1) / n, n)
    pts = np.ascontiguousarray(np.column_stack([R * np.cos(th), R * np.sin(th), np.zeros(n)]))
    tang, seg = np.empty((n - 1, 3)), np.empty(n - 1)
    segment_geometry(pts, tang, seg)
    d = 2 * math.pi / n
    np.testing.assert_allclose(seg, 2 * R * math.sin(d / 2), rtol=1e-13)
    np.testing.assert_allclose(tang, np.diff(pts, axis=0) / seg[:, None], rtol=1e-13)
    ld = line_loads(pts, np.ones(n), g=9.80665)
    np.testing.assert_allclose(ld.curvature_1_m[1:-1], 1.0 / R, rtol=1e-12)
    assert ld.curvature_1_m[0] == 0.0 and ld.curvature_1_m[-1] == 0.0


@pytest.mark.parametrize("phi_deg", [30.0, 90.0, 150.0])
def test_short_sharp_bend_belt_friction(phi_deg):
    # Euler–Eytelwein (capstan / belt friction): v_out = v_in e^(−μφ) when the centripetal part
    # dominates; μ 0.4, 90° -> 0.5334881 (CHECKS)
    mu, v0, leg = 0.4, 20.0, 1e-3
    phi = math.radians(phi_deg)
    pts = np.array([[-leg, 0, 3.0], [0, 0, 3.0], [leg * math.cos(phi), leg * math.sin(phi), 3.0]])
    p = traverse(pts, Mover(mu=mu, v0=v0))
    factor = math.exp(-mu * phi)
    if phi_deg == 90.0:
        assert factor == pytest.approx(0.5334881, abs=1e-7)
    # gravity's part adds |N| <= g over 2 legs: at most 4μg·leg of v², this bound
    v_out = v0 * factor
    tol = 4 * mu * G * leg / (2 * v_out * v_out)
    assert p.exit_speed_m_s / v0 == pytest.approx(factor, rel=tol)
    assert p.exit_speed_m_s / v0 < factor  # gravity's part only adds friction


def test_cycloid_brachistochrone():
    # Bernoulli (1696): from rest, x = R(φ − sin φ), y = R(1 − cos φ), T = φ √(R/g);
    # L = 100 m across, H = 40 m down (CHECKS, recomputed here)
    L, H = 100.0, 40.0
    phi = brentq(lambda f: (f - math.sin(f)) / (1 - math.cos(f)) - L / H, 1e-3, 2 * math.pi - 1e-3)
    R = H / (1 - math.cos(phi))
    T = phi * math.sqrt(R / G)
    assert (R, phi, T) == pytest.approx((22.48728, 3.819665, 5.784069), abs=2e-6)
    f = np.linspace(0, phi, 2001)
    pts = np.column_stack([R * (f - np.sin(f)), np.zeros_like(f), 100.0 - R * (1 - np.cos(f))])
    full = traverse(pts, Mover())
    grav = traverse(pts, Mover(normal="gravity"))
    assert full.travel_time_s == pytest.approx(T, rel=1e-6)
    np.testing.assert_allclose(full.time_s, grav.time_s, rtol=1e-12)  # equal with μ = 0
    # frictionless energy: v = √(2g·depth) at every vertex
    np.testing.assert_allclose(full.speed_m_s, np.sqrt(2 * G * (100.0 - pts[:, 2])), rtol=1e-12, atol=1e-12)
    # the straight chord from rest: t = s √(2/(gH)) = 7.690484 s (CHECKS), slower
    chord = traverse([[0, 0, 40.0], [L, 0, 0.0]], Mover())
    assert chord.travel_time_s == pytest.approx(math.hypot(L, H) * math.sqrt(2 / (G * H)), rel=1e-12)
    assert chord.travel_time_s == pytest.approx(7.690484, abs=1e-6)
    assert chord.travel_time_s > full.travel_time_s


# ---------------------------------------------------------------- flags

@pytest.mark.parametrize("normal", MODELS)
def test_overspeed_stations(normal):
    # straight incline from rest: v² = 2as exceeds v_max past s* = v_max²/(2a) (mechanics)
    th, mu, vmax = math.radians(25), 0.1, 12.0
    a = G * (math.sin(th) - mu * math.cos(th))
    p = traverse(incline_points(25, 60.0, n=61), Mover(mu=mu, max_speed=vmax, normal=normal))
    s_star = vmax ** 2 / (2 * a)
    expected = p.station_m[p.station_m > s_star]
    if normal == "full":  # segment midpoints are checked too
        mids = 0.5 * (p.station_m[:-1] + p.station_m[1:])
        expected = np.unique(np.concatenate([expected, mids[mids > s_star]]))
    np.testing.assert_allclose(p.overspeed, expected)
    assert traverse(incline_points(25, 60.0), Mover(mu=mu)).overspeed.size == 0


@pytest.mark.parametrize("normal", MODELS)
def test_stall_midway_and_nan_after(normal):
    # 8 m/s up a 10° slope with μ 0.1: stops after v0²/(2g(sin θ + μ cos θ)) (mechanics)
    th, mu, v0 = math.radians(10), 0.1, 8.0
    d = np.array([math.cos(th), 0.0, math.sin(th)])
    pts = np.outer(np.linspace(0, 40, 9), d)
    p = traverse(pts, Mover(mu=mu, v0=v0, normal=normal))
    s_stop = v0 * v0 / (2 * G * (math.sin(th) + mu * math.cos(th)))
    assert p.stalled_at_m == pytest.approx(s_stop, rel=1e-12)
    assert not p.feasible and p.travel_time_s == math.inf and math.isnan(p.exit_speed_m_s)
    before = p.station_m <= s_stop
    assert np.isfinite(p.speed_m_s[before]).all() and np.isfinite(p.time_s[before]).all()
    assert np.isnan(p.speed_m_s[~before]).all() and np.isnan(p.time_s[~before]).all()


def test_stall_inside_a_bend():
    # level bend entered slowly: the full model stalls where v² runs out; solve_ivp event
    R, mu, v0 = 15.0, 0.15, 5.0
    length = R * math.pi / 2

    def stop(s, y):
        return y[0]
    stop.terminal = True
    sol = solve_ivp(lambda s, y: [-2 * mu * (G + y[0] / R)], [0, length], [v0 * v0],  # channel reading
                    events=stop, rtol=1e-12, atol=1e-12)
    s_ref = sol.t_events[0][0]
    n = 4000
    p = traverse(level_bend(R, n), Mover(mu=mu, v0=v0))
    assert p.stalled_at_m == pytest.approx(s_ref, abs=2 * length / n)


# ---------------------------------------------------------------- local gravity

def test_normal_gravity_published_values():
    # NIMA TR8350.2 (WGS 84): γ_e = 9.7803253359, γ_p = 9.8321849378 m/s² (published constants)
    assert normal_gravity(0.0) == pytest.approx(9.7803253359, abs=1e-10)
    assert normal_gravity(90.0) == pytest.approx(9.8321849378, abs=2e-10)
    assert normal_gravity(-90.0) == normal_gravity(90.0)
    # 45° from Somigliana's formula evaluated independently here
    s2 = 0.5
    g45 = 9.7803253359 * (1 + 0.00193185265241 * s2) / math.sqrt(1 - 0.00669437999013 * s2)
    assert g45 == pytest.approx(9.806198, abs=1e-6)
    assert normal_gravity(45.0) == pytest.approx(g45, rel=1e-14)
    # free-air gradient ≈ −3.086e-6 s⁻² (first order, CHECKS) and the 45°/1000 m example
    assert (normal_gravity(45.0, 1000.0) - g45) / 1000.0 == pytest.approx(-3.086e-6, rel=2e-3)
    assert normal_gravity(45.0, 1000.0) == pytest.approx(9.8031129, abs=1e-7)
    m = Mover(g=normal_gravity(60.0, 500.0), mu=0.1)
    assert 9.81 < m.g < 9.82
    # local gravity is used along the line: t = √(2s/a), a = g(sin θ − μ cos θ)
    th = math.radians(30)
    a = m.g * (math.sin(th) - 0.1 * math.cos(th))
    assert traverse(incline_points(30, 20.0), m).travel_time_s == pytest.approx(math.sqrt(40 / a), rel=1e-12)
    for bad in (91.0, math.nan, "north"):
        with pytest.raises(ParameterError, match="lat_deg"):
            normal_gravity(bad)
    with pytest.raises(ParameterError, match="height_m"):
        normal_gravity(10.0, 1e6)


# ---------------------------------------------------------------- bad input

def test_bad_inputs():
    m = Mover(mu=0.1)
    with pytest.raises(ParameterError, match="at least two"):
        traverse([[0, 0, 0]], m)
    with pytest.raises(ParameterError, match="shape"):
        traverse([[0, 0], [1, 1]], m)
    with pytest.raises(ParameterError, match="row 1"):
        traverse([[0, 0, 1], [1, np.nan, 0], [2, 0, 0]], m)
    with pytest.raises(ParameterError, match="row 0"):
        traverse([[np.inf, 0, 1], [1, 0, 0]], m)
    with pytest.raises(ParameterError, match="distinct"):
        traverse([[1, 2, 3], [1, 2, 3], [1, 2, 3]], m)
    with pytest.raises(ParameterError, match="N, 3"):
        traverse([[0, 0, 0], [1, "a", 0]], m)
    with pytest.raises(ParameterError, match="mover"):
        traverse([[0, 0, 1], [1, 0, 0]], {"mu": 0.1})


@pytest.mark.parametrize("normal", MODELS)
def test_repeated_points_are_skipped(normal):
    f = np.linspace(0, 2.0, 9)
    pts = np.column_stack([20 * np.sin(f), 20 * (1 - np.cos(f)), 30 - 4 * f])
    rep = np.repeat(pts, [1, 2, 1, 3, 1, 1, 2, 1, 2], axis=0)
    mover = Mover(mu=0.2, drag=0.01, v0=3.0, normal=normal)
    a, b = traverse(pts, mover), traverse(rep, mover)
    assert b.speed_m_s.shape == (rep.shape[0],)
    np.testing.assert_array_equal(np.unique(b.speed_m_s), np.unique(a.speed_m_s))
    assert b.travel_time_s == a.travel_time_s
    assert np.isfinite(b.speed_m_s).all() and np.isfinite(b.time_s).all()
    np.testing.assert_array_equal(b.points, rep)


@pytest.mark.parametrize("normal", MODELS)
def test_start_at_rest_on_upslope(normal):
    p = traverse([[0, 0, 0], [10, 0, 1], [20, 0, 0]], Mover(mu=0.0, normal=normal))
    assert p.stalled_at_m == 0.0
    assert p.speed_m_s[0] == 0.0 and p.time_s[0] == 0.0
    assert np.isnan(p.speed_m_s[1:]).all() and np.isnan(p.time_s[1:]).all()
    assert np.isfinite(p.grade).all()
    # a level start from rest with friction stalls too; without friction it never moves either
    assert traverse([[0, 0, 0], [10, 0, 0]], Mover(mu=0.1, normal=normal)).stalled_at_m == 0.0
    # a vertical drop is free fall: t = √(2h/g)
    fall = traverse([[0, 0, 10.0], [0, 0, 0.0]], Mover(mu=0.3, normal=normal))
    assert fall.travel_time_s == pytest.approx(math.sqrt(2 * 10 / G), rel=1e-12)


def test_profile_is_frozen_and_readonly():
    p = traverse(incline_points(20, 10.0), Mover())
    assert isinstance(p, Profile)
    with pytest.raises(ValueError):
        p.speed_m_s[0] = 1.0
    with pytest.raises(AttributeError):
        p.stalled_at_m = 3.0


# ---------------------------------------------------------------- properties (hypothesis)

coord = st.floats(-30.0, 30.0, allow_nan=False)


@st.composite
def lines(draw, min_n=2, max_n=7):
    n = draw(st.integers(min_n, max_n))
    xy = [draw(st.tuples(coord, coord)) for _ in range(n)]
    z = [draw(st.floats(-20.0, 20.0)) for _ in range(n)]
    pts = np.column_stack([np.array(xy), np.array(z)])
    assume(np.all(np.linalg.norm(np.diff(pts, axis=0), axis=1) > 1e-3))
    return pts


movers = st.fixed_dictionaries({
    "mu": st.floats(0.0, 0.8), "drag": st.floats(0.0, 0.05), "v0": st.floats(0.0, 25.0),
    "normal": st.sampled_from(MODELS)})

SETTINGS = settings(max_examples=60, deadline=None)


@SETTINGS
@given(lines(), movers)
def test_energy_never_rises_without_a_drop(pts, kw):
    mover = Mover(**kw)
    p = traverse(pts, mover)
    ok = np.isfinite(p.speed_m_s)
    bound = mover.v0 ** 2 + 2 * G * (pts[0, 2] - pts[:, 2])
    assert np.all(p.speed_m_s[ok] ** 2 <= bound[ok] + 1e-9 * (1 + np.abs(bound[ok])))
    # never a NaN before the stall
    if p.feasible:
        assert ok.all()
    else:
        assert ok[p.station_m <= p.stalled_at_m].all()


@SETTINGS
@given(lines(), movers, st.floats(0.1, 10.0))
def test_time_falls_as_v0_rises(pts, kw, dv):
    slow = traverse(pts, Mover(**kw))
    fast = traverse(pts, Mover(**{**kw, "v0": kw["v0"] + dv}))
    assert fast.travel_time_s <= slow.travel_time_s * (1 + 1e-12)
    if not slow.feasible and not fast.feasible:
        assert fast.stalled_at_m >= slow.stalled_at_m - 1e-9
    ok = np.isfinite(slow.time_s)
    assert np.all(fast.time_s[ok] <= slow.time_s[ok] * (1 + 1e-12) + 1e-12)


@SETTINGS
@given(lines(), movers, st.floats(0.01, 0.5))
def test_more_friction_never_faster(pts, kw, dmu):
    base = traverse(pts, Mover(**kw))
    more = traverse(pts, Mover(**{**kw, "mu": kw["mu"] + dmu}))
    assert more.travel_time_s >= base.travel_time_s * (1 - 1e-12)
    ok = np.isfinite(more.speed_m_s)
    assert np.all(more.speed_m_s[ok] <= base.speed_m_s[ok] * (1 + 1e-12) + 1e-12)


@SETTINGS
@given(lines(), movers, st.floats(0.001, 0.05))
def test_more_drag_never_faster(pts, kw, dk):
    base = traverse(pts, Mover(**kw))
    more = traverse(pts, Mover(**{**kw, "drag": kw["drag"] + dk}))
    assert more.travel_time_s >= base.travel_time_s * (1 - 1e-12)


@SETTINGS
@given(lines(min_n=3), st.sampled_from(MODELS), st.floats(0.5, 10.0))
def test_reversing_a_frictionless_line_keeps_speed_at_each_height(pts, normal, margin):
    # energy conservation: v² + 2gz is constant without friction and drag, either direction
    v0 = math.sqrt(2 * G * max(pts[:, 2].max() - pts[0, 2], 0.0)) + margin
    fwd = traverse(pts, Mover(v0=v0, normal=normal))
    assert fwd.feasible
    back = traverse(pts[::-1], Mover(v0=fwd.exit_speed_m_s, normal=normal))
    assert back.feasible
    np.testing.assert_allclose(back.speed_m_s[::-1], fwd.speed_m_s, rtol=1e-9)


# --------------------------------------------------------------------------- lift-off against the ground
def test_plan_turn_on_a_slope_does_not_lift_off_when_the_ground_normal_is_given():
    # A curve lying in a plane has zero normal curvature (differential geometry: the
    # curvature vector of a plane curve lies in the plane), so the plane's reaction along
    # its normal is g·cos(slope) > 0 whatever the speed: an open chute cannot lift off.
    slope = np.radians(25.0)
    nrm = np.array([np.sin(slope), 0.0, np.cos(slope)])           # plane falling east
    u_dir = np.array([np.cos(slope), 0.0, -np.sin(slope)])       # fall line in the plane
    w_dir = np.array([0.0, 1.0, 0.0])                            # level line in the plane
    th = np.linspace(0.0, np.pi / 2, 200)
    r = 8.0                                                      # tight 8 m bend
    # enters level, bends down into the fall line: seen in its own vertical plane the
    # curvature points downhill, like a crest
    pts = (np.outer(r * np.sin(th), w_dir) + np.outer(r * (1 - np.cos(th)), u_dir))
    mover = Mover(mu=0.0, v0=15.0)                               # fast: v²/r ≈ 2.9 g
    on_ground = traverse(pts, mover, surface_normal=np.tile(nrm, (len(pts), 1)))
    assert on_ground.liftoff.size == 0
    # judged in the vertical plane of the line instead, the same bend looks like a crest
    assert traverse(pts, mover).liftoff.size > 0


def test_convex_crest_lift_off_is_the_same_with_the_ground_normal():
    # A line in a vertical plane over a convex arc: the ground normal is the up normal in
    # that plane, so both judgements agree (lift-off where v² > g R cos(slope)).
    R = 5.0
    th = np.radians(np.linspace(30.0, 80.0, 800))                # CHECKS.md: 1 m/s at 30°
    pts = np.column_stack([R * np.sin(th), np.zeros_like(th), R * np.cos(th)])
    normals = np.column_stack([np.sin(th), np.zeros_like(th), np.cos(th)])
    mover = Mover(mu=0.3, v0=1.0)
    a = traverse(pts, mover)
    b = traverse(pts, mover, surface_normal=normals)
    assert a.liftoff.size > 0
    np.testing.assert_array_equal(a.liftoff, b.liftoff)


def test_surface_normal_must_match_the_points():
    with pytest.raises(ParameterError, match="surface_normal must be a finite"):
        traverse([[0, 0, 1.0], [1, 0, 0.0]], Mover(), surface_normal=[[0, 0, 1.0]])
