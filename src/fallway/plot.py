"""Pictures for a design note: the plan map and the long-section.

matplotlib is imported inside the functions; without ``ax`` a new
:class:`matplotlib.figure.Figure` is made directly (no pyplot, no GUI, rendered by Agg).  Every function takes ``ax=None`` (a new figure is made) and
returns the axes it drew on; the artists carry ``gid`` values starting with
``"fallway-"`` so callers and tests can find them.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np

from .errors import ParameterError

__all__ = ["plot_map", "plot_profile", "comparison_figure", "save_figure", "nice_step", "contour_step"]

_LINE_COLOUR = "#c0392b"
_LATTICE_COLOUR = "#1f4e79"
_KEEPOUT_COLOUR = "#7d3c98"
_ISO_COLOUR = "#117a65"
_FRONTIER_COLOUR = "#b9770e"


def _new_axes(ax, figsize):
    if ax is not None:
        return ax
    from matplotlib.figure import Figure  # no pyplot: no GUI, no global state; Agg renders it

    fig = Figure(figsize=figsize, layout="constrained")
    return fig.add_subplot()


def nice_step(span: float, target: int = 5) -> float:
    """A round step (1, 2 or 5 times a power of ten) (rounded up) cutting ``span`` into at most ``target`` parts.

    Examples
    --------
    >>> nice_step(730.0), nice_step(0.9, 3)
    (200.0, 0.5)
    """
    if not (math.isfinite(span) and span > 0):
        return 1.0
    raw = span / max(int(target), 1)
    p = 10.0 ** math.floor(math.log10(raw))
    for m in (1.0, 2.0, 5.0, 10.0):
        if raw <= m * p * 1.0000001:
            return m * p
    return 10.0 * p  # pragma: no cover


#: Largest hillshade raster drawn (pixels on the long side); larger grids are thinned,
#: which is below the resolution of the saved figure anyway.
_MAX_SHADE_PX = 1600


def _hillshade_rgb(terrain, rs=slice(0, None), cs=slice(0, None), max_px=_MAX_SHADE_PX):
    """Tinted hillshade RGBA of the window (rs, cs) and the step (cells per pixel) it was thinned by."""
    from matplotlib.colors import LightSource, Normalize
    import matplotlib

    win = terrain.z[rs, cs]
    step = max(1, math.ceil(max(win.shape) / max_px))
    z = np.array(win[::step, ::step], dtype=float)
    nodata = ~np.isfinite(z)
    if nodata.all():
        raise ParameterError("the terrain has no valid heights to draw")
    fill = np.where(nodata, np.nanmean(z), z)
    ls = LightSource(azdeg=315.0, altdeg=45.0)
    cell = terrain.cell_size * step
    lo, hi = np.nanpercentile(z, [1, 99])
    if hi <= lo:
        hi = lo + 1.0
    rgb = ls.shade(fill, cmap=matplotlib.colormaps["gist_earth"], norm=Normalize(lo - 0.25 * (hi - lo), hi),
                   blend_mode="soft", vert_exag=1.0, dx=cell, dy=cell)
    rgba = np.array(rgb, dtype=float)
    if rgba.shape[-1] == 3:
        rgba = np.concatenate([rgba, np.ones(rgba.shape[:2] + (1,))], axis=-1)
    rgba[nodata, 3] = 0.0
    return rgba, step


def _geometries(keepout):
    """Polygons from a Keepout (``.geometry``), a shapely geometry or an iterable of them."""
    import shapely

    geom = getattr(keepout, "geometry", keepout)
    if isinstance(geom, shapely.Geometry):
        geoms = [geom]
    else:
        geoms = list(geom)
    polys = []
    for g in geoms:
        for part in shapely.get_parts(g):
            if isinstance(part, shapely.Polygon) and not part.is_empty:
                polys.append(part)
            elif isinstance(part, shapely.GeometryCollection):
                polys.extend(_geometries(list(part.geoms)))
    return polys


def _polygon_path(poly):
    from matplotlib.path import Path as MplPath

    rings = [np.asarray(poly.exterior.coords)[:, :2]]
    rings += [np.asarray(r.coords)[:, :2] for r in poly.interiors]
    return MplPath.make_compound_path(*[MplPath(r, closed=True) for r in rings])


def _scale_bar(ax, width_m, note=None):
    from matplotlib.offsetbox import AnchoredOffsetbox, AuxTransformBox, HPacker, TextArea, VPacker
    from matplotlib.patches import Rectangle

    length = nice_step(width_m, 5)
    box = AuxTransformBox(ax.transData)
    box.add_artist(Rectangle((0, 0), length, 0, edgecolor="black", linewidth=3))
    label = f"{length:g} m" if length < 1000 else f"{length / 1000:g} km"
    if note:
        label += "\n" + note
    packed = VPacker(children=[box, TextArea(label, textprops={"size": 8})], align="center", pad=0, sep=3)
    bar = AnchoredOffsetbox("lower left", child=HPacker(children=[packed], pad=0, sep=0), pad=0.4,
                            borderpad=0.6, frameon=True)
    bar.patch.set_alpha(0.75)
    bar.set_gid("fallway-scalebar")
    ax.add_artist(bar)
    return bar, length


def _north_arrow(ax, angle_deg=0.0):
    """An arrow to true north, ``angle_deg`` anticlockwise from grid north (up)."""
    a = math.radians(angle_deg)
    tip = (0.94 - 0.06 * math.sin(a), 0.89 + 0.06 * math.cos(a))
    tail = (0.94 + 0.06 * math.sin(a), 0.89 - 0.06 * math.cos(a))
    arrow = ax.annotate("N", xy=tip, xytext=tail, xycoords="axes fraction",
                        textcoords="axes fraction", ha="center", va="top", fontsize=10, fontweight="bold",
                        arrowprops={"arrowstyle": "-|>", "color": "black", "lw": 1.5})
    arrow.set_gid("fallway-north")
    return arrow


#: Margin round the drawn items of a site map: this fraction of their larger side, at
#: least ``_MARGIN_CELLS`` cells (common practice: room for labels and the approach).
_MARGIN_FRACTION = 0.2
_MARGIN_CELLS = 10
#: The shorter side of a site map is at least this fraction of the longer (a straight
#: line running east-west still shows the ground either side of it).
_MIN_ASPECT = 0.6


def _map_view(terrain, route, reach, keepout_polys, points=None):
    """(left, bottom, right, top) of a site map: the items drawn, a margin, inside the DEM.

    ``points``: more (x, y) to show (candidate lines).  With nothing to draw but the
    terrain the view is the whole DEM.
    """
    left, bottom, right, top = (float(v) for v in terrain.bounds)
    boxes = []
    if points is not None and len(points):
        xy = np.asarray(points, dtype=float)[:, :2]
        boxes.append((xy[:, 0].min(), xy[:, 1].min(), xy[:, 0].max(), xy[:, 1].max()))
    if route is not None:
        line = np.asarray(route.line, dtype=float)
        lat = np.asarray(route.lattice.points, dtype=float)
        pts = np.concatenate([line[:, :2], lat[:, :2]])
        boxes.append((pts[:, 0].min(), pts[:, 1].min(), pts[:, 0].max(), pts[:, 1].max()))
    if reach is not None:
        t = np.asarray(reach.time_s, dtype=float)
        rr, cc = np.nonzero(np.isfinite(t))
        tr = reach.transform
        sx, sy = float(reach.start[0]), float(reach.start[1])
        if rr.size:
            xs = tr.c + (np.array([cc.min(), cc.max() + 1.0])) * tr.a
            ys = tr.f + (np.array([rr.min(), rr.max() + 1.0])) * tr.e
            boxes.append((min(xs.min(), sx), min(ys.min(), sy), max(xs.max(), sx), max(ys.max(), sy)))
        else:
            boxes.append((sx, sy, sx, sy))
    if not boxes:
        return left, bottom, right, top
    items = np.array(boxes, dtype=float)
    b0 = (items[:, 0].min(), items[:, 1].min(), items[:, 2].max(), items[:, 3].max())
    for poly in keepout_polys:  # the keep-outs near the items: those touching their box widened by its size
        a, b, c, d = poly.bounds
        span = max(b0[2] - b0[0], b0[3] - b0[1], 1.0)
        if a <= b0[2] + span and c >= b0[0] - span and b <= b0[3] + span and d >= b0[1] - span:
            boxes.append((a, b, c, d))
    box = np.array(boxes, dtype=float)
    x0, y0 = box[:, 0].min(), box[:, 1].min()
    x1, y1 = box[:, 2].max(), box[:, 3].max()
    margin = max(_MARGIN_FRACTION * max(x1 - x0, y1 - y0), _MARGIN_CELLS * terrain.cell_size)
    x0, x1, y0, y1 = x0 - margin, x1 + margin, y0 - margin, y1 + margin
    w, h = x1 - x0, y1 - y0
    if w < _MIN_ASPECT * h:
        x0, x1 = x0 - 0.5 * (_MIN_ASPECT * h - w), x1 + 0.5 * (_MIN_ASPECT * h - w)
    elif h < _MIN_ASPECT * w:
        y0, y1 = y0 - 0.5 * (_MIN_ASPECT * w - h), y1 + 0.5 * (_MIN_ASPECT * w - h)
    return max(x0, left), max(y0, bottom), min(x1, right), min(y1, top)


def _window(terrain, view):
    """Row and column slices of the cells whose centres lie in ``view`` (one cell of slack)."""
    tr = terrain.transform
    rows, cols = terrain.shape
    x0, y0, x1, y1 = view
    c0 = int(np.clip(math.floor((x0 - tr.c) / tr.a) - 1, 0, cols - 1))
    c1 = int(np.clip(math.ceil((x1 - tr.c) / tr.a) + 1, c0 + 1, cols))
    r0 = int(np.clip(math.floor((y1 - tr.f) / tr.e) - 1, 0, rows - 1))
    r1 = int(np.clip(math.ceil((y0 - tr.f) / tr.e) + 1, r0 + 1, rows))
    return slice(r0, r1), slice(c0, c1)


def contour_step(relief_m: float) -> float:
    """Contour interval for a view: a 1-2-5 step giving at most 20 contours over its relief.

    Successive 1-2-5 steps differ by at most 2.5 times, so the view gets 8 to 20
    contours (common practice for a legible site map: 10 to 20).

    Examples
    --------
    >>> contour_step(340.0), contour_step(37.0), contour_step(3000.0)
    (20.0, 2.0, 200.0)
    """
    return nice_step(relief_m, 20)


def _draw_contours(ax, terrain, rs, cs, step):
    """Contours of the window at ``step`` m, every fifth (index contour) bold and labelled."""
    z = np.array(terrain.z[rs, cs], dtype=float)
    if np.count_nonzero(np.isfinite(z)) < 4 or min(z.shape) < 2:
        return None, None
    thin = max(1, math.ceil(max(z.shape) / 800))
    z = z[::thin, ::thin]
    tr = terrain.transform
    xs = tr.c + (cs.start + np.arange(0, cs.stop - cs.start, thin) + 0.5) * tr.a
    ys = tr.f + (rs.start + np.arange(0, rs.stop - rs.start, thin) + 0.5) * tr.e
    lo, hi = float(np.nanmin(z)), float(np.nanmax(z))
    k0, k1 = math.ceil(lo / step), math.floor(hi / step)
    if not 0 <= k1 - k0 <= 100:  # no level in the view (or a step lost in the heights' rounding)
        return None, None
    levels = np.arange(k0, k1 + 1) * step
    zm = np.ma.masked_invalid(z)
    index = np.rint(levels / step).astype(np.int64) % 5 == 0
    minor = ax.contour(xs, ys, zm, levels=levels[~index] if (~index).any() else [lo - 1.0],
                       colors="#5d4e37", linewidths=0.35, alpha=0.7, zorder=2)
    minor.set_gid("fallway-contours")
    minor.set_in_layout(False)
    major = None
    if index.any():
        major = ax.contour(xs, ys, zm, levels=levels[index], colors="#5d4e37", linewidths=0.9, alpha=0.85,
                           zorder=2)
        major.set_gid("fallway-contours-index")
        major.set_in_layout(False)
        for label in ax.clabel(major, fmt=lambda v: f"{v:g}", fontsize=6, inline=True):
            label.set_in_layout(False)  # inside the axes: kept out of the layout, which then repeats exactly
    return minor, major


#: Graticule steps in degrees: 1-2-5 down to whole degrees, then minutes and seconds of arc.
_DEG_STEPS = (1 / 3600, 2 / 3600, 5 / 3600, 10 / 3600, 15 / 3600, 30 / 3600, 1 / 60, 2 / 60, 5 / 60, 10 / 60,
              15 / 60, 30 / 60, 1.0, 2.0, 5.0, 10.0, 15.0, 30.0)


def _deg_label(value: float, step: float, pos: str, neg: str) -> str:
    """``36°16'30"N``: degrees, minutes and seconds as fine as the step needs."""
    hemi = pos if value >= 0 else neg
    total = round(abs(value) * 3600.0)
    d, rem = divmod(total, 3600)
    m, s = divmod(rem, 60)
    if step >= 1.0 - 1e-9:
        return f"{d}°{hemi}"
    if step >= 1 / 60 - 1e-12:
        return f"{d}°{m:02d}'{hemi}"
    return f"{d}°{m:02d}'{s:02d}\"{hemi}"


def _graticule(ax, crs, view):
    """Meridians and parallels over the view (pyproj from the map's CRS to WGS 84).

    Each meridian is labelled where it meets the top edge, each parallel where it meets
    the right edge (as ticks of secondary axes, so labels never sit on the map).
    Returns the secondary axes (top, right), or None when the map has no CRS.
    """
    import pyproj

    if crs is None:
        return None
    to_ll = pyproj.Transformer.from_crs(pyproj.CRS.from_user_input(crs), "EPSG:4326", always_xy=True)
    to_xy = pyproj.Transformer.from_crs("EPSG:4326", pyproj.CRS.from_user_input(crs), always_xy=True)
    x0, y0, x1, y1 = view
    t = np.linspace(0.0, 1.0, 41)
    bx = np.concatenate([x0 + (x1 - x0) * t, np.full_like(t, x1), x1 - (x1 - x0) * t, np.full_like(t, x0)])
    by = np.concatenate([np.full_like(t, y0), y0 + (y1 - y0) * t, np.full_like(t, y1), y1 - (y1 - y0) * t])
    lon, lat = (np.asarray(v) for v in to_ll.transform(bx, by))
    if not (np.all(np.isfinite(lon)) and np.all(np.isfinite(lat))):
        return None
    ticks = ([], [])  # (position, label) on the top edge (meridians) and the right edge (parallels)
    for k, (vals, other) in enumerate(((lon, lat), (lat, lon))):
        span = float(vals.max() - vals.min())
        step = next((s for s in _DEG_STEPS if span / s <= 4.0), _DEG_STEPS[-1])
        first = math.ceil(vals.min() / step - 1e-9)
        last = math.floor(vals.max() / step + 1e-9)
        o = np.linspace(other.min(), other.max(), 60)
        for i in range(first, last + 1):
            v = i * step
            gx, gy = to_xy.transform(np.full_like(o, v), o) if k == 0 else to_xy.transform(o, np.full_like(o, v))
            gx, gy = np.asarray(gx), np.asarray(gy)
            ax.plot(gx, gy, color="#1a5276", linewidth=0.6, linestyle=(0, (4, 3)), alpha=0.8, zorder=3,
                    gid="fallway-graticule")
            if k == 0:
                order = np.argsort(gy)
                at = float(np.interp(y1, gy[order], gx[order]))
                if x0 < at < x1:
                    ticks[0].append((at, _deg_label(v, step, "E", "W")))
            else:
                order = np.argsort(gx)
                at = float(np.interp(x1, gx[order], gy[order]))
                if y0 < at < y1:
                    ticks[1].append((at, _deg_label(v, step, "N", "S")))
    same = (lambda u: u, lambda u: u)
    top = ax.secondary_xaxis("top", functions=same)
    top.set_xticks([p for p, _ in ticks[0]], labels=[lab for _, lab in ticks[0]], fontsize=7, color="#1a5276")
    right = ax.secondary_yaxis("right", functions=same)
    right.set_yticks([p for p, _ in ticks[1]], labels=[lab for _, lab in ticks[1]], fontsize=7, color="#1a5276",
                     rotation=90, va="center")
    for sec in (top, right):
        sec.set_gid("fallway-graticule-labels")
    return top, right


def _true_north_deg(crs, view):
    """Angle (degrees, anticlockwise from grid north) of true north at the view's centre."""
    import pyproj

    if crs is None:
        return 0.0
    c = pyproj.CRS.from_user_input(crs)
    to_ll = pyproj.Transformer.from_crs(c, "EPSG:4326", always_xy=True)
    to_xy = pyproj.Transformer.from_crs("EPSG:4326", c, always_xy=True)
    cx, cy = 0.5 * (view[0] + view[2]), 0.5 * (view[1] + view[3])
    lon, lat = to_ll.transform(cx, cy)
    dlat = min(1e-3, 89.9 - abs(lat)) if abs(lat) < 89.9 else 0.0
    if not (math.isfinite(lon) and math.isfinite(lat)) or dlat <= 0:
        return 0.0
    nx, ny = to_xy.transform(lon, lat + dlat)
    return math.degrees(math.atan2(-(nx - cx), ny - cy))


def _overview_inset(ax, terrain, view, route):
    """The whole DEM, small, in the lower right corner, with the view's outline."""
    from matplotlib.patches import Rectangle

    left, bottom, right, top = (float(v) for v in terrain.bounds)
    w, h = right - left, top - bottom
    size = 0.28
    iw, ih = (size, size * h / w) if w >= h else (size * w / h, size)
    ins = ax.inset_axes([0.99 - iw, 0.01, iw, ih], zorder=9)
    rgba, step = _hillshade_rgb(terrain, max_px=300)
    ins.imshow(rgba, extent=_raster_extent(terrain, rgba, step, slice(0, None), slice(0, None)), origin="upper",
               interpolation="bilinear")
    ins.add_patch(Rectangle((view[0], view[1]), view[2] - view[0], view[3] - view[1], fill=False,
                            edgecolor=_LINE_COLOUR, linewidth=1.2, gid="fallway-overview-view"))
    if route is not None:
        line = np.asarray(route.line, dtype=float)
        ins.plot(line[:, 0], line[:, 1], color=_LINE_COLOUR, linewidth=1.0)
    ins.set_xlim(left, right)
    ins.set_ylim(bottom, top)
    ins.set_aspect("equal")
    ins.set_xticks([])
    ins.set_yticks([])
    ins.set_gid("fallway-overview")
    return ins


def _raster_extent(terrain, rgba, step, rs, cs):
    """imshow extent of a hillshade of the window (rs, cs) thinned by ``step``."""
    tr = terrain.transform
    size = terrain.cell_size * step
    x_first = tr.c + (cs.start + 0.5) * tr.a  # centre of the first drawn cell
    y_first = tr.f + (rs.start + 0.5) * tr.e
    px_left = x_first - 0.5 * size
    px_top = y_first + 0.5 * size
    return (px_left, px_left + rgba.shape[1] * size, px_top - rgba.shape[0] * size, px_top)


def plot_map(terrain, route=None, *, reach=None, keepout=None, ax=None, view="auto", contours=True,
             graticule=True, overview=True):
    """Site map: hillshade, contours, the line, keep-out areas, reach isochrones, graticule.

    Parameters
    ----------
    terrain : Terrain
        Drawn as a tinted hillshade (matplotlib ``LightSource``, sun from the north-west)
        in map coordinates, with contours.
    route : Route, optional
        Its reported line (solid) and its lattice line (dashed), start and end markers.
    reach : ReachMap, optional
        Isochrones (contours of ``time_s`` at round intervals) and the stall frontier
        (the edge of the reachable area).
    keepout : Keepout or shapely geometry, optional
        No-go polygons, hatched: a :class:`fallway.limits.Keepout` (reprojected to the
        terrain CRS with ``Keepout.in_crs``) or shapely polygons in the terrain CRS.
    ax : matplotlib Axes, optional
    view : {"auto", "dem"} or (left, bottom, right, top)
        ``"auto"``: zoomed to the line, the reachable area and the keep-outs near them,
        with a margin (a fifth of their larger side, at least ten cells), inside the DEM;
        the whole DEM when there is nothing else to draw.  ``"dem"``: the whole DEM.
    contours : bool
        Contours at :func:`contour_step` of the view's relief (every fifth bold, labelled).
    graticule : bool
        Meridians and parallels (pyproj, from the terrain's CRS to WGS 84) labelled in
        degrees, minutes and seconds; none for a terrain without a CRS.
    overview : bool
        The whole DEM as a small inset (lower right) with the view outlined, when the view
        is less than half the DEM's width or height.

    Returns
    -------
    matplotlib.axes.Axes
        With a scale bar and a north arrow pointing to true north (grid north turned by the
        meridian convergence at the view's centre).  ``ax.figure`` is what
        :func:`save_figure` writes (it also takes the axes itself).

    Examples
    --------
    >>> import numpy as np
    >>> from affine import Affine
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(np.add.outer(np.arange(5.0), np.arange(6.0)), Affine(10, 0, 0, 0, -10, 50))
    >>> ax = plot_map(t)
    >>> [float(v) for v in ax.get_xlim()], ax.images[0].get_gid()
    ([0.0, 60.0], 'fallway-hillshade')
    """
    ax = _new_axes(ax, (8.0, 7.0))
    polys = []
    if keepout is not None:
        if hasattr(keepout, "in_crs") and terrain.crs is not None:
            keepout = keepout.in_crs(terrain.crs)  # a Keepout read from lon/lat GeoJSON
        polys = _geometries(keepout)
    if isinstance(view, str):
        if view not in ("auto", "dem"):
            raise ParameterError(f"view must be 'auto', 'dem' or (left, bottom, right, top), got {view!r}")
        bounds = _map_view(terrain, route, reach, polys) if view == "auto" else tuple(
            float(v) for v in terrain.bounds)
    else:
        bounds = tuple(float(v) for v in view)
        if len(bounds) != 4 or not (bounds[0] < bounds[2] and bounds[1] < bounds[3]):
            raise ParameterError(f"view must be (left, bottom, right, top) with left < right and bottom < top, "
                                 f"got {view!r}")
    left, bottom, right, top = bounds
    rs, cs = _window(terrain, bounds)
    rgba, step = _hillshade_rgb(terrain, rs, cs)
    img = ax.imshow(rgba, extent=_raster_extent(terrain, rgba, step, rs, cs), origin="upper",
                    interpolation="bilinear", zorder=0)
    img.set_gid("fallway-hillshade")
    note = None
    if contours:
        zwin = terrain.z[rs, cs]
        if np.isfinite(zwin).any():
            relief = float(np.nanmax(zwin) - np.nanmin(zwin))
            if relief >= 0.01:  # below a centimetre contours say nothing
                step_m = contour_step(relief)
                if _draw_contours(ax, terrain, rs, cs, step_m)[0] is not None:
                    note = f"contours every {step_m:g} m"

    if polys:
        from matplotlib.patches import PathPatch

        for i, poly in enumerate(polys):
            patch = PathPatch(_polygon_path(poly), facecolor=_KEEPOUT_COLOUR, alpha=0.25,
                              edgecolor=_KEEPOUT_COLOUR, hatch="//", linewidth=1.2, zorder=3,
                              label="keep-out" if i == 0 else None)
            patch.set_gid("fallway-keepout")
            ax.add_patch(patch)

    if reach is not None:
        t = np.asarray(reach.time_s, dtype=float)
        rows, cols = t.shape
        tr = reach.transform
        xs = tr.c + (np.arange(cols) + 0.5) * tr.a
        ys = tr.f + (np.arange(rows) + 0.5) * tr.e
        ok = np.isfinite(t)
        if ok.any():
            tmax = float(np.nanmax(t))
            step = nice_step(tmax, 8)
            levels = np.arange(step, tmax + 0.5 * step, step) if tmax > 0 else []
            levels = [lv for lv in levels if lv < tmax] or ([tmax / 2] if tmax > 0 else [])
            if len(levels) and np.count_nonzero(ok) >= 4:
                from matplotlib import patheffects

                iso = ax.contour(xs, ys, np.ma.masked_invalid(t), levels=levels, colors=_ISO_COLOUR,
                                 linewidths=1.3, zorder=4)
                iso.set_gid("fallway-isochrones")
                iso.set_path_effects([patheffects.withStroke(linewidth=3.0, foreground="white", alpha=0.7)])
                for label in ax.clabel(iso, fmt=lambda v: f"{v:g} s", fontsize=7):
                    label.set_in_layout(False)
                ax.plot([], [], color=_ISO_COLOUR, linewidth=1.3, label=f"isochrones every {levels[0]:g} s"
                        if len(levels) > 1 else f"isochrone {levels[0]:g} s")
            if not ok.all():
                frontier = ax.contour(xs, ys, ok.astype(float), levels=[0.5], colors=_FRONTIER_COLOUR,
                                      linewidths=1.6, linestyles="--", zorder=4)
                frontier.set_gid("fallway-frontier")
                ax.plot([], [], color=_FRONTIER_COLOUR, linewidth=1.6, linestyle="--",
                        label="edge of the reachable area")
        ax.plot([reach.start[0]], [reach.start[1]], marker="o", color=_ISO_COLOUR, markeredgecolor="white",
                markersize=8, linestyle="none", zorder=6, label="reach start", gid="fallway-reach-start")

    if route is not None:
        cable = getattr(route, "cable", None)
        if cable is None:
            lat = np.asarray(route.lattice.points, dtype=float)
            ax.plot(lat[:, 0], lat[:, 1], color=_LATTICE_COLOUR, linestyle="--", linewidth=1.3, zorder=5,
                    label=f"lattice line ({route.summary.lattice_time_s or route.lattice.time_s:.1f} s)",
                    gid="fallway-lattice")
        else:  # a cable line: its supports (fallway.cable)
            ax.plot([p.x for p in cable.supports[1:-1]], [p.y for p in cable.supports[1:-1]], marker="o",
                    color="#1c2833", markeredgecolor="white", markersize=7, linestyle="none", zorder=8,
                    label=f"supports ({cable.support_count})", gid="fallway-cable-supports")
        line = np.asarray(route.line, dtype=float)
        tt = route.summary.travel_time_s
        lbl = f"line ({float(tt):.1f} s)" if isinstance(tt, (int, float)) and math.isfinite(float(tt)) else "line"
        ax.plot(line[:, 0], line[:, 1], color=_LINE_COLOUR, linewidth=2.2, zorder=6, label=lbl,
                gid="fallway-line")
        ax.plot([line[0, 0]], [line[0, 1]], marker="^", color="white", markeredgecolor="black",
                markersize=10, linestyle="none", zorder=7, label="start", gid="fallway-start")
        ax.plot([line[-1, 0]], [line[-1, 1]], marker="s", color="black", markeredgecolor="white",
                markersize=9, linestyle="none", zorder=7, label="end", gid="fallway-end")

    ax.set_xlim(left, right)
    ax.set_ylim(bottom, top)
    ax.set_aspect("equal")
    ax.set_xlabel("easting (m)")
    ax.set_ylabel("northing (m)")
    ax.ticklabel_format(useOffset=False, style="plain")
    ax.tick_params(labelsize=7)
    if graticule:
        _graticule(ax, terrain.crs, bounds)
    _scale_bar(ax, right - left, note)
    _north_arrow(ax, _true_north_deg(terrain.crs, bounds))
    dl, db, dr, dt = (float(v) for v in terrain.bounds)
    if overview and ((right - left) < 0.5 * (dr - dl) or (top - bottom) < 0.5 * (dt - db)):
        _overview_inset(ax, terrain, bounds, route)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="upper left", fontsize=8, framealpha=0.85)
    return ax


def _spans(mask: np.ndarray, station: np.ndarray):
    """(start, end) stations of runs of True in ``mask`` (a vertex run widened to its segments)."""
    out = []
    n = len(mask)
    i = 0
    while i < n:
        if mask[i]:
            j = i
            while j + 1 < n and mask[j + 1]:
                j += 1
            a = station[max(i - 1, 0)] if i > 0 else station[0]
            b = station[min(j + 1, n - 1)]
            out.append((float(a), float(b)))
            i = j + 1
        else:
            i += 1
    return out


def _cable_section(ax, lay, s) -> None:
    """A cable line's long-section: supports, unloaded cable, clearance band (fallway.cable)."""
    ch = np.asarray(lay.chainage_m, dtype=float)
    lo, hi = lay.clearance_m
    g = np.asarray(lay.ground_z, dtype=float)
    band = ax.fill_between(s, g + lo, g + hi, color="#85c1e9", alpha=0.25, zorder=1.5,
                           label=f"clearance band {lo:g}-{hi:g} m")
    band.set_gid("fallway-cable-band")
    ax.plot(s, lay.unloaded_z, color="#566573", linewidth=1.0, linestyle="--", zorder=3, label="unloaded cable",
            gid="fallway-cable-unloaded")
    at = np.searchsorted(ch, [p.station_m for p in lay.supports]).clip(0, len(s) - 1)
    sup = ax.vlines(s[at], [p.ground_z_m for p in lay.supports], [p.top_z_m for p in lay.supports],
                    colors="#1c2833", linewidth=2.0, zorder=5, label="supports")
    sup.set_gid("fallway-supports")


def plot_profile(route, terrain, *, ax=None):
    """Long-section: ground and line heights, speed and time against station.

    Parameters
    ----------
    route : Route
    terrain : Terrain
        Ground heights under the line (the smooth surface, :meth:`Terrain.sample`, as in
        ``profile.csv``).
    ax : matplotlib Axes, optional
        Heights go on this axes; speed and time on twin axes to its right.

    Returns
    -------
    matplotlib.axes.Axes
        The heights axes.  For a raised line (``route.line_spec.kind == "raised"``) its
        clearance band above the ground is a shaded strip, sampled at half-cell steps
        as the limit check samples it; for another line above the ground, vertical ticks
        from ground to line show the clearance at the vertices.  Flagged stretches: stall
        (from where the mover stops), overspeed (shaded), lift-off (marked).

    Examples
    --------
    >>> from fallway.export import _example_route
    >>> route, terrain = _example_route()
    >>> ax = plot_profile(route, terrain)
    >>> len(ax.figure.axes), [ln.get_gid() for ln in ax.lines][:2]
    (3, ['fallway-ground', 'fallway-line-z'])
    """
    from .export import profile_flags

    ax = _new_axes(ax, (10.0, 5.0))
    p = route.profile
    pts = np.asarray(p.points, dtype=float)
    s = np.asarray(p.station_m, dtype=float)
    zg = np.atleast_1d(terrain.sample(pts[:, 0], pts[:, 1]))
    zl = pts[:, 2]
    finite_g = np.isfinite(zg)
    base = float(np.nanmin(np.concatenate([zg[finite_g], zl]))) if finite_g.any() else float(np.min(zl))
    span = float(np.nanmax(np.concatenate([zg[finite_g], zl])) - base) if finite_g.any() else float(np.ptp(zl))
    floor = base - 0.08 * max(span, 1.0)
    ground = ax.fill_between(s, floor, np.where(finite_g, zg, np.nan), color="#d5c4a1", alpha=0.9, zorder=1,
                             label="ground")
    ground.set_gid("fallway-ground-fill")
    ax.plot(s, zg, color="#7b5e2a", linewidth=1.0, zorder=2, gid="fallway-ground")
    ax.plot(s, zl, color=_LINE_COLOUR, linewidth=2.0, zorder=4, label="line", gid="fallway-line-z")
    gap = zl - zg
    raised = finite_g & (gap > 0.05)
    spec = getattr(route, "line_spec", None)
    if getattr(spec, "kind", None) == "raised":  # the clearance band along the whole line, as checked
        from .clearance import clearance_along

        sd, hd = clearance_along(terrain, pts)
        zd = np.interp(sd, s, zl) - hd  # the ground under the dense samples
        lo, hi = spec.clearance_m
        band = ax.fill_between(sd, zd + lo, zd + hi, color="#5dade2", alpha=0.25, zorder=2, linewidth=0,
                               label=f"clearance band {lo:g}-{hi:g} m")
        band.set_gid("fallway-band")
    cable = getattr(route, "cable", None)
    if cable is not None:
        _cable_section(ax, cable, s)
    elif raised.any() and getattr(spec, "kind", None) != "raised":  # a raised line has its band
        idx = np.flatnonzero(raised)
        if idx.size > 60:
            idx = idx[np.linspace(0, idx.size - 1, 60).round().astype(int)]
        sup = ax.vlines(s[idx], zg[idx], zl[idx], colors="#555555", linewidth=0.8, zorder=3,
                        label="clearance at vertices")
        sup.set_gid("fallway-supports")
    ax.set_xlabel("station along the line (m)")
    ax.set_ylabel("height (m)")
    ax.set_ylim(bottom=floor)
    ax.set_xlim(s[0], s[-1] if s[-1] > s[0] else s[0] + 1.0)
    ax.grid(True, linewidth=0.4, alpha=0.5)

    ax_v = ax.twinx()
    ax_v.plot(s, p.speed_m_s, color="#2471a3", linewidth=1.4, label="speed", gid="fallway-speed")
    ax_v.set_ylabel("speed (m/s)", color="#2471a3")
    ax_v.set_ylim(bottom=0)
    ax_t = ax.twinx()
    ax_t.spines["right"].set_position(("axes", 1.09))
    ax_t.plot(s, p.time_s, color="#229954", linewidth=1.2, linestyle="-.", label="time", gid="fallway-time")
    ax_t.set_ylabel("time (s)", color="#229954")
    ax_t.set_ylim(bottom=0)

    flags = profile_flags(p, route.mover)
    over = np.array(["overspeed" in f for f in flags])
    for i, (a, b) in enumerate(_spans(over, s)):
        sp = ax.axvspan(a, b, color="#e74c3c", alpha=0.15, zorder=0, label="overspeed" if i == 0 else None)
        sp.set_gid("fallway-overspeed")
    vmax = getattr(route.mover, "max_speed", None)
    if vmax is not None:
        ax_v.axhline(vmax, color="#2471a3", linestyle=":", linewidth=1.0, gid="fallway-max-speed")
        ax_v.set_ylim(0, max(ax_v.get_ylim()[1], 1.08 * float(vmax)))  # the speed limit stays in view
    if p.stalled_at_m is not None:
        st = float(p.stalled_at_m)
        sp = ax.axvspan(st, s[-1], color="#7f8c8d", alpha=0.3, zorder=0, label="stall: mover stops")
        sp.set_gid("fallway-stall")
        ax.axvline(st, color="black", linewidth=1.2, gid="fallway-stall-at")
    lift = np.asarray(p.liftoff, dtype=float)
    lift = lift[np.isfinite(lift)]
    if lift.size:
        zl_at = np.interp(lift, s, zl)
        ax.plot(lift, zl_at, linestyle="none", marker="v", color="#d35400", markersize=8, zorder=6,
                label="lift-off", gid="fallway-liftoff")

    handles, labels = [], []
    for a in (ax, ax_v, ax_t):
        h, lab = a.get_legend_handles_labels()
        handles += h
        labels += lab
    ax.legend(handles, labels, loc="upper right", fontsize=8, framealpha=0.85)
    return ax


def save_figure(fig, path: str | os.PathLike, *, formats=("png", "svg"), dpi: int = 150) -> list[Path]:
    """Write a figure as PNG and SVG, each atomically.

    Parameters
    ----------
    fig : matplotlib Figure or Axes
        An Axes (as :func:`plot_map` returns) is written as its whole figure.
    path : path-like
        Base name; a ``.png``/``.svg`` suffix is replaced by each format's.
    formats : sequence of str
    dpi : int
        Raster resolution.

    Returns
    -------
    list of Path
        The files written.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from matplotlib.figure import Figure
    >>> fig = Figure()
    >>> _ = fig.add_subplot().plot([0, 1], [0, 1])
    >>> [p.name for p in save_figure(fig, pathlib.Path(tempfile.mkdtemp()) / "map.png")]
    ['map.png', 'map.svg']
    """
    from .export import atomic_path

    if not hasattr(fig, "savefig"):  # the Axes plot_map and plot_profile return
        fig = getattr(fig, "figure", None)
        if fig is None or not hasattr(fig, "savefig"):
            raise ParameterError("save_figure takes a matplotlib Figure or Axes")
    path = Path(path)
    base = path.with_suffix("") if path.suffix.lower() in (".png", ".svg") else path
    out = []
    for fmt in formats:
        target = base.with_name(base.name + "." + fmt)
        with atomic_path(target) as tmp:
            # no timestamps or creator tags: the same figure gives the same bytes
            meta = {"Date": None} if fmt == "svg" else {"Software": None}
            fig.savefig(tmp, format=fmt, dpi=dpi, metadata=meta)
        out.append(target)
    return out


def comparison_figure(terrain, comparison, *, keepout=None, figsize=(14.0, 6.0)):
    """One page: the lines on the hillshade (left) and their long-sections (right).

    Parameters
    ----------
    terrain : Terrain
    comparison : Comparison
    keepout : optional
        No-go areas drawn on the map (as :func:`fallway.plot.plot_map` takes them).
    figsize : (float, float)
        Inches.

    Returns
    -------
    matplotlib.figure.Figure
        Made without pyplot (rendered by Agg); each line's artists carry the gid
        ``"fallway-compare-<rank>"`` (rank from 1, map and long-section alike).  The
        long-section shows the line heights (solid, left axis) and speeds (dotted, right
        axis) against station; a stall is marked with a cross.

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.physics import Mover
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(np.tile(-0.5 * np.arange(30.0), (10, 1)), (2.0, 0, 0, 0, -2.0, 20.0))
    >>> from fallway.routing import compare
    >>> cmp = compare(t, [("a", [(1.0, 10.0), (57.0, 10.0)])], Mover(mu=0.1), optimum=False)
    >>> fig = comparison_figure(t, cmp)
    >>> sorted({ln.get_gid() for ax in fig.axes for ln in ax.lines if ln.get_gid()})
    ['fallway-compare-1']
    """
    import matplotlib
    from matplotlib.figure import Figure

    fig = Figure(figsize=figsize, layout="constrained")
    ax_map, ax_z = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1.0, 1.3]})
    drawn = [r.points[:, :2] for r in comparison.rows if r.points is not None]
    view = _map_view(terrain, None, None, [], points=np.concatenate(drawn)) if drawn else "auto"
    plot_map(terrain, keepout=keepout, ax=ax_map, view=view)
    ax_v = ax_z.twinx()
    colours = matplotlib.colormaps["tab10"]
    for rank, r in enumerate(comparison.rows, start=1):
        if r.points is None or r.profile is None:
            continue
        c = colours((rank - 1) % 10)
        gid = f"fallway-compare-{rank}"
        if r.travel_time_s is not None:
            label = f"{rank}. {r.name} ({r.travel_time_s:.1f} s, {r.status})"
        else:
            label = f"{rank}. {r.name} (stalls at {r.stalled_at_m:.0f} m)"
        lw = 2.6 if r.computed else 1.8
        pts = r.points
        st_m = np.asarray(r.profile.station_m, dtype=float)
        ax_map.plot(pts[:, 0], pts[:, 1], color=c, linewidth=lw, zorder=6, label=label, gid=gid)
        ax_z.plot(st_m, pts[:, 2], color=c, linewidth=lw, label=label, gid=gid)
        ax_v.plot(st_m, r.profile.speed_m_s, color=c, linewidth=1.0, linestyle=":", gid=gid)
        if r.stalled_at_m is not None:
            zs = float(np.interp(r.stalled_at_m, st_m, pts[:, 2]))
            ax_z.plot([r.stalled_at_m], [zs], marker="x", color=c, markersize=9, linestyle="none", gid=gid)
    first = next((r for r in comparison.rows if r.points is not None), None)
    if first is not None:
        ax_map.plot([first.points[0, 0]], [first.points[0, 1]], marker="^", color="white", markeredgecolor="black",
                    markersize=10, linestyle="none", zorder=7, label="start")
    # below the map: inside it the legend hides the lines' start, which they share
    ax_map.legend(loc="upper center", bbox_to_anchor=(0.5, -0.1), fontsize=7, framealpha=0.85)
    ax_z.set_xlabel("station along the line (m)")
    ax_z.set_ylabel("height (m), solid")
    ax_v.set_ylabel("speed (m/s), dotted")
    ax_z.grid(True, linewidth=0.4, alpha=0.5)
    title = "Candidate lines"
    if comparison.mu_range is not None:
        title += f" (friction {comparison.mover.mu:g}, range {comparison.mu_range[0]:g} to {comparison.mu_range[1]:g})"
    else:
        title += f" (friction {comparison.mover.mu:g})"
    fig.suptitle(title, fontsize=11)
    return fig
