"""Training data and training: craters rendered from the hypothesis files, measured like real craters.

No shortcut from generator parameters to features: every training crater is rendered
as a small DEM patch by :func:`morpho.synth.render_crater_patches` and measured by
:func:`morpho.morphometry.measure_craters`, the code path real craters take.
"""

from __future__ import annotations

import functools
import logging
import time

import numpy as np
import pandas as pd

from ..errors import InputError
from ._estimator import ImpactSpotClassifier
from ._metrics import metrics_by_band
from ._score import DERIVED_FEATURES, add_derived_features
from ._surfaces import jittered_guess, rim_separation, surface_training_set

__all__ = [
    "TRAINING_BANDS",
    "NON_FEATURES",
    "feature_columns",
    "measure_patches",
    "build_training_set",
    "train_model",
    "balance_classes",
    "evaluate_model",
    "fresh_bowl_check",
]

log = logging.getLogger(__name__)

#: Pixels-per-diameter bands the training craters are spread over (equal numbers each):
#: the model is trained across resolutions, with pixels_per_diameter as a feature.
TRAINING_BANDS = ((10.0, 20.0), (20.0, 50.0), (50.0, 80.0))

#: Normalised degradation kappa t / D^2 of the training craters (uniform, every family):
#: fresh to moderately degraded, d/d0 down to ~0.5 for a simple lunar crater (Fassett &
#: Thomson 2014, JGR Planets 119:2255, diffusion model: d/d0 ~ 0.52 at 0.0165). More
#: degraded craters lose the shape that tells the hypotheses apart (see the model card).
TRAINING_DEGRADATION = (0.0, 0.02)
#: Share of training craters taken from whole mixed-family surfaces (the rest: patches).
SURFACE_SHARE = 0.75

#: Dimensionless morphometry columns that describe data or geometry, not crater shape.
NON_FEATURES = frozenset({
    "detection_confidence", "rim_coverage", "measure_status", "source_tile", "lon", "lat",
    "center_x", "center_y", "row", "col", "radius_px", "crater_id", "spacing_m",
    "n_valid_azimuths", "centre_shift_px", "center_shift_px",
    # orientation and terrain, not crater shape (the model should be rotation invariant)
    "ellipse_azimuth_deg", "regional_slope_deg",
    # a fit of the impact diffusion model (needs a body), not a model-free shape measure
    "kappa_t_over_d2",
    # measured on the mean profile out to 2.5 R, so a neighbour's rim or ejecta swings it
    # (fresh impact craters next to a neighbour read 7-20 instead of ~3): too fragile
    "rim_flank_decay_exponent",
    # the surroundings, not the crater: a measurement-quality covariate for the reader
    "exterior_roughness",
})


def feature_columns(columns) -> list[str]:
    """Model features among ``columns``: dimensionless shape measures plus ``pixels_per_diameter``.

    Taken from the morphometry section of the data dictionary: dimensionless (unit
    ``"1"``) or angular (degree) float columns and presence flags (bool, as 0/1), without
    their ``_err`` companions and without :data:`NON_FEATURES`; plus the ratios of
    :data:`morpho.scoring._score.DERIVED_FEATURES`. Absolute sizes (m) are left out on
    purpose: the spot families have no planetary size range, so a size feature would
    learn the generator's choice, not morphology.
    """
    from ..dictionary import _morphometry

    allowed = {"1", "degree", "deg", "°"}
    shape = [
        f.name for f in _morphometry.FIELDS
        if ((f.unit in allowed and f.dtype == "float64") or f.dtype == "bool") and f.name not in NON_FEATURES
    ]
    present = set(columns)
    cols = [c for c in shape if c in present]
    cols += [name for name, (num, den, _) in DERIVED_FEATURES.items() if num in present and den in present]
    if "pixels_per_diameter" in present or "radius_px" in present:
        cols.append("pixels_per_diameter")
    return cols


def pack_patches(sides, width: int = 4096, gap: int = 8):
    """Shelf-pack square patches of the given sides into one canvas.

    Returns
    -------
    offsets : ndarray, shape (n, 2)
        Top-left (row, col) of each patch.
    shape : (int, int)
        Canvas size.
    """
    sides = np.asarray(sides, dtype=np.int64)
    order = np.argsort(-sides, kind="stable")
    offsets = np.zeros((sides.size, 2), dtype=np.int64)
    top = left = shelf = 0
    for i in order:  # a loop over patches, not pixels: a few hundred iterations
        s = int(sides[i])
        if left and left + s > width:
            top, left, shelf = top + shelf + gap, 0, 0
        offsets[i] = (top, left)
        left += s + gap
        shelf = max(shelf, s)
    return offsets, (top + shelf, max(width, int(sides.max(initial=1))))


def measure_patches(patches, truth: pd.DataFrame, seed: int, measure=None, batch: int = 150) -> pd.DataFrame:
    """Measure every rendered patch with ``measure_craters``, from a jittered first guess.

    The patches are packed into NaN-separated canvases so that one vectorised
    ``measure_craters`` call (per-crater pixel size) measures many craters; every
    measurement stays inside its own patch (the morphometry reads out to 2.5 R, a patch
    spans +-3 R), and NaN is no data, never elevation.

    Parameters
    ----------
    patches : list of ndarray
        From :func:`morpho.synth.render_crater_patches`.
    truth : DataFrame
        Its truth table (``row, col, radius_px, pixel_size_m``).
    seed : int
        Seeds the guess jitter and the morphometry.
    measure : callable, optional
        Default :func:`morpho.morphometry.measure_craters`.
    batch : int
        Patches per canvas (memory bound).

    Returns
    -------
    DataFrame, one row per patch, in patch order; ``row, col`` are in patch pixels.
    """
    if measure is None:
        from ..morphometry import measure_craters as measure
    rng = np.random.default_rng(seed)
    n = len(patches)
    rows, cols, r_guess = jittered_guess(truth["row"], truth["col"], truth["radius_px"], rng)
    spacing = truth["pixel_size_m"].to_numpy(np.float64)
    frames = []
    for start in range(0, n, batch):
        idx = np.arange(start, min(n, start + batch))
        sides = np.array([max(patches[i].shape) for i in idx])
        offsets, shape = pack_patches(sides)
        canvas = np.full(shape, np.nan, dtype=np.float64)
        for (top, left), i in zip(offsets, idx, strict=True):
            h, w = patches[i].shape
            canvas[top:top + h, left:left + w] = patches[i]
        df = measure(canvas, spacing[idx], rows[idx] + offsets[:, 0], cols[idx] + offsets[:, 1],
                     r_guess[idx], n_boot=0, seed=seed)
        df["row"] = df["row"].to_numpy() - offsets[:, 0]
        df["col"] = df["col"].to_numpy() - offsets[:, 1]
        frames.append(df)
    return pd.concat(frames, ignore_index=True)


def build_training_set(
    hypotheses=None,
    n_per_class: int = 600,
    pixels_per_diameter_bands=TRAINING_BANDS,
    noise_m=None,
    body: str = "moon",
    seed: int = 0,
    degradation=TRAINING_DEGRADATION,
    surface_share: float = SURFACE_SHARE,
    n_jobs: int = 1,
) -> pd.DataFrame:
    """Render and measure craters of every hypothesis family.

    Parameters
    ----------
    hypotheses : dict, optional
        ``{family: Hypothesis}`` (default: the shipped files).
    n_per_class : int
        Craters of the impact hypothesis; the same total is split evenly over the spot
        families (so impact : spot = 1 : 1, matching the equal priors of ``p_impact``).
    pixels_per_diameter_bands : sequence of (float, float)
        Resolution bands; each family's craters are split evenly over them.
    noise_m : float, optional
        Passed to the renderer (default: its own).
    body : str
    seed : int
        Root seed; each (family, band) gets its own child seed.
    degradation : (float, float)
        Range of the normalised degradation ``kappa t / D^2`` (uniform), the same for
        every family so that degradation cannot tell them apart.
    surface_share : float
        Share of the craters taken from whole mixed-family surfaces (neighbours, ejecta,
        superposition; :func:`morpho.scoring._surfaces.surface_training_set`); the rest are
        single-crater patches (:func:`morpho.synth.render_crater_patches`).
    n_jobs : int
        Processes rendering and measuring in parallel (the table does not depend on it).

    Returns
    -------
    DataFrame
        The measured features, ``pixels_per_diameter``, and truth columns ``family``,
        ``origin``, ``ppd_band``, ``context`` (patch/surface), ``truth_degradation``,
        ``truth_complex``, ``truth_diameter_m``, ``truth_depth_diameter``.
    """
    from ..hypotheses import default_hypotheses

    hyps = default_hypotheses() if hypotheses is None else dict(hypotheses)
    impact = [h for h in hyps.values() if h.origin == "impact"]
    spots = [h for h in hyps.values() if h.origin != "impact"]
    if len(impact) != 1 or not spots:
        raise InputError(
            f"training needs exactly one impact hypothesis and at least one spot family; got "
            f"impact={[h.name for h in impact]}, spot={[h.name for h in spots]}.",
            fix="put impact.toml and at least one spot-family file in the hypotheses folder.")
    n_surface = int(round(n_per_class * float(surface_share)))
    n_patch = n_per_class - n_surface
    n_spot = int(np.ceil(n_patch / len(spots)))
    plan = [(impact[0], n_patch)] + [(h, n_spot) for h in sorted(spots, key=lambda h: h.name)]
    bands = [tuple(map(float, b)) for b in pixels_per_diameter_bands]
    children = np.random.SeedSequence(seed).spawn(len(plan) * len(bands) + len(bands))
    # Every job has its own child seed and the results are joined in job order, so the
    # table is the same whatever the number of processes.
    jobs = []
    k = 0
    for h, n in plan:
        per_band = np.full(len(bands), n // len(bands))
        per_band[: n % len(bands)] += 1
        for band, nb in zip(bands, per_band, strict=True):
            child = int(children[k].generate_state(1)[0])
            k += 1
            if nb > 0:
                jobs.append(("patch", h.name, int(nb), band, child))
    if n_surface > 0:
        per_band = int(np.ceil(2 * n_surface / len(bands)))
        for band in bands:
            child = int(children[k].generate_state(1)[0])
            k += 1
            # Split each band's surfaces into a few jobs so that processes stay busy.
            parts = max(1, min(8, per_band // 100))
            for j in range(parts):
                sub = int(np.random.SeedSequence([child, j]).generate_state(1)[0]) if parts > 1 else child
                jobs.append(("surface", None, per_band // parts + (j < per_band % parts), band, sub))
    args = dict(hyps=hyps, noise_m=noise_m, body=body, degradation=degradation)
    n_jobs = max(1, min(int(n_jobs), len(jobs)))
    if n_jobs == 1:
        frames = [_training_job(job, **args) for job in jobs]
    else:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        # "spawn": a clean interpreter per worker (no inherited threads or locks); the
        # one-thread BLAS setting travels in the environment.
        with ProcessPoolExecutor(n_jobs, mp_context=multiprocessing.get_context("spawn")) as pool:
            frames = list(pool.map(functools.partial(_training_job, **args), jobs))
    return pd.concat(frames, ignore_index=True)


def _training_job(job, *, hyps, noise_m, body, degradation) -> pd.DataFrame:
    """Render and measure one (kind, family, n, band, seed) job of :func:`build_training_set`."""
    from ..synth import render_crater_patches

    kind, family, n, band, seed = job
    if kind == "surface":
        df = surface_training_set(hyps, n, band, body=body, seed=seed, degradation=degradation)
        df["context"] = "surface"
    else:
        h = hyps[family]
        patches, truth = render_crater_patches(family, n, pixels_per_diameter=band, noise_m=noise_m, body=body,
                                               seed=seed, hypotheses=hyps, degradation=degradation)
        df = measure_patches(patches, truth, seed=seed)
        # Truth for diagnostics only (never a feature: feature_columns reads the dictionary).
        for col in ("degradation", "complex", "diameter_m"):
            if col in truth:
                df[f"truth_{col}"] = truth[col].to_numpy()
        df["truth_depth_diameter"] = (truth["depth_m"] / truth["diameter_m"]).to_numpy()
        if "pixels_per_diameter" not in df:
            df["pixels_per_diameter"] = 2.0 * df["radius_px"].astype(np.float64)
        df["family"] = family
        df["origin"] = "impact" if h.origin == "impact" else "spot"
        df["context"] = "patch"
    df["ppd_band"] = f"{band[0]:g}-{band[1]:g}"
    return df


def train_model(training: pd.DataFrame, seed: int = 0, **params) -> ImpactSpotClassifier:
    """Fit an :class:`ImpactSpotClassifier` on a training table from :func:`build_training_set`.

    Craters the morphometry could not measure (``measure_status != "ok"``) are dropped. The
    fitted model also keeps the context measures of the craters it learnt from
    (``context_reference_``, for :func:`morpho.scoring._domain.training_domain_notes`).
    """
    from ._domain import CONTEXT_COLUMNS, context_reference  # _domain imports this module

    df = add_derived_features(_usable(training))
    # A column nobody could measure carries nothing (and trips the boosting's binning).
    cols = [c for c in feature_columns(df.columns) if df[c].notna().any()]
    if not cols:
        raise InputError("the training table has no morphometric feature columns.",
                         fix="build it with build_training_set (measure_craters output).")
    df = balance_classes(df, seed)
    model = ImpactSpotClassifier(random_state=seed, **params)
    model.fit(df[cols].astype(np.float64), df["family"].to_numpy())
    if all(c in df for c in CONTEXT_COLUMNS):
        # How the craters it learnt from were seen: the scorer's joint domain check (see _domain)
        model.context_reference_ = context_reference(df)
    return model


def balance_classes(df: pd.DataFrame, seed: int) -> pd.DataFrame:
    """Subsample to equal spot families and impact = all spot craters together.

    A few craters per family fail to measure, so the rendered 1 : 1 balance drifts; an
    exactly balanced table gives the equal priors of ``p_impact`` without sample weights
    (and keeps the boosting on its fast unweighted path).
    """
    rng = np.random.default_rng(seed)
    spot_counts = df.loc[df["origin"] != "impact", "family"].value_counts()
    per_spot = int(spot_counts.min())
    n_impact = min(int((df["origin"] == "impact").sum()), per_spot * spot_counts.size)
    per_spot = n_impact // spot_counts.size
    keep = []
    for _family, grp in df.groupby("family", sort=True):
        k = n_impact if (grp["origin"] == "impact").all() else per_spot
        keep.append(np.sort(rng.choice(grp.index.to_numpy(), size=k, replace=False)))
    return df.loc[np.concatenate(keep)]


def _usable(df: pd.DataFrame) -> pd.DataFrame:
    if "measure_status" in df:
        df = df[df["measure_status"].astype(str) == "ok"]
    return df


def evaluate_model(model: ImpactSpotClassifier, held_out: pd.DataFrame) -> dict:
    """Held-out figures: impact-vs-spot metrics by band, spot-family accuracy, verdict shares.

    Returns
    -------
    dict
        ``{"bands": [...], "family_accuracy": float, "verdicts": {...}, "by_context": {setting: [...]},
        "n_unmeasured": int, "context_flagged": {origin: share}}``; settings are :data:`SETTINGS`
        (isolated patch craters, and craters on crowded surfaces whose rim is clear of, or overlaps,
        a neighbour's). Metrics and verdicts are the model's own; ``context_flagged`` is the share
        a survey's joint context check would set to 'neither' on top.
    """
    from ._score import score_craters

    df = _usable(held_out)
    scores = score_craters(df, model)
    is_impact = (df["origin"] == "impact").to_numpy()
    bands = metrics_by_band(is_impact, scores["p_impact"].to_numpy(), df["pixels_per_diameter"].to_numpy())
    spot = ~is_impact
    fam_acc = float(np.mean(scores["spot_family"].to_numpy()[spot] == df["family"].to_numpy()[spot]))
    verdicts = {
        origin: scores.loc[(df["origin"] == origin).to_numpy(), "verdict"].value_counts(normalize=True)
        .round(4).to_dict()
        for origin in ("impact", "spot")
    }
    by_context = {}
    for label, sel in _settings(df).items():
        if sel.any():
            by_context[label] = metrics_by_band(is_impact[sel], scores["p_impact"].to_numpy()[sel],
                                                df["pixels_per_diameter"].to_numpy()[sel])
    return {"bands": bands, "family_accuracy": fam_acc, "verdicts": verdicts, "by_context": by_context,
            "n_unmeasured": int(len(held_out) - len(df)), "context_flagged": _context_flagged(df, model)}


def _context_flagged(df: pd.DataFrame, model) -> dict:
    """Share of craters per origin that the survey's joint context check would call outside the
    training domain (verdict 'neither'; see :mod:`morpho.scoring._domain`); {} without a reference."""
    from ._domain import outside_context

    flagged = outside_context(df, getattr(model, "context_reference_", None))
    if flagged is None:
        return {}
    origin = df["origin"].to_numpy()
    return {o: round(float(np.mean(flagged[origin == o])), 4) for o in ("impact", "spot") if np.any(origin == o)}


#: Labels of the held-out settings reported separately.
SETTINGS = ("isolated", "crowded, rim clear", "crowded, rims overlap")


def _settings(df: pd.DataFrame) -> dict:
    """Row masks per setting: isolated patch craters; surface craters whose rim is clear of
    every neighbour's (separation >= 1 radii sum) or overlaps one."""
    ctx = df["context"].to_numpy() if "context" in df else np.full(len(df), "")
    sep = df["truth_separation"].to_numpy(np.float64) if "truth_separation" in df else np.full(len(df), np.nan)
    surface = ctx == "surface"
    return {SETTINGS[0]: ctx == "patch", SETTINGS[1]: surface & (sep >= 1.0),
            SETTINGS[2]: surface & (sep < 1.0)}


def fresh_bowl_check(model: ImpactSpotClassifier, *, seed: int = 12345, n_surfaces: int = 3,
                     body: str = "moon") -> dict:
    """Share of fresh, simple (Pike-shaped) impact craters on unseen synthetic DEMs with p_impact >= 0.5.

    Whole surfaces from :func:`morpho.synth.generate_surface` (fractal background,
    superposition, blur, noise; 40 fresh impact craters of 20-80 px per 512 x 512 DEM,
    all simple at the default pixel size), measured at the truth positions with
    ``measure_craters``. Reported for all of them and for those whose rim does not
    overlap a neighbour's (rim-to-rim separation >= the sum of the radii): a bowl cut by a
    neighbour is no longer Pike-shaped.

    Returns
    -------
    dict
        ``n``, ``share_p_impact_ge_0_5`` (all), ``n_unoverlapped``,
        ``share_unoverlapped``, ``median_p_impact``, ``source``.
    """
    from ..morphometry import measure_craters
    from ..synth import generate_surface
    from ._score import score_craters

    p_all, sep_all = [], []
    for i in range(n_surfaces):
        s = generate_surface(body, shape=(512, 512), n_craters=40, families={"impact": 1.0},
                             degradation=None, seed=seed + i, diameter_range_px=(20.0, 80.0))
        every = pd.concat([s.truth, s.hidden], ignore_index=True) if len(s.hidden) else s.truth
        t = s.truth
        t = t[(~t["complex"].astype(bool)) & (t["degradation"] == 0) & (~t["truncated"].astype(bool))]
        if t.empty:
            continue
        radius_px = t["diameter_m"].to_numpy() / 2.0 / s.pixel_size_m
        feats = measure_craters(s.z, s.pixel_size_m, t["row"].to_numpy(), t["col"].to_numpy(), radius_px,
                                n_boot=0, seed=seed)
        p_all.append(score_craters(feats, model)["p_impact"].to_numpy())
        sep_all.append(rim_separation(t, every, s.pixel_size_m))
    p = np.concatenate(p_all) if p_all else np.zeros(0)
    sep = np.concatenate(sep_all) if sep_all else np.zeros(0)
    ok = np.isfinite(p)
    p, sep = p[ok], sep[ok]
    alone = sep >= 1.0

    def share(v):
        return float(np.mean(v >= 0.5)) if v.size else float("nan")

    return {"n": int(p.size), "share_p_impact_ge_0_5": share(p),
            "n_unoverlapped": int(alone.sum()), "share_unoverlapped": share(p[alone]),
            "median_p_impact": float(np.median(p)) if p.size else float("nan"),
            "source": "morpho.synth.generate_surface, 40 fresh simple impact craters (Pike 1977 laws) per "
                      f"512 x 512 DEM, seeds {seed}..{seed + n_surfaces - 1}, 20-80 px"}


def timed(fn, *args, **kwargs):
    """``(result, seconds)`` of ``fn(*args, **kwargs)`` (wall clock)."""
    t0 = time.perf_counter()
    out = fn(*args, **kwargs)
    return out, time.perf_counter() - t0
