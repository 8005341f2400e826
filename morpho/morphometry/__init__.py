"""Crater morphometry from radial profiles: rim refinement, features with bootstrap errors.

Public API
----------
refine_craters
    Circle-fit refinement of crater centres and rim-crest radii.
sample_radial_profiles, RadialProfiles
    Polar sampling of a DEM around crater centres.
"""

from ._refine import refine_craters
from .profiles import RadialProfiles, sample_radial_profiles

__all__ = ["refine_craters", "sample_radial_profiles", "RadialProfiles"]
