"""Figures: pure functions, result object in, new plotly Figure out (no statistics here).

The functions live in topic modules and are gathered here, so ``tly.plots.<name>`` and
``from tallyform.render.plots import <name>`` always work.
"""
from __future__ import annotations

from .taxa_plots import taxon_shape_figure, taxon_size_figure  # noqa: F401
from .choice_plots import choice_adjusted_figure  # noqa: F401
from .display import show  # noqa: F401
from .export import SavedFiles, StaticExportWarning, save, static_export_available  # noqa: F401
from .partition_plots import (choice_difference_figure, dims_figure,  # noqa: F401
                              partition_bars, scan_heatmap)
from .style import (FRACTION_COLOURS, OKABE_ITO, base_layout, group_colours,  # noqa: F401
                    group_levels)
from .ordination_plots import ordination_figure, scree_figure  # noqa: F401
from .inference_plots import (audit_figure, dispersion_figure,  # noqa: F401
                              null_distribution_figure, totals_figure)
