"""One span of a tensioned cable between two supports, in the span's vertical plane.

Coordinates: ``x`` is the horizontal distance from the upper-station support A (m),
``z`` the height (m); the span reaches support B at ``x = L``.  Loads in newtons.

The model (the linearised, constant-horizontal-tension analysis of a shallow cable)
-----------------------------------------------------------------------------------
A shallow cable whose horizontal tension ``H`` stays the same whatever the carrier's
position (a cable held by a tensioning weight, or the linearised theory's assumption
that the carrier does not change ``H``) carries its own weight ``q`` per unit of
*horizontal* length and the carrier's gross load ``P`` at ``x = a``.  Equilibrium of
vertical forces on the shallow cable, ``H z'' = q`` away from the load and a kink of
``P / H`` in slope under it, gives the cable below its chord by::

    q x (L - x) / (2 H)                       (no carrier: a parabola)
    P (L - a) x / (H L)  for x <= a,  P a (L - x) / (H L)  for x >= a   (carrier at a)

so the carrier itself, at ``x = a``, runs below the chord by::

    delta(a) = P a (L - a) / (H L) + q a (L - a) / (2 H)

(a parabola in ``a``: the *loaded path*).  This is the string-on-supports statics of
every text on cables, e.g. H. M. Irvine, *Cable Structures*, MIT Press 1981, ch. 1-2
(cited from memory): the parabolic cable under a load uniform per horizontal length and
the polygon under point loads, superposed because ``H`` is held fixed.

Assumptions, stated:

* **The unloaded cable is drawn as a parabola**, not a catenary: with ``H`` given the
  parabola is the exact shape under a load uniform per *horizontal* length and differs
  from the catenary (load uniform per length of cable) by a relative sag of
  ``(q L / H)² / 48`` (0.33 % at a sag of 1/20 of the span, 0.05 % at 1/50) - far below the
  accuracy of the cable weight and tension an engineer can give; :func:`catenary_sag_m`
  is the level-span catenary the tests compare with.
* On an inclined span the weight ``w`` per metre of cable becomes ``q = w sec(theta)``
  per metre of plan, theta the chord's inclination (the weight taken uniform along the
  chord: the usual shallow-cable approximation for inclined spans, from memory).
* The cable is inextensible between supports in the sense that ``H`` is a given: the
  elastic stretch under the carrier is ignored.

The inextensible-cable alternative
----------------------------------
A free carrier on a weightless cable of fixed length ``S`` between two supports hangs
where the two rope pieces from it reach the supports, so ``|PA| + |PB| = S``: as it
rolls it traces the ellipse with foci A and B and major axis ``S``, and at rest it sits
at the ellipse's lowest point, where both rope pieces make equal angles with the
horizontal (classical statics; the reflection property of the ellipse).
:func:`ellipse_path_z` draws that path.  The support search does not use it: on a line
of several spans the rope slides over the saddles, so the length of each span's piece
depends on the carrier's position on every span and is not a property of one span - the
constant-tension model above is the one that fits a search span by span.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import ParameterError
from ..params import check_number

__all__ = ["Span", "catenary_sag_m", "ellipse_path_z", "loaded_deflection_m", "unloaded_sag_m"]


def loaded_deflection_m(x_m, span_m: float, tension_n: float, load_n: float, weight_n_m: float):
    """Depth of the carrier below the chord at ``x`` (constant-horizontal-tension model).

    ``P x (L - x) / (H L) + q x (L - x) / (2 H)``, with ``q`` the cable weight per unit of
    plan length.  See the module notes.

    Examples
    --------
    A 200 m span, H = 50 kN, a 5 kN carrier on a 20 N/m cable, at midspan:
    5000·100·100/(50000·200) + 20·100·100/(2·50000) = 5 + 2 = 7 m.

    >>> float(loaded_deflection_m(100.0, 200.0, 50e3, 5e3, 20.0))
    7.0
    """
    x = np.asarray(x_m, dtype=float)
    L = float(span_m)
    return x * (L - x) * (load_n / (tension_n * L) + weight_n_m / (2.0 * tension_n))


def unloaded_sag_m(x_m, span_m: float, tension_n: float, weight_n_m: float):
    """Depth of the unloaded cable below the chord at ``x``: the parabola ``q x (L - x) / (2 H)``.

    Examples
    --------
    >>> float(unloaded_sag_m(100.0, 200.0, 50e3, 20.0))  # q L² / (8 H)
    2.0
    """
    x = np.asarray(x_m, dtype=float)
    return weight_n_m * x * (float(span_m) - x) / (2.0 * tension_n)


def catenary_sag_m(x_m, span_m: float, tension_n: float, weight_n_m: float):
    """Depth below the chord of a catenary on a level span (weight ``w`` per metre of cable).

    ``(H / w) (cosh(w L / 2H) - cosh(w (x - L/2) / H))``: the catenary with horizontal
    tension ``H`` through both supports.  For comparison with :func:`unloaded_sag_m`.

    Examples
    --------
    >>> round(float(catenary_sag_m(100.0, 200.0, 50e3, 20.0)), 4)
    2.0003
    """
    x = np.asarray(x_m, dtype=float)
    c = tension_n / weight_n_m
    L = float(span_m)
    return c * (math.cosh(L / (2.0 * c)) - np.cosh((x - L / 2.0) / c))


def ellipse_path_z(x_m, span_m: float, z_a_m: float, z_b_m: float, rope_length_m: float):
    """Height of a free carrier on a weightless inextensible rope of length ``S`` at ``x``.

    The lower arc of the ellipse with foci at the supports A = (0, z_a) and
    B = (L, z_b) and major axis S: every point has ``|PA| + |PB| = S``.

    Examples
    --------
    A level 100 m span with 104 m of rope: the carrier at midspan hangs
    sqrt(52² - 50²) = 14.28 m below the supports.

    >>> round(float(ellipse_path_z(50.0, 100.0, 0.0, 0.0, 104.0)), 4)
    -14.2829
    """
    L = float(span_m)
    chord = math.hypot(L, z_b_m - z_a_m)
    if not rope_length_m > chord:
        raise ParameterError(f"rope_length_m ({rope_length_m:g} m) must exceed the chord ({chord:g} m)")
    a = rope_length_m / 2.0
    b = math.sqrt(a * a - (chord / 2.0) ** 2)
    phi = math.atan2(z_b_m - z_a_m, L)
    c, s = math.cos(phi), math.sin(phi)
    dx = np.asarray(x_m, dtype=float) - L / 2.0
    qa = s * s / (a * a) + c * c / (b * b)
    qb = 2.0 * dx * c * s * (1.0 / (a * a) - 1.0 / (b * b))
    qc = dx * dx * (c * c / (a * a) + s * s / (b * b)) - 1.0
    disc = np.maximum(qb * qb - 4.0 * qa * qc, 0.0)
    return (z_a_m + z_b_m) / 2.0 + (-qb - np.sqrt(disc)) / (2.0 * qa)


@dataclass(frozen=True)
class Span:
    """One span: horizontal length, support heights, tension and loads.

    Parameters
    ----------
    length_m : float
        Horizontal length L of the span, m (> 0).
    z_a_m, z_b_m : float
        Heights of the cable at the two supports (top of support), m.
    tension_n : float
        Horizontal cable tension H, N (> 0).
    load_n : float
        Carrier gross load P, N (>= 0).
    weight_n_m : float
        Cable weight w per metre of cable, N/m (>= 0).

    Examples
    --------
    >>> s = Span(200.0, 120.0, 80.0, 50e3, 5e3, 20.0)
    >>> round(s.chord_slope, 3), round(s.midspan_deflection_m, 3)
    (-0.2, 7.04)
    >>> round(float(s.loaded_z(100.0)), 3)
    92.96
    """

    length_m: float
    z_a_m: float
    z_b_m: float
    tension_n: float
    load_n: float
    weight_n_m: float

    def __post_init__(self) -> None:
        check_number("length_m", self.length_m, strictly_positive=True)
        check_number("z_a_m", self.z_a_m, low=-math.inf)
        check_number("z_b_m", self.z_b_m, low=-math.inf)
        check_number("tension_n", self.tension_n, strictly_positive=True)
        check_number("load_n", self.load_n)
        check_number("weight_n_m", self.weight_n_m)

    @property
    def chord_slope(self) -> float:
        """Rise of the chord per metre of plan (negative falling from A to B)."""
        return (self.z_b_m - self.z_a_m) / self.length_m

    @property
    def weight_per_plan_n_m(self) -> float:
        """Cable weight per metre of plan, ``w sec(theta)``."""
        return self.weight_n_m * math.hypot(1.0, self.chord_slope)

    def chord_z(self, x_m):
        """Height of the chord at ``x``."""
        return self.z_a_m + self.chord_slope * np.asarray(x_m, dtype=float)

    def loaded_z(self, x_m):
        """Height of the carrier (its point on the rope) when it stands at ``x``."""
        return self.chord_z(x_m) - loaded_deflection_m(x_m, self.length_m, self.tension_n, self.load_n,
                                                        self.weight_per_plan_n_m)

    def unloaded_z(self, x_m):
        """Height of the unloaded cable (the parabola) at ``x``."""
        return self.chord_z(x_m) - unloaded_sag_m(x_m, self.length_m, self.tension_n, self.weight_per_plan_n_m)

    @property
    def midspan_deflection_m(self) -> float:
        """Depth of the carrier below the chord at midspan."""
        return float(loaded_deflection_m(self.length_m / 2.0, self.length_m, self.tension_n, self.load_n,
                                         self.weight_per_plan_n_m))

    @property
    def end_slopes(self) -> tuple[float, float]:
        """Slopes dz/dx of the unloaded cable at A and at B."""
        k = self.weight_per_plan_n_m * self.length_m / (2.0 * self.tension_n)
        return self.chord_slope - k, self.chord_slope + k
