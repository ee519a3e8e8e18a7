"""Scenario files: everything a design run needs, in TOML, validated.

A scenario holds what the command-line flags hold, so a run is reproducible: flags
override the file, and the resolved scenario is written beside the outputs.

Layout (every section and key optional; unknown keys are rejected)::

    dem = "site.tif"                 # relative paths are relative to the scenario file
    band = 1                         # optional: the DEM band holding the heights (default 1)
    z_scale = 0.3048                 # optional: metres per height unit (default: the unit the band declares)
    keepout = "keepout.geojson"
    keepout_layers = ["no-go"]       # optional: the layers to read (default: every polygon layer)

    [points]
    start = [512300.0, 5401200.0]    # map coordinates of the DEM (or lon/lat, see lonlat)
    end = [512800.0, 5400900.0]
    via = [[512500.0, 5401000.0]]
    lonlat = false                   # true: the points are WGS 84 longitude, latitude

    [mover]                          # fallway.Mover
    mu = 0.15
    drag = 0.0
    v0 = 0.0
    g = 9.80665
    normal = "full"
    stall_speed = 0.0
    max_speed = 25.0

    [limits]                         # fallway.Limits
    min_grade = 0.0
    max_grade = 1.0
    max_step_turn_deg = 45.0
    min_radius_m = 10.0
    max_lateral_g = 0.5              # sideways acceleration in bends, g
    max_normal_g = 3.0               # normal load on the bed, g
    allow_liftoff = false            # an open chute (true: enclosed chute or pipe)

    [search]                         # fallway.SearchOptions
    neighbours = 16
    refine = true
    label_cap = 4                    # optional: approximate search, at most 4 labels per cell
    plan = "auto"                    # or "full", "corridor" (coarse-to-fine)
    coarse_factor = 4                # corridor plan: coarsening factor
    corridor_m = 40.0                # corridor plan: first corridor half-width, m
    gap = 0.001                      # certified optimality gap to reach (0: the exact search only)

    [line]                           # fallway.LineSpec
    kind = "ground"                  # or "raised"
    clearance = [0.5, 15.0]
    start_height = 0.0
    end_height = 0.0
    height_layers = 16               # raised line: height layers of the search
    straight_plan = false            # raised line: plan fixed straight, only the profile free

    [envelope]
    mu_range = [0.1, 0.2]

    [outputs]
    station_step = 10.0              # interval of the chainage table stations.csv, m
    [cable]                          # fallway.CableSpec (with line.kind = "cable"; the band
    support_height_m = [4.0, 15.0]   # and end heights come from [line])
    max_span_m = 300.0
    cable_tension_kn = 50.0
    carrier_load_kn = 5.0
    cable_weight_n_m = 20.0
    objective = "time"               # or "supports"
    station_step_m = 10.0
    height_step_m = 1.0
    max_break_over_deg = 20.0
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import asdict, dataclass, field, fields
from pathlib import Path
from typing import Any

from .errors import FallwayError, ParameterError, ScenarioError
from .cable.spec import CableSpec
from .params import Limits, LineSpec, Mover, SearchOptions
from .stations import DEFAULT_STATION_STEP_M

__all__ = ["Scenario", "load_scenario", "read_toml", "check_value", "kind_of"]

_SCHEMA: dict[str, Any] = {
    "dem": str,
    "band": int,
    "z_scale": float,
    "keepout": str,
    "keepout_layers": "strings",
    "points": {"start": "point", "end": "point", "via": "points", "lonlat": bool},
    "mover": {f.name: f.name for f in fields(Mover)},
    "limits": {f.name: f.name for f in fields(Limits)},
    "search": {"neighbours": int, "refine": bool, "label_cap": int, "plan": str, "coarse_factor": int,
               "corridor_m": float, "gap": float},
    "line": {"kind": str, "clearance": "pair", "start_height": float, "end_height": float, "height_layers": int,
             "straight_plan": bool},
    "envelope": {"mu_range": "pair"},
    "outputs": {"station_step": float},
    "cable": {f.name: f.name for f in fields(CableSpec)
              if f.name not in ("start_height_m", "end_height_m", "clearance_m")},
}


# One rule for every value (TOML types, never converted): a quantity is a TOML integer or
# float, a count a TOML integer, a name or a choice a string, a switch a boolean.  So
# mu = "0.2" is refused as neighbours = 16.0 is, instead of one being read as a number.
_TOML_TYPE = {bool: "a boolean", int: "an integer", float: "a float", str: "a string", list: "a list",
              dict: "a table"}


def _what(value) -> str:
    return f"{value!r} ({_TOML_TYPE.get(type(value), type(value).__name__)})"


def _number(key: str, value) -> float:
    """A quantity: a TOML integer or float, finite."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ScenarioError(f"{key} must be a number, got {_what(value)}")
    v = float(value)
    if not math.isfinite(v):
        raise ScenarioError(f"{key} must be a finite number, got {value!r}")
    return v


def _count(key: str, value) -> int:
    """A count: a TOML integer."""
    if isinstance(value, bool) or not isinstance(value, int):
        raise ScenarioError(f"{key} must be a whole number, got {_what(value)}")
    return value


def _text(key: str, value) -> str:
    if not isinstance(value, str):
        raise ScenarioError(f"{key} must be a string, got {_what(value)}")
    return value


def _point(key: str, value) -> tuple[float, float]:
    if not (isinstance(value, (list, tuple)) and len(value) == 2):
        raise ScenarioError(f"{key} must be a pair of numbers [x, y], got {value!r}")
    x, y = (_number(key, v) for v in value)
    return (x, y)


def kind_of(annotation: str) -> str:
    """The value kind of a parameter field from its annotation: number, count, text or flag.

    Examples
    --------
    >>> [kind_of(a) for a in ("float", "int | None", "str", "bool", "float | None")]
    ['number', 'count', 'text', 'flag', 'number']
    """
    a = str(annotation)
    for word, kind in (("bool", "flag"), ("str", "text"), ("float", "number"), ("int", "count")):
        if word in a:
            return kind
    return "number"


def check_value(key: str, value, kind: str):
    """``value`` checked against its kind (number, count, text, flag); raises ScenarioError."""
    if value is None:
        raise ScenarioError(f"{key} must be given a value")
    if kind == "number":
        return _number(key, value)
    if kind == "count":
        return _count(key, value)
    if kind == "text":
        return _text(key, value)
    return _bool(key, value)


@dataclass(frozen=True)
class Scenario:
    """A validated design run: terrain, points, physics, limits and line kind.

    Examples
    --------
    >>> s = Scenario.from_dict({"points": {"start": [0, 10], "end": [50, 0]},
    ...                         "mover": {"mu": 0.1}})
    >>> s.mover.mu, s.search.neighbours, s.line.kind
    (0.1, 16, 'ground')
    >>> Scenario.from_dict({"mover": {"mass": 3}})
    Traceback (most recent call last):
    ...
    fallway.errors.ScenarioError: unknown key mover.mass; allowed: mu, drag, v0, g, normal, stall_speed, max_speed
    """

    dem: str | None = None
    band: int | None = None
    z_scale: float | None = None
    keepout: str | None = None
    keepout_layers: tuple[str, ...] = ()
    start: tuple[float, float] | None = None
    end: tuple[float, float] | None = None
    via: tuple[tuple[float, float], ...] = ()
    lonlat: bool = False
    mover: Mover = field(default_factory=Mover)
    limits: Limits = field(default_factory=Limits)
    line: LineSpec = field(default_factory=LineSpec)
    search: SearchOptions = field(default_factory=SearchOptions)
    refine: bool = True
    mu_range: tuple[float, float] | None = None
    station_step_m: float = DEFAULT_STATION_STEP_M

    def __post_init__(self) -> None:
        if self.mu_range is not None:
            a, b = self.mu_range
            if not (0 <= a <= b):
                raise ScenarioError(f"envelope.mu_range must be [low, high] with 0 <= low <= high; got [{a:g}, {b:g}]")

    # ------------------------------------------------------------------ building
    @classmethod
    def from_dict(cls, data: dict, *, base_dir: str | Path | None = None) -> "Scenario":
        """Validate a nested mapping (the TOML layout in the module docstring)."""
        _check_keys(data, _SCHEMA, "")
        kw: dict[str, Any] = {}
        for key in ("dem", "keepout"):
            if key in data:
                p = Path(_text(key, data[key])).expanduser()
                if base_dir is not None and not p.is_absolute():
                    p = Path(base_dir) / p
                kw[key] = str(p)
        if "band" in data:
            kw["band"] = _count("band", data["band"])
            if kw["band"] < 1:
                raise ScenarioError(f"band must be a whole number >= 1 (bands count from 1), got {kw['band']!r}")
        if "z_scale" in data:
            kw["z_scale"] = _number("z_scale", data["z_scale"])
            if kw["z_scale"] <= 0:
                raise ScenarioError(f"z_scale must be a number > 0 (metres per height unit), got {data['z_scale']!r}")
        if "keepout_layers" in data:
            kl = data["keepout_layers"]
            if not (isinstance(kl, (list, tuple)) and kl and all(isinstance(v, str) and v for v in kl)):
                raise ScenarioError(f"keepout_layers must be a list of layer names, got {kl!r}")
            kw["keepout_layers"] = tuple(kl)
        pts = data.get("points", {})
        if "start" in pts:
            kw["start"] = _point("points.start", pts["start"])
        if "end" in pts:
            kw["end"] = _point("points.end", pts["end"])
        if "via" in pts:
            via = pts["via"]
            if not isinstance(via, (list, tuple)):
                raise ScenarioError(f"points.via must be a list of [x, y] pairs, got {via!r}")
            kw["via"] = tuple(_point(f"points.via[{i}]", p) for i, p in enumerate(via))
        if "lonlat" in pts:
            kw["lonlat"] = _bool("points.lonlat", pts["lonlat"])
        kw["mover"] = _build(Mover, "mover", data.get("mover", {}))
        kw["limits"] = _build(Limits, "limits", data.get("limits", {}))
        search = dict(data.get("search", {}))
        if "refine" in search:
            kw["refine"] = _bool("search.refine", search.pop("refine"))
        kinds = {f.name: kind_of(f.type) for f in fields(SearchOptions)}
        search = {key: check_value(f"search.{key}", value, kinds[key]) for key, value in search.items()}
        try:
            kw["search"] = SearchOptions(**search)
        except ParameterError as err:
            raise ScenarioError(f"search.{err}") from err
        line = data.get("line", {})
        lk: dict[str, Any] = {}
        if "kind" in line:
            lk["kind"] = _text("line.kind", line["kind"])
        if "clearance" in line:
            lo, hi = (_number("line.clearance", v) for v in _pair("line.clearance", line["clearance"]))
            if lo < 0 or hi < lo:
                raise ScenarioError(f"line.clearance must be [min, max] with 0 <= min <= max; got [{lo:g}, {hi:g}]")
            lk["clearance_m"] = (lo, hi)
        for name in ("start_height", "end_height"):
            if name in line:
                lk[f"{name}_m"] = _number(f"line.{name}", line[name])
        if "height_layers" in line:
            lk["height_layers"] = _count("line.height_layers", line["height_layers"])
        if "straight_plan" in line:
            lk["straight_plan"] = _bool("line.straight_plan", line["straight_plan"])
        if "cable" in data or lk.get("kind") == "cable":
            lk["cable"] = _cable(data.get("cable", {}), lk)
        try:
            kw["line"] = LineSpec(**lk)
        except ParameterError as err:
            raise ScenarioError(f"line.{str(err).replace('_m ', ' ').replace('line kind', 'kind')}") from err
        env = data.get("envelope", {})
        if "mu_range" in env:
            kw["mu_range"] = tuple(_number("envelope.mu_range", v) for v in _pair("envelope.mu_range", env["mu_range"]))
        outputs = data.get("outputs", {})
        if "station_step" in outputs:
            from .stations import check_station_step

            try:
                kw["station_step_m"] = check_station_step(_number("outputs.station_step", outputs["station_step"]))
            except ParameterError as err:
                raise ScenarioError(f"outputs.station_step: {err}") from err
        return cls(**kw)

    def to_dict(self) -> dict:
        """The nested mapping that :meth:`from_dict` reads (None values left out)."""
        d: dict[str, Any] = {}
        if self.dem is not None:
            d["dem"] = self.dem
        if self.band is not None:
            d["band"] = self.band
        if self.z_scale is not None:
            d["z_scale"] = self.z_scale
        if self.keepout is not None:
            d["keepout"] = self.keepout
        if self.keepout_layers:
            d["keepout_layers"] = list(self.keepout_layers)
        pts: dict[str, Any] = {"lonlat": self.lonlat}
        if self.start is not None:
            pts["start"] = list(self.start)
        if self.end is not None:
            pts["end"] = list(self.end)
        if self.via:
            pts["via"] = [list(p) for p in self.via]
        d["points"] = pts
        d["mover"] = {k: v for k, v in asdict(self.mover).items() if v is not None}
        d["limits"] = {k: v for k, v in asdict(self.limits).items()
                       if v is not None and not (isinstance(v, float) and math.isinf(v))}
        sd = {"neighbours": self.search.neighbours, "refine": self.refine, "plan": self.search.plan}
        for key in ("label_cap", "coarse_factor", "corridor_m"):
            if getattr(self.search, key) is not None:
                sd[key] = getattr(self.search, key)
        if self.search.gap != SearchOptions().gap:
            sd["gap"] = 0.0 if self.search.gap is None else self.search.gap
        d["search"] = sd
        d["line"] = {"kind": self.line.kind, "clearance": list(self.line.clearance_m),
                     "start_height": self.line.start_height_m, "end_height": self.line.end_height_m,
                     "height_layers": self.line.height_layers, "straight_plan": self.line.straight_plan}
        if self.mu_range is not None:
            d["envelope"] = {"mu_range": list(self.mu_range)}
        if self.station_step_m != DEFAULT_STATION_STEP_M:
            d["outputs"] = {"station_step": self.station_step_m}
        if self.line.cable is not None:
            d["cable"] = {k: (list(v) if isinstance(v, tuple) else v) for k, v in asdict(self.line.cable).items()
                          if v is not None and k in _SCHEMA["cable"]}
        return d

    def to_toml(self) -> str:
        """The resolved scenario as TOML text (readable back with :func:`load_scenario`)."""
        return dumps_toml(self.to_dict())


def _cable(values: dict, line: dict) -> CableSpec:
    """The [cable] section with the band and end heights of [line]."""
    if line.get("kind") != "cable":
        raise ScenarioError(f"cable parameters need line.kind = \"cable\", got {line.get('kind', 'ground')!r}")
    kw = {}
    for key, value in values.items():
        if key == "support_height_m":
            kw[key] = tuple(_number("cable.support_height_m", v) for v in _pair("cable.support_height_m", value))
        elif key == "objective":
            kw[key] = _text("cable.objective", value)
        else:
            kw[key] = _number(f"cable.{key}", value)
    for src, dst in (("clearance_m", "clearance_m"), ("start_height_m", "start_height_m"),
                     ("end_height_m", "end_height_m")):
        if src in line:
            kw[dst] = line[src]
    try:
        return CableSpec(**kw)
    except ParameterError as err:
        raise ScenarioError(f"cable.{err}") from err


def _bool(key: str, value) -> bool:
    if not isinstance(value, bool):
        raise ScenarioError(f"{key} must be true or false, got {value!r}")
    return value


def _pair(key: str, value) -> tuple:
    if not (isinstance(value, (list, tuple)) and len(value) == 2):
        raise ScenarioError(f"{key} must be a pair [low, high], got {value!r}")
    return tuple(value)


def _check_keys(data: dict, schema: dict, prefix: str) -> None:
    if not isinstance(data, dict):
        raise ScenarioError(f"{prefix.rstrip('.') or 'scenario'} must be a table, got {data!r}")
    for key, value in data.items():
        if key not in schema:
            raise ScenarioError(f"unknown key {prefix}{key}; allowed: {', '.join(schema)}")
        if isinstance(schema[key], dict):
            _check_keys(value, schema[key], f"{prefix}{key}.")


def _build(cls, section: str, values: dict):
    kinds = {f.name: kind_of(f.type) for f in fields(cls)}
    kw = {key: check_value(f"{section}.{key}", value, kinds.get(key, "number")) for key, value in values.items()}
    try:
        return cls(**kw)
    except ParameterError as err:
        raise ScenarioError(f"{section}.{err}") from err


def read_toml(path: str | Path, what: str = "scenario file") -> dict:
    """The mapping a TOML file holds; one clear :class:`ScenarioError` naming the file otherwise.

    The file must be readable, UTF-8 text (TOML's own encoding; a leading byte-order mark
    is allowed) and valid TOML.  ``what`` names the file in messages ("batch file").
    """
    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as err:
        raise ScenarioError(f"cannot read {what} {p}: {err.strerror or err}") from err
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        line = raw[:err.start].count(b"\n") + 1
        raise ScenarioError(f"{what} {p} is not UTF-8 text (byte 0x{raw[err.start]:02x} on line {line}); "
                            "save it as UTF-8, the encoding TOML files use") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise ScenarioError(f"{what} {p} is not valid TOML: {err}") from err


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a TOML scenario file.

    Raises
    ------
    ScenarioError
        For a file that cannot be read, is not UTF-8 or not valid TOML, an unknown key or
        an out-of-range value.
    """
    p = Path(path)
    return Scenario.from_dict(read_toml(p), base_dir=p.parent)


def dumps_toml(data: dict) -> str:
    """Serialise the scenario mapping (strings, numbers, booleans, lists) as TOML.

    Only the value kinds a scenario holds are supported.

    Examples
    --------
    >>> print(dumps_toml({"dem": "a.tif", "mover": {"mu": 0.1, "normal": "full"}}).strip())
    dem = "a.tif"
    <BLANKLINE>
    [mover]
    mu = 0.1
    normal = "full"
    """
    top = [f"{k} = {_value(v)}" for k, v in data.items() if not isinstance(v, dict)]
    parts = ["\n".join(top)] if top else []
    for k, v in data.items():
        if isinstance(v, dict):
            body = "\n".join(f"{kk} = {_value(vv)}" for kk, vv in v.items())
            parts.append(f"[{k}]\n{body}")
    return "\n\n".join(parts) + "\n"


_TOML_ESCAPES = {"\\": "\\\\", '"': '\\"'}


def _control(ch: str) -> bool:
    return (ch < " " and ch != "\t") or ch == "\x7f"


def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        # a TOML basic string: backslash and quote escaped, and every control character
        # but tab as \uXXXX (TOML 1.0, "String"), so any path or name reads back
        return '"' + "".join(_TOML_ESCAPES.get(ch) or (f"\\u{ord(ch):04X}" if _control(ch) else ch) for ch in v) + '"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    raise FallwayError(f"cannot write {type(v).__name__} to a scenario file")
