"""numba: the carrier's run over one span for many entry speeds at once (the search's inner loop).

Each run is :func:`fallway._traverse.traverse_kernel` on the span's dense loaded path, the
kernel :func:`fallway.physics.traverse` calls, so the numbers are the same; only the
Python overhead per run is gone.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .._traverse import traverse_kernel


@njit(cache=True, nogil=True)
def runs_kernel(pts, g, mu, k, v2_in, v2_stall, full, v2_max, out_t, out_v2, out_status):
    """Run the span once per entry speed² in ``v2_in``; fills time, exit speed² and status
    (0 through, 1 stall, 2 over ``v2_max``: at a vertex, or at a segment midpoint with the
    full model)."""
    m = pts.shape[0]
    station = np.empty(m)
    v2 = np.empty(m)
    time = np.empty(m)
    grade = np.empty(m)
    v2_mid = np.empty(m - 1)
    v2_dep = np.empty(m)
    for i in range(v2_in.shape[0]):
        stall = traverse_kernel(pts, g, mu, k, v2_in[i], v2_stall, full, station, v2, time, grade, v2_mid, v2_dep)
        out_t[i] = time[m - 1]
        out_v2[i] = v2[m - 1]
        if stall >= 0.0:
            out_status[i] = 1
            continue
        status = 0
        for j in range(m):
            if v2[j] > v2_max:
                status = 2
                break
        if status == 0:
            for j in range(m - 1):
                if v2_mid[j] > v2_max:  # NaN (gravity model) compares False
                    status = 2
                    break
        out_status[i] = status
