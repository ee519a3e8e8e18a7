"""Reference solutions for the fastest-line tests, computed here from published formulas.

Nothing in this module imports fallway: every value is recomputed from the source
formula with scipy (root finding, ODE integration, quadrature), so the refinement tests
compare our optimiser against something outside the project.

Sources
-------
- Brachistochrone without friction (Johann Bernoulli, Acta Eruditorum 1696/1697):
  from rest, x = R(phi - sin phi), y = R(1 - cos phi) with y down; for a target L across
  and H down, (phi - sin phi)/(1 - cos phi) = L/H and T = phi*sqrt(R/g).
- Brachistochrone with Coulomb friction and the gravity-only normal force (friction work
  mu*g*horizontal distance): N. Ashby, W. E. Brittin, W. F. Love, W. Wyss, "Brachistochrone
  with Coulomb friction", Am. J. Phys. 43 (1975) 902; the broken extremal that begins
  with a vertical free fall: S. Šalinić, "Contribution to the brachistochrone problem with
  Coulomb friction", Acta Mech. 208 (2009) 97.  From rest, with mu = tan(beta): a free
  fall of height C*sin(beta)**2, then the arc y - mu*x = C*cos(psi - beta)**2 with psi the
  descent angle falling from pi/2,
  dx/dpsi = -C cos(beta) [cos(2 psi - beta) + cos(beta)],
  dy/dpsi = -2 C cos(beta) sin(psi) cos(psi - beta).
  On the arc v**2 = 2 g (y - mu x) (energy minus friction work).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.integrate import quad, solve_ivp
from scipy.optimize import brentq, fsolve

G0 = 9.80665  # standard gravity (3rd CGPM, 1901)


@dataclass(frozen=True)
class Cycloid:
    """Bernoulli's brachistochrone from rest through (L across, H down)."""

    radius_m: float
    phi_end: float
    time_s: float

    def points(self, n: int) -> np.ndarray:
        """(n, 2) points (x across, y down) at equal steps of the cycloid parameter."""
        phi = np.linspace(0.0, self.phi_end, n)
        return np.column_stack([self.radius_m * (phi - np.sin(phi)),
                                self.radius_m * (1.0 - np.cos(phi))])


def cycloid(L: float, H: float, g: float = G0) -> Cycloid:
    """Solve (phi - sin phi)/(1 - cos phi) = L/H for the end parameter (Bernoulli 1696).

    The left side rises monotonically from 0 to inf on (0, 2 pi), so the root is unique.
    """
    f = lambda phi: (phi - math.sin(phi)) / (1.0 - math.cos(phi)) - L / H  # noqa: E731
    phi = brentq(f, 1e-6, 2.0 * math.pi - 1e-6, xtol=1e-15, rtol=4 * np.finfo(float).eps, maxiter=500)
    R = H / (1.0 - math.cos(phi))
    return Cycloid(R, phi, phi * math.sqrt(R / g))


def cycloid_time_by_quadrature(L: float, H: float, g: float = G0) -> float:
    """T = integral of ds / v along the cycloid, v = sqrt(2 g y) (a second, independent check)."""
    c = cycloid(L, H, g)
    R = c.radius_m
    # ds = 2 R sin(phi/2) dphi, v = sqrt(2 g R (1 - cos phi)) = 2 sqrt(g R) sin(phi/2)
    val, _ = quad(lambda p: 2.0 * R * math.sin(p / 2) / (2.0 * math.sqrt(g * R) * math.sin(p / 2)),
                  1e-12, c.phi_end, epsabs=1e-13, epsrel=1e-13)
    return val


def straight_chord_time(L: float, H: float, g: float = G0, mu: float = 0.0) -> float:
    """Time down the straight chord from rest: a = g (H - mu L)/s, t = sqrt(2 s / a)."""
    s = math.hypot(L, H)
    a = g * (H - mu * L) / s
    return math.sqrt(2.0 * s / a)


@dataclass(frozen=True)
class FrictionBrachistochrone:
    """The friction brachistochrone of Ashby et al. (1975) with Šalinić's free fall."""

    mu: float
    C_m: float
    psi_end: float
    free_fall_m: float
    time_s: float
    L: float
    H: float
    g: float

    def points(self, n: int = 400) -> np.ndarray:
        """(m, 2) points (x across, y down): the free fall then the arc (n samples in psi)."""
        psi = np.linspace(math.pi / 2, self.psi_end, n)
        xy = _integrate_arc(self.C_m, self.mu, self.psi_end, psi)
        return np.vstack([[0.0, 0.0], xy.T])


def _rhs(psi, state, C, beta):
    cb = math.cos(beta)
    return [-C * cb * (math.cos(2.0 * psi - beta) + cb),
            -2.0 * C * cb * math.sin(psi) * math.cos(psi - beta)]


def _integrate_arc(C, mu, psi_end, t_eval=None):
    beta = math.atan(mu)
    y0 = C * math.sin(beta) ** 2
    sol = solve_ivp(_rhs, (math.pi / 2, psi_end), [0.0, y0], args=(C, beta), method="DOP853",
                    rtol=1e-13, atol=1e-13, t_eval=t_eval)
    if t_eval is None:
        return sol.y[:, -1]
    return sol.y


def _arc_time(C, mu, psi_end, g):
    """Free-fall time plus integral of ds/v along the arc, v**2 = 2 g C cos(psi - beta)**2."""
    beta = math.atan(mu)
    h = C * math.sin(beta) ** 2
    t_fall = math.sqrt(2.0 * h / g)

    def integrand(psi):
        dx, dy = _rhs(psi, None, C, beta)
        v = math.sqrt(2.0 * g * C) * abs(math.cos(psi - beta))
        return math.hypot(dx, dy) / v

    # near psi = pi/2 with mu = 0 both ds and v vanish; the ratio stays finite
    t_arc, _ = quad(integrand, psi_end, math.pi / 2 - 1e-14, epsabs=1e-13, epsrel=1e-13, limit=200)
    return t_fall + t_arc


def friction_brachistochrone(L: float, H: float, mu: float, g: float = G0) -> FrictionBrachistochrone:
    """Solve for C and psi_end so that the arc ends at (L across, H down).

    The arc ODEs are integrated with scipy's DOP853 and the two end conditions solved
    with ``fsolve`` from the frictionless cycloid as first guess (for mu = 0 the arc is
    that cycloid with C = 2 R and psi = pi/2 - phi/2).
    """
    c0 = cycloid(L, H, g)
    guess = [2.0 * c0.radius_m, math.pi / 2 - c0.phi_end / 2]

    def res(p):
        C, psi_end = p
        x, y = _integrate_arc(C, mu, psi_end)
        return [x - L, y - H]

    sol, info, ier, msg = fsolve(res, guess, full_output=True, xtol=1e-14)
    if max(abs(r) for r in res(sol)) > 1e-8:  # fsolve may flag xtol at machine precision
        raise RuntimeError(f"friction brachistochrone did not solve: {msg}")
    C, psi_end = (float(v) for v in sol)
    beta = math.atan(mu)
    return FrictionBrachistochrone(mu, C, psi_end, C * math.sin(beta) ** 2,
                                   _arc_time(C, mu, psi_end, g), L, H, g)


def euler_lagrange_residual(ref: FrictionBrachistochrone, n: int = 200, mu_functional: float | None = None) -> float:
    """Largest relative residual of the Euler–Lagrange equation along the arc.

    With x as parameter (x increases along the arc) the time functional is
    T = integral sqrt(1 + p**2) / sqrt(2 g (y - mu x)) dx, p = dy/dx, whose Euler–Lagrange
    equation is d/dx F_p = F_y.  Both sides are evaluated by finite differences of the
    integrated arc; the residual is returned relative to |F_y|.  ``mu_functional`` (default
    the arc's own) is the friction coefficient of the functional tested.
    """
    g = ref.g
    mu = ref.mu if mu_functional is None else mu_functional
    # stay away from the vertical start (p infinite) and from the end
    psi = np.linspace(math.pi / 2 - 0.15, ref.psi_end + 0.05, n)
    out = []
    for ps in psi:
        h = 1e-4
        pts = _integrate_arc(ref.C_m, ref.mu, ref.psi_end, np.array([math.pi / 2, ps + h, ps, ps - h]))
        xs, ys = pts[0, 1:], pts[1, 1:]

        def fp(psi_v, y_v, x_v):
            p = math.tan(psi_v)
            w = 2.0 * g * (y_v - mu * x_v)
            return p / (math.sqrt(1.0 + p * p) * math.sqrt(w))

        lhs = (fp(ps - h, ys[2], xs[2]) - fp(ps + h, ys[0], xs[0])) / (xs[2] - xs[0])
        p = math.tan(ps)
        w = 2.0 * g * (ys[1] - mu * xs[1])
        fy = -math.sqrt(1.0 + p * p) * g / w ** 1.5
        out.append(abs(lhs - fy) / abs(fy))
    return float(max(out))


if __name__ == "__main__":  # pragma: no cover - prints the worked examples
    c = cycloid(100.0, 40.0)
    print(f"cycloid L=100 H=40: R={c.radius_m:.6f} phi={c.phi_end:.6f} T={c.time_s:.7f} "
          f"quad={cycloid_time_by_quadrature(100, 40):.7f} chord={straight_chord_time(100, 40):.7f}")
    for L, H, mu in [(120, 45, 0.2), (120, 45, 0.0), (100, 40, 0.1), (100, 40, 0.3)]:
        r = friction_brachistochrone(L, H, mu)
        print(f"L={L} H={H} mu={mu}: C={r.C_m:.6f} psi_end={r.psi_end:.6f} fall={r.free_fall_m:.6f} "
              f"T={r.time_s:.7f} cycloid={cycloid(L, H).time_s:.7f} EL-res={euler_lagrange_residual(r):.2e}")


# ---------------------------------------------------------------------------------------
# re-reading an exported polyline, independently of fallway


def incline_step(v0: float, drop_m: float, plan_m: float, mu: float, k: float = 0.0,
                 g: float = G0) -> tuple[float, float]:
    """Exit speed and time on one straight segment (incline with Coulomb friction and
    drag k·v², any mechanics text; the formulas of CHECKS "Incline with Coulomb friction").

    a = g(sin θ − μ cos θ); without drag v² = v0² + 2as, t = (v − v0)/a; with drag
    v_t² = a/k, v² = v_t² + (v0² − v_t²)e^(−2ks) and the time by quadrature of ds/v.
    Returns ``(nan, inf)`` when the mover comes to rest on the segment.
    """
    s = math.hypot(drop_m, plan_m)
    a = g * (drop_m - mu * plan_m) / s
    if k == 0.0:
        v2 = v0 * v0 + 2.0 * a * s
        if v2 <= 0.0:
            return math.nan, math.inf
        v = math.sqrt(v2)
        t = (v - v0) / a if abs(a) > 1e-14 else s / v0
        return v, t

    def v2_at(x):
        if a == 0.0:
            return v0 * v0 * math.exp(-2.0 * k * x)
        vt2 = a / k
        return vt2 + (v0 * v0 - vt2) * math.exp(-2.0 * k * x)

    if v2_at(s) <= 0.0:
        return math.nan, math.inf
    v = math.sqrt(v2_at(s))
    if abs(v - v0) < 1e-12 * max(v, 1.0):  # at the terminal speed already
        return v, s / v
    # dv/dt = a − k v² along the segment: t = ∫ dv / (a − k v²) from v0 to v
    t, _ = quad(lambda w: 1.0 / (a - k * w * w), v0, v, epsabs=0.0, epsrel=1e-11, limit=200)
    return v, t
    return math.sqrt(v2_at(s)), t


def sharp_corner_reading(points, mu: float, k: float = 0.0, v0: float = 0.0,
                         g: float = G0, channel: bool = True, speeds: list | None = None) -> tuple[float, float]:
    """Time and exit speed of a polyline read as straight segments with sharp corners.

    Each segment by :func:`incline_step`; at every interior vertex the belt-friction
    (capstan) law of Euler–Eytelwein, v_out = v_in·e^(−μφ), φ the angle between the two
    segment directions in 3D.  With ``channel`` (the channel reading) the corner's
    impulse is shared between the bed (c = n·up, n the unit turn, up the upward normal
    in the vertical plane of the bisector) and the walls (√(1 − c²)), each with Coulomb
    friction: the angle becomes φ(√(1 − c²) + c), φ for a plan turn or a sag; a crest
    (c < 0) relieves the bed (the sharp limit of a convex arc whose
    normal force is g cos θ − v²κ; A. W. Roberts' curved-chute equation, CHECKS): the
    bed friction over the corner is μ|G − v²φ| instead of μG, G the gravity-normal part
    of half the straight runs either side up to the neighbouring corners (past G the
    mover would lift off an open bed; an enclosed line's cover presses).
    Returns ``(time_s, exit_speed_m_s)`` (``inf``, ``nan`` when the mover stops); a list
    given as ``speeds`` receives each straight piece's (start, end) speeds.
    """
    P = np.asarray(points, dtype=float)
    d = np.diff(P, axis=0)
    d = d[np.linalg.norm(d, axis=1) > 1e-9]
    # plan length of the straight run before / after each corner (collinear vertices do
    # not end a run): the crest relief's bound
    unit = d / np.linalg.norm(d, axis=1)[:, None]
    def angle(a, b):
        return math.atan2(float(np.linalg.norm(np.cross(a, b))), float(a @ b))

    # a turn below 1e-6 rad is rounding noise of collinear points (as in fallway)
    bend = [j > 0 and angle(unit[j - 1], unit[j]) > 1e-6 for j in range(len(d))]
    plan = np.hypot(d[:, 0], d[:, 1])
    before, after = np.zeros(len(d)), np.zeros(len(d))
    for j in range(1, len(d)):
        i = j - 1
        while True:
            before[j] += plan[i]
            if bend[i] or i == 0:
                break
            i -= 1
        i = j
        while True:
            after[j] += plan[i]
            if i + 1 >= len(d) or bend[i + 1]:
                break
            i += 1
    v, t = float(v0), 0.0
    for j, seg in enumerate(d):
        if j:
            v = corner_speed(v, d[j - 1], seg, mu, before[j], after[j], g, channel)
        v_start = v
        v, dt = incline_step(v, -float(seg[2]), float(math.hypot(seg[0], seg[1])), mu, k, g)
        if not math.isfinite(dt):
            return math.inf, math.nan
        if speeds is not None:
            speeds.append((v_start, v))
        t += dt
    return t, v


def sharp_corner_speeds(points, mu: float, k: float = 0.0, v0: float = 0.0, g: float = G0) -> np.ndarray:
    """The speeds of :func:`sharp_corner_reading` at both ends of every straight piece,
    ``(n_pieces, 2)``: leaving the corner before it, arriving at the corner after it.  On a
    straight piece under gravity, Coulomb friction and quadratic drag the speed moves
    monotonically towards its terminal value, so the largest speed along the line is the
    largest of these."""
    out: list[float] = []
    sharp_corner_reading(points, mu, k, v0, g, speeds=out)
    return np.asarray(out)


def corner_speed(v: float, a, b, mu: float, run_before_m: float, run_after_m: float, g: float = G0,
                 channel: bool = True) -> float:
    """Speed after a sharp corner from direction ``a`` to ``b`` (3D vectors, any length).

    The belt-friction (capstan) law of Euler–Eytelwein, v_out = v_in·e^(−μφ), φ the angle
    between the two directions; with ``channel`` the impulse is shared between bed and
    walls and a crest relieves the bed up to the gravity-normal friction of half the plan
    runs either side (``run_before_m``, ``run_after_m``; see :func:`sharp_corner_reading`).
    """
    a = np.asarray(a, dtype=float) / np.linalg.norm(a)
    b = np.asarray(b, dtype=float) / np.linalg.norm(b)
    phi = math.atan2(float(np.linalg.norm(np.cross(a, b))), float(a @ b))
    phi = phi if phi > 1e-6 else 0.0
    if channel and phi > 0.0:
        # the turn's component across the bed (up: the upward normal in the
        # vertical plane of the bisector); a crest relieves the bed
        tb = (a + b) / np.linalg.norm(a + b)
        up = np.array([0.0, 0.0, 1.0]) - tb[2] * tb
        n = (b - a) / np.linalg.norm(b - a)
        if np.linalg.norm(up) > 1e-12:
            up = up / np.linalg.norm(up)
            c = float(n @ up)
            phi = phi * (float(np.linalg.norm(n - c * up)) + c)
    if phi >= 0.0:
        return v * math.exp(-mu * phi)
    # a crest: bed friction μ|G − v²φ| instead of μG over the corner (G the
    # gravity-normal impulse of half the runs either side): a gain 2μv²φ up to
    # 2μG, past that the cover of an enclosed line presses again
    cap = mu * g * (run_before_m + run_after_m)
    gain = v * v * (math.exp(-2.0 * mu * phi) - 1.0)
    return math.sqrt(max(v * v + min(gain, 2.0 * cap - gain), 0.0))


def smooth_reading(points, mu: float, k: float = 0.0, v0: float = 0.0, g: float = G0,
                   law: str = "separate") -> tuple[float, float]:
    """Time and exit speed along a smooth reading of a polyline, by ``solve_ivp``.

    The smooth reading: each interior vertex's turn φ_i is spread as a circular bend
    over the half-segments either side of it (curvature φ_i / l_i, l_i the mean of the
    two segment lengths, towards the turn; the discrete Frenet frame of a sampled
    curve, which is exact for a circle sampled at equal steps).  Along arc length s, per
    unit mass::

        d(v²)/ds = 2 g sin θ − 2 μ |N| − 2 k v²

    ``law="separate"``: the bed carries gravity's normal part plus the bend's part across
    the bed (c = n·up, signed: a sag presses, a crest relieves), the walls the rest:
    |N| = ||g_perp| + v²κc| + v²κ√(1 − c²) (past lift-off an enclosed line's cover
    presses; the continuous limit of the sharp-corner reading);
    ``law="vector"``: |N| = |v²κ n − g_perp| (a point mass on one smooth surface;
    CHECKS "Level bend").  Integrated half-segment by half-segment with ``solve_ivp``
    (DOP853).  Returns ``(time_s, exit_speed_m_s)``.
    """
    P = np.asarray(points, dtype=float)
    keep = np.r_[True, np.linalg.norm(np.diff(P, axis=0), axis=1) > 1e-9]
    P = P[keep]
    d = np.diff(P, axis=0)
    L = np.linalg.norm(d, axis=1)
    T = d / L[:, None]
    n_v = len(P)
    kap = np.zeros(n_v)
    nrm = np.zeros((n_v, 3))
    for i in range(1, n_v - 1):
        phi = math.atan2(np.linalg.norm(np.cross(T[i - 1], T[i])), float(T[i - 1] @ T[i]))
        if phi > 1e-12:
            kap[i] = phi / (0.5 * (L[i - 1] + L[i]))
            nrm[i] = (T[i] - T[i - 1]) / np.linalg.norm(T[i] - T[i - 1])
    gvec = np.array([0.0, 0.0, -g])
    u2, t = v0 * v0, 0.0
    for j in range(n_v - 1):
        gt = float(gvec @ T[j])
        gp = gvec - gt * T[j]
        for vertex in (j, j + 1):  # the half-segment next to each end vertex
            kv, nv = kap[vertex], nrm[vertex]
            # the bend's parts across the bed (signed: a sag presses, a crest relieves) and
            # against the walls; up: the upward normal in the vertical plane of the chord
            up = np.array([0.0, 0.0, 1.0]) - T[j][2] * T[j]
            c_bed, c_wall = 0.0, 1.0
            if np.linalg.norm(up) > 1e-12 and kv > 0.0:
                up = up / np.linalg.norm(up)
                c_bed = float(nv @ up)
                c_wall = float(np.linalg.norm(nv - c_bed * up))

            def rhs(_s, y, kv=kv, nv=nv, gt=gt, gp=gp, c_bed=c_bed, c_wall=c_wall):
                w = max(y[0], 0.0)
                if law == "separate":
                    # past lift-off the bed force changes sign: an enclosed line's cover
                    # presses (an open line would fly; that is judged apart)
                    nmag = abs(np.linalg.norm(gp) + w * kv * c_bed) + w * kv * c_wall
                else:
                    nmag = np.linalg.norm(w * kv * nv - gp)
                v = math.sqrt(w) if w > 0 else 1e-12
                return [2.0 * gt - 2.0 * mu * nmag - 2.0 * k * w, 1.0 / v]

            def stop(_s, y):
                return y[0]
            stop.terminal, stop.direction = True, -1
            sol = solve_ivp(rhs, (0.0, 0.5 * L[j]), [u2, t], method="DOP853", rtol=1e-11, atol=1e-11,
                            events=stop if u2 > 0 else None)
            if sol.status == 1:
                return math.inf, math.nan
            u2, t = float(sol.y[0, -1]), float(sol.y[1, -1])
    return t, math.sqrt(max(u2, 0.0))


def circumcentre(a, b, c) -> np.ndarray | None:
    """The centre of the circle through three points in 3D (None when they are collinear);
    elementary geometry."""
    a, b, c = (np.asarray(q, dtype=float) for q in (a, b, c))
    u, w = b - a, c - a
    uxw = np.cross(u, w)
    den = 2.0 * float(uxw @ uxw)
    if den < 1e-18:
        return None
    return a + (float(w @ w) * np.cross(uxw, u) + float(u @ u) * np.cross(w, uxw)) / den


def vertex_loads(points, speed_m_s, g: float = G0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Lateral g, normal g and the open bed's lift-off margin (g) at each interior vertex.

    The line through each vertex and its neighbours is read as the circle through the three
    points (curvature vector κn towards its centre) with the chord from the previous to the
    next vertex as its tangent t; ``speed_m_s[i]`` is the speed at vertex i.  Per unit mass:
    lateral acceleration v_h²/R_plan (R_plan the plan circle's radius, v_h the horizontal
    speed); the force the bed and walls supply N = v²κn − g⊥ (g⊥ gravity's part across t;
    1 g on a level straight); the bed's share N·up, up the upward unit normal to t in its
    vertical plane, must stay positive on an open bed (at a crest, v²κ_vertical < g cos θ).
    Any mechanics text; CHECKS "Buildable lines".  (fallway judges a ground line's lift-off
    along the ground's own upward normal; on a side slope the two differ, and a test that
    holds both to the limit holds the line to the stricter.)
    """
    P = np.asarray(points, dtype=float)
    v = np.asarray(speed_m_s, dtype=float)
    gv = np.array([0.0, 0.0, -g])
    lat, nor, lift = [], [], []
    for i in range(1, len(P) - 1):
        a, b, c = P[i - 1], P[i], P[i + 1]
        t = (c - a) / np.linalg.norm(c - a)
        flat = [np.r_[q[:2], 0.0] for q in (a, b, c)]
        cp = circumcentre(*flat)
        lat.append(0.0 if cp is None else v[i] ** 2 * float(t[:2] @ t[:2]) / float(np.linalg.norm(cp - flat[1])) / g)
        c3 = circumcentre(a, b, c)
        kn = np.zeros(3) if c3 is None else (c3 - b) / float((c3 - b) @ (c3 - b))
        n_vec = v[i] ** 2 * kn - (gv - float(gv @ t) * t)
        up = np.array([0.0, 0.0, 1.0]) - t[2] * t
        nor.append(float(np.linalg.norm(n_vec)) / g)
        lift.append(float(n_vec @ (up / np.linalg.norm(up))) / g)
    return np.array(lat), np.array(nor), np.array(lift)
