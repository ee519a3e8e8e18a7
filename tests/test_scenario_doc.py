"""docs/scenarios.md against the readers it documents (scenario.py, batch.py, params.py).

The reference is the code itself: every key the scenario and batch readers accept is in
the page, the defaults it states are the dataclasses' defaults, the ranges carry
params.RANGES' bounds, and the page's complete examples load without error.
"""

from __future__ import annotations

import dataclasses
import math
import re
import tomllib
from pathlib import Path

import pytest

from fallway import batch, scenario
from fallway.params import RANGES, Limits, LineSpec, Mover, SearchOptions

ROOT = Path(__file__).resolve().parents[1]
DOC = (ROOT / "docs" / "scenarios.md").read_text(encoding="utf-8")


def _rows() -> dict[str, list[str]]:
    """Table rows of the page by key: ``| `key` | unit | default | range | meaning |``."""
    rows = {}
    for line in DOC.splitlines():
        m = re.match(r"\|\s*`([\w.]+)`\s*\|(.*)\|\s*$", line)
        if m:
            rows[m.group(1)] = [c.strip() for c in m.group(2).split("|")]
    return rows


ROWS = _rows()


def _schema_keys():
    for key, sub in scenario._SCHEMA.items():
        if isinstance(sub, dict):
            for k in sub:
                yield f"{key}.{k}"
        else:
            yield key


@pytest.mark.parametrize("key", list(_schema_keys()))
def test_every_scenario_key_has_a_row(key):
    assert key in ROWS, f"docs/scenarios.md has no row for the scenario key {key}"
    unit, default, rng, meaning = ROWS[key]
    assert unit and default and rng and meaning


@pytest.mark.parametrize("key", ["base", "vary", "run", "options", *(f"options.{k}" for k in batch._OPTION_KEYS)])
def test_every_batch_key_has_a_row(key):
    assert key in ROWS, f"docs/scenarios.md has no row for the batch key {key}"


_GROUPS = {"mover": Mover, "limits": Limits, "search": SearchOptions}


@pytest.mark.parametrize("key", [k for k in ROWS if k.split(".")[0] in _GROUPS or k.startswith("options.")])
def test_stated_defaults_are_the_dataclass_defaults(key):
    group, name = key.split(".")
    if name == "refine":  # search.refine lives on the scenario, not SearchOptions
        assert ROWS[key][1] == "true" and scenario.Scenario().refine is True
        return
    cls = _GROUPS.get(group, SearchOptions)
    default = {f.name: f.default for f in dataclasses.fields(cls)}[name]
    stated = ROWS[key][1]
    if stated.startswith("—"):
        assert default is None or (isinstance(default, float) and math.isinf(default)), (key, default)
    elif isinstance(default, bool):
        assert stated == str(default).lower()
    elif isinstance(default, str):
        assert stated == f'"{default}"'
    else:
        assert float(stated) == default


@pytest.mark.parametrize("name", sorted(RANGES))
def test_ranges_carry_the_bounds_of_params_ranges(name):
    low, high, unit = RANGES[name]
    keys = [k for k in ROWS if k.split(".")[-1] in (name, name.removesuffix("_m"))]
    assert keys, f"no row for the parameter {name}"
    for key in keys:
        unit_col, _, rng, _ = ROWS[key]
        if math.isfinite(high) and key.split(".")[0] != "options":
            forms = (f"{high:.0e}".replace("+0", "").replace("e+", "e"), f"≤{high:g}")
            assert any(f in rng.replace(" ", "") for f in forms), (key, rng)
        if unit:
            assert unit in unit_col, (key, unit_col)


def _toml_blocks():
    return re.findall(r"```toml\n(.*?)```", DOC, flags=re.S)


def test_the_complete_scenario_loads():
    sc_text, batch_text = _toml_blocks()
    data = tomllib.loads(sc_text)
    sc = scenario.Scenario.from_dict(data)
    # every section of the reader is in the example ([cable] goes with a cable line only:
    # the page points to sample_terrain/cable.toml, checked below)
    assert set(scenario._SCHEMA) - {"band", "z_scale", "keepout_layers", "cable"} <= set(data)
    assert sc.mover.max_speed == 25.0 and sc.limits.min_grade == 0.05 and sc.station_step_m == 10.0


def test_the_cable_example_it_names_loads():
    assert "sample_terrain/cable.toml" in DOC
    path = Path(__file__).resolve().parents[1] / "sample_terrain" / "cable.toml"
    sc = scenario.load_scenario(path)
    assert sc.line.kind == "cable" and sc.line.cable is not None


def test_the_complete_batch_expands():
    _, batch_text = _toml_blocks()
    runs, options = batch.expand_batch(tomllib.loads(batch_text))
    assert len(runs) == 2 * 2 * 2 + 1 and runs[-1]["name"] == "steep-start"
    assert options == {"plan": "auto", "max_widen": 4}


def test_the_readme_links_the_page():
    assert "docs/scenarios.md" in (ROOT / "README.md").read_text(encoding="utf-8")
