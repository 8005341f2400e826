"""`morpho train`: Train the scoring model from hypothesis files."""

from ._stub import not_available

command = not_available("train", "Train the scoring model from hypothesis files.")
