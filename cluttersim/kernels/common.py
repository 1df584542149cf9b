"""Compile options and integer codes shared by the kernels.

Numba's cache checks only the file of each compiled function: after changing a value here, delete
the cached kernels (``find cluttersim/kernels -name '*.nbi' -delete``) so that every kernel module
is compiled again with it.
"""

_JIT = dict(cache=True, nogil=True, error_model="numpy")
#: Fast-math in the hot loops (vectorisation of reductions, fused multiply-add,
#: reciprocals). Ranges stay float64; tests check delays to a fraction of a sample.
_FAST = True

#: Delay spreading of :func:`accumulate_power`: the trapezoid of each facet's range extent (the
#: model), or the whole power in the bin of the facet's centre delay (a benchmark-only variant that
#: bounds the cost of the spreading; not the model: a facet spans several samples off nadir).
SPREAD_TRAPEZOID, SPREAD_CENTRE = 0, 1


#: Side codes of the source record: within the nadir strip, left or right of the track.
SIDE_NADIR, SIDE_LEFT, SIDE_RIGHT = 0, 1, 2
