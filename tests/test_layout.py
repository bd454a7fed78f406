"""Tests of the package layout: module sizes, intra-package import cycles, packaging.

Static checks on the source files of ``routerisk/`` (nothing is imported): every module stays
at most ``MAX_LINES`` long unless it is on the allow-list of modules not yet split, no cycle
runs through the imports that execute when a module is loaded, and every sub-package is listed
in ``pyproject.toml`` (the package list there is explicit, so a missing entry would silently
leave the sub-package out of the wheel).
"""

from __future__ import annotations

import ast
import tomllib
from pathlib import Path

import networkx as nx

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "routerisk"

#: Longest module allowed, in lines (issue 19: "none over about 600 lines").
MAX_LINES = 600

#: Modules still over MAX_LINES, waiting to be split (path relative to routerisk/: lines when
#: the list was written). Shrink this list as modules are split; a test below fails when an
#: entry is no longer needed, so the list cannot go stale.
NOT_YET_SPLIT: dict[str, int] = {}


def _modules() -> list[Path]:
    return sorted(PACKAGE.rglob("*.py"))


def _lines(path: Path) -> int:
    return len(path.read_text(encoding="utf-8").splitlines())


def _rel(path: Path) -> str:
    return path.relative_to(PACKAGE).as_posix()


def test_sizes_listed_and_no_module_too_long() -> None:
    """Every module is at most MAX_LINES long, or on the allow-list; the sizes are printed."""
    sizes = {_rel(p): _lines(p) for p in _modules()}
    for m, n in sorted(sizes.items(), key=lambda x: -x[1]):
        print(f"{n:6d}  routerisk/{m}")
    too_long = {m: n for m, n in sizes.items() if n > MAX_LINES and m not in NOT_YET_SPLIT}
    assert not too_long, f"modules over {MAX_LINES} lines (split them): {too_long}"


def test_allow_list_is_not_stale() -> None:
    """Every allow-listed module still exists and is still too long."""
    stale = [
        m for m in NOT_YET_SPLIT if not (PACKAGE / m).is_file() or _lines(PACKAGE / m) <= MAX_LINES
    ]
    assert not stale, f"remove from NOT_YET_SPLIT (split, gone or short enough now): {stale}"


# --------------------------------------------------------------------------------------------
# imports


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _is_type_checking(test: ast.expr) -> bool:
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"
    )


def _load_time_imports(tree: ast.Module) -> list[ast.Import | ast.ImportFrom]:
    """Return the imports that run when the module is loaded.

    Module-level statements, including those inside module-level ``try`` / ``if`` / ``with``
    blocks, but not ``if TYPE_CHECKING:`` blocks (never executed) and not imports inside
    functions or classes: a function-level (lazy) import runs only when the function is
    called, after every module involved has finished loading, so it cannot deadlock a load
    and is excluded here (a command module imports its library inside ``run``, for example).
    """
    found: list[ast.Import | ast.ImportFrom] = []

    def visit(stmts: list[ast.stmt]) -> None:
        for node in stmts:
            if isinstance(node, ast.Import | ast.ImportFrom):
                found.append(node)
            elif isinstance(node, ast.If):
                if not _is_type_checking(node.test):
                    visit(node.body)
                visit(node.orelse)
            elif isinstance(node, ast.Try):
                visit(node.body)
                for h in node.handlers:
                    visit(h.body)
                visit(node.orelse)
                visit(node.finalbody)
            elif isinstance(node, ast.With):
                visit(node.body)

    visit(tree.body)
    return found


def _targets(
    module: str, is_package: bool, node: ast.Import | ast.ImportFrom, known: set[str]
) -> set[str]:
    """Return the routerisk modules an import statement loads (explicitly named ones)."""
    if isinstance(node, ast.Import):
        return {a.name for a in node.names if a.name in known}
    if node.level:
        base = module.split(".")
        if not is_package:
            base = base[:-1]
        base = base[: len(base) - (node.level - 1)]
        prefix = ".".join(base + ([node.module] if node.module else []))
    else:
        prefix = node.module or ""
    out = set()
    if prefix in known:
        out.add(prefix)
    for a in node.names:  # ``from pkg import submodule`` loads the submodule too
        if f"{prefix}.{a.name}" in known:
            out.add(f"{prefix}.{a.name}")
    return out


def _graph() -> dict[str, set[str]]:
    paths = {_module_name(p): p for p in _modules()}
    known = set(paths)
    graph = {}
    for name, path in paths.items():
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        edges: set[str] = set()
        for node in _load_time_imports(tree):
            edges |= _targets(name, path.name == "__init__.py", node, known)
        graph[name] = edges - {name}
    return graph


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Return the strongly connected parts of more than one module, sorted."""
    g = nx.DiGraph()
    g.add_nodes_from(graph)
    g.add_edges_from((a, b) for a, targets in graph.items() for b in targets)
    return sorted(sorted(c) for c in nx.strongly_connected_components(g) if len(c) > 1)


def test_cycle_finder_finds_a_cycle() -> None:
    """The checker itself finds a planted cycle and nothing in a graph without one."""
    # a -> b -> c -> a is one cycle; d hangs off it.
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}, "e": set()}
    assert _cycles(graph) == [["a", "b", "c"]]
    assert _cycles({"a": {"b"}, "b": set()}) == []


def test_import_targets_resolve_relative_imports() -> None:
    """Relative imports resolve to the module they load, submodules included."""
    known = {"routerisk", "routerisk.matching", "routerisk.matching.index", "routerisk.routes"}
    stmt = ast.parse("from ..routes import PlannedRoute").body[0]
    assert _targets("routerisk.matching.join", False, stmt, known) == {"routerisk.routes"}
    stmt = ast.parse("from . import index").body[0]
    assert _targets("routerisk.matching", True, stmt, known) == {
        "routerisk.matching",
        "routerisk.matching.index",
    }
    stmt = ast.parse("from .index import RoadIndex").body[0]
    assert _targets("routerisk.matching.join", False, stmt, known) == {"routerisk.matching.index"}


def test_load_time_imports_skip_lazy_and_type_checking() -> None:
    """Function-level and ``if TYPE_CHECKING:`` imports are not load-time imports."""
    tree = ast.parse(
        "from . import a\n"
        "if TYPE_CHECKING:\n    from . import b\n"
        "try:\n    from . import c\nexcept ImportError:\n    pass\n"
        "def f():\n    from . import d\n"
    )
    names = [n.names[0].name for n in _load_time_imports(tree)]
    assert names == ["a", "c"]


def test_no_import_cycle_at_load_time() -> None:
    """No cycle among the routerisk modules through the imports run at load time."""
    graph = _graph()
    assert "routerisk.matching.index" in graph  # the walk sees sub-packages
    assert "routerisk.matching.common" in graph["routerisk.matching.index"]
    cycles = _cycles(graph)
    assert not cycles, f"import cycles among modules imported at load time: {cycles}"


# --------------------------------------------------------------------------------------------
# packaging


def test_every_subpackage_is_packaged() -> None:
    """Every directory with an ``__init__.py`` is in pyproject's explicit package list."""
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    listed = set(config["tool"]["setuptools"]["packages"])
    found = {_module_name(p.parent) for p in PACKAGE.rglob("__init__.py")}
    missing = sorted(found - listed)
    assert not missing, f"sub-packages missing from [tool.setuptools] packages: {missing}"
