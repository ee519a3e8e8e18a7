"""Lattice search checked against references outside the kernel.

References used here (all independent code in this file):
- scipy.sparse.csgraph.dijkstra and networkx.dijkstra_path_length on the same lattice
  when edge times are static (mu = 0, no drag: energy depends on height only, so every
  edge has the closed-form time t = 2 s / (v_a + v_b), v = sqrt(v0² + 2 g (z0 - z)),
  incline formula of CHECKS.md "Motion along a line");
- a plain-Python exhaustive Pareto label search (label-correcting, FIFO, exact
  dominance, no tolerance, no heuristic) with segment speeds
  v²(s) = a/k + (v_a² - a/k) e^(-2 k s) and times t = integral dv / (a - k v²)
  (CHECKS.md, incline with drag: the artanh form and its atan twin for a < 0);
- a plain-Python time-only Dijkstra, to show it is not exact with friction
  (CHECKS.md "Search").
"""

from __future__ import annotations

import heapq
import math
from collections import defaultdict, deque

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from references import corner_speed, sharp_corner_reading
from scipy.sparse.csgraph import dijkstra

from fallway.errors import NoFeasibleLine, ParameterError
from fallway.lattice.search import lattice_line, reach
from fallway.params import Limits, SearchOptions
from fallway.physics import Mover, traverse
from fallway.terrain import Terrain

G = 9.80665  # standard gravity (3rd CGPM, 1901)
KING = [(0, 1), (-1, 1), (-1, 0), (-1, -1), (0, -1), (1, -1), (1, 0), (1, 1)]


# ----------------------------------------------------------------------------- references

def seg_ref(v2a, drop, plan, g, mu, k, v2_max=math.inf):
    """(v2b, t) on one straight segment, or None when the mover cannot get through."""
    s = math.hypot(plan, drop)
    a = g * (drop - mu * plan) / s
    if v2a <= 0 and a <= 0:
        return None
    if k == 0:
        v2b = v2a + 2 * a * s
        if v2b < 0 or v2b > v2_max:
            return None
        return v2b, 2 * s / (math.sqrt(v2a) + math.sqrt(v2b))
    c = a / k
    v2b = c + (v2a - c) * math.exp(-2 * k * s)
    if v2b < 0 or v2b > v2_max:
        return None
    # t = integral dv / (a - k v²) between the end speeds (textbook antiderivatives)
    va, vb = math.sqrt(v2a), math.sqrt(v2b)
    if a > 0:
        vt = math.sqrt(c)
        F = lambda v: math.log(abs((vt + v) / (vt - v))) / (2 * k * vt)  # noqa: E731
    elif a < 0:
        w = math.sqrt(-c)
        F = lambda v: -math.atan(v / w) / (k * w)  # noqa: E731
    else:
        F = lambda v: 1.0 / (k * v)  # noqa: E731
    t = F(vb) - F(va)
    return v2b, t


def pareto_ref(z, cell, mover, start, *, min_grade=-math.inf, max_grade=math.inf, max_turn=None, seeds=None,
               corners=False):
    """Exhaustive Pareto label search on the 8-neighbour lattice: node -> [(t, v2, heading)].

    ``corners``: every vertex between two steps pays the sharp-corner law of
    :func:`references.corner_speed` (Euler–Eytelwein, the channel reading); labels then
    compete per (node, heading), the state the corner needs.
    """
    rows, cols = z.shape
    sets = defaultdict(list)
    q = deque()
    same = (lambda a, b: a[2] == b[2]) if (max_turn is not None or corners) else (lambda a, b: True)

    def add(node, lab):
        labs = sets[node]
        if any(same(o, lab) and o[0] <= lab[0] and o[1] >= lab[1] for o in labs):
            return
        labs[:] = [o for o in labs if not (same(o, lab) and lab[0] <= o[0] and lab[1] >= o[1])]
        labs.append(lab)
        q.append((node, lab))

    for lab in seeds or [(0.0, mover.v0 ** 2, None)]:
        add(start, lab)
    dirs = [math.degrees(math.atan2(-dr, dc)) for dr, dc in KING]
    while q:
        node, lab = q.popleft()
        if lab not in sets[node]:
            continue
        r, c = node
        for h, (dr, dc) in enumerate(KING):
            if max_turn is not None and lab[2] is not None:
                if abs((dirs[h] - dirs[lab[2]] + 180) % 360 - 180) > max_turn + 1e-9:
                    continue
            r2, c2 = r + dr, c + dc
            if not (0 <= r2 < rows and 0 <= c2 < cols) or not np.isfinite(z[r2, c2]):
                continue
            plan = cell * math.hypot(dr, dc)
            drop = z[r, c] - z[r2, c2]
            if not (min_grade <= drop / plan <= max_grade):
                continue
            v2 = lab[1]
            if corners and lab[2] is not None:
                pr, pc = KING[lab[2]]
                plan0 = cell * math.hypot(pr, pc)
                a = (pc * cell, -pr * cell, z[r, c] - z[r - pr, c - pc])
                b = (dc * cell, -dr * cell, z[r2, c2] - z[r, c])
                v2 = corner_speed(math.sqrt(v2), a, b, mover.mu, plan0, plan, mover.g) ** 2
            out = seg_ref(v2, drop, plan, mover.g, mover.mu, mover.drag)
            if out is not None:
                add((r2, c2), (lab[0] + out[1], out[0], h))
    return sets


def best_time(sets, node):
    return min(lab[0] for lab in sets[node]) if node in sets else math.inf


def time_only_ref(z, cell, mover, start, end):
    """Dijkstra keeping one label per cell (the earliest): the wrong method with friction."""
    rows, cols = z.shape
    best = {start: (0.0, mover.v0 ** 2)}
    done = set()
    heap = [(0.0, start)]
    while heap:
        t, n = heapq.heappop(heap)
        if n in done:
            continue
        done.add(n)
        if n == end:
            return t
        for dr, dc in KING:
            m = (n[0] + dr, n[1] + dc)
            if not (0 <= m[0] < rows and 0 <= m[1] < cols) or m in done:
                continue
            out = seg_ref(best[n][1], z[n] - z[m], cell * math.hypot(dr, dc), mover.g, mover.mu, mover.drag)
            if out is not None and (m not in best or t + out[1] < best[m][0]):
                best[m] = (t + out[1], out[0])
                heapq.heappush(heap, (t + out[1], m))
    return math.inf


def retime(points, mover):
    """Chain seg_ref along a polyline (independent re-timing of a returned line)."""
    v2, t = mover.v0 ** 2, 0.0
    for a, b in zip(points[:-1], points[1:]):
        out = seg_ref(v2, a[2] - b[2], math.hypot(b[0] - a[0], b[1] - a[1]), mover.g, mover.mu, mover.drag)
        assert out is not None
        v2, t = out[0], t + out[1]
    return t, math.sqrt(v2)


# ----------------------------------------------------------------------------- fixtures

def rough_dem(seed, rows=7, cols=8, noise=2.5):
    """A rough slope falling to the south-east (deterministic)."""
    rng = np.random.default_rng(seed)
    r, c = np.mgrid[0:rows, 0:cols]
    return 30.0 - 2.5 * r - 2.0 * c + rng.normal(scale=noise, size=(rows, cols))


def terrain_of(z, cell=10.0):
    return Terrain.from_array(z, (cell, 0, 0, 0, -cell, z.shape[0] * cell))


def xy(t, r, c):
    return t.cell_center(r, c)


MOVER = Mover(mu=0.25, drag=0.02, v0=1.0, normal="gravity")


# ----------------------------------------------------------------------------- static edge times

def test_reach_frictionless_equals_scipy_dijkstra():
    rng = np.random.default_rng(5)
    rows, cols, cell = 25, 30, 4.0
    r, c = np.mgrid[0:rows, 0:cols]
    z = 50.0 - 0.4 * r - 0.3 * c + rng.normal(scale=0.8, size=(rows, cols))
    start = (2, 3)
    mover = Mover(v0=2.0, normal="gravity")
    v2 = mover.v0 ** 2 + 2 * G * (z[start] - z)  # energy depends on height only
    idx = np.arange(rows * cols).reshape(rows, cols)
    a_, b_, w_ = [], [], []
    for dr, dc in KING:
        for i in range(rows):
            for j in range(cols):
                i2, j2 = i + dr, j + dc
                if 0 <= i2 < rows and 0 <= j2 < cols and v2[i2, j2] > 0 and v2[i, j] >= 0:
                    s = math.sqrt((cell * math.hypot(dr, dc)) ** 2 + (z[i, j] - z[i2, j2]) ** 2)
                    a_.append(idx[i, j])
                    b_.append(idx[i2, j2])
                    w_.append(2 * s / (math.sqrt(v2[i, j]) + math.sqrt(v2[i2, j2])))
    g = sp.csr_matrix((w_, (a_, b_)), shape=(rows * cols,) * 2)
    ref = dijkstra(g, indices=idx[start]).reshape(rows, cols)
    t = terrain_of(z, cell)
    rm = reach(t, xy(t, *start), mover, options=SearchOptions(neighbours=8))
    ok = np.isfinite(ref)
    assert np.array_equal(ok, np.isfinite(rm.time_s))
    np.testing.assert_allclose(rm.time_s[ok], ref[ok], rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(rm.speed_m_s[ok], np.sqrt(v2[ok]), rtol=1e-9)
    # floating-point noise must not multiply labels: one settled label per reached cell
    assert rm.stats["labels_settled"] == int(ok.sum())


def test_point_to_point_frictionless_16_equals_networkx():
    rng = np.random.default_rng(11)
    rows, cols, cell = 9, 10, 5.0
    r, c = np.mgrid[0:rows, 0:cols]
    z = 40.0 - 0.6 * r - 0.5 * c + rng.normal(scale=0.7, size=(rows, cols))
    mover = Mover(v0=1.0, normal="gravity")
    start, end = (0, 0), (8, 9)
    e0 = mover.v0 ** 2 + 2 * G * z[start]
    gr = nx.DiGraph()
    offs = KING + [(1, 2), (2, 1), (-1, 2), (-2, 1), (1, -2), (2, -1), (-1, -2), (-2, -1)]
    for i in range(rows):
        for j in range(cols):
            for dr, dc in offs:
                i2, j2 = i + dr, j + dc
                if not (0 <= i2 < rows and 0 <= j2 < cols):
                    continue
                # knight edges: break point where the edge crosses the grid line between
                # centres; there the bilinear interpolant is the mean of the two centres
                pts = [(0.0, 0.0, z[i, j])]
                if abs(dc) == 2:
                    pts.append((dr / 2, dc / 2, 0.5 * (z[i, j + dc // 2] + z[i2, j + dc // 2])))
                elif abs(dr) == 2:
                    pts.append((dr / 2, dc / 2, 0.5 * (z[i + dr // 2, j] + z[i + dr // 2, j2])))
                pts.append((dr, dc, z[i2, j2]))
                v2s = [e0 - 2 * G * p[2] for p in pts]
                if min(v2s[1:]) <= 0 or v2s[0] < 0:
                    continue
                tt = sum(2 * cell * math.sqrt((p1[0] - p0[0]) ** 2 + (p1[1] - p0[1]) ** 2 + ((p1[2] - p0[2]) / cell) ** 2)
                         / (math.sqrt(a) + math.sqrt(b)) for p0, p1, a, b in zip(pts[:-1], pts[1:], v2s[:-1], v2s[1:]))
                gr.add_edge((i, j), (i2, j2), weight=tt)
    ref = nx.dijkstra_path_length(gr, start, end)
    t = terrain_of(z, cell)
    for h in (True, False):
        ln = lattice_line(t, xy(t, *start), xy(t, *end), mover, options=SearchOptions(neighbours=16, heuristic=h))
        assert ln.time_s == pytest.approx(ref, rel=1e-9)


# ----------------------------------------------------------------------------- friction and drag

@pytest.mark.parametrize("seed", [30, 68, 23, 1])
def test_friction_drag_equals_pareto_reference(seed):
    z = rough_dem(seed)
    t = terrain_of(z)
    sets = pareto_ref(z, 10.0, MOVER, (0, 0))
    ref = best_time(sets, (6, 7))
    for h in (True, False):
        ln = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, options=SearchOptions(neighbours=8, heuristic=h))
        assert ln.time_s == pytest.approx(ref, rel=1e-9)
    rm = reach(t, xy(t, 0, 0), MOVER, options=SearchOptions(neighbours=8))
    want = np.full(z.shape, np.nan)
    for n, labs in sets.items():
        want[n] = min(lab[0] for lab in labs)
    assert np.array_equal(np.isnan(want), np.isnan(rm.time_s))
    np.testing.assert_allclose(rm.time_s, want, rtol=1e-9)


def test_time_only_dijkstra_is_wrong_with_friction():
    # seed 30: a time-only search is 3 % slow; seed 23: it finds no line at all
    z = rough_dem(30)
    t = terrain_of(z)
    exact = best_time(pareto_ref(z, 10.0, MOVER, (0, 0)), (6, 7))
    wrong = time_only_ref(z, 10.0, MOVER, (0, 0), (6, 7))
    assert wrong > exact * 1.02
    assert lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER,
                        options=SearchOptions(neighbours=8)).time_s == pytest.approx(exact, rel=1e-9)
    z = rough_dem(23)
    t = terrain_of(z)
    assert time_only_ref(z, 10.0, MOVER, (0, 0), (6, 7)) == math.inf
    exact = best_time(pareto_ref(z, 10.0, MOVER, (0, 0)), (6, 7))
    assert math.isfinite(exact)
    assert lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER,
                        options=SearchOptions(neighbours=8)).time_s == pytest.approx(exact, rel=1e-9)


def test_cap_of_one_label_per_cell_is_the_time_only_dijkstra():
    # label_cap=1 keeps the earliest arrival per cell: exactly the time-only search
    for seed in (30, 68):
        z = rough_dem(seed)
        t = terrain_of(z)
        ln = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER,
                          options=SearchOptions(neighbours=8, label_cap=1, heuristic=False))
        assert ln.time_s == pytest.approx(time_only_ref(z, 10.0, MOVER, (0, 0), (6, 7)), rel=1e-9)
        assert ln.stats["exact"] is False
        exact = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, options=SearchOptions(neighbours=8))
        assert exact.stats["exact"] is True and exact.time_s < ln.time_s


@pytest.mark.parametrize("n", [8, 16, 32])
def test_reported_time_equals_retiming_the_points(n):
    rng = np.random.default_rng(3)
    rows, cols = 20, 22
    r, c = np.mgrid[0:rows, 0:cols]
    z = 90.0 - 2.0 * r - 1.8 * c + rng.normal(scale=0.6, size=(rows, cols))
    t = terrain_of(z, 5.0)
    ln = lattice_line(t, xy(t, 1, 1), xy(t, 18, 20), MOVER, options=SearchOptions(neighbours=n))
    # the points: cell centres plus break points on the bilinear interpolant
    np.testing.assert_allclose(t.sample_linear(ln.points[:, 0], ln.points[:, 1]), ln.points[:, 2], atol=1e-9)
    tt, v = retime(ln.points, MOVER)
    assert ln.time_s == pytest.approx(tt, rel=1e-9)
    assert ln.stats["exit_speed_m_s"] == pytest.approx(v, rel=1e-9)
    assert traverse(ln.points, MOVER).travel_time_s == pytest.approx(ln.time_s, rel=1e-9)  # same model
    assert ln.profile.travel_time_s == pytest.approx(ln.time_s, rel=1e-9)


def test_default_energy_tolerance_within_1e6_of_exact():
    rng = np.random.default_rng(8)
    rows, cols = 30, 30
    r, c = np.mgrid[0:rows, 0:cols]
    z = 120.0 - 2.0 * r - 1.8 * c + rng.normal(scale=1.0, size=(rows, cols))
    t = terrain_of(z, 5.0)
    mover = Mover(mu=0.2, drag=0.01, v0=0.5, normal="gravity")
    a = lattice_line(t, xy(t, 0, 0), xy(t, 29, 29), mover, options=SearchOptions(neighbours=16))
    b = lattice_line(t, xy(t, 0, 0), xy(t, 29, 29), mover,
                     options=SearchOptions(neighbours=16, energy_tol=0.0, heuristic=False))
    assert abs(a.time_s - b.time_s) <= 1e-6 * b.time_s
    assert b.time_s <= a.time_s * (1 + 1e-12)  # zero tolerance is exact: never slower


def test_via_point_carries_the_pareto_set():
    # seed 68, via (4, 2): continuing only the fastest arrival at the via point is 14 %
    # slow; the chain of Pareto sets (reference) is the exact via-constrained optimum.
    z = rough_dem(68)
    t = terrain_of(z)
    leg1 = pareto_ref(z, 10.0, MOVER, (0, 0))
    seeds = [(a, b, None) for a, b, _ in leg1[(4, 2)]]
    exact = best_time(pareto_ref(z, 10.0, MOVER, (4, 2), seeds=seeds), (6, 7))
    fastest = min(seeds)
    naive = best_time(pareto_ref(z, 10.0, MOVER, (4, 2), seeds=[fastest]), (6, 7))
    assert naive > exact * 1.05
    for h in (True, False):
        ln = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, via=[xy(t, 4, 2)],
                          options=SearchOptions(neighbours=8, heuristic=h))
        assert ln.time_s == pytest.approx(exact, rel=1e-9)
        assert [4, 2] in ln.cells.tolist()


def test_turn_limit_matches_reference_and_holds():
    z = rough_dem(1)
    t = terrain_of(z)
    sets = pareto_ref(z, 10.0, MOVER, (0, 0), max_turn=45.0)
    ref = best_time(sets, (6, 7))
    free = best_time(pareto_ref(z, 10.0, MOVER, (0, 0)), (6, 7))
    ln = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, limits=Limits(max_step_turn_deg=45.0),
                      options=SearchOptions(neighbours=8))
    assert ln.time_s == pytest.approx(ref, rel=1e-9)
    assert ref >= free
    steps = np.diff(ln.cells, axis=0)
    ang = np.degrees(np.arctan2(-steps[:, 0], steps[:, 1]))
    turn = np.abs((np.diff(ang) + 180) % 360 - 180)
    assert turn.max() <= 45.0 + 1e-9


FULL = Mover(mu=0.12, drag=0.01, v0=1.0, normal="full")


@pytest.mark.parametrize("seed,turn", [(1, 45.0), (2, 90.0), (4, 135.0), (7, 90.0)])
def test_corner_law_matches_exhaustive_reference(seed, turn):
    """With the full model and a turn limit every vertex pays the sharp-corner law: the
    kernel's optimum equals an exhaustive Pareto search over (cell, heading) that charges
    Euler–Eytelwein's belt-friction law at each vertex (``references.corner_speed``)."""
    z = rough_dem(seed)
    t = terrain_of(z)
    ref = best_time(pareto_ref(z, 10.0, FULL, (0, 0), max_turn=turn, corners=True), (6, 7))
    no_corners = best_time(pareto_ref(z, 10.0, FULL, (0, 0), max_turn=turn), (6, 7))
    ln = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), FULL, limits=Limits(max_step_turn_deg=turn),
                      options=SearchOptions(neighbours=8, energy_tol=0.0))
    assert ln.time_s == pytest.approx(ref, rel=1e-9)
    assert ref > no_corners  # the corners cost time: the check can fail


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("n", [16, 32])
def test_lattice_time_is_the_sharp_corner_reading_of_its_line(seed, n):
    """Off-centre end points (virtual edges), a via point, sub-segment kinks: the time the
    search reports is the sharp-corner reading of the line it returns, re-timed by the
    independent reference (``references.sharp_corner_reading``: segment law + capstan)."""
    rng = np.random.default_rng(seed)
    rows, cols = 24, 26
    r, c = np.mgrid[0:rows, 0:cols]
    z = 120.0 - 2.2 * r - 1.9 * c + rng.normal(scale=0.7, size=(rows, cols))
    t = terrain_of(z, 4.0)
    x0, y0 = t.cell_center(1, 2)
    x1, y1 = t.cell_center(21, 23)
    ln = lattice_line(t, (x0 + 0.9, y0 - 1.3), (x1 - 1.1, y1 + 0.7), FULL, via=[t.cell_center(10, 14)],
                      limits=Limits(max_step_turn_deg=60.0), options=SearchOptions(neighbours=n))
    tt, v = sharp_corner_reading(ln.points, FULL.mu, FULL.drag, FULL.v0, FULL.g)
    assert ln.time_s == pytest.approx(tt, rel=1e-9)
    assert ln.stats["exit_speed_m_s"] == pytest.approx(v, rel=1e-9)
    assert ln.profile.travel_time_s == pytest.approx(tt, rel=1e-9)


def test_grade_window_matches_reference_and_holds():
    z = rough_dem(30)
    t = terrain_of(z)
    lim = Limits(min_grade=0.0, max_grade=0.5)
    ref = best_time(pareto_ref(z, 10.0, MOVER, (0, 0), min_grade=0.0, max_grade=0.5), (6, 7))
    assert ref > best_time(pareto_ref(z, 10.0, MOVER, (0, 0)), (6, 7)) * 1.1  # the window binds
    ln = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, limits=lim, options=SearchOptions(neighbours=8))
    assert ln.time_s == pytest.approx(ref, rel=1e-9)
    d = np.diff(ln.points, axis=0)
    grade = -d[:, 2] / np.hypot(d[:, 0], d[:, 1])
    assert grade.min() >= -1e-12 and grade.max() <= 0.5 + 1e-12


def test_max_speed_is_never_exceeded():
    # The speed window is hard: overspeeding labels are pruned (with max_speed set the
    # dominance rule is no longer exact in principle, see the kernel notes).
    z = rough_dem(30)
    t = terrain_of(z)
    free = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, options=SearchOptions(neighbours=8))
    assert np.nanmax(free.profile.speed_m_s) > 8.0
    capped = Mover(mu=MOVER.mu, drag=MOVER.drag, v0=MOVER.v0, normal="gravity", max_speed=8.0)
    ln = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), capped, options=SearchOptions(neighbours=8))
    assert np.nanmax(ln.profile.speed_m_s) <= 8.0 + 1e-9
    assert ln.time_s > free.time_s
    assert retime(ln.points, MOVER)[0] == pytest.approx(ln.time_s, rel=1e-9)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(noise=arrays(np.float64, (5, 6), elements=st.floats(-3.0, 3.0)),
       mu=st.floats(0.05, 0.4), drag=st.one_of(st.just(0.0), st.floats(1e-3, 0.05)), v0=st.floats(0.0, 4.0))
def test_property_astar_equals_plain_equals_reference(noise, mu, drag, v0):
    r, c = np.mgrid[0:5, 0:6]
    z = 20.0 - 2.0 * r - 1.5 * c + noise
    t = terrain_of(z)
    mover = Mover(mu=mu, drag=drag, v0=v0, normal="gravity")
    ref = best_time(pareto_ref(z, 10.0, mover, (0, 0)), (4, 5))
    got = []
    for h in (True, False):
        try:
            got.append(lattice_line(t, xy(t, 0, 0), xy(t, 4, 5), mover,
                                    options=SearchOptions(neighbours=8, heuristic=h)).time_s)
        except NoFeasibleLine:
            got.append(math.inf)
    if math.isinf(ref):
        assert got == [math.inf, math.inf]
    else:
        assert got[0] == pytest.approx(ref, rel=1e-9)
        assert got[1] == pytest.approx(ref, rel=1e-9)


# ----------------------------------------------------------------------------- failures

def _plane(rows=10, cols=12, gx=-0.2, gy=0.0):
    r, c = np.mgrid[0:rows, 0:cols]
    return 50.0 + gx * 5.0 * c - gy * 5.0 * r


def test_uphill():
    t = terrain_of(_plane(), 5.0)
    with pytest.raises(NoFeasibleLine) as ei:
        lattice_line(t, xy(t, 5, 11), xy(t, 5, 0), Mover(v0=1.0), options=SearchOptions(neighbours=8))
    assert ei.value.reason == "uphill"


def test_stall():
    t = terrain_of(_plane(gx=-0.1), 5.0)  # 10 % slope, mu 0.3: friction wins from rest
    with pytest.raises(NoFeasibleLine) as ei:
        lattice_line(t, xy(t, 5, 0), xy(t, 5, 11), Mover(mu=0.3), options=SearchOptions(neighbours=16))
    assert ei.value.reason == "stall"
    assert ei.value.closest is not None


def test_limits():
    t = terrain_of(_plane(gx=-0.2), 5.0)
    with pytest.raises(NoFeasibleLine) as ei:
        lattice_line(t, xy(t, 5, 0), xy(t, 5, 11), Mover(mu=0.1), limits=Limits(min_grade=0.5),
                     options=SearchOptions(neighbours=16))
    assert ei.value.reason == "limits"


def test_keepout_wall_and_gap():
    t = terrain_of(_plane(gx=-0.3), 5.0)
    wall = np.zeros(t.shape, dtype=bool)
    wall[:, 6] = True
    with pytest.raises(NoFeasibleLine) as ei:
        lattice_line(t, xy(t, 5, 0), xy(t, 5, 11), Mover(mu=0.1), keepout=wall, options=SearchOptions(neighbours=32))
    assert ei.value.reason == "keepout"
    assert ei.value.closest[0] < xy(t, 5, 6)[0]  # stopped west of the wall
    wall[1, 6] = False  # a gap: the line must use it (long edges may not jump the wall)
    ln = lattice_line(t, xy(t, 5, 0), xy(t, 5, 11), Mover(mu=0.1), keepout=wall, options=SearchOptions(neighbours=32))
    rows, cols = t.rowcol(ln.points[:, 0], ln.points[:, 1])
    near_wall = np.abs(cols - 6) <= 0.5
    assert np.all(np.abs(rows[near_wall] - 1) <= 0.5)


def test_nodata_wall():
    z = _plane(gx=-0.3)
    z[:, 6] = np.nan
    t = terrain_of(z, 5.0)
    with pytest.raises(NoFeasibleLine) as ei:
        lattice_line(t, xy(t, 5, 0), xy(t, 5, 11), Mover(mu=0.1), options=SearchOptions(neighbours=32))
    assert ei.value.reason == "nodata"
    # a point on a nodata cell is moved, not refused: tests/test_ends.py


# ----------------------------------------------------------------------------- search domain, reasons, options

def components(free):
    """Connected parts of the free cells as the 8-neighbour lattice sees them (scipy.ndimage.label).

    A diagonal step is passable only when both cells beside it are free too (it touches
    all four cells of its square), so two free cells are linked on the 8-stencil exactly
    when they are 4-connected: ``ndimage.label`` with its default cross structure.
    """
    from scipy import ndimage

    return ndimage.label(free)[0]


def test_domain_that_cuts_every_passage_is_blamed_on_the_corridor():
    # Reference: scipy.ndimage.label shows the domain separates start from end while the
    # whole grid connects them; the same search without the domain finds the line.
    t = terrain_of(_plane(gx=-0.3), 5.0)
    s, e = (5, 0), (5, 11)
    domain = np.ones(t.shape, dtype=bool)
    domain[:, 6] = False
    lab = components(domain)
    assert lab[s] != lab[e] and components(np.ones(t.shape, bool))[s] == components(np.ones(t.shape, bool))[e]
    free = lattice_line(t, xy(t, *s), xy(t, *e), Mover(mu=0.1), options=SearchOptions(neighbours=32))
    with pytest.raises(NoFeasibleLine, match="corridor") as ei:
        lattice_line(t, xy(t, *s), xy(t, *e), Mover(mu=0.1), allowed=domain, options=SearchOptions(neighbours=32))
    assert ei.value.reason == "corridor"
    assert ei.value.closest[0] < xy(t, 5, 6)[0]  # stopped west of the cut
    # the same mask given as a keep-out is a keep-out
    with pytest.raises(NoFeasibleLine) as ei:
        lattice_line(t, xy(t, *s), xy(t, *e), Mover(mu=0.1), keepout=~domain, options=SearchOptions(neighbours=32))
    assert ei.value.reason == "keepout"
    # a domain with a passage: the line stays inside it and is no faster than the free one
    domain[8, 6] = True
    assert components(domain)[s] == components(domain)[e]
    ln = lattice_line(t, xy(t, *s), xy(t, *e), Mover(mu=0.1), allowed=domain, options=SearchOptions(neighbours=32))
    assert domain[ln.cells[:, 0], ln.cells[:, 1]].all() and ln.time_s >= free.time_s
    assert ln.stats["state_cells"] == int(domain.sum())


def test_keepout_inside_the_domain_is_blamed_on_the_keepout():
    # A corridor (rows 2..8) with a keep-out wall across it; the keep-out also fills the
    # rows outside the corridor (there it is irrelevant: those cells are not searched).
    # Reference: scipy.ndimage.label - without the keep-out the corridor connects the
    # points, with it it does not.
    t = terrain_of(_plane(gx=-0.3), 5.0)
    s, e = (5, 0), (5, 11)
    domain = np.zeros(t.shape, dtype=bool)
    domain[2:9, :] = True
    keep = np.zeros(t.shape, dtype=bool)
    keep[:, 6] = True
    lab = components(domain & ~keep)
    assert lab[s] != lab[e] and components(domain)[s] == components(domain)[e]
    with pytest.raises(NoFeasibleLine, match="keep-out") as ei:
        lattice_line(t, xy(t, *s), xy(t, *e), Mover(mu=0.1), keepout=keep, allowed=domain,
                     options=SearchOptions(neighbours=16))
    assert ei.value.reason == "keepout"
    # a gap in the wall outside the corridor only: still the keep-out, judged inside the domain
    keep[0, 6] = False
    with pytest.raises(NoFeasibleLine) as ei:
        lattice_line(t, xy(t, *s), xy(t, *e), Mover(mu=0.1), keepout=keep, allowed=domain,
                     options=SearchOptions(neighbours=16))
    assert ei.value.reason == "keepout"
    # a point outside the domain is refused before any search
    with pytest.raises(NoFeasibleLine, match="outside the search domain") as ei:
        lattice_line(t, xy(t, 0, 0), xy(t, *e), Mover(mu=0.1), allowed=domain)
    assert ei.value.reason == "corridor"
    with pytest.raises(NoFeasibleLine) as ei:
        reach(t, xy(t, 0, 0), Mover(mu=0.1), allowed=domain)
    assert ei.value.reason == "corridor"


def test_diagnosis_tries_only_the_obstacles_that_stopped_an_edge(monkeypatch):
    # A stall with a keep-out the search never reaches: the failed search ran exactly as
    # it would without the keep-out, so the diagnosis does not search again without it.
    # Reference: the reason is the one of the same case without any keep-out.
    from fallway.lattice import search as S

    t = terrain_of(_plane(gx=-0.1), 5.0)  # 10 % slope, mu 0.3: friction wins from rest
    keep = np.zeros(t.shape, dtype=bool)
    keep[0, 11] = True
    with pytest.raises(NoFeasibleLine) as ref:
        lattice_line(t, xy(t, 5, 0), xy(t, 5, 11), Mover(mu=0.3))
    runs = []
    run = S._Problem.run
    monkeypatch.setattr(S._Problem, "run", lambda self, *a, **k: runs.append(1) or run(self, *a, **k))
    with pytest.raises(NoFeasibleLine) as ei:
        lattice_line(t, xy(t, 5, 0), xy(t, 5, 11), Mover(mu=0.3), keepout=keep)
    assert ei.value.reason == ref.value.reason == "stall"
    assert len(runs) == 1


def test_reach_with_a_domain_equals_scipy_dijkstra():
    # The domain (a diagonal corridor) and a few keep-out holes inside it: scipy's
    # Dijkstra on the lattice of the cells both allow.
    t, z, keep = corridor_case(seed=6)
    rows, cols = z.shape
    r, c = np.mgrid[0:rows, 0:cols]
    domain = np.abs(r * (cols - 1) - c * (rows - 1)) / math.hypot(rows - 1, cols - 1) <= 5.0
    holes = keep & domain
    mover = Mover(v0=1.5, normal="gravity")
    e0 = mover.v0 ** 2 + 2 * G * z[0, 0]
    ref = dijkstra(frictionless_graph16(z, 4.0, domain & ~holes, e0), indices=0).reshape(z.shape)
    rm = reach(t, xy(t, 0, 0), mover, keepout=holes, allowed=domain, options=SearchOptions(neighbours=16))
    ok = np.isfinite(ref)
    assert ok.sum() > 200
    assert np.array_equal(ok, np.isfinite(rm.time_s))
    np.testing.assert_allclose(rm.time_s[ok], ref[ok], rtol=1e-9, atol=1e-12)
    assert rm.stats["state_cells"] == int((domain & ~holes).sum())


def test_label_budget_has_its_own_reason():
    # Reference: the same search without a budget finds the line, so the budget is what
    # stopped it; callers branch on the reason, not on the message.
    z = rough_dem(30)
    t = terrain_of(z)
    full = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, options=SearchOptions(neighbours=8))
    assert full.stats["labels_created"] > 20
    with pytest.raises(NoFeasibleLine) as ei:
        lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, options=SearchOptions(neighbours=8, max_labels=20))
    assert ei.value.reason == "label_budget" and ei.value.closest is not None
    assert "label budget of 20" in str(ei.value)
    rm = reach(t, xy(t, 0, 0), MOVER, options=SearchOptions(neighbours=8, max_labels=20))
    assert rm.stats["complete"] is False


def test_fronts_check_their_options():
    # Reference: the keywords each front declares (inspect.signature); the old search
    # keywords now live on SearchOptions and are refused by name.
    import inspect

    t = terrain_of(_plane(), 5.0)
    a, b = xy(t, 5, 0), xy(t, 5, 11)
    assert [p for p in inspect.signature(lattice_line).parameters][-5:] == ["via", "limits", "keepout", "allowed",
                                                                           "options"]
    with pytest.raises(ParameterError, match="lattice_line: unknown option neighbours; allowed: via, limits, "
                                             "keepout, allowed, options"):
        lattice_line(t, a, b, Mover(), neighbours=8)
    with pytest.raises(ParameterError, match="reach: unknown option max_per_cell"):
        reach(t, a, Mover(), max_per_cell=2)
    with pytest.raises(ParameterError, match="must be a fallway.SearchOptions"):
        lattice_line(t, a, b, Mover(), options={"neighbours": 8})
    with pytest.raises(ParameterError, match="allowed mask must have the terrain's shape"):
        lattice_line(t, a, b, Mover(), allowed=np.ones((2, 2), bool))
    with pytest.raises(ParameterError, match="bool mask"):
        lattice_line(t, a, b, Mover(), allowed=np.ones(t.shape))


def test_points_outside_the_grid():
    t = terrain_of(_plane(), 5.0)
    with pytest.raises(ParameterError, match="end .* outside"):
        lattice_line(t, xy(t, 5, 0), (1000.0, 10.0), Mover())


def brute_force_capped(z, cell, mover, start, end):
    """Fastest simple path on the 8-neighbour lattice under the speed cap, by exhaustive
    depth-first enumeration (no dominance at all: exact whatever the cap does)."""
    rows, cols = z.shape
    v2_max = math.inf if mover.max_speed is None else mover.max_speed ** 2
    best = [math.inf]
    seen = {start}

    def dfs(node, v2, t):
        if t >= best[0]:
            return
        if node == end:
            best[0] = t
            return
        r, c = node
        for dr in (-1, 0, 1):
            for dc in (-1, 0, 1):
                nb = (r + dr, c + dc)
                if (dr or dc) and 0 <= nb[0] < rows and 0 <= nb[1] < cols and nb not in seen:
                    out = seg_ref(v2, z[r, c] - z[nb], cell * math.hypot(dr, dc), mover.g, mover.mu,
                                  mover.drag, v2_max)
                    if out is not None:
                        seen.add(nb)
                        dfs(nb, out[0], t + out[1])
                        seen.discard(nb)

    dfs(start, mover.v0 ** 2, 0.0)
    return best[0]


@pytest.mark.parametrize("seed", [3, 30])
def test_speed_cap_that_does_not_bind_gives_the_exact_answer(seed):
    # The capped lines are a subset of the uncapped ones, so when the uncapped optimum
    # stays under the cap it is the capped optimum too; checked against exhaustive
    # enumeration of simple paths on a small lattice.
    z = rough_dem(seed, rows=4, cols=5)
    t = terrain_of(z)
    free = lattice_line(t, xy(t, 0, 0), xy(t, 3, 4), MOVER, options=SearchOptions(neighbours=8))
    vmax = float(np.nanmax(free.profile.speed_m_s))
    capped = Mover(mu=MOVER.mu, drag=MOVER.drag, v0=MOVER.v0, normal="gravity", max_speed=vmax * 1.01)
    ln = lattice_line(t, xy(t, 0, 0), xy(t, 3, 4), capped, options=SearchOptions(neighbours=8))
    assert ln.stats["speed_cap_binding"] is False
    ref = brute_force_capped(z, 10.0, capped, (0, 0), (3, 4))
    assert ln.time_s == pytest.approx(ref, rel=1e-9)
    # a binding cap: the line respects it and is no faster than the exhaustive optimum
    tight = Mover(mu=MOVER.mu, drag=MOVER.drag, v0=MOVER.v0, normal="gravity", max_speed=vmax * 0.9)
    ref_t = brute_force_capped(z, 10.0, tight, (0, 0), (3, 4))
    try:
        ln = lattice_line(t, xy(t, 0, 0), xy(t, 3, 4), tight, options=SearchOptions(neighbours=8))
    except NoFeasibleLine:
        assert ref_t == math.inf or ref_t > 0    # heuristic may miss a line; says so
    else:
        assert ln.stats["speed_cap_binding"] is True
        assert np.nanmax(ln.profile.speed_m_s) <= tight.max_speed + 1e-9
        assert ln.time_s >= ref_t * (1 - 1e-9)


# ----------------------------------------------------------------------------- compact state, time cut-off

KNIGHT = [(1, 2), (2, 1), (-1, 2), (-2, 1), (1, -2), (2, -1), (-1, -2), (-2, -1)]


def touched_cells(dr, dc):
    """Cells whose closed square the plan segment (0,0)->(dr,dc) meets (shapely geometry)."""
    import shapely

    seg = shapely.LineString([(0.0, 0.0), (float(dc), float(dr))])
    return [(i, j) for i in range(min(0, dr), max(0, dr) + 1) for j in range(min(0, dc), max(0, dc) + 1)
            if seg.intersects(shapely.box(j - 0.5, i - 0.5, j + 0.5, i + 0.5))]


def frictionless_graph16(z, cell, free, e0):
    """scipy CSR graph of the 16-neighbour lattice with static frictionless edge times.

    v² = e0 - 2 g z at every point (energy depends on height only); an edge is a chain
    of straight pieces through its break points (knight moves cross one grid line
    between centres, where the bilinear height is the mean of the two centres on that
    line) with t = 2 s / (v_a + v_b) per piece (CHECKS.md "Motion along a line").  An
    edge is usable only when every cell its closed plan segment touches is free.
    """
    rows, cols = z.shape
    idx = np.arange(rows * cols).reshape(rows, cols)
    a_, b_, w_ = [], [], []
    for dr, dc in KING + KNIGHT:
        touch = touched_cells(dr, dc)
        for i in range(rows):
            for j in range(cols):
                i2, j2 = i + dr, j + dc
                if not (0 <= i2 < rows and 0 <= j2 < cols):
                    continue
                if not all(free[i + a, j + b] for a, b in touch):
                    continue
                pts = [(0.0, 0.0, z[i, j])]
                if abs(dc) == 2:
                    pts.append((dr / 2, dc / 2, 0.5 * (z[i, j + dc // 2] + z[i2, j + dc // 2])))
                elif abs(dr) == 2:
                    pts.append((dr / 2, dc / 2, 0.5 * (z[i + dr // 2, j] + z[i + dr // 2, j2])))
                pts.append((dr, dc, z[i2, j2]))
                v2s = [e0 - 2 * G * p[2] for p in pts]
                if min(v2s[1:]) <= 0 or v2s[0] < 0:
                    continue
                tt = sum(math.sqrt((cell * (p1[0] - p0[0])) ** 2 + (cell * (p1[1] - p0[1])) ** 2
                                   + (p1[2] - p0[2]) ** 2) * 2 / (math.sqrt(va) + math.sqrt(vb))
                         for p0, p1, va, vb in zip(pts[:-1], pts[1:], v2s[:-1], v2s[1:]))
                a_.append(idx[i, j])
                b_.append(idx[i2, j2])
                w_.append(tt)
    return sp.csr_matrix((w_, (a_, b_)), shape=(rows * cols,) * 2)


def corridor_case(seed=4, rows=28, cols=34, cell=4.0):
    """A rough slope, a diagonal corridor (cells within 5 of the diagonal) and a few holes."""
    rng = np.random.default_rng(seed)
    r, c = np.mgrid[0:rows, 0:cols]
    z = 60.0 - 0.5 * r - 0.4 * c + rng.normal(scale=0.8, size=(rows, cols))
    dist = np.abs(r * (cols - 1) - c * (rows - 1)) / math.hypot(rows - 1, cols - 1)
    keep = dist > 5.0
    keep |= rng.random((rows, cols)) < 0.06
    keep[0, 0] = keep[-1, -1] = False
    return terrain_of(z, cell), z, keep


def test_corridor_reach_frictionless_16_equals_scipy_dijkstra():
    t, z, keep = corridor_case()
    start = (0, 0)
    mover = Mover(v0=1.5, normal="gravity")
    e0 = mover.v0 ** 2 + 2 * G * z[start]
    ref = dijkstra(frictionless_graph16(z, 4.0, ~keep, e0), indices=start[0] * z.shape[1] + start[1])
    ref = ref.reshape(z.shape)
    rm = reach(t, xy(t, *start), mover, keepout=keep, options=SearchOptions(neighbours=16))
    ok = np.isfinite(ref)
    assert ok.sum() > 200  # the corridor is really searched
    assert np.array_equal(ok, np.isfinite(rm.time_s))
    np.testing.assert_allclose(rm.time_s[ok], ref[ok], rtol=1e-9, atol=1e-12)
    # the per-state arrays were sized for the searchable cells only
    assert rm.stats["state_cells"] == int((~keep).sum()) < z.size
    assert rm.stats["labels_settled"] == int(ok.sum())


def test_reach_time_cutoff_equals_scipy_dijkstra_limit():
    t, z, keep = corridor_case(seed=9)
    start = (0, 0)
    mover = Mover(v0=1.5, normal="gravity")
    e0 = mover.v0 ** 2 + 2 * G * z[start]
    g = frictionless_graph16(z, 4.0, ~keep, e0)
    full = dijkstra(g, indices=0).reshape(z.shape)
    t_max = float(np.nanmedian(full[np.isfinite(full)]))
    # scipy: nodes farther than ``limit`` are left at inf
    ref = dijkstra(g, indices=0, limit=t_max).reshape(z.shape)
    rm = reach(t, xy(t, *start), mover, keepout=keep, max_time_s=t_max, options=SearchOptions(neighbours=16))
    ok = np.isfinite(ref)
    assert 50 < ok.sum() < np.isfinite(full).sum()
    assert np.array_equal(ok, np.isfinite(rm.time_s))
    np.testing.assert_allclose(rm.time_s[ok], ref[ok], rtol=1e-9, atol=1e-12)
    assert np.nanmax(rm.time_s) <= t_max
    uncut = reach(t, xy(t, *start), mover, keepout=keep, options=SearchOptions(neighbours=16))
    assert rm.stats["labels_created"] < uncut.stats["labels_created"]
    assert rm.stats["labels_cut_off"] > 0 and uncut.stats["labels_cut_off"] == 0


def hills_terrain(n=60, cell=3.0, seed=2):
    from scipy import ndimage

    rng = np.random.default_rng(seed)
    h = ndimage.gaussian_filter(rng.normal(size=(n, n)), 4.0)
    h *= 4.0 / np.abs(h).max()
    r, c = np.mgrid[0:n, 0:n].astype(float)
    return Terrain.from_array(300.0 - 0.3 * cell * (r + c) + h, (cell, 0, 0, 0, -cell, n * cell))


@pytest.mark.slow
@pytest.mark.parametrize("mover", [Mover(mu=0.2, drag=0.01, v0=1.0, normal="gravity"),
                                   Mover(mu=0.1, v0=0.5, normal="gravity")])
def test_friction_reach_cutoff_is_the_full_reach_masked(mover):
    # every label up to the cut-off descends from labels up to the cut-off and settles
    # before any later one, so the cut search reproduces the full one up to t_max
    t = hills_terrain()
    start = t.cell_center(5, 5)
    full = reach(t, start, mover, options=SearchOptions(neighbours=16))
    t_max = float(np.nanpercentile(full.time_s, 40))
    cut = reach(t, start, mover, max_time_s=t_max, options=SearchOptions(neighbours=16))
    early = full.time_s <= t_max
    assert early.sum() > 100
    assert np.array_equal(np.isfinite(cut.time_s), early)
    assert np.array_equal(cut.time_s[early], full.time_s[early])
    assert np.array_equal(cut.speed_m_s[early], full.speed_m_s[early])
    assert cut.stats["labels_settled"] < full.stats["labels_settled"]


def _run_both(t, mover, keep, start, targets, limits=None, label_cap=None, heuristic=True):
    from fallway.lattice.search import _Problem

    prob = _Problem(t, mover, 16, limits, keep)
    out = []
    for compact in (True, False):
        res = prob.run(start, targets, heuristic=heuristic, energy_tol=None, max_labels=None,
                       label_cap=label_cap, compact=compact)
        chain = []
        p = res["final"]
        while p >= 0:
            chain.append((int(res["node"][p]), float(res["t"][p]), float(res["v2"][p])))
            p = int(res["parent"][p])
        out.append((res, chain))
    return out


@pytest.mark.parametrize("case", ["plain", "via", "turn", "cap", "reach"])
def test_compact_and_full_window_layouts_give_identical_searches(case):
    t, z, keep = corridor_case(seed=5, rows=30, cols=36)
    cols = z.shape[1]
    mover = Mover(mu=0.05, drag=0.002, v0=2.0, normal="gravity")
    start, end, via = 0, z.size - 1, 15 * cols + 18
    keep.ravel()[via] = False
    kw = dict(plain={}, via={"targets": [via, end]}, turn={"limits": Limits(max_step_turn_deg=50.0)},
              cap={"label_cap": 1}, reach={"targets": []})[case]
    targets = kw.pop("targets", [end])
    (a, ca), (b, cb) = _run_both(t, mover, keep, start, targets, **kw)
    assert a["stats"]["state_cells"] == int((~keep).sum())
    assert b["stats"]["state_cells"] == z.size
    assert a["status"] == b["status"]
    assert np.array_equal(a["counters"], b["counters"])
    assert ca == cb
    if case == "reach":
        assert np.array_equal(a["best_t"], b["best_t"], equal_nan=True)
        assert np.array_equal(a["best_v2"], b["best_v2"], equal_nan=True)
    else:
        assert a["status"] == 0 and len(ca) > 10


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(noise=arrays(np.float64, (9, 10), elements=st.floats(-2.0, 2.0)),
       holes=arrays(np.bool_, (9, 10), elements=st.booleans()),
       mu=st.floats(0.0, 0.3), frac=st.floats(0.1, 0.9))
def test_property_compact_equals_full_and_cutoff_equals_masked(noise, holes, mu, frac):
    r, c = np.mgrid[0:9, 0:10]
    z = 30.0 - 1.2 * r - 1.0 * c + noise
    keep = holes & (np.add.outer(np.arange(9), np.arange(10)) % 3 == 0)
    keep[0, 0] = False
    t = terrain_of(z, 5.0)
    mover = Mover(mu=mu, v0=1.0, normal="gravity")
    (a, ca), (b, cb) = _run_both(t, mover, keep, 0, [], heuristic=False)
    assert np.array_equal(a["best_t"], b["best_t"], equal_nan=True)
    assert np.array_equal(a["counters"], b["counters"])
    full = a["best_t"].reshape(z.shape)
    if not np.isfinite(full).sum() > 1:
        return
    t_max = float(np.nanquantile(full[full > 0], frac))
    cut = reach(t, xy(t, 0, 0), mover, keepout=keep, max_time_s=t_max, options=SearchOptions(neighbours=16))
    early = full <= t_max
    assert np.array_equal(np.isfinite(cut.time_s), early)
    assert np.array_equal(cut.time_s[early], full[early])
