"""Crater morphometry from radial profiles: rim refinement, features with bootstrap errors.

Public API
----------
measure_craters
    One row per crater: refined rim, shape features and their bootstrap errors.
measure_crater
    The same for one crater (pixel spacing or affine transform); no I/O.
refine_craters
    Circle-fit refinement of crater centres and rim-crest radii.
fit_degradation
    Topographic-diffusion degradation ``kappa t / D^2`` (Fassett & Thomson 2014).
sample_radial_profiles, RadialProfiles
    Polar sampling of a DEM around crater centres.
"""

from ._degradation import fit_degradation
from ._degradation import warm_up as _warm_up  # noqa: F401 - one-off set-up hook (pipeline.engine)
from ._measure import measure_crater, measure_craters
from ._refine import refine_craters
from .profiles import RadialProfiles, sample_radial_profiles

__all__ = [
    "measure_craters",
    "measure_crater",
    "refine_craters",
    "fit_degradation",
    "sample_radial_profiles",
    "RadialProfiles",
]
