"""Penalties of the refinement problem: keep-out and nodata distance fields, grade, bend radius.

Limits enter the objective as exterior quadratic penalties ``w (violation)²`` with a small
safety margin; they are verified on the result (:meth:`fallway.refine.problem.Problem.violations`).
Everything here is numpy, O(N) in the vertices.
"""

from __future__ import annotations

import math

import numpy as np

from ..keepout import Keepout

__all__ = ["DistanceField", "keepout_status", "field_penalty", "grade_penalty", "curvature", "radius_penalty"]


class DistanceField:
    """Signed distance (m, positive outside) to keep-out polygons or to nodata.

    Parameters
    ----------
    keepout : Keepout or shapely geometry, optional
        The no-go areas (a :class:`~fallway.keepout.Keepout` is taken to ``crs`` first).
    crs : optional
        The terrain's CRS.
    nodata_terrain : Terrain, optional
        Instead of areas: the distance to the terrain's nodata cells (dilated by one cell),
        bilinear on the grid.
    """

    def __init__(self, keepout=None, crs=None, nodata_terrain=None) -> None:
        self.geometry = None
        self._sd = None
        self._grid = None
        if isinstance(keepout, Keepout):
            if crs is not None:
                keepout = keepout.in_crs(crs)
            self._sd = keepout.signed_distance
            self.geometry = keepout.geometry
        elif keepout is not None:
            import shapely

            geom = keepout
            shapely.prepare(geom)
            boundary = geom.boundary
            shapely.prepare(boundary)

            def sd(x, y, geom=geom, boundary=boundary):
                x = np.asarray(x, float)
                y = np.asarray(y, float)
                dist = shapely.distance(boundary, shapely.points(x, y))
                return np.where(shapely.contains_xy(geom, x, y), -dist, dist)

            self._sd = sd
            self.geometry = geom
        if nodata_terrain is not None:
            from scipy.ndimage import binary_dilation, distance_transform_edt

            t = nodata_terrain
            bad = binary_dilation(~np.isfinite(t.z), structure=np.ones((3, 3), bool))
            dist = distance_transform_edt(~bad) * t.cell_size
            inner = distance_transform_edt(bad) * t.cell_size
            self._grid = (t, np.where(bad, -inner, dist))

    def __call__(self, x, y) -> np.ndarray:
        if self._sd is not None:
            return np.asarray(self._sd(x, y), float)
        from scipy.ndimage import map_coordinates

        t, field_ = self._grid
        r, c = t.rowcol(x, y)
        return map_coordinates(field_, [np.atleast_1d(r), np.atleast_1d(c)], order=1, mode="nearest")

    def grad(self, x, y, h):
        """Central differences of the field with step ``h`` (m)."""
        fx = (self(x + h, y) - self(x - h, y)) / (2 * h)
        fy = (self(x, y + h) - self(x, y - h)) / (2 * h)
        return fx, fy


def keepout_status(P, fld: DistanceField, margin: float) -> str:
    """``"violated"``, ``"active"`` or ``"inactive"``: vertices by signed distance,
    segments by shapely intersection with the areas (or 9 samples each without one)."""
    dist = fld(P[:, 0], P[:, 1])
    if np.any(dist < 0):
        return "violated"
    geom = fld.geometry
    if geom is not None:
        import shapely

        segs = shapely.linestrings(np.stack([P[:-1, :2], P[1:, :2]], axis=1))
        if np.any(shapely.intersects(geom, segs) & ~shapely.touches(geom, segs)):
            return "violated"
    else:
        fr = np.linspace(0.0, 1.0, 9)
        X = (P[:-1, None, :2] * (1 - fr)[None, :, None] + P[1:, None, :2] * fr[None, :, None]).reshape(-1, 2)
        if np.any(fld(X[:, 0], X[:, 1]) < 0):
            return "violated"
    return "active" if float(np.min(dist)) < 2.0 * margin else "inactive"


def field_penalty(P, fld: DistanceField, w: float, margin: float, h: float):
    """Exterior penalty w·(margin - d)² at vertices and at segment quarter points.

    Returns ``(value, grad (N, 3), smallest distance)``.
    """
    n = len(P)
    fr = np.array([0.0, 0.25, 0.5, 0.75])
    i0 = np.concatenate([np.repeat(np.arange(n - 1), fr.size), [n - 1]])
    f = np.concatenate([np.tile(fr, n - 1), [0.0]])
    i1 = np.minimum(i0 + 1, n - 1)
    X = P[i0, :2] * (1 - f)[:, None] + P[i1, :2] * f[:, None]
    dist = fld(X[:, 0], X[:, 1])
    viol = margin - dist
    act = viol > 0
    grad = np.zeros_like(P)
    if not act.any():
        return 0.0, grad, float(np.min(dist))
    val = w * float(np.sum(viol[act] ** 2))
    gx, gy = fld.grad(X[act, 0], X[act, 1], h)
    c = -2.0 * w * viol[act]
    for comp, gcomp in ((0, gx), (1, gy)):
        np.add.at(grad[:, comp], i0[act], c * gcomp * (1 - f[act]))
        np.add.at(grad[:, comp], i1[act], c * gcomp * f[act])
    return val, grad, float(np.min(dist))


def grade_penalty(P, gmin: float, gmax: float, w: float, margin: float, eps_plan: float):
    """Exterior penalty on the descent grade window, per segment; ``(value, grad)``."""
    d = np.diff(P, axis=0)
    plan = np.sqrt(d[:, 0] ** 2 + d[:, 1] ** 2 + eps_plan ** 2)
    drop = -d[:, 2]
    val = 0.0
    gd = np.zeros_like(d)
    for lim, sign in ((gmax, 1.0), (gmin, -1.0)):
        if not math.isfinite(lim):
            continue
        tgt = lim - sign * margin
        viol = sign * (drop - tgt * plan)
        act = viol > 0
        if not act.any():
            continue
        val += w * float(np.sum(viol[act] ** 2))
        c = 2.0 * w * viol * act * sign
        gd[:, 0] += c * (-tgt * d[:, 0] / plan)
        gd[:, 1] += c * (-tgt * d[:, 1] / plan)
        gd[:, 2] += c * (-1.0)
    grad = np.zeros_like(P)
    grad[1:] += gd
    grad[:-1] -= gd
    return val, grad


def curvature(A, B, C) -> np.ndarray:
    """1 / circumradius of the triangles (A, B, C), rows of (M, 3) arrays: the penalty's own
    measure, ``2 |AB x BC| / (|AB| |BC| |CA|)`` (0 for collinear or repeated points).

    Examples
    --------
    >>> A, B, C = np.array([[10.0, 0, 0]]), np.array([[0.0, 10, 0]]), np.array([[-10.0, 0, 0]])
    >>> print(f"{1 / curvature(A, B, C)[0]:.6f}")
    10.000000
    """
    a = B - A
    b = C - B
    num = 2.0 * np.linalg.norm(np.cross(a, b), axis=1)
    den = np.linalg.norm(a, axis=1) * np.linalg.norm(b, axis=1) * np.linalg.norm(C - A, axis=1)
    return num / np.maximum(den, 1e-300)


def radius_penalty(P, r_min, w: float, margin: float, radius_grad: bool = False):
    """Exterior penalty on the 3D curvature of consecutive vertex triples above
    ``(1 - margin) / r_min``; gradient by central differences on the triples near it.
    ``r_min`` is one radius (m) for every triple or one per triple (``len(P) - 2``; 0 where
    the vertex is free).  Returns ``(value, grad)``; with ``radius_grad`` also the
    derivative of the value with respect to each triple's radius (``len(P) - 2``, 0 where
    the radius is infinite): a caller whose radii depend on the vertices chains it on.

    Examples
    --------
    A right angle of 10 m legs (circumradius 7.07 m) against a 10 m radius: the violation
    ``kappa r - (1 - margin)`` and its derivative in r, ``2 w viol kappa``.

    >>> P = np.array([[0.0, 0, 0], [10.0, 0, 0], [10.0, 10, 0]])
    >>> v, g, dr = radius_penalty(P, 10.0, 1.0, 0.0, radius_grad=True)
    >>> viol = 10.0 / (10 / 2 ** 0.5) - 1.0
    >>> bool(np.isclose(v, viol ** 2)), bool(np.isclose(dr[0], 2 * viol / (10 / 2 ** 0.5)))
    (True, True)
    """
    if len(P) < 3:
        return (0.0, np.zeros_like(P)) + ((np.zeros(0),) if radius_grad else ())
    r = np.broadcast_to(np.asarray(r_min, dtype=float), (len(P) - 2,))
    kap = curvature(P[:-2], P[1:-1], P[2:])
    grad = np.zeros_like(P)
    dr = np.zeros(len(P) - 2)
    done = (lambda val: (val, grad, dr)) if radius_grad else (lambda val: (val, grad))
    with np.errstate(divide="ignore"):
        band = ((1.0 - margin) - 0.05) / r  # inf where the vertex is free, 0 where it must be straight
    act = np.nonzero(kap > band)[0]
    if act.size == 0:
        return done(0.0)
    # an infinite radius (the vertex must stay straight) is penalised as a very large one
    ra = np.minimum(r[act], 1e9)
    lim = (1.0 - margin) / ra
    viol = np.maximum(kap[act] - lim, 0.0) * ra
    val = w * float(np.sum(viol ** 2))
    if val == 0.0:
        return done(val)
    # viol = kappa r - (1 - margin) where positive: d(w viol²)/dr = 2 w viol kappa
    dr[act] = np.where(r[act] < 1e9, 2.0 * w * viol * kap[act], 0.0)
    h = 1e-7 * np.maximum(1.0, ra)[:, None]
    tri = [P[act].copy(), P[act + 1].copy(), P[act + 2].copy()]
    for role in range(3):
        for c in range(3):
            tp = [q.copy() for q in tri]
            tm = [q.copy() for q in tri]
            tp[role][:, c] += h[:, 0]
            tm[role][:, c] -= h[:, 0]
            vp = np.maximum(curvature(*tp) - lim, 0.0) * ra
            vm = np.maximum(curvature(*tm) - lim, 0.0) * ra
            np.add.at(grad[:, c], act + role, w * (vp ** 2 - vm ** 2) / (2 * h[:, 0]))
    return done(val)
