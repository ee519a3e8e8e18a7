"""Jitted kernel of :func:`fallway.physics.traverse` (flat arrays in, status out).

Model (per unit mass, DESIGN §3).  Along a polyline with unit segment directions
``T_j`` the squared speed ``u = v²`` obeys, with σ the distance along a segment::

    du/dσ = 2 b - 2 mu |N| - 2 k u,     b = g * drop / s   (gravity along the path)

``"gravity"`` model: ``|N| = |g_perp| = g * plan / s``; ``b`` and ``|N|`` are constant
on a straight segment and :func:`fallway._segment.segment_law` solves it exactly.

``"full"`` model: ``N = u * kappa * n - g_perp`` (the force the line must supply: the
centripetal part plus gravity's cross component).  The curvature is discrete: at each
interior vertex i with turning angle ``phi_i`` between ``T_{i-1}`` and ``T_i``
(``atan2(|T_{i-1} x T_i|, T_{i-1} . T_i)``) the curvature vector is
``kappa_i n_i`` with ``|kappa_i| = phi_i / l_i``, ``l_i = (s_{i-1} + s_i) / 2`` and
``n_i`` the unit vector along ``T_i - T_{i-1}``.  It acts on the half-segments either
side of vertex i, so the integral of kappa over the bend is exactly ``phi_i``: a dense
polyline along a smooth curve converges to the continuous answer, and a short sharp
corner (centripetal part dominant) gives the belt-friction law
``v_out = v_in * exp(-mu * phi)``.  Each half-segment carries constant coefficients
(``b``, ``kappa²``, ``kappa n . g_perp``, ``|g_perp|²``), so ``u`` obeys an autonomous
scalar ODE there; it is integrated with classical RK4 in σ, the number of substeps set
from the stiffness ``(2 mu |kappa| + 2 k) * length`` (about 0.1 per substep, at least
one); the time of each substep is ``2 h / (v_a + v_b)`` (exact for constant
acceleration) improved by Richardson extrapolation over the two halves split at the
Hermite midpoint.  Turning angles below 1e-12 rad count as straight.  A half-segment
without curvature uses the exact segment law.  Everything is deterministic: no
adaptivity that depends on floating-point noise.

Ends: the line starts along its first segment and ends along its last (no curvature at
the end vertices).  A smooth curve sampled with angular step dθ therefore loses the
half-step of turning at each end, a bend of dθ in all: at most a factor exp(-mu dθ) on
the speed, first order in the spacing but confined to the ends; the interior is second
order.

Building blocks (all ``@njit(cache=True, nogil=True)``, scalars and flat arrays):
:func:`vertex_turn` (the discrete curvature at one vertex), :func:`vertex_geometry`
(directions, lengths, curvature per vertex), :func:`bend_kdg`, :func:`half_step`,
:func:`full_segment_step` (one segment of the full model), :func:`window_step` (one
segment from its four-vertex window, for the refinement's adjoint),
:func:`curved_step` and :func:`normal_rate` (the ODE), and :func:`traverse_kernel` (a
whole line).  Functions return status codes, never raise: callers translate them.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from ._segment import segment_law

#: Target stiffness (change of ln u) per RK4 substep.
_STEP_STIFFNESS = 0.1
#: Turning angles up to this (rad) are rounding noise of collinear points: straight.
_STRAIGHT_RAD = 1e-12
#: Upper bound on RK4 substeps per half-segment.
_MAX_SUBSTEPS = 256


@njit(cache=True, nogil=True)
def normal_rate(u, b, kappa2, kdg, gperp2, mu, k):
    """d(v²)/dσ on a half-segment of the full model at squared speed ``u``.

    ``|N|² = u² kappa2 - 2 u kdg + gperp2`` with ``kdg = kappa * n . g_perp``.
    """
    if u < 0.0:
        u = 0.0
    n2 = u * u * kappa2 - 2.0 * u * kdg + gperp2
    if n2 < 0.0:
        n2 = 0.0
    return 2.0 * b - 2.0 * mu * math.sqrt(n2) - 2.0 * k * u


@njit(cache=True, nogil=True)
def _rk4(u, h, b, kappa2, kdg, gperp2, mu, k):
    k1 = normal_rate(u, b, kappa2, kdg, gperp2, mu, k)
    k2 = normal_rate(u + 0.5 * h * k1, b, kappa2, kdg, gperp2, mu, k)
    k3 = normal_rate(u + 0.5 * h * k2, b, kappa2, kdg, gperp2, mu, k)
    k4 = normal_rate(u + h * k3, b, kappa2, kdg, gperp2, mu, k)
    return u + h * (k1 + 2.0 * k2 + 2.0 * k3 + k4) / 6.0


@njit(cache=True, nogil=True)
def curved_step(v2_in, length_m, b, kappa2, kdg, gperp2, mu, k, v2_stall):
    """Squared exit speed, time and stall position on one curved half-segment.

    Parameters are per unit mass: ``b = g * drop / length`` (gravity along the path,
    m/s²), ``kappa2 = kappa²`` (1/m²), ``kdg = kappa * n . g_perp`` (m/s² per m),
    ``gperp2 = |g_perp|²``; ``mu`` Coulomb coefficient, ``k`` drag (1/m),
    ``v2_stall`` the squared stall speed.

    Returns
    -------
    (v2_out, time_s, stall_at_m)
        As :func:`fallway._segment.segment_law`: ``stall_at_m < 0`` when the mover gets
        through, otherwise the distance where it stalls, ``v2_out = 0``, ``time_s = inf``.
    """
    if length_m <= 0.0:
        return v2_in, 0.0, -1.0
    u = v2_in if v2_in > 0.0 else 0.0
    f0 = normal_rate(u, b, kappa2, kdg, gperp2, mu, k)
    if u <= 0.0 and f0 <= 0.0:
        return 0.0, math.inf, 0.0
    if f0 < 0.0 and u <= v2_stall:
        return 0.0, math.inf, 0.0
    stiff = (2.0 * mu * math.sqrt(kappa2) + 2.0 * k) * length_m
    n = 1 + int(stiff / _STEP_STIFFNESS)
    if n > _MAX_SUBSTEPS:
        n = _MAX_SUBSTEPS
    h = length_m / n
    t = 0.0
    fa = f0
    for i in range(n):
        un = _rk4(u, h, b, kappa2, kdg, gperp2, mu, k)
        if un < u and un < v2_stall:
            # stall inside this substep: bisect on the RK4 step length
            lo = 0.0
            hi = h
            for _ in range(60):
                mid = 0.5 * (lo + hi)
                if _rk4(u, mid, b, kappa2, kdg, gperp2, mu, k) < v2_stall:
                    hi = mid
                else:
                    lo = mid
            return 0.0, math.inf, i * h + 0.5 * (lo + hi)
        if un < 0.0:
            un = 0.0
        fb = normal_rate(un, b, kappa2, kdg, gperp2, mu, k)
        # time: 2h/(va + vb) is exact for constant acceleration; Richardson with the two
        # halves split at the Hermite midpoint raises it to fourth order
        va = math.sqrt(u)
        vb = math.sqrt(un)
        um = 0.5 * (u + un) + 0.125 * h * (fa - fb)
        vm = math.sqrt(um) if um > 0.0 else 0.0
        t1 = 2.0 * h / (va + vb)
        t2 = h / (va + vm) + h / (vm + vb)
        t += (4.0 * t2 - t1) / 3.0
        u = un
        fa = fb
    return u, t, -1.0


@njit(cache=True, nogil=True)
def half_step(v2_in, length_m, drop_m, plan_m, kappa2, kdg, g, mu, k, v2_stall):
    """One half-segment of the full model: exact law when straight, RK4 when curved.

    ``length_m``, ``drop_m`` and ``plan_m`` are the half-segment's own (half the
    segment's); ``kappa2`` and ``kdg`` as in :func:`curved_step`.  Same return as
    :func:`curved_step`.  This is the per-step building block the refinement reuses.
    """
    if kappa2 <= 0.0:
        return segment_law(v2_in, drop_m, plan_m, length_m, g, mu, k, v2_stall)
    b = g * drop_m / length_m
    gperp2 = (g * plan_m / length_m) ** 2
    return curved_step(v2_in, length_m, b, kappa2, kdg, gperp2, mu, k, v2_stall)


@njit(cache=True, nogil=True)
def vertex_geometry(pts, tang, seg_len, kappa, normal):
    """Unit segment directions, lengths and discrete curvature vectors at vertices.

    ``pts`` (M, 3) without repeated points; fills ``tang`` (M-1, 3), ``seg_len``
    (M-1), ``kappa`` (M) (``phi_i / l_i``, 0 at the ends and where straight) and
    ``normal`` (M, 3) (unit ``T_i - T_{i-1}``, zeros where straight).
    """
    m = pts.shape[0]
    for j in range(m - 1):
        dx = pts[j + 1, 0] - pts[j, 0]
        dy = pts[j + 1, 1] - pts[j, 1]
        dz = pts[j + 1, 2] - pts[j, 2]
        s = math.sqrt(dx * dx + dy * dy + dz * dz)
        seg_len[j] = s
        tang[j, 0] = dx / s
        tang[j, 1] = dy / s
        tang[j, 2] = dz / s
    kappa[0] = 0.0
    kappa[m - 1] = 0.0
    for c in range(3):
        normal[0, c] = 0.0
        normal[m - 1, c] = 0.0
    for i in range(1, m - 1):
        kappa[i], normal[i, 0], normal[i, 1], normal[i, 2] = vertex_turn(
            tang[i - 1, 0], tang[i - 1, 1], tang[i - 1, 2], tang[i, 0], tang[i, 1], tang[i, 2],
            0.5 * (seg_len[i - 1] + seg_len[i]))


@njit(cache=True, nogil=True, inline="always")
def vertex_turn(ax, ay, az, bx, by, bz, mean_len):
    """Discrete curvature at a vertex where the unit direction turns from ``a`` to ``b``.

    The turning angle ``phi = atan2(|a x b|, a . b)`` spread over ``mean_len`` (the mean
    of the two adjoining segment lengths).  Returns ``(kappa, nx, ny, nz)``: ``kappa =
    phi / mean_len`` and ``n`` the unit vector along ``b - a``; all zero where straight
    (``phi`` up to :data:`_STRAIGHT_RAD`).  The one measure of the full model's bends,
    used by :func:`vertex_geometry` and :func:`window_step`.
    """
    cx = ay * bz - az * by
    cy = az * bx - ax * bz
    cz = ax * by - ay * bx
    phi = math.atan2(math.sqrt(cx * cx + cy * cy + cz * cz), ax * bx + ay * by + az * bz)
    nx, ny, nz = bx - ax, by - ay, bz - az
    nn = math.sqrt(nx * nx + ny * ny + nz * nz)
    if phi <= _STRAIGHT_RAD or nn <= 0.0:
        return 0.0, 0.0, 0.0, 0.0
    return phi / mean_len, nx / nn, ny / nn, nz / nn


@njit(cache=True, nogil=True)
def bend_kdg(kappa, nx, ny, nz, tx, ty, tz, g):
    """``kappa * n . g_perp`` for curvature ``kappa`` along unit ``n`` on a segment of unit
    direction ``t``; gravity ``(0, 0, -g)``, ``g_perp = g_vec - (g_vec . t) t``."""
    gpx = g * tz * tx
    gpy = g * tz * ty
    gpz = -g + g * tz * tz
    return kappa * (nx * gpx + ny * gpy + nz * gpz)


@njit(cache=True, nogil=True)
def full_segment_step(v2_in, drop_m, plan_m, length_m, kappa_a, kdg_a, kappa_b, kdg_b, g, mu, k,
                      v2_stall):
    """One whole segment of the full model: two half-steps with the curvature of the
    vertex at each end.

    ``kappa_a``/``kappa_b`` are the discrete curvatures of the start/end vertex
    (``phi / l``, see :func:`vertex_geometry`), ``kdg_a``/``kdg_b`` their
    :func:`bend_kdg` with this segment's direction.  This is the per-segment step the
    refinement reuses (e.g. for finite-difference or adjoint gradients).

    Returns
    -------
    (v2_out, time_s, stall_at_m, v2_mid)
        As :func:`fallway._segment.segment_law`, plus the squared speed at the
        segment's midpoint (0 when the mover stalls in the first half).
    """
    h = 0.5 * length_m
    u, t1, at = half_step(v2_in, h, 0.5 * drop_m, 0.5 * plan_m, kappa_a * kappa_a, kdg_a, g, mu, k,
                          v2_stall)
    if at >= 0.0:
        return 0.0, math.inf, at, 0.0
    um = u
    u, t2, at = half_step(um, h, 0.5 * drop_m, 0.5 * plan_m, kappa_b * kappa_b, kdg_b, g, mu, k,
                          v2_stall)
    if at >= 0.0:
        return 0.0, math.inf, h + at, um
    return u, t1 + t2, -1.0, um


@njit(cache=True, nogil=True, inline="always")
def window_step(v2_in, Q, has_a, has_b, g, mu, k, eps_plan, v2_stall):
    """One segment of the full model from its window of four vertices.

    ``Q`` (4, 3): vertices j-1, j, j+1, j+2 relative to vertex j; the segment runs from
    row 1 to row 2, and rows 0 / 3 give the curvature at its start / end vertex when
    ``has_a`` / ``has_b`` (the vertex is interior).  The same geometry as
    :func:`traverse_kernel` (:func:`vertex_turn`, :func:`bend_kdg`) for a per-segment
    caller (the refinement's adjoint perturbs one window at a time).  ``eps_plan`` > 0
    smooths the plan length, ``sqrt(plan² + eps²)``.  Returns ``(v2_out, time_s,
    stall_at_m)`` as :func:`full_segment_step`; a repeated vertex (no segment) returns
    ``(v2_in, 0, -1)``.
    """
    dx = Q[2, 0] - Q[1, 0]
    dy = Q[2, 1] - Q[1, 1]
    dz = Q[2, 2] - Q[1, 2]
    s = math.sqrt(dx * dx + dy * dy + dz * dz)
    if s <= 1e-12:
        return v2_in, 0.0, -1.0
    tx, ty, tz = dx / s, dy / s, dz / s
    drop = -dz
    plan = math.sqrt(max(s * s - drop * drop, 0.0) + eps_plan * eps_plan)
    ka = 0.0
    kdg_a = 0.0
    kb = 0.0
    kdg_b = 0.0
    for side in range(2):
        if (side == 0 and not has_a) or (side == 1 and not has_b):
            continue
        if side == 0:
            ex, ey, ez = Q[1, 0] - Q[0, 0], Q[1, 1] - Q[0, 1], Q[1, 2] - Q[0, 2]
        else:
            ex, ey, ez = Q[3, 0] - Q[2, 0], Q[3, 1] - Q[2, 1], Q[3, 2] - Q[2, 2]
        so = math.sqrt(ex * ex + ey * ey + ez * ez)
        if so <= 1e-12:
            continue
        ox, oy, oz = ex / so, ey / so, ez / so
        # a: turn from the previous direction o to t; b: from t to the next direction o
        if side == 0:
            kap, nx, ny, nz = vertex_turn(ox, oy, oz, tx, ty, tz, 0.5 * (so + s))
        else:
            kap, nx, ny, nz = vertex_turn(tx, ty, tz, ox, oy, oz, 0.5 * (so + s))
        if kap <= 0.0:
            continue
        kdg = bend_kdg(kap, nx, ny, nz, tx, ty, tz, g)
        if side == 0:
            ka, kdg_a = kap, kdg
        else:
            kb, kdg_b = kap, kdg
    un, t, at, _ = full_segment_step(v2_in, drop, plan, s, ka, kdg_a, kb, kdg_b, g, mu, k, v2_stall)
    return un, t, at


@njit(cache=True, nogil=True)
def traverse_kernel(pts, g, mu, k, v2_0, v2_stall, full, station, v2, time, grade,
                    normal_ratio, lift, v2_mid, surf, has_surf):
    """Speed along a polyline without repeated points; fills the output arrays.

    Outputs (length M unless noted): ``station`` (m), ``v2`` (m²/s², NaN after a
    stall), ``time`` (s, NaN after a stall), ``grade`` (descent grade of the segment
    leaving each vertex), ``normal_ratio`` (N/g; NaN after a stall in the full model),
    ``lift`` (1 where an open chute would lift off, 0 otherwise), ``v2_mid`` (M-1,
    squared speed at each segment's midpoint, full model; NaN otherwise).

    ``surf`` (M, 3): the upward unit normal of the surface the line lies on (the
    ground), used for lift-off when ``has_surf``; otherwise lift-off is judged against
    the up direction in the vertical plane of the tangent.

    Returns the stall station (m), or -1.0 when the mover reaches the end.
    """
    m = pts.shape[0]
    nseg = m - 1
    tang = np.empty((nseg, 3))
    seg_len = np.empty(nseg)
    kappa = np.empty(m)
    normal = np.empty((m, 3))
    vertex_geometry(pts, tang, seg_len, kappa, normal)
    station[0] = 0.0
    for j in range(nseg):
        station[j + 1] = station[j] + seg_len[j]
    for j in range(nseg):
        dz = pts[j, 2] - pts[j + 1, 2]
        dx = pts[j + 1, 0] - pts[j, 0]
        dy = pts[j + 1, 1] - pts[j, 1]
        plan = math.sqrt(dx * dx + dy * dy)
        grade[j] = dz / plan if plan > 0.0 else (math.inf if dz > 0 else -math.inf)
        v2_mid[j] = math.nan
    grade[m - 1] = grade[m - 2]

    v2[0] = v2_0
    time[0] = 0.0
    stall = -1.0
    last = m - 1  # last vertex with a defined speed
    for j in range(nseg):
        s = seg_len[j]
        drop = pts[j, 2] - pts[j + 1, 2]
        plan = math.sqrt(max(s * s - drop * drop, 0.0))
        if not full:
            u, t, at = segment_law(v2[j], drop, plan, s, g, mu, k, v2_stall)
            if at >= 0.0:
                stall = station[j] + at
                last = j
                break
        else:
            tx, ty, tz = tang[j, 0], tang[j, 1], tang[j, 2]
            ka = kappa[j]
            kb = kappa[j + 1]
            kdg_a = bend_kdg(ka, normal[j, 0], normal[j, 1], normal[j, 2], tx, ty, tz, g)
            kdg_b = bend_kdg(kb, normal[j + 1, 0], normal[j + 1, 1], normal[j + 1, 2], tx, ty, tz, g)
            u, t, at, um = full_segment_step(v2[j], drop, plan, s, ka, kdg_a, kb, kdg_b, g, mu, k,
                                             v2_stall)
            if at >= 0.0:
                stall = station[j] + at
                last = j
                break
            v2_mid[j] = um
        v2[j + 1] = u
        time[j + 1] = time[j] + t
    for i in range(last + 1, m):
        v2[i] = math.nan
        time[i] = math.nan

    # normal force ratio and lift-off at the vertices
    for i in range(m):
        lift[i] = 0
        # tangent at the vertex: bisector of the adjacent segment directions
        if i == 0:
            tx, ty, tz = tang[0, 0], tang[0, 1], tang[0, 2]
        elif i == m - 1:
            tx, ty, tz = tang[nseg - 1, 0], tang[nseg - 1, 1], tang[nseg - 1, 2]
        else:
            tx = tang[i - 1, 0] + tang[i, 0]
            ty = tang[i - 1, 1] + tang[i, 1]
            tz = tang[i - 1, 2] + tang[i, 2]
            tn = math.sqrt(tx * tx + ty * ty + tz * tz)
            if tn > 1e-12:
                tx, ty, tz = tx / tn, ty / tn, tz / tn
            else:
                tx, ty, tz = tang[i, 0], tang[i, 1], tang[i, 2]
        # up normal in the vertical plane of the tangent and its length (= cos slope)
        upx = -tz * tx
        upy = -tz * ty
        upz = 1.0 - tz * tz
        upn = math.sqrt(upx * upx + upy * upy + upz * upz)
        # g_perp = -g * up (unnormalised)
        if not full:
            jj = i if i < nseg else nseg - 1
            normal_ratio[i] = math.sqrt(max(1.0 - tang[jj, 2] ** 2, 0.0))
        else:
            u = v2[i]
            ckx = u * kappa[i] * normal[i, 0] + g * upx
            cky = u * kappa[i] * normal[i, 1] + g * upy
            ckz = u * kappa[i] * normal[i, 2] + g * upz
            normal_ratio[i] = math.sqrt(ckx * ckx + cky * cky + ckz * ckz) / g
        if kappa[i] > 0.0 and upn > 1e-12 and i <= last:
            if has_surf:
                # component of the supplied force along the surface normal: a bend in the
                # plane of the ground (a plan turn on a slope) never lifts the mass off
                ax, ay, az = surf[i, 0], surf[i, 1], surf[i, 2]
            else:
                ax, ay, az = upx / upn, upy / upn, upz / upn
            nup = (v2[i] * kappa[i] * (normal[i, 0] * ax + normal[i, 1] * ay + normal[i, 2] * az)
                   + g * (upx * ax + upy * ay + upz * az))
            if nup < 0.0:
                lift[i] = 1
    return stall
