"""Columns of the data dictionary owned by the morphometry step (see DEVELOPERS.md)."""

from ._field import Field  # noqa: F401

FIELDS: tuple = ()
