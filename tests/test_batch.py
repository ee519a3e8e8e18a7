"""Batch runs: expansion of the batch file, local processes and an in-process Dask cluster."""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest

from fallway.batch import expand_batch, run_batch
from fallway.errors import ScenarioError
from fallway.params import LineSpec
from fallway.physics import Mover
from fallway.routing import find_route
from fallway.terrain import Terrain

G = 9.80665
N, CELL = 80, 2.0
SLOPE = 0.3


def write_plane(path):
    import rasterio
    from affine import Affine

    r, c = np.mgrid[0:N, 0:N].astype(float)
    z = 300.0 - SLOPE * CELL * c + 0.02 * CELL * r
    with rasterio.open(path, "w", driver="GTiff", width=N, height=N, count=1, dtype="float64", crs="EPSG:32633",
                       transform=Affine(CELL, 0, 500000.0, 0, -CELL, 5200000.0 + N * CELL)) as dst:
        dst.write(z, 1)
    return Terrain.from_array(z, (CELL, 0, 500000.0, 0, -CELL, 5200000.0 + N * CELL), "EPSG:32633")


START = [500005.0, 5200081.0]
ENDS = [[500155.0, 5200081.0], [500151.0, 5200041.0]]
MUS = [0.05, 0.15]

BATCH = f"""
[base]
dem = "dem.tif"
[base.points]
start = {START}
[base.search]
neighbours = 16
refine = false
[base.mover]
normal = "gravity"

[vary]
points.end = {ENDS}
mover.mu = {MUS}
line.kind = ["ground", "raised"]

[[run]]
name = "outside"
points = {{ end = [600000.0, 5200050.0] }}
"""


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    d = tmp_path_factory.mktemp("batch")
    terrain = write_plane(d / "dem.tif")
    (d / "batch.toml").write_text(BATCH)
    return d, terrain


def check_rows(rows, terrain):
    assert len(rows) == 2 * 2 * 2 + 1
    ok = [r for r in rows if r["status"] == "ok"]
    assert len(ok) == 8
    for r in ok:
        end = tuple(float(v) for v in r["points.end"].split())
        mover = Mover(mu=r["mover.mu"], normal="gravity")
        single = find_route(terrain, tuple(START), end, mover, refine=False, line=LineSpec(r["line.kind"]))
        assert r["travel_time_s"] == pytest.approx(single.summary.travel_time_s, rel=1e-12)
        assert r["exit_speed_m_s"] == pytest.approx(single.summary.exit_speed_m_s, rel=1e-12)
        for c in ("length_m", "drop_m", "max_speed_m_s"):
            assert r[c] == pytest.approx(getattr(single.summary, c), rel=1e-12)
        assert r["run_s"] > 0
        if end == tuple(ENDS[0]):
            # straight down the row: constant acceleration on an incline with Coulomb
            # friction (e.g. Meriam & Kraige, Dynamics), a = g (drop - mu plan) / length
            plan = 150.0
            length = plan * math.hypot(1.0, SLOPE)
            a = G * (SLOPE - r["mover.mu"]) * plan / length
            assert r["travel_time_s"] == pytest.approx(math.sqrt(2 * length / a), rel=1e-9)
            assert r["length_m"] == pytest.approx(length, rel=1e-9)
            assert r["drop_m"] == pytest.approx(plan * SLOPE, rel=1e-9)
            assert r["max_speed_m_s"] == pytest.approx(math.sqrt(2 * a * length), rel=1e-9)
    bad = rows[-1]
    assert bad["name"] == "outside" and bad["status"] == "error"
    assert "outside" in bad["error"] and "\n" not in bad["error"]
    assert bad["travel_time_s"] is None


def read_table(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def test_local_processes(site, tmp_path):
    d, terrain = site
    rows = run_batch(d / "batch.toml", tmp_path / "out", workers=2)
    check_rows(rows, terrain)
    table = read_table(tmp_path / "out" / "batch.csv")
    assert [t["name"] for t in table] == [r["name"] for r in rows]
    assert list(table[0]) == ["name", "points.end", "mover.mu", "line.kind", "travel_time_s", "lattice_time_s",
                              "length_m", "drop_m", "max_speed_m_s", "exit_speed_m_s", "status", "run_s", "error"]
    assert all(t["run_s"] == "" for t in table)  # seconds of computing only with timings=True
    assert float(table[0]["travel_time_s"]) == rows[0]["travel_time_s"]
    assert table[-1]["status"] == "error" and table[-1]["travel_time_s"] == ""
    for r in rows[:-1]:
        folder = tmp_path / "out" / r["name"]
        assert {p.name for p in folder.iterdir()} >= {"summary.json", "route.geojson", "profile.csv"}
        s = json.loads((folder / "summary.json").read_text())
        assert s["travel_time_s"] == pytest.approx(r["travel_time_s"], rel=1e-12)
    assert not (tmp_path / "out" / "outside").exists()


def test_dask_in_process_cluster_gives_the_same_rows(site, tmp_path):
    import dask.distributed as distributed  # in the test extras: this test always runs

    d, terrain = site
    with distributed.LocalCluster(processes=False, n_workers=1, threads_per_worker=2,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        rows = run_batch(d / "batch.toml", tmp_path / "dask", scheduler=client)
    check_rows(rows, terrain)
    local = run_batch(d / "batch.toml", tmp_path / "one", workers=1)

    def results(rs):  # everything but the seconds of computing
        return [{k: v for k, v in r.items() if k != "run_s"} for r in rs]

    assert results(rows) == results(local)


def test_expansion_order_names_and_errors():
    runs, _ = expand_batch({"base": {"points": {"start": [0, 9]}},
                            "vary": {"mover": {"mu": [0.1, 0.2, 0.3]}, "line.kind": ["ground", "raised"]},
                            "run": [{"name": "x", "mover": {"drag": 0.01}}]})
    assert [r["name"] for r in runs] == [f"run-{i:03d}" for i in range(1, 7)] + ["x"]
    assert [(r["params"]["mover.mu"], r["params"]["line.kind"]) for r in runs[:3]] == [
        (0.1, "ground"), (0.1, "raised"), (0.2, "ground")]
    assert runs[-1]["scenario"]["mover"] == {"drag": 0.01}
    with pytest.raises(ScenarioError, match="run run-001: .*mover.mass"):
        expand_batch({"vary": {"mover.mass": [1, 2]}})
    with pytest.raises(ScenarioError, match="non-empty list"):
        expand_batch({"vary": {"mover.mu": 0.1}})
    with pytest.raises(ScenarioError, match="appears twice"):
        expand_batch({"run": [{"name": "a"}, {"name": "a"}]})
    with pytest.raises(ScenarioError, match="unknown batch option"):
        expand_batch({"options": {"speed": 1}})


def test_plan_option_runs_the_corridor_search(site, tmp_path):
    d, terrain = site
    (tmp_path / "large.toml").write_text(f"""
[base]
dem = "{(d / 'dem.tif').as_posix()}"
[base.points]
start = {START}
end = {ENDS[0]}
[base.search]
refine = false
[base.mover]
normal = "gravity"
[vary]
mover.mu = {MUS}
[options]
plan = "corridor"
coarse_factor = 2
corridor_m = 8.0
""")
    rows = run_batch(tmp_path / "large.toml", tmp_path / "out", workers=1)
    assert [r["status"] for r in rows] == ["ok", "ok"]
    for r in rows:
        single = find_route(terrain, tuple(START), tuple(ENDS[0]), Mover(mu=r["mover.mu"], normal="gravity"),
                            refine=False)
        assert r["travel_time_s"] == pytest.approx(single.summary.travel_time_s, rel=1e-12)
        s = json.loads((tmp_path / "out" / r["name"] / "summary.json").read_text())
        assert s["search_plan"] == "corridor" and len(s["corridor"]["steps"]) >= 2


# --------------------------------------------------------------------------- result sets (issue 19)

def _cli(*args):
    import os
    import subprocess
    import sys

    env = dict(os.environ, COLUMNS="200")
    return subprocess.run([sys.executable, "-m", "fallway.cli", *map(str, args)], capture_output=True, text=True,
                          timeout=300, env=env)


SMALL = f"""
[base]
dem = "dem.tif"
[base.points]
start = {START}
end = {ENDS[0]}
[base.search]
refine = false
[base.mover]
normal = "gravity"
[vary]
mover.mu = {MUS}
"""


def _tree(folder):
    return {str(p.relative_to(folder)): (None if p.is_dir() else p.read_bytes()) for p in sorted(folder.rglob("*"))}


def test_second_batch_is_refused_without_overwrite(site, tmp_path):
    # issue 19.2: a second run replaced batch.csv and run-*/ without asking
    d, _ = site
    f = d / "small.toml"
    f.write_text(SMALL)
    out = tmp_path / "out"
    p = _cli("batch", f, "--out", out, "--workers", 1)
    assert p.returncode == 0, p.stderr
    (out / "notes.txt").write_text("mine")
    before = _tree(out)
    p = _cli("batch", f, "--out", out, "--workers", 1)
    assert p.returncode == 1, p.stderr
    assert "Traceback" not in p.stderr and "--overwrite" in p.stderr and "batch.csv" in p.stderr, p.stderr
    assert _tree(out) == before
    # with --overwrite the earlier batch is replaced as a whole; the user's file stays
    (d / "one.toml").write_text(SMALL.replace(f"mover.mu = {MUS}", "mover.mu = [0.1]"))
    p = _cli("batch", d / "one.toml", "--out", out, "--workers", 1, "--overwrite")
    assert p.returncode == 0, p.stderr
    assert sorted(x.name for x in out.iterdir()) == ["batch.csv", "notes.txt", "run-001"]
    assert [r["mover.mu"] for r in read_table(out / "batch.csv")] == ["0.1"]


def test_run_failing_while_moving_its_files_leaves_no_partial_folder(site, tmp_path):
    # issue 19.9: a run that failed after writing left summary.json and route.geojson
    # without profile.csv (here the earlier run-001 holds a folder named profile.csv)
    d, _ = site
    f = d / "small.toml"
    f.write_text(SMALL)
    out = tmp_path / "out"
    assert _cli("batch", f, "--out", out, "--workers", 1).returncode == 0
    (out / "run-001" / "profile.csv").unlink()
    (out / "run-001" / "profile.csv").mkdir()
    p = _cli("batch", f, "--out", out, "--workers", 1, "--overwrite")
    assert p.returncode == 0, p.stderr
    rows = read_table(out / "batch.csv")
    assert [r["status"] for r in rows] == ["ok", "ok"]
    for r in rows:
        assert sorted(x.name for x in (out / r["name"]).iterdir()) == ["profile.csv", "route.geojson",
                                                                       "summary.json"]
        assert (out / r["name"] / "profile.csv").is_file()


def test_failing_writer_leaves_no_run_folder(site, tmp_path, monkeypatch):
    # a writer that fails half way (a full disk): the run is an error row and has no folder
    import fallway.export

    from fallway.errors import FallwayIOError

    d, _ = site
    f = d / "small.toml"
    f.write_text(SMALL)

    def half(route, terrain, path):
        path.write_text("station_m,x")
        raise FallwayIOError(f"cannot write {path}: No space left on device")

    monkeypatch.setattr(fallway.export, "write_profile_csv", half)
    rows = run_batch(f, tmp_path / "out", workers=1)
    assert [r["status"] for r in rows] == ["error", "error"]
    assert sorted(x.name for x in (tmp_path / "out").iterdir()) == ["batch.csv"]


@pytest.mark.parametrize("name", [".hidden", "../up", "a/b", "batch.csv", "-x", " lead", "trail."])
def test_run_names_make_plain_visible_folders_only(site, tmp_path, name):
    # issue 19.12: a run name must not create hidden folders (nor paths, nor the table's name)
    d, _ = site
    f = tmp_path / "names.toml"
    f.write_text(f'[base]\ndem = "{(d / "dem.tif").as_posix()}"\n[[run]]\nname = {json.dumps(name)}\n')
    p = _cli("batch", f, "--out", tmp_path / "out", "--workers", 1)
    assert p.returncode == 1 and "run name" in p.stderr and "Traceback" not in p.stderr, p.stderr
    assert not (tmp_path / "out").exists()
    assert sorted(x.name for x in tmp_path.iterdir()) == ["names.toml"]


def test_batch_csv_text_cells_are_neutralised(site, tmp_path):
    # OWASP "CSV Injection": a varied text value starting with = is written with a quote
    d, _ = site
    f = tmp_path / "inject.toml"
    f.write_text(f'[base]\n[base.points]\nstart = {START}\nend = {ENDS[0]}\n'
                 '[vary]\ndem = ["=cmd|\' /C calc\'!A0.tif"]\n')
    rows = run_batch(f, tmp_path / "out", workers=1)
    assert rows[0]["status"] == "error"
    table = read_table(tmp_path / "out" / "batch.csv")
    assert table[0]["dem"] == "'=cmd|' /C calc'!A0.tif"
    assert table[0]["error"] and not table[0]["error"].startswith(("=", "+", "-", "@"))


def test_timings_fill_the_run_seconds(site, tmp_path):
    d, _ = site
    (tmp_path / "small.toml").write_text(SMALL.replace('dem = "dem.tif"', f'dem = "{(d / "dem.tif").as_posix()}"'))
    rows = run_batch(tmp_path / "small.toml", tmp_path / "out", workers=1, timings=True)
    table = read_table(tmp_path / "out" / "batch.csv")
    assert [float(t["run_s"]) for t in table] == [r["run_s"] for r in rows]
    assert all(r["run_s"] > 0 for r in rows)
