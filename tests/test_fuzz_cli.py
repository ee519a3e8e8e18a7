"""Fuzzing the command line: extreme numbers and broken files end in a clear error, never a crash.

Hypothesis drives ``fallway route``, ``reach`` and ``compare`` in-process (click's
CliRunner on :data:`fallway.cli.main`) with

- every numeric option of ``route`` (and of ``reach``) given odd values: 0, -0, negative,
  huge (1e308, 1e9, 2**70), tiny (1e-300, 5e-324), nan, inf, -inf, text that is no
  number, and any float hypothesis draws;
- DEM GeoTIFFs from 1 x 1 cells up (below the smallest grid the tool accepts,
  :data:`fallway.terrain.MIN_GRID_CELLS` per side, and at it), all nodata, constant,
  NaN or inf filled, huge heights, every GDAL integer and float data type; garbage
  bytes, empty files and truncated GeoTIFFs;
- scenario files: random bytes (non-UTF-8 among them) and random values under every
  scenario key;
- keep-out and candidate-line files: GeoJSON with garbage, invalid JSON, empty feature
  collections, null, empty and degenerate geometry (zero-area polygons, single-point
  lines, repeated points), non-finite and huge coordinates.

The property checked is the command line's own contract (the docstring of
:mod:`fallway.cli`): the exit code is 0 (success), 1 (a clear error), 2 (usage) or 3 (no
feasible line); stderr never holds a traceback nor the "unexpected ..., please report
it" line :func:`fallway.cli._guard` prints for a bug; a failure ends in one line
``fallway: error: ...`` (or click's own ``Error: ...`` usage line) naming the input:
the file, or the option or scenario key.

Warnings run as they do for a user (the default filter, not pytest's "error"), so a
warning is a log line, as in a real run.

Examples: CI runs a fixed, small set (``derandomize=True``: the same examples every run,
no example database).  Set ``FALLWAY_FUZZ_EXAMPLES=500`` to explore that many new random
examples per test locally (hypothesis's database then replays any failure it finds).
"""

from __future__ import annotations

import json
import math
import os
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pytest
from affine import Affine
from click.testing import CliRunner
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from conftest import plane, write_geotiff
from fallway.cli import main
from fallway.scenario import dumps_toml
from fallway.terrain import MIN_GRID_CELLS

# ----------------------------------------------------------------------------- profiles
_LOCAL = os.environ.get("FALLWAY_FUZZ_EXAMPLES")
_HEALTH = [HealthCheck.too_slow, HealthCheck.function_scoped_fixture, HealthCheck.filter_too_much]
settings.register_profile("fuzz-ci", derandomize=True, database=None, deadline=None,
                          suppress_health_check=_HEALTH, print_blob=True)
settings.register_profile("fuzz-local", max_examples=int(_LOCAL or 0) or 100, deadline=None,
                          suppress_health_check=_HEALTH, print_blob=True)
_PROFILE = settings.get_profile("fuzz-local" if _LOCAL else "fuzz-ci")


def fuzz(ci_examples: int):
    """The settings of one test: ``ci_examples`` fixed examples in CI, FALLWAY_FUZZ_EXAMPLES locally."""
    return settings(_PROFILE, max_examples=_PROFILE.max_examples if _LOCAL else ci_examples)


# ----------------------------------------------------------------------------- the site
CRS = "EPSG:32633"
X0, Y0, CELL = 500_000.0, 4_000_000.0, 5.0
N = 8
# an 8 x 8 plane at 5 m falling 0.3 to the east; row 3 from column 0 to column 7
START = (X0 + 2.5, Y0 - 17.5)
END = (X0 + 37.5, Y0 - 17.5)
EXIT_CODES = {0, 1, 2, 3}  # fallway.cli: success, clear error, usage, no feasible line


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    d = tmp_path_factory.mktemp("site")
    z, t = plane(N, N, CELL, -0.3, 0.0)
    return write_geotiff(d / "dem.tif", z, t, CRS)


def _xy(p) -> list[str]:
    return [repr(float(p[0])), repr(float(p[1]))]


def invoke(args, out_name="out"):
    """Run the CLI in-process with the user's warning filter; returns (exit code, stderr)."""
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / out_name
        with warnings.catch_warnings():
            warnings.simplefilter("default")
            res = CliRunner().invoke(main, [str(a) for a in args] + ["--out", str(out)])
    return res.exit_code, res.stderr, res.exception


def check_contract(code, err, exc, names=()) -> None:
    """The CLI's contract (see the module docstring); ``names``: words one of which a code-1 message holds."""
    assert exc is None or isinstance(exc, SystemExit), f"exception escaped the CLI: {exc!r}"
    assert code in EXIT_CODES, (code, err)
    assert "Traceback" not in err, err
    assert "please report" not in err and "unexpected" not in err, err
    if code == 0:
        return
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert lines, f"exit {code} with nothing on stderr"
    last = lines[-1]
    if code == 2:
        assert last.startswith("Error: ") or last.startswith("fallway: error: "), err
        return
    assert last.startswith("fallway: error: "), err
    assert sum(ln.startswith("fallway: error: ") for ln in lines) == 1, err
    if code == 1 and names:
        assert any(n.lower() in last.lower() for n in names), f"message names none of {names}: {last}"


# ----------------------------------------------------------------------------- numbers
#: odd values of a number, as typed on the command line
ODD = ["0", "-0", "-1", "1e308", "-1e308", "1.7976931348623157e308", "1e9", "1e-300", "5e-324", "nan", "-nan",
       "inf", "-inf", "Infinity", "abc", "", "1e", "0x10", "1_000", str(2 ** 70), str(-2 ** 70), "2147483648"]
numbers = st.one_of(  # the odd values first and twice: hypothesis shrinks towards them
    st.sampled_from(ODD),
    st.sampled_from(ODD),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.floats(0.0, 100.0).map(repr),
    st.integers(-2 ** 70, 2 ** 70).map(str),
)

#: every numeric option of route, with the words its message may name it by
ROUTE_OPTIONS = {
    "--band": ("band",), "--z-scale": ("z_scale", "z-scale"), "--mu": ("mu",), "--drag": ("drag",),
    "--v0": ("v0",), "--g": ("g",), "--label-cap": ("label_cap", "label-cap"),
    "--min-grade": ("min_grade", "grade"), "--max-grade": ("max_grade", "grade"),
    "--max-speed": ("max_speed", "speed"), "--stall-speed": ("stall_speed", "speed"),
    "--max-step-turn": ("max_step_turn", "turn"), "--start-height": ("start_height",),
    "--end-height": ("end_height",), "--min-radius": ("min_radius",), "--coarse": ("coarse",),
    "--corridor": ("corridor",),
}
ROUTE_PAIRS = {"--clearance": ("clearance",), "--mu-range": ("mu_range", "mu")}
REACH_OPTIONS = {k: v for k, v in ROUTE_OPTIONS.items()
                 if k not in ("--start-height", "--end-height", "--min-radius", "--coarse", "--corridor")}
REACH_OPTIONS.update({"--max-time": ("max_time",), "--max-distance": ("max_distance",)})


@st.composite
def option_args(draw, options, pairs=None):
    """1 to 3 options with odd values; returns (args, the words naming them)."""
    table = dict(options)
    table.update(pairs or {})
    chosen = draw(st.lists(st.sampled_from(sorted(table)), min_size=1, max_size=3, unique=True))
    args, names = [], []
    for opt in chosen:
        n = 2 if pairs and opt in pairs else 1
        args += [opt] + [draw(numbers) for _ in range(n)]
        names += list(table[opt])
    if "--start-height" in chosen or "--end-height" in chosen or "--clearance" in chosen:
        args += ["--line", "raised"]
        if "--clearance" not in chosen:
            args += ["--clearance", "0", draw(st.sampled_from(["5", "1e4"]))]
    if "--corridor" in chosen or ("--coarse" in chosen and draw(st.booleans())):
        args += ["--plan", "corridor"]
    return args, tuple(names) + tuple(o.lstrip("-") for o in chosen)


@pytest.mark.slow
@fuzz(12)
@given(opts=option_args(ROUTE_OPTIONS, ROUTE_PAIRS))
def test_route_numeric_options(site, opts):
    args, names = opts
    code, err, exc = invoke(["route", site, "--start", *_xy(START), "--end", *_xy(END), "--no-refine", *args])
    check_contract(code, err, exc, names)


@fuzz(20)
@given(opts=option_args(REACH_OPTIONS))
def test_reach_numeric_options(site, opts):
    args, names = opts
    code, err, exc = invoke(["reach", site, "--start", *_xy(START), *args], out_name="reach.tif")
    check_contract(code, err, exc, names)


@fuzz(12)
@given(x=numbers, y=numbers, which=st.sampled_from(["--start", "--end", "--via"]))
def test_route_points(site, x, y, which):
    pts = {"--start": list(START), "--end": list(END)}
    args = ["route", site, "--no-refine"]
    for opt in ("--start", "--end"):
        args += [opt, *((x, y) if opt == which else _xy(pts[opt]))]
    if which == "--via":
        args += ["--via", x, y]
    code, err, exc = invoke(args)
    check_contract(code, err, exc, ("start", "end", "via", "point"))


@pytest.mark.slow
def test_every_odd_value_of_every_option(site):
    """The fixed corner of the search space, each option alone: every odd value once."""
    for opt, names in ROUTE_OPTIONS.items():
        for v in ("0", "-1", "1e308", "1e-300", "nan", "inf", "-inf", "abc"):
            extra = ["--line", "raised", "--clearance", "0", "1e4"] if "height" in opt else []
            code, err, exc = invoke(["route", site, "--start", *_xy(START), "--end", *_xy(END), "--no-refine",
                                     opt, v, *extra])
            check_contract(code, err, exc, names)


# ----------------------------------------------------------------------------- DEM files
DTYPES = ["uint8", "int8", "int16", "uint16", "int32", "uint32", "int64", "uint64", "float32", "float64"]


@st.composite
def dems(draw):
    """(heights, dtype, nodata) of a small DEM: below the smallest accepted grid and up."""
    rows = draw(st.integers(1, 12))
    cols = draw(st.integers(1, 12))
    kind = draw(st.sampled_from(["plane", "constant", "nan", "nodata", "inf", "huge", "random", "holes"]))
    dtype = draw(st.sampled_from(DTYPES))
    rng = np.random.default_rng(draw(st.integers(0, 2 ** 32 - 1)))
    c = np.arange(cols)[None, :] + np.zeros((rows, 1))
    z = 100.0 - 1.5 * c
    nodata = None
    if kind == "constant":
        z = np.full((rows, cols), draw(st.sampled_from([0.0, 50.0, 255.0])))
    elif kind == "nan":
        z = np.full((rows, cols), np.nan)
    elif kind == "nodata":
        nodata = 0.0
        z = np.zeros((rows, cols))
    elif kind == "inf":
        z = np.where(rng.random((rows, cols)) < 0.5, np.inf, z)
    elif kind == "huge":
        z = z * draw(st.sampled_from([1e30, 1e38, -1e38, 3e38]))
    elif kind == "random":
        z = rng.uniform(0.0, 250.0, (rows, cols))
    else:
        z = np.where(rng.random((rows, cols)) < 0.4, np.nan, z)
    if not dtype.startswith("float"):
        info = np.iinfo(dtype)
        z = np.clip(np.nan_to_num(z, nan=0.0, posinf=info.max, neginf=info.min), info.min, info.max)
    elif dtype == "float32":
        with np.errstate(over="ignore"):
            z = z.astype(np.float32)
    return z, dtype, nodata


@fuzz(25)
@given(dem=dems(), command=st.sampled_from(["route", "reach"]))
def test_dem_files(dem, command):
    z, dtype, nodata = dem
    rows, cols = z.shape
    with tempfile.TemporaryDirectory() as tmp:
        path = write_geotiff(Path(tmp) / "dem.tif", z, Affine(CELL, 0, X0, 0, -CELL, Y0), CRS, nodata=nodata,
                             dtype=dtype)
        a = (X0 + 0.5 * CELL, Y0 - 0.5 * CELL)
        b = (X0 + (cols - 0.5) * CELL, Y0 - (rows - 0.5) * CELL)
        if command == "route":
            args = ["route", path, "--start", *_xy(a), "--end", *_xy(b), "--no-refine"]
        else:
            args = ["reach", path, "--start", *_xy(a)]
        code, err, exc = invoke(args, out_name="out.tif" if command == "reach" else "out")
    check_contract(code, err, exc, (str(path), "start", "end", "point"))
    if min(rows, cols) < MIN_GRID_CELLS:
        assert code == 1 and f"{MIN_GRID_CELLS} x {MIN_GRID_CELLS} cells" in err and str(path) in err, err


def test_smallest_accepted_grid_routes(tmp_path):
    """A DEM of MIN_GRID_CELLS x MIN_GRID_CELLS cells runs end to end (refined), and one cell less is refused."""
    k = MIN_GRID_CELLS
    z = 100.0 - 3.0 * np.arange(k)[None, :] - 1.0 * np.arange(k)[:, None]
    path = write_geotiff(tmp_path / "small.tif", z, Affine(CELL, 0, X0, 0, -CELL, Y0), CRS)
    a = (X0 + 0.5 * CELL, Y0 - 0.5 * CELL)
    b = (X0 + (k - 0.5) * CELL, Y0 - (k - 0.5) * CELL)
    code, err, exc = invoke(["route", path, "--start", *_xy(a), "--end", *_xy(b)])
    check_contract(code, err, exc)
    assert code == 0, err
    thin = write_geotiff(tmp_path / "thin.tif", z[:k - 1], Affine(CELL, 0, X0, 0, -CELL, Y0), CRS)
    code, err, exc = invoke(["route", thin, "--start", *_xy(a), "--end", *_xy(a)])
    check_contract(code, err, exc)
    assert code == 1 and str(thin) in err and f"at least {k} x {k}" in err, err


@fuzz(15)
@given(data=st.one_of(st.binary(max_size=300), st.binary(max_size=300).map(lambda b: b"II*\x00" + b),
                      st.binary(max_size=300).map(lambda b: b"MM\x00*" + b)),
       command=st.sampled_from(["route", "reach", "compare"]))
def test_garbage_dem_files(site, data, command):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "dem.tif"
        path.write_bytes(data)
        lines = Path(tmp) / "lines.geojson"
        lines.write_text(_geojson([_feature({"type": "LineString", "coordinates": [list(START), list(END)]})]))
        args = {"route": ["route", path, "--start", *_xy(START), "--end", *_xy(END), "--no-refine"],
                "reach": ["reach", path, "--start", *_xy(START)],
                "compare": ["compare", path, lines]}[command]
        code, err, exc = invoke(args, out_name="out.tif" if command == "reach" else "out")
    check_contract(code, err, exc, (str(path),))
    assert code == 1, err


@fuzz(10)
@given(cut=st.floats(0.0, 0.99))
def test_truncated_geotiff(site, cut):
    data = Path(site).read_bytes()
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "cut.tif"
        path.write_bytes(data[:int(cut * len(data))])
        code, err, exc = invoke(["route", path, "--start", *_xy(START), "--end", *_xy(END), "--no-refine"])
    check_contract(code, err, exc, (str(path),))
    assert code == 1, err


# ----------------------------------------------------------------------------- scenario files
# through ``reach``: it reads a scenario as ``route`` does (Scenario.from_dict validates
# every section), and a run that succeeds writes one GeoTIFF instead of a report
@fuzz(20)
@given(data=st.one_of(st.binary(max_size=200),
                      st.binary(min_size=1, max_size=20).map(lambda b: b"[mover]\nmu = 0.1 # " + b + b"\n"),
                      st.text(max_size=200).map(lambda s: s.encode("utf-8", "surrogatepass"))))
def test_scenario_bytes(site, data):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "s.toml"
        path.write_bytes(data)
        code, err, exc = invoke(["reach", site, "--start", *_xy(START), "--scenario", path], out_name="r.tif")
    check_contract(code, err, exc, (str(path), "scenario", ".", "_"))


toml_values = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True), st.integers(-2 ** 63, 2 ** 63 - 1), st.booleans(),
    st.text(max_size=8), st.sampled_from([1e308, -1e308, 5e-324, 0.0, -0.0, 2 ** 63 - 1]),
    st.lists(st.one_of(st.floats(allow_nan=False), st.integers(-10, 10)), max_size=3),
)
SCENARIO_KEYS = {
    "mover": ["mu", "drag", "v0", "g", "stall_speed", "max_speed", "normal"],
    "limits": ["min_grade", "max_grade", "max_step_turn_deg", "min_radius_m"],
    "search": ["neighbours", "label_cap", "plan", "coarse_factor", "corridor_m", "refine"],
    "line": ["kind", "clearance", "start_height", "end_height"],
    "envelope": ["mu_range"],
    "": ["band", "z_scale"],
}


@st.composite
def scenarios(draw):
    section = draw(st.sampled_from(sorted(SCENARIO_KEYS)))
    keys = draw(st.lists(st.sampled_from(SCENARIO_KEYS[section]), min_size=1, max_size=3, unique=True))
    body = {k: draw(toml_values) for k in keys}
    return ({section: body} if section else body), keys


@fuzz(25)
@given(sc=scenarios())
def test_scenario_values(site, sc):
    data, keys = sc
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "s.toml"
        path.write_text(dumps_toml(data), encoding="utf-8")
        code, err, exc = invoke(["reach", site, "--start", *_xy(START), "--scenario", path], out_name="r.tif")
    check_contract(code, err, exc, tuple(keys) + ("grade", "speed"))


# ----------------------------------------------------------------------------- vector files
def _feature(geom, name="a"):
    return {"type": "Feature", "properties": {"name": name}, "geometry": geom}


def _geojson(features, crs=True) -> str:
    d = {"type": "FeatureCollection", "features": features}
    if crs:
        d["crs"] = {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}}
    return json.dumps(d, allow_nan=True)


coords = st.one_of(
    st.tuples(st.floats(X0 - 10, X0 + 50), st.floats(Y0 - 50, Y0 + 10)),
    st.sampled_from([START, END, (X0 + 20.0, Y0 - 20.0)]),
    st.tuples(st.floats(allow_nan=True, allow_infinity=True), st.floats(allow_nan=True, allow_infinity=True)),
    st.sampled_from([(1e308, 1e308), (-1e308, 1e308), (0.0, 0.0)]),
)


@st.composite
def geometries(draw):
    kind = draw(st.sampled_from(["Polygon", "LineString", "Point", "MultiPolygon", "MultiLineString", None]))
    pts = [list(p) for p in draw(st.lists(coords, max_size=6))]
    if draw(st.booleans()) and pts:  # repeated points
        pts = pts + [pts[-1]] * draw(st.integers(1, 3))
    if kind is None:
        return None
    if kind == "Point":
        return {"type": "Point", "coordinates": pts[0] if pts else []}
    if kind == "LineString":
        return {"type": kind, "coordinates": pts}
    if kind == "MultiLineString":
        return {"type": kind, "coordinates": [pts, pts[::-1]]}
    ring = pts + pts[:1] if draw(st.booleans()) else pts  # closed, or not
    return {"type": kind, "coordinates": [[ring]] if kind == "MultiPolygon" else [ring]}


vector_texts = st.one_of(
    st.lists(geometries(), max_size=3).map(lambda gs: _geojson([_feature(g, f"f{i}") for i, g in enumerate(gs)])),
    st.lists(geometries(), max_size=2).map(lambda gs: _geojson([_feature(g) for g in gs], crs=False)),
    st.sampled_from(["", "{", "[]", "null", '{"type": "FeatureCollection"}', '{"type": "FeatureCollection", "features": ['
                     , '{"type": "Feature"}', "\x00\xff", _geojson([])]),
    st.binary(max_size=100).map(lambda b: b.decode("latin-1")),
)


def _vector_file(path: Path, text: str) -> Path:
    """``text`` written to ``path`` (non-ASCII text as Latin-1 bytes, to reach the decoder)."""
    path.write_bytes(text.encode("latin-1", "replace") if not text.isascii() else text.encode())
    return path


@fuzz(25)
@given(text=vector_texts)
def test_keepout_files(site, text):
    with tempfile.TemporaryDirectory() as tmp:
        path = _vector_file(Path(tmp) / "keepout.geojson", text)
        code, err, exc = invoke(["route", site, "--start", *_xy(START), "--end", *_xy(END), "--no-refine",
                                 "--keepout", path])
    check_contract(code, err, exc, (str(path), "keep-out", "keepout"))


@fuzz(25)
@given(text=vector_texts)
def test_candidate_line_files(site, text):
    with tempfile.TemporaryDirectory() as tmp:
        path = _vector_file(Path(tmp) / "lines.geojson", text)
        code, err, exc = invoke(["compare", site, path, "--no-optimum"])
    check_contract(code, err, exc, (str(path), "line"))


# ----------------------------------------------------------------------------- the cases found
# each was a crash ("unexpected ..., please report it") or a message that named the wrong
# input before the fix; the expected words are the option or key and its range
FOUND = {
    "v0 squared overflows": (["--v0", "1e308"], "mover.v0 must be a finite number >= 0 and <= 10000 m/s"),
    "max speed squared overflows": (["--max-speed", "1e308"], "mover.max_speed must be a finite number > 0 and <= 10000"),
    "stall speed squared overflows": (["--stall-speed", "1e308"], "mover.stall_speed must be a finite number >= 0 and"),
    "gravity of 1e308 read as no line": (["--g", "1e308"], "mover.g must be a finite number > 0 and <= 1000"),
    "raised line 1e308 m up": (["--line", "raised", "--clearance", "0", "1e308"], "line.clearance must be a finite"),
    "label cap past int64": (["--label-cap", str(10 ** 25)], "search.label_cap must be a whole number from 1 to"),
    "coarse factor past the grid": (["--plan", "corridor", "--coarse", "1000"], "coarse_factor 1000 leaves fewer than"),
}


@pytest.mark.parametrize("case", list(FOUND), ids=list(FOUND))
def test_found_numbers(site, case):
    args, words = FOUND[case]
    code, err, exc = invoke(["route", site, "--start", *_xy(START), "--end", *_xy(END), "--no-refine", *args])
    check_contract(code, err, exc)
    assert code == 1 and words in err, err


def test_found_files(site, tmp_path):
    flat = tmp_path / "flat.geojson"  # a zero-area polygon: was "must be polygons, got GeometryCollection"
    flat.write_text(_geojson([_feature({"type": "Polygon", "coordinates": [[list(START), list(END), list(START)]]})]))
    code, err, exc = invoke(["route", site, "--start", *_xy(START), "--end", *_xy(END), "--no-refine",
                             "--keepout", flat])
    check_contract(code, err, exc)
    assert code == 1 and f"keep-out {flat}: feature 1 is a polygon without area" in err, err
    latin = tmp_path / "latin1.toml"  # was "unexpected UnicodeDecodeError"
    latin.write_bytes("[mover]\nmu = 0.1  # caf\u00e9\n".encode("latin-1"))
    code, err, exc = invoke(["reach", site, "--start", *_xy(START), "--scenario", latin], out_name="r.tif")
    check_contract(code, err, exc)
    assert code == 1 and f"scenario file {latin} is not UTF-8 text" in err, err
