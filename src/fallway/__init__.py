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
from .terrain import Terrain, load_terrain
from .physics import STANDARD_GRAVITY, Mover, Profile, SegmentResult, normal_gravity, segment, traverse
from .keepout import Keepout
from .params import LineSpec, Limits, SearchOptions
from .route import LatticeLine, ReachMap, Route, find_route, route_from_lattice
from .lattice.search import reach
from .scenario import Scenario, load_scenario
from .export import (OutputSet, write_profile_csv, write_route_geojson, write_route_gpkg,
                     write_summary_json)
from .plot import plot_map, plot_profile, save_figure
from .report import write_report_html
from .refine import RefineResult, refine_line
from .compare import (Comparison, Envelope, LineResult, RobustRoute, drape, envelope, evaluate_line, read_lines,
                      robust_route)
from .compare import compare  # noqa: E402  (the function; the module stays importable as fallway.compare)
from .lattice.robust import robust_lattice_line
from .scale import find_route_large, reach_limited
from .batch import run_batch

__version__ = "0.1.0"

__all__ = [
    "CAUTION", "FallwayError", "FallwayIOError", "NoFeasibleLine", "OutputExistsError", "ParameterError",
    "RefinementWarning", "ScenarioError", "TerrainError",
    "Terrain", "load_terrain",
    "STANDARD_GRAVITY", "Mover", "Profile", "SegmentResult", "normal_gravity", "segment", "traverse",
    "Keepout", "Limits", "LineSpec", "SearchOptions",
    "LatticeLine", "ReachMap", "Route", "find_route", "route_from_lattice", "reach",
    "Scenario", "load_scenario",
    "OutputSet", "write_profile_csv", "write_route_geojson", "write_route_gpkg", "write_summary_json",
    "plot_map", "plot_profile", "save_figure", "write_report_html",
    "RefineResult", "refine_line",
    "Comparison", "Envelope", "LineResult", "compare", "drape", "envelope", "evaluate_line", "read_lines",
    "RobustRoute", "robust_route",
    "robust_lattice_line", "find_route_large", "reach_limited", "run_batch",
]
