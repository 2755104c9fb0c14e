"""Worker processes: results, errors, crashes, and a caller's script that is never run again."""

from __future__ import annotations

import functools
import json
import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

import synthgen.run.backends
from synthgen.config import load_config
from synthgen.run.backends import local_processes
from synthgen.run.make import make_dataset
from synthgen.run.pool import WorkerFailed, run_unordered

ROOT = Path(__file__).resolve().parents[1]


def test_results_cover_every_item_in_any_order():
    """Every item gets its result once, whatever order the workers finish in."""
    got = list(run_unordered(functools.partial(pow, 2), range(10), 2))
    assert sorted(got) == [2**k for k in range(10)]


def test_a_worker_exception_is_raised_with_its_type():
    """An exception in a worker reaches the caller as itself, the worker's traceback as its cause."""
    with pytest.raises(ZeroDivisionError) as info:
        list(run_unordered(functools.partial(divmod, 1), [1, 0, 2], 2))
    assert "in the worker process" in str(info.value.__cause__)


def test_a_worker_that_dies_is_a_clear_failure():
    """A worker killed mid-item ends the run with WorkerFailed naming the signal, not a hang."""
    with pytest.raises(WorkerFailed, match=f"signal {int(signal.SIGKILL)}.*--resume"):
        list(run_unordered(signal.raise_signal, [signal.SIGKILL], 1))


def test_small_runs_stay_in_process(tmp_path, monkeypatch):
    """A run with fewer images than two workers' worth starts no worker process."""
    def no_pool(*args, **kwargs):
        raise AssertionError("a worker pool was started for a small run")

    monkeypatch.setattr(synthgen.run.backends, "run_unordered", no_pool)
    cfg = load_config(overrides=["count=6", "canvas.width=64", "canvas.height=48", "objects.count=[1, 3]"])
    assert make_dataset(cfg, tmp_path / "d", workers=2).images == 6
    assert local_processes(2 * synthgen.run.backends.MIN_IMAGES_PER_WORKER - 1, 8) == 1
    assert local_processes(2 * synthgen.run.backends.MIN_IMAGES_PER_WORKER, 8) == 2


def test_plain_script_without_main_guard_runs_once(tmp_path):
    """A script calling make_dataset at top level (no __main__ guard) with workers is not re-run by them."""
    n = 2 * synthgen.run.backends.MIN_IMAGES_PER_WORKER  # enough images for two workers
    script = tmp_path / "plain.py"
    script.write_text(textwrap.dedent(f"""
        from pathlib import Path
        from synthgen.config import load_config
        from synthgen.run.make import make_dataset

        with open("ran.txt", "a") as f:
            f.write("ran\\n")
        config = load_config(overrides=["count={n}", "canvas.width=48", "canvas.height=32", "objects.count=[1, 2]"])
        summary = make_dataset(config, "outputs/plain", workers=2)
        print(summary.images)
    """))
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    res = subprocess.run([sys.executable, str(script)], cwd=tmp_path, env=env, capture_output=True, text=True,
                         timeout=120)
    assert res.returncode == 0, res.stderr
    assert res.stderr == ""
    assert res.stdout.strip() == str(n)
    assert (tmp_path / "ran.txt").read_text() == "ran\n"  # the script's top level ran once
    manifest = json.loads((tmp_path / "outputs" / "plain" / "manifest.json").read_text())
    assert manifest["counts"]["images"] == n


def test_local_and_dask_backends_answer_the_same_calls():
    """Both backends offer processes, run and close, so make_dataset never asks which one it has."""
    from synthgen.run.backends import DaskBackend, LocalBackend, open_backend

    for backend in (LocalBackend, DaskBackend):
        assert all(callable(getattr(backend, name, None)) for name in ("processes", "run", "close"))
    local = open_backend(None, 2)
    assert isinstance(local, LocalBackend)
    assert local.processes(3) == 1  # too few images to pay for a worker
    seen = []

    def unit(config, block, out):
        seen.append((config, block, out))
        return [b"%d" % k for k in block]

    assert list(local.run(unit, "cfg", "dir", [[0, 1], [2]])) == [[b"0", b"1"], [b"2"]]
    assert seen == [("cfg", [0, 1], "dir"), ("cfg", [2], "dir")]
    local.close()
