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

from .caution import CAUTION
from .errors import (FallwayError, FallwayIOError, NoFeasibleLine, OutputExistsError,
                     ParameterError, RefinementWarning, ScenarioError, TerrainError)
from .params import STANDARD_GRAVITY, Limits, LineSpec, Mover, SearchOptions
from .terrain import Terrain, load_terrain
from .physics import Profile, SegmentResult, normal_gravity, segment, traverse
from .keepout import Keepout
from .results import LatticeLine, ReachMap, RefineCandidate, RefineResult, Route, RouteSummary
from .refine import refine_line
from .evaluate import Comparison, Envelope, LineResult, drape, envelope, evaluate_line
from .vector import read_lines
from .routing import compare, find_route, reach
from .scenario import Scenario, load_scenario
from .export import (OutputSet, write_profile_csv, write_reach_geotiff, write_route_geojson, write_route_gpkg,
                     write_summary_json)
from .plot import comparison_figure, plot_map, plot_profile, save_figure
from .report import write_report_html
from .app import run_scenario
from .batch import run_batch

from importlib.metadata import version as _version

__version__ = _version("fallway")

__all__ = [
    "CAUTION", "FallwayError", "FallwayIOError", "NoFeasibleLine", "OutputExistsError", "ParameterError",
    "RefinementWarning", "ScenarioError", "TerrainError",
    "STANDARD_GRAVITY", "Mover", "Limits", "LineSpec", "SearchOptions",
    "Terrain", "load_terrain",
    "Profile", "SegmentResult", "normal_gravity", "segment", "traverse",
    "Keepout",
    "LatticeLine", "ReachMap", "RefineCandidate", "RefineResult", "Route", "RouteSummary",
    "refine_line",
    "Comparison", "Envelope", "LineResult", "drape", "envelope", "evaluate_line", "read_lines",
    "find_route", "reach", "compare",
    "Scenario", "load_scenario",
    "OutputSet", "write_profile_csv", "write_reach_geotiff", "write_route_geojson", "write_route_gpkg",
    "write_summary_json",
    "comparison_figure", "plot_map", "plot_profile", "save_figure", "write_report_html",
    "run_scenario", "run_batch",
]
