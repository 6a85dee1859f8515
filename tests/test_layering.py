"""The package's layers, read from its source: who imports whom (DEVELOPERS.md, Architecture).

Rules of our own design, so the check is the rule itself, made on the source with ``ast``.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parent.parent / "src" / "curvewright"


def _module(path: Path) -> str:
    parts = list(path.relative_to(SRC.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _imports(path: Path, *, top_level_only: bool) -> set[str]:
    """Modules of ours (and third-party top names) that ``path`` imports."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    me = _module(path).split(".")
    package = me if path.name == "__init__.py" else me[:-1]
    nodes = tree.body if top_level_only else list(ast.walk(tree))
    out: set[str] = set()
    for node in nodes:
        if isinstance(node, ast.Import):
            out.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - node.level + 1]
                name = ".".join([*base, *([node.module] if node.module else [])])
            else:
                name = node.module or ""
            out.add(name)
    return out


FILES = sorted(SRC.rglob("*.py"))
GRAPH = {_module(f): _imports(f, top_level_only=False) for f in FILES}


def _ours(names: set[str]) -> set[str]:
    # "curvewright.x.y" imported as a module or as the package of a name ("from .x import y").
    return {n for n in names if n == "curvewright" or n.startswith("curvewright.")}


def test_only_the_engine_imports_lmfit() -> None:
    users = {m for m, names in GRAPH.items() if any(n.split(".")[0] == "lmfit" for n in names)}
    assert users == {"curvewright.fitting.engine"}


@pytest.mark.parametrize(
    "module",
    ["curvewright.models", "curvewright.catalog", "curvewright.start", "curvewright.parameters"],
)
def test_the_model_layer_imports_nothing_above_it(module: str) -> None:
    # Late (function-level) imports count: they are cycles all the same.
    above = ("fitting", "result", "stats", "widget")
    bad = [n for n in _ours(GRAPH[module]) if n.split(".")[1:2] and n.split(".")[1] in above]
    assert not bad, bad
    if module != "curvewright.catalog":
        assert "curvewright.catalog" not in GRAPH[module], "the catalog is built on this module"


def test_the_fitting_parts_import_in_one_direction() -> None:
    order = ["problem", "engine", "assemble"]
    for i, part in enumerate(order):
        later = {f"curvewright.fitting.{p}" for p in order[i + 1 :]} | {"curvewright.fitting"}
        assert not (_ours(GRAPH[f"curvewright.fitting.{part}"]) & later), part
