"""route.dxf (cad.py), read back with ezdxf, the DXF library that wrote it, and checked
against the route, its chainage table and its keep-out polygons (shapely's coordinates)."""

from __future__ import annotations

import dataclasses

import ezdxf
import numpy as np
import pytest
import shapely

from fallway.cad import DXF_LAYERS, chainage_label, write_route_dxf
from fallway.errors import ParameterError
from fallway.keepout import Keepout
from fallway.params import Mover
from fallway.stations import station_table

from test_stations import _route


@pytest.fixture
def route():
    r = _route(Mover(mu=0.2, v0=3.0, normal="full"))
    x, y = r.line[20, :2]
    holed = shapely.Polygon(shapely.box(x + 40, y - 10, x + 60, y + 10).exterior.coords,
                            [shapely.box(x + 45, y - 5, x + 50, y + 5).exterior.coords])
    keep = Keepout(shapely.MultiPolygon([holed, shapely.box(x - 80, y, x - 60, y + 15)]))
    return dataclasses.replace(r, keepout=keep)


def test_dxf_reads_back_with_the_route_vertices_and_layers(route, tmp_path):
    table = station_table(route, 25.0)
    path = write_route_dxf(route, tmp_path / "route.dxf", table, supports=[(*route.line[10], "S1")])
    doc = ezdxf.readfile(path)
    assert {layer.dxf.name for layer in doc.layers} >= set(DXF_LAYERS)
    msp = doc.modelspace()
    (poly,) = msp.query('POLYLINE[layer=="ROUTE"]')
    assert poly.is_3d_polyline
    xyz = np.array([v.dxf.location for v in poly.vertices])
    np.testing.assert_allclose(xyz, route.line, rtol=0, atol=1e-9)  # DXF keeps doubles in text: 1e-9 m
    # a tick at every station, centred on the line, across its plan direction
    ticks = msp.query('LINE[layer=="STATIONS"]')
    assert len(ticks) == len(table)
    mids = np.array([(np.array(t.dxf.start) + np.array(t.dxf.end)) / 2 for t in ticks])
    np.testing.assert_allclose(mids, np.column_stack([table.x_m, table.y_m, table.line_z_m]), atol=1e-9)
    labels = [t.dxf.text for t in msp.query('TEXT[layer=="STATION_TEXT"]')]
    assert [lb.split(" ")[0] for lb in labels] == [chainage_label(s) for s in table.station_m]
    assert "start" in labels[0] and "end" in labels[-1]
    # keep-out outlines: every ring of the polygons (the hole too), closed, same vertices
    rings = msp.query('POLYLINE[layer=="KEEPOUT"]')
    assert len(rings) == 3 and all(r.is_closed and r.is_2d_polyline for r in rings)
    want = [np.asarray(route.keepout.geometry.geoms[0].exterior.coords)[:, :2],
            np.asarray(route.keepout.geometry.geoms[0].interiors[0].coords)[:, :2],
            np.asarray(route.keepout.geometry.geoms[1].exterior.coords)[:, :2]]
    for r, w in zip(rings, want):
        xy = np.array([(v.dxf.location.x, v.dxf.location.y) for v in r.vertices])
        np.testing.assert_allclose(np.vstack([xy, xy[:1]]), w, atol=1e-9)  # shapely repeats the first point
    (pt,) = msp.query('POINT[layer=="SUPPORTS"]')
    np.testing.assert_allclose(pt.dxf.location, route.line[10], atol=1e-9)
    notes = " ".join(t.dxf.text for t in msp.query('TEXT[layer=="NOTES"]'))
    assert "EPSG:32633" in notes and "qualified engineer" in notes


def test_dxf_is_byte_identical_on_a_second_write(route, tmp_path):
    table = station_table(route, 10.0)
    a = write_route_dxf(route, tmp_path / "a.dxf", table).read_bytes()
    b = write_route_dxf(route, tmp_path / "b.dxf", table).read_bytes()
    assert a == b


@pytest.mark.slow
def test_dxf_is_byte_identical_in_another_process(route, tmp_path):
    # another Python process with another string hash seed (ezdxf's R2013 objects differed here)
    import os
    import subprocess
    import sys

    code = ("import sys, pathlib; sys.path.insert(0, sys.argv[2]); from test_stations import _route; "
            "from fallway.params import Mover; from fallway.stations import station_table; "
            "from fallway.cad import write_route_dxf; r = _route(Mover(mu=0.2, v0=3.0, normal='full')); "
            "write_route_dxf(r, pathlib.Path(sys.argv[1]), station_table(r, 10.0))")
    here = os.path.dirname(__file__)
    subprocess.run([sys.executable, "-c", code, str(tmp_path / "c.dxf"), here], check=True,
                   env={**os.environ, "PYTHONHASHSEED": "12345"})
    table = station_table(route, 10.0)
    assert (tmp_path / "c.dxf").read_bytes() == write_route_dxf(route.__class__(**{
        **{f: getattr(route, f) for f in route.__dataclass_fields__}, "keepout": None}), tmp_path / "d.dxf",
        table).read_bytes()


def test_chainage_labels_carry_over_to_the_next_kilometre():
    assert chainage_label(999.96) == "1+000.0"
    assert chainage_label(12_345.04) == "12+345.0"


def test_a_broken_line_is_refused(route, tmp_path):
    bad = dataclasses.replace(route, line=route.line[:1])
    with pytest.raises(ParameterError, match="to be drawn"):
        write_route_dxf(bad, tmp_path / "route.dxf", station_table(route, 10.0))
    assert not (tmp_path / "route.dxf").exists()
