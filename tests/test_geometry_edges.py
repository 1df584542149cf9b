"""Geometry edge cases: antimeridian, poles, planetary projections, altitudes from 300 m to 12,000 km.

References: the two-way delay to a level surface straight below is 2(H − h)/c (c the SI
definition); radii and projections come from pyproj's IAU_2015 and PROJ definitions
(Archinal et al. 2018, Celest. Mech. Dyn. Astron. 130:22 for the radii).
"""

import numpy as np
import pyproj
import pytest

from cluttersim import Body, SimulationConfig, SurfaceConfig, Track, great_circle_track, simulate
from cluttersim.io.dem import DemSource
from cluttersim.physics.radar import RadarConfig
from cluttersim.simulate import RunStats
from scenes import MARS_RADIUS_M, MARS_SPHERE, write_geotiff

C = 299_792_458.0  # m/s, SI definition
MOON_RADIUS_M = 1_737_400.0  # IAU WGCCRE 2015 (Archinal et al. 2018)
DT = 37.5e-9  # s, sample interval of these tests


def config(samples=128, **radar):
    return SimulationConfig(
        radar=RadarConfig(**{"samples": samples, "sample_interval_s": DT, **radar}),
        surface=SurfaceConfig("constant", {"sigma0": 0.01}),
    )


def analytic_delay_s(alt_m, h_m):
    """Two-way delay to a level surface straight below: 2(H − h)/c."""
    return 2.0 * (np.asarray(alt_m) - h_m) / C


# --------------------------------------------------------------------------- antimeridian


def _band_with_hills(res_deg, west, width_deg, lat_half=1.0):
    """Elevations (rows, cols) of a band |lat| < lat_half, longitudes west..west+width: a plain
    at 0 m with one hill 0.3° west of the antimeridian and one 0.2° east of it (invented)."""
    ncol = int(round(width_deg / res_deg))
    nrow = int(round(2 * lat_half / res_deg))
    lon = west + (np.arange(ncol) + 0.5) * res_deg
    lat = lat_half - (np.arange(nrow) + 0.5) * res_deg
    d_west = (lon - 179.7 + 180) % 360 - 180  # degrees from the western hill, wrapped
    d_east = (lon - 180.2 + 180) % 360 - 180
    z = 900 * np.exp(-(d_west[None, :] ** 2 + (lat[:, None] - 0.1) ** 2) / 0.01)
    z += 600 * np.exp(-(d_east[None, :] ** 2 + (lat[:, None] + 0.1) ** 2) / 0.01)
    return z


@pytest.fixture(scope="module")
def antimeridian_dems(tmp_path_factory):
    d = tmp_path_factory.mktemp("am")
    res = 0.02
    return {
        # a full turn of longitude stored −180..180: the antimeridian is the grid's edge
        "global -180..180": write_geotiff(d / "g180.tif", _band_with_hills(res, -180.0, 360.0), -180.0, 1.0, res),
        # the same, stored 0..360: the antimeridian is inside the grid
        "global 0..360": write_geotiff(d / "g360.tif", _band_with_hills(res, 0.0, 360.0), 0.0, 1.0, res),
        # a local DEM straddling ±180 (170..190 °E)
        "local 170..190": write_geotiff(d / "loc.tif", _band_with_hills(res, 170.0, 20.0), 170.0, 1.0, res),
    }


ALT_AM_M = 150e3


def _antimeridian_track(lon_convention):
    """West to east along lat 0.01 (cell centres), across ±180°, one trace per 0.04°."""
    lon = 179.51 + 0.04 * np.arange(25)  # 179.51 .. 180.47, all at cell centres of a 0.02° grid
    lon = (lon + 180) % 360 - 180 if lon_convention == "-180..180" else lon % 360
    n = lon.size
    return Track(np.full(n, 0.01), lon, np.full(n, ALT_AM_M), source=f"track {lon_convention}")


@pytest.mark.parametrize("lon_convention", ["-180..180", "0..360"])
@pytest.mark.parametrize("dem", ["global -180..180", "global 0..360", "local 170..190"])
def test_track_across_the_antimeridian_reads_both_sides(antimeridian_dems, dem, lon_convention):
    """Every DEM storage and track longitude convention gives the radargram of the local DEM,
    whose window never meets a grid edge; the window stays narrow (not the whole 360°)."""
    stats = RunStats()
    ds = simulate(antimeridian_dems[dem], _antimeridian_track(lon_convention), config(), stats=stats)
    # the window is a few degrees wide, not the full 18000 columns, and not clipped to one side
    assert 50 < stats.dem_window_shape[1] < 500  # the track alone spans 48 columns
    ref = simulate(antimeridian_dems["local 170..190"], _antimeridian_track("-180..180"), config())
    assert np.isfinite(ds["power"].values).all()
    np.testing.assert_allclose(ds["power"].values, ref["power"].values, rtol=1e-4, atol=1e-6 * float(ref["power"].max()))
    # both hills return echoes after the nadir echo: off-nadir clutter from each side
    late = ds["power"].values[:, 40:].max(axis=1)
    assert (late > 0).all()
    # analytic nadir delay: the traces sit on cell centres, where the DEM holds the hills' formula
    lon = ds["lon"].values
    h = _band_with_hills(0.02, 170.0, 20.0)[49, np.round((lon % 360 - 170.0) / 0.02 - 0.5).astype(int)]
    assert np.ptp(h) > 100  # the track does climb the hills' flanks
    np.testing.assert_allclose(ds["nadir_delay"].values, analytic_delay_s(ALT_AM_M, h), rtol=0, atol=1e-4 * DT)
    # sources are reported in the track's longitude convention whichever side of the seam they lie on,
    # and the same ground whatever the DEM's storage convention
    src = ds["source_lon"].values
    if lon_convention == "-180..180":
        assert np.nanmin(src) >= -180.0 and np.nanmax(src) < 180.0
        assert (np.nanmax(src) > 170.0) and (np.nanmin(src) < -170.0)  # echoes from both sides of the seam
    else:
        assert np.nanmin(src) > 170.0 and np.nanmax(src) < 190.0  # 0..360: continuous across the seam
        assert (np.nanmin(src) < 180.0) and (np.nanmax(src) > 180.0)


# --------------------------------------------------------------------------- poles


def _assert_earliest_is_just_before_nadir(ds, alt_m, h_m):
    """Over a level plain the earliest echo is the start of the nadir facet's delay extent: never
    after 2(H − h)/c, and before it by at most half the cell's projected extent (< 0.5 sample here)."""
    early = analytic_delay_s(alt_m, h_m) - ds["earliest_echo_delay"].values
    assert (early > -1e-4 * DT).all() and (early < 0.5 * DT).all()


def test_track_over_the_pole_on_a_geographic_dem(tmp_path):
    """A pass over the north pole of a lat/lon DEM: the window spans all longitudes up to the pole,
    delays match 2(H − h)/c, and the radargram is symmetric about the pole (same plain both sides)."""
    h, alt = 200.0, 60e3
    res_lat, res_lon = 0.01, 0.5
    nrow, ncol = int(round(2.0 / res_lat)), int(round(360 / res_lon))
    dem = write_geotiff(tmp_path / "cap.tif", np.full((nrow, ncol), h), -180.0, 90.0, res_lon, res_lat)
    # from 89.5 N, 0 E over the pole to 89.5 N, 180 E
    body = Body.sphere(MARS_RADIUS_M)
    track = great_circle_track(body, 89.5, 0.0, 89.5, 180.0, alt, 2000.0)
    stats = RunStats()
    ds = simulate(dem, track, config(), stats=stats)
    assert stats.dem_window_shape[1] == ncol  # every longitude
    np.testing.assert_allclose(ds["nadir_delay"].values, analytic_delay_s(alt, h), rtol=1e-9)
    _assert_earliest_is_just_before_nadir(ds, alt, h)
    p = ds["power"].values.sum(axis=1)
    np.testing.assert_allclose(p, p[::-1], rtol=0.05)  # mirror symmetry about the pole


@pytest.mark.parametrize(
    "code, radius_m, pole_lat",
    [
        ("IAU_2015:49930", MARS_RADIUS_M, 90.0),  # Mars (2015) sphere, north polar stereographic
        ("IAU_2015:49935", MARS_RADIUS_M, -90.0),  # Mars (2015) sphere, south polar stereographic
        ("IAU_2015:30130", MOON_RADIUS_M, 90.0),  # Moon (2015) sphere, north polar stereographic
        ("IAU_2015:30135", MOON_RADIUS_M, -90.0),  # Moon (2015) sphere, south polar stereographic
    ],
)
def test_polar_stereographic_dems_over_the_pole(tmp_path, code, radius_m, pole_lat):
    """A level plain on a polar stereographic grid, a pass straight over the pole."""
    h, alt, res = -150.0, 40e3, 500.0
    n = 200  # 100 km square centred on the pole
    dem = write_geotiff(tmp_path / "ps.tif", np.full((n, n), h), -n * res / 2, n * res / 2, res, crs=code)
    src = DemSource.open(dem)
    assert src.body.semi_major_m == radius_m  # the body comes from the IAU CRS
    sign = np.sign(pole_lat)
    track = great_circle_track(src.body, sign * 89.7, 30.0, sign * 89.7, 210.0, alt, 1000.0)
    ds = simulate(src, track, config())
    np.testing.assert_allclose(ds["nadir_delay"].values, analytic_delay_s(alt, h), rtol=1e-9)
    _assert_earliest_is_just_before_nadir(ds, alt, h)
    assert np.isfinite(ds["power"].values).all()


@pytest.mark.parametrize(
    "code, radius_m, lon0",
    [
        ("IAU_2015:49910", MARS_RADIUS_M, 0.0),  # Mars sphere, equirectangular, clon = 0
        ("IAU_2015:30115", MOON_RADIUS_M, 180.0),  # Moon sphere, equirectangular, clon = 180 (over the antimeridian)
    ],
)
def test_equirectangular_dems_on_mars_and_the_moon(tmp_path, code, radius_m, lon0):
    """Equirectangular grid: x = R (λ − λ0) (rad), y = R φ (PROJ eqc, lat_ts = 0). Cells are placed
    with that formula, the radargram must match the same plain on a lat/lon grid."""
    h, alt = 300.0, 80e3
    res_deg = 0.01
    res_m = radius_m * np.radians(res_deg)  # eqc: metres per degree at lat_ts = 0
    crs = pyproj.CRS(code)
    # PROJ's own forward projection agrees with the formula (independent check of the grid placement)
    x, y = pyproj.Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True).transform(lon0 + 0.5, 0.5)
    assert x == pytest.approx(radius_m * np.radians(0.5), abs=1e-6)
    assert y == pytest.approx(radius_m * np.radians(0.5), abs=1e-6)
    n = 200
    eqc = write_geotiff(tmp_path / "eqc.tif", np.full((n, n), h), -n * res_m / 2, n * res_m / 2, res_m, crs=code)
    geo = write_geotiff(tmp_path / "geo.tif", np.full((n, n), h), lon0 - 1.0, 1.0, res_deg, crs=crs.geodetic_crs)
    track = Track(np.linspace(-0.3, 0.3, 7) + 0.005, np.full(7, lon0 + 0.005), np.full(7, alt), source="t")
    a = simulate(eqc, track, config())
    b = simulate(geo, track, config())
    np.testing.assert_allclose(a["nadir_delay"], analytic_delay_s(alt, h), rtol=1e-9)
    np.testing.assert_allclose(a["power"].values, b["power"].values, rtol=1e-3, atol=1e-6 * float(b["power"].max()))


# --------------------------------------------------------------------------- altitude range


@pytest.fixture(scope="module")
def plain(tmp_path_factory):
    """A level plain at 100 m on the Mars sphere, ±2°, 0.01° cells (centres at ±0.005°...)."""
    d = tmp_path_factory.mktemp("plain")
    return write_geotiff(d / "plain.tif", np.full((400, 400), 100.0), -2.0, 2.0, 0.01, crs=MARS_SPHERE)


@pytest.mark.parametrize("alt_m", [300.0, 3_000.0, 300e3, 3_000e3, 12_000e3])
def test_delays_are_exact_from_airborne_to_high_orbit(plain, alt_m):
    """Over a cell centre of a level plain the nearest facet is straight below: nadir and earliest
    echo delays equal 2(H − h)/c to 1e-4 sample, and the echo peaks in the sample it should."""
    h = 100.0
    track = Track(np.array([0.005, 0.015]), np.array([0.005, 0.005]), np.full(2, alt_m), source="t")
    expected = analytic_delay_s(alt_m, h)
    start = expected - 20.3 * DT  # a fixed window: the nadir echo at sample 20.3
    ds = simulate(plain, track, config(window_start_s=float(start)))
    assert np.max(np.abs(ds["nadir_delay"].values - expected)) < 1e-4 * DT
    assert np.max(np.abs(ds["earliest_echo_delay"].values - expected)) < 1e-4 * DT
    # the leading edge: first sample above half the peak is the one holding delay 20.3 samples (± 1)
    p = ds["power"].values[0]
    first = int(np.argmax(p > 0.5 * p.max()))
    assert abs(first - 20) <= 1


def test_track_leaving_the_dem_reports_the_count_and_simulates_the_rest(plain):
    """7 of 20 traces beyond the DEM's north edge (lat > 2°): NaN, counted in the warning."""
    lat = np.linspace(1.005, 2.9, 20)
    off = lat > 2.0
    track = Track(lat, np.full(20, 0.005), np.full(20, 50e3), source="leaving.csv")
    with pytest.warns(UserWarning, match=rf"leaving\.csv: {off.sum()} of 20 traces are not over the DEM"):
        ds = simulate(plain, track, config())
    assert np.isnan(ds["power"].values[off]).all() and np.isnan(ds["nadir_delay"].values[off]).all()
    inside = ~off & (lat < 1.99)
    np.testing.assert_allclose(ds["nadir_delay"].values[inside], analytic_delay_s(50e3, 100.0), rtol=1e-9)
    assert np.isfinite(ds["power"].values[~off]).all()


@pytest.mark.parametrize("code", ["IAU_2015:49935", MARS_SPHERE])  # south polar stereographic; lat/lon
def test_cell_centres_by_flat_index(tmp_path, code):
    """The source record's ground positions: a window's cells given as flat indices row·nx + col
    are placed at the GeoTIFF's cell centres (west + (col + ½)·res, north − (row + ½)·res), turned
    into lon/lat by PROJ's inverse projection (pyproj) for a projected grid; the same as the
    window's full lon/lat grids."""
    from rasterio.windows import Window

    projected = code != MARS_SPHERE
    res, west, north = (500.0, -50e3, 50e3) if projected else (0.01, 10.0, -20.0)
    dem = write_geotiff(tmp_path / "g.tif", np.zeros((200, 200)), west, north, res, crs=code)
    window = DemSource.open(dem).read(Window(30, 40, 120, 90))  # col_off, row_off, width, height
    rng = np.random.default_rng(3)
    cells = rng.integers(0, 90 * 120, size=(7, 50))
    lon, lat = window.lonlat_of_cells(cells)
    rows, cols = np.divmod(cells, 120)
    x = west + (30 + cols + 0.5) * res
    y = north - (40 + rows + 0.5) * res
    if projected:
        crs = pyproj.CRS(code)
        x, y = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True).transform(x, y)
    np.testing.assert_allclose(lon, x, rtol=0, atol=1e-9)
    np.testing.assert_allclose(lat, y, rtol=0, atol=1e-9)
    lon_grid, lat_grid = window.cell_lonlat()
    np.testing.assert_allclose(lon, lon_grid.ravel()[cells], rtol=0, atol=1e-12)
    np.testing.assert_allclose(lat, lat_grid.ravel()[cells], rtol=0, atol=1e-12)
    if not projected:  # the source record's compiled lookup: the same centres, NaN for "no facet"
        from cluttersim.kernels import cell_lonlat_of_facets

        facet = np.arange(cells.size, dtype=np.int32).reshape(cells.shape)
        facet[0, :5] = -1
        out_lon = np.empty(cells.shape, dtype=np.float32)
        out_lat = np.empty(cells.shape, dtype=np.float32)
        cell_lonlat_of_facets(facet, cells.ravel(), 120, *window.lonlat_axes(), out_lon, out_lat)
        assert np.isnan(out_lon[0, :5]).all() and np.isnan(out_lat[0, :5]).all()
        np.testing.assert_array_equal(out_lon[facet >= 0], x[facet >= 0].astype(np.float32))
        np.testing.assert_array_equal(out_lat[facet >= 0], y[facet >= 0].astype(np.float32))
