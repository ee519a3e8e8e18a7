"""Plots: the artists are there and in the right place; files are written (not pixels)."""

from __future__ import annotations

import dataclasses

import math

import numpy as np
import pytest
import shapely
from hypothesis import given, settings, strategies as st

from fallway.physics import Mover, Profile
from fallway.plot import nice_step, plot_map, plot_profile, save_figure
from fallway.results import ReachMap

# the route builders live beside the export tests (same synthetic site)
from test_export import make_route, make_terrain

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG spec (ISO/IEC 15948), section 5.2


def by_gid(artists, gid):
    return [a for a in artists if a.get_gid() == gid]


def cone_reach(terrain, start, speed=5.0, radius=80.0):
    """Arrival time = distance / speed inside a disc, unreachable outside."""
    tr = terrain.transform
    rows, cols = terrain.shape
    xs = tr.c + (np.arange(cols) + 0.5) * tr.a
    ys = tr.f + (np.arange(rows) + 0.5) * tr.e
    xx, yy = np.meshgrid(xs, ys)
    dist = np.hypot(xx - start[0], yy - start[1])
    t = np.where(dist <= radius, dist / speed, np.nan)
    return ReachMap(t, np.where(np.isfinite(t), speed, np.nan), tr, terrain.crs, start, {})


@pytest.fixture
def terrain():
    return make_terrain()


def test_map_has_lines_keepout_reach_and_furniture(terrain):
    route = make_route(terrain)
    x0, y0 = terrain.cell_center(10, 20)
    keep = shapely.Polygon([(x0 - 20, y0 - 10), (x0 + 15, y0 - 10), (x0 + 15, y0 + 12), (x0 - 20, y0 + 12)],
                           holes=[[(x0 - 5, y0 - 2), (x0 + 2, y0 - 2), (x0 + 2, y0 + 3)]])
    start = terrain.cell_center(24, 20)
    reach = cone_reach(terrain, start)
    ax = plot_map(terrain, route, reach=reach, keepout=shapely.MultiPolygon([keep]))

    (line,) = by_gid(ax.lines, "fallway-line")
    np.testing.assert_array_equal(line.get_xydata(), route.line[:, :2])
    (lat,) = by_gid(ax.lines, "fallway-lattice")
    np.testing.assert_array_equal(lat.get_xydata(), route.lattice.points[:, :2])
    assert by_gid(ax.lines, "fallway-start")[0].get_xydata()[0] == pytest.approx(route.line[0, :2])
    assert by_gid(ax.lines, "fallway-end")[0].get_xydata()[0] == pytest.approx(route.line[-1, :2])
    (img,) = by_gid(ax.images, "fallway-hillshade")
    left, bottom, right, top = terrain.bounds
    assert tuple(img.get_extent()) == pytest.approx((left, right, bottom, top))
    (patch,) = by_gid(ax.patches, "fallway-keepout")
    # the patch path holds the exterior and the hole: shoelace areas, exterior minus hole = shapely's area
    verts = patch.get_path().vertices
    codes = patch.get_path().codes
    starts = list(np.flatnonzero(codes == 1)) + [len(verts)]  # 1 = MOVETO: a new ring
    areas = []
    for a, b in zip(starts[:-1], starts[1:]):
        ring = verts[a:b]
        areas.append(abs(0.5 * (np.dot(ring[:-1, 0], ring[1:, 1]) - np.dot(ring[1:, 0], ring[:-1, 1]))))
    assert len(areas) == 2
    assert max(areas) - min(areas) == pytest.approx(keep.area, rel=1e-12)
    assert by_gid(ax.artists, "fallway-scalebar") and by_gid(ax.texts, "fallway-north")


def _contour_xy(cs):
    return np.concatenate([p.vertices for p in cs.get_paths() if len(p.vertices)])


def test_isochrones_are_circles_around_the_start(terrain):
    # on a cone t = r / v the isochrone of level T is the circle r = v T (geometry);
    # the stall frontier is the edge of the reachable disc (within a cell of r = 80 m)
    start = terrain.cell_center(24, 20)
    reach = cone_reach(terrain, start, speed=5.0, radius=80.0)
    ax = plot_map(terrain, reach=reach)
    (iso,) = by_gid(ax.collections, "fallway-isochrones")
    levels = list(iso.levels)
    assert levels == [2.0, 4.0, 6.0, 8.0, 10.0, 12.0, 14.0]  # 1-2-5 step below t_max = 16 s
    for level, path in zip(levels, iso.get_paths()):
        if len(path.vertices) == 0:
            continue
        r = np.hypot(path.vertices[:, 0] - start[0], path.vertices[:, 1] - start[1])
        # marching squares on a cone: linear interpolation error below a tenth of a cell
        np.testing.assert_allclose(r, 5.0 * level, atol=0.5)
    (front,) = by_gid(ax.collections, "fallway-frontier")
    r = np.hypot(*(_contour_xy(front) - np.array(start)).T)
    assert np.all(np.abs(r - 80.0) <= terrain.cell_size)
    labels = ax.get_legend_handles_labels()[1]
    assert "isochrones every 2 s" in labels and "edge of the reachable area" in labels


def test_profile_plot_ground_line_speed_time_and_flags(terrain):
    mover = Mover(mu=0.44, v0=7.0, normal="gravity", stall_speed=0.3, max_speed=6.5)
    r = make_route(terrain, mover, raised=4.0)
    p = r.profile
    assert p.stalled_at_m is not None
    p = Profile(p.points, p.station_m, p.speed_m_s, p.time_s, p.grade, p.normal_ratio, p.stalled_at_m,
                np.array([p.station_m[3]]), np.array([]), p.departing_speed_m_s)
    r = dataclasses.replace(r, profile=p, mover=mover)
    ax = plot_profile(r, terrain)
    fig = ax.figure
    assert len(fig.axes) == 3  # heights, speed, time
    (line,) = by_gid(ax.lines, "fallway-line-z")
    np.testing.assert_array_equal(line.get_xdata(), p.station_m)
    np.testing.assert_array_equal(line.get_ydata(), r.line[:, 2])
    (ground,) = by_gid(ax.lines, "fallway-ground")
    # the ground is the smooth surface, as in profile.csv: scipy's interpolating bicubic
    # spline (RectBivariateSpline kx = ky = 3, s = 0) of the one-tile grid
    from scipy.interpolate import RectBivariateSpline

    tr = terrain.transform
    spline = RectBivariateSpline(np.arange(terrain.shape[0], dtype=float), np.arange(terrain.shape[1], dtype=float),
                                 terrain.z, s=0)
    zg = spline.ev((r.line[:, 1] - tr.f) / tr.e - 0.5, (r.line[:, 0] - tr.c) / tr.a - 0.5)
    np.testing.assert_allclose(ground.get_ydata(), zg, rtol=0, atol=1e-6)
    speed = [ln for a in fig.axes for ln in by_gid(a.lines, "fallway-speed")]
    time = [ln for a in fig.axes for ln in by_gid(a.lines, "fallway-time")]
    assert len(speed) == 1 and len(time) == 1
    (sup,) = by_gid(ax.collections, "fallway-supports")
    segs = sup.get_segments()
    # a raised line: ticks from ground up to the line, their tallest one = the 4 m clearance
    tallest = max(abs(s[1, 1] - s[0, 1]) for s in segs)
    assert tallest == pytest.approx(4.0, abs=0.05)
    (stall,) = by_gid(ax.patches, "fallway-stall")
    xs = np.array([stall.get_x(), stall.get_x() + stall.get_width()])  # axvspan: a Rectangle (mpl >= 3.9)
    assert xs.min() == pytest.approx(p.stalled_at_m) and xs.max() == pytest.approx(p.station_m[-1])
    assert by_gid(ax.patches, "fallway-overspeed")  # the 7 m/s entry is above 6.5 m/s
    (lift,) = by_gid(ax.lines, "fallway-liftoff")
    assert lift.get_xdata()[0] == pytest.approx(p.station_m[3])


def test_profile_plot_on_ground_line_has_no_supports(terrain):
    r = make_route(terrain)
    ax = plot_profile(r, terrain)
    assert not by_gid(ax.collections, "fallway-supports")
    assert not by_gid(ax.patches, "fallway-stall")


def test_plot_into_given_axes(terrain):
    from matplotlib.figure import Figure

    fig = Figure()
    a1, a2 = fig.subplots(1, 2)
    r = make_route(terrain)
    assert plot_map(terrain, r, ax=a1) is a1
    assert plot_profile(r, terrain, ax=a2) is a2


def test_save_figure_png_and_svg(terrain, tmp_path):
    ax = plot_map(terrain, make_route(terrain))
    paths = save_figure(ax.figure, tmp_path / "map.png")
    assert [p.name for p in paths] == ["map.png", "map.svg"]
    png = (tmp_path / "map.png").read_bytes()
    assert png.startswith(PNG_SIGNATURE) and png[12:16] == b"IHDR"
    svg = (tmp_path / "map.svg").read_text(encoding="utf-8")
    assert svg.lstrip().startswith("<?xml") and "<svg" in svg
    assert sorted(p.name for p in tmp_path.iterdir()) == ["map.png", "map.svg"]  # no temp files left
    # no timestamps: the same inputs drawn again give the same bytes (an Axes is accepted too)
    save_figure(plot_map(terrain, make_route(terrain)), tmp_path / "again")
    assert (tmp_path / "again.png").read_bytes() == png


@given(st.floats(1e-3, 1e7))
@settings(max_examples=100, deadline=None)
def test_nice_step_is_the_smallest_round_step(span):
    # property: a 1-2-5 series value, giving at most 5 parts; the next smaller value gives more
    step = nice_step(span, 5)
    mantissa = step / 10 ** math.floor(math.log10(step) + 1e-12)
    assert min(abs(mantissa - m) for m in (1.0, 2.0, 5.0)) < 1e-9
    assert span / step <= 5 * (1 + 1e-6)
    smaller = {1.0: 0.5, 2.0: 0.5, 5.0: 0.4}[round(mantissa)] * step
    assert span / smaller > 5 * (1 - 1e-6)


def test_large_grid_hillshade_is_thinned_on_cell_centres():
    from affine import Affine

    from fallway.terrain import Terrain

    rows, cols = 3300, 8  # long side above the 1600-pixel cap: every 3rd cell is drawn
    z = np.add.outer(np.arange(rows) * 0.5, np.arange(cols) * 0.1)
    t = Terrain.from_array(z, Affine(2.0, 0, 1000.0, 0, -2.0, 9000.0), "EPSG:32633")
    ax = plot_map(t)
    (img,) = by_gid(ax.images, "fallway-hillshade")
    arr = img.get_array()
    assert arr.shape[:2] == (1100, 3)
    x_left, x_right, y_bottom, y_top = img.get_extent()
    # pixel i is centred on the cell it samples (cell 3 i): same x as Terrain.cell_center
    px = (x_right - x_left) / arr.shape[1]
    for i in range(arr.shape[1]):
        assert x_left + (i + 0.5) * px == pytest.approx(t.cell_center(0, 3 * i)[0])
    py = (y_top - y_bottom) / arr.shape[0]
    assert y_top - 0.5 * py == pytest.approx(t.cell_center(0, 0)[1])
    assert [float(v) for v in ax.get_xlim()] == [1000.0, 1016.0]


def test_keepout_in_lonlat_is_drawn_in_map_coordinates(terrain):
    import pyproj

    from fallway.keepout import Keepout

    # a keep-out given in WGS 84 (as a lon/lat GeoJSON would be) lands where pyproj puts it
    x0, y0 = terrain.cell_center(20, 20)
    to_ll = pyproj.Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True)
    ring = [(x0 - 15, y0 - 15), (x0 + 15, y0 - 15), (x0 + 15, y0 + 15), (x0 - 15, y0 + 15)]
    ll = shapely.Polygon([to_ll.transform(x, y) for x, y in ring])
    ax = plot_map(terrain, keepout=Keepout(ll, "EPSG:4326"))
    (patch,) = by_gid(ax.patches, "fallway-keepout")
    verts = patch.get_path().vertices
    for x, y in ring:
        assert np.min(np.hypot(verts[:, 0] - x, verts[:, 1] - y)) < 0.01  # within 1 cm


# --------------------------------------------------------------------------------------
# the site map on real open data: the SRTM 3" tile shipped with matplotlib
# --------------------------------------------------------------------------------------

def _dms(label):
    """``84°13'30"W`` -> -84.225 (degrees, minutes, seconds; W and S negative)."""
    import re

    m = re.fullmatch(r"(\d+)°(?:(\d+)')?(?:(\d+)\")?([NSEW])", label)
    assert m, label
    v = int(m.group(1)) + int(m.group(2) or 0) / 60 + int(m.group(3) or 0) / 3600
    return -v if m.group(4) in "WS" else v


@pytest.fixture(scope="module")
def srtm_route(tmp_path_factory):
    from affine import Affine
    from matplotlib import cbook
    import pyproj

    from conftest import write_geotiff
    from fallway.routing import find_route
    from fallway.terrain import load_terrain

    d = np.load(cbook.get_sample_data("jacksboro_fault_dem.npz", asfileobj=False))
    z = np.asarray(d["elevation"], dtype=np.float32)
    t = Affine(float(d["dx"]), 0, float(d["xmin"]), 0, -float(d["dy"]), float(d["ymin"]))  # row 0 north
    path = write_geotiff(tmp_path_factory.mktemp("srtm") / "srtm.tif", z, t, "EPSG:4326")
    terrain = load_terrain(path)  # reprojected to its UTM zone (16N)
    # the highest cell and one 15-22 cells away at least 150 m lower (as tests/test_cli.py)
    r0, c0 = np.unravel_index(np.argmax(z), z.shape)
    rr, cc = np.mgrid[0:z.shape[0], 0:z.shape[1]]
    dist = np.hypot(rr - r0, cc - c0)
    r1, c1 = np.argwhere((dist > 15) & (dist < 22) & (z < z[r0, c0] - 150))[0]
    to_xy = pyproj.Transformer.from_crs("EPSG:4326", terrain.crs, always_xy=True)
    a = to_xy.transform(*(t @ (c0 + 0.5, r0 + 0.5)))
    b = to_xy.transform(*(t @ (c1 + 0.5, r1 + 0.5)))
    return terrain, find_route(terrain, a, b, Mover(mu=0.05), refine=False)


def test_site_map_zooms_to_the_line_on_a_real_tile(srtm_route, tmp_path):
    import pyproj

    terrain, route = srtm_route
    ax = plot_map(terrain, route)
    (x0, x1), (y0, y1) = ax.get_xlim(), ax.get_ylim()
    line = route.line
    lx0, ly0 = line[:, :2].min(axis=0)
    lx1, ly1 = line[:, :2].max(axis=0)
    margin = 0.2 * max(lx1 - lx0, ly1 - ly0)  # the documented margin: a fifth of the larger side
    assert x0 <= lx0 - margin + 1e-6 and x1 >= lx1 + margin - 1e-6
    assert y0 <= ly0 - margin + 1e-6 and y1 >= ly1 + margin - 1e-6
    left, bottom, right, top = terrain.bounds
    assert (x1 - x0) * (y1 - y0) < 0.02 * (right - left) * (top - bottom)  # a 2 km line on a 30 km tile
    # the hillshade is drawn at the view, at the DEM's own resolution (not thinned)
    (img,) = by_gid(ax.images, "fallway-hillshade")
    e = img.get_extent()
    assert e[0] <= x0 and e[1] >= x1 and e[2] <= y0 and e[3] >= y1
    assert (e[1] - e[0]) / img.get_array().shape[1] == pytest.approx(terrain.cell_size)
    # the overview inset holds the whole DEM and outlines the view
    (inset,) = [a for a in ax.child_axes if a.get_gid() == "fallway-overview"]
    assert inset.get_xlim() == pytest.approx((left, right)) and inset.get_ylim() == pytest.approx((bottom, top))
    (box,) = by_gid(inset.patches, "fallway-overview-view")
    assert (box.get_x(), box.get_y()) == pytest.approx((x0, y0))
    # contours: one 1-2-5 interval, 8 to 20 of them over the view's relief (common practice: 10-20)
    (minor,) = by_gid(ax.collections, "fallway-contours")
    (major,) = by_gid(ax.collections, "fallway-contours-index")
    levels = np.sort(np.concatenate([minor.levels, major.levels]))
    step = float(np.diff(levels).min())
    assert np.allclose(np.diff(levels), step) and nice_step(step, 1) == step
    assert 8 <= (levels[-1] - levels[0]) / step + 1 <= 21
    assert np.allclose(np.mod(major.levels, 5 * step), 0)
    # graticule labels are lon/lat: pyproj puts each tick's map position on the labelled value
    to_ll = pyproj.Transformer.from_crs(terrain.crs, "EPSG:4326", always_xy=True)
    secs = [a for a in ax.child_axes if a.get_gid() == "fallway-graticule-labels"]
    top_ax, right_ax = secs
    lons = [(_dms(lab.get_text()), x) for lab, x in zip(top_ax.xaxis.get_ticklabels(), top_ax.get_xticks())]
    lats = [(_dms(lab.get_text()), y) for lab, y in zip(right_ax.yaxis.get_ticklabels(), right_ax.get_yticks())]
    assert len(lons) >= 2 and len(lats) >= 2
    for lon, x in lons:
        assert -85 < lon < -84  # the tile lies at 84-85 W, 36-37 N (its own xmin/ymin)
        assert to_ll.transform(x, y1)[0] == pytest.approx(lon, abs=0.1 / 3600)
    for lat, y in lats:
        assert 36 < lat < 37
        assert to_ll.transform(x1, y)[1] == pytest.approx(lat, abs=0.1 / 3600)
    # true north: meridian convergence in UTM, gamma = atan(tan(lon - lon0) sin(lat)) (Snyder 1987,
    # Map Projections - A Working Manual, eq. 8-19 to first order), lon0 = -87 in zone 16
    (arrow,) = by_gid(ax.texts, "fallway-north")
    (tx, ty), (sx, sy) = arrow.xy, arrow.xyann
    lon_c, lat_c = to_ll.transform(0.5 * (x0 + x1), 0.5 * (y0 + y1))
    gamma = math.degrees(math.atan(math.tan(math.radians(lon_c + 87.0)) * math.sin(math.radians(lat_c))))
    assert math.degrees(math.atan2(-(tx - sx), ty - sy)) == pytest.approx(gamma, abs=0.05)
    # save_figure takes the Axes plot_map returns
    assert [p.name for p in save_figure(ax, tmp_path / "site.png", formats=("png",))] == ["site.png"]
