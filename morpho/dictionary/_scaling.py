"""Columns of the data dictionary owned by the scaling step (see DEVELOPERS.md)."""

from ._field import Field  # noqa: F401

FIELDS: tuple = ()
