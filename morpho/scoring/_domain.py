"""Training domain of the scorer: where a verdict interpolates between training craters.

The default model is trained on synthetic craters of 10-80 px per diameter, diameters up
to 5 transition diameters of the body, and degradation kappa t / D^2 up to 0.02 (see
``_training.py`` and the model card). Outside that domain the classifier extrapolates,
and on real saturated highland terrain that extrapolation was seen to favour the
electrode-spot families (model card, failure modes). Such craters are flagged and their
verdict is set to ``neither``: neither training set represents them.

The ranges are checked one by one, and one check is joint: how a crater is seen. Real
highland craters are often rough, crowded and coarsely resolved at once, a corner the
training craters hardly reach even where each measure alone is within their range. A
fitted model carries the context measures of its training craters
(``context_reference_``, set by :func:`morpho.scoring._training.train_model`), and a crater
is flagged when fewer than :data:`MIN_CONTEXT_SHARE` of them are at least as rough, as
crowded and as coarse as it is: a data-depth check of the model's applicability domain
(common practice for classifiers applied beyond their training data; e.g. Netzeva et al.
2005, ATLA 33:155, from memory).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..bodies import Body
from ._training import TRAINING_BANDS, TRAINING_DEGRADATION

__all__ = ["training_domain_notes", "context_reference", "context_share", "outside_context", "CONTEXT_COLUMNS",
           "MAX_DIAMETER_OVER_TRANSITION", "MIN_CONTEXT_SHARE"]

#: Largest training diameter as a multiple of the body's transition diameter
#: (``morpho.synth.render_crater_patches`` draws D_t / 5 .. 5 D_t).
MAX_DIAMETER_OVER_TRANSITION = 5.0
#: How a crater is seen, each with the direction in which it gets harder to measure:
#: rougher surroundings, more of them covered by neighbours, fewer pixels per diameter.
CONTEXT_COLUMNS = ("exterior_roughness", "neighbour_cover", "pixels_per_diameter")
_HARDER = np.array([1.0, 1.0, -1.0])
#: A crater is outside the domain when fewer than this share of the training craters are at
#: least as hard to measure on all three context measures at once. On the shipped model: 1.7 %
#: of its own training craters (leave-one-out) and 59 of the 66 otherwise in-domain craters of
#: the real LOLA highland crop in ../shared/data (DEVELOPERS.md, "Known gaps", other thresholds).
MIN_CONTEXT_SHARE = 0.001
_CHUNK = 512  # craters compared with the reference at a time (bounds the boolean block)


def context_reference(training: pd.DataFrame) -> np.ndarray:
    """The context measures (:data:`CONTEXT_COLUMNS`) of training craters that have all three,
    as an (m, 3) float64 array, in the table's order."""
    values = training[list(CONTEXT_COLUMNS)].to_numpy(np.float64)
    return np.ascontiguousarray(values[np.isfinite(values).all(axis=1)])


def context_share(values, reference) -> np.ndarray:
    """Share of ``reference`` craters at least as rough, as crowded and as coarse as each crater.

    Parameters
    ----------
    values : array_like, shape (n, 3)
        Context measures of the craters (columns as :data:`CONTEXT_COLUMNS`).
    reference : array_like, shape (m, 3)
        Those of the training craters (:func:`context_reference`).

    Returns
    -------
    ndarray, shape (n,)
        In [0, 1]; NaN for a crater missing a measure (or an empty reference).
    """
    v = np.asarray(values, dtype=np.float64).reshape(-1, len(CONTEXT_COLUMNS)) * _HARDER
    ref = np.asarray(reference, dtype=np.float64).reshape(-1, len(CONTEXT_COLUMNS)) * _HARDER
    out = np.full(len(v), np.nan)
    ok = np.flatnonzero(np.isfinite(v).all(axis=1))
    if len(ref) == 0 or ok.size == 0:
        return out
    # Reference sorted hardest-first on the first measure: the rows at least as hard there are a
    # prefix, as long as ``reach``. Craters go in order of that length, so each block compares
    # only the prefix it needs (the rough craters the check is about need few rows).
    ref = ref[np.argsort(-ref[:, 0], kind="stable")]
    reach = np.searchsorted(-ref[:, 0], -v[ok, 0], side="right")
    order = np.argsort(reach, kind="stable")
    ok, reach = ok[order], reach[order]
    for start in range(0, ok.size, _CHUNK):
        idx, lim = ok[start:start + _CHUNK], reach[start:start + _CHUNK]
        head = ref[: lim[-1]]
        hard = head[None, :, 1] >= v[idx, 1, None]
        hard &= head[None, :, 2] >= v[idx, 2, None]
        hard &= np.arange(lim[-1])[None, :] < lim[:, None]
        out[idx] = np.count_nonzero(hard, axis=1) / len(ref)
    return out


def outside_context(craters: pd.DataFrame, context_reference) -> np.ndarray | None:
    """Craters the joint context check puts outside the domain (share below
    :data:`MIN_CONTEXT_SHARE`); None without a reference or without the context columns."""
    if context_reference is None or not all(c in craters for c in CONTEXT_COLUMNS):
        return None
    return context_share(craters[list(CONTEXT_COLUMNS)].to_numpy(np.float64), context_reference) < MIN_CONTEXT_SHARE


def training_domain_notes(craters: pd.DataFrame, body: Body, context_reference=None) -> np.ndarray:
    """Why each crater lies outside the scorer's training domain ('' when inside).

    Parameters
    ----------
    craters : pandas.DataFrame
        Measured craters with ``pixels_per_diameter``, ``diameter_m`` and, if fitted,
        ``kappa_t_over_d2``; with ``context_reference`` also ``exterior_roughness`` and
        ``neighbour_cover``.
    body : Body
    context_reference : array_like, shape (m, 3), optional
        The training craters' context measures (a fitted model's ``context_reference_``);
        without it the joint context check is skipped.

    Returns
    -------
    ndarray of str, shape (n,)
    """
    n = len(craters)
    lo = min(b[0] for b in TRAINING_BANDS)
    hi = max(b[1] for b in TRAINING_BANDS)
    ppd = craters["pixels_per_diameter"].to_numpy(float) if "pixels_per_diameter" in craters else np.full(n, np.nan)
    dia = craters["diameter_m"].to_numpy(float) if "diameter_m" in craters else np.full(n, np.nan)
    kt = craters["kappa_t_over_d2"].to_numpy(float) if "kappa_t_over_d2" in craters else np.full(n, np.nan)
    d_max = MAX_DIAMETER_OVER_TRANSITION * body.transition_diameter_m
    checks = [
        (ppd < lo, f"fewer than {lo:g} px per diameter"),
        (ppd > hi, f"more than {hi:g} px per diameter"),
        (dia > d_max, f"diameter above {MAX_DIAMETER_OVER_TRANSITION:g} x the {body.name} transition diameter"),
        (kt > TRAINING_DEGRADATION[1], f"degradation kappa t/D^2 above {TRAINING_DEGRADATION[1]:g}"),
    ]
    outside = outside_context(craters, context_reference)
    if outside is not None:
        checks.append((outside, f"fewer than {100 * MIN_CONTEXT_SHARE:g} % of training craters as rough, as crowded "
                                "and as coarse"))
    notes = np.full(n, "", dtype=object)
    for mask, text in checks:
        notes = np.where(mask & (notes == ""), text, np.where(mask, notes + "; " + text, notes))
    return notes
