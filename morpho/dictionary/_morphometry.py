"""Columns of the data dictionary owned by the morphometry step (see DEVELOPERS.md).

Shared definitions: elevations are relative to the "plain", a robust plane (Tukey-weighted
least squares with an r^-3 ejecta-flank term) fitted to profile samples 1.3-2.5 R from the
refined centre; profiles are 64 azimuths x uniform radii to 2.5 R (bilinear); "mean
profile" is their NaN-aware azimuthal mean; R = rim-crest radius. The crest on each azimuth
is the highest sample within 0.7-1.3 R, moved to where parabolas through the inner wall and
the outer flank (1-3 px away) meet, which undoes the outward shift of a sharp rim blurred
by sampling.
"""

from ._field import Field

_PIKE = "Pike 1977, Impact and Explosion Cratering (Pergamon) 489-509"
_BRETON = "Breton et al. 2019, MethodsX 6:2293-2304"
_MEAN = "on the mean profile; "
_COMMON = "common practice"
#: Rings (crater radii) and azimuthal orders of the ``ring_h{k}_r{100 r/R}`` columns
#: (:func:`morpho.morphometry._features.ring_harmonics`): the cavity (0.2-0.8 R) and the rim
#: crest (1.0 R). Rings outside the rim (1.2, 1.5, 2.0 R) added nothing in 5-fold CV on the
#: training generator and describe the surroundings more than the crater (DEVELOPERS.md).
RING_RADII = (0.2, 0.4, 0.6, 0.8, 1.0)
RING_ORDERS = (1, 2, 3, 4)


def _ring_name(k, rho):
    return f"ring_h{k}_r{round(100 * rho):03d}"


#: Column names of the ring harmonics, orders then rings.
RING_COLUMNS = tuple(_ring_name(k, rho) for k in RING_ORDERS for rho in RING_RADII)

FIELDS = (
    Field("ellipse_major_m", "m", "float64", "Major axis (full length) of the rim-crest ellipse.",
          "algebraic conic least-squares fit to the rim-crest points",
          "Fitzgibbon et al. 1999, IEEE TPAMI 21:476, general-conic variant (from memory)", has_error=True),
    Field("ellipse_minor_m", "m", "float64", "Minor axis (full length) of the rim-crest ellipse.",
          "as ellipse_major_m", "Fitzgibbon et al. 1999, IEEE TPAMI 21:476 (from memory)", has_error=True),
    Field("ellipse_azimuth_deg", "degree", "float64",
          "Direction of the ellipse major axis, clockwise from grid north, in [0, 180).",
          "from the conic coefficients", _COMMON),
    Field("ellipticity", "1", "float64", "Major / minor axis of the rim-crest ellipse (>= 1).",
          "ellipse_major_m / ellipse_minor_m", "Bottke et al. 2000, Icarus 145:108 (from memory)", has_error=True),
    Field("outline_irregularity", "1", "float64",
          "RMS-combined amplitude of harmonics 2-8 of rim-crest radius vs azimuth, over the mean radius.",
          "sqrt(sum_k a_k^2) / a_0 with a_k the amplitude of cos(k az) in the crest radius (DFT)",
          "Eppler et al. 1983, JGR 88(S1):A213, Fourier outline analysis (from memory)", has_error=True),
    Field("polygonality_index", "1", "float64",
          "Share of the outline-irregularity power in the strongest of harmonics 3-8 (1 = one polygon order).",
          "max_{k=3..8} a_k^2 / sum_{k=2..8} a_k^2", "defined here", has_error=True),
    *(Field(f"rim_harmonic_{k}", "1", "float64",
            f"Amplitude of azimuthal harmonic {k} of the rim-crest radius over the mean radius.",
            "weighted DFT of the crest radius after removing its mean",
            "Eppler et al. 1983, JGR 88(S1):A213 (from memory)") for k in range(2, 9)),
    Field("rim_height_asymmetry", "1", "float64",
          "Amplitude of the first azimuthal harmonic of rim-crest height over the mean rim height.",
          "DFT of per-azimuth crest elevation above the plain", _COMMON, has_error=True),
    Field("rim_height_variation", "1", "float64",
          "Robust relative spread of rim-crest height around the rim (0 = even rim).",
          "1.4826 x median absolute deviation of per-azimuth crest elevation above the plain, over its median",
          "Rousseeuw & Croux 1993, JASA 88:1273 (MAD); applied to rim heights here", has_error=True),
    Field("outline_spread", "1", "float64",
          "Robust relative spread of the rim-crest radius around the centre (0 = circle).",
          "1.4826 x median absolute deviation of per-azimuth crest distance, over its median",
          "Rousseeuw & Croux 1993, JASA 88:1273 (MAD); applied to crest radii here", has_error=True),
    Field("bowl_offset", "1", "float64",
          "Distance of the deep cavity's centroid from the rim-crest centre, in crater radii.",
          "area-weighted centroid of the cavity below half the depth, inside 0.8 R, from the 64 profiles",
          "defined here", has_error=True),
    *(Field(_ring_name(k, rho), "1", "float64",
            f"Amplitude of azimuthal harmonic {k} of the detrended elevation on the ring at {rho:g} crater "
            "radii, over the rim-to-floor relief (0 = axisymmetric there).",
            "linear interpolation of the 64 profiles to the ring; ring mean removed; DFT amplitude "
            "2|sum (z - mean) exp(-i k theta)| / n_valid over the relief of the azimuth-mean profile "
            "(highest point 0.8-1.2 R minus lowest inside 1 R); NaN with fewer than a quarter of the "
            "azimuths valid",
            "defined here (azimuthal Fourier amplitudes as for crater outlines, Eppler et al. 1983, "
            "JGR 88(S1):A213, from memory)")
      for k in RING_ORDERS for rho in RING_RADII),
    Field("ejecta_flank_ratio", "1", "float64",
          "Outer-flank amplitude over rim height: ~1 when the flank continues the rim, ~0 when it ends there.",
          "e / h with e the (r/R)^-3 term of the robust 1.3-2.5 R annulus fit and h the rim height",
          "McGetchin et al. 1973, EPSL 20:226 (flank law, from memory); ratio defined here"),
    Field("exterior_roughness", "1", "float64",
          "Roughness of the surroundings (1.3-2.5 R) about the fitted plain and flank, over the depth.",
          "90th percentile of the absolute residuals of the robust annulus fit, divided by depth_m",
          "defined here (context: large where neighbours cut the surroundings)"),
    Field("neighbour_cover", "1", "float64",
          "Share of the surroundings (1.3-2.5 R) lying within 1.3 radii of a neighbouring crater's centre.",
          "fraction of the annulus profile samples inside any other measured crater's 1.3 R disk; "
          "samples beyond 1.2 R inside such a disk are left out of every other measurement (unless that "
          "neighbour's rim encloses the centre, or < 40 % of the annulus would remain)",
          "defined here (context: the neighbours are the other craters measured with it)"),
    Field("neighbour_overlap", "1", "float64",
          "Deepest rim overlap with a neighbouring crater, in this crater's radii (0 = no rim overlaps).",
          "max over neighbours of (R + R_j - d_j) / R, clipped at 0, with d_j the centre distance",
          "defined here (context)"),
    Field("neighbour_size_log_ratio", "1", "float64",
          "ln(R_j / R) of the most-overlapping neighbour (> 0: the neighbour is larger; 0 if none).",
          "from the rim-crest radii", "defined here (context)"),
    Field("inside_neighbour", "", "bool", "The centre lies inside a neighbouring crater's rim.",
          "centre distance < the neighbour's rim-crest radius", "defined here (context)"),
    Field("rim_curvature_norm", "1", "float64",
          "Rim sharpness: -d2z/dr2 at the crest times D (larger = sharper crest).",
          "3-point stencil at crest +- 0.1 R on each azimuth; median over azimuths", _COMMON,
          has_error=True),
    Field("rim_crest_angle_deg", "degree", "float64",
          "Angle between the inner-wall and outer-flank secants through the crest (180 = flat).",
          "secants from the crest to +-0.1 R on each azimuth; median over azimuths", _COMMON,
          has_error=True),
    Field("depth_m", "m", "float64", "Depth from rim crest to floor.",
          "rim level (60th percentile of per-azimuth crest elevations) minus the floor level "
          "(lowest value, on the radii used, of an area-weighted fit z = a + b r^2 to the mean "
          "profile within 10 % of the relief above its minimum, inside 0.9 R)",
          f"{_PIKE}; {_BRETON} (robust rim/floor levels)", has_error=True),
    Field("rim_height_m", "m", "float64", "Rim-crest height above the surrounding plain.",
          "rim level (60th percentile of crest elevations) above the annulus plain", _PIKE,
          has_error=True),
    Field("d_over_D", "1", "float64", "Depth / rim-crest diameter.", "depth_m / diameter_m", _PIKE,
          has_error=True),
    Field("h_over_D", "1", "float64", "Rim height / rim-crest diameter.", "rim_height_m / diameter_m",
          _PIKE, has_error=True),
    Field("wall_slope_mean_deg", "degree", "float64", "Mean inner-wall slope.",
          _MEAN + "arctan of the secant between the radii where the profile is 10 % and 90 % of "
          "the depth above the floor", _COMMON, has_error=True),
    Field("wall_slope_upper_deg", "degree", "float64", "Upper inner-wall slope.",
          _MEAN + "arctan of the secant between the 60 % and 90 % depth levels", _COMMON,
          has_error=True),
    Field("floor_diameter_fraction", "1", "float64", "Floor diameter / rim-crest diameter.",
          _MEAN + "radius, going inward from the crest, where the profile first falls to 5 % of "
          "the depth above the floor, over R", _PIKE, has_error=True),
    Field("floor_flatness", "1", "float64",
          "1 - (mean |slope| on the floor) / (mean wall gradient), clipped to [0, 1]; 1 = flat.",
          _MEAN + "floor = inside floor_diameter_fraction and below the 5 % level", "defined here",
          has_error=True),
    Field("central_peak_present", "", "bool",
          "A central peak rises more than 10 % of the depth above the floor.",
          _MEAN + "highest point inside the radius of the floor minimum", _COMMON),
    Field("central_peak_height_m", "m", "float64", "Central-peak height above the floor (0 if absent).",
          _MEAN + "maximum inside the floor minimum minus the floor level",
          "Hale & Grieve 1982, JGR 87(S1):A65", has_error=True),
    Field("central_peak_basal_width_m", "m", "float64",
          "Central-peak basal diameter (0 if absent).",
          _MEAN + "2 x the radius where the peak falls to 10 % of its height above the floor",
          "Hale & Grieve 1982, JGR 87(S1):A65", has_error=True),
    Field("central_pit_present", "", "bool",
          "The centre lies more than 10 % of the depth below a flat inner floor.",
          _MEAN + "median on 0.2-0.4 R minus the lowest value inside 0.2 R, if that ring is flat "
          "(10-90 % spread < a quarter of the pit depth); the pit is then left out of the floor",
          _COMMON),
    Field("central_pit_depth_m", "m", "float64", "Central-pit depth below its surroundings (0 if absent).",
          "as central_pit_present", "Barlow 2010, GSA Spec. Pap. 465:15, central pits (from memory)", has_error=True),
    Field("interior_shape_exponent", "1", "float64",
          "Exponent n of the bowl z - floor = a (r/R)^n (2 = paraboloid, 1 = cone).",
          _MEAN + "log-log least squares over 0.3-0.9 R", "Mahanti et al. 2014, Icarus 241:114",
          has_error=True),
    Field("cavity_volume_m3", "m^3", "float64", "Volume of the cavity below the rim level.",
          _MEAN + "trapezoid integral of 2 pi r (rim level - z) dr from 0 to R", _COMMON,
          has_error=True),
    Field("rim_flank_decay_exponent", "1", "float64",
          "Exponent b of the outer flank z = h (r/R)^-b above the plain.",
          _MEAN + "log-log least squares over 1.1-1.5 R",
          "McGetchin et al. 1973, EPSL 20:226 (b = 3 for ejecta)", has_error=True),
    Field("regional_slope_deg", "degree", "float64", "Slope of the regional plain around the crater.",
          "gradient of the robust annulus plane", _COMMON),
    Field("kappa_t_over_d2", "1", "float64",
          "Degradation state: diffusivity x time / D^2 of the diffused fresh profile that fits best "
          "(NaN unless a body is given).",
          "least squares over 0-1.5 R between the mean profile and the body's fresh profile "
          "(morpho.shapes) diffused in time; grid 1e-5..0.25 with parabolic refinement; reliable above ~4.5 / pixels_per_diameter^2",
          "Fassett & Thomson 2014, JGR Planets 119:2255", has_error=True),
)
