"""The built-in demo runs end to end and its products hold the expected clutter."""

import numpy as np
import xarray as xr
from click.testing import CliRunner

from cli.main import cli
from cluttersim.constants import SPEED_OF_LIGHT_M_S


def test_demo_writes_products_and_shows_off_nadir_clutter(tmp_path):
    out = tmp_path / "demo"
    res = CliRunner().invoke(cli, ["demo", "--out", str(out)])
    assert res.exit_code == 0, res.output
    for name in ("radargram.nc", "radargram.png", "radargram_sides.png", "radargram_focused.png", "track_map.png",
                 "demo_track.csv", "report.html", "radargram_bands.png", "radargram_sky_ionosphere.png"):  # fmt: skip
        assert (out / name).stat().st_size > 0
    assert "radargram.png" in res.output
    assert str(out / "report.html") in res.output  # the demo prints the report's path
    with xr.open_dataset(out / "radargram.nc", engine="h5netcdf") as ds:
        p = ds["power"].values
        assert np.isfinite(p).all()
        # nadir echo is where the geometry says: 2(alt − h)/c with h from the DEM
        t = ds.sizes["trace"] // 2
        nadir_sample = (ds["nadir_delay"][t] - ds["window_start"][t]) / float(ds["delay"][1])
        assert abs(int(np.argmax(p[t])) - float(nadir_sample)) < 8
        # the mesa 25 km east (demo README) is ~1 km further than nadir at 300 km:
        # (√(300² + 25²) − 300) km → ~6.9 µs after the surface; energy arrives there
        dt = float(ds["delay"][1])
        lag = int(round(2 * (np.hypot(300e3, 25e3) - 300e3) / SPEED_OF_LIGHT_M_S / dt))
        assert p[t, int(nadir_sample) + lag] > 0
    again = CliRunner().invoke(cli, ["demo", "--out", str(out)])
    assert again.exit_code == 2 and "--overwrite" in again.output


def test_demo_figures_follow_the_figure_options(tmp_path, monkeypatch):
    """demo --figure-format pdf writes every figure as PDF (bytes, not names) and names them so in its
    printout; --dpi sets the PNGs' pixel size and --db-range the colour scale of every radargram view
    (a narrower range draws more of it black: darker). On a short stretch of the demo pass."""
    from cluttersim import demo
    from figure_files import assert_all_in_format, mean_brightness, png_size

    monkeypatch.setattr(demo, "DEMO_START_LAT_LON", (11.9, 41.0))
    monkeypatch.setattr(demo, "DEMO_END_LAT_LON", (12.0, 41.0))
    names = ("radargram", "radargram_sides", "radargram_elevation", "radargram_focused", "radargram_bands",
             "radargram_sky_ionosphere", "track_map")  # fmt: skip
    res = CliRunner().invoke(cli, ["demo", "--out", str(tmp_path / "pdf"), "--figure-format", "pdf"])
    assert res.exit_code == 0, res.output
    assert_all_in_format([tmp_path / "pdf" / f"{n}.pdf" for n in names], "pdf")
    assert not list((tmp_path / "pdf").glob("*.png")) and "radargram_focused.pdf" in res.output
    for db in ("15", "80"):
        res = CliRunner().invoke(cli, ["demo", "--out", str(tmp_path / db), "-q", "--dpi", "60", "--db-range", db])
        assert res.exit_code == 0, res.output
    assert png_size(tmp_path / "15" / "radargram.png") == (600, 300)  # 10 × 5 in at 60 dpi
    for name in ("radargram", "radargram_focused", "radargram_bands", "radargram_sky_ionosphere"):
        assert mean_brightness(tmp_path / "15" / f"{name}.png") < mean_brightness(tmp_path / "80" / f"{name}.png") - 0.02, name
