"""Result types (a lattice line, a route, a reach map) and :func:`find_route`."""

from __future__ import annotations

import math
import os
import tempfile
from dataclasses import dataclass, field

import numpy as np

from .errors import ParameterError
from .results import LatticeLine, ReachMap
from .physics import Mover, Profile, traverse
from .params import Limits, LineSpec

__all__ = ["LatticeLine", "Route", "ReachMap", "find_route", "route_from_lattice"]

_LINE_KINDS = ("ground", "raised")


@dataclass(frozen=True, eq=False)
class Route:
    """A minimum-time line from start to end, with its motion and numbers.

    Attributes
    ----------
    line : ndarray (N, 3)
        The final (refined, or lattice when refinement is off) polyline x, y, z.
    profile : Profile
        ``traverse(line, mover)``: the reported motion.
    lattice : LatticeLine
        The lattice answer on its own.
    summary : dict
        Plain numbers and strings (JSON-ready): travel_time_s, lattice_time_s,
        length_m, plan_length_m, drop_m, exit_speed_m_s, max_speed_m_s,
        min_radius_m, max_grade, search and refinement statistics.
    mover, limits : Mover, Limits
        The physics and the limits the route was found with.
    """

    line: np.ndarray
    profile: Profile
    lattice: LatticeLine
    summary: dict
    mover: Mover
    limits: Limits = field(default_factory=Limits)

    @property
    def travel_time_s(self) -> float:
        """Reported travel time, seconds."""
        return float(self.summary["travel_time_s"])


def _min_radius(points: np.ndarray, dims: int = 2) -> float:
    """Smallest circumradius of three consecutive vertices, in plan (``dims=2``) or 3D (inf when straight)."""
    xy = np.asarray(points, dtype=float)[:, :dims]
    if len(xy) > 1:
        keep = np.concatenate([[True], np.linalg.norm(np.diff(xy, axis=0), axis=1) > 1e-9])
        xy = xy[keep]
    if len(xy) < 3:
        return math.inf
    u = xy[1:-1] - xy[:-2]
    w = xy[2:] - xy[:-2]
    a = np.linalg.norm(u, axis=1)
    b = np.linalg.norm(xy[2:] - xy[1:-1], axis=1)
    c = np.linalg.norm(w, axis=1)
    # twice the triangle's area: |u x w| (the z component alone in plan)
    if dims == 2:
        cross = np.abs(u[:, 0] * w[:, 1] - u[:, 1] * w[:, 0])
    else:
        cross = np.linalg.norm(np.cross(u, w), axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = a * b * c / (2.0 * cross)
    r = r[cross > 1e-12 * np.maximum(a * b, 1e-300)]
    return float(r.min()) if len(r) else math.inf


#: Refined vertices closer than this fraction of a cell to the previous one are merged:
#: they carry no geometry, only a spurious kink (and a millimetre bend radius).
_MERGE_FRACTION = 0.01


def _merge_close(points: np.ndarray, tol_m: float) -> np.ndarray:
    """Drop interior vertices within ``tol_m`` (3D) of the last kept one; keep both ends."""
    if len(points) <= 2:
        return points
    keep = [0]
    for i in range(1, len(points) - 1):
        if np.linalg.norm(points[i] - points[keep[-1]]) > tol_m:
            keep.append(i)
    if np.linalg.norm(points[-1] - points[keep[-1]]) <= tol_m and len(keep) > 1:
        keep.pop()
    keep.append(len(points) - 1)
    return points[keep]


def _timed(terrain, points: np.ndarray, mover: Mover, line: str) -> Profile:
    """``traverse`` of a route's line; a ground line's lift-off is judged against the ground normal."""
    normals = None
    if line == "ground":
        n = terrain.normal(points[:, 0], points[:, 1])
        if np.isfinite(n).all():
            normals = n
    return traverse(points, mover, surface_normal=normals)


def _num(v) -> float | None:
    v = float(v)
    return None if math.isnan(v) else v


def find_route(terrain, start, end, mover: Mover, *, via=(), neighbours: int = 16, limits: Limits | None = None,
               keepout=None, line: str = "ground", refine: bool = True, heuristic: bool = True,
               energy_tol: float | None = None, max_labels: int | None = None, max_per_cell: int | None = None,
               **refine_options) -> Route:
    """The minimum-time line from ``start`` to ``end``: lattice search, then refinement.

    Parameters
    ----------
    terrain : Terrain
    start, end : (x, y)
        Map coordinates in the terrain CRS; each snaps to the nearest cell centre.
    mover : Mover
    via : sequence of (x, y)
        Points to pass through in order (energy carried through them).
    neighbours : {8, 16, 32}
        Lattice stencil.
    limits : Limits, optional
    keepout : Keepout or bool mask, optional
    line : {"ground", "raised"}
        Passed to the refinement.
    refine : bool
        Refine the lattice line when the refinement module is available; otherwise (or
        False) the route is the lattice line and ``summary["refined"]`` is False.
    heuristic, energy_tol, max_labels, max_per_cell
        Search options (see :func:`fallway.lattice.search.lattice_line`).
    **refine_options
        Passed to ``fallway.refine.refine_line`` (e.g. ``clearance``, ``start_height``).

    Returns
    -------
    Route
        ``profile`` is :func:`fallway.physics.traverse` of ``line`` with ``mover`` (the
        full normal-force model when asked; a ground line's lift-off judged against the
        ground normal); ``lattice`` the lattice answer on its own.  In the summary
        ``lattice_time_s`` is the lattice line timed with the same model as
        ``travel_time_s`` (so the two compare), ``lattice_search_time_s`` the search's
        own figure (gravity-normal friction; equal to it for ``normal="gravity"``).

    Raises
    ------
    NoFeasibleLine
        No lattice line satisfies the physics and limits (``reason``, ``closest``).

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> z = -0.5 * np.add.outer(np.arange(6.0), np.arange(6.0))
    >>> t = Terrain.from_array(z, (1.0, 0, 0, 0, -1.0, 6.0))
    >>> r = find_route(t, (0.5, 5.5), (5.5, 0.5), Mover(mu=0.1, normal="gravity"), refine=False)
    >>> print(f"{r.summary['lattice_time_s']:.4f} {r.summary['drop_m']:.1f}")
    1.8876 5.0
    """
    from .lattice.search import lattice_line

    if line not in _LINE_KINDS:
        raise ParameterError(f"line must be one of {', '.join(_LINE_KINDS)}; got {line!r}")
    limits = Limits() if limits is None else limits
    lat = lattice_line(terrain, start, end, mover, via=via, neighbours=neighbours, limits=limits, keepout=keepout,
                       heuristic=heuristic, energy_tol=energy_tol, max_labels=max_labels, max_per_cell=max_per_cell)
    return route_from_lattice(terrain, lat, mover, limits=limits, keepout=keepout, line=line, refine=refine,
                              neighbours=neighbours, via=via, **refine_options)


def route_from_lattice(terrain, lat: LatticeLine, mover: Mover, *, limits: Limits | None = None, keepout=None,
                       line: str = "ground", refine: bool = True, neighbours: int = 16, via=(),
                       **refine_options) -> Route:
    """A :class:`Route` from a lattice answer: refinement (optional), timing and summary.

    The second half of :func:`find_route`, for any lattice search (e.g. the robust
    one, :func:`fallway.lattice.robust.robust_lattice_line`).

    Parameters
    ----------
    terrain : Terrain
    lat : LatticeLine
    mover : Mover
    limits, keepout, line, refine, **refine_options
        As :func:`find_route`.
    neighbours : int
        The stencil the lattice line came from (reported).
    via : sequence of (x, y)
        The via points it passes (reported).

    Returns
    -------
    Route

    Examples
    --------
    >>> import numpy as np
    >>> from fallway.terrain import Terrain
    >>> from fallway.lattice.search import lattice_line
    >>> t = Terrain.from_array(-0.5 * np.add.outer(np.arange(6.0), np.arange(6.0)), (1.0, 0, 0, 0, -1.0, 6.0))
    >>> m = Mover(mu=0.1, normal="gravity")
    >>> lat = lattice_line(t, (0.5, 5.5), (5.5, 0.5), m)
    >>> r = route_from_lattice(t, lat, m, refine=False)
    >>> abs(r.summary["lattice_time_s"] - lat.time_s) < 1e-9
    True
    """
    from .caution import CAUTION

    if line not in _LINE_KINDS:
        raise ParameterError(f"line must be one of {', '.join(_LINE_KINDS)}; got {line!r}")
    limits = Limits() if limits is None else limits
    final = lat.points
    refined = False
    extra: dict = {}
    if refine:
        try:
            from .refine import refine_line
        except ImportError:
            refine_line = None
        if refine_line is not None:
            # refinement works on polygons (a distance field); a bare lattice mask has none
            ko = None if isinstance(keepout, np.ndarray) else keepout
            spec = LineSpec(line, refine_options.pop("clearance", (0.0, 0.0)), refine_options.pop("start_height", 0.0),
                            refine_options.pop("end_height", 0.0))
            rr = refine_line(terrain, lat.points, mover, limits=limits, keepout=ko, line=spec, **refine_options)
            final = _merge_close(np.asarray(rr.line, dtype=float), _MERGE_FRACTION * terrain.cell_size)
            refined = True
            extra = {"refine_iterations": int(rr.iterations), "refine_residual": _num(rr.residual),
                     "refine_converged": bool(rr.converged), "refine_time_before_s": _num(rr.time_before_s),
                     "refine_time_after_s": _num(rr.time_after_s), "refine_message": str(rr.message),
                     "refine_limits": dict(getattr(rr, "limits", {}) or {}),
                     "refine_polish": str(getattr(rr, "polish", "") or "")}
    profile = _timed(terrain, final, mover, line)
    lattice_profile = lat.profile if mover.normal == "gravity" else _timed(terrain, lat.points, mover, "ground")
    d = np.diff(final, axis=0)
    plan = np.hypot(d[:, 0], d[:, 1])
    st = lat.stats
    summary = {
        "travel_time_s": _num(profile.travel_time_s),
        "lattice_time_s": _num(lattice_profile.travel_time_s),
        "lattice_search_time_s": float(lat.time_s),
        "feasible": bool(profile.feasible),
        "length_m": float(np.sqrt(plan ** 2 + d[:, 2] ** 2).sum()),
        "plan_length_m": float(plan.sum()),
        "drop_m": float(final[0, 2] - final[-1, 2]),
        "exit_speed_m_s": _num(profile.exit_speed_m_s),
        "max_speed_m_s": _num(np.nanmax(profile.speed_m_s)),
        "min_radius_m": _min_radius(final),
        "min_radius_3d_m": _min_radius(final, 3),
        "max_grade": _num(np.nanmax(profile.grade)),
        "labels_created": int(st.get("labels_created", 0)),
        "labels_settled": int(st.get("labels_settled", 0)),
        "search_s": float(st.get("search_s", 0.0)),
        "search_exact": bool(st.get("exact", True)),
        "neighbours": int(neighbours),
        "start": [float(v) for v in lat.points[0, :2]],
        "end": [float(v) for v in lat.points[-1, :2]],
        "via": [[float(a), float(b)] for a, b in via],
        "refined": refined,
        "line": line,
        "caution": CAUTION,
    }
    summary.update(extra)
    return Route(line=final, profile=profile, lattice=lat, summary=summary, mover=mover, limits=limits)
