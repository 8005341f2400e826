"""A default QGIS style for the ``craters`` layer: rim outlines coloured by ``verdict``.

QGIS looks for a ``layer_styles`` table in a GeoPackage and applies the row marked
``useAsDefault`` when the layer is opened. The style is plain QML (QGIS's XML
style format) with a categorised renderer on the ``verdict`` column.
"""

from __future__ import annotations

from pathlib import Path
from xml.sax.saxutils import quoteattr

import pandas as pd
import pyogrio

__all__ = ["VERDICT_COLOURS", "verdict_colour", "style_qml", "add_default_style"]

#: Colours (RGB 0-255) shared with the report so map, legend and QGIS agree.
#: Known verdicts get fixed colours; others cycle through a colour-blind-safe list.
VERDICT_COLOURS = {
    "impact": (0, 114, 178),
    "discharge": (213, 94, 0),
    "neither": (204, 121, 167),
    "undecided": (120, 120, 120),
    "unscored": (200, 200, 200),
}
_CYCLE = ((0, 158, 115), (230, 159, 0), (86, 180, 233), (240, 228, 66))


def verdict_colour(verdict: str, index: int) -> tuple[int, int, int]:
    """RGB colour of a verdict value (``index`` picks a colour for unknown values)."""
    return VERDICT_COLOURS.get(str(verdict), _CYCLE[index % len(_CYCLE)])


def style_qml(verdicts) -> str:
    """QML text of a categorised outline style on ``verdict``.

    Parameters
    ----------
    verdicts : iterable of str
        The verdict values to give a category (sorted for a stable file).
    """
    values = sorted({str(v) for v in verdicts})
    cats, syms = [], []
    for i, v in enumerate(values):
        r, g, b = verdict_colour(v, i)
        cats.append(f'<category symbol="{i}" value={quoteattr(v)} label={quoteattr(v)} render="true"/>')
        syms.append(
            f'<symbol type="fill" name="{i}" alpha="1" clip_to_extent="1" force_rhr="0">'
            '<layer class="SimpleFill" enabled="1" locked="0" pass="0"><Option type="Map">'
            f'<Option name="color" type="QString" value="{r},{g},{b},60"/>'
            f'<Option name="outline_color" type="QString" value="{r},{g},{b},255"/>'
            '<Option name="outline_style" type="QString" value="solid"/>'
            '<Option name="outline_width" type="QString" value="0.5"/>'
            '<Option name="outline_width_unit" type="QString" value="MM"/>'
            '<Option name="style" type="QString" value="solid"/>'
            "</Option></layer></symbol>"
        )
    return (
        '<qgis version="3.28.0" styleCategories="Symbology">'
        '<renderer-v2 type="categorizedSymbol" attr="verdict" symbollevels="0" '
        'enableorderby="0" forceraster="0">'
        f"<categories>{''.join(cats)}</categories><symbols>{''.join(syms)}</symbols>"
        "</renderer-v2></qgis>"
    )


def add_default_style(path: Path, craters) -> None:
    """Add a ``layer_styles`` table holding the default style of ``craters``."""
    verdicts = craters["verdict"].dropna().unique()
    row = {
        "f_table_catalog": "",
        "f_table_schema": "",
        "f_table_name": "craters",
        "f_geometry_column": "geom",
        "styleName": "morpho verdict",
        "styleQML": style_qml(verdicts),
        "styleSLD": "",
        "useAsDefault": True,
        "description": "Crater rim outlines coloured by verdict (morpho default)",
        "owner": "",
        "ui": "",
        "update_time": "",
    }
    frame = pd.DataFrame({k: pd.Series([v]) for k, v in row.items()})
    pyogrio.write_dataframe(frame, path, layer="layer_styles", driver="GPKG")
