"""Crater-family hypotheses as versioned, cited data files.

The package ships one TOML file per family: ``impact.toml`` (published scaling laws per
body) and electrode-spot families measured in laboratories (``cathode_spot.toml``,
``anode_spot.toml``, ``spark_edm.toml``). Copy a file, edit its parameters, and pass
the folder with ``--hypotheses DIR`` (or :func:`load_hypotheses_dir`) to generate
surfaces and train a scorer on your own variant.

No published depth/diameter ratio exists for any laboratory arc or spark crater; in the
spot files that parameter is an explicit, editable assumption.
"""

from __future__ import annotations

import hashlib
import json
import tomllib
from functools import lru_cache
from importlib import resources
from pathlib import Path

from ..errors import HypothesisFileError
from ._schema import LAW_NAMES, SCHEMA_VERSION, SECTIONS, Hypothesis, Param, validate

__all__ = [
    "Hypothesis",
    "Param",
    "SCHEMA_VERSION",
    "SECTIONS",
    "LAW_NAMES",
    "load_hypothesis",
    "load_hypotheses_dir",
    "default_hypotheses",
    "default_hypothesis_dir",
    "hypothesis_hash",
]


def _read(path) -> tuple[dict, str]:
    p = Path(path)
    try:
        raw = p.read_bytes()
    except OSError as err:
        raise HypothesisFileError(f"cannot read the hypothesis file ({err.strerror}).", path=p,
                                  fix="check the path.") from err
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as err:
        raise HypothesisFileError(f"not valid TOML: {err}.", path=p,
                                  fix="fix the TOML syntax (see the shipped files for the layout).") from err
    digest = hashlib.sha256(json.dumps(data, sort_keys=True, default=str).encode()).hexdigest()
    return data, digest


def hypothesis_hash(path) -> str:
    """SHA-256 of the file's parsed content (canonical JSON of the TOML).

    Comments and formatting do not change the hash; any value, source or note does.
    """
    return _read(path)[1]


def load_hypothesis(path) -> Hypothesis:
    """Load and validate one hypothesis file.

    Raises
    ------
    HypothesisFileError
        With the offending key in the message (missing source, min > max, unknown key, ...).

    Examples
    --------
    >>> h = load_hypothesis(default_hypothesis_dir() / "impact.toml")
    >>> h.origin, h.laws["moon"]["depth_simple"].central
    ('impact', (0.196, 1.01))
    """
    data, digest = _read(path)
    return validate(data, path=str(path), sha256=digest)


def default_hypothesis_dir() -> Path:
    """Folder of the shipped hypothesis files."""
    return Path(str(resources.files(__name__)))


def load_hypotheses_dir(directory) -> dict[str, Hypothesis]:
    """Load every ``*.toml`` in ``directory``: ``{family name: Hypothesis}``.

    Raises
    ------
    HypothesisFileError
        If the folder holds no hypothesis file, two files share a family name, or one is invalid.
    """
    d = Path(directory)
    files = sorted(d.glob("*.toml"))
    if not files:
        raise HypothesisFileError("no *.toml hypothesis files in this folder.", path=d,
                                  fix="copy the shipped files (morpho/hypotheses/*.toml) there first.")
    out: dict[str, Hypothesis] = {}
    for f in files:
        h = load_hypothesis(f)
        if h.name in out:
            raise HypothesisFileError(f"family {h.name!r} is defined twice (also in {out[h.name].path}).",
                                      path=f, fix="give each file its own [hypothesis] name.")
        out[h.name] = h
    return out


@lru_cache(maxsize=1)
def _defaults() -> dict[str, Hypothesis]:
    return load_hypotheses_dir(default_hypothesis_dir())


def default_hypotheses() -> dict[str, Hypothesis]:
    """The shipped families, ``{"impact": ..., "cathode_spot": ..., ...}`` (validated, cached)."""
    return dict(_defaults())
