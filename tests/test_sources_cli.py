"""`cluttersim sources`: the depth-window map's GeoTIFF and one echo's ranked cells."""

import numpy as np
import pytest
import rasterio
from click.testing import CliRunner

from cli.main import cli
from cluttersim.products import simulate_to_dir
from scenes import UTM_X0_M, UTM_Y0_M, utm_track
from test_attribution import DOME_EAST_M, config, dome_scene


@pytest.fixture(scope="module")
def dome_run(tmp_path_factory):
    d = tmp_path_factory.mktemp("dome")
    dem = dome_scene(d)
    track = utm_track(np.full(21, UTM_X0_M), UTM_Y0_M + np.linspace(-300, 300, 21), 1000.0)
    simulate_to_dir(dem, track, config(C=1000.0, rho=0.1), d / "run")
    return d, dem


def run(args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def test_depth_window_map_is_a_geotiff_on_the_dem_grid(dome_run):
    d, dem = dome_run
    res = run(["sources", d / "run", "--depth-window", "100", "200", "--permittivity", "1", "-q"])
    assert res.exit_code == 0, res.output
    tif = d / "run" / "sources_100-200m_eps1.tif"
    assert tif.exists() and tif.with_suffix(".png").exists()
    with rasterio.open(tif) as out, rasterio.open(dem) as src:
        assert out.crs == src.crs
        assert out.res == src.res
        col_off = (out.transform.c - src.transform.c) / src.res[0]
        row_off = (src.transform.f - out.transform.f) / src.res[1]
        assert col_off == pytest.approx(round(col_off)) and row_off == pytest.approx(round(row_off))
        power = out.read(1)
        assert out.tags()["units"] == "W" and float(out.tags()["depth_min_m"]) == 100.0
    # the dome (≈ 1180 m away, 180 m beyond the 1000 m nadir range) is the brightest ground
    i = np.unravel_index(np.nanargmax(power), power.shape)
    with rasterio.open(tif) as out:
        x, y = out.xy(*i)
    assert abs(x - (UTM_X0_M + DOME_EAST_M)) < 160 and abs(y - UTM_Y0_M) < 160
    again = run(["sources", d / "run", "--depth-window", "100", "200", "--permittivity", "1", "-q"])
    assert again.exit_code == 2 and "--overwrite" in again.output


def test_asking_one_echo_prints_ranked_cells_with_side(dome_run):
    d, _ = dome_run
    # trace 10 is abreast of the dome: range √(700² + 1050²) − 150 = 1111.9 m → 111.9 m beyond nadir
    res = run(["sources", d / "run", "--trace", "10", "--depth-m", "111.9", "--permittivity", "1", "--top", "5"])
    assert res.exit_code == 0, res.output
    lines = res.output.splitlines()
    assert lines[0].startswith("trace 10, sample")
    first_row = lines[3].split()
    assert first_row[0] == "1" and first_row[3] == "right"
    assert list((d / "run").glob("echo_t10_*us.png"))


@pytest.mark.parametrize(
    "args, code, message",
    [
        (["--trace", "10"], 2, "exactly one of --delay-us or --depth-m"),
        (["--depth-window", "10", "20", "--trace", "3", "--depth-m", "5"], 2, "give either --depth-window"),
        (["--trace", "999", "--delay-us", "1"], 1, "trace 999: expected 0..20"),
        (["--depth-window", "30", "10"], 1, "depth window 30.0 10.0 m: expected 0 <= A < B"),
        (["--trace", "3", "--delay-us", "1e6"], 1, "expected 0.."),
    ],
)
def test_bad_requests_are_one_line_errors(dome_run, args, code, message):
    d, _ = dome_run
    res = run(["sources", d / "run", *args])
    assert res.exit_code == code, res.output
    assert message in res.output and "Traceback" not in res.output


def test_missing_run_directory_is_a_usage_error(tmp_path):
    res = run(["sources", tmp_path / "nope", "--depth-window", "1", "2"])
    assert res.exit_code == 2
