"""The route as a CAD drawing: ``route.dxf``, written with ezdxf.

One drawing in the terrain's own CRS (map metres, heights as the DEM's), modelspace only,
DXF R12: the version every CAD package reads, and one ezdxf writes in the same order in
every process (its R2013 objects section was ordered differently from one Python process
to the next).  R12 has no units header: the drawing is in metres, as its ``NOTES`` say.
Named layers:

=================  ===============================================================
``ROUTE``          the reported line as one 3D polyline, vertex for vertex
``STATIONS``       a short tick across the line at every row of the chainage table
``STATION_TEXT``   chainage labels (``0+120.0``, km + m) and the points of interest
``KEEPOUT``        outlines of the keep-out areas (closed 2D polylines)
``SUPPORTS``       supports of a cable line (points with labels; empty for other lines)
``NOTES``          the CRS, the units and the caution
=================  ===============================================================

The file is written through :func:`fallway.export.atomic_path` (complete or absent) and
with ezdxf's fixed metadata (no creation time, no random GUIDs), so the same route gives
the same bytes.
"""

from __future__ import annotations

import contextlib
import math
import os
from pathlib import Path

import numpy as np

from .caution import CAUTION
from .errors import FallwayIOError, ParameterError
from .export import atomic_path, crs_label

__all__ = ["DXF_LAYERS", "chainage_label", "write_route_dxf"]

#: Layer names and their ACI colours.
DXF_LAYERS = {"ROUTE": 1, "STATIONS": 7, "STATION_TEXT": 7, "KEEPOUT": 6, "SUPPORTS": 3, "NOTES": 8}


def chainage_label(station_m: float) -> str:
    """A station as chainage, kilometres + metres to 0.1 m.

    Examples
    --------
    >>> chainage_label(0.0), chainage_label(1234.56), chainage_label(99.99)
    ('0+000.0', '1+234.6', '0+100.0')
    """
    tenths = int(round(float(station_m) * 10.0))
    km, rest = divmod(tenths, 10000)
    return f"{km}+{rest // 10:03d}.{rest % 10}"


@contextlib.contextmanager
def _fixed_metadata():
    """ezdxf's fixed header dates and GUIDs while a drawing is made and saved (same route, same bytes).

    ezdxf's log note that R12 has no units header is held back too: the ``NOTES`` layer
    states the units.
    """
    import logging

    import ezdxf

    old = ezdxf.options.write_fixed_meta_data_for_testing
    log = logging.getLogger("ezdxf")
    level = log.level
    ezdxf.options.write_fixed_meta_data_for_testing = True
    log.setLevel(logging.ERROR)
    try:
        yield
    finally:
        ezdxf.options.write_fixed_meta_data_for_testing = old
        log.setLevel(level)


def _outlines(geometry):
    """Exterior and interior rings of a (multi)polygon, as (N, 2) arrays without the repeated last point."""
    polys = getattr(geometry, "geoms", [geometry])
    for p in polys:
        for ring in (p.exterior, *p.interiors):
            yield np.asarray(ring.coords)[:-1, :2]


def write_route_dxf(route, path: str | os.PathLike, table, *, keepout=None, supports=()) -> Path:
    """Write the route, its stations and keep-out outlines as a DXF drawing.

    Parameters
    ----------
    route : Route
        Its ``line`` (the exported vertices) becomes the 3D polyline on layer ``ROUTE``.
    path : path-like
        Destination ``.dxf`` file.
    table : StationTable
        The chainage table (:func:`fallway.stations.station_table`): a tick and a label
        at each row.
    keepout : Keepout, optional
        Outlines on layer ``KEEPOUT`` (default: ``route.keepout``).
    supports : sequence of (x, y, z, label)
        Supports of a cable line, as points on layer ``SUPPORTS``.

    Returns
    -------
    Path

    Examples
    --------
    >>> import tempfile, pathlib, ezdxf
    >>> from fallway.export import _example_route
    >>> from fallway.stations import station_table
    >>> route, _ = _example_route()
    >>> p = write_route_dxf(route, pathlib.Path(tempfile.mkdtemp()) / "route.dxf", station_table(route, 10.0))
    >>> msp = ezdxf.readfile(p).modelspace()
    >>> [e.dxftype() for e in msp.query('*[layer=="ROUTE"]')], len(msp.query('LINE[layer=="STATIONS"]'))
    (['POLYLINE'], 6)
    """
    import ezdxf
    from ezdxf.enums import TextEntityAlignment

    pts = np.asarray(route.line, dtype=float)
    if pts.ndim != 2 or pts.shape[1] != 3 or len(pts) < 2 or not np.isfinite(pts).all():
        raise ParameterError("the route line must be a finite (N, 3) array with N >= 2 to be drawn")
    keepout = route.keepout if keepout is None else keepout
    with _fixed_metadata():  # ezdxf stamps its version and the time when the drawing is made
        doc = ezdxf.new("R12", setup=False)
    for name, colour in DXF_LAYERS.items():
        doc.layers.add(name, color=colour)
    msp = doc.modelspace()
    msp.add_polyline3d([tuple(map(float, p)) for p in pts], dxfattribs={"layer": "ROUTE"})

    step = float(table.step_m)
    tick = min(max(0.1 * step, 0.5), 5.0)  # half-length of a station tick, m
    height = min(max(0.15 * step, 0.3), 4.0)  # text height, m
    xy = pts[:, :2]
    last_left = -math.inf  # station of the last label on the left-hand side
    for s, x, y, z, flags in zip(table.station_m, table.x_m, table.y_m, table.line_z_m, table.flags):
        # the plan direction of the line at the station (the segment it lies on)
        j = min(int(np.searchsorted(route.profile.station_m, s, side="right")) - 1, len(pts) - 2)
        d = xy[j + 1] - xy[j]
        n = math.hypot(*d)
        ux, uy = (d / n) if n > 0 else (1.0, 0.0)
        px, py = -uy, ux
        a = (x - tick * px, y - tick * py, z)
        b = (x + tick * px, y + tick * py, z)
        msp.add_line(a, b, dxfattribs={"layer": "STATIONS"})
        label = chainage_label(s) + (f" {flags.replace(';', ', ')}" if flags else "")
        angle = math.degrees(math.atan2(py, px))
        txt = msp.add_text(label, height=height, rotation=angle, dxfattribs={"layer": "STATION_TEXT"})
        if s - last_left >= 0.5 * step:  # left of the line, reading away from it
            txt.set_placement((b[0] + 0.2 * tick * px, b[1] + 0.2 * tick * py, z),
                              align=TextEntityAlignment.MIDDLE_LEFT)
            last_left = s
        else:  # close to the label before it: on the right-hand side instead
            txt.set_placement((a[0] - 0.2 * tick * px, a[1] - 0.2 * tick * py, z),
                              align=TextEntityAlignment.MIDDLE_RIGHT)
    if keepout is not None:
        for ring in _outlines(keepout.geometry):
            msp.add_polyline2d([tuple(map(float, p)) for p in ring], close=True, dxfattribs={"layer": "KEEPOUT"})
    for x, y, z, label in supports:
        msp.add_point((float(x), float(y), float(z)), dxfattribs={"layer": "SUPPORTS"})
        msp.add_text(str(label), height=height, dxfattribs={"layer": "SUPPORTS"}).set_placement(
            (float(x), float(y), float(z)), align=TextEntityAlignment.BOTTOM_LEFT)
    crs = route.terrain.crs
    notes = [f"CRS {crs_label(crs) if crs is not None else 'not given'}; units metres; heights as in the DEM",
             *CAUTION.split("\n")]
    # beside the drawing, clear of the line and its labels (about 30 characters long)
    x0, y0 = float(xy[:, 0].max()) + tick + 30.0 * height, float(xy[:, 1].max())
    for k, text in enumerate(notes):
        msp.add_text(text, height=height, dxfattribs={"layer": "NOTES"}).set_placement(
            (x0, y0 - 1.5 * height * k), align=TextEntityAlignment.LEFT)
    path = Path(path)
    with atomic_path(path) as tmp:
        try:
            with _fixed_metadata():
                doc.saveas(tmp)
        except ezdxf.DXFError as err:
            raise FallwayIOError(f"cannot write {path}: {err}") from err
    return path
