"""Identity, position and detection columns of the ``craters`` layer."""

from ._field import Field

FIELDS = (
    Field("crater_id", "", "str", "Stable crater identifier (user id kept by `measure`).",
          "tile-independent: derived from the sorted final table", "common practice"),
    Field("center_x", "CRS map unit", "float64", "Crater centre easting in the DEM's CRS.",
          "refined centre mapped back from the local metric grid to the source CRS", "common practice"),
    Field("center_y", "CRS map unit", "float64", "Crater centre northing in the DEM's CRS.",
          "as center_x", "common practice"),
    Field("lon", "degree", "float64", "East longitude of the centre (-180..180) in the geographic CRS of the DEM's body.",
          "pyproj transform to the geodetic CRS of the DEM (planetocentric on a sphere)", "common practice"),
    Field("lat", "degree", "float64", "Latitude of the centre in the geographic CRS of the DEM's body.",
          "pyproj transform to the geodetic CRS of the DEM (planetocentric on a sphere, planetographic on an ellipsoid)",
          "common practice"),
    Field("diameter_m", "m", "float64", "Rim-crest (rim-to-rim) diameter.",
          "2 x mean rim-crest radius from a least-squares circle fit to the rim crest found on radial profiles, corrected for the local map scale",
          "Pike 1977, Impact and Explosion Cratering (Pergamon) 489-509; Kasa 1976 IEEE Trans. Instrum. Meas. 25:8", has_error=True),
    Field("detection_confidence", "1", "float64", "Confidence in [0, 1] that this is a crater.",
          "product of crest share, crest roundness, depth/diameter against a diameter-dependent floor, "
          "depth/roughness and crest-radius agreement on radial profiles",
          "Loy & Zelinsky 2003, IEEE TPAMI 25:959 (candidates); thresholds set on morpho.synth scenes"),
    Field("rim_coverage", "1", "float64", "Share of profile azimuths on which a rim crest was found on valid data, in [0, 1].",
          "azimuths with a rim crest on valid samples divided by the number of azimuths; < 1 at DEM edges and nodata",
          "common practice"),
    Field("pixels_per_diameter", "1", "float64", "Rim-crest diameter in DEM pixels.",
          "diameter_m / pixel size of the local metric grid", "common practice"),
    Field("measure_status", "", "str", "'ok', or why the crater could not be measured.",
          "set by the morphometry step", "common practice"),
    Field("source_tile", "", "str", "Tile (row_off, col_off) where the crater was measured.",
          "survey engine", "common practice"),
)
