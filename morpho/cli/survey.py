"""`morpho survey`: DEM -> GeoPackage of detected, measured and scored craters."""

from __future__ import annotations

import shutil
import time
from pathlib import Path

import click

from ._options import check_output, dem_options, output_option, run_options
from ._summary import print_summary, seconds_since_process_start, stage_seconds

#: exit code of a survey whose result misses failed tiles
EXIT_PARTIAL = 5


@click.command(name="survey")
@click.argument("dem", type=click.Path(dir_okay=False))
@output_option
@dem_options
@run_options
@click.option("--min-diameter-px", type=float, default=8.0, show_default=True,
              help="Smallest crater searched, in pixels across.")
@click.option("--max-diameter-px", type=float, default=None,
              help="Largest crater searched, in pixels (default: most of a single-tile DEM, else 256).")
@click.option("--resume", is_flag=True, help="Continue an interrupted survey from its run folder.")
@click.option("--preview", is_flag=True, help="Also write a PNG map of the craters beside the output.")
@click.pass_context
def command(ctx, dem, output, overwrite, body, band, pixel_size, z_scale, z_offset, seed, workers,
            scheduler, tile_size, n_boot, model, min_diameter_px, max_diameter_px, resume, preview):
    """Find the craters in DEM, measure each one's profile, compare it with the published
    fresh-impact scaling laws for the body, score its morphological similarity to impact
    craters versus laboratory electrode-spot craters, compute population statistics, and
    write everything to a GeoPackage (layers craters, population, chains, footprint, run).

    Per-tile results are kept in OUTPUT.morpho-run/ until the GeoPackage is written, so an
    interrupted survey can be continued with --resume.
    """
    from ..pipeline import survey

    out = check_output(output, overwrite)
    run_dir = out.with_name(out.name + ".morpho-run")
    quiet = (ctx.find_root().obj or {}).get("quiet", False)
    startup = seconds_since_process_start()  # Python, imports and option parsing: a fixed cost
    t0 = time.perf_counter()
    result = survey(
        dem, body=body, band=band, pixel_size=pixel_size, z_scale=z_scale, z_offset=z_offset,
        min_diameter_px=min_diameter_px, max_diameter_px=max_diameter_px, tile_size=tile_size,
        n_boot=n_boot, seed=seed, model=model, workers=workers, scheduler=scheduler,
        run_dir=run_dir, resume=resume, progress=not quiet,
    )
    t_write = time.perf_counter()
    result.write(out, overwrite=overwrite)
    write_seconds = time.perf_counter() - t_write
    if preview:
        from ..outputs import render_preview_png

        render_preview_png(out, out.with_suffix(".png"), dem_path=dem, overwrite=overwrite)
    if not result.partial:
        shutil.rmtree(run_dir, ignore_errors=True)
    seconds = (startup or 0.0) + time.perf_counter() - t0
    if not quiet:
        info_px = int(result.run.get("raster_rows", 0) or 0) * int(result.run.get("raster_cols", 0) or 0)
        print_summary(result, Path(out), seconds, info_px,
                      stages=stage_seconds(result, startup=startup, write=write_seconds))
    if result.partial:
        ctx.exit(EXIT_PARTIAL)
