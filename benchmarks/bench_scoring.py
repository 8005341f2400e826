"""Benchmark: the shipped scoring model on held-out synthetic craters, and scoring speed.

Run ``python benchmarks/bench_scoring.py`` (``--quick`` for a short run). It

1. renders held-out craters of every hypothesis family with a seed no training crater
   used (``morpho.synth.render_crater_patches``), measures them with
   ``morpho.morphometry.measure_craters`` and reports impact-vs-spot accuracy, Brier
   score and expected calibration error per resolution band (10-20, 20-50, >50 px), the
   spot-family accuracy and the verdict shares;
2. scores fresh, simple (Pike-shaped) impact craters on whole unseen synthetic DEMs
   (``morpho.synth.generate_surface``) and reports the share with p_impact >= 0.5;
3. times ``score_craters`` on 10,000 craters (target < 5 s) and ``load_model``.

Writes ``benchmarks/results/scoring.md``.
"""

from __future__ import annotations

import argparse
import os
import time
from pathlib import Path

import numpy as np
import pandas as pd

from morpho.scoring import default_model_path, load_model, score_craters
from morpho.scoring._training import build_training_set, evaluate_model, fresh_bowl_check

RESULTS = Path(__file__).parent / "results" / "scoring.md"
#: Far from the training seeds (6 and 6 + 1_000_003) used by the default model.
BENCH_SEED = 777_777


def _table(rows, cols):
    head = "| " + " | ".join(cols) + " |\n|" + "---|" * len(cols) + "\n"
    body = "".join("| " + " | ".join(_fmt(r[c]) for c in cols) + " |\n" for r in rows)
    return head + body


def _fmt(v):
    return f"{v:.3f}" if isinstance(v, float) else str(v)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer held-out craters")
    ap.add_argument("--model", default=None, help="model file (default: the shipped model)")
    args = ap.parse_args(argv)
    n = 90 if args.quick else 450

    path = Path(args.model) if args.model else default_model_path()
    t0 = time.perf_counter()
    model, card = load_model(path, with_card=True)
    load_s = time.perf_counter() - t0

    t0 = time.perf_counter()
    held = build_training_set(n_per_class=n, seed=BENCH_SEED)
    render_s = time.perf_counter() - t0
    ev = evaluate_model(model, held)
    bowls = fresh_bowl_check(model, seed=BENCH_SEED + 1, n_surfaces=2 if args.quick else 4)

    feats = held[held["measure_status"].astype(str) == "ok"] if "measure_status" in held else held
    big = feats.iloc[np.resize(np.arange(len(feats)), 10_000)].reset_index(drop=True)
    score_craters(big.iloc[:100], model)  # warm-up (imports, thread pools)
    t0 = time.perf_counter()
    scores = score_craters(big, model)
    score_s = time.perf_counter() - t0
    assert len(scores) == 10_000

    lines = [
        "# Scoring benchmark",
        "",
        f"Model: `{path.name}` (card: {card.get('name')}); CPU cores visible: {os.cpu_count()}; "
        f"held-out seed {BENCH_SEED} (not used in training).",
        "",
        "## Held-out synthetic craters (impact vs spot at p_impact = 0.5; equal numbers per hypothesis)",
        "",
        _table(ev["bands"], ["band", "n", "accuracy", "brier", "ece"]),
        "Settings: isolated = one crater per patch; crowded = mixed-family surfaces, the crater's rim "
        "clear of or overlapping a neighbour's (centre distance below the sum of the radii).",
        "",
        *[f"### {ctx}\n\n" + _table(rows, ["band", "n", "accuracy", "brier", "ece"])
          for ctx, rows in ev["by_context"].items()],
        f"Spot-family accuracy (spot craters): {ev['family_accuracy']:.3f}. "
        f"Unmeasurable craters dropped: {ev['n_unmeasured']}.",
        "",
        "Verdict shares: " + "; ".join(
            f"{k}: " + ", ".join(f"{v}={s:.3f}" for v, s in d.items()) for k, d in ev["verdicts"].items()),
        "",
        "Outside the joint context check of a survey's domain guard (verdict 'neither' on top of the shares "
        "above): " + ", ".join(f"{k} {v:.3f}" for k, v in ev.get("context_flagged", {}).items()) + ".",
        "",
        "## Fresh Pike-shaped bowls on unseen synthetic DEMs",
        "",
        f"{bowls['share_unoverlapped']:.3f} of the {bowls['n_unoverlapped']} fresh simple impact craters whose "
        f"rim does not overlap a neighbour's have p_impact >= 0.5 (target >= 0.80); "
        f"{bowls['share_p_impact_ge_0_5']:.3f} of all {bowls['n']} (median p_impact "
        f"{bowls['median_p_impact']:.3f}). {bowls['source']}.",
        "",
        "## Speed",
        "",
        f"- score_craters on 10,000 craters: {score_s:.2f} s (target < 5 s)",
        f"- load_model: {load_s:.2f} s",
        f"- render + measure {len(held)} held-out craters: {render_s:.0f} s",
        "",
    ]
    text = "\n".join(lines)
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text(text)
    print(text)
    return pd.DataFrame(ev["bands"])


if __name__ == "__main__":
    main()
