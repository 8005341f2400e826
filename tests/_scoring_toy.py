"""Toy crater feature tables for the scoring tests (no rendering, no morphometry).

Impact craters: depth/diameter near Pike's 0.2 for fresh simple lunar craters (Pike 1977,
Impact and Explosion Cratering, Pergamon, 489-509), shallowing with degradation; spot
families: shallower bowls with taller, sharper melt rims (qualitative, published-values
sheet section 6; the numbers are assumptions of this toy, not measurements).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

FEATURES = ["depth_diameter_ratio", "rim_height_ratio", "rim_sharpness", "outline_irregularity",
            "pixels_per_diameter"]


def toy_features(n_per_family: int, seed: int) -> tuple[pd.DataFrame, np.ndarray]:
    """Toy feature table with families impact, cathode_spot, anode_spot (n_per_family each)."""
    rng = np.random.default_rng(seed)
    n = n_per_family
    ppd = rng.uniform(10, 80, 3 * n)
    blur = 1.0 / np.sqrt(ppd / 10.0)  # fewer pixels, noisier features
    deg = rng.uniform(0, 1, n)
    dd = np.concatenate([0.2 * (1 - 0.5 * deg), rng.uniform(0.06, 0.12, n), rng.uniform(0.03, 0.08, n)])
    hh = np.concatenate([0.036 * (1 - 0.5 * deg), rng.uniform(0.06, 0.09, n), rng.uniform(0.02, 0.05, n)])
    sharp = np.concatenate([rng.uniform(0.2, 0.6, n), rng.uniform(0.6, 1.0, n), rng.uniform(0.1, 0.4, n)])
    irr = np.concatenate([rng.uniform(0.0, 0.06, n), rng.uniform(0.05, 0.15, n), rng.uniform(0.02, 0.1, n)])
    X = pd.DataFrame({
        "depth_diameter_ratio": dd + rng.normal(0, 0.01, 3 * n) * blur,
        "rim_height_ratio": hh + rng.normal(0, 0.005, 3 * n) * blur,
        "rim_sharpness": sharp + rng.normal(0, 0.05, 3 * n) * blur,
        "outline_irregularity": irr + rng.normal(0, 0.01, 3 * n) * blur,
        "pixels_per_diameter": ppd,
    })
    y = np.repeat(np.array(["impact", "cathode_spot", "anode_spot"]), n)
    return X, y


def fresh_pike_bowl(depth_diameter_ratio: float = 0.2, ppd: float = 40.0) -> pd.DataFrame:
    """One toy feature row of a fresh Pike-shaped bowl, d/D adjustable (Pike 1977)."""
    return pd.DataFrame({"depth_diameter_ratio": [depth_diameter_ratio], "rim_height_ratio": [0.036],
                         "rim_sharpness": [0.4], "outline_irregularity": [0.03], "pixels_per_diameter": [ppd]})
