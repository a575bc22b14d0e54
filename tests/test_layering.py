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


def _imports(path: Path, *, lazy_figure: bool = False, root: Path = PKG) -> set[str]:
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
                base = path.relative_to(root.parent).with_suffix("").parts[:-node.level]
                mod = ".".join(base + ((mod,) if mod else ()))
            names.add(mod)
    return names


HEAVY = ("plotly", "ipywidgets", "statsmodels", "sklearn", "numba", "matplotlib")
UI = {"plotly", "ipywidgets", "anywidget"}


def layering_violations(pkg: Path) -> list:
    """(file, import) pairs that break the rings of the package rooted at ``pkg``.

    core -> nothing outside core (figure() methods may import tallyform.render lazily, and
    core/progress.py the notebook bar tallyform.widgets.progress);
    render -> core; widgets -> core + render (DEVELOPERS.md, "Layout").
    """
    bad = []
    for f in (pkg / "core").rglob("*.py"):
        for name in _imports(f, root=pkg):
            top = name.split(".")[0]
            if f.name == "progress.py" and name == "tallyform.widgets.progress":
                continue       # the one lazy door: the notebook bar of long calls
            if top in UI or name.startswith(("tallyform.render", "tallyform.widgets",
                                             "tallyform.cli")):
                bad.append((f.name, name))
        for name in _imports(f, lazy_figure=True, root=pkg):
            if name.split(".")[0] in UI or not name.startswith("tallyform.render."):
                bad.append((f.name, name))
    for f in (pkg / "render").rglob("*.py"):
        for name in _imports(f, root=pkg) | _imports(f, lazy_figure=True, root=pkg):
            if name.startswith(("tallyform.widgets", "tallyform.cli")) or \
                    name.split(".")[0] == "ipywidgets":
                bad.append((f.name, name))
    return bad


def heavy_imports(importtime_stderr: str) -> list:
    """Modules of ``python -X importtime`` output (at any nesting depth) from HEAVY."""
    out = []
    for ln in importtime_stderr.splitlines():
        if not ln.startswith("import time:") or "|" not in ln:
            continue
        module = ln.rsplit("|", 1)[1].strip()
        if module.split(".")[0] in HEAVY:
            out.append(module)
    return out


def test_imports_point_inward():
    assert layering_violations(PKG) == []


def test_layering_check_can_fail(tmp_path):
    # a throw-away package that breaks every rule must be caught: a top-level plotly import
    # in the core, a render import outside figure(), an import inside a plain function
    pkg = tmp_path / "tallyform"
    for ring in ("core", "render", "widgets"):
        (pkg / ring).mkdir(parents=True)
        (pkg / ring / "__init__.py").write_text("")
    (pkg / "__init__.py").write_text("")
    (pkg / "core" / "top.py").write_text("import plotly.graph_objects as go\n")
    (pkg / "core" / "inner.py").write_text(
        "def helper():\n    from ..render import plots\n    return plots\n")
    (pkg / "core" / "ok.py").write_text(
        "class R:\n    def figure(self):\n        from ..render.plots import f\n"
        "        return f(self)\n")
    (pkg / "render" / "bad.py").write_text("import ipywidgets\n")
    found = {name for _, name in layering_violations(pkg)}
    assert found == {"plotly.graph_objects", "tallyform.render", "ipywidgets"}, found
    # nested importtime lines (indented under a parent) are caught too
    sample = ("import time: self [us] | cumulative | imported package\n"
              "import time:       120 |        900 |   tallyform.core\n"
              "import time:       300 |        600 |     plotly.io\n")
    assert heavy_imports(sample) == ["plotly.io"]


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


def test_core_reaches_render_in_one_place_only():
    # the result protocol: figures are drawn by render.figures, reached from one spot
    import re
    core = Path(__file__).resolve().parents[1] / "tallyform" / "core"
    hits = {p.name for p in core.glob("*.py")
            if re.search(r"from \.\.render|import tallyform\.render|from tallyform\.render",
                         p.read_text())}
    assert hits == {"results.py"}, hits
