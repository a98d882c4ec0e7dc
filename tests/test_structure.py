"""Import structure of solver/ and service/, read from the source with ast (nothing is imported).

The rules (DEVELOPERS.md, Layout):

* ``solver/physics/`` is the floor: its modules import ``solver.model``, ``solver.physics.*`` and
  third-party or standard-library modules, nothing else of ours;
* ``service/`` reaches the solver only through the top-level package, and only for the names in
  ``solver.__all__``;
* the physics package has no import cycle.

Every import statement counts wherever it stands: at module level, inside a function, under
``if TYPE_CHECKING:``.  A package's ``__init__`` counts as a dependency only when a name that is
not a submodule is taken from it (Python runs parent packages first; that is not a dependency of
the kind these rules are about).

:func:`import_graph` and :func:`cycles` work on any package directory: a whole-solver check is
``cycles(import_graph(SOLVER)) == []``.
"""

from __future__ import annotations

import ast
import graphlib
import itertools
from collections.abc import Collection, Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SOLVER = ROOT / "solver"
PHYSICS = SOLVER / "physics"
SERVICE = ROOT / "service"
FIRST_PARTY = ("solver", "service")
PHYSICS_MAY_IMPORT = ("solver.model", "solver.physics")
PACKING = SOLVER / "packing"
PACKING_MAY_IMPORT = ("solver.model", "solver.physics", "solver.packing")


@dataclass(frozen=True)
class ImportRef:
    """One import statement's source: ``import target`` (no names) or ``from target import …``."""

    importer: str
    target: str
    names: tuple[str, ...]
    line: int

    def __str__(self) -> str:
        if self.names:
            return f"{self.importer}:{self.line}: from {self.target} import {', '.join(self.names)}"
        return f"{self.importer}:{self.line}: import {self.target}"


def within(name: str, package: str) -> bool:
    """Whether the dotted ``name`` is ``package`` or lies below it."""
    return name == package or name.startswith(package + ".")


def module_name(path: Path) -> str:
    """Dotted name of the module at ``path``, from the enclosing directories with __init__.py."""
    parts = [] if path.name == "__init__.py" else [path.stem]
    directory = path.parent
    while (directory / "__init__.py").is_file():
        parts.insert(0, directory.name)
        directory = directory.parent
    return ".".join(parts)


def python_files(root: Path) -> list[Path]:
    """Every module file under the package directory ``root``."""
    return sorted(root.rglob("*.py"))


def module_imports(path: Path) -> Iterator[ImportRef]:
    """Every import statement in the file at ``path``, relative ones made absolute."""
    importer = module_name(path)
    package = importer if path.name == "__init__.py" else importer.rpartition(".")[0]
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), filename=str(path))):
        if isinstance(node, ast.Import):
            for alias in node.names:
                yield ImportRef(importer, alias.name, (), node.lineno)
        elif isinstance(node, ast.ImportFrom):
            names = tuple(alias.name for alias in node.names)
            yield ImportRef(importer, _absolute(node, package), names, node.lineno)


def _absolute(node: ast.ImportFrom, package: str) -> str:
    if node.level == 0:
        return node.module or ""
    parts = package.split(".")
    if node.level > len(parts):
        raise ValueError(f"{node.level=} climbs above the top package of {package!r}")
    base = parts[: len(parts) - node.level + 1]
    return ".".join([*base, node.module] if node.module else base)


def dependencies(ref: ImportRef, modules: Collection[str]) -> set[str]:
    """Dotted names ``ref`` depends on: for ``from target import n``, ``target.n`` when that is
    one of ``modules`` (a submodule), else ``target``; for ``import target``, ``target``."""
    if not ref.names:
        return {ref.target}
    return {
        f"{ref.target}.{n}" if f"{ref.target}.{n}" in modules else ref.target for n in ref.names
    }


def import_graph(root: Path) -> dict[str, set[str]]:
    """Module → the modules under ``root`` it imports (by any statement, anywhere in the file).

    ``root`` is a package directory; names are full dotted names (``solver.physics.emission``).
    Imports of anything outside ``root`` are left out, and so is a module importing itself.
    """
    files = python_files(root)
    modules = {module_name(path) for path in files}
    graph: dict[str, set[str]] = {}
    for path in files:
        name = module_name(path)
        targets = {d for ref in module_imports(path) for d in dependencies(ref, modules)}
        graph[name] = (targets & modules) - {name}
    return graph


def cycles(graph: Mapping[str, Collection[str]]) -> list[list[str]]:
    """Import cycles of ``graph``, each as ``[a, b, …]``: a imports b, …, the last imports a.

    The list is empty exactly when the graph is acyclic.  graphlib reports one cycle at a time;
    each cycle is turned to start at its smallest name, its first edge is dropped and the search
    repeated.  Every cycle listed is a real one and dropping the first edge of each leaves the
    graph acyclic, but cycles through an edge already dropped are not listed again.
    """
    remaining = {node: set(targets) for node, targets in graph.items()}
    found: list[list[str]] = []
    while True:
        # graphlib takes node → predecessors: an imported module is sorted before its importer.
        order = {node: sorted(remaining[node]) for node in sorted(remaining)}
        try:
            graphlib.TopologicalSorter(order).prepare()
        except graphlib.CycleError as exc:
            # [x0, x1, …, x0], each an immediate predecessor of the next: x1 imports x0.
            cycle = list(reversed(exc.args[1][:-1]))
        else:
            return found
        start = cycle.index(min(cycle))
        cycle = cycle[start:] + cycle[:start]
        first, second = cycle[0], cycle[1 % len(cycle)]
        if second not in remaining[first]:  # each round must drop an edge, or it never ends
            raise AssertionError(f"graphlib reported {cycle}, but {first} → {second} is no edge")
        remaining[first].remove(second)
        found.append(cycle)


def _public_names() -> set[str]:
    """``solver.__all__``, read from solver/__init__.py."""
    tree = ast.parse((SOLVER / "__init__.py").read_text(encoding="utf-8"))
    for node in tree.body:
        if isinstance(node, ast.Assign) and any(
            isinstance(t, ast.Name) and t.id == "__all__" for t in node.targets
        ):
            return set(ast.literal_eval(node.value))
    raise AssertionError("solver/__init__.py has no __all__")


# --------------------------------------------------------------------------- the helpers


def _write(root: Path, files: Mapping[str, str]) -> None:
    for relative, text in files.items():
        path = root / relative
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")


def test_import_graph_reads_every_kind_of_import(tmp_path: Path) -> None:
    # Expected edges derived by hand from the files written here.
    _write(
        tmp_path,
        {
            "pkg/__init__.py": "from pkg.a import run\n",
            "pkg/a.py": "import os\nfrom pkg import b\nfrom . import c\n\ndef run(): ...\n",
            "pkg/b.py": "import pkg.c\n\n\ndef f():\n    from .sub.d import x\n",
            "pkg/c.py": "import numpy\nfrom pkg import VERSION\n",
            "pkg/sub/__init__.py": "",
            "pkg/sub/d.py": (
                "from typing import TYPE_CHECKING\n"
                "if TYPE_CHECKING:\n"
                "    from ..a import run\n"
                "from . import missing\n"
                "from .d import x\n"
            ),
        },
    )
    assert import_graph(tmp_path / "pkg") == {
        "pkg": {"pkg.a"},
        "pkg.a": {"pkg.b", "pkg.c"},
        "pkg.b": {"pkg.c", "pkg.sub.d"},
        "pkg.c": {"pkg"},
        "pkg.sub": set(),
        "pkg.sub.d": {"pkg.a", "pkg.sub"},
    }
    assert import_graph(tmp_path / "pkg" / "sub") == {"pkg.sub": set(), "pkg.sub.d": {"pkg.sub"}}


def test_cycles_of_small_graphs() -> None:
    assert cycles({"a": {"b", "c"}, "b": {"d"}, "c": {"d"}, "d": set()}) == []
    ring = {"tail": {"b"}, "b": {"c"}, "c": {"a"}, "a": {"b"}}
    assert cycles(ring) == [["a", "b", "c"]]
    pairs = {"p": {"q"}, "q": {"p"}, "x": {"y"}, "y": {"x", "p"}}
    assert sorted(cycles(pairs)) == [["p", "q"], ["x", "y"]]
    assert cycles({"self": {"self"}}) == [["self"]]


def test_cycles_are_real_and_cover_every_loop() -> None:
    tangle = {"a": {"b", "c"}, "b": {"c", "a"}, "c": {"a", "d"}, "d": {"b"}, "e": {"a"}}
    found = cycles(tangle)
    assert found
    for cycle in found:  # each listed cycle follows edges of the graph and closes
        assert all(b in tangle[a] for a, b in itertools.pairwise([*cycle, cycle[0]]))
    pruned = {node: set(targets) for node, targets in tangle.items()}
    for cycle in found:
        pruned[cycle[0]].discard(cycle[1 % len(cycle)])
    assert cycles(pruned) == []


# --------------------------------------------------------------------------- the rules


def _above_the_floor(root: Path, allowed: tuple[str, ...]) -> tuple[list[str], list[str]]:
    """First-party modules the package at ``root`` reaches, and those outside ``allowed``."""
    modules = {module_name(path) for path in python_files(SOLVER)}
    refs = [ref for path in python_files(root) for ref in module_imports(path)]
    ours = [
        (ref, dep)
        for ref in refs
        for dep in dependencies(ref, modules)
        if any(within(dep, top) for top in FIRST_PARTY)
    ]
    bad = [
        f"{ref} (reaches {dep})"
        for ref, dep in ours
        if not any(within(dep, floor) for floor in allowed)
    ]
    return [dep for _, dep in ours], bad


def test_physics_imports_only_the_model_and_itself() -> None:
    reached, bad = _above_the_floor(PHYSICS, PHYSICS_MAY_IMPORT)
    assert "solver.model" in reached, "scan found no import of solver.model"
    assert bad == [], "solver/physics/ imports above the floor:\n" + "\n".join(bad)


def test_packing_imports_only_the_model_physics_and_itself() -> None:
    """The second floor: solver/packing/ stands on the model and the physics only (the
    planning layer, verify included, reaches it through arguments)."""
    reached, bad = _above_the_floor(PACKING, PACKING_MAY_IMPORT)
    assert any(within(dep, "solver.physics") for dep in reached), "no physics import found"
    assert bad == [], "solver/packing/ imports above the floor:\n" + "\n".join(bad)


def test_solver_has_no_import_cycle() -> None:
    graph = import_graph(SOLVER)
    assert "solver.packing" in graph.get("solver.planner", set())
    assert cycles(graph) == []


def test_service_uses_only_the_public_solver_names() -> None:
    public = _public_names()
    refs = [
        ref
        for path in python_files(SERVICE)
        for ref in module_imports(path)
        if within(ref.target, "solver")
    ]
    assert refs, "scan found no import of solver in service/"
    bad = [str(ref) for ref in refs if ref.target != "solver" or not set(ref.names) <= public]
    assert bad == [], "service/ imports solver internals:\n" + "\n".join(bad)


def test_physics_package_has_no_import_cycle() -> None:
    graph = import_graph(PHYSICS)
    assert "solver.physics.pulses" in graph.get("solver.physics.emission", set())
    assert cycles(graph) == []


def test_physics_modules_are_not_also_at_their_old_paths() -> None:
    moved = [path.name for path in python_files(PHYSICS) if path.name != "__init__.py"]
    left = [name for name in moved if (SOLVER / name).exists()]
    assert left == [], f"modules of solver/physics/ also in solver/: {left}"
