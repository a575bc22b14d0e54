"""Interaction ring: ipywidgets panels that wire controls to core calls (no arithmetic)."""
