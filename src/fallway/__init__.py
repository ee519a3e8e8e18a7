"""fallway: minimum-time gravity descent lines across real terrain.

The public API is re-exported here; see the README for the job it does and its limits.
"""

from .caution import CAUTION
from .errors import (FallwayError, FallwayIOError, NoFeasibleLine, OutputExistsError,
                     ParameterError, RefinementWarning, ScenarioError, TerrainError)
from .terrain import Terrain
from .physics import STANDARD_GRAVITY, Mover, Profile
from .limits import Limits
from .route import LatticeLine, ReachMap, Route

__version__ = "0.1.0"

__all__ = [
    "CAUTION", "FallwayError", "FallwayIOError", "NoFeasibleLine", "OutputExistsError", "ParameterError",
    "RefinementWarning", "ScenarioError", "TerrainError",
    "Terrain", "STANDARD_GRAVITY", "Mover", "Profile", "Limits",
    "LatticeLine", "ReachMap", "Route",
]
