"""Crater detection on DEMs: multi-scale radial-symmetry candidates verified on radial profiles.

Public API: :func:`detect_craters`; :func:`hough_baseline` is the scikit-image circular Hough
transform on an edge map of the DEM, kept as a reference a user might reach for instead.
"""

from ._detect import COLUMNS, detect_craters
from ._hough import hough_baseline

__all__ = ["COLUMNS", "detect_craters", "hough_baseline"]
