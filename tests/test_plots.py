"""Tests of cluttersim.plots on small synthetic radargrams and DEMs (invented data)."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
import xarray as xr
from matplotlib.image import imread

from cluttersim.plots import (
    DPI,
    RADARGRAM_FIGSIZE_IN,
    TRACK_MAP_FIGSIZE_IN,
    plot_radargram,
    plot_track_map,
    power_db,
    radargram_layers,
)

NTRACE, NSAMPLE = 50, 200
SAMPLE_INTERVAL_S = 50e-9


def synthetic_radargram(*, varying_window: bool = True) -> xr.Dataset:
    """50 traces × 200 samples: a bright line at sample 60 + trace // 5 over a weak floor.

    Traces 0-2 are NaN (off the DEM) and trace 10 is all zeros.
    """
    rng = np.random.default_rng(1)
    bright = 60 + np.arange(NTRACE) // 5
    power = 1e-16 * (1.0 + rng.random((NTRACE, NSAMPLE)))
    power[np.arange(NTRACE), bright] = 1e-10
    power[:3] = np.nan
    power[10] = 0.0
    ws = 2.0e-3 + (np.arange(NTRACE) * 1e-7 if varying_window else np.zeros(NTRACE))
    nadir = ws + bright * SAMPLE_INTERVAL_S
    nadir[:3] = np.nan
    return xr.Dataset(
        {
            "power": (("trace", "sample"), power.astype(np.float32)),
            "window_start": ("trace", ws),
            "nadir_delay": ("trace", nadir),
        },
        coords={"trace": np.arange(NTRACE), "delay": ("sample", np.arange(NSAMPLE) * SAMPLE_INTERVAL_S)},
    )


def expected_pixels(figsize_in):
    return round(figsize_in[1] * DPI), round(figsize_in[0] * DPI)


# ----------------------------------------------------------------- power_db


def test_power_db_floor_and_nan():
    np.testing.assert_allclose(power_db([1e-3, 0.0], floor_db=-100.0), [-30.0, -100.0])
    np.testing.assert_allclose(power_db([1.0, 1e-12], floor_db=-50.0), [0.0, -50.0])  # below floor is clipped
    out = power_db([np.nan, 0.0, -1.0, 10.0])
    assert np.isnan(out[0])
    assert out[1] == -np.inf and out[2] == -np.inf
    assert out[3] == pytest.approx(10.0)
    assert np.isnan(power_db([np.nan], floor_db=-100.0)[0])


# ----------------------------------------------------------------- radargram


def test_radargram_layers_relative_when_window_moves():
    ds = synthetic_radargram(varying_window=True)
    layers = radargram_layers(ds, dynamic_range_db=40.0)
    assert layers.image_db.shape == (NSAMPLE, NTRACE)
    assert layers.delay_label == "delay after window start (µs)"
    assert layers.vmax_db == pytest.approx(-100.0, abs=1e-3)
    assert layers.vmin_db == pytest.approx(-140.0, abs=1e-3)
    # The bright line is the brightest sample of each trace with data.
    bright = 60 + np.arange(NTRACE) // 5
    with_echo = np.setdiff1d(np.arange(3, NTRACE), [10])
    np.testing.assert_array_equal(np.argmax(layers.image_db[:, with_echo], axis=0), bright[with_echo])
    # NaN traces stay NaN, zero power sits on the floor.
    assert np.isnan(layers.image_db[:, :3]).all()
    assert np.all(layers.image_db[:, 10] == layers.vmin_db)
    # Nadir line in relative µs lands on the bright samples.
    np.testing.assert_allclose(layers.nadir_us[3:], bright[3:] * SAMPLE_INTERVAL_S * 1e6, rtol=1e-6)
    assert np.isnan(layers.nadir_us[:3]).all()
    assert layers.delay_top_us == pytest.approx(-0.025)
    assert layers.delay_bottom_us == pytest.approx((NSAMPLE - 0.5) * SAMPLE_INTERVAL_S * 1e6)


def test_radargram_layers_absolute_when_window_fixed():
    layers = radargram_layers(synthetic_radargram(varying_window=False))
    assert layers.delay_label == "two-way delay (µs)"
    assert layers.delay_top_us == pytest.approx(2000.0 - 0.025)
    np.testing.assert_allclose(layers.nadir_us[3:], 2000.0 + (60 + np.arange(3, NTRACE) // 5) * 0.05)


def test_plot_radargram_writes_png(tmp_path):
    out = plot_radargram(synthetic_radargram(), tmp_path / "rg.png", title="test")
    assert out == tmp_path / "rg.png"
    img = imread(out)
    assert img.shape[:2] == expected_pixels(RADARGRAM_FIGSIZE_IN)
    assert img[..., :3].std() > 0.05  # not a blank canvas
    assert not list(tmp_path.glob("*.tmp"))


def test_plot_radargram_all_zero_or_nan(tmp_path):
    ds = synthetic_radargram()
    ds["power"][:] = 0.0
    plot_radargram(ds, tmp_path / "zero.png")
    ds["power"][:] = np.nan
    ds["nadir_delay"][:] = np.nan
    plot_radargram(ds, tmp_path / "nan.png")
    assert imread(tmp_path / "nan.png").shape[:2] == expected_pixels(RADARGRAM_FIGSIZE_IN)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["nan.png", "zero.png"]


def test_plot_radargram_rejects_bad_input(tmp_path):
    with pytest.raises(ValueError, match="power"):
        plot_radargram(xr.Dataset(), tmp_path / "x.png")
    with pytest.raises(ValueError, match="delay"):
        plot_radargram(synthetic_radargram().drop_vars("delay"), tmp_path / "x.png")
    with pytest.raises(ValueError, match="dynamic_range_db"):
        plot_radargram(synthetic_radargram(), tmp_path / "x.png", dynamic_range_db=0.0)
    assert not list(tmp_path.iterdir())


def test_failed_save_leaves_no_tmp(tmp_path):
    target = tmp_path / "is_a_dir.png"
    target.mkdir()  # os.replace onto a directory fails
    with pytest.raises(OSError):
        plot_radargram(synthetic_radargram(), target)
    assert not list(tmp_path.glob("*.tmp"))


# ----------------------------------------------------------------- track map


def test_plot_track_map_writes_png(tmp_path):
    lon = np.linspace(40.0, 42.0, 120)
    lat = np.linspace(10.0, 14.0, 100)
    lon2, lat2 = np.meshgrid(lon, lat[::-1])
    elevation = 500.0 * np.exp(-((lon2 - 41.0) ** 2 + (lat2 - 12.0) ** 2))  # a dome
    elevation[10:20, 30:50] = np.nan  # a hole
    track_lat = np.linspace(10.5, 13.5, 40)
    track_lon = np.full_like(track_lat, 41.0 - 360.0)  # wrapped longitudes are brought back
    out = plot_track_map(elevation, (40.0, 42.0, 10.0, 14.0), track_lon, track_lat, tmp_path / "map.png", title="t")
    img = imread(out)
    assert img.shape[:2] == expected_pixels(TRACK_MAP_FIGSIZE_IN)
    assert img[..., :3].std() > 0.05
    # The track colour (dark red) is drawn somewhere.
    red = (img[..., 0] > 0.6) & (img[..., 1] < 0.25) & (img[..., 2] < 0.3)
    assert red.sum() > 100
    assert not list(tmp_path.glob("*.tmp"))


def test_plot_track_map_flat_and_all_nan(tmp_path):
    flat = np.zeros((20, 30))
    plot_track_map(flat, (0.0, 3.0, -1.0, 1.0), [0.5, 2.5], [0.0, 0.0], tmp_path / "flat.png")
    plot_track_map(np.full((5, 5), np.nan), (0.0, 1.0, 0.0, 1.0), [np.nan], [np.nan], tmp_path / "nan.png")
    assert imread(tmp_path / "nan.png").shape[:2] == expected_pixels(TRACK_MAP_FIGSIZE_IN)


def test_plot_track_map_projected_axes(tmp_path):
    """Projected coordinates (km): custom labels, no longitude wrapping, equal aspect."""
    elevation = np.add.outer(np.linspace(100.0, 0.0, 40), np.linspace(0.0, 50.0, 60))
    out = plot_track_map(elevation, (1000.0, 1600.0, -200.0, 200.0), [1300.0, 1300.0], [-150.0, 150.0],
                         tmp_path / "proj.png", axis_labels=("easting (km)", "northing (km)"))
    img = imread(out)
    red = (img[..., 0] > 0.6) & (img[..., 1] < 0.25) & (img[..., 2] < 0.3)
    assert red.sum() > 100  # the track at x = 1300 km was not wrapped off the map


def test_plots_do_not_import_pyplot(tmp_path):
    """The module must not touch global matplotlib state (no pyplot, no backend switch)."""
    code = (
        "import sys, numpy as np\n"
        "import cluttersim.plots as p\n"
        f"p.plot_track_map(np.zeros((4, 4)), (0, 1, 0, 1), [0.2, 0.8], [0.5, 0.5], {str(tmp_path / 'm.png')!r})\n"
        "assert 'matplotlib.pyplot' not in sys.modules, 'pyplot was imported'\n"
    )
    subprocess.run([sys.executable, "-c", code], check=True)
