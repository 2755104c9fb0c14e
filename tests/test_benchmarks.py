"""benchmarks/run_all.py stays runnable: a smoke run with tiny sizes (no timing is asserted)."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _load_run_all(monkeypatch):
    monkeypatch.setattr(sys, "path", list(sys.path))  # run_all puts benchmarks/ on the path; undo after
    spec = importlib.util.spec_from_file_location("synthgen_run_all", ROOT / "benchmarks" / "run_all.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_run_all_quick_prints_one_row_per_target(monkeypatch, capsys):
    """The in-process measurements run for real; the timed whole processes are recorded, not started
    (they take seconds; `python benchmarks/run_all.py --quick` runs them)."""
    run_all = _load_run_all(monkeypatch)
    started, envs = [], []
    monkeypatch.setattr(run_all, "run_quiet", lambda cmd, **env: (started.append(cmd), envs.append(env)))
    assert run_all.main(["--quick", "--skip-scripts"]) == 0
    assert {"OPENBLAS_NUM_THREADS": "1"} in envs  # target 5 also times the script on one BLAS thread
    commands = [" ".join(Path(c[0]).name if i == 0 else c[i] for i in range(len(c))) for c in started]
    assert any(c.endswith("synthgen --help") or "synthgen --help" in c for c in commands)
    assert any(" make --count 1 " in c for c in commands)
    assert any("handwritten.py --images" in c for c in commands)
    lines = capsys.readouterr().out.splitlines()
    rows = [line for line in lines[2:] if line[:2] in {f"{k} " for k in "123456"}]
    assert {row[0] for row in rows} == set("123456")
    # every row ends with a ratio (a number, or nan where faster-coco-eval is not installed)
    for row in rows:
        last = row.split()[-1]
        assert last == "nan" or float(last) >= 0, row


def test_every_benchmark_script_has_small_arguments(monkeypatch):
    """run_all knows every bench_*.py, so none is left out of its runs."""
    run_all = _load_run_all(monkeypatch)
    assert set(run_all.SCRIPTS) == {p.name for p in (ROOT / "benchmarks").glob("bench_*.py")}


def test_handwritten_baseline_writes_images_and_boxes(tmp_path, monkeypatch):
    """The outside yardstick of target 5 runs: PNG images and a COCO-style file with 10 boxes each."""
    import json

    _load_run_all(monkeypatch)
    import handwritten

    handwritten.main(["--images", "2", "--out", str(tmp_path)])
    coco = json.loads((tmp_path / "annotations.json").read_text())
    assert sorted(p.name for p in tmp_path.glob("*.png")) == ["000000.png", "000001.png"]
    assert len(coco["annotations"]) == 20
