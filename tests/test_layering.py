"""The package's shape, checked from its source: imports point down the flow, never round.

Walks ``pipeline/`` with ``ast`` (nothing is imported or run) and builds the graph of
which module imports which, counting every import: at the top of a module, inside a
function, under ``TYPE_CHECKING``. Three rules, written down in DEVELOPERS.md:

1. No circles: the graph has no cycle, of any length, inside a folder or across folders.
2. Downward only: each module belongs to a layer (its folder under ``pipeline/``); it may
   import its own folder and the layers below it, never one above.
3. Private stays private: no ``from X import _name`` of a name defined in another module.
   (A compiled extension module, ``pipeline/read/stdf/_scan``, is named with an
   underscore by convention and is loaded only by the one Python module that wraps it.)

Each rule is also run against a small planted tree, so a checker that found nothing
because it looked at nothing would fail here.
"""

from __future__ import annotations

import ast
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent / "pipeline"

# Bottom to top. A module may import its own layer's modules and anything below it.
# The key is the first part of the module's path under pipeline/ ("" = pipeline/*.py at
# the top of the package, which holds only the small shared pieces named here).
LAYERS: list[tuple[str, ...]] = [
    ("", "errors", "lean", "render"),          # shared: errors, start-up, text tables
    ("read",),                                  # bytes of a log -> columns
    ("store",),                                 # Parquet store, catalog, derivation at commit
    ("attribute",),                             # where the seconds go
    ("plan",),                                  # block map, concurrent schedule, projection
    ("verify",),                                # serial vs concurrent correlation lots
    ("report",),                                # report.html, charts, summary
    ("jobs",),                                  # ingest, nightly, demo, upgrade, cluster
    ("api",),                                   # the Python entry points (pipeline.Store)
    ("cli", "__main__"),                        # tandem ...
]
# Compiled extension modules and the one module allowed to load each.
EXTENSIONS = {"pipeline.read.stdf._scan": "pipeline.read.stdf.compiled"}


@dataclass(frozen=True)
class Edge:
    source: str           # importing module, dotted
    target: str           # imported module, dotted
    name: str | None      # the name taken from it (None: the module itself)
    line: int

    def __str__(self) -> str:
        what = f"{self.target}:{self.name}" if self.name else self.target
        return f"{self.source} (line {self.line}) -> {what}"


def modules(root: Path) -> dict[str, Path]:
    """Dotted module name -> source file, for every .py under ``root``."""
    out: dict[str, Path] = {}
    for p in sorted(root.rglob("*.py")):
        parts = list(p.relative_to(root.parent).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = p
    return out


def _absolute(module: str, is_package: bool, node: ast.ImportFrom) -> str:
    if not node.level:
        return node.module or ""
    base = module.split(".")
    if not is_package:
        base = base[:-1]
    if node.level > 1:
        base = base[:len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def edges(root: Path) -> Iterator[Edge]:
    """Every import of one of the package's own modules, by every module under root."""
    mods = modules(root)
    top = root.name
    for module, path in mods.items():
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        is_package = path.name == "__init__.py"
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                for alias in node.names:
                    if alias.name == top or alias.name.startswith(top + "."):
                        yield Edge(module, alias.name, None, node.lineno)
            elif isinstance(node, ast.ImportFrom):
                target = _absolute(module, is_package, node)
                if target != top and not target.startswith(top + "."):
                    continue
                for alias in node.names:
                    sub = f"{target}.{alias.name}"
                    if sub in mods or sub in EXTENSIONS:
                        yield Edge(module, sub, None, node.lineno)
                    else:
                        yield Edge(module, target, alias.name, node.lineno)


def layer_of(module: str) -> int:
    parts = module.split(".")[1:]
    key = parts[0] if len(parts) > 1 else ("" if not parts else parts[0])
    if len(parts) == 1 and not any(parts[0] in layer for layer in LAYERS):
        key = parts[0]  # a lone module at the top: must be named in LAYERS
    for i, layer in enumerate(LAYERS):
        if key in layer:
            return i
    raise AssertionError(f"{module}: in no layer; add its folder to LAYERS and to the "
                         f"layering picture in DEVELOPERS.md")


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """The strongly connected components with more than one module (Tarjan), or a module
    importing itself: each is an import circle."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on: set[str] = set()
    found: list[list[str]] = []
    counter = 0

    def visit(v: str) -> None:
        nonlocal counter
        index[v] = low[v] = counter
        counter += 1
        stack.append(v)
        on.add(v)
        for w in sorted(graph.get(v, ())):
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
                found.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return found


def module_graph(es: list[Edge], mods: dict[str, Path]) -> dict[str, set[str]]:
    """Module -> modules it imports. Importing a name from a package's __init__ depends on
    that __init__ only, as Python runs it."""
    graph: dict[str, set[str]] = {m: set() for m in mods}
    for e in es:
        if e.target in mods and e.target != e.source:
            graph[e.source].add(e.target)
    return graph


def upward(es: list[Edge]) -> list[str]:
    bad = []
    for e in es:
        if e.target in EXTENSIONS:
            continue
        if layer_of(e.target) > layer_of(e.source):
            bad.append(f"{e}: layer {LAYERS[layer_of(e.source)][0] or 'pipeline/*.py'} "
                       f"imports layer {LAYERS[layer_of(e.target)][0]}")
    return bad


def private(es: list[Edge]) -> list[str]:
    bad = []
    for e in es:
        if e.target in EXTENSIONS:
            if EXTENSIONS[e.target] != e.source:
                bad.append(f"{e}: the extension is loaded only by {EXTENSIONS[e.target]}")
            continue
        if e.name and e.name.startswith("_") and not e.name.startswith("__"):
            bad.append(f"{e}: a private name taken from another module")
        elif e.name is None and e.target.rsplit(".", 1)[-1].startswith("_") \
                and not e.target.endswith("__main__"):
            bad.append(f"{e}: a private module imported")
    return bad


# ---------------------------------------------------------------- the package itself
@pytest.fixture(scope="module")
def package() -> tuple[list[Edge], dict[str, Path]]:
    mods = modules(ROOT)
    return list(edges(ROOT)), mods


def test_the_walk_sees_the_package(package: tuple[list[Edge], dict[str, Path]]) -> None:
    es, mods = package
    assert len(mods) > 50 and len(es) > 200
    # an import we know is there, at the top and inside a function
    assert any(e.source == "pipeline.cli" and e.target.startswith("pipeline.cli.") for e in es)


def test_no_import_circles(package: tuple[list[Edge], dict[str, Path]]) -> None:
    es, mods = package
    found = cycles(module_graph(es, mods))
    assert not found, "import circles:\n" + "\n".join(" -> ".join(c) for c in found)


def test_imports_point_down_the_flow(package: tuple[list[Edge], dict[str, Path]]) -> None:
    es, _ = package
    bad = upward(es)
    assert not bad, "upward imports:\n" + "\n".join(bad)


def test_no_private_name_crosses_a_module(package: tuple[list[Edge], dict[str, Path]]) -> None:
    es, _ = package
    bad = private(es)
    assert not bad, "private names imported:\n" + "\n".join(bad)


def test_every_folder_says_what_it_owns_and_may_import() -> None:
    for init in sorted(ROOT.rglob("__init__.py")):
        doc = ast.get_docstring(ast.parse(init.read_text(encoding="utf-8")))
        assert doc, f"{init}: no docstring"
        if init.parent.parent == ROOT:      # a stage folder
            assert "import" in doc.lower(), f"{init}: the docstring says nothing of imports"


# ---------------------------------------------------------------- the checker itself
def _plant(root: Path, files: dict[str, str]) -> Path:
    pkg = root / "pipeline"
    for rel, text in files.items():
        p = pkg / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(text)
    return pkg


def test_a_planted_circle_is_found(tmp_path: Path) -> None:
    pkg = _plant(tmp_path, {
        "__init__.py": "", "store/__init__.py": "", "plan/__init__.py": "",
        "store/a.py": "from . import b\n",
        "store/b.py": "def f():\n    from .c import g\n",       # inside a function
        "store/c.py": "from pipeline.store.a import x\n",
        "plan/ok.py": "from ..store import a\n",
    })
    es = list(edges(pkg))
    found = cycles(module_graph(es, modules(pkg)))
    assert found == [["pipeline.store.a", "pipeline.store.b", "pipeline.store.c"]]


def test_a_planted_upward_import_is_found(tmp_path: Path) -> None:
    pkg = _plant(tmp_path, {
        "__init__.py": "", "errors.py": "", "store/__init__.py": "", "cli/__init__.py": "",
        "store/core.py": "from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n"
                         "    from ..cli import main\n",
        "cli/x.py": "from ..store.core import Store\nfrom ..errors import E\n",
    })
    bad = upward(list(edges(pkg)))
    assert len(bad) == 1 and bad[0].startswith("pipeline.store.core (line 3) -> pipeline.cli")


def test_a_planted_private_import_is_found(tmp_path: Path) -> None:
    pkg = _plant(tmp_path, {
        "__init__.py": "", "plan/__init__.py": "",
        "plan/model.py": "from .sgs import _order, order\nfrom . import sgs\n",
        "plan/sgs.py": "def _order(): ...\ndef order(): ...\n",
    })
    bad = private(list(edges(pkg)))
    assert len(bad) == 1 and "_order" in bad[0]
