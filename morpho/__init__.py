"""morpho: crater morphometry and hypothesis testing on planetary DEMs.

The score morpho gives each crater measures morphological similarity to impact
craters and to laboratory electrode-spot craters under stated assumptions; it
says nothing about mechanism by itself. Impact is the consensus origin of
planetary craters.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
