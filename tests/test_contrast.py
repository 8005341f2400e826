"""Region comparison: tests agree with scipy, BH adjustment, effect sizes, random vs clustered, the CLI."""

import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import pytest
import shapely
from click.testing import CliRunner
from scipy import stats

from morpho.cli.main import cli
from morpho.population import contrast_regions
from morpho.population.contrast import CONTRAST_COLUMNS

from .test_population_layouts import SIDE, clustered_layout, random_layout

BOX = shapely.box(0, 0, SIDE, SIDE)


def _frame(rng, x, y, d, depth=0.20):
    n = x.size
    return pd.DataFrame({"x_m": x, "y_m": y, "diameter_m": d, "d_over_D": rng.normal(depth, 0.03, n),
                         "verdict": rng.choice(["impact-like", "ambiguous"], n, p=[0.8, 0.2])})


def random_frame(rng, n=300, depth=0.20):
    return _frame(rng, *random_layout(rng, n), depth=depth)


def clustered_frame(rng):
    return _frame(rng, *clustered_layout(rng))


def _rows(table, quantity, a, b, method_start):
    sel = table[(table["quantity"] == quantity) & (table["region_a"] == a) & (table["region_b"] == b)
                & table["method"].str.startswith(method_start)]
    assert len(sel) == 1
    return sel.iloc[0]


def test_feature_tests_agree_with_scipy_and_effect_sizes_by_brute_force():
    rng = np.random.default_rng(1)
    a, b = random_frame(rng, 150, 0.20), random_frame(rng, 120, 0.215)
    out = contrast_regions({"north": (a, BOX), "south": (b, BOX)}, features=["d_over_D"], n_boot=199,
                           completeness_diameter_m={"north": 0.0, "south": 0.0})
    assert list(out.columns) == list(CONTRAST_COLUMNS)
    va, vb = a["d_over_D"].to_numpy(), b["d_over_D"].to_numpy()
    # scipy.stats called directly is the independent reference
    ks = _rows(out, "d_over_D", "north", "south", "two-sample Kolmogorov")
    ref = stats.ks_2samp(va, vb)
    assert ks["statistic"] == pytest.approx(ref.statistic) and ks["p_value"] == pytest.approx(ref.pvalue)
    mw = _rows(out, "d_over_D", "north", "south", "Mann-Whitney")
    ref = stats.mannwhitneyu(va, vb, alternative="two-sided")
    assert mw["statistic"] == pytest.approx(ref.statistic) and mw["p_value"] == pytest.approx(ref.pvalue)
    # Cliff's delta = P(a > b) - P(a < b) over all pairs (Cliff 1993, Psychol. Bull. 114:494)
    delta = np.mean(np.sign(va[:, None] - vb[None, :]))
    assert mw["effect_size"] == pytest.approx(delta)
    assert mw["ci_low"] < delta < mw["ci_high"]
    ad = _rows(out, "d_over_D", "north", "south", "Anderson-Darling")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # scipy's note that p is held within 0.001-0.25
        ref = stats.anderson_ksamp([va, vb], variant="midrank")
    assert ad["statistic"] == pytest.approx(ref.statistic) and ad["p_value"] == pytest.approx(ref.pvalue)


def test_degenerate_regions_give_nan_rows_not_errors():
    a = pd.DataFrame({"x_m": [1.0, 2.0], "y_m": [1.0, 5.0], "diameter_m": [50.0, 60.0], "f": [1.0, 1.0]})
    b = pd.DataFrame({"x_m": np.arange(10.0) * 900, "y_m": np.arange(10.0) * 500, "diameter_m": np.full(10, 50.0),
                      "f": np.ones(10)})
    out = contrast_regions({"a": (a, BOX), "b": (b, BOX)}, n_boot=99)
    ad = _rows(out, "f", "a", "b", "Anderson-Darling")
    assert np.isnan(ad["statistic"]) and np.isnan(ad["p_adjusted"])
    assert "clark_evans_R" not in set(out["quantity"])   # two craters have no NN statistic


def test_elongation_azimuths_compared_as_axes():
    # axial data (Mardia & Jupp 2000, s. 9.3): 170 deg and 10 deg are 20 deg apart, so a region
    # around 0/180 and one around 90 differ; two regions around 0/180 do not
    rng = np.random.default_rng(12)

    def with_axes(frame, centre):
        az = (centre + rng.normal(0, 12, len(frame))) % 180
        return frame.assign(ellipse_azimuth_deg=az, ellipticity=1.3)

    a = with_axes(random_frame(rng, 120), 0.0)
    b = with_axes(random_frame(rng, 120), 90.0)
    c = with_axes(random_frame(rng, 120), 178.0)
    out = contrast_regions({"a": (a, BOX), "b": (b, BOX), "c": (c, BOX)}, n_boot=199)
    ab = _rows(out, "elongation_azimuth", "a", "b", "long axes")
    ac = _rows(out, "elongation_azimuth", "a", "c", "long axes")
    assert ab["p_value"] <= 0.01 and abs(ab["effect_size"]) == pytest.approx(90, abs=6)
    assert ac["p_value"] > 0.01 and abs(ac["effect_size"]) < 6
    assert "ellipse_azimuth_deg" not in set(out["quantity"])


def test_benjamini_hochberg_by_hand():
    # Benjamini & Hochberg 1995 (JRSS B 57:289): p_(i) m / i, then running minimum from the top
    rng = np.random.default_rng(2)
    out = contrast_regions({"a": (random_frame(rng), BOX), "b": (random_frame(rng, depth=0.23), BOX),
                            "c": (clustered_frame(rng), BOX)}, n_boot=99)
    p = out["p_value"].to_numpy(float)
    ok = np.isfinite(p)
    order = np.argsort(p[ok])
    m = ok.sum()
    adj = np.minimum.accumulate((p[ok][order] * m / np.arange(1, m + 1))[::-1])[::-1]
    expected = np.empty(m)
    expected[order] = np.minimum(adj, 1)
    np.testing.assert_allclose(out["p_adjusted"].to_numpy(float)[ok], expected)
    # three regions: three pairs plus one k-sample Anderson-Darling row over all
    assert set(zip(out["region_a"], out["region_b"], strict=True)) == {("a", "b"), ("a", "c"), ("b", "c"),
                                                                        ("all", "all")}


def test_random_versus_clustered_flags_spatial_difference():
    # issue 7 figure: contrast of random vs clustered flags the spatial difference at adjusted p < 0.01
    rng = np.random.default_rng(3)
    out = contrast_regions({"plain": (random_frame(rng), BOX), "clumped": (clustered_frame(rng), BOX)})
    ce = _rows(out, "clark_evans_R", "plain", "clumped", "difference of Clark-Evans")
    assert ce["p_adjusted"] < 0.01
    assert ce["effect_size"] > 0.3 and ce["ci_low"] > 0
    assert _rows(out, "dbscan_clustered_fraction", "plain", "clumped", "share")["p_adjusted"] < 0.01
    # same-process features and SFDs are not flagged
    assert _rows(out, "csfd_slope", "plain", "clumped", "difference")["p_adjusted"] > 0.01
    assert _rows(out, "d_over_D", "plain", "clumped", "two-sample")["p_adjusted"] > 0.01


def test_two_random_regions_not_flagged_spatially():
    rng = np.random.default_rng(4)
    out = contrast_regions({"a": (random_frame(rng), BOX), "b": (random_frame(rng), BOX)}, n_boot=299)
    assert _rows(out, "clark_evans_R", "a", "b", "difference of Clark-Evans")["p_value"] > 0.05


def test_density_test_is_the_conditional_binomial():
    # two Poisson counts on areas A_a, A_b: n_a | n_a + n_b ~ Binomial(n, A_a/(A_a + A_b))
    # (Przyborowski & Wilenski 1940, Biometrika 31:313)
    rng = np.random.default_rng(5)
    a, b = random_frame(rng, 300), random_frame(rng, 150)
    half = shapely.box(0, 0, SIDE, SIDE / 2)
    b = b.assign(y_m=b["y_m"] / 2)
    out = contrast_regions({"a": (a, BOX), "b": (b, half)}, completeness_diameter_m={"a": 80.0, "b": 80.0},
                           n_boot=99)
    row = _rows(out, "crater_density", "a", "b", "densities")
    na, nb = int((a["diameter_m"] >= 80).sum()), int((b["diameter_m"] >= 80).sum())
    assert row["p_value"] == pytest.approx(stats.binomtest(na, na + nb, 2 / 3).pvalue)
    assert row["effect_size"] == pytest.approx(np.log((na / SIDE**2) / (nb / (SIDE**2 / 2))))


# ---- the command line ----------------------------------------------------------------------------

MOON_EQC = pyproj.CRS.from_proj4("+proj=eqc +R=1737400 +units=m +no_defs +type=crs")


def _write_survey(path, frame, *, footprint=True):
    from morpho.outputs import write_geopackage

    x0, y0 = 300_000.0, -150_000.0   # an invented mare patch east of the prime meridian
    cx, cy = frame["x_m"].to_numpy() + x0, frame["y_m"].to_numpy() + y0
    lon, lat = pyproj.Transformer.from_crs(MOON_EQC, MOON_EQC.geodetic_crs, always_xy=True).transform(cx, cy)
    rims = shapely.buffer(shapely.points(cx, cy), frame["diameter_m"].to_numpy() / 2, quad_segs=4)
    craters = gpd.GeoDataFrame({"crater_id": [f"C{i:05d}" for i in range(len(frame))],
                                "center_x": cx, "center_y": cy, "lon": lon, "lat": lat,
                                "diameter_m": frame["diameter_m"].to_numpy(),
                                "d_over_D": frame["d_over_D"].to_numpy(),
                                "verdict": frame["verdict"].to_numpy()}, geometry=rims, crs=MOON_EQC)
    run = {"crs_wkt": MOON_EQC.to_wkt(), "body": "moon", "body_radius_m": "1737400"}
    fp = shapely.box(x0, y0, x0 + SIDE, y0 + SIDE) if footprint else None
    write_geopackage(path, craters, footprint=fp, run=run)


def test_cli_contrast_writes_table_and_figures_and_refuses_overwrite(tmp_path):
    rng = np.random.default_rng(6)
    _write_survey(tmp_path / "lowland.gpkg", random_frame(rng))
    _write_survey(tmp_path / "ridge.gpkg", clustered_frame(rng))
    out = tmp_path / "cmp"
    runner = CliRunner()
    args = ["contrast", str(tmp_path / "lowland.gpkg"), str(tmp_path / "ridge.gpkg"), "-o", str(out),
            "--n-boot", "199"]
    res = runner.invoke(cli, args)
    assert res.exit_code == 0, res.output
    table = pd.read_csv(out / "contrast.csv")
    assert list(table.columns) == list(CONTRAST_COLUMNS)
    ce = _rows(table, "clark_evans_R", "lowland", "ridge", "difference of Clark-Evans")
    assert ce["p_adjusted"] < 0.01
    for name in ("contrast_sfd.png", "contrast_features.png"):
        assert (out / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # the footprint's area, projected to the local plane, is the 20 km square: the density
    # row's statistic uses it (azimuthal equidistant, Snyder 1987; equirectangular on the sphere)
    before = (out / "contrast.csv").read_bytes()
    res = runner.invoke(cli, args)
    assert res.exit_code != 0
    assert "exists" in res.output and "--overwrite" in res.output
    assert (out / "contrast.csv").read_bytes() == before
    assert runner.invoke(cli, args + ["--overwrite", "--seed", "3"]).exit_code == 0


def test_cli_contrast_without_footprint_warns_and_uses_hull(tmp_path):
    rng = np.random.default_rng(7)
    _write_survey(tmp_path / "a.gpkg", random_frame(rng), footprint=False)
    _write_survey(tmp_path / "b.gpkg", random_frame(rng))
    res = CliRunner().invoke(cli, ["contrast", str(tmp_path / "a.gpkg"), str(tmp_path / "b.gpkg"),
                                   "-o", str(tmp_path / "o"), "--n-boot", "99"])
    assert res.exit_code == 0, res.output
    assert "convex hull" in res.stderr


def test_cli_contrast_one_line_error_on_bad_input(tmp_path):
    bad = tmp_path / "x.gpkg"
    bad.write_text("not a geopackage")
    res = CliRunner().invoke(cli, ["contrast", str(bad), str(bad), "-o", str(tmp_path / "o")])
    assert res.exit_code == 2
    assert res.output.strip().startswith("morpho: error:") and len(res.output.strip().splitlines()) == 1


def test_read_region_area_matches_footprint(tmp_path):
    from morpho.cli.contrast import read_region

    rng = np.random.default_rng(8)
    _write_survey(tmp_path / "r.gpkg", random_frame(rng, 50))
    craters, area, notes = read_region(tmp_path / "r.gpkg")
    assert not notes
    # an equirectangular square near 5 S keeps its ground area within the eqc scale error
    # cos(lat) across it (Snyder 1987): about 20 km x 20 km x cos(4.9 deg)
    lat = np.deg2rad(craters["lat"].mean())
    assert area.area == pytest.approx(SIDE**2 * np.cos(lat), rel=0.01)
    # crater centres lie inside the projected footprint
    assert np.all(shapely.contains_xy(area.buffer(1.0), craters["x_m"], craters["y_m"]))
