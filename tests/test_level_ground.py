"""The level-ground reference of the survey's clutter index, computed over a level scene in memory
(:class:`cluttersim.analysis.clutter_index.LevelGround`), against the way it was computed before: the same
level scene written to a float32 GeoTIFF on disk and opened as any DEM (the oracle below). Both run
the same kernel on the same grid, so they must agree to rounding: tolerance 1e-9 dB. (When the
in-memory scene replaced the GeoTIFF, the two also agreed bit for bit on 14 tracks of the survey
benchmark's scene and a 2000² DEM of 0.0004° cells.)"""

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
from cluttersim.physics.body import Body
from cluttersim.analysis.clutter_index import LevelGround, level_ground_index_db, level_index_db, level_scene
from cluttersim.io.dem import DemSource
from cluttersim.simulate import simulate
from cluttersim.track import great_circle_track

#: agreement of the in-memory reference with the GeoTIFF one (dB): same kernel, same facets
TOLERANCE_DB = 1e-9
SURVEY = {"max_depth_m": 300.0, "permittivity": 3.15, "threshold_db": 3.0}


def _level_via_geotiff(src, track, h_nadir_m, config, survey):
    """The previous reference: the same level scene (:func:`level_scene`) written to a float32
    GeoTIFF on disk and simulated as any DEM opened from a file."""
    scene = level_scene(src, track, h_nadir_m, config, survey)
    g = scene.ground
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "level.tif"
        profile = dict(driver="GTiff", width=g.width, height=g.height, count=1, dtype="float32",
                       transform=from_origin(g.transform.c, g.transform.f, g.transform.a, -g.transform.e))  # fmt: skip
        if src.crs is not None:
            from rasterio.crs import CRS as RioCRS

            profile["crs"] = RioCRS.from_wkt(src.crs.to_wkt())
        with rasterio.open(path, "w", **profile) as out:
            out.write(np.full((g.height, g.width), g.level_m, dtype=np.float32), 1)
        radius_given = None if src.crs is not None else src.body.mean_radius_m
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ds = simulate(DemSource.open(path, radius_given), scene.traces, scene.config, body_radius_m=radius_given,
                          sources=True, max_memory_bytes=None)  # fmt: skip
    return level_index_db(ds, scene, survey["permittivity"])


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
