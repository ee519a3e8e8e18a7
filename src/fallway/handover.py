"""Words and numbers for a reader: the inputs and results of a route as labelled values with units.

The printable long-section (:mod:`fallway.longsection`) and the HTML report
(:mod:`fallway.report`) state the same things the same way: values rounded for reading,
units beside them, "none" or "unbounded" where a limit is not set, never a raw key, ``inf``
or ``NaN`` (those stay in ``summary.json``).
"""

from __future__ import annotations

import datetime
import math
import os
from typing import Any

import numpy as np

__all__ = ["run_date", "fallway_version", "reading", "mover_rows", "limit_rows", "line_rows", "crs_text"]


def run_date() -> str:
    """The date of the run, ``YYYY-MM-DD`` (UTC).

    ``SOURCE_DATE_EPOCH`` (seconds since 1970, the reproducible-builds convention) fixes it,
    so two runs can give the same bytes.

    Examples
    --------
    >>> import os
    >>> os.environ["SOURCE_DATE_EPOCH"] = "1767225600"
    >>> run_date()
    '2026-01-01'
    >>> del os.environ["SOURCE_DATE_EPOCH"]
    """
    epoch = os.environ.get("SOURCE_DATE_EPOCH", "").strip()
    if epoch.isdigit():
        when = datetime.datetime.fromtimestamp(int(epoch), datetime.timezone.utc)
    else:
        when = datetime.datetime.now(datetime.timezone.utc)
    return when.strftime("%Y-%m-%d")


def fallway_version() -> str:
    """The installed fallway version (``"unknown"`` when not installed as a package)."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("fallway")
    except PackageNotFoundError:  # pragma: no cover - a source tree on sys.path
        return "unknown"


def reading(value: Any, decimals: int = 2, unit: str = "", *, none: str = "none", inf: str = "unbounded") -> str:
    """A number as a reader wants it: rounded, with its unit; words for the missing and the infinite.

    Examples
    --------
    >>> reading(12.3456, 1, "m"), reading(None), reading(float("inf"), 1, "m/s"), reading(float("nan"))
    ('12.3 m', 'none', 'unbounded', 'none')
    >>> reading(-float("inf")), reading(True), reading(3, unit="cells"), reading(0.000012, 2, "s/m")
    ('unbounded', 'yes', '3 cells', '1.2e-05 s/m')
    >>> reading(4.877e150, 2, "s")
    '4.88e+150 s'

    """
    if value is None:
        return none
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        text = f"{value:d}"
    elif isinstance(value, float):
        if math.isnan(value):
            return none
        if math.isinf(value):
            return inf
        if (value != 0.0 and abs(value) < 0.5 * 10.0 ** (-decimals)) or abs(value) >= 1e9:
            text = f"{value:.3g}" if abs(value) >= 1e9 else f"{value:.2g}"
        else:
            text = f"{value:.{decimals}f}"
    else:
        return str(value)
    return f"{text} {unit}" if unit else text


def _grade(value) -> str:
    if value is None or (isinstance(value, float) and math.isinf(value)):
        return "none"
    return f"{value:.3g} ({100 * value:.3g} %, {math.degrees(math.atan(value)):.1f}°)"


def mover_rows(mover, mu_range=None) -> list[tuple[str, str]]:
    """(label, value) rows of the mover: friction, drag, entry speed, speed window, normal model.

    Examples
    --------
    >>> from fallway.physics import Mover
    >>> dict(mover_rows(Mover(mu=0.1), (0.08, 0.12)))["Friction coefficient μ"]
    '0.1 (range 0.08 to 0.12)'
    """
    mu = f"{mover.mu:g}"
    if mu_range is not None:
        mu += f" (range {mu_range[0]:g} to {mu_range[1]:g})"
    normal = {"full": "full (gravity and the line's curvature)", "gravity": "gravity only (across the path)"}
    return [
        ("Friction coefficient μ", mu),
        ("Air drag coefficient", reading(float(mover.drag), 4, "1/m") if mover.drag else "none"),
        ("Speed at the start", reading(float(mover.v0), 2, "m/s")),
        ("Stall speed", reading(float(mover.stall_speed), 2, "m/s") if mover.stall_speed else "none"),
        ("Speed limit", reading(mover.max_speed, 2, "m/s", none="unbounded")),
        ("Normal force", normal.get(mover.normal, str(mover.normal))),
        ("Gravity", reading(float(mover.g), 5, "m/s²")),
    ]


def limit_rows(limits) -> list[tuple[str, str]]:
    """(label, value) rows of the geometric and load limits; "none" where a limit is not set.

    Examples
    --------
    >>> from fallway.params import Limits
    >>> dict(limit_rows(Limits(min_grade=0.05)))["Least descent grade allowed"]
    '0.05 (5 %, 2.9°)'
    """
    lo = limits.min_grade
    return [
        ("Least descent grade allowed", _grade(None if lo is None or math.isinf(lo) else lo)),
        ("Steepest descent grade allowed", _grade(limits.max_grade)),
        ("Turn per lattice step", reading(limits.max_step_turn_deg, 1, "°")),
        ("Smallest bend radius", reading(limits.min_radius_m, 1, "m")),
        ("Largest lateral acceleration", reading(limits.max_lateral_g, 2, "g")),
        ("Largest normal load", reading(limits.max_normal_g, 2, "g")),
        ("Lift-off on crests", "allowed (a closed or held-down line)" if limits.allow_liftoff
         else "not allowed (an open line)"),
    ]


def line_rows(spec) -> list[tuple[str, str]]:
    """(label, value) rows of the line kind and, for a raised line, its clearance window.

    Examples
    --------
    >>> from fallway.params import LineSpec
    >>> line_rows(LineSpec())
    [('Line kind', 'on the ground')]
    """
    if spec.kind != "raised":
        return [("Line kind", "on the ground")]
    lo, hi = spec.clearance_m
    rows = [("Line kind", "raised above the ground"), ("Clearance window", f"{lo:g} to {hi:g} m")]
    if spec.start_height_m is not None:
        rows.append(("Height at the start", reading(spec.start_height_m, 1, "m above ground")))
    if spec.end_height_m is not None:
        rows.append(("Height at the end", reading(spec.end_height_m, 1, "m above ground")))
    return rows


def crs_text(crs) -> str:
    """``"EPSG:32616 (WGS 84 / UTM zone 16N)"``; "none" without a CRS.

    Examples
    --------
    >>> crs_text("EPSG:32633"), crs_text(None)
    ('EPSG:32633 (WGS 84 / UTM zone 33N)', 'none')
    """
    if crs is None:
        return "none"
    import pyproj

    c = pyproj.CRS.from_user_input(crs)
    code = c.to_epsg()
    return f"EPSG:{code} ({c.name})" if code else c.name
