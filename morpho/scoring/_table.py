"""Scoring a survey's merged crater table, in this process or in another one.

The functions here are what a Dask worker or the survey's scoring process runs: they are
pickled by reference, so this module stays light to import (pandas and morpho's own
modules; scikit-learn and skops only when a model is loaded).
"""

from __future__ import annotations

import hashlib
import time
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

__all__ = ["ModelSpec", "model_file", "model_spec", "cached_model", "warm_model", "apply_scores", "score_table"]


@dataclass(frozen=True)
class ModelSpec:
    """Where another process finds the scoring model: the file (same machine) or its bytes (remote)."""

    path: str
    sha256: str
    data: bytes | None = None


def model_file(model) -> Path:
    """The model file meant by ``model``: the shipped default when None or "default"."""
    from ._persistence import default_model_path  # light: no scikit-learn or skops

    return default_model_path() if model is None or model == "default" else Path(model)


def model_spec(model, *, ship: bool) -> ModelSpec:
    """The model file's path and hash, with its bytes when the other process may not see this disk."""
    path = model_file(model)
    data = path.read_bytes()
    return ModelSpec(str(path), hashlib.sha256(data).hexdigest(), data if ship else None)


#: Models loaded in this process, by file hash (a worker keeps the one it loaded for scoring).
MODELS: dict[str, object] = {}


def cached_model(spec: ModelSpec):
    """``(model, seconds spent loading it now)``: the model of ``spec``, loaded once per process."""
    if spec.sha256 in MODELS:
        return MODELS[spec.sha256], 0.0
    from ..errors import ModelFileError
    from ._persistence import load_model

    t0 = time.perf_counter()
    if spec.data is None:
        model = load_model(spec.path)
    else:
        import tempfile

        with tempfile.TemporaryDirectory(prefix="morpho-model-") as tmp:
            local = Path(tmp) / Path(spec.path).name
            local.write_bytes(spec.data)
            try:
                model = load_model(local)
            except ModelFileError as err:  # name the user's file, not the worker's copy
                raise ModelFileError(err.bare_message, path=spec.path, fix=err.fix) from None
    MODELS[spec.sha256] = model
    return model, time.perf_counter() - t0


def warm_model(spec: ModelSpec) -> float:
    """Load the model of ``spec`` and import the scoring code in this process ahead of scoring.

    Returns the seconds it took to load the model (0 if it was loaded before).
    """
    from .. import scaling  # noqa: F401 - apply_scores' imports, done while the tiles run
    from . import _domain, _score  # noqa: F401

    return cached_model(spec)[1]


def apply_scores(df: pd.DataFrame, body, fitted) -> pd.DataFrame:
    """Scaling residuals, score columns and the training-domain guard of merged craters."""
    from ..scaling import add_scaling_columns
    from ._domain import training_domain_notes
    from ._score import score_craters

    df = add_scaling_columns(df, body)
    scores = score_craters(df, fitted)
    for col in scores.columns:
        df[col] = scores[col].to_numpy()
    # Outside the training domain the classifier extrapolates: flag it, claim neither.
    notes = training_domain_notes(df, body, getattr(fitted, "context_reference_", None))
    df["scoring_domain"] = notes
    outside = (notes != "") & df["verdict"].isin(["impact", "discharge", "undecided"]).to_numpy()
    df.loc[outside, "verdict"] = "neither"
    return df


def score_table(df: pd.DataFrame, body, spec: ModelSpec):
    """:func:`apply_scores` with the model of ``spec``: ``(table, seconds spent loading it)``."""
    fitted, seconds = cached_model(spec)
    return apply_scores(df, body, fitted), seconds
