"""Start-up cost: what each entry point imports in a fresh interpreter (no timing asserted here;
benchmarks/run_all.py measures the seconds)."""

from __future__ import annotations

import os
import subprocess
import sys


def _loaded_after(statement: str, modules: tuple[str, ...]) -> list[str]:
    code = f"import sys\n{statement}\nprint(' '.join(m for m in {modules!r} if m in sys.modules))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    return out.split()


def test_loading_a_config_does_not_import_opencv():
    """Reading a config (bad-input errors, plans) leaves OpenCV (~0.1 s to import) unloaded: config.py
    holds the schema without the scene modules that draw with OpenCV."""
    statement = "from synthgen.config import load_config; load_config(overrides=['count=3'])"
    assert _loaded_after(statement, ("cv2",)) == []


def test_command_line_help_imports_no_array_library():
    """`synthgen --help` needs typer only: numpy, OpenCV, shapely and pydantic stay unloaded."""
    statement = "import synthgen.cli"
    assert _loaded_after(statement, ("numpy", "cv2", "shapely", "pydantic")) == []


def test_a_small_make_imports_only_what_it_uses(tmp_path):
    """`make` of the default config (no masks, COCO only) leaves Pillow's drawing and fonts,
    ElementTree, matplotlib and the report unloaded: each costs 5-20 ms at start-up and is imported
    where it is first used."""
    statement = (
        "from synthgen.config import load_config; from synthgen.run.make import make_dataset; "
        f"make_dataset(load_config(overrides=['count=1']), {str(tmp_path / 'd')!r}, workers=1)"
    )
    heavy = ("PIL.ImageDraw", "PIL.ImageFont", "xml.etree.ElementTree", "matplotlib", "synthgen.report")
    assert _loaded_after(statement, heavy) == []


def test_report_figures_and_format_writers_load_no_sheets_or_pillow():
    """The report package names its public API lazily: importing its figures does not load the
    contact sheets, Pillow and every format writer; nor does importing the format writers load
    Pillow (it is imported where a PNG is drawn or opened)."""
    statement = "import synthgen.report.figures, synthgen.formats"
    assert _loaded_after(statement, ("synthgen.report.sheet", "PIL")) == []


def _loaded_after_command(argv: list[str], modules: tuple[str, ...], cwd) -> list[str]:
    """Modules loaded after the console script's main() ran ``argv`` in a fresh interpreter."""
    code = (
        "import sys, atexit\n"
        f"atexit.register(lambda: print(' '.join(m for m in {modules!r} if m in sys.modules)))\n"
        f"sys.argv = ['synthgen', *{argv!r}]\n"
        "from synthgen.cli import main\nmain()\n"
    )
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=cwd)
    assert res.returncode == 0, res.stderr
    return res.stdout.split("\n")[-2].split()


def test_help_and_a_one_image_make_load_no_validation_model_or_rich_text(tmp_path):
    """typer would build a pydantic model per option value and draw help with rich (together
    ~0.25 s of a 0.35 s start): the command line converts values itself and writes plain help."""
    heavy = ("pydantic", "rich")
    assert _loaded_after_command(["--help"], heavy, tmp_path) == []
    assert _loaded_after_command(["make", "--help"], heavy, tmp_path) == []
    argv = ["make", "--count", "1", "--out", "d", "-q", "--set", "objects.count=[2,3]", "--workers", "1"]
    assert _loaded_after_command(argv, heavy, tmp_path) == []
    assert (tmp_path / "d" / "annotations.json").is_file()


def test_blas_runs_on_one_thread_for_synthgen_s_own_commands(monkeypatch):
    """OPENBLAS_NUM_THREADS=1 unless the user set it, and never for commands that run the user's code."""
    from synthgen.cli import RUNS_YOUR_CODE, one_blas_thread

    monkeypatch.delenv("OPENBLAS_NUM_THREADS", raising=False)
    for command in sorted(RUNS_YOUR_CODE):
        one_blas_thread([command, "x", "--detector", "builtin"])
        assert "OPENBLAS_NUM_THREADS" not in os.environ
    one_blas_thread(["make", "--count", "3"])
    assert os.environ["OPENBLAS_NUM_THREADS"] == "1"
    monkeypatch.setenv("OPENBLAS_NUM_THREADS", "4")
    one_blas_thread(["make"])
    assert os.environ["OPENBLAS_NUM_THREADS"] == "4"


def test_command_modules_keep_their_annotations_evaluated():
    """typer reads every command's signature at every start, evaluating string annotations twice
    (about 40 ms for synthgen's commands): command modules do without the __future__ import."""
    import ast
    from pathlib import Path

    import synthgen.cli

    lazy = []
    for path in sorted(Path(synthgen.cli.__file__).parent.glob("*.py")):
        tree = ast.parse(path.read_text())
        if any(isinstance(n, ast.ImportFrom) and n.module == "__future__" for n in tree.body):
            lazy.append(path.name)
    assert lazy == ["_common.py", "_values.py"]  # no commands there
