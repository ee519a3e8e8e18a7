"""The refinement's solvers: bounded quasi-Newton (L-BFGS-B) with restarts and a diagonal
preconditioner, and the full-model polish (vertices moving normal to the line only).

Vertex placement is part of the problem: plan positions are free, so vertices slide along
the line; a level ends when the travel time is stationary (over ``_WINDOW`` iterations it
fell by less than a relative tolerance) or L-BFGS-B meets its own tolerance.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import minimize

from .chain import full_chain

__all__ = ["OneBlasThread", "solve", "polish", "normal_basis", "STAT_TOL_COARSE"]

#: L-BFGS-B memory, relative reduction of the objective that ends a level, and the
#: stationarity test on the travel time: stop when over the last ``_WINDOW`` iterations
#: the time fell by less than ``_STAT_TOL`` relatively.
_MAXCOR = 10
_FTOL = 1e-11
_WINDOW = 25
_STAT_TOL = 1e-9
#: the looser stationarity test of the levels before the last
STAT_TOL_COARSE = 1e-7
#: iterations between restarts of L-BFGS-B with a fresh preconditioner
_CHUNK = 100
#: full-model polish: stationarity tolerance (relative fall of the time over _WINDOW iterations)
_POLISH_TOL = 1e-8


class OneBlasThread:
    """Hold OpenBLAS to one thread while optimising (what threadpoolctl does): small BLAS
    calls inside L-BFGS-B are many times slower with several threads on a busy machine."""

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


def _diag_scale(prob, X0, ends, hscale, lo, hi):
    """1/sqrt of a finite-difference estimate of the Hessian diagonal (colour groups of
    every third vertex, so neighbouring vertices are not perturbed together)."""
    k = prob.nvar()
    f0, g0 = prob.fg(X0, ends)
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
            g1 = prob.fg(X0 + d, ends)[1]
            diag[idx] = (g1[idx] - g0[idx]) / d[idx]
    pos = diag > 0
    typical = np.median(diag[pos]) if pos.any() else 1.0
    diag = np.where(pos, diag, typical)
    diag = np.maximum(diag, 1e-8 * typical)
    sc = 1.0 / np.sqrt(diag)
    return sc * (np.median(hscale) / np.median(sc))


def solve(prob, P, max_iter, gtol, ftol=None, stat_tol=None):
    """L-BFGS-B from P, restarted every ``_CHUNK`` iterations with a fresh diagonal
    preconditioner (the stiffness near a start from rest changes as vertices move).

    Returns ``(P, iterations, residual, converged, message)``; the residual is the
    largest component of the projected gradient (s/m)."""
    ftol = _FTOL if ftol is None else ftol
    stol = _STAT_TOL if stat_tol is None else stat_tol
    ends = (P[0].copy(), P[-1].copy())
    X = prob.to_vars(P)
    lo, hi = prob.bounds(len(P) - 2)
    X = np.clip(X, lo, hi)
    f_start, _ = prob.fg(X, ends)
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
        Pc = prob.to_points(X0, ends)
        seg = np.linalg.norm(np.diff(Pc, axis=0), axis=1)
        hv = np.maximum(0.5 * (seg[:-1] + seg[1:]), 1e-6 * prob.cell)
        # diagonal preconditioning: variables in units of 1/sqrt(Hessian diagonal)
        sc = _diag_scale(prob, X0, ends, np.repeat(hv, prob.nvar()), lo, hi)

        def fun(xi, X0=X0, sc=sc):
            f, g = prob.fg(X0 + sc * xi, ends)
            return f, g * sc

        with np.errstate(divide="ignore", invalid="ignore"):
            sb = list(zip((lo - X0) / sc, (hi - X0) / sc))
        chunk = min(_CHUNK, max_iter - nit)
        with OneBlasThread():
            res = minimize(fun, np.zeros_like(X0), jac=True, method="L-BFGS-B", bounds=sb,
                           callback=stop_when_stationary,
                           options={"maxiter": chunk, "maxcor": _MAXCOR, "ftol": ftol, "gtol": gtol,
                                    "maxls": 40})
        nit += int(res.nit)
        Xn = np.clip(X0 + sc * res.x, lo, hi)
        f_new, f_old = prob.fg(Xn, ends)[0], prob.fg(X0, ends)[0]
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
    f, g = prob.fg(X, ends)
    if not (f <= f_start):
        X = prob.to_vars(P)
        f, g = prob.fg(X, ends)
    # projected gradient: components pushing out of an active bound do not count
    pg = g.copy()
    pg[(X <= lo + 1e-12) & (g > 0)] = 0.0
    pg[(X >= hi - 1e-12) & (g < 0)] = 0.0
    resid = float(np.max(np.abs(pg))) if pg.size else 0.0
    ok = done or resid <= max(gtol * 100, 1e-7)
    return prob.to_points(X, ends), nit, resid, ok, msg


def normal_basis(X, k):
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


def polish(opt, P, max_iter, gtol, stages=(0.1, 0.01, 0.0)):
    """Full-model polish: from the gravity-normal optimum, minimise the full model's own
    travel time (centripetal part of the normal force, discrete turning-angle curvature,
    as ``traverse``) with the same limits and bounds; the gradient is the adjoint of the
    full-model recursion (:func:`fallway.refine.chain.full_chain`).

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
        return full_chain(Q, u0, mv.g, mv.mu, mv.drag, 0.0, -1.0, -1.0, False)[0]

    t0 = full_time(P)
    ends = (P[0].copy(), P[-1].copy())
    k = opt.nvar()
    lo, hi = opt.bounds(len(P) - 2)
    seg = float(np.mean(np.linalg.norm(np.diff(P, axis=0), axis=1)))
    X = np.clip(opt.to_vars(P), lo, hi)
    nit = 0
    res = math.inf
    ok = False
    opt.full = True
    try:
        opt.eps_full = 0.0
        with np.errstate(all="ignore"):
            f_start = opt.fg(X, ends)[0]
        for frac in stages:
            opt.eps_full = frac * seg
            X0 = X
            B = normal_basis(X0, k)

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

            with OneBlasThread(), np.errstate(all="ignore"):
                r = minimize(fun, np.zeros(len(B) * (k - 1)), jac=True, method="L-BFGS-B", callback=stop,
                             options={"maxiter": max_iter, "maxcor": _MAXCOR, "ftol": _FTOL, "gtol": gtol,
                                      "maxls": 40})
            nit += int(r.nit)
            if r.fun <= f0:
                X = np.clip(X0 + np.einsum("ikj,ij->ik", B, r.x.reshape(len(B), k - 1)).ravel(), lo, hi)
            res = float(np.max(np.abs(r.jac))) if r.jac.size else 0.0
            ok = bool(r.success) or (len(hist) > _WINDOW and r.nit < max_iter)
        opt.eps_full = 0.0
        with np.errstate(all="ignore"):
            f_end = opt.fg(X, ends)[0]
    finally:
        opt.full = False
        opt.eps_full = 0.0
    Q = opt.to_points(X, ends)
    t1 = full_time(Q)
    # kept when the objective the polish minimises (the full-model time plus the limits'
    # penalties) fell: a line that breaks a limit may get slower on its way to meeting it
    if math.isfinite(t1) and f_end < f_start:
        return Q, nit, res, ok, f"full-model polish {t0:.6f} s -> {t1:.6f} s in {nit} iterations"
    return P, nit, res, ok, "full-model polish found nothing better than the line it started from"
