"""fallway: minimum-time gravity descent lines across real terrain.

The public API is re-exported here; see the README for the job it does and its limits.

Examples
--------
>>> import numpy as np, fallway
>>> plane = fallway.Terrain.from_array(np.add.outer(np.arange(5.0), np.zeros(5)) * -1.0,
...                                    (1.0, 0, 0, 0, -1.0, 5.0), None)
>>> p = fallway.traverse([[0, 4, 0], [0, 0, -4]], fallway.Mover(normal="gravity"))
>>> round(p.exit_speed_m_s, 4)
8.8574
"""

from __future__ import annotations

from importlib import import_module as _import_module
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # the same names, for type checkers and editors
    from .caution import CAUTION
    from .errors import (FallwayError, FallwayIOError, NoFeasibleLine, OutputExistsError,
                         ParameterError, RefinementWarning, ScenarioError, TerrainError)
    from .params import STANDARD_GRAVITY, Limits, LineSpec, Mover, SearchOptions
    from .terrain import Terrain, load_terrain
    from .physics import Profile, SegmentResult, normal_gravity, segment, traverse
    from .keepout import Keepout
    from .cable import CableLayout, CableSpec, place_supports
    from .results import LatticeLine, ReachMap, RefineCandidate, RefineResult, Route, RouteSummary
    from .refine import refine_line
    from .clearance import clearance_along, clearance_extremes
    from .evaluate import Comparison, Envelope, LineResult, drape, envelope, evaluate_line, limit_issues
    from .vector import read_lines
    from .routing import compare, find_route, reach
    from .scenario import Scenario, load_scenario
    from .export import (OutputSet, write_profile_csv, write_reach_geotiff, write_route_geojson, write_route_gpkg,
                         write_summary_json)
    from .export import write_stations_csv
    from .stations import StationTable, station_table
    from .cad import write_route_dxf
    from .plot import comparison_figure, plot_map, plot_profile, save_figure
    from .report import write_report_html
    from .longsection import write_profile_pdf
    from .app import run_scenario
    from .batch import run_batch

# The public names load on first use (PEP 562): `import fallway` and the command line
# start in milliseconds, and the command line's signal handling is in place before
# the numerical stack is imported (Ctrl-C during start-up exits 130, no traceback).
_EXPORTS = {
    "CAUTION": "caution",
    "FallwayError": "errors",
    "FallwayIOError": "errors",
    "NoFeasibleLine": "errors",
    "OutputExistsError": "errors",
    "ParameterError": "errors",
    "RefinementWarning": "errors",
    "ScenarioError": "errors",
    "TerrainError": "errors",
    "STANDARD_GRAVITY": "params",
    "Mover": "params",
    "Limits": "params",
    "LineSpec": "params",
    "SearchOptions": "params",
    "Terrain": "terrain",
    "load_terrain": "terrain",
    "Profile": "physics",
    "SegmentResult": "physics",
    "normal_gravity": "physics",
    "segment": "physics",
    "traverse": "physics",
    "Loads": "loads",
    "line_loads": "loads",
    "clearance_along": "clearance",
    "clearance_extremes": "clearance",
    "Keepout": "keepout",
    "CableSpec": "cable",
    "CableLayout": "cable",
    "place_supports": "cable",
    "LatticeLine": "results",
    "ReachMap": "results",
    "RefineCandidate": "results",
    "RefineResult": "results",
    "Route": "results",
    "RouteSummary": "results",
    "refine_line": "refine",
    "Comparison": "evaluate",
    "Envelope": "evaluate",
    "LineResult": "evaluate",
    "drape": "evaluate",
    "envelope": "evaluate",
    "evaluate_line": "evaluate",
    "limit_issues": "evaluate",
    "read_lines": "vector",
    "find_route": "routing",
    "reach": "routing",
    "compare": "routing",
    "Scenario": "scenario",
    "load_scenario": "scenario",
    "OutputSet": "export",
    "write_profile_csv": "export",
    "write_reach_geotiff": "export",
    "write_route_geojson": "export",
    "write_route_gpkg": "export",
    "write_summary_json": "export",
    "write_stations_csv": "export",
    "StationTable": "stations",
    "station_table": "stations",
    "write_route_dxf": "cad",
    "comparison_figure": "plot",
    "plot_map": "plot",
    "plot_profile": "plot",
    "save_figure": "plot",
    "write_report_html": "report",
    "write_profile_pdf": "longsection",
    "run_scenario": "app",
    "run_batch": "batch",
}

__all__ = [
    "CAUTION", "FallwayError", "FallwayIOError", "NoFeasibleLine", "OutputExistsError", "ParameterError",
    "RefinementWarning", "ScenarioError", "TerrainError",
    "STANDARD_GRAVITY", "Mover", "Limits", "LineSpec", "SearchOptions",
    "Terrain", "load_terrain",
    "Profile", "SegmentResult", "normal_gravity", "segment", "traverse",
    "Loads", "line_loads", "clearance_along", "clearance_extremes",
    "Keepout",
    "LatticeLine", "ReachMap", "RefineCandidate", "RefineResult", "Route", "RouteSummary",
    "refine_line",
    "Comparison", "Envelope", "LineResult", "drape", "envelope", "evaluate_line", "limit_issues", "read_lines",
    "find_route", "reach", "compare",
    "Scenario", "load_scenario",
    "OutputSet", "write_profile_csv", "write_reach_geotiff", "write_route_geojson", "write_route_gpkg",
    "write_summary_json",
    "write_stations_csv", "StationTable", "station_table", "write_route_dxf",
    "comparison_figure", "plot_map", "plot_profile", "save_figure", "write_report_html",
    "write_profile_pdf",
    "run_scenario", "run_batch",
]


def __getattr__(name: str):
    if name == "__version__":
        from importlib.metadata import version

        globals()[name] = value = version("fallway")
        return value
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'fallway' has no attribute {name!r}")
    value = getattr(_import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
