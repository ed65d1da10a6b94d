"""No import cycle between the modules of ``reporter``.

Every module under ``reporter/`` is parsed with ``ast``; every ``import`` in it counts, at
module level and inside functions (a lazy import is still a dependency, and a cycle through
one only waits for the first call to bite). ``from package import name`` is a dependency on
``package.name`` when that is a module, else on ``package``. Importing a submodule is not
counted as a dependency on its package's ``__init__`` (a package that re-exports its
submodules is not a cycle). Imports under ``if TYPE_CHECKING:`` are for annotations only,
never run, and are not counted.
"""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parent.parent / "reporter"

# cycles that remain, each as the sorted names of its modules (a strongly connected
# component); a new one fails the test, and so does fixing one without removing it here
KNOWN_CYCLES: set[tuple[str, ...]] = set()


def module_names() -> dict[str, Path]:
    out = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts.pop()
        out[".".join(parts)] = path
    return out


def imports_of(name: str, path: Path, known: set[str]) -> set[str]:
    """The ``reporter`` modules that module ``name`` imports, anywhere in its source."""
    is_package = path.name == "__init__.py"
    out = set()
    for node in _runtime_nodes(ast.parse(path.read_text(encoding="utf-8"), filename=str(path))):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:                     # relative: from the module's own package
                pkg = name.split(".") if is_package else name.split(".")[:-1]
                pkg = pkg[:len(pkg) - (node.level - 1)]
                base = ".".join([*pkg, base] if base else pkg)
            targets = [f"{base}.{a.name}" if f"{base}.{a.name}" in known else base
                       for a in node.names]
        else:
            continue
        out.update(t for t in targets if t in known and t != name)
    return out


def _runtime_nodes(tree: ast.AST):
    """Every node of ``tree`` but those under ``if TYPE_CHECKING:`` (or
    ``typing.TYPE_CHECKING``)."""
    todo = [tree]
    while todo:
        node = todo.pop()
        yield node
        for child in ast.iter_child_nodes(node):
            if isinstance(child, ast.If) and _is_type_checking(child.test):
                todo.extend(child.orelse)
                continue
            todo.append(child)


def _is_type_checking(test: ast.expr) -> bool:
    return ((isinstance(test, ast.Name) and test.id == "TYPE_CHECKING")
            or (isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"))


def import_graph() -> dict[str, set[str]]:
    names = module_names()
    known = set(names)
    return {n: imports_of(n, p, known) for n, p in names.items()}


def cycles(graph: dict[str, set[str]]) -> set[tuple[str, ...]]:
    """The strongly connected components of more than one module (Tarjan's algorithm,
    iterative), each as a sorted tuple of names."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found = set()
    counter = 0
    for root in sorted(graph):
        if root in index:
            continue
        work = [(root, iter(sorted(graph[root])))]
        index[root] = low[root] = counter
        counter += 1
        stack.append(root)
        on_stack.add(root)
        while work:
            node, children = work[-1]
            child = next(children, None)
            if child is not None:
                if child not in index:
                    index[child] = low[child] = counter
                    counter += 1
                    stack.append(child)
                    on_stack.add(child)
                    work.append((child, iter(sorted(graph[child]))))
                elif child in on_stack:
                    low[node] = min(low[node], index[child])
                continue
            work.pop()
            if work:
                parent = work[-1][0]
                low[parent] = min(low[parent], low[node])
            if low[node] == index[node]:
                component = []
                while True:
                    top = stack.pop()
                    on_stack.discard(top)
                    component.append(top)
                    if top == node:
                        break
                if len(component) > 1:
                    found.add(tuple(sorted(component)))
    return found


def a_path(graph: dict[str, set[str]], component: tuple[str, ...]) -> list[str]:
    """One cycle through the first module of ``component``, for the message."""
    start = component[0]
    inside = set(component)
    seen = {start}
    paths = [[start]]
    while paths:
        path = paths.pop(0)
        for nxt in sorted(graph[path[-1]] & inside):
            if nxt == start:
                return [*path, start]
            if nxt not in seen:
                seen.add(nxt)
                paths.append([*path, nxt])
    return list(component)


def test_the_graph_sees_lazy_and_relative_imports():
    """The parser is checked on modules whose imports are known: ``build`` imports the
    pipeline at module level, ``cli`` imports ``build`` inside a function only."""
    graph = import_graph()
    assert "reporter.pipeline.assemble" in graph["reporter.build"]
    assert "reporter.build" in graph["reporter.cli"]          # inside build(), lazily
    assert "reporter.config.load" in graph["reporter.config"]
    # a type-only import is no dependency: summaries names PackResults for annotations only
    assert "reporter.analytics.pack" not in graph["reporter.analytics.summaries"]
    # and a made-up cycle is found, with a path through it
    toy = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}
    assert cycles(toy) == {("a", "b", "c")}
    assert a_path(toy, ("a", "b", "c")) == ["a", "b", "c", "a"]


def test_no_import_cycle_between_reporter_modules():
    graph = import_graph()
    found = cycles(graph)
    new = found - KNOWN_CYCLES
    gone = KNOWN_CYCLES - found
    assert not new, "import cycles: " + "; ".join(" -> ".join(a_path(graph, c))
                                                  for c in sorted(new))
    assert not gone, f"these cycles are gone; remove them from KNOWN_CYCLES: {sorted(gone)}"


def test_build_and_fund_code_do_not_import_each_other():
    """The pipeline never reaches back to ``reporter.build`` (which renders and writes)."""
    graph = import_graph()
    for name, deps in graph.items():
        if name.startswith("reporter.pipeline"):
            assert "reporter.build" not in deps, name
