"""Geodetic → body-fixed Cartesian conversions, one point, arrays and whole DEM grids.
"""

from __future__ import annotations

import math

import numba

from .common import _JIT


@numba.njit(**_JIT)
def geodetic_to_ecef(lat_deg, lon_deg, h_m, a_m, e2):
    """Geodetic → body-fixed Cartesian (see :meth:`cluttersim.physics.body.Body.geodetic_to_ecef_m`)."""
    lat = math.radians(lat_deg)
    lon = math.radians(lon_deg)
    s = math.sin(lat)
    c = math.cos(lat)
    n = a_m / math.sqrt(1.0 - e2 * s * s)
    return (n + h_m) * c * math.cos(lon), (n + h_m) * c * math.sin(lon), (n * (1.0 - e2) + h_m) * s


@numba.njit(parallel=True, **_JIT)
def geodetic_to_ecef_array(lat_deg, lon_deg, h_m, a_m, e2, out):
    """Vectorised :func:`geodetic_to_ecef` over 1-D arrays into ``out`` (n, 3)."""
    for i in numba.prange(lat_deg.shape[0]):
        x, y, z = geodetic_to_ecef(lat_deg[i], lon_deg[i], h_m[i], a_m, e2)
        out[i, 0] = x
        out[i, 1] = y
        out[i, 2] = z


@numba.njit(parallel=True, **_JIT)
def grid_to_ecef(cos_lat, sin_lat, cos_lon, sin_lon, h_m, a_m, e2, origin, out):
    """Cell-centre positions (ny, nx, 3) relative to ``origin`` from the cosines and sines of the
    cells' geodetic latitude and longitude (2-D, or broadcast views of 1-D ones for a geographic
    grid) and their heights: X = (N + h) cos φ cos λ, Y = (N + h) cos φ sin λ,
    Z = (N (1 − e²) + h) sin φ, N = a / √(1 − e² sin²φ) (as :func:`geodetic_to_ecef`)."""
    ny, nx = h_m.shape
    for i in numba.prange(ny):
        for j in range(nx):
            s = sin_lat[i, j]
            c = cos_lat[i, j]
            n = a_m / math.sqrt(1.0 - e2 * s * s)
            h = h_m[i, j]
            out[i, j, 0] = (n + h) * c * cos_lon[i, j] - origin[0]
            out[i, j, 1] = (n + h) * c * sin_lon[i, j] - origin[1]
            out[i, j, 2] = (n * (1.0 - e2) + h) * s - origin[2]
