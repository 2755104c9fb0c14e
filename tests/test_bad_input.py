"""Bad input, systematically: each bad config or option exits 2 with one line naming the key, writing nothing."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from synthgen.cli import app

ROOT = Path(__file__).resolve().parents[1]
TINY = ["--set", "canvas.width=32", "--set", "canvas.height=24", "--count", "2", "--quiet"]

# (case id, extra `make` arguments, text the one-line message must contain)
BAD_MAKE = [
    ("unknown key", ["--set", "objects.sizes=[1,2]"], "config key 'objects.sizes' is not a known key"),
    ("misspelt key", ["--set", "canvas.widht=10"], "did you mean 'canvas.width'?"),
    ("misspelt section", ["--set", "backgrund.kind=noise"], "config key 'backgrund' is not a known key"),
    ("text for a number", ["--set", "canvas.width=\"wide\""], "config key 'canvas.width' must be a whole number"),
    ("number for a bool", ["--set", "objects.rotate=3"], "config key 'objects.rotate' must be true or false"),
    ("fraction for a whole number", ["--set", "render.samples=2.5"], "config key 'render.samples' must be a whole number"),
    ("negative width", ["--set", "canvas.width=-3"], "config key 'canvas.width' must be a whole number in [1, 16384]"),
    ("zero height", ["--set", "canvas.height=0"], "config key 'canvas.height' must be a whole number in [1, 16384]"),
    ("huge canvas", ["--set", "canvas.width=20000"], "config key 'canvas.width' must be a whole number in [1, 16384]"),
    ("negative size", ["--set", "objects.size=[-5, 10]"], "config key 'objects.size' must be [min, max]"),
    ("size min > max", ["--set", "objects.size=[9, 3]"], "config key 'objects.size' must be [min, max]"),
    ("count min > max", ["--set", "objects.count=[5, 2]"], "config key 'objects.count' must be [min, max]"),
    ("range of three", ["--set", "objects.aspect=[1, 2, 3]"], "config key 'objects.aspect' must be [min, max]"),
    ("zero aspect", ["--set", "objects.aspect=[0, 2]"], "config key 'objects.aspect' must be [min, max]"),
    ("empty shape list", ["--set", "objects.shapes=[]"], "config key 'objects.shapes' must name at least one of"),
    ("unknown shape", ["--set", "objects.shapes=[\"hexagon\"]"], "config key 'objects.shapes' must be one of"),
    ("repeated shape", ["--set", "objects.shapes=[\"star\", \"star\"]"], "config key 'objects.shapes' must not repeat"),
    ("unknown background", ["--set", "background.kind=marble"], "config key 'background.kind' must be one of"),
    ("unknown layout", ["--set", "objects.layout=nowhere"], "config key 'objects.layout' must be one of"),
    ("unknown size law", ["--set", "objects.size_law=normal"], "config key 'objects.size_law' must be one of"),
    ("image count 0", ["--count", "0"], "config key 'count' must be a whole number"),
    ("NaN", ["--set", "objects.min_visible=nan"], "config key 'objects.min_visible' must be a finite number"),
    ("fraction above 1", ["--set", "objects.min_visible=1.5"], "config key 'objects.min_visible' must be a number in [0, 1]"),
    ("probability above 1", ["--set", "degrade.noise.p=2"], "config key 'degrade.noise.p' must be a number in [0, 1]"),
    ("value for a table", ["--set", "degrade.blur=3"], "config key 'degrade.blur' must be a table"),
    ("section as a value", ["--set", "canvas=5"], "config key 'canvas' must be a table"),
    ("unknown image format", ["--set", "output.image_format=gif"], "config key 'output.image_format' must be one of"),
    ("png level 12", ["--set", "output.png_level=12"], "config key 'output.png_level' must be a whole number in [0, 9]"),
    ("jpeg quality 0", ["--set", "output.jpeg_quality=0"], "config key 'output.jpeg_quality' must be a whole number in [1, 100]"),
    ("negative seed", ["--seed", "-1"], "config key 'seed' must be a whole number"),
    ("zero samples", ["--set", "render.samples=0"], "config key 'render.samples' must be a whole number in [1, 16]"),
    ("zero octaves", ["--set", "background.octaves=0"], "config key 'background.octaves' must be a whole number in [1, 12]"),
    ("--set without =", ["--set", "nonsense"], "option '--set' must look like KEY=VALUE"),
    ("--set bad TOML", ["--set", "objects.count=[1,"], "config key 'objects.count' must be given a TOML value"),
    ("--set below a value", ["--set", "seed.x=1"], "config key 'seed' must be a whole number"),
    ("shard K >= N", ["--shard", "3/2"], "option '--shard' must be K/N"),
    ("shard not K/N", ["--shard", "half"], "option '--shard' must be K/N"),
    ("shard of 0", ["--shard", "0/0"], "option '--shard' must be K/N"),
    ("zero workers", ["--workers", "0"], "option '--workers' must be a whole number >= 1"),
    ("resume and overwrite", ["--resume", "--overwrite"], "options '--overwrite' and '--resume' exclude each other"),
]

# (case id, config file bytes or None for a directory, text the message must contain)
BAD_FILES = [
    ("binary junk", bytes(range(256)) * 4, "is not a UTF-8 text file"),
    ("TOML syntax error", b"[canvas\nwidth = 3\n", "is not valid TOML"),
    ("unknown key in file", b"[objects]\ncolour = 3\n", "config key 'objects.colour' is not a known key"),
    ("NaN in file", b"[objects]\nmin_visible = nan\n", "config key 'objects.min_visible' must be a finite number"),
    ("string for a range", b"[objects]\nsize = \"big\"\n", "config key 'objects.size' must be [min, max]"),
    ("directory as config", None, "is a directory, not a TOML config file"),
]


def run(*args):
    return CliRunner().invoke(app, list(args))


def one_line(res) -> str:
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1, res.stderr
    return lines[0]


@pytest.mark.parametrize(("args", "text"), [c[1:] for c in BAD_MAKE], ids=[c[0] for c in BAD_MAKE])
def test_bad_make_option_exits_2_and_writes_nothing(tmp_path, args, text):
    """A bad config value or option: exit 2, one line naming the key or option, no output directory."""
    res = run("make", "--out", str(tmp_path / "d"), *TINY, *args)
    assert res.exit_code == 2
    assert text in one_line(res)
    assert not (tmp_path / "d").exists()


@pytest.mark.parametrize(("content", "text"), [c[1:] for c in BAD_FILES], ids=[c[0] for c in BAD_FILES])
def test_bad_config_file_exits_2_and_writes_nothing(tmp_path, content, text):
    """A bad config file: exit 2, one line naming the file or key, no output directory."""
    path = tmp_path / "bad.toml"
    if content is None:
        path.mkdir()
    else:
        path.write_bytes(content)
    res = run("make", str(path), "--out", str(tmp_path / "d"), *TINY)
    assert res.exit_code == 2
    line = one_line(res)
    assert text in line and ("bad.toml" in line or "config key" in line)
    assert not (tmp_path / "d").exists()


def test_missing_config_file_is_named(tmp_path):
    """A config path that does not exist is named in the message."""
    res = run("make", str(tmp_path / "nowhere.toml"), "--out", str(tmp_path / "d"), *TINY)
    assert res.exit_code == 2 and "nowhere.toml: config file does not exist" in one_line(res)
    assert not (tmp_path / "d").exists()


def test_output_path_that_is_a_file_is_refused(tmp_path):
    """--out naming an existing file exits 2 and leaves the file alone."""
    (tmp_path / "f").write_text("mine")
    res = run("make", "--out", str(tmp_path / "f"), *TINY)
    assert res.exit_code == 2 and "output path is a file" in one_line(res)
    assert (tmp_path / "f").read_text() == "mine"


@pytest.mark.parametrize(
    ("setup", "args", "text"),
    [
        ("none", ["merge", "{t}/nowhere", "--out", "{t}/m"], "nowhere: is not a directory"),
        ("empty", ["merge", "{t}/empty", "--out", "{t}/m"], "empty: holds no shard manifest"),
        ("none", ["merge", "{t}/a", "{t}/b"], "option '--out' is needed"),
    ],
    ids=["missing directory", "not a shard", "two dirs without --out"],
)
def test_bad_merge_input_exits_2_and_writes_nothing(tmp_path, setup, args, text):
    """merge with bad inputs: exit 2, one line naming the directory or option, no output."""
    if setup == "empty":
        (tmp_path / "empty").mkdir()
    res = run(*[a.format(t=tmp_path) for a in args])
    assert res.exit_code == 2
    assert text in one_line(res)
    assert not (tmp_path / "m").exists()


@pytest.mark.parametrize(
    ("args", "text"),
    [
        (["--set", "objects.count=[0, -1]"], "objects.count"),
        (["--shard", "2/1"], "--shard"),
    ],
)
def test_bad_input_in_a_fresh_process(tmp_path, args, text):
    """Through `python -m synthgen`: exit 2, one line, no traceback, nothing written."""
    res = subprocess.run(
        [sys.executable, "-m", "synthgen", "make", "--out", str(tmp_path / "d"), *TINY, *args],
        capture_output=True, text=True, cwd=ROOT,
    )
    assert res.returncode == 2
    assert "Traceback" not in res.stderr and text in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "d").exists()


def test_option_type_errors_exit_2_naming_the_option(tmp_path):
    """A non-number for a numeric option is caught by the option parser (exit 2, names the option)."""
    res = run("make", "--out", str(tmp_path / "d"), "--count", "many")
    assert res.exit_code == 2 and "--count" in res.output
    assert not (tmp_path / "d").exists()


@pytest.mark.parametrize("where", ["file/sub", "/proc/synthgen-nope"], ids=["under a file", "under /proc"])
def test_output_path_that_cannot_be_a_directory_exits_2(tmp_path, where):
    """--out under a file, or where no directory can be made: exit 2, one line naming it, no --resume hint."""
    if where.startswith("/proc") and not Path("/proc/self").exists():
        pytest.skip("no /proc on this system")
    (tmp_path / "file").write_text("mine")
    out = where if where.startswith("/") else str(tmp_path / where)
    res = run("make", "--out", out, *TINY)
    assert res.exit_code == 2
    line = one_line(res)
    assert f"{out}: cannot be created as an output directory" in line and "--resume" not in line
    assert (tmp_path / "file").read_text() == "mine"


OUTPUT_FILES = [
    ("show --out DIR", ["show", "{ds}", "--out", "{t}/adir"], "option '--out' must name a file, not a directory"),
    ("stats --json DIR", ["stats", "{ds}", "--json", "{t}/adir"], "option '--json' must name a file, not a directory"),
    ("stats --plot DIR", ["stats", "{ds}", "--plot", "{t}/adir"], "option '--plot' must name a file, not a directory"),
    ("show --out FILE/x", ["show", "{ds}", "--out", "{t}/afile/x.png"], "names a file in '{t}/afile', which is a file"),
    ("stats --json FILE/x", ["stats", "{ds}", "--json", "{t}/afile/s.json"], "names a file in '{t}/afile', which is a file"),
]


@pytest.mark.parametrize(("args", "text"), [c[1:] for c in OUTPUT_FILES], ids=[c[0] for c in OUTPUT_FILES])
def test_show_and_stats_check_output_paths_before_any_work(tmp_path, small_dataset, args, text):
    """An output file that names a folder, or sits under a file: exit 2, one line naming it, nothing printed first."""
    (tmp_path / "adir").mkdir()
    (tmp_path / "afile").write_text("mine")
    fill = {"ds": str(small_dataset[0]), "t": str(tmp_path)}
    res = run(*[a.format(**fill) for a in args])
    assert res.exit_code == 2
    assert text.format(**fill) in one_line(res)
    assert res.stdout == ""  # stats did not print its table first
    assert sorted(p.name for p in tmp_path.iterdir()) == ["adir", "afile"] and not any((tmp_path / "adir").iterdir())


@pytest.mark.parametrize(("args", "text"), [(["--workers", "0"], "--workers"), (["--out", "{t}/afile"], "afile")],
                         ids=["workers 0", "out is a file"])
def test_errors_come_alone_without_a_blank_line(tmp_path, args, text):
    """With the progress bar on (no --quiet), an error found before rendering is the only line on stderr."""
    (tmp_path / "afile").write_text("mine")
    args = [a.format(t=tmp_path) for a in args]
    cmd = [sys.executable, "-m", "synthgen", "make", "--out", str(tmp_path / "d"), "--count", "3",
           "--set", "canvas.width=32", "--set", "canvas.height=24", *args]
    res = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT)
    assert res.returncode == 2
    assert res.stderr.count("\n") == 1 and res.stderr.startswith("synthgen: error:") and text.format(t=tmp_path) in res.stderr
