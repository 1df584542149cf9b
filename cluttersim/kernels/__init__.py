"""Compiled kernels (numba), one module per concern. Arrays in, arrays out; no I/O, no Python objects.

Everything that runs per facet or per grid cell lives here. Orchestration
(windowing, culling set-up, progress, chunking) is in :mod:`cluttersim.simulate`
and :mod:`cluttersim.facets`. All kernels are compiled with ``cache=True`` so a
second run loads them from disk instead of recompiling (one cache per module file).

Modules: :mod:`.geodesy` (geodetic → ECEF), :mod:`.weights` (σ0 laws, antenna pattern),
:mod:`.tiling` (tiled facets, shadowing, tile culling, earliest range), :mod:`.spreading` (a
facet's power over the delay bins), :mod:`.diffuse` (:func:`accumulate_power`), :mod:`.convolve`
(the pulse), :mod:`.sources` (dominant source, facet power in windows), :mod:`.coherent` (complex
field: random phase, physical optics), :mod:`.common` (compile options, side and spreading codes).
The kernels are re-exported here: call them as ``kernels.accumulate_power(...)``.

Conventions
-----------
* Facets are stored tile by tile as structure-of-arrays, shape (3, nfacet):
  positions in float32 metres relative to their tile's centre (the tile
  centres are float64, relative to a local origin at the DEM window's centre),
  unit normals and edge vectors in float32. A range is therefore computed as
  |(tile centre − antenna) + offset| in float64 without losing precision.
* Delay bins: bin ``k`` of a trace covers two-way delays
  ``[bin0_s + k dt, bin0_s + (k + 1) dt)``.
* ``error_model="numpy"`` (no Python zero-division checks) and a small set of
  fast-math flags let LLVM vectorise the per-facet loops; results are still
  deterministic (same inputs, same bits, whatever the thread count: every
  output element is summed by one thread in a fixed order).
"""

from .coherent import accumulate_complex, accumulate_specular, deposit_trapezoid, facet_uniform
from .common import SIDE_LEFT, SIDE_NADIR, SIDE_RIGHT, SPREAD_CENTRE, SPREAD_TRAPEZOID
from .convolve import convolve_rows
from .diffuse import accumulate_power
from .geodesy import geodetic_to_ecef, geodetic_to_ecef_array, grid_to_ecef
from .sources import cell_lonlat_of_facets, dominant_source, facet_power_in_windows
from .spreading import integrate_row, integrate_two_rows, trapezoid_cdf, trapezoid_kinks
from .tiling import build_tiled_facets, earliest_range, hidden_from_antenna, slab_min_range, tiles_in_range_order
from .weights import direction_weight, pattern_gain_two_way, sigma0_apply32, sigma0_by_code, sigma0_factor

__all__ = [
    "SIDE_LEFT", "SIDE_NADIR", "SIDE_RIGHT", "SPREAD_CENTRE", "SPREAD_TRAPEZOID",
    "accumulate_complex", "accumulate_power", "accumulate_specular", "build_tiled_facets", "cell_lonlat_of_facets",
    "convolve_rows", "deposit_trapezoid", "direction_weight", "dominant_source", "earliest_range",
    "facet_power_in_windows", "facet_uniform", "geodetic_to_ecef", "geodetic_to_ecef_array", "grid_to_ecef",
    "hidden_from_antenna", "integrate_row", "integrate_two_rows", "pattern_gain_two_way", "sigma0_apply32",
    "sigma0_by_code", "sigma0_factor", "slab_min_range", "tiles_in_range_order", "trapezoid_cdf", "trapezoid_kinks",
]  # fmt: skip
