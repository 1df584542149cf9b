"""`cluttersim report`: the page's structure, its embedded data against the run's netCDF values,
its size for a long run, and bad input (invented scenes only)."""

from __future__ import annotations

import json
import math
import re
import zlib
from html.parser import HTMLParser

import numpy as np
import pyproj
import pytest
import xarray as xr
from click.testing import CliRunner

from cli.main import cli
from cluttersim import SimulationConfig, SurfaceConfig
from cluttersim.products import simulate_to_dir
from cluttersim.physics.radar import RadarConfig
from cluttersim.report import GridShape, Quantiser, pack_array, strongest_in_blocks, unpack_array, write_report
from scenes import UTM, UTM_X0_M, UTM_Y0_M, flat_geographic, utm_track
from test_attribution import AIRBORNE, dome_scene

NTRACE = 31
SAMPLES = 256
ALT_M = 1000.0


def dome_config():
    return SimulationConfig(radar=RadarConfig(samples=SAMPLES, **AIRBORNE), surface=SurfaceConfig("hagfors", {"C": 1000.0, "rho": 0.1}))


def dome_run(directory):
    """The spherical-cap hill 700 m east of a northbound track 1 km up (tests/test_attribution.py)."""
    dem = dome_scene(directory)
    track = utm_track(np.full(NTRACE, UTM_X0_M), UTM_Y0_M + np.linspace(-450, 450, NTRACE), ALT_M)
    simulate_to_dir(dem, track, dome_config(), directory / "run")
    return directory / "run"


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    return dome_run(tmp_path_factory.mktemp("report"))


@pytest.fixture(scope="module")
def report(run_dir):
    path = write_report(run_dir, run_dir / "report.html")
    return path, path.read_text(encoding="utf-8")


def embedded(page: str):
    """The page's JSON description and its packed arrays, decoded."""
    meta = json.loads(re.search(r'<script type="application/json" id="cs-meta">(.*?)</script>', page, re.S).group(1))
    blobs = json.loads(re.search(r'<script type="application/json" id="cs-blobs">(.*?)</script>', page, re.S).group(1))
    arrays = {k: unpack_array(v["data"], v["dtype"], (v["length"],)) for k, v in blobs.items()}
    return meta, blobs, arrays


def decoded(blobs, arrays, name):
    return Quantiser(blobs[name]["dtype"], **blobs[name]["q"]).decode(arrays[name])


class Tags(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))


# --------------------------------------------------------------------------- building blocks


def test_quantiser_rounds_to_the_nearest_step_and_keeps_nan():
    rng = np.random.default_rng(1)
    x = rng.uniform(-3.0, 7.0, 1000)
    x[::17] = np.nan
    for dtype in ("<u2", "<i2", "<u1"):
        q = Quantiser.spanning(x, dtype)
        back = q.decode(q.encode(x))
        assert np.array_equal(np.isnan(back), np.isnan(x))
        # rounding to the nearest code: error at most half a step (the defining property)
        assert np.nanmax(np.abs(back - x)) <= 0.5 * q.step * (1 + 1e-9)
        assert q.step == pytest.approx((np.nanmax(x) - np.nanmin(x)) / (q.hi - q.lo), rel=1e-12)  # finest covering step


def test_packed_arrays_are_zlib_streams_of_shuffled_little_endian_bytes():
    """Reference: zlib (RFC 1950) from the standard library, and the byte-plane layout by hand."""
    codes = np.array([1, 258, 65535, 4096], dtype="<u2")
    raw = zlib.decompress(__import__("base64").b64decode(pack_array(codes)))
    assert raw == bytes([1, 2, 255, 0, 0, 1, 255, 16])  # low bytes, then high bytes
    assert np.array_equal(unpack_array(pack_array(codes), "<u2", (4,)), codes)


def test_strongest_in_blocks_names_each_blocks_largest_sample():
    p = np.arange(5 * 7, dtype=float).reshape(5, 7) % 11
    p[4, 6] = np.nan
    shape = GridShape(5, 7, 2, 3)
    t, s, pick = strongest_in_blocks(p, shape)
    assert t.shape == (3, 3)
    for c in range(3):
        for r in range(3):
            block = np.nan_to_num(p[2 * c:2 * c + 2, 3 * r:3 * r + 3], nan=-np.inf)
            if np.isfinite(block).any():
                assert p[t[c, r], s[c, r]] == block.max()
            else:  # nothing finite (here the NaN corner): the block's first sample
                assert (t[c, r], s[c, r]) == (2 * c, 3 * r)
            assert (t[c, r] - 2 * c) * 3 + (s[c, r] - 3 * r) == pick[c, r]


# --------------------------------------------------------------------------- the page


def test_report_is_one_self_contained_file(report):
    _, page = report
    parser = Tags()
    parser.feed(page)
    assert not [t for t, a in parser.tags if t == "link"]  # no stylesheet or icon fetched
    for tag, attrs in parser.tags:
        for key in ("src", "href"):
            assert key not in attrs or attrs[key].startswith("data:"), (tag, attrs)
    assert not re.search(r"""(?:src|href)\s*=\s*["']https?:""", page)
    assert not re.search(r"(?:@import|url\()\s*['\"]?https?:", page)
    assert not re.search(r"\bfetch\(|XMLHttpRequest|import\(", page)
    ids = {a.get("id") for _, a in parser.tags}
    for needed in ("rg-stage", "rg-image", "probe", "probe-src-lat", "probe-side", "map-image", "params", "cautions"):
        assert needed in ids
    meta, _, _ = embedded(page)
    assert [v["id"] for v in meta["views"]] == ["power", "sides"]
    for v in meta["views"]:
        assert v["image"].startswith("data:image/png;base64,")
    assert meta["kind"] == "simulation"
    titles = [s["title"] for s in meta["params"]]
    assert titles[:3] == ["run", "radar", "surface"] and "DEM" in titles and "track" in titles
    assert any("validation" in c for c in meta["cautions"])


def test_radargram_images_have_one_pixel_per_trace_and_sample(report):
    from PIL import Image
    import base64
    import io

    meta, _, _ = embedded(report[1])
    for v in meta["views"]:
        img = Image.open(io.BytesIO(base64.b64decode(v["image"].split(",", 1)[1])))
        assert img.size == (NTRACE, SAMPLES)  # width: traces, height: samples
    grid = meta["grids"]["sim"]["shape"]
    assert (grid["columns"], grid["rows"], grid["trace_step"], grid["sample_step"]) == (NTRACE, SAMPLES, 1, 1)


def test_embedded_data_decode_to_the_radargram_values(run_dir, report):
    meta, blobs, arrays = embedded(report[1])
    with xr.open_dataset(run_dir / "radargram.nc", engine="h5netcdf") as ds:
        ds = ds.load()
    p = ds["power"].values.astype(np.float64).ravel()
    db = decoded(blobs, arrays, "sim.power_db")
    on = p > 0
    np.testing.assert_allclose(db[on], 10 * np.log10(p[on]), atol=0.005 + 1e-9)
    for side in ("left", "right"):
        np.testing.assert_allclose(decoded(blobs, arrays, f"sim.{side}"), ds[f"{side}_fraction"].values.ravel(),
                                   atol=0.002 + 1e-7)  # fmt: skip
    ant_lat = np.repeat(ds["lat"].values, SAMPLES)
    ant_lon = np.repeat(ds["lon"].values, SAMPLES)
    lat = ant_lat + decoded(blobs, arrays, "sim.src_dlat")
    lon = ant_lon + decoded(blobs, arrays, "sim.src_dlon")
    src_lat, src_lon = ds["source_lat"].values.ravel(), ds["source_lon"].values.ravel()
    has = np.isfinite(src_lat)
    assert has.sum() > 0.5 * has.size
    np.testing.assert_array_equal(np.isfinite(lat), has)
    # to 1/8 of the 10 m cells (10 m ≈ 9.0e-5° of latitude on WGS 84; pyproj below for the metres)
    geod = pyproj.Geod(ellps="WGS84")  # the ellipsoid of EPSG:32633 (UTM 33N on WGS 84)
    _, _, err_m = geod.inv(lon[has], lat[has], src_lon[has], src_lat[has])
    assert np.max(err_m) <= 1.0
    # off-nadir distance: the geodesic from the antenna's nadir to the source (pyproj.Geod)
    _, _, dist = geod.inv(ant_lon[has], ant_lat[has], src_lon[has], src_lat[has])
    np.testing.assert_allclose(decoded(blobs, arrays, "sim.offnadir_m")[has], dist, atol=0.5 * 10.0 / 8 + 1e-6)
    # map pixels: UTM metres of the source (pyproj) on the relief image's extent (km)
    west, east, south, north = meta["map"]["extent"]
    x, y = pyproj.Transformer.from_crs("EPSG:4326", UTM, always_xy=True).transform(src_lon[has], src_lat[has])
    px = (x / 1e3 - west) / (east - west) * meta["map"]["width"]
    py = (north - y / 1e3) / (north - south) * meta["map"]["height"]
    np.testing.assert_allclose(decoded(blobs, arrays, "sim.src_map_x")[has], px, atol=1 / 16 + 1e-6)
    np.testing.assert_allclose(decoded(blobs, arrays, "sim.src_map_y")[has], py, atol=1 / 16 + 1e-6)
    # per-trace values
    tr = meta["grids"]["sim"]["traces"]
    np.testing.assert_allclose(tr["lat"], ds["lat"].values, atol=1e-6)
    np.testing.assert_allclose(tr["window_start_us"], ds["window_start"].values * 1e6, atol=1e-6)
    np.testing.assert_allclose(tr["nadir_us"], ds["nadir_delay"].values * 1e6, atol=1e-6)
    # the nadir line sits nadir − window start below the image's first sample, whatever the axis frame
    g = meta["grids"]["sim"]
    np.testing.assert_allclose(np.array(tr["nadir_axis_us"]) - g["axis_offset_us"],
                               (ds["nadir_delay"].values - ds["window_start"].values) * 1e6, atol=1e-5)  # fmt: skip


def test_a_long_run_is_shown_in_blocks_of_its_strongest_samples(run_dir, tmp_path):
    out = write_report(run_dir, tmp_path / "r.html", max_columns=10, max_rows=100)
    meta, blobs, arrays = embedded(out.read_text(encoding="utf-8"))
    shape = meta["grids"]["sim"]["shape"]
    assert (shape["trace_step"], shape["sample_step"], shape["columns"], shape["rows"]) == (4, 3, 8, 86)
    with xr.open_dataset(run_dir / "radargram.nc", engine="h5netcdf") as ds:
        p = ds["power"].values.astype(np.float64)
    pick = arrays["sim.pick"].reshape(8, 86)
    db = decoded(blobs, arrays, "sim.power_db").reshape(8, 86)
    for c, r in [(0, 0), (3, 20), (7, 85), (5, 40)]:
        block = p[4 * c:4 * c + 4, 3 * r:3 * r + 3]
        t, s = 4 * c + pick[c, r] // 3, 3 * r + pick[c, r] % 3
        assert p[t, s] == np.nanmax(block)
        assert db[c, r] == pytest.approx(10 * np.log10(np.nanmax(block)), abs=0.006)


def synthetic_long_run(directory, ntrace=5000, nsample=2048, seed=4):
    """A 5,000-trace radargram Dataset built directly (no simulation), made hard to compress:
    speckled clutter everywhere below the surface echo and sources at random azimuths on the
    ring of each sample's range (invented data). The DEM is a small flat geographic square."""
    rng = np.random.default_rng(seed)
    dem = flat_geographic(directory / "flat.tif", 0.01, half_width_deg=1.5)
    dt = 37.5e-9
    c = 299_792_458.0
    alt = 300e3
    lat = np.linspace(-1.2, 1.2, ntrace)
    lon = np.zeros(ntrace)
    nadir = 2 * alt / c
    start = nadir - 32 * dt
    k = np.arange(nsample)
    after = np.clip((start + k * dt - nadir) * c / 2, 0, None)  # range beyond nadir, m
    clutter = 1e-17 / (1 + after / 500.0) ** 2
    power = (clutter[None, :] * rng.exponential(1.0, (ntrace, nsample))).astype(np.float32)
    power[:, :30] = 0.0
    ground_m = np.sqrt((alt + after) ** 2 - alt**2)
    az = rng.uniform(0, 2 * np.pi, (ntrace, nsample))
    deg = np.degrees(ground_m / 3_396_190.0)
    src_lat = (lat[:, None] + deg * np.cos(az)).astype(np.float32)
    src_lon = (deg * np.sin(az)).astype(np.float32)
    src_lat[:, :30] = np.nan
    src_lon[:, :30] = np.nan
    left = rng.uniform(0, 0.6, (ntrace, nsample)).astype(np.float32)
    right = (rng.uniform(0, 1, (ntrace, nsample)) * (1 - left)).astype(np.float32)
    tr = ("trace",)
    ts = ("trace", "sample")
    ds = xr.Dataset(
        {"power": (ts, power), "source_lat": (ts, src_lat), "source_lon": (ts, src_lon), "left_fraction": (ts, left),
         "right_fraction": (ts, right), "window_start": (tr, np.full(ntrace, start)), "lat": (tr, lat),
         "lon": (tr, lon), "alt": (tr, np.full(ntrace, alt)), "nadir_delay": (tr, np.full(ntrace, nadir)),
         "on_dem": (tr, np.ones(ntrace, np.int8))},
        coords={"trace": np.arange(ntrace), "delay": ("sample", k * dt)},
        attrs={"dem_path": str(dem), "dem_file": dem.name, "cluttersim_version": "test",
               "cluttersim_config": json.dumps(SimulationConfig(surface=SurfaceConfig("hagfors", {"C": 400.0, "rho": 0.08})).to_dict())},
    )  # fmt: skip
    run = directory / "long"
    run.mkdir()
    ds.to_netcdf(run / "radargram.nc", engine="h5netcdf")
    return run


def test_a_5000_trace_report_stays_under_30_mb(tmp_path):
    run = synthetic_long_run(tmp_path)
    out = write_report(run)
    size = out.stat().st_size
    assert size < 30e6, f"{size / 1e6:.1f} MB"
    meta, _, arrays = embedded(out.read_text(encoding="utf-8"))
    shape = meta["grids"]["sim"]["shape"]
    assert shape["columns"] * shape["trace_step"] >= 5000 and shape["rows"] * shape["sample_step"] >= 2048
    assert arrays["sim.src_dlat"].size == shape["columns"] * shape["rows"]


# --------------------------------------------------------------------------- comparison


def make_comparison(d):
    """A comparison directory: the hill scene of tests/test_compare.py observed with a reflector 40 m deep."""
    from cluttersim.analysis.compare import compare_to_dir
    from test_compare import DT, hill_scene, observe

    dem, track, cfg = hill_scene(d)
    simulate_to_dir(dem, track, cfg, d / "run")
    with xr.open_dataset(d / "run" / "radargram.nc", engine="h5netcdf") as sim:
        sim = sim.load()
    power, start = observe(sim, shift_samples=7.3, seed=8, reflector_depth_m=40.0)
    track.to_csv(d / "track.csv")
    np.save(d / "obs.npy", power)
    compare_to_dir(d / "obs.npy", d / "track.csv", DT, d / "cmp", sim=d / "run" / "radargram.nc",
                   window_start_s=float(start[0]), fmt=None)  # fmt: skip
    return d / "cmp"


@pytest.fixture(scope="module")
def comparison_dir(tmp_path_factory):
    return make_comparison(tmp_path_factory.mktemp("cmp"))


def test_comparison_report_shows_observed_overlay_and_candidates(comparison_dir):
    out = write_report(comparison_dir)
    meta, blobs, arrays = embedded(out.read_text(encoding="utf-8"))
    assert meta["kind"] == "comparison"
    assert [v["id"] for v in meta["views"]] == ["observed", "overlay", "power", "sides"]
    with xr.open_dataset(comparison_dir / "comparison.nc", engine="h5netcdf") as cmp:
        cmp = cmp.load()
    obs = cmp["observed_power"].values.astype(np.float64).ravel()
    on = obs > 0
    np.testing.assert_allclose(decoded(blobs, arrays, "obs.power_db")[on], 10 * np.log10(obs[on]), atol=0.0051)
    assert meta["grids"]["obs"]["traces"]["sim_trace"] == [int(v) for v in cmp["sim_trace"].values]
    rows = (comparison_dir / "candidates.csv").read_text().splitlines()
    assert len(meta["candidates"]) == len(rows) - 1 > 0
    top = meta["candidates"][0]
    # the invented reflector 40 m deep (ε′ = 3.15) is the top candidate (tests/test_compare_cli.py);
    # its place on the grid: (two-way delay − window start) / Δt
    assert top["depth_m"] == pytest.approx(40.0, abs=1.0)
    ws = cmp["window_start"].values[top["trace"]]
    assert top["grid_sample"] == round((top["two_way_delay_us"] * 1e-6 - ws) / cmp["delay"].values[1])
    assert any(s["title"] == "comparison" for s in meta["params"])


# --------------------------------------------------------------------------- command line and bad input


def run_cli(args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def test_cli_writes_the_report_and_never_overwrites(run_dir, tmp_path):
    out = tmp_path / "page.html"
    res = run_cli(["report", run_dir, "--out", out])
    assert res.exit_code == 0, res.output
    assert res.output.strip() == f"wrote {out}"
    first = out.read_bytes()
    again = run_cli(["report", run_dir, "--out", out])
    assert again.exit_code == 2 and "already exists; pass --overwrite" in again.output
    assert out.read_bytes() == first
    assert run_cli(["report", run_dir, "--out", out, "--overwrite", "--permittivity", "1"]).exit_code == 0


def _nothing(d):
    return d


def _empty_dir(d):
    (d / "empty").mkdir()
    return d / "empty"


def _not_netcdf(d):
    (d / "bad").mkdir()
    (d / "bad" / "radargram.nc").write_text("not a netCDF file")
    return d / "bad"


def _dem_moved(d):
    (d / "moved").mkdir()
    with xr.open_dataset(d / "run" / "radargram.nc", engine="h5netcdf") as ds:
        ds = ds.load()
    ds.attrs["dem_path"] = str(d / "gone.tif")
    ds.to_netcdf(d / "moved" / "radargram.nc", engine="h5netcdf")
    return d / "moved"


def _not_a_simulation(d):
    (d / "foreign").mkdir()
    xr.Dataset({"power": (("trace", "sample"), np.ones((2, 3)))}).to_netcdf(d / "foreign" / "radargram.nc", engine="h5netcdf")
    return d / "foreign"


def _comparison_without_sim(d):
    (d / "lonely").mkdir()
    xr.Dataset(
        {"observed_power": (("trace", "sample"), np.ones((2, 3))), "simulated_power": (("trace", "sample"), np.ones((2, 3))),
         "sim_trace": ("trace", np.zeros(2, np.int32)), "window_start": ("trace", np.zeros(2))},
        attrs={"simulation": str(d / "nowhere" / "radargram.nc")},
    ).to_netcdf(d / "lonely" / "comparison.nc", engine="h5netcdf")  # fmt: skip
    return d / "lonely"


@pytest.mark.parametrize("case, code, words", [
    (lambda d: d / "missing", 2, ["does not exist"]),  # click checks the argument
    (_empty_dir, 1, ["neither radargram.nc nor comparison.nc", "empty"]),
    (_not_netcdf, 1, ["radargram.nc", "not a readable netCDF"]),
    (_dem_moved, 1, ["gone.tif", "DEM file not found", "--dem"]),
    (_not_a_simulation, 1, ["radargram.nc", "variable 'window_start' missing"]),
    (_comparison_without_sim, 1, ["comparison.nc", "was not found", "--sim"]),
])  # fmt: skip
def test_bad_input_gives_one_line_and_no_output(run_dir, tmp_path, case, code, words):
    import shutil

    shutil.copytree(run_dir, tmp_path / "run", ignore=shutil.ignore_patterns("report.html"))
    target = case(tmp_path)
    out = tmp_path / "out.html"
    res = run_cli(["report", target, "--out", out])
    assert res.exit_code == code, res.output
    lines = [line for line in res.output.splitlines() if line.strip()]
    assert "Traceback" not in res.output
    if code == 1:
        assert len(lines) == 1 and lines[0].startswith("cluttersim: error: ")
    for w in words:
        assert w in res.output
    assert not out.exists()
    assert not list(tmp_path.glob(".out.html.partial-*"))


def test_permittivity_below_one_is_refused(run_dir, tmp_path):
    res = run_cli(["report", run_dir, "--out", tmp_path / "x.html", "--permittivity", "0.5"])
    assert res.exit_code == 2 and "permittivity" in res.output.lower()
    with pytest.raises(ValueError, match="permittivity 0.5"):
        write_report(run_dir, tmp_path / "y.html", permittivity=0.5)
    assert not (tmp_path / "x.html").exists() and not (tmp_path / "y.html").exists()


def test_the_hill_is_to_the_right_in_the_embedded_record(report):
    """The echo of the hill at closest approach, placed by geometry alone: range √(x² + (h − zc)²) − Rs
    for the cap's sphere (tests/test_attribution.py), delay 2R/c (common practice)."""
    from test_attribution import C, dome_range_m

    meta, blobs, arrays = embedded(report[1])
    apex = NTRACE // 2
    tr = meta["grids"]["sim"]["traces"]
    k = round((2 * dome_range_m(ALT_M, 0.0) / C * 1e6 - tr["window_start_us"][apex]) / meta["dt_us"])
    idx = apex * SAMPLES + k
    assert decoded(blobs, arrays, "sim.right")[idx] > 0.75
    lat = tr["lat"][apex] + decoded(blobs, arrays, "sim.src_dlat")[idx]
    lon = tr["lon"][apex] + decoded(blobs, arrays, "sim.src_dlon")[idx]
    x, y = pyproj.Transformer.from_crs("EPSG:4326", UTM, always_xy=True).transform(lon, lat)
    assert math.hypot(x - (UTM_X0_M + 700.0), y - UTM_Y0_M) <= 150.0  # on the hill (base radius 141 m)
