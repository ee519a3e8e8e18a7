"""Compiled chains of the refinement: travel time, penalties and their adjoint gradients.

Gravity-normal model (:func:`gravity_chain`).  The time of a polyline is the chain of
closed-form straight segments (:func:`fallway._segment.segment_law`)::

    T = Σ t_j(u_j, g_j),    u_{j+1} = F_j(u_j, g_j),    u = v²,

g_j the segment geometry (drop, plan length, length).  Its gradient comes from one reverse
(adjoint) pass, O(N)::

    λ_j = ∂t_j/∂u_j + λ_{j+1} ∂F_j/∂u_j,    ∂T/∂g_j = ∂t_j/∂g_j + λ_{j+1} ∂F_j/∂g_j,

with the local partials of each segment in closed form.

Full normal-force model (:func:`full_chain`): the segment recursion of
:func:`fallway._traverse.traverse_kernel` forward, its adjoint in reverse; each segment
step (:func:`fallway._traverse.window_step`) depends on three vertices (its ends and,
through the corner at its start, the vertex before it); the local partials of one step
are central differences in the segment's frame, the chain is exact.

Both extend the motion continuously past a stall (the exit speed clamped to a floor and
the shortfall penalised), so a line search can step back from it.  :func:`ground_fg` is
the whole objective of a ground line without geometric limits in one pass over the
compiled smooth surface.  Kernels take flat arrays and scalars and never raise.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from .._segment import segment_law
from .._surface import surface_eval
from .._traverse import window_step

__all__ = ["gravity_chain", "full_step", "full_chain", "ground_fg"]


# ---------------------------------------------------------------------------------------
# the chain of segments and its reverse pass


@njit(cache=True, nogil=True)
def gravity_chain(P, u0, g, mu, k, eps_plan, u_floor, w_pen, u_max, u_stall):
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
        if k <= 0.0 or ks < 1e-12:  # (k = 0: never divide by it, whatever the geometry)
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
def full_step(u, Q, has_a, g, mu, k, eps_plan, u_floor, w_stall):
    """One segment of the full model from its window of vertices
    (:func:`fallway._traverse.window_step`), with a continuous extension past a stall
    for the optimiser: the exit speed clamped to ``u_floor``, the time of a constant
    deceleration, and a penalty on the part of the segment not reached, so a line search
    can step back from it.  Returns ``(v2_out, time_s, stall_at_m)``."""
    un, t, at = window_step(u, Q, has_a, g, mu, k, eps_plan, 0.0)
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
def gather(P, j, Q):
    """Rows of ``Q``: vertices j-1 .. j+2 relative to vertex j (rows past an end untouched)."""
    n = P.shape[0]
    for r in range(4):
        i = j - 1 + r
        if 0 <= i < n:
            for c in range(3):
                Q[r, c] = P[i, c] - P[j, c]


@njit(cache=True, nogil=True)
def full_chain(P, u0, g, mu, k, w_pen, u_max, u_stall, want_grad, eps_plan=0.0, u_floor=0.0, w_stall=0.0):
    """Full-model travel time of the polyline P (N, 3), speed penalties and the gradient.

    Forward: the segment recursion of ``traverse_kernel`` (full model).  Reverse: the
    adjoint of that recursion, ``λ_j = ∂t_j/∂u_j + λ_{j+1} ∂u_{j+1}/∂u_j`` and
    ``∂T/∂P += ∂t_j/∂P + λ_{j+1} ∂u_{j+1}/∂P`` over the three vertices each segment
    depends on (its ends and, through the corner at its start, the vertex before it;
    the window's fourth row does not enter); the local partials of one segment step are central differences in
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
        gather(P, j, Q)
        un, t, at = full_step(u[j], Q, has_a, g, mu, k, eps_plan, u_floor, w_stall)
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
        gather(P, j, Q)
        s = math.sqrt((Q[2, 0] - Q[1, 0]) ** 2 + (Q[2, 1] - Q[1, 1]) ** 2 + (Q[2, 2] - Q[1, 2]) ** 2)
        if s <= 1e-12:
            lam = lam + du_dpen[j]
            continue
        h = 1e-6 * s
        for r in range(4):
            if (r == 0 and not has_a) or r == 3:  # row 3 does not enter a sharp-corner step
                continue
            for c in range(3):
                for q in range(4):
                    for cc in range(3):
                        Qp[q, cc] = Q[q, cc]
                Qp[r, c] = Q[r, c] + h
                up, tp, ap = full_step(u[j], Qp, has_a, g, mu, k, eps_plan, u_floor, w_stall)
                Qp[r, c] = Q[r, c] - h
                um, tm, am = full_step(u[j], Qp, has_a, g, mu, k, eps_plan, u_floor, w_stall)
                if (ap >= 0.0 or am >= 0.0) and u_floor <= 0.0:
                    continue
                grad[j - 1 + r, c] += ((tp - tm) + lam * (up - um)) / (2.0 * h)
        gu = 0.0
        if j >= 1:
            hu = 1e-6 * u[j]
            if hu > 0.0:
                up, tp, ap = full_step(u[j] + hu, Q, has_a, g, mu, k, eps_plan, u_floor, w_stall)
                um, tm, am = full_step(u[j] - hu, Q, has_a, g, mu, k, eps_plan, u_floor, w_stall)
                if (ap < 0.0 and am < 0.0) or u_floor > 0.0:
                    gu = ((tp - tm) + lam * (up - um)) / (2.0 * hu)
        lam = gu + du_dpen[j]
    return T, pen, grad, u, not stalled


# ---------------------------------------------------------------------------------------
# a ground line's objective in one compiled pass


@njit(cache=True, nogil=True)
def ground_fg(X, e0, e1, tab, u0, g, mu, k, eps_plan, u_floor, w_pen, u_max, u_stall):
    """``Problem.fg`` of a ground line without geometric limits, in one compiled pass:
    vertices on the smooth surface (``tab``: :class:`fallway._surface.SurfaceTables`),
    the segment chain and the gradient in (x, y).  Returns ``(f, grad, missing)``;
    ``missing``: a tile of the surface is not built yet."""
    m = X.shape[0] // 2
    n = m + 2
    xs = np.empty(m)
    ys = np.empty(m)
    for i in range(m):
        xs[i] = X[2 * i]
        ys[i] = X[2 * i + 1]
    R = (ys - tab.f0) / tab.e - 0.5
    C = (xs - tab.c0) / tab.a - 0.5
    Z, DR, DC, missing = surface_eval(tab, R, C, True)
    out = np.zeros(X.shape[0])
    if missing:
        return 1e30, out, True
    P = np.empty((n, 3))
    for c in range(3):
        P[0, c] = e0[c]
        P[n - 1, c] = e1[c]
    for i in range(m):
        P[i + 1, 0] = xs[i]
        P[i + 1, 1] = ys[i]
        P[i + 1, 2] = Z[i]
    for i in range(n):
        for c in range(3):
            if not math.isfinite(P[i, c]):
                return 1e30, out, False
    T, pen, G, _ = gravity_chain(P, u0, g, mu, k, eps_plan, u_floor, w_pen, u_max, u_stall)
    f = T + pen
    if not math.isfinite(f):
        return 1e30, out, False
    for i in range(m):
        gx = DC[i] / tab.a
        gy = DR[i] / tab.e
        out[2 * i] = G[i + 1, 0] + G[i + 1, 2] * gx
        out[2 * i + 1] = G[i + 1, 1] + G[i + 1, 2] * gy
    return f, out, False
