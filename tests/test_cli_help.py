"""`synthgen --help` as a user reads it: the real command in a terminal 80 columns wide."""

from __future__ import annotations

import os
import re
import subprocess
import sys

import pytest

COMMANDS = ("make", "jitter", "score", "report", "check", "export", "sweep", "merge", "show", "stats", "probe", "cases", "conform")


def _help(*args: str, flag: str = "--help") -> str:
    env = {**os.environ, "COLUMNS": "80", "LINES": "200"}
    env.pop("TERMINAL_WIDTH", None)
    res = subprocess.run(
        [sys.executable, "-m", "synthgen", *args, flag], capture_output=True, text=True, env=env, timeout=60
    )
    assert res.returncode == 0, res.stderr
    return res.stdout


def _flat(text: str) -> str:
    """A help page as one line of words, without the panels' borders (a wrapped sentence reads whole)."""
    return " ".join(re.sub(r"[│╭╮╰╯─]", " ", text).split())


@pytest.fixture(scope="module")
def pages() -> dict[str, str]:
    """The help page of the tool and of every command, at 80 columns."""
    return {"": _help(), **{c: _help(c) for c in COMMANDS}}


def test_help_fits_80_columns_without_cutting_anything(pages):
    """No line is wider than 80 columns and no text (a default, an example) is cut off with an ellipsis."""
    for name, text in pages.items():
        assert all(len(line) <= 80 for line in text.splitlines()), name
        assert "…" not in text, (name, text)  # what rich puts where it cuts a word


def test_flags_show_no_value_type(pages):
    """A flag takes no value, so its help shows no '<bool>' (or any type) beside it."""
    for name, text in pages.items():
        assert "<bool>" not in text, name
        assert " range>" not in text, name  # a value's type, not typer's wording
        assert not re.search(r"--\S+ <list\[", text), name  # a repeatable option shows one value's type
    assert re.search(r"--overwrite\s+Replace", pages["make"])
    assert re.search(r"-h, --help\s+Show this message", pages[""])


def test_short_help_flag_is_accepted():
    """-h shows the same help as --help."""
    assert _help("check", flag="-h") == _help("check")


def test_usage_lines_write_arguments_one_way(pages):
    """Every usage line writes arguments in upper case, optional ones in brackets, required ones bare."""
    usage = {name: re.search(r"Usage: synthgen ?(.*)", text).group(1).strip() for name, text in pages.items()}
    assert usage["make"] == "make [OPTIONS] [CONFIG]"
    assert usage["sweep"] == "sweep [OPTIONS] [CONFIG]"
    assert usage["jitter"] == "jitter [OPTIONS] DATASET"
    assert usage["score"] == "score [OPTIONS] DATASET [PREDICTIONS]"
    assert usage["merge"] == "merge [OPTIONS] DIRS..."
    assert not any("{" in u for u in usage.values())


def test_help_texts_say_what_they_mean(pages):
    """No markup swallows part of a sentence, and examples show real file names."""
    show = _flat(pages["show"])
    assert "by image id (default: 16)." in show
    assert "(default: all five)" in _flat(pages["jitter"])
    score = _flat(pages["score"])
    assert "objects.size=[4,8].json" in score and "[4, 8]" not in score  # sweep folders have no space


@pytest.mark.parametrize("argv", [[], ["tokens"]])
def test_a_bare_command_group_shows_its_whole_help(argv):
    """`synthgen` (or `synthgen tokens`) alone prints the help as written, on stderr, and exits 2 (a usage
    mistake, common practice for command-line tools), not the help squeezed into one error line."""
    env = {**os.environ, "COLUMNS": "80"}
    res = subprocess.run([sys.executable, "-m", "synthgen", *argv], capture_output=True, text=True, env=env, timeout=60)
    assert res.returncode == 2
    assert res.stderr.startswith("Usage: synthgen") and "\nCommands:\n" in res.stderr
    assert "synthgen: error" not in res.stderr
