"""`morpho train` and the training path: rendered craters measured by the real morphometry.

Sources: the hypothesis files' own citations (a parameter without a source is refused:
issue 3's rule, common practice for data provenance); reproducibility from a seed is
common practice.
"""

from __future__ import annotations

import json
import re
import shutil

import numpy as np
import pytest
from click.testing import CliRunner

from morpho.cli.main import cli
from morpho.hypotheses import default_hypothesis_dir
from morpho.scoring import load_model
from morpho.scoring._build import DEFAULT_N_PER_CLASS, DEFAULT_SEED
from morpho.scoring._training import build_training_set, feature_columns


def test_cli_defaults_match_the_documented_rebuild():
    params = {p.name: p.default for p in __import__("morpho.cli.train", fromlist=["command"]).command.params}
    assert params["seed"] == DEFAULT_SEED and params["n_per_class"] == DEFAULT_N_PER_CLASS


def test_hypothesis_without_source_is_refused(tmp_path):
    hyp = tmp_path / "hyp"
    shutil.copytree(default_hypothesis_dir(), hyp, ignore=shutil.ignore_patterns("*.py", "__pycache__"))
    f = hyp / "cathode_spot.toml"
    text = f.read_text()
    # Drop the source of the depth/diameter assumption.
    text2 = re.sub(r'(depth_diameter = \{[^}]*?), source = "[^"]*"', r"\1", text, count=1)
    assert text2 != text
    f.write_text(text2)
    res = CliRunner().invoke(cli, ["train", "--hypotheses", str(hyp), "-o", str(tmp_path / "m")])
    assert res.exit_code == 2, res.output
    assert "depth_diameter" in res.output and "source" in res.output
    assert not (tmp_path / "m.skops").exists()


def test_training_rows_are_measured_not_copied():
    # Every training row comes out of measure_craters: the measured d/D differs from the
    # rendered truth by measurement error, never exactly (no shortcut from generator
    # parameters to features).
    df = build_training_set(n_per_class=6, seed=3, pixels_per_diameter_bands=((20.0, 40.0),),
                            surface_share=0.0)
    assert set(df["family"]) == {"impact", "cathode_spot", "anode_spot", "spark_edm"}
    assert "measure_status" in df and "truth_degradation" in df
    cols = feature_columns(df.columns)
    assert "d_over_D" in cols and "pixels_per_diameter" in cols
    assert not any(c.startswith("truth_") or c in ("family", "origin") for c in cols)
    truth_dd = df["truth_depth_diameter"] if "truth_depth_diameter" in df else None
    if truth_dd is not None:
        assert not np.any(df["d_over_D"].to_numpy() == truth_dd.to_numpy())
    # Same seed, same table, whether built in one process or two (common practice:
    # reproducible from a seed; the jobs carry their own seeds).
    again = build_training_set(n_per_class=6, seed=3, pixels_per_diameter_bands=((20.0, 40.0),),
                               surface_share=0.0, n_jobs=2)
    assert again.equals(df)


@pytest.mark.slow
def test_morpho_train_tiny_writes_model_and_card(tmp_path):
    runner = CliRunner()
    args = ["train", "--hypotheses", str(default_hypothesis_dir()), "--seed", "3", "--n-per-class", "30"]
    r1 = runner.invoke(cli, [*args, "-o", str(tmp_path / "a")])
    assert r1.exit_code == 0, r1.output
    r2 = runner.invoke(cli, [*args, "-o", str(tmp_path / "a")])
    assert r2.exit_code == 3 and "exist" in r2.output  # no --overwrite
    card = json.loads((tmp_path / "a.card.json").read_text())
    assert card["rebuild_command"].startswith("morpho train --hypotheses")
    assert {h["family"] for h in card["hypotheses"]} == {"impact", "cathode_spot", "anode_spot", "spark_edm"}
    assert all(len(h["sha256"]) == 64 for h in card["hypotheses"])
    assert "not mechanism" in card["caveats"] or "mechanism" in card["caveats"]
    assert (tmp_path / "a.card.md").read_text().count("| band |") >= 1
    model = load_model(tmp_path / "a.skops")
    assert list(model.feature_names_in_) == card["features"]
