"""`morpho export`: feature table, generated data dictionary, provenance.

References: pandas' CSV/Parquet readers read the files back; the dictionary is
checked against ``morpho.dictionary`` (the single declaration, STYLE.md habit 7).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from morpho import dictionary
from morpho.cli.main import cli
from morpho.errors import InputError, OutputExistsError
from morpho.outputs import _export, companion_paths, export_features, write_geopackage
from morpho.outputs._sample import sample_craters

RUN = {"input_file": "brannock.tif", "input_sha256": "ab" * 32, "seed": "5", "caveats": "text"}


@pytest.fixture(scope="module")
def craters():
    # rows deliberately out of crater_id order
    return sample_craters(40, seed=8).sample(frac=1.0, random_state=2)


@pytest.fixture
def gpkg(tmp_path, craters):
    return write_geopackage(tmp_path / "survey.gpkg", craters, run=RUN)


def test_csv_has_every_crater_in_id_order_with_dictionary_columns(tmp_path, gpkg, craters):
    out = export_features(gpkg, tmp_path / "features.csv")
    table = pd.read_csv(out, keep_default_na=False, na_values=[""])
    expected_cols = [c for c in dictionary.CRATER_COLUMNS if c in craters.columns]
    assert list(table.columns) == expected_cols
    assert list(table["crater_id"]) == sorted(craters["crater_id"])
    ref = craters.set_index("crater_id").loc[table["crater_id"]]
    for col in expected_cols[1:]:
        if dictionary.get_field(col).dtype == "float64":
            # %.10g keeps 10 significant digits
            np.testing.assert_allclose(table[col], ref[col], rtol=1e-9)
        else:
            assert list(table[col].astype(str)) == list(ref[col].astype(str)), col


def test_every_exported_column_is_documented_with_a_unit(tmp_path, gpkg):
    out = export_features(gpkg, tmp_path / "features.csv")
    dict_path, _ = companion_paths(out)
    doc = pd.read_csv(dict_path, keep_default_na=False, dtype=str)
    assert list(doc.columns) == ["column", "unit", "dtype", "definition", "method", "reference"]
    header = pd.read_csv(out, nrows=0).columns.tolist()
    assert doc["column"].tolist() == header
    for row in doc.itertuples():
        field = dictionary.get_field(row.column)
        assert (row.unit, row.dtype, row.definition) == (field.unit, field.dtype, field.definition)
        # Field docs: unit "" only for text and identifiers, "1" for dimensionless numbers
        if row.dtype in ("float64", "int64") and not row.column.endswith("_id"):
            assert row.unit != "", f"numeric column {row.column} has no unit"
        assert row.definition and row.reference, row.column


def test_provenance_json_is_the_run_table(tmp_path, gpkg):
    out = export_features(gpkg, tmp_path / "features.csv")
    _, prov = companion_paths(out)
    assert json.loads(prov.read_text(encoding="utf-8")) == RUN


def test_same_input_gives_byte_identical_csv(tmp_path, craters):
    outs = []
    for i in range(2):
        folder = tmp_path / f"run{i}"
        folder.mkdir()
        # a different row order in memory must not change the file
        g = write_geopackage(folder / "s.gpkg", craters.sample(frac=1.0, random_state=i), run=RUN)
        outs.append(export_features(g, folder / "features.csv"))
    assert outs[0].read_bytes() == outs[1].read_bytes()
    assert b"\r\n" not in outs[0].read_bytes()
    d0, d1 = companion_paths(outs[0])[0], companion_paths(outs[1])[0]
    assert d0.read_bytes() == d1.read_bytes()


def test_parquet_round_trip(tmp_path, gpkg, craters):
    out = export_features(gpkg, tmp_path / "features.parquet")
    table = pd.read_parquet(out)
    expected = _export.feature_table(craters)
    pd.testing.assert_frame_equal(table, expected, check_dtype=False)
    assert companion_paths(out)[0].name == "features.dictionary.csv"


def test_existing_companion_blocks_the_export(tmp_path, gpkg):
    dict_path, _ = companion_paths(tmp_path / "features.csv")
    dict_path.write_text("mine")
    with pytest.raises(OutputExistsError, match="--overwrite"):
        export_features(gpkg, tmp_path / "features.csv")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["features.dictionary.csv", "survey.gpkg"]
    assert dict_path.read_text() == "mine"
    export_features(gpkg, tmp_path / "features.csv", overwrite=True)
    assert dict_path.read_text().startswith("column,unit,dtype")


def test_interrupted_export_leaves_nothing(tmp_path, gpkg, monkeypatch):
    def fail(doc):  # the feature table is on disk (temporary) when the dictionary fails
        raise MemoryError("simulated")

    monkeypatch.setattr(_export, "_dictionary_csv", fail)
    with pytest.raises(MemoryError):
        export_features(gpkg, tmp_path / "features.csv")
    assert [p.name for p in tmp_path.iterdir()] == ["survey.gpkg"]


def test_unknown_format_is_refused(tmp_path, gpkg):
    with pytest.raises(InputError, match="csv or .parquet"):
        export_features(gpkg, tmp_path / "features.xlsx")


def test_cli_export_and_overwrite_guard(tmp_path, gpkg):
    out = tmp_path / "f.csv"
    runner = CliRunner()
    res = runner.invoke(cli, ["export", str(gpkg), "-o", str(out)])
    assert res.exit_code == 0, res.output
    assert out.exists() and (tmp_path / "f.dictionary.csv").exists()
    assert "morphological similarity" in res.output
    res = runner.invoke(cli, ["export", str(gpkg), "-o", str(out)])
    assert res.exit_code == 3
    assert "--overwrite" in res.output and "Traceback" not in res.output
    res = runner.invoke(cli, ["export", str(tmp_path / "nope.gpkg"), "-o", str(tmp_path / "g.csv")])
    assert res.exit_code == 2 and "no such file" in res.output


def test_round_significant_matches_python_formatting():
    # reference: Python's own "%.10g" (correctly rounded decimal conversion, C99 printf semantics)
    rng = np.random.default_rng(0)
    x = rng.uniform(-1, 1, 20_000) * 10.0 ** rng.integers(-30, 30, 20_000)
    x[:4] = [0.0, 1000.0, 999.99999999999, 1e22]
    got = _export.round_significant(x)
    ref = np.array([float(f"{v:.10g}") for v in x])
    same = got == ref
    # exact ties may round the other way in binary: one unit of the 10th digit at most
    assert same.mean() > 0.999
    np.testing.assert_allclose(got, ref, rtol=1.01e-9, atol=0)
    assert np.isnan(_export.round_significant([np.nan])[0])
