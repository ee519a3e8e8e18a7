"""A cable line end to end: fallway route --line cable, its files, and a failure (exit 3).

References: the columns the issue fixes for supports.csv and spans.csv; the clearance
band checked on profile.csv's own columns (z_line - z_ground); the spans' times summed
against the summary; speed carried across supports; the layers read back with pyogrio."""

from __future__ import annotations

import csv
import json

import pyogrio
import pyogrio.raw
import pytest
from click.testing import CliRunner

from conftest import plane, write_geotiff
from fallway.cable_export import SPAN_COLUMNS, SUPPORT_COLUMNS
from fallway.cli import main
from fallway.scenario import load_scenario


@pytest.fixture
def ramp(tmp_path):
    """A plane falling 0.3 m per metre east, 30 x 80 cells at 2 m, EPSG:32633."""
    z, t = plane(30, 80, 2.0, -0.3, 0.0, z0=200.0)
    return write_geotiff(tmp_path / "ramp.tif", z, t, "EPSG:32633")


CABLE = ["--line", "cable", "--start-height", 6, "--end-height", 4, "--support-height", 4, 10, "--max-span", 60,
         "--clearance", 1.5, 12, "--cable-tension", 30, "--carrier-load", 4, "--cable-weight", 15,
         "--support-step", 10, "--mu", 0.02, "--normal", "gravity"]


def _run(args):
    return CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)


def _rows(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def test_cable_route_writes_supports_spans_and_layers(tmp_path, ramp):
    out = tmp_path / "run"
    res = _run(["route", ramp, "--start", 500_005.0, 3_999_969.0, "--end", 500_145.0, 3_999_969.0, *CABLE,
                "--out", out])
    assert res.exit_code == 0, res.output
    assert "needs braking" in res.output
    with open(out / "supports.csv") as f:
        assert f.readline().strip().split(",") == list(SUPPORT_COLUMNS)
    with open(out / "spans.csv") as f:
        assert f.readline().strip().split(",") == list(SPAN_COLUMNS)
    sup, spans = _rows(out / "supports.csv"), _rows(out / "spans.csv")
    summary = json.loads((out / "summary.json").read_text())
    assert summary["line_kind"] == "cable" and summary["cable"]["support_count"] == len(sup) - 2 >= 1
    assert float(sup[0]["station_m"]) == 0.0 and float(sup[-1]["station_m"]) == pytest.approx(140.0, abs=1e-3)
    assert float(sup[0]["height_m"]) == 6.0 and float(sup[-1]["height_m"]) == 4.0
    for s in sup:
        assert float(s["top_z_m"]) == pytest.approx(float(s["ground_z_m"]) + float(s["height_m"]), abs=2e-3)
    assert len(spans) == len(sup) - 1
    assert sum(float(s["time_s"]) for s in spans) == pytest.approx(summary["travel_time_s"], abs=5e-3)
    for a, b in zip(spans, spans[1:]):
        assert a["exit_speed_m_s"] == b["entry_speed_m_s"]
    for s in spans:
        assert float(s["length_m"]) <= 60.0 + 1e-3 and float(s["min_clearance_m"]) >= 1.5 - 1e-3
    prof = _rows(out / "profile.csv")
    gap = [float(r["z_line"]) - float(r["z_ground"]) for r in prof]
    assert min(gap) >= 1.5 - 1e-6 and max(gap) <= 12.0 + 1e-6
    gj = json.loads((out / "route.geojson").read_text())
    points = [f for f in gj["features"] if f["geometry"]["type"] == "Point"]
    assert len(points) == len(sup) and all(f["properties"]["feature"] == "support" for f in points)
    assert [name for name, _ in pyogrio.list_layers(out / "route.gpkg")] == ["line", "lattice", "supports"]
    meta, _, geom, fields = pyogrio.raw.read(out / "route.gpkg", layer="supports")
    assert meta["geometry_type"] == "Point Z" and len(geom) == len(sup)
    # the supports in the drawing (read back with ezdxf) and as stations of the chainage table
    import ezdxf

    marks = [(e.dxf.location.x, e.dxf.location.y, e.dxf.location.z)
             for e in ezdxf.readfile(out / "route.dxf").modelspace().query('POINT[layer=="SUPPORTS"]')]
    assert len(marks) == len(sup)
    for (x, y, z), s in zip(marks, sup):
        assert (x, y, z) == pytest.approx((float(s["x"]), float(s["y"]), float(s["top_z_m"])), abs=2e-3)
    flags = [r["flags"] for r in _rows(out / "stations.csv")]
    assert sum("support" in f for f in flags) == len(sup) - 2 and any("end station" in f for f in flags)
    # the cable cautions in the report and on the printed long-section (read back with pypdf)
    import pypdf

    from fallway.caution import CABLE_CAUTION

    assert CABLE_CAUTION[:60] in (out / "report.html").read_text()
    pdf_text = " ".join(" ".join(page.extract_text().split()) for page in pypdf.PdfReader(out / "profile.pdf").pages)
    assert "Cable lines: the span model" in pdf_text
    assert list(fields[meta["fields"].tolist().index("height_m")]) == [float(s["height_m"]) for s in sup]
    sc = load_scenario(out / "scenario.toml")
    assert sc.line.kind == "cable" and sc.line.cable.max_span_m == 60.0 and sc.line.cable.cable_tension_kn == 30.0


def test_cable_without_a_layout_exits_3_and_writes_nothing(tmp_path, ramp):
    out = tmp_path / "run"
    args = [a if a != 12 else 2 for a in CABLE]   # a band of 1.5-2 m: the sag leaves it
    res = _run(["route", ramp, "--start", 500_005.0, 3_999_969.0, "--end", 500_145.0, 3_999_969.0, *args,
                "--out", out])
    assert res.exit_code == 3
    assert res.output.count("\n") == 1 and "no cable layout" in res.output and "station" in res.output
    assert not (out / "summary.json").exists()


def test_scenario_cable_section_checked():
    from fallway.errors import ScenarioError
    from fallway.scenario import Scenario

    with pytest.raises(ScenarioError, match=r'cable parameters need line.kind = "cable"'):
        Scenario.from_dict({"cable": {"max_span_m": 100}})
    with pytest.raises(ScenarioError, match=r"cable.max_span_m must be a finite number > 0"):
        Scenario.from_dict({"line": {"kind": "cable"}, "cable": {"max_span_m": -1}})
    with pytest.raises(ScenarioError, match=r"unknown key cable.span"):
        Scenario.from_dict({"line": {"kind": "cable"}, "cable": {"span": 1}})
    sc = Scenario.from_dict({"line": {"kind": "cable", "clearance": [1, 9], "start_height": 5},
                             "cable": {"support_height_m": [3, 9], "objective": "supports"}})
    assert sc.line.cable.clearance_m == (1.0, 9.0) and sc.line.cable.start_height_m == 5.0
    assert Scenario.from_dict(sc.to_dict()).line == sc.line
