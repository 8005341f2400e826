"""The survey engine: tiles -> detection/measurement -> merge -> scaling, scoring, population."""

from .engine import TilePool, TileRun, run_tiles
from .survey import SurveyResult, measure, survey

__all__ = ["SurveyResult", "TilePool", "TileRun", "measure", "run_tiles", "survey"]
