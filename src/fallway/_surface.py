"""The terrain's smooth surface, compiled: tiled interpolating bicubic splines.

One implementation serves :meth:`fallway.terrain.Terrain.sample`, ``gradient``,
``normal`` and ``valid`` and the refinement's compiled objective, which calls
:func:`surface_eval` from inside its own kernel.

Construction
    The grid is cut into tiles of :data:`TILE` x :data:`TILE` cells.  A tile's spline
    interpolates the heights of its cells plus :data:`TILE_PAD` cells of context on every
    side (clipped to the grid): a tensor product of cubic B-splines on the cell-centre
    coordinates with the knots of an interpolating spline with "not-a-knot" ends,
    ``t = (0, 0, 0, 0, 2, 3, ..., m - 3, m - 1, m - 1, m - 1, m - 1)`` along an axis of
    ``m >= 4`` points (the knots FITPACK chooses for ``s = 0``; an axis of ``m < 4``
    points takes the interpolating polynomial of degree ``m - 1``).  FITPACK's
    ``regrid`` (``s = 0``, through :class:`scipy.interpolate.RectBivariateSpline`)
    computes the coefficients (the same bits as before the surface was compiled, so
    the refinement's results did not move); evaluation is this module's own.  Such a
    spline reproduces every polynomial of degree <= 3 (de Boor, *A Practical Guide to
    Splines*, ch. XIII), so planes are exact.  Tiles are built on first use only (:meth:`SmoothSurface.ensure`).
Nodata
    For the splines only, nodata cells of a tile's block are filled by linear
    extrapolation from the nearest valid cell (:func:`fill_nodata`), so a plane stays
    exact right up to a hole.  A point is *valid* when it lies inside the hull of cell
    centres and no nodata cell is in the 4 x 4 block of cells around it (no cell of the
    2 x 2 block around it is next to nodata); elsewhere the surface is NaN.
Seams
    Within :data:`BLEND` cells of an interior tile boundary the two neighbouring tiles'
    splines are blended with the C2 weight S(t) = 6t^5 - 15t^4 + 10t^3; exact wherever
    both splines are (planes, cubics).  A cubic spline's response to a change decays by
    about 2 - sqrt(3) = 0.27 per cell, so with 12 - 6 = 6 cells of context beyond the
    blend zone neighbouring tiles agree to ~4e-4 of the local third differences there.

Evaluation follows FITPACK's ``fpbisp``: the point is clamped to the spline's base
interval and the k + 1 non-zero B-splines come from the Cox-de Boor recursion.  All
compiled functions take the flat arrays of :class:`SurfaceTables` and return status
codes, never raise.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numba import njit

__all__ = ["TILE", "TILE_PAD", "BLEND", "SurfaceTables", "SmoothSurface", "surface_eval", "fill_nodata"]

#: Tile edge, cells.
TILE = 128
#: Context cells on every side of a tile.
TILE_PAD = 12
#: Half-width of the blend zone at an interior tile boundary, cells.
BLEND = 6.0
#: Extrapolated nodata fill reaches at most this many cells before it is held constant.
FILL_REACH_CELLS = 8.0


class SurfaceTables(NamedTuple):
    """The flat arrays of a smooth surface, as its compiled functions take them.

    ``slot[kr, kc]`` is the row of tile (kr, kc) in the per-tile arrays, -2 while it is
    not built, -1 when its block holds no data.  ``TX``/``TY`` hold the knots (``NX``,
    ``NY`` of them), ``CF`` the coefficients (row-major, rows first), ``KX``/``KY`` the
    degrees, ``R0``/``C0`` the block's first row and column.  ``near`` marks cells next
    to nodata (shape (0, 0) when there is none); ``a, c0, e, f0`` are the transform.
    """

    rows: int
    cols: int
    a: float
    c0: float
    e: float
    f0: float
    near: np.ndarray
    slot: np.ndarray
    TX: np.ndarray
    TY: np.ndarray
    NX: np.ndarray
    NY: np.ndarray
    KX: np.ndarray
    KY: np.ndarray
    CF: np.ndarray
    R0: np.ndarray
    C0: np.ndarray


# ---------------------------------------------------------------------------------------
# compiled evaluation


@njit(cache=True, nogil=True)
def _basis(T, s, n, k, x, h, dh, hh, h1):
    """Knot interval ``l`` of ``x`` (clamped to the base interval, as FITPACK's fpbisp)
    and the k + 1 non-zero B-splines there (``h``) and their derivatives (``dh``); the
    knots are row ``s`` of ``T``, ``n`` of them."""
    lo = T[s, k]
    hi = T[s, n - k - 1]
    if x < lo:
        x = lo
    if x > hi:
        x = hi
    # largest l in [k, n - k - 2] with t[l] <= x; the knots sit near the grid points, so
    # start from that guess and step
    top = n - k - 2
    l = min(max(int(x) + k - 1, k), top)
    while l > k and T[s, l] > x:
        l -= 1
    while l < top and T[s, l + 1] <= x:
        l += 1
    h[0] = 1.0
    for j in range(1, k + 1):
        if j == k:
            for i in range(j):
                h1[i] = h[i]
        for i in range(j):
            hh[i] = h[i]
        h[0] = 0.0
        for i in range(j):
            li = l + i + 1
            lj = li - j
            tli = T[s, li]
            tlj = T[s, lj]
            f = hh[i] / (tli - tlj)
            h[i] = h[i] + f * (tli - x)
            h[i + 1] = f * (x - tlj)
    # derivative: k (N_{q,k-1}/(t_{q+k}-t_q) - N_{q+1,k-1}/(t_{q+k+1}-t_{q+1})), q = l-k+i
    for i in range(k + 1):
        q = l - k + i
        d = 0.0
        if k > 0:
            if i >= 1:
                d += h1[i - 1] / (T[s, q + k] - T[s, q])
            if i + 1 <= k:
                d -= h1[i] / (T[s, q + k + 1] - T[s, q + 1])
            d *= k
        dh[i] = d
    return l


@njit(cache=True, nogil=True)
def _blend1(u, n):
    """Tiles and weights along one axis at fractional cell coordinate ``u``:
    ``(tile_a, tile_b, w_a, w_b, dw_b/du, blended)``; dw_a/du = -dw_b/du."""
    nt = -(-n // TILE)
    m = int(math.floor(u / TILE + 0.5))
    near = (m >= 1) and (m <= nt - 1) and abs(u - m * TILE) < BLEND
    own = int(math.floor(u / TILE))
    own = min(max(own, 0), nt - 1)
    if not near:
        return own, own, 1.0, 0.0, 0.0, False
    t = (u - m * TILE + BLEND) / (2.0 * BLEND)
    t = min(max(t, 0.0), 1.0)
    wb = t * t * t * (t * (6.0 * t - 15.0) + 10.0)
    dwb = 30.0 * t * t * (1.0 - t) ** 2 / (2.0 * BLEND)
    return m - 1, m, 1.0 - wb, wb, dwb, True


@njit(cache=True, nogil=True)
def _valid_at(rows, cols, near, r, c):
    """Inside the hull of cell centres and no cell of the 2 x 2 block around (r, c) next
    to nodata (``near`` empty: no nodata at all)."""
    if not (math.isfinite(r) and math.isfinite(c)):
        return False
    eps = 1e-9
    if r < -eps or r > rows - 1 + eps or c < -eps or c > cols - 1 + eps:
        return False
    if near.shape[0] > 0:
        rr = min(max(r, 0.0), rows - 1.0)
        cc = min(max(c, 0.0), cols - 1.0)
        i0 = min(int(math.floor(rr)), rows - 2)
        j0 = min(int(math.floor(cc)), cols - 2)
        if near[i0, j0] or near[i0 + 1, j0] or near[i0, j0 + 1] or near[i0 + 1, j0 + 1]:
            return False
    return True


@njit(cache=True, nogil=True)
def surface_eval(tab, R, C, want_grad):
    """Heights and (d/drow, d/dcol) of the surface at fractional cell coordinates (R, C).

    Returns ``(Z, DR, DC, missing)``: NaN where a point is not valid (or needs a tile
    that holds no data); ``missing`` True when a tile a valid point needs is not built
    yet (build it, :meth:`SmoothSurface.ensure`, and evaluate again).
    """
    npt = R.shape[0]
    Z = np.full(npt, np.nan)
    DR = np.full(npt, np.nan)
    DC = np.full(npt, np.nan)
    hx = np.empty(5)
    dhx = np.empty(5)
    hy = np.empty(5)
    dhy = np.empty(5)
    hh = np.empty(5)
    h1 = np.zeros(5)
    slot, TX, TY, NX, NY, KX, KY, CF, R0, C0 = (tab.slot, tab.TX, tab.TY, tab.NX, tab.NY, tab.KX, tab.KY, tab.CF,
                                                tab.R0, tab.C0)
    rows, cols, near = tab.rows, tab.cols, tab.near
    missing = False
    for p in range(npt):
        r = R[p]
        c = C[p]
        if not _valid_at(rows, cols, near, r, c):
            continue
        ra, rb, wra, wrb, dwr, _ = _blend1(r, rows)
        ca, cb, wca, wcb, dwc, _ = _blend1(c, cols)
        z = 0.0
        dzr = 0.0
        dzc = 0.0
        bad = False
        for ia in range(2):
            if ia == 1 and not ((wrb > 0.0) or (dwr != 0.0)):
                continue
            kr = ra if ia == 0 else rb
            wr = wra if ia == 0 else wrb
            sr = -1.0 if ia == 0 else 1.0
            for ib in range(2):
                if ib == 1 and not ((wcb > 0.0) or (dwc != 0.0)):
                    continue
                kc = ca if ib == 0 else cb
                wc = wca if ib == 0 else wcb
                sc = -1.0 if ib == 0 else 1.0
                s = slot[kr, kc]
                if s < 0:
                    if s == -2:
                        missing = True
                    bad = True
                    continue
                kx = KX[s]
                ky = KY[s]
                nyc = NY[s] - ky - 1
                lx = _basis(TX, s, NX[s], kx, r - R0[s], hx, dhx, hh, h1)
                ly = _basis(TY, s, NY[s], ky, c - C0[s], hy, dhy, hh, h1)
                v = 0.0
                vr = 0.0
                vc = 0.0
                for i in range(kx + 1):
                    base = (lx - kx + i) * nyc + ly - ky
                    for j in range(ky + 1):
                        cf = CF[s, base + j]
                        v += hx[i] * hy[j] * cf
                        if want_grad:
                            vr += dhx[i] * hy[j] * cf
                            vc += hx[i] * dhy[j] * cf
                z += wr * wc * v
                if want_grad:
                    dzr += wr * wc * vr + sr * dwr * wc * v
                    dzc += wr * wc * vc + sc * dwc * wr * v
        if bad:
            continue
        Z[p] = z
        DR[p] = dzr
        DC[p] = dzc
    return Z, DR, DC, missing


@njit(cache=True, nogil=True)
def _valid_many(tab, R, C):
    out = np.empty(R.shape[0], np.bool_)
    for p in range(R.shape[0]):
        out[p] = _valid_at(tab.rows, tab.cols, tab.near, R[p], C[p])
    return out


@njit(cache=True, nogil=True)
def _missing_tiles(tab, R, C):
    """Tile ids (kr * ntc + kc) that valid points need and that are not built yet."""
    ntc = tab.slot.shape[1]
    mark = np.zeros(tab.slot.size, np.bool_)
    out = []
    for p in range(R.shape[0]):
        r = R[p]
        c = C[p]
        if not _valid_at(tab.rows, tab.cols, tab.near, r, c):
            continue
        ra, rb, _, _, _, _ = _blend1(r, tab.rows)
        ca, cb, _, _, _, _ = _blend1(c, tab.cols)
        for kr in (ra, rb):
            for kc in (ca, cb):
                tid = kr * ntc + kc
                if tab.slot[kr, kc] == -2 and not mark[tid]:
                    mark[tid] = True
                    out.append(tid)
    return out


# ---------------------------------------------------------------------------------------
# construction (Python: once per tile)


def _interpolant(block: np.ndarray):
    """Knots, degrees and coefficients of the spline through every height of ``block``.

    FITPACK's ``regrid`` with ``s = 0`` (through :class:`scipy.interpolate.RectBivariateSpline`)
    solves the two collocation systems; its knots are those of the module notes.
    """
    from scipy.interpolate import RectBivariateSpline

    mr, mc = block.shape
    sp = RectBivariateSpline(np.arange(mr, dtype=float), np.arange(mc, dtype=float), block,
                             kx=min(3, mr - 1), ky=min(3, mc - 1), s=0)
    tx, ty, cf = sp.tck
    kx, ky = sp.degrees
    return np.asarray(tx, float), np.asarray(ty, float), np.asarray(cf, float).ravel(), int(kx), int(ky)


def fill_nodata(z: np.ndarray, nodata: np.ndarray) -> np.ndarray:
    """Nodata cells filled by linear extrapolation from the nearest valid cell.

    The slope at the valid cell is taken from valid neighbours only (central difference,
    else one-sided), so on a plane the fill is the plane itself.  The extrapolation
    reaches at most :data:`FILL_REACH_CELLS` cells and is held constant beyond.

    Examples
    --------
    >>> z = np.array([[0.0, 1.0, 2.0, np.nan]])
    >>> fill_nodata(z, np.isnan(z)).tolist()
    [[0.0, 1.0, 2.0, 3.0]]
    """
    from scipy.ndimage import distance_transform_edt

    gr = _valid_difference(z, axis=0)
    gc = _valid_difference(z, axis=1)
    _, (ir, ic) = distance_transform_edt(nodata, return_indices=True)
    rows, cols = np.nonzero(nodata)
    qr, qc = ir[rows, cols], ic[rows, cols]
    dr = (rows - qr).astype(float)
    dc = (cols - qc).astype(float)
    dist = np.hypot(dr, dc)
    shrink = np.minimum(1.0, FILL_REACH_CELLS / np.maximum(dist, 1e-300))
    out = z.copy()
    out[rows, cols] = z[qr, qc] + shrink * (gr[qr, qc] * dr + gc[qr, qc] * dc)
    return out


def _valid_difference(z: np.ndarray, axis: int) -> np.ndarray:
    """Per-cell derivative along ``axis`` from valid neighbours only (0 if none)."""
    zz = np.moveaxis(z, axis, 0)
    fwd = np.full(zz.shape, np.nan)
    bwd = np.full(zz.shape, np.nan)
    fwd[:-1] = zz[1:] - zz[:-1]
    bwd[1:] = zz[1:] - zz[:-1]
    d = np.where(np.isfinite(fwd) & np.isfinite(bwd), 0.5 * (fwd + bwd),
                 np.where(np.isfinite(fwd), fwd, np.where(np.isfinite(bwd), bwd, 0.0)))
    return np.moveaxis(d, 0, axis)


class SmoothSurface:
    """The smooth surface of one elevation grid: lazily built tiles, compiled evaluation.

    Parameters
    ----------
    z : ndarray (rows, cols)
        Heights, NaN = nodata; row 0 north.  Not copied: it must not change.
    a, c0, e, f0 : float
        The grid's transform: x = c0 + (col + 1/2) a, y = f0 + (row + 1/2) e.

    Examples
    --------
    >>> s = SmoothSurface(np.add.outer(np.zeros(5), np.arange(6.0)), 1.0, 0.0, -1.0, 5.0)
    >>> z, gx, gy = s.evaluate(np.array([2.25]), np.array([3.0]), grad=True)
    >>> print(f"{z[0]:.4f} {gx[0]:.4f} {gy[0]:.4f}")
    1.7500 1.0000 0.0000
    """

    def __init__(self, z: np.ndarray, a: float, c0: float, e: float, f0: float) -> None:
        self._z = z
        rows, cols = z.shape
        nodata = ~np.isfinite(z)
        if nodata.any():
            from scipy.ndimage import binary_dilation

            near = binary_dilation(nodata, structure=np.ones((3, 3), bool))
        else:
            near = np.zeros((0, 0), np.bool_)
        ntr, ntc = -(-rows // TILE), -(-cols // TILE)
        mr, mc = min(rows, TILE + 2 * TILE_PAD), min(cols, TILE + 2 * TILE_PAD)
        self._shape = (mr + 4, mc + 4, mr * mc)  # most knots per axis, most coefficients
        self._count = 0
        self.tables = self._alloc(SurfaceTables(rows, cols, float(a), float(c0), float(e), float(f0), near,
                                                np.full((ntr, ntc), -2, np.int64), *([None] * 9)), 1)

    def _alloc(self, tab: SurfaceTables, cap: int) -> SurfaceTables:
        mt_r, mt_c, mcf = self._shape
        new = dict(TX=np.zeros((cap, mt_r)), TY=np.zeros((cap, mt_c)), NX=np.zeros(cap, np.int64),
                   NY=np.zeros(cap, np.int64), KX=np.zeros(cap, np.int64), KY=np.zeros(cap, np.int64),
                   CF=np.zeros((cap, mcf)), R0=np.zeros(cap), C0=np.zeros(cap))
        if tab.TX is not None:
            for name, arr in new.items():
                arr[:self._count] = getattr(tab, name)[:self._count]
        return tab._replace(**new)

    def rowcol(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """Fractional (row, col) of map points, flattened to C-contiguous float arrays."""
        t = self.tables
        x, y = np.broadcast_arrays(np.asarray(x, float), np.asarray(y, float))
        return (np.ascontiguousarray(((y - t.f0) / t.e - 0.5).ravel()),
                np.ascontiguousarray(((x - t.c0) / t.a - 0.5).ravel()))

    def ensure(self, x, y) -> None:
        """Build the tiles that the valid points among (x, y) need."""
        R, C = self.rowcol(x, y)
        for tid in _missing_tiles(self.tables, R, C):
            self._build(*divmod(int(tid), self.tables.slot.shape[1]))

    def _build(self, kr: int, kc: int) -> None:
        tab = self.tables
        r0, r1 = max(0, kr * TILE - TILE_PAD), min(tab.rows, (kr + 1) * TILE + TILE_PAD)
        c0, c1 = max(0, kc * TILE - TILE_PAD), min(tab.cols, (kc + 1) * TILE + TILE_PAD)
        block = self._z[r0:r1, c0:c1]
        nodata = ~np.isfinite(block)
        if nodata.all():
            tab.slot[kr, kc] = -1
            return
        if nodata.any():
            block = fill_nodata(block, nodata)
        tx, ty, cf, kx, ky = _interpolant(np.asarray(block, float))
        s = self._count
        if s == tab.TX.shape[0]:
            tab = self.tables = self._alloc(tab, 2 * s)
        tab.TX[s, :len(tx)] = tx
        tab.TY[s, :len(ty)] = ty
        tab.CF[s, :len(cf)] = cf
        tab.NX[s], tab.NY[s], tab.KX[s], tab.KY[s] = len(tx), len(ty), kx, ky
        tab.R0[s], tab.C0[s] = r0, c0
        self._count = s + 1
        tab.slot[kr, kc] = s

    def evaluate(self, x, y, grad: bool = False):
        """Heights (and with ``grad`` the slopes dz/dx, dz/dy) at map points, flattened.

        NaN where :meth:`valid` is False.
        """
        R, C = self.rowcol(x, y)
        Z, DR, DC, missing = surface_eval(self.tables, R, C, grad)
        if missing:
            self.ensure(x, y)
            Z, DR, DC, _ = surface_eval(self.tables, R, C, grad)
        if not grad:
            return Z
        # col = (x - c0)/a - 1/2 and row = (y - f0)/e - 1/2: d/dx = (1/a) d/dcol and
        # d/dy = (1/e) d/drow (e < 0: row 0 is north)
        return Z, DC / self.tables.a, DR / self.tables.e

    def valid(self, x, y) -> np.ndarray:
        """True where the surface is defined (flattened)."""
        return _valid_many(self.tables, *self.rowcol(x, y))
