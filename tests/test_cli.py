"""The command line: products, one-line errors, exit codes, no partial output."""

import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner

from cli.main import cli
from scenes import HILL_RADAR_TOML, hill_scene, write_geotiff

RADAR = HILL_RADAR_TOML


@pytest.fixture()
def scene(tmp_path):
    """A small plain with one hill east of the track (:func:`scenes.hill_scene`)."""
    return hill_scene(tmp_path)


def run(args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def test_simulate_writes_the_products(scene):
    d, dem, track, radar = scene
    res = run(["simulate", "--dem", dem, "--track", track, "--radar", radar, "--out", d / "run", "-q"])
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in (d / "run").iterdir()) == [
        "radargram.nc", "radargram.png", "radargram_elevation.png", "radargram_sides.png", "track_map.png"]
    with xr.open_dataset(d / "run" / "radargram.nc", engine="h5netcdf") as ds:
        assert ds["power"].dims == ("trace", "sample") and ds["power"].shape == (9, 256)
        assert ds["power"].dtype == np.float32 and ds["power"].attrs["units"] == "W"
        assert ds["delay"].attrs["units"] == "s" and ds["delay"][1] == pytest.approx(37.5e-9)
        for name in ("window_start", "lat", "lon", "alt", "nadir_delay", "time"):
            assert ds[name].dims == ("trace",)
        assert ds.attrs["radar_samples"] == 256 and ds.attrs["surface_law"] == "hagfors"
        assert ds.attrs["surface_C"] == 300.0 and ds.attrs["dem_file"] == "dem.tif"
        assert ds.attrs["body_semi_major_m"] == 3396190.0 and "cluttersim_version" in ds.attrs
        # the hill 15 km east returns an echo after the nadir echo
        assert float(ds["power"].max()) > 0


def test_existing_output_is_not_overwritten_without_flag(scene):
    d, dem, track, radar = scene
    args = ["simulate", "--dem", dem, "--track", track, "--radar", radar, "--out", d / "run", "-q"]
    assert run(args).exit_code == 0
    before = (d / "run" / "radargram.nc").stat().st_mtime_ns
    res = run(args)
    assert res.exit_code == 2
    assert "already exists; pass --overwrite" in res.output
    assert (d / "run" / "radargram.nc").stat().st_mtime_ns == before
    assert run(args + ["--overwrite"]).exit_code == 0


def test_track_command_writes_a_planned_track(scene):
    d, dem, _, _ = scene
    out = d / "planned.csv"
    res = run(["track", "--start-lat", -0.5, "--start-lon", 0.0, "--end-lat", 0.5, "--end-lon", 0.0, "--alt-m", 300000, "--spacing-m", 1000, "--dem", dem, "--out", out])
    assert res.exit_code == 0, res.output
    lines = out.read_text().splitlines()
    assert lines[0] == "lat,lon,alt"
    # 1° of arc on the Mars sphere is 59.27 km (2π·3396.19 km / 360) → 60 traces at 1 km
    assert len(lines) - 1 == 60


def _bad(d, name, text):
    p = d / name
    p.write_text(text)
    return p


BAD_CASES = {
    "missing DEM": (lambda d, dem, tr, ra: ["--dem", d / "nope.tif", "--track", tr], 1, "DEM file not found"),
    "DEM not a raster": (lambda d, dem, tr, ra: ["--dem", _bad(d, "x.tif", "not a raster"), "--track", tr], 1, "not a raster GDAL can read"),
    "DEM without CRS": (
        lambda d, dem, tr, ra: ["--dem", write_geotiff(d / "nocrs.tif", np.zeros((50, 50)), -1, 1, 0.04, crs=None), "--track", tr],
        1,
        "DEM has no CRS; give --body-radius-m",
    ),
    "missing column": (lambda d, dem, tr, ra: ["--dem", dem, "--track", _bad(d, "t.csv", "lat,lon\n0,0\n")], 1, "missing column(s) alt"),
    "non-numeric": (
        lambda d, dem, tr, ra: ["--dem", dem, "--track", _bad(d, "t.csv", "lat,lon,alt\n0,0,abc\n")],
        1,
        "row 1 column 'alt' = 'abc': expected a number",
    ),
    "outside DEM": (
        lambda d, dem, tr, ra: ["--dem", dem, "--track", _bad(d, "t.csv", "lat,lon,alt\n30,30,250000\n31,30,250000\n")],
        1,
        "no trace lies over the DEM",
    ),
    "below terrain": (
        lambda d, dem, tr, ra: ["--dem", dem, "--track", _bad(d, "t.csv", "lat,lon,alt\n0,0.25,250000\n0,0.25,500\n")],
        1,
        "row 2 alt = 500.0 m is at or below the terrain",
    ),
    "zero frequency": (
        lambda d, dem, tr, ra: ["--dem", dem, "--track", tr, "--radar", _bad(d, "r.toml", "[radar]\ncenter_frequency_hz = 0\n")],
        1,
        "center_frequency_hz = 0.0: expected a positive number",
    ),
    "negative samples": (
        lambda d, dem, tr, ra: ["--dem", dem, "--track", tr, "--radar", _bad(d, "r.toml", "[radar]\nsamples = -5\n")],
        1,
        "samples = -5",
    ),
    "unknown key": (
        lambda d, dem, tr, ra: ["--dem", dem, "--track", tr, "--radar", _bad(d, "r.toml", "[radar]\nfrequency = 5e6\n")],
        1,
        "[radar] unknown key 'frequency'",
    ),
    "unknown law": (
        lambda d, dem, tr, ra: ["--dem", dem, "--track", tr, "--radar", _bad(d, "r.toml", '[surface]\nlaw = "mirror"\n')],
        1,
        "law = 'mirror'",
    ),
    "window before echo": (
        lambda d, dem, tr, ra: ["--dem", dem, "--track", tr, "--radar", _bad(d, "r.toml", "[radar]\nwindow_start_s = 1e-3\n")],
        1,
        "before the earliest surface echo",
    ),
    "window after echo": (
        lambda d, dem, tr, ra: ["--dem", dem, "--track", tr, "--radar", _bad(d, "r.toml", "[radar]\nwindow_start_s = 0.5\n")],
        1,
        "no surface echo falls inside the recording window",
    ),
    "missing option": (lambda d, dem, tr, ra: ["--track", tr], 2, "Missing option '--dem'"),
}


@pytest.mark.parametrize("case", list(BAD_CASES))
def test_bad_input_gives_one_line_exit_code_and_no_output(scene, case):
    d, dem, track, radar = scene
    make_args, code, message = BAD_CASES[case]
    out = d / "out"
    res = run(["simulate", *make_args(d, dem, track, radar), "--out", out, "-q"])
    assert res.exit_code == code, res.output
    assert message in res.output
    assert "Traceback" not in res.output
    error_lines = [line for line in res.output.splitlines() if line.startswith(("cluttersim: error", "Error"))]
    assert len(error_lines) == 1
    assert not out.exists() or not any(out.iterdir())


def test_debug_flag_shows_the_traceback(scene):
    d, dem, track, radar = scene
    res = CliRunner().invoke(cli, ["--debug", "simulate", "--dem", str(d / "nope.tif"), "--track", str(track), "--out", str(d / "o")])
    assert res.exit_code != 0
    assert res.exc_info is not None and type(res.exc_info[1]).__name__ == "DemError"
