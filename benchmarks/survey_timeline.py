"""Per-worker timeline of one multi-worker survey: which task ran where, and when.

Runs ``morpho survey`` in this process with Dask's task stream recorded from the moment the
local cluster is up until it closes, then prints one line per task (worker, start and stop in
seconds since the cluster came up, duration, task) and each worker's idle time between its first
and last task. On a local cluster the main process runs tiles too (not in the stream); the
command's own summary gives its share. It shows where a 2-worker survey loses against twice a 1-worker one: each worker's
first (cold) tile, the side tasks between tiles (model load, footprint, statistics imports), the
last tiles ending apart, and the finish (scoring and statistics).

Run: ``python benchmarks/survey_timeline.py DEM.tif [--workers 2]``
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("dem", type=Path)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args(argv)

    # As the command line does, before numpy is imported (bit-identical to the workers).
    from morpho._runtime import pin_numeric_threads, retain_freed_memory

    pin_numeric_threads()
    retain_freed_memory()
    from dask.distributed import get_task_stream

    import morpho.pipeline.engine as engine
    from morpho.cli.main import main as cli

    seen: dict = {}
    start, close = engine.TilePool._start, engine.TilePool.close

    def recording_start(self):  # runs in the starting thread when the cluster starts in the background
        start(self)
        if "stream" not in seen and self.client is not None:
            seen["stream"] = get_task_stream(client=self.client)
            seen["stream"].__enter__()
            seen["t0"] = time.time()

    def recording_close(self):
        if self.client is not None and "stream" in seen and "data" not in seen:
            seen["stream"].__exit__(None, None, None)
            seen["data"] = list(seen["stream"].data)
        close(self)

    engine.TilePool._start, engine.TilePool.close = recording_start, recording_close
    with tempfile.TemporaryDirectory() as tmp:
        sys.argv = ["morpho", "survey", str(args.dem), "-o", str(Path(tmp) / "timeline.gpkg"),
                    "--workers", str(args.workers)]
        try:
            cli()
        except SystemExit as exit_:
            if exit_.code not in (0, None):
                raise
    if "data" not in seen:
        print("no Dask workers ran (a single tile, or --workers 1): nothing to show")
        return
    rows = []
    for task in seen["data"]:
        for ss in task["startstops"]:
            if ss["action"] == "compute":
                name = task["key"].split("-")[1] if task["key"].startswith("morpho-") else task["key"]
                rows.append((task["worker"], ss["start"] - seen["t0"], ss["stop"] - seen["t0"], name))
    print("worker  start_s  stop_s  dur_s  task")
    for worker in sorted({r[0] for r in rows}):
        mine = sorted((r for r in rows if r[0] == worker), key=lambda r: r[1])
        for w, a, b, name in mine:
            print(f"{w.rsplit(':', 1)[-1]:>6} {a:8.2f} {b:7.2f} {b - a:6.2f}  {name}")
        busy = sum(b - a for _, a, b, _ in mine)
        print(f"{worker.rsplit(':', 1)[-1]:>6}  busy {busy:.2f} s, idle {mine[-1][2] - mine[0][1] - busy:.2f} s "
              f"between its first and last task")


if __name__ == "__main__":
    main()
