"""The HTML report: self-contained, complete, and rendered by a real browser."""

from __future__ import annotations

import base64
import dataclasses
import re
import html
import html.parser
import shutil
import subprocess

import numpy as np
import pytest

from fallway.caution import CAUTION
from fallway.plot import plot_map, plot_profile, save_figure
from fallway.report import report_html, write_report_html

# the route builders live beside the export tests (same synthetic site)
from test_export import make_route, make_terrain

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG spec (ISO/IEC 15948), section 5.2


class _Collect(html.parser.HTMLParser):
    """Every tag with its attributes, and the text of table cells."""

    def __init__(self):
        super().__init__()
        self.tags = []
        self.cells = []
        self._in_cell = False

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag in ("td", "th"):
            self._in_cell = True
            self.cells.append("")

    def handle_endtag(self, tag):
        if tag in ("td", "th"):
            self._in_cell = False

    def handle_data(self, data):
        if self._in_cell:
            self.cells[-1] += data


@pytest.fixture(scope="module")
def site():
    terrain = make_terrain()
    return terrain, make_route(terrain, raised=3.0)


@pytest.fixture(scope="module")
def report(site, tmp_path_factory):
    terrain, route = site
    d = tmp_path_factory.mktemp("report")
    map_png = save_figure(plot_map(terrain, route).figure, d / "map.png")[0]
    prof_png = save_figure(plot_profile(route, terrain).figure, d / "profile.png")[0]
    path = write_report_html(route, terrain, d / "report.html", map_png=map_png, profile_png=prof_png,
                             parameters={"site": "synthetic slope", "search": {"neighbours": 16}})
    return path


def test_report_is_self_contained(report):
    text = report.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>")
    low = text.lower()
    for bad in ("http://", "https://", 'src="file', "src='file", "<script", "<link", "@import", "url("):
        assert bad not in low, bad
    p = _Collect()
    p.feed(text)
    imgs = [a for t, a in p.tags if t == "img"]
    assert len(imgs) == 2
    for a in imgs:
        prefix = "data:image/png;base64,"
        assert a["src"].startswith(prefix)
        assert base64.b64decode(a["src"][len(prefix):], validate=True).startswith(PNG_SIGNATURE)
        assert a.get("alt")
    assert any(t == "style" for t, _ in p.tags)


def test_report_has_numbers_parameters_and_caution(site, report):
    terrain, route = site
    text = report.read_text(encoding="utf-8")
    assert html.escape(CAUTION) in text
    p = _Collect()
    p.feed(text)
    cells = [c.strip() for c in p.cells]
    i = cells.index("Travel time")
    assert cells[i + 1] == f"{route.summary.travel_time_s:.2f} s"
    i = cells.index("Drop")
    assert cells[i + 1] == f"{route.summary.drop_m:.1f} m"
    assert cells[cells.index("Friction coefficient μ") + 1] == "0.1"
    assert cells[cells.index("Steepest descent grade allowed") + 1] == "none"  # Limits default: inf, in words
    # the least grade limit 0.05 with its percent and angle: atan(0.05) = 2.862° (arithmetic)
    assert cells[cells.index("Least descent grade allowed") + 1] == "0.05 (5 %, 2.9°)"
    assert cells[cells.index("Search / neighbours") + 1] == "16"
    assert "synthetic slope" in cells
    assert "labels_created" not in text and "refine_residual" not in text  # internals stay in summary.json


def _visible_text(page: str) -> str:
    """The page's text as a reader sees it (tags, styles and data URIs dropped)."""
    class Text(html.parser.HTMLParser):
        def __init__(self):
            super().__init__()
            self.parts, self._skip = [], 0

        def handle_starttag(self, tag, attrs):
            self._skip += tag in ("style", "script", "title")

        def handle_endtag(self, tag):
            self._skip -= tag in ("style", "script", "title")

        def handle_data(self, data):
            if not self._skip:
                self.parts.append(data)

    t = Text()
    t.feed(page)
    return " ".join(t.parts)


#: What must not reach a reader: unfinished values and internal keys (snake_case words).
_RAW = re.compile(r"\b(?:[Ii]nf|INF|[Nn]a[Nn]|NAN|None|[Ii]nfinity)\b|\b[a-z]+(?:_[a-z0-9]+)+\b")


def test_report_states_inputs_points_stations_and_provenance(site):
    terrain, route = site
    # the points as given in lon/lat: the report shows them, the map coordinates, and lon/lat
    # recomputed with pyproj (the reference) from the map coordinates
    import pyproj

    to_ll = pyproj.Transformer.from_crs(terrain.crs, "EPSG:4326", always_xy=True)
    lon, lat = to_ll.transform(*route.summary.start_xyz[:2])
    params = {"dem": "/data/site.tif", "points": {"lonlat": True, "start": [lon, lat], "end": [0.0, 0.0]}}
    page = report_html(route, terrain, parameters=params, map_png=PNG_SIGNATURE, profile_png=PNG_SIGNATURE,
                       date="2026-12-02")
    p = _Collect()
    p.feed(page)
    cells = [c.strip() for c in p.cells]
    i = cells.index("moved by") + 1  # the points table: its first row is the start
    assert cells[i] == "start"
    assert cells[i + 1] == f"{lon:.6f}, {lat:.6f} (lon, lat)"
    assert cells[i + 2] == f"{route.summary.start_xyz[0]:.2f}, {route.summary.start_xyz[1]:.2f}"
    assert cells[i + 3] == f"{abs(lat):.6f}° N, {abs(lon):.6f}° E"
    from importlib.metadata import version

    text = _visible_text(page)
    assert "2026-12-02" in text and f"fallway {version('fallway')}" in text
    assert "site.tif" in text and "EPSG:32633 (WGS 84 / UTM zone 33N)" in text
    assert 'class="verdict ok"' in page and "Meets every limit" in text
    # the station table: collapsible, one row per station of the chainage table; at the line's
    # vertices its speeds are the profile's own (traverse, the reference of tests/test_stations.py)
    from fallway.stations import station_table

    table = station_table(route)
    assert page.count("<details") == 1 and "<summary>" in page
    body = page[page.index("<details"):page.index("</details>")]
    q = _Collect()
    q.feed(body)
    rows = [q.cells[k:k + 13] for k in range(13, len(q.cells), 13)]
    assert len(rows) == len(table.station_m) == 24  # 0 to 220 m every 10 m, and the end at 226.4 m
    shown = np.array([int(r[0].split("+")[0]) * 1000 + float(r[0].split("+")[1]) for r in rows])  # km+m
    np.testing.assert_allclose(shown, table.station_m, atol=0.05)
    speed = np.array([float(r[9]) for r in rows])
    np.testing.assert_allclose(speed, table.speed_m_s, atol=0.005)  # as rounded on the page
    at_vertex = np.flatnonzero(table.is_vertex)
    np.testing.assert_allclose(speed[at_vertex], np.interp(table.station_m[at_vertex], route.profile.station_m,
                                                           route.profile.speed_m_s), atol=0.005)
    assert rows[0][0] == "0+000.0" and rows[0][12] == "start" and "end" in rows[-1][12]
    assert not _RAW.findall(text), _RAW.findall(text)


def test_report_headline_over_a_friction_range(site):
    from fallway.evaluate import envelope

    terrain, route = site
    # the same line at mu 0.05 / 0.1 / 0.6: at 0.6 the 45 % slope (tan 24°) cannot carry it
    env = envelope(terrain, route.line, route.mover, 0.05, 0.6, limits=route.limits)
    assert env.high.stalled_at_m is not None  # the reference: evaluate's own traverse
    r = dataclasses.replace(route, envelope=env)
    page = report_html(r, terrain, map_png=PNG_SIGNATURE, profile_png=PNG_SIGNATURE)
    text = _visible_text(page)
    assert 'class="verdict bad"' in page
    assert "at high friction μ = 0.6: the mover stops before the end" in text
    p = _Collect()
    p.feed(page)
    cells = [c.strip() for c in p.cells]
    i = cells.index("high friction")
    assert cells[i + 1] == "0.6" and cells[i + 3] == "does not arrive"
    assert cells[i + 6] == f"{env.high.stalled_at_m:.1f} m"
    i = cells.index("low friction")
    assert cells[i + 3] == f"{env.low.travel_time_s:.2f} s"
    assert not _RAW.findall(text), _RAW.findall(text)


def test_report_draws_its_own_plots_and_escapes_text(site, tmp_path):
    terrain, route = site
    text = report_html(route, terrain, parameters={"note": "<b>a & b</b>"}, title="Line <1>")
    assert "<b>a &amp; b</b>" not in text and "&lt;b&gt;a &amp; b&lt;/b&gt;" in text
    assert "<title>Line &lt;1&gt;</title>" in text
    assert text.count("data:image/png;base64,") == 2


def test_report_states_a_stall(site):
    from fallway.physics import Mover

    terrain, _ = site
    r = make_route(terrain, Mover(mu=0.44, v0=7.0, normal="gravity", stall_speed=0.3))
    assert r.profile.stalled_at_m is not None
    text = report_html(r, terrain, map_png=b"\x89PNG\r\n\x1a\n", profile_png=b"\x89PNG\r\n\x1a\n")
    assert f"stops at station {r.profile.stalled_at_m:.1f} m" in text


def _colour_fraction(img, rgb, tol=0.04):
    return float(np.mean(np.all(np.abs(img[..., :3] - np.array(rgb) / 255.0) < tol, axis=-1)))


@pytest.mark.slow
def test_report_renders_in_headless_chromium(report, tmp_path):
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe is None:
        pytest.skip("chromium is not installed (Debian package 'chromium'; .ci/run installs it)")
    from matplotlib.image import imread

    shot = tmp_path / "shot.png"
    cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--disable-background-networking",
           "--disable-component-update", "--disable-sync", "--no-first-run", "--hide-scrollbars",
           f"--user-data-dir={tmp_path / 'profile'}", f"--screenshot={shot}", "--window-size=1200,2000",
           "--dump-dom", report.resolve().as_uri()]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert shot.exists(), f"chromium wrote no screenshot (exit {res.returncode}): {res.stderr[-500:]}"
    assert shot.read_bytes().startswith(PNG_SIGNATURE)
    img = imread(shot)
    assert img.shape[:2] == (2000, 1200)
    rgb = img[..., :3]
    nonwhite = np.mean(np.any(rgb < 0.95, axis=-1))
    assert nonwhite > 0.2, f"screenshot nearly blank ({nonwhite:.1%} non-white)"
    colours = np.unique((rgb * 255).astype(np.uint8).reshape(-1, 3), axis=0)
    assert len(colours) > 500  # shaded plots: far more colours than text on a plain page
    # the inline CSS took effect: caution border and table header colours are on screen
    assert _colour_fraction(img, (0xB0, 0x3A, 0x2E)) > 1e-4
    assert _colour_fraction(img, (0xEF, 0xE8, 0xDA)) > 1e-4
    # the embedded map is drawn: its line colour (#c0392b) appears in the image
    assert _colour_fraction(img, (0xC0, 0x39, 0x2B), tol=0.03) > 1e-4
    # the page as the browser parsed it: a reader sees no unfinished values and no internal keys
    dom = res.stdout
    assert "<details" in dom and "Station table" in dom, dom[:300]
    text = _visible_text(dom)
    assert "Travel time" in text and "Meets every limit" in text
    assert not _RAW.findall(text), _RAW.findall(text)
