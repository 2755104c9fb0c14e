"""The command line as a user meets it: exit codes, one-line errors, outputs."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest
from typer.testing import CliRunner

from synthgen.cli import app

SMALL = ["--count", "2", "--set", "canvas.width=48", "--set", "canvas.height=32", "--quiet"]


def run(*args):
    return CliRunner().invoke(app, list(args))


def test_make_on_defaults_writes_a_dataset(tmp_path):
    """`synthgen make --out DIR` writes images, annotations and a manifest, and one summary line."""
    res = run("make", "--out", str(tmp_path / "d"), *SMALL)
    assert res.exit_code == 0, res.output
    assert (tmp_path / "d" / "manifest.json").exists()
    assert json.loads((tmp_path / "d" / "annotations.json").read_text())["images"][1]["id"] == 2
    assert res.stdout.startswith("wrote 2 images")


@pytest.mark.parametrize(
    ("args", "pattern"),
    [
        (["--set", "objects.sizes=[1,2]"], "config key 'objects.sizes' is not a known key"),
        (["--set", "canvas.width=-3"], "config key 'canvas.width' must be a whole number in [1, 16384] (got -3)"),
        (["--set", "objects.size=[9,3]"], "config key 'objects.size' must be [min, max]"),
        (["--set", "nonsense"], "option '--set' must look like KEY=VALUE"),
        (["--count", "0"], "config key 'count' must be a whole number"),
    ],
)
def test_bad_input_exits_2_with_one_line(tmp_path, args, pattern):
    """Bad config values exit 2 with one line naming the key, and write nothing."""
    res = run("make", "--out", str(tmp_path / "d"), "--quiet", *args)
    assert res.exit_code == 2
    assert pattern in res.stderr and len(res.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "d").exists()


def test_missing_config_file_exits_2(tmp_path):
    """A config path that does not exist names the file."""
    res = run("make", str(tmp_path / "missing.toml"), "--out", str(tmp_path / "d"))
    assert res.exit_code == 2 and "missing.toml: config file does not exist" in res.stderr


def test_non_empty_output_exits_2(tmp_path):
    """A non-empty output directory without --overwrite exits 2 and keeps its files."""
    (tmp_path / "d").mkdir()
    (tmp_path / "d" / "x").write_text("x")
    res = run("make", "--out", str(tmp_path / "d"), *SMALL)
    assert res.exit_code == 2 and "not empty" in res.stderr
    assert [p.name for p in (tmp_path / "d").iterdir()] == ["x"]


def test_console_entry_runs_as_a_module(tmp_path):
    """`python -m synthgen make` works in a fresh process and prints no traceback on bad input."""
    res = subprocess.run(
        [sys.executable, "-m", "synthgen", "make", "--out", str(tmp_path / "d"), "--set", "canvas.height=0"],
        capture_output=True, text=True,
    )
    assert res.returncode == 2
    assert "Traceback" not in res.stderr and "canvas.height" in res.stderr


@pytest.mark.parametrize(
    ("args", "pattern"),
    [
        (["make", "--out", "x", "--count", "many"], "synthgen: error: Invalid value for '--count'"),
        (["make", "--out", "x", "--bogus"], "synthgen: error: No such option: --bogus"),
        (["frobnicate"], "synthgen: error: No such command 'frobnicate'; see 'synthgen --help'"),  # 'frob' is close to 'probe'
        (["mak"], "synthgen: error: No such command 'mak'. Did you mean 'make'? (see 'synthgen --help')\n"),
    ],
)
def test_parser_errors_are_one_line_too(tmp_path, args, pattern):
    """Mistakes the option parser catches also give one line on stderr and exit 2."""
    import os
    from pathlib import Path

    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1]))
    res = subprocess.run([sys.executable, "-m", "synthgen", *args], capture_output=True, text=True, cwd=tmp_path, env=env)
    assert res.returncode == 2
    assert res.stderr.startswith(pattern) and len(res.stderr.strip().splitlines()) == 1


def test_an_impossible_object_count_exits_2_before_writing(tmp_path):
    """10000 objects on a 64x64 canvas cannot all show: one line naming objects.count and the canvas, exit 2."""
    res = run("make", "--out", str(tmp_path / "d"), "--quiet", "--set", "canvas.width=64", "--set", "canvas.height=64",
              "--set", "objects.count=[10000,10000]")
    assert res.exit_code == 2 and res.stderr.count("\n") == 1
    assert "'objects.count' must ask for at most 4096 objects per image on a 64x64 canvas" in res.stderr
    assert not (tmp_path / "d").exists()


def test_no_warning_when_at_most_a_tenth_is_dropped(tmp_path):
    """A run that annotates 90 % or more of its objects prints no warning."""
    res = run("make", "--out", str(tmp_path / "d"), "--count", "2", "--quiet", "--set", "objects.count=[3,3]",
              "--set", "objects.size=[10,12]", "--set", "objects.layout=separated")
    assert res.exit_code == 0 and res.stderr == ""


def test_a_run_without_objects_says_why(tmp_path):
    """When every object is dropped, one warning line gives the counts by reason and the keys to change."""
    res = run("make", "--out", str(tmp_path / "d"), "--count", "2", "--quiet", "--set", "canvas.width=1",
              "--set", "canvas.height=1", "--set", "objects.count=[1,1]", "--set", "objects.size=[0.2,0.2]",
              "--set", "objects.min_area=1")
    assert res.exit_code == 0
    assert res.stderr.count("\n") == 1
    assert res.stderr.startswith(
        "synthgen: warning: 2 of 2 objects (100%) were not annotated: min_area 2 (objects.min_area, objects.size)"
    )


def test_one_image_is_singular(tmp_path):
    """'wrote 1 image', not '1 images'."""
    res = run("make", "--out", str(tmp_path / "d"), "--count", "1", "--quiet", "--set", "objects.count=[1,1]",
              "--set", "canvas.width=64", "--set", "canvas.height=48")
    assert res.exit_code == 0 and res.stdout.startswith("wrote 1 image, 1 object to ")


def test_resume_reports_rendered_and_kept_images_apart(tmp_path):
    """A resume that kept most images gives the rate of the ones it rendered, and the kept ones separately."""
    import re

    args = ["make", "--out", str(tmp_path / "d"), "--count", "12", "--quiet", "--set", "canvas.width=64",
            "--set", "canvas.height=48"]
    assert run(*args).exit_code == 0
    for name in ("000003.png", "000007.png"):
        (tmp_path / "d" / "images" / name).unlink()
    res = run(*args, "--resume")
    assert res.exit_code == 0, res.output
    m = re.fullmatch(r"wrote 12 images, \d+ objects to \S+ in ([\d.]+) s: 2 rendered \(([\d.]+) images/s\), "
                     r"10 kept from before\n", res.stdout)
    assert m, res.stdout
    seconds, rate = float(m.group(1)), float(m.group(2))
    assert rate <= 2 / max(seconds - 0.005, 1e-9) + 0.1  # 2 images over the run's time, not 12
    res = run(*args, "--resume")  # nothing to do: every image checked and kept
    assert res.exit_code == 0 and ": none rendered, 12 kept from before" in res.stdout
