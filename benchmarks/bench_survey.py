"""End-to-end survey throughput, scaling with area, and peak memory (issue: scale).

Generates lunar-like DEMs with the synthetic generator at a fixed crater density,
runs ``morpho survey`` as a subprocess with 1 and 2 workers, samples the resident
memory of the whole process tree (main process + Dask workers) every 0.1 s, and
writes ``benchmarks/results/survey.md`` and ``survey.png``.

Two times per run:

* **whole command** - wall time of the ``morpho survey`` process, start to exit (what a user waits);
* **survey work** - the stages whose work grows with the DEM's area, as the command reports them
  (open, tiles, merge, finish = scaling/scoring/statistics/provenance, write). The rest of the
  whole command is fixed cost: Python start-up and imports, loading the scoring model, starting
  Dask workers, exiting. Linear scaling in area is judged on the survey work per Mpx.

Each configuration runs ``--repeat`` times, in rounds (every configuration once per round, so a slow
spell of the shared machine hits all of them alike); the table gives medians. The machine's load average
is recorded beside the results (timings on a shared machine are noisy).

Run: ``python benchmarks/bench_survey.py [--sizes 1024 2048 4096 8192] [--workers 1 2] [--repeat 3]``
"""

from __future__ import annotations

import argparse
import itertools
import json
import os
import platform
import re
import resource
import statistics
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
#: stages of the command's time summary that grow with area (see morpho.cli._summary.AREA_STAGES)
AREA_STAGES = ("open", "tiles", "merge", "finish", "write")
#: issue #9: time per Mpx constant within +/- this fraction from 1024^2 to 8192^2
LINEAR_TOLERANCE = 0.25
#: DEMs up to this size (Mpx) run ``--small-repeat`` times per round
SMALL_MPX = 4.2
_STAGE = re.compile(r"(start-up|model wait|cluster|warm-up|open|tiles|merge|finish|write) ([0-9.]+)")


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


def parse_stages(stderr: str) -> dict[str, float]:
    """Stage seconds from the command's ``time (s): ...`` summary line."""
    for line in stderr.splitlines()[::-1]:
        if line.startswith("time (s):"):
            return {k: float(v) for k, v in _STAGE.findall(line)}
    raise RuntimeError("no 'time (s):' line in the survey's output:\n" + stderr[-2000:])


def run_survey(dem: Path, workers: int, out: Path) -> dict:
    """One ``morpho survey`` run: wall and CPU seconds, peak memory, craters, stage seconds."""
    cmd = [sys.executable, "-m", "morpho.cli.main", "survey", str(dem), "-o", str(out), "--overwrite",
           "--workers", str(workers)]
    peak = 0
    cpu0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    ps = psutil.Process(proc.pid)
    stop = threading.Event()

    def sample():
        nonlocal peak
        while not stop.is_set():
            peak = max(peak, _tree_rss(ps))
            time.sleep(0.1)

    th = threading.Thread(target=sample, daemon=True)
    th.start()
    _, stderr = proc.communicate()
    seconds = time.perf_counter() - t0
    stop.set()
    th.join()
    cpu1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    if proc.returncode != 0:
        raise RuntimeError(f"survey failed ({proc.returncode}):\n{stderr[-2000:]}")
    import pyogrio

    stages = parse_stages(stderr)
    return {"seconds": seconds, "peak": peak, "craters": pyogrio.read_info(out, layer="craters")["features"],
            "cpu": (cpu1.ru_utime - cpu0.ru_utime) + (cpu1.ru_stime - cpu0.ru_stime),
            "work": sum(stages.get(k, 0.0) for k in AREA_STAGES), "stages": stages}


#: The machine's own parallel speed-up, measured beside the surveys: a fixed job of Gaussian passes
#: and resampling over a 2048^2 tile (the kind of work a tile does, in one process, one BLAS thread),
#: run alone and then as two copies at once. On a shared VM the second core is not always a whole
#: core; the survey's 2-vs-1 ratio is read against this one.
_PROBE = """
import time, numpy as np
from scipy import ndimage as nd
a = np.random.default_rng(0).random((2048, 2048))
yy, xx = np.mgrid[0:2048, 0:2048].astype(float)
t = time.perf_counter()
for _ in range(6):
    b = nd.gaussian_filter(a, 4.0)
    c = nd.map_coordinates(b, [yy + 0.3, xx + 0.7], order=1)
    a = np.where(np.isfinite(c), c - c.mean(), 0.0)
print(time.perf_counter() - t)
"""


def _probe_jobs(k: int) -> list[float]:
    """Start ``k`` probe jobs at once; each one's compute seconds."""
    from morpho._runtime import WORKER_ENVIRON

    env = {**os.environ, **WORKER_ENVIRON, "OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}
    procs = [subprocess.Popen([sys.executable, "-c", _PROBE], stdout=subprocess.PIPE, text=True, env=env)
             for _ in range(k)]
    return [float(p.communicate()[0].strip()) for p in procs]


def machine_ratio() -> float:
    """Two probe jobs run at once against one alone: ``2 t_alone / t_together`` (2.0 = two whole cores)."""
    alone = _probe_jobs(1)[0]
    together = max(_probe_jobs(2))
    return 2.0 * alone / together


def same_tables(a: Path, b: Path) -> bool:
    """The craters layers of two runs hold the same rows and values (geometry aside)."""
    import pandas as pd
    import pyogrio

    ta = pd.DataFrame(pyogrio.read_dataframe(a, layer="craters").drop(columns="geometry"))
    tb = pd.DataFrame(pyogrio.read_dataframe(b, layer="craters").drop(columns="geometry"))
    try:
        pd.testing.assert_frame_equal(ta, tb)
    except AssertionError:
        return False
    return True


def _median_run(runs: list[dict]) -> dict:
    keys = ("seconds", "peak", "cpu", "work")
    med = {k: statistics.median(r[k] for r in runs) for k in keys}
    med["peak"] = max(r["peak"] for r in runs)  # memory: the worst run, not the median
    med["craters"] = runs[0]["craters"]
    names = {k for r in runs for k in r["stages"]}
    med["stages"] = {k: statistics.median(r["stages"].get(k, 0.0) for r in runs) for k in names}
    return med


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--sizes", type=int, nargs="+", default=[1024, 2048, 4096, 8192])
    ap.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--repeat", type=int, default=3, help="runs per configuration (medians reported)")
    ap.add_argument("--small-repeat", type=int, default=3,
                    help="runs per round of DEMs up to 4 Mpx (a few seconds each, so their medians cost little "
                         "and their noise matters most to the scaling figure)")
    ap.add_argument("--reference", type=int, default=256,
                    help="small DEM (1 worker) whose survey work measures the size-independent part; 0: none")
    ap.add_argument("--folder", type=Path, default=Path(tempfile.gettempdir()) / "morpho_bench")
    ap.add_argument("--render-only", action="store_true",
                    help="rewrite survey.md/png from the last run's results/survey.json")
    ap.add_argument("--note", default="", help="a remark printed under the tables (e.g. on the machine's load)")
    ap.add_argument("--probe", action="store_true",
                    help="measure the machine's own 2-vs-1 speed-up before and after the largest DEM's runs")
    args = ap.parse_args(argv)
    if args.render_only:
        saved = json.loads((HERE / "results" / "survey.json").read_text())
        args.workers, args.repeat = saved["workers"], saved["repeat"]
        args.small_repeat = saved.get("small_repeat", 1)
        args.note = args.note or saved.get("note", "")
        write_results(saved["rows"], args, saved["loads"], saved["reference"], saved.get("probes", []))
        if args.note != saved.get("note", ""):
            saved["note"] = args.note
            (HERE / "results" / "survey.json").write_text(json.dumps(saved, indent=1, default=float) + "\n")
        return
    args.folder.mkdir(parents=True, exist_ok=True)
    rows = []
    loads = [os.getloadavg()[0]]
    ref = None
    # Rounds: every configuration once per round, so a slow spell of the shared machine
    # hits all sizes and worker counts alike instead of one configuration's repeats.
    dems = {n: make_dem(n, args.folder) for n in args.sizes}
    ref_dem = make_dem(args.reference, args.folder) if args.reference else None
    runs: dict = {}
    outs: dict = {}
    probes: dict = {}
    ref_runs = []
    for rnd in range(args.repeat):
        if ref_dem is not None:
            ref_runs.append(run_survey(ref_dem, 1, args.folder / f"out_{args.reference}_1.gpkg"))
        for n in args.sizes:
            if args.probe and n == max(args.sizes):
                probes.setdefault(rnd, []).append(machine_ratio())
            for _ in range(args.small_repeat if n * n <= SMALL_MPX * 1e6 else 1):
                for w in args.workers:
                    outs[n, w] = args.folder / f"out_{n}_{w}.gpkg"
                    r = run_survey(dems[n], w, outs[n, w])
                    runs.setdefault((n, w), []).append(r)
                    loads.append(os.getloadavg()[0])
                    print(f"round {rnd + 1}: {n}^2 workers={w}: {r['seconds']:.1f} s whole, {r['work']:.1f} s "
                          f"survey work, peak {r['peak'] / 2**30:.2f} GiB", flush=True)
            if args.probe and n == max(args.sizes):
                probes[rnd].append(machine_ratio())
                print(f"round {rnd + 1}: machine 2-vs-1 ratio before/after: "
                      f"{probes[rnd][0]:.2f}x / {probes[rnd][1]:.2f}x", flush=True)
    if ref_runs:
        ref = _median_run(ref_runs)
        ref.update(n=args.reference, mpx=args.reference**2 / 1e6)
        print(f"reference {args.reference}^2: survey work {ref['work']:.2f} s "
              f"[{', '.join(f'{k} {v:.2f}' for k, v in sorted(ref['stages'].items()))}]", flush=True)
    for n in args.sizes:
        for w in args.workers:
            r = _median_run(runs[n, w])
            r.update(n=n, workers=w, mpx=n * n / 1e6, repeats=len(runs[n, w]),
                     all_seconds=[x["seconds"] for x in runs[n, w]])
            r["same"] = same_tables(outs[n, args.workers[0]], outs[n, w])
            rows.append(r)
            print(f"{n}^2 workers={w}: {r['seconds']:.1f} s whole, {r['work']:.1f} s survey work "
                  f"({r['work'] / r['mpx']:.2f} s/Mpx), peak {r['peak'] / 2**30:.2f} GiB, {r['craters']} craters "
                  f"[{', '.join(f'{k} {v:.2f}' for k, v in sorted(r['stages'].items()))}]", flush=True)
    (HERE / "results").mkdir(exist_ok=True)
    (HERE / "results" / "survey.json").write_text(json.dumps(
        {"workers": args.workers, "repeat": args.repeat, "small_repeat": args.small_repeat, "loads": loads, "reference": ref, "rows": rows,
         "note": args.note, "probes": [probes[k] for k in sorted(probes)]},
        indent=1, default=float) + "\n")
    write_results(rows, args, loads, ref, [probes[k] for k in sorted(probes)])


def _linear_fit(rows):
    """Least-squares ``work = a + b * Mpx``: fixed part a (s) and marginal cost b (s/Mpx)."""
    import numpy as np

    x = np.array([r["mpx"] for r in rows])
    y = np.array([r["work"] for r in rows])
    b, a = np.polyfit(x, y, 1)
    return float(a), float(b)


def write_results(rows, args, loads, ref=None, probes=()):
    machine = (f"{platform.machine()}, {os.cpu_count()} cores, "
               f"{psutil.virtual_memory().total / 2**30:.0f} GiB RAM, Python {platform.python_version()}")
    lines = [
        f"Machine: {machine}; load average during the runs {min(loads):.1f}-{max(loads):.1f} (1 min; "
        "the machine is shared, so wall times are noisy). Synthetic lunar DEMs at "
        f"{PIXEL_M:g} m/px, {CRATERS_PER_MPX} craters/Mpx; default settings; median of {args.repeat} runs "
        f"per row ({args.repeat * args.small_repeat} for DEMs up to {SMALL_MPX:g} Mpx; peak memory: the largest).",
        "",
        "- **whole s**: wall time of the whole `morpho survey` command, process start to exit "
        "(incl. Python start-up, imports, scoring model, Dask workers, scoring, statistics, GeoPackage).",
        "- **fixed s**: the part of the whole command that does not grow with the DEM = whole - survey "
        "work (Python start-up and imports, loading the scoring model where the tiles do not hide it, "
        "starting/closing Dask workers, importing the tile code, exit).",
        "- **work s**: the survey's own, area-dependent stages as the command reports them: open + tiles + "
        "merge + finish (scaling, scoring, population statistics, provenance) + write.",
        "- **work s/Mpx** is the figure the issue's linear-scaling target (+/-25 % from 1024^2 to 8192^2) "
        "is judged on; **dev** is its deviation from the median over the sizes for that worker count.",
        "- **CPU s**: user + system CPU of the whole process tree (main process and Dask workers).",
        "- **same table**: craters layer identical to the 1-worker run's.",
        "",
        "| DEM | workers | whole s | Mpx/s (whole) | s/Mpx (whole) | fixed s | work s | work s/Mpx | dev | "
        "CPU s | peak memory (GiB, process tree) | craters | same table |",
        "|---|---|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    verdicts = []
    for w in args.workers:
        sel = [r for r in rows if r["workers"] == w]
        per = [r["work"] / r["mpx"] for r in sel]
        med = statistics.median(per)
        for r, p in zip(sel, per, strict=True):
            r["dev"] = p / med - 1
        worst = max(abs(r["dev"]) for r in sel)
        verdicts.append((w, med, worst, min(per), max(per)))
    for r in sorted(rows, key=lambda r: (r["n"], r["workers"])):
        lines.append(
            f"| {r['n']}^2 | {r['workers']} | {r['seconds']:.1f} | {r['mpx'] / r['seconds']:.2f} | "
            f"{r['seconds'] / r['mpx']:.2f} | {r['seconds'] - r['work']:.1f} | {r['work']:.1f} | "
            f"{r['work'] / r['mpx']:.2f} | {r['dev']:+.0%} | {r['cpu']:.0f} | {r['peak'] / 2**30:.2f} | "
            f"{r['craters']} | {'yes' if r['same'] else 'NO'} |")
    lines += ["", "Stage medians (s): fixed = start-up, model wait, cluster, warm-up; area-dependent = "
              "open, tiles, merge, finish, write.", "",
              "| DEM | workers | " + " | ".join(_STAGE_ORDER) + " |",
              "|---|---|" + "---|" * len(_STAGE_ORDER)]
    for r in sorted(rows, key=lambda r: (r["n"], r["workers"])):
        lines.append(f"| {r['n']}^2 | {r['workers']} | "
                     + " | ".join(f"{r['stages'].get(k, 0.0):.2f}" for k in _STAGE_ORDER) + " |")
    lines += ["", "Linear scaling in area (survey work per Mpx, +/-25 % target):", ""]
    for w, med, worst, lo, hi in verdicts:
        sel = [r for r in rows if r["workers"] == w]
        ok = "met" if worst <= LINEAR_TOLERANCE else "NOT met"
        fit = ""
        if len({r["n"] for r in sel}) >= 2:
            a, b = _linear_fit(sel)
            fit = f" Least-squares fit: work = {a:.1f} s + {b:.2f} s/Mpx x area."
        lines.append(f"- {w} worker(s): {lo:.2f}-{hi:.2f} s/Mpx, median {med:.2f}; largest deviation "
                     f"{worst:.0%} -> {ok}.{fit}")
    if ref is not None:
        lines += ["", f"Size-independent part of the survey work, measured on a {ref['n']}^2 DEM "
                  f"({ref['mpx']:.2f} Mpx, 1 worker, median of {args.repeat}): {ref['work']:.2f} s ("
                  + ", ".join(f"{k} {ref['stages'].get(k, 0.0):.2f}" for k in AREA_STAGES)
                  + "). Survey work above it, per Mpx = (work - reference) / (Mpx - reference Mpx):", ""]
        for w in args.workers:
            sel = sorted((r for r in rows if r["workers"] == w), key=lambda r: r["n"])
            per = [(r["work"] - ref["work"]) / (r["mpx"] - ref["mpx"]) for r in sel]
            med = statistics.median(per)
            worst = max(abs(p / med - 1) for p in per)
            ok = "met" if worst <= LINEAR_TOLERANCE else "NOT met"
            lines.append(f"- {w} worker(s): " + ", ".join(f"{r['n']}^2 {p:.2f}" for r, p in zip(sel, per, strict=True))
                         + f" s/Mpx; largest deviation from the median {worst:.0%} -> {ok}.")
    lines += ["", "Cost of each added Mpx between consecutive sizes, (t_k - t_k-1) / (Mpx_k - Mpx_k-1): the slope "
              "of time against area, free of the parts that do not grow with it (linear scaling = one slope):", ""]
    for w in args.workers:
        sel = sorted((r for r in rows if r["workers"] == w), key=lambda r: r["n"])
        if len(sel) < 3:
            continue
        for key, label in (("seconds", "whole command"), ("work", "survey work")):
            steps = [(b["n"], (b[key] - a[key]) / (b["mpx"] - a["mpx"])) for a, b in itertools.pairwise(sel)]
            med = statistics.median(p for _, p in steps)
            worst = max(abs(p / med - 1) for _, p in steps)
            lines.append(f"- {w} worker(s), {label}: " + ", ".join(
                f"to {n}^2 {p:.2f}" for n, p in steps) + f" s/Mpx; largest deviation from the median {worst:.0%}.")
    lines += ["", *issue_figures(rows, probes)]
    if args.note:
        lines += ["", f"Note: {args.note}"]
    (HERE / "results").mkdir(exist_ok=True)
    (HERE / "results" / "survey.md").write_text("\n".join(lines) + "\n")
    plot(rows, args)


def issue_figures(rows, probes=()) -> list[str]:
    """The issue's end-to-end targets, judged on the largest DEM of the run (whole-command times)."""
    big = max(r["n"] for r in rows)
    at = {r["workers"]: r for r in rows if r["n"] == big}
    out = [f"Issue #9 figures at {big}^2 (whole command, process start to exit):", ""]
    if at:
        w_max = max(at)
        rate = at[w_max]["mpx"] / at[w_max]["seconds"]
        out.append(f"- throughput with {w_max} worker(s): {rate:.2f} Mpx/s (target >= 1) -> "
                   f"{'met' if rate >= 1 else 'NOT met'}")
        peak = max(r["peak"] for r in at.values()) / 2**30
        out.append(f"- peak memory (process tree): {peak:.2f} GiB (target <= 2) -> {'met' if peak <= 2 else 'NOT met'}")
    if 1 in at and 2 in at:
        speed = at[1]["seconds"] / at[2]["seconds"]
        speed_work = at[1]["work"] / at[2]["work"]
        out.append(f"- 2 workers vs 1: {speed:.2f}x faster (target >= 1.6) -> {'met' if speed >= 1.6 else 'NOT met'}; "
                   f"survey work alone {speed_work:.2f}x")
        pairs = list(zip(at[1].get("all_seconds", []), at[2].get("all_seconds", []), strict=False))
        if len(pairs) > 1:
            ratios = sorted(a / b for a, b in pairs)
            out.append(f"  (per round, runs a few minutes apart: {', '.join(f'{x:.2f}x' for x in ratios)}; "
                       f"median {statistics.median(ratios):.2f}x)")
        if probes and len(probes) == len(pairs):
            # Per round, in run order: the survey's ratio beside the machine's own (probe before / after).
            out.append("  Machine's own 2-vs-1 speed-up beside each round (a probe job alone, then two at once; "
                       "2.00x = two whole cores), in run order:")
            for i, ((a, b), (p0, p1)) in enumerate(zip(pairs, probes, strict=True)):
                share = (a / b) / (0.5 * (p0 + p1))
                out.append(f"  - round {i + 1}: survey {a / b:.2f}x; machine {p0:.2f}x before, {p1:.2f}x after; "
                           f"survey / machine {share:.2f}")
    same = all(r["same"] for r in rows)
    out.append(f"- craters tables identical between worker counts at every size: {'yes' if same else 'NO'} "
               "(serial/local/remote scheduler: tests/test_scale.py)")
    return out


_STAGE_ORDER = ("start-up", "model wait", "cluster", "warm-up", "open", "tiles", "merge", "finish", "write")


def plot(rows, args):
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt

        fig, (ax1, ax2) = plt.subplots(1, 2, figsize=(9, 3.4), dpi=110)
        for w in args.workers:
            sel = sorted((r for r in rows if r["workers"] == w), key=lambda r: r["n"])
            x = [r["mpx"] for r in sel]
            ax1.plot(x, [r["mpx"] / r["seconds"] for r in sel], "o-", label=f"{w} worker(s)")
            line = ax2.plot(x, [r["work"] / r["mpx"] for r in sel], "o-", label=f"{w} worker(s): survey work")[0]
            ax2.plot(x, [r["seconds"] / r["mpx"] for r in sel], "s:", color=line.get_color(), alpha=0.6,
                     label=f"{w} worker(s): whole command")
            med = statistics.median(r["work"] / r["mpx"] for r in sel)
            ax2.axhspan(med * (1 - LINEAR_TOLERANCE), med * (1 + LINEAR_TOLERANCE), color=line.get_color(),
                        alpha=0.08)
        ax1.set_ylabel("throughput, whole command (Mpx/s)")
        ax2.set_ylabel("seconds per Mpx")
        ax2.set_title("bands: median +/-25 % (survey work)", fontsize=8)
        for ax in (ax1, ax2):
            ax.set_xscale("log")
            ax.set_xlabel("DEM size (Mpx)")
            ax.grid(alpha=0.3)
            ax.legend(fontsize=7)
        fig.tight_layout()
        fig.savefig(HERE / "results" / "survey.png")
    except Exception as err:  # noqa: BLE001 - the table matters more than the plot
        print(f"plot skipped: {err}")


if __name__ == "__main__":
    main()
