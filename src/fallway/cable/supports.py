"""Supports placed by search: a label search over the graph of feasible spans.

The plan line runs straight from the start station to the end station, or through the
given angle stations (each one a support).  Candidate support sites lie along it at a
station step; at each site the support heights run from the smallest to the largest in
steps.  A *span* joins a (site, height) to a later one on the same straight leg; it is
feasible when

* its horizontal length is at most the maximum span,
* the loaded carrier path (:meth:`fallway.cable.span.Span.loaded_z`) keeps the
  clearance band above the ground surface (:meth:`fallway.Terrain.sample`) at every
  dense sample of the span, its ends included,

and two spans can meet at a support when the unloaded rope bends *down* over the saddle
(it presses on it: the slope leaving is steeper down than the slope arriving) and the
break-over angle, with the carrier arriving on the rope or leaving it (the rope's slope
beside the saddle changes by ``P / H``), stays within the limit.

The span graph is acyclic (sites only go forward), so the search settles sites in order
of chainage.  States are spans (the break-over angle at a support depends on the span
that arrives); labels carry the time and the speed at the span's end (and, for
``objective="supports"``, the number of spans).  A label is dominated by one with no more
spans, no later time and no lower speed: a faster carrier is never slower later (the
motion law is monotone in the entry speed).  With a speed cap that is not so (a faster
carrier may overspeed where a slower one does not), so when the cap rejected a run and
labels were pruned the answer is marked inexact (``CableLayout.exact``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import NoFeasibleLine, ParameterError
from ..physics import Mover, Profile
from ._runs import runs_kernel
from .run import run_span
from .span import Span
from .spec import CableSpec

__all__ = ["CableLayout", "SpanReport", "SupportReport", "place_supports", "break_over_ok"]

_TOL = 1e-9


@dataclass(frozen=True)
class SupportReport:
    """A support (or an end station) of the layout: ``supports.csv`` holds these fields."""

    station_m: float
    x: float
    y: float
    ground_z_m: float
    height_m: float
    top_z_m: float


@dataclass(frozen=True)
class SpanReport:
    """One span of the layout: ``spans.csv`` holds these fields."""

    span: int
    from_station_m: float
    to_station_m: float
    length_m: float
    chord_slope: float
    midspan_deflection_m: float
    min_clearance_m: float
    min_clearance_station_m: float
    entry_speed_m_s: float
    exit_speed_m_s: float
    time_s: float


@dataclass(frozen=True, eq=False)
class CableLayout:
    """The supports the search placed, the spans and the carrier's run.

    Attributes
    ----------
    supports : tuple of SupportReport
        The end stations (first and last) and the supports between, in order.
    spans : tuple of SpanReport
    line : ndarray (N, 3)
        The loaded carrier path, densely sampled (x, y, z).
    unloaded_z : ndarray (N,)
        The unloaded cable's height at the same plan points.
    ground_z : ndarray (N,)
        The ground surface under them.
    chainage_m : ndarray (N,)
        Plan distance from the start station.
    profile : Profile
        The carrier's run along ``line`` (spans chained, speed carried across supports).
    clearance_m : (float, float)
        The band the loaded path keeps.
    objective : str
    exact : bool
        False when a speed cap cut runs while labels were pruned (see the module notes),
        or a speed resolution dropped a label the exact search keeps.
    stats : dict
        Sites, nodes, spans checked and feasible, labels, runs.
    """

    supports: tuple
    spans: tuple
    line: np.ndarray
    unloaded_z: np.ndarray
    ground_z: np.ndarray
    chainage_m: np.ndarray
    profile: Profile
    clearance_m: tuple
    objective: str
    exact: bool
    stats: dict = field(default_factory=dict)

    @property
    def travel_time_s(self) -> float:
        """The carrier's time from start to end."""
        return float(self.profile.time_s[-1])

    @property
    def support_count(self) -> int:
        """Supports between the end stations."""
        return len(self.supports) - 2

    def to_dict(self) -> dict:
        """Supports and spans as plain values (the route summary's ``cable`` field)."""
        return {"objective": self.objective, "exact": self.exact, "support_count": self.support_count,
                "clearance_m": list(self.clearance_m),
                "supports": [vars(s).copy() for s in self.supports],
                "spans": [vars(s).copy() for s in self.spans], "stats": dict(self.stats)}


def break_over_ok(slope_in, slope_out: float, jump: float, max_deg: float):
    """The rope bends down over the saddle and its break-over angle stays within ``max_deg``.

    ``slope_in`` (a number or an array) and ``slope_out`` are the unloaded rope's slopes
    (dz/dx along the line) arriving at and leaving the saddle; ``jump = P / H`` is how
    much a carrier at the saddle steepens either side (the carrier arriving raises the
    arriving slope, leaving it lowers the leaving one).

    Examples
    --------
    >>> bool(break_over_ok(-0.2, -0.3, 0.1, 20.0))
    True
    >>> bool(break_over_ok(-0.3, -0.2, 0.1, 20.0))  # the rope would lift off the saddle
    False
    """
    s_in = np.asarray(slope_in, dtype=float)
    a_in, a_out = np.arctan(s_in), math.atan(slope_out)
    worst = np.maximum(np.arctan(s_in + jump) - a_out, a_in - math.atan(slope_out - jump))
    return (a_in - a_out > 0.0) & (np.degrees(worst) <= max_deg + _TOL)


@dataclass
class _Plan:
    """The plan line's dense samples and candidate sites."""

    xy: np.ndarray          # (M, 2) dense plan points
    chain: np.ndarray       # (M,) chainage
    ground: np.ndarray      # (M,) ground surface
    site_dense: np.ndarray  # (S,) dense index of each site
    site_leg: np.ndarray    # (S,) leg of each site (a leg-end site belongs to the leg it ends)
    fixed: np.ndarray       # (S,) the site must carry a support (end and angle stations)


def _plan(terrain, points: np.ndarray, spec: CableSpec) -> _Plan:
    cell = float(terrain.cell_size)
    step = spec.station_step_m or cell
    ds = spec.sample_m or min(1.0, cell / 4.0)
    xy_parts, ch_parts, site_dense, site_leg, fixed = [], [], [0], [0], [True]
    chain0, dense0 = 0.0, 0
    for leg in range(len(points) - 1):
        a, b = points[leg], points[leg + 1]
        length = float(np.hypot(*(b - a)))
        if length <= 0.0:
            raise ParameterError(f"the cable line's points {leg + 1} and {leg + 2} coincide; drop the repeated one")
        n_sites = max(1, math.ceil(length / step - 1e-9))
        k = max(1, math.ceil(length / n_sites / ds - 1e-9))
        t = np.linspace(0.0, 1.0, n_sites * k + 1)
        if leg:
            t = t[1:]
        xy_parts.append(a + np.outer(t, b - a))
        ch_parts.append(chain0 + t * length)
        for s in range(1, n_sites + 1):
            site_dense.append(dense0 + s * k)
            site_leg.append(leg)
            fixed.append(s == n_sites)
        chain0 += length
        dense0 += n_sites * k
    xy = np.concatenate(xy_parts)
    ground = np.asarray(terrain.sample(xy[:, 0], xy[:, 1]), dtype=float)
    bad = ~np.isfinite(ground)
    if bad.any():
        x, y = xy[int(np.flatnonzero(bad)[0])]
        raise NoFeasibleLine(f"the cable line crosses nodata (or the DEM's edge) near ({x:.1f}, {y:.1f}); "
                             "fill the DEM or move the line", reason="nodata", closest=(float(x), float(y)))
    return _Plan(xy, np.concatenate(ch_parts), ground, np.array(site_dense), np.array(site_leg),
                 np.array(fixed))


def _heights(spec: CableSpec, n_sites: int) -> list[np.ndarray]:
    mid = np.array(spec.support_heights_m)
    return [np.array([spec.start_height_m])] + [mid] * (n_sites - 2) + [np.array([spec.end_height_m])]


def _span_geometry(plan: _Plan, i: int, j: int, ha, hb, spec: CableSpec):
    """Loaded path, clearance and unloaded end slopes of spans from site i to site j, for
    every pair of heights (arrays broadcast as (len(ha), len(hb), samples))."""
    di, dj = plan.site_dense[i], plan.site_dense[j]
    d = plan.chain[di:dj + 1] - plan.chain[di]
    L = float(d[-1])
    g = plan.ground[di:dj + 1]
    H = spec.cable_tension_kn * 1e3
    P = spec.carrier_load_kn * 1e3
    za = plan.ground[di] + np.asarray(ha, dtype=float)[:, None]
    zb = plan.ground[dj] + np.asarray(hb, dtype=float)[None, :]
    slope = (zb - za) / L
    q = spec.cable_weight_n_m * np.sqrt(1.0 + slope * slope)       # per metre of plan (Span)
    coef = P / (H * L) + q / (2.0 * H)
    zp = za[..., None] + slope[..., None] * d - coef[..., None] * (d * (L - d))
    clr = zp - g
    half = q * L / (2.0 * H)
    return L, zp, clr, slope - half, slope + half


@dataclass
class _Edges:
    i: list = field(default_factory=list)
    j: list = field(default_factory=list)
    ha: list = field(default_factory=list)
    hb: list = field(default_factory=list)
    src: list = field(default_factory=list)
    dst: list = field(default_factory=list)
    s_out: list = field(default_factory=list)   # unloaded slope leaving site i
    s_in: list = field(default_factory=list)    # unloaded slope arriving at site j


def place_supports(terrain, points, spec: CableSpec, mover: Mover, *, no_support=None) -> CableLayout:
    """Place the supports of a cable line: the fastest carrier run, or the fewest supports.

    Parameters
    ----------
    terrain : Terrain
        The ground (its smooth surface is sampled).
    points : array_like (K, 2)
        Start station, angle stations, end station (x, y) in the terrain's CRS.
    spec : CableSpec
        Heights, spans, clearance band, tension, loads, objective.
    mover : Mover
        The carrier: rolling resistance ``mu``, drag, start speed, speed window.
    no_support : callable, optional
        ``no_support(x, y)`` -> bool array: True where no support may stand (keep-out
        areas).  The cable may span over such places; an end or angle station there is
        an error.

    Returns
    -------
    CableLayout

    Raises
    ------
    NoFeasibleLine
        No layout exists: the message names the site from which no span can be made,
        what blocks it and the nearest workable values the search saw.

    Examples
    --------
    A 300 m line falling 60 m on a plane.  At 50 kN the carrier would sag too low on one
    span of 300 m, so the fastest layout has one support; at 150 kN one span reaches.

    >>> import numpy as np
    >>> from affine import Affine
    >>> from fallway.terrain import Terrain
    >>> cols = np.arange(80)
    >>> t = Terrain.from_array(np.tile(100.0 - 0.2 * 5 * cols, (8, 1)), Affine(5, 0, 0, 0, -5, 40))
    >>> spec = CableSpec(station_step_m=50, max_span_m=300)
    >>> lay = place_supports(t, [(10, 20), (310, 20)], spec, Mover(mu=0.01))
    >>> lay.support_count, [s.height_m for s in lay.supports], round(lay.travel_time_s, 2)
    (1, [10.0, 6.0, 10.0], 15.52)
    >>> import dataclasses
    >>> lay = place_supports(t, [(10, 20), (310, 20)], dataclasses.replace(spec, cable_tension_kn=150),
    ...                      Mover(mu=0.01))
    >>> lay.support_count, round(lay.travel_time_s, 2)
    (0, 16.89)
    """
    pts = np.asarray(points, dtype=float)
    if pts.ndim != 2 or pts.shape[1] != 2 or len(pts) < 2 or not np.isfinite(pts).all():
        raise ParameterError("points must be two or more finite (x, y) pairs: start, angle stations, end")
    plan = _plan(terrain, pts, spec)
    n_sites = len(plan.site_dense)
    heights = _heights(spec, n_sites)
    if no_support is not None:
        banned = np.asarray(no_support(*plan.xy[plan.site_dense].T), dtype=bool)
        if banned[plan.fixed].any():
            x, y = plan.xy[plan.site_dense[np.flatnonzero(banned & plan.fixed)[0]]]
            raise NoFeasibleLine(f"the end or angle station at ({x:.1f}, {y:.1f}) lies in a keep-out area; move it",
                                 reason="keepout", closest=(float(x), float(y)))
        heights = [np.empty(0) if b else h for b, h in zip(banned, heights)]
    node0 = np.concatenate([[0], np.cumsum([len(h) for h in heights])])
    lo, hi = spec.clearance_m
    H = spec.cable_tension_kn * 1e3
    jump = spec.carrier_load_kn * 1e3 / H
    site_ch = plan.chain[plan.site_dense]

    # ---- feasible spans (geometry only), and what blocks the others
    E = _Edges()
    out_of = [[] for _ in range(node0[-1])]
    blocked = [dict() for _ in range(n_sites)]   # per site: reason -> best figure seen
    checked = 0
    for i in range(n_sites - 1):
        if not len(heights[i]):
            continue
        for j in range(i + 1, n_sites):
            L = site_ch[j] - site_ch[i]
            if L > spec.max_span_m + _TOL:
                break
            if not len(heights[j]):
                continue
            L, zp, clr, s_out, s_in = _span_geometry(plan, i, j, heights[i], heights[j], spec)
            checked += clr.shape[0] * clr.shape[1]
            cmin, cmax = clr.min(axis=2), clr.max(axis=2)
            ok = (cmin >= lo - _TOL) & (cmax <= hi + _TOL)
            _note_blocks(blocked[i], plan, i, j, heights, cmin, cmax, ok, spec, L)
            for a, b in zip(*np.nonzero(ok)):
                k = len(E.i)
                E.i.append(i), E.j.append(j), E.ha.append(float(heights[i][a])), E.hb.append(float(heights[j][b]))
                E.src.append(int(node0[i] + a)), E.dst.append(int(node0[j] + b))
                E.s_out.append(float(s_out[a, b])), E.s_in.append(float(s_in[a, b]))
                out_of[node0[i] + a].append(k)
            if plan.fixed[j]:
                break

    # ---- labels over the span graph, sites in order of chainage
    by_supports = spec.objective == "supports"
    lab_edge, lab_parent = [], []           # per label: the span it ends, the label before it
    at_edge: dict[int, tuple] = {}          # span -> (ids, time, speed, spans) of its labels
    into: dict[int, list[int]] = {}
    for k, d in enumerate(E.dst):
        into.setdefault(d, []).append(k)
    s_in_all = np.array(E.s_in)
    runs = pruned = over_cut = 0
    reached = np.zeros(n_sites, dtype=bool)
    reached[0] = True
    fail_runs = [dict() for _ in range(n_sites)]
    v2_max = math.inf if mover.max_speed is None else mover.max_speed ** 2
    res = spec.speed_resolution_m_s or 0.0
    approx = 0   # filters where the speed resolution dropped a label the exact filter keeps
    for node in range(node0[-1]):
        i = int(np.searchsorted(node0, node, side="right") - 1)
        if not out_of[node]:
            continue
        if i == 0:
            ids, T, V, N = np.array([-1]), np.array([0.0]), np.array([mover.v0]), np.array([0])
        else:
            parts = [at_edge[e] + (e,) for e in into.get(node, ()) if e in at_edge]
            if not parts:
                continue
            ids, T, V, N = (np.concatenate([p[k] for p in parts]) for k in range(4))
            S = np.concatenate([np.full(len(p[0]), s_in_all[p[4]]) for p in parts])
        for f in out_of[node]:
            if i == 0:
                sel = np.arange(len(ids))
            else:
                sel = np.flatnonzero(break_over_ok(S, E.s_out[f], jump, spec.max_break_over_deg))
            if not sel.size:
                fail_runs[i]["break_over"] = fail_runs[i].get("break_over", 0) + 1
                continue
            kept, cut = _pareto(T[sel], V[sel], N[sel], by_supports, res)
            keep = sel[kept]
            pruned += sel.size - keep.size
            approx += cut
            pts3 = _edge_points(plan, E, f, spec)
            dt, v2_out, status = (np.empty(keep.size), np.empty(keep.size), np.empty(keep.size, dtype=np.int8))
            runs_kernel(pts3, mover.g, mover.mu, mover.drag, V[keep] ** 2, mover.stall_speed ** 2,
                        mover.normal == "full", v2_max, dt, v2_out, status)
            runs += keep.size
            for code, why in ((1, "stall"), (2, "overspeed")):
                c = int((status == code).sum())
                if c:
                    fail_runs[i][why] = fail_runs[i].get(why, 0) + c
            over_cut += int((status == 2).sum())
            through = status == 0
            if not through.any():
                continue
            out_id = keep[through]
            out_t, out_v = T[out_id] + dt[through], np.sqrt(v2_out[through])
            out_n = N[out_id] + 1
            best, cut = _pareto(out_t, out_v, out_n, by_supports, res)
            pruned += out_t.size - best.size
            approx += cut
            new_ids = np.arange(len(lab_edge), len(lab_edge) + best.size)
            lab_edge.extend([f] * best.size)
            lab_parent.extend(int(ids[k]) for k in out_id[best])
            at_edge[f] = (new_ids, out_t[best], out_v[best], out_n[best])
            reached[E.j[f]] = True

    end_node = int(node0[-1] - 1)
    finals = [(int(n) if by_supports else 0, float(t), -float(v), int(l)) for e in into.get(end_node, ())
              if e in at_edge for l, t, v, n in zip(*at_edge[e])]
    stats = {"sites": n_sites, "nodes": int(node0[-1]), "spans_checked": int(checked), "spans_feasible": len(E.i),
             "labels": len(lab_edge), "runs": runs, "pruned": pruned, "resolution_cuts": approx}
    if not finals:
        raise _no_layout(plan, spec, heights, reached, blocked, fail_runs, site_ch)
    best = min(finals)[3]
    chain = []
    while best >= 0:
        chain.append(best)
        best = lab_parent[best]
    chain.reverse()
    return _layout(plan, E, [lab_edge[l] for l in chain], spec, mover, stats,
                   exact=not (over_cut and pruned) and not approx)


def _pareto(T: np.ndarray, V: np.ndarray, N: np.ndarray, by_supports: bool, res: float = 0.0):
    """The labels no other dominates: no later, no slower - or, with ``res`` > 0, at most
    ``res`` slower - and with ``by_supports`` no more spans; of equal labels the first.

    Returns ``(indices, cut)``: the kept labels in order of (spans,) time, and whether the
    resolution dropped a label the exact filter keeps.  With a resolution the kept labels
    are a thinning of the exact front (a label the exact filter drops has a dominator on
    the front, which is kept or dropped for a kept label no slower than it less ``res``).
    """
    order = np.lexsort((np.arange(T.size), -V, T, N if by_supports else np.zeros_like(N)))
    if not by_supports:
        v = V[order]
        prev = np.concatenate([[-np.inf], np.maximum.accumulate(v)[:-1]])
        front = order[v > prev]          # times rising, speeds rising
    else:
        kept: list[int] = []
        for k in order:
            if not any(T[q] <= T[k] and V[q] >= V[k] for q in kept):   # kept: no more spans, earlier in order
                kept.append(int(k))
        front = np.array(kept, dtype=int)
    if res == 0.0 or front.size < 2:
        return front, False
    thin: list[int] = []
    for k in front:
        # time objective: the last kept label is the fastest kept so far, and no later
        near = thin if by_supports else thin[-1:]
        if not any(T[q] <= T[k] and V[q] >= V[k] - res for q in near):
            thin.append(int(k))
    return np.array(thin, dtype=int), len(thin) < front.size


def _edge_points(plan: _Plan, E: _Edges, f: int, spec: CableSpec) -> np.ndarray:
    i, j = E.i[f], E.j[f]
    _, zp, _, _, _ = _span_geometry(plan, i, j, [E.ha[f]], [E.hb[f]], spec)
    di, dj = plan.site_dense[i], plan.site_dense[j]
    return np.ascontiguousarray(np.column_stack([plan.xy[di:dj + 1], zp[0, 0]]))


def _note_blocks(note: dict, plan, i, j, heights, cmin, cmax, ok, spec: CableSpec, L: float) -> None:
    """Keep, per site, the best near-miss of each kind: how close a span came."""
    if ok.any():
        note["ok"] = True
        return
    lo, hi = spec.clearance_m
    low = cmin < lo - _TOL
    high = cmax > hi + _TOL
    if (low & ~high).any():
        best = float(cmin[low & ~high].max())
        if best > note.get("low", (-math.inf,))[0]:
            a, b = np.unravel_index(np.argmax(np.where(low & ~high, cmin, -np.inf)), cmin.shape)
            note["low"] = (best, j, float(heights[i][a]), float(heights[j][b]), _tension_needed(plan, i, j, heights[i][a], heights[j][b], spec))
    if (high & ~low).any():
        best = float(cmax[high & ~low].min())
        if best < note.get("high", (math.inf,))[0]:
            note["high"] = (best, j)
    if (high & low).any():
        note["both"] = j


def _tension_needed(plan, i, j, ha, hb, spec: CableSpec) -> float | None:
    """Smallest horizontal tension (kN) at which this span's loaded path keeps the lower
    clearance (the deflection scales as 1/H); None when the chord itself is too low."""
    di, dj = plan.site_dense[i], plan.site_dense[j]
    d = plan.chain[di:dj + 1] - plan.chain[di]
    L = float(d[-1])
    za, zb = plan.ground[di] + ha, plan.ground[dj] + hb
    slope = (zb - za) / L
    room = za + slope * d - plan.ground[di:dj + 1] - spec.clearance_m[0]
    q = spec.cable_weight_n_m * math.hypot(1.0, slope)
    need = (spec.carrier_load_kn * 1e3 / L + q / 2.0) * d * (L - d)
    inner = slice(1, len(d) - 1)
    if (room[inner] <= 0).any() or room[0] < -_TOL or room[-1] < -_TOL:
        return None
    return float((need[inner] / room[inner]).max() / 1e3) if len(d) > 2 else 0.0


def _no_layout(plan, spec, heights, reached, blocked, fail_runs, site_ch) -> NoFeasibleLine:
    far = int(np.flatnonzero(reached).max())
    note, runs = blocked[far], fail_runs[far]
    lo, hi = spec.clearance_m
    at = f"from the site at station {site_ch[far]:.0f} m"
    parts, hints = [], []
    if note.get("low"):
        c, j, ha, hb, t_kn = note["low"]
        parts.append(f"the loaded path's clearance is {c:.2f} m at best, below the band {lo:g}-{hi:g} m "
                     f"(span to {site_ch[j]:.0f} m with heights {ha:g} m and {hb:g} m)")
        if c >= 0.0:
            hints.append(f"a lower clearance of {math.floor(c * 100) / 100:g} m")
        if t_kn is not None:
            hints.append(f"a tension of at least {math.ceil(t_kn * 10) / 10:g} kN")
        hints.append(f"taller supports than {spec.support_height_m[1]:g} m")
    if note.get("high"):
        c, j = note["high"]
        parts.append(f"the loaded path rises {c:.2f} m above the ground at best (span to {site_ch[j]:.0f} m), "
                     f"above the band's {hi:g} m")
        hints.append(f"an upper clearance of {math.ceil(c * 100) / 100:g} m or a longer --max-span")
    if note.get("ok"):
        for why, text in (("break_over", "the rope would lift off a support or break over it by more than "
                                          f"{spec.max_break_over_deg:g}°"),
                          ("stall", "the carrier stalls"), ("overspeed", "the carrier overspeeds")):
            if runs.get(why):
                parts.append(text)
        if runs.get("break_over"):
            hints.append("a larger --max-break-over or a finer station step")
        if runs.get("stall"):
            hints.append("less rolling resistance or a higher start speed")
        if runs.get("overspeed"):
            hints.append("a higher speed cap or a higher tension (a flatter path)")
        if not runs:
            parts.append("every span from it leads to a site from which none goes on")
    if not parts:
        parts.append(f"no span of at most {spec.max_span_m:g} m fits")
        hints.append("a longer --max-span")
    x, y = plan.xy[plan.site_dense[far]]
    reason = "stall" if runs.get("stall") and not runs.get("overspeed") else "limits"
    return NoFeasibleLine(f"no cable layout: {at} no span can be made: {'; '.join(parts)}; "
                          f"try {', or '.join(hints)}", reason=reason, closest=(float(x), float(y)))


def _layout(plan: _Plan, E: _Edges, edges: list[int], spec: CableSpec, mover: Mover, stats: dict, *,
            exact: bool) -> CableLayout:
    H, P = spec.cable_tension_kn * 1e3, spec.carrier_load_kn * 1e3
    supports, spans, pts, unl, grd, chn = [], [], [], [], [], []
    prof_parts = []
    v, t0, s0 = mover.v0, 0.0, 0.0

    def support(site, h):
        d = plan.site_dense[site]
        x, y = plan.xy[d]
        g = float(plan.ground[d])
        return SupportReport(float(plan.chain[d]), float(x), float(y), g, float(h), g + float(h))

    for n, f in enumerate(edges):
        i, j = E.i[f], E.j[f]
        if n == 0:
            supports.append(support(i, E.ha[f]))
        supports.append(support(j, E.hb[f]))
        di, dj = plan.site_dense[i], plan.site_dense[j]
        d = plan.chain[di:dj + 1] - plan.chain[di]
        sp = Span(float(d[-1]), supports[-2].top_z_m, supports[-1].top_z_m, H, P, spec.cable_weight_n_m)
        p3 = np.column_stack([plan.xy[di:dj + 1], sp.loaded_z(d)])
        r = run_span(p3, mover, v)
        clr = p3[:, 2] - plan.ground[di:dj + 1]
        k = int(np.argmin(clr))
        spans.append(SpanReport(n + 1, float(plan.chain[di]), float(plan.chain[dj]), sp.length_m, sp.chord_slope,
                                sp.midspan_deflection_m, float(clr[k]), float(plan.chain[di + k]), float(v),
                                r.exit_speed_m_s, r.time_s))
        first = 0 if n == 0 else 1
        pts.append(p3[first:]), unl.append(sp.unloaded_z(d)[first:]), grd.append(plan.ground[di:dj + 1][first:])
        chn.append(plan.chain[di:dj + 1][first:])
        prof_parts.append((r.profile, first, t0, s0))
        v, t0, s0 = r.exit_speed_m_s, t0 + r.time_s, s0 + float(r.profile.station_m[-1])
    return CableLayout(tuple(supports), tuple(spans), np.concatenate(pts), np.concatenate(unl), np.concatenate(grd),
                       np.concatenate(chn), _joined_profile(prof_parts), spec.clearance_m, spec.objective, exact,
                       stats)


def _joined_profile(parts) -> Profile:
    """One profile from the spans' profiles, stations and times running on."""
    def cat(name, shift=None):
        out = []
        for p, first, t0, s0 in parts:
            a = np.asarray(getattr(p, name))[first:]
            out.append(a + (t0 if shift == "t" else s0 if shift == "s" else 0.0))
        return np.concatenate(out)
    liftoff = np.concatenate([np.asarray(p.liftoff) + s0 for p, _, _, s0 in parts])
    overspeed = np.concatenate([np.asarray(p.overspeed) + s0 for p, _, _, s0 in parts])
    return Profile(points=cat("points"), station_m=cat("station_m", "s"), speed_m_s=cat("speed_m_s"),
                   time_s=cat("time_s", "t"), grade=cat("grade"), normal_ratio=cat("normal_ratio"),
                   stalled_at_m=None, liftoff=liftoff, overspeed=overspeed,
                   departing_speed_m_s=cat("departing_speed_m_s"))
