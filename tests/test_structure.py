"""The package's shape: imports point one way (no cycles, function-level imports included),
no module reaches into another's underscore names, and importing or calling woodlot never
changes global state such as matplotlib's backend."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "harness"

# Layers from the bottom up; a module may import only from its own layer or those below.
LAYERS = [
    ("harness.errors", "harness.interrupts", "harness.files", "harness.names",
     "harness.versions", "harness.locks", "harness.provenance", "harness.collector"),
    ("harness.datasets", "harness.spaces", "harness.strategies", "harness.suite",
     "harness.datacheck", "harness.scorers"),
    ("harness.splits", "harness.preprocess", "harness.work_units", "harness.row_evidence",
     "harness.search", "harness.plan"),
    ("harness.execution",),
    ("harness.store", "harness.folder_lock"),
    ("harness.analysis",),
    ("harness.report",),
    ("harness.commands",),
    ("harness.cli", "harness"),
]


def _module_name(path: Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imports(path: Path, name: str) -> list[tuple[str, list[str], int]]:
    """(imported module, names taken from it, line) for every import in the file, at any
    depth; relative imports resolved."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(a.name, [], node.lineno) for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")[: len(package.split(".")) - node.level + 1]
                base = ".".join(anchor + ([base] if base else []))
            out.append((base, [a.name for a in node.names], node.lineno))
    return out


def _graph() -> dict[str, set[str]]:
    modules = {_module_name(p): p for p in PACKAGE.rglob("*.py")}
    graph: dict[str, set[str]] = {m: set() for m in modules}
    for name, path in modules.items():
        for target, names, _ in _imports(path, name):
            if not target.startswith("harness"):
                continue
            for n in names or [""]:  # `from harness.x import y` may name a submodule y
                full = f"{target}.{n}" if n else target
                graph[name].add(full if full in modules else target)
    return graph


def _layer(module: str) -> int:
    best = None
    for i, prefixes in enumerate(LAYERS):
        for p in prefixes:
            if module == p or module.startswith(p + "."):
                if best is None or len(p) > best[1]:
                    best = (i, len(p))
    assert best is not None, f"{module} belongs to no layer; add it to LAYERS"
    return best[0]


def test_no_import_cycles():
    graph = _graph()
    seen, stack, cycles = set(), [], []

    def visit(m: str) -> None:
        if m in stack:
            cycles.append(stack[stack.index(m):] + [m])
            return
        if m in seen:
            return
        seen.add(m)
        stack.append(m)
        for n in sorted(graph.get(m, ())):
            if n != m and n in graph:
                visit(n)
        stack.pop()

    for m in sorted(graph):
        visit(m)
    assert not cycles, "import cycles: " + "; ".join(" -> ".join(c) for c in cycles)


def test_imports_point_down_the_layers():
    wrong = []
    for m, targets in _graph().items():
        for t in targets:
            if t != m and _layer(t) > _layer(m):
                wrong.append(f"{m} (layer {_layer(m)}) imports {t} (layer {_layer(t)})")
    assert not wrong, "\n".join(sorted(wrong))


def test_no_module_takes_another_modules_underscore_names():
    found = []
    for path in PACKAGE.rglob("*.py"):
        name = _module_name(path)
        for target, names, line in _imports(path, name):
            if target.startswith("harness") and target != name:
                found += [f"{path.relative_to(PACKAGE.parent)}:{line} takes {target}.{n}"
                          for n in names if n.startswith("_") and not n.startswith("__")]
    assert not found, "\n".join(found)


def test_check_finds_a_cycle(tmp_path, monkeypatch):
    """The cycle check itself can fail: a two-module circle through a function-level import
    is reported."""
    pkg = tmp_path / "harness"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("")
    (pkg / "errors.py").write_text("def f():\n    from harness.files import g\n")
    (pkg / "files.py").write_text("from harness.errors import f\n")
    monkeypatch.setattr(sys.modules[__name__], "PACKAGE", pkg)
    with pytest.raises(AssertionError, match="import cycles"):
        test_no_import_cycles()


def test_importing_and_using_woodlot_keeps_the_matplotlib_backend(tmp_path):
    code = """
import matplotlib
matplotlib.use("svg")
before = matplotlib.get_backend()
import harness, harness.cli, harness.commands.run, harness.report.writer
from harness.report.plots import grid
fig, _ = grid(2)
fig.savefig(r"{out}")
harness.load_results
assert matplotlib.get_backend() == before, (before, matplotlib.get_backend())
import matplotlib.pyplot as plt
assert plt.get_fignums() == []
print("ok")
""".format(out=tmp_path / "x.png")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "ok"


def test_no_platform_specific_import_at_module_level():
    """fcntl, msvcrt and resource exist on one platform only: they are imported inside
    platform checks, so `report`, `agree` and `load_results` import on any OS."""
    found = []
    for path in PACKAGE.rglob("*.py"):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in tree.body:
            if isinstance(node, (ast.Import, ast.ImportFrom)):
                names = [a.name for a in node.names] if isinstance(node, ast.Import) \
                    else [node.module or ""]
                found += [f"{path.relative_to(PACKAGE.parent)}: {n}" for n in names
                          if n in ("fcntl", "msvcrt", "resource")]
    assert not found, found
