"""One look for every figure: palette, fraction colours, fonts readable on a projector."""
from __future__ import annotations

__all__ = ["OKABE_ITO", "FRACTION_COLOURS", "FRACTION_LABELS", "FONT_SIZE", "group_colours",
           "base_layout"]

# Colour-blind-safe qualitative palette (Okabe & Ito 2008), for groups.
OKABE_ITO = ["#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7",
             "#000000"]

# One accent per partition fraction, the same in every figure (legend always shown).
FRACTION_COLOURS = {
    "size_only": "#D55E00",     # vermillion: total abundance
    "shared": "#CC79A7",        # reddish purple: cannot be told apart
    "shape_only": "#0072B2",    # blue: composition
    "residual": "#C8C8C8",      # grey: unexplained
}
FRACTION_LABELS = {"size_only": "size only", "shared": "shared (size and shape)",
                   "shape_only": "shape only", "residual": "residual"}

FONT_SIZE = 16          # >= 14 px at projector size
TITLE_SIZE = 20


def group_colours(levels) -> dict:
    """Okabe-Ito colour per group level, in the order given (cycling past 8 levels)."""
    return {lv: OKABE_ITO[i % len(OKABE_ITO)] for i, lv in enumerate(levels)}


def base_layout(fig, *, title: str | None = None, legend_title: str | None = None,
                font_size: int = FONT_SIZE, height: int | None = None):
    """Apply the shared layout (white template, large fonts, legend shown) and return fig."""
    fig.update_layout(
        template="plotly_white",
        font={"size": font_size, "family": "Arial, Helvetica, sans-serif"},
        title={"text": title, "font": {"size": font_size + 4}} if title else None,
        legend={"title": {"text": legend_title}} if legend_title else {},
        showlegend=True,
        margin={"l": 70, "r": 30, "t": 80 if title else 40, "b": 60},
        hoverlabel={"font": {"size": font_size - 2}},
    )
    if height:
        fig.update_layout(height=height)
    return fig
