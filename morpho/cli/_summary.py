"""End-of-run summary printed by `survey` and `measure` (caveats included)."""

from __future__ import annotations

import json
import os

import click

#: stages of the survey's own work (grow with the DEM's area), in the order they run
AREA_STAGES = ("open", "tiles", "merge", "finish", "write")
#: fixed costs of one command, whatever the DEM's size
FIXED_STAGES = ("start-up", "model wait", "cluster", "warm-up")


def seconds_since_process_start() -> float | None:
    """Wall seconds since this process started (Linux ``/proc``; 10 ms resolution), else None.

    Covers what no timer inside the program can see: the interpreter's own start and the
    imports before the command runs.
    """
    try:
        with open("/proc/self/stat") as f:
            stat = f.read()
        with open("/proc/uptime") as f:
            uptime = float(f.read().split()[0])
        start_ticks = int(stat.rsplit(")", 1)[1].split()[19])  # field 22, starttime
        return max(0.0, uptime - start_ticks / os.sysconf("SC_CLK_TCK"))
    except (OSError, ValueError, IndexError, AttributeError):
        return None


def stage_seconds(result, *, startup: float | None = None, write: float | None = None) -> dict:
    """Seconds per stage of a command: the survey's ``timing_s`` plus start-up and writing.

    Keys: ``start-up`` (Python, imports, option parsing), ``model wait`` (loading the scoring
    model: before in-process tiles, after Dask tiles), ``cluster`` (waiting for Dask workers to
    start, and closing them), ``warm-up`` (importing the tile and finish-stage code in this
    process), then the
    area-dependent stages of :data:`AREA_STAGES`.
    """
    run = result.run if isinstance(result.run, dict) else {}
    try:
        timing = json.loads(run.get("timing_s", "{}"))
    except (TypeError, ValueError):
        timing = {}
    out = {}
    if startup is not None:
        out["start-up"] = float(startup)
    for key, name in (("model_wait", "model wait"), ("cluster", "cluster"), ("warmup", "warm-up"), ("open", "open"),
                      ("tiles", "tiles"), ("merge", "merge"), ("finish", "finish")):
        if key in timing:
            out[name] = float(timing[key])
    if write is not None:
        out["write"] = float(write)
    return out


def print_summary(result, out, seconds: float, n_pixels: int, *, stages: dict | None = None) -> None:
    """Craters found, tiles, time, throughput, verdicts, and the caveats line.

    ``stages`` (see :func:`stage_seconds`) adds a line splitting the time into fixed costs and
    the survey's own, area-dependent work.
    """
    from ..caveats import CAVEATS_SHORT

    craters = result.craters
    n_tiles = result.run.get("n_tiles", "?") if isinstance(result.run, dict) else "?"
    mpx = n_pixels / 1e6
    rate = mpx / seconds if seconds > 0 else float("nan")
    lines = [f"{len(craters)} craters -> {out}",
             f"tiles: {n_tiles}, failed: {len(result.failed_tiles)}; {seconds:.1f} s, {mpx:.2f} Mpx, {rate:.2f} Mpx/s"]
    if stages:
        fixed = ", ".join(f"{k} {v:.2f}" for k, v in stages.items() if k in FIXED_STAGES)
        work = ", ".join(f"{k} {v:.2f}" for k, v in stages.items() if k in AREA_STAGES)
        own = sum(v for k, v in stages.items() if k in AREA_STAGES)
        per = f", {own / mpx:.2f} s/Mpx" if mpx > 0 else ""
        lines.append(f"time (s): fixed: {fixed}; survey {own:.2f}{per}: {work}")
    if len(craters) and "verdict" in craters:
        counts = craters["verdict"].value_counts().to_dict()
        lines.append("verdicts: " + ", ".join(f"{k} {v}" for k, v in sorted(counts.items())))
    if len(craters) and "scoring_domain" in craters:
        n_out = int((craters["scoring_domain"].astype(str) != "").sum())
        if n_out:
            lines.append(f"outside the scoring model's training domain: {n_out} "
                         "(verdict 'neither'; reasons in the scoring_domain column)")
    if result.unmeasured is not None and len(result.unmeasured):
        lines.append(f"not measured: {len(result.unmeasured)} (reasons in the run layer)")
    if result.partial:
        lines.append("PARTIAL RESULT: some tiles failed; rerun with --resume to retry them.")
    lines.append(f"Caveat: {CAVEATS_SHORT}")
    for line in lines:
        click.echo(line, err=True)
