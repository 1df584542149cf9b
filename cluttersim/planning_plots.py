"""Figures of the DEM-error Monte Carlo and of track planning: now in :mod:`cluttersim.plots.planning`
(also importable as ``cluttersim.plots.plot_dem_error`` ...); this module keeps the old import path."""

from .plots.planning import BAND_CMAP, TARGET_COLOUR, plot_best_worst, plot_dem_error, plot_objective_polar  # noqa: F401
