"""The README's examples run as written, top to bottom, in a fresh folder.

Every fenced ``bash`` block and ``python`` block (saved as a plain script) of README.md runs in
document order in one temporary directory that holds a copy of ``configs/``; a block without a
language whose lines start with ``$ `` shows a command and its output, and the command must print
exactly that.  A block is left
out only when the line before its fence is ``<!-- not run by the tests: REASON -->`` (say, a job
script for a batch scheduler).

Two commands of the README are stood in for, since the suite runs inside them: installing this
checkout (``python -m pip install -e ...``: it is installed already) and running the suite
(``python -m pytest``).  Everything else is the README's own text.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
import textwrap
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

_FENCE = re.compile(r"^(?P<indent>[ \t]*)```(?P<lang>\w*)[ \t]*\n(?P<body>.*?)^(?P=indent)```[ \t]*$", re.M | re.S)
_SKIP = re.compile(r"<!-- not run by the tests: (?P<reason>[^>]+?) -->\s*$")

# `python -m pip install -e .` / `-e '.[test]'` and `python -m pytest` stand in for themselves.
_SHIMS = """
python() {
    if [ "$1 $2 $3 $4" = "-m pip install -e" ]; then echo "(already installed: $*)" >&2; return 0; fi
    if [ "$1 $2" = "-m pytest" ]; then echo "(the suite is running already)" >&2; return 0; fi
    "$SYNTHGEN_TEST_PYTHON" "$@"
}
"""


@dataclass(frozen=True)
class Block:
    line: int  # 1-based line of the opening fence
    lang: str
    body: str
    skip: str | None  # the reason, when marked not to run


def readme_blocks(text: str) -> list[Block]:
    """The fenced code blocks of a Markdown text, in order, with their skip marks.

    >>> [(b.lang, b.body) for b in readme_blocks("x\\n```bash\\necho hi\\n```\\n")]
    [('bash', 'echo hi\\n')]
    """
    blocks = []
    for m in _FENCE.finditer(text):
        before = text[: m.start()].rstrip("\n").rsplit("\n", 1)[-1]
        skip = _SKIP.search(before)
        body = textwrap.dedent(m["body"])
        blocks.append(Block(text.count("\n", 0, m.start()) + 1, m["lang"], body, skip["reason"] if skip else None))
    return blocks


def _environment(tmp: Path) -> dict:
    bin_dir = Path(sys.executable).parent
    env = {**os.environ, "SYNTHGEN_TEST_PYTHON": sys.executable, "PYTHONPATH": str(ROOT)}
    env["PATH"] = f"{bin_dir}{os.pathsep}{env.get('PATH', '')}"
    env.pop("COLUMNS", None)
    return env


def _run(block: Block, tmp: Path, env: dict) -> subprocess.CompletedProcess:
    if block.lang == "bash":
        script = _SHIMS
        if shutil.which("synthgen", path=env["PATH"]) is None:  # a checkout that is not installed
            script += 'synthgen() { "$SYNTHGEN_TEST_PYTHON" -m synthgen "$@"; }\n'
        cmd = ["bash", "-e", "-o", "pipefail", "-c", script + block.body]
    else:  # as a plain script, the way a reader would save and run it
        script = tmp / f"readme_line_{block.line}.py"
        script.write_text(block.body)
        cmd = [sys.executable, script.name]
    return subprocess.run(cmd, cwd=tmp, env=env, capture_output=True, text=True, timeout=600)


def test_readme_examples_run_top_to_bottom(tmp_path):
    """Each bash and python block of README.md succeeds in order; each shown command prints what is shown."""
    blocks = readme_blocks((ROOT / "README.md").read_text())
    shutil.copytree(ROOT / "configs", tmp_path / "configs")
    env = _environment(tmp_path)
    ran = 0
    for block in blocks:
        if block.skip is not None:
            continue
        where = f"README.md line {block.line}"
        if block.lang in ("bash", "python"):
            res = _run(block, tmp_path, env)
            assert res.returncode == 0, f"{where} failed:\n{block.body}\n{res.stdout}\n{res.stderr}"
            ran += 1
        elif block.lang == "" and block.body.startswith("$ "):
            command, *shown = block.body.rstrip("\n").split("\n")
            res = _run(Block(block.line, "bash", command[2:], None), tmp_path, env)
            assert (res.stdout + res.stderr).rstrip("\n").split("\n") == shown, f"{where}: {res.stdout}{res.stderr}"
            ran += 1
    assert ran >= 10


def test_skip_marks_are_rare_and_explained():
    """Only blocks that cannot run here are skipped (a framework model, a batch-scheduler script), each with its reason."""
    skipped = [b for b in readme_blocks((ROOT / "README.md").read_text()) if b.skip is not None]
    assert sorted(b.skip for b in skipped) == sorted(
        ["needs torch, torchvision and a trained model", "needs PyTorch, which synthgen does not depend on",
         "a SLURM job script"]
    )
