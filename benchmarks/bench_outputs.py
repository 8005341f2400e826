"""Benchmark: GeoPackage write/read time for 100,000 craters and HTML report time for 5,000.

Run ``python benchmarks/bench_outputs.py`` (``--quick`` for 10,000 / 1,000). Crater
tables come from :func:`morpho.outputs._sample.sample_craters`: every column of the
data dictionary filled, rim outlines as 64-vertex polygons. Targets (issue 8): write
100,000 craters in < 10 s; build the report for 5,000 craters in < 30 s. Each figure is
the best of ``--repeat`` runs (the machine is shared). Writes
``benchmarks/results/outputs.md``.
"""

from __future__ import annotations

import argparse
import os
import platform
import tempfile
import time
from pathlib import Path

import numpy as np
import rasterio
import shapely
from affine import Affine

from morpho import dictionary
from morpho.outputs import build_report, export_features, read_survey, write_geopackage
from morpho.outputs._sample import (
    SAMPLE_CRS,
    sample_chains,
    sample_craters,
    sample_envelope,
    sample_population,
)

RESULTS = Path(__file__).parent / "results" / "outputs.md"


def _best(fn, repeat):
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def _write_dem(path, n):
    """An n x n float32 GeoTIFF over the sample scene (100 km square), gently rolling."""
    px = 100_000.0 / n
    rows, cols = np.mgrid[0:n, 0:n].astype(np.float32)
    z = 60.0 * np.sin(cols * px / 7000.0) * np.cos(rows * px / 9000.0)
    with rasterio.open(path, "w", driver="GTiff", height=n, width=n, count=1, dtype="float32",
                       crs=SAMPLE_CRS, transform=Affine(px, 0.0, 0.0, 0.0, -px, 100_000.0)) as ds:
        ds.write(z, 1)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--repeat", type=int, default=2)
    args = ap.parse_args(argv)
    n_write, n_report = (10_000, 1_000) if args.quick else (100_000, 5_000)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        craters = sample_craters(n_write, seed=1, quad_segs=16)
        extras = {"population": sample_population(), "chains": sample_chains(),
                  "footprint": shapely.box(0, 0, 100_000, 100_000), "envelope": sample_envelope(),
                  "run": {"input_file": "brannock.tif", "body": "moon"}}
        gpkg = tmp / "big.gpkg"
        t = _best(lambda: write_geopackage(gpkg, craters, overwrite=True, **extras), args.repeat)
        size_mb = gpkg.stat().st_size / 1e6
        rows.append((f"write_geopackage, {n_write:,} craters", t, 10.0 if n_write == 100_000 else None,
                     f"{len(dictionary.CRATER_COLUMNS)} columns, 65-vertex rims, {size_mb:.0f} MB"))
        t = _best(lambda: read_survey(gpkg), args.repeat)
        rows.append((f"read_survey, {n_write:,} craters", t, None, ""))
        t = _best(lambda: export_features(gpkg, tmp / "f.csv", overwrite=True), args.repeat)
        rows.append((f"export_features CSV, {n_write:,} craters", t, None, ""))

        small = tmp / "small.gpkg"
        write_geopackage(small, sample_craters(n_report, seed=2), overwrite=True, **extras)
        t = _best(lambda: build_report(small, tmp / "r.html", overwrite=True), args.repeat)
        html_mb = (tmp / "r.html").stat().st_size / 1e6
        rows.append((f"build_report, {n_report:,} craters (no DEM)", t,
                     30.0 if n_report == 5_000 else None, f"{html_mb:.1f} MB HTML"))
        dem = tmp / "dem.tif"
        _write_dem(dem, 2000)
        t = _best(lambda: build_report(small, tmp / "r.html", dem_path=dem, overwrite=True), args.repeat)
        rows.append((f"build_report, {n_report:,} craters, 2000 x 2000 DEM", t,
                     30.0 if n_report == 5_000 else None, "shaded relief read via morpho.ingest.read_dem"))

    lines = ["# Outputs benchmark", "",
             f"`python benchmarks/bench_outputs.py{' --quick' if args.quick else ''}`, best of "
             f"{args.repeat}; {platform.processor() or platform.machine()}, {os.cpu_count()} cores "
             "(shared with other work while measured).", "",
             "| step | seconds | target | notes |", "|---|---:|---:|---|"]
    for name, secs, target, note in rows:
        verdict = "" if target is None else f"< {target:g} s {'met' if secs < target else 'MISSED'}"
        lines.append(f"| {name} | {secs:.2f} | {verdict} | {note} |")
        print(f"{name:45s} {secs:7.2f} s  {verdict}")
    RESULTS.parent.mkdir(exist_ok=True)
    RESULTS.write_text("\n".join(lines) + "\n", encoding="utf-8")
    print(f"wrote {RESULTS}")


if __name__ == "__main__":
    main()
