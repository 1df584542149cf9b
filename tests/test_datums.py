"""Vertical datums: geoid undulations against pyproj, track heights moved into the DEM's datum,
heights in feet from a compound CRS, clear failures where a geoid grid is missing.

References: pyproj/PROJ transformations between WGS 84 ellipsoidal heights (EPSG:4979) and
EGM96 heights (EPSG:5773) with the NGA EGM96 grid (Debian's proj-data: egm96_15.gtx);
h = H + N (Hofmann-Wellenhof & Moritz 2006, eq. 4-63); the US survey foot = 1200/3937 m
(NIST SP 811, 2008); two-way delay to a level surface below = 2 (H_antenna − h) / c.
"""

from __future__ import annotations

import warnings

import numpy as np
import pyproj
import pytest
import xarray as xr
from click.testing import CliRunner

from cli.main import cli
from cluttersim import Track
from cluttersim.io.datums import HeightDatum, parse_height_datum, track_in_dem_datum, use_system_proj_data
from cluttersim.io.dem import DemSource
from cluttersim.errors import TrackError
from scenes import write_geotiff

C = 299_792_458.0  # m/s, SI definition


def geoid_grid_available(vertical_code: str) -> bool:
    """Whether PROJ can transform WGS 84 ellipsoidal heights into this vertical CRS with its grid."""
    use_system_proj_data()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        group = pyproj.transformer.TransformerGroup("EPSG:4979", f"EPSG:4326+{vertical_code}", always_xy=True)
    return any("ballpark" not in t.description.lower() for t in group.transformers)


needs_egm96 = pytest.mark.skipif(not geoid_grid_available("5773"), reason="PROJ's EGM96 grid is not installed (Debian: proj-data)")


def test_parse_height_datum():
    assert parse_height_datum(None) is None and parse_height_datum("dem") is None
    assert parse_height_datum("ellipsoid").kind == "ellipsoid"
    assert parse_height_datum("geoid:egm96").vertical_crs.to_epsg() == 5773
    assert parse_height_datum("geoid:EPSG:3855").vertical_crs.name == "EGM2008 height"
    assert parse_height_datum("geoid:my_grid.tif").grid == "my_grid.tif"
    for bad in ("geoid", "mean sea level", "geoid:EPSG:4326"):
        with pytest.raises(TrackError):
            parse_height_datum(bad)


@needs_egm96
def test_egm96_undulation_matches_pyproj():
    """N from the EGM96 vertical CRS and from the grid file both equal pyproj's transformation of
    a point on the WGS 84 ellipsoid into EGM96 heights (H = −N there)."""
    lat = np.array([0.0, 45.2, -33.9, 61.0, 10.0])
    lon = np.array([0.0, 15.1, 18.4, -150.0, 170.0])
    tr = pyproj.Transformer.from_crs("EPSG:4979", "EPSG:4326+5773", always_xy=True)
    _, _, h_geoid = tr.transform(lon, lat, np.zeros(lat.size))
    by_crs = parse_height_datum("geoid:EGM96").undulation_m(lat, lon)
    by_grid = parse_height_datum("geoid:egm96_15.gtx").undulation_m(lat, lon)
    np.testing.assert_allclose(by_crs, -h_geoid, atol=1e-6)
    np.testing.assert_allclose(by_grid, -h_geoid, atol=1e-6)
    assert by_crs[0] == pytest.approx(17.16, abs=0.01)  # EGM96 at (0°, 0°): +17.16 m (from memory; PROJ's grid)


def test_missing_grid_is_named():
    with pytest.raises(TrackError, match="no_such_geoid.gtx"):
        parse_height_datum("geoid:no_such_geoid.gtx").undulation_m([0.0], [0.0])
    if geoid_grid_available("3855"):
        pytest.skip("the EGM2008 grid is installed here; its absence cannot be shown")
    with pytest.raises(TrackError, match="us_nga_egm08_25.tif.*not installed.*proj-data"):
        parse_height_datum("geoid:EGM2008").undulation_m([0.0], [0.0])


H_DEM = 100.0  # m above the geoid
H_TRACK = 1100.0  # m above the ellipsoid


def plain(tmp_path, crs):
    """A level plain at H_DEM around 45°N 15°E (geographic, 0.002° cells)."""
    return write_geotiff(tmp_path / "plain.tif", np.full((200, 200), H_DEM), 14.8, 45.2, 0.002, crs=crs)


def track():
    lat = np.linspace(44.95, 45.05, 5)
    return Track(lat, np.full(5, 15.0), np.full(5, H_TRACK), source="t")


def simulate_cli(tmp_path, dem, *extra):
    track().to_csv(tmp_path / "t.csv")
    out = tmp_path / f"run{len(list(tmp_path.glob('run*')))}"
    res = CliRunner().invoke(cli, ["simulate", "--dem", str(dem), "--track", str(tmp_path / "t.csv"), "--out", str(out),
                                   "--no-sources", *extra])  # fmt: skip
    assert res.exit_code == 0, res.output
    with xr.open_dataset(out / "radargram.nc", engine="h5netcdf") as ds:
        return ds["nadir_delay"].values, res.output


@needs_egm96
@pytest.mark.parametrize("declared", [False, True])
def test_ellipsoidal_track_over_a_geoid_dem(tmp_path, declared):
    """A DEM in EGM96 heights (compound CRS, or declared with --dem-height-datum) and a track in
    ellipsoidal heights: the nadir delay is 2 (h − N − H) / c with pyproj's N, not 2 (h − H) / c."""
    dem = plain(tmp_path, "EPSG:4326" if declared else "EPSG:4326+5773")
    src = DemSource.open(dem)
    assert (src.vertical_datum is None) == declared
    extra = ["--track-height-datum", "ellipsoid"] + (["--dem-height-datum", "geoid:EGM96"] if declared else [])
    delay, output = simulate_cli(tmp_path, dem, *extra)
    t = track()
    _, _, h_geoid = pyproj.Transformer.from_crs("EPSG:4979", "EPSG:4326+5773", always_xy=True).transform(
        t.lon_deg, t.lat_deg, t.alt_m
    )  # the antenna's height above the geoid
    np.testing.assert_allclose(delay, 2 * (h_geoid - H_DEM) / C, rtol=0, atol=2e-11)
    assert "track heights moved from ellipsoid to" in output
    # N ≈ 45 m here: the unconverted delay would be off by 2N/c ≈ 0.3 µs
    plain_delay, _ = simulate_cli(tmp_path, dem)
    assert np.all(np.abs(plain_delay - delay) > 0.25e-6)


@needs_egm96
def test_track_in_geoid_heights_over_the_same_geoid_is_unchanged(tmp_path):
    src = DemSource.open(plain(tmp_path, "EPSG:4326+5773"))
    moved, note = track_in_dem_datum(track(), src, parse_height_datum("geoid:EGM96"))
    np.testing.assert_array_equal(moved.alt_m, track().alt_m)
    assert "as the DEM's" in note


def test_heights_in_us_feet_from_a_compound_crs(tmp_path):
    """NAVD88 height (ftUS), EPSG:6360: the DEM's values are US survey feet (1200/3937 m)."""
    dem = write_geotiff(tmp_path / "ft.tif", np.full((200, 200), 1000.0), 14.8, 45.2, 0.002, crs="EPSG:4326+6360")
    src = DemSource.open(dem)
    assert src.height_scale_m == pytest.approx(1200 / 3937, rel=1e-12)
    delay, _ = simulate_cli(tmp_path, dem)
    np.testing.assert_allclose(delay, 2 * (H_TRACK - 1000.0 * 1200 / 3937) / C, rtol=0, atol=2e-11)


def test_ellipsoid_to_ellipsoid_is_a_note_only(tmp_path):
    src = DemSource.open(plain(tmp_path, "EPSG:4326"))
    moved, note = track_in_dem_datum(track(), src, HeightDatum("ellipsoid", "ellipsoid"))
    assert moved is not None and np.array_equal(moved.alt_m, track().alt_m)
    assert "no vertical part" in note
    res = CliRunner().invoke(cli, ["simulate", "--dem", str(tmp_path / "plain.tif"), "--track", "x.csv", "--out",
                                   str(tmp_path / "r"), "--dem-height-datum", "geoid:EGM96"])  # fmt: skip
    assert res.exit_code != 0


@needs_egm96
def test_real_terrain_in_egm96_heights_under_an_ellipsoidal_track(tmp_path):
    """matplotlib's sample DEM (USGS 3-arc-second elevations around the Jacksboro fault, TN) stored
    as EGM96 heights (compound CRS), an airborne track in WGS 84 ellipsoidal heights: the nadir
    delay is 2 (h − N − z) / c with z interpolated by SciPy and N from pyproj (EGM96 here ≈ −32 m)."""
    from matplotlib import cbook
    from scipy.interpolate import RegularGridInterpolator

    from cluttersim import Body, great_circle_track

    data = cbook.get_sample_data("jacksboro_fault_dem.npz")
    z = data["elevation"].astype(float)
    dx, dy = float(data["dx"]), float(data["dy"])
    west, north = float(data["xmin"]), float(data["ymin"])  # 'ymin' holds the northern edge (36.73°)
    dem = write_geotiff(tmp_path / "jb.tif", z, west, north, dx, dy, crs="EPSG:4326+5773")
    body = Body.from_crs(pyproj.CRS("EPSG:4326"))
    t = great_circle_track(body, 36.70, -84.39, 36.48, -84.10, 2500.0, 1500.0)
    t.to_csv(tmp_path / "t.csv")
    out = tmp_path / "run"
    res = CliRunner().invoke(cli, ["simulate", "--dem", str(dem), "--track", str(tmp_path / "t.csv"), "--out", str(out),
                                   "--no-sources", "--track-height-datum", "ellipsoid"])  # fmt: skip
    assert res.exit_code == 0, res.output
    with xr.open_dataset(out / "radargram.nc", engine="h5netcdf") as ds:
        delay = ds["nadir_delay"].values
    lats = north - dy * (np.arange(z.shape[0]) + 0.5)
    lons = west + dx * (np.arange(z.shape[1]) + 0.5)
    elev = RegularGridInterpolator((lats[::-1], lons), z[::-1])(np.column_stack([t.lat_deg, t.lon_deg]))
    _, _, above_geoid = pyproj.Transformer.from_crs("EPSG:4979", "EPSG:4326+5773", always_xy=True).transform(
        t.lon_deg, t.lat_deg, t.alt_m
    )
    assert np.all(np.abs(above_geoid - t.alt_m) > 25)  # the geoid is ~30 m below the ellipsoid here
    np.testing.assert_allclose(delay, 2 * (above_geoid - elev) / C, rtol=0, atol=1e-11)


def test_declared_height_unit_feet(tmp_path):
    """A DEM without a vertical CRS whose values are feet, declared with --dem-height-unit ft
    (0.3048 m, NIST SP 811): the nadir delay is 2 (H − 0.3048 z) / c."""
    dem = write_geotiff(tmp_path / "ft.tif", np.full((200, 200), 1000.0), 14.8, 45.2, 0.002, crs="EPSG:4326")
    delay, _ = simulate_cli(tmp_path, dem, "--dem-height-unit", "ft")
    np.testing.assert_allclose(delay, 2 * (H_TRACK - 304.8) / C, rtol=0, atol=2e-11)
    # the run records the declared unit: its scene rebuilt later (sources, report) has the same heights
    from cluttersim.analysis.sources import load_run

    run = load_run(tmp_path / "run0")
    assert np.nanmax(np.abs(run.scene.window.elevation_m - 304.8)) < 1e-9
