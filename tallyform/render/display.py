"""Showing figures in a notebook so that they survive without a kernel.

``show(fig)`` sends one output holding both the interactive plotly figure (drawn by
JupyterLab's plotly renderer) and, when a static exporter works, a PNG copy of it. Viewers
without a kernel or without the plotly renderer (nbconvert HTML, repository browsers) fall
back to the PNG, so a shared executed notebook shows its figures offline; the notebook stays
small because plotly.js is not embedded.
"""
from __future__ import annotations

import os

__all__ = ["show"]

_STATIC: tuple[bool, str] | None = None


def _static_ok() -> bool:
    global _STATIC
    if os.environ.get("TALLYFORM_STATIC_FIGURES", "1") == "0":   # e.g. quick test runs
        return False
    if _STATIC is None:
        try:
            from .export import static_export_available
            _STATIC = static_export_available()
        except Exception as err:                           # no exporter at all
            _STATIC = (False, str(err))
    return _STATIC[0]


def show(fig, *, static: bool = True, width: int = 900, height: int | None = None) -> None:
    """Display ``fig`` interactively, with a PNG copy for viewers without a kernel."""
    renderer = "plotly_mimetype+png" if static and _static_ok() else "plotly_mimetype"
    kw = {"width": width, "height": height or fig.layout.height or 520}
    if renderer == "plotly_mimetype":
        fig.show(renderer=renderer, **kw)
        return
    for attempt in range(2):               # the exporter's browser can stumble once under load
        try:
            fig.show(renderer=renderer, **kw)
            return
        except Exception as err:                            # noqa: BLE001
            last = err
    fig.show(renderer="plotly_mimetype", **kw)
    print(f"(no static copy of this figure was stored: {type(last).__name__}: {last})")
