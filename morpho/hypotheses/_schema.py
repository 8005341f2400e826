"""Schema and validation of hypothesis files (TOML).

A hypothesis file describes one crater family (``impact`` or an electrode-spot family)
as parameter distributions. Every parameter is a TOML table holding one value
specification plus ``source`` (author, year, journal; or "from memory"; or "assumption")
and ``scale`` (the scale range it was measured over). Value specifications:

- ``value = x`` (number, string or list of numbers): fixed;
- ``min = a, max = b`` (optional ``dist = "uniform" | "loguniform"``): a range;
- ``dist = "normal", mean = m, sd = s`` (optional ``min``/``max`` truncation);
- ``dist = "lognormal", median = m, sigma = s`` (natural-log sigma; optional ``min``/``max``);
- ``a = ..., b = ...``: a power law ``y = a D**b`` (km), only under ``[laws.<body>]``.

Optional keys in a parameter table: ``note``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import HypothesisFileError

__all__ = ["Param", "Hypothesis", "SCHEMA_VERSION", "SECTIONS", "LAW_NAMES", "validate"]

SCHEMA_VERSION = 1

#: parameter names allowed per section, with the origins for which each is required
#: ("impact", "spot", "both" or "" for optional).
SECTIONS: dict[str, dict[str, str]] = {
    "profile": {
        "depth_diameter": "spot",
        "rim_height_diameter": "spot",
        "depth_scatter": "both",
        "rim_height_scatter": "both",
        "interior_exponent": "both",
        "wall_exponent_complex": "impact",
        "max_wall_slope_deg": "both",
        "floor_fraction": "spot",
        "central_feature_probability": "both",
        "central_feature_height": "spot",
        "central_feature_base_fraction": "both",
        "flank_exponent": "both",
        "flank_outer": "both",
        "rim_width": "both",
        "bowl_asymmetry": "",
    },
    "outline": {
        "harmonic_amplitude": "both",
        "harmonic_max_order": "both",
        "harmonic_spectral_slope": "both",
        "rim_height_variation": "both",
    },
    "degradation": {
        "kappa_m2_per_myr": "",
        "normalised_degradation": "both",
    },
    "sfd": {
        "model": "both",
        "cumulative_slope": "",
        "neukum_coefficients": "",
        "lognormal_sigma": "",
    },
    "arrangement": {
        "random_weight": "both",
        "clustered_weight": "both",
        "chain_weight": "both",
        "rim_on_rim_weight": "both",
        "cluster_radius_diameters": "both",
        "cluster_mean_size": "both",
        "chain_length": "both",
        "chain_spacing_diameters": "both",
        "chain_turn_deg": "both",
        "rim_on_rim_offset": "both",
    },
}

#: power laws per body under [laws.<body>] (impact only), y = a D^b in km
LAW_NAMES = ("depth_simple", "rim_simple", "depth_complex", "rim_complex", "floor_complex",
             "peak_height_complex")

_META_KEYS = {"schema_version", "name", "origin", "description", "caveats"}
_ORIGINS = ("impact", "spot")
_SPEC_KEYS = {"value", "min", "max", "dist", "mean", "sd", "median", "sigma", "a", "b"}
_TEXT_KEYS = {"source", "scale", "note"}
_SOURCE_OK = re.compile(r"((1[89]|20)\d\d)|from memory|assumption", re.IGNORECASE)
_SFD_MODELS = ("neukum2001", "power_law", "lognormal")


@dataclass(frozen=True)
class Param:
    """One parameter: a value specification with its source and scale note."""

    key: str
    kind: str  # "value" | "uniform" | "loguniform" | "normal" | "lognormal" | "law"
    spec: dict[str, Any]
    source: str
    scale: str
    note: str = ""

    @property
    def central(self):
        """Representative value: the fixed value, range midpoint (geometric for loguniform),
        mean, median, or ``(a, b)`` for a law."""
        s = self.spec
        if self.kind == "value":
            return s["value"]
        if self.kind == "uniform":
            return 0.5 * (s["min"] + s["max"])
        if self.kind == "loguniform":
            return float(np.sqrt(s["min"] * s["max"]))
        if self.kind == "normal":
            return s["mean"]
        if self.kind == "lognormal":
            return s["median"]
        return (s["a"], s["b"])

    def sample(self, rng: np.random.Generator, size: int) -> np.ndarray:
        """Draw ``size`` values (numeric kinds only; a fixed value is repeated)."""
        s = self.spec
        if self.kind == "value":
            return np.full(size, s["value"], dtype=np.float64)
        if self.kind == "uniform":
            return rng.uniform(s["min"], s["max"], size)
        if self.kind == "loguniform":
            return np.exp(rng.uniform(np.log(s["min"]), np.log(s["max"]), size))
        if self.kind in ("normal", "lognormal"):
            if self.kind == "normal":
                x = rng.normal(s["mean"], s["sd"], size)
            else:
                x = s["median"] * np.exp(rng.normal(0.0, s["sigma"], size))
            return np.clip(x, s.get("min", -np.inf), s.get("max", np.inf))
        raise TypeError(f"{self.key}: a power law cannot be sampled; use .central")


@dataclass(frozen=True)
class Hypothesis:
    """A validated hypothesis family.

    Attributes
    ----------
    name, origin, description : str
        ``origin`` is ``"impact"`` or ``"spot"``.
    caveats : tuple of str
        Statements the file makes about what was never measured.
    params : dict
        ``{section: {name: Param}}``.
    laws : dict
        ``{body: {law_name: Param}}`` (impact only).
    path : str
        File it came from.
    sha256 : str
        :func:`morpho.hypotheses.hypothesis_hash` of the file.
    """

    name: str
    origin: str
    description: str
    caveats: tuple[str, ...]
    params: dict[str, dict[str, Param]]
    laws: dict[str, dict[str, Param]] = field(default_factory=dict)
    path: str = ""
    sha256: str = ""

    def param(self, section: str, name: str) -> Param | None:
        """The parameter ``[section].name`` or ``None`` if the file does not give it."""
        return self.params.get(section, {}).get(name)

    def central(self, section: str, name: str, default=None):
        p = self.param(section, name)
        return default if p is None else p.central


def _fail(key: str, msg: str, path, fix: str | None = None):
    raise HypothesisFileError(f"[{key}] {msg}", path=path, fix=fix)


def _number(key, name, v, path):
    if isinstance(v, bool) or not isinstance(v, int | float) or not np.isfinite(v):
        _fail(key, f"'{name}' must be a finite number; got {v!r}.", path)
    return float(v)


def _parse_param(key: str, table: Any, path, *, law: bool = False) -> Param:
    if not isinstance(table, dict):
        _fail(key, f"expected a table with a value and 'source'; got {table!r}.", path,
              fix=f'write it as {key.split(".")[-1]} = {{ value = ..., source = "...", scale = "..." }}')
    unknown = sorted(set(table) - _SPEC_KEYS - _TEXT_KEYS)
    if unknown:
        _fail(key, f"unknown key {unknown[0]!r}; allowed: {', '.join(sorted(_SPEC_KEYS | _TEXT_KEYS))}.",
              path)
    for text in ("source", "scale"):
        if text not in table or not isinstance(table[text], str) or not table[text].strip():
            _fail(key, f"missing '{text}'.", path,
                  fix='give source = "Author Year, Journal" (or "from memory" / "assumption") and '
                  'scale = "the scale range it was measured over"')
    if not _SOURCE_OK.search(table["source"]):
        _fail(key, f"source {table['source']!r} names no year and does not say 'from memory' or "
              "'assumption'.", path)
    spec_keys = set(table) & _SPEC_KEYS
    spec: dict[str, Any] = {}
    if law:
        if spec_keys != {"a", "b"}:
            _fail(key, f"a law needs exactly 'a' and 'b'; got {sorted(spec_keys)}.", path)
        spec = {k: _number(key, k, table[k], path) for k in ("a", "b")}
        if spec["a"] <= 0:
            _fail(key, f"'a' must be > 0; got {spec['a']}.", path)
        kind = "law"
    elif "value" in spec_keys:
        if spec_keys != {"value"}:
            _fail(key, f"'value' cannot be combined with {sorted(spec_keys - {'value'})}.", path)
        v = table["value"]
        if isinstance(v, list):
            spec = {"value": [_number(key, "value", x, path) for x in v]}
        elif isinstance(v, str):
            spec = {"value": v}
        else:
            spec = {"value": _number(key, "value", v, path)}
        kind = "value"
    else:
        dist = table.get("dist", "uniform" if {"min", "max"} <= spec_keys else None)
        need = {"uniform": {"min", "max"}, "loguniform": {"min", "max"},
                "normal": {"mean", "sd"}, "lognormal": {"median", "sigma"}}
        if dist not in need:
            _fail(key, f"no value given (use value, min/max, or dist = normal/lognormal); got "
                  f"dist={dist!r}.", path)
        allowed = need[dist] | {"dist", "min", "max"}
        extra = sorted(spec_keys - allowed)
        if extra:
            _fail(key, f"key {extra[0]!r} does not belong to dist = {dist!r}.", path)
        missing = sorted(need[dist] - spec_keys)
        if missing:
            _fail(key, f"missing {missing[0]!r} for dist = {dist!r}.", path)
        spec = {k: _number(key, k, table[k], path) for k in spec_keys - {"dist"}}
        if "min" in spec and "max" in spec and spec["min"] > spec["max"]:
            _fail(key, f"min ({spec['min']}) > max ({spec['max']}).", path)
        if dist == "loguniform" and spec["min"] <= 0:
            _fail(key, f"loguniform needs min > 0; got {spec['min']}.", path)
        if dist in ("normal", "lognormal") and spec.get("sd", spec.get("sigma")) < 0:
            _fail(key, "spread ('sd'/'sigma') must be >= 0.", path)
        if dist == "lognormal" and spec["median"] <= 0:
            _fail(key, f"lognormal needs median > 0; got {spec['median']}.", path)
        kind = dist
    return Param(key=key, kind=kind, spec=spec, source=table["source"].strip(),
                 scale=table["scale"].strip(), note=str(table.get("note", "")).strip())


def validate(data: dict, path="<hypothesis>", sha256: str = "") -> Hypothesis:
    """Validate parsed TOML ``data`` and return a :class:`Hypothesis`.

    Raises
    ------
    HypothesisFileError
        Naming the offending key: unknown key, missing source, min > max, missing parameter.
    """
    if "hypothesis" not in data or not isinstance(data["hypothesis"], dict):
        _fail("hypothesis", "missing the [hypothesis] table (name, origin, description).", path)
    meta = data["hypothesis"]
    for k in sorted(set(meta) - _META_KEYS):
        _fail(f"hypothesis.{k}", f"unknown key; allowed: {', '.join(sorted(_META_KEYS))}.", path)
    for k in ("schema_version", "name", "origin", "description"):
        if k not in meta:
            _fail(f"hypothesis.{k}", "missing.", path)
    if meta["schema_version"] != SCHEMA_VERSION:
        _fail("hypothesis.schema_version", f"this morpho reads schema {SCHEMA_VERSION}; the file "
              f"says {meta['schema_version']!r}.", path)
    origin = meta["origin"]
    if origin not in _ORIGINS:
        _fail("hypothesis.origin", f"must be one of {_ORIGINS}; got {origin!r}.", path)
    name = str(meta["name"])
    if not re.fullmatch(r"[a-z][a-z0-9_]*", name):
        _fail("hypothesis.name", f"must be lower-case letters, digits and '_'; got {name!r}.", path)
    if origin == "impact" and name != "impact":
        _fail("hypothesis.name", f"the impact family must be named 'impact'; got {name!r}.", path)
    caveats = meta.get("caveats", [])
    if not isinstance(caveats, list) or not all(isinstance(c, str) for c in caveats):
        _fail("hypothesis.caveats", "must be a list of strings.", path)

    for top in sorted(set(data) - set(SECTIONS) - {"hypothesis", "laws"}):
        _fail(top, f"unknown section; allowed: hypothesis, laws, {', '.join(SECTIONS)}.", path)
    params: dict[str, dict[str, Param]] = {}
    for section, names in SECTIONS.items():
        given = data.get(section, {})
        if not isinstance(given, dict):
            _fail(section, "must be a table.", path)
        for k in sorted(set(given) - set(names)):
            _fail(f"{section}.{k}", f"unknown key; allowed in [{section}]: {', '.join(names)}.", path)
        params[section] = {k: _parse_param(f"{section}.{k}", v, path) for k, v in given.items()}
        for k, req in names.items():
            if req in ("both", origin) and k not in params[section]:
                _fail(f"{section}.{k}", f"missing (required for origin = {origin!r}).", path)

    laws: dict[str, dict[str, Param]] = {}
    if "laws" in data:
        if origin != "impact":
            _fail("laws", "per-body laws belong to the impact family only.", path)
        for body, table in data["laws"].items():
            if not isinstance(table, dict):
                _fail(f"laws.{body}", "must be a table of laws.", path)
            for k in sorted(set(table) - set(LAW_NAMES)):
                _fail(f"laws.{body}.{k}", f"unknown key; allowed: {', '.join(LAW_NAMES)}.", path)
            for k in LAW_NAMES:
                if k not in table:
                    _fail(f"laws.{body}.{k}", "missing.", path)
            laws[body] = {k: _parse_param(f"laws.{body}.{k}", table[k], path, law=True)
                          for k in LAW_NAMES}
    elif origin == "impact":
        _fail("laws", "missing: the impact family needs [laws.<body>] for each body.", path)

    _check_semantics(params, origin, path)
    return Hypothesis(name=name, origin=origin, description=str(meta["description"]),
                      caveats=tuple(caveats), params=params, laws=laws, path=str(path),
                      sha256=sha256)


def _check_semantics(params, origin, path):
    model = params["sfd"]["model"]
    if model.kind != "value" or model.spec["value"] not in _SFD_MODELS:
        _fail("sfd.model", f"must be value = one of {_SFD_MODELS}; got {model.spec}.", path)
    needs = {"neukum2001": "neukum_coefficients", "power_law": "cumulative_slope",
             "lognormal": "lognormal_sigma"}[model.spec["value"]]
    if needs not in params["sfd"]:
        _fail(f"sfd.{needs}", f"missing (required by sfd.model = {model.spec['value']!r}).", path)
    coeffs = params["sfd"].get("neukum_coefficients")
    if coeffs is not None and (coeffs.kind != "value" or not isinstance(coeffs.spec["value"], list)):
        _fail("sfd.neukum_coefficients", "must be value = [a0, a1, ...].", path)
    for section, name in (("outline", "harmonic_max_order"),):
        p = params[section][name]
        if p.kind != "value" or not isinstance(p.spec["value"], float) or p.spec["value"] < 1:
            _fail(f"{section}.{name}", "must be value = an integer >= 1.", path)
    for name in ("random_weight", "clustered_weight", "chain_weight", "rim_on_rim_weight"):
        p = params["arrangement"][name]
        lo = p.spec.get("min", p.spec.get("value", 0.0))
        if p.kind == "value" and not isinstance(p.spec["value"], float) or (
                isinstance(lo, float) and lo < 0):
            _fail(f"arrangement.{name}", "must be a number >= 0.", path)
