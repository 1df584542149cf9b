"""Tests of cluttersim.plots on small synthetic radargrams and DEMs (invented data)."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
import xarray as xr
from matplotlib.colors import to_rgb
from matplotlib.image import imread

from cluttersim.plots import (
    DPI,
    ECHO_CELL_COLOUR,
    ECHO_SOURCES_FIGSIZE_IN,
    FIRST_RETURN_COLOUR,
    RADARGRAM_FIGSIZE_IN,
    SIDE_LEFT_COLOUR,
    SIDE_NADIR_COLOUR,
    SIDE_NO_DATA_COLOUR,
    SIDE_RIGHT_COLOUR,
    TRACK_MAP_FIGSIZE_IN,
    depth_axis_functions,
    nadir_reference_us,
    plot_echo_sources,
    plot_radargram,
    plot_side_radargram,
    plot_source_map,
    plot_track_map,
    power_db,
    radargram_layers,
    side_colours,
    SIDE_BRIGHTNESS_GAMMA,
)
from cluttersim.physics.radar import apparent_depth_m

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


def with_sides(ds: xr.Dataset) -> xr.Dataset:
    """Add a source record: samples < 100 all from the left, the rest all from the right."""
    left = np.zeros((NTRACE, NSAMPLE), np.float32)
    left[:, :100] = 1.0
    right = 1.0 - left
    unknown = ~(ds["power"].values > 0)
    left[unknown] = np.nan
    right[unknown] = np.nan
    return ds.assign(left_fraction=(("trace", "sample"), left), right_fraction=(("trace", "sample"), right))


def expected_pixels(figsize_in):
    return round(figsize_in[1] * DPI), round(figsize_in[0] * DPI)


def near_colour(img, colour, tol=0.06):
    """Mask of pixels within ``tol`` of ``colour`` in every RGB channel."""
    return (np.abs(img[..., :3] - np.asarray(to_rgb(colour))) < tol).all(axis=-1)


def relative_luminance(colour):
    linear = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in to_rgb(colour)]
    return 0.2126 * linear[0] + 0.7152 * linear[1] + 0.0722 * linear[2]


def dome(nx=120, ny=100, west=40.0, east=42.0, south=10.0, north=14.0):
    """A 500 m dome on a regular lon/lat grid, row 0 at the north."""
    lon2, lat2 = np.meshgrid(np.linspace(west, east, nx), np.linspace(north, south, ny))
    return 500.0 * np.exp(-((lon2 - 0.5 * (west + east)) ** 2 + (lat2 - 0.5 * (south + north)) ** 2)), lon2, lat2


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
    # the figure's height is fixed, its width follows the map's shape (a tall map: a narrow figure)
    assert img.shape[0] == expected_pixels(TRACK_MAP_FIGSIZE_IN)[0] and img.shape[1] < expected_pixels(TRACK_MAP_FIGSIZE_IN)[1]
    assert img[..., :3].std() > 0.05
    # The track colour (dark red) is drawn somewhere.
    red = (img[..., 0] > 0.6) & (img[..., 1] < 0.25) & (img[..., 2] < 0.3)
    assert red.sum() > 100
    assert not list(tmp_path.glob("*.tmp"))


def test_plot_track_map_flat_and_all_nan(tmp_path):
    flat = np.zeros((20, 30))
    plot_track_map(flat, (0.0, 3.0, -1.0, 1.0), [0.5, 2.5], [0.0, 0.0], tmp_path / "flat.png")
    plot_track_map(np.full((5, 5), np.nan), (0.0, 1.0, 0.0, 1.0), [np.nan], [np.nan], tmp_path / "nan.png")
    assert imread(tmp_path / "nan.png").shape[0] == expected_pixels(TRACK_MAP_FIGSIZE_IN)[0]


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
        f"p.plot_track_map(np.zeros((4, 4)), (0, 1, 0, 1), [0.2, 0.8], [0.5, 0.5], {str(tmp_path / 'm.png')!r},\n"
        "                 first_return=([0.3, 0.7], [0.5, 0.6]))\n"
        f"p.plot_source_map(np.ones((4, 4)), np.zeros((4, 4)), (0, 1, 0, 1), [0.2, 0.8], [0.5, 0.5], "
        f"{str(tmp_path / 's.png')!r})\n"
        f"p.plot_echo_sources(np.zeros((4, 4)), (0, 1, 0, 1), [0.2, 0.8], [0.5, 0.5], (0.5, 0.5), [[0.4, 0.4]], [0.9], "
        f"{str(tmp_path / 'e.png')!r})\n"
        "rgb = p.side_colours(np.ones((3, 5)), np.ones((3, 5)), np.zeros((3, 5)))\n"
        "assert 'matplotlib.pyplot' not in sys.modules, 'pyplot was imported'\n"
    )
    subprocess.run([sys.executable, "-c", code], check=True)


# ----------------------------------------------------------------- depth axis


def test_nadir_reference_and_depth_functions():
    layers = radargram_layers(synthetic_radargram(varying_window=True))
    surface_us, spread_us = nadir_reference_us(layers)
    bright = 60 + np.arange(3, NTRACE) // 5  # nadir sample of the traces with a nadir delay
    assert surface_us == pytest.approx(np.median(bright) * SAMPLE_INTERVAL_S * 1e6)
    assert spread_us == pytest.approx(np.ptp(bright) * SAMPLE_INTERVAL_S * 1e6)
    depth_m, delay_us = depth_axis_functions(surface_us, 3.15)
    assert depth_m(surface_us) == pytest.approx(0.0)
    # 1 µs after the surface in ice: c · 1 µs / (2 √3.15) ≈ 84.5 m
    assert depth_m(surface_us + 1.0) == pytest.approx(float(apparent_depth_m(1e-6, 3.15)))
    assert depth_m(surface_us + 1.0) == pytest.approx(84.45, abs=0.01)
    delays = np.array([0.0, 2.5, 9.9])
    np.testing.assert_allclose(delay_us(depth_m(delays)), delays, atol=1e-9)
    assert depth_m(surface_us - 1.0) < 0  # above the surface
    with pytest.raises(ValueError, match="permittivity"):
        depth_axis_functions(0.0, 0.5)


def test_nadir_reference_absent():
    ds = synthetic_radargram()
    ds["nadir_delay"][:] = np.nan
    assert nadir_reference_us(radargram_layers(ds)) is None
    assert nadir_reference_us(radargram_layers(ds.drop_vars("nadir_delay"))) is None


def test_plot_radargram_with_depth_axis(tmp_path):
    plain = imread(plot_radargram(synthetic_radargram(), tmp_path / "plain.png"))
    deep = imread(plot_radargram(synthetic_radargram(), tmp_path / "deep.png", permittivity=3.15))
    assert deep.shape == plain.shape == expected_pixels(RADARGRAM_FIGSIZE_IN) + (4,)
    assert not np.array_equal(plain, deep)  # the depth axis (and the median-nadir note) are drawn
    # No nadir line: no axis, no failure; fixed window: absolute frame.
    ds = synthetic_radargram(varying_window=False)
    plot_radargram(ds, tmp_path / "abs.png", permittivity=1.0)
    ds["nadir_delay"][:] = np.nan
    plot_radargram(ds, tmp_path / "no_nadir.png", permittivity=3.15)
    with pytest.raises(ValueError, match="permittivity"):
        plot_radargram(ds, tmp_path / "bad.png", permittivity=0.9)
    assert not (tmp_path / "bad.png").exists()
    assert not list(tmp_path.glob("*.tmp"))


# ----------------------------------------------------------------- side radargram


def test_side_palette_is_luminance_matched_and_distinct():
    """Brightness must show power alone: the three side colours have the same luminance."""
    lum = [relative_luminance(c) for c in (SIDE_LEFT_COLOUR, SIDE_RIGHT_COLOUR, SIDE_NADIR_COLOUR)]
    assert max(lum) - min(lum) < 0.02
    rgb = np.array([to_rgb(c) for c in (SIDE_LEFT_COLOUR, SIDE_RIGHT_COLOUR, SIDE_NADIR_COLOUR)])
    assert min(np.abs(rgb[i] - rgb[j]).max() for i, j in ((0, 1), (0, 2), (1, 2))) > 0.3
    # No echo colour can be as light as the no-data colour.
    assert relative_luminance(SIDE_NO_DATA_COLOUR) > max(lum) + 0.2


def test_side_colours_pure_sides_and_brightness():
    # 2 traces × 4 samples: max power, 30 dB down, 60 dB down (floor), zero.
    power = np.array([[1.0, 1e-3, 1e-6, 0.0], [1.0, 1e-3, 1e-6, 0.0]])
    left = np.array([[1.0] * 4, [0.0] * 4])
    right = np.array([[0.0] * 4, [1.0] * 4])
    rgb = side_colours(power, left, right, dynamic_range_db=60.0)
    assert rgb.shape == (4, 2, 3)  # (sample, trace, RGB)
    c_left, c_right = np.array(to_rgb(SIDE_LEFT_COLOUR)), np.array(to_rgb(SIDE_RIGHT_COLOUR))
    np.testing.assert_allclose(rgb[0, 0], c_left)
    g = SIDE_BRIGHTNESS_GAMMA  # brightness = (level in the dB scale)^γ
    np.testing.assert_allclose(rgb[1, 0], 0.5**g * c_left)
    np.testing.assert_allclose(rgb[0, 1], c_right)
    np.testing.assert_allclose(rgb[1, 1], 0.5**g * c_right)
    np.testing.assert_allclose(rgb[2:], 0.0)  # at the floor and zero power: black
    assert rgb.min() >= 0.0 and rgb.max() <= 1.0


def test_side_colours_nadir_mixtures_and_no_data():
    c_left, c_right, c_nadir = (np.array(to_rgb(c)) for c in (SIDE_LEFT_COLOUR, SIDE_RIGHT_COLOUR, SIDE_NADIR_COLOUR))
    no_data = np.array(to_rgb(SIDE_NO_DATA_COLOUR))
    power = np.array([[1.0, 1.0, 1.0, 1.0, np.nan, 0.0, 1.0]])
    left = np.array([[0.0, 0.5, 0.25, 0.8, np.nan, np.nan, np.nan]])
    right = np.array([[0.0, 0.5, 0.25, 0.8, np.nan, np.nan, 0.3]])
    rgb = side_colours(power, left, right, dynamic_range_db=40.0)[:, 0]
    np.testing.assert_allclose(rgb[0], c_nadir)  # no side power: nadir strip
    np.testing.assert_allclose(rgb[1], 0.5 * c_left + 0.5 * c_right)
    np.testing.assert_allclose(rgb[2], 0.25 * c_left + 0.25 * c_right + 0.5 * c_nadir)
    np.testing.assert_allclose(rgb[3], 0.5 * c_left + 0.5 * c_right)  # shares summing over 1 are rescaled
    np.testing.assert_allclose(rgb[4], no_data)  # NaN power
    np.testing.assert_allclose(rgb[5], 0.0)  # zero power: black, side irrelevant
    np.testing.assert_allclose(rgb[6], no_data)  # power but unknown side


def test_side_colours_rejects_bad_input():
    with pytest.raises(ValueError, match="shape"):
        side_colours(np.ones((2, 3)), np.ones((2, 3)), np.ones((3, 2)))
    with pytest.raises(ValueError, match="2-D"):
        side_colours(np.ones(3), np.ones(3), np.ones(3))
    with pytest.raises(ValueError, match="dynamic_range_db"):
        side_colours(np.ones((2, 3)), np.ones((2, 3)), np.ones((2, 3)), dynamic_range_db=-1.0)


def test_plot_side_radargram_colours_by_side(tmp_path):
    """Upper samples all-left, lower all-right, uniform power: orange above sky blue in the PNG."""
    ds = synthetic_radargram(varying_window=False)
    ds["power"][3:] = 1e-12  # uniform: full brightness everywhere with data
    ds["power"][10] = 0.0
    out = plot_side_radargram(with_sides(ds), tmp_path / "side.png", title="sides", dynamic_range_db=30.0)
    img = imread(out)
    assert img.shape[:2] == expected_pixels(RADARGRAM_FIGSIZE_IN)
    height, width = img.shape[:2]
    plot_area = img[: int(0.8 * height), : int(0.75 * width)]  # clear of the legend and the key
    rows = np.arange(plot_area.shape[0])[:, None]
    orange = near_colour(plot_area, SIDE_LEFT_COLOUR)
    blue = near_colour(plot_area, SIDE_RIGHT_COLOUR)
    assert orange.sum() > 5000 and blue.sum() > 5000
    assert np.broadcast_to(rows, orange.shape)[orange].mean() < np.broadcast_to(rows, blue.shape)[blue].mean()
    # Traces 0-2 have no data: the no-data colour is shown; trace 10 (zero power) is black.
    assert near_colour(plot_area, SIDE_NO_DATA_COLOUR, tol=0.03).sum() > 300
    assert (plot_area[..., :3].max(axis=-1) < 0.05).sum() > 500
    assert not list(tmp_path.glob("*.tmp"))


def test_plot_side_radargram_options_and_errors(tmp_path):
    ds = with_sides(synthetic_radargram())
    plot_side_radargram(ds, tmp_path / "no_depth.png", permittivity=None)
    for name in ("left_fraction", "right_fraction"):
        with pytest.raises(ValueError, match=name):
            plot_side_radargram(ds.drop_vars(name), tmp_path / "x.png")
    with pytest.raises(ValueError, match="permittivity"):
        plot_side_radargram(ds, tmp_path / "x.png", permittivity=0.0)
    ds["power"][:] = np.nan
    plot_side_radargram(ds, tmp_path / "all_nan.png")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["all_nan.png", "no_depth.png"]


# ----------------------------------------------------------------- first returns on the track map


def test_plot_track_map_first_returns(tmp_path):
    elevation, _, _ = dome()
    extent = (40.0, 42.0, 10.0, 14.0)
    track_lat = np.linspace(10.5, 13.5, 60)
    track_lon = np.full_like(track_lat, 41.0)
    fr_lon = track_lon.copy()
    fr_lon[20:30] = 41.6  # off-nadir first returns east of the track
    fr_lat = track_lat.copy()
    fr_lat[5] = np.nan  # skipped
    plain = imread(plot_track_map(elevation, extent, track_lon, track_lat, tmp_path / "plain.png"))
    img = imread(plot_track_map(elevation, extent, track_lon, track_lat, tmp_path / "fr.png",
                                first_return=(fr_lon, fr_lat)))  # fmt: skip
    assert img.shape[0] == plain.shape[0]  # the view also frames the first returns: the width may differ
    marks = near_colour(img, FIRST_RETURN_COLOUR, tol=0.12)
    assert marks.sum() > near_colour(plain, FIRST_RETURN_COLOUR, tol=0.12).sum() + 50
    # The off-nadir markers sit east of the track (to the right of the red line) in the image.
    track_col = np.argmax(((img[..., 0] > 0.6) & (img[..., 1] < 0.25) & (img[..., 2] < 0.3)).sum(axis=0))
    assert np.flatnonzero(marks.any(axis=0)).max() > track_col + 50
    with pytest.raises(ValueError, match="first_return"):
        plot_track_map(elevation, extent, track_lon, track_lat, tmp_path / "x.png", first_return=(fr_lon[:5], fr_lat))
    plot_track_map(elevation, extent, track_lon, track_lat, tmp_path / "nan.png",
                   first_return=(np.full(60, np.nan), fr_lat))  # fmt: skip
    assert not (tmp_path / "x.png").exists()


# ----------------------------------------------------------------- source maps


def test_plot_source_map(tmp_path):
    elevation, lon2, lat2 = dome()
    elevation[5:10, 5:10] = np.nan
    extent = (40.0, 42.0, 10.0, 14.0)
    power = 1e-12 * np.exp(-np.abs(lon2 - 41.0) / 0.1)  # strongest along the track
    power[lat2 < 11.0] = 0.0
    power[lat2 > 13.5] = np.nan
    track_lat = np.linspace(10.5, 13.5, 40)
    out = plot_source_map(power, elevation, extent, np.full(40, 41.0), track_lat, tmp_path / "src.png", title="t")
    img = imread(out)
    assert img.shape[0] == expected_pixels(TRACK_MAP_FIGSIZE_IN)[0]  # the width follows the map's shape
    grey = (np.ptp(img[..., :3], axis=-1) < 0.01) & (img[..., 0] > 0.3) & (img[..., 0] < 0.97)
    assert grey.sum() > 5000  # hillshade where there is no (or weak) power
    strong = (img[..., 0] > 0.8) & (img[..., 1] > 0.75) & (img[..., 2] < 0.35)  # top of viridis: yellow
    assert strong.sum() > 100
    with pytest.raises(ValueError, match="same shape"):
        plot_source_map(power[:, :-1], elevation, extent, [41.0], [12.0], tmp_path / "x.png")
    with pytest.raises(ValueError, match="dynamic_range_db"):
        plot_source_map(power, elevation, extent, [41.0], [12.0], tmp_path / "x.png", dynamic_range_db=0.0)
    plot_source_map(np.zeros((4, 5)), np.zeros((4, 5)), (0.0, 5.0, 0.0, 4.0), [1.0, 4.0], [2.0, 2.0],
                    tmp_path / "zero.png", axis_labels=("easting (km)", "northing (km)"), geographic=False)  # fmt: skip
    assert sorted(p.name for p in tmp_path.iterdir()) == ["src.png", "zero.png"]


def test_plot_echo_sources(tmp_path):
    elevation, _, _ = dome()
    extent = (40.0, 42.0, 10.0, 14.0)
    track_lat = np.linspace(10.5, 13.5, 40)
    cells = np.array([[41.5, 12.0], [40.6, 12.2], [np.nan, np.nan], [41.0, 11.9]])
    shares = np.array([0.5, 0.2, 0.1, 0.05])
    out = plot_echo_sources(elevation, extent, np.full(40, 41.0), track_lat, (41.0, 12.0), cells, shares,
                            tmp_path / "echo.png", title="echo at trace 20")  # fmt: skip
    img = imread(out)
    assert img.shape[:2] == expected_pixels(ECHO_SOURCES_FIGSIZE_IN)
    assert near_colour(img, ECHO_CELL_COLOUR, tol=0.05).sum() > 200
    # Zoomed on the cells (rank 2 at 40.6 °E falls outside the view): a different picture, same size.
    zoom = imread(plot_echo_sources(elevation, extent, np.full(40, 41.0), track_lat, (41.0, 12.0), cells, shares,
                                    tmp_path / "zoom.png", view=(40.9, 41.6, 11.8, 12.1)))  # fmt: skip
    assert zoom.shape == img.shape and not np.array_equal(zoom, img)
    # No cells at all, and projected coordinates.
    plot_echo_sources(elevation, (0.0, 100.0, 0.0, 80.0), [50.0, 50.0], [0.0, 80.0], (50.0, 40.0), np.empty((0, 2)),
                      [], tmp_path / "none.png", axis_labels=("x (km)", "y (km)"), geographic=False)  # fmt: skip
    with pytest.raises(ValueError, match="cells_xy"):
        plot_echo_sources(elevation, extent, [41.0], [12.0], (41.0, 12.0), [41.0, 12.0, 1.0], [0.5], tmp_path / "x.png")
    with pytest.raises(ValueError, match="shares"):
        plot_echo_sources(elevation, extent, [41.0], [12.0], (41.0, 12.0), cells, shares[:2], tmp_path / "x.png")
    with pytest.raises(ValueError, match="antenna_xy"):
        plot_echo_sources(elevation, extent, [41.0], [12.0], (41.0,), cells, shares, tmp_path / "x.png")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["echo.png", "none.png", "zoom.png"]


def test_every_name_of_the_plots_package_is_reachable_from_cluttersim_plots():
    """The figures live in cluttersim/plots/<concern>.py; notebooks and the library call plots.*: every
    name a submodule defines is re-exported by the package."""
    import importlib
    import inspect
    import pkgutil

    import cluttersim.plots as plots

    modules = [m.name for m in pkgutil.iter_modules(plots.__path__)]
    assert {"style", "radargram_views", "overlays", "sides", "comparison", "maps", "planning"} <= set(modules)
    for name in modules:
        module = importlib.import_module(f"cluttersim.plots.{name}")
        own = [k for k, v in vars(module).items() if not k.startswith("__")
               and (getattr(v, "__module__", module.__name__) == module.__name__ or k.isupper())
               and not inspect.ismodule(v)]  # fmt: skip
        missing = [k for k in own if getattr(plots, k, None) is not getattr(module, k)]
        assert not missing, f"cluttersim.plots.{name} defines {missing}, not re-exported by cluttersim.plots"
