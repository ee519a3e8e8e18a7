"""The jitted straight-segment law against mechanics formulas and scipy's solve_ivp."""

import math

import pytest
from scipy.integrate import quad, solve_ivp

from fallway._segment import segment_law

G = 9.80665


def incline(theta_deg, length_m):
    """(drop, plan, length) of a straight incline."""
    th = math.radians(theta_deg)
    return length_m * math.sin(th), length_m * math.cos(th), length_m


def ivp_segment(v0, a, k, length_m, v_stall=0.0):
    """Reference: integrate dx/dt = v, dv/dt = a - k v² in time with scipy.

    Returns (speed at the end or None, time at the end or None, stall position or None).
    """
    def rhs(t, y):
        return [y[1], a - k * y[1] * y[1]]

    def arrive(t, y):
        return y[0] - length_m
    arrive.terminal = True

    def stall(t, y):
        return y[1] - v_stall
    stall.terminal = True
    stall.direction = -1
    sol = solve_ivp(rhs, [0.0, 1e4], [0.0, v0], events=[arrive, stall], rtol=1e-12, atol=1e-12,
                    method="DOP853")
    if sol.t_events[0].size:
        return sol.y_events[0][0][1], sol.t_events[0][0], None
    return None, None, sol.y_events[1][0][0]


# --- Incline with Coulomb friction (any mechanics text): a = g(sin θ − μ cos θ),
#     v² = v0² + 2as, t = (√(v0² + 2as) − v0)/a.
@pytest.mark.parametrize("theta, mu, s, v0", [(30, 0.2, 50.0, 0.0), (12, 0.05, 80.0, 3.0),
                                              (45, 0.0, 10.0, 1.0)])
def test_incline_friction_closed_form(theta, mu, s, v0):
    th = math.radians(theta)
    a = G * (math.sin(th) - mu * math.cos(th))
    v = math.sqrt(v0 * v0 + 2 * a * s)
    t = (v - v0) / a
    v2, time_s, at = segment_law(v0 * v0, *incline(theta, s), G, mu, 0.0, 0.0)
    assert at < 0
    assert math.sqrt(v2) == pytest.approx(v, rel=1e-13)
    assert time_s == pytest.approx(t, rel=1e-13)


def test_incline_friction_checks_example():
    # CHECKS (mechanics formula, recomputed above): 30°, μ 0.2, 50 m from rest
    a = G * (math.sin(math.radians(30)) - 0.2 * math.cos(math.radians(30)))
    assert math.sqrt(2 * 50 / a) == pytest.approx(5.5860139, abs=1e-7)
    v2, t, _ = segment_law(0.0, *incline(30, 50.0), G, 0.2, 0.0, 0.0)
    assert t == pytest.approx(5.5860139, abs=1e-7)
    assert math.sqrt(v2) == pytest.approx(17.9018530, abs=1e-7)


# --- Incline with drag k v² from rest: v_t = √(a/k), v² = v_t²(1 − e^(−2ks)),
#     t = artanh(v/v_t)/(k v_t)  (derived from dv/dt = a − k v²), confirmed with solve_ivp.
@pytest.mark.parametrize("theta, mu, k, s", [(30, 0.2, 0.01, 50.0), (20, 0.1, 0.05, 100.0),
                                             (60, 0.0, 0.001, 30.0)])
def test_incline_drag_from_rest(theta, mu, k, s):
    th = math.radians(theta)
    a = G * (math.sin(th) - mu * math.cos(th))
    vt = math.sqrt(a / k)
    v = vt * math.sqrt(-math.expm1(-2 * k * s))
    t = math.atanh(v / vt) / (k * vt)
    v_ivp, t_ivp, _ = ivp_segment(0.0, a, k, s)
    assert v == pytest.approx(v_ivp, rel=1e-9)
    assert t == pytest.approx(t_ivp, rel=1e-9)
    v2, time_s, at = segment_law(0.0, *incline(theta, s), G, mu, k, 0.0)
    assert at < 0
    assert math.sqrt(v2) == pytest.approx(v, rel=1e-12)
    assert time_s == pytest.approx(t, rel=1e-12)


def test_incline_drag_checks_example():
    # CHECKS (recomputed by the formula above): 30°, μ 0.2, k 0.01, 50 m -> 6.0610402 s, 14.2330490 m/s
    v2, t, _ = segment_law(0.0, *incline(30, 50.0), G, 0.2, 0.01, 0.0)
    assert t == pytest.approx(6.0610402, abs=1e-7)
    assert math.sqrt(v2) == pytest.approx(14.2330490, abs=1e-7)


def test_perla_cheng_mcclung_example():
    # Perla, Cheng & McClung, J. Glaciol. 26(94) (1980): dv²/ds = 2g(sin ψ − μ cos ψ) − 2(D/M) v²;
    # μ = 0.25, M/D = 100 m, 50 m of a 40° slope from rest (CHECKS, recomputed here).
    psi, mu, md = math.radians(40), 0.25, 100.0
    a = G * (math.sin(psi) - mu * math.cos(psi))
    v_term = math.sqrt(a * md)
    v_pcm = math.sqrt(a * md * (1 - math.exp(-2 * 50 / md)))
    assert v_term == pytest.approx(21.0368978, abs=1e-6)
    assert v_pcm == pytest.approx(16.7255980, abs=1e-6)
    v2, _, _ = segment_law(0.0, *incline(40, 50.0), G, mu, 1 / md, 0.0)
    assert math.sqrt(v2) == pytest.approx(v_pcm, rel=1e-12)


@pytest.mark.parametrize("v0, drop, plan, mu, k", [
    (25.0, -2.0, 40.0, 0.05, 0.02),  # decelerating uphill with drag (a < 0)
    (30.0, 10.0, 60.0, 0.05, 0.02),  # entering above the terminal speed (a > 0)
    (8.0, 5.0, 50.0, 0.1, 0.03),     # drop = mu * plan: a = 0 with drag
    (4.0, 2.0, 50.0, 0.0, 0.01),     # gentle, below terminal
])
def test_drag_cases_against_solve_ivp(v0, drop, plan, mu, k):
    s = math.hypot(drop, plan)
    a = G * (drop - mu * plan) / s
    v_ivp, t_ivp, stall = ivp_segment(v0, a, k, s)
    assert stall is None
    v2, t, at = segment_law(v0 * v0, drop, plan, s, G, mu, k, 0.0)
    assert at < 0
    assert math.sqrt(v2) == pytest.approx(v_ivp, rel=1e-9)
    assert t == pytest.approx(t_ivp, rel=1e-9)


@pytest.mark.parametrize("excess", [1e-6, 1e-10, 1e-13])
def test_tiny_positive_acceleration_above_terminal(excess):
    # drop barely above mu * plan: terminal speed tiny, entry far above it.  Reference:
    # v²(σ) = a/k + (v0² − a/k) e^(−2kσ) integrated for dt = dσ/v by scipy quad.
    v0, plan, mu, k = 10.0, 100.0, 0.1, 0.01
    drop = mu * plan + excess
    s = math.hypot(drop, plan)
    a = G * (drop - mu * plan) / s
    c = a / k
    ref = quad(lambda x: 1 / math.sqrt(c + (v0 * v0 - c) * math.exp(-2 * k * x)), 0, s,
               epsabs=0, epsrel=1e-13, limit=200)[0]
    _, t, at = segment_law(v0 * v0, drop, plan, s, G, mu, k, 0.0)
    assert at < 0
    assert t == pytest.approx(ref, rel=1e-12)


@pytest.mark.parametrize("k", [0.0, 0.02])
def test_stall_position(k):
    # uphill at 6 m/s: no drag s = v0²/(−2a) (mechanics); with drag, solve_ivp's event
    v0, drop, plan, mu = 6.0, -3.0, 40.0, 0.1
    s = math.hypot(drop, plan)
    a = G * (drop - mu * plan) / s
    _, _, stall_ivp = ivp_segment(v0, a, k, s)
    if k == 0.0:
        assert stall_ivp == pytest.approx(v0 * v0 / (-2 * a), rel=1e-9)
    v2, t, at = segment_law(v0 * v0, drop, plan, s, G, mu, k, 0.0)
    assert v2 == 0.0 and t == math.inf
    assert at == pytest.approx(stall_ivp, rel=1e-9)


def test_stall_speed_position_and_start_from_rest():
    v0, drop, plan, mu, k, vs = 6.0, -3.0, 40.0, 0.1, 0.02, 2.5
    s = math.hypot(drop, plan)
    a = G * (drop - mu * plan) / s
    _, _, stall_ivp = ivp_segment(v0, a, k, s, v_stall=vs)
    _, _, at = segment_law(v0 * v0, drop, plan, s, G, mu, k, vs * vs)
    assert at == pytest.approx(stall_ivp, rel=1e-9)
    # a start from rest below the stall speed while accelerating is not a stall
    v2, t, at = segment_law(0.0, *incline(30, 50.0), G, 0.2, 0.0, 4.0)
    assert at < 0 and math.isfinite(t) and v2 > 16.0
    # at rest on an upslope or a frictional level: stall at 0
    assert segment_law(0.0, -1.0, 10.0, math.hypot(1, 10), G, 0.0, 0.0, 0.0)[2] == 0.0
    assert segment_law(0.0, 0.0, 10.0, 10.0, G, 0.1, 0.01, 0.0)[2] == 0.0
    # zero length: unchanged
    assert segment_law(4.0, 0.0, 0.0, 0.0, G, 0.1, 0.01, 0.0) == (4.0, 0.0, -1.0)
