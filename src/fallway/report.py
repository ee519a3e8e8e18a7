"""A one-page HTML report: the plots, the numbers, the parameters and the cautions.

The page is self-contained (inline CSS, plots as base64 PNG ``data:`` URIs, no scripts,
no external resources), so it opens offline and can be mailed as a single file.
"""

from __future__ import annotations

import base64
import dataclasses
import html
import io
import math
import os
from pathlib import Path
from typing import Any

import numpy as np

from .caution import CABLE_CAUTION, CAUTION
from .handover import crs_text, fallway_version, limit_rows, line_rows, mover_rows, reading, run_date

__all__ = ["write_report_html", "report_html", "comparison_html", "write_comparison_html"]

_CSS = """
body { font-family: "DejaVu Sans", Helvetica, Arial, sans-serif; margin: 0; background: #f4f1ea;
       color: #1d1d1d; }
main { max-width: 1100px; margin: 0 auto; padding: 24px 32px 48px; background: #ffffff; }
h1 { font-size: 26px; margin: 0 0 4px; color: #5b2c1a; }
h2 { font-size: 18px; border-bottom: 2px solid #c0392b; padding-bottom: 3px; margin-top: 28px; }
h3 { font-size: 15px; margin: 16px 0 6px; }
.sub { color: #555; margin: 0 0 16px; }
.caution { border: 3px solid #b03a2e; background: #fdecea; padding: 12px 16px; margin: 16px 0;
           font-size: 15px; line-height: 1.4; }
.caution strong { color: #922b21; text-transform: uppercase; letter-spacing: 0.05em; }
.verdict { font-size: 19px; font-weight: 600; padding: 10px 16px; margin: 12px 0; border-radius: 4px; }
.verdict.ok { background: #e8f6ec; border: 2px solid #1e8449; color: #145a32; }
.verdict.bad { background: #fdecea; border: 2px solid #b03a2e; color: #922b21; }
details { margin: 12px 0; }
summary { cursor: pointer; font-weight: 600; }
.flag { background: #fff4d6; border-left: 5px solid #d68910; padding: 8px 12px; margin: 8px 0; }
table { border-collapse: collapse; margin: 6px 0 12px; font-size: 14px; }
th, td { border: 1px solid #c9c2b4; padding: 4px 10px; text-align: left; vertical-align: top; }
th { background: #efe8da; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
table.stations { font-size: 12px; }
table.stations td { white-space: nowrap; padding: 2px 6px; }
figure { margin: 12px 0; }
figure img { max-width: 100%; border: 1px solid #ccc; }
figcaption { font-size: 13px; color: #444; }
.cols { display: flex; flex-wrap: wrap; gap: 28px; }
footer { margin-top: 32px; font-size: 12px; color: #666; }
"""


def _fmt(value: Any, decimals: int = 4) -> str:
    if value is None:
        return "none"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value:d}"
    if isinstance(value, float):
        if math.isnan(value):
            return "none"
        if math.isinf(value):
            return "unbounded"
        if value != 0.0 and abs(value) < 10.0 ** (-decimals):
            return f"{value:.3g}"
        return f"{value:.{decimals}f}"
    try:
        import numpy as np

        if isinstance(value, np.generic):
            return _fmt(value.item(), decimals)
    except ImportError:  # pragma: no cover
        pass
    if isinstance(value, (list, tuple)):
        return ", ".join(_fmt(v, decimals) for v in value)
    return str(value)


def _e(text: Any) -> str:
    return html.escape(str(text), quote=True)


def _table(rows, head=("quantity", "value"), *, numeric: bool = True) -> str:
    """A table; with ``numeric`` a last cell that reads as a number is right-aligned."""
    out = ["<table>", "<tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr>"]
    for cells in rows:
        tds = []
        for j, c in enumerate(cells):
            cls = ' class="num"' if numeric and j == len(cells) - 1 and _looks_numeric(c) else ""
            tds.append(f"<td{cls}>{_e(c)}</td>")
        out.append("<tr>" + "".join(tds) + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def _looks_numeric(text: str) -> bool:
    t = str(text).split(" ")[0]
    try:
        float(t)
        return True
    except ValueError:
        return False


def _flatten(d: dict) -> list[tuple[str, Any]]:
    from .export import flatten

    return list(flatten(d, ".").items())


def _png_bytes(source) -> bytes | None:
    """PNG bytes from a path, bytes or a matplotlib Figure."""
    if source is None:
        return None
    if isinstance(source, (bytes, bytearray)):
        data = bytes(source)
    elif isinstance(source, (str, os.PathLike)):
        data = Path(source).read_bytes()
    elif hasattr(source, "savefig"):
        buf = io.BytesIO()
        source.savefig(buf, format="png", dpi=120)
        data = buf.getvalue()
    else:
        raise TypeError(f"a plot must be a PNG path, PNG bytes or a matplotlib Figure, got {type(source).__name__}")
    if not data.startswith(b"\x89PNG\r\n\x1a\n"):
        raise ValueError("the plot given to the report is not a PNG file")
    return data


def _img(data: bytes, alt: str, caption: str) -> str:
    b64 = base64.b64encode(data).decode("ascii")
    return (f'<figure><img alt="{_e(alt)}" src="data:image/png;base64,{b64}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>")


#: Limit names of ``RouteSummary.violated_limits`` and a row's status, in words.
_LIMIT_WORDS = {
    "stalls": "the mover stops before the end", "stall": "the mover stops before the end",
    "keepout": "enters a keep-out area", "overspeed": "exceeds the speed limit", "liftoff": "lifts off on a crest",
    "lateral_g": "lateral acceleration over its limit", "normal_g": "normal load over its limit",
    "grade": "a grade outside the grade window", "min_radius": "a bend tighter than the smallest radius",
    "extent": "leaves the DEM's data", "nodata": "crosses cells without data",
}


def _limit_words(names) -> str:
    return "; ".join(_LIMIT_WORDS.get(n, str(n).replace("_", " ")) for n in names)


def _lonlat(crs, x, y):
    """(lon, lat) of a map point, or None without a CRS."""
    if crs is None:
        return None
    import pyproj

    tr = pyproj.Transformer.from_crs(pyproj.CRS.from_user_input(crs), "EPSG:4326", always_xy=True)
    lon, lat = tr.transform(float(x), float(y))
    return float(lon), float(lat)


def _ll_text(ll) -> str:
    if ll is None:
        return "none (the DEM has no CRS)"
    lon, lat = ll
    return f"{abs(lat):.6f}° {'N' if lat >= 0 else 'S'}, {abs(lon):.6f}° {'E' if lon >= 0 else 'W'}"


def _verdict_html(route) -> list[str]:
    """The headline: does the line meet every limit (at each friction of the range)?"""
    s = route.summary
    ok = bool(s.feasible)
    head = "Meets every limit" if ok else "Breaks a limit: " + _limit_words(s.violated_limits or ["a limit"])
    head += f" at friction μ = {route.mover.mu:g}"
    env = route.envelope
    if env is not None:
        # each friction of the range judged by the route's own limit check (lift-off counts only when the
        # limits forbid it); the envelope's verdict names every lift-off and overspeed, allowed or not
        bad = [(case, r) for case, r in (("low", env.low), ("high", env.high)) if r.status != "ok"]
        if bad:
            head += "; " + "; ".join(f"at {case} friction μ = {r_mu:g}: {_limit_words(r.issues or [r.status])}"
                                     for (case, r), r_mu in zip(bad, [env.mu_lo if c == "low" else env.mu_hi
                                                                        for c, _ in bad]))
        else:
            head += f", and at every friction from {env.mu_lo:g} to {env.mu_hi:g}"
        ok = ok and not bad
    out = [f'<div class="verdict {"ok" if ok else "bad"}" id="verdict">{_e(head)}.</div>']
    if env is not None:
        rows = []
        for case, mu, r in (("low", env.mu_lo, env.low), ("nominal", env.mu_nominal, env.nominal),
                            ("high", env.mu_hi, env.high)):
            status = "meets every limit" if r.status == "ok" else _limit_words(r.issues or [r.status])
            rows.append((f"{case} friction", f"{mu:g}", status, reading(r.travel_time_s, 2, "s", none="does not arrive"),
                         reading(r.exit_speed_m_s, 2, "m/s", none="does not arrive"),
                         reading(r.max_speed_m_s, 2, "m/s"),
                         reading(r.stalled_at_m, 1, "m", none="does not stop")))
        out.append(_table(rows, head=("case", "μ", "verdict", "travel time", "speed at the end", "highest speed",
                                      "stops at station")))
    return out


def _result_rows(route) -> list[tuple[str, str]]:
    s = route.summary
    rows = [
        ("Travel time", reading(s.travel_time_s, 2, "s", none="does not reach the end")),
        ("Length along the line", reading(s.length_m, 1, "m")),
        ("Plan length", reading(s.plan_length_m, 1, "m")),
        ("Drop", reading(s.drop_m, 1, "m")),
        ("Speed at the end", reading(s.exit_speed_m_s, 2, "m/s", none="does not reach the end")),
        ("Highest speed", reading(s.max_speed_m_s, 2, "m/s")),
        ("Tightest bend radius in plan", reading(s.min_radius_plan_m, 1, "m", inf="straight")),
        ("Tightest bend radius along the line (3D)", reading(s.min_radius_3d_m, 1, "m", inf="straight")),
        ("Steepest descent grade", _grade_text(s.max_grade)),
        ("Least descent grade", _grade_text(s.min_grade)),
    ]
    if s.max_lateral_g is not None:
        rows += [
            ("Largest lateral acceleration", f"{reading(s.max_lateral_g, 2, 'g')} at station "
                                             f"{reading(s.max_lateral_g_station_m, 0, 'm')}"),
            ("Largest normal load", f"{reading(s.max_normal_g, 2, 'g')} at station "
                                    f"{reading(s.max_normal_g_station_m, 0, 'm')}"),
            ("Smallest lift-off margin", f"{reading(s.min_liftoff_margin_g, 2, 'g')} at station "
                                         f"{reading(s.min_liftoff_margin_station_m, 0, 'm')}"),
        ]
    rows.append(("Time of the lattice line (before refinement)", reading(s.lattice_time_s, 2, "s",
                                                                           none="does not reach the end")))
    return rows


def _grade_text(g) -> str:
    if g is None or (isinstance(g, float) and not math.isfinite(g)):
        return "none"
    text = f"{g:.3f} ({100 * g:.1f} %, {math.degrees(math.atan(g)):.1f}°)"
    return text + ", climbing" if g < 0 else text


def _point_rows(route, terrain, parameters) -> list[tuple]:
    """Start, via points and end: as given, in map coordinates, in lon/lat, and how far they moved."""
    s = route.summary
    pts = dict((parameters or {}).get("points") or {})
    lonlat = bool(pts.get("lonlat"))
    crs = terrain.crs
    given_label = "lon, lat" if lonlat else "DEM's CRS"
    rows = []
    items = [("start", s.start_xyz[:2], pts.get("start"), s.start_moved_m, s.start_moved_why)]
    for i, v in enumerate(s.via_xy or []):
        vias = pts.get("via") or []
        items.append((f"via point {i + 1}", v, vias[i] if i < len(vias) else None, None, None))
    items.append(("end", s.end_xyz[:2], pts.get("end"), s.end_moved_m, s.end_moved_why))
    for name, xy, given, moved, why in items:
        given_text = ", ".join(f"{float(v):.6f}" if lonlat else f"{float(v):.2f}" for v in given) if given else "none"
        moved_text = "not moved" if not moved else f"{reading(moved, 2, 'm')}" + (f" ({why})" if why else "")
        rows.append((name, f"{given_text} ({given_label})" if given else given_text,
                     f"{float(xy[0]):.2f}, {float(xy[1]):.2f}", _ll_text(_lonlat(crs, xy[0], xy[1])), moved_text))
    return rows


_SEARCH_WORDS = {"full": "the whole area at once", "corridor": "coarse to fine, in a corridor", "auto": "chosen by size",
                 "robust": "robust over the friction range"}


def _method_rows(route) -> list[tuple[str, str]]:
    s = route.summary
    rows = [
        ("Search plan", _SEARCH_WORDS.get(s.search_plan, str(s.search_plan).replace("_", " "))),
        ("Lattice directions per cell", f"{s.neighbours}"),
        ("Lattice search exact", reading(s.search_exact)),
        ("Refined", reading(s.refined)),
    ]
    if s.refined:
        rows += [("Line reported", str(s.refine_choice or "none").replace("_", " ")),
                 ("Refinement converged", reading(s.refine_converged, none="not run"))]
    return rows


def _fixed(value, decimals: int, missing: str = "none") -> str:
    """A table number at fixed decimals (a column reads alike); ``missing`` for NaN."""
    v = float(value)
    if not math.isfinite(v):
        return missing if math.isnan(v) else reading(v)
    text = f"{v:.{decimals}f}"
    return text[1:] if text.startswith("-") and float(text) == 0 else text  # no "-0.00"


def _chainage_1(station_m: float) -> str:
    """``1+250.4``: kilometres + metres to a decimetre.

    Examples
    --------
    >>> _chainage_1(1250.44), _chainage_1(9.96), _chainage_1(0.0)
    ('1+250.4', '0+010.0', '0+000.0')
    """
    dm = int(round(station_m * 10))
    return f"{dm // 10000}+{(dm % 10000) // 10:03d}.{dm % 10}"


#: The chainage table's point-of-interest flags, in words.
_FLAG_WORDS = {"start": "start", "end": "end", "max_speed": "highest speed",
               "max_lateral_g": "largest lateral acceleration", "max_normal_g": "largest normal load",
               "min_liftoff_margin": "smallest lift-off margin", "stall": "stopped",
               "overspeed": "over the speed limit", "liftoff": "lift-off"}


def _station_table(route, stations=None) -> str:
    """The chainage table (:func:`fallway.stations.station_table`), collapsible (``<details>``)."""
    if stations is None:
        from .stations import station_table

        stations = station_table(route)
    t = stations
    head = ("station (km+m)", "x (m)", "y (m)", "latitude, longitude", "ground (m)", "line (m)", "clearance (m)",
            "grade", "grade (°)", "speed (m/s)", "time (s)", "normal load (g)", "notes")
    n = len(t.station_m)
    out = [f'<details id="stations"><summary>Station table: {n} stations, every {t.step_m:g} m and at the '
           "points of interest</summary>", '<table class="stations">',
           "<tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr>"]
    for i in range(n):
        lat, lon = float(t.lat_deg[i]), float(t.lon_deg[i])
        ll = _ll_text((lon, lat)) if math.isfinite(lat) and math.isfinite(lon) else "none"
        st = float(t.station_m[i])
        cells = [_chainage_1(st), _fixed(t.x_m[i], 2), _fixed(t.y_m[i], 2), ll,
                 _fixed(t.ground_z_m[i], 2, "no data"), _fixed(t.line_z_m[i], 2),
                 _fixed(t.clearance_m[i], 2, "no data"), _fixed(t.grade[i], 3), _fixed(t.grade_deg[i], 1),
                 _fixed(t.speed_m_s[i], 2, "stopped"), _fixed(t.time_s[i], 2, "stopped"),
                 _fixed(t.normal_load_ratio[i], 2),
                 ", ".join(_FLAG_WORDS.get(f, f.replace("_", " ")) for f in t.flags[i].split(";") if f)]
        out.append("<tr>" + "".join(f'<td class="num">{_e(c)}</td>' for c in cells[:-1])
                   + f"<td>{_e(cells[-1])}</td></tr>")
    out += ["</table>", "</details>"]
    return "\n".join(out)


def _inputs_html(route, terrain, parameters) -> list[str]:
    parts = ['<h2 id="inputs">Inputs</h2>', "<h3>Points</h3>",
             _table(_point_rows(route, terrain, parameters),
                    head=("point", "as given", f"map coordinates, {crs_text(terrain.crs)} (m)", "latitude, longitude",
                          "moved by"))]
    env = route.envelope
    mu_range = (env.mu_lo, env.mu_hi) if env is not None else None
    parts.append('<div class="cols">')
    for name, rows, head in (("Mover", mover_rows(route.mover, mu_range), "input"),
                             ("Limits", limit_rows(route.limits), "limit"), ("Line", line_rows(route.line_spec), "input")):
        parts.append(f"<div><h3>{name}</h3>" + _table(rows, head=(head, "value"), numeric=False) + "</div>")
    parts.append("</div>")
    other = _other_settings(parameters)
    if other:
        parts.append("<h3>Other settings</h3>" + _table(other, head=("setting", "value"), numeric=False))
    return parts


#: Scenario sections shown elsewhere in the report (points, mover, limits, line, the DEM).
_SHOWN = ("points", "mover", "limits", "line", "envelope", "dem")


def _other_settings(parameters) -> list[tuple[str, str]]:
    """The scenario's remaining settings, their keys put into words."""
    if not parameters:
        return []
    rows = []
    for key, value in _flatten({k: v for k, v in dict(parameters).items() if k not in _SHOWN}):
        label = " / ".join(part.replace("_", " ") for part in str(key).split("."))
        rows.append((label[:1].upper() + label[1:], _words_value(value)))
    return rows


def _words_value(value) -> str:
    if isinstance(value, (list, tuple)):
        return ", ".join(_words_value(v) for v in value) or "none"
    if isinstance(value, float):
        return reading(value, 4).rstrip("0").rstrip(".") if math.isfinite(value) else reading(value)
    return reading(value)


def report_html(route, terrain, *, map_png=None, profile_png=None, parameters: dict | None = None,
                title: str = "fallway: minimum-time descent line", reach=None, keepout=None,
                comparison=None, comparison_png=None, dem=None, date: str | None = None,
                stations=None) -> str:
    """The report page as a string (see :func:`write_report_html`).

    Examples
    --------
    >>> from fallway.export import _example_route
    >>> route, terrain = _example_route()
    >>> page = report_html(route, terrain)
    >>> page.startswith("<!DOCTYPE html>"), page.count("data:image/png;base64,"), "http" in page
    (True, 2, False)
    """
    from .export import profile_flags

    if map_png is None or profile_png is None:
        from .plot import plot_map, plot_profile

        if map_png is None:
            map_png = plot_map(terrain, route, reach=reach, keepout=keepout).figure
        if profile_png is None:
            profile_png = plot_profile(route, terrain).figure
    map_data = _png_bytes(map_png)
    prof_data = _png_bytes(profile_png)
    dem = dem if dem is not None else (parameters or {}).get("dem")
    dem_text = Path(str(dem)).name if dem else "given in memory"
    date = date or run_date()

    parts = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{_e(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>", "<main>"]
    parts.append(f"<h1>{_e(title)}</h1>")
    parts.append(f'<p class="sub">Run of {_e(date)} · fallway {_e(fallway_version())} · DEM {_e(dem_text)}, '
                 f"{_e(crs_text(terrain.crs))} · {_e(route.summary.line_kind)} line</p>")
    parts += _verdict_html(route)
    parts.append(f'<div class="caution" id="caution"><strong>Caution</strong> — {_e(CAUTION)}</div>')

    # flagged stretches, stated in words
    flags = profile_flags(route.profile, route.mover)
    notes = []
    if route.profile.stalled_at_m is not None:
        notes.append(f"The mover stops at station {float(route.profile.stalled_at_m):.1f} m: the line as "
                     "drawn does not reach the end.")
    n_over = sum("overspeed" in f for f in flags)
    if n_over:
        notes.append(f"{n_over} vertices exceed the speed limit.")
    n_lift = sum("liftoff" in f for f in flags)
    if n_lift:
        notes.append(f"{n_lift} places where an open chute would need the load held down (lift-off on a crest).")
    if route.summary.refined and route.summary.refine_converged is False:
        notes.append("The refinement stopped before it converged; the best line found is shown.")
    for n in notes:
        parts.append(f'<div class="flag">{_e(n)}</div>')

    parts.append('<h2 id="numbers">Results</h2>')
    parts.append(_table(_result_rows(route), head=("quantity", "value")))

    parts.append('<h2 id="plots">Plan and long-section</h2>')
    if map_data is not None:
        parts.append(_img(map_data, "site map of the line",
                          "Site map: hillshade and contours, the line (solid), the lattice line (dashed), start "
                          "(triangle) and end (square); the whole DEM in the inset; north arrow to true north."))
    if prof_data is not None:
        parts.append(_img(prof_data, "long-section of the line",
                          "Long-section: ground and line heights, speed and time along the line; "
                          "flagged stretches shaded. profile.pdf holds the printable sheets at true scale."))
    parts.append(_station_table(route, stations))

    if comparison is not None:
        parts += _comparison_section(comparison, comparison_png)

    parts += _inputs_html(route, terrain, parameters)
    parts.append('<h2 id="method">How the line was found</h2>')
    parts.append(_table(_method_rows(route), head=("step", "value")))
    parts.append('<p class="sub">Every figure of the run, under its machine-readable name, is in summary.json '
                 "beside this page.</p>")

    parts.append('<h2 id="cautions">Cautions</h2>')
    parts.append("<ul>")
    parts.append(f"<li><strong>{_e(CAUTION)}</strong></li>")
    if route.summary.line_kind == "cable":
        parts.append(f"<li><strong>{_e(CABLE_CAUTION)}</strong></li>")
    parts.append("<li>Heights come from the elevation model as given; its errors and its cell size limit "
                 "what the line can follow.</li>")
    parts.append("<li>The friction coefficient is one number for the whole line; try the range of values "
                 "the material may show (wet, dry, worn) before relying on a time or a speed.</li>")
    parts.append("</ul>")
    parts.append(f"<footer>Written by fallway {_e(fallway_version())} on {_e(date)} from {_e(dem_text)} "
                 f"({_e(crs_text(terrain.crs))}). Times and speeds are those of a point mass on the exported "
                 "vertices.</footer>")
    parts += ["</main>", "</body>", "</html>"]
    return "\n".join(parts) + "\n"


def write_report_html(route, terrain, path: str | os.PathLike, *, map_png=None, profile_png=None,
                      parameters: dict | None = None, title: str = "fallway: minimum-time descent line",
                      reach=None, keepout=None, comparison=None, comparison_png=None, dem=None,
                      date: str | None = None, stations=None) -> Path:
    """Write one self-contained HTML page for a route.

    Parameters
    ----------
    route : Route
    terrain : Terrain
    path : path-like
        Destination (written atomically).
    map_png, profile_png : path, bytes or matplotlib Figure, optional
        The plots to embed (as base64 ``data:`` URIs); drawn with
        :func:`fallway.plot.plot_map` / :func:`fallway.plot.plot_profile` when omitted.
    parameters : dict, optional
        The resolved scenario (nested dicts are flattened with dots).
    title : str
    reach, keepout : optional
        Passed to :func:`fallway.plot.plot_map` when the map is drawn here.
    comparison, comparison_png : optional
        A :class:`Comparison` of candidate lines and its figure, shown as a section.
    dem : path, optional
        The DEM file named on the page (default: ``parameters["dem"]``).
    date : str, optional
        The date of the run (default :func:`fallway.handover.run_date`).
    stations : StationTable, optional
        The chainage table shown (collapsed); :func:`fallway.stations.station_table` at its
        default step when omitted.

    Returns
    -------
    Path
        The file written.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from fallway.export import _example_route
    >>> route, terrain = _example_route()
    >>> p = write_report_html(route, terrain, pathlib.Path(tempfile.mkdtemp()) / "report.html",
    ...                       parameters={"scenario": "incline"})
    >>> "Travel time" in p.read_text() and "travel_time_s" not in p.read_text()
    True
    """
    from .export import atomic_write

    text = report_html(route, terrain, map_png=map_png, profile_png=profile_png, parameters=parameters,
                       title=title, reach=reach, keepout=keepout, comparison=comparison,
                       comparison_png=comparison_png, dem=dem, date=date, stations=stations)
    path = Path(path)
    with atomic_write(path) as f:
        f.write(text)
    return path


#: (record key, column heading, decimals) of the comparison table.
_COMPARISON_COLS = (
    ("name", "line", None),
    ("status", "status", None),
    ("travel_time_s", "time (s)", 2),
    ("length_m", "length (m)", 1),
    ("drop_m", "drop (m)", 1),
    ("exit_speed_m_s", "exit speed (m/s)", 2),
    ("max_speed_m_s", "max speed (m/s)", 2),
    ("max_grade", "max grade", 3),
    ("min_radius_m", "min radius in plan (m)", 1),
    ("min_radius_3d_m", "min radius 3D (m)", 1),
    ("stalled_at_m", "stalls at (m)", 1),
    ("envelope_status", "friction range", None),
)


def _comparison_section(comparison, comparison_png=None) -> list[str]:
    """HTML of the ranked comparison table (and its figure)."""
    parts = ['<h2 id="comparison">Candidate lines compared</h2>']
    mu = comparison.mover.mu
    text = f"All lines timed with the same physics (μ = {mu:g}"
    if comparison.mu_range is not None:
        lo, hi = comparison.mu_range
        text += f"; friction range {lo:g} to {hi:g} checked"
    parts.append(f'<p class="sub">{_e(text)}); ranked fastest first, lines that stall after those that '
                 "reach the end. The computed optimum is marked *.</p>")
    records = comparison.to_records()
    cols = [c for c in _COMPARISON_COLS if c[0] != "envelope_status" or comparison.mu_range is not None]
    rows = []
    for rec in records:
        cells = []
        for key, _, dec in cols:
            v = rec.get(key)
            if key == "name" and rec.get("computed"):
                v = f"{v} *"
            if key == "status":
                v = "meets every limit" if v == "ok" else _limit_words([v])
            cells.append(_fmt(v, dec) if dec is not None else ("none" if v is None else str(v)))
        rows.append(cells)
    out = ["<table>", "<tr>" + "".join(f"<th>{_e(c[1])}</th>" for c in cols) + "</tr>"]
    num = ' class="num"'
    for cells in rows:
        out.append("<tr>" + "".join(f"<td{num if _looks_numeric(c) else ''}>{_e(c)}</td>" for c in cells) + "</tr>")
    out.append("</table>")
    parts.append("\n".join(out))
    data = _png_bytes(comparison_png)
    if data is not None:
        parts.append(_img(data, "candidate lines on the hillshade and their long-sections",
                          "Candidate lines in plan and their long-sections (height and speed)."))
    return parts


def comparison_html(comparison, *, comparison_png=None, parameters: dict | None = None,
                    title: str = "fallway: candidate lines compared") -> str:
    """A self-contained page for a comparison of candidate lines.

    Examples
    --------
    >>> from fallway.evaluate import Comparison, evaluate_line
    >>> from fallway.physics import Mover
    >>> m = Mover(normal="gravity")
    >>> rows = [evaluate_line(None, [(0, 0, 10.0), (40.0, 0, 0.0)], m, name="steep")]
    >>> page = comparison_html(Comparison.ranked(rows, m))
    >>> "steep" in page and "Caution" in page and "http" not in page
    True
    """
    parts = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{_e(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>", "<main>",
             f"<h1>{_e(title)}</h1>",
             f'<div class="caution" id="caution"><strong>Caution</strong> — {_e(CAUTION)}</div>']
    parts += _comparison_section(comparison, comparison_png)
    parts.append('<h2 id="parameters">Inputs</h2>')
    parts.append("<div class=\"cols\"><div><h3>Mover</h3>"
                 + _table(mover_rows(comparison.mover, comparison.mu_range), head=("input", "value"))
                 + "</div><div><h3>Limits</h3>"
                 + _table(limit_rows(comparison.limits), head=("limit", "value"))
                 + "</div>")
    other = _other_settings(parameters)
    if other:
        parts.append("<div><h3>Other settings</h3>" + _table(other, head=("setting", "value")) + "</div>")
    parts.append("</div>")
    parts.append("<footer>Written by fallway. Times and speeds are those of a point mass on each line's "
                 "vertices.</footer>")
    parts += ["</main>", "</body>", "</html>"]
    return "\n".join(parts) + "\n"


def write_comparison_html(comparison, path: str | os.PathLike, *, comparison_png=None,
                          parameters: dict | None = None) -> Path:
    """Write :func:`comparison_html` to ``path`` atomically; returns the path."""
    from .export import atomic_write

    path = Path(path)
    with atomic_write(path) as f:
        f.write(comparison_html(comparison, comparison_png=comparison_png, parameters=parameters))
    return path
