"""Exposure physics: limits, time and spatial averaging, ratios, far-field estimate, readings."""

from . import averaging, farfield, limits, ratios, readings

__all__ = ["averaging", "farfield", "limits", "ratios", "readings"]
