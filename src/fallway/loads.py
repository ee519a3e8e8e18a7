"""Loads along a line: bend curvature, lateral acceleration, normal load and lift-off.

The *smooth reading* of a polyline: at each interior vertex the curve is the circle through
the vertex and its two neighbours (the circumcircle, Menger curvature), so a line sampled
along an arc reads as that arc whatever its vertex spacing; the tangent is the bisector of
the two segment directions; the speed is the motion profile's speed at the vertex.  The end
vertices carry no curvature (the line starts along its first segment and ends along its
last).  An exported line is sampled densely where it bends (a few degrees of turn per
vertex), so the vertex values of that line are the check along the whole line.

Per unit mass, with ``t`` the unit tangent, ``kappa`` the curvature vector (towards the
circumcentre, magnitude 1/R), gravity ``g_vec = (0, 0, -g)`` and its part across the line
``g_perp = g_vec - (g_vec . t) t``:

* **normal force** the bed supplies: ``N = v² kappa - g_perp`` (DESIGN §3); the normal load
  ratio is ``|N| / g`` (1 on a level straight line);
* **lateral acceleration**: the horizontal part of the centripetal acceleration across the
  plan direction, ``v² kappa . l`` with ``l`` the horizontal unit vector square to the plan
  tangent; it equals ``v_h² kappa_plan`` (``v_h`` the horizontal speed), ``v² / R`` on a
  level bend of radius R;
* **lift-off margin** of an open chute: the component of ``N`` along the bed's outward
  normal ``a``, in g: ``(v² kappa . a - g_perp . a) / g``; negative where the bed would have
  to pull the mass (a crest taken too fast: ``v² kappa_crest > g cos θ`` in a vertical
  plane).  ``a`` is the ground's upward surface normal for a line on the ground (a plan
  turn on a slope lies in the ground's plane and never lifts the mass off), otherwise the
  upward normal in the vertical plane of the tangent;
* **vertical curvature** ``kappa . a``: positive in a sag, negative on a crest.

:func:`curvature_caps` turns the speed-dependent limits (lateral g, normal g, lift-off)
into the largest curvature each vertex may have with its bend's direction held: the
refinement holds them as a per-vertex bend radius.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import ParameterError
from .geometry import circumradii
from .params import STANDARD_GRAVITY, Limits

__all__ = ["Loads", "line_loads", "load_status", "curvature_caps", "required_radius_m"]


@dataclass(frozen=True)
class Loads:
    """Per-vertex loads of a line read smoothly (see the module notes); arrays of length N.

    Attributes
    ----------
    station_m : ndarray
        Distance along the line (3D), metres.
    speed_m_s : ndarray
        The speeds the loads were computed with (NaN after a stall).
    plan_curvature_1_m, curvature_1_m : ndarray
        1 / circumradius of the vertex and its neighbours, in plan and in 3D (0 at the
        ends and where straight, ``inf`` where the line doubles back).
    vertical_curvature_1_m : ndarray
        Curvature along the bed normal: positive in a sag, negative on a crest.
    lateral_g : ndarray
        Horizontal acceleration across the plan direction in g (absolute value).
    normal_g : ndarray
        Normal load ratio N / g.
    liftoff_margin_g : ndarray
        Normal force along the bed's outward normal, in g; negative = lifts off an open bed.
    grade : ndarray
        Descent grade of the tangent (drop / plan; negative = rising).
    """

    station_m: np.ndarray
    speed_m_s: np.ndarray
    plan_curvature_1_m: np.ndarray
    curvature_1_m: np.ndarray
    vertical_curvature_1_m: np.ndarray
    lateral_g: np.ndarray
    normal_g: np.ndarray
    liftoff_margin_g: np.ndarray
    grade: np.ndarray

    def extreme(self, name: str, largest: bool = True) -> tuple[float | None, float | None]:
        """The largest (or smallest) finite value of one attribute and its station, metres;
        ``(None, None)`` when no vertex has a finite value.

        Examples
        --------
        >>> ld = line_loads([(0, 0, 0), (10, 0, 0), (20, 5, 0)], [5.0, 5.0, 5.0])
        >>> v, at = ld.extreme("lateral_g")
        >>> round(at, 6)
        10.0
        """
        a = np.asarray(getattr(self, name), dtype=float)
        ok = np.isfinite(a)
        if not ok.any():
            return None, None
        idx = np.flatnonzero(ok)
        i = idx[np.argmax(a[ok])] if largest else idx[np.argmin(a[ok])]
        return float(a[i]), float(self.station_m[i])


def _frame(P: np.ndarray, surface_normal):
    """Segment data, vertex tangents, curvature vectors and bed normals of a polyline."""
    n = len(P)
    d = np.diff(P, axis=0)
    s = np.linalg.norm(d, axis=1)
    if np.any(s <= 0.0):
        raise ParameterError("points must not repeat consecutively (see fallway.geometry.drop_repeats)")
    T = d / s[:, None]
    t = np.empty((n, 3))
    t[0], t[-1] = T[0], T[-1]
    if n > 2:
        b = T[:-1] + T[1:]
        bn = np.linalg.norm(b, axis=1)
        back = bn <= 1e-12
        t[1:-1] = np.where(back[:, None], T[1:], b / np.where(back, 1.0, bn)[:, None])
    kap = np.zeros((n, 3))
    if n > 2:
        a = P[:-2] - P[1:-1]
        c = P[2:] - P[1:-1]
        w = np.cross(a, c)
        w2 = np.einsum("ij,ij->i", w, w)
        aa = np.einsum("ij,ij->i", a, a)
        cc = np.einsum("ij,ij->i", c, c)
        straight = w2 <= (1e-9 ** 2) * aa * cc
        with np.errstate(divide="ignore", invalid="ignore"):
            o = np.cross(aa[:, None] * c - cc[:, None] * a, w) / (2.0 * w2[:, None])
            k = o / np.einsum("ij,ij->i", o, o)[:, None]
        k = np.where(straight[:, None], 0.0, k)
        back = straight & (np.einsum("ij,ij->i", a, c) > 0)  # doubles straight back
        k[back] = np.inf
        kap[1:-1] = k
    if surface_normal is not None:
        A = np.asarray(surface_normal, dtype=float)
        if A.shape != (n, 3) or not np.all(np.isfinite(A)):
            raise ParameterError(f"surface_normal must be a finite ({n}, 3) array of upward unit normals")
        A = A / np.linalg.norm(A, axis=1)[:, None]
    else:
        A = np.column_stack([-t[:, 2] * t[:, 0], -t[:, 2] * t[:, 1], 1.0 - t[:, 2] ** 2])
        an = np.linalg.norm(A, axis=1)
        A = np.where(an[:, None] > 1e-12, A / np.where(an > 1e-12, an, 1.0)[:, None], 0.0)
    return s, t, kap, A


def _lateral_axis(t: np.ndarray) -> np.ndarray:
    """Horizontal unit vectors square to the plan tangent (zero where the tangent is vertical)."""
    h = np.hypot(t[:, 0], t[:, 1])
    ok = h > 1e-12
    return np.column_stack([np.where(ok, -t[:, 1] / np.where(ok, h, 1.0), 0.0),
                            np.where(ok, t[:, 0] / np.where(ok, h, 1.0), 0.0), np.zeros(len(t))])


def _distinct(P: np.ndarray) -> np.ndarray:
    """True for each vertex that differs from the one before it (the first always)."""
    return np.concatenate([[True], np.any(np.diff(P, axis=0) != 0.0, axis=1)])


def _inputs(points, speed_m_s, g):
    P = np.asarray(points, dtype=float)
    if P.ndim != 2 or P.shape[1] != 3 or len(P) < 2:
        raise ParameterError(f"points must be an (N, 3) array with N >= 2, got shape {P.shape}")
    if not np.all(np.isfinite(P)):
        raise ParameterError("points must be finite")
    v = np.asarray(speed_m_s, dtype=float)
    if v.shape != (len(P),):
        raise ParameterError(f"speed_m_s must hold one speed per vertex ({len(P)}), got shape {v.shape}")
    g = float(g)
    if not (math.isfinite(g) and g > 0):
        raise ParameterError(f"g must be a finite number > 0, got {g!r}")
    return P, v, g


def line_loads(points, speed_m_s, *, g: float = STANDARD_GRAVITY, surface_normal=None) -> Loads:
    """Curvatures, lateral acceleration, normal load and lift-off margin at every vertex.

    Parameters
    ----------
    points : array_like (N, 3)
        The line, x, y, z in metres, without repeated consecutive vertices.
    speed_m_s : array_like (N,)
        Speed at each vertex (a motion profile's), m/s; NaN after a stall.
    g : float
        Acceleration of gravity, m/s².
    surface_normal : array_like (N, 3), optional
        Upward unit normals of the bed (the ground for a line on the ground); default the
        upward normal in the vertical plane of the tangent.

    Returns
    -------
    Loads

    Examples
    --------
    A level bend of radius 30 m taken at 10 m/s: 100/30 m/s² sideways.

    >>> a = np.linspace(0.0, np.pi / 2, 19)
    >>> P = np.column_stack([30 * np.cos(a), 30 * np.sin(a), np.zeros(19)])
    >>> ld = line_loads(P, np.full(19, 10.0), g=9.80665)
    >>> print(f"{ld.lateral_g[9] * 9.80665:.6f} {1 / ld.plan_curvature_1_m[9]:.6f}")
    3.333333 30.000000
    """
    P, v, g = _inputs(points, speed_m_s, g)
    keep = _distinct(P)
    if not keep.all():  # a repeated vertex reads as the one it repeats
        sn = None if surface_normal is None else np.asarray(surface_normal, dtype=float)[keep]
        ld = line_loads(P[keep], v[keep], g=g, surface_normal=sn)
        pos = np.cumsum(keep) - 1
        return Loads(*(np.asarray(getattr(ld, f))[pos] for f in Loads.__dataclass_fields__))
    s, t, kap, A = _frame(P, surface_normal)
    n = len(P)
    station = np.concatenate([[0.0], np.cumsum(s)])
    kplan = np.zeros(n)
    if n > 2:
        r2 = circumradii(P, dims=2)
        with np.errstate(divide="ignore"):
            kplan[1:-1] = 1.0 / r2
    u = v * v
    gvec = np.array([0.0, 0.0, -g])
    gperp = gvec[None, :] - (t @ gvec)[:, None] * t
    with np.errstate(invalid="ignore"):
        N = u[:, None] * kap - gperp
        normal_g = np.linalg.norm(N, axis=1) / g
        lateral = np.abs(u * np.einsum("ij,ij->i", kap, _lateral_axis(t))) / g
        lift = np.einsum("ij,ij->i", N, A) / g
        kv = np.einsum("ij,ij->i", kap, A)
    kmag = np.linalg.norm(kap, axis=1)
    straight = kmag == 0.0
    lateral[straight & np.isfinite(u)] = 0.0
    h = np.hypot(t[:, 0], t[:, 1])
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):  # near-vertical: +-inf
        grade = np.where(h > 0, -t[:, 2] / h, np.where(t[:, 2] < 0, np.inf, -np.inf))
    return Loads(station, v.copy(), kplan, kmag, np.where(straight, 0.0, kv), lateral, normal_g, lift, grade)


def curvature_caps(points, speed_m_s, limits: Limits, *, g: float = STANDARD_GRAVITY,
                   surface_normal=None) -> np.ndarray:
    """The largest 3D curvature each vertex may have under the speed-dependent limits.

    At each vertex the bend keeps its direction (the unit curvature vector of the smooth
    reading) and its speed; the cap is the curvature at which the first of these limits is
    reached: lateral acceleration ``v² kappa |n . l| = max_lateral_g * g``, normal load
    ``|v² kappa n - g_perp| = max_normal_g * g`` (the positive root of the quadratic in
    kappa), and, on an open line (``allow_liftoff`` False), lift-off ``v² kappa (n . a) =
    g_perp . a`` on a crest.  A straight vertex gets the bound of the worst direction for
    the lateral and normal limits.  The bend radius limit itself (``min_radius_m``) is not
    included (see :func:`required_radius_m`).

    Returns
    -------
    ndarray (N,)
        1/m; ``inf`` where nothing limits the vertex (the ends, a vertex at rest, no
        speed-dependent limit).

    Examples
    --------
    At 25 m/s and 1 g sideways a level bend needs a radius of 25² / 9.80665 = 63.73 m:

    >>> P = [(0, 0, 0), (50, 0, 0), (100, 5, 0)]
    >>> caps = curvature_caps(P, [25.0] * 3, Limits(max_lateral_g=1.0, allow_liftoff=True))
    >>> print(f"{1 / caps[1]:.2f}")
    63.73
    """
    P, v, g = _inputs(points, speed_m_s, g)
    if not isinstance(limits, Limits):
        raise ParameterError(f"limits must be a fallway.Limits, got {type(limits).__name__}")
    keep = _distinct(P)
    if not keep.all():  # a repeated vertex takes the cap of the one it repeats
        sn = None if surface_normal is None else np.asarray(surface_normal, dtype=float)[keep]
        return curvature_caps(P[keep], v[keep], limits, g=g, surface_normal=sn)[np.cumsum(keep) - 1]
    _, t, kap, A = _frame(P, surface_normal)
    n = len(P)
    caps = np.full(n, np.inf)
    if n < 3 or not limits.speed_aware:
        return caps
    u = v * v
    kmag = np.linalg.norm(kap, axis=1)
    bent = np.isfinite(kmag) & (kmag > 0)
    nhat = np.where(bent[:, None], kap / np.where(bent, kmag, 1.0)[:, None], 0.0)
    gvec = np.array([0.0, 0.0, -g])
    gperp = gvec[None, :] - (t @ gvec)[:, None] * t
    gp2 = np.einsum("ij,ij->i", gperp, gperp)
    moving = np.isfinite(u) & (u > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        if limits.max_lateral_g is not None:
            lat = np.where(bent, np.abs(np.einsum("ij,ij->i", nhat, _lateral_axis(t))), 1.0)
            caps = np.minimum(caps, np.where(moving & (lat > 0), limits.max_lateral_g * g / (u * lat), np.inf))
        if limits.max_normal_g is not None:
            ng = limits.max_normal_g * g
            # |u k n - gp|² = ng²: u² k² - 2 u k (n.gp) + |gp|² - ng² = 0, positive root;
            # a straight vertex: the worst direction (n opposite to gp, i.e. along the bed normal)
            ndg = np.where(bent, np.einsum("ij,ij->i", nhat, gperp), -np.sqrt(gp2))
            root = ndg + np.sqrt(np.maximum(ndg * ndg - gp2 + ng * ng, 0.0))
            caps = np.minimum(caps, np.where(moving, np.maximum(root, 0.0) / u, np.inf))
        if not limits.allow_liftoff:
            na = np.einsum("ij,ij->i", nhat, A)
            hold = -np.einsum("ij,ij->i", gperp, A)  # gravity pressing on the bed, m/s²
            crest = bent & (na < 0)
            caps = np.minimum(caps, np.where(moving & crest, np.maximum(hold, 0.0) / (u * -na), np.inf))
    caps[0] = caps[-1] = np.inf
    return caps


def required_radius_m(points, speed_m_s, limits: Limits, *, g: float = STANDARD_GRAVITY,
                      surface_normal=None) -> np.ndarray:
    """The smallest bend radius each interior vertex may have: ``min_radius_m`` and the
    speed-dependent limits together (:func:`curvature_caps`), metres, one per interior
    vertex (N - 2); 0 where nothing limits it.

    Examples
    --------
    >>> P = [(0, 0, 0), (50, 0, 0), (100, 5, 0)]
    >>> lim = Limits(min_radius_m=80.0, max_lateral_g=1.0, allow_liftoff=True)
    >>> required_radius_m(P, [25.0] * 3, lim).round(2).tolist()
    [80.0]
    """
    caps = curvature_caps(points, speed_m_s, limits, g=g, surface_normal=surface_normal)[1:-1]
    with np.errstate(divide="ignore"):
        r = 1.0 / caps
    if limits.min_radius_m is not None:
        r = np.maximum(r, limits.min_radius_m)
    return r


#: a load within this fraction of its limit counts as "active"
_ACTIVE = 1e-2


def load_status(loads: Loads, limits: Limits, *, broken_only: bool = False):
    """Status of each speed-dependent limit on ``loads``: ``"lateral_g"``, ``"normal_g"`` and,
    on an open line, ``"liftoff"``, each ``"inactive"``, ``"active"`` (within 1 % of the
    limit; lift-off: a margin below 0.01 g) or ``"violated"`` (beyond it by more than
    1e-9 relative; lift-off: a negative margin).  Vertices without a speed (after a stall)
    are not judged.  With ``broken_only`` the list of the violated ones' names.

    Examples
    --------
    >>> ld = line_loads([(0, 0, 0), (10, 0, 0), (20, 5, 0)], [10.0, 10.0, 10.0])
    >>> round(float(ld.lateral_g[1]), 3), load_status(ld, Limits(max_lateral_g=0.4))
    (0.442, {'lateral_g': 'violated', 'liftoff': 'inactive'})
    """
    out = {}
    for name, cap in (("lateral_g", limits.max_lateral_g), ("normal_g", limits.max_normal_g)):
        if cap is None:
            continue
        worst = loads.extreme(name)[0]
        out[name] = ("inactive" if worst is None or worst < cap * (1 - _ACTIVE)
                     else "violated" if worst > cap * (1 + 1e-9) else "active")
    if not limits.allow_liftoff:
        low = loads.extreme("liftoff_margin_g", largest=False)[0]
        out["liftoff"] = ("inactive" if low is None or low >= _ACTIVE else "violated" if low < 0.0 else "active")
    if broken_only:
        return [k for k, v in out.items() if v == "violated"]
    return out
