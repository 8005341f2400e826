"""`morpho measure`: Measure an existing crater list on a DEM and write a GeoPackage."""

from ._stub import not_available

command = not_available("measure", "Measure an existing crater list on a DEM and write a GeoPackage.")
