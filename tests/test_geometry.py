"""Geometry of polylines: repeated vertices, resampling, bend radius (elementary geometry)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fallway.geometry import circumradii, drop_repeats, min_radius_m, raised_heights_m, resample_plan


def test_min_radius_circumradius():
    # points on a circle of radius 40 m: every circumradius is 40 (elementary geometry)
    a = np.linspace(0, 1.2, 9)
    pts = np.column_stack([40 * np.cos(a), 40 * np.sin(a), np.zeros_like(a)])
    assert min_radius_m(pts) == pytest.approx(40.0, rel=1e-9)
    assert min_radius_m(np.array([[0, 0, 0], [1, 1, 0], [2, 2, 0.0]])) == math.inf


def test_corner_and_reversal():
    # two legs of length L meeting at a corner of turn phi: R = L / (2 sin(phi / 2))
    L, phi = 10.0, math.radians(60.0)
    pts = [(0.0, 0.0), (L, 0.0), (L + L * math.cos(phi), L * math.sin(phi))]
    assert circumradii(pts)[0] == pytest.approx(L / (2 * math.sin(phi / 2)), rel=1e-12)
    assert circumradii([(0, 0), (5, 0), (1, 0)])[0] == 0.0  # doubles back: no radius at all


def test_drop_repeats_and_resample():
    assert drop_repeats([(0, 0), (0, 0), (3, 4)]).tolist() == [[0.0, 0.0], [3.0, 4.0]]
    r = resample_plan([(0, 0), (3, 4)], 1.0)
    assert len(r) == 6 and np.allclose(np.diff(r, axis=0), [0.6, 0.8])


def test_raised_heights_in_band():
    h = raised_heights_m([(0, 0), (50, 0), (100, 0)], 20.0, 0.0, (5.0, 30.0))
    assert h.tolist() == [20.0, 10.0, 5.0]


def test_min_radius_in_plan_and_in_3d_on_a_tilted_circle():
    # vertices on a circle of radius 10 m in a plane tilted 30° about the x axis: the 3D
    # circumradius of any three is 10 m (a circle through three of its points); in plan
    # the circle is an ellipse with semi-axes 10 and 10 cos 30°, whose smallest radius
    # of curvature is b²/a = 10 cos² 30° = 7.5 m, at the ends of the major axis
    phi = np.linspace(0.0, np.pi, 721)
    tilt = np.radians(30.0)
    pts = np.column_stack([10 * np.cos(phi), 10 * np.sin(phi) * np.cos(tilt), 10 * np.sin(phi) * np.sin(tilt)])
    assert min_radius_m(pts, dims=3) == pytest.approx(10.0, rel=1e-9)
    assert min_radius_m(pts) == pytest.approx(7.5, rel=1e-3)
