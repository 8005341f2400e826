"""The HTML report and the preview PNG.

References: Python's ``html.parser`` (HTML tokenisation), PNG decoding by
``matplotlib.image.imread`` (Pillow underneath), PNG signature from the PNG
specification (ISO/IEC 15948), and a real headless browser (Debian's chromium)
when one is installed.
"""

from __future__ import annotations

import base64
import io
import re
import shutil
import subprocess
from html.parser import HTMLParser

import matplotlib.image as mpimg
import numpy as np
import pyproj
import pytest
import rasterio
import shapely
from affine import Affine
from click.testing import CliRunner

from morpho.caveats import CAVEATS
from morpho.cli.main import cli
from morpho.errors import OutputExistsError
from morpho.outputs import build_report, render_preview_png, write_geopackage
from morpho.outputs._sample import (
    SAMPLE_CRS,
    sample_chains,
    sample_craters,
    sample_envelope,
    sample_population,
)

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948, section 5.2


class _Refs(HTMLParser):
    """Every src/href/url() reference and every <img> of a page."""

    def __init__(self):
        super().__init__()
        self.refs, self.images, self.tags = [], [], set()

    def handle_starttag(self, tag, attrs):
        self.tags.add(tag)
        for name, value in attrs:
            if name in ("src", "href", "action", "data", "poster", "srcset"):
                self.refs.append((tag, name, value or ""))
                if tag == "img" and name == "src":
                    self.images.append(value or "")


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    craters = sample_craters(150, seed=4)
    gpkg = write_geopackage(
        folder / "brannock.gpkg", craters, population=sample_population(), chains=sample_chains(),
        footprint=shapely.box(0, 0, 100_000, 100_000), envelope=sample_envelope(),
        run={"input_file": "brannock.tif", "body": "moon", "input_sha256": "cd" * 32,
             "param.note": "see https://example.org/notes for details"})
    dem = folder / "brannock.tif"
    n, px = 250, 400.0
    rows, cols = np.mgrid[0:n, 0:n]
    x, y = cols * px + px / 2, 100_000 - (rows * px + px / 2)
    z = 40.0 * np.sin(x / 7000.0) * np.cos(y / 9000.0)
    z[:10, :10] = -9999.0  # nodata corner
    with rasterio.open(dem, "w", driver="GTiff", height=n, width=n, count=1, dtype="float32",
                       crs=SAMPLE_CRS, transform=Affine(px, 0.0, 0.0, 0.0, -px, 100_000.0), nodata=-9999) as ds:
        ds.write(z.astype("float32"), 1)
    return folder, gpkg, dem, craters


@pytest.fixture(scope="module")
def report(survey):
    folder, gpkg, dem, _ = survey
    return build_report(gpkg, folder / "report.html", dem_path=dem)


def test_report_has_no_external_references_and_its_images_decode(report):
    text = report.read_text(encoding="utf-8")
    parser = _Refs()
    parser.feed(text)
    assert not re.search(r"https?://", text, re.IGNORECASE)
    assert "url(" not in text and "@import" not in text
    assert parser.refs, "the report should embed figures"
    assert all(value.startswith("data:image/png;base64,") for _, _, value in parser.refs), parser.refs
    assert "script" not in parser.tags and "link" not in parser.tags
    assert len(parser.images) >= 6  # 2 maps, d/D or note, SFD, Ripley, distributions
    for src in parser.images:
        raw = base64.b64decode(src.split(",", 1)[1], validate=True)
        assert raw.startswith(PNG_SIGNATURE)
        img = mpimg.imread(io.BytesIO(raw), format="png")
        assert img.ndim == 3 and img.shape[0] > 200 and img.shape[1] > 200
        assert img[..., :3].std() > 0.01  # not a blank canvas


def test_report_carries_caveats_statistics_and_provenance(report, survey):
    text = report.read_text(encoding="utf-8")
    first_line = CAVEATS.splitlines()[0]
    assert first_line.split(";")[0] in text
    assert text.index("caveats") < text.index("<h2>Map")  # caveats come first
    for stat in sample_population()["statistic"]:
        assert f"<td>{stat}</td>" in text
    assert "cd" * 32 in text and "example.org/notes" in text  # URL kept as text, scheme dropped
    assert "Shaded relief of" in text and "Ripley" in text and "R-plot" in text


def test_empty_survey_still_reports(tmp_path):
    gpkg = write_geopackage(tmp_path / "e.gpkg", sample_craters(0), run={"input_file": "blank.tif"})
    text = build_report(gpkg, tmp_path / "e.html").read_text(encoding="utf-8")
    assert "No craters with diameters" in text and "No population statistics" in text


def test_preview_png_shows_relief_and_outlines(survey, tmp_path):
    _, gpkg, dem, _ = survey
    out = render_preview_png(gpkg, tmp_path / "p.png", dem_path=dem)
    raw = out.read_bytes()
    assert raw.startswith(PNG_SIGNATURE)
    img = mpimg.imread(io.BytesIO(raw), format="png")[..., :3]
    grey = (np.ptp(img, axis=2) < 0.02) & (img.mean(axis=2) > 0.15) & (img.mean(axis=2) < 0.9)
    assert grey.mean() > 0.2  # shaded relief covers much of the canvas


def test_cli_report_without_dem_says_so_and_guards_overwrite(survey, tmp_path):
    _, gpkg, _, _ = survey
    out = tmp_path / "cli.html"
    res = CliRunner().invoke(cli, ["report", str(gpkg), "-o", str(out)])
    assert res.exit_code == 0, res.output
    assert "No DEM given: crater outlines only" in out.read_text(encoding="utf-8")
    res = CliRunner().invoke(cli, ["report", str(gpkg), "-o", str(out)])
    assert res.exit_code == 3 and "--overwrite" in res.output
    with pytest.raises(OutputExistsError, match="--overwrite"):
        build_report(gpkg, out)


def _browser():
    return shutil.which("chromium") or shutil.which("chromium-browser") or shutil.which("google-chrome")


@pytest.mark.skipif(_browser() is None, reason="no headless browser installed (apt-get install chromium)")
def test_report_renders_in_a_headless_browser(report, tmp_path):
    shot = tmp_path / "shot.png"
    cmd = [_browser(), "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
           "--disable-component-update", "--disable-sync", "--no-first-run",
           f"--user-data-dir={tmp_path / 'profile'}", f"--screenshot={shot}", "--window-size=1280,2000",
           report.as_uri()]
    subprocess.run(cmd, check=True, capture_output=True, timeout=120)
    img = mpimg.imread(shot)[..., :3]
    assert img.shape[:2] == (2000, 1280)
    # the embedded figures were drawn: many non-white pixels, and the caveats box's
    # amber tint (#fff6e0) is present
    assert (img.mean(axis=2) < 0.9).mean() > 0.05
    amber = (np.abs(img - np.array([1.0, 246 / 255, 224 / 255])) < 0.02).all(axis=2)
    assert amber.mean() > 0.005


def test_relief_of_a_geographic_dem_is_drawn_in_its_own_degrees(tmp_path):
    """A lon/lat DEM is warped for measuring; the map must still sit in lon/lat.

    Reference: the GeoTIFF's own geotransform (rasterio) gives the bounds in degrees.
    """
    from morpho.outputs._figmap import load_relief

    crs = pyproj.CRS.from_proj4("+proj=longlat +R=1737400 +no_defs +type=crs")
    n, px, lon0, lat0 = 120, 0.01, 30.0, 41.0
    rows, cols = np.mgrid[0:n, 0:n]
    z = 300.0 * np.hypot(rows - 60, cols - 60) / 60.0
    path = tmp_path / "geo.tif"
    with rasterio.open(path, "w", driver="GTiff", height=n, width=n, count=1, dtype="float32",
                       crs=crs.to_wkt(), transform=Affine(px, 0, lon0, 0, -px, lat0)) as ds:
        ds.write(z.astype("float32"), 1)
        bounds = ds.bounds
    relief, note = load_relief(path, crs)
    assert relief is not None, note
    assert "extent" not in relief  # drawn as a mesh through the warp's inverse
    x, y = relief["x"], relief["y"]
    # mesh within a few pixels of the source bounds
    assert abs(np.nanmin(x) - bounds.left) < 3 * px and abs(np.nanmax(x) - bounds.right) < 3 * px
    assert abs(np.nanmin(y) - bounds.bottom) < 3 * px and abs(np.nanmax(y) - bounds.top) < 3 * px
    # a cone shades differently on each flank
    assert np.ptp(relief["shade"].compressed()) > 0.1


def test_map_colours_follow_verdict_and_p_impact():
    """Verdict colours match the QGIS style; unscored (NaN) p_impact stays visible in grey."""
    from matplotlib import colormaps

    from morpho.outputs._figmap import map_figure
    from morpho.outputs._style import VERDICT_COLOURS

    craters = sample_craters(30, seed=1)
    craters.loc[:4, "p_impact"] = np.nan
    edges = map_figure(craters, colour_by="p_impact").axes[0].collections[0].get_edgecolor()
    np.testing.assert_allclose(edges[:5, :3], 0.55)
    # p_impact = 0 maps to the first viridis colour (matplotlib's own table as reference)
    craters.loc[5, "p_impact"] = 0.0
    edges = map_figure(craters, colour_by="p_impact").axes[0].collections[0].get_edgecolor()
    np.testing.assert_allclose(edges[5, :3], colormaps["viridis"](0.0)[:3], atol=1e-3)
    edges = map_figure(craters, colour_by="verdict").axes[0].collections[0].get_edgecolor()
    for verdict, rgba in zip(craters["verdict"], edges, strict=True):
        np.testing.assert_allclose(rgba[:3] * 255, VERDICT_COLOURS[verdict], atol=0.5)


def test_counted_area_is_the_geodesic_area_of_the_footprint():
    """Area of a lon/lat box on a sphere: R^2 (lon2 - lon1) (sin lat2 - sin lat1)
    (exact spherical zone formula, e.g. Snyder 1987, USGS Prof. Paper 1395)."""
    import geopandas as gpd
    import pandas as pd

    from morpho.outputs._figstats import counted_area_m2

    radius = 1_737_400.0
    crs = pyproj.CRS.from_proj4(f"+proj=longlat +R={radius} +no_defs +type=crs")
    box = shapely.segmentize(shapely.box(30.0, 10.0, 32.0, 12.0), 0.01)  # edges follow parallels
    fp = gpd.GeoDataFrame({"name": ["valid"]}, geometry=[box], crs=crs)
    area, note = counted_area_m2(fp, pd.DataFrame())
    expected = radius**2 * np.deg2rad(2.0) * (np.sin(np.deg2rad(12.0)) - np.sin(np.deg2rad(10.0)))
    assert area == pytest.approx(expected, rel=1e-4)
    assert "geodesic" in note
    # the same box projected to a local stereographic plane gives the same ground area
    stere = pyproj.CRS.from_proj4(f"+proj=stere +lat_0=11 +lon_0=31 +R={radius} +units=m +type=crs")
    area2, _ = counted_area_m2(fp.to_crs(stere), pd.DataFrame())
    assert area2 == pytest.approx(expected, rel=1e-3)
