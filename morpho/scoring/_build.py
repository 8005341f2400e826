"""Rebuild a scoring model from a folder of hypothesis files: train, evaluate, write model + card."""

from __future__ import annotations

import logging
import os
import time
from pathlib import Path

from ..errors import OutputExistsError
from ._card import build_card, card_paths
from ._persistence import save_model
from ._training import (
    SURFACE_SHARE,
    TRAINING_DEGRADATION,
    build_training_set,
    evaluate_model,
    fresh_bowl_check,
    train_model,
)

__all__ = ["DEFAULT_SEED", "DEFAULT_N_PER_CLASS", "rebuild_command", "rebuild_model"]

log = logging.getLogger(__name__)

DEFAULT_SEED = 6
DEFAULT_N_PER_CLASS = 3600
#: Held-out craters per class, rendered with a seed no training crater used.
HELD_OUT_SEED_OFFSET = 1_000_003
#: Normalised degradation of the stress-test craters (beyond the training range).
STRESS_DEGRADATION = (0.02, 0.05)


def rebuild_command(hypotheses_dir, output, seed, n_per_class) -> str:
    """The shell command that rebuilds this model."""
    return (f"morpho train --hypotheses {hypotheses_dir} -o {output} --seed {seed} "
            f"--n-per-class {n_per_class} --overwrite")


def rebuild_model(hypotheses_dir, output, *, seed: int = DEFAULT_SEED,
                  n_per_class: int = DEFAULT_N_PER_CLASS, n_held_out: int | None = None,
                  overwrite: bool = False, body: str = "moon", command_dir=None, n_jobs: int | None = None):
    """Train a model on craters rendered from ``hypotheses_dir`` and write ``<output>.skops`` + card.

    Parameters
    ----------
    hypotheses_dir : path
        Folder of ``*.toml`` hypothesis files (one impact file, one or more spot families).
        Files without sources for their parameters are refused by the loader.
    output : path
        ``models/NAME`` (``.skops`` is appended if absent).
    seed : int
        Root seed: the same files, seed and sizes rebuild the same model.
    n_per_class : int
        Impact training craters; the spot families share the same number.
    n_held_out : int, optional
        Held-out craters per class (default ``n_per_class // 2``).
    overwrite : bool
    body : str
    command_dir : str, optional
        How ``hypotheses_dir`` is spelled in the recorded rebuild command.
    n_jobs : int, optional
        Processes rendering and measuring craters (default: all CPU cores). The model does
        not depend on it.

    Returns
    -------
    (Path, dict)
        The model file and its card.
    """
    from ..hypotheses import load_hypotheses_dir

    out = Path(output)
    if out.suffix != ".skops":
        out = out.with_name(out.name + ".skops")
    existing = [p for p in (out, *card_paths(out)) if p.exists()]
    if existing and not overwrite:
        raise OutputExistsError(f"{len(existing)} output file(s) exist.", path=existing[0],
                                fix="pass --overwrite, or choose another -o.")
    hyps = load_hypotheses_dir(hypotheses_dir)
    n_held_out = max(30, n_per_class // 2) if n_held_out is None else int(n_held_out)
    jobs = {"n_jobs": int(n_jobs) if n_jobs else (os.cpu_count() or 1)}

    t0 = time.perf_counter()
    log.info("rendering and measuring %d training craters per class", n_per_class)
    train = build_training_set(hyps, n_per_class=n_per_class, body=body, seed=seed, **jobs)
    model = train_model(train, seed=seed)
    train_s = time.perf_counter() - t0
    log.info("trained in %.0f s; evaluating on held-out craters", train_s)
    held = build_training_set(hyps, n_per_class=n_held_out, body=body, seed=seed + HELD_OUT_SEED_OFFSET,
                              **jobs)
    evaluation = evaluate_model(model, held)
    bowls = fresh_bowl_check(model, seed=seed + 2 * HELD_OUT_SEED_OFFSET, body=body)
    # Stress test outside the training range: strongly degraded craters of every family.
    worn = build_training_set(hyps, n_per_class=max(30, n_held_out // 3), body=body,
                              seed=seed + 3 * HELD_OUT_SEED_OFFSET, degradation=STRESS_DEGRADATION, **jobs)
    stress = evaluate_model(model, worn)

    counts = train["family"].value_counts().sort_index()
    ok = train["measure_status"].astype(str).eq("ok") if "measure_status" in train else None
    training = {
        "crater_families": {k: int(v) for k, v in counts.items()},
        "n_rendered": int(len(train)),
        "n_measured_ok": int(ok.sum()) if ok is not None else int(len(train)),
        "pixels_per_diameter_bands": "10-20, 20-50, 50-80 (equal shares)",
        "body": body,
        "seed": seed,
        "degradation_kappa_t_over_D2": list(TRAINING_DEGRADATION),
        "surface_share": SURFACE_SHARE,
        "held_out": f"{n_held_out} impact craters + the same number of spot craters, seed {seed + HELD_OUT_SEED_OFFSET}",
        "spot_family_accuracy_held_out": round(evaluation["family_accuracy"], 4),
        "verdict_shares_held_out": evaluation["verdicts"],
        "held_out_outside_joint_context_check": evaluation.get("context_flagged", {}),
        "renderer": "morpho.synth.render_crater_patches",
        "measurement": "morpho.morphometry.measure_craters (same code path as real craters)",
    }
    hyp_rows = [{"family": h.name, "origin": h.origin, "file": Path(h.path).name, "sha256": h.sha256}
                for h in sorted(hyps.values(), key=lambda h: h.name)]
    cmd_dir = command_dir if command_dir is not None else str(hypotheses_dir)
    card = build_card(
        name=out.name[: -len(".skops")], model=model, hypotheses=hyp_rows, training=training,
        metrics=evaluation["bands"], bowl_check=bowls, metrics_by_context=evaluation["by_context"],
        stress={"what": f"strongly degraded craters, kappa t / D^2 in {list(STRESS_DEGRADATION)} "
                        "(outside the training range)",
                "bands": stress["bands"], "verdicts": stress["verdicts"]},
        rebuild_command=rebuild_command(cmd_dir, str(out.with_suffix("")), seed, n_per_class),
        training_time_s=train_s,
    )
    save_model(model, out, card, overwrite=overwrite)
    return out, card
