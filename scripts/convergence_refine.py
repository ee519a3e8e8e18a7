"""Convergence study: error of the refined line against the friction brachistochrone.

Reference: Ashby, Brittin, Love & Wyss, Am. J. Phys. 43 (1975) 902, with the free fall
of Šalinić, Acta Mech. 208 (2009) 97 (recomputed in tests/references.py).  Case of the
issue: L = 120 m, H = 45 m, mu = 0.2 (and mu = 0).

Columns: vertex count, relative error of the refined time (free, adaptive spacing), and
for comparison the optimum with vertices fixed at equal plan spacing (only heights free,
solved with scipy's L-BFGS-B on the same time functional) — the spacing a plain
height-only optimisation on a 2 m plan grid would have.

Run: python scripts/convergence_refine.py
"""

from __future__ import annotations

import sys
import warnings
from pathlib import Path

import numpy as np
from affine import Affine
from scipy.optimize import minimize

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from references import friction_brachistochrone  # noqa: E402

from fallway.errors import RefinementWarning  # noqa: E402
from fallway.physics import Mover, traverse  # noqa: E402
from fallway.params import LineSpec  # noqa: E402
from fallway.refine import refine_line  # noqa: E402
from fallway.refine.chain import gravity_chain  # noqa: E402
from fallway.terrain import Terrain  # noqa: E402

G = 9.80665


def fixed_plan_spacing(L, H, D, mu, n):
    """Optimum of the heights at n equally spaced plan stations (x fixed)."""
    x = np.linspace(0.0, L, n)
    z0 = np.linspace(H + D, D, n)

    def fg(zi):
        P = np.column_stack([x, np.zeros(n), np.concatenate([[H + D], zi, [D]])])
        T, pen, g, _ = gravity_chain(P, 0.0, G, mu, 0.0, 1e-9, 1e-8, 1e3, -1.0, -1.0)
        return T + pen, g[1:-1, 2]

    r = minimize(fg, z0[1:-1], jac=True, method="L-BFGS-B",
                 options={"maxiter": 20000, "ftol": 1e-15, "gtol": 1e-12})
    P = np.column_stack([x, np.zeros(n), np.concatenate([[H + D], r.x, [D]])])
    return traverse(P, Mover(mu=mu, normal="gravity")).travel_time_s


def main():
    warnings.simplefilter("ignore", RefinementWarning)
    L, H, D = 120.0, 45.0, 15.0
    cell = 2.0
    valley = Terrain.from_array(np.zeros((11, 66)), Affine(cell, 0, -2 * cell, 0, -cell, 5.5 * cell))
    start = np.array([[0.0, 0.0, 0.0], [L, 0.0, 0.0]])
    for mu in (0.2, 0.0):
        ref = friction_brachistochrone(L, H, mu)
        print(f"mu = {mu}: reference T = {ref.time_s:.7f} s (free fall {ref.free_fall_m:.4f} m)")
        print(f"{'vertices':>9} {'free/adaptive':>14} {'fixed plan':>11}")
        for n in (16, 31, 61, 121, 241, 481):
            res = refine_line(valley, start, Mover(mu=mu, normal="gravity"),
                              line=LineSpec("raised", (0.0, H + D), H + D, D), n_vertices=n)
            e_free = res.time_after_s / ref.time_s - 1
            e_fixed = fixed_plan_spacing(L, H, D, mu, n) / ref.time_s - 1
            print(f"{n:>9} {100 * e_free:>13.5f}% {100 * e_fixed:>10.4f}%")


if __name__ == "__main__":
    main()
