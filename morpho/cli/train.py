"""`morpho train`: rebuild a scoring model from a folder of hypothesis files, reproducibly from a seed."""

from __future__ import annotations

import logging

import click

from ..caveats import CAVEATS_SHORT

__all__ = ["command"]


@click.command(name="train")
@click.option("--hypotheses", "hypotheses_dir", required=True,
              type=click.Path(exists=True, file_okay=False),
              help="Folder of hypothesis files (*.toml): impact plus one or more electrode-spot families.")
@click.option("-o", "--output", "output", required=True, type=click.Path(dir_okay=False),
              help="Model to write, e.g. models/NAME (NAME.skops plus NAME.card.json/.card.md beside it).")
@click.option("--seed", default=6, show_default=True, type=click.IntRange(min=0),
              help="Root seed: same files + seed + sizes = same model.")
@click.option("--n-per-class", default=3600, show_default=True, type=click.IntRange(min=30),
              help="Impact training craters; the spot families share the same number.")
@click.option("--jobs", default=None, type=click.IntRange(min=1),
              help="Processes rendering and measuring training craters [default: all cores]; "
                   "the model does not depend on it.")
@click.option("--overwrite", is_flag=True, help="Replace an existing model and card.")
@click.pass_context
def command(ctx, hypotheses_dir, output, seed, n_per_class, jobs, overwrite):
    """Render training craters from the hypothesis files, measure them like real craters,
    fit the impact-vs-electrode-spot scorer and write it with its model card.

    The model measures morphological similarity under the files' assumptions, not mechanism.
    """
    from ..scoring._build import rebuild_model

    if (ctx.find_root().obj or {}).get("verbose", 0) < 2:
        # One line per rendered training surface is debug detail here, not progress.
        logging.getLogger("morpho.synth").setLevel(logging.WARNING)

    path, card = rebuild_model(hypotheses_dir, output, seed=seed, n_per_class=n_per_class,
                               overwrite=overwrite, n_jobs=jobs)
    click.echo(f"wrote {path} (trained in {card['training_time_s']:.0f} s)")
    for row in card["held_out_metrics"]:
        click.echo(f"  held-out {row['band']:>9}: n={row['n']:5d} accuracy={row['accuracy']:.3f} "
                   f"Brier={row['brier']:.3f} ECE={row['ece']:.3f}")
    click.echo(f"note: {CAVEATS_SHORT}")
