"""Body geometry, facet positions/areas and planned tracks against pyproj."""

import math

import numpy as np
import pyproj
import pytest
from rasterio.windows import Window

from cluttersim.physics.body import Body
from cluttersim.io.dem import DemSource
from cluttersim.facets import build_facets
from cluttersim.track import great_circle_track
from scenes import MARS_RADIUS_M, MARS_SPHERE, write_geotiff

WGS84_A_M = 6_378_137.0  # NIMA TR8350.2 (2000), WGS 84 semi-major axis
WGS84_INV_F = 298.257223563  # NIMA TR8350.2 (2000)


def pyproj_ecef(body_proj, lat, lon, h):
    tr = pyproj.Transformer.from_crs(f"+proj=longlat {body_proj} +type=crs", f"+proj=geocent {body_proj} +units=m +type=crs", always_xy=True)
    x, y, z = tr.transform(lon, lat, h)
    return np.stack([x, y, z], axis=-1)


@pytest.mark.parametrize(
    "body, proj_params",
    [
        (Body.from_crs(pyproj.CRS("EPSG:4326")), f"+a={WGS84_A_M} +rf={WGS84_INV_F}"),
        (Body.from_crs(pyproj.CRS(MARS_SPHERE)), f"+R={MARS_RADIUS_M}"),
    ],
)
def test_geodetic_to_ecef_matches_pyproj_to_a_millimetre(body, proj_params):
    rng = np.random.default_rng(1)
    lat = rng.uniform(-90, 90, 500)
    lon = rng.uniform(-180, 360, 500)
    h = rng.uniform(-9000, 12_000_000, 500)
    ours = body.geodetic_to_ecef_m(lat, lon, h)
    ref = pyproj_ecef(proj_params, lat, lon, h)
    assert np.max(np.abs(ours - ref)) < 1e-3


def test_body_from_crs_reads_wgs84_and_mars_radii():
    wgs = Body.from_crs(pyproj.CRS("EPSG:4326"))
    assert wgs.semi_major_m == WGS84_A_M
    assert wgs.semi_minor_m == pytest.approx(WGS84_A_M * (1 - 1 / WGS84_INV_F), abs=1e-6)
    assert Body.from_crs(pyproj.CRS(MARS_SPHERE)).semi_major_m == MARS_RADIUS_M


def _tilted_dem(tmp_path, crs):
    rng = np.random.default_rng(3)
    z = rng.normal(0, 50, (40, 50)) + np.linspace(0, 800, 50)[None, :]
    return write_geotiff(tmp_path / "dem.tif", z, 30.0, 10.0, 0.01, crs=crs), z


@pytest.mark.parametrize("crs, proj_params", [("EPSG:4326", f"+a={WGS84_A_M} +rf={WGS84_INV_F}"), (MARS_SPHERE, f"+R={MARS_RADIUS_M}")])
def test_facet_positions_match_pyproj(tmp_path, crs, proj_params):
    path, z = _tilted_dem(tmp_path, crs)
    src = DemSource.open(path)
    win = src.read(Window(0, 0, src.width, src.height))
    facets = build_facets(win, tile=16)
    rows, cols = np.divmod(facets.cell, src.width)
    lon = 30.0 + 0.01 * (cols + 0.5)
    lat = 10.0 - 0.01 * (rows + 0.5)
    ref = pyproj_ecef(proj_params, lat, lon, z.astype(np.float32)[rows, cols].astype(float))
    assert np.max(np.abs(facets.positions_m(np.arange(len(facets))) + facets.origin_m - ref)) < 1e-3


def test_facet_area_matches_pyproj_geodesic_area_on_flat_ground(tmp_path):
    # A level cell's area is the ellipsoidal area of its lon/lat quadrangle.
    path = write_geotiff(tmp_path / "flat.tif", np.zeros((20, 20)), 10.0, 60.0, 0.05, crs="EPSG:4326")
    src = DemSource.open(path)
    facets = build_facets(src.read(Window(0, 0, 20, 20)), tile=8)
    geod = pyproj.Geod(ellps="WGS84")
    k = np.flatnonzero(facets.cell == 5 * 20 + 7)[0]  # row 5, col 7
    w, n = 10.0 + 7 * 0.05, 60.0 - 5 * 0.05
    area, _ = geod.polygon_area_perimeter([w, w + 0.05, w + 0.05, w], [n, n, n - 0.05, n - 0.05])
    assert facets.area_m2[k] == pytest.approx(abs(area), rel=1e-4)


def test_facet_area_includes_slope(tmp_path):
    # A plane rising 100 m per 100 m cell has true area √2 × the level area (geometry).
    res_m = 100.0
    x = np.arange(30) * res_m
    z = np.tile(x, (30, 1))
    path = write_geotiff(tmp_path / "ramp.tif", z, 500000.0, 4000000.0, res_m, crs="EPSG:32633")
    src = DemSource.open(path)
    facets = build_facets(src.read(Window(0, 0, 30, 30)), tile=8)
    k = np.flatnonzero(facets.cell == 15 * 30 + 15)[0]
    # UTM scale factor near the central meridian edge (x=500 km) is 0.9996 (Snyder 1987, USGS PP 1395)
    level = (res_m / 0.9996) ** 2
    assert facets.area_m2[k] == pytest.approx(math.sqrt(2) * level, rel=2e-3)
    # the normal tilts 45° away from the rising +x direction
    up = src.body.up_unit(*src.xy_to_lonlat(500000.0 + 15.5 * res_m, 4000000.0 - 15.5 * res_m)[::-1])
    assert math.degrees(math.acos(np.dot(facets.normal[:, k], up))) == pytest.approx(45.0, abs=0.1)


def slerp_great_circle(lat1, lon1, lat2, lon2, fraction):
    """Point at a fraction of the great-circle arc (independent spherical formula,
    e.g. Snyder 1987, USGS Prof. Paper 1395, §5 / 'intermediate point')."""
    p1 = np.radians([lat1, lon1])
    p2 = np.radians([lat2, lon2])
    v1 = np.array([math.cos(p1[0]) * math.cos(p1[1]), math.cos(p1[0]) * math.sin(p1[1]), math.sin(p1[0])])
    v2 = np.array([math.cos(p2[0]) * math.cos(p2[1]), math.cos(p2[0]) * math.sin(p2[1]), math.sin(p2[0])])
    om = math.acos(np.clip(v1 @ v2, -1, 1))
    v = (math.sin((1 - fraction) * om) * v1 + math.sin(fraction * om) * v2) / math.sin(om)
    return math.degrees(math.asin(v[2])), math.degrees(math.atan2(v[1], v[0])), om


def test_great_circle_track_on_a_sphere_matches_slerp_to_a_millimetre():
    body = Body.sphere(MARS_RADIUS_M)
    tr = great_circle_track(body, 10.0, 40.0, 14.0, 43.0, 300e3, 1000.0)
    _, _, om = slerp_great_circle(10.0, 40.0, 14.0, 43.0, 0.0)
    length = om * MARS_RADIUS_M
    assert len(tr) == int(length // 1000.0) + 1
    for i in (0, 1, 137, len(tr) - 1):
        lat, lon, _ = slerp_great_circle(10.0, 40.0, 14.0, 43.0, i * 1000.0 / length)
        p = body.geodetic_to_ecef_m(tr.lat_deg[i], tr.lon_deg[i], 0.0)
        q = body.geodetic_to_ecef_m(lat, lon, 0.0)
        assert np.linalg.norm(p - q) < 1e-3
    assert np.all(tr.alt_m == 300e3)


def test_great_circle_track_on_wgs84_is_evenly_spaced_along_the_geodesic():
    body = Body.from_crs(pyproj.CRS("EPSG:4326"))
    tr = great_circle_track(body, 60.0, -10.0, 61.0, -5.0, 1000.0, 250.0, speed_m_s=100.0)
    geod = pyproj.Geod(ellps="WGS84")
    _, _, d = geod.inv(tr.lon_deg[:-1], tr.lat_deg[:-1], tr.lon_deg[1:], tr.lat_deg[1:])
    np.testing.assert_allclose(d, 250.0, atol=1e-3)
    # all points on the one geodesic: forward azimuth from the start to each equals the initial one
    az0, _, _ = geod.inv(-10.0, 60.0, -5.0, 61.0)
    az, _, _ = geod.inv(np.full(len(tr) - 1, -10.0), np.full(len(tr) - 1, 60.0), tr.lon_deg[1:], tr.lat_deg[1:])
    np.testing.assert_allclose(az, az0, atol=1e-8)
    np.testing.assert_allclose(np.diff(tr.time_s), 2.5)
