"""Columns of the data dictionary owned by the scores step (morpho.scoring).

The scores measure morphological similarity to synthetic craters rendered from the
hypothesis files, under those files' assumptions; they say nothing about mechanism.
Impact is the consensus origin of planetary craters.
"""

from ._field import Field

_CAVEAT = (
    " Morphological similarity under the hypothesis files' assumptions, not mechanism; "
    "spot families were measured at micrometre-to-millimetre scale on metals."
)
_MODEL = "ImpactSpotClassifier (morpho.scoring) trained on craters rendered by morpho.synth from the hypothesis files and measured by morpho.morphometry"

FIELDS = (
    Field(
        "p_impact", "1", "float64",
        "Calibrated probability that the crater's shape comes from the impact hypothesis rather than "
        "the electrode-spot families, under equal priors (50 : 50)." + _CAVEAT,
        _MODEL + "; gradient-boosted trees with class-balanced weights, Platt-scaled on cross-validated predictions",
        "Friedman 2001, Ann. Stat. 29:1189 (gradient boosting); Platt 1999, Advances in Large Margin "
        "Classifiers (MIT Press) 61-74 (sigmoid calibration)",
    ),
    Field(
        "log10_lr", "1", "float64",
        "log10 likelihood ratio impact : electrode spot (positive favours impact); bounded by +-6.",
        "log10(p_impact / (1 - p_impact)): with equal priors the posterior odds equal the likelihood ratio",
        "Kass & Raftery 1995, J. Am. Stat. Assoc. 90:773-795",
    ),
    Field(
        "typicality_impact", "1", "float64",
        "How typical the feature vector is of synthetic impact craters, in (0, 1]; below 0.01 it is more "
        "extreme than ~99 % of them.",
        "conformal p-value of the distance to the 5th-nearest impact training crater in robust z-scores "
        "(median/IQR), against the leave-one-out distances of the training craters; resolution excluded",
        "Vovk, Gammerman & Shafer 2005, Algorithmic Learning in a Random World (Springer)",
    ),
    Field(
        "typicality_spot", "1", "float64",
        "How typical the feature vector is of synthetic electrode-spot craters (all families pooled), in (0, 1].",
        "as typicality_impact, fitted on the spot-family training craters",
        "Vovk, Gammerman & Shafer 2005, Algorithmic Learning in a Random World (Springer)",
    ),
    Field(
        "verdict", "", "str",
        "'impact', 'discharge', 'neither' (atypical under both: both typicalities < 0.01, or outside the "
        "model's training domain, see scoring_domain), 'undecided' (weak likelihood ratio |log10_lr| < 0.5, "
        "or favoured hypothesis atypical), or 'unscored' (no usable features).",
        "thresholds are class constants of ImpactSpotClassifier (TYPICALITY_THRESHOLD, LR_THRESHOLD)",
        "Kass & Raftery 1995, J. Am. Stat. Assoc. 90:773-795 (evidence scale); common practice (1 % tail)",
    ),
    Field(
        "evidence", "", "str",
        "The three features that moved log10_lr most for this crater, with the signed change "
        "(e.g. 'depth_diameter_ratio:+1.2; ...'; positive pushed towards impact).",
        "occlusion: each feature replaced by the training median, change of log10_lr recorded",
        "Zeiler & Fergus 2014, ECCV, LNCS 8689:818-833",
    ),
    Field(
        "spot_family", "", "str",
        "The electrode-spot family (from the hypothesis files) whose synthetic craters the crater "
        "resembles most." + _CAVEAT,
        "gradient-boosted trees trained on the spot families only, class-balanced",
        "Friedman 2001, Ann. Stat. 29:1189",
    ),
    Field(
        "p_spot_family", "1", "float64",
        "Probability of spot_family among the spot families (equal priors), given that the crater is spot-like.",
        "predict_proba of the spot-family classifier",
        "Friedman 2001, Ann. Stat. 29:1189",
    ),
    Field(
        "scoring_domain", "", "str",
        "Empty when the crater lies inside the scoring model's training domain; otherwise why not "
        "(resolution, size, degradation, or how it is seen). Verdicts outside the domain are set to 'neither'.",
        "training ranges of the model: 10-80 px per diameter, D <= 5 x transition diameter, kappa t/D^2 <= 0.02; "
        "and at least 0.1 % of the model's training craters as rough (exterior_roughness), as crowded "
        "(neighbour_cover) and as coarse (pixels_per_diameter) at once",
        "common practice (no extrapolation of a classifier beyond its training data; data-depth "
        "applicability domain, e.g. Netzeva et al. 2005, ATLA 33:155, from memory)",
    ),
)
