"""The printable long-section ``profile.pdf``: true horizontal scale, stated vertical exaggeration.

Each A4 landscape sheet shows one stretch of the line: the ground and the line heights
(the clearance between them shaded for a raised line) above, the speed and the elapsed
time below, a station grid through both, and a title block with the scenario, the date of
the run, the fallway version, the DEM and its CRS, the friction and the limits, the scales
and the caution.  The horizontal scale is a round ratio (1:100 to 1:50 000) at which the
whole line fits one sheet, but never smaller than ``max_scale`` (1:5000 by default): a longer
line runs over several sheets.  The vertical scale is the round ratio at which the tallest
stretch fits its panel; their quotient, the vertical exaggeration, is printed on each sheet.
"""

from __future__ import annotations

import math
import os
import textwrap
from pathlib import Path

import numpy as np

from .caution import CABLE_CAUTION, CAUTION
from .errors import ParameterError
from .handover import crs_text, fallway_version, limit_rows, line_rows, reading, run_date
from .plot import nice_step

__all__ = ["write_profile_pdf", "sheet_layout", "chainage", "SCALES", "PLOT_WIDTH_MM"]

#: Round scale denominators (1, 2, 2.5 and 5 times a power of ten).
SCALES = tuple(int(m * 10 ** k) for k in range(2, 6) for m in (1, 2, 2.5, 5))
#: A4 landscape, mm.
PAGE_MM = (297.0, 210.0)
#: The drawing's width on paper: the station axis of both panels, mm.
PLOT_WIDTH_MM = 240.0
_LEFT_MM = 30.0
#: Heights panel and speed/time panel: (bottom, height) in mm from the sheet's bottom edge.
_HEIGHTS_MM = (110.0, 76.0)
_MOTION_MM = (70.0, 28.0)
_MM = 1.0 / 25.4


def chainage(station_m: float) -> str:
    """A station as kilometres + metres, the surveyor's way: ``1+250``.

    Examples
    --------
    >>> chainage(0.0), chainage(1250.0), chainage(37.4)
    ('0+000', '1+250', '0+037')
    """
    m = int(round(station_m))
    return f"{m // 1000}+{m % 1000:03d}"


def _scale_at_least(ratio: float) -> int:
    return next((s for s in SCALES if s >= ratio * (1 - 1e-9)), SCALES[-1])


def sheet_layout(length_m: float, relief_m: float, *, max_scale: int = 5000) -> dict:
    """Horizontal and vertical scale, exaggeration, sheet count and metres per sheet.

    Parameters
    ----------
    length_m : float
        Along the line (station of the end).
    relief_m : float
        The largest height range of ground and line on any one sheet.  When it does
        not fit the panel at the horizontal scale, the horizontal scale is made smaller
        (the exaggeration is never below 1).
    max_scale : int
        The smallest scale allowed (denominator); a line longer than one sheet at it
        runs over several.

    Examples
    --------
    >>> d = sheet_layout(2150.0, 100.0)
    >>> d["horizontal"], d["sheets"], d["metres_per_sheet"], d["vertical"], d["exaggeration"]
    (5000, 2, 1200.0, 2000, 2.5)
    >>> sheet_layout(90.0, 20.0)["horizontal"]
    500
    """
    if not (math.isfinite(length_m) and length_m > 0):
        raise ParameterError(f"the line has no length to draw ({length_m!r} m)")
    h = _scale_at_least(length_m * 1000.0 / PLOT_WIDTH_MM)
    h = min(h, max(int(max_scale), SCALES[0]))
    # the tallest stretch fills at most 80 % of the panel, with room above and below
    v = _scale_at_least(max(relief_m, 1.0) * 1000.0 / (0.8 * _HEIGHTS_MM[1]))
    h = max(h, v)  # never squashed (exaggeration at least 1): a steep line is drawn smaller instead
    per_sheet = PLOT_WIDTH_MM * h / 1000.0
    sheets = max(1, math.ceil(length_m / per_sheet - 1e-9))
    return {"horizontal": h, "vertical": v, "exaggeration": h / v, "sheets": sheets, "metres_per_sheet": per_sheet}


def _dense(route, terrain, step_m):
    """Stations every ``step_m`` (and at every vertex) with ground and line heights."""
    p = route.profile
    pts = np.asarray(p.points, dtype=float)
    s = np.asarray(p.station_m, dtype=float)
    fine = np.union1d(s, np.arange(0.0, s[-1], step_m))
    x = np.interp(fine, s, pts[:, 0])  # straight segments: plan position is linear in station
    y = np.interp(fine, s, pts[:, 1])
    zl = np.interp(fine, s, pts[:, 2])
    zg = np.atleast_1d(terrain.sample(x, y)).astype(float)
    return fine, zg, zl


def _axes_mm(fig, left, bottom, width, height):
    w, h = PAGE_MM
    return fig.add_axes((left / w, bottom / h, width / w, height / h))


def _title_block(fig, rows, y_top_mm):
    """Labelled values, boxed, bottom right; a long value wraps onto more lines."""
    from matplotlib.patches import Rectangle

    w, h = PAGE_MM
    x0, width = 150.0, 135.0
    line_mm = 2.9
    wrapped = [(label, textwrap.wrap(value, 62) or [""]) for label, value in rows]
    n_lines = sum(len(v) for _, v in wrapped)
    height = line_mm * n_lines + 3.0
    y0 = y_top_mm - height
    fig.add_artist(Rectangle((x0 / w, y0 / h), width / w, height / h, transform=fig.transFigure, fill=False,
                             linewidth=0.8, gid="fallway-titleblock"))
    k = 0
    for i, (label, lines) in enumerate(wrapped):
        fig.text((x0 + 2.0) / w, (y_top_mm - 2.0 - (k + 0.8) * line_mm) / h, label, fontsize=6.3, color="#444444")
        for text in lines:
            fig.text((x0 + 42.0) / w, (y_top_mm - 2.0 - (k + 0.8) * line_mm) / h, text, fontsize=6.3,
                     weight="bold" if i == 0 else "normal")
            k += 1


def _sheet(fig, route, st, zg, zl, s0, s1, layout, zlim, rows, sheet, sheets):
    from matplotlib.ticker import FixedLocator, FuncFormatter

    p = route.profile
    w, h = PAGE_MM
    on = (st >= s0 - 1e-9) & (st <= s1 + 1e-9)
    ax = _axes_mm(fig, _LEFT_MM, _HEIGHTS_MM[0], PLOT_WIDTH_MM, _HEIGHTS_MM[1])
    ax.set_gid("fallway-heights")
    floor = zlim[0]
    ax.fill_between(st[on], floor, zg[on], color="#d5c4a1", linewidth=0, zorder=1, label="ground")
    ax.plot(st[on], zg[on], color="#7b5e2a", linewidth=0.8, zorder=2, gid="fallway-ground")
    ax.plot(st[on], zl[on], color="#c0392b", linewidth=1.4, zorder=4, label="line", gid="fallway-line-z")
    raised = on & (zl - zg > 0.05)
    if route.line_spec.kind == "raised" and raised.any():
        band = ax.fill_between(st, zg, zl, where=raised, color="#85c1e9", alpha=0.5, hatch="////", linewidth=0,
                               zorder=3, label="clearance (line above ground)")
        band.set_gid("fallway-clearance")
    cable = getattr(route, "cable", None)
    if cable is not None:  # the supports, at the station of the loaded path over each saddle
        from .cable.route import support_stations

        ax.vlines(support_stations(route), [q.ground_z_m for q in cable.supports], [q.top_z_m for q in cable.supports], color="#1c2833",
                  linewidth=2.0, zorder=5, label="supports", gid="fallway-supports")
    ax.set_xlim(s0, s0 + layout["metres_per_sheet"])
    ax.set_ylim(*zlim)
    grid = nice_step(layout["metres_per_sheet"], 12)
    ticks = np.arange(math.ceil(s0 / grid) * grid, s0 + layout["metres_per_sheet"] + 1e-6, grid)
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: chainage(v)))
    ax.yaxis.set_major_locator(FixedLocator(np.arange(math.ceil(zlim[0] / nice_step(zlim[1] - zlim[0], 8))
                                                      * nice_step(zlim[1] - zlim[0], 8), zlim[1] + 1e-9,
                                                      nice_step(zlim[1] - zlim[0], 8))))
    ax.grid(True, linewidth=0.4, color="#999999", alpha=0.6)
    ax.tick_params(labelsize=7)
    ax.set_ylabel("height (m)", fontsize=8)
    if p.stalled_at_m is not None and s0 <= float(p.stalled_at_m) <= s1:
        ax.axvline(float(p.stalled_at_m), color="black", linewidth=1.2, gid="fallway-stall-at")
        ax.text(float(p.stalled_at_m), zlim[1], " the mover stops here", fontsize=7, va="top")
    lift = np.asarray(p.liftoff, dtype=float)
    lift = lift[np.isfinite(lift) & (lift >= s0) & (lift <= s1)]
    if lift.size:
        ax.plot(lift, np.interp(lift, st, zl), linestyle="none", marker="v", color="#d35400", markersize=5,
                zorder=6, label="lift-off", gid="fallway-liftoff")
    ax.legend(loc="upper right", fontsize=7, framealpha=0.85)

    ax_v = _axes_mm(fig, _LEFT_MM, _MOTION_MM[0], PLOT_WIDTH_MM, _MOTION_MM[1])
    ax_v.set_gid("fallway-motion")
    s = np.asarray(p.station_m, dtype=float)
    keep = (s >= s0 - 1e-9) & (s <= s1 + 1e-9)
    # include the vertices either side so the curves reach the sheet's edges
    idx = np.flatnonzero(keep)
    if idx.size:
        idx = np.arange(max(idx[0] - 1, 0), min(idx[-1] + 2, len(s)))
    else:
        idx = np.arange(max(np.searchsorted(s, s0) - 1, 0), min(np.searchsorted(s, s1) + 1, len(s)))
    speed = np.asarray(p.speed_m_s, dtype=float)
    time = np.asarray(p.time_s, dtype=float)
    ax_v.plot(s[idx], speed[idx], color="#2471a3", linewidth=1.2, label="speed", gid="fallway-speed")
    vtop = float(np.nanmax(speed)) if np.isfinite(speed).any() else 1.0
    if route.mover.max_speed is not None:
        ax_v.axhline(route.mover.max_speed, color="#2471a3", linestyle=":", linewidth=0.8)
        vtop = max(vtop, float(route.mover.max_speed))
    ax_v.set_ylim(0, 1.1 * max(vtop, 0.1))
    ax_v.set_xlim(s0, s0 + layout["metres_per_sheet"])
    ax_v.xaxis.set_major_locator(FixedLocator(ticks))
    ax_v.xaxis.set_major_formatter(FuncFormatter(lambda v, _: chainage(v)))
    ax_v.grid(True, linewidth=0.4, color="#999999", alpha=0.6)
    ax_v.tick_params(labelsize=7)
    ax_v.set_ylabel("speed (m/s)", fontsize=8, color="#2471a3")
    ax_v.set_xlabel("station (km+m)", fontsize=8)
    ax_t = ax_v.twinx()
    ax_t.plot(s[idx], time[idx], color="#229954", linewidth=1.0, linestyle="-.", label="time", gid="fallway-time")
    ttop = float(np.nanmax(time)) if np.isfinite(time).any() else 1.0
    ax_t.set_ylim(0, 1.1 * max(ttop, 0.1))
    ax_t.tick_params(labelsize=7)
    ax_t.set_ylabel("time (s)", fontsize=8, color="#229954")
    hs, ls = [], []
    for a in (ax_v, ax_t):
        hh, ll = a.get_legend_handles_labels()
        hs += hh
        ls += ll
    ax_v.legend(hs, ls, loc="upper left", fontsize=7, framealpha=0.85)

    fig.text(_LEFT_MM / w, 197.0 / h, rows[0][1], fontsize=12, weight="bold")
    scales = (f"horizontal 1:{layout['horizontal']}, vertical 1:{layout['vertical']} "
              f"(vertical exaggeration {layout['exaggeration']:g}×)")
    fig.text(_LEFT_MM / w, 191.0 / h, f"Long-section, sheet {sheet} of {sheets}: stations {chainage(s0)} to "
             f"{chainage(min(s1, s[-1]))}; {scales}; on A4 at 100 %", fontsize=8)
    _title_block(fig, rows + [("Scales", scales)], 57.0)
    text = CAUTION + (" " + CABLE_CAUTION if route.line_spec.kind == "cable" else "")
    caution = "\n".join(textwrap.wrap("CAUTION: " + text, 78))
    fig.text(12.0 / w, 55.0 / h, caution, fontsize=6.5, va="top", color="#922b21", gid="fallway-caution")


def _title_rows(route, terrain, *, name, dem, mu_range, date):
    s = route.summary
    mover = route.mover
    mu = f"{mover.mu:g}" + (f" (range {mu_range[0]:g} to {mu_range[1]:g})" if mu_range is not None else "")
    limits = [f"{label.lower()} {value}" for label, value in limit_rows(route.limits)
              if value not in ("none", "unbounded") and not value.startswith("not allowed")]
    kind = dict(line_rows(route.line_spec)).get("Clearance window")
    verdict = "meets every limit" if s.feasible else "breaks " + ", ".join(s.violated_limits or ["a limit"])
    rows = [
        ("Scenario", name or "fallway route"),
        ("Date of the run", date or run_date()),
        ("fallway version", fallway_version()),
        ("DEM", Path(str(dem)).name if dem is not None else "in memory"),
        ("CRS", crs_text(terrain.crs)),
        ("Friction μ", mu + (f"; air drag {mover.drag:g} 1/m" if mover.drag else "")),
        ("Limits", "; ".join(limits) if limits else "none set"),
    ]
    if kind is not None:
        rows.append(("Clearance window", kind))
    rows += [
        ("Travel time", reading(s.travel_time_s, 2, "s", none="does not reach the end")),
        ("Length along the line", reading(s.length_m, 1, "m")),
        ("Drop", reading(s.drop_m, 1, "m")),
        ("Speed at the end / highest", f"{reading(s.exit_speed_m_s, 2, 'm/s')} / {reading(s.max_speed_m_s, 2, 'm/s')}"),
        ("Verdict", verdict),
    ]
    return rows


def write_profile_pdf(route, terrain, path: str | os.PathLike, *, name: str | None = None, dem=None,
                      mu_range=None, date: str | None = None, max_scale: int = 5000) -> Path:
    """Write the printable long-section of a route (one or more A4 landscape sheets).

    Parameters
    ----------
    route : Route
    terrain : Terrain
        Ground heights under the line (:meth:`Terrain.sample`, as ``profile.csv``),
        sampled every metre of paper at the sheet's scale and at every vertex.
    path : path-like
        Written atomically.
    name : str, optional
        The scenario's name for the title block.
    dem : path, optional
        The DEM file named in the title block.
    mu_range : (float, float), optional
        The friction range of the run.
    date : str, optional
        The date of the run (default :func:`fallway.handover.run_date`).
    max_scale : int
        Smallest horizontal scale (denominator); longer lines take several sheets.

    Returns
    -------
    Path

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from fallway.export import _example_route
    >>> route, terrain = _example_route()
    >>> p = write_profile_pdf(route, terrain, pathlib.Path(tempfile.mkdtemp()) / "profile.pdf")
    >>> p.read_bytes()[:5]
    b'%PDF-'
    """
    import logging

    s_end = float(route.profile.station_m[-1])
    layout = sheet_layout(s_end, 1.0, max_scale=max_scale)
    # heights every 1 mm of paper at the largest scale the line could get (and at every vertex)
    st, zg, zl = _dense(route, terrain, max(layout["horizontal"] / 1000.0, 0.01))
    relief = 1.0
    for _ in range(len(SCALES)):  # a smaller scale puts more of the line, so more relief, on a sheet
        per = layout["metres_per_sheet"]
        bounds = [(k * per, min((k + 1) * per, s_end)) for k in range(layout["sheets"])]
        ranges = []
        for a, b in bounds:
            on = (st >= a - 1e-9) & (st <= b + 1e-9)
            z = np.concatenate([zg[on][np.isfinite(zg[on])], zl[on]])
            ranges.append((float(z.min()), float(z.max())))
        worst = max(hi - lo for lo, hi in ranges)
        if worst <= relief:
            break
        relief = worst
        layout = sheet_layout(s_end, relief, max_scale=max_scale)
    span = _HEIGHTS_MM[1] * layout["vertical"] / 1000.0
    rows = _title_rows(route, terrain, name=name, dem=dem, mu_range=mu_range, date=date)
    path = Path(path)
    font_log = logging.getLogger("fontTools")  # its font subsetting talks at INFO level on every sheet
    level = font_log.level
    font_log.setLevel(max(level, logging.WARNING))
    try:
        _write_sheets(path, route, st, zg, zl, bounds, ranges, layout, span, rows)
    finally:
        font_log.setLevel(level)
    return path


def _write_sheets(path, route, st, zg, zl, bounds, ranges, layout, span, rows):
    import matplotlib
    from matplotlib.backends.backend_pdf import PdfPages
    from matplotlib.figure import Figure

    from .export import atomic_path

    with matplotlib.rc_context({"pdf.fonttype": 42, "svg.hashsalt": "fallway"}), atomic_path(path) as tmp:
        # no creation date: the same run gives the same bytes
        with PdfPages(tmp, metadata={"CreationDate": None, "Title": f"Long-section: {rows[0][1]}",
                                     "Creator": f"fallway {fallway_version()}"}) as pdf:
            for k, ((a, b), (lo, hi)) in enumerate(zip(bounds, ranges), start=1):
                grid = nice_step(span, 8)
                base = math.floor((lo - 0.5 * (span - (hi - lo))) / grid) * grid
                if base + span < hi:  # rounding down pushed the top below the highest point
                    base = lo - 0.5 * (span - (hi - lo))
                fig = Figure(figsize=(PAGE_MM[0] * _MM, PAGE_MM[1] * _MM))
                _sheet(fig, route, st, zg, zl, a, b, layout, (base, base + span), rows, k, len(bounds))
                pdf.savefig(fig)
