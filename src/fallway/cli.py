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
import signal
import socket
import sys
import threading
from pathlib import Path

import click

from .errors import FallwayError, NoFeasibleLine, RefinementWarning

log = logging.getLogger("fallway")

EXIT_ERROR = 1
EXIT_NO_LINE = 3


# --------------------------------------------------------------------------- helpers
def _fail(message: str, code: int) -> None:
    click.echo(f"fallway: error: {message}", err=True)
    sys.exit(code)


_INTERRUPTED = "interrupted; no partial outputs were left"

#: Signals that end a run cleanly, with their exit codes: 128 + the signal number, as
#: shells report a process ended by a signal (POSIX `wait` status; common practice for
#: programs that catch the signal and exit themselves).
_EXIT_SIGNALS = {"SIGINT": 130, "SIGTERM": 143, "SIGHUP": 129}
# set once a signal handler has begun to end the process: the main thread then waits
# for it instead of reporting the failures the clean-up causes (e.g. killed workers)
_ENDING = threading.Event()


def _end_on_signal(signum: int) -> None:
    """Stop worker processes, remove the working folders of the open output sets, exit 128 + N."""
    from .export import _ACTIVE_LOCK, abort_active_outputs

    _ENDING.set()
    with _ACTIVE_LOCK:  # also keeps the main thread out of its own clean-up meanwhile
        mp = sys.modules.get("multiprocessing")
        if mp is not None:  # batch workers: stopped before their folders are removed
            children = mp.active_children()
            for child in children:
                with contextlib.suppress(Exception):
                    child.kill()
            for child in children:
                with contextlib.suppress(Exception):
                    child.join(timeout=5.0)
        abort_active_outputs()
        name = signal.Signals(signum).name
        what = _INTERRUPTED if signum == signal.SIGINT else f"stopped by {name}; no partial outputs were left"
        with contextlib.suppress(Exception):
            sys.stderr.write(f"fallway: error: {what}\n")
            sys.stderr.flush()
        os._exit(_EXIT_SIGNALS[name])


@contextlib.contextmanager
def _signals_exit():
    """Ctrl-C (SIGINT), SIGTERM and SIGHUP remove the temporary outputs and exit 130, 143, 129.

    The search runs in compiled code that a KeyboardInterrupt must not unwind (numba
    turns it into a crash), so no exception is raised in the main thread: a no-op Python
    handler lets the C handler wake a watcher thread through :func:`signal.set_wakeup_fd`,
    which stops worker processes, removes the working folders of the output sets being
    written (waiting for a commit in progress) and folders they created, and ends the
    process.  Only in the main thread, and only for signals still at their default
    disposition (SIGINT: Python's KeyboardInterrupt handler).
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    ours = []
    for name in _EXIT_SIGNALS:
        sig = getattr(signal, name, None)
        if sig is None:
            continue
        default = signal.default_int_handler if sig == signal.SIGINT else signal.SIG_DFL
        if signal.getsignal(sig) is default:
            ours.append(sig)
    if not ours:
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
            for b in data:
                if b in ours:
                    _end_on_signal(b)

    old = {sig: signal.signal(sig, lambda signum, frame: None) for sig in ours}
    watcher = threading.Thread(target=watch, name="fallway-signals", daemon=True)
    watcher.start()
    try:
        yield
    finally:
        for sig, handler in old.items():
            signal.signal(sig, handler)
        signal.set_wakeup_fd(old_fd)
        with contextlib.suppress(OSError):
            wsock.send(b"\0")
        watcher.join(timeout=1.0)
        rsock.close()
        wsock.close()


def _log_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """Library warnings become one log line each, when they happen."""
    log.warning("%s", str(message).splitlines()[0])


def _guard(fn):
    """Translate library errors into one-line messages and exit codes."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        try:
            with _signals_exit(), warnings.catch_warnings():
                warnings.simplefilter("always", RefinementWarning)
                warnings.showwarning = _log_warning
                try:
                    return fn(*args, **kwargs)
                except BaseException:
                    if _ENDING.is_set():  # a signal handler is ending the process: leave it the last word
                        threading.Event().wait()
                    raise
        except NoFeasibleLine as err:
            msg = str(err)
            if err.closest is not None:
                msg += f" (closest reach: {err.closest_text or f'x={err.closest[0]:.1f}, y={err.closest[1]:.1f}'})"
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


def _tif_name(ctx, param, value):
    if value is not None and Path(value).suffix.lower() not in (".tif", ".tiff"):
        raise click.BadParameter(f"the reach map is a GeoTIFF: give a .tif name, not {Path(value).name!r}")
    return value


def _common_options(fn):
    """Physics, limit and line options shared by route, reach and compare."""
    opts = [
        click.option("--scenario", "scenario_path", type=click.Path(dir_okay=False), help="TOML scenario; flags override it."),
        click.option("--lonlat", is_flag=True, default=None, help="Points are WGS 84 longitude latitude, whatever the DEM's CRS."),
        click.option("--band", type=click.IntRange(min=1), help="The DEM band holding the heights (default 1)."),
        click.option("--z-scale", "z_scale", type=click.FloatRange(min=0.0, min_open=True),
                     help="Metres per height unit of the DEM (0.3048 for feet; default: the unit the DEM "
                          "declares, metres when none)."),
        click.option("--mu", type=float, help="Coulomb friction coefficient (sliding or rolling)."),
        click.option("--drag", type=float, help="Quadratic drag coefficient k in 1/m (rho*Cd*A/2m)."),
        click.option("--v0", type=float, help="Speed at the start, m/s."),
        click.option("--g", "gravity", type=float, help="Acceleration of gravity, m/s² (default 9.80665)."),
        click.option("--normal", type=click.Choice(["gravity", "full"]), help="Normal-force model (default full)."),
        click.option("--neighbours", type=click.Choice(["8", "16", "32"]), help="Lattice stencil (default 16)."),
        click.option("--label-cap", type=click.IntRange(min=1), help="Approximate search: keep at most N labels per "
                     "cell (faster on large rough DEMs; summary search_exact says if it mattered)."),
        click.option("--min-grade", type=float, help="Smallest descent grade of any segment, a fraction (0.3 = 30 %; "
                     "0.05: every segment falls at least 5 %)."),
        click.option("--max-grade", type=float, help="Largest descent grade of any segment, a fraction (0.3 = 30 %)."),
        click.option("--max-speed", type=float, help="Speed limit, m/s."),
        click.option("--stall-speed", type=float, help="The mover stops below this speed, m/s."),
        click.option("--max-step-turn", "max_turn", type=float, help="Largest change of heading from one lattice step to the next, degrees (a search limit; the refined line is held by --min-radius)."),
        click.option("--keepout", "keepout_path", type=click.Path(dir_okay=False), help="GeoJSON or GeoPackage of no-go polygons (every polygon layer is read)."),
        click.option("--keepout-layer", "keepout_layers", multiple=True, metavar="NAME",
                     help="Read only this layer of the keep-out file (repeatable; needed when it also holds "
                          "layers of other geometry)."),
        click.option("-q", "--quiet", is_flag=True, help="Print errors only."),
        click.option("-v", "--verbose", count=True, help="More log output (-vv for debug)."),
    ]
    for opt in reversed(opts):
        fn = opt(fn)
    return fn


def _overrides(dem, start, end, via, lonlat, mu, drag, v0, gravity, normal, neighbours, band, z_scale,
               min_grade, max_grade, max_speed, stall_speed, max_turn, keepout_path, keepout_layers=(), label_cap=None,
               **extra) -> dict:
    """The flags given on the command line, in the scenario's nested layout."""
    d: dict = {"points": {}, "mover": {}, "limits": {}, "search": {}, "line": {}, "envelope": {}}
    if dem is not None:
        d["dem"] = str(dem)
    if band is not None:
        d["band"] = int(band)
    if z_scale is not None:
        d["z_scale"] = float(z_scale)
    if keepout_path is not None:
        d["keepout"] = str(keepout_path)
    if keepout_layers:
        d["keepout_layers"] = list(keepout_layers)
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
                     ("min_radius_m", extra.get("min_radius")), ("max_lateral_g", extra.get("max_lateral_g")),
                     ("max_normal_g", extra.get("max_normal_g")), ("allow_liftoff", extra.get("allow_liftoff"))):
        if val is not None:
            d["limits"][key] = val
    if neighbours is not None:
        d["search"]["neighbours"] = int(neighbours)
    if label_cap is not None:
        d["search"]["label_cap"] = int(label_cap)
    for key in ("plan", "coarse_factor", "corridor_m", "gap"):
        if extra.get(key) is not None:
            d["search"][key] = extra[key]
    if extra.get("no_refine"):
        d["search"]["refine"] = False
    for key in ("kind", "clearance", "start_height", "end_height", "height_layers", "straight_plan"):
        if extra.get(key) is not None:
            d["line"][key] = list(extra[key]) if key == "clearance" else extra[key]
    if extra.get("mu_range") is not None:
        d["envelope"]["mu_range"] = list(extra["mu_range"])
    if extra.get("station_step") is not None:
        d["outputs"] = {"station_step": float(extra["station_step"])}
    # cable options -> keys of the scenario's [cable] section
    cable = {key: extra[opt] for opt, key in (
        ("support_height", "support_height_m"), ("max_span", "max_span_m"), ("cable_tension", "cable_tension_kn"),
        ("carrier_load", "carrier_load_kn"), ("cable_weight", "cable_weight_n_m"), ("support_step", "station_step_m"),
        ("height_step", "height_step_m"), ("max_break_over", "max_break_over_deg"), ("objective", "objective"))
        if extra.get(opt) is not None}
    if cable:
        d["cable"] = {k: list(v) if isinstance(v, tuple) else v for k, v in cable.items()}
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
        if "keepout" in overrides and "keepout_layers" not in overrides:
            base.pop("keepout_layers", None)  # the scenario's layers belong to its own keep-out file
    return Scenario.from_dict(_merge(base, overrides), base_dir=base_dir)


# --------------------------------------------------------------------------- commands
class _Main(click.Group):
    """The command group; signals end a run cleanly from the moment the command line parses."""

    def main(self, *args, **kwargs):
        with _signals_exit():
            return super().main(*args, **kwargs)


@click.group(cls=_Main, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="fallway", prog_name="fallway")
def main() -> None:
    """Minimum-time gravity descent lines across terrain (GeoTIFF DEMs).

    A preliminary layout aid: have every line checked by a qualified engineer.
    """


_point_opt = functools.partial(click.option, type=(float, float), metavar="X Y")


def _examples(*lines: str) -> str:
    """A command's help epilog: its examples, kept as written (click's \\b marks a block not to rewrap)."""
    return ("Scenario and batch file keys, units and ranges: docs/scenarios.md.\n\n\b\nExamples:\n"
            + "\n".join(f"  {line}" for line in lines))


@main.command(epilog=_examples(
    "fallway route dem.tif --start 512300 5401200 --end 512800 5400900 --mu 0.15 --out run/",
    "fallway route dem.tif --scenario design.toml --max-grade 0.8 --min-radius 15 --station-step 5 --out run/",
    "fallway route dem.tif --scenario design.toml --mu-range 0.1 0.2 --robust --out robust/"))
@click.argument("dem", required=False, type=click.Path(dir_okay=False))
@_point_opt("--start", help="Loading point (map coordinates of the DEM, or lon lat with --lonlat).")
@_point_opt("--end", help="Discharge point.")
@_point_opt("--via", multiple=True, help="A point the line must pass (repeatable, in order).")
@_common_options
@click.option("--line", "kind", type=click.Choice(["ground", "raised", "cable"]),
              help="On the ground, raised (trestle, flume), or a cable on supports placed by search.")
@click.option("--clearance", type=(float, float), metavar="MIN MAX", help="Raised line: height band above ground, m. "
              "Cable: band of the loaded carrier path above ground (MAX: rescue height), m.")
@click.option("--start-height", type=float, help="Raised line or cable: height above ground at the start, m.")
@click.option("--end-height", type=float, help="Raised line or cable: height above ground at the end, m.")
@click.option("--support-height", type=(float, float), metavar="MIN MAX", help="Cable: height range of a support, m.")
@click.option("--max-span", type=float, help="Cable: longest span between supports (plan), m.")
@click.option("--cable-tension", type=float, help="Cable: horizontal cable tension, kN.")
@click.option("--carrier-load", type=float, help="Cable: gross load of the carrier, kN.")
@click.option("--cable-weight", type=float, help="Cable: weight of the cable, N/m.")
@click.option("--support-step", type=float, help="Cable: spacing of candidate support sites along the line, m "
              "(default one cell).")
@click.option("--height-step", type=float, help="Cable: step of the support heights tried, m (default 1).")
@click.option("--max-break-over", type=float, help="Cable: largest break-over angle of the rope over a support, degrees.")
@click.option("--objective", type=click.Choice(["time", "supports"]),
              help="Cable: the fastest carrier run (default) or the fewest supports (time breaks ties).")
@click.option("--height-layers", type=int, help="Raised line: height layers of the search over the band (default 16).")
@click.option("--straight-plan", is_flag=True, default=None, help="Raised line: the plan is the straight line from start "
              "to end; only the vertical profile is free.")
@click.option("--min-radius", type=float, help="Smallest bend radius of the refined line along the line (3D), m.")
@click.option("--max-lateral-g", type=float, help="Largest sideways acceleration in bends, in g (v²/R <= n g on a level "
              "bend: the smallest allowed radius grows with the square of the speed).")
@click.option("--max-normal-g", type=float, help="Largest normal load on the bed, in g (>= 1; 1 on a level straight).")
@click.option("--allow-liftoff", is_flag=True, default=None, help="An enclosed chute or pipe: a crest taken fast enough "
              "to lift the mass off an open bed is allowed (default: an open line, which must not lift off).")
@click.option("--no-refine", is_flag=True, help="Report the lattice line only.")
@click.option("--mu-range", type=(float, float), metavar="LO HI", help="Friction range to check the line against.")
@click.option("--robust", is_flag=True, help="With --mu-range: the fastest line that works across the whole range.")
@click.option("--plan", type=click.Choice(["auto", "full", "corridor"]),
              help="Search plan: the full grid, a coarse search then the fine grid in a widening corridor "
                   "(only the corridor is read), or auto (default: full when it fits, else corridor).")
@click.option("--gap", type=click.FloatRange(min=0.0, max=1.0),
              help="Certified optimality gap to reach when the exact lattice search is too large (default 0.001 = "
                   "0.1 %; 0: exact search only). The summary's optimality_gap is the bound reached.")
@click.option("--coarse", "coarse_factor", type=click.IntRange(min=1),
              help="Corridor plan: coarsening factor (default: about 250 k coarse cells).")
@click.option("--corridor", "corridor_m", type=click.FloatRange(min=0.0, min_open=True),
              help="Corridor plan: first corridor half-width, m (doubled until the time stops improving).")
@click.option("--station-step", "station_step", type=float, metavar="M",
              help="Interval of the chainage table stations.csv, m along the line (default 10).")
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False), help="Output folder.")
@click.option("--overwrite", is_flag=True, help="Replace results already in the output folder.")
@click.option("--timings", is_flag=True,
              help="Also write run.json with the seconds of computing per stage. summary.json and "
                   "route.geojson never hold them: the same inputs give byte-identical files.")
@_guard
def route(out_dir, overwrite, scenario_path, quiet, verbose, robust, timings, **opts):
    """Find the minimum-time line from --start to --end on DEM and write it to --out.

    Writes route.geojson, route.gpkg, profile.csv, stations.csv, summary.json, scenario.toml, map and
    profile figures and report.html; all appear together or not at all (also on Ctrl-C).
    """
    _setup_logging(quiet, verbose)
    from .app import run_scenario

    sc = _resolve(scenario_path, _overrides(**opts))
    if robust and sc.mu_range is None:
        raise click.UsageError("--robust needs a friction range: --mu-range LO HI (or envelope.mu_range)")
    r, written = run_scenario(sc, out_dir, overwrite=overwrite, robust=robust, timings=timings)
    if not quiet:
        _print_route(r, out_dir, written)


def _exit_speeds(env) -> str:
    """The exit speeds at the two ends of a friction range, in words ("stalls" where it does)."""
    at_hi, at_lo = env.exit_speed_range_m_s   # (at high friction, at low friction)
    if at_hi is not None and at_lo is not None:
        return f"exit speed {at_lo:.2f} to {at_hi:.2f} m/s"
    if at_hi is None and at_lo is None:
        return "stalls at both ends of the range"
    if at_hi is None:
        return f"exit speed {at_lo:.2f} m/s at {env.mu_lo:g}, stalls at {env.mu_hi:g}"
    return f"stalls at {env.mu_lo:g}, exit speed {at_hi:.2f} m/s at {env.mu_hi:g}"


def _print_route(r, out_dir, written) -> None:
    s = r.summary
    t = "stalls" if s.travel_time_s is None else f"{s.travel_time_s:.2f} s"
    lat = "-" if s.lattice_time_s is None else f"{s.lattice_time_s:.2f} s"
    exit_v = "-" if s.exit_speed_m_s is None else f"{s.exit_speed_m_s:.2f} m/s"
    click.echo(f"travel time {t} (lattice {lat}), length {s.length_m:.1f} m, drop {s.drop_m:.1f} m, "
               f"exit speed {exit_v}, max speed {s.max_speed_m_s:.2f} m/s")
    if s.max_lateral_g is not None:
        click.echo(f"largest lateral {s.max_lateral_g:.2f} g, normal load {s.max_normal_g:.2f} g, "
                   f"smallest lift-off margin {s.min_liftoff_margin_g:.2f} g (at {s.min_liftoff_margin_station_m:.0f} m)")
    env = r.envelope
    if env is not None:
        click.echo(f"friction {env.mu_lo:g} to {env.mu_hi:g}: {env.verdict}; {_exit_speeds(env)}")
    if s.cable is not None:
        last = s.cable["spans"][-1]
        click.echo(f"cable: {s.cable['support_count']} supports, {len(s.cable['spans'])} spans; the carrier arrives "
                   f"at {last['exit_speed_m_s']:.2f} m/s with {s.cable['exit_energy_kj']:.1f} kJ and needs braking there")
    click.echo(f"wrote {', '.join(written)} in {out_dir}")


@main.command(epilog=_examples(
    "fallway reach dem.tif --start 512300 5401200 --mu 0.15 --out reach.tif",
    "fallway reach srtm.tif --start 11.39 47.27 --lonlat --mu 0.2 --max-time 60 --out reach.tif"))
@click.argument("dem", required=False, type=click.Path(dir_okay=False))
@_point_opt("--start", help="Loading point (map coordinates of the DEM, or lon lat with --lonlat).")
@_common_options
@click.option("--max-time", "max_time_s", type=click.FloatRange(min=0.0, min_open=True),
              help="Map only arrivals within this many seconds (the search stops there and reads "
                   "only the area it can reach).")
@click.option("--max-distance", "max_distance_m", type=click.FloatRange(min=0.0, min_open=True),
              help="Map only within this plan distance of the start, m (lines confined to that disc).")
@click.option("--out", "out_path", required=True, type=click.Path(dir_okay=False), callback=_tif_name,
              help="Output GeoTIFF, a .tif name (2 bands: time s, speed m/s).")
@click.option("--overwrite", is_flag=True, help="Replace an existing output file.")
@click.option("--plot/--no-plot", "plot", default=True, show_default=True,
              help="Also write the isochrone map beside the GeoTIFF (same name, .png).")
@_guard
def reach(out_path, overwrite, scenario_path, quiet, verbose, max_time_s, max_distance_m, plot, **opts):
    """Map the arrival time and speed from --start to every reachable cell of DEM."""
    _setup_logging(quiet, verbose)
    from .app import run_reach

    sc = _resolve(scenario_path, _overrides(end=None, via=(), **opts))
    rm = run_reach(sc, out_path, overwrite=overwrite, max_time_s=max_time_s, max_distance_m=max_distance_m,
                   plot=plot)
    if not quiet:
        import numpy as np

        n = int(np.isfinite(rm.time_s).sum())
        png = f" and {Path(out_path).with_suffix('.png')}" if plot else ""
        click.echo(f"{n} of {rm.time_s.size} cells reachable; latest arrival {np.nanmax(rm.time_s):.1f} s; "
                   f"wrote {out_path}{png}")


@main.command(epilog=_examples(
    "fallway compare dem.tif lines.geojson --mu 0.15 --out cmp/",
    "fallway compare dem.tif lines.gpkg --scenario design.toml --mu-range 0.1 0.2 --no-optimum --out cmp/"))
@click.argument("dem", type=click.Path(dir_okay=False))
@click.argument("lines", type=click.Path(dir_okay=False))
@_common_options
@click.option("--mu-range", type=(float, float), metavar="LO HI", help="Evaluate every line at LO, nominal and HI friction.")
@click.option("--refine/--no-refine", default=None,
              help="Refine the computed optimum with the same limits (default; the scenario's search.refine "
                   "when it says false).")
@click.option("--optimum/--no-optimum", default=True, show_default=True, help="Add the tool's own optimum as a row.")
@click.option("--lines-layer", "lines_layers", multiple=True, metavar="NAME",
              help="Read only this layer of LINES (repeatable; default every line layer, needed when the file "
                   "also holds layers of other geometry).")
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False), help="Output folder.")
@click.option("--overwrite", is_flag=True, help="Replace results already in the output folder.")
@_guard
def compare(dem, lines, out_dir, overwrite, scenario_path, quiet, verbose, refine, optimum, lines_layers, **opts):
    """Time and rank candidate lines (GeoJSON/GeoPackage LineStrings) on DEM with the same physics."""
    _setup_logging(quiet, verbose)
    from .app import run_compare

    sc = _resolve(scenario_path, _overrides(dem=dem, start=None, end=None, via=(), **opts))
    cmp = run_compare(sc, lines, out_dir, overwrite=overwrite, refine=sc.refine if refine is None else refine,
                      optimum=optimum, lines_layers=lines_layers)
    if not quiet:
        _print_rows(cmp)
        click.echo(f"wrote comparison.csv, comparison.png, comparison.svg, report.html in {out_dir}")


def _print_rows(cmp, indent: str = "") -> None:
    for rec in cmp.to_records():
        t = rec.get("travel_time_s")
        what = f"{t:.2f} s" if t is not None else (
            f"stalls at {rec['stalled_at_m']:.1f} m" if rec.get("stalled_at_m") is not None else "-")
        env = f", {rec['envelope_status']}" if rec.get("envelope_status") else ""
        click.echo(f"{indent}{rec['name']:<24} {what:>18}  {rec['status']}{env}")


@main.command(epilog=_examples(
    "fallway batch runs.toml --out batch/",
    "fallway batch runs.toml --out batch/ --workers 2 --timings --overwrite"))
@click.argument("scenarios", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", required=True, type=click.Path(file_okay=False), help="Output folder.")
@click.option("--workers", type=click.IntRange(min=1), help="Local worker processes (default: one per core).")
@click.option("--scheduler", help="Address of a Dask scheduler (needs the 'cluster' extra: dask[distributed]).")
@click.option("--overwrite", is_flag=True, help="Replace the results of an earlier batch in the output folder.")
@click.option("--timings", is_flag=True, help="Fill batch.csv's run_s column (seconds of computing per run); "
              "without it the same batch gives byte-identical files.")
@click.option("-q", "--quiet", is_flag=True, help="Print errors only.")
@_guard
def batch(scenarios, out_dir, workers, scheduler, overwrite, timings, quiet):
    """Run every scenario of a batch file (base x variations) and collect batch.csv.

    The run folders and batch.csv appear together when every run has ended, or not at all.
    """
    _setup_logging(quiet, 0)
    from .batch import run_batch

    rows = run_batch(scenarios, out_dir, workers=workers, scheduler=scheduler, overwrite=overwrite, timings=timings)
    bad = [r for r in rows if r.get("status") == "error"]
    if not quiet:
        click.echo(f"{len(rows) - len(bad)} of {len(rows)} runs done; wrote {Path(out_dir) / 'batch.csv'}")
    for r in bad:
        click.echo(f"fallway: run {r.get('name')}: {r.get('error')}", err=True)
    if bad:
        sys.exit(EXIT_ERROR)


@main.command(epilog=_examples("fallway demo", "fallway demo --out demo/ --overwrite"))
@click.option("--out", "out_dir", default="fallway-demo", show_default=True, type=click.Path(file_okay=False),
              help="Output folder.")
@click.option("--overwrite", is_flag=True, help="Replace results already in the output folder.")
@click.option("-q", "--quiet", is_flag=True, help="Print errors only.")
@_guard
def demo(out_dir, overwrite, quiet):
    """Run the whole job on the bundled, invented sample site."""
    _setup_logging(quiet, 0)
    from .app import run_demo

    r, cmp, written, cable = run_demo(out_dir, overwrite=overwrite)
    if not quiet:
        click.echo("fallway demo: the invented sample site, an open chute from the foot of the quarry bench down the "
                   "hillside, kept clear of the no-go areas")
        _print_route(r, out_dir, written)
        _print_rows(cmp, indent="  ")
        s = cable.summary
        click.echo(f"cable line from the bench lip to the valley hopper ({Path(out_dir) / 'cable'}): "
                   f"{s.cable['support_count']} supports between the end stations, carrier {s.travel_time_s:.2f} s, "
                   f"arrives at {s.exit_speed_m_s:.1f} m/s")
        click.echo("Preliminary layout aid only: have any real design checked by a qualified engineer.")


if __name__ == "__main__":  # pragma: no cover
    main()
