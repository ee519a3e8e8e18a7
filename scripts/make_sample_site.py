"""Generate the invented sample site in ``sample_terrain/`` (deterministic).

The site is synthetic: a quarry bench cut into a hillside above a valley floor, with
gullies, a spur, a switchback haul road, a site building and a protected stand of
trees.  Run from the repository root::

    python scripts/make_sample_site.py            # writes sample_terrain/*
    python scripts/make_sample_site.py --out DIR  # somewhere else

Outputs: ``site.tif`` (float32, deflate-compressed GeoTIFF, 400 x 300 cells at 2 m,
EPSG:32633), ``keepout.geojson`` and ``lines.geojson`` (RFC 7946: WGS 84 lon/lat,
transformed with pyproj) and ``scenario.toml`` (loading and discharge points, the demo's
mover and limits).  ``sample_terrain/README.md`` is written by hand.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import numpy as np

SEED = 20261202
CRS = "EPSG:32633"           # UTM zone 33 N; the place itself is invented
X0, Y0 = 448_000.0, 5_212_000.0   # south-west corner of the grid (m)
CELL_M = 2.0
COLS, ROWS = 400, 300        # 800 m east-west, 600 m north-south

# points in local site metres (u east, v north from the south-west corner)
LOADING_UV = (321.0, 467.0)      # (a cell centre) at the lip of the quarry bench, by its south-east corner
DISCHARGE_UV = (561.0, 151.0)    # (a cell centre) hopper on the valley floor (the cable line's points)
# the demo chute's points: an open ground chute can neither follow the bench's 1:0.5 fill face
# (its toe is a sag no open bed carries at speed) nor cross a 4-8 m gully without climbing out
# of it, so it starts at the foot of the fill, fed from the bench, and ends at a hopper at the
# foot of the hillside west of the middle gully
CHUTE_START_UV = (321.0, 455.0)  # (a cell centre) below the loading point, at the foot of the bench fill
CHUTE_END_UV = (395.0, 160.0)    # (off the cell centres) chute hopper at the foot of the hillside
BENCH_Z = 412.0
BENCH_BOX = (140.0, 470.0, 330.0, 570.0)   # u0, v0, u1, v1
# haul road centreline (u, v), graded evenly: leaves the bench lip eastwards, hairpins at
# the east end of the hillside, and comes down south-west to the hopper
ROAD_UV = np.array([(346.0, 458.0), (560.0, 440.0), (755.0, 405.0), (770.0, 375.0), (740.0, 345.0),
                    (600.0, 250.0), (575.0, 190.0), DISCHARGE_UV])
ROAD_HALF_WIDTH_M = 4.0
BUILDING_UV = [(422.0, 288.0), (476.0, 303.0), (469.0, 328.0), (415.0, 313.0)]   # on the direct line
TREES_CENTRE_UV, TREES_RADII = (328.0, 352.0), (40.0, 28.0)   # across the fall line below the bench


def _smoothstep(t):
    t = np.clip(t, 0.0, 1.0)
    return t * t * (3 - 2 * t)


def _softplus(t):
    return np.logaddexp(0.0, t)


def natural_ground(u, v, rng):
    """Hillside rising north at ~0.3 above a valley floor falling gently east."""
    from scipy.ndimage import gaussian_filter

    valley = 300.0 - 0.012 * (u - 400.0) + 0.002 * (v - 80.0)
    hill = 0.30 * 25.0 * _softplus((v - 140.0) / 25.0)
    # spur: a rounded ridge running down the slope east of the direct line
    spur = 9.0 * np.exp(-((u - 600.0 - 0.15 * (v - 300.0)) / 35.0) ** 2) * _smoothstep((v - 170.0) / 80.0)
    # gullies: meandering V-shaped channels down the hillside, fading out on the floor
    gullies = np.zeros_like(u)
    for u0, amp, wl, depth, half in ((150.0, 12.0, 140.0, 6.0, 14.0), (480.0, 18.0, 170.0, 8.0, 16.0),
                                     (690.0, 10.0, 120.0, 5.0, 12.0)):
        centre = u0 + amp * np.sin(v / wl * 2 * np.pi)
        d = np.abs(u - centre)
        gullies -= depth * np.clip(1 - d / half, 0, None) ** 1.5 * _smoothstep((v - 110.0) / 60.0)
    # the stream on the valley floor
    stream = -2.5 * np.exp(-((v - 70.0 - 10.0 * np.sin(u / 90.0)) / 8.0) ** 2)
    noise = gaussian_filter(rng.standard_normal(u.shape), sigma=4.0, mode="reflect")
    noise *= 0.5 / noise.std()
    return valley + hill + spur + gullies + stream + noise


def add_bench(u, v, z):
    """Cut (and fill) the flat quarry bench, with steep 1:0.5 faces blended over 8 m."""
    u0, v0, u1, v1 = BENCH_BOX
    du = np.maximum(np.maximum(u0 - u, u - u1), 0.0)
    dv = np.maximum(np.maximum(v0 - v, v - v1), 0.0)
    w = 1.0 - _smoothstep(np.hypot(du, dv) / 8.0)
    return w * BENCH_Z + (1 - w) * z


def add_road(u, v, z):
    """Grade the haul road: flat across, falling evenly along the centreline."""
    seg = np.diff(ROAD_UV, axis=0)
    seg_len = np.hypot(seg[:, 0], seg[:, 1])
    station = np.concatenate([[0.0], np.cumsum(seg_len)])
    best_d = np.full(u.shape, np.inf)
    best_s = np.zeros(u.shape)
    for k in range(len(seg)):
        pu, pv = u - ROAD_UV[k, 0], v - ROAD_UV[k, 1]
        t = np.clip((pu * seg[k, 0] + pv * seg[k, 1]) / seg_len[k] ** 2, 0.0, 1.0)
        d = np.hypot(pu - t * seg[k, 0], pv - t * seg[k, 1])
        closer = d < best_d
        best_d[closer] = d[closer]
        best_s[closer] = station[k] + t[closer] * seg_len[k]
    # design heights: the ground at the bench lip where it starts, the valley floor at the hopper
    def ground(uv):
        return z[ROWS - 1 - int(uv[1] / CELL_M), int(uv[0] / CELL_M)]

    z_start, z_end = ground(ROAD_UV[0]), ground(ROAD_UV[-1])
    road_z = z_start + (z_end - z_start) * best_s / station[-1]
    w = 1.0 - _smoothstep((best_d - ROAD_HALF_WIDTH_M) / 6.0)
    return w * road_z + (1 - w) * z, float((z_start - z_end) / station[-1])


def add_building_pad(u, v, z):
    """A level pad under the building (the building itself is a keep-out, not terrain)."""
    from shapely import contains_xy
    from shapely.geometry import Polygon

    pad = Polygon(BUILDING_UV).buffer(6.0)
    inside = contains_xy(pad, u, v)
    level = float(np.mean(z[inside]))
    from scipy.ndimage import gaussian_filter

    w = gaussian_filter(inside.astype(float), sigma=2.0)
    return w * level + (1 - w) * z


def build_grid(seed: int = SEED):
    rng = np.random.default_rng(seed)
    cols = np.arange(COLS)
    rows = np.arange(ROWS)
    u = (cols[None, :] + 0.5) * CELL_M + np.zeros((ROWS, 1))
    v = (ROWS - rows[:, None] - 0.5) * CELL_M + np.zeros((1, COLS))   # row 0 = north
    z = natural_ground(u, v, rng)
    z = add_bench(u, v, z)
    z = add_building_pad(u, v, z)
    z, road_grade = add_road(u, v, z)
    return z.astype(np.float32), road_grade


SCENARIO = """\
# The demo scenario of the invented sample site (written by scripts/make_sample_site.py).
# An open bulk-material chute on the ground, from the foot of the quarry bench fill (fed
# from the bench) down the hillside to a hopper at its foot, kept clear of the site building
# and the protected trees.  Every value below is an assumption for this invented site, with
# where it comes from; check each against the material and the liner before any real use.
dem = "site.tif"
keepout = "keepout.geojson"

[points]
start = [{lx:.1f}, {ly:.1f}]   # loading point (EPSG:32633), foot of the bench fill
end = [{dx:.1f}, {dy:.1f}]     # chute hopper, foot of the hillside

[mover]
mu = 0.25          # dry bulk material on a lined chute: assumed (wall friction varies widely
                   # with material, moisture and liner wear; common practice is to measure it,
                   # ASTM D6128) -- the envelope below checks 0.2-0.3
drag = 0.0         # no air drag on a bulk stream at these speeds (assumed)
v0 = 0.0           # the material leaves the feeder at rest (conservative: a feed drop would
                   # add speed)
normal = "full"
max_speed = 12.0   # m/s: assumed cap against liner wear and degradation of the material
                   # (common practice keeps long chutes to roughly 10-15 m/s; recalled, no source)

[limits]
min_grade = 0.0    # the chute never rises (common practice: bulk material does not climb)
max_grade = 0.7    # at most 35 deg (assumed): a steeper run would be a drop chute, not this line
max_step_turn_deg = 45.0   # a search limit only: steers the lattice towards gentle lines
max_lateral_g = 1.0        # bends tied to speed, R >= v^2 / g: the material's surface tilts
                           # up to 45 deg in the trough at the limit (assumed)
max_normal_g = 3.0         # sags and bends: at most 3 g from bed and walls (assumed, liner impact)
allow_liftoff = false      # an open trough: no crest may lift the material off its bed

[search]
neighbours = 16
refine = true

[envelope]
# the friction range to check the line against (assumed: +-0.05 around mu).  At 0.3 no line
# reaches this hopper (gravity-normal friction: 89 m of drop against 0.3 x 304 m of plan,
# the shortest), and at 0.2 this line overspeeds: a chute built on it needs its friction
# held near 0.25 (liner, moisture), or a line found with --robust across the range that matters
mu_range = [0.2, 0.3]
"""


def _to_lonlat(coords_uv):
    from pyproj import Transformer

    tr = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    uv = np.asarray(coords_uv, dtype=float)
    lon, lat = tr.transform(X0 + uv[:, 0], Y0 + uv[:, 1])
    return [[round(float(a), 8), round(float(b), 8)] for a, b in zip(lon, lat)]   # ~1 mm


def _ellipse(centre, radii, n=24):
    a = np.linspace(0, 2 * np.pi, n, endpoint=False)
    return [(centre[0] + radii[0] * np.cos(t), centre[1] + radii[1] * np.sin(t)) for t in a]


def _polygon_feature(name, kind, ring_uv):
    from shapely.geometry import Polygon
    from shapely.geometry.polygon import orient

    ring = list(orient(Polygon(ring_uv), sign=1.0).exterior.coords)   # RFC 7946: CCW exterior
    return {"type": "Feature", "properties": {"name": name, "kind": kind},
            "geometry": {"type": "Polygon", "coordinates": [_to_lonlat(ring)]}}


def _line_feature(name, note, uv):
    return {"type": "Feature", "properties": {"name": name, "note": note},
            "geometry": {"type": "LineString", "coordinates": _to_lonlat(uv)}}


def candidate_lines():
    """Hand-drawn chute alignments between the demo chute's points (compared with the optimum)."""
    la, di = CHUTE_START_UV, CHUTE_END_UV
    return [
        ("direct", "straight from the bench foot to the hopper, through the protected trees",
         [la, di]),
        ("east of the trees", "down past the east side of the trees, with two sharp corners",
         [la, (378.0, 380.0), (378.0, 320.0), di]),
        ("west of the trees", "round the west side of the trees on a flatter traverse",
         [la, (300.0, 405.0), (280.0, 330.0), (330.0, 250.0), di]),
    ]


def write_site(out: Path, seed: int = SEED) -> dict:
    import rasterio
    from affine import Affine

    out.mkdir(parents=True, exist_ok=True)
    z, road_grade = build_grid(seed)
    transform = Affine(CELL_M, 0.0, X0, 0.0, -CELL_M, Y0 + ROWS * CELL_M)
    with rasterio.open(out / "site.tif", "w", driver="GTiff", width=COLS, height=ROWS, count=1,
                       dtype="float32", crs=CRS, transform=transform, nodata=-9999.0,
                       compress="deflate", predictor=3, tiled=True, blockxsize=256, blockysize=256) as ds:
        ds.write(z, 1)
        ds.update_tags(SOURCE="synthetic: fallway scripts/make_sample_site.py", SEED=str(seed))

    keepout = {"type": "FeatureCollection", "features": [
        _polygon_feature("site building", "building", BUILDING_UV),
        _polygon_feature("protected trees", "trees", _ellipse(TREES_CENTRE_UV, TREES_RADII)),
    ]}
    (out / "keepout.geojson").write_text(json.dumps(keepout, indent=1) + "\n")
    lines = {"type": "FeatureCollection",
             "features": [_line_feature(n, note, uv) for n, note, uv in candidate_lines()]}
    (out / "lines.geojson").write_text(json.dumps(lines, indent=1) + "\n")

    lx, ly = X0 + CHUTE_START_UV[0], Y0 + CHUTE_START_UV[1]
    dx, dy = X0 + CHUTE_END_UV[0], Y0 + CHUTE_END_UV[1]
    (out / "scenario.toml").write_text(SCENARIO.format(lx=lx, ly=ly, dx=dx, dy=dy))

    def height(uv):
        r = int((ROWS * CELL_M - uv[1]) / CELL_M)
        c = int(uv[0] / CELL_M)
        return float(z[r, c])

    info = {
        "loading": (X0 + LOADING_UV[0], Y0 + LOADING_UV[1], height(LOADING_UV)),
        "discharge": (X0 + DISCHARGE_UV[0], Y0 + DISCHARGE_UV[1], height(DISCHARGE_UV)),
        "chute_start": (X0 + CHUTE_START_UV[0], Y0 + CHUTE_START_UV[1], height(CHUTE_START_UV)),
        "chute_end": (X0 + CHUTE_END_UV[0], Y0 + CHUTE_END_UV[1], height(CHUTE_END_UV)),
        "road_grade": road_grade,
        "bounds": (X0, Y0, X0 + COLS * CELL_M, Y0 + ROWS * CELL_M),
        "size_bytes": (out / "site.tif").stat().st_size,
    }
    return info


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=Path(__file__).resolve().parents[1] / "sample_terrain")
    ap.add_argument("--seed", type=int, default=SEED)
    args = ap.parse_args(argv)
    info = write_site(args.out, args.seed)
    lx, ly, lz = info["loading"]
    dx, dy, dz = info["discharge"]
    print(f"wrote {args.out}: site.tif {info['size_bytes'] / 1e3:.0f} kB")
    print(f"loading   ({lx:.1f}, {ly:.1f}) z = {lz:.2f} m")
    print(f"discharge ({dx:.1f}, {dy:.1f}) z = {dz:.2f} m")
    print(f"drop {lz - dz:.2f} m over {np.hypot(lx - dx, ly - dy):.1f} m plan; "
          f"haul road grade {info['road_grade']:.3f}")
    for name, key in (("chute start", "chute_start"), ("chute end", "chute_end")):
        x, y, z = info[key]
        print(f"{name:<11} ({x:.1f}, {y:.1f}) z = {z:.2f} m (nearest cell)")


if __name__ == "__main__":
    main()
