"""Plots and reports of results."""

from ._text import literal

__all__ = ["literal"]
