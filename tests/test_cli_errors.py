"""CLI bad input: one-line error naming the file and the fix, non-zero exit, nothing written."""

from __future__ import annotations

import numpy as np
import pytest
from affine import Affine
from click.testing import CliRunner

from morpho.cli.main import cli

from .conftest import write_raster

SEVEN = ["survey", "measure", "contrast", "export", "synth", "train", "report"]


def test_help_lists_the_seven_subcommands():
    res = CliRunner().invoke(cli, ["--help"])
    assert res.exit_code == 0
    for name in SEVEN:
        assert f"  {name}" in res.output
    for name in SEVEN:
        sub = CliRunner().invoke(cli, [name, "--help"])
        assert sub.exit_code == 0, (name, sub.output)


def test_version():
    res = CliRunner().invoke(cli, ["--version"])
    assert res.exit_code == 0 and "0.1.0" in res.output


def _bad_inputs(tmp_path):
    cases = {}
    cases["missing"] = (tmp_path / "missing.tif", [], "file not found")
    text = tmp_path / "text.tif"
    text.write_text("elevation,1,2,3\n")
    cases["text"] = (text, [], "not a raster")
    trunc = write_raster(tmp_path / "trunc.tif", np.random.default_rng(0).normal(size=(256, 256)).astype("float32"))
    trunc.write_bytes(trunc.read_bytes()[:3000])
    cases["truncated"] = (trunc, [], "truncated|not a raster")
    nocrs = write_raster(tmp_path / "nocrs.tif", np.zeros((64, 64), "float32"), crs=None)
    cases["nocrs"] = (nocrs, [], "--pixel-size")
    venus = write_raster(tmp_path / "unknown_body.tif", np.zeros((64, 64), "float32"),
                         crs="+proj=longlat +R=6051800 +no_defs +type=crs",
                         transform=Affine(0.01, 0, 0, 0, -0.01, 0))
    cases["unknown_body"] = (venus, [], "--body")
    empty = write_raster(tmp_path / "allnodata.tif", np.full((64, 64), -9999, "float32"), nodata=-9999)
    cases["all_nodata"] = (empty, [], "no valid elevation")
    tiny = write_raster(tmp_path / "tiny.tif", np.zeros((10, 10), "float32"))
    cases["too_small"] = (tiny, [], "smaller than")
    multi = write_raster(tmp_path / "multi.tif", np.zeros((3, 64, 64), "float32"))
    cases["multiband"] = (multi, [], "--band")
    return cases


_CASES = ["missing", "text", "truncated", "nocrs", "unknown_body", "all_nodata", "too_small", "multiband"]


# `measure` searches no crater sizes, so "smaller than the smallest crater searched" is survey's alone.
@pytest.mark.parametrize("sub,case", [("survey", c) for c in _CASES]
                         + [("measure", c) for c in _CASES if c != "too_small"])
def test_bad_dem_one_line_error_and_no_output(tmp_path, case, sub):
    path, extra, pattern = _bad_inputs(tmp_path)[case]
    out = tmp_path / "out.gpkg"
    args = [sub, str(path), "-o", str(out), *extra]
    if sub == "measure":
        lst = tmp_path / "list.csv"
        lst.write_text("center_x,center_y,diameter_m\n100,100,500\n")
        args += ["--craters", str(lst)]
    res = CliRunner().invoke(cli, args)
    assert res.exit_code not in (0, None), res.output
    assert res.exception is None or isinstance(res.exception, SystemExit), repr(res.exception)
    err_lines = [ln for ln in res.output.splitlines() if ln.startswith("morpho: error:")]
    assert len(err_lines) == 1, res.output
    import re

    assert re.search(pattern, err_lines[0]), err_lines[0]
    assert path.name in err_lines[0]
    assert "Fix:" in err_lines[0]
    assert not out.exists()
    assert not list(tmp_path.glob("*.gpkg*"))


def test_existing_output_is_untouched_without_overwrite(tmp_path):
    dem = write_raster(tmp_path / "flat.tif", np.zeros((64, 64), "float32"))
    out = tmp_path / "out.gpkg"
    out.write_bytes(b"precious")
    res = CliRunner().invoke(cli, ["survey", str(dem), "-o", str(out)])
    assert res.exit_code != 0
    assert "--overwrite" in res.output
    assert out.read_bytes() == b"precious"


def test_missing_output_folder(tmp_path):
    dem = write_raster(tmp_path / "flat.tif", np.zeros((64, 64), "float32"))
    out = tmp_path / "no_such_folder" / "out.gpkg"
    res = CliRunner().invoke(cli, ["survey", str(dem), "-o", str(out)])
    assert res.exit_code != 0 and "folder does not exist" in res.output
    assert not out.parent.exists()
