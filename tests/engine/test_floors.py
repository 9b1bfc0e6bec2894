"""The engine's floors: the core imports nothing above it, and each floor only the floors below.

The floors are read from the layout: the modules directly in ``stages/`` (and ``stages/kinds/``)
are the core; ``report``, ``understand`` and ``decide`` are the second floor; ``files`` and
``bridges`` the third. Only the facade (``stages/__init__.py``, the ``Chain`` and ``FittedChain``
methods users call) may reach up, and only lazily, inside a function.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

import stages

ROOT = Path(stages.__file__).resolve().parent
SECOND = ("report", "understand", "decide")
THIRD = ("files", "bridges")
#: modules whose methods are the facade: they may import upper floors inside a function
FACADE = ("stages", "stages.chain", "stages.chain_questions", "stages.predictor")


def _module(path: Path) -> str:
    parts = path.relative_to(ROOT.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _package(path: Path) -> str:
    name = _module(path)
    return name if path.name == "__init__.py" else name.rsplit(".", 1)[0]


def floor(module: str) -> int:
    """Return the floor of a module of the engine: 1 for the core, 2 and 3 above it."""
    parts = module.split(".")
    if len(parts) < 2 or parts[1] == "kinds" or len(parts) == 2 and not (ROOT / parts[1]).is_dir():
        return 1
    if parts[1] in SECOND:
        return 2
    if parts[1] in THIRD:
        return 3
    raise AssertionError(f"{module} is in no floor: add its package to SECOND or THIRD")


def _imports(path: Path) -> list[tuple[str, bool, int]]:
    """Return (imported module, inside a function, line) for every import of the engine in a file."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found = []
    functions = [n for n in ast.walk(tree) if isinstance(n, ast.FunctionDef | ast.AsyncFunctionDef)]
    inner = {id(n) for f in functions for n in ast.walk(f) if n is not f}
    for node in ast.walk(tree):
        lazy = id(node) in inner
        if isinstance(node, ast.Import):
            found += [(alias.name, lazy, node.lineno) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = _package(path).split(".")
                base = base[: len(base) - node.level + 1]
                source = ".".join(base + ([node.module] if node.module else []))
            else:
                source = node.module or ""
            found.append((source, lazy, node.lineno))
            # "from . import scoring" names a module
            found += [(f"{source}.{alias.name}", lazy, node.lineno) for alias in node.names
                      if (ROOT.parent / Path(*f"{source}.{alias.name}".split("."))).with_suffix(".py").exists()
                      or (ROOT.parent / Path(*f"{source}.{alias.name}".split("."))).is_dir()]
    return [(name, lazy, line) for name, lazy, line in found if name == "stages" or name.startswith("stages.")]


MODULES = sorted(ROOT.rglob("*.py"))


@pytest.mark.parametrize("path", MODULES, ids=lambda p: str(p.relative_to(ROOT.parent)))
def test_every_module_imports_only_its_own_floor_and_the_floors_below(path):
    module = _module(path)
    own = floor(module)
    for imported, lazy, line in _imports(path):
        if imported == "stages" or imported == "stages.errors":
            continue
        if lazy and module in FACADE:
            continue  # the facade reaches up, lazily
        where = f"{path.relative_to(ROOT.parent)} line {line} imports {imported}"
        above = floor(imported)
        assert above <= own, f"{where}, a floor above it"
        if own == 2 and above == 2:
            assert imported.split(".")[1] == module.split(".")[1], f"{where}: the second floor's parts are siblings"
        if own == 3 and above == 3:
            assert imported.split(".")[1] == module.split(".")[1], f"{where}: files and bridges do not mix"


def test_the_core_is_every_module_directly_in_the_engine_and_its_kinds():
    core = {_module(p) for p in MODULES if floor(_module(p)) == 1}
    assert {"stages.chain", "stages.fitting", "stages.data", "stages.kinds.base"} <= core
    assert not core & {"stages.report.table", "stages.decide.audition", "stages.files.store"}
    upper = {p.name for p in ROOT.iterdir() if p.is_dir() and (p / "__init__.py").exists()} - {"kinds"}
    assert upper == set(SECOND + THIRD), "a new package under stages/ needs its floor here and in DEVELOPERS.md"


def test_no_module_of_the_engine_imports_the_workbench():
    for path in MODULES:
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            names = [a.name for a in node.names] if isinstance(node, ast.Import) else (
                [node.module or ""] if isinstance(node, ast.ImportFrom) and not node.level else [])
            for name in names:
                assert name.split(".")[0] not in ("tui", "textual", "rich"), f"{path} imports {name}"
