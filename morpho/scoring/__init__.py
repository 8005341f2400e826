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

from .._lazy import lazy_attributes

# Loaded on first use (PEP 562): a survey's main process asks only for the model's path and
# scores on a Dask worker, so it need not import scikit-learn and skops at all.
_WHERE = {
    "build_card": "._card", "render_card_markdown": "._card", "write_card": "._card",
    "training_domain_notes": "._domain",
    "ImpactSpotClassifier": "._estimator", "log10_lr_from_p": "._estimator",
    "RESOLUTION_BANDS": "._metrics", "binary_metrics": "._metrics",
    "expected_calibration_error": "._metrics", "metrics_by_band": "._metrics",
    "DEFAULT_MODEL_NAME": "._persistence", "FORMAT_VERSION": "._persistence",
    "TRUSTED_TYPES": "._persistence", "default_model_path": "._persistence",
    "load_model": "._persistence", "save_model": "._persistence",
    "SCORE_COLUMNS": "._score", "model_features": "._score", "score_craters": "._score",
}

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


__getattr__, __dir__ = lazy_attributes(__name__, _WHERE, globals(), __all__)
