"""Columns of the data dictionary owned by the scaling step (see DEVELOPERS.md)."""

from ._field import Field

_LAWS = ("Pike 1977 (Moon, from memory); Garvin & Frawley 1998 GRL 25 (Mars, verified); "
         "Pike 1988 (Mercury, from memory); Grieve & Pilkington 1996 (Earth, from memory)")

FIELDS = (
    Field("expected_depth_m", "m", "float64",
          "Depth of a fresh impact crater of this diameter on this body (published law).",
          "y = a D^b on the simple or complex branch chosen by the body's transition diameter",
          _LAWS),
    Field("depth_residual_log10", "1", "float64",
          "log10(measured depth / expected fresh depth); < 0 = shallower than fresh.",
          "log10(depth_m / expected_depth_m)", _LAWS),
    Field("expected_rim_height_m", "m", "float64",
          "Rim height of a fresh impact crater of this diameter (NaN where no law is published).",
          "y = a D^b, simple or complex branch", "Pike 1977 (Moon, from memory)"),
    Field("rim_height_residual_log10", "1", "float64",
          "log10(measured rim height / expected fresh rim height).",
          "log10(rim_height_m / expected_rim_height_m)", "Pike 1977 (Moon, from memory)"),
    Field("scaling_regime", "", "str", "'simple' or 'complex' by the body's transition diameter.",
          "diameter_m < transition -> simple", "morpho.bodies (per-body sources)"),
    Field("scaling_out_of_range", "", "bool",
          "True when the diameter lies outside the fitted range of the law used (extrapolated).",
          "compare diameter_m with the branch's published validity range", _LAWS),
    Field("scaling_law", "", "str", "Key of the published law set used (morpho.scaling.LAW_SETS).",
          "per body default or user choice", _LAWS),
    Field("expects_central_peak", "", "bool",
          "A fresh impact crater this large is expected to have a central peak.",
          "diameter_m >= body's transition diameter", "Pike 1980, Icarus 43:1-19"),
)
