"""How a DEM's grid and values are to be understood: checks made once when a DEM is opened or read.

* :func:`as_geographic`: an equirectangular (equidistant cylindrical) grid on a
  sphere is a linear map of longitude and latitude, x = R cos φ₁ (λ − λ₀) + x₀,
  y = R (φ − φ₀) + y₀ (Snyder 1987, *Map Projections — A Working Manual*, USGS
  PP 1395, eqs. 12-1, 12-2). Planetary DEMs in PDS3/PDS4/ISIS3/VICAR labels store
  even lon/lat grids that way; read as the geographic grid it is, a global one
  joins across its ±180° edge like a geographic one.
* :func:`check_not_radii`: values that are distances from the body's centre
  rather than heights above its reference surface.
* :func:`vsi_path`: GDAL virtual file system paths (``/vsizip/``, ``/vsicurl/``...).
"""

from __future__ import annotations

import math

import numpy as np
import pyproj
from affine import Affine

from ..errors import DemError

_EQC_METHODS = ("equidistant cylindrical", "equirectangular", "simple cylindrical", "plate carree")


def as_geographic(crs: pyproj.CRS, transform: Affine) -> tuple[pyproj.CRS, Affine] | None:
    """The geographic CRS and degree geotransform of an equirectangular grid on a sphere.

    Returns None for any other CRS (including equidistant cylindrical on an
    ellipsoid, whose northing is a meridian arc, not linear in latitude).
    """
    if not crs.is_projected or crs.coordinate_operation is None:
        return None
    method = crs.coordinate_operation.method_name.lower()
    if not any(m in method for m in _EQC_METHODS):
        return None
    ell = crs.ellipsoid
    if ell is None or ell.semi_major_metre != ell.semi_minor_metre:
        return None
    if any(abs(a.unit_conversion_factor - 1.0) > 1e-12 for a in crs.axis_info[:2]):
        return None  # feet or other linear units: leave it to PROJ
    if [a.direction for a in crs.axis_info[:2]] != ["east", "north"]:
        return None
    params = {p.name.lower(): p for p in crs.coordinate_operation.params}

    def deg(*names):
        for n in names:
            if n in params:
                p = params[n]
                return float(p.value) * (float(p.unit_conversion_factor) * 180.0 / math.pi if p.unit_category == "angular" else 1.0)
        return 0.0

    def metres(*names):
        for n in names:
            if n in params:
                return float(params[n].value) * float(params[n].unit_conversion_factor or 1.0)
        return 0.0

    lat_ts = deg("latitude of 1st standard parallel", "latitude of standard parallel")
    lon_0 = deg("longitude of natural origin", "longitude of false origin")
    lat_0 = deg("latitude of natural origin", "latitude of false origin")
    x_0 = metres("false easting", "easting at false origin")
    y_0 = metres("false northing", "northing at false origin")
    r = float(ell.semi_major_metre)
    k_lat = r * math.pi / 180.0  # metres per degree of latitude
    k_lon = k_lat * math.cos(math.radians(lat_ts))
    t = transform
    geo = Affine(t.a / k_lon, 0.0, lon_0 + (t.c - x_0) / k_lon, 0.0, t.e / k_lat, lat_0 + (t.f - y_0) / k_lat)
    geodetic = crs.geodetic_crs
    if geodetic is None:
        return None
    return geodetic, geo


def check_not_radii(elevation_m: np.ndarray, mean_radius_m: float, path) -> None:
    """Refuse values that look like distances from the body's centre (radii) instead of heights.

    The test: the median of the finite values lies within 5 % of the body's mean
    radius (no body has relief of that size relative to its radius; Mars' full
    range is ~30 km of 3390 km, <1 %; common practice).
    """
    z = elevation_m
    if z.size > 200_000:  # a regular subsample is enough for a median
        step = int(math.ceil(math.sqrt(z.size / 200_000)))
        z = z[::step, ::step]
    finite = z[np.isfinite(z)]
    if finite.size == 0:
        return
    median = float(np.median(finite))
    if abs(median - mean_radius_m) < 0.05 * mean_radius_m:
        raise DemError(
            f"{path}: the DEM's values (median {median:,.0f} m) look like distances from the body's centre, "
            f"not heights above its reference surface (mean radius {mean_radius_m:,.0f} m); convert them, "
            f"e.g. gdal_calc.py -A DEM --calc=\"A-{mean_radius_m:.0f}\" (or subtract the radius the product's "
            "label gives), then simulate over the heights"
        )


def vsi_path(path) -> str | None:
    """The GDAL virtual-file-system path as GDAL needs it, or None for an ordinary path.

    ``/vsizip//abs/a.zip/dem.tif`` is rewritten ``/vsizip/{/abs/a.zip}/dem.tif`` (GDAL's
    braced form), which survives :class:`pathlib.Path` (that would fold the ``//``).
    """
    s = str(path)
    if not s.startswith("/vsi"):
        return None
    prefix, _, rest = s[1:].partition("/")
    if rest.startswith("/") and not rest.startswith("/{"):
        for ext in (".zip", ".tar", ".tgz", ".tar.gz", ".gz", ".7z"):
            i = rest.lower().find(ext + "/")
            if i >= 0:
                end = i + len(ext)
                return f"/{prefix}/{{{rest[:end]}}}{rest[end:]}"
    return s

