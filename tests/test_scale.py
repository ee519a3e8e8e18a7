"""Large terrain: the corridor plan against the full grid, windowed reads, reach cut-offs."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fallway.errors import NoFeasibleLine, ParameterError, TerrainError
from fallway.lattice.search import lattice_line, reach
from fallway.params import Limits, SearchOptions
from fallway.physics import Mover
from fallway.routing import find_route
from fallway.routing import reach as reach_limited
from fallway.scale import _block_mean, search_memory_bytes
from fallway.terrain import Terrain

G = 9.80665


def plane(n=200, cell=1.0, sx=0.3, sy=0.0, x0=0.0, y0=0.0):
    """z falls by sx per metre eastwards and sy per metre southwards."""
    r, c = np.mgrid[0:n, 0:n].astype(float)
    z = 500.0 - sx * cell * c - sy * cell * (n - 1 - r) * -1.0
    return Terrain.from_array(z, (cell, 0, x0, 0, -cell, y0 + n * cell))


def hills(n=200, cell=2.0, seed=3):
    from scipy import ndimage

    rng = np.random.default_rng(seed)
    h = ndimage.gaussian_filter(rng.normal(size=(n, n)), 8.0)
    h *= 6.0 / np.abs(h).max()
    r, c = np.mgrid[0:n, 0:n].astype(float)
    z = 800.0 - 0.25 * cell * (r + c) + h
    return Terrain.from_array(z, (cell, 0, 0.0, 0, -cell, n * cell))


def test_straight_plane_line_matches_incline_formula():
    # constant acceleration on an incline with Coulomb friction (e.g. Meriam & Kraige,
    # Engineering Mechanics: Dynamics): a = g (sin b - mu cos b), t = sqrt(2 L / a);
    # with the gravity-normal model a = g (drop - mu plan) / length per segment
    t = plane(sx=0.3)
    mover = Mover(mu=0.1, normal="gravity")
    r = find_route(t, (10.5, 100.5), (190.5, 100.5), mover, refine=False,
                   search=SearchOptions(plan="corridor", coarse_factor=4, neighbours=8))
    L_plan = 180.0
    length = L_plan * math.hypot(1.0, 0.3)
    a = G * (0.3 * L_plan - 0.1 * L_plan) / length
    assert r.lattice.time_s == pytest.approx(math.sqrt(2 * length / a), rel=1e-9)
    assert r.summary.search_plan == "corridor"


def test_corridor_equals_full_grid_when_wide_enough():
    t = hills()
    mover = Mover(mu=0.0)
    s, e = (20.0, 380.0), (380.0, 20.0)
    full = lattice_line(t, s, e, mover, options=SearchOptions(neighbours=16))
    r = find_route(t, s, e, mover, refine=False,
                   search=SearchOptions(plan="corridor", coarse_factor=5, corridor_m=60.0, neighbours=16))
    assert r.lattice.time_s == pytest.approx(full.time_s, rel=1e-12)
    assert r.terrain.z.size <= t.z.size
    steps = r.summary.corridor["steps"]
    assert len(steps) >= 2 and all(st["feasible"] for st in steps)
    # nested corridors: the exact search never gets slower with more room
    times = [st["time_s"] for st in steps]
    assert all(b <= a + 1e-12 for a, b in zip(times, times[1:]))
    assert [st["corridor_m"] for st in steps] == [60.0 * 2 ** k for k in range(len(steps))]


def wall_case():
    t = plane(sx=0.3)
    keep = np.zeros(t.shape, bool)
    keep[60:141, 100] = True  # one cell thick: no 4 x 4 coarse block is all wall
    return t, keep


def test_widening_finds_the_detour_round_a_thin_wall():
    t, keep = wall_case()
    mover = Mover(mu=0.0)
    s, e = (20.5, 99.5), (180.5, 99.5)
    full = lattice_line(t, s, e, mover, keepout=keep, options=SearchOptions(neighbours=8))
    r = find_route(t, s, e, mover, keepout=keep, refine=False,
                   search=SearchOptions(plan="corridor", coarse_factor=4, corridor_m=8.0, max_widen=5, neighbours=8))
    steps = r.summary.corridor["steps"]
    feas = [st["feasible"] for st in steps]
    # the wall reaches 40 cells either side of the straight line: 8, 16, 32 m corridors
    # are cut, 64 m is the first one with a passage
    assert feas[:4] == [False, False, False, True]
    assert r.lattice.time_s == pytest.approx(full.time_s, rel=1e-12)
    # the route goes round the wall end (rows < 60 or > 140 of the full grid; the
    # lattice cells of the route are indices of the window it was searched on)
    rows, cols = np.rint(t.rowcol(r.lattice.points[:, 0], r.lattice.points[:, 1])).astype(int)
    assert rows.min() < 60 or rows.max() > 140
    # no cell centre of the line is a wall cell
    assert not keep[rows, cols].any()


def test_too_narrow_widening_reports_no_line():
    t, keep = wall_case()
    with pytest.raises(NoFeasibleLine, match="corridors up to 16 m"):
        find_route(t, (20.5, 99.5), (180.5, 99.5), Mover(mu=0.0), keepout=keep, refine=False,
                   search=SearchOptions(plan="corridor", coarse_factor=4, corridor_m=8.0, max_widen=1, neighbours=8))


def test_file_source_reads_only_windows_and_matches_memory(tmp_path):
    import rasterio
    from affine import Affine

    t = hills(n=240)
    path = tmp_path / "dem.tif"
    with rasterio.open(path, "w", driver="GTiff", width=240, height=240, count=1, dtype="float64",
                       crs="EPSG:32633", transform=Affine(2.0, 0, 0.0, 0, -2.0, 480.0), tiled=True,
                       blockxsize=64, blockysize=64) as dst:
        dst.write(t.z, 1)
    t = Terrain.from_array(t.z, (2.0, 0, 0.0, 0, -2.0, 480.0), "EPSG:32633")
    mover = Mover(mu=0.0)
    s, e = (150.0, 330.0), (330.0, 150.0)
    full = lattice_line(t, s, e, mover, options=SearchOptions(neighbours=16))
    kw = dict(refine=False, limits=Limits(allow_liftoff=True))  # lift-off is not the subject
    # the exact search through a window of the file equals the search on the whole grid
    ex = find_route(path, s, e, mover, search=SearchOptions(plan="full"), **kw)
    assert ex.lattice.time_s == pytest.approx(full.time_s, rel=1e-12)
    # so does the corridor answer when the corridor is wide enough (the coarse grid of
    # the file comes from GDAL's average resampling, not our block mean)
    a = find_route(path, s, e, mover, search=SearchOptions(plan="corridor", coarse_factor=4, corridor_m=100.0),
                   **kw)
    assert a.lattice.time_s == pytest.approx(full.time_s, rel=1e-12)
    # the search area is the points' box plus half its side, not the whole DEM
    assert a.terrain.z.size < 240 * 240


def test_exact_mode_equals_plain_search_and_memory_error():
    t = hills(n=120)
    mover = Mover(mu=0.0)
    s, e = (20.0, 220.0), (220.0, 20.0)
    r = find_route(t, s, e, mover, search=SearchOptions(plan="full", neighbours=16), refine=False)
    assert r.summary.search_plan == "full"
    assert r.lattice.time_s == pytest.approx(lattice_line(t, s, e, mover).time_s, rel=1e-12)
    with pytest.raises(TerrainError, match="coarsen"):
        find_route(t, s, e, mover, search=SearchOptions(plan="full"), memory_limit_bytes=1_000_000,
                   refine=False)


def test_memory_check_counts_only_the_corridor_cells():
    # the corridor's per-state arrays and labels are sized for its cells, so a budget
    # too small for the whole window still admits the corridor search
    t = hills()
    s, e = (20.0, 380.0), (380.0, 20.0)
    kw = dict(search=SearchOptions(plan="corridor", coarse_factor=5, corridor_m=30.0, max_widen=0), refine=False)
    r = find_route(t, s, e, Mover(mu=0.0), **kw)
    win = r.terrain.z.size
    cells = r.summary.corridor["steps"][0]["cells"]
    assert cells < 0.5 * win
    budget = (search_memory_bytes(win, active_cells=cells) + search_memory_bytes(win)) // 2
    r2 = find_route(t, s, e, Mover(mu=0.0), memory_limit_bytes=budget, **kw)
    assert r2.lattice.time_s == r.lattice.time_s
    with pytest.raises(TerrainError, match="the corridor search .* coarsen"):
        find_route(t, s, e, Mover(mu=0.0), memory_limit_bytes=search_memory_bytes(win, active_cells=cells) // 2, **kw)


def test_block_mean_of_a_plane_is_the_plane_at_block_centres():
    # the mean of a linear function over a symmetric block is its value at the centre
    r, c = np.mgrid[0:12, 0:12].astype(float)
    z = 3.0 * r - 2.0 * c
    z[0, 0] = np.nan
    m, _ = _block_mean(z, 3, None)
    rc, cc = np.mgrid[0:4, 0:4] * 3.0 + 1.0
    ref = 3.0 * rc - 2.0 * cc
    assert np.allclose(m[1:, :], ref[1:, :]) and np.allclose(m[0, 1:], ref[0, 1:])
    assert m[0, 0] == pytest.approx(np.nanmean(z[:3, :3]))


def test_reach_time_cutoff_is_exact_up_to_the_cutoff():
    t = hills(n=160)
    mover = Mover(mu=0.0)
    start = (80.0, 240.0)
    t_max = 3.0
    full = reach(t, start, mover, options=SearchOptions(neighbours=16))
    lim = reach_limited(t, start, mover, max_time_s=t_max, search=SearchOptions(neighbours=16))
    # map the window back onto the full grid
    r0, c0 = (int(round(v)) for v in t.rowcol(*(lim.transform @ (0.5, 0.5))))
    h, w = lim.time_s.shape
    sub = full.time_s[r0:r0 + h, c0:c0 + w]
    early = sub <= t_max
    assert np.array_equal(np.isfinite(lim.time_s), early)
    assert np.allclose(lim.time_s[early], sub[early], rtol=1e-12)
    # nothing outside the window arrives within the cut-off
    outside = full.time_s.copy()
    outside[r0:r0 + h, c0:c0 + w] = np.nan
    assert not (outside <= t_max).any()
    assert h * w < t.z.size
    # the kernel stopped at the cut-off instead of filling the window's disc
    assert lim.stats["labels_cut_off"] > 0
    assert lim.stats["cutoff"]["bound"] == "area window and kernel time cut-off"


def test_reach_distance_cutoff_confines_to_the_disc():
    t = plane(n=100, sx=0.2)
    mover = Mover(mu=0.05, normal="gravity")
    lim = reach_limited(t, (20.5, 50.5), mover, max_distance_m=30.0, search=SearchOptions(neighbours=8))
    rr, cc = np.mgrid[0:lim.time_s.shape[0], 0:lim.time_s.shape[1]]
    a = lim.transform
    x, y = a.c + a.a * (cc + 0.5), a.f + a.e * (rr + 0.5)
    d = np.hypot(x - 20.5, y - 50.5)
    assert not np.isfinite(lim.time_s[d > 30.0]).any()
    # straight down the fall line (east along the start's row), 30 m: incline formula
    # t = sqrt(2 L / a) with a = g (drop - mu plan) / length
    row = int(np.argmin(np.abs(y[:, 0] - 50.5)))
    col = int(np.argmin(np.abs(x[0] - 50.5)))
    L = 30.0 * math.hypot(1.0, 0.2)
    a = G * (0.2 * 30.0 - 0.05 * 30.0) / L
    assert lim.time_s[row, col] == pytest.approx(math.sqrt(2 * L / a), rel=1e-9)


def test_bad_arguments():
    t = plane(n=40)
    with pytest.raises(ParameterError, match="max_time_s must be a positive"):
        reach_limited(t, (5.5, 20.5), Mover(), max_time_s=-1.0)
    with pytest.raises(ParameterError, match="corridor_m"):
        SearchOptions(plan="corridor", coarse_factor=2, corridor_m=-1.0)
