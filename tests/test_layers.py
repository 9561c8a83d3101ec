"""The import graph: store/ at the bottom, no cycles, and a read path without torch or textual.

Imports are read from the source (``ast``), function-level ones included: a
deferred import is still a dependency.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import tsarchive

PKG = Path(tsarchive.__file__).parent
HERE = Path(__file__).parent
ABOVE_STORE = ("pipeline", "encoder", "verifier", "export", "app", "cli", "model", "archive", "browse")


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(PKG.parent).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in PKG.rglob("*.py")}


def _imports(path: Path, modules: dict[str, Path]) -> set[str]:
    """tsarchive modules that ``path`` imports anywhere in its body."""
    name = _module_name(path)
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    out = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            out.update(a.name for a in node.names if a.name.startswith("tsarchive"))
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")[:len(package.split(".")) - node.level + 1]
                base = ".".join(anchor + ([base] if base else []))
            if not base.startswith("tsarchive"):
                continue
            for a in node.names:       # ``from . import x`` imports the module x when there is one
                out.add(f"{base}.{a.name}" if f"{base}.{a.name}" in modules else base)
    return {m for m in out if m in modules and m != name}


def test_store_imports_nothing_above_it():
    modules = _modules()
    bad = []
    for name, path in modules.items():
        if name.startswith("tsarchive.store"):
            for dep in _imports(path, modules):
                top = dep.split(".")[1] if dep.count(".") else "tsarchive"   # the package re-exports everything
                if top in ABOVE_STORE + ("tsarchive",):
                    bad.append(f"{name} -> {dep}")
    assert not bad, bad


def test_no_import_cycles():
    # Tarjan's strongly connected components (Tarjan 1972): any component of more than one module is a cycle.
    # The parent package (``tsarchive``, which re-exports the public API) is left out: Python runs it first anyway.
    modules = _modules()
    graph = {m: {d for d in _imports(p, modules) if d != "tsarchive" and not m.startswith(d + ".")}
             for m, p in modules.items() if m != "tsarchive"}
    index, low, stack, on, cycles = {}, {}, [], set(), []

    def visit(v: str) -> None:
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
            if len(comp) > 1:
                cycles.append(sorted(comp))

    sys.setrecursionlimit(max(sys.getrecursionlimit(), 10000))
    for v in graph:
        if v not in index:
            visit(v)
    assert not cycles, cycles


def test_read_path_needs_neither_torch_nor_textual(tmp_path):
    code = (
        "import sys, tsarchive\n"
        f"a = tsarchive.open({str(HERE / 'golden' / 'v4' / 'golden4')!r})\n"
        "a.read_many(); a.times(); a.read(a.channels[0].name)\n"
        "assert tsarchive.verify(a).ok\n"
        f"a.export({str(tmp_path / 'out.csv')!r})\n"
        "a.export(" + repr(str(tmp_path / 'out.parquet')) + ")\n"
        "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('torch', 'textual'))\n"
        "print(','.join(bad))\n")
    run = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=600)
    assert run.returncode == 0, run.stderr[-2000:]
    assert run.stdout.strip() == "", run.stdout
    assert (tmp_path / "out.csv").stat().st_size > 0


def test_reader_only_install_needs_no_torch_or_textual():
    # PEP 621 (pyproject.toml metadata): dependencies are what a plain install brings
    import re
    import tomllib
    project = tomllib.loads((PKG.parent / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    names = {re.split(r"[<>=!\[ ;]", d, maxsplit=1)[0].lower() for d in project["dependencies"]}
    assert names == {"numpy", "pyarrow", "zstandard", "constriction", "numba"}
    extras = project["optional-dependencies"]
    assert {"pack", "app", "all", "dev"} <= set(extras) and any(d.startswith("textual") for d in extras["app"])
