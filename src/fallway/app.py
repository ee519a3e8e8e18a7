"""Runs of a scenario: the one path the command line, batch runs and the demo share.

A :class:`~fallway.scenario.Scenario` is resolved once (:func:`resolve_site`: the DEM,
the points moved into its CRS, the keep-out read and moved too), handed to
:func:`fallway.routing.find_route` (or :func:`~fallway.routing.compare`,
:func:`~fallway.routing.reach`), and its outputs written as one
:class:`~fallway.export.OutputSet`: every file complete, or none.

The library never prints: these functions return what they did, and the caller (the
command line) says it.
"""

from __future__ import annotations

import dataclasses
import json
import re
from pathlib import Path

from .errors import ParameterError, TerrainError
from .params import checked_options

__all__ = ["Site", "resolve_site", "run_scenario", "write_scenario", "run_compare", "run_reach", "run_demo",
           "ROUTE_FILES", "CORE_FILES", "COMPARE_FILES", "DEMO_FILES"]

#: The files a route run writes (``outputs="full"``).
ROUTE_FILES = ("route.geojson", "route.gpkg", "route.dxf", "profile.csv", "stations.csv", "summary.json",
               "scenario.toml", "map.png", "map.svg",
               "profile.png", "profile.svg", "report.html",
               "profile.pdf")
#: The files of a batch run (``outputs="core"``).
CORE_FILES = ("summary.json", "route.geojson", "profile.csv")
#: The files ``compare`` writes.
COMPARE_FILES = ("comparison.csv", "comparison.png", "comparison.svg", "report.html")
#: The files the demo writes.
DEMO_FILES = ROUTE_FILES + ("reach.tif", "comparison.csv", "comparison.png", "comparison.svg")
#: The demo's folder for its second scenario, a cable line on supports (``sample_terrain/cable.toml``).
DEMO_CABLE_DIR = "cable"
#: Mean speed (m/s) below which a line counts as a crawl when the mover has no stall speed.
#: 1 cm/s, 100 s per metre: far below any chute, conveyor, slide or cable line in use, so
#: only a line that a real load would never finish (drag so high that the terminal speed
#: is tiny, friction that just balances the slope) is flagged.  A judgment, not a standard.
CRAWL_SPEED_M_S = 0.01
# the result names of a route run: every file it can write (run.json only with timings),
# so an overwrite also removes a stale run.json of an earlier run
_ROUTE_RESULTS = ROUTE_FILES + ("supports.csv", "spans.csv", "run.json",)


@dataclasses.dataclass(frozen=True, eq=False)
class Site:
    """A scenario's terrain, points and keep-out, all in one CRS.

    Attributes
    ----------
    terrain : Terrain or Path
        The loaded terrain (a geographic DEM reprojected to UTM, or a window asked
        for), or the GeoTIFF path (a projected DEM: the search plan reads its windows).
    start, end : (x, y)
        In the terrain's CRS (``end`` None for a reach).
    via : tuple of (x, y)
    keepout : Keepout or None
    crs : CRS
        The terrain's CRS.
    given_crs : CRS or str or None
        The CRS the scenario gave the points in (lon/lat: ``"EPSG:4326"``), for messages.
    """

    terrain: object
    start: tuple
    end: tuple | None
    via: tuple
    keepout: object
    crs: object
    given_crs: object = None


def load_area(dem, bounds, *, band: int | None = None, z_scale: float | None = None):
    """:func:`fallway.terrain.load_terrain` with a too-large area refused in plain terms."""
    from .terrain import load_terrain

    try:
        return load_terrain(dem, bounds=bounds, band=band or 1, z_scale=z_scale)
    except TerrainError as err:
        head, sep, tail = str(err).partition("; pass bounds=")
        if not sep:
            raise
        fit = re.search(r"about (\d+) m or more fits", tail)
        cells = f"{fit.group(1)} m cells or coarser fit" if fit else "coarser cells fit"
        raise TerrainError(f"{head}; the points span too large an area at this resolution: put them closer "
                           f"together, or resample the DEM first ({cells}; e.g. gdalwarp -tr N N in.tif out.tif)"
                           ) from err


def _load_covering(sc, points, labels=None):
    """The scenario's DEM around (x, y) points in its own CRS (all of it for a geographic DEM or no points).

    ``labels`` name the points for the message when one lies outside the DEM (default:
    the candidate lines, which are refused only when they miss the DEM entirely).
    """
    from .points import dem_header

    head = dem_header(sc.dem)
    bounds = None
    if points and not head["crs"].is_geographic:
        xs = [float(p[0]) for p in points]
        ys = [float(p[1]) for p in points]
        left, bottom, right, top = head["bounds"]
        where = f"{sc.dem} (its bounds are {left:.6g}, {bottom:.6g}, {right:.6g}, {top:.6g} in its CRS)"
        if labels is not None:
            for label, x, y in zip(labels, xs, ys):
                if not (left <= x <= right and bottom <= y <= top):
                    raise TerrainError(f"{label} ({x:.3f}, {y:.3f}) lies outside {where}; give a point on the DEM")
        elif max(xs) < left or min(xs) > right or max(ys) < bottom or min(ys) > top:
            raise TerrainError(f"the candidate lines lie outside {where}; check the lines' CRS")
        bounds = (min(xs), min(ys), max(xs), max(ys))
    return load_area(sc.dem, bounds, band=sc.band, z_scale=sc.z_scale)


def _point_labels(sc) -> list[str]:
    return (["start"] + [f"via point {i}" for i in range(1, len(sc.via) + 1)]
            + (["end"] if sc.end is not None else []))


def resolve_site(sc, *, need_end: bool = True, need_start: bool = True, cover=None, load: bool = False) -> Site:
    """The scenario's DEM, points and keep-out in one CRS (the one place that does this).

    Parameters
    ----------
    sc : Scenario
    need_end : bool
        A route needs an end point; a reach does not.
    need_start : bool
        False for a comparison of given lines (no points: the terrain covers ``cover``).
    cover : sequence of (x, y), optional
        More points, in the DEM's CRS, that the terrain must hold (candidate lines);
        implies ``load``.
    load : bool
        Load the terrain around the points now (otherwise a projected DEM is passed on as
        its path, and the search plan reads the windows it needs).  A geographic DEM is
        always loaded (reprojected to its UTM zone), and so is a DEM read from another
        band than the first or with a given height scale (``sc.band``, ``sc.z_scale``).

    Warns
    -----
    InputWarning
        The DEM has several bands and the scenario names none: band 1 is read.
    """
    import warnings

    from .errors import InputWarning
    from .points import WGS84, dem_header, to_terrain_crs

    if sc.dem is None:
        raise ParameterError("no DEM given: pass it as the first argument or as dem in the scenario")
    head = dem_header(sc.dem)
    if sc.band is None and head["count"] > 1:
        warnings.warn(InputWarning(f"{sc.dem} has {head['count']} bands; heights are read from band 1 "
                                   "(--band N, or band in the scenario, to choose another)"), stacklevel=2)
    if not need_start:
        terrain = _load_covering(sc, cover or ())
        keepout = _keepout(sc, terrain.crs)
        return Site(terrain=terrain, start=None, end=None, via=(), keepout=keepout, crs=terrain.crs)
    if sc.start is None:
        raise ParameterError("no start point: pass --start X Y or set points.start in the scenario")
    if need_end and sc.end is None:
        raise ParameterError("no end point: pass --end X Y or set points.end in the scenario")
    src_crs = head["crs"]
    pts = [sc.start] + list(sc.via) + ([sc.end] if sc.end is not None else [])
    given = WGS84 if (sc.lonlat or src_crs.is_geographic) else src_crs
    load = load or (sc.band or 1) != 1 or sc.z_scale is not None
    if src_crs.is_geographic or load or cover:
        more = [tuple(map(float, p)) for p in (cover or ())]
        if need_end:
            covered = to_terrain_crs(pts, given, src_crs) + more
            labels = _point_labels(sc) + ["a candidate line"] * len(more)
        else:  # a reach maps the whole DEM
            covered, labels = more, None
        terrain = _load_covering(sc, covered, labels)
        crs = terrain.crs
    else:
        terrain = Path(sc.dem)
        crs = src_crs
    pts = to_terrain_crs(pts, given, crs)
    keepout = _keepout(sc, crs)
    end = pts[-1] if sc.end is not None else None
    return Site(terrain=terrain, start=pts[0], end=end, via=tuple(pts[1:1 + len(sc.via)]), keepout=keepout, crs=crs,
                given_crs=given)


def _keepout(sc, crs):
    """The scenario's keep-out areas in ``crs`` (None without a keep-out file)."""
    from .keepout import Keepout

    if sc.keepout is None:
        return None
    return Keepout.from_file(sc.keepout, layer=sc.keepout_layers or None).in_crs(crs)


def _route_of(sc, site: Site, *, robust: bool):
    from .routing import find_route

    if robust and sc.mu_range is None:
        raise ParameterError("a robust line needs a friction range: --mu-range LO HI (or envelope.mu_range)")
    route = find_route(site.terrain, site.start, site.end, sc.mover, via=site.via, limits=sc.limits,
                       keepout=site.keepout, line=sc.line, search=sc.search, refine=sc.refine, mu_range=sc.mu_range,
                       robust=robust, points_crs=site.given_crs)
    _warn_if_crawling(route)
    return route


def _warn_if_crawling(route) -> None:
    """A :class:`~fallway.errors.CrawlWarning` when the line's mean speed is below :data:`CRAWL_SPEED_M_S`.

    Why a warning and not a stall speed above zero by default: a default stall speed
    would change the numbers of every existing scenario silently, and it would not even
    catch the case -- a mover stalls where it *slows* below the stall speed, and one
    held near a tiny terminal speed by drag never gets above it to slow down (the
    ``--drag 1e9`` line: 57 m in 1e6 s).  The warning changes no number and says what
    is wrong.
    """
    import warnings

    from .errors import CrawlWarning

    s = route.summary
    t, length = s.travel_time_s, s.length_m
    if t is None or not t > 0:
        return
    mean = length / t
    if mean < CRAWL_SPEED_M_S:
        m = route.mover
        warnings.warn(CrawlWarning(
            f"the line crawls: {length:.1f} m in {t:.0f} s, a mean speed of {mean:.2g} m/s; no real load would "
            f"finish it: check the drag ({m.drag:g} 1/m) and friction ({m.mu:g})"), stacklevel=2)


@checked_options
def run_scenario(sc, out_dir, *, overwrite: bool = False, robust: bool = False, timings: bool = False,
                 outputs: str = "full"):
    """Find the scenario's route and write its outputs; returns ``(route, written file names)``.

    Parameters
    ----------
    sc : Scenario
    out_dir : path
    overwrite : bool
        Replace results already in ``out_dir``.
    robust : bool
        The robust plan over the scenario's friction range.
    timings : bool
        Also write ``run.json`` with the seconds of computing per stage.
    outputs : {"full", "core"}
        Every route output (:data:`ROUTE_FILES`), or the batch set (:data:`CORE_FILES`).
    """
    from .export import OutputSet

    if outputs not in ("full", "core"):
        raise ParameterError(f"outputs must be 'full' or 'core', got {outputs!r}")
    names = _ROUTE_RESULTS if outputs == "full" else CORE_FILES
    with OutputSet(out_dir, overwrite=overwrite, result_names=names) as outs:  # refuses early, before the work
        return write_scenario(outs, sc, robust=robust, timings=timings, outputs=outputs)


def write_scenario(outs, sc, *, robust: bool = False, timings: bool = False, outputs: str = "full"):
    """Find the scenario's route and write it into an open output set; returns ``(route, names)``."""
    route = _route_of(sc, resolve_site(sc), robust=robust)
    return route, write_route(outs, sc, route, timings=timings, core_only=outputs == "core")


def write_route(outs, sc, route, *, reach=None, comparison=None, timings: bool = False, core_only: bool = False):
    """Every output file of one route into an open output set; returns the names written."""
    from .export import reproducible_figures

    with reproducible_figures():
        return _write_route(outs, sc, route, reach=reach, comparison=comparison, timings=timings,
                            core_only=core_only)


def _write_route(outs, sc, route, *, reach, comparison, timings, core_only):
    from . import export, plot, report
    from .cad import write_route_dxf
    from .stations import station_table

    terrain = route.terrain
    if timings:
        with export.atomic_write(outs.path("run.json")) as fh:
            fh.write(json.dumps(export.to_jsonable(route.compute_s), sort_keys=True, indent=2) + "\n")
    extra = {"scenario": sc.to_dict()}
    if route.envelope is not None:
        extra["friction_envelope"] = {"mu_range": list(sc.mu_range), **route.envelope.columns()}
    export.write_summary_json(route, outs.path("summary.json"), extra=extra, crs=terrain.crs)
    export.write_route_geojson(route, outs.path("route.geojson"), terrain.crs)
    export.write_profile_csv(route, terrain, outs.path("profile.csv"))
    if core_only:
        return sorted(outs._names)
    export.write_route_gpkg(route, outs.path("route.gpkg"), terrain.crs)
    supports, marks = _support_marks(route)
    stations = station_table(route, sc.station_step_m, extra=marks)
    export.write_stations_csv(stations, outs.path("stations.csv"))
    write_route_dxf(route, outs.path("route.dxf"), stations, supports=supports)
    if route.cable is not None:  # a cable line's supports and spans (fallway.cable)
        from .cable_export import write_spans_csv, write_supports_csv
        write_supports_csv(route.cable, outs.path("supports.csv"))
        write_spans_csv(route.cable, outs.path("spans.csv"))
    with export.atomic_write(outs.path("scenario.toml")) as fh:
        fh.write(sc.to_toml())
    ax = plot.plot_map(terrain, route, reach=reach, keepout=route.keepout)
    plot.save_figure(ax.figure, outs.path("map.png"))
    outs.path("map.svg")
    ax = plot.plot_profile(route, terrain)
    plot.save_figure(ax.figure, outs.path("profile.png"))
    outs.path("profile.svg")
    from .longsection import write_profile_pdf

    write_profile_pdf(route, terrain, outs.path("profile.pdf"), name=_run_name(sc), dem=sc.dem,
                      mu_range=sc.mu_range)
    cmp_png = None
    if comparison is not None:
        comparison.to_csv(outs.path("comparison.csv"))
        plot.save_figure(plot.comparison_figure(terrain, comparison, keepout=route.keepout),
                         outs.path("comparison.png"))
        outs.path("comparison.svg")
        cmp_png = outs.path("comparison.png")
    params = sc.to_dict()  # the friction envelope is the report's headline (and in summary.json)
    report.write_report_html(route, terrain, outs.path("report.html"), map_png=outs.path("map.png"),
                             profile_png=outs.path("profile.png"), parameters=params, stations=stations,
                             comparison=comparison, comparison_png=cmp_png)
    return sorted(outs._names)


def _run_name(sc) -> str:
    """The run's name on its sheets and report (a scenario has no name field: its DEM names it)."""
    return f"Route on {Path(sc.dem).name}" if sc.dem else "fallway route"


@checked_options
def run_compare(sc, lines_path, out_dir, *, overwrite: bool = False, refine: bool = True, optimum: bool = True,
                lines_layers=()):
    """Time and rank the candidate lines of a file on the scenario's DEM; returns the Comparison.

    ``lines_layers``: the layers of the lines file to read (default every line layer).
    """
    from . import plot, report
    from .export import OutputSet, reproducible_figures
    from .points import dem_crs
    from .routing import compare
    from .vector import read_lines

    if sc.dem is None:
        raise ParameterError("no DEM given: pass it as the first argument or as dem in the scenario")
    src = dem_crs(sc.dem)
    with OutputSet(out_dir, overwrite=overwrite, result_names=COMPARE_FILES) as outs:
        layer = tuple(lines_layers) or None
        lines = read_lines(lines_path, crs=src, layer=layer)
        site = resolve_site(sc, need_start=False, cover=[tuple(p[:2]) for _, line in lines for p in line])
        terrain = site.terrain
        if terrain.crs != src:
            lines = read_lines(lines_path, crs=terrain.crs, layer=layer)
        cmp = compare(terrain, lines, sc.mover, limits=sc.limits, keepout=site.keepout, optimum=optimum,
                      search=sc.search, refine=refine, mu_range=sc.mu_range)
        cmp.to_csv(outs.path("comparison.csv"))
        with reproducible_figures():
            plot.save_figure(plot.comparison_figure(terrain, cmp, keepout=site.keepout), outs.path("comparison.png"))
        outs.path("comparison.svg")
        report.write_comparison_html(cmp, outs.path("report.html"), comparison_png=outs.path("comparison.png"),
                                     parameters=sc.to_dict())
    return cmp


@checked_options
def run_reach(sc, out_path, *, overwrite: bool = False, max_time_s: float | None = None,
              max_distance_m: float | None = None, plot: bool = True):
    """Map arrival time and speed from the scenario's start; returns the ReachMap.

    Writes the GeoTIFF and, with ``plot``, its site map beside it (same name, ``.png``):
    the isochrones on the hillshade, zoomed to the reachable area.
    """
    from .export import OutputSet, write_reach_geotiff
    from .routing import reach

    out = Path(out_path)
    if out.suffix.lower() not in (".tif", ".tiff"):
        raise ParameterError(f"the reach map is a GeoTIFF: give --out a .tif name, not {out.name!r}")
    names = (out.name, out.with_suffix(".png").name) if plot else (out.name,)
    # one output set: the raster (and its map) appear complete or not at all, also on Ctrl-C
    with OutputSet(out.parent, overwrite=overwrite, result_names=names) as outs:
        site = resolve_site(sc, need_end=False, load=max_time_s is None and max_distance_m is None)
        rm = reach(site.terrain, site.start, sc.mover, limits=sc.limits, keepout=site.keepout, search=sc.search,
                   max_time_s=max_time_s, max_distance_m=max_distance_m, points_crs=site.given_crs)
        write_reach_geotiff(rm, outs.path(out.name))
        if plot:
            _write_reach_map(sc, site, rm, outs.path(names[1]))
    return rm


def _write_reach_map(sc, site, rm, path):
    """The reach map's PNG: isochrones on the terrain under the reach map's own grid."""
    from . import plot
    from .export import reproducible_figures
    from .terrain import Terrain

    terrain = site.terrain
    if not isinstance(terrain, Terrain):  # a windowed search read only the area it reached
        rows, cols = rm.time_s.shape
        tr = rm.transform
        xs = sorted((tr.c, tr.c + cols * tr.a))
        ys = sorted((tr.f, tr.f + rows * tr.e))
        terrain = load_area(sc.dem, (xs[0], ys[0], xs[1], ys[1]), band=sc.band, z_scale=sc.z_scale)
    with reproducible_figures():
        ax = plot.plot_map(terrain, reach=rm, keepout=site.keepout)
        plot.save_figure(ax, path, formats=("png",))


@checked_options
def _support_marks(route) -> tuple[list, list]:
    """A cable line's supports for the drawing, ``(x, y, top z, label)``, and as stations of
    the chainage table, ``(station along the loaded path, label)``; empty for other lines."""
    if route.cable is None:
        return [], []
    from .cable.route import support_stations

    sup = route.cable.supports
    labels = ["start station"] + [f"support {i}" for i in range(1, len(sup) - 1)] + ["end station"]
    marks = list(zip(support_stations(route), labels))
    return [(s.x, s.y, s.top_z_m, label) for s, label in zip(sup, labels)], marks


def run_demo(out_dir, *, overwrite: bool = False):
    """The whole job on the bundled, invented sample site: the chute scenario (route, reach,
    comparison) in ``out_dir`` and the cable-line scenario in ``out_dir/cable``; returns
    ``(route, comparison, written, cable_route)``."""
    from importlib.resources import as_file, files

    from .export import OutputSet, write_reach_geotiff
    from .points import dem_crs
    from .routing import compare, reach
    from .scenario import load_scenario
    from .vector import read_lines

    with as_file(files("fallway.sample_terrain")) as site_dir:
        sc = load_scenario(Path(site_dir) / "scenario.toml")
        lines_path = Path(site_dir) / "lines.geojson"
        cover = [tuple(p[:2]) for _, line in read_lines(lines_path, crs=dem_crs(sc.dem)) for p in line]
        with OutputSet(out_dir, overwrite=overwrite, result_names=DEMO_FILES, result_dirs=(DEMO_CABLE_DIR,)) as outs:
            # the second scenario: a cable line from the bench lip to the valley hopper, in its own folder
            cable_sc = load_scenario(Path(site_dir) / "cable.toml")
            cable_route = _route_of(cable_sc, resolve_site(cable_sc), robust=False)
            with OutputSet(outs.path(DEMO_CABLE_DIR), result_names=_ROUTE_RESULTS, make_parents=False) as couts:
                write_route(couts, cable_sc, cable_route)
            site = resolve_site(sc, cover=cover)
            route = _route_of(sc, site, robust=False)
            terrain = route.terrain
            rm = reach(terrain, tuple(route.line[0, :2]), sc.mover, limits=sc.limits, keepout=site.keepout,
                       search=sc.search)
            write_reach_geotiff(rm, outs.path("reach.tif"))
            lines = read_lines(lines_path, crs=terrain.crs)
            cmp = compare(terrain, lines, sc.mover, limits=sc.limits, keepout=site.keepout, mu_range=sc.mu_range,
                          route=route)
            written = write_route(outs, sc, route, reach=rm, comparison=cmp)
    return route, cmp, written, cable_route
