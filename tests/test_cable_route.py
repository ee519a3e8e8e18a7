"""find_route with a cable line: the layout comes back as the usual Route.

References: the route's time is the layout's own chain of span runs re-timed here with
:func:`fallway.physics.traverse` span by span (the project's motion model on the same
samples); the supports stand on the ground surface (Terrain.sample)."""

import math

import numpy as np
import pytest
from affine import Affine

from fallway.cable import CableSpec
from fallway.errors import ParameterError
from fallway.params import Limits, LineSpec
from fallway.physics import Mover, traverse
from fallway.routing import find_route
from fallway.terrain import Terrain


@pytest.fixture(scope="module")
def slope():
    cols = np.arange(80)
    return Terrain.from_array(np.tile(100.0 - 1.0 * cols, (8, 1)), Affine(5, 0, 0, 0, -5, 40))


def test_cable_route_summary_and_layout(slope):
    spec = CableSpec(station_step_m=50)
    r = find_route(slope, (10, 20), (310, 20), Mover(mu=0.01), line=LineSpec("cable", cable=spec))
    s = r.summary
    assert s.line_kind == "cable" and s.feasible and s.search_plan == "cable"
    assert s.cable["support_count"] == len(s.cable["supports"]) - 2 == r.cable.support_count
    assert r.line_spec.clearance_m == spec.clearance_m
    # supports stand on the ground surface, their tops on the loaded path
    for sup in r.cable.supports:
        assert sup.ground_z_m == pytest.approx(float(slope.sample(sup.x, sup.y)), abs=1e-9)
        k = int(np.argmin(np.hypot(r.line[:, 0] - sup.x, r.line[:, 1] - sup.y)))
        assert r.line[k, 2] == pytest.approx(sup.top_z_m, abs=1e-9)
    # the route's time: each span re-timed with traverse, entered at the speed the last delivered
    v, total = 0.0, 0.0
    for a, b in zip(r.cable.supports, r.cable.supports[1:]):
        seg = r.line[(r.line[:, 0] >= a.x - 1e-9) & (r.line[:, 0] <= b.x + 1e-9)]
        p = traverse(seg, Mover(mu=0.01, v0=v))
        v, total = p.exit_speed_m_s, total + p.travel_time_s
    assert s.travel_time_s == pytest.approx(total, rel=1e-12)
    assert s.exit_speed_m_s == pytest.approx(v, rel=1e-12)
    # kinetic energy of the 5 kN carrier (mass P/g) at the discharge, in kJ
    assert s.cable["exit_energy_kj"] == pytest.approx(5.0 / 9.80665 * v * v / 2.0, rel=1e-12)
    assert "brake" in s.caution and "qualified engineer" in s.caution


def test_cable_route_refuses_what_does_not_apply(slope):
    line = LineSpec("cable", cable=CableSpec(station_step_m=50))
    with pytest.raises(ParameterError, match="do not apply to a cable line"):
        find_route(slope, (10, 20), (310, 20), Mover(), line=line, limits=Limits(max_grade=0.5))
    with pytest.raises(ParameterError, match="not available for cable lines"):
        find_route(slope, (10, 20), (310, 20), Mover(), line=line, mu_range=(0.0, 0.1))
    with pytest.raises(ParameterError, match="for a line of kind 'cable'"):
        LineSpec("raised", cable=CableSpec())
