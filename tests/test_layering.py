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


def _imports(path: Path, *, lazy_figure: bool = False) -> set[str]:
    """Modules a file imports. ``lazy_figure=True``: only those inside ``figure`` methods."""
    tree = ast.parse(path.read_text())
    names = set()
    figure_nodes = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)) and node.name == "figure":
            figure_nodes |= {id(n) for n in ast.walk(node)}
    for node in ast.walk(tree):
        if (id(node) in figure_nodes) != lazy_figure:
            continue
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
    # core -> nothing outside core; render -> core; widgets -> core + render (DESIGN.md)
    for f in (PKG / "core").rglob("*.py"):
        for name in _imports(f):
            top = name.split(".")[0]
            assert top not in {"plotly", "ipywidgets", "anywidget"}, (f, name)
            assert not name.startswith(("tallyform.render", "tallyform.widgets",
                                        "tallyform.cli")), (f, name)
        # result.figure() may import the render ring, lazily, inside the method only
        for name in _imports(f, lazy_figure=True):
            assert name.split(".")[0] not in {"plotly", "ipywidgets", "anywidget"}, (f, name)
            assert name.startswith("tallyform.render."), (f, name)
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


def test_no_pickle_or_dynamic_code_anywhere():
    # a shared spec or table must never be able to run code: JSON and CSV only
    for f in PKG.rglob("*.py"):
        for name in _imports(f) | _imports(f, lazy_figure=True):
            assert name.split(".")[0] not in {"pickle", "dill", "cloudpickle", "shelve",
                                              "marshal"}, (f, name)
        tree = ast.parse(f.read_text())
        calls = {n.func.id for n in ast.walk(tree)
                 if isinstance(n, ast.Call) and isinstance(n.func, ast.Name)}
        assert not calls & {"eval", "exec"}, f
