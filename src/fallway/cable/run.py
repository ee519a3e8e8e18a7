"""The carrier's run along the loaded path of a span, with the project's motion model.

The carrier's wheels follow the loaded path (:meth:`fallway.cable.span.Span.loaded_z`),
sampled densely; :func:`fallway.physics.traverse` times it with the mover's rolling
resistance (``mu``), drag and normal-force model (``"gravity"``: friction on gravity's
normal part; ``"full"``: on the path's curvature too, which on a sagging span presses
the carrier onto the rope).  Spans are run one after the other, each entered at the
speed the one before delivers (:func:`run_span`), so a layout's time is the chain of its
spans' times; the kink of the path over a support (a crest: the rope bends down over the
saddle) is crossed at constant speed.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from ..physics import Mover, Profile, traverse

__all__ = ["SpanRun", "run_span", "span_time"]


@dataclass(frozen=True, eq=False)
class SpanRun:
    """The carrier's run over one span.

    Attributes
    ----------
    profile : Profile
        Speed and time at every sample of the span's loaded path (time from the span's start).
    time_s : float
        Time over the span (inf after a stall).
    exit_speed_m_s : float
        Speed at the span's end (NaN after a stall).
    stalled_at_m : float or None
        Distance along the path where the carrier stalls.
    overspeed : bool
        The speed exceeds ``Mover.max_speed`` somewhere on the span.
    """

    profile: Profile
    time_s: float
    exit_speed_m_s: float
    stalled_at_m: float | None
    overspeed: bool

    @property
    def feasible(self) -> bool:
        """The carrier gets through within the speed window."""
        return self.stalled_at_m is None and not self.overspeed


def run_span(points, mover: Mover, v_in_m_s: float) -> SpanRun:
    """Run the carrier along one span's loaded path, entering at ``v_in_m_s``.

    Parameters
    ----------
    points : array_like (N, 3)
        The loaded path x, y, z, densely sampled.
    mover : Mover
        The carrier's physics and speed window (its ``v0`` is replaced by ``v_in_m_s``).
    v_in_m_s : float
        Speed on entering the span.

    Examples
    --------
    A straight 30° path (no sag), mu = 0.2, from rest: as :func:`fallway.physics.segment`.

    >>> import numpy as np
    >>> c, s = np.cos(np.radians(30)), np.sin(np.radians(30))
    >>> r = run_span(np.outer(np.linspace(0, 50, 11), [c, 0, -s]), Mover(mu=0.2), 0.0)
    >>> print(f"{r.exit_speed_m_s:.4f} m/s in {r.time_s:.4f} s")
    17.9019 m/s in 5.5860 s
    """
    prof = traverse(points, dataclasses.replace(mover, v0=float(v_in_m_s)))
    stalled = prof.stalled_at_m
    return SpanRun(profile=prof, time_s=math.inf if stalled is not None else float(prof.time_s[-1]),
                   exit_speed_m_s=math.nan if stalled is not None else float(prof.speed_m_s[-1]),
                   stalled_at_m=stalled, overspeed=bool(np.asarray(prof.overspeed).size))


def span_time(points: np.ndarray, mover: Mover, v_in_m_s: float) -> tuple[float, float, int]:
    """The search's inner call: :func:`run_span`'s time and exit speed, without the profile.

    ``points`` must be a C-contiguous float64 (N, 3) array without repeated points (a
    span's dense samples are).  Returns ``(time_s, exit_speed_m_s, status)`` with status
    0 (through), 1 (stalls) or 2 (overspeeds); the same kernel and numbers as
    :func:`fallway.physics.traverse`.

    Examples
    --------
    >>> import numpy as np
    >>> c, s = np.cos(np.radians(30)), np.sin(np.radians(30))
    >>> t, v, status = span_time(np.outer(np.linspace(0, 50, 11), [c, 0, -s]), Mover(mu=0.2), 0.0)
    >>> print(f"{v:.4f} m/s in {t:.4f} s, status {status}")
    17.9019 m/s in 5.5860 s, status 0
    """
    from .._traverse import traverse_kernel

    m = points.shape[0]
    v2 = np.empty(m)
    v2_mid = np.empty(m - 1)
    time = np.empty(m)
    stall = traverse_kernel(points, mover.g, mover.mu, mover.drag, float(v_in_m_s) ** 2, mover.stall_speed ** 2,
                            mover.normal == "full", np.empty(m), v2, time, np.empty(m), v2_mid, np.empty(m))
    if stall >= 0.0:
        return math.inf, math.nan, 1
    if mover.max_speed is not None:
        vmax2 = mover.max_speed ** 2
        with np.errstate(invalid="ignore"):
            over = (v2 > vmax2).any() or (v2_mid > vmax2).any()
        if over:
            return float(time[-1]), math.sqrt(v2[-1]), 2
    return float(time[-1]), math.sqrt(v2[-1]), 0


