"""`morpho measure`: DEM + a crater list -> GeoPackage of measured and scored craters."""

from __future__ import annotations

import time
from pathlib import Path

import click

from ._options import check_output, dem_options, output_option, run_options
from ._summary import print_summary


@click.command(name="measure")
@click.argument("dem", type=click.Path(dir_okay=False))
@click.option("--craters", "crater_list", required=True, type=click.Path(dir_okay=False),
              help="Crater list: CSV (center_x, center_y, diameter_m in the DEM CRS, or lon, lat, "
                   "diameter_m), GeoPackage or Shapefile (points with a diameter, or rim polygons).")
@output_option
@dem_options
@run_options
@click.pass_context
def command(ctx, dem, crater_list, output, overwrite, body, band, pixel_size, z_scale, z_offset, seed,
            workers, scheduler, tile_size, n_boot, model):
    """Measure the craters of an existing list on DEM: refine each centre and rim-crest
    diameter, measure the profile, compare with the published scaling laws, score, and
    write a GeoPackage like `survey` does. The list's own ids are kept; craters that could
    not be measured are reported with the reason, and bad rows of the list are named.
    """
    from ..ingest import open_dem
    from ..ingest.craterlist import read_crater_list
    from ..pipeline import measure

    out = check_output(output, overwrite)
    quiet = (ctx.find_root().obj or {}).get("quiet", False)
    t0 = time.perf_counter()
    info = open_dem(dem, band=band, body=body, pixel_size=pixel_size, z_scale=z_scale, z_offset=z_offset,
                    min_size_px=4)
    listed = read_crater_list(crater_list, dem_crs=info.crs, body=info.body.name)
    for row, reason in sorted(listed.bad_rows.items()):
        click.echo(f"morpho: {crater_list}: row {row} skipped: {reason}", err=True)
    result = measure(dem, listed.craters, body=body, band=band, pixel_size=pixel_size, z_scale=z_scale,
                     z_offset=z_offset, tile_size=tile_size, n_boot=n_boot, seed=seed, model=model,
                     workers=workers, scheduler=scheduler, progress=not quiet, bad_rows=listed.bad_rows)
    result.write(out, overwrite=overwrite)
    if not quiet:
        px = int(result.run.get("raster_rows", 0) or 0) * int(result.run.get("raster_cols", 0) or 0)
        print_summary(result, Path(out), time.perf_counter() - t0, px)
