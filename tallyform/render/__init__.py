"""Render ring: result objects -> plotly figures, HTML and text. Pure functions only."""
