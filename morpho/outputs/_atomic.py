"""Atomic file writing: check the target first, write beside it, rename into place.

A reader of the output folder sees either the old file or the complete new one,
never a half-written file: everything is written inside a hidden temporary folder
in the target's own folder (same file system, so :func:`os.replace` is atomic)
and only renamed once the writer has returned.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path

from ..errors import OutputError, OutputExistsError

__all__ = ["check_targets", "atomic_paths", "write_bytes_atomic"]

_FIX_EXISTS = "pass --overwrite (overwrite=True) to replace it, or choose another output name"


def check_targets(paths: Sequence[str | os.PathLike], *, overwrite: bool) -> list[Path]:
    """Check that every target can be written, before any byte is written.

    Parameters
    ----------
    paths : sequence of path-like
        Output files.
    overwrite : bool
        Whether existing files may be replaced.

    Returns
    -------
    list of pathlib.Path
        Absolute target paths, in the given order.

    Raises
    ------
    OutputExistsError
        A target exists and ``overwrite`` is false.
    OutputError
        A target is a folder, or its folder is missing or not writable.
    """
    out = []
    for p in paths:
        path = Path(p).expanduser().absolute()
        if path.is_dir():
            raise OutputError("the output path is a folder, expected a file name.", path=path,
                              fix="give a file name inside that folder")
        if path.exists() and not overwrite:
            raise OutputExistsError("the output file exists; not overwriting it.", path=path,
                                    fix=_FIX_EXISTS)
        folder = path.parent
        if not folder.is_dir():
            raise OutputError(f"the output folder {folder} does not exist.", path=path,
                              fix="create the folder first or choose another output path")
        if not os.access(folder, os.W_OK | os.X_OK):
            raise OutputError(f"the output folder {folder} is not writable.", path=path,
                              fix="choose a folder you can write to")
        out.append(path)
    return out


@contextmanager
def atomic_paths(targets: Sequence[Path]) -> Iterator[list[Path]]:
    """Yield temporary paths for ``targets``; rename them into place on success.

    All temporaries live in one hidden folder beside the first target, so sidecar
    files a writer leaves (SQLite journals) are removed with it. If the body raises,
    nothing is renamed and every target keeps its previous content (or stays absent).

    Parameters
    ----------
    targets : sequence of pathlib.Path
        Checked absolute targets (see :func:`check_targets`), all in one folder.
    """
    folder = targets[0].parent
    try:
        tmp_dir = tempfile.TemporaryDirectory(prefix=".morpho-write-", dir=folder)
    except OSError as err:
        raise OutputError(f"cannot create a temporary file in {folder}: {err.strerror or err}.",
                          path=targets[0], fix="choose a folder you can write to") from err
    with tmp_dir as tmp:
        tmp_paths = [Path(tmp) / t.name for t in targets]
        yield tmp_paths
        for src, dst in zip(tmp_paths, targets, strict=True):
            try:
                os.replace(src, dst)
            except OSError as err:
                raise OutputError(f"cannot move the finished file into place: {err.strerror or err}.",
                                  path=dst, fix="check the folder's permissions and free space") from err


def write_bytes_atomic(path: str | os.PathLike, data: bytes, *, overwrite: bool) -> Path:
    """Write ``data`` to ``path`` atomically (checked, temporary file, rename)."""
    (target,) = check_targets([path], overwrite=overwrite)
    with atomic_paths([target]) as (tmp,):
        tmp.write_bytes(data)
    return target
