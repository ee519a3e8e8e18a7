"""Stencil geometry: offsets, break points, touched cells, metrication (CHECKS.md)."""

import math

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.sparse.csgraph import dijkstra

from fallway.errors import ParameterError
from fallway.lattice.stencil import make_stencil


@pytest.mark.parametrize("n", [8, 16, 32])
def test_offsets_are_primitive_symmetric_and_distinct(n):
    s = make_stencil(n)
    offs = {tuple(o) for o in s.offsets.tolist()}
    assert len(offs) == n
    for dr, dc in offs:
        assert math.gcd(dr, dc) == 1  # no edge passes through another centre
        assert (-dr, -dc) in offs
        assert (dc, dr) in offs


def test_bad_size():
    with pytest.raises(ParameterError, match="8, 16, 32"):
        make_stencil(12)


@pytest.mark.parametrize("n", [8, 16, 32])
def test_break_points_lie_on_grid_lines_and_match_bilinear(n):
    # Bilinear interpolation between cell centres (independent code here) at the break
    # point must equal the 2-centre weighted height the stencil records.
    rng = np.random.default_rng(1)
    z = rng.normal(size=(9, 9))

    def bilinear(r, c):
        r0, c0 = min(int(math.floor(r)), 7), min(int(math.floor(c)), 7)
        fr, fc = r - r0, c - c0
        return ((1 - fr) * (1 - fc) * z[r0, c0] + (1 - fr) * fc * z[r0, c0 + 1]
                + fr * (1 - fc) * z[r0 + 1, c0] + fr * fc * z[r0 + 1, c0 + 1])

    s = make_stencil(n)
    for k, (dr, dc) in enumerate(s.offsets.tolist()):
        pts = s.edge_points(k)
        # the number of grid lines crossed strictly between the ends
        assert len(pts) == max(abs(dr) - 1, 0) + max(abs(dc) - 1, 0)
        us = [p[0] for p in pts]
        assert us == sorted(us) and all(0 < u < 1 for u in us)
        for u, a, b, w in pts:
            r, c = 4 + u * dr, 4 + u * dc
            assert min(abs(r - round(r)), abs(c - round(c))) < 1e-12  # on a grid line
            zz = w * z[4 + a[0], 4 + a[1]] + (1 - w) * z[4 + b[0], 4 + b[1]]
            assert zz == pytest.approx(bilinear(r, c), abs=1e-12)
    if n == 8:
        assert int(s.break_start[-1]) == 0  # 8-neighbour edges are single segments


def test_touched_cells_against_dense_sampling():
    # Sample each edge densely; every sampled point's cell (and, at corners, its
    # neighbours) must be among the touched cells, and the end cells are included.
    s = make_stencil(32)
    for k, (dr, dc) in enumerate(s.offsets.tolist()):
        touched = {tuple(t) for t in s.touch[s.touch_start[k]:s.touch_start[k + 1]].tolist()}
        assert (0, 0) in touched and (dr, dc) in touched
        for u in np.linspace(0, 1, 2001):
            r, c = u * dr, u * dc
            assert (int(np.floor(r + 0.5)), int(np.floor(c + 0.5))) in touched
    diag = {tuple(t) for t in s.touch[s.touch_start[list(map(tuple, s.offsets.tolist())).index((1, 1))]:
                                       s.touch_start[list(map(tuple, s.offsets.tolist())).index((1, 1)) + 1]].tolist()}
    assert diag == {(0, 0), (0, 1), (1, 0), (1, 1)}  # no slipping between diagonal blockers


@pytest.mark.parametrize("n, expected", [(8, 1.0824), (16, 1.0275), (32, 1.0131)])
def test_metrication_formula(n, expected):
    # CHECKS.md "Lattice metrication": 1/cos(Δ/2) with Δ the widest direction gap.
    assert make_stencil(n).worst_metrication() == pytest.approx(expected, abs=5e-5)


@pytest.mark.parametrize("n", [8, 16, 32])
def test_metrication_by_shortest_paths(n):
    # Independent: scipy Dijkstra on a large open grid with Euclidean edge lengths; the
    # worst ratio of lattice distance to straight distance over far cells tends to the
    # formula from below (attained along the bisector of the widest gap).
    s = make_stencil(n)
    R = 60
    size = 2 * R + 1
    idx = np.arange(size * size).reshape(size, size)
    rows, cols, w = [], [], []
    for dr, dc in s.offsets.tolist():
        a = idx[max(0, -dr):size - max(0, dr), max(0, -dc):size - max(0, dc)]
        b = idx[max(0, dr):size - max(0, -dr) or None, max(0, dc):size - max(0, -dc) or None]
        rows.append(a.ravel())
        cols.append(b.ravel())
        w.append(np.full(a.size, math.hypot(dr, dc)))
    g = sp.csr_matrix((np.concatenate(w), (np.concatenate(rows), np.concatenate(cols))), shape=(size * size,) * 2)
    d = dijkstra(g, indices=idx[R, R]).reshape(size, size)
    rr, cc = np.mgrid[-R:R + 1, -R:R + 1]
    straight = np.hypot(rr, cc)
    far = straight > R / 2
    worst = float((d[far] / straight[far]).max())
    formula = s.worst_metrication()
    assert worst <= formula + 1e-12
    assert worst >= formula - 2e-3
