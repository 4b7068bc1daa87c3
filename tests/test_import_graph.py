"""No import circles between bodysweep's modules (read from the source with ``ast``, lazy imports in
functions included: a circle through a function-level import is still a circle).

An edge ``a -> b`` is an import in module ``a`` of module ``b`` (``from .x import name`` imports ``x``;
``from . import x`` imports submodule ``x`` if there is one). Importing a submodule also runs its
packages' ``__init__`` files; those implicit edges are left out, as they are whenever one thinks of a
package's ``__init__`` as a table of contents. Cycle search: Tarjan's strongly connected components
(Tarjan 1972, SIAM J. Comput. 1(2)), every component of more than one module, or a module importing
itself, is a circle.
"""
from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
#: import name of each source folder (setup.py's mapping)
FOLDERS = {"bodysweep": ROOT / "api", "bodysweep.geometry": ROOT / "geometry", "bodysweep.workflow": ROOT / "workflow"}


def modules_of(folders: dict[str, Path]) -> dict[str, tuple[Path, bool]]:
    """``{module name: (file, is_package)}`` of every importable ``.py`` file below the folders."""
    out = {}
    for name, folder in folders.items():
        for p in sorted(folder.rglob("*.py")):
            rel = p.relative_to(folder).with_suffix("").parts
            if not all((folder.joinpath(*rel[:k]) / "__init__.py").exists() for k in range(1, len(rel))):
                continue  # a script in a folder that is not a package
            is_pkg = rel[-1] == "__init__"
            out[".".join([name, *(rel[:-1] if is_pkg else rel)])] = (p, is_pkg)
    return out


def import_graph(folders: dict[str, Path]) -> dict[str, set[str]]:
    """``{module: modules of the project it imports}``."""
    mods = modules_of(folders)
    graph: dict[str, set[str]] = {}
    for mod, (path, is_pkg) in mods.items():
        package = mod if is_pkg else mod.rpartition(".")[0]
        edges: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), str(path))):
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                if node.level:
                    base = package.split(".")
                    base = base[:len(base) - (node.level - 1)]
                    target = ".".join(base + ([node.module] if node.module else []))
                else:
                    target = node.module or ""
                targets = [f"{target}.{a.name}" if f"{target}.{a.name}" in mods else target for a in node.names]
            else:
                continue
            for t in targets:
                while t and t not in mods:  # `import bodysweep.workflow.x` when x is not a module: its package
                    t = t.rpartition(".")[0]
                if t:
                    edges.add(t)
        graph[mod] = edges
    return graph


def circles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module, and modules importing themselves."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on: set[str] = set()
    out: list[list[str]] = []

    def visit(v: str) -> None:  # recursion depth is bounded by the number of modules (about 100)
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in graph.get(v, ()):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1 or v in graph.get(v, ()):
                out.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def test_the_project_has_no_import_circle():
    graph = import_graph(FOLDERS)
    assert len(graph) > 50 and "bodysweep.workflow.cli" in graph
    found = circles(graph)
    assert not found, "import circles: " + "; ".join(" <-> ".join(c) for c in found)


def test_a_circle_is_found(tmp_path):
    # two modules importing each other (one of them lazily, in a function), next to an innocent third
    pkg = tmp_path / "pkg"
    (pkg / "sub").mkdir(parents=True)
    (pkg / "__init__.py").write_text("")
    (pkg / "sub" / "__init__.py").write_text("")
    (pkg / "a.py").write_text("from .sub import b\n")
    (pkg / "sub" / "b.py").write_text("def f():\n    from ..a import g\n")
    (pkg / "c.py").write_text("import demo.a\nfrom . import a\n")
    graph = import_graph({"demo": pkg})
    assert graph["demo.a"] == {"demo.sub.b"} and graph["demo.sub.b"] == {"demo.a"}
    assert graph["demo.c"] == {"demo.a"}
    assert circles(graph) == [["demo.a", "demo.sub.b"]]
    (pkg / "sub" / "b.py").write_text("import os\n")
    assert circles(import_graph({"demo": pkg})) == []


def test_production_modules_do_not_import_the_references():
    # DEVELOPERS.md, "Where things live": workflow/reference/ holds what the validation suite compares
    # against; the pipeline must not depend on it
    graph = import_graph(FOLDERS)
    ref = "bodysweep.workflow.reference"
    users = {m: sorted(t for t in ts if t.startswith(ref)) for m, ts in graph.items() if not m.startswith(ref)}
    assert not {m: t for m, t in users.items() if t}


def _guarded_project_imports(folders: dict[str, Path]) -> list[str]:
    """``file:line`` of every ``try: <import of a project module> except ImportError`` (a sibling fallback)."""
    out = []
    for mod, (path, _) in modules_of(folders).items():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), str(path))):
            if not isinstance(node, ast.Try):
                continue
            # handlers naming the import errors (a step's catch-all turning any failure into a failed
            # status is error handling, not a fallback)
            caught = {n.id for h in node.handlers if h.type is not None for n in ast.walk(h.type)
                      if isinstance(n, ast.Name)}
            if not caught & {"ImportError", "ModuleNotFoundError"}:
                continue
            for sub in (n for stmt in node.body for n in ast.walk(stmt)):
                if isinstance(sub, ast.ImportFrom) and (sub.level or (sub.module or "").startswith("bodysweep")) \
                        or isinstance(sub, ast.Import) and any(a.name.startswith("bodysweep") for a in sub.names):
                    out.append(f"{path.relative_to(ROOT) if path.is_relative_to(ROOT) else path}:{sub.lineno}")
    return out


def test_no_fallback_around_an_import_of_a_sibling():
    # a module imports its siblings directly (DEVELOPERS.md): an import failure must surface, never
    # silently change behaviour (a fallback in the identity code once could have changed case ids)
    found = _guarded_project_imports(FOLDERS)
    assert not found, f"imports of project modules inside try/except ImportError: {found}"


def test_a_fallback_is_found(tmp_path):
    pkg = tmp_path / "pkg"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "a.py").write_text("try:\n    from .b import x\nexcept ImportError:\n    x = 1\n")
    (pkg / "b.py").write_text("try:\n    import numpy\nexcept ImportError:\n    numpy = None\n")
    assert [f.rsplit("/", 1)[-1] for f in _guarded_project_imports({"demo": pkg})] == ["a.py:2"]
