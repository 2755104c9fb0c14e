"""Option values converted by the command line itself (synthgen.cli._values), as typer would, minus its cost."""

from __future__ import annotations

import subprocess
import sys
from enum import StrEnum
from pathlib import Path

import pytest
import typer

from synthgen.cli import app
from synthgen.cli._values import converter, install


class _Colour(StrEnum):
    red = "red"
    blue = "blue"


def _walk(command, ctx):
    yield command, ctx
    for name in getattr(command, "commands", {}):
        sub = command.get_command(ctx, name)
        yield from _walk(sub, typer.Context(sub, info_name=name, parent=ctx))


def test_every_parameter_of_every_command_is_converted_directly():
    """No parameter falls back to typer's model-per-option conversion (a new option of a new type
    would bring back pydantic's import; this names it)."""
    root = typer.main.get_command(app)
    fallback = []
    seen = 0
    for command, ctx in _walk(root, typer.Context(root, info_name="synthgen")):
        for param in command.get_params(ctx):
            seen += 1
            if not install(param):
                fallback.append(f"{ctx.command_path} {param.name}: {param.type_descriptor.annotation}")
    assert seen > 100
    assert fallback == []


@pytest.mark.parametrize(
    ("annotation", "text", "value"),
    [
        (int, "12", 12),
        (int, " -3 ", -3),
        (int | None, "7", 7),
        (float, "0.25", 0.25),
        (float, "1e-3", 0.001),
        (str, "a b", "a b"),
        (Path, "out/d", Path("out/d")),
        (bool, "yes", True),
        (bool, False, False),
        (list[str], ("a", "b"), ["a", "b"]),
        (list[Path] | None, ("x",), [Path("x")]),
        (_Colour, "blue", _Colour.blue),
    ],
)
def test_values_convert_as_written(annotation, text, value):
    got = converter(annotation)(text)
    assert got == value and type(got) is type(value)


@pytest.mark.parametrize(
    ("annotation", "text", "message"),
    [
        (int, "many", "must be a whole number (got 'many')"),
        (int, "1.5", "must be a whole number (got '1.5')"),
        (float, "half", "must be a number (got 'half')"),
        (float, "nan", "must be a finite number (got 'nan')"),
        (bool, "maybe", "must be true or false (got 'maybe')"),
        (_Colour, "Blue", "must be one of red, blue (got 'Blue')"),  # choices are case-sensitive, as in typer
    ],
)
def test_bad_values_name_the_rule_and_the_value(annotation, text, message):
    with pytest.raises(ValueError) as err:
        converter(annotation)(text)
    assert str(err.value) == message


def test_bounds_are_the_options_min_and_max():
    info = typer.models.OptionInfo(min=1, max=5)
    convert = converter(int, info)
    assert convert("1") == 1 and convert("5") == 5
    with pytest.raises(ValueError, match=r"must be >= 1 \(got '0'\)"):
        convert("0")
    with pytest.raises(ValueError, match=r"must be <= 5 \(got '6'\)"):
        convert("6")
    assert converter(int, typer.models.OptionInfo(min=1, clamp=True)) is None  # clamping stays typer's


@pytest.mark.parametrize(
    ("argv", "line"),
    [
        (["make", "--out", "x", "--count", "many"], "Invalid value for '--count': must be a whole number (got 'many')"),
        (["show", "x", "-o", "y.png", "--images", "0"], "Invalid value for '--images' / '-n': must be >= 1 (got '0')"),
        (["export", "x", "--order", "upward"], "Invalid value for '--order': must be one of"),
    ],
)
def test_the_command_line_reports_a_bad_value_in_one_line(argv, line, tmp_path):
    """Exit 2, one line naming the option, the rule and the value, nothing written."""
    res = subprocess.run([sys.executable, "-m", "synthgen", *argv], capture_output=True, text=True, timeout=60,
                         cwd=tmp_path)
    assert res.returncode == 2
    assert res.stderr.count("\n") == 1 and line in res.stderr, res.stderr
    assert list(tmp_path.iterdir()) == []
