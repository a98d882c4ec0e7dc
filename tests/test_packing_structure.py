"""The shape of ``solver/packing/``: short functions, and imports that only point downward.

Each rule is a function over a directory of modules, run on the package itself and on small
modules written here that break it, so that neither check can pass by finding nothing.
"""

from __future__ import annotations

import ast
import graphlib
import textwrap
from pathlib import Path

PACKAGE_DIR = Path(__file__).resolve().parents[1] / "solver" / "packing"
PACKAGE = "solver.packing"
MAX_FUNCTION_LINES = 60


def function_lengths(directory: Path) -> dict[str, int]:
    """Lines of every function and method in ``directory/*.py``, from its first decorator (or
    ``def``) to its last line, docstring and comments included; keyed ``file:qualified.name``."""
    lengths: dict[str, int] = {}

    def visit(node: ast.AST, prefix: str, where: str) -> None:
        for child in ast.iter_child_nodes(node):
            name = prefix
            if isinstance(child, ast.FunctionDef | ast.AsyncFunctionDef | ast.ClassDef):
                name = f"{prefix}{child.name}."
            if isinstance(child, ast.FunctionDef | ast.AsyncFunctionDef):
                first = min([child.lineno, *(d.lineno for d in child.decorator_list)])
                assert child.end_lineno is not None
                lengths[f"{where}:{name[:-1]}"] = child.end_lineno - first + 1
            visit(child, name, where)

    for path in sorted(directory.glob("*.py")):
        visit(ast.parse(path.read_text(encoding="utf-8")), "", path.name)
    return lengths


def internal_imports(directory: Path, package: str) -> dict[str, set[str]]:
    """For each module of the package in ``directory`` (``package`` is its own ``__init__``),
    the package's modules it imports anywhere in its file: at module level, inside functions
    and under ``TYPE_CHECKING`` alike."""
    modules = {
        package if p.stem == "__init__" else f"{package}.{p.stem}": p
        for p in directory.glob("*.py")
    }
    graph: dict[str, set[str]] = {}
    for name, path in modules.items():
        here = name if path.stem == "__init__" else name.rpartition(".")[0]
        targets: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                targets.update(alias.name for alias in node.names)
            elif isinstance(node, ast.ImportFrom):
                base = _absolute(node, here)
                targets.add(base)
                targets.update(f"{base}.{alias.name}" for alias in node.names)
        graph[name] = {t for t in targets if t in modules and t != name}
    return graph


def _absolute(node: ast.ImportFrom, here: str) -> str:
    """The module a ``from … import`` reads, made absolute from the importing package."""
    if node.level == 0:
        return node.module or ""
    parts = here.split(".")
    base = ".".join(parts[: len(parts) - node.level + 1])
    return f"{base}.{node.module}" if node.module else base


def import_cycle(graph: dict[str, set[str]]) -> list[str] | None:
    """One cycle of the import graph, or None when its modules can be ordered."""
    try:
        graphlib.TopologicalSorter(graph).prepare()
    except graphlib.CycleError as exc:
        return list(exc.args[1])
    return None


def _write(directory: Path, files: dict[str, str]) -> Path:
    directory.mkdir()
    for name, text in files.items():
        (directory / name).write_text(textwrap.dedent(text), encoding="utf-8")
    return directory


# ---------------------------------------------------------------- the package itself


def test_no_function_in_the_package_is_longer_than_the_limit() -> None:
    lengths = function_lengths(PACKAGE_DIR)
    assert "driver.py:solve_packing" in lengths  # the walk really reads the package
    assert "driver.py:_Progress.on_solution_callback" in lengths  # and its methods
    too_long = {name: n for name, n in lengths.items() if n > MAX_FUNCTION_LINES}
    assert too_long == {}


def test_the_package_imports_only_downward() -> None:
    graph = internal_imports(PACKAGE_DIR, PACKAGE)
    # The graph is read, not empty: the driver uses the model, the package face the driver.
    assert f"{PACKAGE}.model" in graph[f"{PACKAGE}.driver"]
    assert f"{PACKAGE}.driver" in graph[PACKAGE]
    assert import_cycle(graph) is None


# ---------------------------------------------------------------- the checks can fail


def _module_with_a_function_of(lines: int) -> str:
    """A module whose decorated function ``long`` is exactly ``lines`` lines long, and a class
    with a method holding a nested function."""
    body = [f"    x{i} = {i}" for i in range(lines - 3)]
    long = ["@functools.cache", "def long() -> None:", '    """A docstring."""', *body]
    holder = ["class Holder:", "    def short(self) -> None:", "        def inner() -> None:"]
    return "\n".join(["import functools", "", "", *long, "", "", *holder, "            pass", ""])


def test_the_length_check_counts_decorators_docstrings_and_methods(tmp_path: Path) -> None:
    source = _module_with_a_function_of(MAX_FUNCTION_LINES)
    lengths = function_lengths(_write(tmp_path / "pkg", {"mod.py": source}))
    assert lengths == {
        "mod.py:long": MAX_FUNCTION_LINES,
        "mod.py:Holder.short": 3,
        "mod.py:Holder.short.inner": 2,
    }
    source = _module_with_a_function_of(MAX_FUNCTION_LINES + 1)
    lengths = function_lengths(_write(tmp_path / "pkg2", {"mod.py": source}))
    assert lengths["mod.py:long"] == MAX_FUNCTION_LINES + 1


def test_the_cycle_check_finds_a_loop_broken_by_a_function_level_import(tmp_path: Path) -> None:
    files = {
        "__init__.py": "",
        "low.py": """
            def late():
                from pkg.high import top  # the loop the check must still see

                return top
        """,
        "high.py": "from pkg.low import late\n\ntop = 1\n",
    }
    graph = internal_imports(_write(tmp_path / "pkg", files), "pkg")
    assert graph == {"pkg": set(), "pkg.low": {"pkg.high"}, "pkg.high": {"pkg.low"}}
    cycle = import_cycle(graph)
    assert cycle is not None
    assert set(cycle) == {"pkg.low", "pkg.high"}


def test_the_cycle_check_reads_relative_and_type_checking_imports(tmp_path: Path) -> None:
    files = {
        "__init__.py": "from .b import thing\n",
        "a.py": """
            from typing import TYPE_CHECKING

            if TYPE_CHECKING:
                from . import b
        """,
        "b.py": "from .a import nothing\n\nthing = 1\n",
    }
    graph = internal_imports(_write(tmp_path / "pkg", files), "pkg")
    assert graph == {"pkg": {"pkg.b"}, "pkg.a": {"pkg", "pkg.b"}, "pkg.b": {"pkg.a"}}
    assert import_cycle(graph) is not None
    del graph["pkg.a"]
    assert import_cycle(graph) is None
