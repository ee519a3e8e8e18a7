"""The carrier's run on one span against scipy's solve_ivp along the same loaded path.

Reference: the motion of a point mass along a plane curve z(x) (any mechanics text):
d(v²)/ds = -2 g dz/ds - 2 mu N - 2 k v², dt/ds = 1/v, with N = g cos(theta) on the
gravity-normal model and N = g cos(theta) + v² kappa on the full model for a path that is
concave up (the sagging rope presses on the carrier's wheels from below),
kappa = z'' / (1 + z'²)^(3/2); integrated in x with ds/dx = sqrt(1 + z'²).
"""

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from fallway.cable.run import run_span
from fallway.cable.span import Span
from fallway.physics import STANDARD_GRAVITY as G, Mover


def _reference(span: Span, mover: Mover, v_in: float, full: bool):
    L = span.length_m
    c = span.midspan_deflection_m / (L * L / 4.0)   # loaded path: chord - c x (L - x)
    m = span.chord_slope

    def rhs(x, y):
        v2, _ = y
        zp = m - c * (L - 2.0 * x)
        zpp = 2.0 * c
        ds = math.sqrt(1.0 + zp * zp)
        cos_t = 1.0 / ds
        kappa = zpp / ds ** 3
        n = G * cos_t + (v2 * kappa if full else 0.0)
        dv2_ds = -2.0 * G * zp / ds - 2.0 * mover.mu * n - 2.0 * mover.drag * v2
        return [dv2_ds * ds, ds / math.sqrt(max(v2, 1e-300))]

    sol = solve_ivp(rhs, [0.0, L], [v_in * v_in, 0.0], rtol=1e-11, atol=1e-11, method="DOP853",
                    dense_output=True)
    return sol


@pytest.mark.parametrize("normal", ["gravity", "full"])
@pytest.mark.parametrize("v_in", [2.0, 12.0])
def test_one_span_time_against_solve_ivp(normal, v_in):
    span = Span(180.0, 200.0, 150.0, 40e3, 6e3, 15.0)
    mover = Mover(mu=0.03, drag=0.002, normal=normal)
    x = np.linspace(0.0, span.length_m, 2001)
    pts = np.column_stack([x, np.zeros_like(x), span.loaded_z(x)])
    r = run_span(pts, mover, v_in)
    ref = _reference(span, mover, v_in, normal == "full")
    assert r.feasible
    assert r.time_s == pytest.approx(ref.y[1, -1], rel=2e-5)
    assert r.exit_speed_m_s == pytest.approx(math.sqrt(ref.y[0, -1]), rel=2e-5)
    mid = ref.sol(span.length_m / 2)
    np.testing.assert_allclose(r.profile.speed_m_s[1000], math.sqrt(mid[0]), rtol=2e-5)


def test_full_model_is_slower_on_a_sagging_span():
    # the curvature adds to the normal force, hence to the rolling resistance
    span = Span(180.0, 200.0, 150.0, 20e3, 6e3, 15.0)
    x = np.linspace(0.0, span.length_m, 1001)
    pts = np.column_stack([x, np.zeros_like(x), span.loaded_z(x)])
    t_g = run_span(pts, Mover(mu=0.05, normal="gravity"), 5.0).time_s
    t_f = run_span(pts, Mover(mu=0.05, normal="full"), 5.0).time_s
    assert t_f > t_g


def test_stall_and_overspeed_flagged():
    span = Span(200.0, 100.0, 95.0, 30e3, 5e3, 10.0)   # nearly level, deep sag: it climbs out
    mover = Mover(mu=0.05, normal="gravity")
    x = np.linspace(0.0, span.length_m, 4001)
    pts = np.column_stack([x, np.zeros_like(x), span.loaded_z(x)])
    r = run_span(pts, mover, 3.0)
    assert r.stalled_at_m is not None and not r.feasible and math.isinf(r.time_s)
    # reference: where v² reaches 0 (solve_ivp event), as arc length along the path
    c = span.midspan_deflection_m / (span.length_m ** 2 / 4.0)
    m, L = span.chord_slope, span.length_m

    def rhs(xx, y):
        zp = m - c * (L - 2.0 * xx)
        ds = math.sqrt(1.0 + zp * zp)
        return [(-2.0 * G * zp / ds - 2.0 * mover.mu * G / ds) * ds, ds]

    rest = lambda xx, y: y[0]
    rest.terminal = True
    sol = solve_ivp(rhs, [0.0, L], [9.0, 0.0], rtol=1e-11, atol=1e-11, events=rest)
    assert sol.t_events[0].size == 1
    assert r.stalled_at_m == pytest.approx(sol.y_events[0][0][1], rel=1e-4)
    x = np.linspace(0.0, span.length_m, 801)
    steep = Span(200.0, 200.0, 100.0, 30e3, 5e3, 10.0)
    pts = np.column_stack([x, np.zeros_like(x), steep.loaded_z(x)])
    ref = _reference(steep, Mover(mu=0.02, normal="gravity"), 0.5, False)
    vmax = math.sqrt(ref.y[0].max())
    assert run_span(pts, Mover(mu=0.02, normal="gravity", max_speed=0.9 * vmax), 0.5).overspeed
    assert run_span(pts, Mover(mu=0.02, normal="gravity", max_speed=1.1 * vmax), 0.5).feasible
