"""The three rings: the core never imports plotly or ipywidgets; import stays fast."""
from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

PKG = Path(__file__).resolve().parents[1] / "tallyform"


def test_core_loads_no_ui():
    code = ("import sys, tallyform; bad = {'plotly', 'ipywidgets'} & {m.split('.')[0] for m in "
            "sys.modules}; assert not bad, bad")
    subprocess.run([sys.executable, "-c", code], check=True, cwd=PKG.parent)


def _walk_module_level(tree):
    """Nodes outside function bodies (what runs when the module is imported)."""
    stack = [tree]
    while stack:
        node = stack.pop()
        yield node
        for child in ast.iter_child_nodes(node):
            if not isinstance(child, (ast.FunctionDef, ast.AsyncFunctionDef, ast.Lambda)):
                stack.append(child)


def _imports(path: Path, *, module_level: bool = False) -> set[str]:
    tree = ast.parse(path.read_text())
    names = set()
    for node in (_walk_module_level(tree) if module_level else ast.walk(tree)):
        if isinstance(node, ast.Import):
            names |= {a.name for a in node.names}
        elif isinstance(node, ast.ImportFrom):
            mod = node.module or ""
            if node.level:  # relative: resolve against the file's package
                base = path.relative_to(PKG.parent).with_suffix("").parts[:-node.level]
                mod = ".".join(base + ((mod,) if mod else ()))
            names.add(mod)
    return names


def test_imports_point_inward():
    # core -> nothing outside core; render -> core; widgets -> core + render (DESIGN.md).
    # The one exception: a result's figure() method imports the render ring inside the
    # method (lazily, DESIGN.md "figure() (lazy import of plots)"), never at module level.
    for f in (PKG / "core").rglob("*.py"):
        for name in _imports(f):
            top = name.split(".")[0]
            assert top not in {"plotly", "ipywidgets", "anywidget"}, (f, name)
            assert not name.startswith(("tallyform.widgets", "tallyform.cli")), (f, name)
        for name in _imports(f, module_level=True):
            assert not name.startswith("tallyform.render"), (f, name)
    for f in (PKG / "render").rglob("*.py"):
        for name in _imports(f):
            assert not name.startswith(("tallyform.widgets", "tallyform.cli")), (f, name)
            assert name.split(".")[0] != "ipywidgets", (f, name)


def test_import_is_fast():
    code = ("import time; t = time.perf_counter(); import tallyform; "
            "print(time.perf_counter() - t)")
    out = subprocess.run([sys.executable, "-X", "importtime", "-c", code], check=True,
                         cwd=PKG.parent, capture_output=True, text=True)
    # not a timing assertion on noisy machines: check what is imported instead
    heavy = [ln for ln in out.stderr.splitlines()
             if any(f"| {m}" in ln for m in ("plotly", "ipywidgets", "statsmodels", "sklearn",
                                              "numba", "matplotlib"))]
    assert not heavy, heavy[:5]
