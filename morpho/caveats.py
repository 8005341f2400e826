"""The caveats that travel with every morpho output, kept in one place.

The GeoPackage ``run`` table, the export's provenance file, the HTML report and
the command-line summary all quote these constants, so the wording cannot drift
between outputs.
"""

from __future__ import annotations

__all__ = ["CAVEATS", "CAVEATS_SHORT"]

#: Full caveats text (several lines), written into every output.
CAVEATS = """\
1. The hypothesis score measures morphological similarity under stated assumptions; it says nothing about mechanism by itself. A crater that scores as similar to an electrode-spot crater has a shape like one, nothing more.
2. Impact is the consensus origin of planetary craters. The electric-discharge hypothesis scored here is a minority view, tested as a contrast, not endorsed.
3. Laboratory electrode (arc or spark) spots are micrometre-to-millimetre features on metal electrodes. Scaling their shapes to kilometre-sized craters on rock and regolith is an untested assumption.
4. No published depth/diameter ratio exists for laboratory arc or spark craters; the spot-morphology parameters morpho uses for them are assumptions, stated in the hypothesis files.
5. Measurements depend on DEM resolution and quality: craters spanning few pixels, or with rims on missing data, carry larger uncertainties (see the *_err, rim_coverage and pixels_per_diameter columns).
6. The scorer learnt from synthetic craters only. Craters outside its training ranges, or seen on rougher, more crowded and coarser ground at once than almost any training crater, get the verdict 'neither' (the scoring_domain column says why); on real, heavily degraded or overlapping craters even in-range verdicts are unreliable (see the model card's failure modes)."""

#: One line for command-line summaries.
CAVEATS_SHORT = (
    "Scores measure morphological similarity under stated assumptions, not mechanism; "
    "impact is the consensus origin of planetary craters."
)
