"""One visual language: the side palette is the same in the PNG figures and the report, one colour map per
quantity, shared scales, figures drawn into the caller's axes; the side centroids against geometry."""

from __future__ import annotations

import io
import json
import math
import re

import numpy as np
import pytest
import xarray as xr
from PIL import Image

from cluttersim import palette, plots
from cluttersim.report import power_image, side_image

C = 299_792_458.0  # SI definition


def block_dataset(ntrace=40, nsample=60):
    """A synthetic radargram: left-only echoes in the first half of the traces, right-only in the
    second, every sample at the same power (full brightness), nadir strip in the last rows."""
    power = np.full((ntrace, nsample), 1e-12)
    left = np.zeros((ntrace, nsample))
    right = np.zeros((ntrace, nsample))
    left[: ntrace // 2] = 1.0
    right[ntrace // 2 :] = 1.0
    left[:, -10:] = right[:, -10:] = 0.0  # nadir strip
    ds = xr.Dataset(
        {"power": (("trace", "sample"), power), "left_fraction": (("trace", "sample"), left),
         "right_fraction": (("trace", "sample"), right)},
        coords={"delay": ("sample", np.arange(nsample) * 1e-8)},
    )  # fmt: skip
    return ds


def png_pixels(fig) -> np.ndarray:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=fig.dpi)  # pixel positions as transData gives them
    return np.asarray(Image.open(io.BytesIO(buf.getvalue())).convert("RGB"))


def image_centre_rgb(fig, ax, x, y) -> np.ndarray:
    """RGB (0-255) of the rendered PNG at data point (x, y) of ``ax``."""
    pixels = png_pixels(fig)
    px, py = ax.transData.transform((x, y))
    return pixels[pixels.shape[0] - int(round(py)), int(round(px))].astype(int)


def test_the_side_png_and_the_report_use_the_palettes_colours():
    ds = block_dataset()
    fig = plots.plot_side_radargram(ds, permittivity=None, distance_axis=False)
    ax = fig.axes[0]
    png_left = image_centre_rgb(fig, ax, 10, 20e-2 * 0 + 2e-8 * 1e6 * 10)  # trace 10, sample 20 (0.2 µs)
    png_right = image_centre_rgb(fig, ax, 30, 0.2)
    png_nadir = image_centre_rgb(fig, ax, 10, 0.55)
    db = plots.power_db(ds["power"].values)
    report = side_image(db, ds["left_fraction"].values, ds["right_fraction"].values, float(db.max()), 30.0)
    report_left, report_right, report_nadir = (report[s, t].astype(int) for t, s in ((10, 20), (30, 20), (10, 55)))
    for png, rep, name in ((png_left, report_left, "left"), (png_right, report_right, "right"),
                           (png_nadir, report_nadir, "nadir")):  # fmt: skip
        expected = np.array(palette.rgb255(palette.SIDES[name]))
        assert np.abs(rep - expected).max() <= 1, (name, rep, expected)
        assert np.abs(png - rep).max() <= 2, (name, png, rep)  # PNG and report agree
    # Okabe & Ito's orange and sky blue (Okabe & Ito 2008): left orange, right blue
    assert palette.SIDE_LEFT.lower() == "#e69f00" and palette.SIDE_RIGHT.lower() == "#56b4e9"


def test_the_report_page_carries_the_palette_not_a_copy(tmp_path):
    from test_report import dome_run

    from cluttersim.report import write_report

    run = dome_run(tmp_path)
    page = write_report(run, tmp_path / "r.html", centroids=False).read_text(encoding="utf-8")
    meta = json.loads(re.search(r'<script type="application/json" id="cs-meta">(.*?)</script>', page, re.S).group(1))
    assert meta["colours"]["side"] == {k: list(palette.rgb255(v)) for k, v in palette.SIDES.items()}
    assert f"--side-left: {palette.SIDE_LEFT};" in page and f"--side-right: {palette.SIDE_RIGHT};" in page
    css = re.search(r"<style>(.*?)</style>", page, re.S).group(1)
    # no hard-coded side colour left in the page's CSS: only the injected variables
    assert ".side-left { color: var(--side-left-text); }" in css
    # the power ramp of the legend is the figures' colour map
    from matplotlib import colormaps

    top = np.rint(np.array(colormaps[palette.POWER_CMAP](1.0)[:3]) * 255).astype(int).tolist()
    assert meta["colours"]["power_ramp"][-1][1] == top and meta["colours"]["power_cmap"] == plots.RADARGRAM_CMAP


def test_power_png_and_report_map_power_through_one_colour_map_and_scale():
    ds = block_dataset()
    ds["power"] = ds["power"] * (10.0 ** (-0.8 * (np.arange(ds.sizes["trace"]) // 10)))[:, None]  # 8 dB steps
    limits = plots.db_limits(ds, dynamic_range_db=40.0)
    fig = plots.plot_radargram(ds, db_limits=limits, distance_axis=False)
    ax = fig.axes[0]
    db = plots.power_db(ds["power"].values)
    rep = power_image(db, limits[1], limits[1] - limits[0])
    for t in (5, 15, 25, 35):  # the middle of each block of 10 traces
        png = image_centre_rgb(fig, ax, t, 0.2)
        assert np.abs(png - rep[20, t].astype(int)).max() <= 3, (t, png, rep[20, t])


def test_auto_db_range_comes_from_the_data_and_db_limits_are_shared():
    rng = np.random.default_rng(1)
    p = 10 ** (rng.uniform(-15, -12, size=(50, 100)))  # 30 dB of spread
    p[:, :5] = 0.0  # before the surface echo: exact zeros are left out
    rng_db = plots.auto_db_range(p)
    # 10th percentile sits 27 dB below the top for a uniform 30 dB spread (0.9 × 30), + 10 dB margin → 40 dB
    assert rng_db == 40.0
    a = xr.Dataset({"power": (("trace", "sample"), p)})
    b = xr.Dataset({"power": (("trace", "sample"), p * 0.01)})  # 20 dB weaker (e.g. focused)
    lo, hi = plots.db_limits(a, b)
    assert hi == pytest.approx(10 * math.log10(p.max()))
    assert plots.db_limits(a, b, dynamic_range_db=50.0) == (hi - 50.0, hi)


def test_plots_draw_into_the_callers_axes_and_save_any_format(tmp_path):
    from matplotlib.figure import Figure

    ds = block_dataset()
    fig = Figure()
    ax1, ax2 = fig.subplots(1, 2)
    assert plots.plot_radargram(ds, ax=ax1) is ax1  # the caller's axes come back; nothing written
    assert plots.plot_side_radargram(ds, ax=ax2, permittivity=None) is ax2
    assert not list(tmp_path.iterdir())
    for fmt in ("png", "pdf", "svg"):
        out = plots.save_figure(fig, tmp_path / f"both.{fmt}", dpi=50)
        head = out.read_bytes()[:5]
        assert head in (b"\x89PNG\r", b"%PDF-") or b"<?xml" in out.read_bytes()[:100], fmt
    with pytest.raises(ValueError, match="expected one of png, pdf, svg"):
        plots.save_figure(fig, tmp_path / "x.png", fmt="gif")


def test_echo_source_labels_do_not_collide():
    # two cells a few metres apart, ranked 8 and 10 (the labels once printed as "80")
    cells = np.array([[0.5 + 0.002 * i, 0.5] for i in range(12)])
    cells[7] = (0.5, 0.5)
    cells[9] = (0.5006, 0.5)
    share = np.linspace(0.2, 0.01, 12)
    fig = plots.plot_echo_sources(np.zeros((20, 20)), (0.0, 1.0, 0.0, 1.0), [0.2, 0.8], [0.5, 0.5], (0.5, 0.4), cells,
                                  share, view=(0.45, 0.55, 0.45, 0.55))  # fmt: skip
    ax = fig.axes[0]
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    labels = [t for t in ax.texts if t.get_text().isdigit()]
    assert len(labels) >= 5
    boxes = [t.get_window_extent(renderer) for t in labels]
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j]), (labels[i].get_text(), labels[j].get_text())


def test_a_narrow_track_map_gets_a_narrow_figure():
    elev = np.random.default_rng(0).normal(size=(200, 40))
    fig = plots.plot_track_map(elev, (10.0, 10.1, 45.0, 46.0), [10.05, 10.05], [45.1, 45.9])
    w, h = fig.get_size_inches()
    assert w < 0.75 * h  # the map is tall and narrow: no half-blank figure


def test_elevation_view_puts_the_nadir_echo_on_the_terrain():
    # a level surface 200 m high under an antenna 1 km up: the nadir echo belongs at 200 m
    n, dt = 5, 10e-9
    alt = np.full(n, 1000.0)
    nadir = np.full(n, 2 * 800.0 / C)
    start = nadir - 20 * dt
    power = np.zeros((n, 200))
    power[:, 20] = 1.0  # the surface echo at the nadir delay
    ds = xr.Dataset({"power": (("trace", "sample"), power), "alt": ("trace", alt), "nadir_delay": ("trace", nadir),
                     "window_start": ("trace", start)}, coords={"delay": ("sample", np.arange(200) * dt)})  # fmt: skip
    image, top, step, surface = plots.elevation_layers(ds, permittivity=3.15)
    np.testing.assert_allclose(surface, 200.0, atol=1e-6)
    heights = top - np.arange(image.shape[0]) * step
    brightest = heights[np.nanargmax(image[:, 2])]
    assert brightest == pytest.approx(200.0, abs=step)
    # a sample 1 µs later is 1e-6 c / (2 √3.15) = 84.5 m below the surface (apparent depth, common practice)
    assert (surface[0] - heights[-1]) > 0 and plots.elevation_layers(ds, 1.0)[2] > step


def test_side_shares_name_a_side_only_with_a_majority():
    assert palette.side_shares_text(0.46, 0.50)[0] is None  # the example: no side word
    assert palette.side_shares_text(0.10, 0.85)[0] == "right"
    assert palette.side_shares_text(0.1, 0.1)[0] == "nadir"
