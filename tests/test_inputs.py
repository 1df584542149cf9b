"""DEM and track inputs: holes, projections, no CRS, traces off the DEM, CSV parsing."""

import numpy as np
import pytest

from cluttersim import Body, SimulationConfig, SurfaceConfig, Track, great_circle_track, simulate
from cluttersim.errors import TrackError
from cluttersim.physics.radar import RadarConfig
from scenes import MARS_RADIUS_M, flat_geographic, write_geotiff

C = 299_792_458.0  # SI definition


def small_config(**radar):
    return SimulationConfig(radar=RadarConfig(**{"samples": 256, **radar}), surface=SurfaceConfig("constant", {"sigma0": 0.01}))


def test_holes_are_skipped_with_a_warning_giving_their_share(tmp_path):
    z = np.zeros((200, 200))
    z[90:110, :] = -32768.0  # a nodata band across the track: 10 % of the grid
    dem = write_geotiff(tmp_path / "holes.tif", z, -1.0, 1.0, 0.01)
    track = great_circle_track(Body.sphere(MARS_RADIUS_M), -0.3, 0.0, 0.3, 0.0, 250e3, 5000.0)
    with pytest.warns(UserWarning, match=r"% of the DEM cells around the track are nodata") as rec:
        ds = simulate(dem, track, small_config())
    message = next(str(w.message) for w in rec if "nodata" in str(w.message))
    share = float(message.split(":")[1].split("%")[0])
    assert 5 < share < 30  # the band's share of the window actually read
    # over the hole the nadir height is unknown, elsewhere it is the plain's
    over_hole = np.abs(track.lat_deg) < 0.1
    assert np.isnan(ds["nadir_delay"].values[over_hole]).all()
    np.testing.assert_allclose(ds["nadir_delay"].values[np.abs(track.lat_deg) > 0.15], 2 * 250e3 / C, rtol=1e-12)


def test_dem_without_crs_is_read_on_the_given_sphere(tmp_path):
    dem = write_geotiff(tmp_path / "nocrs.tif", np.full((100, 100), 100.0), -1.0, 1.0, 0.02, crs=None)
    track = great_circle_track(Body.sphere(1_737_400.0), -0.2, 0.0, 0.2, 0.0, 100e3, 5000.0)
    ds = simulate(dem, track, small_config(), body_radius_m=1_737_400.0)
    assert ds.attrs["body_semi_major_m"] == 1_737_400.0
    np.testing.assert_allclose(ds["nadir_delay"], 2 * (100e3 - 100.0) / C, rtol=1e-12)


def test_projected_and_geographic_grids_of_the_same_plain_agree(tmp_path):
    """A level plain stored in UTM (EPSG:32633) and in lon/lat (EPSG:4326) gives the same radargram."""
    import pyproj

    to_utm = pyproj.Transformer.from_crs("EPSG:4326", "EPSG:32633", always_xy=True)
    x0, y0 = to_utm.transform(15.0, 45.0)
    utm = write_geotiff(tmp_path / "utm.tif", np.full((300, 300), 50.0), x0 - 15000, y0 + 15000, 100.0, crs="EPSG:32633")
    geo = write_geotiff(tmp_path / "geo.tif", np.full((300, 300), 50.0), 14.8, 45.14, 0.001, crs="EPSG:4326")
    track = Track(np.array([44.98, 45.0, 45.02]), np.full(3, 15.0), np.full(3, 3000.0), source="t")
    cfg = small_config(center_frequency_hz=60e6, bandwidth_hz=20e6, sample_interval_s=10e-9, window_start_s=2 * 2950 / C - 20e-9)
    a = simulate(utm, track, cfg)
    b = simulate(geo, track, cfg)
    np.testing.assert_allclose(a["nadir_delay"], b["nadir_delay"], rtol=1e-12)
    strong = b["power"].values > 1e-2 * b["power"].values.max()
    np.testing.assert_allclose(a["power"].values[strong], b["power"].values[strong], rtol=0.03)


def test_traces_off_the_dem_are_nan_and_counted(tmp_path):
    dem = flat_geographic(tmp_path / "flat.tif", 0.01, 1.0)
    track = great_circle_track(Body.sphere(MARS_RADIUS_M), 0.5, 0.0, 1.5, 0.0, 250e3, 5000.0)
    with pytest.warns(UserWarning, match=r"traces are not over the DEM"):
        ds = simulate(dem, track, small_config())
    off = track.lat_deg > 1.0
    assert off.any() and (~off).any()
    assert np.isnan(ds["power"].values[off]).all()
    assert np.isfinite(ds["power"].values[~off]).all()
    np.testing.assert_array_equal(ds["on_dem"].values, (~off).astype(np.int8))


@pytest.mark.parametrize(
    "text, message",
    [
        ("", "empty file"),
        ("lat,lon,alt\n", "the track has no traces"),
        ("lat,lon,alt\n95,0,1000\n", "column 'lat' row 1 = 95.0: expected -90..90"),
        ("lat,lon,alt,time\n0,0,1000,5\n0,0.1,1000,5\n", "column 'time' row 2: expected times increasing strictly"),
        ("lat,lon,alt\n0,0,nan\n", "column 'alt' row 1: expected a finite number"),
    ],
)
def test_track_csv_errors_name_the_row_and_column(tmp_path, text, message):
    p = tmp_path / "t.csv"
    p.write_text(text)
    with pytest.raises(TrackError, match=message.replace("(", r"\(").replace(".", r"\.")):
        Track.from_csv(p)


def test_track_csv_round_trip(tmp_path):
    tr = great_circle_track(Body.sphere(MARS_RADIUS_M), 1.0, 2.0, 1.5, 2.5, 1234.5, 2000.0, speed_m_s=100.0)
    tr.to_csv(tmp_path / "t.csv")
    back = Track.from_csv(tmp_path / "t.csv")
    np.testing.assert_allclose(back.lat_deg, tr.lat_deg, atol=1e-9)
    np.testing.assert_allclose(back.alt_m, tr.alt_m)
    np.testing.assert_allclose(back.time_s, tr.time_s, atol=1e-6)
