"""End-of-run summary printed by `survey` and `measure` (caveats included)."""

from __future__ import annotations

import click


def print_summary(result, out, seconds: float, n_pixels: int) -> None:
    """Craters found, tiles, time, throughput, verdicts, and the caveats line."""
    from ..caveats import CAVEATS_SHORT

    craters = result.craters
    n_tiles = result.run.get("n_tiles", "?") if isinstance(result.run, dict) else "?"
    mpx = n_pixels / 1e6
    rate = mpx / seconds if seconds > 0 else float("nan")
    lines = [f"{len(craters)} craters -> {out}",
             f"tiles: {n_tiles}, failed: {len(result.failed_tiles)}; {seconds:.1f} s, {mpx:.2f} Mpx, {rate:.2f} Mpx/s"]
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
