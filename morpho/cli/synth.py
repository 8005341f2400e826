"""`morpho synth`: generate a synthetic DEM with known craters (GeoTIFF + truth catalogue)."""

from __future__ import annotations

from pathlib import Path

import click

from ..errors import InputError

__all__ = ["command"]


def _families(ctx, param, value):
    """Parse ``impact=0.8,cathode_spot=0.2`` (a bare name means weight 1)."""
    out = {}
    for part in (p.strip() for p in value.split(",") if p.strip()):
        name, _, w = part.partition("=")
        try:
            out[name.strip()] = float(w) if w else 1.0
        except ValueError as err:
            raise click.BadParameter(f"weight of {name!r} must be a number; got {w!r}") from err
    if not out:
        raise click.BadParameter("give at least one family, e.g. impact or impact=0.8,cathode_spot=0.2")
    return out


def _degradation(ctx, param, value):
    if value is None or value == "hypothesis":
        return value
    lo, sep, hi = value.partition(":")
    try:
        return (float(lo), float(hi)) if sep else float(lo)
    except ValueError as err:
        raise click.BadParameter(f"expected X, LO:HI or 'hypothesis'; got {value!r}") from err


@click.command(name="synth")
@click.option("-o", "--out-dir", required=True, type=click.Path(file_okay=False, path_type=Path),
              help="Folder to write <name>.tif, <name>_truth.csv and <name>_truth.gpkg into (created if missing).")
@click.option("--name", default=None, help="File stem (default: <body>_synth_<seed>).")
@click.option("--body", default="moon", show_default=True, help="Body in morpho.bodies (moon, mars, mercury, ...).")
@click.option("--seed", default=0, show_default=True, type=int, help="Random seed (same seed = same files).")
@click.option("--size", default=1024, show_default=True, type=click.IntRange(16, 16384),
              help="Tile side in pixels (square).")
@click.option("--pixel-size", type=click.FloatRange(min=0, min_open=True), default=None,
              help="Ground pixel size in metres [default: transition diameter / 600].")
@click.option("--craters", "n_craters", type=click.IntRange(min=0), default=None,
              help="Number of craters [default: one per 4000 px].")
@click.option("--families", default="impact", show_default=True, callback=_families,
              help="Family mix, e.g. impact=0.8,cathode_spot=0.2.")
@click.option("--layout", default="random", show_default=True,
              type=click.Choice(["random", "clustered", "chains", "rim_on_rim", "hypothesis"]),
              help="Spatial arrangement ('hypothesis' = each family's own weights).")
@click.option("--degradation", default=None, callback=_degradation,
              help="kappa*t/D^2 per crater: X (uniform 0..X), LO:HI, or 'hypothesis' [default: fresh].")
@click.option("--min-diameter-px", default=16.0, show_default=True, type=float, help="Smallest crater (px).")
@click.option("--max-diameter-px", default=160.0, show_default=True, type=float, help="Largest crater (px).")
@click.option("--sfd-slope", type=float, default=None,
              help="Cumulative power-law SFD exponent for all families (default: each file's model).")
@click.option("--noise", "noise_m", type=click.FloatRange(min=0), default=None,
              help="White noise sd in metres [default: 1 % of the pixel size].")
@click.option("--psf", "psf_sigma_px", type=click.FloatRange(min=0), default=0.5, show_default=True,
              help="Gaussian point-spread sigma in pixels.")
@click.option("--nodata-fraction", type=click.FloatRange(0, 0.9), default=0.0, show_default=True,
              help="Fraction of the tile set to nodata (NaN) in blob-shaped holes.")
@click.option("--hypotheses", "hyp_dir", type=click.Path(exists=True, file_okay=False, path_type=Path),
              default=None, help="Folder of hypothesis *.toml files (copies of morpho/hypotheses/ you edited).")
@click.option("--overwrite", is_flag=True, help="Replace existing output files.")
def command(out_dir, name, body, seed, size, pixel_size, n_craters, families, layout, degradation,
            min_diameter_px, max_diameter_px, sfd_slope, noise_m, psf_sigma_px, nodata_fraction,
            hyp_dir, overwrite):
    """Generate a synthetic DEM with known craters and its truth catalogue.

    Example: morpho synth -o synth_out --body moon --seed 11
    """
    from ..bodies import get_body
    from ..hypotheses import load_hypotheses_dir
    from ..synth import generate_surface, write_surface
    from ..synth._io import check_surface_targets

    b = get_body(body)
    hyps = load_hypotheses_dir(hyp_dir) if hyp_dir is not None else None
    if min_diameter_px >= max_diameter_px:
        raise InputError(f"--min-diameter-px ({min_diameter_px}) must be below --max-diameter-px "
                         f"({max_diameter_px}).")
    stem = name or f"{b.name}_synth_{seed}"
    out_dir.mkdir(parents=True, exist_ok=True)
    check_surface_targets(out_dir, stem, overwrite=overwrite)  # fail before the work, not after
    surface = generate_surface(
        b, (size, size), pixel_size_m=pixel_size, n_craters=n_craters, families=families, layout=layout,
        degradation=degradation, seed=seed, diameter_range_px=(min_diameter_px, max_diameter_px),
        sfd_slope=sfd_slope, hypotheses=hyps, noise_m=noise_m, psf_sigma_px=psf_sigma_px,
        nodata_fraction=nodata_fraction,
    )
    paths = write_surface(surface, out_dir, stem, overwrite=overwrite)
    click.echo(f"wrote {paths['dem']} ({len(surface.truth)} craters in {paths['truth_csv'].name}, "
               f"{paths['truth_gpkg'].name})")
