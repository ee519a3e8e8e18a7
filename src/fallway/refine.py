"""Continuous refinement: the discrete Euler–Lagrange optimum of a descent line.

The lattice line is resampled and its interior vertices move continuously until the
travel time is stationary, ∂T/∂xᵢ = 0 — the discrete Euler–Lagrange equations of the
time functional on a polyline.  The time of a polyline with the gravity-normal model is
the chain of closed-form straight segments (:func:`fallway._segment.segment_law`)::

    T = Σ t_j(u_j, g_j),    u_{j+1} = F_j(u_j, g_j),    u = v²,

g_j the segment geometry (drop, plan length, length).  Its gradient comes from one reverse
(adjoint) pass, O(N)::

    λ_j = ∂t_j/∂u_j + λ_{j+1} ∂F_j/∂u_j,    ∂T/∂g_j = ∂t_j/∂g_j + λ_{j+1} ∂F_j/∂g_j,

with the local partials of each segment derived in closed form (see ``_chain``).  The
optimiser is scipy's bounded quasi-Newton L-BFGS-B; the bounds keep vertices inside the
DEM and raised heights inside the clearance band, limits enter as exterior quadratic
penalties with a small safety margin and are verified on the result.

Vertex placement is part of the problem: the plan positions are free, so vertices slide
along the line, and the line is refined coarse to fine with the vertices re-distributed
between levels so that each segment takes a similar share of a blend of time and length
(short segments where the line is slow, near a start from rest).

Minimum bend radius: the start line's corners are rounded by arcs of the radius
(``_fillet_plan``), resampling between levels goes through a cubic spline (a linear
resampling puts vertices on chords, and three of them near a chord's end make an
arbitrarily tight circumradius), and triples the exterior penalty leaves slightly too
tight are smoothed locally (``_repair_radius``).

Full normal-force model (``Mover(normal="full")``): after the gravity-normal optimum a
polish minimises the full model's time itself, ``_full_chain``: the same segment
recursion as ``fallway._traverse.traverse_kernel`` forward, and its adjoint in reverse,
each segment step depending on four vertices (its ends and, through the discrete
curvature at its ends, their outer neighbours); the local partials of one step are
central differences in the segment's frame, the chain is exact.  The polish moves
vertices normal to the line only (free tangential motion lets the optimiser bunch
vertices so that the discrete curvature undercharges a bend), and smooths the kink of
the friction of a vertical free fall (plan length sqrt(plan² + eps²), eps lowered to 0).
"""

from __future__ import annotations

import math

import dataclasses
import warnings
from dataclasses import dataclass, field

import numpy as np
from numba import njit
from scipy.optimize import minimize

from ._segment import segment_law
from ._surface import new_work, surface_point
from ._traverse import window_step
from .errors import FallwayError, ParameterError, RefinementWarning
from .params import Limits
from .physics import Mover, Profile
from .results import RefineResult

__all__ = ["refine_line", "RefineResult"]

_LINES = ("ground", "raised")
#: L-BFGS-B memory, relative reduction of the objective that ends a level, and the
#: stationarity test on the travel time: stop when over the last ``_WINDOW`` iterations
#: the time fell by less than ``_STAT_TOL`` relatively.
_MAXCOR = 10
_FTOL = 1e-11
_WINDOW = 25
_STAT_TOL = 1e-9
_STAT_TOL_COARSE = 1e-7
#: iterations between restarts of L-BFGS-B with a fresh preconditioner
_CHUNK = 100
#: full-model polish: stationarity tolerance (relative fall of the time over _WINDOW
#: iterations) and the iteration budget of a level, in vertex-iterations
_POLISH_TOL = 1e-8
_POLISH_BUDGET = 20_000
#: relative gain of the polish on the coarsest level below which only the finest line is
#: polished (the gravity optimum is then already close to the full-model one)
_POLISH_GAIN = 1e-3


# ---------------------------------------------------------------------------------------
# small BLAS calls inside L-BFGS-B are many times slower with several OpenBLAS threads on a
# busy machine; hold OpenBLAS to one thread while optimising (what threadpoolctl does)


class _OneBlasThread:
    _libs = None

    @classmethod
    def _find(cls):
        if cls._libs is None:
            import ctypes
            import re

            libs = []
            try:
                with open("/proc/self/maps") as fh:
                    paths = sorted(set(re.findall(r"(/\S*openblas\S*\.so\S*)", fh.read())))
            except OSError:
                paths = []
            for path in paths:
                try:
                    lib = ctypes.CDLL(path)
                except OSError:
                    continue
                for stem in ("scipy_openblas", "openblas"):
                    for suffix in ("64_", ""):
                        get = getattr(lib, f"{stem}_get_num_threads{suffix}", None)
                        put = getattr(lib, f"{stem}_set_num_threads{suffix}", None)
                        if get is not None and put is not None:
                            libs.append((get, put))
                            break
                    else:
                        continue
                    break
            cls._libs = libs
        return cls._libs

    def __enter__(self):
        self._saved = []
        for get, put in self._find():
            self._saved.append((put, get()))
            put(1)
        return self

    def __exit__(self, *exc):
        for put, n in self._saved:
            put(n)
        return False


# ---------------------------------------------------------------------------------------
# the chain of segments and its reverse pass


@njit(cache=True, nogil=True)
def _chain(P, u0, g, mu, k, eps_plan, u_floor, w_pen, u_max, u_stall):
    """Travel time, penalty and gradient of a polyline (gravity-normal model).

    Parameters: vertices ``P`` (N, 3), squared start speed ``u0``; ``eps_plan`` smooths
    the plan length sqrt(d² + eps²) so vertical segments stay differentiable;
    ``u_floor``: squared speeds below it are clamped and penalised (stall extension);
    ``u_max`` (<= 0: none) and ``u_stall`` (<= 0: none): speed window penalties.

    Returns ``(time_s, penalty, grad (N, 3), u (N,))``; grad is of time + penalty.
    """
    n = P.shape[0]
    m = n - 1
    u = np.empty(n)
    u[0] = u0
    du_dpen = np.zeros(n)
    seg = np.zeros((m, 14))  # dx dy dz plan s a  du_u du_a du_s  dt_u dt_a dt_s  clamped dpen_raw
    T = 0.0
    pen = 0.0
    eps2 = eps_plan * eps_plan
    for j in range(m):
        dx = P[j + 1, 0] - P[j, 0]
        dy = P[j + 1, 1] - P[j, 1]
        dz = P[j + 1, 2] - P[j, 2]
        d2 = dx * dx + dy * dy
        s = math.sqrt(d2 + dz * dz)
        ui = u[j]
        if s <= 1e-12:
            u[j + 1] = ui
            seg[j, 6] = 1.0
            continue
        plan = math.sqrt(d2 + eps2)
        drop = -dz
        a = g * (drop - mu * plan) / s
        ks = k * s
        if ks < 1e-12:
            u_raw = ui + 2.0 * a * s
            fu = 1.0
            fa = 2.0 * s
            fs = 2.0 * a
            half_q = s
        else:
            em = math.expm1(-2.0 * ks)
            E = 1.0 + em
            u_raw = ui * E - (a / k) * em
            fu = E
            fa = -em / k
            fs = 2.0 * E * (a - k * ui)
            half_q = -em / (2.0 * k)
        va = math.sqrt(ui) if ui > 0.0 else 0.0
        seg[j, 0] = dx
        seg[j, 1] = dy
        seg[j, 2] = dz
        seg[j, 3] = plan
        seg[j, 4] = s
        seg[j, 5] = a
        seg[j, 6] = fu
        seg[j, 7] = fa
        seg[j, 8] = fs
        if u_raw < u_floor:
            # stalled: clamp the exit speed and penalise the shortfall (continuous extension)
            d = u_floor - u_raw
            pen += w_pen * d * d
            vb = math.sqrt(u_floor)
            t = 2.0 * s / (va + vb)
            seg[j, 9] = -t / (va + vb) / (2.0 * va) if va > 0.0 else 0.0
            seg[j, 10] = 0.0
            seg[j, 11] = 2.0 / (va + vb)
            seg[j, 12] = 1.0
            seg[j, 13] = -2.0 * w_pen * d
            u[j + 1] = u_floor
        else:
            vb = math.sqrt(u_raw)
            t = segment_law(ui, drop, plan, s, g, mu, k, 0.0)[1]
            if not math.isfinite(t):
                t = 2.0 * s / (va + vb)
            seg[j, 11] = 1.0 / max(vb, 1e-300)
            if va > 0.0:
                seg[j, 9] = -half_q / (va * vb * (va + vb))
            if ks < 1e-12:
                seg[j, 10] = -2.0 * s * s / ((va + vb) * (va + vb) * vb)
            elif abs(a) * s > 1e-7 * (ui + abs(a) * s):
                # homogeneity t(λu, λa) = t(u, a)/√λ:  u ∂t/∂u + a ∂t/∂a = -t/2
                seg[j, 10] = (-0.5 * t - ui * seg[j, 9]) / a
            else:
                h = 1e-6 * (ui / s + abs(a)) + 1e-12
                dd = h * s / g
                tp = segment_law(ui, drop + dd, plan, s, g, mu, k, 0.0)[1]
                tm = segment_law(ui, drop - dd, plan, s, g, mu, k, 0.0)[1]
                seg[j, 10] = (tp - tm) / (2.0 * h)
            u[j + 1] = u_raw
        T += t
        un = u[j + 1]
        if u_max > 0.0 and un > u_max:
            pen += w_pen * (un - u_max) ** 2
            du_dpen[j + 1] += 2.0 * w_pen * (un - u_max)
        if u_stall > 0.0 and un < u_stall and un < ui:
            pen += w_pen * (u_stall - un) ** 2
            du_dpen[j + 1] -= 2.0 * w_pen * (u_stall - un)
    grad = np.zeros((n, 3))
    lam = du_dpen[n - 1]
    for j in range(m - 1, -1, -1):
        s = seg[j, 4]
        if s <= 1e-12:
            lam = lam + du_dpen[j]
            continue
        dx = seg[j, 0]
        dy = seg[j, 1]
        dz = seg[j, 2]
        plan = seg[j, 3]
        a = seg[j, 5]
        gu_raw = seg[j, 13] if seg[j, 12] > 0.0 else lam
        Gu = seg[j, 9] + gu_raw * seg[j, 6]
        Ga = seg[j, 10] + gu_raw * seg[j, 7]
        Gs = seg[j, 11] + gu_raw * seg[j, 8]
        g_drop = Ga * g / s
        g_plan = -Ga * g * mu / s
        g_s = Gs - Ga * a / s
        gx = g_plan * dx / plan + g_s * dx / s
        gy = g_plan * dy / plan + g_s * dy / s
        gz = -g_drop + g_s * dz / s
        grad[j + 1, 0] += gx
        grad[j + 1, 1] += gy
        grad[j + 1, 2] += gz
        grad[j, 0] -= gx
        grad[j, 1] -= gy
        grad[j, 2] -= gz
        lam = Gu + du_dpen[j]
    return T, pen, grad, u


# ---------------------------------------------------------------------------------------
# the full normal-force model (fallway._traverse) and its reverse pass


@njit(cache=True, nogil=True)
def _full_seg(u, Q, has_a, has_b, g, mu, k, eps_plan, u_floor, w_stall):
    """One segment of the full model from its four-vertex window
    (:func:`fallway._traverse.window_step`), with a continuous extension past a stall
    for the optimiser: the exit speed clamped to ``u_floor``, the time of a constant
    deceleration, and a penalty on the part of the segment not reached, so a line search
    can step back from it.  Returns ``(v2_out, time_s, stall_at_m)``."""
    un, t, at = window_step(u, Q, has_a, has_b, g, mu, k, eps_plan, 0.0)
    if at >= 0.0 and u_floor > 0.0:
        dx = Q[2, 0] - Q[1, 0]
        dy = Q[2, 1] - Q[1, 1]
        dz = Q[2, 2] - Q[1, 2]
        s = math.sqrt(dx * dx + dy * dy + dz * dz)
        va = math.sqrt(u) if u > 0.0 else 0.0
        miss = (s - min(at, s)) / s
        return u_floor, 2.0 * s / (va + math.sqrt(u_floor)) + w_stall * miss * miss, at
    return un, t, at


@njit(cache=True, nogil=True, inline="always")
def _gather(P, j, Q):
    """Rows of ``Q``: vertices j-1 .. j+2 relative to vertex j (rows past an end untouched)."""
    n = P.shape[0]
    for r in range(4):
        i = j - 1 + r
        if 0 <= i < n:
            for c in range(3):
                Q[r, c] = P[i, c] - P[j, c]


@njit(cache=True, nogil=True)
def _full_chain(P, u0, g, mu, k, w_pen, u_max, u_stall, want_grad, eps_plan=0.0, u_floor=0.0, w_stall=0.0):
    """Full-model travel time of the polyline P (N, 3), speed penalties and the gradient.

    Forward: the segment recursion of ``traverse_kernel`` (full model).  Reverse: the
    adjoint of that recursion, ``λ_j = ∂t_j/∂u_j + λ_{j+1} ∂u_{j+1}/∂u_j`` and
    ``∂T/∂P += ∂t_j/∂P + λ_{j+1} ∂u_{j+1}/∂P`` over the four vertices each segment
    depends on (its ends and, through the curvature at its ends, their outer
    neighbours); the local partials of one segment step are central differences in
    the segment's own frame (steps of 1e-6 of its length / of v²), the chain itself is
    exact.  ``eps_plan`` > 0 smooths the plan length, sqrt(plan² + eps²), as in
    :func:`_chain` (the friction of a vertical segment is otherwise a kink).  Returns
    ``(time_s, penalty, grad (N, 3), u (N,), ok)``; ``ok`` False when
    the mover stalls (time inf).
    """
    n = P.shape[0]
    m = n - 1
    u = np.zeros(n)
    u[0] = u0
    grad = np.zeros((n, 3))
    du_dpen = np.zeros(n)
    T = 0.0
    pen = 0.0
    Q = np.zeros((4, 3))
    stalled = False
    for j in range(m):
        has_a = j >= 1
        has_b = j + 1 <= n - 2
        _gather(P, j, Q)
        un, t, at = _full_seg(u[j], Q, has_a, has_b, g, mu, k, eps_plan, u_floor, w_stall)
        if not math.isfinite(t):
            return math.inf, 0.0, grad, u, False
        if at >= 0.0:
            stalled = True
        u[j + 1] = un
        T += t
        if u_max > 0.0 and un > u_max:
            pen += w_pen * (un - u_max) ** 2
            du_dpen[j + 1] += 2.0 * w_pen * (un - u_max)
        if u_stall > 0.0 and un < u_stall and un < u[j]:
            pen += w_pen * (u_stall - un) ** 2
            du_dpen[j + 1] -= 2.0 * w_pen * (u_stall - un)
    if not want_grad:
        return T, pen, grad, u, not stalled
    lam = du_dpen[n - 1]
    Qp = np.zeros((4, 3))
    for j in range(m - 1, -1, -1):
        has_a = j >= 1
        has_b = j + 1 <= n - 2
        _gather(P, j, Q)
        s = math.sqrt((Q[2, 0] - Q[1, 0]) ** 2 + (Q[2, 1] - Q[1, 1]) ** 2 + (Q[2, 2] - Q[1, 2]) ** 2)
        if s <= 1e-12:
            lam = lam + du_dpen[j]
            continue
        h = 1e-6 * s
        for r in range(4):
            if (r == 0 and not has_a) or (r == 3 and not has_b):
                continue
            for c in range(3):
                for q in range(4):
                    for cc in range(3):
                        Qp[q, cc] = Q[q, cc]
                Qp[r, c] = Q[r, c] + h
                up, tp, ap = _full_seg(u[j], Qp, has_a, has_b, g, mu, k, eps_plan, u_floor, w_stall)
                Qp[r, c] = Q[r, c] - h
                um, tm, am = _full_seg(u[j], Qp, has_a, has_b, g, mu, k, eps_plan, u_floor, w_stall)
                if (ap >= 0.0 or am >= 0.0) and u_floor <= 0.0:
                    continue
                grad[j - 1 + r, c] += ((tp - tm) + lam * (up - um)) / (2.0 * h)
        gu = 0.0
        if j >= 1:
            hu = 1e-6 * u[j]
            if hu > 0.0:
                up, tp, ap = _full_seg(u[j] + hu, Q, has_a, has_b, g, mu, k, eps_plan, u_floor, w_stall)
                um, tm, am = _full_seg(u[j] - hu, Q, has_a, has_b, g, mu, k, eps_plan, u_floor, w_stall)
                if (ap < 0.0 and am < 0.0) or u_floor > 0.0:
                    gu = ((tp - tm) + lam * (up - um)) / (2.0 * hu)
        lam = gu + du_dpen[j]
    return T, pen, grad, u, not stalled


# ---------------------------------------------------------------------------------------
# a ground line's objective in one compiled pass


@njit(cache=True, nogil=True)
def _ground_fg(X, e0, e1, tab, u0, g, mu, k, eps_plan, u_floor, w_pen, u_max, u_stall):
    """``_Problem.fg`` of a ground line without geometric limits, in one compiled pass:
    vertices on the smooth surface (``tab``: :class:`fallway._surface.SurfaceTables`),
    the segment chain and the gradient in (x, y).  Returns ``(f, grad, missing)``;
    ``missing``: a tile of the surface is not built yet."""
    m = X.shape[0] // 2
    n = m + 2
    out = np.zeros(X.shape[0])
    P = np.empty((n, 3))
    GX = np.empty(m)
    GY = np.empty(m)
    work = new_work()
    for c in range(3):
        P[0, c] = e0[c]
        P[n - 1, c] = e1[c]
    for i in range(m):
        x = X[2 * i]
        y = X[2 * i + 1]
        z, dzr, dzc, st = surface_point(tab, (y - tab.f0) / tab.e - 0.5, (x - tab.c0) / tab.a - 0.5, True, work)
        if st == 2:
            return 1e30, out, True
        P[i + 1, 0] = x
        P[i + 1, 1] = y
        P[i + 1, 2] = z
        GX[i] = dzc / tab.a
        GY[i] = dzr / tab.e
    for i in range(n):
        for c in range(3):
            if not math.isfinite(P[i, c]):
                return 1e30, out, False
    T, pen, G, _ = _chain(P, u0, g, mu, k, eps_plan, u_floor, w_pen, u_max, u_stall)
    f = T + pen
    if not math.isfinite(f):
        return 1e30, out, False
    for i in range(m):
        out[2 * i] = G[i + 1, 0] + G[i + 1, 2] * GX[i]
        out[2 * i + 1] = G[i + 1, 1] + G[i + 1, 2] * GY[i]
    return f, out, False


# ---------------------------------------------------------------------------------------
# adapters to the neighbouring modules


class _Ground:
    """Heights and slopes of the terrain's smooth surface (:meth:`Terrain.surface`)."""

    def __init__(self, terrain):
        self.terrain = terrain
        self.surface = terrain.surface()
        rows, cols = terrain.shape
        x0, y0 = terrain.cell_center(0, 0)
        x1, y1 = terrain.cell_center(rows - 1, cols - 1)
        tiny = 1e-7 * terrain.cell_size
        self.xlim = (min(x0, x1) + tiny, max(x0, x1) - tiny)
        self.ylim = (min(y0, y1) + tiny, max(y0, y1) - tiny)

    def z(self, x, y):
        shape = np.broadcast(np.asarray(x), np.asarray(y)).shape
        return self.surface.evaluate(x, y).reshape(shape)

    def grad(self, x, y):
        return self.z_grad(x, y)[1:]

    def z_grad(self, x, y):
        """Heights and slopes together (one pass of the compiled surface)."""
        shape = np.broadcast(np.asarray(x), np.asarray(y)).shape
        return tuple(v.reshape(shape) for v in self.surface.evaluate(x, y, grad=True))

    def valid(self, x, y):
        return np.asarray(self.terrain.valid(np.asarray(x, float), np.asarray(y, float)), bool)


def _traverse(points: np.ndarray, mover: Mover) -> Profile:
    """``fallway.physics.traverse`` when it exists; else the gravity-normal chain here."""
    from . import physics

    tr = getattr(physics, "traverse", None)
    if tr is not None:
        return tr(points, mover)
    return _gravity_profile(points, mover)


def _gravity_profile(P: np.ndarray, mover: Mover) -> Profile:
    """Profile of a polyline with the gravity-normal segment chain (used without ``traverse``)."""
    P = np.asarray(P, float)
    n = len(P)
    d = np.diff(P, axis=0)
    plan = np.hypot(d[:, 0], d[:, 1])
    length = np.sqrt(plan ** 2 + d[:, 2] ** 2)
    station = np.concatenate([[0.0], np.cumsum(length)])
    v2 = np.full(n, np.nan)
    t = np.full(n, np.nan)
    v2[0] = mover.v0 ** 2
    t[0] = 0.0
    stalled = None
    for j in range(n - 1):
        v2o, dt, st = segment_law(v2[j], -d[j, 2], plan[j], length[j], mover.g, mover.mu, mover.drag,
                                  mover.stall_speed ** 2)
        if st >= 0.0:
            stalled = float(station[j] + st)
            break
        v2[j + 1] = v2o
        t[j + 1] = t[j] + dt
    with np.errstate(divide="ignore", invalid="ignore"):
        grade = np.where(plan > 0, -d[:, 2] / np.where(plan > 0, plan, 1.0), np.sign(-d[:, 2]) * np.inf)
    grade = np.concatenate([grade, grade[-1:]]) if n > 1 else np.zeros(1)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.concatenate([plan / np.where(length > 0, length, 1.0), [0.0]])
    speed = np.sqrt(v2)
    over = (station[speed > mover.max_speed] if mover.max_speed is not None
            else np.zeros(0))
    return Profile(P.copy(), station, speed, t, grade, ratio, stalled, np.zeros(0), over)


class _DistanceField:
    """Signed distance (m, positive outside) to keep-out polygons or to nodata.

    Built from a keep-out object with ``signed_distance(x, y)`` (``fallway.keepout.Keepout``)
    or from a bare shapely geometry.
    """

    def __init__(self, keepout=None, crs=None, nodata_terrain=None):
        self.geometry = None
        self._sd = None
        self._grid = None
        if keepout is not None:
            if hasattr(keepout, "in_crs") and crs is not None:
                keepout = keepout.in_crs(crs)
            if hasattr(keepout, "signed_distance"):
                self._sd = keepout.signed_distance
                self.geometry = getattr(keepout, "geometry", None)
            else:
                import shapely

                geom = keepout
                shapely.prepare(geom)
                boundary = geom.boundary
                shapely.prepare(boundary)

                def sd(x, y, geom=geom, boundary=boundary):
                    x = np.asarray(x, float)
                    y = np.asarray(y, float)
                    pts = shapely.points(x, y)
                    dist = shapely.distance(boundary, pts)
                    inside = shapely.contains_xy(geom, x, y)
                    return np.where(inside, -dist, dist)

                self._sd = sd
                self.geometry = geom
        if nodata_terrain is not None:
            from scipy.ndimage import binary_dilation, distance_transform_edt

            t = nodata_terrain
            bad = ~np.isfinite(t.z)
            bad = binary_dilation(bad, structure=np.ones((3, 3), bool))
            dist = distance_transform_edt(~bad) * t.cell_size
            inner = distance_transform_edt(bad) * t.cell_size
            self._grid = (t, np.where(bad, -inner, dist))

    def __call__(self, x, y):
        if self._sd is not None:
            return np.asarray(self._sd(x, y), float)
        from scipy.ndimage import map_coordinates

        t, field_ = self._grid
        r, c = t.rowcol(x, y)
        return map_coordinates(field_, [np.atleast_1d(r), np.atleast_1d(c)], order=1, mode="nearest")

    def grad(self, x, y, h):
        fx = (self(x + h, y) - self(x - h, y)) / (2 * h)
        fy = (self(x, y + h) - self(x, y - h)) / (2 * h)
        return fx, fy


# ---------------------------------------------------------------------------------------
# penalties on the geometry (numpy, O(N))


def _grade_penalty(P, gmin, gmax, w, margin, eps_plan):
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


def _curvature(A, B, C):
    a = B - A
    b = C - B
    cr = np.cross(a, b)
    num = 2.0 * np.linalg.norm(cr, axis=1)
    den = np.linalg.norm(a, axis=1) * np.linalg.norm(b, axis=1) * np.linalg.norm(C - A, axis=1)
    return num / np.maximum(den, 1e-300)


def _radius_penalty(P, r_min, w, margin):
    if len(P) < 3:
        return 0.0, np.zeros_like(P)
    kap = _curvature(P[:-2], P[1:-1], P[2:])
    lim = (1.0 - margin) / r_min
    act = np.nonzero(kap * r_min > (1.0 - margin) - 0.05)[0]
    grad = np.zeros_like(P)
    viol = np.maximum(kap - lim, 0.0) * r_min
    val = w * float(np.sum(viol ** 2))
    if act.size == 0 or val == 0.0:
        return val, grad
    h = 1e-7 * max(1.0, r_min)
    tri = [P[act].copy(), P[act + 1].copy(), P[act + 2].copy()]
    for role in range(3):
        for c in range(3):
            tp = [q.copy() for q in tri]
            tm = [q.copy() for q in tri]
            tp[role][:, c] += h
            tm[role][:, c] -= h
            vp = np.maximum(_curvature(*tp) - lim, 0.0) * r_min
            vm = np.maximum(_curvature(*tm) - lim, 0.0) * r_min
            np.add.at(grad[:, c], act + role, w * (vp ** 2 - vm ** 2) / (2 * h))
    return val, grad


def _spacing_penalty(P, w):
    """w·Σ ln²(s_{j+1}/s_j): keeps neighbouring segment lengths alike.  The full model's
    discrete curvature (turning angle over the mean of the adjoining lengths) converges to
    the curve's only for a smoothly varying spacing; without this the full-model polish
    gains time by bunching vertices (a short segment beside a long one spreads a corner's
    friction over the long one)."""
    d = np.diff(P, axis=0)
    s = np.maximum(np.linalg.norm(d, axis=1), 1e-12)
    r = np.log(s[1:] / s[:-1])
    val = w * float(np.sum(r * r))
    ds = np.zeros_like(s)
    ds[1:] += 2.0 * w * r / s[1:]
    ds[:-1] -= 2.0 * w * r / s[:-1]
    gd = d * (ds / s)[:, None]
    grad = np.zeros_like(P)
    grad[1:] += gd
    grad[:-1] -= gd
    return val, grad


def _field_penalty(P, fld, w, margin, h):
    """Exterior penalty w·(margin - d)² at vertices and at segment quarter points."""
    n = len(P)
    fr = np.array([0.0, 0.25, 0.5, 0.75])
    i0 = np.repeat(np.arange(n - 1), fr.size)
    f = np.tile(fr, n - 1)
    i0 = np.concatenate([i0, [n - 1]])
    f = np.concatenate([f, [0.0]])
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


# ---------------------------------------------------------------------------------------
# geometry helpers


def _resample(P: np.ndarray, n: int, weights: np.ndarray | None = None) -> np.ndarray:
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


def _smooth_at(P: np.ndarray, s_new: np.ndarray) -> np.ndarray:
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


def _resample_smooth(P: np.ndarray, n: int, weights: np.ndarray | None = None) -> np.ndarray:
    """As :func:`_resample`, the points taken on the cubic spline through P."""
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
    return _smooth_at(P, np.maximum.accumulate(s_new))


def _fillet_plan(xy: np.ndarray, radius_m: float, cell: float):
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
        return _densify(simp, step), math.inf
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
            pieces.append(_densify(np.vstack([pieces[-1][-1:], B[None]]), step)[1:])
            continue
        T1 = B - u[c] * tl[c]
        T2 = B + u[c + 1] * tl[c]
        pieces.append(_densify(np.vstack([pieces[-1][-1:], T1[None]]), step)[1:])
        sgn = 1.0 if cross[c] > 0 else -1.0
        nrm = sgn * np.array([-u[c, 1], u[c, 0]])
        ctr = T1 + rad[c] * nrm
        a0 = math.atan2(T1[1] - ctr[1], T1[0] - ctr[0])
        m = int(min(2000, max(4, math.ceil(rad[c] * phi[c] / step), math.ceil(phi[c] / math.radians(2.0)))))
        ang = a0 + sgn * phi[c] * np.arange(1, m + 1) / m
        arc = ctr + rad[c] * np.column_stack([np.cos(ang), np.sin(ang)])
        arc[-1] = T2
        pieces.append(arc)
    pieces.append(_densify(np.vstack([pieces[-1][-1:], simp[-1:]]), step)[1:])
    out = np.vstack(pieces)
    keep = np.concatenate([[True], np.hypot(*np.diff(out, axis=0).T) > 1e-9])
    out = out[keep]
    out[-1] = simp[-1]
    return out, float(np.min(rad)) if len(rad) else math.inf


def _densify(xy: np.ndarray, step: float) -> np.ndarray:
    """Straight pieces of ``xy`` cut into parts no longer than ``step``."""
    out = [xy[:1]]
    for a, b in zip(xy[:-1], xy[1:]):
        k = max(1, int(math.ceil(float(np.hypot(*(b - a))) / step)))
        out.append(a + (b - a) * (np.arange(1, k + 1) / k)[:, None])
    return np.vstack(out)


def _refine_density(P: np.ndarray, n: int, smooth: bool = False) -> np.ndarray:
    """n points along P keeping its vertex density (arc length is interpolated in index)."""
    from scipy.interpolate import PchipInterpolator

    seg = np.linalg.norm(np.diff(P, axis=0), axis=1)
    cum = np.concatenate([[0.0], np.cumsum(seg)])
    par = np.linspace(0.0, 1.0, len(P))
    s_new = PchipInterpolator(par, cum)(np.linspace(0.0, 1.0, n))
    s_new = np.maximum.accumulate(np.clip(s_new, 0.0, cum[-1]))
    if smooth:
        return _smooth_at(P, s_new)
    j = np.clip(np.searchsorted(cum, s_new, side="right") - 1, 0, len(P) - 2)
    frac = np.where(seg[j] > 0, (s_new - cum[j]) / np.where(seg[j] > 0, seg[j], 1.0), 0.0)
    out = P[j] + (P[j + 1] - P[j]) * np.clip(frac, 0.0, 1.0)[:, None]
    out[0] = P[0]
    out[-1] = P[-1]
    return out


def _monitor(P: np.ndarray, u: np.ndarray, blend: float) -> np.ndarray:
    """Per-segment weights: blend of the share of time and the share of length."""
    seg = np.linalg.norm(np.diff(P, axis=0), axis=1)
    v = np.sqrt(np.maximum(u, 0.0))
    vm = 0.5 * (v[:-1] + v[1:])
    t = seg / np.maximum(vm, 1e-3 * max(float(v.max()), 1e-9))
    return blend * t / max(t.sum(), 1e-300) + (1 - blend) * seg / max(seg.sum(), 1e-300)


# ---------------------------------------------------------------------------------------
# the public function


def _refine_once(terrain, points, mover: Mover, *, limits: Limits | None = None, keepout=None,
                line: str = "ground", clearance: tuple[float, float] = (0.0, 0.0),
                start_height: float = 0.0, end_height: float = 0.0, **options) -> RefineResult:
    """Move the vertices of a line continuously until its travel time is stationary.

    Parameters
    ----------
    terrain : Terrain
        The elevation model; ``line="ground"`` follows its smooth interpolant.
    points : array_like (K, 3)
        Start line (the lattice polyline), x, y and ground z in metres.
    mover : Mover
        Physics.  ``normal="gravity"``: the gravity-normal time is minimised.
        ``normal="full"``: the gravity-normal optimum is then polished on the full
        model's own time (centripetal part of the normal force, the discrete
        turning-angle curvature of :func:`fallway.physics.traverse`), with the exact
        chain of the full-model recursion in reverse for the gradient; the polish is
        coarse to fine with an iteration budget per level, its vertices move normal to
        the line (their spacing stays the gravity optimum's), and it is kept only when
        its full-model time is lower.
    limits : Limits, optional
        Grade window and minimum bend radius (the speed window is on ``mover``).  With
        ``min_radius_m`` the start is the lattice line with its corners replaced by arcs
        of that radius (where the room between corners allows), lines are resampled on
        splines between levels, and tight vertex triples left by the penalty are smoothed
        locally; the radius held is the 3D circumradius of consecutive vertices.
    keepout : Keepout or shapely geometry, optional
        No vertex or segment of the result may enter it.
    line : {"ground", "raised"}
        ``"raised"``: heights are free within ``[ground + c_min, ground + c_max]``.
    clearance : (float, float)
        ``(c_min, c_max)`` above ground for a raised line, metres.
    start_height, end_height : float
        Height of the raised line above ground at its two ends, metres.
    **options
        ``n_vertices`` (default: one per cell of plan length, at least 33), ``levels``
        (coarse-to-fine levels, default 3), ``blend`` (weight of time against length in
        the vertex distribution, default 0.5), ``max_iter`` (per level, default 4000),
        ``gtol`` (default 1e-9 s/m), ``margin_m`` (keep-out safety distance, default 10 % of
        a cell).

    Returns
    -------
    RefineResult
        Never slower than the start line with the same model, among lines that meet the
        limits: when the start (lattice) line itself breaks a limit (typically the bend
        radius at its lattice corners) the fastest line found that meets them is
        returned even if slower, and ``message`` says so.  When no line meeting the
        limits is found, the fastest line is returned with a :class:`RefinementWarning`,
        ``message`` starting "no line meeting the limits was found" and the broken
        limit's status ``"violated"`` in ``limits``.

    Warns
    -----
    RefinementWarning
        The final level did not converge (the best line found is returned); no line
        meeting the limits was found; or the refinement failed numerically (the start
        line is kept).  An iteration budget reached by the full-model polish is only
        noted in ``message``.

    Examples
    --------
    >>> import numpy as np
    >>> from affine import Affine
    >>> from fallway.terrain import Terrain
    >>> from fallway.physics import Mover
    >>> rows, cols = np.mgrid[0:21, 0:21]
    >>> t = Terrain.from_array(20.0 - 1.0 * cols, Affine(1.0, 0, 0.0, 0, -1.0, 21.0))
    >>> res = refine_line(t, [[0.5, 10.5, 20.0], [20.5, 0.5, 0.0]], Mover(normal="gravity"))
    >>> res.time_after_s <= res.time_before_s
    True
    """
    if line not in _LINES:
        raise ParameterError(f"line must be one of {', '.join(_LINES)}; got {line!r}")
    known = {"n_vertices", "levels", "blend", "max_iter", "gtol", "margin_m", "penalty"}
    unknown = set(options) - known
    if unknown:
        raise ParameterError(f"unknown refinement option(s) {sorted(unknown)}; use {sorted(known)}")
    limits = limits if limits is not None else Limits()
    P_in = np.array(points, dtype=float)
    if P_in.ndim != 2 or P_in.shape[0] < 2 or P_in.shape[1] not in (2, 3):
        raise ParameterError(f"points must be an (K, 3) array with K >= 2, got shape {P_in.shape}")
    if not np.all(np.isfinite(P_in)):
        raise ParameterError("points must be finite; drop NaN vertices first")
    c_min, c_max = (float(c) for c in clearance)
    if line == "raised" and not (c_min <= c_max):
        raise ParameterError(f"clearance must be (c_min, c_max) with c_min <= c_max, got {clearance!r}")
    gr = _Ground(terrain)
    xy_in = P_in[:, :2]
    zg_in = gr.z(xy_in[:, 0], xy_in[:, 1])
    if line == "ground":
        P_start = P_in if P_in.shape[1] == 3 else np.column_stack([xy_in, zg_in])
    else:
        if not np.all(np.isfinite(zg_in)):
            raise ParameterError("the start line leaves the terrain; keep it inside the DEM's valid area")
        for nm, hv in (("start_height", start_height), ("end_height", end_height)):
            if not (c_min - 1e-9 <= hv <= c_max + 1e-9):
                raise ParameterError(f"{nm} ({hv:g} m) must lie in the clearance band [{c_min:g}, {c_max:g}] m")
        seg = np.hypot(*np.diff(xy_in, axis=0).T)
        frac = np.concatenate([[0.0], np.cumsum(seg)])
        frac = frac / frac[-1] if frac[-1] > 0 else np.linspace(0, 1, len(frac))
        h0 = float(start_height) + (float(end_height) - float(start_height)) * frac
        h0 = np.clip(h0, c_min, c_max)
        P_start = np.column_stack([xy_in, zg_in + h0])
    prof_start = _traverse(P_start, mover)
    time_before = prof_start.travel_time_s

    n_default = int(math.ceil(float(np.sum(np.hypot(*np.diff(xy_in, axis=0).T))) / terrain.cell_size)) + 1
    n_target = int(options.get("n_vertices") or max(33, n_default))
    n_target = max(n_target, 3)
    levels = max(1, int(options.get("levels", 8)))
    blend = float(options.get("blend", 0.5))
    max_iter = int(options.get("max_iter", 4000))
    gtol = float(options.get("gtol", 1e-9))
    margin_m = float(options.get("margin_m", 0.1 * terrain.cell_size))
    w_pen = float(options.get("penalty", 1e4))

    try:
        keep_fld = _DistanceField(keepout, getattr(terrain, "crs", None)) if keepout is not None else None
        nodata_fld = _DistanceField(nodata_terrain=terrain) if not np.all(np.isfinite(terrain.z)) else None

        opt = _Problem(gr, mover, limits, line, c_min, c_max, keep_fld, nodata_fld, margin_m, w_pen,
                       terrain.cell_size)

        # coarse-to-fine levels: the first starts from the lattice line re-distributed by the
        # time/length monitor, each next one from the previous optimum with its vertex density
        # kept (the free optimum's spacing is the best guess for the finer line)
        sizes = [n_target]
        while len(sizes) < levels and sizes[0] > 16:
            sizes.insert(0, (sizes[0] - 1) // 2 + 1)
        r_min = limits.min_radius_m
        smooth = r_min is not None
        polish_note = ""
        P_seed, P_round = P_start, None
        if smooth:
            # a bend radius limit: start from the lattice line with its corners rounded
            # (arcs of the required radius), resample on splines so bends stay round
            P_round = _rounded_start(opt, P_start, r_min, line, start_height, end_height, c_min, c_max,
                                     terrain.cell_size)
            if P_round is not None:
                P_seed = P_round
        if smooth:
            P = _resample_smooth(P_seed, max(len(P_seed), 4 * sizes[0]))
        else:
            P = _resample(P_seed, max(len(P_seed) * 4, 4 * sizes[0]))
        P = opt.project(P, P_start)
        u = opt.speeds(P)
        rs = _resample_smooth if smooth else _resample
        P = opt.project(rs(P, sizes[0], _monitor(P, u, blend)), P_start)
        iters = 0
        converged = False
        residual = math.inf
        notes = []
        for li, n in enumerate(sizes):
            if li > 0:
                P = opt.project(_refine_density(P, n, smooth), P_start)
            # a level before the last only has to give the next one its shape: a looser
            # stationarity test there (the slow tangential sliding of its vertices is
            # redone on the finer level anyway)
            last = li == len(sizes) - 1
            P, it, res, ok, msg = opt.solve(P, max_iter, gtol, stat_tol=None if last else _STAT_TOL_COARSE)
            iters += it
            converged, residual = ok, res
            if not ok and last:
                notes.append(f"level {li + 1} ({n} vertices): {msg}")

        # strengthen penalties while a limit is still violated
        for _ in range(4):
            viol = opt.violations(P)
            if not any(v == "violated" for v in viol.values()):
                break
            if viol.get("keepout") == "violated":
                # a segment cuts a corner between the sampled points: keep a wider berth
                opt.margin *= 4.0
            if any(v == "violated" for k, v in viol.items() if k != "keepout"):
                opt.w_pen *= 100.0
            P, it, res, ok, msg = opt.solve(P, max_iter, gtol)
            iters += it
            converged, residual = ok, res
        if mover.normal == "full" and P.shape[0] >= 3:
            # full-model polish, coarse to fine again: each level starts from the previous
            # level's polished line with its vertex density kept
            t_grav = _full_chain(P, mover.v0 ** 2, mover.g, mover.mu, mover.drag, 0.0, -1.0, -1.0, False)[0]
            Pf, it_sum, ok_p, gain0 = None, 0, True, 1.0
            level_lines: list = []
            for li, n in enumerate(sizes):
                if li == 1 and gain0 < _POLISH_GAIN:
                    # the gravity optimum is already close to the full one: polish the
                    # finest line only, from the gravity optimum
                    cap = max(50, min(max_iter, _POLISH_BUDGET // max(len(P), 1)))
                    Pf, it_p, res_p, ok_p, _ = _polish(opt, P, P_start, cap, gtol, (0.0,))
                    it_sum += it_p
                    break
                Pn = opt.project(_refine_density(P if Pf is None else Pf, n, True), P_start)
                if Pf is None and n == len(P):
                    Pn = P
                # the smoothing continuation on the first level only; later levels start
                # close to their optimum and get an iteration budget by size
                cap = max(50, min(max_iter, _POLISH_BUDGET // max(n, 1)))
                if li == 0:
                    tc0 = _full_chain(Pn, mover.v0 ** 2, mover.g, mover.mu, mover.drag, 0.0, -1.0, -1.0, False)[0]
                Pn, it_p, res_p, ok_p, _ = _polish(opt, Pn, P_start, cap, gtol,
                                                   (0.1, 0.01, 0.0) if li == 0 else (0.0,))
                if li == 0:
                    tc1 = _full_chain(Pn, mover.v0 ** 2, mover.g, mover.mu, mover.drag, 0.0, -1.0, -1.0, False)[0]
                    gain0 = (tc0 - tc1) / tc0 if math.isfinite(tc0) and math.isfinite(tc1) else 1.0
                it_sum += it_p
                Pf = Pn
                # keep every level's polished line: on a long line whose finest level
                # stops at its budget a coarser level can be faster under the full model
                tl = _full_chain(Pn, mover.v0 ** 2, mover.g, mover.mu, mover.drag, 0.0, -1.0, -1.0, False)[0]
                # a ground line keeps to the ground only with vertices at most ~2 cells apart
                # (a longer chord bridges or cuts the terrain between its ends)
                spacing = float(np.sum(np.hypot(*np.diff(Pn[:, :2], axis=0).T))) / max(len(Pn) - 1, 1)
                if math.isfinite(tl) and (line != "ground" or spacing <= 2.0 * terrain.cell_size):
                    level_lines.append((tl, li, Pn))
            t_full = _full_chain(Pf, mover.v0 ** 2, mover.g, mover.mu, mover.drag, 0.0, -1.0, -1.0, False)[0]
            for tl, li, Pl in sorted(level_lines, key=lambda x: x[0]):
                if not (math.isfinite(t_full) and tl < t_full) or Pl is Pf:
                    break
                if _meets(opt.violations(Pl), _traverse(Pl, mover)):
                    notes.append(f"the polished level {li + 1} ({len(Pl)} vertices) is faster under the full "
                                 f"model than the finest ({tl:.6f} s vs {t_full:.6f} s) and is returned")
                    Pf, t_full = Pl, tl
                    break
            iters += it_sum
            if math.isfinite(t_full) and t_full < t_grav and _meets(opt.violations(Pf), _traverse(Pf, mover)):
                P = Pf
                notes.append(f"full-model polish {t_grav:.6f} s -> {t_full:.6f} s in {it_sum} iterations"
                             + ("" if ok_p else f" (stopped at its iteration budget, residual {res_p:.2g} s/m)"))
            else:
                notes.append("full-model polish found nothing faster than the gravity-normal optimum")
            polish_note = notes[-1]
        status = opt.violations(P)
        if status.get("min_radius") == "violated":
            # the penalty leaves a few tight triples: smooth them out locally
            P = _repair_radius(opt, P, P_start, r_min)
            status = opt.violations(P)
        prof = _traverse(P, mover)
        res = _choose(opt, mover, P, prof, status, converged, residual, iters, notes, P_start, prof_start,
                      P_round)
        return dataclasses.replace(res, polish=polish_note) if polish_note else res
    except FallwayError:
        raise
    except (ZeroDivisionError, ValueError, FloatingPointError, np.linalg.LinAlgError) as err:
        # a degenerate line (a segment arriving at rest, a cliff over one cell): keep the
        # start line rather than fail the whole route
        warnings.warn(f"refinement failed numerically ({type(err).__name__}: {err}); the start line is kept",
                      RefinementWarning, stacklevel=2)
        return RefineResult(P_start.copy(), prof_start, 0, math.inf, False, time_before, time_before,
                            f"kept the start line: the refinement failed numerically ({type(err).__name__})", {})



def refine_line(terrain, points, mover: Mover, **kw) -> RefineResult:
    res = _refine_once(terrain, points, mover, **kw)
    if mover.normal != "full" or res.time_after_s < res.time_before_s:
        return res
    # With the full model the stages above can end no faster than the start line where
    # the optimum of the gravity-normal model alone, timed with the full model, is faster
    # (seen on the sample site): try it, keep it only if it meets the limits and is faster.
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RefinementWarning)
            alt = _refine_once(terrain, points, dataclasses.replace(mover, normal="gravity"), **kw)
    except FallwayError:
        return res
    prof = _traverse(np.asarray(alt.line, dtype=float), mover)
    ok = prof.feasible and not any(v == "violated" for v in (alt.limits or {}).values())
    if not (ok and prof.travel_time_s < res.time_after_s):
        return res
    return dataclasses.replace(
        alt, profile=prof, time_before_s=res.time_before_s, time_after_s=prof.travel_time_s,
        message=(f"refined on the gravity-normal model and timed with the full model: "
                 f"{res.time_before_s:.6f} s -> {prof.travel_time_s:.6f} s (the full-model stages gave "
                 f"{res.time_after_s:.6f} s)"),
        polish=res.polish)


refine_line.__doc__ = _refine_once.__doc__

def _meets(status, prof):
    return bool(prof.feasible) and not any(v == "violated" for v in status.values())


def _choose(opt, mover, P, prof, status, converged, residual, iters, notes, P_start, prof_start, P_round):
    """The line to return and what to say about it.

    "Never slower than the start line" holds among lines that meet the limits: when the
    start (lattice) line breaks one (typically the bend radius, at its lattice corners)
    the fastest line found that meets them is returned even if slower, and the message
    says so; when no line meeting the limits is found, the fastest line is returned
    with a :class:`RefinementWarning` and the broken limit's status is "violated".
    """
    time_before = prof_start.travel_time_s
    time_after = prof.travel_time_s
    st_start = _status_of(opt, P_start)
    start_ok = _meets(st_start, prof_start)
    broken = [k for k, v in st_start.items() if v == "violated"]
    cands = [("refined", P, prof, status, converged)]
    if P_round is not None:
        pr = _traverse(P_round, mover)
        cands.append(("rounded", P_round, pr, _status_of(opt, P_round), False))
    good = [c for c in cands if _meets(c[3], c[2])]
    if start_ok:
        good.append(("start", P_start, prof_start, st_start, False))
    if good:
        name, L, pr, st, conv = min(good, key=lambda c: (c[2].travel_time_s, c[0] != "refined"))
        t = pr.travel_time_s
        if name == "start":
            why = (f"the refined line is not faster ({time_after:.6g} s vs {time_before:.6g} s)"
                   if _meets(status, prof) else "the refined line breaks a limit: "
                   + ", ".join(k for k, v in status.items() if v == "violated"))
            return RefineResult(P_start.copy(), prof_start, iters, residual, False, time_before, time_before,
                                f"kept the start line: {why}", st_start)
        active = [k for k, v in st.items() if v == "active"]
        what = ("refined" if name == "refined"
                else "kept the start line with its corners rounded (the refined line breaks a limit: "
                + ", ".join(k for k, v in status.items() if v == "violated") + ");")
        msg = (f"{what} {len(L)} vertices in {iters} iterations: {time_before:.6f} s -> {t:.6f} s"
               + (f"; active limits: {', '.join(active)}" if active else ""))
        if not start_ok and t > time_before:
            msg += (f"; slower than the start line, which breaks {', '.join(broken) or 'a limit'}: "
                    f"the returned line meets the limits")
        if notes:
            msg += f"; {'; '.join(notes)}"
        if name == "refined" and not converged:
            warnings.warn(f"refinement did not converge (residual {residual:.3g} s/m); returning the best line found",
                          RefinementWarning, stacklevel=3)
        return RefineResult(L, pr, iters, residual, conv, time_before, t, msg, st)
    # nothing meets the limits: the fastest line, said loudly
    allc = cands + [("start", P_start, prof_start, st_start, False)]
    fin = [c for c in allc if math.isfinite(c[2].travel_time_s)] or allc
    name, L, pr, st, conv = min(fin, key=lambda c: (sum(v == "violated" for v in c[3].values()),
                                                    c[2].travel_time_s))
    bad = [k for k, v in st.items() if v == "violated"] or (["speed window / stall"] if not pr.feasible else [])
    msg = (f"no line meeting the limits was found; returning the {name} line, which breaks "
           f"{', '.join(bad)} ({time_before:.6f} s -> {pr.travel_time_s:.6f} s)")
    warnings.warn(msg, RefinementWarning, stacklevel=3)
    return RefineResult(L.copy(), pr, iters, residual, False, time_before, pr.travel_time_s, msg, st)


def _normal_basis(X, k):
    """Per interior vertex, an orthonormal basis of the directions normal to the line in
    variable space (k variables per vertex: the line's tangent there is the central
    difference of its neighbours).  Shape (m, k, k - 1)."""
    V = X.reshape(-1, k)
    T = np.empty_like(V)
    T[1:-1] = V[2:] - V[:-2]
    if len(V) > 1:
        T[0] = V[1] - V[0]
        T[-1] = V[-1] - V[-2]
    else:
        T[0] = np.eye(k)[0]
    T /= np.maximum(np.linalg.norm(T, axis=1), 1e-300)[:, None]
    B = np.empty((len(V), k, k - 1))
    if k == 2:
        B[:, 0, 0] = -T[:, 1]
        B[:, 1, 0] = T[:, 0]
        return B
    # k == 3: plan normal (horizontal), then the normal in the vertical plane of the tangent
    n1 = np.column_stack([-T[:, 1], T[:, 0], np.zeros(len(T))])
    bad = np.linalg.norm(n1, axis=1) < 1e-6
    n1[bad] = [0.0, 1.0, 0.0]
    n1 -= T * np.sum(n1 * T, axis=1)[:, None]
    n1 /= np.linalg.norm(n1, axis=1)[:, None]
    n2 = np.cross(T, n1)
    B[:, :, 0] = n1
    B[:, :, 1] = n2
    return B


def _polish(opt, P, P_start, max_iter, gtol, stages=(0.1, 0.01, 0.0)):
    """Full-model polish: from the gravity-normal optimum, minimise the full model's own
    travel time (centripetal part of the normal force, discrete turning-angle curvature,
    as ``traverse``) with the same limits and bounds; the gradient is the adjoint of the
    full-model recursion (:func:`_full_chain`).

    The vertices move normal to the line only: their spacing stays the gravity optimum's
    (equidistributed) one.  With free tangential motion the optimiser learns to bunch
    vertices in pairs, which the discrete curvature (turning angle over the mean adjoining
    length) rewards with less friction than the curve it samples: lines faster than the
    continuous optimum.  The friction of a vertical (free-fall) segment is a kink, so the
    plan length is smoothed, sqrt(plan² + eps²), with eps lowered to 0 in three stages.
    Kept only when its full-model time is lower.  Returns
    ``(P, iterations, residual, ok, note)``."""
    mv = opt.mover
    u0 = mv.v0 ** 2

    def full_time(Q):
        return _full_chain(Q, u0, mv.g, mv.mu, mv.drag, 0.0, -1.0, -1.0, False)[0]

    t0 = full_time(P)
    ends = (P[0].copy(), P[-1].copy())
    k = opt.nvar()
    bnds = opt.bounds(len(P) - 2)
    lo = np.array([b[0] for b in bnds])
    hi = np.array([b[1] for b in bnds])
    seg = float(np.mean(np.linalg.norm(np.diff(P, axis=0), axis=1)))
    X = np.clip(opt.to_vars(P), lo, hi)
    nit = 0
    res = math.inf
    ok = False
    opt.full = True
    try:
        for frac in stages:
            opt.eps_full = frac * seg
            X0 = X
            B = _normal_basis(X0, k)

            def fun(xi, X0=X0, B=B):
                Xc = np.clip(X0 + np.einsum("ikj,ij->ik", B, xi.reshape(len(B), k - 1)).ravel(), lo, hi)
                f, g = opt.fg(Xc, ends)
                return f, np.einsum("ikj,ik->ij", B, g.reshape(-1, k)).ravel()

            f0 = fun(np.zeros(len(B) * (k - 1)))[0]
            hist = []

            def stop(intermediate_result):
                # stationary: over the last _WINDOW iterations the time fell by less than
                # _POLISH_TOL relatively
                hist.append(float(intermediate_result.fun))
                if len(hist) > _WINDOW and hist[-1 - _WINDOW] - hist[-1] <= _POLISH_TOL * abs(hist[-1]):
                    raise StopIteration

            with _OneBlasThread(), np.errstate(all="ignore"):
                r = minimize(fun, np.zeros(len(B) * (k - 1)), jac=True, method="L-BFGS-B", callback=stop,
                             options={"maxiter": max_iter, "maxcor": _MAXCOR, "ftol": _FTOL, "gtol": gtol,
                                      "maxls": 40})
            nit += int(r.nit)
            if r.fun <= f0:
                X = np.clip(X0 + np.einsum("ikj,ij->ik", B, r.x.reshape(len(B), k - 1)).ravel(), lo, hi)
            res = float(np.max(np.abs(r.jac))) if r.jac.size else 0.0
            ok = bool(r.success) or (len(hist) > _WINDOW and r.nit < max_iter)
    finally:
        opt.full = False
        opt.eps_full = 0.0
    Q = opt.to_points(X, ends)
    t1 = full_time(Q)
    if math.isfinite(t1) and t1 < t0:
        return Q, nit, res, ok, f"full-model polish {t0:.6f} s -> {t1:.6f} s in {nit} iterations"
    return P, nit, res, ok, "full-model polish found nothing faster than the gravity-normal optimum"


def _repair_radius(opt, P, P_start, r_min, sweeps=400):
    """Local Laplacian smoothing of the vertices whose circumradius (with their two
    neighbours) is below ``r_min`` (plus a 0.2 % margin) and of their neighbours: each
    such vertex moves halfway to the midpoint of its neighbours, which spreads the bend
    over more vertices; ends stay fixed, heights follow the ground (or the clearance
    band).  Stops when no triple is too tight."""
    P = P.copy()
    lim = 1.0 / (r_min * (1 + 2e-3))
    ground = opt.line == "ground"
    for _ in range(sweeps):
        kap = _curvature(P[:-2], P[1:-1], P[2:])
        bad = np.nonzero(kap > lim)[0] + 1
        if bad.size == 0:
            break
        idx = np.unique(np.clip(np.concatenate([bad - 1, bad, bad + 1]), 1, len(P) - 2))
        mid = 0.5 * (P[idx - 1] + P[idx + 1])
        Q = P.copy()
        Q[idx] += 0.5 * (mid - P[idx])
        if ground:
            Q[idx, 2] = opt.gr.z(Q[idx, 0], Q[idx, 1])
        P = opt.project(Q, P_start)
    return P


def _rounded_start(opt, P_start, r_min, line, start_height, end_height, c_min, c_max, cell):
    """The start line with its corners replaced by arcs (:func:`_fillet_plan`) so that
    the 3D circumradius of consecutive vertices is at least ``r_min`` where the geometry
    allows; the arc radius is raised when the terrain's own curvature (or the slope's
    foreshortening) tightens the 3D bend.  None when the rounded line leaves the terrain."""
    gr = opt.gr
    f = 1.02
    best = None
    for _ in range(5):
        xy, rad = _fillet_plan(P_start[:, :2], r_min * f, cell)
        zg = gr.z(xy[:, 0], xy[:, 1])
        if not np.all(np.isfinite(zg)):
            return best
        if line == "ground":
            z = zg
        else:
            seg = np.hypot(*np.diff(xy, axis=0).T)
            frac = np.concatenate([[0.0], np.cumsum(seg)])
            frac = frac / frac[-1] if frac[-1] > 0 else np.linspace(0, 1, len(frac))
            h = np.clip(float(start_height) + (float(end_height) - float(start_height)) * frac, c_min, c_max)
            z = zg + h
        P = np.column_stack([xy, z])
        P[0], P[-1] = P_start[0], P_start[-1]
        kap = _curvature(P[:-2], P[1:-1], P[2:]) if len(P) >= 3 else np.zeros(1)
        r3 = 1.0 / max(float(np.max(kap)), 1e-300)
        best = P
        if r3 >= r_min * (1 + 2e-3) or rad < r_min * f * (1 - 1e-6):
            break  # met, or the room between corners is what limits it
        f *= max(1.05, 1.02 * r_min / r3)
    return best


def _status_of(opt, P):
    try:
        return opt.violations(P)
    except Exception:  # pragma: no cover - status is informative only
        return {}


class _Problem:
    """The optimisation problem: variables <-> vertices, objective, bounds, checks."""

    def __init__(self, gr, mover, limits, line, c_min, c_max, keep_fld, nodata_fld, margin_m, w_pen, cell):
        self.gr = gr
        self.mover = mover
        self.limits = limits
        self.line = line
        self.c_min, self.c_max = c_min, c_max
        self.keep = keep_fld
        self.nodata = nodata_fld
        self.margin = margin_m
        self.w_pen = w_pen
        self.cell = cell
        self.eps_plan = 1e-4 * cell
        g = mover.g
        self.u_floor = 1e-8 * g * cell
        self.u_max = (mover.max_speed * (1 - 1e-4)) ** 2 if mover.max_speed is not None else -1.0
        self.u_stall = (mover.stall_speed * (1 + 1e-4)) ** 2 if mover.stall_speed > 0 else -1.0
        #: optimise the full normal-force model's time (the polish) instead of the gravity one,
        #: with the plan length smoothed by ``eps_full`` (m)
        self.full = False
        self.eps_full = 0.0
        self.w_spacing = 0.0

    # variables: interior vertices; ground (x, y), raised (x, y, h above ground)
    def nvar(self):
        return 2 if self.line == "ground" else 3

    def to_vars(self, P):
        inner = P[1:-1]
        if self.line == "ground":
            return inner[:, :2].ravel().copy()
        h = inner[:, 2] - self.gr.z(inner[:, 0], inner[:, 1])
        return np.column_stack([inner[:, :2], h]).ravel()

    def to_points(self, X, ends, slopes=False):
        """Vertices (N, 3) of the variables; with ``slopes`` also the ground slopes
        (dz/dx, dz/dy) at the interior vertices."""
        k = self.nvar()
        V = X.reshape(-1, k)
        n = len(V) + 2
        P = np.empty((n, 3))
        P[0] = ends[0]
        P[-1] = ends[1]
        P[1:-1, :2] = V[:, :2]
        if slopes:
            zg, gx, gy = self.gr.z_grad(V[:, 0], V[:, 1])
        else:
            zg = self.gr.z(V[:, 0], V[:, 1])
        P[1:-1, 2] = zg if k == 2 else zg + V[:, 2]
        return (P, gx, gy) if slopes else P

    def bounds(self, m):
        gx, gy = self.gr.xlim, self.gr.ylim
        b = [gx, gy] if self.line == "ground" else [gx, gy, (self.c_min, self.c_max)]
        return b * m

    def project(self, P, P_start):
        """Clip vertices into the bounds; ends fixed at the start line's ends."""
        P = P.copy()
        P[0] = P_start[0]
        P[-1] = P_start[-1]
        P[1:-1, 0] = np.clip(P[1:-1, 0], *self.gr.xlim)
        P[1:-1, 1] = np.clip(P[1:-1, 1], *self.gr.ylim)
        zg = self.gr.z(P[1:-1, 0], P[1:-1, 1])
        if self.line == "ground":
            P[1:-1, 2] = zg
        else:
            P[1:-1, 2] = zg + np.clip(P[1:-1, 2] - zg, self.c_min, self.c_max)
        if self.line == "ground":
            P[0, 2] = self.gr.z(P[0, 0], P[0, 1]) if np.isfinite(self.gr.z(P[0, 0], P[0, 1])) else P[0, 2]
            P[-1, 2] = self.gr.z(P[-1, 0], P[-1, 1]) if np.isfinite(self.gr.z(P[-1, 0], P[-1, 1])) else P[-1, 2]
        return P

    def speeds(self, P):
        mv = self.mover
        if self.full or mv.normal == "full":
            u = _full_chain(P, mv.v0 ** 2, mv.g, mv.mu, mv.drag, 0.0, -1.0, -1.0, False)[3]
            return u
        return _chain(P, mv.v0 ** 2, mv.g, mv.mu, mv.drag, self.eps_plan, self.u_floor, 0.0, -1.0, -1.0)[3]

    def objective(self, P):
        """time + penalties and its gradient with respect to the vertices (N, 3)."""
        mv = self.mover
        # speed penalties act on v² (m²/s²): scaled so that 1 m²/s² costs ~1e-2 s at w = 1e4
        if self.full:
            T, pen, G, _, ok = _full_chain(P, mv.v0 ** 2, mv.g, mv.mu, mv.drag, self.w_pen * 1e-6, self.u_max,
                                           self.u_stall, True, self.eps_full, self.u_floor, 1e3)
            if not math.isfinite(T):
                return math.inf, G
        else:
            T, pen, G, _ = _chain(P, mv.v0 ** 2, mv.g, mv.mu, mv.drag, self.eps_plan, self.u_floor,
                                  self.w_pen * 1e-6, self.u_max, self.u_stall)
        f = T + pen
        if self.full and self.w_spacing > 0.0:
            v, gg = _spacing_penalty(P, self.w_spacing)
            f += v
            G += gg
        lim = self.limits
        if math.isfinite(lim.min_grade) or math.isfinite(lim.max_grade):
            v, gg = _grade_penalty(P, lim.min_grade, lim.max_grade, self.w_pen, 1e-3, self.eps_plan)
            f += v
            G += gg
        if lim.min_radius_m is not None:
            v, gg = _radius_penalty(P, lim.min_radius_m, self.w_pen, 2e-3)
            f += v
            G += gg
        for fld, marg in ((self.keep, self.margin), (self.nodata, 1.5 * self.cell)):
            if fld is not None:
                v, gg, _ = _field_penalty(P, fld, self.w_pen, marg, 1e-4 * self.cell)
                f += v
                G += gg
        return f, G

    def _fast(self):
        """The compiled table when the objective is the bare chain on the ground interpolant."""
        lim = self.limits
        tab = self.gr.surface
        if (self.full or self.line != "ground" or self.keep is not None or self.nodata is not None
                or math.isfinite(lim.min_grade) or math.isfinite(lim.max_grade) or lim.min_radius_m is not None):
            return None
        return tab

    def fg(self, X, ends):
        tab = self._fast()
        if tab is not None:
            mv = self.mover
            for _ in range(2):
                f, g, missing = _ground_fg(np.ascontiguousarray(X, float), ends[0], ends[1], tab.tables,
                                           mv.v0 ** 2, mv.g, mv.mu, mv.drag, self.eps_plan, self.u_floor,
                                           self.w_pen * 1e-6, self.u_max, self.u_stall)
                if not missing:
                    return f, g
                tab.ensure(X[0::2], X[1::2])  # builds the tiles, then once more
        P, gx, gy = self.to_points(X, ends, slopes=True)
        if not np.all(np.isfinite(P)):
            return 1e30, np.zeros_like(X)
        f, G = self.objective(P)
        Gi = G[1:-1]
        out = np.empty((len(Gi), self.nvar()))
        out[:, 0] = Gi[:, 0] + Gi[:, 2] * gx
        out[:, 1] = Gi[:, 1] + Gi[:, 2] * gy
        if self.nvar() == 3:
            out[:, 2] = Gi[:, 2]
        if not math.isfinite(f):
            return 1e30, np.zeros_like(X)
        return f, out.ravel()

    def _diag_scale(self, X0, ends, hscale, lo, hi):
        """1/sqrt of a finite-difference estimate of the Hessian diagonal (colour groups of
        every third vertex, so neighbouring vertices are not perturbed together)."""
        k = self.nvar()
        f0, g0 = self.fg(X0, ends)
        m = len(X0) // k
        diag = np.zeros_like(X0)
        for c in range(k):
            for col in range(3):
                idx = np.arange(col, m, 3) * k + c
                if idx.size == 0:
                    continue
                d = np.zeros_like(X0)
                dlt = 1e-6 * hscale[idx]
                # step into the box
                sgn = np.where(X0[idx] + dlt <= hi[idx], 1.0, -1.0)
                d[idx] = sgn * dlt
                g1 = self.fg(X0 + d, ends)[1]
                diag[idx] = (g1[idx] - g0[idx]) / d[idx]
        pos = diag > 0
        typical = np.median(diag[pos]) if pos.any() else 1.0
        diag = np.where(pos, diag, typical)
        diag = np.maximum(diag, 1e-8 * typical)
        sc = 1.0 / np.sqrt(diag)
        return sc * (np.median(hscale) / np.median(sc))

    def solve(self, P, max_iter, gtol, ftol=None, stat_tol=None):
        """L-BFGS-B from P, restarted every ``_CHUNK`` iterations with a fresh diagonal
        preconditioner (the stiffness near a start from rest changes as vertices move)."""
        ftol = _FTOL if ftol is None else ftol
        stol = _STAT_TOL if stat_tol is None else stat_tol
        ends = (P[0].copy(), P[-1].copy())
        X = self.to_vars(P)
        bnds = self.bounds(len(P) - 2)
        lo = np.array([b[0] for b in bnds])
        hi = np.array([b[1] for b in bnds])
        X = np.clip(X, lo, hi)
        f_start, _ = self.fg(X, ends)
        hist = []
        nit = 0
        msg = ""
        done = False
        stationary = False

        def is_stationary():
            return len(hist) > _WINDOW and hist[-1 - _WINDOW] - hist[-1] <= stol * abs(hist[-1])

        def stop_when_stationary(intermediate_result):
            # the travel time is stationary: over the last _WINDOW iterations it fell by
            # less than _STAT_TOL relatively (the slow tangential sliding of vertices
            # no longer changes the time)
            hist.append(float(intermediate_result.fun))
            if is_stationary():
                raise StopIteration

        while not done and nit < max_iter:
            X0 = X
            Pc = self.to_points(X0, ends)
            seg = np.linalg.norm(np.diff(Pc, axis=0), axis=1)
            hv = np.maximum(0.5 * (seg[:-1] + seg[1:]), 1e-6 * self.cell)
            # diagonal preconditioning: variables in units of 1/sqrt(Hessian diagonal)
            sc = self._diag_scale(X0, ends, np.repeat(hv, self.nvar()), lo, hi)

            def fun(xi, X0=X0, sc=sc):
                f, g = self.fg(X0 + sc * xi, ends)
                return f, g * sc

            with np.errstate(divide="ignore", invalid="ignore"):
                sb = list(zip((lo - X0) / sc, (hi - X0) / sc))
            chunk = min(_CHUNK, max_iter - nit)
            with _OneBlasThread():
                res = minimize(fun, np.zeros_like(X0), jac=True, method="L-BFGS-B", bounds=sb,
                               callback=stop_when_stationary,
                               options={"maxiter": chunk, "maxcor": _MAXCOR, "ftol": ftol, "gtol": gtol,
                                        "maxls": 40})
            nit += int(res.nit)
            Xn = np.clip(X0 + sc * res.x, lo, hi)
            f_new, f_old = self.fg(Xn, ends)[0], self.fg(X0, ends)[0]
            if f_new <= f_old:
                X = Xn
            if res.nit == 0 or not (f_new < f_old):
                # no progress from a fresh start: nothing more to gain here
                msg = str(res.message)
                done = bool(res.success) or is_stationary()
                break
            stationary = is_stationary()
            msg = "travel time stationary" if stationary else str(res.message)
            # a chunk that ends on its own tolerance right after a restart is the end
            done = stationary or (bool(res.success) and res.nit < chunk)
            if bool(res.success) and res.nit < chunk and not stationary:
                done = True
        f, g = self.fg(X, ends)
        if not (f <= f_start):
            X = self.to_vars(P)
            f, g = self.fg(X, ends)
        # projected gradient: components pushing out of an active bound do not count
        pg = g.copy()
        pg[(X <= lo + 1e-12) & (g > 0)] = 0.0
        pg[(X >= hi - 1e-12) & (g < 0)] = 0.0
        resid = float(np.max(np.abs(pg))) if pg.size else 0.0
        ok = done or resid <= max(gtol * 100, 1e-7)
        return self.to_points(X, ends), nit, resid, ok, msg

    def violations(self, P):
        """Status of every limit on the line P: inactive / active / violated."""
        out = {}
        lim = self.limits
        d = np.diff(P, axis=0)
        plan = np.hypot(d[:, 0], d[:, 1])
        drop = -d[:, 2]
        if math.isfinite(lim.min_grade) or math.isfinite(lim.max_grade):
            hi = drop - lim.max_grade * plan if math.isfinite(lim.max_grade) else np.full(len(d), -np.inf)
            lo = lim.min_grade * plan - drop if math.isfinite(lim.min_grade) else np.full(len(d), -np.inf)
            # grade honoured to 1e-4 (drop per plan metre)
            worst = float(np.max(np.maximum(hi, lo) / np.maximum(plan, 1e-9)))
            out["grade"] = "violated" if worst > 1e-4 else ("active" if worst > -2e-3 else "inactive")
        mv = self.mover
        u = self.speeds(P)
        if mv.max_speed is not None:
            vmax = float(np.sqrt(np.max(u)))
            out["max_speed"] = ("violated" if vmax > mv.max_speed * (1 + 1e-9)
                                else "active" if vmax > mv.max_speed * (1 - 1e-3) else "inactive")
        if mv.stall_speed > 0:
            v = np.sqrt(u[1:])
            dec = u[1:] < u[:-1]
            vmin = float(np.min(v[dec])) if dec.any() else math.inf
            out["stall"] = ("violated" if vmin < mv.stall_speed * (1 - 1e-9)
                            else "active" if vmin < mv.stall_speed * (1 + 1e-3) else "inactive")
        if lim.min_radius_m is not None and len(P) >= 3:
            kap = _curvature(P[:-2], P[1:-1], P[2:])
            rmin = 1.0 / max(float(np.max(kap)), 1e-300)
            out["min_radius"] = ("violated" if rmin < lim.min_radius_m * (1 - 1e-4)
                                 else "active" if rmin < lim.min_radius_m * (1 + 1e-2) else "inactive")
        if self.keep is not None:
            out["keepout"] = _keepout_status(P, self.keep, self.margin)
        # DEM extent and nodata: every vertex and segment point on valid terrain
        fr = np.linspace(0.0, 1.0, 5)
        X = (P[:-1, None, :2] * (1 - fr)[None, :, None] + P[1:, None, :2] * fr[None, :, None]).reshape(-1, 2)
        ok = self.gr.valid(X[:, 0], X[:, 1])
        out["extent"] = "inactive" if bool(np.all(ok)) else "violated"
        if self.line == "raised":
            zg = self.gr.z(P[:, 0], P[:, 1])
            h = P[:, 2] - zg
            bad = (h < self.c_min - 1e-6) | (h > self.c_max + 1e-6)
            near = (h < self.c_min + 1e-6) | (h > self.c_max - 1e-6)
            out["clearance"] = "violated" if bad[1:-1].any() else ("active" if near[1:-1].any() else "inactive")
        return out


def _keepout_status(P, fld, margin):
    """Vertices by signed distance, segments by shapely intersection with the geometry."""
    dist = fld(P[:, 0], P[:, 1])
    if np.any(dist < 0):
        return "violated"
    geom = fld.geometry
    if geom is not None:
        import shapely

        segs = shapely.linestrings(np.stack([P[:-1, :2], P[1:, :2]], axis=1))
        hit = shapely.intersects(geom, segs) & ~shapely.touches(geom, segs)
        if np.any(hit):
            return "violated"
    else:
        fr = np.linspace(0.0, 1.0, 9)
        X = (P[:-1, None, :2] * (1 - fr)[None, :, None] + P[1:, None, :2] * fr[None, :, None]).reshape(-1, 2)
        if np.any(fld(X[:, 0], X[:, 1]) < 0):
            return "violated"
    return "active" if float(np.min(dist)) < 2.0 * margin else "inactive"
