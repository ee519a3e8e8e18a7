"""The certified optimality gap (fallway.lattice.gap) checked against exact references.

References (independent code in tests/test_lattice.py):
- ``pareto_ref``: a plain-Python exhaustive Pareto label search on the 8-neighbour lattice
  (label-correcting, FIFO, exact dominance, no tolerance, no heuristic), segment law from
  CHECKS.md "Motion along a line" (incline with Coulomb friction and drag);
- the same reference with a turn limit (the heading in the state), and chained through a
  via point (the whole Pareto set at the via point seeds the second leg);
- ``brute_force_capped``: exhaustive depth-first enumeration of simple paths under a speed
  cap (no dominance at all), for the speed cap, where "more energy is better" fails.

The relaxed searches run whenever the exact search does not finish on its first budget;
here that budget is set to one label so every case goes through them.  Each case checks
    exact <= reported lattice time <= exact * (1 + gap)   and   T_LB <= exact
(the definition of a certified gap; the tolerance 1e-9 relative covers rounding).
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
import textwrap

import numpy as np
import pytest
from test_lattice import FULL, MOVER, best_time, brute_force_capped, pareto_ref, rough_dem, terrain_of, xy

import fallway.lattice.search as lsearch
from fallway.errors import NoFeasibleLine
from fallway.lattice.gap import certify
from fallway.lattice.search import lattice_line
from fallway.params import Limits, SearchOptions
from fallway.physics import Mover

REL = 1e-9
SEEDS = range(12)
NO_DRAG = Mover(mu=0.25, drag=0.0, v0=1.0, normal="gravity")


@pytest.fixture(params=[2, 0], ids=["incumbent", "relaxed-lines-only"])
def relaxed_only(monkeypatch, request):
    """Make the exact first search give up at once, so the relaxed searches run; with and
    without the capped search's first line (without it every bound comes from the rounds)."""
    monkeypatch.setattr(lsearch, "EXACT_FIRST_LABELS", 1)
    monkeypatch.setattr(lsearch, "EXACT_FIRST_PER_STATE", 0)
    monkeypatch.setattr(lsearch, "INCUMBENT_LABEL_CAP", request.param)


def check_bracket(ln, exact, target):
    gap = ln.stats["optimality_gap"]
    lb = ln.stats["lower_bound_s"]
    assert gap is not None and gap <= target
    assert ln.time_s >= exact * (1 - REL)  # a lattice line is never faster than the optimum
    assert ln.time_s <= exact * (1 + gap) * (1 + REL)
    assert lb <= exact * (1 + REL)
    for rnd in ln.stats["gap_rounds"]:  # every relaxed optimum is a lower bound
        if rnd["lower_s"] is not None:
            assert rnd["lower_s"] <= exact * (1 + REL)
    # the reported time is the line's own exact time (the traverse of its points)
    assert ln.time_s == pytest.approx(ln.profile.travel_time_s, rel=1e-12)


@pytest.mark.parametrize("mover", [MOVER, NO_DRAG], ids=["drag", "no-drag"])
@pytest.mark.parametrize("target", [0.05, 1e-3])
def test_gap_brackets_the_exact_optimum(relaxed_only, mover, target):
    for seed in SEEDS:
        z = rough_dem(seed)
        t = terrain_of(z)
        exact = best_time(pareto_ref(z, 10.0, mover, (0, 0)), (6, 7))
        if not math.isfinite(exact):
            continue
        ln = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), mover, options=SearchOptions(neighbours=8, gap=target))
        check_bracket(ln, exact, target)


def test_gap_with_a_turn_limit(relaxed_only):
    for seed in SEEDS:
        z = rough_dem(seed)
        t = terrain_of(z)
        exact = best_time(pareto_ref(z, 10.0, MOVER, (0, 0), max_turn=45.0), (6, 7))
        if not math.isfinite(exact):
            continue
        ln = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, limits=Limits(max_step_turn_deg=45.0),
                          options=SearchOptions(neighbours=8, gap=0.01))
        check_bracket(ln, exact, 0.01)


@pytest.mark.parametrize("seed,turn", [(1, 45.0), (2, 90.0), (4, 135.0), (7, 90.0)])
def test_gap_with_the_corner_law(relaxed_only, seed, turn):
    # the full model with a turn limit: every vertex pays the sharp-corner law (exhaustive
    # Pareto reference over (cell, heading) with Euler-Eytelwein's law at each vertex)
    z = rough_dem(seed)
    t = terrain_of(z)
    exact = best_time(pareto_ref(z, 10.0, FULL, (0, 0), max_turn=turn, corners=True), (6, 7))
    ln = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), FULL, limits=Limits(max_step_turn_deg=turn),
                      options=SearchOptions(neighbours=8, gap=0.01))
    check_bracket(ln, exact, 0.01)


def test_gap_through_a_via_point(relaxed_only):
    for seed in SEEDS:
        z = rough_dem(seed)
        t = terrain_of(z)
        leg1 = pareto_ref(z, 10.0, MOVER, (0, 0))
        if (4, 2) not in leg1:
            continue
        seeds = [(a, b, None) for a, b, _ in leg1[(4, 2)]]
        exact = best_time(pareto_ref(z, 10.0, MOVER, (4, 2), seeds=seeds), (6, 7))
        if not math.isfinite(exact):
            continue
        ln = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, via=[xy(t, 4, 2)],
                          options=SearchOptions(neighbours=8, gap=0.01))
        check_bracket(ln, exact, 0.01)
        assert [4, 2] in ln.cells.tolist()


@pytest.mark.parametrize("seed", [3, 30, 1, 68, 23])
def test_gap_under_a_binding_speed_cap(seed):
    # A binding cap makes the exact kernel's dominance a heuristic; the gap must still
    # bracket the true capped optimum (exhaustive enumeration of simple paths).  The
    # lattice optimum may revisit a cell in principle; on these 4 x 5 grids the
    # enumeration's optimum is the reference.
    z = rough_dem(seed, rows=4, cols=5)
    t = terrain_of(z)
    free = lattice_line(t, xy(t, 0, 0), xy(t, 3, 4), MOVER, options=SearchOptions(neighbours=8, gap=0))
    vmax = float(np.nanmax(free.profile.speed_m_s))
    tight = Mover(mu=MOVER.mu, drag=MOVER.drag, v0=MOVER.v0, normal="gravity", max_speed=vmax * 0.9)
    exact = brute_force_capped(z, 10.0, tight, (0, 0), (3, 4))
    if not math.isfinite(exact):  # no simple line under the cap: none is reported either
        with pytest.raises(NoFeasibleLine):
            lattice_line(t, xy(t, 0, 0), xy(t, 3, 4), tight, options=SearchOptions(neighbours=8, gap=1e-3))
        return
    ln = lattice_line(t, xy(t, 0, 0), xy(t, 3, 4), tight, options=SearchOptions(neighbours=8, gap=1e-3))
    assert ln.stats["speed_cap_binding"] is True
    assert np.nanmax(ln.profile.speed_m_s) <= tight.max_speed * (1 + 1e-12)
    gap = ln.stats["optimality_gap"]
    assert ln.time_s >= exact * (1 - REL)
    assert ln.time_s <= exact * (1 + gap) * (1 + REL)
    assert ln.stats["lower_bound_s"] <= exact * (1 + REL)


def test_exact_search_reports_zero_and_a_label_cap_none():
    z = rough_dem(30)
    t = terrain_of(z)
    exact = best_time(pareto_ref(z, 10.0, MOVER, (0, 0)), (6, 7))
    ln = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, options=SearchOptions(neighbours=8))
    assert ln.stats["optimality_gap"] == 0.0 and ln.stats["exact"] is True
    assert ln.time_s == pytest.approx(exact, rel=1e-9)
    capped = lattice_line(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, options=SearchOptions(neighbours=8, label_cap=1))
    assert capped.stats["optimality_gap"] is None


def test_relaxed_labels_per_state_are_bounded(relaxed_only):
    # the relaxed search settles at most V²/δ + 1 labels per state (one per grid step plus
    # the ceiling): counted on a 30 x 30 rough slope
    z = rough_dem(7, rows=30, cols=30)
    t = terrain_of(z)
    prob = lsearch._Problem(t, MOVER, 8, None, np.zeros(z.shape, bool))
    v2_top = prob.v2_top(float(z[0, 0]))
    for frac in (1 / 16, 1 / 256):
        res = prob.run(0, [z.size - 1], heuristic=True, energy_tol=None, max_labels=None, v2_grid=frac * v2_top)
        assert res["stats"]["labels_settled"] <= z.size * (1 / frac + 1)


def test_certify_stops_on_the_budget_and_reports_it():
    calls = []

    def run(grid, key_max, max_labels):
        calls.append(max_labels)
        return ("ok", 9.0, 600, None) if len(calls) == 1 else ("budget", math.inf, max_labels, None)

    r = certify(run, lambda res: (10.0, "line"), target=1e-3, v2_top=1.0, budget=1000)
    assert r.exhausted and r.best == "line" and r.gap == pytest.approx(10.0 / 9.0 - 1.0)
    assert calls == [1000, 400]  # each search gets what is left of the budget


MEMORY_PROBE = textwrap.dedent('''
    import gc, json, math, sys
    import numpy as np
    from fallway.errors import NoFeasibleLine
    from fallway.params import SearchOptions
    from fallway.physics import Mover
    from fallway.routing import find_route
    from fallway.terrain import Terrain

    def status(key):
        with open("/proc/self/status") as fh:
            line = next(ln for ln in fh if ln.startswith(key + ":"))
        return int(line.split()[1]) * 1024

    n, limit = int(sys.argv[1]), int(sys.argv[2])
    cell = 10.0
    mover = Mover(mu=0.15, drag=0.002, v0=2.0, normal="gravity")
    small = Terrain.from_array(-3.0 * np.add.outer(np.arange(12.0), np.arange(12.0)), (cell, 0, 0, 0, -cell, 120.0))
    find_route(small, small.cell_center(0, 0), small.cell_center(11, 11), mover, refine=False, workable=False)
    # fractal relief by spectral synthesis (power spectrum ~ k^-3.6) on a plane falling 0.2
    # along the diagonal: friction 0.05 below the mean slope
    m = 1000
    rng = np.random.default_rng(7)
    k = np.hypot(np.fft.fftfreq(m)[:, None], np.fft.rfftfreq(m)[None, :])
    k[0, 0] = 1.0
    amp = k ** -1.8
    amp[0, 0] = 0.0
    f = np.fft.irfft2(amp * (rng.normal(size=amp.shape) + 1j * rng.normal(size=amp.shape)), s=(m, m))
    f *= 40.0 / (f.max() - f.min())
    r, c = np.mgrid[0:m, 0:m]
    z = np.ascontiguousarray((1000.0 + f - 0.2 * cell * (r + c) / math.sqrt(2.0))[:n, :n])
    del f, r, c, k, amp
    t = Terrain.from_array(z, (cell, 0, 0, 0, -cell, n * cell))
    q = n // 20
    a, b = t.cell_center(q, q), t.cell_center(n - 1 - q, n - 1 - q)
    gc.collect()
    with open("/proc/self/clear_refs", "w") as fh:  # reset the peak (VmHWM) to the current RSS
        fh.write("5")
    base = status("VmRSS")
    out = {}
    try:
        rt = find_route(t, a, b, mover, refine=False, workable=False, memory_limit_bytes=limit,
                        search=SearchOptions(neighbours=16, plan="full", heuristic=False))
        out = {"gap": rt.summary.optimality_gap, "labels": rt.summary.labels_created}
    except NoFeasibleLine as err:
        out = {"reason": err.reason}
    out["peak"] = status("VmHWM") - base
    print(json.dumps(out))
''')


@pytest.mark.slow
@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc/self (Linux)")
def test_memory_budget_holds_on_hard_terrain():
    # The route's label budget is cut to what the memory limit holds
    # (fallway.scale.fit_label_budget), so the measured peak of a hard search (fresh
    # interpreter; peak reset after the kernels are compiled, proc(5) clear_refs "5") stays
    # under the limit, while the search spends a good part of it: the budget binds.  The A*
    # bound is off (with it this hillside is solved exactly in a few thousand labels), so
    # the search fills its budget as it does on ground where the bound is weak.
    from fallway.scale import label_budget_bytes

    n, limit = 200, 400_000_000
    res = subprocess.run([sys.executable, "-c", MEMORY_PROBE, str(n), str(limit)], capture_output=True, text=True,
                         timeout=600, check=True)
    out = json.loads(res.stdout.strip().splitlines()[-1])
    assert out["peak"] <= limit
    assert out["peak"] >= 0.1 * limit  # the budget, not the terrain's ease, kept it there
    assert out.get("reason") in (None, "label_budget")
    assert label_budget_bytes(n * n, 1) < limit


def test_route_summary_reports_the_gap(relaxed_only):
    # the summary carries the search's bound: the relaxed searches' (checked against the
    # exhaustive Pareto reference), 0.0 for an exact search, None with a label cap
    from fallway.routing import find_route

    z = rough_dem(30)
    t = terrain_of(z)
    exact = best_time(pareto_ref(z, 10.0, MOVER, (0, 0)), (6, 7))
    kw = dict(refine=False, workable=False)
    rt = find_route(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, search=SearchOptions(neighbours=8, gap=0.01), **kw)
    gap = rt.summary.optimality_gap
    assert 0.0 <= gap <= 0.01
    assert exact * (1 - REL) <= rt.summary.lattice_model_time_s <= exact * (1 + gap) * (1 + REL)
    capped = find_route(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, search=SearchOptions(neighbours=8, label_cap=2), **kw)
    assert capped.summary.optimality_gap is None
    exact_run = find_route(t, xy(t, 0, 0), xy(t, 6, 7), MOVER, search=SearchOptions(neighbours=8, gap=0), **kw)
    assert exact_run.summary.optimality_gap == 0.0
