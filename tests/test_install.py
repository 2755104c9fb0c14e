"""What an install brings: the distribution's name, its dependencies and extras, optional parts missing."""

from __future__ import annotations

import os
import re
import subprocess
import sys
import textwrap
import tomllib
from importlib.metadata import entry_points
from pathlib import Path

import synthgen

ROOT = Path(__file__).resolve().parents[1]
PYPROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]


def _names(requirements) -> set[str]:
    return {re.split(r"[\[<>=!~; ]", r, maxsplit=1)[0].lower() for r in requirements}


def test_distribution_name_differs_from_the_import_package_and_command():
    """The index name is synthgen.DISTRIBUTION; the import package and the command stay 'synthgen'."""
    assert PYPROJECT["name"] == synthgen.DISTRIBUTION != "synthgen"
    assert PYPROJECT["scripts"] == {"synthgen": "synthgen.cli:main"}
    assert PYPROJECT["entry-points"]["pytest11"] == {"synthgen": "synthgen.testing"}


def test_readme_installs_this_distribution_and_says_how_the_names_relate():
    """Every `pip install` of the project in the README names the distribution (or the checkout, `-e .`)."""
    readme = (ROOT / "README.md").read_text()
    installs = re.findall(r"pip install (?:-e )?['\"]?([^\s'\"`]+)", readme)
    ours = [name for name in installs if name.startswith(("synthgen", "."))]
    assert ours and all(n.startswith((synthgen.DISTRIBUTION, ".")) for n in ours), ours
    assert not re.search(r"pip install ['\"]?synthgen(?![-\w])", readme)
    assert f"`{synthgen.DISTRIBUTION}`" in readme and "`import synthgen`" in readme


def test_core_install_leaves_test_kit_and_figures_to_extras():
    """pytest and hypothesis come with [testing], matplotlib with [plots]; [test] has all the suite needs."""
    core = _names(PYPROJECT["dependencies"])
    extras = {k: _names(v) for k, v in PYPROJECT["optional-dependencies"].items()}
    assert not core & {"pytest", "hypothesis", "matplotlib", "dask"}
    assert extras["testing"] == {"pytest", "hypothesis"} and extras["plots"] == {"matplotlib"}
    assert extras["testing"] | extras["plots"] | extras["cluster"] | {"pycocotools"} <= extras["test"]
    assert {"shapely", "pyyaml"} <= core  # visible boxes are computed with shapely; check reads data.yaml


def _run_without(tmp_path, modules: list[str], code: str) -> subprocess.CompletedProcess:
    """Run ``code`` in a fresh interpreter where ``modules`` cannot be imported, as if not installed."""
    script = tmp_path / "without.py"
    script.write_text(textwrap.dedent(f"""
        import sys

        class _NotInstalled:
            def find_spec(self, name, path=None, target=None):
                if name.split(".")[0] in {modules!r}:
                    raise ModuleNotFoundError(f"No module named {{name!r}}", name=name)

        sys.meta_path.insert(0, _NotInstalled())
    """) + textwrap.dedent(code))
    return subprocess.run([sys.executable, str(script)], cwd=tmp_path, capture_output=True, text=True, timeout=120,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})


def test_pytest_plugin_loads_without_hypothesis(tmp_path):
    """With hypothesis absent the plugin's fixtures work, and a strategy says which extra brings hypothesis."""
    (tmp_path / "pytest.ini").write_text("[pytest]\n")
    (tmp_path / "test_user.py").write_text(textwrap.dedent("""
        import pytest

        def test_fixture(synth_scene):
            assert synth_scene.image.ndim == 3

        def test_strategy_names_the_extra():
            from synthgen.testing import boxes
            with pytest.raises(ImportError, match=r"pip install 'synthgen-shapes\\[testing\\]'"):
                boxes()
    """))
    installed = any(ep.value == "synthgen.testing" for ep in entry_points(group="pytest11"))
    plugin = [] if installed else ["-p", "synthgen.testing"]  # a checkout that is not installed
    res = _run_without(tmp_path, ["hypothesis", "_hypothesis_pytestplugin"], f"""
        import pytest
        sys.exit(pytest.main(["-q", "-p", "no:cacheprovider", "-p", "no:hypothesispytest", *{plugin!r},
                              "test_user.py"]))
    """)
    assert res.returncode == 0, res.stdout + res.stderr
    assert "2 passed" in res.stdout


def test_commands_import_no_test_kit_or_figures(tmp_path):
    """make, show and stats (without --plot) never import pytest, hypothesis or matplotlib."""
    res = _run_without(tmp_path, [], """
        from synthgen.cli import main
        for args in (["make", "--out", "d", "--count", "2", "-q", "--set", "canvas.width=48",
                      "--set", "canvas.height=32"], ["show", "d", "--out", "s.png"], ["stats", "d"]):
            sys.argv = ["synthgen", *args]
            try:
                main()
            except SystemExit as exit:
                assert exit.code == 0, args
        print(sorted(m for m in ("pytest", "hypothesis", "matplotlib") if m in sys.modules))
    """)
    assert res.returncode == 0, res.stderr
    assert res.stdout.strip().splitlines()[-1] == "[]"


def test_plot_without_matplotlib_names_the_extra_before_any_work(tmp_path, small_dataset):
    """stats --plot with matplotlib absent: exit 2, one line with the install command, no table printed first."""
    res = _run_without(tmp_path, ["matplotlib"], f"""
        from synthgen.cli import main
        sys.argv = ["synthgen", "stats", {str(small_dataset[0])!r}, "--plot", "fig.png"]
        main()
    """)
    assert res.returncode == 2
    assert res.stdout == ""
    assert res.stderr == (f"synthgen: error: option '--plot' needs matplotlib, which is not installed: "
                          f"pip install '{synthgen.DISTRIBUTION}[plots]'\n")
    assert not (tmp_path / "fig.png").exists()
