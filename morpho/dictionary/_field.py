"""The :class:`Field` record shared by every section of the data dictionary."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Field"]


@dataclass(frozen=True)
class Field:
    """One documented column of a morpho table.

    Attributes
    ----------
    name : str
        Column name (units in the name where there are any: ``diameter_m``).
    unit : str
        Unit in words or SI symbols; ``"1"`` for dimensionless, ``""`` for text/ids.
    dtype : str
        One of ``float64``, ``int64``, ``bool``, ``str``.
    definition : str
        One line: what the number means.
    method : str
        How it is computed.
    reference : str
        Published source of the method (author, year, journal) or ``"common practice"``.
    has_error : bool
        If true, a bootstrap uncertainty column ``<name>_err`` (same unit) exists too.
    """

    name: str
    unit: str
    dtype: str
    definition: str
    method: str = ""
    reference: str = ""
    has_error: bool = False

    def error_field(self) -> Field:
        """The companion ``<name>_err`` column (1-sigma bootstrap standard error)."""
        return Field(
            name=f"{self.name}_err",
            unit=self.unit,
            dtype="float64",
            definition=f"1-sigma uncertainty of {self.name}.",
            method="standard deviation over bootstrap resamples of the profile azimuths",
            reference="Efron & Tibshirani 1993, An Introduction to the Bootstrap (Chapman & Hall)",
        )
