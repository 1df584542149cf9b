"""Broken inputs, systematically: each gives one exact line, its exit code and no output file.

Plus property-based tests: any radar mapping or track CSV either parses or raises the
project's own error, never another exception. All data are invented.
"""

import math
import string

import numpy as np
import pytest
import rasterio
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

from cli.main import cli
from cluttersim import SimulationConfig, Track
from cluttersim.errors import ClutterSimError, ConfigError, TrackError
from scenes import write_geotiff

TRACK = "lat,lon,alt\n0,0,100000\n0.1,0,100000\n"


@pytest.fixture(scope="module")
def d(tmp_path_factory):
    d = tmp_path_factory.mktemp("bad")
    n = 100
    write_geotiff(d / "good.tif", np.zeros((n, n)), -1, 1, 0.02)
    write_geotiff(d / "nan.tif", np.full((n, n), np.nan), -1, 1, 0.02, nodata=None)
    write_geotiff(d / "inf.tif", np.full((n, n), np.inf), -1, 1, 0.02, nodata=None)
    write_geotiff(d / "nodata.tif", np.full((n, n), -32768.0), -1, 1, 0.02)
    raw = (d / "good.tif").read_bytes()
    (d / "trunc.tif").write_bytes(raw[: len(raw) // 2])
    (d / "text.tif").write_text("elevation,0\n")
    with rasterio.open(d / "good.tif") as s:
        prof = s.profile
    prof.update(count=2)
    with rasterio.open(d / "two.tif", "w", **prof) as s:
        s.write(np.zeros((2, n, n), "float32"))
    (d / "t.csv").write_text(TRACK)
    return d


def _file(d, name, text):
    p = d / name
    p.write_bytes(text) if isinstance(text, bytes) else p.write_text(text)
    return p


# (case: (args given the fixture dir, exit code, exact message after "cluttersim: error: "))
SIMULATE_CASES = {
    "truncated DEM": (lambda d: ["--dem", d / "trunc.tif"], 1,
                      "{d}/trunc.tif: cannot read elevations, the file may be truncated or corrupt (trunc.tif, band 1: "
                      "IReadBlock failed at X offset 0, Y offset 2: TIFFReadEncodedStrip() failed.)"),
    "text file as DEM": (lambda d: ["--dem", d / "text.tif"], 1,
                         "{d}/text.tif: not a raster GDAL can read ('{d}/text.tif' not recognized as being in a supported "
                         "file format.)"),  # GDAL's wording (3.x)
    "DEM of NaN": (lambda d: ["--dem", d / "nan.tif"], 1, "{d}/nan.tif: every DEM cell around the track is nodata"),
    "DEM of inf": (lambda d: ["--dem", d / "inf.tif"], 1, "{d}/inf.tif: every DEM cell around the track is nodata"),
    "DEM all nodata": (lambda d: ["--dem", d / "nodata.tif"], 1, "{d}/nodata.tif: every DEM cell around the track is nodata"),
    "two bands": (lambda d: ["--dem", d / "two.tif"], 1, "{d}/two.tif: has 2 bands, expected a single-band elevation raster"),
    "duplicate times": (lambda d: ["--track", _file(d, "dup.csv", "lat,lon,alt,time\n0,0,1e5,1\n0.1,0,1e5,1\n")], 1,
                        "{d}/dup.csv: column 'time' row 2: expected times increasing strictly"),
    "times decreasing": (lambda d: ["--track", _file(d, "dec.csv", "lat,lon,alt,time\n0,0,1e5,2\n0.1,0,1e5,1\n")], 1,
                         "{d}/dec.csv: column 'time' row 2: expected times increasing strictly"),
    "lat beyond 90": (lambda d: ["--track", _file(d, "lat.csv", "lat,lon,alt\n0,0,1e5\n-90.5,0,1e5\n")], 1,
                      "{d}/lat.csv: column 'lat' row 2 = -90.5: expected -90..90 degrees"),
    "empty CSV": (lambda d: ["--track", _file(d, "empty.csv", "")], 1,
                  "{d}/empty.csv: empty file, expected a header with columns lat, lon, alt"),
    "header only": (lambda d: ["--track", _file(d, "head.csv", "lat,lon,alt\n")], 1, "{d}/head.csv: the track has no traces"),
    "binary CSV": (lambda d: ["--track", _file(d, "bin.csv", b"\xff\xfe\x00garbage")], 1,
                   "{d}/bin.csv: cannot read track CSV ('utf-8' codec can't decode byte 0xff in position 0: invalid start byte)"),
    "short row": (lambda d: ["--track", _file(d, "short.csv", "lat,lon,alt\n0,0\n")], 1,
                  "{d}/short.csv: row 1 column 'alt' = '': expected a number"),
    "altitude 1e12 m": (lambda d: ["--track", _file(d, "alt.csv", "lat,lon,alt\n0,0,1e12\n")], 1,
                        "{d}/alt.csv: row 1 alt = 1e+12 m: expected at most 100 body radii (3.39619e+08 m) above the "
                        "reference surface"),
    "samples 10**9": (lambda d: ["--radar", _file(d, "r1.toml", "[radar]\nsamples = 1000000000\n")], 1,
                      "{d}/r1.toml: [radar] samples = 1000000000: expected at most 1,000,000 samples per trace"),
    "sample interval 1 s": (lambda d: ["--radar", _file(d, "r2.toml", "[radar]\nsample_interval_s = 1.0\n")], 1,
                            "{d}/r2.toml: [radar] sample_interval_s = 1.0: expected at most 1/bandwidth_hz (1e-07 s), "
                            "or the compressed pulse falls between samples"),
    "samples a string": (lambda d: ["--radar", _file(d, "r3.toml", '[radar]\nsamples = "many"\n')], 1,
                         "{d}/r3.toml: [radar] samples = 'many': expected an integer"),
    "bandwidth an array": (lambda d: ["--radar", _file(d, "r4.toml", "[radar]\nbandwidth_hz = [1, 2]\n")], 1,
                           "{d}/r4.toml: [radar] bandwidth_hz = [1, 2]: expected a number"),
    "radar not a table": (lambda d: ["--radar", _file(d, "r5.toml", "radar = 5\n")], 1,
                          "{d}/r5.toml: [radar] and [surface] must be tables"),
    "negative power": (lambda d: ["--radar", _file(d, "r6.toml", "[radar]\ntransmit_power_w = -1\n")], 1,
                       "{d}/r6.toml: [radar] transmit_power_w = -1.0: expected a positive number"),
    "infinite power": (lambda d: ["--radar", _file(d, "r7.toml", "[radar]\ntransmit_power_w = inf\n")], 1,
                       "{d}/r7.toml: [radar] transmit_power_w = inf: expected a positive number"),
    "broken TOML": (lambda d: ["--radar", _file(d, "r8.toml", "[radar\n")], 1,
                    "{d}/r8.toml: not valid TOML (Expected ']' at the end of a table declaration (at line 1, column 7))"),
    "surface C a string": (lambda d: ["--radar", _file(d, "r9.toml", "[surface]\nlaw = 'hagfors'\nC = 'x'\n")], 1,
                           "{d}/r9.toml: [surface] C = 'x': expected a finite number"),
    "negative window start": (lambda d: ["--radar", _file(d, "r10.toml", "[radar]\nwindow_start_s = -1e-3\n")], 1,
                              "{d}/r10.toml: [radar] window_start_s = -0.001: expected \"auto\" or a delay >= 0 s"),
    "memory limit": (lambda d: ["--max-memory", "1kB"], 1, None),
}  # fmt: skip


@pytest.mark.parametrize("case", list(SIMULATE_CASES))
def test_simulate_bad_input(d, case):
    make, code, message = SIMULATE_CASES[case]
    args = make(d)
    if "--dem" not in args:
        args += ["--dem", d / "good.tif"]
    if "--track" not in args:
        args += ["--track", d / "t.csv"]
    out = d / f"out_{case.replace(' ', '_')}"
    res = CliRunner().invoke(cli, ["simulate", *map(str, args), "--out", str(out), "-q"])
    assert res.exit_code == code, res.output
    lines = res.output.strip().splitlines()
    assert len(lines) == 1, res.output
    if message is None:
        assert lines[0].startswith("cluttersim: error: this run needs about")
    else:
        assert lines[0] == "cluttersim: error: " + message.format(d=d)
    assert "Traceback" not in res.output
    assert not out.exists() or not any(out.iterdir())


def test_a_one_trace_track_works(d, tmp_path):
    """Decision: one trace is a valid track (a single sounding); the radargram has one row."""
    import xarray as xr

    track = _file(tmp_path, "one.csv", "lat,lon,alt\n0.01,0.01,100000\n")
    res = CliRunner().invoke(cli, ["simulate", "--dem", str(d / "good.tif"), "--track", str(track), "--out", str(tmp_path / "o"), "-q"])
    assert res.exit_code == 0, res.output
    with xr.open_dataset(tmp_path / "o" / "radargram.nc", engine="h5netcdf") as ds:
        assert ds["power"].shape == (1, 2048) and float(ds["power"].max()) > 0


def test_observed_radargram_of_the_wrong_shape(d, tmp_path):
    runner = CliRunner()
    assert runner.invoke(cli, ["simulate", "--dem", str(d / "good.tif"), "--track", str(d / "t.csv"),
                               "--out", str(tmp_path / "run"), "-q"]).exit_code == 0  # fmt: skip
    np.save(tmp_path / "obs.npy", np.ones((3, 100), dtype=np.float32))  # 3 traces, the track has 2
    out = tmp_path / "cmp"
    res = runner.invoke(cli, ["compare", "--observed", str(tmp_path / "obs.npy"), "--observed-track", str(d / "t.csv"),
                              "--sim", str(tmp_path / "run" / "radargram.nc"), "--sample-interval-s", "37.5e-9",
                              "--window-start-s", "6e-4", "--out", str(out), "-q"])  # fmt: skip
    assert res.exit_code == 1, res.output
    lines = res.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("cluttersim: error: ")
    assert "3" in lines[0] and "2" in lines[0] and "t.csv" in lines[0]  # names the file and both counts
    assert not out.exists() or not any(out.iterdir())


# --------------------------------------------------------------------------- property-based

_scalars = st.one_of(
    st.none(), st.booleans(), st.integers(min_value=-(10**20), max_value=10**20),
    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=8), st.sampled_from(["auto", "hann", "hagfors", "none"]),
)  # fmt: skip
_values = st.recursive(_scalars, lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=5), inner, max_size=3), max_leaves=6)
_radar_keys = st.sampled_from(["center_frequency_hz", "bandwidth_hz", "sample_interval_s", "samples", "window_start_s",
                               "transmit_power_w", "antenna_gain_dbi", "range_window", "bogus"])  # fmt: skip
_surface_keys = st.sampled_from(["law", "C", "rho", "sigma0", "k", "n", "rms_slope_deg", "bogus"])
_configs = st.one_of(
    _values,
    st.fixed_dictionaries({}, optional={
        "radar": st.one_of(_values, st.dictionaries(_radar_keys, _values, max_size=5)),
        "surface": st.one_of(_values, st.dictionaries(_surface_keys, _values, max_size=4)),
    }),
)  # fmt: skip


@settings(max_examples=200, deadline=None)
@given(_configs)
def test_config_from_dict_parses_or_raises_config_error(data):
    try:
        cfg = SimulationConfig.from_dict(data)
    except ConfigError:
        return
    r = cfg.radar
    assert r.samples >= 2 and all(math.isfinite(v) and v > 0 for v in (r.center_frequency_hz, r.bandwidth_hz, r.sample_interval_s))


_cells = st.one_of(st.floats(allow_nan=True, allow_infinity=True).map(repr), st.integers().map(str),
                   st.text(alphabet=string.printable, max_size=6))  # fmt: skip
_headers = st.lists(st.sampled_from(["lat", "lon", "alt", "time", "LAT", " lon ", "x", ""]), max_size=5)


@settings(max_examples=200, deadline=None)
@given(header=_headers, rows=st.lists(st.lists(_cells, max_size=5), max_size=4), raw=st.binary(max_size=40), use_raw=st.booleans())
def test_track_csv_parses_or_raises_track_error(tmp_path_factory, header, rows, raw, use_raw):
    p = tmp_path_factory.mktemp("csv") / "t.csv"
    if use_raw:
        p.write_bytes(raw)
    else:
        p.write_text("\n".join(",".join(r) for r in [header] + rows) + "\n", encoding="utf-8")
    try:
        track = Track.from_csv(p)
    except TrackError:
        return
    assert len(track) >= 1
    assert np.isfinite(track.lat_deg).all() and (np.abs(track.lat_deg) <= 90).all() and np.isfinite(track.alt_m).all()
    assert issubclass(TrackError, ClutterSimError)
