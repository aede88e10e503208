"""ecoscan: raster-to-points ecological survey analyser.

Detect plants or trees in rasters, turn them into points inside survey plots, and test per
plot whether they stand clustered, at random or regularly spaced, with edge corrections and
exact (Monte Carlo) significance.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
