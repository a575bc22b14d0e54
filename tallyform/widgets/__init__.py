"""Interaction ring: ipywidgets panels that wire controls to core calls (no arithmetic).

``tly.explore(table)`` opens the dashboard; each panel can also be used alone. Names are
imported on first use, so the core's notebook progress bar (widgets.progress) does not load
the dashboard.
"""
from __future__ import annotations

import importlib

_WHERE = {"explore": "dashboard", "Dashboard": "dashboard", "TAB_TITLES": "dashboard",
          "DataPanel": "data_panel", "ReportPanel": "report_panel",
          "ShapePanel": "shape_panel", "TestsPanel": "tests_panel",
          "ComparePanel": "compare_panel"}

__all__ = ["explore", "Dashboard", "DataPanel", "ShapePanel", "TestsPanel", "ReportPanel",
           "ComparePanel", "TAB_TITLES"]


def __getattr__(name):
    if name in _WHERE:
        return getattr(importlib.import_module(f".{_WHERE[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
