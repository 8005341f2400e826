"""Training craters on whole synthetic surfaces: neighbours, superposition and ejecta included.

Single-crater patches teach clean shapes; real craters have neighbours whose ejecta
and rims disturb the flank and rim measurements. A share of the training craters is
therefore taken from whole surfaces (:func:`morpho.synth.generate_surface`) holding
impact and spot craters together, measured at their true positions (with a jittered
first guess) by :func:`morpho.morphometry.measure_craters`.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["GUESS_JITTER", "jittered_guess", "rim_separation", "surface_training_set"]

#: Relative sd of the radius guess and of the centre guess (in radii) handed to the
#: morphometry: a detector's first guess is not exact, so neither is the training crater's.
GUESS_JITTER = (0.08, 0.05)
#: Share of the surface covered by crater interiors (sparse enough that most craters
#: are recognisable, dense enough that neighbours' ejecta reach most flanks).
_COVER = 0.15


def jittered_guess(rows, cols, radius_px, rng: np.random.Generator):
    """Centre and radius guesses scattered around the truth by :data:`GUESS_JITTER`."""
    r = np.asarray(radius_px, dtype=np.float64)
    n = r.size
    r_guess = r * np.exp(rng.normal(0.0, GUESS_JITTER[0], n))
    d_row, d_col = rng.normal(0.0, GUESS_JITTER[1], (2, n)) * r
    return np.asarray(rows, np.float64) + d_row, np.asarray(cols, np.float64) + d_col, r_guess


def rim_separation(craters: pd.DataFrame, every: pd.DataFrame, pixel_size_m: float) -> np.ndarray:
    """Nearest centre distance to another crater over the sum of the two radii (1 = rims touch).

    Parameters
    ----------
    craters, every : DataFrame
        Truth tables (``row, col, diameter_m``); ``every`` holds all stamped craters.
    pixel_size_m : float
    """
    r = craters["diameter_m"].to_numpy(np.float64) / 2.0 / pixel_size_m
    r_all = every["diameter_m"].to_numpy(np.float64) / 2.0 / pixel_size_m
    dist = np.hypot(craters["row"].to_numpy(np.float64)[:, None] - every["row"].to_numpy(np.float64)[None, :],
                    craters["col"].to_numpy(np.float64)[:, None] - every["col"].to_numpy(np.float64)[None, :])
    dist[dist < 1e-6] = np.inf  # the crater itself
    return np.min(dist / (r[:, None] + r_all[None, :]), axis=1, initial=np.inf)


def surface_training_set(hyps: dict, n_craters: int, band, *, body, seed: int, degradation,
                         max_surfaces: int = 400) -> pd.DataFrame:
    """Measured craters from mixed-family synthetic surfaces in one resolution band.

    Parameters
    ----------
    hyps : dict
        ``{family: Hypothesis}``; impact gets weight 1, each spot family ``1 / n_spot``
        (impact : spot = 1 : 1).
    n_craters : int
        Stop once this many craters (all families) are measured.
    band : (float, float)
        Rim diameters in pixels.
    body, seed, degradation
        As :func:`morpho.scoring.build_training_set`. Pixel size is drawn per surface so
        diameters span D_t / 5 to 5 D_t (simple to complex impact craters).
    max_surfaces : int
        Safety bound.

    Returns
    -------
    DataFrame
        ``measure_craters`` columns plus ``family``, ``origin`` (impact/spot),
        ``truth_degradation``, ``truth_complex``, ``truth_diameter_m``, ``truth_depth_diameter``,
        ``truth_visible_fraction``, ``truth_separation`` (:func:`rim_separation`).
    """
    from ..bodies import get_body
    from ..morphometry import measure_craters
    from ..synth import generate_surface

    b = get_body(body)
    spots = sorted(n for n, h in hyps.items() if h.origin != "impact")
    impact = next(n for n, h in hyps.items() if h.origin == "impact")
    weights = {impact: 1.0, **{s: 1.0 / len(spots) for s in spots}}
    lo, hi = (float(v) for v in band)
    mid = float(np.sqrt(lo * hi))
    side = 512 if mid < 40 else 768
    per_surface = int(np.clip(_COVER * side * side / (np.pi * (mid / 2.0) ** 2), 6, 80))
    rng = np.random.default_rng(seed)
    frames, total = [], 0
    for _ in range(max_surfaces):
        if total >= n_craters:
            break
        px = float(np.exp(rng.uniform(np.log(b.transition_diameter_m / 5.0 / mid),
                                      np.log(b.transition_diameter_m * 5.0 / mid))))
        s = generate_surface(b, shape=(side, side), pixel_size_m=px, n_craters=per_surface,
                             families=weights, degradation=degradation,
                             seed=int(rng.integers(2**31 - 1)), diameter_range_px=(lo, hi), hypotheses=hyps)
        t = s.truth[~s.truth["truncated"].astype(bool)]
        if t.empty:
            continue
        r_true = t["diameter_m"].to_numpy(np.float64) / 2.0 / s.pixel_size_m
        rows, cols, r_guess = jittered_guess(t["row"], t["col"], r_true, rng)
        df = measure_craters(s.z, s.pixel_size_m, rows, cols, r_guess, n_boot=0, seed=seed)
        origin = t["origin"].to_numpy().astype(str)
        df["family"] = np.where(origin == "impact", impact, origin)
        df["origin"] = np.where(df["family"] == impact, "impact", "spot")
        df["truth_degradation"] = t["degradation"].to_numpy()
        df["truth_complex"] = t["complex"].to_numpy()
        df["truth_diameter_m"] = t["diameter_m"].to_numpy()
        df["truth_depth_diameter"] = (t["depth_m"] / t["diameter_m"]).to_numpy()
        df["truth_visible_fraction"] = t["visible_fraction"].to_numpy()
        every = pd.concat([s.truth, s.hidden], ignore_index=True) if len(s.hidden) else s.truth
        df["truth_separation"] = rim_separation(t, every, s.pixel_size_m)
        frames.append(df)
        total += len(df)
    return pd.concat(frames, ignore_index=True)
