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

from .caution import CAUTION

__all__ = ["write_report_html", "report_html", "comparison_html", "write_comparison_html"]

#: (summary key, label, unit, decimals) of the main table, in this order; other summary
#: entries follow in a second table.
_MAIN_ROWS = (
    ("travel_time_s", "Travel time", "s", 2),
    ("lattice_time_s", "Lattice line time", "s", 2),
    ("length_m", "Length along the line", "m", 1),
    ("plan_length_m", "Plan length", "m", 1),
    ("drop_m", "Drop", "m", 1),
    ("exit_speed_m_s", "Speed at the end", "m/s", 2),
    ("max_speed_m_s", "Highest speed", "m/s", 2),
    ("min_radius_plan_m", "Tightest bend radius in plan", "m", 1),
    ("min_radius_3d_m", "Tightest bend radius along the line (3D)", "m", 1),
    ("max_grade", "Steepest descent grade", "", 3),
)

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
.flag { background: #fff4d6; border-left: 5px solid #d68910; padding: 8px 12px; margin: 8px 0; }
table { border-collapse: collapse; margin: 6px 0 12px; font-size: 14px; }
th, td { border: 1px solid #c9c2b4; padding: 4px 10px; text-align: left; vertical-align: top; }
th { background: #efe8da; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
figure { margin: 12px 0; }
figure img { max-width: 100%; border: 1px solid #ccc; }
figcaption { font-size: 13px; color: #444; }
.cols { display: flex; flex-wrap: wrap; gap: 28px; }
footer { margin-top: 32px; font-size: 12px; color: #666; }
"""


def _fmt(value: Any, decimals: int = 4) -> str:
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value:d}"
    if isinstance(value, float):
        if math.isnan(value):
            return "—"
        if math.isinf(value):
            return "no limit"
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


def _table(rows, head=("quantity", "value")) -> str:
    out = ["<table>", "<tr>" + "".join(f"<th>{_e(h)}</th>" for h in head) + "</tr>"]
    for cells in rows:
        tds = []
        for j, c in enumerate(cells):
            cls = ' class="num"' if j == len(cells) - 1 and _looks_numeric(c) else ""
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


def _as_dict(obj) -> dict:
    if obj is None:
        return {}
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return dataclasses.asdict(obj)
    return dict(obj)


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


def report_html(route, terrain, *, map_png=None, profile_png=None, parameters: dict | None = None,
                title: str = "fallway: minimum-time descent line", reach=None, keepout=None,
                comparison=None, comparison_png=None) -> str:
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

    summary = route.summary.to_dict()
    if map_png is None or profile_png is None:
        from .plot import plot_map, plot_profile

        if map_png is None:
            map_png = plot_map(terrain, route, reach=reach, keepout=keepout).figure
        if profile_png is None:
            profile_png = plot_profile(route, terrain).figure
    map_data = _png_bytes(map_png)
    prof_data = _png_bytes(profile_png)

    parts = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{_e(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>", "<main>"]
    parts.append(f"<h1>{_e(title)}</h1>")
    pts = route.profile.points
    parts.append(f'<p class="sub">From ({pts[0][0]:.1f}, {pts[0][1]:.1f}) at {pts[0][2]:.1f} m '
                 f"to ({pts[-1][0]:.1f}, {pts[-1][1]:.1f}) at {pts[-1][2]:.1f} m, "
                 f"{len(pts)} vertices.</p>")
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
    for k in ("refine_converged",):
        if summary.get(k) is False:
            notes.append("The refinement stopped before it converged; the best line found is shown.")
            break
    for n in notes:
        parts.append(f'<div class="flag">{_e(n)}</div>')

    parts.append('<h2 id="numbers">Numbers</h2>')
    rows = []
    used = set()
    for key, label, unit, dec in _MAIN_ROWS:
        if key in summary:
            used.add(key)
            val = _fmt(summary[key], dec)
            rows.append((label, f"{val} {unit}".strip() if val != "—" else val))
    parts.append(_table(rows, head=("quantity", "value")))
    others = [(k, v) for k, v in _flatten({k: v for k, v in summary.items() if k not in used})]
    if others:
        parts.append("<h3>Search and refinement</h3>")
        parts.append(_table([(k, _fmt(v)) for k, v in others], head=("entry", "value")))

    parts.append('<h2 id="plots">Plan and long-section</h2>')
    if map_data is not None:
        parts.append(_img(map_data, "plan map of the line",
                          "Plan: tinted hillshade, the line (solid), the lattice line (dashed), start (triangle) "
                          "and end (square); grid north up."))
    if prof_data is not None:
        parts.append(_img(prof_data, "long-section of the line",
                          "Long-section: ground and line heights, speed and time along the line; "
                          "flagged stretches shaded."))

    if comparison is not None:
        parts += _comparison_section(comparison, comparison_png)

    parts.append('<h2 id="parameters">Parameters</h2>')
    parts.append('<div class="cols">')
    parts.append("<div><h3>Mover</h3>" + _table([(k, _fmt(v)) for k, v in _flatten(_as_dict(route.mover))],
                                                head=("parameter", "value")) + "</div>")
    parts.append("<div><h3>Limits</h3>" + _table([(k, _fmt(v)) for k, v in _flatten(_as_dict(route.limits))],
                                                 head=("limit", "value")) + "</div>")
    if parameters:
        parts.append("<div><h3>Scenario</h3>" + _table([(k, _fmt(v)) for k, v in _flatten(dict(parameters))],
                                                       head=("setting", "value")) + "</div>")
    parts.append("</div>")

    parts.append('<h2 id="cautions">Cautions</h2>')
    parts.append("<ul>")
    parts.append(f"<li><strong>{_e(CAUTION)}</strong></li>")
    parts.append("<li>Heights come from the elevation model as given; its errors and its cell size limit "
                 "what the line can follow.</li>")
    parts.append("<li>The friction coefficient is one number for the whole line; try the range of values "
                 "the material may show (wet, dry, worn) before relying on a time or a speed.</li>")
    parts.append("</ul>")
    parts.append("<footer>Written by fallway. Times and speeds are those of a point mass on the exported "
                 "vertices.</footer>")
    parts += ["</main>", "</body>", "</html>"]
    return "\n".join(parts) + "\n"


def write_report_html(route, terrain, path: str | os.PathLike, *, map_png=None, profile_png=None,
                      parameters: dict | None = None, title: str = "fallway: minimum-time descent line",
                      reach=None, keepout=None, comparison=None, comparison_png=None) -> Path:
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
    >>> "Travel time" in p.read_text()
    True
    """
    from .export import atomic_write

    text = report_html(route, terrain, map_png=map_png, profile_png=profile_png, parameters=parameters,
                       title=title, reach=reach, keepout=keepout, comparison=comparison,
                       comparison_png=comparison_png)
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
            cells.append(_fmt(v, dec) if dec is not None else ("—" if v is None else str(v)))
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
    parts.append('<h2 id="parameters">Parameters</h2>')
    parts.append("<div class=\"cols\"><div><h3>Mover</h3>"
                 + _table([(k, _fmt(v)) for k, v in _flatten(_as_dict(comparison.mover))], head=("parameter", "value"))
                 + "</div><div><h3>Limits</h3>"
                 + _table([(k, _fmt(v)) for k, v in _flatten(_as_dict(comparison.limits))], head=("limit", "value"))
                 + "</div>")
    if parameters:
        parts.append("<div><h3>Scenario</h3>" + _table([(k, _fmt(v)) for k, v in _flatten(dict(parameters))],
                                                       head=("setting", "value")) + "</div>")
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
