"""`synthgen sweep`: one dataset per combination, differing only in the varied keys."""

from __future__ import annotations

import json

import pytest
from typer.testing import CliRunner

from synthgen.cli import app
from synthgen.errors import ConfigError
from synthgen.run.sweep import parse_vary, run_sweep

SMALL = ["count=2", "canvas.width=48", "canvas.height=32", "objects.count=[2,4]"]


def flat(d, prefix=""):
    out = {}
    for k, v in d.items():
        if isinstance(v, dict):
            out.update(flat(v, prefix + k + "."))
        else:
            out[prefix + k] = v
    return out


def test_parse_vary_splits_outside_brackets():
    """Commas inside [..] belong to a value; bare words are strings (as for --set)."""
    assert parse_vary("objects.count=[1,2],[3,4]").values == ([1, 2], [3, 4])
    assert parse_vary("background.kind=noise,checker").values == ("noise", "checker")
    assert parse_vary("objects.max_iou=0,0.25").values == (0, 0.25)


def test_subsets_differ_only_in_the_varied_keys(tmp_path):
    """Each subset's manifest config equals the others except at the varied keys; seeds agree."""
    varies = [parse_vary("objects.max_iou=0,0.3"), parse_vary("objects.size=[4,8],[8,16]")]
    summary = run_sweep(None, varies, tmp_path / "s", overrides=SMALL + ["objects.layout=separated"], workers=1)
    assert summary.subsets == 4
    sweep = json.loads((tmp_path / "s" / "sweep.json").read_text())
    configs = {}
    for sub in sweep["subsets"]:
        manifest = json.loads((tmp_path / "s" / sub["path"] / "manifest.json").read_text())
        configs[sub["path"]] = flat(manifest["config"])
        assert manifest["config"]["objects"]["max_iou"] == sub["values"]["objects.max_iou"]
    paths = list(configs)
    assert paths[0] == "objects.max_iou=0/objects.size=[4,8]"
    for a in paths:
        for b in paths:
            differ = {k for k in configs[a] if configs[a][k] != configs[b][k]}
            assert differ <= {"objects.max_iou", "objects.size"}
    assert len({c["seed"] for c in configs.values()}) == 1


def test_bad_vary_exits_2_naming_it(tmp_path):
    """A --vary without values, or with a value the config refuses, exits 2 with a one-line message."""
    runner = CliRunner()
    res = runner.invoke(app, ["sweep", "--vary", "objects.max_iou", "--out", str(tmp_path / "x"), "--quiet"])
    assert res.exit_code == 2 and "'--vary'" in res.output
    res = runner.invoke(app, ["sweep", "--vary", "objects.max_iou=0,7", "--out", str(tmp_path / "x"), "--quiet"])
    assert res.exit_code == 2 and "objects.max_iou" in res.output
    assert not (tmp_path / "x").exists()  # everything is validated before anything is written


def test_sweep_command_writes_datasets(tmp_path):
    """The CLI writes DIR/<key>=<value>/ datasets and sweep.json, and one summary line."""
    args = ["sweep", "--vary", "background.kind=solid,checker", "--out", str(tmp_path / "s"), "--quiet"]
    for s in SMALL:
        args += ["--set", s]
    res = CliRunner().invoke(app, args)
    assert res.exit_code == 0, res.output
    assert (tmp_path / "s" / "background.kind=checker" / "manifest.json").exists()
    assert res.stdout.startswith("wrote 2 datasets")


def test_same_key_twice_is_refused():
    """Varying a key twice is a config error naming --vary."""
    with pytest.raises(ConfigError, match="--vary"):
        run_sweep(None, [parse_vary("seed=1,2"), parse_vary("seed=3")], "unused")


def test_non_empty_directory_is_refused(tmp_path):
    """An existing non-empty sweep directory is left alone without --overwrite."""
    (tmp_path / "s").mkdir()
    (tmp_path / "s" / "keep.txt").write_text("x")
    from synthgen.errors import UserError

    with pytest.raises(UserError, match="not empty"):
        run_sweep(None, [parse_vary("seed=1,2")], tmp_path / "s", overrides=SMALL, workers=1)
    assert (tmp_path / "s" / "keep.txt").read_text() == "x"


def test_sweep_progress_counts_images_across_subsets(tmp_path):
    """The progress callback sees done counts that grow across subsets up to the sweep's total."""
    from synthgen.run.sweep import parse_vary, run_sweep

    seen = []
    run_sweep(None, [parse_vary("canvas.width=32,48")], tmp_path / "s",
              overrides=["count=3", "canvas.height=24", "objects.count=[1,2]"], workers=1,
              progress=lambda done, total: seen.append((done, total)))
    assert seen[-1] == (6, 6) and [d for d, _ in seen] == sorted(d for d, _ in seen)


def test_inline_table_values_are_swept_like_set(tmp_path):
    """A TOML inline table per value (as --set accepts) gives one subset per table."""
    vary = parse_vary("background={kind='noise'},{kind='checker'}")
    assert vary.values == ({"kind": "noise"}, {"kind": "checker"})
    summary = run_sweep(None, [vary], tmp_path / "s", overrides=SMALL, workers=1)
    assert [r["path"] for r in summary.records] == ["background={kind=noise}", "background={kind=checker}"]
    for r in summary.records:
        manifest = json.loads((tmp_path / "s" / r["path"] / "manifest.json").read_text())
        assert manifest["config"]["background"]["kind"] == r["values"]["background"]["kind"]


def _tree(path):
    return {p.relative_to(path).as_posix(): p.read_bytes() for p in sorted(path.rglob("*")) if p.is_file()}


def test_killed_sweep_resumes_to_identical_files(tmp_path):
    """SIGKILL a real `synthgen sweep` inside its second subset; the same command plus --resume ends as a clean sweep."""
    import os
    import signal
    import subprocess
    import sys
    import time
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    args = ["sweep", "--vary", "objects.max_iou=0,0.2,0.4", "--count", "40", "--set", "canvas.width=64",
            "--set", "canvas.height=48", "--set", "objects.count=[1, 4]", "--workers", "1", "--quiet"]
    out = tmp_path / "killed"
    journal = out / "objects.max_iou=0.2" / ".synthgen" / "0-of-1.journal"
    env = {**os.environ, "PYTHONPATH": str(root)}
    proc = subprocess.Popen([sys.executable, "-m", "synthgen", *args, "--out", str(out)], cwd=root, env=env,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 60
    while proc.poll() is None and time.monotonic() < deadline:
        if journal.exists() and journal.read_bytes().count(b"\n") >= 5:
            break
        time.sleep(0.01)
    proc.send_signal(signal.SIGKILL)
    proc.communicate()
    assert proc.returncode == -signal.SIGKILL
    assert not (out / "sweep.json").exists()

    res = CliRunner().invoke(app, [*args, "--out", str(out)])
    assert res.exit_code == 2 and "pass --resume to continue it" in res.stderr
    res = CliRunner().invoke(app, [*args, "--out", str(out), "--resume"])
    assert res.exit_code == 0, res.output
    assert "images kept from before" in res.stdout
    assert CliRunner().invoke(app, [*args, "--out", str(tmp_path / "clean")]).exit_code == 0
    assert _tree(out) == _tree(tmp_path / "clean")


def test_resume_refuses_a_sweep_of_other_settings(tmp_path):
    """--resume on a sweep of another base config or other varied values names what differs, writing nothing."""
    varies = [parse_vary("objects.max_iou=0,0.3")]
    run_sweep(None, varies, tmp_path / "s", overrides=SMALL, workers=1)
    before = _tree(tmp_path / "s")
    runner = CliRunner()
    base = ["sweep", "--out", str(tmp_path / "s"), "--quiet", "--resume", *[a for o in SMALL for a in ("--set", o)]]
    res = runner.invoke(app, [*base, "--vary", "objects.max_iou=0,0.3", "--set", "canvas.width=40"])
    assert res.exit_code == 2 and "canvas.width (48 there, 40 here)" in res.stderr
    res = runner.invoke(app, [*base, "--vary", "objects.max_iou=0,0.5"])
    assert res.exit_code == 2 and "--vary objects.max_iou=0,0.3 there, objects.max_iou=0,0.5 here" in res.stderr
    assert _tree(tmp_path / "s") == before
    res = runner.invoke(app, [*base, "--vary", "objects.max_iou=0,0.3"])  # a finished sweep: checked, kept
    assert res.exit_code == 0 and "4 images kept from before" in res.stdout
    assert _tree(tmp_path / "s") == before
