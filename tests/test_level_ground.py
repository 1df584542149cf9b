"""The level-ground reference of the survey's clutter index, computed over a level scene in memory
(:class:`cluttersim.clutter_index.LevelGround`), against the reference it replaces: the same
simulation over a level GeoTIFF written to disk and opened as any DEM (kept below as the oracle).
Both run the same kernel on the same grid, so they must agree to rounding: tolerance 1e-9 dB."""

import dataclasses
import math
import tempfile
import warnings
from pathlib import Path

import numpy as np
import pytest
import rasterio
from rasterio.transform import from_origin
from scenes import MARS_RADIUS_M, UTM_X0_M, UTM_Y0_M, flat_geographic, utm_grid, utm_track, write_utm

from cluttersim import SurfaceConfig, default_config
from cluttersim.body import Body
from cluttersim.clutter_index import LevelGround, clutter_index, level_ground_index_db
from cluttersim.constants import SPEED_OF_LIGHT_M_S
from cluttersim.dem import DemSource
from cluttersim.radar import delay_after_surface_s
from cluttersim.simulate import ground_radius_m, simulate
from cluttersim.track import Track, great_circle_track

#: agreement of the in-memory reference with the GeoTIFF one (dB): same kernel, same facets
TOLERANCE_DB = 1e-9
SURVEY = {"max_depth_m": 300.0, "permittivity": 3.15, "threshold_db": 3.0}


def _level_via_geotiff(src, track, h_nadir_m, config, survey):
    """The previous implementation (a level GeoTIFF on disk, opened as a DEM), verbatim but for names."""
    clearance = np.asarray(track.alt_m, dtype=np.float64) - np.asarray(h_nadir_m, dtype=np.float64)
    ok = np.flatnonzero(np.isfinite(clearance) & (clearance > 0))
    i = int(ok[np.argsort(clearance[ok])[ok.size // 2]])
    rows = sorted({max(0, i - 1), i, min(len(track) - 1, i + 1)})
    h0 = float(h_nadir_m[i])
    radar = config.radar
    window_s = float(delay_after_surface_s(survey["max_depth_m"], survey["permittivity"]))
    if radar.window_start_s == "auto":
        need = radar.auto_margin_samples + int(math.ceil(window_s / radar.sample_interval_s)) + 4 * radar.mainlobe_samples + 8
        config = dataclasses.replace(config, radar=dataclasses.replace(radar, samples=int(min(radar.samples, max(need, 64)))))
        radar = config.radar
    max_range = clearance[i] + 0.5 * SPEED_OF_LIGHT_M_S * (radar.samples * radar.sample_interval_s + 2e-6)
    if radar.window_start_s != "auto":
        max_range = 0.5 * SPEED_OF_LIGHT_M_S * (float(radar.window_start_s) + radar.window_length_s)
    radius = float(ground_radius_m(src.body, np.array([track.alt_m[i]]), np.array([max_range]), h0, h0)[0])
    cell_x, cell_y = abs(src.transform.a), abs(src.transform.e)
    x, y = src.lonlat_to_xy(np.array([track.lon_deg[i]]), np.array([track.lat_deg[i]]))
    x, y = float(np.asarray(x)[0]), float(np.asarray(y)[0])
    if src.is_geographic:
        deg = math.degrees(1.0 / src.body.mean_radius_m)
        half_x = radius * deg / max(math.cos(math.radians(track.lat_deg[i])), 0.05) + 3 * cell_x
        half_y = radius * deg + 3 * cell_y
    else:
        half_x, half_y = radius + 3 * cell_x, radius + 3 * cell_y
    nx = int(min(6000, 2 * math.ceil(half_x / cell_x) + 1))
    ny = int(min(6000, 2 * math.ceil(half_y / cell_y) + 1))
    t = src.transform
    west = t.c + math.floor((x - 0.5 * nx * cell_x - t.c) / cell_x) * cell_x
    north = t.f - math.floor((t.f - (y + 0.5 * ny * cell_y)) / cell_y) * cell_y
    sub = Track(track.lat_deg[rows], track.lon_deg[rows], track.alt_m[rows], None, source="level")
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "level.tif"
        profile = dict(driver="GTiff", width=nx, height=ny, count=1, dtype="float32",
                       transform=from_origin(west, north, cell_x, cell_y))  # fmt: skip
        if src.crs is not None:
            from rasterio.crs import CRS as RioCRS

            profile["crs"] = RioCRS.from_wkt(src.crs.to_wkt())
        with rasterio.open(path, "w", **profile) as out:
            out.write(np.full((ny, nx), h0, dtype=np.float32), 1)
        radius_given = None if src.crs is not None else src.body.mean_radius_m
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ds = simulate(DemSource.open(path, radius_given), sub, config, body_radius_m=radius_given, sources=True,
                          max_memory_bytes=None)  # fmt: skip
    index_db, *_ = clutter_index(
        ds["power"].values, ds["left_fraction"].values, ds["right_fraction"].values, ds["window_start"].values,
        ds["nadir_delay"].values, radar.sample_interval_s, window_s, radar.mainlobe_samples, 0.0, survey["permittivity"],
    )  # fmt: skip
    return float(index_db[rows.index(i)])


def _config(samples=320):
    cfg = default_config()
    return dataclasses.replace(cfg, radar=dataclasses.replace(cfg.radar, samples=samples),
                               surface=SurfaceConfig("hagfors", {"C": 400.0, "rho": 0.08}))  # fmt: skip


@pytest.fixture(scope="module")
def utm_hills(tmp_path_factory):
    """A UTM scene (350 m cells) with gentle relief, so the median trace's nadir height is not 0."""
    d = tmp_path_factory.mktemp("level")
    east, north = utm_grid(160, 350.0)
    z = 300.0 + 200.0 * np.sin((east - UTM_X0_M) / 9e3) * np.cos((north - UTM_Y0_M) / 7e3)
    return DemSource.open(write_utm(d / "hills.tif", z, 350.0))


@pytest.mark.parametrize("offset_m", [0.0, 130.0, 270.0])  # three positions across a cell (grid phase)
def test_in_memory_level_reference_equals_the_geotiff_one_utm(utm_hills, offset_m):
    north = UTM_Y0_M + np.linspace(-15e3, 15e3, 23)
    track = utm_track(np.full(north.size, UTM_X0_M + 4e3 + offset_m), north, 100e3)
    h_nadir = utm_hills.read(utm_hills.window_around(*utm_hills.lonlat_to_rowcol(track.lon_deg, track.lat_deg)))
    h = h_nadir.bilinear_m(track.lon_deg, track.lat_deg)
    new = level_ground_index_db(utm_hills, track, h, _config(), SURVEY)
    old = _level_via_geotiff(utm_hills, track, h, _config(), SURVEY)
    assert math.isfinite(new) and -6.0 < new < 0.0  # a few dB below the nadir echo (test_survey.py)
    assert abs(new - old) <= TOLERANCE_DB, (new, old)


def test_in_memory_level_reference_equals_the_geotiff_one_geographic(tmp_path):
    src = DemSource.open(flat_geographic(tmp_path / "flat.tif", 0.01, half_width_deg=1.5, height_m=-1200.0))
    body = Body.sphere(MARS_RADIUS_M)
    track = great_circle_track(body, -0.6, 0.2, 0.6, 0.3, 250e3, 3000.0)
    h = np.full(len(track), -1200.0)
    new = level_ground_index_db(src, track, h, _config(400), SURVEY)
    old = _level_via_geotiff(src, track, h, _config(400), SURVEY)
    assert math.isfinite(new)
    assert abs(new - old) <= TOLERANCE_DB, (new, old)


def test_level_ground_reads_no_pixels_and_is_level(utm_hills):
    from rasterio.windows import Window

    level = LevelGround.like(utm_hills, utm_hills.transform, 50, 40, 123.5)
    w = level.read(Window(3, 4, 20, 10))
    assert w.elevation_m.shape == (10, 20) and np.all(w.elevation_m == 123.5)
    assert w.transform == rasterio.windows.transform(Window(3, 4, 20, 10), utm_hills.transform)
    assert level.read(Window(0, 0, 50, 40), out_shape=(20, 25)).elevation_m.shape == (20, 25)
