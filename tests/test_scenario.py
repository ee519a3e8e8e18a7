"""Scenario files: validation names the key and the range; TOML round trip (tomllib)."""

import math
import tomllib

import pytest

from fallway.errors import ScenarioError
from fallway.scenario import Scenario, dumps_toml, load_scenario

FULL = """
dem = "site.tif"
keepout = "no-go.geojson"

[points]
start = [100.0, 200.0]
end = [400.0, 50.0]
via = [[250.0, 120.0]]
lonlat = false

[mover]
mu = 0.15
drag = 0.002
v0 = 1.5
normal = "gravity"
stall_speed = 0.2
max_speed = 20.0

[limits]
min_grade = 0.02
max_grade = 0.8
max_step_turn_deg = 60.0
min_radius_m = 8.0

[search]
neighbours = 32
refine = false

[line]
kind = "raised"
clearance = [0.0, 12.0]
start_height = 5.0
end_height = 0.0

[envelope]
mu_range = [0.1, 0.2]
"""


def test_full_file_resolves_relative_paths(tmp_path):
    f = tmp_path / "run.toml"
    f.write_text(FULL)
    sc = load_scenario(f)
    assert sc.dem == str(tmp_path / "site.tif")
    assert sc.keepout == str(tmp_path / "no-go.geojson")
    assert sc.via == ((250.0, 120.0),)
    assert sc.mover.mu == 0.15 and sc.mover.normal == "gravity" and sc.mover.max_speed == 20.0
    assert sc.limits.min_radius_m == 8.0 and sc.search.neighbours == 32 and sc.refine is False
    assert sc.line.kind == "raised" and sc.line.clearance_m == (0.0, 12.0) and sc.mu_range == (0.1, 0.2)


def test_round_trip_through_tomllib(tmp_path):
    # the writer's output must be TOML that the standard library (tomllib, TOML 1.0) reads back
    f = tmp_path / "run.toml"
    f.write_text(FULL)
    sc = load_scenario(f)
    again = Scenario.from_dict(tomllib.loads(sc.to_toml()))
    assert again == sc


def test_infinite_grade_limits_are_left_out_of_the_written_file():
    text = Scenario().to_toml()
    assert "inf" not in text
    assert math.isinf(Scenario.from_dict(tomllib.loads(text)).limits.max_grade)


@pytest.mark.parametrize("data, match", [
    ({"mover": {"mass": 3}}, r"unknown key mover\.mass; allowed: mu, drag"),
    ({"colour": "red"}, r"unknown key colour"),
    ({"mover": {"mu": -0.1}}, r"mover\.mu must be a finite number >= 0"),
    ({"mover": {"mu": "high"}}, r"mover\.mu must be a number"),
    ({"mover": {"mu": True}}, r"mover\.mu must be a number"),
    ({"mover": {"normal": "both"}}, r"mover\.normal must be one of gravity, full"),
    ({"search": {"neighbours": 12}}, r"search\.neighbours must be one of 8, 16, 32"),
    ({"search": {"refine": "yes"}}, r"search\.refine must be true or false"),
    ({"line": {"kind": "flying"}}, r"line\.kind must be one of ground, raised"),
    ({"line": {"clearance": [5.0, 1.0]}}, r"line\.clearance must be \[min, max\]"),
    ({"points": {"start": [1.0]}}, r"points\.start must be a pair"),
    ({"points": {"end": [1.0, math.nan]}}, r"points\.end must be a finite number"),
    ({"limits": {"min_grade": 0.5, "max_grade": 0.1}}, r"limits\.min_grade \(0\.5\) must not exceed"),
    ({"envelope": {"mu_range": [0.3, 0.1]}}, r"envelope\.mu_range must be \[low, high\]"),
    ({"mover": 3}, r"mover must be a table"),
])
def test_bad_values_name_the_key_and_range(data, match):
    with pytest.raises(ScenarioError, match=match):
        Scenario.from_dict(data)


def test_broken_toml_is_one_clear_error(tmp_path):
    f = tmp_path / "bad.toml"
    f.write_text("[mover\nmu = 0.1\n")
    with pytest.raises(ScenarioError, match="is not valid TOML"):
        load_scenario(f)
    with pytest.raises(ScenarioError, match="cannot read scenario file"):
        load_scenario(tmp_path / "missing.toml")


def test_writer_escapes_strings():
    text = dumps_toml({"dem": 'a "quoted" \\ path'})
    assert tomllib.loads(text)["dem"] == 'a "quoted" \\ path'
    # control characters (found by tests/test_fuzz_cli.py: "\x1f" was written raw, and the
    # written scenario.toml did not read back); TOML 1.0 "String" lists the escapes
    odd = "tab\t nl\n nul\x00 us\x1f del\x7f caf\u00e9"
    assert tomllib.loads(dumps_toml({"dem": odd}))["dem"] == odd


def test_a_file_that_is_not_utf8_is_one_clear_error(tmp_path):
    p = tmp_path / "latin1.toml"
    p.write_bytes("[mover]\nmu = 0.1  # caf\u00e9\n".encode("latin-1"))
    with pytest.raises(ScenarioError, match=r"latin1.toml is not UTF-8 text \(byte 0xe9 on line 2\); save it as UTF-8"):
        load_scenario(p)
    bom = tmp_path / "bom.toml"  # a byte-order mark, as some editors write: read as UTF-8
    bom.write_bytes(b"\xef\xbb\xbf[mover]\nmu = 0.1\n")
    assert load_scenario(bom).mover.mu == 0.1


# one rule for every value (issue 19.12): mu = "0.2" was read as a number while
# neighbours = 16.0 was refused; now a quantity is a TOML number, a count a TOML
# integer, a choice a string, a switch a boolean -- and nothing else, for every key
_WRONG = {"number": ["0.2", True, [0.2]], "count": [16.0, "16", True], "text": [1, True], "flag": ["yes", 1]}


def _typed_keys():
    import dataclasses

    from fallway.params import Limits, Mover
    from fallway.scenario import kind_of

    keys = [(("mover", f.name), kind_of(f.type)) for f in dataclasses.fields(Mover)]
    keys += [(("limits", f.name), kind_of(f.type)) for f in dataclasses.fields(Limits)]
    keys += [(("search", k), kind) for k, kind in (("neighbours", "count"), ("label_cap", "count"),
                                                   ("coarse_factor", "count"), ("corridor_m", "number"),
                                                   ("plan", "text"), ("refine", "flag"))]
    keys += [(("line", k), kind) for k, kind in (("kind", "text"), ("start_height", "number"),
                                                 ("end_height", "number"))]
    keys += [(("band",), "count"), (("z_scale",), "number"), (("dem",), "text"), (("keepout",), "text"),
             (("points", "lonlat"), "flag")]
    return [(k, kind, bad) for k, kind in keys for bad in _WRONG[kind]]


@pytest.mark.parametrize("key, kind, bad", _typed_keys(), ids=lambda v: str(v))
def test_every_value_of_the_wrong_type_is_refused(key, kind, bad):
    data: dict = {}
    d = data
    for part in key[:-1]:
        d = d.setdefault(part, {})
    d[key[-1]] = bad
    with pytest.raises(ScenarioError, match=rf"^{'.'.join(key)} must be"):
        Scenario.from_dict(data)


@pytest.mark.parametrize("key, value", [(("mover", "mu"), ["0.2", 0.2]), (("points", "start"), [["1", 2], [1, 2]]),
                                        (("envelope", "mu_range"), [["0.1", 0.2], [0.1, 0.2]]),
                                        (("line", "clearance"), [[0, "5"], [0, 5]])])
def test_numbers_inside_pairs_follow_the_same_rule(key, value):
    bad, good = value
    with pytest.raises(ScenarioError, match=rf"^{'.'.join(key)} must be"):
        Scenario.from_dict({key[0]: {key[1]: bad}})
    Scenario.from_dict({key[0]: {key[1]: good}})  # an integer is a number too


def test_batch_options_follow_the_same_rule():
    from fallway.batch import expand_batch

    with pytest.raises(ScenarioError, match=r"options\.coarse_factor must be a whole number"):
        expand_batch({"options": {"coarse_factor": 2.0}})
    with pytest.raises(ScenarioError, match=r"options\.corridor_m must be a number"):
        expand_batch({"options": {"corridor_m": "40"}})
