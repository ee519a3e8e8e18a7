"""Fuzzing through the library: random small terrains and movers never crash the search.

Hypothesis draws small DEMs (random heights, planes with noise, flat ground, cliffs of
hundreds of metres between neighbouring cells, nodata holes) and parameters (friction,
drag, start speed, normal-force model, stencil).  Invariants checked:

- the only exceptions are :class:`fallway.errors.FallwayError` subclasses;
- a returned profile has no NaN before a stall (none at all when it does not stall);
- the reported travel time equals :func:`fallway.physics.traverse` of the returned line
  with the same mover (to 1e-9 relative);
- the reach map's earliest arrival at the end cell equals the routed lattice time (both
  are exact label-setting searches over the same lattice), and A* with its bound gives
  the same time as the plain search (an admissible bound changes the order, not the
  answer: Hart, Nilsson & Raphael 1968).

Then the numerical guards: flat ground, vertical steps, very high and very low friction
and a drag so high that the terminal speed is tiny, each with a sane answer or a clear
:class:`~fallway.errors.NoFeasibleLine`.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from fallway.errors import FallwayError, InputWarning, NoFeasibleLine, RefinementWarning
from fallway.lattice.search import lattice_line, reach
from fallway.params import SearchOptions
from fallway.physics import Mover, traverse
from fallway.refine import refine_line
from fallway.refine.chain import gravity_chain
from fallway.refine.stages import OFF_SURFACE
from fallway.routing import find_route
from fallway.terrain import Terrain

FUZZ = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
FUZZ_FEW = settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@st.composite
def terrains(draw):
    rows = draw(st.integers(3, 9))
    cols = draw(st.integers(3, 9))
    cell = draw(st.sampled_from([0.5, 1.0, 5.0, 30.0]))
    kind = draw(st.sampled_from(["random", "plane", "flat", "cliff"]))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    r, c = np.mgrid[0:rows, 0:cols].astype(float)
    if kind == "random":
        z = rng.uniform(-1.0, 1.0, (rows, cols)) * draw(st.sampled_from([0.01, 1.0, 50.0, 1e4]))
    elif kind == "plane":
        gx, gy = draw(st.floats(-3.0, 3.0)), draw(st.floats(-3.0, 3.0))
        z = 100.0 + cell * (gx * c + gy * r) + rng.normal(0.0, draw(st.sampled_from([0.0, 0.1, 2.0])), (rows, cols))
    elif kind == "flat":
        z = np.full((rows, cols), draw(st.sampled_from([0.0, 123.4, -50.0])))
    else:  # a cliff: a step of hundreds of metres between two neighbouring columns
        z = np.where(c < cols // 2, 300.0, 0.0) - 0.1 * cell * c
    hole_p = draw(st.sampled_from([0.0, 0.0, 0.1, 0.3]))
    if hole_p:
        z = np.where(rng.random((rows, cols)) < hole_p, np.nan, z)
    t = Terrain.from_array(z, (cell, 0.0, 1000.0, 0.0, -cell, 2000.0), "EPSG:32633")
    start = (draw(st.integers(0, rows - 1)), draw(st.integers(0, cols - 1)))
    end = (draw(st.integers(0, rows - 1)), draw(st.integers(0, cols - 1)))
    return t, start, end


movers = st.builds(
    Mover,
    mu=st.one_of(st.just(0.0), st.floats(0.0, 2.0)),
    drag=st.one_of(st.just(0.0), st.floats(0.0, 5.0)),
    v0=st.one_of(st.just(0.0), st.floats(0.0, 30.0)),
    normal=st.sampled_from(["gravity", "full"]),
)
stencils = st.sampled_from([8, 16, 32])


def _check_profile(p) -> None:
    v, t = np.asarray(p.speed_m_s), np.asarray(p.time_s)
    st_m = p.stalled_at_m
    if st_m is None:
        assert np.all(np.isfinite(v)) and np.all(np.isfinite(t)), (v, t)
        assert np.all(np.diff(t) >= 0.0)
    else:
        before = np.asarray(p.station_m) < st_m
        assert np.all(np.isfinite(v[before])) and np.all(np.isfinite(t[before])), (v, t, st_m)


def _same_time(route) -> None:
    again = traverse(route.line, route.mover)
    a, b = route.summary.travel_time_s, again.travel_time_s
    if a is None or b is None or not (math.isfinite(a) and math.isfinite(b)):
        assert (a is None or not math.isfinite(a)) and not math.isfinite(b)
    else:
        assert a == pytest.approx(b, rel=1e-9, abs=0.0)
    assert route.profile.travel_time_s == pytest.approx(again.travel_time_s, rel=1e-9, abs=0.0, nan_ok=True)


def _route(t, s, e, mover, n, refine):
    """find_route with no warning silenced: a RefinementWarning is allowed only as one of the
    refinement's documented outcomes, each marked in the summary too (no line meeting the
    limits; the final level not converged), an InputWarning only for an end point that
    moved (on nodata), with the distance in the summary.  Anything else raised inside fails
    the test."""
    with warnings.catch_warnings(record=True) as rec:
        warnings.simplefilter("always", RefinementWarning)
        warnings.simplefilter("always", InputWarning)
        r = find_route(t, t.cell_center(*s), t.cell_center(*e), mover, search=SearchOptions(neighbours=n),
                       refine=refine)
    for w in rec:
        text = str(w.message)
        if issubclass(w.category, InputWarning):
            key = text.split(" ", 1)[0]
            assert key in ("start", "end") and "nodata" in text, text
            moved = getattr(r.summary, f"{key}_moved_m")
            assert moved > 0 and f"{moved:.1f} m away" in text, text
            continue
        if text.startswith("no line meeting the limits"):
            assert r.summary.refine_message.startswith("no line meeting the limits"), text
        else:
            assert text.startswith("refinement did not converge"), text
            assert r.summary.refine_converged is False
    return r


@FUZZ
@given(terrains(), movers, stencils)
def test_find_route_never_crashes(case, mover, n):
    t, s, e = case
    try:
        r = _route(t, s, e, mover, n, refine=False)
    except FallwayError:
        return
    _check_profile(r.profile)
    _check_profile(r.lattice.profile)
    _same_time(r)
    # the lattice line is timed by the same straight-segment law as traverse
    if mover.normal == "gravity":
        again = traverse(r.lattice.points, mover)
        assert r.lattice.time_s == pytest.approx(again.travel_time_s, rel=1e-9)


@FUZZ_FEW
@given(terrains(), movers, stencils)
def test_find_route_refined_never_crashes(case, mover, n):
    t, s, e = case
    try:
        r = _route(t, s, e, mover, n, refine=True)
    except FallwayError:
        return
    _check_profile(r.profile)
    _same_time(r)
    assert np.all(np.isfinite(r.line))


@FUZZ
@given(terrains(), movers, stencils)
def test_reach_never_crashes_and_agrees_with_route(case, mover, n):
    t, s, e = case
    try:
        rm = reach(t, t.cell_center(*s), mover, options=SearchOptions(neighbours=n))
    except FallwayError:
        return
    tm, v = np.asarray(rm.time_s), np.asarray(rm.speed_m_s)
    assert tm.shape == t.shape and v.shape == t.shape
    ok = np.isfinite(tm)
    s = t.nearest_cell(*rm.start)  # a start on nodata moves to the nearest free cell centre
    assert ok[s] and tm[s] == 0.0
    assert np.all(tm[ok] >= 0.0) and np.all(np.isfinite(v[ok])) and np.all(v[ok] >= 0.0)
    assert not np.any(ok & np.isnan(t.z))  # nothing arrives on a nodata cell
    if e == s:
        return
    try:
        lat = lattice_line(t, t.cell_center(*s), t.cell_center(*e), mover, options=SearchOptions(neighbours=n))
    except NoFeasibleLine:
        assert not ok[e], "reach arrives where the route search found no line"
        return
    except FallwayError:
        return
    e = t.nearest_cell(*lat.stats["end_xy"])  # an end on nodata moves too
    assert ok[e]
    assert lat.time_s == pytest.approx(float(tm[e]), rel=1e-9)


@FUZZ
@given(terrains(), movers, stencils)
def test_astar_bound_does_not_change_the_answer(case, mover, n):
    t, s, e = case
    assume(s != e)
    res = []
    for h in (True, False):
        try:
            res.append(lattice_line(t, t.cell_center(*s), t.cell_center(*e), mover,
                                    options=SearchOptions(neighbours=n, heuristic=h)).time_s)
        except FallwayError as err:
            res.append(type(err).__name__)
    if isinstance(res[0], float) and isinstance(res[1], float):
        assert res[0] == pytest.approx(res[1], rel=1e-9)
    else:
        assert res[0] == res[1]


def _off_surface_case(z, s, e, mover):
    """A route and the refinement of its lattice line where the start line runs within one
    cell of nodata: the smooth (bicubic) ground is undefined there, so the gravity stage
    cannot start; the start (lattice) line is returned, over cells with data."""
    t = Terrain.from_array(z, (0.5, 0.0, 1000.0, 0.0, -0.5, 2000.0), "EPSG:32633")
    r = find_route(t, t.cell_center(*s), t.cell_center(*e), mover, search=SearchOptions(neighbours=8),
                   refine=True)  # no warning
    _check_profile(r.profile)
    _same_time(r)
    lat = lattice_line(t, t.cell_center(*s), t.cell_center(*e), mover, options=SearchOptions(neighbours=8))
    res = refine_line(t, lat.points, mover)
    grav = {c.name: c for c in res.candidates}["gravity optimum"]
    assert grav.error == OFF_SURFACE and grav.time_s is None and not grav.meets_limits
    assert res.chosen == "start" and res.limits["extent"] == "inactive"
    assert np.array_equal(res.line, lat.points)


def test_refine_off_surface_start_regression():
    # found by test_find_route_refined_never_crashes: 0.5 m cells, heights within 1 cm, two
    # nodata cells, v0 = 1 m/s, no friction or drag.  The refinement put the start line's
    # vertices on the smooth surface, NaN within a cell of nodata, and the chain of a NaN
    # segment took the drag branch (k s = NaN is not < 1e-12) and divided by k = 0: a
    # ZeroDivisionError, once hidden by a catch-all that kept the start line
    z = np.array([[0.00273923, np.nan, -0.00918053, -0.00966945],
                  [0.0062654, 0.00825511, 0.00213272, 0.00458993],
                  [np.nan, 0.00870145, 0.00631707, -0.00994523]])
    _off_surface_case(z, (0, 0), (0, 2), Mover(mu=0.0, drag=0.0, v0=1.0, normal="gravity"))


def test_refine_cliff_off_surface_regression():
    # found by test_find_route_refined_never_crashes: a 300 m cliff between 0.5 m cells next
    # to nodata.  The same root: every vertex off the smooth surface, so each level's
    # optimum kept NaN heights, and resampling it for the next level handed NaN arc lengths
    # to PchipInterpolator (a ValueError, once hidden by the same catch-all)
    z = np.array([[300.0, -0.05, np.nan], [np.nan, -0.05, -0.1], [300.0, -0.05, -0.1]])
    _off_surface_case(z, (0, 0), (0, 1), Mover(mu=0.0, drag=1.0, v0=0.0, normal="gravity"))


def test_gravity_chain_never_raises_on_a_nan_vertex():
    # a compiled kernel returns a non-finite time, never an exception (STYLE: status, not
    # raise); the NaN segment without drag once divided by k = 0
    P = np.array([[0.0, 0.0, 1.0], [1.0, 0.0, np.nan], [2.0, 0.0, 0.0]])
    T, pen, grad, u = gravity_chain(P, 1.0, 9.80665, 0.0, 0.0, 1e-4, 1e-8, 0.0, -1.0, -1.0)
    assert not math.isfinite(T)


# --------------------------------------------------------------------------- numerical guards

def _ode_time(v2_in, drop, plan, k, mu=0.0, g=9.80665):
    """Reference: integrate d(v²)/ds = 2a - 2k v², dt/ds = 1/v with scipy (DOP853)."""
    from scipy.integrate import solve_ivp

    s = math.hypot(plan, drop)
    a = g * (drop - mu * plan) / s
    sol = solve_ivp(lambda x, y: [2 * a - 2 * k * y[0], 1.0 / math.sqrt(y[0])], (0.0, s), [v2_in, 0.0],
                    rtol=1e-12, atol=1e-14, method="DOP853")
    return float(sol.y[1, -1])


@pytest.mark.parametrize("k,plan,grade,v_in", [(1.0, 30.0, 0.1, 3.1), (1.0, 30.0, 0.00024, 1.0),
                                               (5.0, 100.0, 1.0, 20.0), (0.1, 5.0, 0.1, 2.0)])
def test_segment_time_above_terminal_speed_matches_ode(k, plan, grade, v_in):
    # entering faster than the terminal speed with k·s >> 1 the speed settles at the
    # terminal speed; the time stays finite (it used to come out inf when vb - vt underflowed)
    p = traverse([[0.0, 0.0, grade * plan], [plan, 0.0, 0.0]], Mover(drag=k, v0=v_in, normal="gravity"))
    assert p.stalled_at_m is None
    assert p.travel_time_s == pytest.approx(_ode_time(v_in * v_in, grade * plan, plan, k), rel=1e-9)


def _grid(z, cell=5.0):
    return Terrain.from_array(np.asarray(z, float), (cell, 0.0, 0.0, 0.0, -cell, cell * np.shape(z)[0]), "EPSG:32633")


def test_flat_ground_from_rest_is_no_feasible_line():
    t = _grid(np.zeros((5, 7)))
    with pytest.raises(NoFeasibleLine) as err:
        find_route(t, t.cell_center(2, 0), t.cell_center(2, 6), Mover(mu=0.1), refine=False)
    assert err.value.reason in ("stall", "uphill", "unreachable")
    assert "v0" in str(err.value) or "mu" in str(err.value)


def test_flat_ground_frictionless_coasts_at_v0():
    # no drop, no friction, no drag: the mover keeps v0, time = distance / v0 (kinematics)
    t = _grid(np.zeros((5, 7)))
    r = find_route(t, t.cell_center(2, 0), t.cell_center(2, 6), Mover(mu=0.0, v0=3.0), refine=False)
    assert r.summary.travel_time_s == pytest.approx(30.0 / 3.0, rel=1e-12)
    assert np.allclose(r.profile.speed_m_s, 3.0)


def test_flat_ground_with_friction_decelerates_per_formula():
    # v² = v0² - 2 mu g s on the level (uniform deceleration); 30 m at mu 0.01 from 5 m/s
    g = 9.80665
    t = _grid(np.zeros((5, 7)))
    r = find_route(t, t.cell_center(2, 0), t.cell_center(2, 6), Mover(mu=0.01, v0=5.0), refine=False)
    v_end = math.sqrt(25.0 - 2 * 0.01 * g * 30.0)
    assert r.summary.exit_speed_m_s == pytest.approx(v_end, rel=1e-9)
    assert r.summary.travel_time_s == pytest.approx(2 * 30.0 / (5.0 + v_end), rel=1e-9)


def test_vertical_step_between_cells():
    # a 200 m step between neighbouring 5 m cells: a finite, consistent answer
    z = np.where(np.arange(6)[None, :] < 3, 200.0, 0.0) * np.ones((4, 1))
    t = _grid(z)
    m = Mover(mu=0.2)
    r = find_route(t, t.cell_center(1, 2), t.cell_center(1, 5), m, refine=False)
    _check_profile(r.profile)
    _same_time(r)
    assert math.isfinite(r.summary.travel_time_s) and r.summary.drop_m == pytest.approx(200.0)
    # energy bound: never faster than free fall over the drop, v <= sqrt(2 g h) (plus rounding)
    assert r.summary.max_speed_m_s <= math.sqrt(2 * 9.80665 * 200.0) * (1 + 1e-9)


@pytest.mark.parametrize("mu", [0.0, 1e-9])
def test_very_low_friction_on_a_slope(mu):
    # an inclined plane of grade 0.2 along x: without friction the end speed is sqrt(2 g h)
    # whatever the path (energy conservation), here on a straight row
    z = -0.2 * 5.0 * np.arange(8)[None, :] * np.ones((3, 1))
    t = _grid(z)
    r = find_route(t, t.cell_center(1, 0), t.cell_center(1, 7), Mover(mu=mu, normal="gravity"), refine=False)
    assert r.summary.exit_speed_m_s == pytest.approx(math.sqrt(2 * 9.80665 * 7.0), rel=1e-6)


def test_very_high_friction_is_no_feasible_line():
    # mu 5 on a 45° slope: friction beats gravity, the mover never starts
    z = -5.0 * np.arange(8)[None, :] * np.ones((3, 1))
    t = _grid(z)
    with pytest.raises(NoFeasibleLine) as err:
        find_route(t, t.cell_center(1, 0), t.cell_center(1, 7), Mover(mu=5.0), refine=False)
    assert err.value.closest is not None


def test_huge_drag_tiny_terminal_speed():
    # k = 50 1/m on grade 0.2: v_t = sqrt(a/k) ~ 0.2 m/s.  Either a very slow line at about
    # the terminal speed or a clear NoFeasibleLine; never inf or NaN in a returned profile
    z = -0.2 * 5.0 * np.arange(8)[None, :] * np.ones((3, 1))
    t = _grid(z)
    m = Mover(mu=0.0, drag=50.0, v0=0.0, normal="gravity")
    try:
        r = find_route(t, t.cell_center(1, 0), t.cell_center(1, 7), m, refine=False)
    except NoFeasibleLine:
        return
    _check_profile(r.profile)
    _same_time(r)
    s = math.hypot(1.0, 0.2)
    vt = math.sqrt(9.80665 * 0.2 / s / 50.0)
    assert r.summary.exit_speed_m_s == pytest.approx(vt, rel=1e-6)
    # time ~ length / v_t for k s >> 1 (the start-up transient is short)
    assert r.summary.travel_time_s == pytest.approx(7 * 5.0 * s / vt, rel=0.02)


def test_nodata_column_with_start_on_end_regression():
    # found by test_find_route_never_crashes in CI: a grid whose middle column is nodata made
    # the A* slope bound take the max of an all-NaN slice (a RuntimeWarning, an error here)
    z = np.array([[100.0, np.nan, 100.0], [100.0, np.nan, 100.0], [100.0, np.nan, np.nan],
                  [100.0, np.nan, 100.0]])
    t = Terrain.from_array(z, (0.5, 0.0, 1000.0, 0.0, -0.5, 2000.0), "EPSG:32633")
    with pytest.raises(FallwayError):
        _route(t, (0, 0), (0, 0), Mover(mu=0.0, drag=1.0, v0=0.0, normal="gravity"), 8, False)
    # flat ground from rest: no line, said clearly (no warning, no crash)
    with pytest.raises(FallwayError):
        _route(t, (0, 0), (3, 0), Mover(mu=0.0, drag=1.0, v0=0.0, normal="gravity"), 8, False)
