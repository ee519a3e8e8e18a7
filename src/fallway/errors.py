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

    Callers branch on ``reason``, never on the message text.

    Parameters
    ----------
    message : str
        What stopped every line, and what to try.
    reason : str
        What stopped it, one of:

        * ``"stall"`` - friction and drag take all the energy (in the robust search: at
          the high friction);
        * ``"limits"`` - the grade, turn or speed limits (in the robust search also: too
          fast at the low friction);
        * ``"keepout"`` - keep-out areas (a point in one, or a line exists once the
          keep-out inside the search domain is lifted);
        * ``"nodata"`` - nodata cells (a point on one, or a line exists once they are
          filled);
        * ``"uphill"`` - a point lies above the start's energy height, or every line
          would climb too high;
        * ``"unreachable"`` - no lattice line connects the points, for none of the
          reasons above;
        * ``"corridor"`` - the search domain (e.g. a corridor): a point lies outside it,
          or a line exists only once it is lifted;
        * ``"label_budget"`` - the search spent its label budget first (raise it, cap
          the labels per state, or coarsen the grid).
    closest : tuple of float, optional
        Map coordinates (x, y) of the reached cell nearest to the target.
    route : Route, optional
        The best line found when it breaks a limit (``route.summary.feasible`` is False,
        ``violated_limits`` names what it breaks): for inspection, never a result.
    binding : tuple of str, optional
        The limits found to bind (parameter names: ``"max_speed"``, ``"min_grade"``,
        ``"max_grade"``, ``"max_step_turn_deg"``, ``"min_radius_m"``, ``"mu"``).
    workable : dict, optional
        For each binding limit, the nearest value found to work by a bisection with the
        same search (:mod:`fallway.relax`); None where none was found.
    closest_text : str, optional
        ``closest`` as the caller gave the points (``"lon .., lat .."`` for lon/lat,
        else ``"x=.., y=.."``); :func:`fallway.find_route` sets it.

    Examples
    --------
    >>> err = NoFeasibleLine("label budget of 20 exhausted", reason="label_budget")
    >>> err.reason
    'label_budget'
    """

    def __init__(self, message: str, *, reason: str = "unreachable",
                 closest: tuple[float, float] | None = None, route=None, binding: tuple = (),
                 workable: dict | None = None, closest_text: str | None = None) -> None:
        super().__init__(message)
        self.closest_text = closest_text
        self.reason = reason
        self.closest = closest
        self.route = route
        self.binding = tuple(binding)
        self.workable = dict(workable or {})


class RefinementWarning(UserWarning):
    """The continuous refinement stopped before it converged; the best line is returned."""


class InputWarning(UserWarning):
    """An input is read in a way worth saying (e.g. a given height scale overrides the unit the DEM declares)."""


class CrawlWarning(UserWarning):
    """The line is so slow that a real mover would stop long before the end; set a stall speed."""
