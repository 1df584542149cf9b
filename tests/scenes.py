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


UTM = "EPSG:32633"  # UTM zone 33N on WGS 84
UTM_X0_M, UTM_Y0_M = 500_000.0, 5_000_000.0  # scene centre on the zone's central meridian (15°E)


def utm_grid(n, res_m):
    """Easting/northing (n, n) of cell centres of an n×n grid of res_m cells centred on the scene centre."""
    offs = (np.arange(n) + 0.5) * res_m - n * res_m / 2
    return np.meshgrid(UTM_X0_M + offs, UTM_Y0_M - offs)


def write_utm(path, elevation, res_m):
    """Write an n×n UTM GeoTIFF centred on the scene centre."""
    n = elevation.shape[0]
    return write_geotiff(path, elevation, UTM_X0_M - n * res_m / 2, UTM_Y0_M + n * res_m / 2, res_m, crs=UTM)


def utm_track(east_m, north_m, alt_m):
    """Track (lat, lon, alt) from UTM eastings/northings (arrays of equal length)."""
    from cluttersim import Track

    to_geo = pyproj.Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
    lon, lat = to_geo.transform(np.asarray(east_m, float), np.asarray(north_m, float))
    return Track(np.asarray(lat), np.asarray(lon), np.broadcast_to(float(alt_m), np.shape(lat)).copy(), source="utm track")


def to_utm(lon_deg, lat_deg):
    tr = pyproj.Transformer.from_crs("EPSG:4326", UTM, always_xy=True)
    return tr.transform(np.asarray(lon_deg, float), np.asarray(lat_deg, float))


#: A small radar for the hill scene (:func:`hill_scene`): 256 samples of 37.5 ns, Hagfors' law.
HILL_RADAR_TOML = """
[radar]
samples = 256
sample_interval_s = 37.5e-9
window_start_s = "auto"
[surface]
law = "hagfors"
C = 300.0
rho = 0.1
"""


def hill_scene(d):
    """A small plain with one hill east of the track (invented test scene) in directory ``d``:
    (d, DEM path, track CSV path, radar TOML path); 9 traces 250 km up."""
    n = 200
    lon = np.linspace(-1, 1, n)
    z = 800.0 * np.exp(-((lon[None, :] - 0.25) ** 2 + np.linspace(1, -1, n)[:, None] ** 2) / 0.01)
    dem = write_geotiff(d / "dem.tif", z, -1.0, 1.0, 0.01)
    track = d / "track.csv"
    rows = "\n".join(f"{lat:.4f},0.0,250000,{i * 1.5:.1f}" for i, lat in enumerate(np.linspace(-0.2, 0.2, 9)))
    track.write_text("lat,lon,alt,time\n" + rows + "\n")
    radar = d / "radar.toml"
    radar.write_text(HILL_RADAR_TOML)
    return d, dem, track, radar
