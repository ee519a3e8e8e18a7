"""Span mechanics of a cable line against hand computations and classical statics.

Sources: the cable theorem of statics (a cable under vertical loads with horizontal
tension H lies below its chord by M(x)/H, M the bending moment of a simply supported
beam of the same span under the same loads; H. M. Irvine, *Cable Structures*, MIT Press
1981, ch. 1 - cited from memory); the catenary ``H z'' = w sqrt(1 + z'²)`` (Irvine ch. 1,
from memory) integrated here with scipy; the ellipse of a free carrier on an
inextensible rope (classical statics: the sum of distances to the foci is constant and
the rest position has equal rope angles).
"""

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import minimize_scalar

from fallway.cable.span import Span, catenary_sag_m, ellipse_path_z, loaded_deflection_m, unloaded_sag_m
from fallway.errors import ParameterError


def test_deflection_worked_by_hand():
    # L = 200 m, H = 50 kN, P = 5 kN, q = 20 N/m, carrier at a = 50 m:
    # point load: P a (L - a) / (H L) = 5000 * 50 * 150 / (50000 * 200) = 3.75 m
    # cable weight: q a (L - a) / (2 H) = 20 * 50 * 150 / 100000 = 1.5 m  -> 5.25 m
    assert float(loaded_deflection_m(50.0, 200.0, 50e3, 5e3, 20.0)) == pytest.approx(5.25, abs=1e-12)
    # at midspan: 5000 * 100 * 100 / 1e7 = 5 m and 20 * 1e4 / 1e5 = 2 m -> 7 m
    assert float(loaded_deflection_m(100.0, 200.0, 50e3, 5e3, 20.0)) == pytest.approx(7.0, abs=1e-12)
    assert float(unloaded_sag_m(100.0, 200.0, 50e3, 20.0)) == pytest.approx(2.0, abs=1e-12)  # q L² / (8 H)


@pytest.mark.parametrize("slope", [0.0, -0.3])
@pytest.mark.parametrize("a", [10.0, 73.0, 150.0, 230.0])
def test_loaded_path_is_beam_moment_over_tension(slope, a):
    # cable theorem: depth below the chord = M(a) / H, M of the simply supported beam under
    # the carrier P at a and the uniform load q (per plan metre) - reactions by statics
    L, H, P, w = 240.0, 80e3, 6e3, 25.0
    s = Span(L, 300.0, 300.0 + slope * L, H, P, w)
    q = w * math.sqrt(1.0 + slope ** 2)       # weight uniform along the chord, per plan metre
    r_a = P * (L - a) / L + q * L / 2.0       # moments about B
    moment = r_a * a - q * a * a / 2.0        # moment at the carrier, from A's side
    assert float(s.chord_z(a) - s.loaded_z(a)) == pytest.approx(moment / H, rel=1e-12)
    assert float(s.chord_z(a) - s.unloaded_z(a)) == pytest.approx((q * L / 2 * a - q * a * a / 2) / H, rel=1e-12)


def _catenary_sag_ivp(L, H, w):
    # H z'' = w sqrt(1 + z'²) from the lowest point (z' = 0) to the support at L/2
    sol = solve_ivp(lambda x, y: [y[1], w / H * math.sqrt(1.0 + y[1] ** 2)], [0.0, L / 2.0], [0.0, 0.0],
                    rtol=1e-12, atol=1e-12, method="DOP853")
    return sol.y[0, -1]


@pytest.mark.parametrize("sag_ratio", [1 / 50, 1 / 20, 1 / 10])
def test_parabola_against_catenary_level_span(sag_ratio):
    L, w = 300.0, 20.0
    H = w * L / (8.0 * sag_ratio)             # the parabola's sag is q L² / (8 H)
    ref = _catenary_sag_ivp(L, H, w)
    assert float(catenary_sag_m(L / 2, L, H, w)) == pytest.approx(ref, rel=1e-9)
    par = float(unloaded_sag_m(L / 2, L, H, w))
    assert par == pytest.approx(sag_ratio * L, rel=1e-12)
    # the catenary sags more, by (w L / H)² / 48 to second order (series of cosh)
    rel = ref / par - 1.0
    u = w * L / H
    assert rel > 0
    assert rel == pytest.approx(u * u / 48.0, rel=0.05)
    if sag_ratio <= 1 / 20:
        assert rel < 0.004


@pytest.mark.parametrize("zb", [0.0, -30.0, 12.0])
def test_ellipse_path_sum_of_distances(zb):
    L, S = 100.0, 118.0
    x = np.linspace(0.0, L, 41)
    z = ellipse_path_z(x, L, 0.0, zb, S)
    total = np.hypot(x, z) + np.hypot(L - x, z - zb)
    np.testing.assert_allclose(total, S, rtol=1e-12)
    assert (z[1:-1] < (zb * x / L)[1:-1]).all()  # the lower arc: below the chord


@pytest.mark.parametrize("zb", [0.0, -30.0, 12.0])
def test_ellipse_lowest_point_equal_rope_angles(zb):
    L, S = 100.0, 118.0
    res = minimize_scalar(lambda x: float(ellipse_path_z(x, L, 0.0, zb, S)), bounds=(0.0, L), method="bounded",
                          options={"xatol": 1e-10})
    x0, z0 = res.x, res.fun
    ang_a = math.atan2(0.0 - z0, x0)          # rope up to A, angle above the horizontal
    ang_b = math.atan2(zb - z0, L - x0)
    assert ang_a == pytest.approx(ang_b, abs=1e-5)


def test_ellipse_needs_slack():
    with pytest.raises(ParameterError, match="must exceed the chord"):
        ellipse_path_z(5.0, 100.0, 0.0, 0.0, 99.0)


def test_span_end_slopes_and_checks():
    s = Span(200.0, 100.0, 60.0, 40e3, 4e3, 10.0)
    x = np.array([0.0, 1e-4, 200.0 - 1e-4, 200.0])
    z = s.unloaded_z(x)
    a, b = s.end_slopes
    assert (z[1] - z[0]) / 1e-4 == pytest.approx(a, rel=1e-5)
    assert (z[3] - z[2]) / 1e-4 == pytest.approx(b, rel=1e-5)
    with pytest.raises(ParameterError, match="tension_n"):
        Span(200.0, 100.0, 60.0, 0.0, 4e3, 10.0)
