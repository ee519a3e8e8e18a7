"""The per-cell A* bound (fallway.lattice.bound) checked against exhaustive references.

References:
- ``pareto_ref`` (tests/test_lattice.py): a plain-Python exhaustive Pareto label search on
  the 8-neighbour lattice (label-correcting, FIFO, exact dominance, no heuristic), the
  segment law from CHECKS.md "Motion along a line" (incline, Coulomb friction, drag);
- the energy balance (CHECKS.md): frictionless and without drag, v² = v0² + 2 g (z0 - z)
  at every point a line reaches, whatever the path.

Checked, on seeded rough grids with and without drag:
- the energy ceiling U is at least the v² of every Pareto label at every cell (U bounds
  every feasible line's energy - what the consistency proof needs);
- the time to go H never exceeds the exact least time from the cell to the target when
  the cell is left with its highest possible energy U (so no label there can do better:
  the bound is admissible), and H is 0 at the target;
- U is the energy balance exactly on frictionless ground (16 neighbours, break points);
- the corridor plan's gap: exact <= its line's time <= exact (1 + gap), its whole-grid
  lower bound <= exact.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from test_lattice import MOVER, best_time, pareto_ref, rough_dem, terrain_of

from fallway.errors import NoFeasibleLine
from fallway.lattice.search import _Problem
from fallway.params import Limits, SearchOptions
from fallway.physics import Mover
from fallway.routing import find_route

REL = 1e-9
NO_DRAG = Mover(mu=0.25, drag=0.0, v0=1.0, normal="gravity")


def problem(z, mover, neighbours=8):
    t = terrain_of(z)
    return _Problem(t, mover, neighbours, Limits(), np.zeros(z.shape, dtype=bool))


@pytest.mark.parametrize("mover", [MOVER, NO_DRAG], ids=["drag", "no-drag"])
def test_energy_ceiling_bounds_every_pareto_label(mover):
    reached = 0
    for seed in range(12):
        z = rough_dem(seed)
        rows, cols = z.shape
        U, _ = problem(z, mover).cell_bound(0, [6 * cols + 7])
        sets = pareto_ref(z, 10.0, mover, (0, 0))
        for (r, c), labs in sets.items():
            top = max(lab[1] for lab in labs)
            assert top <= U[r, c] * (1 + REL) + 1e-12, (seed, r, c)
            reached += 1
        assert U[0, 0] >= mover.v0 ** 2
    assert reached > 100  # the check saw real label sets


@pytest.mark.parametrize("mover", [MOVER, NO_DRAG], ids=["drag", "no-drag"])
def test_time_to_go_never_exceeds_the_exact_remaining_time(mover):
    checked = 0
    for seed in range(12):
        z = rough_dem(seed)
        rows, cols = z.shape
        end = (6, 7)
        U, H = problem(z, mover).cell_bound(0, [end[0] * cols + end[1]])
        H = H[0]
        assert H[end] == 0.0
        for r in range(rows):
            for c in range(cols):
                if not np.isfinite(U[r, c]) or (r, c) == end:
                    continue
                # the fastest continuation of any label at (r, c): leave with the most
                # energy any line has there (time falls as the entry energy rises)
                seeds = [(0.0, float(U[r, c]), None)]
                exact = best_time(pareto_ref(z, 10.0, mover, (r, c), seeds=seeds), end)
                if math.isfinite(exact):
                    assert 0.0 < H[r, c] <= exact * (1 + REL), (seed, r, c, H[r, c], exact)
                    checked += 1
    assert checked > 20


@pytest.mark.parametrize("seed", range(4))
def test_energy_ceiling_is_the_energy_balance_without_losses(seed):
    # frictionless and without drag every line keeps v0² + 2 g (z0 - z) (energy balance);
    # the 16-neighbour stencil walks its edges through break points, which must not lose
    # or invent energy
    rng = np.random.default_rng(seed)
    r, c = np.mgrid[0:9, 0:10]
    z = 60.0 - 3.0 * r - 2.0 * c + rng.normal(scale=0.5, size=r.shape)
    mover = Mover(mu=0.0, drag=0.0, v0=2.0, normal="gravity")
    U, H = problem(z, mover, 16).cell_bound(0, [8 * 10 + 9])
    balance = mover.v0 ** 2 + 2.0 * mover.g * (z[0, 0] - z)
    ok = np.isfinite(U)
    assert ok.sum() > 40
    # U carries the rounding slack of the passes (1e-9 of the largest v² per sub-segment,
    # module notes "Rounding"): above the balance, by less than 1e-5 m²/s²
    assert np.all(U[ok] >= balance[ok] * (1 - 1e-12))
    np.testing.assert_allclose(U[ok], balance[ok], rtol=0, atol=1e-5)


@pytest.mark.parametrize("mover", [MOVER, NO_DRAG], ids=["drag", "no-drag"])
def test_corridor_gap_brackets_the_whole_grid_optimum(mover):
    # the corridor plan's line is a line of the whole lattice and its gap is measured
    # against a lower bound of the whole lattice's optimum, so on every grid:
    #   exact <= corridor line's time <= exact * (1 + gap)  and  lower bound <= exact,
    # exact from the exhaustive Pareto reference over the whole 8-neighbour lattice (one
    # corridor width, no widening)
    checked = 0
    for seed in range(6):
        rng = np.random.default_rng(100 + seed)
        r, c = np.mgrid[0:16, 0:16]
        z = 80.0 - 4.0 * r - 3.5 * c + rng.normal(scale=2.5, size=r.shape)
        t = terrain_of(z)
        exact = best_time(pareto_ref(z, 10.0, mover, (1, 1)), (14, 14))
        if not math.isfinite(exact):
            continue
        opts = SearchOptions(neighbours=8, plan="corridor", coarse_factor=2, corridor_m=15.0, max_widen=0)
        try:
            rt = find_route(t, t.cell_center(1, 1), t.cell_center(14, 14), mover, refine=False, workable=False,
                            search=opts)
        except NoFeasibleLine:  # e.g. the line breaks the default lift-off limit: nothing to bracket
            continue
        assert rt.summary.search_plan == "corridor" and rt.summary.corridor["coarse_factor"] == 2
        gap = rt.summary.optimality_gap
        lb = rt.summary.corridor["lower_bound_s"]
        assert gap is not None and lb is not None
        assert lb <= exact * (1 + REL)
        assert rt.lattice.time_s >= exact * (1 - REL)
        assert rt.lattice.time_s <= exact * (1 + gap) * (1 + REL)
        checked += 1
        if checked == 1:  # no gap asked (gap 0): the bound's pass is skipped, and the summary says so
            r0 = find_route(t, t.cell_center(1, 1), t.cell_center(14, 14), mover, refine=False, workable=False,
                            search=dataclasses.replace(opts, gap=None))
            assert r0.summary.optimality_gap is None and r0.summary.corridor["lower_bound_s"] is None
            assert "no gap asked" in r0.summary.corridor["lower_bound_note"]
            assert r0.lattice.time_s == rt.lattice.time_s
    assert checked >= 1


@pytest.mark.parametrize("cell", [10.0, 12.0])
def test_a_start_above_the_speed_limit_keeps_the_bounds_below_the_optimum(cell):
    # A mover entering at 15 m/s on level ground under a 3 m/s limit, drag k = 0.2 /m, no
    # friction: drag alone slows it (dv/dt = -k v², CHECKS "Motion along a line" with
    # mu = 0), v² = v0² exp(-2 k s), below the limit after 8 m; the speed limit is tested
    # at sub-segment ends, so the one straight edge to the next cell (10 or 12 m) is
    # feasible and the fastest (every other lattice line is longer): t = (exp(k L) - 1) /
    # (k v0), 2.130 s over 10 m.  The bounds must not take the limit as the speed of the
    # first metres.
    from fallway.lattice.search import lattice_line, lattice_lower_bound

    k, v0, cols = 0.2, 15.0, 2
    exact = math.expm1(k * cell) / (k * v0)
    t = terrain_of(np.full((2, cols), 30.0), cell)
    mover = Mover(mu=0.0, drag=k, v0=v0, normal="gravity", max_speed=3.0)
    a, b = t.cell_center(0, 0), t.cell_center(0, cols - 1)
    assert lattice_lower_bound(t, a, b, mover, neighbours=8) <= exact * (1 + REL)
    U, H = _Problem(t, mover, 8, Limits(), np.zeros((2, cols), dtype=bool)).cell_bound(0, [cols - 1])
    assert U[0, 0] >= v0 ** 2 and H[0][0, 0] <= exact * (1 + REL)
    # a route is judged at every vertex, its first included (traverse), so the search
    # itself refuses such a start at once, naming the speed limit
    with pytest.raises(NoFeasibleLine, match="above the speed limit") as err:
        lattice_line(t, a, b, mover, options=SearchOptions(neighbours=8))
    assert err.value.reason == "limits"
