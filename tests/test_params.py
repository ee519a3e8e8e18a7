"""Keep-out areas: reading (GeoJSON RFC 7946 lon/lat, GeoPackage), reprojection, rasterising."""

from __future__ import annotations

import json

import numpy as np
import pyogrio
import pyproj
import pytest
import shapely
from affine import Affine
from rasterio import features
from rasterio.crs import CRS

from fallway.errors import FallwayIOError, ParameterError
from fallway.lattice.search import lattice_line
from fallway.keepout import Keepout
from fallway.params import Limits
from fallway.physics import Mover
from fallway.terrain import Terrain

UTM = "EPSG:32633"
X0, Y0, CELL = 500_000.0, 4_000_000.0, 10.0


def slope_terrain(rows=30, cols=40):
    r, c = np.mgrid[0:rows, 0:cols]
    z = 400.0 - 3.0 * c - 0.5 * r
    return Terrain.from_array(z, Affine(CELL, 0, X0, 0, -CELL, Y0), CRS.from_string(UTM))


def utm_polygon():
    # off-grid coordinates so no edge lies exactly on a cell boundary
    return shapely.Polygon([(X0 + 153.3, Y0 - 57.1), (X0 + 247.9, Y0 - 61.7), (X0 + 251.2, Y0 - 243.4),
                            (X0 + 149.6, Y0 - 238.8)])


def write_lonlat_geojson(path, geom):
    tr = pyproj.Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
    ring = [list(tr.transform(x, y)) for x, y in geom.exterior.coords]
    fc = {"type": "FeatureCollection",  # RFC 7946: no "crs" member, WGS 84 lon/lat
          "features": [{"type": "Feature", "properties": {"name": "no-go"},
                        "geometry": {"type": "Polygon", "coordinates": [ring]}}]}
    path.write_text(json.dumps(fc))
    return path


def test_geojson_lonlat_is_reprojected_onto_the_lattice(tmp_path):
    t = slope_terrain()
    k = Keepout.from_file(write_lonlat_geojson(tmp_path / "nogo.geojson", utm_polygon()))
    assert k.crs == pyproj.CRS("EPSG:4326")
    mask = k.mask(t)
    # reference: the original UTM polygon rasterised directly (all_touched)
    want = features.rasterize([(utm_polygon(), 1)], out_shape=t.shape, transform=t.transform,
                              all_touched=True).astype(bool)
    assert mask.sum() > 100
    assert np.array_equal(mask, want)
    back = k.in_crs(UTM)
    assert back.geometry.symmetric_difference(utm_polygon()).area < 1.0  # m² of ~17 000 m², round trip


def test_all_touched_blocks_a_cell_touched_at_a_corner():
    t = slope_terrain(5, 5)
    tri = shapely.Polygon([(X0 + 9.0, Y0 - 9.0), (X0 + 11.0, Y0 - 9.0), (X0 + 9.0, Y0 - 11.0)])
    m = Keepout(tri, UTM).mask(t)
    assert m[0, 0] and m[0, 1] and m[1, 0] and not m[2, 2]


def test_geopackage_and_route_avoids_the_area(tmp_path):
    t = slope_terrain()
    path = tmp_path / "nogo.gpkg"
    pyogrio.raw.write(path, geometry=np.array([shapely.to_wkb(utm_polygon())], dtype=object), field_data=[],
                      fields=[], crs=UTM, driver="GPKG", geometry_type="Polygon")
    k = Keepout.from_file(path)
    assert k.crs == pyproj.CRS(UTM)
    start = t.cell_center(15, 0)
    end = t.cell_center(15, 39)
    free = lattice_line(t, start, end, Mover(mu=0.1))
    assert shapely.intersects(shapely.LineString(free.points[:, :2]), utm_polygon())  # the area is in the way
    ln = lattice_line(t, start, end, Mover(mu=0.1), keepout=k)
    assert not shapely.intersects(shapely.LineString(ln.points[:, :2]), utm_polygon())
    assert ln.time_s > free.time_s


def test_keepout_covering_the_end():
    t = slope_terrain()
    k = Keepout(utm_polygon(), UTM)
    # an end inside a no-go area moves to the nearest free cell centre, and says so
    end = t.cell_center(15, 20)
    assert utm_polygon().contains(shapely.Point(end))
    line = lattice_line(t, t.cell_center(15, 0), end, Mover(mu=0.1), keepout=k)
    moved = line.stats["end_moved_m"]
    assert moved > 0 and "keep-out" in line.stats["end_moved_why"]
    new_end = shapely.Point(line.points[-1, :2])
    assert not utm_polygon().contains(new_end)
    assert new_end.distance(shapely.Point(end)) == pytest.approx(moved, rel=1e-9)


def test_signed_distance_against_geometry():
    k = Keepout(shapely.box(0, 0, 10, 4), None)
    x = np.array([5.0, 5.0, 13.0, 13.0, 1.0])
    y = np.array([2.0, 7.0, 2.0, 8.0, 1.0])
    # analytic: inside -> minus the distance to the nearest side; outside (corner) -> hypot
    np.testing.assert_allclose(k.signed_distance(x, y), [-2.0, 3.0, 3.0, 5.0, -1.0])


def test_bad_inputs(tmp_path):
    with pytest.raises(FallwayIOError, match="not found"):
        Keepout.from_file(tmp_path / "missing.geojson")
    broken = tmp_path / "broken.geojson"
    broken.write_text("{ this is not json")
    with pytest.raises(FallwayIOError, match="cannot read"):
        Keepout.from_file(broken)
    empty = tmp_path / "empty.geojson"
    empty.write_text(json.dumps({"type": "FeatureCollection", "features": []}))
    with pytest.raises(ParameterError, match="no features|no geometry"):
        Keepout.from_file(empty)
    line = tmp_path / "line.geojson"
    line.write_text(json.dumps({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {}, "geometry": {"type": "LineString", "coordinates": [[15, 40], [15.1, 40.1]]}}]}))
    with pytest.raises(ParameterError, match="LineString"):
        Keepout.from_file(line)
    with pytest.raises(ParameterError, match="polygons"):
        Keepout(shapely.Point(0, 0), None)
    with pytest.raises(ParameterError, match="empty"):
        Keepout(shapely.Polygon(), None)


def test_limits_validation():
    with pytest.raises(ParameterError, match="max_step_turn_deg"):
        Limits(max_step_turn_deg=0.0)
    assert Limits(min_grade=-0.1, max_grade=0.3).max_grade == 0.3
