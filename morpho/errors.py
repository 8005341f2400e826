"""One error hierarchy for morpho.

Every error names the file (where there is one), what was expected, what was
found, and the fix. Subclasses also inherit the matching builtin so callers can
catch either (the pattern of ``rasterio.errors``).
"""

from __future__ import annotations

__all__ = [
    "MorphoError",
    "InputError",
    "DemError",
    "CrsError",
    "CraterListError",
    "HypothesisFileError",
    "ModelFileError",
    "OutputError",
    "OutputExistsError",
    "MorphoWarning",
    "PartialResultWarning",
]


class _FileErrorNew:
    """``__new__`` of errors that are also ``OSError``: the solid builtin base's, so that
    ``cls.__new__(cls, *args)`` (how dask's traceback pickling rebuilds an exception raised on a
    worker) works; by attribute lookup it would be ``ValueError.__new__``, which refuses."""

    __new__ = OSError.__new__


class MorphoError(Exception):
    """Root of all morpho errors.

    Parameters
    ----------
    message : str
        What was expected and what was found.
    path : str or os.PathLike, optional
        The file concerned; prefixed to the message.
    fix : str, optional
        How to fix it; appended to the message.
    """

    exit_code = 1

    def __init__(self, message: str, *, path=None, fix: str | None = None):
        self.path = None if path is None else str(path)
        self.fix = fix
        self.bare_message = message
        text = message
        if self.path is not None:
            text = f"{self.path}: {text}"
        if fix:
            text = f"{text} Fix: {fix}"
        super().__init__(text)


class InputError(MorphoError, ValueError):
    """Bad user input (parameters, files)."""

    exit_code = 2


class DemError(_FileErrorNew, InputError, OSError):
    """A DEM cannot be read or is not usable."""


class CrsError(InputError):
    """The DEM's coordinate reference system or body cannot be told."""


class CraterListError(InputError):
    """A crater list cannot be read, or some of its rows are bad."""

    def __init__(self, message: str, *, path=None, fix: str | None = None, bad_rows=None):
        super().__init__(message, path=path, fix=fix)
        self.bad_rows = dict(bad_rows or {})


class HypothesisFileError(InputError):
    """A hypothesis file is invalid."""


class ModelFileError(_FileErrorNew, InputError, OSError):
    """A model file is corrupt, too new, or holds untrusted types."""


class OutputError(MorphoError, OSError):
    """An output cannot be written."""

    exit_code = 3


class OutputExistsError(OutputError, FileExistsError):
    """The output exists and ``overwrite`` was not given."""


class MorphoWarning(UserWarning):
    """Root of morpho warnings."""


class PartialResultWarning(MorphoWarning):
    """Part of the work failed (e.g. tiles) but the rest completed."""
