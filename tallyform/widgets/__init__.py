"""Interaction ring: ipywidgets panels that wire controls to core calls (no arithmetic).

``tly.explore(table)`` opens the dashboard; each panel can also be used alone.
"""
from .dashboard import TAB_TITLES, Dashboard, explore
from .data_panel import DataPanel
from .report_panel import ReportPanel
from .shape_panel import ShapePanel
from .tests_panel import TestsPanel

__all__ = ["explore", "Dashboard", "DataPanel", "ShapePanel", "TestsPanel", "ReportPanel",
           "TAB_TITLES"]
