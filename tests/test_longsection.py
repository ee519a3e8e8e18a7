"""The printable long-section: read back with pypdf, scales measured on the paper itself."""

from __future__ import annotations

import dataclasses
import math
from importlib.metadata import version

import numpy as np
import pytest

from fallway.caution import CAUTION
from fallway.longsection import chainage, sheet_layout, write_profile_pdf
from fallway.params import LineSpec

from test_export import make_route, make_terrain
from test_plot import srtm_route  # noqa: F401  (a fixture: a 2.2 km lattice line on the SRTM tile)

pypdf = pytest.importorskip("pypdf")

PT_PER_MM = 72 / 25.4  # PDF user space unit: 1/72 inch (ISO 32000-1, 8.3.2.3)


def _words(page):
    """(text, x, y) of every text run on a page, in points from the lower left corner."""
    out = []

    def visit(text, cm, tm, _font, _size):
        if text.strip():
            out.append((text.strip(), cm[4] + tm[4] * cm[0], cm[5] + tm[5] * cm[3]))

    page.extract_text(visitor_text=visit)
    return out


def _tick_spacing_mm(words, pattern, axis):
    """Paper distance per unit between tick labels matching ``pattern`` (x or y positions)."""
    pos = [(float(v), (x if axis == "x" else y)) for t, x, y in words if (v := pattern(t)) is not None]
    assert len(pos) >= 3
    values, at = np.array(pos).T
    slope = np.polyfit(values, at, 1)[0]
    np.testing.assert_allclose(at, np.polyval(np.polyfit(values, at, 1), values), atol=0.2)  # evenly spaced
    return slope / PT_PER_MM


def _chainage_value(t):
    if len(t) == 5 and t[1] == "+" and t.replace("+", "").isdigit():
        return int(t[0]) * 1000 + int(t[2:])
    return None


@pytest.mark.slow
def test_long_line_runs_over_sheets_at_true_scale(srtm_route, tmp_path):
    terrain, route = srtm_route
    path = write_profile_pdf(route, terrain, tmp_path / "profile.pdf", name="Jacksboro ridge", dem="srtm.tif",
                             mu_range=(0.04, 0.06), date="2026-12-02")
    reader = pypdf.PdfReader(path)
    length = float(route.profile.station_m[-1])
    # 1:5000 on a 240 mm drawing holds 1200 m a sheet (the documented layout)
    assert len(reader.pages) == math.ceil(length / 1200.0) == 2
    box = reader.pages[0].mediabox
    # A4 landscape, ISO 216: 297 x 210 mm
    assert float(box.width) / PT_PER_MM == pytest.approx(297.0, abs=0.1)
    assert float(box.height) / PT_PER_MM == pytest.approx(210.0, abs=0.1)
    layout = sheet_layout(length, 1.0)
    for k, page in enumerate(reader.pages, start=1):
        words = _words(page)
        text = " ".join(t for t, _, _ in words)
        # true horizontal scale: station ticks are 1000 / 5000 mm of paper per metre
        assert _tick_spacing_mm(words, _chainage_value, "x") == pytest.approx(1000.0 / layout["horizontal"], rel=2e-3)
        # the vertical scale read from the height ticks, against the stated exaggeration
        heights = [(t, x, y) for t, x, y in words if t.isdigit() and x < 32 * PT_PER_MM and y > 100 * PT_PER_MM]
        v_mm = _tick_spacing_mm(heights, lambda t: float(t), "y")
        stated = [w for w in text.split("vertical 1:")[1:]]
        vertical = int(stated[0].split()[0])
        assert v_mm == pytest.approx(1000.0 / vertical, rel=2e-3)
        assert f"(vertical exaggeration {layout['horizontal'] / vertical:g}×)" in text
        assert f"sheet {k} of 2" in text
        # the title block: scenario, date, version, DEM, CRS, friction, the route's own numbers
        for needle in ("Jacksboro ridge", "2026-12-02", version("fallway"), "srtm.tif", "EPSG:32616",
                       "0.05 (range 0.04 to 0.06)", f"{route.summary.travel_time_s:.2f} s",
                       f"{route.summary.length_m:.1f} m", f"{route.summary.drop_m:.1f} m",
                       f"{route.summary.exit_speed_m_s:.2f} m/s", "meets every limit"):
            assert needle in text, needle
        assert "CAUTION" in text and " ".join(CAUTION.split()[-6:]) in " ".join(text.split())
    # the first sheet starts at 0+000, the second at 1+200; the last sheet names the end station
    assert _words(reader.pages[0])[0][0] == "0+000"
    assert f"to {chainage(length)}" in reader.pages[1].extract_text()


def test_raised_line_shows_its_clearance(tmp_path):
    terrain = make_terrain()
    route = make_route(terrain, raised=3.0)
    route = dataclasses.replace(route, line_spec=LineSpec(kind="raised", clearance_m=(0.0, 5.0)))
    path = write_profile_pdf(route, terrain, tmp_path / "p.pdf", date="2026-12-02")
    reader = pypdf.PdfReader(path)
    assert len(reader.pages) == 1
    text = reader.pages[0].extract_text()
    assert "clearance (line above ground)" in text and "0 to 5 m" in text
    # a 0.23 km line dropping 90 m: 240 mm hold it at 1:1000, but its relief needs 1:2000 to fill at
    # most 80 % of the 76 mm height panel, and the exaggeration is never below 1 (the documented rule)
    length = float(route.profile.station_m[-1])
    zg = terrain.sample(route.line[:, 0], route.line[:, 1])
    relief = max(route.line[:, 2].max(), zg.max()) - min(route.line[:, 2].min(), zg.min())
    series = (100, 200, 250, 500, 1000, 2000, 2500, 5000)
    by_length = next(s for s in series if 240.0 * s / 1000 >= length)
    by_relief = next(s for s in series if 0.8 * 76.0 * s / 1000 >= relief)
    assert (by_length, by_relief) == (1000, 2000)
    assert f"horizontal 1:{max(by_length, by_relief)}, vertical 1:{by_relief} (vertical exaggeration 1×)" in text


def test_same_route_same_bytes(tmp_path):
    terrain = make_terrain()
    route = make_route(terrain)
    a = write_profile_pdf(route, terrain, tmp_path / "a.pdf", date="2026-12-02").read_bytes()
    b = write_profile_pdf(route, terrain, tmp_path / "b.pdf", date="2026-12-02").read_bytes()
    assert a == b  # no creation date or random ids
