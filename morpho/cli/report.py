"""`morpho report`: Write a self-contained HTML report of a survey."""

from ._stub import not_available

command = not_available("report", "Write a self-contained HTML report of a survey.")
