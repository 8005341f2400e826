"""Score a table of measured craters with a fitted :class:`ImpactSpotClassifier`."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd

from ..errors import InputError, MorphoWarning
from ._estimator import log10_lr_from_p

__all__ = ["SCORE_COLUMNS", "N_EVIDENCE", "DERIVED_FEATURES", "add_derived_features", "model_features",
           "score_craters"]

SCORE_COLUMNS = (
    "p_impact",
    "log10_lr",
    "typicality_impact",
    "typicality_spot",
    "verdict",
    "evidence",
    "spot_family",
    "p_spot_family",
)
N_EVIDENCE = 3

#: Dimensionless ratios of measured morphometry columns that the trees cannot form on
#: their own (a tree splits one feature at a time): name -> (numerator, denominator, how).
DERIVED_FEATURES = {
    # rim height relative to depth: raised melt rims vs impact rims (Pike 1977 h/d ~ 0.18)
    "rim_to_depth": ("h_over_D", "d_over_D", "ratio"),
    # upper-wall vs mean-wall slope: how sharply the wall steepens towards the rim
    "wall_slope_ratio": ("wall_slope_upper_deg", "wall_slope_mean_deg", "ratio"),
    # wall steepness per unit depth/diameter: bowl shape independent of depth
    "wall_steepness_per_depth": ("wall_slope_mean_deg", "d_over_D", "tan_ratio"),
}


def add_derived_features(df: pd.DataFrame) -> pd.DataFrame:
    """Add the :data:`DERIVED_FEATURES` whose source columns exist (NaN where undefined)."""
    new = {}
    for name, (num, den, how) in DERIVED_FEATURES.items():
        if name in df or num not in df or den not in df:
            continue
        a = df[num].to_numpy(np.float64)
        b = df[den].to_numpy(np.float64)
        if how == "tan_ratio":
            a = np.tan(np.radians(a))
        with np.errstate(divide="ignore", invalid="ignore"):
            v = a / b
        new[name] = np.where(np.isfinite(v) & (b > 0), v, np.nan)
    return df.assign(**new) if new else df


def model_features(features_df: pd.DataFrame, model) -> pd.DataFrame:
    """The model's own feature columns of ``features_df``, by name, as float64.

    ``pixels_per_diameter`` is derived as ``2 * radius_px`` when absent (the refined rim
    radius of the morphometry step is in pixels of the local metric grid).

    Raises
    ------
    InputError
        More than half of the model's feature columns are missing (a few missing ones are
        filled with NaN, with a :class:`~morpho.errors.MorphoWarning`).
    """
    names = getattr(model, "feature_names_in_", None)
    if names is None:
        raise InputError("the scoring model was fitted without feature names.",
                         fix="fit it on a DataFrame (morpho.scoring.train_model does).")
    df = add_derived_features(features_df)
    if "pixels_per_diameter" in names and "pixels_per_diameter" not in df and "radius_px" in df:
        df = df.assign(pixels_per_diameter=2.0 * df["radius_px"].astype(np.float64))
    missing = [n for n in names if n not in df.columns]
    if 2 * len(missing) > len(names):
        raise InputError(f"the crater table lacks most of the model's feature columns: {missing}.",
                         fix="measure the craters with morpho.morphometry.measure_craters first.")
    if missing:
        # A model from another morpho version: score on what is there (the trees take NaN,
        # typicality counts it as a departure) rather than fail a whole survey.
        warnings.warn(f"the crater table lacks the model's feature columns {missing}; they are scored "
                      "as not measured. Rebuild the model with this morpho version (morpho train).",
                      MorphoWarning, stacklevel=3)
        df = df.assign(**{n: np.nan for n in missing})
    return df.loc[:, list(names)].astype(np.float64)


def _evidence_strings(names, deltas, n_top=N_EVIDENCE):
    order = np.argsort(-np.abs(deltas), axis=1, kind="stable")[:, :n_top]
    top = np.take_along_axis(deltas, order, axis=1)
    names = np.asarray(names, dtype=object)
    out = []
    for idx, vals in zip(order, top, strict=True):
        parts = [f"{names[i]}:{v:+.2f}" for i, v in zip(idx, vals, strict=True) if abs(v) >= 0.005]
        out.append("; ".join(parts))
    return out


def score_craters(features_df: pd.DataFrame, model) -> pd.DataFrame:
    """Score each measured crater for morphological consistency with impact vs electrode spots.

    Parameters
    ----------
    features_df : DataFrame, one crater per row
        Output of :func:`morpho.morphometry.measure_craters` (any extra columns are
        ignored; the model selects its own by name).
    model : ImpactSpotClassifier
        Fitted, e.g. ``load_model(default_model_path())``.

    Returns
    -------
    DataFrame, same index, columns :data:`SCORE_COLUMNS`
        Rows whose model features (resolution aside) are all NaN get NaN scores and the
        verdict ``"unscored"``. See the data dictionary for each column.

    Notes
    -----
    ``p_impact`` assumes equal priors for impact and electrode-spot morphologies; it
    measures morphological similarity to synthetic craters of the hypothesis files,
    not mechanism. Resolution is handled by ``pixels_per_diameter`` being a feature of
    a model trained across 10-80 px per diameter.
    """
    X = model_features(features_df, model)
    n = len(X)
    shape_cols = [c for c in X.columns if c not in set(model.typicality_exclude or ())] or list(X.columns)
    usable = X[shape_cols].notna().any(axis=1).to_numpy()
    out = pd.DataFrame(
        {
            "p_impact": np.full(n, np.nan),
            "log10_lr": np.full(n, np.nan),
            "typicality_impact": np.full(n, np.nan),
            "typicality_spot": np.full(n, np.nan),
            "verdict": np.full(n, "unscored", dtype=object),
            "evidence": np.full(n, "", dtype=object),
            "spot_family": np.full(n, "", dtype=object),
            "p_spot_family": np.full(n, np.nan),
        },
        index=features_df.index,
    )
    if not usable.any():
        return out
    Xu = X.loc[usable]
    p = model.predict_p_impact(Xu)
    lr = log10_lr_from_p(p)
    typ = model.typicality(Xu)
    family, p_family = model.predict_spot_family(Xu)
    deltas = model.attributions(Xu)
    out.loc[usable, "p_impact"] = p
    out.loc[usable, "log10_lr"] = lr
    out.loc[usable, "typicality_impact"] = typ[:, 0]
    out.loc[usable, "typicality_spot"] = typ[:, 1]
    out.loc[usable, "verdict"] = model.verdict_from(lr, typ)
    out.loc[usable, "evidence"] = _evidence_strings(list(X.columns), deltas)
    out.loc[usable, "spot_family"] = np.asarray(family, dtype=str).astype(object)
    out.loc[usable, "p_spot_family"] = p_family
    return out
