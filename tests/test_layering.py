"""The package's layers, read from its source: who imports whom (DEVELOPERS.md, Architecture).

Rules of our own design, so the check is the rule itself, made on the source with ``ast``: the
runtime import graph (every ``import`` and ``from`` statement, module-level or inside a function;
only ``if TYPE_CHECKING:`` blocks, which never run, are left out) has no cycle, and every import
goes down (or across) the layer table below.
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


# ------------------------------------------------------------------- runtime import graph
def _is_type_checking(test: ast.expr) -> bool:
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"
    )


MODULES = {_module(f) for f in FILES}


def _runtime_edges(path: Path) -> set[str]:
    """Modules of ours that importing (or running) ``path`` imports, TYPE_CHECKING aside.

    ``from a import b`` imports ``a.b`` when that is a module, else ``a``. Importing a module
    first runs every package above it (``a.b.c`` runs ``a/__init__`` and ``a/b/__init__``),
    so those count too, except the importer's own packages, which are already running.
    """
    me = _module(path)
    parts = me.split(".")
    package = parts if path.name == "__init__.py" else parts[:-1]
    targets: set[str] = set()

    def visit(node: ast.AST) -> None:
        if isinstance(node, ast.If) and _is_type_checking(node.test):
            for child in node.orelse:
                visit(child)
            return
        if isinstance(node, ast.Import):
            targets.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - node.level + 1]
                name = ".".join([*base, *([node.module] if node.module else [])])
            else:
                name = node.module or ""
            for a in node.names:
                sub = f"{name}.{a.name}"
                targets.add(sub if sub in MODULES else name)
        for child in ast.iter_child_nodes(node):
            visit(child)

    visit(ast.parse(path.read_text(encoding="utf-8")))
    edges: set[str] = set()
    for t in targets:
        bits = t.split(".")
        for i in range(1, len(bits) + 1):
            m = ".".join(bits[:i])
            if m in MODULES and m != me and not me.startswith(m + "."):
                edges.add(m)
    return edges


RUNTIME = {_module(f): _runtime_edges(f) for f in FILES}


def _find_cycle(graph: dict[str, set[str]]) -> list[str] | None:
    """One cycle as a path ``[a, b, ..., a]``, or None (depth-first search)."""
    state: dict[str, int] = {}  # 1 on the stack, 2 done
    stack: list[str] = []

    def dfs(v: str) -> list[str] | None:
        state[v] = 1
        stack.append(v)
        for w in sorted(graph.get(v, ())):
            if state.get(w) == 1:
                return [*stack[stack.index(w) :], w]
            if w not in state:
                found = dfs(w)
                if found:
                    return found
        stack.pop()
        state[v] = 2
        return None

    for v in sorted(graph):
        if v not in state:
            found = dfs(v)
            if found:
                return found
    return None


def test_the_cycle_finder_finds_a_cycle() -> None:
    # The finder itself, on a graph with a known cycle and one without.
    assert _find_cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == ["a", "b", "c", "a"]
    assert _find_cycle({"a": {"b"}, "b": {"c"}, "c": set()}) is None


def test_the_graph_sees_late_imports_and_skips_type_checking_ones() -> None:
    # stats.linearized imports the fitting package inside a function; stats.uncertainty
    # imports FitResult for annotations only (and the result module for its registry).
    assert "curvewright.fitting" in RUNTIME["curvewright.stats.linearized"]
    assert "curvewright.result" in RUNTIME["curvewright.stats.uncertainty"]
    assert "curvewright.result" not in RUNTIME["curvewright.stats.polynomial"]
    # importing curvewright.stats.compare runs curvewright/stats/__init__.py
    assert "curvewright.stats" in RUNTIME["curvewright.widget._widget"]


def test_the_runtime_import_graph_has_no_cycle() -> None:
    cycle = _find_cycle(RUNTIME)
    assert cycle is None, "import cycle: " + " -> ".join(cycle or [])


#: The layers, bottom first (DEVELOPERS.md, Architecture). A module may import modules of its
#: own layer or below, never above. In the data flow a fit makes a result, but in the imports
#: the result record sits below the fitting that builds it.
LAYERS: dict[str, tuple[str, ...]] = {
    "base": (
        "curvewright._version",
        "curvewright.errors",
        "curvewright.messages",
        "curvewright.output",
        "curvewright.thresholds",
    ),
    "maths": ("curvewright.numerics", "curvewright.inference", "curvewright.linear"),
    "data": ("curvewright.data",),
    "model": (
        "curvewright.expr",
        "curvewright.models",
        "curvewright.parameters",
        "curvewright.handles",
        "curvewright.start",
        "curvewright.catalog",
        "curvewright.start_batch",
        "curvewright.start_kernel",
    ),
    "result": ("curvewright.result", "curvewright.global_result", "curvewright.batch_result"),
    "fit": (
        "curvewright.fitting",
        "curvewright.fitting.problem",
        "curvewright.fitting.engine",
        "curvewright.fitting.assemble",
        "curvewright.fitting.single",
        "curvewright.fitting.global_fit",
        "curvewright.fitting.batch_kernel",
        "curvewright.fitting.batch_engine",
        "curvewright.fitting.batch_run",
        "curvewright.fitting.batch",
        "curvewright.fitting.batch_dask",
    ),
    "statistics": (
        "curvewright.stats",
        "curvewright.stats.compare",
        "curvewright.stats.diagnostics",
        "curvewright.stats.groups",
        "curvewright.stats.linearized",
        "curvewright.stats.polynomial",
        "curvewright.stats.uncertainty",
    ),
    "view": (
        "curvewright.figures",
        "curvewright.figures.style",
        "curvewright.figures.options",
        "curvewright.figures.scales",
        "curvewright.figures.marks",
        "curvewright.figures.single",
        "curvewright.figures.groups",
        "curvewright.figures.save",
        "curvewright.widget",
        "curvewright.widget._errors",
        "curvewright.widget._review",
        "curvewright.widget._session",
        "curvewright.widget._state",
        "curvewright.widget._widget",
        "curvewright.reports",
        "curvewright.reports.cells",
        "curvewright.reports.content",
        "curvewright.reports.document",
        "curvewright.reports.excel",
        "curvewright.reports.figure",
        "curvewright.reports.html",
        "curvewright.reports.markdown",
        "curvewright.reports.methods",
        "curvewright.reports.tables",
        "curvewright.reports.versions",
    ),
    "package": ("curvewright",),
}
RANK = {m: i for i, mods in enumerate(LAYERS.values()) for m in mods}
LAYER_OF = {m: name for name, mods in LAYERS.items() for m in mods}


def test_every_module_has_a_layer() -> None:
    missing = sorted(MODULES - set(RANK))
    assert not missing, f"put these modules in a layer of LAYERS (and DEVELOPERS.md): {missing}"
    assert not sorted(set(RANK) - MODULES), "LAYERS names a module that does not exist"


def test_imports_go_down_the_layers() -> None:
    upward = [
        f"{m} ({LAYER_OF[m]}) imports {t} ({LAYER_OF[t]})"
        for m, targets in sorted(RUNTIME.items())
        for t in sorted(targets)
        if t in RANK and RANK[t] > RANK[m]
    ]
    assert not upward, "\n".join(upward)


def test_the_bottom_modules_import_nothing_of_ours_but_the_base() -> None:
    assert RUNTIME["curvewright.thresholds"] == set()
    assert RUNTIME["curvewright.inference"] <= {"curvewright.errors"}
    assert RUNTIME["curvewright.result"].isdisjoint(
        {m for m in MODULES if m.startswith(("curvewright.stats", "curvewright.fitting"))}
    )


def test_every_result_method_that_needs_the_statistics_finds_them() -> None:
    # FitResult reaches the statistics layer through a registry (it cannot import it); every
    # name it asks for must be registered once curvewright is imported.
    import sys

    import curvewright  # noqa: F401  (registers the statistics)

    asked = {
        node.args[0].value
        for path in ("result.py", "global_result.py")
        for node in ast.walk(ast.parse((SRC / path).read_text(encoding="utf-8")))
        if isinstance(node, ast.Call)
        and isinstance(node.func, ast.Name)
        and node.func.id == "_statistic"
        and isinstance(node.args[0], ast.Constant)
    }
    registered = set(sys.modules["curvewright.result"]._REGISTRY["curvewright.stats"])
    assert len(asked) == 12
    assert asked <= registered, sorted(asked - registered)
