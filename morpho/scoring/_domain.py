"""Training domain of the scorer: where a verdict interpolates between training craters.

The default model is trained on synthetic craters of 10-80 px per diameter, diameters up
to 5 transition diameters of the body, and degradation kappa t / D^2 up to 0.02 (see
``_training.py`` and the model card). Outside that domain the classifier extrapolates,
and on real saturated highland terrain that extrapolation was seen to favour the
electrode-spot families (model card, failure modes). Such craters are flagged and their
verdict is set to ``neither``: neither training set represents them.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..bodies import Body
from ._training import TRAINING_BANDS, TRAINING_DEGRADATION

__all__ = ["training_domain_notes", "MAX_DIAMETER_OVER_TRANSITION"]

#: Largest training diameter as a multiple of the body's transition diameter
#: (``morpho.synth.render_crater_patches`` draws D_t / 5 .. 5 D_t).
MAX_DIAMETER_OVER_TRANSITION = 5.0


def training_domain_notes(craters: pd.DataFrame, body: Body) -> np.ndarray:
    """Why each crater lies outside the scorer's training domain ('' when inside).

    Parameters
    ----------
    craters : pandas.DataFrame
        Measured craters with ``pixels_per_diameter``, ``diameter_m`` and, if fitted,
        ``kappa_t_over_d2``.
    body : Body

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
    notes = np.full(n, "", dtype=object)
    for mask, text in checks:
        notes = np.where(mask & (notes == ""), text, np.where(mask, notes + "; " + text, notes))
    return notes
