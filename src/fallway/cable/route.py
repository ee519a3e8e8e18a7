"""A cable line as a :class:`~fallway.results.Route`: what :func:`fallway.routing.find_route`
returns for ``LineSpec(kind="cable")``.

The route's line is the loaded carrier path (densely sampled), its profile the carrier's
run, ``Route.cable`` the layout (supports, spans) and ``RouteSummary.cable`` the same as
plain values, with ``exit_energy_kj``: the carrier's kinetic energy at the discharge,
``(P / g) v² / 2``, what a brake or buffer there must take.  The terrain read is the plan line's box with a margin of a few cells.
Cable lines are held by their own limits (span, clearance band, break-over angle, the
mover's speed window): the lattice limits (grade window, turn per step, bend radius,
lateral and normal load) do not apply to a rope, so a run that sets them is refused.
"""

from __future__ import annotations

import time

import numpy as np

from ..caution import CABLE_CAUTION, CAUTION
from ..errors import ParameterError
from ..geometry import min_radius_m
from ..keepout import Keepout
from ..params import Limits, LineSpec, Mover, SearchOptions
from ..results import LatticeLine, Route, RouteSummary
from ..scale import box_around
from .spec import CableSpec
from .supports import place_supports

__all__ = ["cable_route", "cable_spec_of"]


def support_stations(route) -> list[float]:
    """The station (along the route's loaded carrier path, as ``route.profile.station_m``)
    of each support of a cable route, end stations included: the path's vertex nearest to
    the support in plan, where the path passes over the saddle."""
    line = np.asarray(route.line, dtype=float)
    station = np.asarray(route.profile.station_m, dtype=float)
    return [float(station[int(np.argmin(np.hypot(line[:, 0] - s.x, line[:, 1] - s.y)))])
            for s in route.cable.supports]


def cable_spec_of(line: LineSpec) -> CableSpec:
    """The cable parameters of a cable line spec (defaults with its band and end heights).

    Examples
    --------
    >>> cable_spec_of(LineSpec("cable", (2.0, 18.0), 7.0, 5.0)).clearance_m
    (2.0, 18.0)
    >>> cable_spec_of(LineSpec("cable", cable=CableSpec(max_span_m=120))).max_span_m
    120.0
    """
    if line.cable is not None:
        if not isinstance(line.cable, CableSpec):
            raise ParameterError(f"LineSpec.cable must be a fallway.CableSpec, got {type(line.cable).__name__}")
        return line.cable
    return CableSpec(start_height_m=line.start_height_m, end_height_m=line.end_height_m,
                     clearance_m=line.clearance_m)


def _no_support(keep, terrain):
    if keep is None:
        return None
    if isinstance(keep, Keepout):
        k = keep.in_crs(terrain.crs) if terrain.crs is not None else keep
        return lambda x, y: k.signed_distance(x, y) <= 0.0
    mask = np.asarray(keep, dtype=bool)

    def banned(x, y):
        r, c = terrain.rowcol(x, y)
        r = np.clip(np.asarray(r, int), 0, mask.shape[0] - 1)
        c = np.clip(np.asarray(c, int), 0, mask.shape[1] - 1)
        return mask[r, c]
    return banned


def cable_route(src, points, mover: Mover, limits: Limits, line: LineSpec, search: SearchOptions) -> Route:
    """Place the supports and run the carrier; the usual :class:`Route` with ``cable`` set.

    ``src`` is a terrain source (:func:`fallway.scale.terrain_source`), ``points`` the
    start, angle stations and end (x, y).

    Examples
    --------
    >>> import numpy as np
    >>> from affine import Affine
    >>> from fallway.scale import terrain_source
    >>> from fallway.terrain import Terrain
    >>> t = Terrain.from_array(np.tile(100.0 - np.arange(80.0), (8, 1)), Affine(5, 0, 0, 0, -5, 40))
    >>> r = cable_route(terrain_source(t), [(10.0, 20.0), (310.0, 20.0)], Mover(mu=0.01), Limits(),
    ...                 LineSpec("cable", cable=CableSpec(station_step_m=50)), SearchOptions())
    >>> r.summary.line_kind, r.cable.support_count, round(r.summary.travel_time_s, 2)
    ('cable', 1, 15.52)
    """
    if limits != Limits():
        raise ParameterError("grade, turn, bend-radius and load limits do not apply to a cable line; leave them "
                             "unset (a cable line is held by its span, clearance band, break-over angle and speed cap)")
    spec = cable_spec_of(line)
    t0 = time.perf_counter()
    terrain, keep = src.window(box_around(points, 4.0 * src.cell))
    t1 = time.perf_counter()
    lay = place_supports(terrain, points, spec, mover, no_support=_no_support(keep, terrain))
    t2 = time.perf_counter()
    final = lay.line
    prof = lay.profile
    d = np.diff(final, axis=0)
    plan = np.hypot(d[:, 0], d[:, 1])
    grade = -d[:, 2] / np.where(plan > 0, plan, np.nan)
    start, end = final[0], final[-1]
    layout = lay.to_dict()
    v_end = float(prof.speed_m_s[-1])
    # what the brake at the discharge must take: the carrier's kinetic energy, (P / g) v² / 2
    layout["exit_energy_kj"] = spec.carrier_load_kn / mover.g * v_end * v_end / 2.0
    summary = RouteSummary(
        line_kind="cable", feasible=True, travel_time_s=lay.travel_time_s,
        exit_speed_m_s=float(prof.speed_m_s[-1]), max_speed_m_s=float(np.nanmax(prof.speed_m_s)),
        length_m=float(np.sqrt(plan ** 2 + d[:, 2] ** 2).sum()), plan_length_m=float(plan.sum()),
        drop_m=float(start[2] - end[2]), min_radius_plan_m=min_radius_m(final, dims=2),
        min_radius_3d_m=min_radius_m(final, dims=3), max_grade=float(np.nanmax(grade)), violated_limits=[],
        start_xyz=[float(v) for v in start], end_xyz=[float(v) for v in end],
        via_xy=[[float(a), float(b)] for a, b in points[1:-1]], lattice_time_s=None, lattice_model_time_s=None,
        neighbours=None, search_plan="cable", search_exact=bool(lay.exact), label_cap=None,
        labels_created=int(lay.stats["labels"]), labels_settled=int(lay.stats["labels"]), corridor=None,
        refined=False, refine_choice=None, refine_converged=None, refine_iterations=None,
        refine_residual_s_per_m=None, refine_message=None, refine_limits=None, refine_candidates=None,
        robust_method=None, robust_mu_range=None, robust_note=None, robust_candidates=None,
        caution=CAUTION + " " + CABLE_CAUTION,
        start_given_xy=[float(v) for v in points[0]], end_given_xy=[float(v) for v in points[-1]],
        start_moved_m=0.0, end_moved_m=0.0, start_moved_why=None, end_moved_why=None,
        min_grade=float(np.nanmin(grade)), cable=layout,
    )
    lattice = LatticeLine(cells=np.empty((0, 2), dtype=int), points=final, profile=prof, time_s=lay.travel_time_s,
                          stats=dict(lay.stats))
    return Route(line=final, profile=prof, lattice=lattice, summary=summary, mover=mover, limits=limits,
                 line_spec=line, search=search, refinement=None, terrain=terrain, keepout=keep,
                 compute_s={"read": t1 - t0, "search": t2 - t1}, cable=lay)
