"""skops persistence of scoring models: round trip, untrusted types, corrupt and newer files.

Reference: skops.io (the skops developers' secure persistence format; common practice
for scikit-learn models without pickle).
"""

from __future__ import annotations

import fractions
import json
import zipfile

import numpy as np
import pytest
import skops.io as sio

import morpho.scoring._persistence as persistence
from morpho.errors import ModelFileError, OutputExistsError
from morpho.scoring import ImpactSpotClassifier, load_model, save_model, score_craters

from ._scoring_toy import toy_features


@pytest.fixture(scope="module")
def small_model():
    X, y = toy_features(80, seed=4)
    return ImpactSpotClassifier(random_state=0, max_iter=10).fit(X, y)


def test_round_trip_identical_scores(small_model, tmp_path):
    path = tmp_path / "toy.skops"
    card = {"name": "toy", "features": list(small_model.feature_names_in_), "caveats": "similarity only"}
    save_model(small_model, path, card)
    assert (tmp_path / "toy.card.json").is_file() and (tmp_path / "toy.card.md").is_file()
    assert json.loads((tmp_path / "toy.card.json").read_text())["name"] == "toy"
    loaded, card_back = load_model(path, with_card=True)
    assert card_back["features"] == card["features"]
    X, _ = toy_features(30, seed=8)
    a, b = score_craters(X, small_model), score_craters(X, loaded)
    assert a.equals(b)
    with pytest.raises(OutputExistsError):
        save_model(small_model, path, card)


def test_file_is_not_a_pickle(small_model, tmp_path):
    path = save_model(small_model, tmp_path / "m.skops")
    # A skops file is a zip of JSON (schema.json) plus .npy arrays; a pickle starts with 0x80.
    assert zipfile.is_zipfile(path)
    with zipfile.ZipFile(path) as zf:
        assert "schema.json" in zf.namelist()
        assert not any(n.endswith((".pkl", ".pickle", ".joblib")) for n in zf.namelist())


def test_untrusted_types_refused_and_nothing_loaded(small_model, tmp_path, monkeypatch):
    path = tmp_path / "evil.skops"
    payload = {"format": persistence.FORMAT, "format_version": 1, "model": small_model,
               "card": {}, "extra": fractions.Fraction(1, 3)}
    sio.dump(payload, path)
    assert "fractions.Fraction" in sio.get_untrusted_types(file=path)

    # skops builds objects only in Node.construct, after auditing the whole tree against the
    # trusted list (skops.io.load); nothing in the file may be built.
    from skops.io import _audit

    def _never(*args, **kwargs):  # pragma: no cover - reaching it is the failure
        raise AssertionError("nothing may be built from a file with untrusted types")

    monkeypatch.setattr(_audit.Node, "construct", _never)
    with pytest.raises(ModelFileError, match="untrusted types.*fractions.Fraction"):
        load_model(path)


@pytest.mark.parametrize("damage", ["truncate", "garbage", "bad_json"])
def test_corrupt_file_refused(small_model, tmp_path, damage):
    path = save_model(small_model, tmp_path / "m.skops")
    raw = path.read_bytes()
    if damage == "truncate":
        path.write_bytes(raw[: len(raw) // 2])
    elif damage == "garbage":
        path.write_bytes(np.random.default_rng(0).bytes(4096))
    else:
        with zipfile.ZipFile(path) as zf:
            members = {n: zf.read(n) for n in zf.namelist()}
        members["schema.json"] = b"{not json"
        with zipfile.ZipFile(path, "w") as zf:
            for n, data in members.items():
                zf.writestr(n, data)
    with pytest.raises(ModelFileError, match="corrupt"):
        load_model(path)


def test_newer_format_version_refused(small_model, tmp_path, monkeypatch):
    monkeypatch.setattr(persistence, "FORMAT_VERSION", 99)
    path = save_model(small_model, tmp_path / "future.skops")
    monkeypatch.setattr(persistence, "FORMAT_VERSION", 1)
    with pytest.raises(ModelFileError, match="format version 99"):
        load_model(path)


def test_newer_skops_protocol_refused(small_model, tmp_path):
    path = save_model(small_model, tmp_path / "m.skops")
    with zipfile.ZipFile(path) as zf:
        members = {n: zf.read(n) for n in zf.namelist()}
    schema = json.loads(members["schema.json"])
    schema["protocol"] = 999
    members["schema.json"] = json.dumps(schema).encode()
    with zipfile.ZipFile(path, "w") as zf:
        for n, data in members.items():
            zf.writestr(n, data)
    with pytest.raises(ModelFileError, match="newer|protocol"):
        load_model(path)


def test_not_a_model_refused(tmp_path):
    path = tmp_path / "dict.skops"
    sio.dump({"format": "something-else"}, path)
    with pytest.raises(ModelFileError, match="not a morpho scoring model"):
        load_model(path)
    with pytest.raises(ModelFileError, match="no model file"):
        load_model(tmp_path / "missing.skops")


def test_model_path_needs_neither_scikit_learn_nor_skops():
    # A Dask survey's main process only asks where the model is; the scoring package loads
    # its members on first use (PEP 562), so that stays light.
    import subprocess
    import sys

    code = ("import sys; from morpho.scoring import default_model_path; default_model_path(); "
            "print('sklearn' in sys.modules, 'skops' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.split()
    assert out == ["False", "False"]
