"""Signals at several moments of a run, through the command line (subprocess).

SIGINT (Ctrl-C), SIGTERM (``kill``, ``timeout``, service managers) and SIGHUP (a closed
terminal) are sent at start-up, during the search and while the writers run.  Afterwards
the exit code is 128 + the signal number (how POSIX shells report a process ended by a
signal; common practice for programs that catch it and exit themselves), stderr is one
line without a traceback, and the output folder is exactly as before: gone if the run
created it, the earlier results byte for byte with ``--overwrite``, and no hidden
working folder.
"""

from __future__ import annotations

import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from conftest import plane, write_geotiff

pytestmark = pytest.mark.skipif(not Path("/proc/self/status").exists(),
                                reason="watches the run's signal handlers and workers in /proc (Linux)")

CRS = "EPSG:32633"
X0, Y0, CELL = 500_000.0, 4_000_000.0, 5.0
CODES = {signal.SIGINT: 130, signal.SIGTERM: 143, signal.SIGHUP: 129}


def _rough(path, n):
    """n x n cells of rough ground falling south-east; corner-to-corner points."""
    rng = np.random.default_rng(1)
    z, t = plane(n, n, CELL, -0.3, -0.1)
    write_geotiff(path, z + rng.normal(0.0, 2.0, z.shape), t, CRS)
    return ["--start", X0 + 2.5, Y0 - 2.5, "--end", X0 + (n - 0.5) * CELL, Y0 - (n - 0.5) * CELL]


@pytest.fixture(scope="module")
def dems(tmp_path_factory):
    d = tmp_path_factory.mktemp("signals")
    # a search of many seconds (150 x 150 cells, 32 neighbours), and a quick one whose
    # writers (figures, report) take most of the run; enclosed lines (lift-off is not the
    # subject: rough ground has crests)
    slow = ["route", d / "rough150.tif", *_rough(d / "rough150.tif", 150), "--neighbours", "32", "--mu", "0.1",
            "--no-refine", "--allow-liftoff"]
    quick = ["route", d / "rough60.tif", *_rough(d / "rough60.tif", 60), "--mu", "0.05", "--no-refine",
             "--allow-liftoff"]
    return {"slow": slow, "quick": quick}


def _launch(args):
    return subprocess.Popen([sys.executable, "-m", "fallway.cli", *map(str, args)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def _working(out: Path) -> list[Path]:
    return list(out.glob(".fallway-*")) if out.is_dir() else []


def _wait(cond, proc, timeout=60.0, step=0.005):
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        if cond():
            return True
        if proc.poll() is not None:
            return False
        time.sleep(step)
    return False


def _catches(pid: int, sig) -> bool:
    """Whether the process has a handler for ``sig`` (SigCgt in /proc/<pid>/status, Linux)."""
    try:
        status = Path(f"/proc/{pid}/status").read_text()
    except OSError:
        return False
    mask = next(int(line.split()[1], 16) for line in status.splitlines() if line.startswith("SigCgt:"))
    return bool(mask & (1 << (int(sig) - 1)))


def _snapshot(folder: Path):
    if not folder.exists():
        return None
    return {str(p.relative_to(folder)): (None if p.is_dir() else p.read_bytes()) for p in sorted(folder.rglob("*"))}


def _interrupt(args, out: Path, sig, moment: str):
    """Run, send ``sig`` at ``moment``, return (process, stderr, seconds from signal to exit)."""
    proc = _launch([*args, "--out", out])
    try:
        if moment == "start-up":
            # as soon as the command line catches SIGTERM (its handlers are in place): the
            # numerical stack is still being imported, nothing has been read or written
            assert _wait(lambda: _catches(proc.pid, signal.SIGTERM), proc), "the run ended during start-up"
            assert not any(any(w.iterdir()) for w in _working(out)), "the run was already writing"
        elif moment == "search":
            assert _wait(lambda: _working(out), proc), "the run ended before its search"
            time.sleep(1.0)
            assert not any((w / "summary.json").exists() for w in _working(out)), "the search was over"
        else:  # writing: the first result is in the working folder, the figures are being drawn
            assert _wait(lambda: any((w / "summary.json").exists() for w in _working(out)), proc), \
                "the run ended before its writers"
        assert proc.poll() is None, "the run ended before it could be signalled"
        proc.send_signal(sig)
        t0 = time.monotonic()
        _, err = proc.communicate(timeout=60)
        return proc, err, time.monotonic() - t0
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()


def _check(proc, err, sig, out, before):
    assert proc.returncode == CODES[sig], f"exit {proc.returncode}: {err}"
    assert "Traceback" not in err, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("fallway: error: ") and "no partial outputs" in lines[0], err
    assert _snapshot(out) == before


def test_sigterm_at_start_up_leaves_nothing(dems, tmp_path):
    # issue 19.6 and 19.7: the quick case of the matrix below, in the fast test set
    out = tmp_path / "out"
    proc, err, _ = _interrupt(dems["quick"], out, signal.SIGTERM, "start-up")
    _check(proc, err, signal.SIGTERM, out, None)


@pytest.mark.slow
@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM, signal.SIGHUP], ids=lambda s: s.name)
@pytest.mark.parametrize("moment", ["start-up", "search", "writing"])
@pytest.mark.parametrize("folder", ["new", "overwrite"])
def test_signal_at_any_moment_leaves_the_folder_as_it_was(dems, tmp_path, sig, moment, folder):
    args = dems["slow"] if moment == "search" else dems["quick"]
    out = tmp_path / "a" / "out"
    extra = []
    if folder == "overwrite":
        done = subprocess.run([sys.executable, "-m", "fallway.cli", *map(str, dems["quick"]), "--mu", "0.05",
                               "--out", out], capture_output=True, text=True, timeout=120)
        assert done.returncode == 0, done.stderr
        (out / "notes.txt").write_text("mine")
        extra = ["--overwrite"]
    before = _snapshot(out)
    proc, err, seconds = _interrupt([*args, *extra], out, sig, moment)
    _check(proc, err, sig, out, before)
    assert folder == "overwrite" or not (tmp_path / "a").exists()
    assert seconds < 15.0, f"took {seconds:.1f} s to stop"


def _children(pid: int) -> list[int]:
    kids = []
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            try:
                stat = (d / "stat").read_text()
            except OSError:
                continue
            if int(stat.rsplit(")", 1)[1].split()[1]) == pid:
                kids.append(int(d.name))
    return kids


@pytest.mark.slow
@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=lambda s: s.name)
def test_signal_during_a_batch_stops_the_workers_and_leaves_nothing(dems, tmp_path, sig):
    # issue 19.9: Ctrl-C during a batch claimed "no partial outputs were left" while
    # run-001/* remained and there was no batch.csv
    dem = dems["slow"][1]
    pts = dems["slow"][2:8]
    f = tmp_path / "batch.toml"
    f.write_text(f'[base]\ndem = "{Path(dem).as_posix()}"\n[base.points]\nstart = [{pts[1]}, {pts[2]}]\n'
                 f'end = [{pts[4]}, {pts[5]}]\n[base.search]\nrefine = false\nneighbours = 32\n'
                 '[vary]\nmover.mu = [0.1, 0.11, 0.12, 0.13]\n')
    out = tmp_path / "out"
    proc = _launch(["batch", f, "--out", out, "--workers", 2])
    try:
        assert _wait(lambda: any(list(w.glob("run-*")) for w in _working(out)), proc), "no run started"
        kids = _children(proc.pid)
        assert kids, "no worker processes"
        proc.send_signal(sig)
        _, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert proc.returncode == CODES[sig], err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1, err
    time.sleep(2.0)  # a worker left running would write its run folder now
    assert not out.exists()
    alive = [k for k in kids if Path(f"/proc/{k}").exists()
             and (Path(f"/proc/{k}/stat").read_text().rsplit(")", 1)[1].split()[0] != "Z")]
    assert alive == []


@pytest.mark.slow
@pytest.mark.skipif(not Path("/usr/bin/timeout").exists() and not Path("/bin/timeout").exists(),
                    reason="needs coreutils timeout")
def test_timeout_around_the_demo_leaves_nothing(tmp_path):
    # issue 19.6: `timeout 300 fallway demo --out d` left a hidden .fallway-XXXX folder
    exe = Path(sys.executable).with_name("fallway")
    out = tmp_path / "d"
    p = subprocess.run(["timeout", "4", str(exe), "demo", "--out", str(out)], capture_output=True, text=True,
                       timeout=120)
    assert p.returncode == 124, p.stderr  # timeout's own code for "the command timed out"
    assert "Traceback" not in p.stderr and "SIGTERM" in p.stderr, p.stderr
    assert not out.exists()


def test_a_stopped_batch_leaves_no_resource_tracker_warning(tmp_path):
    # A stop by signal kills the batch's workers and ends the process with os._exit
    # (cli._end_on_signal); multiprocessing's resource tracker then unlinks the pool's
    # semaphores and - found intermittently in the SIGTERM batch test above - warned of
    # "leaked semaphore objects" on stderr after fallway's one-line message.  The same
    # sequence in a child process, with the pool started as batch.run_batch starts it.
    script = tmp_path / "stop.py"
    script.write_text(
        "import multiprocessing, os, sys, time\n"
        "from concurrent.futures import ProcessPoolExecutor\n"
        "from fallway.batch import _quiet_resource_tracker\n"
        "if __name__ == '__main__':\n"
        "    ctx = multiprocessing.get_context('spawn')\n"
        "    _quiet_resource_tracker()\n"
        "    ex = ProcessPoolExecutor(max_workers=2, mp_context=ctx)\n"
        "    futs = [ex.submit(time.sleep, 5) for _ in range(4)]\n"
        "    time.sleep(1.0)\n"
        "    for c in multiprocessing.active_children():\n"
        "        c.kill()\n"
        "    for c in multiprocessing.active_children():\n"
        "        c.join(5)\n"
        "    sys.stderr.write('stopped\\n')\n"
        "    sys.stderr.flush()\n"
        "    os._exit(143)\n")
    p = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=60)
    assert p.returncode == 143
    assert p.stderr.strip().splitlines() == ["stopped"], p.stderr
