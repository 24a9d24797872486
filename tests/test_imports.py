"""The package's structure, read from its source with :mod:`ast` (nothing is imported).

Rules (DEVELOPERS.md, "Architecture map"; docs/architecture.md): the import graph has no cycle; no module
imports another module's underscored name, nor an underscored module of another package; the core
(``sources``, ``geometry``, ``extract``, ``features``) imports no ``stages``, ``flows``, ``cli`` or ``report``;
``sources`` imports no ``extract``; ``report`` imports no ``stages``; docstrings cite only files that exist
in the repository.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "src" / "lakefeed"


def _modules() -> dict[str, Path]:
    """Module name -> file, for ``src/lakefeed`` and ``flows/`` (importable as ``lakefeed.flows``)."""
    found: dict[str, Path] = {}
    for base, prefix in ((PACKAGE, ("lakefeed",)), (ROOT / "flows", ("lakefeed", "flows"))):
        for path in sorted(base.rglob("*.py")):
            parts = path.relative_to(base).with_suffix("").parts
            if prefix == ("lakefeed",) and parts[0] == "flows":  # the symlink to flows/
                continue
            if parts[-1] == "__init__":
                parts = parts[:-1]
            found[".".join((*prefix, *parts))] = path
    return found


MODULES = _modules()


def _imports(name: str, path: Path) -> list[tuple[str, str | None]]:
    """(module imported, name taken from it or None) for every import statement, at any depth."""
    is_package = path.name == "__init__.py"
    out: list[tuple[str, str | None]] = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            out += [(alias.name, None) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = name.split(".") if is_package else name.split(".")[:-1]
                base = base[: len(base) - (node.level - 1)]
                module = ".".join([*base, *([node.module] if node.module else [])])
            else:
                module = node.module or ""
            out += [(module, alias.name) for alias in node.names]
    return [(m, n) for m, n in out if m == "lakefeed" or m.startswith("lakefeed.")]


def _target(module: str, taken: str | None) -> str:
    """The module an import points at (``from pkg import submodule`` points at the submodule)."""
    return f"{module}.{taken}" if taken and f"{module}.{taken}" in MODULES else module


GRAPH = {name: {_target(m, n) for m, n in _imports(name, path)} for name, path in MODULES.items()}


def _layer(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else ""


def test_the_scan_sees_the_package() -> None:
    # a check that cannot fail is no check: the scan must find modules of every layer and their imports
    assert {"config", "sources", "geometry", "extract", "features", "store", "stages", "report", "cli", "flows"} <= {
        _layer(m) for m in MODULES
    }
    assert "lakefeed.features.windows" in GRAPH["lakefeed.features.batch"]


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan's algorithm, iterative)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []
    for start in graph:
        if start in index:
            continue
        work = [(start, iter(sorted(graph[start])))]
        index[start] = low[start] = len(index)
        stack.append(start)
        on_stack.add(start)
        while work:
            node, edges = work[-1]
            nxt = next((e for e in edges if e in graph), None)
            if nxt is not None:
                if nxt not in index:
                    index[nxt] = low[nxt] = len(index)
                    stack.append(nxt)
                    on_stack.add(nxt)
                    work.append((nxt, iter(sorted(graph[nxt]))))
                elif nxt in on_stack:
                    low[node] = min(low[node], index[nxt])
                continue
            work.pop()
            if work:
                low[work[-1][0]] = min(low[work[-1][0]], low[node])
            if low[node] == index[node]:
                component = []
                while True:
                    member = stack.pop()
                    on_stack.discard(member)
                    component.append(member)
                    if member == node:
                        break
                if len(component) > 1:
                    found.append(sorted(component))
    return found


def test_cycle_finder_finds_a_cycle() -> None:
    assert _cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]
    assert _cycles({"a": {"b"}, "b": set()}) == []


def test_no_import_cycle() -> None:
    assert _cycles(GRAPH) == []


def _private_imports() -> list[str]:
    bad = []
    for name, path in MODULES.items():
        for module, taken in _imports(name, path):
            target = _target(module, taken)
            if taken and target == module and taken.startswith("_") and not taken.startswith("__"):
                bad.append(f"{name} imports {module}.{taken}")
            parts = target.split(".")
            for i, part in enumerate(parts):
                if part.startswith("_") and not part.startswith("__"):
                    owner = ".".join(parts[:i])  # the package holding the private module
                    if name != owner and not name.startswith(owner + "."):
                        bad.append(f"{name} imports the private module {target}")
                    break
    return sorted(set(bad))


def test_no_private_name_of_another_module_is_imported() -> None:
    assert _private_imports() == []


@pytest.mark.parametrize(
    ("lower", "upper"),
    [
        (("sources", "geometry", "extract", "features"), ("stages", "flows", "cli", "report")),
        (("sources",), ("extract",)),
        (("report",), ("stages",)),
    ],
)
def test_imports_point_one_way(lower: tuple[str, ...], upper: tuple[str, ...]) -> None:
    bad = [f"{m} -> {t}" for m, ts in GRAPH.items() if _layer(m) in lower for t in ts if _layer(t) in upper]
    assert bad == []


#: A cited file: a path under one of the repository's top folders, or a bare file name with its extension.
_CITED = re.compile(
    r"(?<![\w/.-])((?:(?:src|tests|flows|docs|benchmarks|config|sample_geo)/[\w./-]*?)?[\w-]+\.(?:md|py|yaml|yml|toml|txt))\b"
)
#: Design notes cited by name without an extension ("see PITFALLS").
_NOTES = re.compile(r"\b(DESIGN|PITFALLS|REFERENCES|STYLE)\b")


def _docstrings(path: Path) -> list[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    nodes = [tree, *(n for n in ast.walk(tree) if isinstance(n, ast.FunctionDef | ast.AsyncFunctionDef | ast.ClassDef))]
    return [doc for doc in (ast.get_docstring(n) for n in nodes) if doc]


_NAMES = {p.name for p in ROOT.rglob("*") if ".git" not in p.parts}


def _exists(cited: str, path: Path) -> bool:
    if "/" not in cited:  # a bare file name: somewhere in the repository
        return cited in _NAMES
    return any((base / cited).exists() for base in (ROOT, ROOT / "src", PACKAGE, path.parent))


def test_citation_finder_finds_citations() -> None:
    doc = "See DESIGN.md, docs/architecture.md and PITFALLS; example output out/config/lake-a.yaml."
    assert _CITED.findall(doc) == ["DESIGN.md", "docs/architecture.md"]
    assert _NOTES.findall(doc) == ["DESIGN", "PITFALLS"]
    assert _exists("docs/architecture.md", PACKAGE / "units.py") and not _exists("DESIGN.md", PACKAGE / "units.py")


def test_docstrings_cite_only_files_of_the_repository() -> None:
    bad = []
    for path in sorted({*MODULES.values(), *(ROOT / "tests").rglob("*.py")}):
        for doc in _docstrings(path):
            bad += [f"{path.relative_to(ROOT)}: {c}" for c in _CITED.findall(doc) if not _exists(c, path)]
            bad += [f"{path.relative_to(ROOT)}: {n}" for n in _NOTES.findall(doc) if not _exists(f"{n}.md", path)]
    assert bad == []
