"""Synthetic test scenes: small GeoTIFFs written on the fly (invented data, tests only)."""

from __future__ import annotations

import numpy as np
import pyproj
import rasterio
from rasterio.crs import CRS as RioCRS
from rasterio.transform import from_origin

MARS_SPHERE = "IAU_2015:49900"  # Mars (2015) sphere, geographic, R = 3 396 190 m
MARS_RADIUS_M = 3_396_190.0  # IAU WGCCRE 2015 report (Archinal et al. 2018, Celest. Mech. Dyn. Astron. 130:22)


def write_geotiff(path, elevation, west, north, res_x, res_y=None, crs=MARS_SPHERE, nodata=-32768.0, dtype="float32"):
    """Write a north-up single-band GeoTIFF; ``crs`` None writes no CRS."""
    res_y = res_x if res_y is None else res_y
    elevation = np.asarray(elevation)
    profile = dict(
        driver="GTiff",
        width=elevation.shape[1],
        height=elevation.shape[0],
        count=1,
        dtype=dtype,
        transform=from_origin(west, north, res_x, res_y),
        nodata=nodata,
    )
    if crs is not None:
        profile["crs"] = RioCRS.from_wkt(pyproj.CRS(crs).to_wkt())
    with rasterio.open(path, "w", **profile) as ds:
        ds.write(elevation.astype(dtype), 1)
    return path


def flat_geographic(path, res_deg, half_width_deg=2.0, height_m=0.0, crs=MARS_SPHERE):
    """A constant-elevation square centred on (0, 0)."""
    n = int(round(2 * half_width_deg / res_deg))
    return write_geotiff(path, np.full((n, n), height_m), -half_width_deg, half_width_deg, res_deg, crs=crs)
