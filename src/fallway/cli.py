"""The ``fallway`` command line: thin click commands over the library.

Each command parses its options, builds a :class:`fallway.scenario.Scenario`, calls the
library and prints.  Library errors are translated here, at the edge, into one line on
stderr and an exit code: 0 success, 1 a clear error, 2 usage, 3 no feasible line.
"""

from __future__ import annotations

import contextlib
import functools
import logging
import warnings
import os
import re
import signal
import socket
import sys
import threading
from pathlib import Path

import click

from . import __version__
from .errors import FallwayError, NoFeasibleLine, RefinementWarning

log = logging.getLogger("fallway")

EXIT_ERROR = 1
EXIT_NO_LINE = 3


# --------------------------------------------------------------------------- helpers
def _fail(message: str, code: int) -> None:
    click.echo(f"fallway: error: {message}", err=True)
    sys.exit(code)


_INTERRUPTED = "interrupted; no partial outputs were left"


@contextlib.contextmanager
def _sigint_exits():
    """Ctrl-C (SIGINT) removes the temporary outputs and exits 130 at once.

    The search runs in compiled code that a KeyboardInterrupt must not unwind (numba
    turns it into a crash), so SIGINT is not raised in the main thread: Python's C
    handler wakes a watcher thread through :func:`signal.set_wakeup_fd`, which removes
    the temporary folders of the output sets being written (waiting for a commit in
    progress) and ends the process.  Only in the main thread, and only while SIGINT has
    Python's default handler.
    """
    if (threading.current_thread() is not threading.main_thread()
            or signal.getsignal(signal.SIGINT) is not signal.default_int_handler):
        yield
        return
    rsock, wsock = socket.socketpair()
    wsock.setblocking(False)
    try:
        old_fd = signal.set_wakeup_fd(wsock.fileno(), warn_on_full_buffer=False)
    except (ValueError, OSError):
        rsock.close()
        wsock.close()
        yield
        return

    def watch() -> None:
        while True:
            try:
                data = rsock.recv(64)
            except OSError:
                return
            if not data or 0 in data:  # closed, or the stop byte
                return
            if signal.SIGINT in data:
                from .export import abort_active_outputs

                abort_active_outputs()
                with contextlib.suppress(Exception):
                    sys.stderr.write(f"fallway: error: {_INTERRUPTED}\n")
                    sys.stderr.flush()
                os._exit(130)

    old_handler = signal.signal(signal.SIGINT, lambda signum, frame: None)
    watcher = threading.Thread(target=watch, name="fallway-sigint", daemon=True)
    watcher.start()
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, old_handler)
        signal.set_wakeup_fd(old_fd)
        with contextlib.suppress(OSError):
            wsock.send(b"\0")
        watcher.join(timeout=1.0)
        rsock.close()
        wsock.close()


def _guard(fn):
    """Translate library errors into one-line messages and exit codes."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        try:
            with _sigint_exits(), warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", RefinementWarning)
                try:
                    return fn(*args, **kwargs)
                finally:
                    for w in caught:  # library warnings become one log line each
                        log.warning("%s", str(w.message).splitlines()[0])
        except NoFeasibleLine as err:
            msg = str(err)
            if err.closest is not None:
                msg += f" (closest reach: x={err.closest[0]:.1f}, y={err.closest[1]:.1f})"
            _fail(msg, EXIT_NO_LINE)
        except FallwayError as err:
            _fail(str(err).splitlines()[0] if str(err) else type(err).__name__, EXIT_ERROR)
        except KeyboardInterrupt:
            _fail(_INTERRUPTED, 130)
        except MemoryError:
            _fail("out of memory; put the points closer together or resample the DEM coarser first "
                  "(e.g. gdalwarp -tr 10 10 in.tif out.tif)", EXIT_ERROR)
        except click.exceptions.Exit:
            raise
        except click.ClickException:
            raise
        except Exception as err:  # a bug: still one line, the traceback only with -v
            if log.isEnabledFor(logging.DEBUG):
                raise
            _fail(f"unexpected {type(err).__name__}: {err} (run with -v for details and please report it)", EXIT_ERROR)

    return wrapper


def _setup_logging(quiet: bool, verbose: int) -> None:
    level = logging.WARNING
    if quiet:
        level = logging.ERROR
    elif verbose >= 2:
        level = logging.DEBUG
    elif verbose == 1:
        level = logging.INFO
    logging.basicConfig(level=level, format="fallway: %(message)s", stream=sys.stderr, force=True)
    # GDAL's own warnings (e.g. about a damaged file) only with -v: the one-line error says it
    logging.getLogger("rasterio").setLevel(logging.NOTSET if verbose else logging.ERROR)


def _stages(total: int, quiet: bool):
    """A stage progress bar on stderr, silent when stderr is not a terminal."""
    from tqdm import tqdm

    return tqdm(total=total, file=sys.stderr, leave=False, unit="stage",
                disable=quiet or not sys.stderr.isatty(), bar_format="{desc} {bar} {n}/{total}")


class _FloatPair(click.ParamType):
    name = "X Y"


def _common_options(fn):
    """Physics, limit and line options shared by route, reach and compare."""
    opts = [
        click.option("--scenario", "scenario_path", type=click.Path(dir_okay=False), help="TOML scenario; flags override it."),
        click.option("--lonlat", is_flag=True, default=None, help="Points are WGS 84 longitude latitude, whatever the DEM's CRS."),
        click.option("--mu", type=float, help="Coulomb friction coefficient (sliding or rolling)."),
        click.option("--drag", type=float, help="Quadratic drag coefficient k in 1/m (rho*Cd*A/2m)."),
        click.option("--v0", type=float, help="Speed at the start, m/s."),
        click.option("--g", "gravity", type=float, help="Acceleration of gravity, m/s² (default 9.80665)."),
        click.option("--normal", type=click.Choice(["gravity", "full"]), help="Normal-force model (default full)."),
        click.option("--neighbours", type=click.Choice(["8", "16", "32"]), help="Lattice stencil (default 16)."),
        click.option("--label-cap", type=click.IntRange(min=1), help="Approximate search: keep at most N labels per "
                     "cell (faster on large rough DEMs; summary search_exact says if it mattered)."),
        click.option("--min-grade", type=float, help="Smallest descent grade of any segment (0.05 = 5 % falling)."),
        click.option("--max-grade", type=float, help="Largest descent grade of any segment."),
        click.option("--max-speed", type=float, help="Speed limit, m/s."),
        click.option("--stall-speed", type=float, help="The mover stops below this speed, m/s."),
        click.option("--max-step-turn", "max_turn", type=float, help="Largest change of heading from one lattice step to the next, degrees (a search limit; the refined line is held by --min-radius)."),
        click.option("--keepout", "keepout_path", type=click.Path(dir_okay=False), help="GeoJSON or GeoPackage of no-go polygons."),
        click.option("-q", "--quiet", is_flag=True, help="Print errors only."),
        click.option("-v", "--verbose", count=True, help="More log output (-vv for debug)."),
    ]
    for opt in reversed(opts):
        fn = opt(fn)
    return fn


def _overrides(dem, start, end, via, lonlat, mu, drag, v0, gravity, normal, neighbours,
               min_grade, max_grade, max_speed, stall_speed, max_turn, keepout_path, label_cap=None, **extra) -> dict:
    """The flags given on the command line, in the scenario's nested layout."""
    d: dict = {"points": {}, "mover": {}, "limits": {}, "search": {}, "line": {}, "envelope": {}}
    if dem is not None:
        d["dem"] = str(dem)
    if keepout_path is not None:
        d["keepout"] = str(keepout_path)
    if start:
        d["points"]["start"] = list(start)
    if end:
        d["points"]["end"] = list(end)
    if via:
        d["points"]["via"] = [list(p) for p in via]
    if lonlat:
        d["points"]["lonlat"] = True
    for key, val in (("mu", mu), ("drag", drag), ("v0", v0), ("g", gravity), ("normal", normal),
                     ("max_speed", max_speed), ("stall_speed", stall_speed)):
        if val is not None:
            d["mover"][key] = val
    for key, val in (("min_grade", min_grade), ("max_grade", max_grade), ("max_step_turn_deg", max_turn),
                     ("min_radius_m", extra.get("min_radius"))):
        if val is not None:
            d["limits"][key] = val
    if neighbours is not None:
        d["search"]["neighbours"] = int(neighbours)
    if label_cap is not None:
        d["search"]["label_cap"] = int(label_cap)
    if extra.get("no_refine"):
        d["search"]["refine"] = False
    for key in ("kind", "clearance", "start_height", "end_height"):
        if extra.get(key) is not None:
            d["line"][key] = list(extra[key]) if key == "clearance" else extra[key]
    if extra.get("mu_range") is not None:
        d["envelope"]["mu_range"] = list(extra["mu_range"])
    return d


def _merge(base: dict, over: dict) -> dict:
    out = {k: (dict(v) if isinstance(v, dict) else v) for k, v in base.items()}
    for k, v in over.items():
        if isinstance(v, dict):
            out.setdefault(k, {})
            out[k].update(v)
        else:
            out[k] = v
    return {k: v for k, v in out.items() if v != {}}


def _resolve(scenario_path, overrides: dict):
    """Scenario file (if any) + flags -> validated Scenario."""
    from .scenario import Scenario, load_scenario

    base: dict = {}
    base_dir = None
    if scenario_path is not None:
        base = load_scenario(scenario_path).to_dict()
    return Scenario.from_dict(_merge(base, overrides), base_dir=base_dir)


def _load_terrain_cli(dem, bounds):
    """:func:`load_terrain`, with a too-large area refused in command-line terms."""
    from .errors import TerrainError
    from .terrain import load_terrain

    try:
        return load_terrain(dem, bounds=bounds)
    except TerrainError as err:
        head, sep, tail = str(err).partition("; pass bounds=")
        if not sep:
            raise
        fit = re.search(r"about (\d+) m or more fits", tail)
        cells = f"{fit.group(1)} m cells or coarser fit" if fit else "coarser cells fit"
        raise TerrainError(f"{head}; the points span too large an area at this resolution: put them closer "
                           f"together, or resample the DEM first ({cells}; e.g. gdalwarp -tr N N in.tif out.tif)"
                           ) from err


def _prepare(sc, *, need_end: bool, cover=None):
    """Load the terrain around the scenario's points and move the points into its CRS.

    ``cover``: more (x, y) points, in the DEM's CRS, that the loaded area must hold.
    """
    from .errors import ParameterError
    from .points import WGS84, dem_crs, to_terrain_crs

    if sc.dem is None:
        raise ParameterError("no DEM given: pass it as the first argument or as dem in the scenario")
    if sc.start is None:
        raise ParameterError("no start point: pass --start X Y or set points.start in the scenario")
    if need_end and sc.end is None:
        raise ParameterError("no end point: pass --end X Y or set points.end in the scenario")
    src_crs = dem_crs(sc.dem)
    pts = [sc.start] + list(sc.via) + ([sc.end] if sc.end is not None else [])
    if sc.lonlat or src_crs.is_geographic:
        src = WGS84
    else:
        src = src_crs
    bounds = None
    if need_end and not src_crs.is_geographic:
        native = to_terrain_crs(pts, src, src_crs) + [tuple(map(float, p)) for p in (cover or ())]
        xs = [p[0] for p in native]
        ys = [p[1] for p in native]
        bounds = (min(xs), min(ys), max(xs), max(ys))
    terrain = _load_terrain_cli(sc.dem, bounds)
    pts = to_terrain_crs(pts, src, terrain.crs)
    start = pts[0]
    end = pts[-1] if sc.end is not None else None
    via = tuple(pts[1:1 + len(sc.via)])
    keepout = None
    if sc.keepout is not None:
        from .keepout import Keepout

        keepout = Keepout.from_file(sc.keepout).in_crs(terrain.crs)
    return terrain, start, end, via, keepout


# --------------------------------------------------------------------------- commands
@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="fallway")
def main() -> None:
    """Minimum-time gravity descent lines across terrain (GeoTIFF DEMs).

    A preliminary layout aid: have every line checked by a qualified engineer.
    """


_point_opt = functools.partial(click.option, type=(float, float), metavar="X Y")


@main.command()
@click.argument("dem", required=False, type=click.Path(dir_okay=False))
@_point_opt("--start", help="Loading point (map coordinates of the DEM, or lon lat with --lonlat).")
@_point_opt("--end", help="Discharge point.")
@_point_opt("--via", multiple=True, help="A point the line must pass (repeatable, in order).")
@_common_options
@click.option("--line", "kind", type=click.Choice(["ground", "raised"]), help="On the ground, or raised (cable/trestle).")
@click.option("--clearance", type=(float, float), metavar="MIN MAX", help="Raised line: height band above ground, m.")
@click.option("--start-height", type=float, help="Raised line: height above ground at the start, m.")
@click.option("--end-height", type=float, help="Raised line: height above ground at the end, m.")
@click.option("--min-radius", type=float, help="Smallest bend radius of the refined line, m.")
@click.option("--no-refine", is_flag=True, help="Report the lattice line only.")
@click.option("--mu-range", type=(float, float), metavar="LO HI", help="Friction range to check the line against.")
@click.option("--robust", is_flag=True, help="With --mu-range: the fastest line that works across the whole range.")
@click.option("--large", is_flag=True, help="Large DEM: coarse search, then the fine grid in a widening corridor "
              "(only the corridor is read).")
@click.option("--coarse", "coarse_factor", type=click.IntRange(min=1), help="With --large: coarsening factor "
              "(default: about 250 k coarse cells).")
@click.option("--corridor", "corridor_m", type=click.FloatRange(min=0.0, min_open=True),
              help="With --large: first corridor half-width, m (doubled until the time stops improving).")
@click.option("--exact", is_flag=True, help="With --large: search the whole area on the fine grid when it fits.")
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False), help="Output folder.")
@click.option("--overwrite", is_flag=True, help="Replace results already in the output folder.")
@click.option("--timings", is_flag=True,
              help="Also write run.json with wall-clock figures (search seconds). summary.json and "
                   "route.geojson never hold them: the same inputs give byte-identical files.")
@_guard
def route(out_dir, overwrite, scenario_path, quiet, verbose, robust, timings, large, coarse_factor, corridor_m,
          exact, **opts):
    """Find the minimum-time line from --start to --end on DEM and write it to --out.

    Writes route.geojson, route.gpkg, profile.csv, summary.json, scenario.toml, map and
    profile figures and report.html; all appear together or not at all (also on Ctrl-C).
    """
    _setup_logging(quiet, verbose)
    sc = _resolve(scenario_path, _overrides(**opts))
    if robust and sc.mu_range is None:
        raise click.UsageError("--robust needs a friction range: --mu-range LO HI (or envelope.mu_range)")
    from .export import OutputSet

    if (coarse_factor or corridor_m or exact) and not large:
        raise click.UsageError("--coarse, --corridor and --exact go with --large")
    if large and robust:
        raise click.UsageError("--robust and --large cannot be combined yet; run --large, then compare")
    with OutputSet(out_dir, overwrite=overwrite) as outs:  # refuses early, before the work
        if large:
            r, terrain, keepout = _run_route_large(sc, quiet=quiet, coarse_factor=coarse_factor,
                                                   corridor_m=corridor_m, exact=exact)
        else:
            r, terrain, keepout = _run_route(sc, quiet=quiet, robust=robust)
        env = _envelope(sc, r, terrain, keepout)
        written = _write_route(outs, sc, r, terrain, keepout, envelope=env, timings=timings)
    if not quiet:
        _print_route(r, out_dir, written, env)


def _run_route(sc, *, quiet: bool, robust: bool = False, cover=None):
    from .route import find_route

    bar = _stages(3, quiet)
    try:
        bar.set_description("loading terrain")
        terrain, start, end, via, keepout = _prepare(sc, need_end=True, cover=cover)
        bar.update()
        bar.set_description("searching and refining")
        kw = dict(via=via, neighbours=sc.neighbours, limits=sc.limits, keepout=keepout, line=sc.line,
                  refine=sc.refine, clearance=sc.clearance, start_height=sc.start_height, end_height=sc.end_height,
                  max_per_cell=sc.label_cap)
        if robust:
            from .compare import robust_route

            rr = robust_route(terrain, start, end, sc.mover, *sc.mu_range, **kw)
            r = rr.route
            log.info("robust line by the %s method%s", rr.method, f" ({rr.note})" if rr.note else "")
        else:
            r = find_route(terrain, start, end, sc.mover, **kw)
        bar.update()
        return r, terrain, keepout
    finally:
        bar.close()


def _native_points(sc):
    """The scenario's points in the DEM's own CRS (for the large-terrain path)."""
    from .errors import ParameterError
    from .points import WGS84, dem_crs, to_terrain_crs

    if sc.dem is None or sc.start is None:
        raise ParameterError("give a DEM and --start (and --end for a route)")
    crs = dem_crs(sc.dem)
    if crs.is_geographic:
        raise ParameterError("--large and the reach cut-offs need a projected DEM; reproject it first "
                             "(e.g. gdalwarp -t_srs EPSG:326NN) or leave them out")
    src = WGS84 if sc.lonlat else crs
    pts = [sc.start] + list(sc.via) + ([sc.end] if sc.end is not None else [])
    pts = to_terrain_crs(pts, src, crs)
    keepout = None
    if sc.keepout is not None:
        from .keepout import Keepout

        keepout = Keepout.from_file(sc.keepout).in_crs(crs)
    end = pts[-1] if sc.end is not None else None
    return pts[0], end, tuple(pts[1:1 + len(sc.via)]), keepout


def _run_route_large(sc, *, quiet: bool, coarse_factor, corridor_m, exact):
    from .errors import ParameterError
    from .scale import find_route_large
    from .terrain import load_terrain

    start, end, via, keepout = _native_points(sc)
    if end is None:
        raise ParameterError("no end point: pass --end X Y or set points.end in the scenario")
    bar = _stages(2, quiet)
    try:
        bar.set_description("coarse search, corridor search, refinement")
        r = find_route_large(sc.dem, start, end, sc.mover, via=via, keepout=keepout, coarse_factor=coarse_factor,
                             corridor_m=corridor_m, exact=exact, neighbours=sc.neighbours, limits=sc.limits,
                             line=sc.line, refine=sc.refine, clearance=sc.clearance, start_height=sc.start_height,
                             end_height=sc.end_height, max_per_cell=sc.label_cap)
        bar.update()
        info = r.summary.get("scale", {})
        bounds = info.get("window_bounds") or info.get("area_bounds")
        terrain = load_terrain(sc.dem, bounds=tuple(bounds) if bounds else None, margin_m=0.0)
        bar.update()
        return r, terrain, keepout
    finally:
        bar.close()


def _envelope(sc, r, terrain, keepout):
    """The route's line at the low, nominal and high friction of the scenario's range."""
    if sc.mu_range is None:
        return None
    from .compare import envelope

    return envelope(terrain, r.line, sc.mover, *sc.mu_range, limits=sc.limits, name="route", computed=True)


#: Wall-clock figures of a route summary: kept out of summary.json and route.geojson so
#: the same inputs give the same bytes; ``route --timings`` writes them to run.json.
_TIMING_KEYS = ("search_s", "scale_timings_s")
_WALL_SECONDS = re.compile(r"(\d+ iterations), [0-9.]+ s:")


def _write_route(outs, sc, r, terrain, keepout, *, reach=None, envelope=None, comparison=None,
                 timings: bool = False):
    """Every output file of one route, into the output set (temporary until complete)."""
    import dataclasses
    import json

    from . import export, plot, report

    timing = {k: r.summary[k] for k in _TIMING_KEYS if k in r.summary}
    summary = {k: v for k, v in r.summary.items() if k not in _TIMING_KEYS}
    if isinstance(summary.get("refine_message"), str):
        # the refinement's message quotes its wall-clock seconds ("... iterations, 5.70 s: ...")
        timing["refine_message"] = summary["refine_message"]
        summary["refine_message"] = _WALL_SECONDS.sub(r"\1:", summary["refine_message"])
    r = dataclasses.replace(r, summary=summary)
    if timings:
        with export.atomic_write(outs.path("run.json")) as fh:
            fh.write(json.dumps(export.to_jsonable(timing), sort_keys=True, indent=2) + "\n")
    extra = {"scenario": sc.to_dict()}
    if envelope is not None:
        extra["friction_envelope"] = {"mu_range": list(sc.mu_range), **envelope.columns()}
    export.write_route_geojson(r, outs.path("route.geojson"), terrain.crs)
    export.write_route_gpkg(r, outs.path("route.gpkg"), terrain.crs)
    export.write_profile_csv(r, terrain, outs.path("profile.csv"))
    export.write_summary_json(r, outs.path("summary.json"), extra=extra, crs=terrain.crs)
    with export.atomic_write(outs.path("scenario.toml")) as fh:
        fh.write(sc.to_toml())
    ax = plot.plot_map(terrain, r, reach=reach, keepout=keepout)
    plot.save_figure(ax.figure, outs.path("map.png"))
    outs.path("map.svg")
    ax = plot.plot_profile(r, terrain)
    plot.save_figure(ax.figure, outs.path("profile.png"))
    outs.path("profile.svg")
    cmp_png = None
    if comparison is not None:
        from .compare import comparison_figure

        comparison.to_csv(outs.path("comparison.csv"))
        fig = comparison_figure(terrain, comparison, keepout=keepout)
        plot.save_figure(fig, outs.path("comparison.png"))
        outs.path("comparison.svg")
        cmp_png = outs.path("comparison.png")
    params = sc.to_dict()
    if envelope is not None:
        params = {**params, "friction envelope": envelope.columns()}
    report.write_report_html(r, terrain, outs.path("report.html"), map_png=outs.path("map.png"),
                             profile_png=outs.path("profile.png"), parameters=params,
                             comparison=comparison, comparison_png=cmp_png)
    return sorted(outs._names)


def _print_route(r, out_dir, written, env=None) -> None:
    s = r.summary
    click.echo(f"travel time {s['travel_time_s']:.2f} s (lattice {s['lattice_time_s']:.2f} s), "
               f"length {s['length_m']:.1f} m, drop {s['drop_m']:.1f} m, exit speed {s['exit_speed_m_s']:.2f} m/s, "
               f"max speed {s['max_speed_m_s']:.2f} m/s")
    if env is not None:
        lo, hi = env.exit_speed_range_m_s
        rng = "stalls" if lo is None or hi is None else f"{hi:.2f} to {lo:.2f} m/s"
        click.echo(f"friction {env.mu_lo:g} to {env.mu_hi:g}: {env.verdict}; exit speed {rng}")
    click.echo(f"wrote {', '.join(written)} in {out_dir}")


@main.command()
@click.argument("dem", required=False, type=click.Path(dir_okay=False))
@_point_opt("--start", help="Loading point (map coordinates of the DEM, or lon lat with --lonlat).")
@_common_options
@click.option("--max-time", "max_time_s", type=click.FloatRange(min=0.0, min_open=True),
              help="Map only arrivals within this many seconds (the search stops there and reads "
                   "only the area it can reach).")
@click.option("--max-distance", "max_distance_m", type=click.FloatRange(min=0.0, min_open=True),
              help="Map only within this plan distance of the start, m (lines confined to that disc).")
@click.option("--out", "out_path", required=True, type=click.Path(dir_okay=False), help="Output GeoTIFF (2 bands: time s, speed m/s).")
@click.option("--overwrite", is_flag=True, help="Replace an existing output file.")
@_guard
def reach(out_path, overwrite, scenario_path, quiet, verbose, max_time_s, max_distance_m, **opts):
    """Map the arrival time and speed from --start to every reachable cell of DEM."""
    _setup_logging(quiet, verbose)
    from . import export
    from .errors import OutputExistsError
    from .export import OutputSet
    from .lattice.search import reach as reach_map
    from .params import SearchOptions

    out = Path(out_path)
    if out.exists() and not overwrite:
        raise OutputExistsError(f"{out} exists; pass --overwrite to replace it")
    sc = _resolve(scenario_path, _overrides(end=None, via=(), **opts))
    # a one-file output set: the raster appears complete or not at all, also on Ctrl-C
    with OutputSet(out.parent, overwrite=True, result_names=(out.name,)) as outs:
        if max_time_s is not None or max_distance_m is not None:
            from .scale import reach_limited

            start, _, _, keepout = _native_points(sc)
            rm = reach_limited(sc.dem, start, sc.mover, max_time_s=max_time_s, max_distance_m=max_distance_m,
                               keepout=keepout, neighbours=sc.neighbours, limits=sc.limits,
                               max_per_cell=sc.label_cap)
        else:
            terrain, start, _, _, keepout = _prepare(sc, need_end=False)
            rm = reach_map(terrain, start, sc.mover, limits=sc.limits, keepout=keepout,
                           options=SearchOptions(neighbours=sc.neighbours, label_cap=sc.label_cap))
        export.write_reach_geotiff(rm, outs.path(out.name))
    if not quiet:
        import numpy as np

        n = int(np.isfinite(rm.time_s).sum())
        click.echo(f"{n} of {rm.time_s.size} cells reachable; latest arrival {np.nanmax(rm.time_s):.1f} s; wrote {out}")


@main.command()
@click.argument("dem", type=click.Path(dir_okay=False))
@click.argument("lines", type=click.Path(dir_okay=False))
@_common_options
@click.option("--mu-range", type=(float, float), metavar="LO HI", help="Evaluate every line at LO, nominal and HI friction.")
@click.option("--refine/--no-refine", default=False, show_default=True, help="Refine the computed optimum.")
@click.option("--optimum/--no-optimum", default=True, show_default=True, help="Add the tool's own optimum as a row.")
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False), help="Output folder.")
@click.option("--overwrite", is_flag=True, help="Replace results already in the output folder.")
@_guard
def compare(dem, lines, out_dir, overwrite, scenario_path, quiet, verbose, refine, optimum, **opts):
    """Time and rank candidate lines (GeoJSON/GeoPackage LineStrings) on DEM with the same physics."""
    _setup_logging(quiet, verbose)
    from .export import OutputSet

    sc = _resolve(scenario_path, _overrides(dem=dem, start=None, end=None, via=(), **opts))
    with OutputSet(out_dir, overwrite=overwrite) as outs:
        cmp, terrain, keepout = _run_compare(sc, lines, refine=refine, optimum=optimum)
        _write_comparison(outs, sc, cmp, terrain, keepout)
    if not quiet:
        for rec in cmp.to_records():
            t = rec.get("travel_time_s")
            what = f"{t:.2f} s" if t is not None else (
                f"stalls at {rec['stalled_at_m']:.1f} m" if rec.get("stalled_at_m") is not None else "-")
            env = f", {rec['envelope_status']}" if rec.get("envelope_status") else ""
            click.echo(f"{rec['name']:<24} {what:>18}  {rec['status']}{env}")
        click.echo(f"wrote comparison.csv, comparison.png, comparison.svg, report.html in {out_dir}")


def _run_compare(sc, lines_path, *, refine: bool, optimum: bool):
    from .compare import compare as compare_lines, read_lines
    from .points import dem_crs

    src = dem_crs(sc.dem)
    lines = read_lines(lines_path, crs=src)
    bounds = None
    if not src.is_geographic:
        xs = [float(v) for _, p in lines for v in p[:, 0]]
        ys = [float(v) for _, p in lines for v in p[:, 1]]
        bounds = (min(xs), min(ys), max(xs), max(ys))
    terrain = _load_terrain_cli(sc.dem, bounds)
    if terrain.crs != src:
        lines = read_lines(lines_path, crs=terrain.crs)
    keepout = None
    if sc.keepout is not None:
        from .keepout import Keepout

        keepout = Keepout.from_file(sc.keepout).in_crs(terrain.crs)
    cmp = compare_lines(terrain, lines, sc.mover, limits=sc.limits, keepout=keepout, optimum=optimum,
                        neighbours=sc.neighbours, refine=refine, mu_range=sc.mu_range,
                        route_kwargs={"max_per_cell": sc.label_cap})
    return cmp, terrain, keepout


def _write_comparison(outs, sc, cmp, terrain, keepout) -> None:
    from . import plot, report
    from .compare import comparison_figure

    cmp.to_csv(outs.path("comparison.csv"))
    plot.save_figure(comparison_figure(terrain, cmp, keepout=keepout), outs.path("comparison.png"))
    outs.path("comparison.svg")
    report.write_comparison_html(cmp, outs.path("report.html"), comparison_png=outs.path("comparison.png"),
                                 parameters=sc.to_dict())


@main.command()
@click.argument("scenarios", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False), help="Output folder.")
@click.option("--workers", type=click.IntRange(min=1), help="Local worker processes (default: one per core).")
@click.option("--scheduler", help="Address of a Dask scheduler (needs the 'cluster' extra: dask[distributed]).")
@click.option("-q", "--quiet", is_flag=True, help="Print errors only.")
@_guard
def batch(scenarios, out_dir, workers, scheduler, quiet):
    """Run every scenario of a batch file (base x variations) and collect batch.csv."""
    _setup_logging(quiet, 0)
    from .batch import run_batch

    rows = run_batch(scenarios, out_dir, workers=workers, scheduler=scheduler)
    bad = [r for r in rows if r.get("status") == "error"]
    if not quiet:
        click.echo(f"{len(rows) - len(bad)} of {len(rows)} runs done; wrote {Path(out_dir) / 'batch.csv'}")
    for r in bad:
        click.echo(f"fallway: run {r.get('name')}: {r.get('error')}", err=True)
    if bad:
        sys.exit(EXIT_ERROR)


@main.command()
@click.option("--out", "out_dir", default="fallway-demo", show_default=True, type=click.Path(file_okay=False),
              help="Output folder.")
@click.option("--overwrite", is_flag=True, help="Replace results already in the output folder.")
@click.option("-q", "--quiet", is_flag=True, help="Print errors only.")
@_guard
def demo(out_dir, overwrite, quiet):
    """Run the whole job on the bundled, invented sample site."""
    _setup_logging(quiet, 0)
    from importlib.resources import as_file, files

    from . import export
    from .export import OutputSet
    from .lattice.search import reach as reach_map
    from .params import SearchOptions
    from .scenario import load_scenario

    with as_file(files("fallway.sample_terrain")) as site:
        from .compare import compare as compare_lines, read_lines
        from .points import dem_crs

        sc = load_scenario(Path(site) / "scenario.toml")
        lines_path = Path(site) / "lines.geojson"
        cover = [tuple(p[:2]) for _, line in read_lines(lines_path, crs=dem_crs(sc.dem)) for p in line]
        with OutputSet(out_dir, overwrite=overwrite) as outs:
            r, terrain, keepout = _run_route(sc, quiet=quiet, cover=cover)
            rm = reach_map(terrain, r.line[0, :2], sc.mover, limits=sc.limits, keepout=keepout,
                           options=SearchOptions(neighbours=sc.neighbours))
            export.write_reach_geotiff(rm, outs.path("reach.tif"))
            lines = read_lines(lines_path, crs=terrain.crs)
            cmp = compare_lines(terrain, lines, sc.mover, limits=sc.limits, keepout=keepout, mu_range=sc.mu_range,
                                route=r)
            env = _envelope(sc, r, terrain, keepout)
            written = _write_route(outs, sc, r, terrain, keepout, reach=rm, envelope=env, comparison=cmp)
    if not quiet:
        click.echo("fallway demo: the invented sample site (quarry bench to valley floor), line kept clear of the no-go areas")
        _print_route(r, out_dir, written, env)
        for rec in cmp.to_records():
            t = rec.get("travel_time_s")
            what = f"{t:.2f} s" if t is not None else (
                f"stalls at {rec['stalled_at_m']:.1f} m" if rec.get("stalled_at_m") is not None else "-")
            click.echo(f"  {rec['name']:<22} {what:>18}  {rec['status']}")
        click.echo("Preliminary layout aid only: have any real design checked by a qualified engineer.")


if __name__ == "__main__":  # pragma: no cover
    main()
