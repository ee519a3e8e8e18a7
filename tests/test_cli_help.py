"""`--help` of every command ends with examples that the command line itself accepts.

Reference: click's own parser (``Command.make_context``) parses each example exactly as
the command line would, without running it, so an example with a misspelt or removed
option fails here.  Grades are documented as fractions (0.3 = 30 %).
"""

from __future__ import annotations

import shlex

import click
import pytest
from click.testing import CliRunner

from fallway.cli import main

COMMANDS = sorted(main.commands)


def _help(name: str) -> str:
    res = CliRunner().invoke(main, [name, "--help"], terminal_width=200)
    assert res.exit_code == 0, res.output
    return res.output


@pytest.mark.parametrize("name", COMMANDS)
def test_help_ends_with_two_or_three_examples_that_parse(name):
    lines = [ln.strip() for ln in _help(name).rstrip().splitlines()]
    i = max(k for k, ln in enumerate(lines) if ln == "Examples:")
    examples = lines[i + 1:]
    assert 2 <= len(examples) <= 3, examples
    cmd = main.commands[name]
    for ex in examples:
        words = shlex.split(ex)
        assert words[:2] == ["fallway", name], ex
        with cmd.make_context(name, words[2:], resilient_parsing=False) as ctx:
            assert isinstance(ctx, click.Context)


@pytest.mark.parametrize("name", ["route", "reach", "compare"])
def test_grades_are_fractions_in_the_help(name):
    text = " ".join(_help(name).split())
    for opt in ("--min-grade", "--max-grade"):
        part = text.split(opt, 1)[1].split(" --", 1)[0]
        assert "fraction (0.3 = 30 %" in part, part
