"""`morpho synth`: Generate synthetic DEMs with known craters."""

from ._stub import not_available

command = not_available("synth", "Generate synthetic DEMs with known craters.")
