"""The exception hierarchy of fallway.

Every error the library raises on purpose derives from :class:`FallwayError`; leaves
also inherit the matching builtin so that generic handlers keep working.  Messages say
what went wrong and what to do about it, in one line.
"""

from __future__ import annotations

__all__ = [
    "FallwayError",
    "ParameterError",
    "TerrainError",
    "FallwayIOError",
    "OutputExistsError",
    "NoFeasibleLine",
    "ScenarioError",
    "RefinementWarning",
    "InputWarning",
    "CrawlWarning",
]


class FallwayError(Exception):
    """Root of every error raised by fallway."""


class ParameterError(FallwayError, ValueError):
    """A parameter is out of its allowed range or of the wrong kind."""


class ScenarioError(ParameterError):
    """A scenario file has an unknown key or a value out of range."""


class TerrainError(FallwayError, ValueError):
    """The elevation model cannot be used as it is (CRS, transform, size, nodata)."""


class FallwayIOError(FallwayError, OSError):
    """A file could not be read or written."""


class OutputExistsError(FallwayIOError):
    """The output already holds results and overwriting was not asked for."""


class NoFeasibleLine(FallwayError):
    """No line satisfies the physics and the limits.

    Parameters
    ----------
    message : str
        What stopped every line, and what to try.
    reason : str
        One of ``"stall"``, ``"limits"``, ``"keepout"``, ``"nodata"``, ``"uphill"``,
        ``"unreachable"``.
    closest : tuple of float, optional
        Map coordinates (x, y) of the reached cell nearest to the target.
    """

    def __init__(self, message: str, *, reason: str = "unreachable",
                 closest: tuple[float, float] | None = None) -> None:
        super().__init__(message)
        self.reason = reason
        self.closest = closest


class RefinementWarning(UserWarning):
    """The continuous refinement stopped before it converged; the best line is returned."""


class InputWarning(UserWarning):
    """An input is read in a way worth saying (e.g. a given height scale overrides the unit the DEM declares)."""


class CrawlWarning(UserWarning):
    """The line is so slow that a real mover would stop long before the end; set a stall speed."""
