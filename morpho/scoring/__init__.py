"""Hypothesis scoring: morphological consistency of each crater with impact vs electrode-spot craters.

The score measures morphological similarity to synthetic craters rendered from the
hypothesis files, under those files' assumptions; it says nothing about mechanism.
Electrode-spot families were measured at micrometre-to-millimetre scale on metals, and
scaling them to kilometre craters is an untested assumption. Impact is the consensus
origin of planetary craters.

Public API
----------
ImpactSpotClassifier
    scikit-learn estimator (p_impact, log10_lr, typicality, verdict, spot family, attributions).
score_craters(features_df, model)
    The score columns of the data dictionary for a table of measured craters.
save_model, load_model, default_model_path
    skops persistence with an explicit trusted-types list (never pickle/joblib).
build_training_set, train_model, evaluate_model
    Render craters with morpho.synth, measure them with morpho.morphometry, fit, evaluate.
"""

from ._card import build_card, render_card_markdown, write_card
from ._domain import training_domain_notes
from ._estimator import ImpactSpotClassifier, log10_lr_from_p
from ._metrics import RESOLUTION_BANDS, binary_metrics, expected_calibration_error, metrics_by_band
from ._persistence import (
    DEFAULT_MODEL_NAME,
    FORMAT_VERSION,
    TRUSTED_TYPES,
    default_model_path,
    load_model,
    save_model,
)
from ._score import SCORE_COLUMNS, model_features, score_craters

__all__ = [
    "ImpactSpotClassifier",
    "log10_lr_from_p",
    "score_craters",
    "training_domain_notes",
    "model_features",
    "SCORE_COLUMNS",
    "save_model",
    "load_model",
    "default_model_path",
    "DEFAULT_MODEL_NAME",
    "FORMAT_VERSION",
    "TRUSTED_TYPES",
    "build_card",
    "render_card_markdown",
    "write_card",
    "RESOLUTION_BANDS",
    "binary_metrics",
    "expected_calibration_error",
    "metrics_by_band",
]
