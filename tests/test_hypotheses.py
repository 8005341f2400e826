"""Tests of morpho.hypotheses: the shipped cited TOML families and the validating loader."""

from __future__ import annotations

import re
import shutil

import numpy as np
import pytest

from morpho.errors import HypothesisFileError
from morpho.hypotheses import (
    SECTIONS,
    default_hypotheses,
    default_hypothesis_dir,
    hypothesis_hash,
    load_hypotheses_dir,
    load_hypothesis,
)

FAMILIES = ("impact", "cathode_spot", "anode_spot", "spark_edm")


def test_shipped_families_load_and_every_parameter_is_sourced():
    hyps = default_hypotheses()
    assert set(FAMILIES) <= set(hyps)
    src_ok = re.compile(r"((1[89]|20)\d\d)|from memory|assumption", re.IGNORECASE)
    for h in hyps.values():
        params = [p for sec in h.params.values() for p in sec.values()]
        params += [p for laws in h.laws.values() for p in laws.values()]
        assert params
        for p in params:
            assert src_ok.search(p.source), p.key
            assert p.scale, p.key
    assert hyps["impact"].origin == "impact"
    assert all(hyps[f].origin == "spot" for f in FAMILIES[1:])


def test_impact_laws_cover_every_body_and_quote_pike_1977():
    from morpho.bodies import BODIES

    h = default_hypotheses()["impact"]
    assert set(BODIES) <= set(h.laws)
    # Pike 1977 (from memory; reference sheet 1.1): d = 0.196 D^1.010, h = 0.036 D^1.014
    assert h.laws["moon"]["depth_simple"].central == (0.196, 1.010)
    assert h.laws["moon"]["rim_simple"].central == (0.036, 1.014)
    # Garvin & Frawley 1998 GRL 25 (verified): Mars simple d = 0.14 D^0.90
    assert h.laws["mars"]["depth_simple"].central == (0.14, 0.90)


@pytest.mark.parametrize("family", FAMILIES[1:])
def test_spot_depth_diameter_is_an_explicit_assumption(family):
    # Reference sheet section 6: no published d/D exists for laboratory arc or spark craters.
    h = default_hypotheses()[family]
    assert "assumption" in h.param("profile", "depth_diameter").source.lower()
    assert any("depth/diameter" in c for c in h.caveats)


def test_sampling_stays_inside_ranges():
    rng = np.random.default_rng(0)
    p = default_hypotheses()["cathode_spot"].param("profile", "depth_diameter")
    x = p.sample(rng, 1000)
    assert x.min() >= p.spec["min"] and x.max() <= p.spec["max"]
    assert p.central == pytest.approx(0.5 * (p.spec["min"] + p.spec["max"]))


def _copy(tmp_path, family="cathode_spot"):
    src = default_hypothesis_dir() / f"{family}.toml"
    dst = tmp_path / f"{family}.toml"
    shutil.copy(src, dst)
    return dst


def _edit(path, old, new):
    text = path.read_text()
    assert old in text, old
    path.write_text(text.replace(old, new, 1))


@pytest.mark.parametrize(
    "old, new, key, what",
    [
        # missing source
        ('depth_diameter = { min = 0.15, max = 0.35, source = "assumption (no published d/D for arc craters)", ',
         "depth_diameter = { min = 0.15, max = 0.35, ", "profile.depth_diameter", "source"),
        # min > max
        ("depth_diameter = { min = 0.15, max = 0.35,", "depth_diameter = { min = 0.45, max = 0.35,",
         "profile.depth_diameter", "min"),
        # unknown parameter name (typo)
        ("depth_diameter = {", "depht_diameter = {", "profile.depht_diameter", "unknown key"),
        # unknown key inside a parameter table
        ("depth_diameter = { min = 0.15,", "depth_diameter = { minimum = 0.1, min = 0.15,",
         "profile.depth_diameter", "minimum"),
        # unknown section
        ("[outline]", "[outlines]", "outlines", "unknown section"),
        # a source that names no year and is not 'from memory' / 'assumption'
        ('source = "assumption (no published d/D for arc craters)"', 'source = "lab notes"',
         "profile.depth_diameter", "source"),
    ],
)
def test_invalid_files_are_rejected_naming_the_key(tmp_path, old, new, key, what):
    path = _copy(tmp_path)
    _edit(path, old, new)
    with pytest.raises(HypothesisFileError) as err:
        load_hypothesis(path)
    msg = str(err.value)
    assert f"[{key}]" in msg and what in msg
    assert str(path) in msg


def test_missing_required_parameter_and_missing_body_laws_are_named(tmp_path):
    path = _copy(tmp_path)
    text = path.read_text()
    path.write_text("\n".join(line for line in text.splitlines() if not line.startswith("rim_width")))
    with pytest.raises(HypothesisFileError, match=r"\[profile\.rim_width\] missing"):
        load_hypothesis(path)
    imp = _copy(tmp_path, "impact")
    text = imp.read_text()
    start = text.index("[laws.callisto]")
    imp.write_text(text[:start] + text[start:].replace("peak_height_complex", "#", 1))
    with pytest.raises(HypothesisFileError, match=r"\[laws\.callisto\.peak_height_complex\] missing"):
        load_hypothesis(imp)


def test_bad_toml_is_a_hypothesis_file_error(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text("[hypothesis\nname = ")
    with pytest.raises(HypothesisFileError, match="not valid TOML"):
        load_hypothesis(path)


def test_hash_ignores_comments_but_not_values(tmp_path):
    path = _copy(tmp_path)
    h0 = hypothesis_hash(path)
    path.write_text("# my comment\n" + path.read_text())
    assert hypothesis_hash(path) == h0
    _edit(path, "depth_diameter = { min = 0.15,", "depth_diameter = { min = 0.16,")
    assert hypothesis_hash(path) != h0


def test_a_copied_and_edited_file_changes_the_generated_craters(tmp_path):
    # A scientist copies the files, edits a parameter and generates from the copy.
    from morpho.synth import render_crater_patches

    for f in default_hypothesis_dir().glob("*.toml"):
        shutil.copy(f, tmp_path / f.name)
    path = tmp_path / "cathode_spot.toml"
    _edit(path, "depth_diameter = { min = 0.15, max = 0.35,", "depth_diameter = { value = 0.45,")
    mine = load_hypotheses_dir(tmp_path)
    assert mine["cathode_spot"].sha256 != default_hypotheses()["cathode_spot"].sha256
    _, fresh = render_crater_patches("cathode_spot", 4, (40, 60), body="moon", seed=2, hypotheses=mine,
                                     degradation=None)
    assert np.allclose(fresh["depth_nominal_m"] / fresh["diameter_nominal_m"], 0.45, rtol=0.5)
    _, default = render_crater_patches("cathode_spot", 4, (40, 60), body="moon", seed=2, degradation=None)
    assert (fresh["depth_m"] / fresh["diameter_m"]).median() > (default["depth_m"] / default["diameter_m"]).median()


def test_duplicate_family_names_in_a_folder_are_rejected(tmp_path):
    _copy(tmp_path)
    shutil.copy(tmp_path / "cathode_spot.toml", tmp_path / "other.toml")
    with pytest.raises(HypothesisFileError, match="defined twice"):
        load_hypotheses_dir(tmp_path)


def test_schema_sections_are_documented_in_every_file():
    for h in default_hypotheses().values():
        assert set(h.params) == set(SECTIONS)
