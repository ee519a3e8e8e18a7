"""Jitted kernel of :func:`fallway.physics.traverse` (flat arrays in, status out).

Model (per unit mass, DESIGN §3).  Along a polyline with unit segment directions
``T_j`` the squared speed ``u = v²`` obeys, with σ the distance along a segment::

    du/dσ = 2 b - 2 mu |N| - 2 k u,     b = g * drop / s   (gravity along the path)

``"gravity"`` model: ``|N| = |g_perp| = g * plan / s``; ``b`` and ``|N|`` are constant
on a straight segment and :func:`fallway._segment.segment_law` solves it exactly.

``"full"`` model: the **sharp-corner (channel) reading** of the polyline as it is:
the same exact straight-segment law on every segment, and at every interior vertex the
belt-friction (capstan) law of Euler–Eytelwein, ``v_out = v_in exp(-mu phi)``, ``phi``
the turn's friction angle (:func:`turn_angle`: the turning angle of a plan turn or a sag;
for a mixed turn the bed and the walls each take their part; a crest relieves the bed
instead, bounded in :func:`corner_v2`).  The bed carries gravity's normal part, the
walls the centripetal force, each with Coulomb friction: the continuous limit is ``|N| = |g_perp| + v²|kappa|``
(exact for a channel with a bed and side walls; a point mass on one banked surface would
see the smaller ``|v² kappa n - g_perp|``: this reading is the conservative one).  The
time is a property of the line's shape: a collinear vertex turns by 0 and changes
nothing, and no curvature is spread over segment lengths.  A line meant as a smooth
curve must be sampled densely where it bends (the route's refined line is, at <= 5° of
turn per vertex: :func:`fallway.geometry.round_corners`).

The loads at the vertices (normal load, lift-off) are not computed here: a profile
takes them from :func:`fallway.loads.line_loads`, the reading the limits use.

Ends: the line starts along its first segment and ends along its last (no turn at the
end vertices).  The speed at a vertex is the speed arriving there (before its corner).

Building blocks (all ``@njit(cache=True, nogil=True)``, scalars and flat arrays):
:func:`turn_angle` and :func:`corner_v2` (a corner's friction angle and its law),
:func:`segment_geometry` (unit directions and lengths of the segments), :func:`window_step`
(one segment from its window of vertices, for the refinement's adjoint) and
:func:`traverse_kernel` (a whole line).  Functions return status codes, never raise: callers translate them.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from ._segment import segment_law

#: Turning angles up to this (rad) are rounding noise of collinear points: straight.
_STRAIGHT_RAD = 1e-6


@njit(cache=True, nogil=True)
def segment_geometry(pts, tang, seg_len):
    """Unit segment directions and lengths: ``pts`` (M, 3) without repeated points;
    fills ``tang`` (M-1, 3) and ``seg_len`` (M-1)."""
    for j in range(pts.shape[0] - 1):
        dx = pts[j + 1, 0] - pts[j, 0]
        dy = pts[j + 1, 1] - pts[j, 1]
        dz = pts[j + 1, 2] - pts[j, 2]
        s = math.sqrt(dx * dx + dy * dy + dz * dz)
        seg_len[j] = s
        tang[j, 0] = dx / s
        tang[j, 1] = dy / s
        tang[j, 2] = dz / s


@njit(cache=True, nogil=True, inline="always")
def turn_angle(ax, ay, az, bx, by, bz):
    """Friction angle (rad) of a sharp corner from unit direction ``a`` to ``b``.

    The turning angle ``phi = atan2(|a x b|, a . b)`` (0 up to :data:`_STRAIGHT_RAD`,
    rounding noise of collinear points), split along the unit turn ``n = (b - a)/|b - a|``
    into its part across the bed, ``c = n . up`` with ``up`` the upward unit normal in the
    vertical plane of the bisector tangent, and its part against the walls,
    ``sqrt(1 - c²)``.  The corner's impulse ``v phi n`` is shared the same way, each part
    with Coulomb friction (a channel: bed and walls): the friction angle is
    ``phi (sqrt(1 - c²) + c)``.  A turn purely in plan (``c = 0``) or a sag (``c = 1``)
    gives the belt-friction (capstan) law of the whole turn, ``v_out = v_in exp(-mu
    phi)``; a crest (``c < 0``) relieves the bed (negative angle: bounded in
    :func:`corner_v2`; lift-off is judged apart).
    """
    cx = ay * bz - az * by
    cy = az * bx - ax * bz
    cz = ax * by - ay * bx
    phi = math.atan2(math.sqrt(cx * cx + cy * cy + cz * cz), ax * bx + ay * by + az * bz)
    if phi <= _STRAIGHT_RAD:
        return 0.0
    nx, ny, nz = bx - ax, by - ay, bz - az
    nn = math.sqrt(nx * nx + ny * ny + nz * nz)
    tx, ty, tz = ax + bx, ay + by, az + bz
    tn = math.sqrt(tx * tx + ty * ty + tz * tz)
    if nn <= 0.0 or tn <= 1e-12:
        return phi
    tx, ty, tz = tx / tn, ty / tn, tz / tn
    ux, uy, uz = -tz * tx, -tz * ty, 1.0 - tz * tz
    un = math.sqrt(ux * ux + uy * uy + uz * uz)
    if un <= 1e-12:  # a vertical tangent: no bed to relieve
        return phi
    nx, ny, nz = nx / nn, ny / nn, nz / nn
    ux, uy, uz = ux / un, uy / un, uz / un
    c = nx * ux + ny * uy + nz * uz
    # the wall share as the length of n's part across up (better conditioned than √(1 − c²))
    wx, wy, wz = nx - c * ux, ny - c * uy, nz - c * uz
    return phi * (math.sqrt(wx * wx + wy * wy + wz * wz) + c)


@njit(cache=True, nogil=True, inline="always")
def corner_v2(u, phi, mu, g, plan_a, plan_b):
    """Squared speed after a sharp corner of friction angle ``phi`` (:func:`turn_angle`).

    ``phi >= 0``: the capstan law, ``u e^(-2 mu phi)``.  ``phi < 0`` (a crest relieves
    the bed): a gain ``u (e^(2 mu |phi|) - 1)`` of ``v²`` up to ``cap``, the gravity-normal
    friction of half the straight runs either side, ``mu g (plan_a + plan_b)``
    (``plan_a``, ``plan_b``: plan lengths of the runs to the neighbouring corners, so
    collinear vertices change nothing); past the cap the bed force would change sign (the
    mover would lift off an open bed, ``v² kappa > g cos θ``), and an enclosed line's
    cover takes the excess with friction: ``u + min(gain, 2 cap - gain)``, the sharp
    limit of friction ``mu |g cos θ - v² kappa|`` over the crest.  :func:`window_step`
    (the refinement's window of vertices) takes the two adjoining segments as the runs.
    """
    if phi >= 0.0:
        return u * math.exp(-2.0 * mu * phi)
    gain = u * (math.exp(-2.0 * mu * phi) - 1.0)
    cap = mu * g * (plan_a + plan_b)
    # beyond the cap the bed force changes sign: an enclosed line's cover then presses
    # and takes friction again, |g cos θ - v² kappa| (an open line lifts off: judged apart)
    return max(u + min(gain, 2.0 * cap - gain), 0.0)


@njit(cache=True, nogil=True, inline="always")
def window_step(v2_in, Q, has_a, g, mu, k, eps_plan, v2_stall):
    """One segment of the full model (sharp-corner reading) from its window of vertices.

    ``Q`` (4, 3): vertices j-1, j, j+1, j+2 relative to vertex j (the refinement gathers
    one window shape for every segment); the segment runs from row 1 to row 2.  When
    ``has_a`` (vertex j is interior) the corner law of the turn at vertex j (from row 0-1
    to row 1-2) applies first, as in :func:`traverse_kernel`; row 3 does not enter.
    ``eps_plan`` > 0 smooths the plan length, ``sqrt(plan² + eps²)``.  Returns
    ``(v2_out, time_s, stall_at_m)`` as :func:`fallway._segment.segment_law`; a repeated
    vertex (no segment) returns ``(v2_in, 0, -1)``.
    """
    dx = Q[2, 0] - Q[1, 0]
    dy = Q[2, 1] - Q[1, 1]
    dz = Q[2, 2] - Q[1, 2]
    s = math.sqrt(dx * dx + dy * dy + dz * dz)
    if s <= 1e-12:
        return v2_in, 0.0, -1.0
    drop = -dz
    # from dx, dy: sqrt(s² - drop²) cancels on a near-vertical segment
    plan = math.sqrt(dx * dx + dy * dy + eps_plan * eps_plan)
    u = v2_in
    if has_a:
        ex, ey, ez = Q[1, 0] - Q[0, 0], Q[1, 1] - Q[0, 1], Q[1, 2] - Q[0, 2]
        so = math.sqrt(ex * ex + ey * ey + ez * ez)
        if so > 1e-12:
            phi = turn_angle(ex / so, ey / so, ez / so, dx / s, dy / s, dz / s)
            u = corner_v2(u, phi, mu, g, math.sqrt(ex * ex + ey * ey), plan)
    return segment_law(u, drop, plan, s, g, mu, k, v2_stall)


@njit(cache=True, nogil=True)
def traverse_kernel(pts, g, mu, k, v2_0, v2_stall, full, station, v2, time, grade, v2_mid, v2_dep):
    """Speed along a polyline without repeated points; fills the output arrays.

    Outputs (length M unless noted): ``station`` (m), ``v2`` (m²/s², NaN after a
    stall), ``time`` (s, NaN after a stall), ``grade`` (descent grade of the segment
    leaving each vertex), ``v2_mid`` (M-1, squared speed at each segment's midpoint, full
    model; NaN otherwise), ``v2_dep`` (squared speed leaving each vertex: after the corner
    law at an interior vertex in the full model, else equal to ``v2``; NaN after a stall).
    The loads at the vertices (normal load, lift-off) are not the kernel's: they are
    :func:`fallway.loads.line_loads`' reading of the line and its speeds.

    Returns the stall station (m), or -1.0 when the mover reaches the end.
    """
    m = pts.shape[0]
    nseg = m - 1
    tang = np.empty((nseg, 3))
    seg_len = np.empty(nseg)
    segment_geometry(pts, tang, seg_len)
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

    # corners: friction angle at each interior vertex, and the plan length of the straight
    # runs either side of it (up to the next corner: collinear vertices do not end a run)
    phi_c = np.zeros(m)
    run_before = np.zeros(m)
    run_after = np.zeros(m)
    if full:
        for i in range(1, m - 1):
            phi_c[i] = turn_angle(tang[i - 1, 0], tang[i - 1, 1], tang[i - 1, 2], tang[i, 0], tang[i, 1], tang[i, 2])
        acc = 0.0
        for i in range(1, m):
            acc += seg_len[i - 1] * math.hypot(tang[i - 1, 0], tang[i - 1, 1])   # plan length, no cancellation
            run_before[i] = acc
            if phi_c[i] != 0.0:
                acc = 0.0
        acc = 0.0
        for i in range(m - 2, -1, -1):
            acc += seg_len[i] * math.hypot(tang[i, 0], tang[i, 1])
            run_after[i] = acc
            if phi_c[i] != 0.0:
                acc = 0.0

    v2[0] = v2_0
    time[0] = 0.0
    stall = -1.0
    last = m - 1  # last vertex with a defined speed
    for j in range(nseg):
        s = seg_len[j]
        drop = pts[j, 2] - pts[j + 1, 2]
        # from dx, dy: sqrt(s² - drop²) cancels on a near-vertical segment
        plan = math.hypot(pts[j + 1, 0] - pts[j, 0], pts[j + 1, 1] - pts[j, 1])
        if not full:
            v2_dep[j] = v2[j]
            u, t, at = segment_law(v2[j], drop, plan, s, g, mu, k, v2_stall)
            if at >= 0.0:
                stall = station[j] + at
                last = j
                break
        else:
            # sharp-corner reading: the belt-friction (capstan) law for the turn at the
            # vertex the segment leaves from, then the exact straight-segment law
            u0 = v2[j]
            if j >= 1:
                u0 = corner_v2(u0, phi_c[j], mu, g, run_before[j], run_after[j])
            v2_dep[j] = u0
            u, t, at = segment_law(u0, drop, plan, s, g, mu, k, v2_stall)
            if at >= 0.0:
                stall = station[j] + at
                last = j
                break
            um, _, _ = segment_law(u0, 0.5 * drop, 0.5 * plan, 0.5 * s, g, mu, k, 0.0)
            v2_mid[j] = um
        v2[j + 1] = u
        time[j + 1] = time[j] + t
    for i in range(last + 1, m):
        v2[i] = math.nan
        time[i] = math.nan
        v2_dep[i] = math.nan
    if stall < 0.0:
        v2_dep[m - 1] = v2[m - 1]

    return stall
