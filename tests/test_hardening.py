"""What real files and real machines do: extreme DEM cells, full disks, interrupts, concurrent runs,
units in metadata, impossible numbers, unwritable outputs. All scenes and values are invented.

Each bad input gives one line naming the culprit, its exit code, no traceback and no file left
behind; each interrupt ends in exit 130 with the old products intact or the new ones complete.
"""

from __future__ import annotations

import errno
import math
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pyproj
import pytest
import rasterio
from click.testing import CliRunner
from rasterio.crs import CRS as RioCRS
from rasterio.transform import from_origin

from cli.main import cli
from cluttersim.io import outputs
from cluttersim.physics.body import Body
from cluttersim.io.dem import DemSource
from cluttersim.errors import DemError, OutputLockedError
from cluttersim.track import great_circle_track
from cluttersim.validate import height_limit_m
from cli_helpers import CLUTTERSIM, interrupt_when, one_line, region_args
from scenes import MARS_RADIUS_M, UTM_X0_M, UTM_Y0_M, utm_grid, write_geotiff, write_utm

ROOT = Path(__file__).resolve().parents[1]
TRACK = "lat,lon,alt\n0,0,100000\n0.1,0,100000\n"


def _file(d, name, text):
    p = Path(d) / name
    p.write_bytes(text) if isinstance(text, bytes) else p.write_text(text)
    return p


@pytest.fixture(scope="module")
def d(tmp_path_factory):
    d = tmp_path_factory.mktemp("hard")
    n = 100
    write_geotiff(d / "good.tif", np.random.default_rng(0).normal(0.0, 20.0, (n, n)), -1, 1, 0.02)
    z = np.zeros((n, n))
    z[30, 70] = -3.4028235e38  # float32's lowest value, the usual nodata when the nodata tag is missing
    z[10, 10] = 1e20
    write_geotiff(d / "spikes.tif", z, -1, 1, 0.02, nodata=None)
    write_geotiff(d / "huge.tif", np.full((n, n), 1e9), -1, 1, 0.02, nodata=None)
    write_geotiff(d / "paris.tif", np.zeros((n, n)), -1, 1, 0.02, crs="EPSG:4807")  # grads from Paris
    (d / "t.csv").write_text(TRACK)
    (d / "afile").write_text("a file where a directory should be\n")
    return d


def _leftovers(out):
    """Files under an output path (none expected after a refused run)."""
    out = Path(out)
    if out.is_file():
        return [out.name]
    return sorted(str(p.relative_to(out)) for p in out.rglob("*")) if out.exists() else []




def _simulate_args(d, extra, out):
    args = list(extra)
    if "--dem" not in args:
        args += ["--dem", d / "good.tif"]
    if "--track" not in args:
        args += ["--track", d / "t.csv"]
    return ["simulate", *map(str, args), "--out", str(out), "-q"]


# --------------------------------------------------------------------------- the table
#
# (case: (arguments given the fixture dir and the output path, exit code, the exact line after
#  "cluttersim: error: " — or, for click's usage errors (exit 2), the line after "Error: ")).

LONG = "x" * 300  # longer than NAME_MAX (255 bytes on Linux file systems)

CASES = {
    # item 13: nan and inf on the command line are usage errors
    "simulate --first-return-db nan": (lambda d, o: _simulate_args(d, ["--first-return-db", "nan"], o), 2,
                                       "Invalid value for '--first-return-db': nan: expected a finite number"),
    "simulate --permittivity nan": (lambda d, o: _simulate_args(d, ["--permittivity", "nan"], o), 2,
                                    "Invalid value for '--permittivity': nan: expected a finite number"),
    "simulate --nadir-strip-m inf": (lambda d, o: _simulate_args(d, ["--nadir-strip-m", "inf"], o), 2,
                                     "Invalid value for '--nadir-strip-m': inf: expected a finite number"),
    "simulate --beamwidth-deg nan 3": (lambda d, o: _simulate_args(d, ["--beamwidth-deg", "nan", "3"], o), 2,
                                       "Invalid value for '--beamwidth-deg': nan: expected a finite number"),
    "track --start 11.7 nan": (lambda d, o: ["track", "--start-lat", "11.7", "--start-lon", "nan", "--end-lat", "11.8", "--end-lon", "0", "--alt-m", "1000",
                                             "--spacing-m", "100", "--body-radius-m", "3e6", "--out", str(o)], 2,
                               "Invalid value for '--start-lon': nan: expected a finite number"),
    "track --alt-m -inf": (lambda d, o: ["track", "--start-lat", "11.7", "--start-lon", "0", "--end-lat", "11.8", "--end-lon", "0", "--alt-m", "-inf",
                                         "--spacing-m", "100", "--body-radius-m", "3e6", "--out", str(o)], 2,
                           "Invalid value for '--alt-m': -inf: expected a finite number"),
    "sources --delay-us nan": (lambda d, o: ["sources", str(d / "run"), "--trace", "0", "--delay-us", "nan"], 2,
                               "Invalid value for '--delay-us': nan: expected a finite number"),
    "survey --grid-km nan": (lambda d, o: ["survey", "--dem", str(d / "good.tif"), "--lat-min", "-0.5", "--lat-max", "0.5", "--lon-min", "-0.5", "--lon-max", "0.5",
                                           "--spacing-km", "10", "--alt-m", "1e5", "--grid-km", "nan", "--out", str(o)], 2,
                             "Invalid value for '--grid-km': nan: expected a finite number"),
    "compare --sample-interval-s nan": (lambda d, o: ["compare", "--observed", str(d / "obs.npy"), "--observed-track",
                                                      str(d / "t.csv"), "--sim", str(d / "run" / "radargram.nc"),
                                                      "--sample-interval-s", "nan", "--window-start-s", "0", "--out", str(o)], 2,
                                        "Invalid value for '--sample-interval-s': nan: expected a finite number"),
    # item 9: numbers checked for being finite and physically sensible before any work
    "transmit power 1e300 W": (lambda d, o: _simulate_args(d, ["--radar", _file(d, "p.toml", "[radar]\ntransmit_power_w = 1e300\n")], o), 1,
                               "{d}/p.toml: [radar] transmit_power_w = 1e+300: expected at most 1e+09 W"),
    "empty radar file": (lambda d, o: _simulate_args(d, ["--radar", _file(d, "empty.toml", "")], o), 1,
                         "{d}/empty.toml: no tables: expected at least [radar] (omit --radar for the built-in radar)"),
    "1 mHz carrier": (lambda d, o: _simulate_args(d, ["--radar", _file(d, "f.toml", "[radar]\ncenter_frequency_hz = 1e-3\n"
                                                                        "bandwidth_hz = 1e-3\nsample_interval_s = 1.0\n")], o), 1,
                      "{d}/t.csv: row 1: the antenna is 99986.8 m above the terrain, less than one wavelength (2.99792e+11 m); "
                      "expected the radar in the far field (a higher antenna or a higher center_frequency_hz)"),
    "noise temperature 1e300 K": (lambda d, o: _simulate_args(d, ["--radar", _file(d, "n.toml", "[noise]\nnoise_temperature_k = 1e300\n")], o), 1,
                                  "[noise] gives a noise power of 1.38e+284 W: expected at most 1e+09 W (k T B F: check "
                                  "noise_temperature_k and the noise figure)"),
    "sigma0 1e300": (lambda d, o: _simulate_args(d, ["--radar", _file(d, "s.toml", "[surface]\nlaw = 'constant'\nsigma0 = 1e300\n")], o), 1,
                     "{d}/s.toml: [surface] sigma0 = 1e+300 (law 'constant'): expected a backscatter coefficient of at "
                     "most 1e+06 (60 dB)"),
    # item 10 and issue 17 item 7: tracks
    "decimal commas": (lambda d, o: _simulate_args(d, ["--track", _file(d, "comma.csv", "lat,lon,alt\n11,8,41.0,300000\n")], o), 1,
                       "{d}/comma.csv: row 1 has 4 fields, the header 3: expected one value per column ('.' as the decimal "
                       "mark: a decimal comma splits numbers)"),
    "longitude -484": (lambda d, o: _simulate_args(d, ["--track", _file(d, "lon.csv", "lat,lon,alt\n0,-484,1e5\n0.1,0,1e5\n")], o), 1,
                       "{d}/lon.csv: column 'lon' row 1 = -484: expected -360..360 degrees (east-positive, -180..180 or 0..360)"),
    "jump of 120 degrees": (lambda d, o: _simulate_args(d, ["--track", _file(d, "jump.csv", "lat,lon,alt\n0,0,1e5\n0,120,1e5\n")], o), 1,
                            "{d}/jump.csv: rows 1 and 2 are 120.0° of arc apart (lat/lon 0, 0 then 0, 120): expected consecutive "
                            "traces within 90° (a wrong sign or longitude convention in one row?)"),
    "track --start 36.59 -484": (lambda d, o: ["track", "--start-lat", "36.59", "--start-lon", "-484", "--end-lat", "36.6", "--end-lon", "0", "--alt-m", "1000",
                                               "--spacing-m", "100", "--body-radius-m", "3e6", "--out", str(o)], 1,
                                 "start longitude -484.0: expected -360..360 degrees"),
    # item 1: a DEM whose every cell is beyond the plausible height
    "DEM of 1e9 m": (lambda d, o: _simulate_args(d, ["--dem", d / "huge.tif"], o), 1,
                     "{d}/huge.tif: every DEM cell read (8550) is beyond ±30 km of the reference surface (e.g. 1e+09 m): "
                     "expected heights in metres (a nodata value without its tag, or another unit?)"),
    # item 8: grads from the Paris meridian
    "EPSG:4807 DEM": (lambda d, o: _simulate_args(d, ["--dem", d / "paris.tif"], o), 1,
                      "{d}/paris.tif: geographic CRS 'NTF (Paris)' counts angles in grad: expected degrees; reproject the "
                      "DEM to a CRS in degrees"),
    # item 11: outputs that cannot be written
    "simulate --out under a file": (lambda d, o: _simulate_args(d, [], d / "afile" / "run"), 1,
                                    "{d}/afile/run: cannot write (a part of the path is a file, not a directory)"),
    "simulate --out name too long": (lambda d, o: _simulate_args(d, [], d / LONG), 1,
                                     "{d}/" + LONG + ": cannot write (file name too long)"),
    "track --out under a file": (lambda d, o: ["track", "--start-lat", "11.7", "--start-lon", "0", "--end-lat", "11.8", "--end-lon", "0", "--alt-m", "1000",
                                               "--spacing-m", "100", "--body-radius-m", "3e6", "--out", str(d / "afile" / "t.csv")], 1,
                                 "{d}/afile: cannot create the directory (a file of that name exists)"),
    "track --out name too long": (lambda d, o: ["track", "--start-lat", "11.7", "--start-lon", "0", "--end-lat", "11.8", "--end-lon", "0", "--alt-m", "1000",
                                                "--spacing-m", "100", "--body-radius-m", "3e6", "--out", str(d / (LONG + ".csv"))], 1,
                                  "{d}/" + LONG + ".csv: cannot write (file name too long)"),
    "report --out under a file": (lambda d, o: ["report", str(d / "run"), "--out", str(d / "afile" / "r.html"), "-q"], 1,
                                  "{d}/afile: cannot create the directory (a file of that name exists)"),
    "demo --out under a file": (lambda d, o: ["demo", "--out", str(d / "afile" / "demo"), "-q"], 1,
                                "{d}/afile/demo: cannot write (a part of the path is a file, not a directory)"),
    "compare --out under a file": (lambda d, o: ["compare", "--observed", str(d / "obs.npy"), "--observed-track", str(d / "t.csv"),
                                                 "--sim", str(d / "run" / "radargram.nc"), "--sample-interval-s", "37.5e-9",
                                                 "--window-start-s", "6e-4", "--out", str(d / "afile" / "cmp"), "-q"], 1,
                                   "{d}/afile/cmp: cannot write (a part of the path is a file, not a directory)"),
    "survey --out under a file": (lambda d, o: ["survey", "--dem", str(d / "good.tif"), "--lat-min", "-0.5", "--lat-max", "0.5", "--lon-min", "-0.5", "--lon-max", "0.5",
                                                "--spacing-km", "10", "--alt-m", "1e5", "--out", str(d / "afile" / "sv"), "-q"], 1,
                                  "{d}/afile/sv: cannot write (a part of the path is a file, not a directory)"),
}  # fmt: skip


@pytest.fixture(scope="module")
def run(d):
    """A finished run (for sources, report and compare cases) and an observed array of it."""
    res = CliRunner().invoke(cli, _simulate_args(d, [], d / "run"))
    assert res.exit_code == 0, res.output
    import xarray as xr

    with xr.open_dataset(d / "run" / "radargram.nc", engine="h5netcdf") as ds:
        np.save(d / "obs.npy", ds["power"].values)
        (d / "start.txt").write_text(repr(float(ds["window_start"].values.min())))
    return d / "run"


def _start(d):
    """The observed window start: that of the simulated run the observed array is a copy of."""
    return (d / "start.txt").read_text()


@pytest.mark.parametrize("case", list(CASES))
def test_bad_input_table(d, run, case, tmp_path):
    make, code, message = CASES[case]
    out = tmp_path / "out"
    args = [str(a) for a in make(d, out)]  # writes the case's input files
    before = _leftovers(d)
    res = CliRunner().invoke(cli, args)
    lines = one_line(res, code)
    expected = message.format(d=d)
    if code == 2 and not expected.startswith(str(d)):  # click's usage error: a usage line, a hint, then the error
        assert lines[-1] == "Error: " + expected, res.output
    else:
        assert lines == ["cluttersim: error: " + expected], res.output
    assert _leftovers(out) == []
    assert _leftovers(d) == before  # nothing new beside the inputs either (no partial, no lock, no directory)


# --------------------------------------------------------------------------- 1. extreme DEM cells


def test_extreme_cells_are_holes_with_one_warning_and_the_run_completes(d, tmp_path):
    """−3.4e38 and 1e20 crashed the kernel (exit 139): now two holes, named in one warning."""
    out = tmp_path / "o"
    res = CliRunner().invoke(cli, _simulate_args(d, ["--dem", d / "spikes.tif"], out))
    assert res.exit_code == 0, res.output
    assert ("cluttersim: warning: spikes.tif: 2 DEM cell(s) around the track have heights beyond ±30 km (the most extreme "
            "-3.40282e+38 m: a nodata value without its nodata tag?); they are treated as nodata") in res.output  # fmt: skip
    import xarray as xr

    with xr.open_dataset(out / "radargram.nc", engine="h5netcdf") as ds:
        assert np.isfinite(ds["power"].values).all() and float(ds["power"].max()) > 0


def test_survey_over_extreme_cells_runs(d, tmp_path):
    res = CliRunner().invoke(cli, ["survey", "--dem", str(d / "spikes.tif"), "--lat-min", "-0.6", "--lat-max", "0.6", "--lon-min", "-0.6", "--lon-max", "0.6",
                                   "--spacing-km", "20", "--alt-m", "1e5", "--trace-spacing-m", "3000", "--max-depth-m", "300",
                                   "--workers", "1", "--out", str(tmp_path / "sv"), "-q"])  # fmt: skip
    assert res.exit_code == 0, res.output
    assert "beyond ±30 km" in res.output and "window" not in res.output


def test_height_bound_per_body():
    """±30 km for Earth- and Mars-sized bodies (Mars: Olympus Mons ~+21.9 km, Hellas ~−8.2 km; Earth
    +8.8/−11.0 km: from memory), 1.5 mean radii for a small body."""
    assert height_limit_m(MARS_RADIUS_M) == 30e3
    assert height_limit_m(6_371_000.0) == 30e3
    assert height_limit_m(11_000.0) == 16_500.0


def test_kernel_is_index_safe_for_any_finite_height(d, tmp_path):
    """With the height check switched off, cells of ±3.4e38, 1e20 and 1e9 m reach the compiled kernel:
    it must end normally (a clean error is acceptable), never with a crash (exit 139 = SIGSEGV)."""
    script = textwrap.dedent(f"""
        import cluttersim.io.dem as dem
        dem.mask_implausible_heights = lambda elevation, body, path: (0, 0.0)
        from cluttersim.errors import ClutterSimError
        from cluttersim import simulate
        for name in ("spikes.tif", "huge.tif"):
            try:
                simulate({str(d)!r} + "/" + name, {str(d / "t.csv")!r})
            except ClutterSimError as exc:
                print("clean error:", exc)
        print("survived")
    """)  # fmt: skip
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, (done.returncode, done.stderr[-2000:])
    assert "survived" in done.stdout


# --------------------------------------------------------------------------- 2. disk full


@pytest.mark.parametrize("command", ["simulate", "track", "survey", "compare"])
def test_no_space_left_is_one_line_and_nothing_is_left(d, run, tmp_path, monkeypatch, command):
    """ENOSPC injected where the bytes go to disk (the netCDF image, the CSV): one line naming the
    product, exit 1, no temporary file, no directory."""
    from cluttersim.io import radargram
    from cluttersim import track

    def full(*args, **kwargs):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(radargram.os, "fsync", full)  # where a full disk reports at the latest
    monkeypatch.setattr(track.Track, "to_csv", lambda self, path: full())
    out = tmp_path / "out"
    args = {
        "simulate": _simulate_args(d, [], out),
        "track": ["track", "--start-lat", "11.7", "--start-lon", "0", "--end-lat", "11.8", "--end-lon", "0", "--alt-m", "1000", "--spacing-m", "100",
                  "--body-radius-m", "3e6", "--out", str(out / "t.csv")],
        "survey": ["survey", "--dem", str(d / "good.tif"), "--lat-min", "-0.5", "--lat-max", "0.5", "--lon-min", "-0.5", "--lon-max", "0.5", "--spacing-km", "20",
                   "--alt-m", "1e5", "--trace-spacing-m", "3000", "--max-depth-m", "300", "--workers", "1", "--out", str(out), "-q"],
        "compare": ["compare", "--observed", str(d / "obs.npy"), "--observed-track", str(d / "t.csv"), "--sim",
                    str(run / "radargram.nc"), "--sample-interval-s", "37.5e-9", "--window-start-s", _start(d), "--out", str(out), "-q"],
    }[command]  # fmt: skip
    res = CliRunner().invoke(cli, args)
    lines = one_line(res, 1)
    assert len(lines) == 1 and lines[0].startswith("cluttersim: error: no space left on the device while writing "), res.output
    written = {"simulate": out / "radargram.nc", "track": out / "t.csv", "compare": out / "comparison.nc"}.get(command)
    if written is not None:
        assert lines[0].endswith(str(written))
    assert _leftovers(out) == []


@pytest.fixture
def small_fs(tmp_path):
    """A real 400 kB file system (tmpfs): needs root and mount; skipped otherwise."""
    mnt = tmp_path / "small"
    mnt.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=400k", "tmpfs", str(mnt)], capture_output=True)
    if done.returncode != 0:
        pytest.skip("cannot mount a tmpfs here (not root?)")
    try:
        yield mnt
    finally:
        subprocess.run(["umount", "-l", str(mnt)], capture_output=True)


def test_a_really_full_file_system(d, small_fs):
    """Almost full (some 100 kB free): HDF5 crashed the interpreter (exit 139) after its write error."""
    (small_fs / "fill").write_bytes(b"\0" * 300_000)
    out = small_fs / "run"
    done = subprocess.run([str(CLUTTERSIM), *map(str, _simulate_args(d, [], out)[0:]) ], capture_output=True, text=True,
                          timeout=600)  # fmt: skip
    assert done.returncode == 1, done.stderr
    assert done.stderr.strip().splitlines() == [f"cluttersim: error: no space left on the device while writing {out}/radargram.nc"] or \
        done.stderr.strip().startswith("cluttersim: error: no space left on the device while writing "), done.stderr  # fmt: skip
    assert len(done.stderr.strip().splitlines()) == 1 and "Traceback" not in done.stderr
    assert sorted(p.name for p in small_fs.iterdir()) == ["fill"]


def test_read_only_file_system(d, tmp_path):
    mnt = tmp_path / "ro"
    mnt.mkdir()
    if subprocess.run(["mount", "-t", "tmpfs", "-o", "ro,size=64k", "tmpfs", str(mnt)], capture_output=True).returncode:
        pytest.skip("cannot mount a tmpfs here (not root?)")
    try:
        res = CliRunner().invoke(cli, _simulate_args(d, [], mnt / "run"))
        assert one_line(res, 1) == [f"cluttersim: error: {mnt}/run: cannot write (read-only file system)"]
        res = CliRunner().invoke(cli, ["track", "--start-lat", "11.7", "--start-lon", "0", "--end-lat", "11.8", "--end-lon", "0", "--alt-m", "1000",
                                       "--spacing-m", "100", "--body-radius-m", "3e6", "--out", str(mnt / "t.csv")])  # fmt: skip
        assert one_line(res, 1) == [f"cluttersim: error: {mnt}/t.csv: cannot write (read-only file system)"]
    finally:
        subprocess.run(["umount", "-l", str(mnt)], capture_output=True)


# --------------------------------------------------------------------------- 3, 4. interrupts

_INJECT = """
import os, signal, sys
import cluttersim.io.radargram as rg
import cluttersim.io.outputs as outputs
mode = sys.argv[1]
original_write = rg.write_netcdf_to
original_replace = os.replace
def swallowing_write(ds, path):
    original_write(ds, path)
    try:  # an interrupt that a library's clean-up swallows, as h5py's did
        os.kill(os.getpid(), signal.SIGINT)
        for _ in range(1000):
            pass
    except KeyboardInterrupt:
        pass
calls = []
def interrupted_replace(src, dst):
    if os.path.basename(str(dst)) == "radargram.nc":  # the first product renamed into place
        os.kill(os.getpid(), signal.SIGTERM)
    return original_replace(src, dst)
if mode == "swallowed":
    rg.write_netcdf_to = swallowing_write
    import cluttersim.products as products
    products.write_netcdf_to = swallowing_write
elif mode == "commit":
    outputs.os.replace = interrupted_replace
from cli.main import main
main(sys.argv[2:])
"""


def _inject(mode, args, cwd):
    return subprocess.run([sys.executable, "-c", _INJECT, mode, *map(str, args)], capture_output=True, text=True,
                          timeout=600, cwd=cwd)  # fmt: skip


def test_an_interrupt_swallowed_by_the_writer_still_ends_in_130_with_the_old_products(d, tmp_path):
    out = tmp_path / "run"
    first = _inject("none", _simulate_args(d, [], out), ROOT)
    assert first.returncode == 0, first.stderr
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    done = _inject("swallowed", _simulate_args(d, ["--first-return-db", "-10", "--overwrite"], out), ROOT)
    assert done.returncode == 130, done.stderr
    assert done.stderr.strip().splitlines() == ["cluttersim: interrupted; no output was written"]
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before  # the old products, byte for byte


def test_an_interrupt_while_the_products_are_renamed_ends_in_130_with_the_new_ones_complete(d, tmp_path):
    out = tmp_path / "run"
    done = _inject("commit", _simulate_args(d, [], out), ROOT)
    assert done.returncode == 130, done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("cluttersim: interrupted; 5 product(s) written before it are complete")  # with the elevation figure
    assert sorted(p.name for p in out.iterdir()) == ["radargram.nc", "radargram.png", "radargram_elevation.png", "radargram_sides.png",
                                                        "track_map.png"]
    from cluttersim.io.radargram import open_radargram

    assert open_radargram(out / "radargram.nc")["power"].shape == (2, 2048)


def _big_scene(tmp_path):
    z = np.random.default_rng(1).normal(0.0, 30.0, (1800, 800))
    dem = write_geotiff(tmp_path / "big.tif", z, -0.8, 1.8, 0.002)
    great_circle_track(Body.sphere(MARS_RADIUS_M), -1.0, 0.0, 1.0, 0.0, 100e3, 30.0).to_csv(tmp_path / "track.csv")
    return dem, tmp_path / "track.csv"


def test_sigterm_is_handled_like_sigint(tmp_path):
    dem, track = _big_scene(tmp_path)
    out = tmp_path / "run"
    err_path = tmp_path / "stderr.txt"
    rc, text = interrupt_when(["simulate", "--dem", dem, "--track", track, "--out", out],
                              lambda: "simulating" in err_path.read_text(), signal.SIGTERM, err_path, too_soon="the scene",
                              poll_s=0.1)  # fmt: skip
    assert rc == 130, text
    assert "cluttersim: interrupted; no output was written" in text and "Traceback" not in text
    assert _leftovers(out) == []


def _loaded(pid, library):
    try:
        return library in Path(f"/proc/{pid}/maps").read_text()
    except OSError:
        return False


def test_interrupt_during_start_up_isone_line(tmp_path, d):
    """SIGINT as soon as NumPy is loaded (the imports of the command have begun: they take a second
    or two), and again a little later: whatever it interrupts, one line, exit 130. (An interrupt
    before Python's own start-up has run, within a few ms, is Python's to report.)"""
    if not Path("/proc/self/maps").exists():
        pytest.skip("needs /proc to see what a process has loaded")
    for delay in (0.0, 0.5):
        proc = subprocess.Popen([str(CLUTTERSIM), *map(str, _simulate_args(d, [], tmp_path / f"o{delay}"))],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)  # fmt: skip
        deadline = time.monotonic() + 60
        while not _loaded(proc.pid, "_multiarray_umath") and proc.poll() is None:
            assert time.monotonic() < deadline
            time.sleep(0.005)
        time.sleep(delay)
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=120)
        assert proc.returncode == 130, err
        assert "Traceback" not in err and len(err.strip().splitlines()) == 1, err
        assert err.startswith("cluttersim: interrupted"), err


def _dead_pid():
    pid = 4_000_000
    while outputs.pid_alive(pid):
        pid -= 1
    return pid


def test_stale_partials_of_dead_processes_are_removed_and_live_ones_kept(d, tmp_path):
    out = tmp_path / "run"
    out.mkdir()
    dead = out / f".radargram.nc.partial-{_dead_pid()}"
    dead.write_bytes(b"left by a killed run")
    live = out / f".radargram.nc.partial-{os.getppid()}"  # a running process (this test's parent)
    live.write_bytes(b"still being written")
    res = CliRunner().invoke(cli, _simulate_args(d, [], out))
    assert res.exit_code == 0, res.output
    assert not dead.exists() and live.exists()
    assert outputs.LOCK_NAME not in [p.name for p in out.iterdir()]


# --------------------------------------------------------------------------- 5. survey workers


@pytest.fixture(scope="module")
def massif(tmp_path_factory):
    d = tmp_path_factory.mktemp("massif")
    n, res = 160, 350.0
    east, north = utm_grid(n, res)
    z = 1000.0 * np.clip(1.0 - np.hypot(east - UTM_X0_M, north - UTM_Y0_M) / 12e3, 0.0, None)
    return write_utm(d / "massif.tif", z, res)


def _region(massif):
    with rasterio.open(massif) as src:
        b = src.bounds
    to_geo = pyproj.Transformer.from_crs(src.crs.to_wkt(), "EPSG:4326", always_xy=True)
    lon0, lat0 = to_geo.transform(b.left + 5e3, b.bottom + 5e3)
    lon1, lat1 = to_geo.transform(b.right - 5e3, b.top - 5e3)
    return [lon0, lat0, lon1, lat1]


def _survey_args(massif, out, *extra):
    return ["survey", "--dem", str(massif), *region_args(_region(massif)), "--spacing-km", "2", "--alt-m", "1e5",
            "--trace-spacing-m", "700", "--max-depth-m", "300", "--out", str(out), *map(str, extra)]  # fmt: skip


@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM])
def test_survey_workers_die_with_their_parent(massif, tmp_path, sig):
    psutil = pytest.importorskip("psutil")
    out = tmp_path / "out"
    proc = subprocess.Popen([str(CLUTTERSIM), *_survey_args(massif, out, "--workers", "2")],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)  # fmt: skip
    try:
        parent = psutil.Process(proc.pid)
        deadline = time.monotonic() + 120
        while not list((out / "tracks").glob("*.nc")) and proc.poll() is None:
            assert time.monotonic() < deadline, "no track finished"
            time.sleep(0.05)
        assert proc.poll() is None, "finished before it could be stopped: make the survey bigger"
        children = parent.children(recursive=True)
        assert len(children) >= 2
        proc.send_signal(sig)
        proc.wait(timeout=60)
        gone, alive = psutil.wait_procs(children, timeout=15)
        assert alive == [], [p.cmdline() for p in alive]
        if sig == signal.SIGTERM:
            assert proc.returncode == 130
            err = proc.stderr.read()
            assert "Traceback" not in err and "interrupted" in err
    finally:
        if proc.poll() is None:
            proc.kill()


# --------------------------------------------------------------------------- 6. locks


_HOLD = """
import sys, time
from cluttersim.io.outputs import lock_directory
with lock_directory(sys.argv[1]):
    print("locked", flush=True)
    time.sleep(120)
"""


def test_a_second_run_into_a_locked_directory_stops_naming_the_owner(d, massif, tmp_path):
    out = tmp_path / "out"
    holder = subprocess.Popen([sys.executable, "-c", _HOLD, str(out)], stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "locked"
        for args in (_simulate_args(d, [], out), _survey_args(massif, out, "--workers", "1", "-q")):
            res = CliRunner().invoke(cli, args)
            assert one_line(res, 2) == [f"cluttersim: error: {out}: in use by another cluttersim run (pid {holder.pid}); "
                                         "wait for it to end or choose another --out"]  # fmt: skip
        assert sorted(p.name for p in out.iterdir()) == [outputs.LOCK_NAME]
        with pytest.raises(OutputLockedError):
            with outputs.lock_directory(out):
                pass
    finally:
        holder.kill()
        holder.wait()
    res = CliRunner().invoke(cli, _simulate_args(d, [], out))  # the owner is gone: the lock is free
    assert res.exit_code == 0, res.output
    assert outputs.LOCK_NAME not in [p.name for p in out.iterdir()]


def test_the_lock_is_reentrant_and_leaves_nothing(tmp_path):
    out = tmp_path / "new" / "dir"
    with outputs.lock_directory(out):
        with outputs.lock_directory(out):
            assert (out / outputs.LOCK_NAME).read_text() == f"pid {os.getpid()}\n"
    assert not (tmp_path / "new").exists()  # created for the lock, empty: removed


# --------------------------------------------------------------------------- 7. survey resume key


def test_survey_resume_key_follows_the_dem_content(massif, tmp_path):
    """Same path, same size, one pixel changed: the finished tracks are not reused."""
    from cluttersim.analysis.survey import dem_digest

    dem = tmp_path / "dem.tif"
    dem.write_bytes(massif.read_bytes())
    out = tmp_path / "out"
    args = _survey_args(dem, out, "--workers", "1", "-q")
    assert CliRunner().invoke(cli, args).exit_code == 0
    size, digest = dem.stat().st_size, dem_digest(dem)
    with rasterio.open(dem, "r+") as ds:
        z = ds.read(1)
        z[80, 80] += 500.0
        ds.write(z, 1)
    assert dem.stat().st_size == size and dem_digest(dem) != digest
    (out / "survey.csv").unlink()  # as after an interrupted survey: tracks only
    (out / "clutter_map.tif").unlink()
    (out / "clutter_map.png").unlink()
    res = CliRunner().invoke(cli, args)
    lines = one_line(res, 2)
    assert len(lines) == 1 and "made by a survey with other arguments (DEM, radar, window or track)" in lines[0]


# --------------------------------------------------------------------------- 8. units in metadata


def _write_band(path, values, dtype, *, scale=1.0, offset=0.0, unit=None, crs="IAU_2015:49900", nodata=None):
    profile = dict(driver="GTiff", width=values.shape[1], height=values.shape[0], count=1, dtype=dtype,
                   transform=from_origin(-1, 1, 0.02, 0.02), crs=RioCRS.from_wkt(pyproj.CRS(crs).to_wkt()), nodata=nodata)  # fmt: skip
    with rasterio.open(path, "w", **profile) as ds:
        ds.write(values.astype(dtype), 1)
        ds.scales = (scale,)
        ds.offsets = (offset,)
        if unit is not None:
            ds.units = (unit,)
    return path


def test_band_scale_and_offset_are_applied(tmp_path):
    """int16 stored s, height = s · 0.5 + 100 m (GDAL's scale/offset): known heights back."""
    stored = np.arange(-50, 50, dtype=np.int16).reshape(10, 10)
    src = DemSource.open(_write_band(tmp_path / "s.tif", stored, "int16", scale=0.5, offset=100.0, nodata=-32768))
    z = src.read(rasterio.windows.Window(0, 0, 10, 10)).elevation_m
    np.testing.assert_array_equal(z, stored * 0.5 + 100.0)


@pytest.mark.parametrize("unit, metres", [("ft", 0.3048), ("US survey foot", 1200 / 3937), ("m", 1.0), ("metre", 1.0)])
def test_vertical_units_are_converted(tmp_path, unit, metres):
    """International foot 0.3048 m exactly, US survey foot 1200/3937 m (NIST Handbook 44, App. C)."""
    stored = np.full((10, 10), 1000.0)
    src = DemSource.open(_write_band(tmp_path / "f.tif", stored, "float32", unit=unit))
    z = src.read(rasterio.windows.Window(0, 0, 10, 10)).elevation_m
    np.testing.assert_allclose(z, 1000.0 * metres, rtol=1e-12)


def test_unknown_vertical_unit_is_refused(tmp_path):
    path = _write_band(tmp_path / "u.tif", np.zeros((10, 10)), "float32", unit="furlong")
    with pytest.raises(DemError, match=r"band unit 'furlong' not understood: expected metres \(m\) or feet"):
        DemSource.open(path)


def test_survey_grid_on_a_crs_in_feet_has_cells_of_grid_km(tmp_path):
    """EPSG:2229 (California zone 5, US survey feet): --grid-km 1 gives 1000 m cells, 3280.8 ft."""
    from cluttersim.analysis.survey import SurveyConfig, SurveyGrid

    crs = pyproj.CRS("EPSG:2229")
    x0, y0 = 6_500_000.0, 1_900_000.0  # ft
    path = tmp_path / "ft.tif"
    profile = dict(driver="GTiff", width=200, height=200, count=1, dtype="float32",
                   transform=from_origin(x0, y0, 500.0, 500.0), crs=RioCRS.from_wkt(crs.to_wkt()))  # fmt: skip
    with rasterio.open(path, "w", **profile) as ds:
        ds.write(np.zeros((200, 200), "float32"), 1)
    src = DemSource.open(path)
    lon0, lat0 = src.xy_to_lonlat(x0 + 10_000, y0 - 90_000)
    lon1, lat1 = src.xy_to_lonlat(x0 + 90_000, y0 - 10_000)
    config = SurveyConfig(region=(float(lon0), float(lat0), float(lon1), float(lat1)), spacing_km=5.0, alt_m=1e4, grid_km=1.0)
    grid = SurveyGrid.for_region(src, config)
    assert math.isclose(grid.transform.a, 1000.0 / (1200 / 3937), rel_tol=1e-9)


# --------------------------------------------------------------------------- 10. silent misreads


def test_a_byte_order_mark_is_not_part_of_the_header(d, tmp_path):
    track = _file(tmp_path, "bom.csv", "\ufefflat,lon,alt\n0,0,100000\n0.1,0,100000\n".encode("utf-8"))
    res = CliRunner().invoke(cli, _simulate_args(d, ["--track", track], tmp_path / "o"))
    assert res.exit_code == 0, res.output


def test_repeated_positions_take_the_nearest_direction_of_travel_and_say_so(d, tmp_path):
    """A repeated last row had no direction of travel (central differences give 0 at the end), so
    left = right = 0 everywhere in it: now it flies on like its neighbour, with a warning."""
    import xarray as xr

    track = _file(tmp_path, "dup.csv", "lat,lon,alt\n0,0,100000\n0.05,0,100000\n0.1,0.05,100000\n0.1,0.05,100000\n")
    res = CliRunner().invoke(cli, _simulate_args(d, ["--track", track], tmp_path / "o"))
    assert res.exit_code == 0, res.output
    assert (f"cluttersim: warning: {track}: 1 trace(s) without a horizontal direction of travel of their own (repeated "
            "positions; the first at row 4); left and right use the nearest moving trace's direction") in res.output  # fmt: skip
    with xr.open_dataset(tmp_path / "o" / "radargram.nc", engine="h5netcdf") as ds:
        for t in (3,):
            sides = np.nansum(ds["left_fraction"].values[t] + ds["right_fraction"].values[t])
            assert sides > 0  # echoes from beside the track are attributed to a side again


def test_overwrite_without_sources_removes_the_old_side_figure_and_says_so(d, tmp_path):
    out = tmp_path / "run"
    assert CliRunner().invoke(cli, _simulate_args(d, [], out)).exit_code == 0
    assert (out / "radargram_sides.png").exists()
    res = CliRunner().invoke(cli, _simulate_args(d, ["--overwrite", "--no-sources"], out))
    assert res.exit_code == 0, res.output
    assert f"cluttersim: warning: {out}: removed radargram_sides.png of the previous run (not made by this one)" in res.output
    assert sorted(p.name for p in out.iterdir()) == ["radargram.nc", "radargram.png", "radargram_elevation.png", "track_map.png"]


def test_report_refuses_a_comparison_paired_with_another_run(d, run, tmp_path):
    cmp_dir = tmp_path / "cmp"
    res = CliRunner().invoke(cli, ["compare", "--observed", str(d / "obs.npy"), "--observed-track", str(d / "t.csv"),
                                   "--sim", str(run / "radargram.nc"), "--sample-interval-s", "37.5e-9",
                                   "--window-start-s", _start(d), "--out", str(cmp_dir), "-q"])  # fmt: skip
    assert res.exit_code == 0, res.output
    other = tmp_path / "other"  # the same track 2 km higher: same shape, other windows
    _file(tmp_path, "t2.csv", "lat,lon,alt\n0,0,102000\n0.1,0,102000\n")
    assert CliRunner().invoke(cli, _simulate_args(d, ["--track", tmp_path / "t2.csv"], other)).exit_code == 0
    res = CliRunner().invoke(cli, ["report", str(cmp_dir), "--sim", str(other / "radargram.nc"), "-q"])
    lines = one_line(res, 1)
    assert len(lines) == 1 and lines[0].startswith(f"cluttersim: error: {other}/radargram.nc: trace 0 has window_start ")
    assert lines[0].endswith("expected the simulated radargram of that comparison")
    assert not (cmp_dir / "report.html").exists()


# --------------------------------------------------------------------------- 12. memory guard


def test_a_tiny_sample_interval_is_refused_before_the_pulse_is_allocated(d, tmp_path, monkeypatch):
    sim_module = sys.modules["cluttersim.simulate"]  # the module (the package exports the function by that name)

    def never(*args, **kwargs):
        raise AssertionError("the pulse response was computed before the memory check")

    monkeypatch.setattr(sim_module, "pulse_power_kernel", never)
    radar = _file(tmp_path, "dt.toml", "[radar]\nsample_interval_s = 1e-12\n")
    res = CliRunner().invoke(cli, _simulate_args(d, ["--radar", radar, "--max-memory", "4GB"], tmp_path / "o"))
    lines = one_line(res, 1)
    assert len(lines) == 1 and lines[0].startswith("cluttersim: error: this run needs about "), res.output
    assert "more than 4.0 GB, the limit given (--max-memory)" in lines[0]


def test_compare_checks_the_observed_array_against_max_memory_before_reading_it(d, run, tmp_path, monkeypatch):
    big = tmp_path / "big.npy"
    arr = np.lib.format.open_memmap(big, mode="w+", dtype=np.float32, shape=(2, 50_000_000))  # sparse on disk
    del arr

    def never(*args, **kwargs):
        raise AssertionError("the observed array was read before the memory check")

    monkeypatch.setattr(np, "load", never)
    res = CliRunner().invoke(cli, ["compare", "--observed", str(big), "--observed-track", str(d / "t.csv"), "--sim",
                                   str(run / "radargram.nc"), "--sample-interval-s", "37.5e-9", "--window-start-s", "6e-4",
                                   "--max-memory", "1GB", "--out", str(tmp_path / "cmp"), "-q"])  # fmt: skip
    assert one_line(res, 1) == [
        f"cluttersim: error: {big}: the observed array (2 x 50,000,000 values) needs about 2.8 GB to compare; more than "
        "1.0 GB, the limit given (--max-memory). Cut it into shorter pieces along the track, or raise --max-memory"
    ]
    assert _leftovers(tmp_path / "cmp") == []


def test_a_huge_sparse_dem_is_refused_from_its_metadata(tmp_path, monkeypatch):
    """A 200,000² DEM header (a sparse file of a few kB): refused before any pixel is read."""
    path = tmp_path / "sparse.tif"
    profile = dict(driver="GTiff", width=200_000, height=200_000, count=1, dtype="float32", tiled=True, blockxsize=512,
                   blockysize=512, sparse_ok=True, bigtiff="YES", nodata=-32768.0,
                   transform=from_origin(-90.0, 90.0, 0.0009, 0.0009),
                   crs=RioCRS.from_wkt(pyproj.CRS("IAU_2015:49900").to_wkt()))  # fmt: skip
    with rasterio.open(path, "w", **profile):
        pass
    assert path.stat().st_size < 50e6
    track = _file(tmp_path, "t.csv", "lat,lon,alt\n0,-60,300000\n0,0,300000\n0,60,300000\n")  # a window 120° wide

    def never(self, *args, **kwargs):
        raise AssertionError("DEM pixels were read before the memory check")

    monkeypatch.setattr(DemSource, "read", never)
    res = CliRunner().invoke(cli, ["simulate", "--dem", str(path), "--track", str(track), "--max-memory", "8GB",
                                   "--out", str(tmp_path / "o"), "-q"])  # fmt: skip
    lines = one_line(res, 1)
    assert len(lines) == 1 and lines[0].startswith("cluttersim: error: this run needs about "), res.output
    assert _leftovers(tmp_path / "o") == []
