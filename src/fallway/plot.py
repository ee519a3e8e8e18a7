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

__all__ = ["plot_map", "plot_profile", "comparison_figure", "save_figure", "nice_step"]

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


def _hillshade_rgb(terrain):
    """Tinted hillshade RGBA and the step (cells per pixel) it was thinned by."""
    from matplotlib.colors import LightSource, Normalize
    import matplotlib

    step = max(1, math.ceil(max(terrain.shape) / _MAX_SHADE_PX))
    z = np.array(terrain.z[::step, ::step], dtype=float)
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


def _scale_bar(ax, width_m):
    from matplotlib.offsetbox import AnchoredOffsetbox, AuxTransformBox, HPacker, TextArea, VPacker
    from matplotlib.patches import Rectangle

    length = nice_step(width_m, 5)
    box = AuxTransformBox(ax.transData)
    box.add_artist(Rectangle((0, 0), length, 0, edgecolor="black", linewidth=3))
    label = f"{length:g} m" if length < 1000 else f"{length / 1000:g} km"
    packed = VPacker(children=[box, TextArea(label, textprops={"size": 8})], align="center", pad=0, sep=3)
    bar = AnchoredOffsetbox("lower left", child=HPacker(children=[packed], pad=0, sep=0), pad=0.4,
                            borderpad=0.6, frameon=True)
    bar.patch.set_alpha(0.75)
    bar.set_gid("fallway-scalebar")
    ax.add_artist(bar)
    return bar, length


def _north_arrow(ax):
    arrow = ax.annotate("N", xy=(0.94, 0.95), xytext=(0.94, 0.83), xycoords="axes fraction",
                        textcoords="axes fraction", ha="center", va="top", fontsize=10, fontweight="bold",
                        arrowprops={"arrowstyle": "-|>", "color": "black", "lw": 1.5})
    arrow.set_gid("fallway-north")
    return arrow


def plot_map(terrain, route=None, *, reach=None, keepout=None, ax=None):
    """Plan map: hillshade, the line, keep-out areas, reach isochrones.

    Parameters
    ----------
    terrain : Terrain
        Drawn as a tinted hillshade (matplotlib ``LightSource``, sun from the north-west)
        in map coordinates.
    route : Route, optional
        Its reported line (solid) and its lattice line (dashed), start and end markers.
    reach : ReachMap, optional
        Isochrones (contours of ``time_s`` at round intervals) and the stall frontier
        (the edge of the reachable area).
    keepout : Keepout or shapely geometry, optional
        No-go polygons, hatched: a :class:`fallway.limits.Keepout` (reprojected to the
        terrain CRS with ``Keepout.in_crs``) or shapely polygons in the terrain CRS.
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib.axes.Axes
        With a scale bar and a north arrow; the arrow points to grid north (up), which
        differs from true north by the meridian convergence of the projection.

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
    left, bottom, right, top = (float(v) for v in terrain.bounds)
    rgba, step = _hillshade_rgb(terrain)
    # a thinned raster: each pixel is a block of step x step cells, sampled at its first cell
    size = terrain.cell_size * step
    px_left = left + 0.5 * terrain.cell_size - 0.5 * size
    px_top = top - 0.5 * terrain.cell_size + 0.5 * size
    extent = (px_left, px_left + rgba.shape[1] * size, px_top - rgba.shape[0] * size, px_top)
    img = ax.imshow(rgba, extent=extent, origin="upper",
                    interpolation="bilinear", zorder=0)
    img.set_gid("fallway-hillshade")

    if keepout is not None:
        from matplotlib.patches import PathPatch

        if hasattr(keepout, "in_crs") and terrain.crs is not None:
            keepout = keepout.in_crs(terrain.crs)  # a Keepout read from lon/lat GeoJSON

        for i, poly in enumerate(_geometries(keepout)):
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
                iso = ax.contour(xs, ys, np.ma.masked_invalid(t), levels=levels, colors=_ISO_COLOUR,
                                 linewidths=0.8, zorder=4)
                iso.set_gid("fallway-isochrones")
                ax.clabel(iso, fmt=lambda v: f"{v:g} s", fontsize=7)
            if not ok.all():
                frontier = ax.contour(xs, ys, ok.astype(float), levels=[0.5], colors=_FRONTIER_COLOUR,
                                      linewidths=1.6, linestyles="--", zorder=4)
                frontier.set_gid("fallway-frontier")
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
    _scale_bar(ax, right - left)
    _north_arrow(ax)
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
        The heights axes.  For a raised line (line above ground), vertical ticks from
        ground to line show the clearance at the vertices.  Flagged stretches: stall
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
    cable = getattr(route, "cable", None)
    if cable is not None:
        _cable_section(ax, cable, s)
    elif raised.any():
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
    fig : matplotlib Figure
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
    plot_map(terrain, keepout=keepout, ax=ax_map)
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
    ax_map.legend(loc="upper left", fontsize=7, framealpha=0.85)
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
