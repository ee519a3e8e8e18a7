"""Supports placed by search, against brute-force enumeration and independent dense checks.

References: every support set of a small profile enumerated, each layout checked and
timed here span by span (the cable theorem's loaded path from :class:`Span`, the ground
surface, the rope's slopes over each saddle, the carrier's run chained with speed carried
across supports): the search must find the best of them under both objectives.  The
ridge case checks every span of the found layout at 0.1 m spacing, ten times denser than
the search samples.
"""

import dataclasses
import itertools
import math

import numpy as np
import pytest
from affine import Affine

from fallway.cable import CableSpec, Span, place_supports, run_span
from fallway.errors import NoFeasibleLine
from fallway.physics import Mover
from fallway.terrain import Terrain

CELL = 5.0


def _strip(profile) -> Terrain:
    """A DEM whose rows all carry ``profile`` (x east along the columns)."""
    return Terrain.from_array(np.tile(np.asarray(profile, float), (8, 1)), Affine(CELL, 0, 0, 0, -CELL, 8 * CELL))


def _rough(seed: int, n: int = 60, fall: float = 0.25) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return 120 - fall * CELL * np.arange(n) + np.convolve(rng.normal(0, 3, n), np.ones(5) / 5, mode="same")


Y = 20.0


def _brute_force(terrain, x0, x1, spec: CableSpec, mover: Mover):
    """Every layout: each subset of the intermediate sites, each height at each; returns
    (supports, time) of every feasible layout."""
    n_int = int(round((x1 - x0) / spec.station_step_m)) - 1
    sites = [x0 + (k + 1) * spec.station_step_m for k in range(n_int)]
    lo, hi = spec.clearance_m
    H, P = spec.cable_tension_kn * 1e3, spec.carrier_load_kn * 1e3
    out = []
    for r in range(n_int + 1):
        for chosen in itertools.combinations(sites, r):
            xs = [x0, *chosen, x1]
            if any(b - a > spec.max_span_m + 1e-9 for a, b in zip(xs, xs[1:])):
                continue
            for hs in itertools.product(spec.support_heights_m, repeat=r):
                heights = [spec.start_height_m, *hs, spec.end_height_m]
                tops = [float(terrain.sample(x, Y)) + h for x, h in zip(xs, heights)]
                spans, ok = [], True
                for a, b, za, zb in zip(xs, xs[1:], tops, tops[1:]):
                    sp = Span(b - a, za, zb, H, P, spec.cable_weight_n_m)
                    d = np.linspace(0.0, b - a, int(round((b - a) / spec.sample_m)) + 1)
                    clr = sp.loaded_z(d) - terrain.sample(a + d, np.full_like(d, Y))
                    if clr.min() < lo - 1e-9 or clr.max() > hi + 1e-9:
                        ok = False
                        break
                    spans.append((sp, d, a))
                if not ok:
                    continue
                for (s1, _, _), (s2, _, _) in zip(spans, spans[1:]):   # the rope over each saddle
                    a_in, a_out = math.atan(s1.end_slopes[1]), math.atan(s2.end_slopes[0])
                    worst = max(math.atan(s1.end_slopes[1] + P / H) - a_out, a_in - math.atan(s2.end_slopes[0] - P / H))
                    if not (a_in > a_out and math.degrees(worst) <= spec.max_break_over_deg + 1e-9):
                        ok = False
                        break
                if not ok:
                    continue
                v, t = mover.v0, 0.0
                for sp, d, a in spans:
                    run = run_span(np.column_stack([a + d, np.full_like(d, Y), sp.loaded_z(d)]), mover, v)
                    if not run.feasible:
                        ok = False
                        break
                    v, t = run.exit_speed_m_s, t + run.time_s
                if ok:
                    out.append((tuple(zip(xs, heights)), t))
    return out


SPEC = CableSpec(start_height_m=6, end_height_m=6, support_height_m=(4, 8), height_step_m=2, max_span_m=120,
                 clearance_m=(1.5, 10), station_step_m=40, sample_m=1.0, cable_tension_kn=30, carrier_load_kn=4,
                 cable_weight_n_m=15)


@pytest.mark.parametrize("seed, changes", [(3, {}), (5, {"cable_tension_kn": 45, "max_break_over_deg": 12})])
def test_placement_matches_brute_force(seed, changes):
    terrain = _strip(_rough(seed))
    spec = dataclasses.replace(SPEC, **changes)
    mover = Mover(mu=0.02, drag=0.001)
    x0, x1 = 12.5, 252.5
    layouts = _brute_force(terrain, x0, x1, spec, mover)
    assert layouts, "the case must have feasible layouts"
    fastest = min(layouts, key=lambda lt: lt[1])
    fewest = min(layouts, key=lambda lt: (len(lt[0]), lt[1]))
    for objective, want in (("time", fastest), ("supports", fewest)):
        lay = place_supports(terrain, [(x0, Y), (x1, Y)], dataclasses.replace(spec, objective=objective), mover)
        got = tuple((s.x, s.height_m) for s in lay.supports)
        np.testing.assert_allclose(got, want[0], atol=1e-9)
        assert lay.travel_time_s == pytest.approx(want[1], rel=1e-12)
        assert lay.exact
    print(len(layouts), fastest, fewest)


def _ridge_profile(height_m=20.0):
    x = CELL * np.arange(64) + CELL / 2
    return 150.0 - 0.2 * x + height_m * np.exp(-(((x - 160.0) / 35.0) ** 2)), x


def test_ridge_gets_a_support_and_every_span_clears_the_band():
    z, _ = _ridge_profile()
    terrain = _strip(z)
    spec = CableSpec(start_height_m=8, end_height_m=8, support_height_m=(4, 12), height_step_m=2, max_span_m=150,
                     clearance_m=(1.5, 14), station_step_m=10, cable_tension_kn=40, carrier_load_kn=4,
                     cable_weight_n_m=15)
    x0, x1 = 12.5, 302.5
    # the ridge blocks the straight cable: the chord between the end tops runs into it
    xs = np.linspace(x0, x1, 600)
    g = terrain.sample(xs, np.full_like(xs, Y))
    chord = g[0] + 8 + (g[-1] + 8 - g[0] - 8) * (xs - x0) / (x1 - x0)
    assert (chord < g).any()
    ridge = xs[chord < g]
    lay = place_supports(terrain, [(x0, Y), (x1, Y)], spec, Mover(mu=0.02))
    inner = [s.x for s in lay.supports[1:-1]]
    assert any(ridge.min() <= x <= ridge.max() for x in inner), (inner, ridge.min(), ridge.max())
    # independent dense check of every span, 0.1 m apart
    H, P = spec.cable_tension_kn * 1e3, spec.carrier_load_kn * 1e3
    lo, hi = spec.clearance_m
    for a, b in zip(lay.supports, lay.supports[1:]):
        assert b.x - a.x <= spec.max_span_m + 1e-9
        assert spec.support_height_m[0] - 1e-9 <= b.height_m or b is lay.supports[-1]
        sp = Span(b.x - a.x, a.top_z_m, b.top_z_m, H, P, spec.cable_weight_n_m)
        d = np.linspace(0.0, b.x - a.x, int((b.x - a.x) / 0.1) + 1)
        clr = sp.loaded_z(d) - terrain.sample(a.x + d, np.full_like(d, Y))
        # 1 cm: what the search's 1 m sampling can miss between samples on this smooth ground
        assert clr.min() >= lo - 0.01 and clr.max() <= hi + 0.01, (a, b, clr.min(), clr.max())
        assert sp.unloaded_z(d).min() >= (sp.loaded_z(d)).min()
    for s1, s2 in zip(lay.spans, lay.spans[1:]):
        assert s1.exit_speed_m_s == s2.entry_speed_m_s   # speed carried across each support
    assert lay.travel_time_s == pytest.approx(sum(s.time_s for s in lay.spans), rel=1e-12)


def test_no_layout_names_the_site_and_what_to_change():
    z, _ = _ridge_profile(28.0)
    terrain = _strip(z)
    spec = CableSpec(start_height_m=8, end_height_m=8, support_height_m=(4, 12), height_step_m=2, max_span_m=150,
                     clearance_m=(1.5, 14), station_step_m=10, cable_tension_kn=40, carrier_load_kn=4,
                     cable_weight_n_m=15)
    with pytest.raises(NoFeasibleLine, match=r"from the site at station \d+ m no span can be made: .*try ") as exc:
        place_supports(terrain, [(12.5, Y), (302.5, Y)], spec, Mover(mu=0.02))
    assert exc.value.reason == "limits"
    assert "taller supports than 12 m" in str(exc.value)
    assert "\n" not in str(exc.value)


def test_tension_named_as_workable_is_enough():
    # a level plain: at 15 kN a 100 m span of a 4 kN carrier sags 6.67 m + 1.25 m below 8 m tops: too low
    terrain = _strip(np.full(40, 50.0))
    spec = CableSpec(start_height_m=8, end_height_m=8, support_height_m=(8, 8), max_span_m=100,
                     clearance_m=(2.0, 14), station_step_m=100, cable_tension_kn=15, carrier_load_kn=4,
                     cable_weight_n_m=15)
    with pytest.raises(NoFeasibleLine, match=r"tension of at least ([\d.]+) kN") as exc:
        place_supports(terrain, [(12.5, Y), (112.5, Y)], spec, Mover(v0=3.0))
    t_kn = float(__import__("re").search(r"tension of at least ([\d.]+) kN", str(exc.value)).group(1))
    # hand computation: (P/L + q/2) (L/2)² / H = 8 - 2 = 6 m of room  ->  H = (40 + 7.5) 2500 / 6 N = 19.79 kN
    need = (4000 / 100 + 15 / 2) * 50 * 50 / 6.0 / 1e3
    assert t_kn == pytest.approx(math.ceil(need * 10) / 10)
    lay = place_supports(terrain, [(12.5, Y), (112.5, Y)], dataclasses.replace(spec, cable_tension_kn=t_kn),
                         Mover(v0=3.0))
    assert lay.spans[0].min_clearance_m >= 2.0


def test_angle_station_carries_a_support():
    terrain = Terrain.from_array(np.add.outer(np.zeros(50), 200 - 1.0 * np.arange(50)),
                                 Affine(CELL, 0, 0, 0, -CELL, 50 * CELL))
    spec = CableSpec(station_step_m=20, max_span_m=200, max_break_over_deg=45)
    via = (122.5, 200.0)
    lay = place_supports(terrain, [(12.5, 100.0), via, (232.5, 120.0)], spec, Mover(mu=0.02))
    assert any(s.x == pytest.approx(via[0]) and s.y == pytest.approx(via[1]) for s in lay.supports[1:-1])


def test_speed_resolution_is_flagged_and_close():
    # reference: the exact search (itself checked against brute force above)
    terrain = _strip(_rough(5, n=90))
    spec = dataclasses.replace(SPEC, cable_tension_kn=45, max_break_over_deg=12, station_step_m=20, max_span_m=140)
    mover = Mover(mu=0.02, drag=0.001)
    ends = [(12.5, Y), (392.5, Y)]
    exact = place_supports(terrain, ends, spec, mover)
    approx = place_supports(terrain, ends, dataclasses.replace(spec, speed_resolution_m_s=0.5), mover)
    assert exact.exact and exact.stats["resolution_cuts"] == 0
    assert approx.stats["labels"] < exact.stats["labels"]
    assert approx.exact == (approx.stats["resolution_cuts"] == 0)
    assert approx.travel_time_s >= exact.travel_time_s - 1e-12
    assert approx.travel_time_s <= exact.travel_time_s * 1.02
