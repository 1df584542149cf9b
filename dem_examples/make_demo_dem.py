"""Generate the demo DEM: an invented site on a Mars-sized sphere.

The terrain is procedural (fixed seed, so every run writes the same file) and
is laid out so that a north-south track along the centre meridian (41.0°E)
flies over plain, a valley and one small crater at nadir, while a mesa and a
larger crater lie 20-30 km to the side and return off-nadir clutter.

Run as a script::

    python dem_examples/make_demo_dem.py [--out PATH] [--seed N]

or import :func:`make_demo_dem`.
"""

from __future__ import annotations

import argparse
import os
from pathlib import Path

import numpy as np
import pyproj
import rasterio
import rasterio.crs
from rasterio.transform import from_origin
from scipy.ndimage import gaussian_filter

#: Geographic lon/lat on the 2015 IAU Mars sphere.
CRS_CODE = "IAU_2015:49900"
#: Sphere radius of that CRS in metres.
SPHERE_RADIUS_M = 3_396_190.0

CENTRE_LON_DEG = 41.0
CENTRE_LAT_DEG = 12.0
CELL_DEG = 0.004
N_CELLS = 1000
NODATA = -32768.0
DEFAULT_SEED = 20240611
DEFAULT_PATH = Path(__file__).resolve().parent / "demo_site.tif"

#: Mean height of the plain above the sphere (m).
PLAIN_BASE_M = -1800.0

# Features in local east/north kilometres from the site centre (see README.md).
# Craters: (east_km, north_km, diameter_km, depth_m, rim_height_m, floor_fraction).
# The two smaller ones are simple bowls (depth 0.2 D, rim 0.04 D); the 30 km one
# is given the shallower, flat-floored shape of larger craters.
CRATERS = [
    (0.0, 55.0, 8.0, 1600.0, 320.0, 0.0),  # small crater crossed by the centre meridian
    (-24.0, -40.0, 14.0, 2800.0, 560.0, 0.0),  # off-nadir crater 24 km west of the meridian
    (-75.0, 70.0, 30.0, 2000.0, 600.0, 0.5),  # large crater 75 km west, 70 km north
]
MESA = dict(east_km=25.0, north_km=0.0, half_ns_km=7.5, half_ew_km=5.0, height_m=600.0, scarp_km=0.6)
VALLEY = dict(centre_north_km=-65.0, meander_km=12.0, wavelength_km=140.0, depth_m=300.0, half_width_km=1.5,
              wall_km=0.7)
#: A smooth plain on the track (a lava- or ice-filled lowland): inside it the fractal roughness is
#: damped to ``rough_fraction`` of the plain's (25 m → 0.25 m rms), with a cosine taper ``taper_km``
#: wide at its edge; the regional slope and swells stay. Its nadir echo is specular.
SMOOTH_PLAIN = dict(east_km=0.0, north_km=-30.0, half_ns_km=20.0, half_ew_km=12.0, taper_km=4.0, rough_fraction=0.01)
#: Short-range roughness everywhere but the smooth plain: the fractal relief is smooth over a Fresnel
#: zone (1.5 km at 300 km), so without it every slope would be a mirror. 4 m rms (3.4 rad rms of two-way
#: phase at 20 MHz), correlated over ~2 cells (Gaussian filter of σ = 1.5 cells) so that neighbouring
#: facets still meet: rough to the radar across a Fresnel zone, smooth from one cell to the next.
CELL_ROUGHNESS_M = 4.0
CELL_ROUGHNESS_CORRELATION_CELLS = 1.5


def local_grid_km(n: int = N_CELLS, cell_deg: float = CELL_DEG):
    """Cell-centre lon/lat (degrees) and local east/north distance (km) from the centre.

    Returns
    -------
    lon_deg, lat_deg : ndarray (n,)
        Column and row centre coordinates (rows run north to south).
    east_km, north_km : ndarray (n, n)
        Equirectangular distances from the site centre, accurate to well under
        1 % over a 4° square this close to the equator.
    """
    half = n * cell_deg / 2.0
    lon_deg = CENTRE_LON_DEG - half + cell_deg * (np.arange(n) + 0.5)
    lat_deg = CENTRE_LAT_DEG + half - cell_deg * (np.arange(n) + 0.5)
    km_per_deg = np.deg2rad(1.0) * SPHERE_RADIUS_M / 1000.0
    lon2, lat2 = np.meshgrid(lon_deg, lat_deg)
    east_km = (lon2 - CENTRE_LON_DEG) * km_per_deg * np.cos(np.deg2rad(lat2))
    north_km = (lat2 - CENTRE_LAT_DEG) * km_per_deg
    return lon_deg, lat_deg, east_km, north_km


def fractal_surface_m(rng: np.random.Generator, shape, cell_km: float, rms_m: float, hurst: float = 0.8,
                      longest_km: float = 80.0) -> np.ndarray:
    """Self-affine random surface by spectral synthesis.

    Random phases with amplitude ∝ k^-(H+1) (power spectrum ∝ k^-(2H+2) in 2-D)
    are inverse-FFT'd; wavelengths longer than ``longest_km`` are tapered off so
    the roughness does not swamp the deliberate landforms. Scaled to ``rms_m``.
    """
    ny, nx = shape
    ky = np.fft.fftfreq(ny, d=cell_km)[:, None]
    kx = np.fft.rfftfreq(nx, d=cell_km)[None, :]
    k = np.hypot(kx, ky)
    k_min = 1.0 / longest_km
    amplitude = np.where(k > 0, (k**2 + k_min**2) ** (-(hurst + 1.0) / 2.0), 0.0)
    phase = rng.uniform(0.0, 2.0 * np.pi, size=k.shape)
    spectrum = amplitude * rng.standard_normal(k.shape) * np.exp(1j * phase)
    z = np.fft.irfft2(spectrum, s=shape)
    return z * (rms_m / z.std())


def regional_surface_m(east_km, north_km) -> np.ndarray:
    """Plain: base level, a gentle eastward slope and long-wavelength swells (±~40 m)."""
    slope = -0.4 * east_km  # 0.4 m/km down to the east, ~190 m across the site
    swells = (25.0 * np.sin(2 * np.pi * east_km / 190.0 + 0.7) * np.cos(2 * np.pi * north_km / 260.0)
              + 15.0 * np.sin(2 * np.pi * (east_km + north_km) / 120.0))
    return PLAIN_BASE_M + slope + swells


def crater_relief_m(east_km, north_km, centre_east_km, centre_north_km, diameter_km, depth_m, rim_height_m,
                    floor_fraction=0.0) -> np.ndarray:
    """Relief of an impact crater with raised rim and ejecta blanket (m, → 0 far away).

    Inside the rim (r < R) a parabolic bowl rises from ``-depth_m`` at the
    centre to the rim crest ``+rim_height_m``; with ``floor_fraction`` > 0 the
    inner part (r < floor_fraction R) is a flat floor at ``-depth_m`` instead.
    Outside, the ejecta blanket falls off as (r/R)^-3 (McGetchin, Settle & Head
    1973, Earth Planet. Sci. Lett. 20, 226).
    """
    radius_km = diameter_km / 2.0
    rr = np.hypot(east_km - centre_east_km, north_km - centre_north_km) / radius_km
    t = np.clip((rr - floor_fraction) / (1.0 - floor_fraction), 0.0, None)
    bowl = -depth_m + (depth_m + rim_height_m) * t**2
    ejecta = rim_height_m * np.maximum(rr, 1.0) ** -3
    return np.where(rr < 1.0, bowl, ejecta)


def mesa_relief_m(east_km, north_km, east_c_km, north_c_km, half_ns_km, half_ew_km, height_m, scarp_km) -> np.ndarray:
    """Flat-topped mesa: a rounded-rectangle (superellipse) plateau with steep scarps.

    The edge is a tanh step of width ~``scarp_km`` (slopes of ~30-40° for
    600 m over 0.6 km), with a low talus apron spreading a few km outwards.
    """
    u = (east_km - east_c_km) / half_ew_km
    v = (north_km - north_c_km) / half_ns_km
    rho = (np.abs(u) ** 4 + np.abs(v) ** 4) ** 0.25  # 1 on the plateau edge
    edge_km = (rho - 1.0) * min(half_ns_km, half_ew_km)  # approx. distance outside the edge
    plateau = 0.5 * height_m * (1.0 - np.tanh(edge_km / (0.5 * scarp_km)))
    outside = 0.5 * (1.0 + np.tanh(edge_km / (0.5 * scarp_km)))  # 0 on the plateau, 1 beyond the scarp
    apron = 0.1 * height_m * np.exp(-np.maximum(edge_km, 0.0) / 2.0) * outside
    return plateau + apron


def valley_relief_m(east_km, north_km, centre_north_km, meander_km, wavelength_km, depth_m, half_width_km,
                    wall_km) -> np.ndarray:
    """A sinuous, flat-floored valley running west to east (negative relief, m).

    Centre line: north = centre_north + A sin(2πx/λ) + 0.3 A sin(4.3πx/λ + 1). The
    distance to it is approximated by the north offset times the cosine of the
    centre line's local heading, adequate for gentle meanders.
    """
    phase = 2 * np.pi * east_km / wavelength_km
    centre = centre_north_km + meander_km * (np.sin(phase) + 0.3 * np.sin(2.15 * phase + 1.0))
    dcentre = meander_km * 2 * np.pi / wavelength_km * (np.cos(phase) + 0.645 * np.cos(2.15 * phase + 1.0))
    dist_km = np.abs(north_km - centre) / np.sqrt(1.0 + dcentre**2)
    return -0.5 * depth_m * (1.0 - np.tanh((dist_km - half_width_km) / (0.5 * wall_km)))


def smooth_plain_weight(east_km, north_km, east_c_km, north_c_km, half_ns_km, half_ew_km, taper_km) -> np.ndarray:
    """1 inside the smooth plain's rectangle, 0 outside it, a cosine taper ``taper_km`` wide inside its edge."""
    inside_km = np.minimum(half_ew_km - np.abs(east_km - east_c_km), half_ns_km - np.abs(north_km - north_c_km))
    t = np.clip(inside_km / taper_km, 0.0, 1.0)
    return 0.5 * (1.0 - np.cos(np.pi * t))


def demo_elevation_m(seed: int = DEFAULT_SEED) -> tuple[np.ndarray, tuple[float, float, float, float]]:
    """Build the demo elevation grid.

    Returns
    -------
    elevation_m : ndarray (N_CELLS, N_CELLS), float32
        Heights above the sphere, north-up (row 0 is the northern edge).
    extent_deg : tuple
        (west, east, south, north) edges in degrees.
    """
    rng = np.random.default_rng(seed)
    _lon_deg, _lat_deg, east_km, north_km = local_grid_km()
    cell_km = np.deg2rad(CELL_DEG) * SPHERE_RADIUS_M / 1000.0

    z = regional_surface_m(east_km, north_km)
    plain = SMOOTH_PLAIN
    smooth = smooth_plain_weight(east_km, north_km, plain["east_km"], plain["north_km"], plain["half_ns_km"],
                                 plain["half_ew_km"], plain["taper_km"])
    z += fractal_surface_m(rng, east_km.shape, cell_km, rms_m=25.0) * (1.0 - (1.0 - plain["rough_fraction"]) * smooth)
    z += valley_relief_m(east_km, north_km, **VALLEY)
    z += mesa_relief_m(east_km, north_km, MESA["east_km"], MESA["north_km"], MESA["half_ns_km"],
                       MESA["half_ew_km"], MESA["height_m"], MESA["scarp_km"])
    for crater in CRATERS:
        z += crater_relief_m(east_km, north_km, *crater)
    bumps = gaussian_filter(rng.standard_normal(z.shape), CELL_ROUGHNESS_CORRELATION_CELLS)  # drawn last: the
    z += CELL_ROUGHNESS_M * bumps / bumps.std() * (1.0 - smooth)  # rest of the scene is unchanged

    half = N_CELLS * CELL_DEG / 2.0
    extent = (CENTRE_LON_DEG - half, CENTRE_LON_DEG + half, CENTRE_LAT_DEG - half, CENTRE_LAT_DEG + half)
    return z.astype(np.float32), extent


def make_demo_dem(path=DEFAULT_PATH, seed: int = DEFAULT_SEED) -> Path:
    """Write the demo DEM GeoTIFF and return its path.

    Parameters
    ----------
    path : str or Path
        Output GeoTIFF (overwritten if present).
    seed : int
        Seed of the numpy random generator used for the roughness.
    """
    path = Path(path)
    elevation_m, (west, _east, _south, north) = demo_elevation_m(seed)
    crs = rasterio.crs.CRS.from_wkt(pyproj.CRS(CRS_CODE).to_wkt())
    profile = dict(
        driver="GTiff",
        width=N_CELLS,
        height=N_CELLS,
        count=1,
        dtype="float32",
        crs=crs,
        transform=from_origin(west, north, CELL_DEG, CELL_DEG),
        nodata=NODATA,
        compress="deflate",
        predictor=3,  # floating-point predictor: much better deflate ratio on smooth terrain
        tiled=True,
        blockxsize=256,
        blockysize=256,
    )
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")  # written whole, then renamed: never a half-written DEM
    try:
        with rasterio.open(tmp, "w", **profile) as dst:
            dst.write(elevation_m, 1)
            dst.update_tags(DESCRIPTION="cluttersim demo site: invented, procedurally generated terrain",
                            SEED=str(seed))
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)
    return path


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description="Generate the cluttersim demo DEM (invented terrain).")
    parser.add_argument("--out", type=Path, default=DEFAULT_PATH, help=f"output GeoTIFF (default {DEFAULT_PATH})")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="random seed (default %(default)s)")
    args = parser.parse_args(argv)
    path = make_demo_dem(args.out, seed=args.seed)
    with rasterio.open(path) as ds:
        z = ds.read(1, masked=True)
        print(f"{path}: {ds.width}x{ds.height} cells of {CELL_DEG}°, "
              f"elevation {float(z.min()):.0f} to {float(z.max()):.0f} m, {path.stat().st_size / 1e6:.2f} MB")


if __name__ == "__main__":
    main()
