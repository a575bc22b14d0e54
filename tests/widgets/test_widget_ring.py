"""The interaction ring computes nothing: no numerical libraries imported by the widgets."""
from __future__ import annotations

import ast
from pathlib import Path

WIDGETS = Path(__file__).resolve().parents[2] / "tallyform" / "widgets"


def test_widgets_import_no_numerical_library():
    # DESIGN.md: widgets hold state and call the core; every number comes from a result
    for f in WIDGETS.rglob("*.py"):
        for node in ast.walk(ast.parse(f.read_text())):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module and not node.level:
                names = [node.module]
            for name in names:
                assert name.split(".")[0] not in {"numpy", "scipy", "statsmodels", "sklearn",
                                                  "numba"}, (f.name, name)
                assert not name.startswith("tallyform.cli"), (f.name, name)


def test_examples_run():
    # the Examples sections of the widget modules are doctests
    import doctest

    from tallyform.widgets import common, dashboard
    for mod in (common, dashboard):
        result = doctest.testmod(mod, optionflags=doctest.NORMALIZE_WHITESPACE)
        assert result.failed == 0 and result.attempted > 0, mod.__name__
