"""--dpi, --figure-format and --db-range on every command that writes figures (simulate, sources,
compare, demo; survey, plan and streamed runs in their own test files), and compare --dem-height-unit.

A figure's format is read from its bytes (tests/figure_files.py: PNG, PDF and SVG signatures), its
resolution from the PNG header, and the dB range from the image: a narrower range puts more of the
radargram at the bottom of the colour map (black in magma), so the picture gets darker.
"""

import shutil

import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner

from cli.main import cli
from cluttersim.constants import SPEED_OF_LIGHT_M_S as C
from figure_files import assert_all_in_format, mean_brightness, png_size
from scenes import HILL_RADAR_TOML, hill_scene, write_geotiff

RADAR = HILL_RADAR_TOML
FIGURES = ("radargram", "radargram_sides", "radargram_elevation", "track_map")
#: Figure sizes in inches (cluttersim.plots.RADARGRAM_FIGSIZE_IN, COMPARISON_FIGSIZE_IN) at the default 120 dpi.
RADARGRAM_PX_120 = (1200, 600)
COMPARISON_PX_60 = (780, 312)  # 13 × 5.2 in at 60 dpi


def run(args):
    return CliRunner().invoke(cli, [str(a) for a in args])


@pytest.fixture(scope="module")
def scene(tmp_path_factory):
    """A small plain with one hill east of the track (:func:`scenes.hill_scene`)."""
    return hill_scene(tmp_path_factory.mktemp("figures"))


def simulate(scene, name, *extra):
    d, dem, track, radar = scene
    out = d / name
    res = run(["simulate", "--dem", dem, "--track", track, "--radar", radar, "--out", out, "-q", *extra])
    assert res.exit_code == 0, res.output
    return out


@pytest.fixture(scope="module")
def default_run(scene):
    return simulate(scene, "default")


def test_simulate_writes_pdf_and_svg_figures_dem_error_included(scene):
    pdf = simulate(scene, "pdf", "--figure-format", "pdf", "--dem-error", "5,2000", "--realisations", "2")
    assert_all_in_format([pdf / f"{n}.pdf" for n in (*FIGURES, "dem_error")], "pdf")
    assert not list(pdf.glob("*.png"))
    svg = simulate(scene, "svg", "--figure-format", "svg")
    assert_all_in_format([svg / f"{n}.svg" for n in FIGURES], "svg")
    assert not list(svg.glob("*.png"))


def test_simulate_dpi_sets_the_pixel_size_and_db_range_the_colour_scale(scene, default_run):
    assert png_size(default_run / "radargram.png") == RADARGRAM_PX_120  # 10 × 5 in at 120 dpi
    narrow = simulate(scene, "narrow", "--dpi", "60", "--db-range", "10")
    wide = simulate(scene, "wide", "--dpi", "60", "--db-range", "80")
    assert png_size(narrow / "radargram.png") == (600, 300)
    for name in ("radargram", "radargram_elevation"):
        assert mean_brightness(narrow / f"{name}.png") < mean_brightness(wide / f"{name}.png") - 0.02, name
    with xr.open_dataset(narrow / "radargram.nc", engine="h5netcdf") as a, \
            xr.open_dataset(wide / "radargram.nc", engine="h5netcdf") as b:  # fmt: skip
        np.testing.assert_array_equal(a["power"].values, b["power"].values)  # only the picture changed


def test_sources_figures_follow_the_options(default_run):
    res = run(["sources", default_run, "--depth-window", "50", "2000", "--figure-format", "svg", "-q"])
    assert res.exit_code == 0, res.output
    assert_all_in_format(default_run.glob("sources_*.svg"), "svg")
    res = run(["sources", default_run, "--trace", "4", "--depth-m", "300", "--figure-format", "pdf", "-q"])
    assert res.exit_code == 0, res.output
    assert_all_in_format(default_run.glob("echo_t4_*.pdf"), "pdf")
    res = run(["sources", default_run, "--trace", "4", "--depth-m", "300", "--dpi", "60", "-q"])
    assert res.exit_code == 0, res.output
    low = next(default_run.glob("echo_t4_*.png"))
    assert png_size(low)[0] == round(7.0 * 60)  # ECHO_SOURCES_FIGSIZE_IN width at 60 dpi
    # the source map's range: cells more than --db-range below the strongest are left uncoloured (relief shows)
    shades = {}
    for db in ("5", "80"):
        out = default_run.parent / f"sources_{db}"
        shutil.copytree(default_run, out, ignore=shutil.ignore_patterns("sources_*", "echo_*"))
        res = run(["sources", out, "--depth-window", "50", "2000", "--dpi", "60", "--db-range", db, "-q"])
        assert res.exit_code == 0, res.output
        shades[db] = mean_brightness(next(out.glob("sources_*.png")))
    assert abs(shades["5"] - shades["80"]) > 0.01, shades


@pytest.fixture(scope="module")
def observed(scene, default_run):
    """The simulated run as observed data (power, its track with each window start): a self-comparison."""
    d = scene[0]
    with xr.open_dataset(default_run / "radargram.nc", engine="h5netcdf") as ds:
        np.save(d / "observed.npy", ds["power"].values)
        rows = np.column_stack([ds["lat"], ds["lon"], ds["alt"], ds["window_start"]])
        dt = float(ds["delay"][1])
    np.savetxt(d / "observed_track.csv", rows, delimiter=",", header="lat,lon,alt,window_start", comments="")
    return ["--observed", d / "observed.npy", "--observed-track", d / "observed_track.csv", "--sample-interval-s",
            repr(dt), "--window-start-column", "window_start", "--sim", default_run / "radargram.nc", "-q"]  # fmt: skip


def test_compare_figures_follow_the_options(scene, observed):
    d = scene[0]
    names = ("side_by_side", "overlay", "difference")
    res = run(["compare", *observed, "--out", d / "cmp_pdf", "--figure-format", "pdf"])
    assert res.exit_code == 0, res.output
    assert_all_in_format([d / "cmp_pdf" / f"{n}.pdf" for n in names], "pdf")
    assert not list((d / "cmp_pdf").glob("*.png"))
    for db in ("10", "60"):
        res = run(["compare", *observed, "--out", d / f"cmp_{db}", "--dpi", "60", "--db-range", db])
        assert res.exit_code == 0, res.output
    assert png_size(d / "cmp_10" / "side_by_side.png") == COMPARISON_PX_60
    for name in ("side_by_side", "overlay"):
        assert mean_brightness(d / "cmp_10" / f"{name}.png") < mean_brightness(d / "cmp_60" / f"{name}.png") - 0.01
    # the difference figure keeps its ±20 dB scale: only the resolution changed
    assert mean_brightness(d / "cmp_10" / "difference.png") == pytest.approx(
        mean_brightness(d / "cmp_60" / "difference.png"), abs=1e-6)


def test_compare_list_writes_every_figure_in_the_format(scene, observed):
    d = scene[0]
    listing = d / "list.csv"
    listing.write_text("name,observed,observed_track,sample_interval_s,sim,window_start_column\n"
                       f"one,{observed[1]},{observed[3]},{observed[5]},{observed[9]},window_start\n")  # fmt: skip
    res = run(["compare", "--list", listing, "--out", d / "many", "--figure-format", "svg", "-q"])
    assert res.exit_code == 0, res.output
    assert_all_in_format([d / "many" / "candidates_map.svg"] + [d / "many" / "one" / f"{n}.svg"
                          for n in ("side_by_side", "overlay", "difference")], "svg")  # fmt: skip


def test_compare_overwrite_in_another_format_removes_the_old_figures(scene, observed):
    """Re-run with --overwrite in another --figure-format, compare (one track, and --list with its
    candidates map) removes the figures of the run before, as simulate does, saying so."""
    d = scene[0]
    names = ("side_by_side", "overlay", "difference")
    out = d / "cmp_switch"
    assert run(["compare", *observed, "--out", out]).exit_code == 0
    assert_all_in_format([out / f"{n}.png" for n in names], "png")
    res = run(["compare", *observed, "--out", out, "--figure-format", "pdf", "--overwrite"])
    assert res.exit_code == 0, res.output
    assert_all_in_format([out / f"{n}.pdf" for n in names], "pdf")
    assert not list(out.glob("*.png")), sorted(p.name for p in out.iterdir())
    assert "removed difference.png, overlay.png, side_by_side.png" in res.output
    listing = d / "list_switch.csv"
    listing.write_text("name,observed,observed_track,sample_interval_s,sim,window_start_column\n"
                       f"one,{observed[1]},{observed[3]},{observed[5]},{observed[9]},window_start\n")  # fmt: skip
    many = d / "many_switch"
    assert run(["compare", "--list", listing, "--out", many, "-q"]).exit_code == 0
    assert (many / "candidates_map.png").exists() and (many / "one" / "overlay.png").exists()
    res = run(["compare", "--list", listing, "--out", many, "--figure-format", "svg", "--overwrite", "-q"])
    assert res.exit_code == 0, res.output
    assert_all_in_format([many / "candidates_map.svg"] + [many / "one" / f"{n}.svg" for n in names], "svg")
    assert not list(many.rglob("*.png")), sorted(str(p) for p in many.rglob("*"))


def test_compare_dem_height_unit(tmp_path):
    """compare --dem simulates the observed track; a DEM without a vertical CRS whose values are feet
    (0.3048 m, NIST SP 811) declared with --dem-height-unit ft as simulate does: the simulation's nadir
    delay is 2 (H − 0.3048 z) / c, it records the unit for `sources` and `report`, and observed data
    simulated with the same declaration align with no offset (a simulation compared with itself)."""
    h_track = 250000.0
    lon = np.linspace(-1, 1, 200)
    z_ft = 1000.0 + 2600.0 * np.exp(-((lon[None, :] - 0.25) ** 2 + np.linspace(1, -1, 200)[:, None] ** 2) / 0.003)
    dem = write_geotiff(tmp_path / "ft.tif", z_ft, -1.0, 1.0, 0.01)
    track = tmp_path / "t.csv"
    track.write_text("lat,lon,alt\n" + "".join(f"{v:.4f},0.0,{h_track}\n" for v in np.linspace(-0.2, 0.2, 9)))
    radar = tmp_path / "radar.toml"
    radar.write_text(RADAR)
    res = run(["simulate", "--dem", dem, "--track", track, "--radar", radar, "--dem-height-unit", "ft", "--out",
               tmp_path / "run", "-q"])  # fmt: skip
    assert res.exit_code == 0, res.output
    with xr.open_dataset(tmp_path / "run" / "radargram.nc", engine="h5netcdf") as ds:
        np.save(tmp_path / "obs.npy", ds["power"].values)
        np.savetxt(tmp_path / "obs_track.csv", np.column_stack([ds["lat"], ds["lon"], ds["alt"], ds["window_start"]]),
                   delimiter=",", header="lat,lon,alt,window_start", comments="")  # fmt: skip
    observed = ["compare", "--observed", tmp_path / "obs.npy", "--observed-track", tmp_path / "obs_track.csv",
                "--sample-interval-s", "37.5e-9", "--window-start-column", "window_start", "-q"]  # fmt: skip
    res = run([*observed, "--dem", dem, "--radar", radar, "--dem-height-unit", "ft", "--out", tmp_path / "cmp"])
    assert res.exit_code == 0, res.output
    with xr.open_dataset(tmp_path / "cmp" / "radargram.nc", engine="h5netcdf") as ds:
        ground_m = 0.3048 * 1000.0  # the plain below the track (the hill lies 15 km east)
        np.testing.assert_allclose(ds["nadir_delay"].values, 2 * (h_track - ground_m) / C, rtol=0, atol=2e-11)
        assert ds.attrs["dem_height_unit_m"] == pytest.approx(0.3048)
    with xr.open_dataset(tmp_path / "cmp" / "comparison.nc", engine="h5netcdf") as ds:
        assert abs(ds.attrs["delay_offset_samples"]) < 0.05
    res = run([*observed, "--sim", tmp_path / "run" / "radargram.nc", "--dem-height-unit", "ft", "--out",
               tmp_path / "x"])  # fmt: skip
    assert res.exit_code == 2 and "--dem-height-unit apply with --dem only" in res.output
