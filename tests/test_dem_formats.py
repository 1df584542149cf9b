"""Planetary DEM formats, equirectangular grids read as geographic, radii, GDAL virtual paths.

Each DEM holds the same invented terrain as a GeoTIFF on the Mars sphere (IAU_2015:49900,
R = 3 396 190 m, Archinal et al. 2018); written with rasterio by GDAL's own drivers
(PDS4, ISIS3, VICAR, COG, VRT), or by hand where GDAL reads a format but cannot write it
(PDS3: a label with an IMAGE_MAP_PROJECTION object, PDS3 Standards Reference, JPL D-7669,
appendix A). Simulating over each must give the GeoTIFF's radargram.
"""

from __future__ import annotations

import math
import warnings
import zipfile

import numpy as np
import pyproj
import pytest
import rasterio
import rasterio.shutil
from rasterio.crs import CRS as RioCRS
from rasterio.transform import from_origin

from cluttersim import Track, simulate
from cluttersim.io.dem import DemSource
from cluttersim.errors import DemError
from scenes import MARS_RADIUS_M, MARS_SPHERE, write_geotiff
from test_geometry_edges import config

RES_DEG, N, WEST, NORTH = 0.02, 100, -1.0, 1.0
ALT_M = 60e3


def terrain():
    """A plain at 200 m with a 1.5 km hill 0.3° east of the track (invented)."""
    lon = WEST + (np.arange(N) + 0.5) * RES_DEG
    lat = NORTH - (np.arange(N) + 0.5) * RES_DEG
    lo, la = np.meshgrid(lon, lat)
    return (200.0 + 1500.0 * np.exp(-((lo - 0.3) ** 2 + la**2) / 0.1**2)).astype(np.float32)


def track():
    lat = np.linspace(-0.5, 0.5, 9) + 0.01
    return Track(lat, np.full(lat.size, 0.01), np.full(lat.size, ALT_M), source="t")


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    d = tmp_path_factory.mktemp("demfmt")
    tif = write_geotiff(d / "ref.tif", terrain(), WEST, NORTH, RES_DEG, crs=MARS_SPHERE)
    return d, tif, simulate(tif, track(), config())


def profile(driver):
    return dict(driver=driver, width=N, height=N, count=1, dtype="float32", transform=from_origin(WEST, NORTH, RES_DEG, RES_DEG),
                crs=RioCRS.from_wkt(pyproj.CRS(MARS_SPHERE).to_wkt()), nodata=-32768.0)  # fmt: skip


def write_with_gdal(d, driver, suffix):
    path = d / f"dem.{suffix}"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if driver == "COG":
            tmp = d / "plain.tif"
            with rasterio.open(tmp, "w", **profile("GTiff")) as ds:
                ds.write(terrain(), 1)
            with rasterio.open(tmp) as src:
                rasterio.shutil.copy(src, path, driver="COG")
        else:
            with rasterio.open(path, "w", **profile(driver)) as ds:
                ds.write(terrain(), 1)
    return path


def write_pds3_by_hand(d):
    """PDS3 DEM (GDAL reads PDS3 but cannot write it): a detached label with IMAGE and
    IMAGE_MAP_PROJECTION (EQUIRECTANGULAR, km per pixel, projection offsets in pixels from the
    map origin to the first pixel's centre: the convention GDAL's PDS driver reads)."""
    terrain().astype("<f4").tofile(d / "DEM.IMG")
    scale_km = MARS_RADIUS_M * math.radians(RES_DEG) / 1e3
    label = f"""PDS_VERSION_ID = PDS3
RECORD_TYPE = UNDEFINED
^IMAGE = "DEM.IMG"
OBJECT = IMAGE
  LINES = {N}
  LINE_SAMPLES = {N}
  SAMPLE_TYPE = PC_REAL
  SAMPLE_BITS = 32
  UNIT = METER
END_OBJECT = IMAGE
OBJECT = IMAGE_MAP_PROJECTION
  MAP_PROJECTION_TYPE = "EQUIRECTANGULAR"
  A_AXIS_RADIUS = {MARS_RADIUS_M / 1e3} <KM>
  B_AXIS_RADIUS = {MARS_RADIUS_M / 1e3} <KM>
  C_AXIS_RADIUS = {MARS_RADIUS_M / 1e3} <KM>
  POSITIVE_LONGITUDE_DIRECTION = EAST
  CENTER_LATITUDE = 0.0 <DEG>
  CENTER_LONGITUDE = 0.0 <DEG>
  LINE_PROJECTION_OFFSET = {NORTH / RES_DEG - 0.5!r} <PIXEL>
  SAMPLE_PROJECTION_OFFSET = {-WEST / RES_DEG - 0.5!r} <PIXEL>
  MAP_SCALE = {scale_km!r} <KM/PIXEL>
  MAP_RESOLUTION = {1 / RES_DEG!r} <PIX/DEG>
  MAXIMUM_LATITUDE = {NORTH} <DEG>
  MINIMUM_LATITUDE = {NORTH - N * RES_DEG} <DEG>
  WESTERNMOST_LONGITUDE = {WEST} <DEG>
  EASTERNMOST_LONGITUDE = {WEST + N * RES_DEG} <DEG>
END_OBJECT = IMAGE_MAP_PROJECTION
END
"""
    (d / "DEM.LBL").write_text(label.replace("\n", "\r\n"))
    return d / "DEM.LBL"


def write_vrt(d):
    """A VRT mosaic of two GeoTIFF halves (west and east), written as GDAL's VRT XML."""
    z = terrain()
    half = N // 2
    write_geotiff(d / "west.tif", z[:, :half], WEST, NORTH, RES_DEG, crs=MARS_SPHERE)
    write_geotiff(d / "east.tif", z[:, half:], WEST + half * RES_DEG, NORTH, RES_DEG, crs=MARS_SPHERE)
    wkt = pyproj.CRS(MARS_SPHERE).to_wkt().replace("&", "&amp;").replace("<", "&lt;")
    src = "".join(
        f"<SimpleSource><SourceFilename relativeToVRT=\"1\">{name}</SourceFilename><SourceBand>1</SourceBand>"
        f"<SrcRect xOff=\"0\" yOff=\"0\" xSize=\"{half}\" ySize=\"{N}\"/>"
        f"<DstRect xOff=\"{off}\" yOff=\"0\" xSize=\"{half}\" ySize=\"{N}\"/></SimpleSource>"
        for name, off in (("west.tif", 0), ("east.tif", half))
    )
    (d / "mosaic.vrt").write_text(
        f"<VRTDataset rasterXSize=\"{N}\" rasterYSize=\"{N}\"><SRS>{wkt}</SRS>"
        f"<GeoTransform>{WEST}, {RES_DEG}, 0, {NORTH}, 0, {-RES_DEG}</GeoTransform>"
        f"<VRTRasterBand dataType=\"Float32\" band=\"1\"><NoDataValue>-32768</NoDataValue>{src}</VRTRasterBand></VRTDataset>"
    )
    return d / "mosaic.vrt"


@pytest.mark.parametrize("fmt", ["PDS3", "PDS4", "ISIS3", "VICAR", "VRT", "COG"])
def test_planetary_dem_formats_simulate_like_the_geotiff(reference, fmt):
    d, _, ref = reference
    d = d / fmt
    d.mkdir(exist_ok=True)
    if fmt == "PDS3":
        path = write_pds3_by_hand(d)
    elif fmt == "VRT":
        path = write_vrt(d)
    else:
        path = write_with_gdal(d, fmt, {"PDS4": "xml", "ISIS3": "cub", "VICAR": "vic", "COG": "tif"}[fmt])
    src = DemSource.open(path)
    # GDAL's planetary drivers give these lon/lat grids as equirectangular metres on the sphere:
    # they are read back as the geographic grid they are
    assert src.is_geographic
    np.testing.assert_allclose([src.transform.a, src.transform.c, src.transform.f], [RES_DEG, WEST, NORTH], atol=1e-9)
    assert src.body.semi_major_m == pytest.approx(MARS_RADIUS_M)
    ds = simulate(path, track(), config())
    np.testing.assert_allclose(ds["power"].values, ref["power"].values, rtol=1e-6, atol=1e-9 * float(ref["power"].max()))


def test_global_equirectangular_grid_joins_across_180(tmp_path):
    """A global grid in equirectangular metres (as ISIS3 and PDS4 labels store lon/lat grids) is
    geographic: it spans 360° and wraps, so a window across its ±180° edge is read in one piece."""
    k = MARS_RADIUS_M * math.pi / 180.0  # metres per degree (eqc, lat_ts = 0)
    res = 0.5
    path = write_geotiff(tmp_path / "g.tif", np.zeros((40, 720)), -180 * k, 10 * k, res * k, crs="IAU_2015:49910")
    src = DemSource.open(path)
    assert src.is_geographic and src.wraps_longitude
    from rasterio.windows import Window

    win = src.read(Window(-3, 0, 6, 4))  # 3 columns west of the edge and 3 east of it
    assert win.shape == (4, 6)


def test_radii_instead_of_heights_are_refused_with_the_conversion(reference, tmp_path):
    z = terrain().astype(np.float64) + MARS_RADIUS_M
    path = write_geotiff(tmp_path / "radii.tif", z, WEST, NORTH, RES_DEG, crs=MARS_SPHERE, dtype="float64")
    with pytest.raises(DemError, match="look like distances from the body's centre") as err:
        simulate(path, track(), config())
    assert "3,396,190" in str(err.value) and "A-3396190" in str(err.value)


def test_vsizip_dem_path(reference, tmp_path):
    """A DEM inside a zip file, read through GDAL's /vsizip/ (absolute path: /vsizip//abs/a.zip/x.tif)."""
    d, tif, ref = reference
    with zipfile.ZipFile(tmp_path / "dem.zip", "w") as zf:
        zf.write(tif, "inner/ref.tif")
    path = f"/vsizip/{tmp_path / 'dem.zip'}/inner/ref.tif"
    ds = simulate(path, track(), config())
    np.testing.assert_array_equal(ds["power"].values, ref["power"].values)
    from click.testing import CliRunner

    from cli.main import cli

    track().to_csv(tmp_path / "t.csv")
    res = CliRunner().invoke(cli, ["simulate", "--dem", path, "--track", str(tmp_path / "t.csv"), "--out",
                                   str(tmp_path / "run"), "-q"])  # fmt: skip
    assert res.exit_code == 0, res.output
    missing = CliRunner().invoke(cli, ["simulate", "--dem", f"/vsizip/{tmp_path / 'dem.zip'}/nothere.tif", "--track",
                                       str(tmp_path / "t.csv"), "--out", str(tmp_path / "run2"), "-q"])  # fmt: skip
    assert missing.exit_code == 1 and "nothere.tif" in missing.output and "Traceback" not in missing.output
