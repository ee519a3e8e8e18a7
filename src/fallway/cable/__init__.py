"""Cable lines on supports: span mechanics, the carrier's run, supports placed by search.

* :mod:`fallway.cable.span` - one span of a tensioned cable: the unloaded cable (a
  parabola), the loaded carrier path of the constant-horizontal-tension (linearised)
  analysis, the catenary for comparison, the inextensible-cable ellipse.
* :mod:`fallway.cable.run` - the carrier's run along the densely sampled loaded path with
  the project's motion model (:func:`fallway.physics.traverse`).
* :mod:`fallway.cable.spec` - :class:`CableSpec`, the cable's parameters.
* :mod:`fallway.cable.supports` - the span-graph label search that places the supports.
"""

from .run import SpanRun, run_span
from .span import Span, catenary_sag_m, ellipse_path_z, loaded_deflection_m, unloaded_sag_m
from .spec import CABLE_OBJECTIVES, CableSpec
from .supports import CableLayout, SpanReport, SupportReport, place_supports

__all__ = ["CABLE_OBJECTIVES", "CableLayout", "CableSpec", "Span", "SpanReport", "SpanRun", "SupportReport",
           "catenary_sag_m", "ellipse_path_z", "loaded_deflection_m", "place_supports", "run_span",
           "unloaded_sag_m"]
