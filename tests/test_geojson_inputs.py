"""route.geojson: 7 decimals, the summary's points in lon/lat, the inputs as properties.

Read back with json and with GDAL through pyogrio (its GeoJSON driver); lon/lat checked
against pyproj's own transform of the summary's map coordinates.
"""

from __future__ import annotations

import dataclasses
import json
import re

import numpy as np
import pyogrio.raw
import pyproj
import pytest

from fallway.export import write_route_geojson
from fallway.params import Limits, LineSpec, Mover

from test_stations import _route


@pytest.fixture
def route():
    r = _route(Mover(mu=0.2, drag=0.004, v0=3.0, normal="full", max_speed=30.0))
    p = r.line
    summary = dataclasses.replace(r.summary, start_xyz=p[0].tolist(), end_xyz=p[-1].tolist(),
                                  via_xy=[p[20, :2].tolist()], start_given_xy=p[0, :2].tolist(),
                                  end_given_xy=(p[-1, :2] + [0.4, -0.3]).tolist())
    return dataclasses.replace(r, summary=summary, limits=Limits(min_grade=0.05, max_grade=0.9, max_lateral_g=0.5),
                               line_spec=LineSpec(kind="raised", clearance_m=(0.5, 12.0)))


def test_points_in_lon_lat_and_seven_decimals(route, tmp_path):
    path = write_route_geojson(route, tmp_path / "route.geojson", "EPSG:32633")
    text = path.read_text()
    doc = json.loads(text)
    props = doc["features"][0]["properties"]
    tr = pyproj.Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True)
    s = route.summary
    lon, lat = tr.transform(s.start_xyz[0], s.start_xyz[1])
    assert props["start_lon_lat_z"][:2] == pytest.approx([lon, lat], abs=5.1e-8)
    assert props["start_lon_lat_z"][2] == pytest.approx(s.start_xyz[2], abs=5e-4)  # millimetres
    lon, lat = tr.transform(s.end_xyz[0], s.end_xyz[1])
    assert props["end_lon_lat_z"][:2] == pytest.approx([lon, lat], abs=5.1e-8)
    lon, lat = tr.transform(*s.via_xy[0])
    assert props["via_lon_lat"] == [pytest.approx([lon, lat], abs=5.1e-8)]
    lon, lat = tr.transform(*s.end_given_xy)
    assert props["end_given_lon_lat"] == pytest.approx([lon, lat], abs=5.1e-8)
    # no map coordinates left in a WGS 84 file
    for key in ("start_xyz", "end_xyz", "via_xy", "start_given_xy", "end_given_xy"):
        assert key not in props
    assert props["source_crs"] == "EPSG:32633"
    # every coordinate of the line: at most 7 decimals of a degree, 3 of a metre
    coords = doc["features"][0]["geometry"]["coordinates"]
    for lon, lat, z in coords:
        assert round(lon, 7) == lon and round(lat, 7) == lat and round(z, 3) == z
    assert not re.search(r"\d\.\d{8,}", json.dumps(coords))
    # and they are the line to within the rounding (0.5e-7 deg)
    lon, lat = tr.transform(route.line[:, 0], route.line[:, 1])
    np.testing.assert_allclose(np.array(coords)[:, 0], lon, rtol=0, atol=5.1e-8)
    np.testing.assert_allclose(np.array(coords)[:, 1], lat, rtol=0, atol=5.1e-8)


def test_inputs_are_properties_gdal_reads(route, tmp_path):
    path = write_route_geojson(route, tmp_path / "route.geojson", "EPSG:32633")
    meta, _, geom, fields = pyogrio.raw.read(path)
    got = {name: col[0] for name, col in zip(meta["fields"], fields)}
    m, lim = route.mover, route.limits
    assert got["mover_mu"] == m.mu and got["mover_drag"] == m.drag and got["mover_max_speed"] == m.max_speed
    assert got["mover_normal"] == "full" and got["mover_v0"] == m.v0
    assert got["limits_min_grade"] == lim.min_grade and got["limits_max_grade"] == lim.max_grade
    assert got["limits_max_lateral_g"] == 0.5
    assert got["line_spec_kind"] == "raised"
    assert got["search_neighbours"] == route.search.neighbours
    assert got["travel_time_s"] == pytest.approx(route.summary.travel_time_s, rel=1e-15)
    # "no limit" is null in the file, not a number
    doc = json.loads(path.read_text())
    assert doc["features"][0]["properties"]["limits_max_normal_g"] is None
