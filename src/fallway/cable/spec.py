"""The parameters of a cable line: heights, span, clearance band, tension and loads."""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import ParameterError
from ..params import check_number, check_param

__all__ = ["CABLE_OBJECTIVES", "CableSpec"]

#: What the support search minimises: the carrier's time, or the number of supports
#: (time breaks ties).
CABLE_OBJECTIVES = ("time", "supports")


def _pair(name: str, value) -> tuple[float, float]:
    try:
        lo, hi = (float(v) for v in value)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a pair (min, max) of metres, got {value!r}") from None
    if not (math.isfinite(lo) and math.isfinite(hi) and 0.0 <= lo <= hi):
        raise ParameterError(f"{name} must be (min, max) with 0 <= min <= max, got {value!r}")
    check_param(name, hi)
    return lo, hi


@dataclass(frozen=True)
class CableSpec:
    """A cable line on supports: where the cable is held, how tight, what it carries.

    Parameters
    ----------
    start_height_m, end_height_m : float
        Height of the cable above the ground at the start (upper) and end stations, m.
    support_height_m : (float, float)
        Smallest and largest height of an intermediate support (ground to the saddle), m.
    height_step_m : float
        Step of the support heights the search tries, m.
    max_span_m : float
        Longest span (horizontal, support to support), m.
    clearance_m : (float, float)
        Band of the loaded carrier path above the ground, m: ``min`` keeps the load off
        the ground, ``max`` limits the height (rescue).  Held along the whole of every
        span, at the supports too.
    cable_tension_kn : float
        Horizontal cable tension H, kN (held constant: see :mod:`fallway.cable.span`).
    carrier_load_kn : float
        Gross load of the carrier (carrier and payload), kN.
    cable_weight_n_m : float
        Weight of the cable per metre, N/m.
    station_step_m : float or None
        Spacing of the candidate support sites along the plan line, m (None: one cell).
    max_break_over_deg : float
        Largest break-over angle of the rope over a support's saddle, degrees: the change
        of rope slope across the saddle with the carrier arriving or leaving.  The default
        (20°) is a judgment, not a standard: set the value the saddle's maker gives.
    objective : {"time", "supports"}
        ``"time"``: the fastest carrier run; ``"supports"``: the fewest supports, time
        breaking ties.
    sample_m : float or None
        Spacing of the dense samples of ground, cable and carrier path, m (None: at most
        a quarter cell and 1 m, dividing the station step).
    speed_resolution_m_s : float or None
        None (default): the exact search.  A speed in m/s: a label is also dropped when
        another is no later and at most this much slower - an approximate search, far
        fewer labels on long rough lines; the layout says whether it mattered
        (``CableLayout.exact``).

    Examples
    --------
    >>> CableSpec(support_height_m=(4, 12)).support_height_m
    (4.0, 12.0)
    >>> CableSpec(objective="cheapest")
    Traceback (most recent call last):
    ...
    fallway.errors.ParameterError: objective must be one of time, supports; got 'cheapest'
    """

    start_height_m: float = 10.0
    end_height_m: float = 10.0
    support_height_m: tuple[float, float] = (5.0, 15.0)
    height_step_m: float = 1.0
    max_span_m: float = 300.0
    clearance_m: tuple[float, float] = (2.0, 30.0)
    cable_tension_kn: float = 50.0
    carrier_load_kn: float = 5.0
    cable_weight_n_m: float = 20.0
    station_step_m: float | None = None
    max_break_over_deg: float = 20.0
    objective: str = "time"
    sample_m: float | None = None
    speed_resolution_m_s: float | None = None

    def __post_init__(self) -> None:
        for name in ("start_height_m", "end_height_m"):
            check_param(name, getattr(self, name))
            object.__setattr__(self, name, float(getattr(self, name)))
        object.__setattr__(self, "support_height_m", _pair("support_height_m", self.support_height_m))
        object.__setattr__(self, "clearance_m", _pair("clearance_m", self.clearance_m))
        for name in ("height_step_m", "max_span_m", "cable_tension_kn", "carrier_load_kn", "cable_weight_n_m",
                     "max_break_over_deg"):
            check_param(name, getattr(self, name))
            object.__setattr__(self, name, float(getattr(self, name)))
        check_number("speed_resolution_m_s", self.speed_resolution_m_s, allow_none=True, high=1e4, unit="m/s")
        if self.speed_resolution_m_s is not None:
            object.__setattr__(self, "speed_resolution_m_s", float(self.speed_resolution_m_s))
        for name in ("station_step_m", "sample_m"):
            check_number(name, getattr(self, name), allow_none=True, strictly_positive=True, high=1e4, unit="m")
            if getattr(self, name) is not None:
                object.__setattr__(self, name, float(getattr(self, name)))
        if self.objective not in CABLE_OBJECTIVES:
            raise ParameterError(f"objective must be one of {', '.join(CABLE_OBJECTIVES)}; got {self.objective!r}")

    @property
    def support_heights_m(self) -> tuple[float, ...]:
        """The support heights the search tries: from the minimum in steps to the maximum."""
        lo, hi = self.support_height_m
        n = int(math.floor((hi - lo) / self.height_step_m + 1e-9))
        return tuple(lo + i * self.height_step_m for i in range(n + 1))
