"""Small helpers shared by the figure tests."""
from __future__ import annotations


def parse_percent(text: str) -> float:
    """'35.0 %' -> 0.35 (the inverse of the figures' percent labels)."""
    return float(text.replace("%", "").strip()) / 100
