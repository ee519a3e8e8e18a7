"""Jitted straight-segment motion law (the hot kernel shared by physics and the lattice).

Conventions (DESIGN §3): specific quantities per unit mass; ``v2`` is the squared speed
(m²/s²); a segment has drop ``drop_m`` (positive when the end is lower), plan length
``plan_m`` and 3D length ``length_m``.  With the gravity-normal friction model the
along-path acceleration without drag is constant on the segment::

    a = g (drop - mu * plan) / length

and with quadratic drag ``k v²`` (k in 1/m) the squared speed obeys the linear ODE
``d(v²)/dσ = 2a - 2k v²``, solved in closed form here.

The mover *stalls* where it is slowing down and its squared speed falls below
``v2_stall`` (for ``v2_stall = 0``: where it would come to rest).  Starting below the
stall speed while accelerating (a start from rest) is not a stall.

Functions return status codes, never raise: callers translate them.
"""

from __future__ import annotations

import math

from numba import njit

#: Below this value of k·s the drag-free formulas are used (relative error < 1e-12).
_TINY_KS = 1e-12


@njit(cache=True, nogil=True)
def segment_law(v2_in, drop_m, plan_m, length_m, g, mu, k, v2_stall):
    """Squared exit speed, time and stall position on one straight segment.

    Returns
    -------
    (v2_out, time_s, stall_at_m)
        ``stall_at_m < 0`` when the mover gets through; otherwise the distance along
        the segment where it stalls, with ``v2_out = 0`` and ``time_s = inf``.
    """
    s = length_m
    if s <= 0.0:
        return v2_in, 0.0, -1.0
    if v2_in < 0.0:
        v2_in = 0.0
    a = g * (drop_m - mu * plan_m) / s
    ks = k * s
    drag = ks >= _TINY_KS
    # squared exit speed
    if drag:
        c = a / k
        ex = math.exp(-2.0 * ks)
        v2_out = v2_in * ex - c * math.expm1(-2.0 * ks)
    else:
        c = 0.0
        v2_out = v2_in + 2.0 * a * s
    # stall: decelerating below the stall speed (or no motion at all)
    if v2_in <= 0.0 and a <= 0.0:
        return 0.0, math.inf, 0.0
    if v2_out < v2_in and v2_out < v2_stall:
        if v2_in <= v2_stall:
            return 0.0, math.inf, 0.0
        if drag:
            sig = math.log((v2_in - c) / (v2_stall - c)) / (2.0 * k)
        else:
            sig = (v2_in - v2_stall) / (-2.0 * a)
        if sig < 0.0:
            sig = 0.0
        if sig > s:
            sig = s
        return 0.0, math.inf, sig
    if v2_out < 0.0:
        v2_out = 0.0
    va = math.sqrt(v2_in)
    vb = math.sqrt(v2_out)
    if not drag:
        return v2_out, 2.0 * s / (va + vb), -1.0
    if a > 0.0:
        vt = math.sqrt(c)
        if va <= vt:
            # accelerating towards (or at) the terminal speed: both terms positive
            t = s / vt + math.log1p((vb - va) / (vt + va)) / (k * vt)
        else:
            # above the terminal speed: artanh(vt/vb) - artanh(vt/va) folded into one
            # artanh so that a tiny terminal speed (a -> 0+) does not cancel.
            dv = -(v2_in - c) * math.expm1(-2.0 * ks) / (va + vb)
            den = vb * dv + (v2_in - c) * math.exp(-2.0 * ks)
            arg = vt * dv / den
            if arg < 1e-6:
                t = dv / (k * den) * (1.0 + arg * arg / 3.0)
            elif arg < 0.5:
                t = math.atanh(arg) / (k * vt)
            else:
                # settled at the terminal speed (k s large: vb - vt underflows and the
                # artanh reaches 1): t = s/vt + ln((vb + vt)/(va + vt))/(k vt), the same
                # closed form as below the terminal speed; no cancellation here, since
                # s/vt dominates the (negative) log term.
                t = s / vt + math.log1p((vb - va) / (vt + va)) / (k * vt)
    elif a < 0.0:
        w = math.sqrt(-c)
        t = math.atan2((va - vb) * w, w * w + va * vb) / (k * w)
    else:
        t = math.expm1(ks) / (k * va)
    return v2_out, t, -1.0
