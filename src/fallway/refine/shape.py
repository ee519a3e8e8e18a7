"""Shapes of refinement lines: resampling between levels, rounded corners, vertex density.

A line is refined coarse to fine; between levels its vertices are re-distributed so that
each segment takes a similar share of a blend of time and length (:func:`monitor`: short
segments where the line is slow, near a start from rest), then the next level keeps the
previous optimum's vertex density (:func:`refine_density`).  With a bend-radius limit the
start line's corners are rounded by arcs (:func:`fillet_plan`) and lines are resampled on
a cubic spline (:func:`smooth_at`): a linear resampling puts vertices on chords, and three
of them near a chord's end make an arbitrarily tight circumradius.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["resample", "resample_smooth", "smooth_at", "fillet_plan", "densify", "refine_density", "monitor"]


def resample(P: np.ndarray, n: int, weights: np.ndarray | None = None) -> np.ndarray:
    """n points along the polyline P, equidistributing ``weights`` (per segment; default length)."""
    seg = np.linalg.norm(np.diff(P, axis=0), axis=1)
    w = seg if weights is None else np.asarray(weights, float)
    keep = seg > 0
    if not keep.all():
        idx = np.concatenate([[0], np.nonzero(keep)[0] + 1])
        P = P[idx]
        w = w[keep]
        seg = seg[keep]
    if len(P) < 2:
        return np.repeat(P[:1], n, axis=0)
    cum = np.concatenate([[0.0], np.cumsum(w)])
    tgt = np.linspace(0.0, cum[-1], n)
    j = np.clip(np.searchsorted(cum, tgt, side="right") - 1, 0, len(P) - 2)
    frac = np.where(w[j] > 0, (tgt - cum[j]) / np.where(w[j] > 0, w[j], 1.0), 0.0)
    frac = np.clip(frac, 0.0, 1.0)
    out = P[j] + (P[j + 1] - P[j]) * frac[:, None]
    out[0] = P[0]
    out[-1] = P[-1]
    return out


def smooth_at(P: np.ndarray, s_new: np.ndarray) -> np.ndarray:
    """Points at arc lengths ``s_new`` of the C² cubic spline through the vertices of P
    (parametrised by chord length): resampling that keeps bends round (a linear
    resampling puts vertices on chords, and three of them near a chord's end make an
    arbitrarily tight circumradius)."""
    from scipy.interpolate import CubicSpline

    seg = np.linalg.norm(np.diff(P, axis=0), axis=1)
    keep = np.concatenate([[True], seg > 1e-9])
    Q = P[keep]
    if len(Q) < 3:
        cum = np.concatenate([[0.0], np.cumsum(np.linalg.norm(np.diff(Q, axis=0), axis=1))])
        return np.column_stack([np.interp(s_new, cum, Q[:, c]) for c in range(P.shape[1])])
    cum = np.concatenate([[0.0], np.cumsum(np.linalg.norm(np.diff(Q, axis=0), axis=1))])
    out = CubicSpline(cum, Q, axis=0, bc_type="natural")(np.clip(s_new, 0.0, cum[-1]))
    out[0] = P[0]
    out[-1] = P[-1]
    return out


def resample_smooth(P: np.ndarray, n: int, weights: np.ndarray | None = None) -> np.ndarray:
    """As :func:`resample`, the points taken on the cubic spline through P."""
    seg = np.linalg.norm(np.diff(P, axis=0), axis=1)
    w = seg if weights is None else np.asarray(weights, float)
    cum_s = np.concatenate([[0.0], np.cumsum(seg)])
    cum_w = np.concatenate([[0.0], np.cumsum(w)])
    if cum_w[-1] <= 0:
        return np.repeat(P[:1], n, axis=0)
    tgt = np.linspace(0.0, cum_w[-1], n)
    # arc length at each target: linear in weight within a segment (np.interp needs
    # increasing abscissae; segments of zero weight are skipped by it)
    s_new = np.interp(tgt, cum_w, cum_s)
    return smooth_at(P, np.maximum.accumulate(s_new))


def fillet_plan(xy: np.ndarray, radius_m: float, cell: float):
    """A plan polyline through the corners of ``xy`` rounded by circular arcs.

    The line is first simplified (Douglas–Peucker, tolerance half a cell: a lattice
    staircase becomes its few real corners), then each corner of turning angle φ is
    replaced by the arc of radius ``radius_m`` tangent to both legs (tangent length
    R·tan(φ/2)).  Where two neighbouring corners need more than the leg between them,
    both tangent lengths shrink in proportion, and so does their radius.  Returns the
    densified plan points and the smallest arc radius achieved (inf when straight).
    """
    import shapely

    xy = np.asarray(xy, float)
    simp = np.asarray(shapely.simplify(shapely.LineString(xy), 0.5 * cell, preserve_topology=False).coords)
    if len(simp) < 2 or not (np.allclose(simp[0], xy[0]) and np.allclose(simp[-1], xy[-1])):
        simp = xy
    d = np.diff(simp, axis=0)
    L = np.hypot(d[:, 0], d[:, 1])
    ok = L > 1e-9
    simp = np.vstack([simp[:1], simp[1:][ok]])
    d = np.diff(simp, axis=0)
    L = np.hypot(d[:, 0], d[:, 1])
    step = 0.5 * cell
    if len(simp) < 3:
        return densify(simp, step), math.inf
    u = d / L[:, None]
    cross = u[:-1, 0] * u[1:, 1] - u[:-1, 1] * u[1:, 0]
    phi = np.arctan2(np.abs(cross), np.sum(u[:-1] * u[1:], axis=1))
    phi = np.minimum(phi, math.pi * 0.999)
    th = np.tan(0.5 * phi)
    want = radius_m * th
    nc = len(phi)
    demand = np.zeros(len(L))
    demand[:-1] += want  # corner c sits at vertex c + 1: it uses legs c and c + 1
    demand[1:] += want
    room = np.where(demand > 0, np.minimum(1.0, L / np.maximum(demand, 1e-300)), 1.0)
    tl = want * np.minimum(room[:-1], room[1:])
    with np.errstate(divide="ignore", invalid="ignore"):
        rad = np.where(th > 1e-9, tl / th, math.inf)
    pieces = [simp[:1]]
    for c in range(nc):
        B = simp[c + 1]
        if not (phi[c] > 1e-6 and tl[c] > 1e-9):
            pieces.append(densify(np.vstack([pieces[-1][-1:], B[None]]), step)[1:])
            continue
        T1 = B - u[c] * tl[c]
        T2 = B + u[c + 1] * tl[c]
        pieces.append(densify(np.vstack([pieces[-1][-1:], T1[None]]), step)[1:])
        sgn = 1.0 if cross[c] > 0 else -1.0
        nrm = sgn * np.array([-u[c, 1], u[c, 0]])
        ctr = T1 + rad[c] * nrm
        a0 = math.atan2(T1[1] - ctr[1], T1[0] - ctr[0])
        m = int(min(2000, max(4, math.ceil(rad[c] * phi[c] / step), math.ceil(phi[c] / math.radians(2.0)))))
        ang = a0 + sgn * phi[c] * np.arange(1, m + 1) / m
        arc = ctr + rad[c] * np.column_stack([np.cos(ang), np.sin(ang)])
        arc[-1] = T2
        pieces.append(arc)
    pieces.append(densify(np.vstack([pieces[-1][-1:], simp[-1:]]), step)[1:])
    out = np.vstack(pieces)
    keep = np.concatenate([[True], np.hypot(*np.diff(out, axis=0).T) > 1e-9])
    out = out[keep]
    out[-1] = simp[-1]
    return out, float(np.min(rad)) if len(rad) else math.inf


def densify(xy: np.ndarray, step: float) -> np.ndarray:
    """Straight pieces of ``xy`` cut into parts no longer than ``step``."""
    out = [xy[:1]]
    for a, b in zip(xy[:-1], xy[1:]):
        k = max(1, int(math.ceil(float(np.hypot(*(b - a))) / step)))
        out.append(a + (b - a) * (np.arange(1, k + 1) / k)[:, None])
    return np.vstack(out)


def refine_density(P: np.ndarray, n: int, smooth: bool = False) -> np.ndarray:
    """n points along P keeping its vertex density (arc length is interpolated in index)."""
    from scipy.interpolate import PchipInterpolator

    seg = np.linalg.norm(np.diff(P, axis=0), axis=1)
    cum = np.concatenate([[0.0], np.cumsum(seg)])
    par = np.linspace(0.0, 1.0, len(P))
    s_new = PchipInterpolator(par, cum)(np.linspace(0.0, 1.0, n))
    s_new = np.maximum.accumulate(np.clip(s_new, 0.0, cum[-1]))
    if smooth:
        return smooth_at(P, s_new)
    j = np.clip(np.searchsorted(cum, s_new, side="right") - 1, 0, len(P) - 2)
    frac = np.where(seg[j] > 0, (s_new - cum[j]) / np.where(seg[j] > 0, seg[j], 1.0), 0.0)
    out = P[j] + (P[j + 1] - P[j]) * np.clip(frac, 0.0, 1.0)[:, None]
    out[0] = P[0]
    out[-1] = P[-1]
    return out


def monitor(P: np.ndarray, u: np.ndarray, blend: float) -> np.ndarray:
    """Per-segment weights: blend of the share of time and the share of length."""
    seg = np.linalg.norm(np.diff(P, axis=0), axis=1)
    v = np.sqrt(np.maximum(u, 0.0))
    vm = 0.5 * (v[:-1] + v[1:])
    t = seg / np.maximum(vm, 1e-3 * max(float(v.max()), 1e-9))
    return blend * t / max(t.sum(), 1e-300) + (1 - blend) * seg / max(seg.sum(), 1e-300)
