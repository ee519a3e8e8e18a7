"""The tables of a cable line: ``supports.csv`` and ``spans.csv`` (written atomically).

Columns are the fields of :class:`fallway.cable.SupportReport` and
:class:`fallway.cable.SpanReport`, in order; fixed decimals (3 for lengths, speeds and
times, 6 for slopes and map coordinates).  The supports table holds the end stations too
(its first and last rows: the cable's anchorages at the loading and discharge stations).
"""

from __future__ import annotations

import dataclasses
import os
from pathlib import Path

from .export import _fmt, atomic_write

__all__ = ["SUPPORT_COLUMNS", "SPAN_COLUMNS", "write_supports_csv", "write_spans_csv"]

#: Columns of ``supports.csv``.
SUPPORT_COLUMNS = ("station_m", "x", "y", "ground_z_m", "height_m", "top_z_m")
#: Columns of ``spans.csv``.
SPAN_COLUMNS = ("span", "from_station_m", "to_station_m", "length_m", "chord_slope", "midspan_deflection_m",
                "min_clearance_m", "min_clearance_station_m", "entry_speed_m_s", "exit_speed_m_s", "time_s")
_SIX = {"x", "y", "chord_slope"}


def _table(rows, columns, path) -> Path:
    lines = [",".join(columns)]
    for r in rows:
        d = dataclasses.asdict(r)
        lines.append(",".join(str(d[c]) if isinstance(d[c], int) else _fmt(d[c], 6 if c in _SIX else 3)
                              for c in columns))
    path = Path(path)
    with atomic_write(path) as f:
        f.write("\n".join(lines) + "\n")
    return path


def write_supports_csv(layout, path: str | os.PathLike) -> Path:
    """Write ``supports.csv``: one row per support, the end stations first and last.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from fallway.cable import SupportReport
    >>> class L: supports = (SupportReport(0.0, 10.0, 20.0, 98.5, 10.0, 108.5),)
    >>> p = write_supports_csv(L, pathlib.Path(tempfile.mkdtemp()) / "supports.csv")
    >>> print(p.read_text().strip())
    station_m,x,y,ground_z_m,height_m,top_z_m
    0.000,10.000000,20.000000,98.500,10.000,108.500
    """
    return _table(layout.supports, SUPPORT_COLUMNS, path)


def write_spans_csv(layout, path: str | os.PathLike) -> Path:
    """Write ``spans.csv``: one row per span, in order from the start station."""
    return _table(layout.spans, SPAN_COLUMNS, path)
