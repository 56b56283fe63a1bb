"""Every command's --help: each option explained, with its default and its unit.

Issue 11: help texts read well to a GIS-literate archaeologist who is not a
programmer; each option says its unit and default. The command list comes from the
group itself, so a new command is checked as soon as it is registered.
"""

import re

import click
import pytest
from click.testing import CliRunner

from mlsites.cli.main import cli

GROUP_CTX = click.Context(cli)
COMMANDS = cli.list_commands(GROUP_CTX)
# Words that name a unit (or say the value is a count of cells, rows or items).
UNIT_WORDS = re.compile(r"\b(metres|km2|degrees|cells|rows|years)\b")
# Option names that carry a measurement, so their help must name the unit (common practice:
# a bare "buffer 30" means metres to one reader and cells to another).
MEASURED = re.compile(r"(buffer|exclusion|radii|radius|block-size|threshold|flatness|lookup|cell-m|bandwidth|"
                      r"block-rows)")


def _command(name):
    return cli.get_command(GROUP_CTX, name)


def _options(name):
    return [p for p in _command(name).params if isinstance(p, click.Option)]


def test_the_group_lists_the_commands():
    # the commands the README walks through (a reference list kept by hand)
    assert {"terrain", "sample", "run", "map", "check", "report", "periods", "demo"} <= set(COMMANDS)


@pytest.mark.parametrize("name", COMMANDS)
def test_help_runs_and_describes_the_command(name):
    result = CliRunner().invoke(cli, [name, "--help"], prog_name="mlsites")
    assert result.exit_code == 0, result.output
    assert f"Usage: mlsites {name}" in result.output
    doc = _command(name).help or ""
    assert len(doc.split()) >= 8, f"{name}: the command's description is too short to say what it writes"


@pytest.mark.parametrize("name", COMMANDS)
def test_every_option_has_help_with_its_default(name):
    problems = []
    for opt in _options(name):
        label = f"{name} {opt.opts[0]}"
        text = (opt.help or "").strip()
        if opt.opts[0] == "--help" or opt.hidden:
            continue
        if not text:
            problems.append(f"{label}: no help")
            continue
        if opt.is_flag or opt.required:
            continue  # a flag is off unless given; a required option has no default
        if not (opt.show_default or "default" in text.lower()):
            problems.append(f"{label}: does not say its default")
    assert problems == []


@pytest.mark.parametrize("name", COMMANDS)
def test_options_that_measure_something_name_the_unit(name):
    missing = [f"{name} {o.opts[0]}" for o in _options(name)
               if MEASURED.search(o.opts[0]) and not o.is_flag and not UNIT_WORDS.search(o.help or "")]
    assert missing == []


@pytest.mark.parametrize("name", COMMANDS)
def test_defaults_shown_by_click_appear_in_the_help(name):
    # show_default=True puts "[default: X]" into the rendered help (click's own rendering).
    output = CliRunner().invoke(cli, [name, "--help"], prog_name="mlsites", terminal_width=200).output
    for opt in _options(name):
        if opt.show_default and not opt.is_flag and opt.default is not None:
            # click adds a range after a semicolon: "[default: 1; x>=1]"
            assert re.search(rf"\[default: {re.escape(str(opt.default))}[;\]]", output), (name, opt.opts[0])
