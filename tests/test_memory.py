"""The memory estimate of the lattice search against the measured peak of a real search.

Each case runs in a fresh interpreter (Linux): once the compiled kernel is loaded, the
peak resident set size is reset (``/proc/self/clear_refs`` "5", see proc(5)) and the
resident size read (``VmRSS``); after the search the peak (``VmHWM``) is read.  The
estimate :func:`fallway.scale.search_memory_bytes` is given the label count of that very
search, so what is checked is the accounting of the arrays, not the guess of how many
labels a search needs.  numba's allocations bypass tracemalloc, hence RSS.
"""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap

import pytest

pytestmark = [pytest.mark.slow,
              pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc/self (Linux)")]

PROBE = textwrap.dedent('''
    import gc, json, sys
    import numpy as np
    import fallway.lattice.search as S
    from fallway.params import SearchOptions
    from fallway.physics import Mover
    from fallway.scale import search_memory_bytes
    from fallway.terrain import Terrain

    def status(key):
        with open("/proc/self/status") as fh:
            line = next(ln for ln in fh if ln.startswith(key + ":"))
        return int(line.split()[1]) * 1024

    n, mode, compact = int(sys.argv[1]), sys.argv[2], sys.argv[3] == "1"
    cell = 2.0
    small = Terrain.from_array(100.0 - 0.3 * np.add.outer(np.arange(20.0), np.arange(20.0)),
                               (cell, 0, 0, 0, -cell, 40.0))
    cap2 = SearchOptions(label_cap=2)
    S.lattice_line(small, (1, 39), (39, 1), Mover(mu=0.1, drag=0.001), options=cap2)
    S.reach(small, (1, 39), Mover(), options=cap2)
    gc.collect()
    with open("/proc/self/clear_refs", "w") as fh:  # reset the peak (VmHWM) to the current RSS
        fh.write("5")
    base = status("VmRSS")
    r, c = np.mgrid[0:n, 0:n]
    z = 1000.0 - 0.25 * cell * (r + c) + 3.0 * np.sin(r / 7.0) * np.cos(c / 5.0)
    keep = np.abs(r - c) / np.sqrt(2.0) > 0.08 * n  # a diagonal corridor, ~21 % of the window
    del r, c
    t = Terrain.from_array(z, (cell, 0, 0, 0, -cell, n * cell))
    del z
    run = S._Problem.run
    S._Problem.run = lambda self, *a, **k: run(self, *a, **{**k, "compact": compact})
    mover = Mover(mu=0.15, drag=0.001)
    if mode == "route":
        st = S.lattice_line(t, (1.0, n * cell - 1.0), (n * cell - 1.0, 1.0), mover, keepout=keep,
                            options=cap2).stats
    else:
        st = S.reach(t, (1.0, n * cell - 1.0), mover, keepout=keep, options=cap2).stats
    peak = status("VmHWM")
    states = st["state_cells"]
    est = search_memory_bytes(n * n, active_cells=states, max_per_cell=2,
                              labels_per_cell=st["labels_created"] / states, reach=mode == "reach")
    print(json.dumps({"measured": peak - base, "estimate": est, "states": states,
                      "active": int((~keep).sum())}))
''')


def probe(tmp_path, n, mode, compact):
    path = tmp_path / "probe.py"
    path.write_text(PROBE)
    out = subprocess.run([sys.executable, str(path), str(n), mode, "1" if compact else "0"], capture_output=True,
                         text=True, timeout=300, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("mode", ["route", "reach"])
def test_estimate_bounds_the_measured_peak(tmp_path, mode):
    res = probe(tmp_path, 1000, mode, True)
    assert res["states"] == res["active"]
    # an upper bound (it is used to refuse runs), and not a loose one: the label pools
    # double, so their resident part lies between one and two times the labels
    assert 0.4 * res["estimate"] <= res["measured"] <= res["estimate"]


def test_compact_state_saves_the_blocked_cells_state(tmp_path):
    a = probe(tmp_path, 1000, "route", True)
    b = probe(tmp_path, 1000, "route", False)
    assert b["states"] == 1000 * 1000 and a["states"] == a["active"]
    # emax, open_t, open_v2 (float64) and the label cap's count (int32): 28 B per state
    saved = (b["states"] - a["states"]) * 28
    assert b["measured"] - a["measured"] == pytest.approx(saved, rel=0.25)
