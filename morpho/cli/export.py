"""`morpho export`: Export feature tables with a data dictionary for peer review."""

from ._stub import not_available

command = not_available("export", "Export feature tables with a data dictionary for peer review.")
