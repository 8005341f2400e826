"""`morpho export`: feature table, data dictionary and provenance of a survey, for review."""

from __future__ import annotations

import click

from ..caveats import CAVEATS_SHORT

__all__ = ["command"]


@click.command(name="export")
@click.argument("gpkg", type=click.Path(dir_okay=False))
@click.option("-o", "--output", "output", required=True, type=click.Path(dir_okay=False),
              help="Feature table to write: features.csv or features.parquet.")
@click.option("--overwrite", is_flag=True, help="Replace existing output files.")
def command(gpkg, output, overwrite):
    """Export every crater feature of GPKG (one row per crater) with its data dictionary.

    Beside OUTPUT go <stem>.dictionary.csv (column, unit, dtype, definition, method,
    reference) and <stem>.provenance.json (the run table).
    """
    from ..outputs import companion_paths, export_features

    table = export_features(gpkg, output, overwrite=overwrite)
    dict_path, prov_path = companion_paths(table)
    click.echo(f"wrote {table}\nwrote {dict_path}\nwrote {prov_path}")
    click.echo(f"note: {CAVEATS_SHORT}")
