"""Options shared by several subcommands, defined once with validating callbacks."""

from __future__ import annotations

import os
from pathlib import Path

import click

from ..errors import OutputError, OutputExistsError


def _positive(ctx, param, value):
    if value is not None and value <= 0:
        raise click.BadParameter(f"must be > 0, got {value}")
    return value


def dem_options(f):
    """--body, --band, --pixel-size, --z-scale, --z-offset."""
    f = click.option("--z-offset", type=float, default=None,
                     help="Add this (metres) to every elevation after scaling; overrides the file.")(f)
    f = click.option("--z-scale", type=float, default=None,
                     help="Multiply raw values by this to get metres; overrides the file's scale metadata.")(f)
    f = click.option("--pixel-size", type=float, default=None, callback=_positive,
                     help="Pixel size in metres, for DEMs without a CRS (needs --body).")(f)
    f = click.option("--band", type=int, default=None, callback=_positive,
                     help="Band holding elevations (1-based); required for multi-band files.")(f)
    f = click.option("--body", type=click.Choice(["moon", "mars", "mercury", "earth", "ganymede", "callisto"],
                                                 case_sensitive=False),
                     default=None, help="Planetary body; normally told from the CRS ellipsoid.")(f)
    return f


def run_options(f):
    """--seed, --workers, --scheduler, --tile-size, --n-boot, --model."""
    f = click.option("--model", type=click.Path(dir_okay=False), default=None,
                     help="Scoring model (.skops); default: the shipped model.")(f)
    f = click.option("--n-boot", type=int, default=30, show_default=True,
                     help="Bootstrap resamples of the profile azimuths for uncertainties.")(f)
    f = click.option("--tile-size", type=int, default=2048, show_default=True, callback=_positive,
                     help="Tile core size in source pixels; sets memory use.")(f)
    f = click.option("--scheduler", default=None, metavar="tcp://HOST:PORT",
                     help="Send the tiles to an existing dask.distributed scheduler.")(f)
    f = click.option("--workers", type=int, default=None, callback=_positive,
                     help="Processes that run tiles, this one included (default: all cores; 1 = this process only).")(f)
    f = click.option("--seed", type=int, default=0, show_default=True,
                     help="Seed of every random step: same input + seed = same output.")(f)
    return f


def output_option(f):
    f = click.option("--overwrite", is_flag=True, help="Replace the output if it exists.")(f)
    f = click.option("-o", "--output", "output", required=True, type=click.Path(dir_okay=False),
                     help="Output GeoPackage (.gpkg).")(f)
    return f


def check_output(path, overwrite: bool, suffixes=(".gpkg",)) -> Path:
    """Fail before any work if the output cannot be written."""
    out = Path(path)
    if suffixes and out.suffix.lower() not in suffixes:
        raise OutputError(f"output must end with {' or '.join(suffixes)}.", path=out,
                          fix=f"name the output like {out.with_suffix(suffixes[0]).name}.")
    if out.exists() and not overwrite:
        raise OutputExistsError("exists already; it was left untouched.", path=out,
                                fix="pass --overwrite or choose another name.")
    folder = out.parent if str(out.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError("the output folder does not exist.", path=out, fix="create the folder first.")
    if not os.access(folder, os.W_OK):
        raise OutputError("the output folder is not writable.", path=out,
                          fix="choose a folder you can write to.")
    return out
