"""End-to-end survey throughput, scaling with area, and peak memory (issue: scale).

Generates lunar-like DEMs with the synthetic generator at a fixed crater density,
runs ``morpho survey`` as a subprocess with 1 and 2 workers, samples the resident
memory of the whole process tree (main process + Dask workers) every 0.1 s, and
writes ``benchmarks/results/survey.md`` and ``survey.png``.

Run: ``python benchmarks/bench_survey.py [--sizes 1024 2048 4096 8192] [--workers 1 2]``
"""

from __future__ import annotations

import argparse
import os
import platform
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import psutil

HERE = Path(__file__).resolve().parent
PIXEL_M = 20.0
#: craters per Mpx; lunar-like density for 10-200 px craters at 20 m/px (common practice for benchmarks)
CRATERS_PER_MPX = 40


def make_dem(n: int, folder: Path) -> Path:
    from morpho.synth import generate_surface, write_surface

    name = f"bench_{n}"
    target = folder / f"{name}.tif"
    if target.exists():
        return target
    n_craters = int(CRATERS_PER_MPX * n * n / 1e6)
    surface = generate_surface(body="moon", shape=(n, n), pixel_size_m=PIXEL_M, n_craters=n_craters, seed=n)
    write_surface(surface, folder, name, overwrite=True)
    return target


def _tree_rss(proc: psutil.Process) -> int:
    total = 0
    try:
        procs = [proc, *proc.children(recursive=True)]
    except psutil.NoSuchProcess:
        return 0
    for p in procs:
        try:
            total += p.memory_info().rss
        except psutil.NoSuchProcess:
            pass
    return total


def run_survey(dem: Path, workers: int, out: Path) -> tuple[float, int, int]:
    cmd = [sys.executable, "-m", "morpho.cli.main", "-q", "survey", str(dem), "-o", str(out), "--overwrite",
           "--workers", str(workers)]
    peak = 0
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd)
    ps = psutil.Process(proc.pid)
    stop = threading.Event()

    def sample():
        nonlocal peak
        while not stop.is_set():
            peak = max(peak, _tree_rss(ps))
            time.sleep(0.1)

    th = threading.Thread(target=sample, daemon=True)
    th.start()
    rc = proc.wait()
    stop.set()
    th.join()
    seconds = time.perf_counter() - t0
    import pyogrio

    n = pyogrio.read_info(out, layer="craters")["features"] if rc == 0 else -1
    return seconds, peak, n


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--sizes", type=int, nargs="+", default=[1024, 2048, 4096, 8192])
    ap.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--folder", type=Path, default=Path(tempfile.gettempdir()) / "morpho_bench")
    args = ap.parse_args(argv)
    args.folder.mkdir(parents=True, exist_ok=True)
    rows = []
    for n in args.sizes:
        dem = make_dem(n, args.folder)
        for w in args.workers:
            secs, peak, found = run_survey(dem, w, args.folder / f"out_{n}_{w}.gpkg")
            mpx = n * n / 1e6
            rows.append((n, w, secs, mpx / secs, secs / mpx, peak / 2**30, found))
            print(f"{n}^2 workers={w}: {secs:.1f} s, {mpx / secs:.2f} Mpx/s, peak {peak / 2**30:.2f} GiB, "
                  f"{found} craters", flush=True)
    machine = (f"{platform.machine()}, {os.cpu_count()} cores, "
               f"{psutil.virtual_memory().total / 2**30:.0f} GiB RAM, Python {platform.python_version()}")
    lines = [f"Machine: {machine}. Synthetic lunar DEMs at {PIXEL_M:g} m/px, {CRATERS_PER_MPX} craters/Mpx; "
             "default settings; wall time of the whole `morpho survey` command (incl. start-up, "
             "scoring, statistics, GeoPackage).", "",
             "| DEM | workers | seconds | Mpx/s | s per Mpx | peak memory (GiB, process tree) | craters |",
             "|---|---|---|---|---|---|---|"]
    lines += [f"| {n}^2 | {w} | {s:.1f} | {r:.2f} | {spm:.2f} | {m:.2f} | {f} |" for n, w, s, r, spm, m, f in rows]
    (HERE / "results").mkdir(exist_ok=True)
    (HERE / "results" / "survey.md").write_text("\n".join(lines) + "\n")
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt

        fig, ax = plt.subplots(figsize=(5, 3.2), dpi=110)
        for w in args.workers:
            sel = [r for r in rows if r[1] == w]
            ax.plot([r[0] ** 2 / 1e6 for r in sel], [r[3] for r in sel], "o-", label=f"{w} worker(s)")
        ax.set_xscale("log")
        ax.set_xlabel("DEM size (Mpx)")
        ax.set_ylabel("throughput (Mpx/s)")
        ax.grid(alpha=0.3)
        ax.legend()
        fig.tight_layout()
        fig.savefig(HERE / "results" / "survey.png")
    except Exception as err:  # noqa: BLE001 - the table matters more than the plot
        print(f"plot skipped: {err}")


if __name__ == "__main__":
    main()
