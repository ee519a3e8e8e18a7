"""The refinement's optimisation problem: variables, bounds, objective and limit checks.

Variables are the interior vertices: plan positions (x, y) of a ground line, whose heights
follow the terrain's smooth surface (:meth:`fallway.terrain.Terrain.surface`), or plan
positions and heights above the ground (x, y, h) of a raised line, h within the clearance
band.  The ends stay fixed.  Bounds keep vertices inside the hull of cell centres.  The
objective is the travel time (gravity-normal chain, or the full model's during the
polish) plus exterior penalties (:mod:`fallway.refine.fields`); :meth:`Problem.violations`
judges every limit on a line.
"""

from __future__ import annotations

import math

import numpy as np

from ..clearance import CLEARANCE_TOL_M, sample_segments
from ..geometry import min_radius_m
from ..loads import line_loads, load_status, required_radius_m
from ..params import Limits, LineSpec
from ..physics import Mover
from .chain import full_chain, gravity_chain, ground_fg
from .fields import DistanceField, curvature, field_penalty, grade_penalty, keepout_status, radius_penalty

__all__ = ["Ground", "Problem", "on_data", "CLEARANCE_MARGIN_M"]

#: The refinement holds a raised line's clearance between vertices this far inside the
#: band (the route's check allows :data:`fallway.clearance.CLEARANCE_TOL_M` outside it).
#: Zero: a start line lying on the band's edge (a raised lattice line on its lowest
#: layer) then costs nothing; a margin made it cost tens of seconds of penalty and threw
#: the first L-BFGS-B steps far off.
CLEARANCE_MARGIN_M = 0.0


class Ground:
    """Heights and slopes of the terrain's smooth surface, and the box the vertices may use."""

    def __init__(self, terrain) -> None:
        self.terrain = terrain
        self.surface = terrain.surface()
        rows, cols = terrain.shape
        x0, y0 = terrain.cell_center(0, 0)
        x1, y1 = terrain.cell_center(rows - 1, cols - 1)
        tiny = 1e-7 * terrain.cell_size
        self.xlim = (min(x0, x1) + tiny, max(x0, x1) - tiny)
        self.ylim = (min(y0, y1) + tiny, max(y0, y1) - tiny)

    def z(self, x, y) -> np.ndarray:
        """Heights (NaN where the surface is undefined), shaped like ``x``/``y``."""
        shape = np.broadcast(np.asarray(x), np.asarray(y)).shape
        return self.surface.evaluate(x, y).reshape(shape)

    def z_grad(self, x, y):
        """Heights and slopes (dz/dx, dz/dy) together, in one pass."""
        shape = np.broadcast(np.asarray(x), np.asarray(y)).shape
        return tuple(v.reshape(shape) for v in self.surface.evaluate(x, y, grad=True))


def on_data(terrain, x, y) -> np.ndarray:
    """True where a plan point lies over data: inside the hull of cell centres, and every
    cell whose closed square holds it has a height (the lattice's own rule for its edges,
    so a lattice line is on data wherever the search let it run)."""
    rows, cols = terrain.shape
    r, c = terrain.rowcol(np.asarray(x, float), np.asarray(y, float))
    eps = 1e-9
    ok = np.isfinite(r) & np.isfinite(c) & (r >= -eps) & (r <= rows - 1 + eps) & (c >= -eps) & (c <= cols - 1 + eps)
    r = np.clip(np.where(ok, r, 0.0), 0.0, rows - 1.0)
    c = np.clip(np.where(ok, c, 0.0), 0.0, cols - 1.0)
    rl, rh = np.ceil(r - 0.5 - eps).astype(int), np.floor(r + 0.5 + eps).astype(int)
    cl, ch = np.ceil(c - 0.5 - eps).astype(int), np.floor(c + 0.5 + eps).astype(int)
    rl, rh = np.clip(rl, 0, rows - 1), np.clip(rh, 0, rows - 1)
    cl, ch = np.clip(cl, 0, cols - 1), np.clip(ch, 0, cols - 1)
    z = terrain.z
    data = np.isfinite(z[rl, cl]) & np.isfinite(z[rl, ch]) & np.isfinite(z[rh, cl]) & np.isfinite(z[rh, ch])
    return ok & data


def _fractions(P) -> np.ndarray:
    """Station of each vertex as a fraction of the line's 3D length."""
    s = np.concatenate([[0.0], np.cumsum(np.linalg.norm(np.diff(P, axis=0), axis=1))])
    return s / s[-1] if s[-1] > 0 else np.linspace(0.0, 1.0, len(P))


def _interp_slope(x, xp, fp) -> np.ndarray:
    """d/dx of ``np.interp(x, xp, fp)``: the slope of the piece holding each x (0 outside
    ``xp``, on a piece of zero width and where a node's value is not finite)."""
    xp = np.asarray(xp, float)
    fp = np.asarray(fp, float)
    if len(xp) < 2:
        return np.zeros_like(x)
    k = np.clip(np.searchsorted(xp, x, side="right") - 1, 0, len(xp) - 2)
    dx = xp[k + 1] - xp[k]
    with np.errstate(invalid="ignore"):  # inf - inf beside a vertex where no bend is allowed: NaN, masked below
        df = fp[k + 1] - fp[k]
    inside = (x >= xp[0]) & (x <= xp[-1]) & (dx > 0) & np.isfinite(df)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(inside, df / np.where(dx > 0, dx, 1.0), 0.0)


def _fraction_grad(P, c) -> np.ndarray:
    """Gradient (N, 3) of ``sum(c * f)`` with ``f`` the station fractions of the interior
    vertices (:func:`_fractions`) and ``c`` fixed: f_i = s_i / S, each segment's length
    enters the stations after it and the total."""
    d = np.diff(P, axis=0)
    seg = np.linalg.norm(d, axis=1)
    S = float(seg.sum())
    G = np.zeros_like(P)
    if not S > 0 or not np.any(c):
        return G
    s = np.concatenate([[0.0], np.cumsum(seg)])[1:-1]
    # segment j lies before interior vertices j+1 .. N-2: weight sum_{i > j} c_i
    after = np.concatenate([np.cumsum(c[::-1])[::-1], [0.0]])
    W = after / S - float(np.dot(c, s)) / S ** 2
    u = d / np.maximum(seg, 1e-300)[:, None]
    G[1:] += W[:, None] * u
    G[:-1] -= W[:, None] * u
    return G


class Problem:
    """The optimisation problem: variables <-> vertices, objective, bounds, checks.

    Parameters
    ----------
    ground : Ground
    mover : Mover
    limits : Limits
    spec : LineSpec
    keepout : DistanceField or None
    nodata : DistanceField or None
        Distance to nodata (the line keeps 1.5 cells away).
    margin_m : float
        Keep-out safety distance.
    penalty : float
        Weight of the exterior penalties.
    """

    def __init__(self, ground: Ground, mover: Mover, limits: Limits, spec: LineSpec, keepout: DistanceField | None,
                 nodata: DistanceField | None, margin_m: float, penalty: float) -> None:
        self.gr = ground
        self.mover = mover
        self.limits = limits
        self.line = spec.kind
        self.c_min, self.c_max = spec.clearance_m
        self.keep = keepout
        self.nodata = nodata
        self.margin = margin_m
        self.w_pen = penalty
        self.cell = cell = ground.terrain.cell_size
        self.eps_plan = 1e-4 * cell
        self.u_floor = 1e-8 * mover.g * cell
        self.u_max = (mover.max_speed * (1 - 1e-4)) ** 2 if mover.max_speed is not None else -1.0
        self.u_stall = (mover.stall_speed * (1 + 1e-4)) ** 2 if mover.stall_speed > 0 else -1.0
        #: optimise the full normal-force model's time (the polish) instead of the gravity one,
        #: with the plan length smoothed by ``eps_full`` (m)
        self.full = False
        self.eps_full = 0.0
        #: speed-aware bends: ``(station fraction, required radius m)`` of the interior
        #: vertices of the line last given to :meth:`update_bends`, or None
        self.bends = None
        #: samples per segment of the clearance penalty (fixed on first use)
        self._clear_m = None

    # -- variables: interior vertices; ground (x, y), raised (x, y, h above ground) ------

    def nvar(self) -> int:
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

    def bounds(self, m: int) -> tuple[np.ndarray, np.ndarray]:
        """Lower and upper bounds of the variables of ``m`` interior vertices."""
        (x0, x1), (y0, y1) = self.gr.xlim, self.gr.ylim
        if self.line == "ground":
            lo, hi = [x0, y0], [x1, y1]
        else:
            lo, hi = [x0, y0, self.c_min], [x1, y1, self.c_max]
        return np.tile(lo, m).astype(float), np.tile(hi, m).astype(float)

    def project(self, P, P_start):
        """Clip vertices into the bounds, heights onto the ground (or the clearance band);
        ends fixed at the start line's ends."""
        P = P.copy()
        P[0] = P_start[0]
        P[-1] = P_start[-1]
        P[1:-1, 0] = np.clip(P[1:-1, 0], *self.gr.xlim)
        P[1:-1, 1] = np.clip(P[1:-1, 1], *self.gr.ylim)
        zg = self.gr.z(P[1:-1, 0], P[1:-1, 1])
        if self.line == "ground":
            P[1:-1, 2] = zg
            for end in (0, -1):
                z_end = self.gr.z(P[end, 0], P[end, 1])
                if np.isfinite(z_end):
                    P[end, 2] = z_end
        else:
            P[1:-1, 2] = zg + np.clip(P[1:-1, 2] - zg, self.c_min, self.c_max)
        return P

    @property
    def round_bends(self) -> bool:
        """True when a plan bend limit is set (a radius, or a lateral acceleration): lines
        are rounded and resampled on splines."""
        return self.limits.min_radius_m is not None or self.limits.max_lateral_g is not None

    def bed_normals(self, P):
        """Upward ground normals under a ground line's vertices (None for a raised line)."""
        if self.line != "ground":
            return None
        n = self.gr.terrain.normal(P[:, 0], P[:, 1])
        return n if np.all(np.isfinite(n)) else None

    def loads(self, P, model: str):
        """The line's loads (:func:`fallway.loads.line_loads`) at the speeds of ``model``."""
        v = np.sqrt(np.maximum(self.speeds(P, model), 0.0))
        return line_loads(P, v, g=self.mover.g, surface_normal=self.bed_normals(P))

    def update_bends(self, P, model: str) -> None:
        """Freeze the speed-aware bend radii for the next solve: the radius each interior
        vertex of ``P`` needs at its speed with ``model``
        (:func:`fallway.loads.required_radius_m`: lateral g, normal g, lift-off, and the
        bend radius limit), as a function of the station fraction.  Left None while every
        vertex is below half its cap and no radius limit is set (the penalty would be zero
        and the compiled objective stays in use)."""
        lim = self.limits
        if not lim.speed_aware or len(P) < 3 or not np.all(np.isfinite(P)):
            self.bends = None
            return
        v = np.sqrt(np.maximum(self.speeds(P, model), 0.0))
        r = required_radius_m(P, v, lim, g=self.mover.g, surface_normal=self.bed_normals(P))
        kap = curvature(P[:-2], P[1:-1], P[2:])
        with np.errstate(invalid="ignore"):  # a straight vertex (0) where no bend is allowed (inf): NaN, not tight
            tight = kap * r > 0.5
        if lim.min_radius_m is None and not np.any(tight):
            self.bends = None
            return
        self.bends = (_fractions(P)[1:-1], r)

    def bend_radii(self, P):
        """The frozen required radius at each interior vertex of ``P`` (None when not frozen)."""
        if self.bends is None:
            return None
        return np.interp(_fractions(P)[1:-1], *self.bends)

    # -- objective ---------------------------------------------------------------------

    def speeds(self, P, model: str) -> np.ndarray:
        """Squared speeds at the vertices with the ``"gravity"`` or ``"full"`` model."""
        mv = self.mover
        if model == "full":
            return full_chain(P, mv.v0 ** 2, mv.g, mv.mu, mv.drag, 0.0, -1.0, -1.0, False)[3]
        return gravity_chain(P, mv.v0 ** 2, mv.g, mv.mu, mv.drag, self.eps_plan, self.u_floor, 0.0, -1.0, -1.0)[3]

    def objective(self, P):
        """time + penalties and its gradient with respect to the vertices (N, 3)."""
        mv = self.mover
        # speed penalties act on v² (m²/s²): scaled so that 1 m²/s² costs ~1e-2 s at w = 1e4
        if self.full:
            T, pen, G, _, ok = full_chain(P, mv.v0 ** 2, mv.g, mv.mu, mv.drag, self.w_pen * 1e-6, self.u_max,
                                          self.u_stall, True, self.eps_full, self.u_floor, 1e3)
            if not math.isfinite(T):
                return math.inf, G
        else:
            T, pen, G, _ = gravity_chain(P, mv.v0 ** 2, mv.g, mv.mu, mv.drag, self.eps_plan, self.u_floor,
                                         self.w_pen * 1e-6, self.u_max, self.u_stall)
        f = T + pen
        lim = self.limits
        if math.isfinite(lim.min_grade) or math.isfinite(lim.max_grade):
            v, gg = grade_penalty(P, lim.min_grade, lim.max_grade, self.w_pen, 1e-3, self.eps_plan)
            f += v
            G += gg
        if self.bends is not None:
            # the frozen radii follow the station fraction, which every vertex moves: the
            # penalty's derivative in the radius is chained through the fractions (without
            # it the gradient misses a term as large as the penalty's own where the
            # required radius changes fast along the line, and the solver stalls)
            fr = _fractions(P)[1:-1]
            v, gg, dr = radius_penalty(P, np.interp(fr, *self.bends), self.w_pen, 2e-3, radius_grad=True)
            f += v
            G += gg + _fraction_grad(P, dr * _interp_slope(fr, *self.bends))
        elif lim.min_radius_m is not None:
            v, gg = radius_penalty(P, lim.min_radius_m, self.w_pen, 2e-3)
            f += v
            G += gg
        if self.line == "raised":
            v, gg = self.clearance_penalty(P)
            f += v
            G += gg
        for fld, marg in ((self.keep, self.margin), (self.nodata, 1.5 * self.cell)):
            if fld is not None:
                v, gg, _ = field_penalty(P, fld, self.w_pen, marg, 1e-4 * self.cell)
                f += v
                G += gg
        return f, G

    def clearance_penalty(self, P):
        """Exterior penalty, with its gradient (N, 3), on the clearance between the vertices
        of a raised line: each segment sampled at the same fractions (enough for half-cell
        steps on the longest segment of the first line seen), ``w (excess / 1 m)²`` for every
        sample outside the band shrunk by :data:`CLEARANCE_MARGIN_M` (the vertices
        themselves are held by the bounds)."""
        if self._clear_m is None:
            # a fixed number of samples per segment (a count that followed the segment's
            # length would make the objective jump as a segment crosses a multiple of half a
            # cell, and L-BFGS-B's line search stall): enough for the longest segment of the
            # first line seen, which the levels after it only shorten
            plan = np.hypot(*np.diff(P[:, :2], axis=0).T)
            self._clear_m = int(min(32, max(4, math.ceil(float(plan.max(initial=0.0)) / (0.5 * self.cell)))))
        m = self._clear_m
        fr = np.tile(np.arange(1, m) / m, len(P) - 1)
        seg = np.repeat(np.arange(len(P) - 1), m - 1)
        Q = P[seg] + fr[:, None] * (P[seg + 1] - P[seg])
        G = np.zeros_like(P)
        if not len(Q):
            return 0.0, G
        zg, gx, gy = self.gr.z_grad(Q[:, 0], Q[:, 1])
        h = Q[:, 2] - zg
        below = np.nan_to_num(np.maximum(self.c_min + CLEARANCE_MARGIN_M - h, 0.0))
        above = np.nan_to_num(np.maximum(h - (self.c_max - CLEARANCE_MARGIN_M), 0.0))
        e = above - below  # d(pen)/dh = 2 w e
        if not np.any(e):
            return 0.0, G
        dh = np.column_stack([-np.nan_to_num(gx), -np.nan_to_num(gy), np.ones(len(Q))])
        dQ = (2.0 * self.w_pen * e)[:, None] * dh
        np.add.at(G, seg, (1.0 - fr)[:, None] * dQ)
        np.add.at(G, seg + 1, fr[:, None] * dQ)
        return float(self.w_pen * np.sum(e * e)), G

    def compiled(self) -> bool:
        """True when the objective is the bare chain on the ground surface (one compiled pass)."""
        lim = self.limits
        return not (self.full or self.line != "ground" or self.keep is not None or self.nodata is not None
                    or math.isfinite(lim.min_grade) or math.isfinite(lim.max_grade) or lim.min_radius_m is not None
                    or self.bends is not None)

    def fg(self, X, ends):
        """Objective and gradient in the variables; 1e30 (zero gradient) off the surface."""
        if self.compiled():
            mv = self.mover
            surf = self.gr.surface
            for _ in range(2):
                f, g, missing = ground_fg(np.ascontiguousarray(X, float), ends[0], ends[1], surf.tables,
                                          mv.v0 ** 2, mv.g, mv.mu, mv.drag, self.eps_plan, self.u_floor,
                                          self.w_pen * 1e-6, self.u_max, self.u_stall)
                if not missing:
                    return f, g
                surf.ensure(X[0::2], X[1::2])  # builds the tiles, then once more
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

    # -- limits --------------------------------------------------------------------------

    def violations(self, P, model: str) -> dict:
        """Status of every limit on the line P: ``"inactive"``, ``"active"`` or ``"violated"``;
        speeds with the ``"gravity"`` or ``"full"`` model."""
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
        out.update(self._speed_status(P, model))
        if lim.min_radius_m is not None and len(P) >= 3:
            rmin = min_radius_m(P, dims=3)
            out["min_radius"] = ("violated" if rmin < lim.min_radius_m * (1 - 1e-4)
                                 else "active" if rmin < lim.min_radius_m * (1 + 1e-2) else "inactive")
        if lim.speed_aware and len(P) >= 3:
            out.update(load_status(self.loads(P, model), lim))
        if self.keep is not None:
            out["keepout"] = keepout_status(P, self.keep, self.margin)
        # DEM extent and nodata: every vertex and segment point over cells with data
        fr = np.linspace(0.0, 1.0, 5)
        X = (P[:-1, None, :2] * (1 - fr)[None, :, None] + P[1:, None, :2] * fr[None, :, None]).reshape(-1, 2)
        out["extent"] = "inactive" if bool(np.all(on_data(self.gr.terrain, X[:, 0], X[:, 1]))) else "violated"
        if self.line == "raised":
            # along every segment (half-cell samples), held to CLEARANCE_TOL_M as the route's check
            Q, _, fr = sample_segments(P, 0.5 * self.cell)
            inner = (fr > 0.0) | (np.arange(len(fr)) > 0)
            inner[-1] = False
            Q = Q[inner]
            h = Q[:, 2] - self.gr.z(Q[:, 0], Q[:, 1])
            bad = (h < self.c_min - CLEARANCE_TOL_M) | (h > self.c_max + CLEARANCE_TOL_M) | ~np.isfinite(h)
            near = (h < self.c_min + 1e-3) | (h > self.c_max - 1e-3)
            out["clearance"] = "violated" if bad.any() else ("active" if near.any() else "inactive")
        return out

    def _speed_status(self, P, model: str) -> dict:
        mv = self.mover
        out = {}
        if mv.max_speed is None and mv.stall_speed <= 0:
            return out
        u = self.speeds(P, model)
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
        return out
