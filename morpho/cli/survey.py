"""`morpho survey`: Survey a DEM: detect craters, measure, score and write a GeoPackage."""

from ._stub import not_available

command = not_available("survey", "Survey a DEM: detect craters, measure, score and write a GeoPackage.")
