"""`morpho report`: a self-contained HTML report of a survey GeoPackage."""

from __future__ import annotations

import click

from ..caveats import CAVEATS_SHORT

__all__ = ["command"]


@click.command(name="report")
@click.argument("gpkg", type=click.Path(dir_okay=False))
@click.option("-o", "--output", "output", required=True, type=click.Path(dir_okay=False),
              help="HTML file to write (figures embedded; no other files needed).")
@click.option("--dem", "dem", type=click.Path(dir_okay=False), default=None,
              help="The surveyed DEM, for a shaded-relief map background.")
@click.option("--overwrite", is_flag=True, help="Replace an existing report.")
def command(gpkg, output, dem, overwrite):
    """Write a self-contained HTML report of GPKG: maps, d/D, SFD, Ripley L, features,
    population statistics, caveats and provenance."""
    from ..outputs import build_report

    path = build_report(gpkg, output, dem_path=dem, overwrite=overwrite)
    click.echo(f"wrote {path}")
    click.echo(f"note: {CAVEATS_SHORT}")
