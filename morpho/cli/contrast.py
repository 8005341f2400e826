"""`morpho contrast`: Compare crater populations of two or more survey outputs."""

from ._stub import not_available

command = not_available("contrast", "Compare crater populations of two or more survey outputs.")
