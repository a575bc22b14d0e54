"""The compute core: numpy, scipy and pandas only (never plotly or ipywidgets)."""
