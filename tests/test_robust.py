"""The exact robust lattice search checked against references outside the kernel.

References (independent code in this file):
- a brute-force enumeration of every simple path on a tiny 8-neighbour grid, each timed
  with the constant-acceleration closed forms of elementary mechanics (any mechanics
  text: on a straight incline with Coulomb friction a = g (drop - mu plan) / s,
  v_b² = v_a² + 2 a s, t = 2 s / (v_a + v_b)), at LO, nominal and HI friction; the
  reference answer is the fastest path at nominal friction that does not stall at HI and
  stays under the speed cap at LO;
- fallway.physics.traverse (the reporting model, a separate integrator) re-timing each
  returned line at the three frictions.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from fallway.errors import NoFeasibleLine, ParameterError
from fallway.lattice.search import lattice_line, robust_lattice_line
from fallway.params import SearchOptions
from fallway.physics import Mover, traverse
from fallway.terrain import Terrain

G = 9.80665  # standard gravity (3rd CGPM, 1901)
KING = [(0, 1), (-1, 1), (-1, 0), (-1, -1), (0, -1), (1, -1), (1, 0), (1, 1)]


def step(v2a, drop, plan, mu, v2_cap=math.inf):
    """(v2b, t) on one straight segment (drag-free closed form), None when it stalls or overspeeds."""
    s = math.hypot(plan, drop)
    a = G * (drop - mu * plan) / s
    if v2a <= 0 and a <= 0:
        return None
    v2b = v2a + 2 * a * s
    if v2b < 0 or v2b > v2_cap:
        return None
    return v2b, 2 * s / (math.sqrt(v2a) + math.sqrt(max(v2b, 0.0)))


def brute_force(z, start, end, mu_lo, mu, mu_hi, v0, vmax, cell=1.0):
    """Fastest nominal *simple* path robust over the range: (time, path, (v2lo, v2nom, v2hi))."""
    return tuple(_enumerate(z, start, end, mu_lo, mu, mu_hi, v0, vmax, cell, [math.inf, None, None], False))


def walk_faster_than(z, start, end, mu_lo, mu, mu_hi, v0, vmax, bound_s, cell=1.0):
    """A robust *walk* (cells may repeat) faster than ``bound_s`` at nominal friction, or None.

    Exhaustive branch and bound: every step takes a positive time, so it terminates.
    """
    return _enumerate(z, start, end, mu_lo, mu, mu_hi, v0, vmax, cell, [bound_s, None, None], True)[1]


def walk_cost(z, cells, mu_lo, mu, mu_hi, v0, vmax, cell=1.0):
    """(nominal time, (v2lo, v2nom, v2hi)) of a given cell sequence, None when not robust."""
    cap = math.inf if vmax is None else vmax * vmax
    e = [v0 * v0] * 3
    t = 0.0
    for (r, c), (r2, c2) in zip(cells[:-1], cells[1:]):
        drop = z[r, c] - z[r2, c2]
        plan = math.hypot(r2 - r, c2 - c) * cell
        out = [step(e[0], drop, plan, mu_lo, cap), step(e[1], drop, plan, mu), step(e[2], drop, plan, mu_hi)]
        if any(o is None for o in out):
            return None
        t += out[1][1]
        e = [o[0] for o in out]
    return t, tuple(e)


def assert_optimal(z, ln, start, end, lo, mu, hi, v0, vmax):
    """The kernel's line is robust, timed right, no slower than any simple path or walk."""
    cells = [tuple(c) for c in ln.cells.tolist()]
    assert ln.stats["simple"] == (len(set(cells)) == len(cells))
    cost = walk_cost(z, cells, lo, mu, hi, v0, vmax)
    assert cost is not None
    assert cost[0] == pytest.approx(ln.time_s, rel=1e-9)
    assert cost[1][2] == pytest.approx(ln.stats["exit_speed_hi_m_s"] ** 2, rel=1e-9)
    ref_t, ref_path, _ = brute_force(z, start, end, lo, mu, hi, v0, vmax)
    if len(set(cells)) == len(cells):  # a simple path: it must be the simple optimum
        assert ln.time_s == pytest.approx(ref_t, rel=1e-9, abs=1e-9)
        assert cells == ref_path
    else:  # a walk that sheds energy on a loop: no slower than every simple path
        assert ref_path is None or ln.time_s <= ref_t * (1 + 1e-9)
    assert walk_faster_than(z, start, end, lo, mu, hi, v0, vmax, ln.time_s * (1 - 1e-9)) is None
    return ref_t, ref_path


def _enumerate(z, start, end, mu_lo, mu, mu_hi, v0, vmax, cell, best, walks):
    rows, cols = z.shape
    cap = math.inf if vmax is None else vmax * vmax
    seen = np.zeros_like(z, dtype=bool)

    def dfs(r, c, t, e, path):
        if t >= best[0]:
            return  # times only grow along a path: branch and bound, still exhaustive
        if (r, c) == end:
            best[:] = [t, list(path), e]
            return  # a walk may not pass through the end and come back: the search stops there
        for dr, dc in KING:
            r2, c2 = r + dr, c + dc
            if not (0 <= r2 < rows and 0 <= c2 < cols) or (seen[r2, c2] and not walks):
                continue
            drop = z[r, c] - z[r2, c2]
            plan = math.hypot(dr, dc) * cell
            hi = step(e[2], drop, plan, mu_hi)
            lo = step(e[0], drop, plan, mu_lo, cap)
            nom = step(e[1], drop, plan, mu)
            if hi is None or lo is None or nom is None:
                continue
            seen[r2, c2] = True
            path.append((r2, c2))
            dfs(r2, c2, t + nom[1], (lo[0], nom[0], hi[0]), path)
            path.pop()
            seen[r2, c2] = False

    seen[start] = True
    dfs(start[0], start[1], 0.0, (v0 * v0,) * 3, [start])
    return best


def terrain_of(z):
    rows, _ = z.shape
    return Terrain.from_array(z, (1.0, 0.0, 0.0, 0.0, -1.0, float(rows)))


def xy(t, rc):
    return t.cell_center(*rc)


def random_dem(seed, rows=4, cols=5, noise=0.3, tilt=0.35):
    """A tilted plane (down to the south-east) with Gaussian bumps, seeded."""
    rng = np.random.default_rng(seed)
    base = -tilt * np.add.outer(np.arange(rows), 1.2 * np.arange(cols))
    return base + rng.normal(0.0, noise, (rows, cols))


def check_line_at_three(ln, mover, lo, hi):
    """Re-time the returned line with traverse at LO, nominal and HI friction."""
    m = Mover(mu=mover.mu, v0=mover.v0, normal="gravity")
    p_hi = traverse(ln.points, Mover(mu=hi, v0=mover.v0, normal="gravity"))
    p_lo = traverse(ln.points, Mover(mu=lo, v0=mover.v0, normal="gravity"))
    p_nom = traverse(ln.points, m)
    assert p_hi.stalled_at_m is None and p_nom.feasible
    assert p_nom.travel_time_s == pytest.approx(ln.time_s, rel=1e-9)
    assert p_lo.exit_speed_m_s == pytest.approx(ln.stats["exit_speed_lo_m_s"], rel=1e-9)
    assert p_hi.exit_speed_m_s == pytest.approx(ln.stats["exit_speed_hi_m_s"], rel=1e-9)
    if mover.max_speed is not None:
        assert float(np.max(p_lo.speed_m_s)) <= mover.max_speed * (1 + 1e-9)
    return p_lo, p_nom, p_hi


CASES = [  # seed, mu_lo, mu, mu_hi, v0, vmax
    (0, 0.05, 0.15, 0.3, 1.0, None),
    (1, 0.0, 0.1, 0.35, 0.5, None),
    (2, 0.05, 0.1, 0.3, 1.0, 3.2),
    (3, 0.1, 0.2, 0.4, 2.0, None),
    (4, 0.0, 0.1, 0.25, 1.0, 3.0),
    (5, 0.05, 0.2, 0.45, 1.5, None),
]


def run_case(z, lo, mu, hi, v0, vmax, energy_tol=0.0):
    """Kernel against the references on one DEM; returns the line or None when none exists."""
    t = terrain_of(z)
    start, end = (0, 0), (z.shape[0] - 1, z.shape[1] - 1)
    mover = Mover(mu=mu, v0=v0, max_speed=vmax, normal="gravity")
    try:
        ln = robust_lattice_line(t, xy(t, start), xy(t, end), mover, lo, hi,
                                 options=SearchOptions(neighbours=8, energy_tol=energy_tol))
    except NoFeasibleLine:
        # no robust simple path either (walks: see module notes of the kernel)
        assert brute_force(z, start, end, lo, mu, hi, v0, vmax)[1] is None
        return None
    assert_optimal(z, ln, start, end, lo, mu, hi, v0, vmax)
    check_line_at_three(ln, mover, lo, hi)
    return ln


@pytest.mark.parametrize("seed, lo, mu, hi, v0, vmax", CASES)
def test_kernel_equals_brute_force_on_random_small_dems(seed, lo, mu, hi, v0, vmax):
    run_case(random_dem(seed), lo, mu, hi, v0, vmax)


# (seed, noise, tilt, mu_lo, mu, mu_hi, v0, max_speed, failure of the nominal optimum)
NOT_ROBUST = [
    (125, 0.5, 0.45, 0.0, 0.05, 0.35, 0.5, None, "stall"),
    (9, 0.7, 0.5, 0.0, 0.05, 0.3, 1.0, None, "stall"),
    (0, 0.5, 0.5, 0.1, 0.15, 0.3, 1.0, 7.5, "speed"),
    (5, 0.5, 0.5, 0.1, 0.15, 0.3, 1.0, 7.5, "speed"),
    (4, 0.5, 0.5, 0.15, 0.2, 0.3, 1.0, 7.0, "speed"),
]


@pytest.mark.parametrize("seed, noise, tilt, lo, mu, hi, v0, vmax, failure", NOT_ROBUST)
def test_robust_answer_differs_where_the_nominal_optimum_is_not_robust(seed, noise, tilt, lo, mu, hi, v0, vmax,
                                                                       failure):
    z = random_dem(seed, noise=noise, tilt=tilt)
    t = terrain_of(z)
    nominal = lattice_line(t, xy(t, (0, 0)), xy(t, (3, 4)), Mover(mu=mu, v0=v0, normal="gravity"),
                           options=SearchOptions(neighbours=8, energy_tol=0.0))
    if failure == "stall":  # the ordinary optimum stalls at HI ...
        assert traverse(nominal.points, Mover(mu=hi, v0=v0, normal="gravity")).stalled_at_m is not None
    else:  # ... or is over the speed limit at LO
        assert float(np.max(traverse(nominal.points, Mover(mu=lo, v0=v0, normal="gravity")).speed_m_s)) > vmax
    ln = run_case(z, lo, mu, hi, v0, vmax)
    assert ln is not None
    assert ln.cells.tolist() != nominal.cells.tolist() and ln.time_s > nominal.time_s


@pytest.mark.slow
def test_kernel_equals_brute_force_over_many_seeds_with_a_speed_limit():
    # 20 seeded DEMs, default tolerance: the declared 1e-10 does not change the answer here
    found = 0
    for seed in range(20):
        ln = run_case(random_dem(seed, noise=0.5, tilt=0.5), 0.1, 0.15, 0.3, 1.0, 8.0, energy_tol=None)
        found += ln is not None
    assert found >= 8


def test_zero_width_range_equals_the_ordinary_search():
    # mu_lo = mu = mu_hi collapses the three energies into one: the ordinary exact search
    z = random_dem(11, 6, 7)
    t = terrain_of(z)
    m = Mover(mu=0.15, v0=1.0, normal="gravity")
    a = robust_lattice_line(t, xy(t, (0, 0)), xy(t, (5, 6)), m, 0.15, 0.15,
                            options=SearchOptions(neighbours=16, energy_tol=0.0))
    b = lattice_line(t, xy(t, (0, 0)), xy(t, (5, 6)), m, options=SearchOptions(neighbours=16, energy_tol=0.0))
    assert a.time_s == pytest.approx(b.time_s, rel=1e-12)
    check_line_at_three(a, m, 0.15, 0.15)


def test_sixteen_neighbours_default_tolerance_and_keepout():
    z = random_dem(7, 8, 9)
    t = terrain_of(z)
    keep = np.zeros(z.shape, dtype=bool)
    keep[2:6, 3] = True
    m = Mover(mu=0.12, v0=1.0, normal="gravity")
    ln = robust_lattice_line(t, xy(t, (0, 0)), xy(t, (7, 8)), m, 0.05, 0.25, keepout=keep,
                             options=SearchOptions(neighbours=16))
    exact = robust_lattice_line(t, xy(t, (0, 0)), xy(t, (7, 8)), m, 0.05, 0.25, keepout=keep,
                                options=SearchOptions(neighbours=16, energy_tol=0.0))
    assert ln.time_s == pytest.approx(exact.time_s, rel=1e-9)
    assert not keep[ln.cells[:, 0], ln.cells[:, 1]].any()
    check_line_at_three(ln, m, 0.05, 0.25)


def test_no_robust_line_and_bad_input():
    # a flat plate: nothing gets through at mu_hi from a slow start
    t = terrain_of(np.zeros((3, 4)))
    m = Mover(mu=0.1, v0=0.5, normal="gravity")
    with pytest.raises(NoFeasibleLine):
        robust_lattice_line(t, xy(t, (0, 0)), xy(t, (2, 3)), m, 0.0, 0.5, options=SearchOptions(neighbours=8))
    with pytest.raises(ParameterError):
        robust_lattice_line(t, xy(t, (0, 0)), xy(t, (2, 3)), m, 0.2, 0.5,
                            options=SearchOptions(neighbours=8))  # mu outside range


# --------------------------------------------------------------------------- speed-ups

def _turn_brute_force(z, start, end, lo, mu, hi, v0, vmax, max_step_turn_deg):
    """Fastest nominal simple path, robust over the range, turning at most ``max_step_turn_deg``."""
    rows, cols = z.shape
    cap = math.inf if vmax is None else vmax * vmax
    best = [math.inf, None]
    seen = np.zeros_like(z, dtype=bool)

    def turn(a, b):  # plan angle between two king steps, degrees
        d = abs(math.degrees(math.atan2(-a[0], a[1]) - math.atan2(-b[0], b[1]))) % 360.0
        return min(d, 360.0 - d)

    def dfs(r, c, t, e, path, last):
        if t >= best[0]:
            return
        if (r, c) == end:
            best[:] = [t, list(path)]
            return
        for d in KING:
            if last is not None and turn(last, d) > max_step_turn_deg + 1e-9:
                continue
            r2, c2 = r + d[0], c + d[1]
            if not (0 <= r2 < rows and 0 <= c2 < cols) or seen[r2, c2]:
                continue
            drop = z[r, c] - z[r2, c2]
            plan = math.hypot(*d)
            out = step(e[0], drop, plan, lo, cap), step(e[1], drop, plan, mu), step(e[2], drop, plan, hi)
            if any(o is None for o in out):
                continue
            seen[r2, c2] = True
            path.append((r2, c2))
            dfs(r2, c2, t + out[1][1], tuple(o[0] for o in out), path, d)
            path.pop()
            seen[r2, c2] = False

    seen[start] = True
    dfs(*start, 0.0, (v0 * v0,) * 3, [start], None)
    return best


@pytest.mark.parametrize("seed", [0, 2, 4, 6])
def test_turn_limit_equals_brute_force(seed):
    from fallway.params import Limits

    z = random_dem(seed, noise=0.5, tilt=0.5)
    t = terrain_of(z)
    lo, mu, hi, v0, vmax = 0.1, 0.15, 0.3, 1.0, 8.0
    m = Mover(mu=mu, v0=v0, max_speed=vmax, normal="gravity")
    ref_t, ref_path = _turn_brute_force(z, (0, 0), (3, 4), lo, mu, hi, v0, vmax, 45.0)
    try:
        ln = robust_lattice_line(t, xy(t, (0, 0)), xy(t, (3, 4)), m, lo, hi,
                                 limits=Limits(max_step_turn_deg=45.0),
                                 options=SearchOptions(neighbours=8, energy_tol=0.0))
    except NoFeasibleLine:
        assert ref_path is None
        return
    cells = [tuple(c) for c in ln.cells.tolist()]
    if ln.stats["simple"]:
        assert ln.time_s == pytest.approx(ref_t, rel=1e-9)
    else:
        assert ref_path is None or ln.time_s <= ref_t * (1 + 1e-9)
    steps = np.diff(np.array(cells), axis=0)
    ang = np.degrees(np.arctan2(-steps[:, 0], steps[:, 1]))
    turns = np.abs((np.diff(ang) + 180.0) % 360.0 - 180.0)
    assert np.all(turns <= 45.0 + 1e-9)


def test_lo_floor_equals_a_scipy_dijkstra_from_every_cell():
    # E[n] = min over cells a of zlow[a] + mu * (shortest lattice plan distance n -> a):
    # scipy's Dijkstra from a super-source joined to every cell a with weight zlow[a]
    # (shifted to be >= 0); zlow from the 16-stencil geometry: a knight step's one
    # break point is its midpoint, which lies halfway between two cell centres
    import scipy.sparse as sp
    from scipy.sparse.csgraph import dijkstra

    from fallway.lattice.robust import lo_floor
    from fallway.lattice.search import _Problem
    from fallway.lattice.stencil import make_stencil

    rng = np.random.default_rng(3)
    rows, cols = 7, 9
    z = rng.normal(0.0, 2.0, (rows, cols)) - 0.3 * np.arange(cols)
    t = terrain_of(z)
    mu = 0.12
    offs = make_stencil(16).offsets
    zlow = z.copy()
    ii, jj, ww = [], [], []
    for r in range(rows):
        for c in range(cols):
            for dr, dc in offs:
                r2, c2 = r + dr, c + dc
                if not (0 <= r2 < rows and 0 <= c2 < cols):
                    continue
                ii.append(r * cols + c)
                jj.append(r2 * cols + c2)
                ww.append(mu * math.hypot(dr, dc))
                if abs(dr) + abs(dc) == 3:  # knight step: midpoint between two centres
                    mr, mc = r + dr / 2, c + dc / 2
                    a = (math.floor(mr), math.floor(mc))
                    b = (math.ceil(mr), math.ceil(mc))
                    zlow[r, c] = min(zlow[r, c], 0.5 * (z[a] + z[b]))
    n = rows * cols
    shift = zlow.min()
    ii += [n] * n
    jj += list(range(n))
    ww += list((zlow.ravel() - shift) + 1e-300)
    g = sp.csr_matrix((ww, (jj, ii)), shape=(n + 1, n + 1))  # reversed: distances run n -> a
    ref = dijkstra(g.T.tocsr(), indices=n)[:n] + shift
    p = _Problem(t, Mover(mu=mu, normal="gravity"), 16, None, np.zeros(z.shape, bool))
    cidx, nact = p.index()
    got = lo_floor(p.z, p.blocked, cidx, nact, p.rows, p.cols, p.cell, p.off_dr, p.off_dc, p.off_plan, p.brk_start,
                   p.brk_fa, p.brk_fb, p.brk_w, p.tch_start, p.tch_flat, mu)
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-9)
    # a blocked cell is never a target: it gets inf
    keep = np.zeros(z.shape, bool)
    keep[3, 4] = True
    p = _Problem(t, Mover(mu=mu, normal="gravity"), 16, None, keep)
    # compact layout: the blocked cell has no entry at all
    cidx, nact = p.index()
    got = lo_floor(p.z, p.blocked, cidx, nact, p.rows, p.cols, p.cell, p.off_dr, p.off_dc, p.off_plan, p.brk_start,
                   p.brk_fa, p.brk_fb, p.brk_w, p.tch_start, p.tch_flat, mu)
    assert nact == rows * cols - 1 and cidx[3 * cols + 4] == -1 and np.isfinite(got).all()
    # full-window layout: the blocked cell is never a target, it gets inf
    cidx, nact = p.index(compact=False)
    full = lo_floor(p.z, p.blocked, cidx, nact, p.rows, p.cols, p.cell, p.off_dr, p.off_dc, p.off_plan, p.brk_start,
                    p.brk_fa, p.brk_fb, p.brk_w, p.tch_start, p.tch_flat, mu)
    assert math.isinf(full[3 * cols + 4]) and np.array_equal(np.delete(full, 3 * cols + 4), got)


def test_a_star_order_and_label_cap():
    # the A* bound changes the order of work, not the answer; a label cap gives a robust
    # line (checked by traverse at the three frictions) and says it may not be exact
    # (the 11.8 m/s limit binds at LO: the straight-down optimum reaches 12.1 m/s there)
    z = random_dem(7, 10, 12, noise=0.1, tilt=0.4)
    t = terrain_of(z)
    m = Mover(mu=0.15, v0=1.0, max_speed=11.8, normal="gravity")
    free = robust_lattice_line(t, xy(t, (0, 0)), xy(t, (9, 11)), Mover(mu=0.15, v0=1.0, normal="gravity"), 0.1, 0.25)
    assert traverse(free.points, Mover(mu=0.1, v0=1.0, normal="gravity")).speed_m_s.max() > 11.8
    a = robust_lattice_line(t, xy(t, (0, 0)), xy(t, (9, 11)), m, 0.1, 0.25, options=SearchOptions(neighbours=16))
    b = robust_lattice_line(t, xy(t, (0, 0)), xy(t, (9, 11)), m, 0.1, 0.25,
                            options=SearchOptions(neighbours=16, heuristic=False))
    assert a.time_s == pytest.approx(b.time_s, rel=1e-9)
    assert a.stats["labels_settled"] <= b.stats["labels_settled"]
    assert a.stats["exact"] and a.stats["label_cap"] is None
    assert a.time_s > free.time_s
    check_line_at_three(a, m, 0.1, 0.25)
    # an energy resolution of 1 % of the limit squared: fewer labels, a robust line, no faster
    c = robust_lattice_line(t, xy(t, (0, 0)), xy(t, (9, 11)), m, 0.1, 0.25, resolution=0.01,
                            options=SearchOptions(neighbours=16))
    assert c.time_s >= a.time_s * (1 - 1e-12) and not c.stats["exact"]
    assert c.stats["labels_settled"] < a.stats["labels_settled"]
    check_line_at_three(c, m, 0.1, 0.25)
    # a cap of one label per state without a speed limit: robust, no faster than exact
    free_m = Mover(mu=0.15, v0=1.0, normal="gravity")
    d = robust_lattice_line(t, xy(t, (0, 0)), xy(t, (9, 11)), free_m, 0.1, 0.25, options=SearchOptions(label_cap=1))
    assert d.time_s >= free.time_s * (1 - 1e-12)
    assert d.stats["label_cap"] == 1 and d.stats["exact"] == (d.stats["labels_capped"] == 0)
    check_line_at_three(d, free_m, 0.1, 0.25)


# --------------------------------------------------------------------------- compact state, reasons, options

def corridor_dem(seed=3, rows=12, cols=14):
    """A rough slope, a diagonal corridor of keep-out outside it and a few holes inside."""
    rng = np.random.default_rng(seed)
    z = random_dem(seed, rows, cols, noise=0.3, tilt=0.45)
    r, c = np.mgrid[0:rows, 0:cols]
    keep = np.abs(r * (cols - 1) - c * (rows - 1)) / math.hypot(rows - 1, cols - 1) > 3.0
    keep |= rng.random((rows, cols)) < 0.08
    keep[0, 0] = keep[-1, -1] = False
    return z, keep


@pytest.mark.parametrize("case", ["plain", "speed", "turn", "cap", "resolution"])
def test_robust_compact_state_equals_full_window_state(case):
    # Reference: the full-window layout (per-state arrays and the LO floor sized for
    # every cell of the window, index = flat index: the layout before the compact
    # state).  Same labels in the same order: same counters, same chain, same energies.
    from fallway.lattice.search import _Problem
    from fallway.params import Limits

    z, keep = corridor_dem()
    t = terrain_of(z)
    vmax = {"speed": 14.3, "resolution": 14.3}.get(case)  # binds: the free optimum reaches 14.44 m/s at LO
    m = Mover(mu=0.15, v0=1.0, max_speed=vmax, normal="gravity")
    limits = Limits(max_step_turn_deg=50.0) if case == "turn" else None
    prob = _Problem(t, m, 16, limits, keep)
    start, end = 0, z.size - 1
    kw = dict(heuristic=True, energy_tol=None, max_labels=None, label_cap=2 if case == "cap" else None,
              resolution=0.01 if case == "resolution" else 0.0)
    out = []
    for compact in (True, False):
        res = prob.run_robust(start, end, 0.1, 0.3, compact=compact, **kw)
        chain, p = [], res["final"]
        while p >= 0:
            chain.append((int(res["node"][p]), float(res["t"][p]), tuple(res["e"][p].tolist())))
            p = int(res["parent"][p])
        out.append((res, chain))
    (a, ca), (b, cb) = out
    assert a["stats"]["state_cells"] == int((~keep).sum()) < z.size == b["stats"]["state_cells"]
    assert a["status"] == b["status"] == 0 and len(ca) > 5
    assert np.array_equal(a["counters"], b["counters"])
    assert ca == cb
    assert not keep.ravel()[[n for n, _, _ in ca]].any()


def test_robust_reasons_keepout_corridor_and_label_budget():
    # Reference: scipy.ndimage.label (4-connectivity, what the 8-stencil's diagonal rule
    # makes of the free cells) shows the obstacle cuts start from end; the search
    # without it finds a robust line.
    from scipy import ndimage

    z = random_dem(0, 6, 8, noise=0.1, tilt=0.6)
    t = terrain_of(z)
    m = Mover(mu=0.15, v0=1.0, normal="gravity")
    s, e = xy(t, (0, 0)), xy(t, (5, 7))
    wall = np.zeros(z.shape, dtype=bool)
    wall[:, 4] = True
    assert ndimage.label(~wall)[0][0, 0] != ndimage.label(~wall)[0][5, 7]
    free = robust_lattice_line(t, s, e, m, 0.1, 0.25, options=SearchOptions(neighbours=8))
    with pytest.raises(NoFeasibleLine) as ei:
        robust_lattice_line(t, s, e, m, 0.1, 0.25, keepout=wall, options=SearchOptions(neighbours=8))
    assert ei.value.reason == "keepout"
    with pytest.raises(NoFeasibleLine) as ei:
        robust_lattice_line(t, s, e, m, 0.1, 0.25, allowed=~wall, options=SearchOptions(neighbours=8))
    assert ei.value.reason == "corridor"
    assert free.stats["labels_created"] > 10
    with pytest.raises(NoFeasibleLine) as ei:
        robust_lattice_line(t, s, e, m, 0.1, 0.25, options=SearchOptions(neighbours=8, max_labels=10))
    assert ei.value.reason == "label_budget" and "label budget of 10" in str(ei.value)


def test_robust_front_checks_its_options():
    # Reference: the keywords the front declares (inspect.signature)
    import inspect

    t = terrain_of(random_dem(1))
    m = Mover(mu=0.1, v0=0.5, normal="gravity")
    kws = [p.name for p in inspect.signature(robust_lattice_line).parameters.values() if p.kind == p.KEYWORD_ONLY]
    assert kws == ["limits", "keepout", "allowed", "options", "resolution"]
    with pytest.raises(ParameterError, match="robust_lattice_line: unknown option max_per_cell; allowed: limits, "
                                             "keepout, allowed, options, resolution"):
        robust_lattice_line(t, xy(t, (0, 0)), xy(t, (3, 4)), m, 0.05, 0.2, max_per_cell=1)
