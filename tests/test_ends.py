"""Exact end points (fallway.lattice.ends): the line starts and ends at the given (x, y).

References: the bowl z = a r² is a quadratic, which the interpolating bicubic spline
reproduces exactly (a degree-3 spline interpolant is exact on polynomials of degree <= 3,
de Boor, *A Practical Guide to Splines*), and scipy's RectBivariateSpline(s=0) is the
independent evaluation of the smooth surface (as tests/test_terrain.py); the
frictionless lattice with static edge times against scipy.sparse.csgraph.dijkstra on the
same graph built here (CHECKS.md, "Search"), edge times from the closed-form segment law
t = 2 s / (v_a + v_b) (DESIGN §3, k = 0).
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
import scipy.sparse as sp
from affine import Affine
from scipy.interpolate import RectBivariateSpline
from scipy.sparse.csgraph import dijkstra

from fallway.errors import InputWarning
from fallway.lattice.search import lattice_line, reach
from fallway.lattice.stencil import make_stencil, touched_cells
from fallway.params import SearchOptions
from fallway.physics import Mover
from fallway.routing import find_route
from fallway.terrain import Terrain

G = 9.80665


def bowl(cell=75.0, n=20, a=1.0e-3):
    """A paraboloid bowl z = a r² (centre of the grid), 75 m cells: steep at the rim."""
    rr, cc = np.mgrid[0:n, 0:n].astype(float)
    xc = yc = n * cell / 2.0
    x = (cc + 0.5) * cell
    y = n * cell - (rr + 0.5) * cell
    z = a * ((x - xc) ** 2 + (y - yc) ** 2)
    t = Terrain.from_array(z, Affine(cell, 0, 0.0, 0, -cell, n * cell))
    return t, (lambda px, py: a * ((px - xc) ** 2 + (py - yc) ** 2))


def test_coarse_dem_line_starts_and_ends_at_the_given_points():
    t, z_of = bowl()
    # points off the cell centres, where snapping changes the heights by tens of metres
    start, end = (118.0, 1381.0), (1030.0, 690.0)
    zs, ze = z_of(*start), z_of(*end)
    snapped = [t.z[t.nearest_cell(*p)] for p in (start, end)]
    assert abs((snapped[0] - snapped[1]) - (zs - ze)) > 5.0  # the premise: snapping would move the drop > 5 m
    # reference heights: the bowl formula (a quadratic: the bicubic interpolant is exact) and
    # scipy's RectBivariateSpline(s=0) over the grid
    rows, cols = t.shape
    spline = RectBivariateSpline(np.arange(rows, dtype=float), np.arange(cols, dtype=float), t.z, s=0)
    ref = [float(spline.ev(*t.rowcol(*p))) for p in (start, end)]
    np.testing.assert_allclose(ref, [zs, ze], rtol=1e-9)
    mover = Mover(mu=0.1, normal="gravity")
    for refine in (False, True):
        r = find_route(t, start, end, mover, refine=refine, search=SearchOptions(neighbours=16))
        line = r.line
        assert tuple(line[0, :2]) == start and tuple(line[-1, :2]) == end  # exactly, not snapped
        np.testing.assert_allclose([line[0, 2], line[-1, 2]], ref, rtol=1e-9, atol=1e-9)
        assert r.summary.drop_m == pytest.approx(zs - ze, rel=1e-9)
        assert r.summary.start_moved_m == 0.0 and r.summary.end_moved_m == 0.0
        assert r.summary.start_given_xy == list(start) and r.summary.end_given_xy == list(end)
        assert r.summary.start_moved_why is None
    # the lattice line is one the search timed: its own figure is the gravity-normal traverse
    lat = r.lattice
    assert lat.time_s == pytest.approx(lat.profile.travel_time_s, rel=1e-9)


def test_point_in_keepout_moves_to_nearest_free_centre_with_message():
    t, _ = bowl()
    keep = np.zeros(t.shape, dtype=bool)
    keep[2:6, 1:5] = True
    start, end = (160.0, 1230.0), (1030.0, 690.0)
    r0, c0 = t.nearest_cell(*start)
    assert keep[r0, c0]
    # reference: brute force over the free cells' centres
    rr, cc = np.nonzero(~keep)
    cx, cy = t.cell_center(rr, cc)
    d = np.hypot(cx - start[0], cy - start[1])
    k = int(np.argmin(d))
    with pytest.warns(InputWarning, match=r"start \(160\.0, 1230\.0\) lies in a keep-out area: the line starts "
                                          rf"{d[k]:.1f} m away, at \({cx[k]:.1f}, {cy[k]:.1f}\)"):
        r = find_route(t, start, end, Mover(mu=0.1, normal="gravity"), keepout=keep, refine=False,
                       search=SearchOptions(neighbours=16))
    assert tuple(r.line[0, :2]) == (cx[k], cy[k])
    assert r.summary.start_moved_m == pytest.approx(d[k], rel=1e-12)
    assert r.summary.start_given_xy == list(start)
    assert "keep-out" in r.summary.start_moved_why
    assert r.summary.end_moved_m == 0.0


def test_point_on_nodata_moves_and_reach_starts_exactly():
    t, _ = bowl()
    z = t.z.copy()
    z[10, 3] = np.nan
    tn = Terrain.from_array(z, t.transform)
    given = tuple(float(v) for v in tn.cell_center(10, 3))
    ln = lattice_line(tn, (given[0] + 5.0, given[1]), (750.0, 700.0), Mover(mu=0.05),
                      options=SearchOptions(neighbours=8))
    assert ln.stats["start_moved_why"] == "lies on a nodata cell"
    assert ln.stats["start_moved_m"] == pytest.approx(70.0)  # 75 m to the next centre east, 5 m given offset
    # a reach from a point off the centres starts there
    rm = reach(t, (118.0, 1381.0), Mover(mu=0.1), options=SearchOptions(neighbours=8))
    assert rm.start == (118.0, 1381.0) and rm.stats["start_moved_m"] == 0.0


def _law_time(P, v2_start, z0):
    """Frictionless, drag-free time along polyline P (closed form per segment), or inf on a stall."""
    v2 = v2_start + 2 * G * (z0 - P[:, 2])
    if np.any(v2 <= 0.0):  # a stall, or an edge from a cell no line reaches
        return math.inf
    v = np.sqrt(v2)
    s = np.linalg.norm(np.diff(P, axis=0), axis=1)
    return float(np.sum(2.0 * s / (v[:-1] + v[1:])))


def _virtual_polyline(t, spline, p, cell_rc):
    """The test's own virtual edge: split where it crosses the lines joining cell centres,
    heights on RectBivariateSpline(s=0)."""
    pr, pc = (float(v) for v in t.rowcol(*p))
    R, C = cell_rc
    us = set()
    for a, b in ((pr, R), (pc, C)):
        for k in range(math.floor(min(a, b)) + 1, math.ceil(max(a, b))):
            if b != a:
                us.add((k - a) / (b - a))
    us = sorted(u for u in us if 1e-9 < u < 1 - 1e-9)
    rr = np.array([pr] + [pr + u * (R - pr) for u in us] + [R])
    cc = np.array([pc] + [pc + u * (C - pc) for u in us] + [C])
    x, y = t.cell_center(rr, cc)
    z = spline.ev(rr, cc)
    z[-1] = t.z[R, C]
    return np.column_stack([x, y, z])


def test_virtual_ends_frictionless_equals_scipy_dijkstra():
    # reference: scipy.sparse.csgraph.dijkstra on the 8-neighbour lattice plus a source
    # and a target node joined to the 9 cells around each end point (CHECKS.md, "Search")
    rng = np.random.default_rng(3)
    rows, cols = 14, 18
    rr, cc = np.mgrid[0:rows, 0:cols].astype(float)
    z = 40.0 - 1.2 * cc - 0.4 * rr + 0.3 * rng.standard_normal((rows, cols))
    t = Terrain.from_array(z, Affine(2.0, 0, 0.0, 0, -2.0, 2.0 * rows))
    spline = RectBivariateSpline(np.arange(rows, dtype=float), np.arange(cols, dtype=float), z, s=0)
    mover = Mover(mu=0.0, drag=0.0, v0=3.0)
    stencil = make_stencil(8)
    for start, end in (((1.3, 20.9), (33.1, 6.2)), ((2.7, 5.1), (30.6, 22.4))):
        zP = float(spline.ev(*t.rowcol(*start)))
        v2s = mover.v0 ** 2
        n = rows * cols
        S, T = n, n + 1
        src, dst, w = [], [], []
        for r in range(rows):
            for c in range(cols):
                for dr, dc in stencil.offsets:
                    r2, c2 = r + dr, c + dc
                    if 0 <= r2 < rows and 0 <= c2 < cols:
                        P = np.array([[*t.cell_center(r, c), z[r, c]], [*t.cell_center(r2, c2), z[r2, c2]]])
                        tt = _law_time(P, v2s, zP)
                        if math.isfinite(tt):
                            src.append(r * cols + c)
                            dst.append(r2 * cols + c2)
                            w.append(tt)
        for p, node in ((start, S), (end, T)):
            r0, c0 = t.nearest_cell(*p)
            for dr, dc in [(0, 0)] + [tuple(o) for o in stencil.offsets]:
                R, C = r0 + dr, c0 + dc
                pr, pc = t.rowcol(*p)
                if not (0 <= R < rows and 0 <= C < cols) or any(
                        not (0 <= i < rows and 0 <= j < cols) for i, j in touched_cells(pr, pc, R, C)):
                    continue
                P = _virtual_polyline(t, spline, p, (R, C))
                if node == T:
                    P = P[::-1]
                tt = _law_time(P, v2s, zP)
                if math.isfinite(tt):
                    a, b = (S, R * cols + C) if node == S else (R * cols + C, T)
                    src.append(a)
                    dst.append(b)
                    w.append(tt)
        graph = sp.csr_matrix((w, (src, dst)), shape=(n + 2, n + 2))
        ref = dijkstra(graph, indices=S)[T]
        ln = lattice_line(t, start, end, mover, options=SearchOptions(neighbours=8))
        assert ln.time_s == pytest.approx(ref, rel=1e-9)
        assert tuple(ln.points[0, :2]) == start and tuple(ln.points[-1, :2]) == end
        assert ln.profile.travel_time_s == pytest.approx(ref, rel=1e-9)


def test_moved_point_message_in_lonlat(tmp_path):
    # the message gives the point in the system it was given in: pyproj's inverse of the
    # terrain's UTM zone is the reference for the coordinates
    from pyproj import Transformer

    t0, _ = bowl()
    t = Terrain.from_array(t0.z, Affine(75.0, 0, 500000.0, 0, -75.0, 5001500.0), "EPSG:32633")
    keep = np.zeros(t.shape, dtype=bool)
    keep[2:6, 1:5] = True
    start = (500160.0, 5001230.0)
    lon, lat = Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True).transform(*start)
    with pytest.warns(InputWarning) as rec:
        find_route(t, start, (501030.0, 5000690.0), Mover(mu=0.1, normal="gravity"), keepout=keep, refine=False,
                   search=SearchOptions(neighbours=8), points_crs="EPSG:4326")
    msg = str(rec[0].message)
    got = [float(v) for v in re.findall(r"lon (-?\d+\.\d+), lat (-?\d+\.\d+)", msg)[0]]
    assert got == pytest.approx([lon, lat], abs=1e-6)
