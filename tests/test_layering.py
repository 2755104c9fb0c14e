"""Imports run one way: a table of the allowed arrows between layers, checked over the package's source.

Every ``import`` in ``synthgen/`` (also those inside functions, which still tie the modules
together) is read with :mod:`ast`.  A module may import its own layer and the layers its
entry in :data:`ALLOWED` names; no import cycle may form, within a layer or across.  Each
failure names the importing file and line.

The package is being moved into sub-packages by stage (issue 14).  Until each move lands,
:data:`LAYER_OF` maps today's flat modules to the layer they are going to;
whoever moves a module into its package deletes its entry here (the package prefix then
decides).  :data:`TRANSITIONAL` lists the few upward arrows that the moves remove.
"""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parent.parent / "synthgen"

#: layer -> the other layers it may import.  Leaves import nothing of synthgen but leaves;
#: the main line is config -> scene -> run, with formats below run; jitter, evaluate, report, stream
#: and testing are side branches that may use formats, scene (its facts table, kinds) and the
#: leaves, never the reverse (ARCHITECTURE.md); page (the HTML report) is a side branch above
#: report; probe, a side branch too, may also make data (run), draw figures (report) and write
#: the page; cli is on top.
ALLOWED: dict[str, frozenset[str]] = {
    "leaf": frozenset(),
    "config": frozenset({"leaf"}),
    "scene": frozenset({"leaf", "config"}),
    "formats": frozenset({"leaf"}),
    "run": frozenset({"leaf", "config", "scene", "formats"}),
    "evaluate": frozenset({"leaf", "config", "scene", "formats"}),
    "jitter": frozenset({"leaf", "config", "scene", "formats", "evaluate"}),
    "report": frozenset({"leaf", "config", "scene", "formats", "evaluate", "jitter"}),
    "page": frozenset({"leaf", "config", "scene", "formats", "evaluate", "jitter", "report"}),
    "testing": frozenset({"leaf", "config", "scene", "run", "formats", "jitter", "evaluate", "cases"}),
    # a detector run over data it may make first (run), scored (evaluate), drawn (report, page)
    "probe": frozenset({"leaf", "config", "scene", "run", "formats", "evaluate", "report", "page"}),
    # known-answer cases for evaluators: plain COCO dicts, a reference evaluator of their own
    "cases": frozenset({"leaf", "formats"}),
    "stream": frozenset({"leaf", "config", "scene", "run", "formats", "jitter"}),
    # the command line, on top of everything
    "cli": frozenset(
        {"leaf", "config", "scene", "run", "formats", "jitter", "evaluate", "report", "page", "probe", "cases",
         "stream", "testing"}
    ),
}

#: Module (or package prefix) -> layer.  The longest matching prefix wins.
LAYER_OF: dict[str, str] = {
    # leaves; the package root only holds constants and lazy re-exports
    "synthgen": "leaf",
    "synthgen.errors": "leaf",
    "synthgen.geometry": "leaf",
    "synthgen.seeding": "leaf",
    "synthgen._io": "leaf",
    "synthgen.config": "config",
    # packages of the target layout
    "synthgen.scene": "scene",
    "synthgen.formats": "formats",
    "synthgen.run": "run",
    "synthgen.jitter": "jitter",
    "synthgen.evaluate": "evaluate",
    "synthgen.report": "report",
    "synthgen.page": "page",
    "synthgen.cases": "cases",
    "synthgen.stream": "stream",
    "synthgen.testing": "testing",
    "synthgen.probe": "probe",
    "synthgen.cli": "cli",
    "synthgen.__main__": "cli",
    # transitional: today's flat modules, by the layer they move to (delete each entry as it moves)
}

#: (importer, imported) arrows allowed until the move that removes them lands.
TRANSITIONAL: frozenset[tuple[str, str]] = frozenset()


def module_name(path: Path) -> str:
    """Dotted module name of a file under :data:`PACKAGE`."""
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _is_module(name: str) -> bool:
    rel = Path(*name.split("."))
    return (PACKAGE.parent / rel).with_suffix(".py").is_file() or (PACKAGE.parent / rel / "__init__.py").is_file()


def imports_of(path: Path, text: str | None = None) -> list[tuple[str, int]]:
    """``(imported synthgen module, line)`` for every import in ``path`` (or ``text``), nested ones included."""
    me = module_name(path)
    is_pkg = path.name == "__init__.py"
    text = path.read_text(encoding="utf-8") if text is None else text
    found = []
    for node in ast.walk(ast.parse(text, filename=str(path))):
        if isinstance(node, ast.Import):
            found += [(a.name, node.lineno) for a in node.names if a.name.split(".")[0] == "synthgen"]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = me.split(".")[: len(me.split(".")) - node.level + (1 if is_pkg else 0)]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            if mod.split(".")[0] != "synthgen":
                continue
            # `from synthgen import scene` imports the module synthgen.scene
            subs = [f"{mod}.{a.name}" for a in node.names if _is_module(f"{mod}.{a.name}")]
            found += [(s, node.lineno) for s in subs] if subs else [(mod, node.lineno)]
    return found


def layer_of(module: str) -> str | None:
    """The layer of ``module`` by the longest matching entry of :data:`LAYER_OF` (None: unmapped)."""
    parts = module.split(".")
    for n in range(len(parts), 0, -1):
        if (key := ".".join(parts[:n])) in LAYER_OF:
            return LAYER_OF[key]
    return None


def graph() -> dict[str, list[tuple[str, int, Path]]]:
    """module -> [(imported module, line, file)] over the whole package."""
    return {
        module_name(p): [(m, line, p) for m, line in imports_of(p)] for p in sorted(PACKAGE.rglob("*.py"))
    }


def upward_imports(g) -> list[str]:
    """Every import that :data:`ALLOWED` forbids, as ``file:line: a (layer) imports b (layer)``."""
    bad = []
    for mod, deps in g.items():
        src = layer_of(mod)
        for dep, line, path in deps:
            dst = layer_of(dep)
            where = f"{path.relative_to(PACKAGE.parent)}:{line}"
            if src is None or dst is None:
                bad.append(f"{where}: {mod if src is None else dep} has no layer (add it to LAYER_OF)")
            elif dst != src and dst not in ALLOWED[src] and (mod, dep) not in TRANSITIONAL:
                bad.append(f"{where}: {mod} ({src}) imports {dep} ({dst})")
    return bad


def cycles(g) -> list[str]:
    """One line per import cycle, each module named with the file:line of its import of the next."""
    edges = {m: {} for m in g}
    for mod, deps in g.items():
        for dep, line, path in deps:
            if dep in g and dep != mod:
                edges[mod].setdefault(dep, f"{path.relative_to(PACKAGE.parent)}:{line}")
    found, state = [], {}

    def visit(m, stack):
        state[m] = "open"
        stack.append(m)
        for d in sorted(edges[m]):
            if state.get(d) == "open":
                loop = stack[stack.index(d) :] + [d]
                found.append(" -> ".join(f"{a} ({edges[a][b]})" for a, b in zip(loop, loop[1:])) + f" -> {d}")
            elif d not in state:
                visit(d, stack)
        stack.pop()
        state[m] = "done"

    for m in sorted(edges):
        if m not in state:
            visit(m, [])
    return found


def test_no_upward_import():
    """No module imports a layer above its own (the allowed arrows are in ALLOWED)."""
    bad = upward_imports(graph())
    assert not bad, "imports against the layer order:\n" + "\n".join(bad)


def test_no_import_cycle():
    """No two modules import each other, directly or through others."""
    found = cycles(graph())
    assert not found, "import cycles:\n" + "\n".join(found)


def test_every_transitional_arrow_still_exists():
    """An arrow left in TRANSITIONAL after its move landed is deleted (the table only shrinks)."""
    live = {(m, d) for m, deps in graph().items() for d, _, _ in deps}
    assert sorted(TRANSITIONAL - live) == []


def test_checker_reports_an_upward_import_and_a_cycle():
    """The checks fail on a planted upward import and a planted cycle, naming file and line."""
    here = PACKAGE / "geometry.py"
    g = {
        "synthgen.geometry": [("synthgen.run.make", 7, here)],
        "synthgen.run.make": [("synthgen.geometry", 3, PACKAGE / "run" / "make.py")],
    }
    assert upward_imports(g) == ["synthgen/geometry.py:7: synthgen.geometry (leaf) imports synthgen.run.make (run)"]
    assert cycles(g) == [
        "synthgen.geometry (synthgen/geometry.py:7) -> synthgen.run.make (synthgen/run/make.py:3) -> synthgen.geometry"
    ]


def test_from_package_import_names_the_submodule():
    """``from synthgen import scene`` counts as importing synthgen.scene, not the package root."""
    assert imports_of(PACKAGE / "probe.py", "from synthgen import scene, errors\n") == [
        ("synthgen.scene", 1),
        ("synthgen.errors", 1),
    ]
    assert imports_of(PACKAGE / "formats" / "probe.py", "from .coco import read_coco\n") == [("synthgen.formats.coco", 1)]
