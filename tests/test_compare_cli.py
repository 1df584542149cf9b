"""`cluttersim compare`: observed file formats, products, summary, and one test per bad input (invented data)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import rasterio
import xarray as xr
from click.testing import CliRunner
from rasterio.transform import from_origin

from cli.main import cli
from cluttersim.io.observed import ObservedFormat, load_observed
from cluttersim.products import simulate_to_dir
from test_compare import DT, NTRACE, hill_scene, observe

SAMPLES = 520  # observed samples per trace (see test_compare.observe)
PNG_SCALE = 65535.0  # 16-bit image counts of the largest amplitude


@pytest.fixture(scope="module", name="files")
def files_fixture(tmp_path_factory):
    """A simulated run of the hill scene, and an observed radargram of the same track: the
    simulation 7.3 samples late, with a reflector 40 m deep (ε′ = 3.15), gain and noise."""
    d = tmp_path_factory.mktemp("compare")
    dem, track, cfg = hill_scene(d)
    simulate_to_dir(dem, track, cfg, d / "run")
    with xr.open_dataset(d / "run" / "radargram.nc", engine="h5netcdf") as sim:
        sim = sim.load()
    power, start = observe(sim, shift_samples=7.3, seed=8, reflector_depth_m=40.0, samples=SAMPLES)
    track.to_csv(d / "track.csv")
    # the same track with each trace's window start as an extra column
    lines = (d / "track.csv").read_text().splitlines()
    (d / "track_ws.csv").write_text("\n".join([lines[0] + ",ws"] + [f"{row},{float(s)!r}" for row, s in zip(lines[1:], start)]) + "\n")
    amplitude = np.sqrt(power).astype(np.float32)
    np.save(d / "obs.npy", amplitude)
    return {"dir": d, "dem": dem, "sim": d / "run" / "radargram.nc", "track": d / "track.csv", "amplitude": amplitude,
            "power": power, "start": float(start[0]), "radar": cfg}  # fmt: skip


def run(args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def base_args(f, out, observed=None, track=None):
    return [
        "compare", "--observed", observed or f["dir"] / "obs.npy", "--observed-track", track or f["track"],
        "--sample-interval-s", DT, "--window-start-s", repr(f["start"]), "--values", "amplitude", "--out", out,
    ]  # fmt: skip


def test_compare_prints_a_summary_and_writes_the_products(files):
    out = files["dir"] / "cmp"
    res = run(base_args(files, out) + ["--sim", files["sim"]])
    assert res.exit_code == 0, res.output
    text = res.output
    assert f"{NTRACE} of {NTRACE} observed traces matched by time" in text
    offset_line = next(line for line in text.splitlines() if line.startswith("delay offset:"))
    samples = float(offset_line.split()[2])  # "delay offset: +7.300 ± …"
    assert samples == pytest.approx(7.3, abs=0.25)
    assert "µs" in offset_line and "±" in offset_line
    assert next(line for line in text.splitlines() if line.startswith("gain:")).split()[1].startswith("+23.")
    lines = text.splitlines()
    top = lines[next(i for i, line in enumerate(lines) if line.split()[:2] == ["rank", "trace"]) + 1].split()
    assert top[0] == "1" and float(top[4]) == pytest.approx(40.0, abs=1.0)  # depth_m of the top candidate
    names = sorted(p.name for p in out.iterdir())
    assert names == ["candidates.csv", "candidates.geojson", "comparison.nc", "difference.png", "overlay.png",
                     "side_by_side.png"]
    again = run(base_args(files, out) + ["--sim", files["sim"]])
    assert again.exit_code == 2 and "already exists; pass --overwrite" in again.output
    assert run(base_args(files, out) + ["--sim", files["sim"], "--overwrite", "-q"]).exit_code == 0


def test_compare_can_simulate_the_observed_track_on_the_fly(files, tmp_path):
    radar = tmp_path / "radar.toml"
    r = files["radar"].radar
    radar.write_text(
        f"[radar]\ncenter_frequency_hz = {r.center_frequency_hz}\nbandwidth_hz = {r.bandwidth_hz}\n"
        f"sample_interval_s = {r.sample_interval_s}\nsamples = 384\n"
        "[surface]\nlaw = \"gaussian\"\nrms_slope_deg = 2.0\nrho = 0.1\n"
    )
    out = tmp_path / "cmp"
    res = run(base_args(files, out) + ["--dem", files["dem"], "--radar", radar, "--per-trace-offset",
                                       "--offset-window-traces", "9"])  # fmt: skip
    assert res.exit_code == 0, res.output
    assert (out / "radargram.nc").exists()
    with xr.open_dataset(out / "radargram.nc", engine="h5netcdf") as sim:
        assert sim.sizes["sample"] == SAMPLES  # simulated on the observed sampling
    with xr.open_dataset(out / "comparison.nc", engine="h5netcdf") as ds:
        assert ds.attrs["delay_offset_samples"] == pytest.approx(7.3, abs=0.25)
        np.testing.assert_allclose(ds["delay_offset"].values / DT, 7.3, atol=0.3)
    assert "per-trace offset:" in res.output


# --------------------------------------------------------------------------- formats


def _write_netcdf(f, d):
    # stored sample × trace: the dimension names say so
    path = d / "obs.nc"
    xr.Dataset({"amp": (("sample", "trace"), f["amplitude"].T), "other": ("trace", np.zeros(NTRACE))}).to_netcdf(path, engine="h5netcdf")
    return path, ["--variable", "amp"]


def _write_hdf5(f, d):
    import h5py

    path = d / "obs.h5"
    with h5py.File(path, "w") as h5:
        h5["science/amplitude"] = f["amplitude"]
        h5["science/flags"] = np.zeros((3, 3))
    return path, ["--variable", "science/amplitude"]


def _write_geotiff(f, d):
    path = d / "obs.tif"  # a picture of the radargram: rows are samples, columns traces
    img = f["amplitude"].T
    with rasterio.open(path, "w", driver="GTiff", width=img.shape[1], height=img.shape[0], count=1, dtype="float32",
                       transform=from_origin(100.0, 100.0, 1.0, 1.0)) as ds:  # fmt: skip
        ds.write(img, 1)
    return path, []


def _write_png(f, d):
    from PIL import Image

    path = d / "obs.png"  # 16-bit greyscale amplitudes, scaled to use the range
    scale = PNG_SCALE / f["amplitude"].max()
    Image.fromarray(np.round(f["amplitude"].T * scale).astype(np.uint16)).save(path)
    return path, []


def _write_raw(f, d):
    path = d / "obs.dat"  # big-endian float32 with a 64-byte header
    path.write_bytes(b"\x00" * 64 + f["amplitude"].astype(">f4").tobytes())
    return path, ["--raw-dtype", "float32", "--raw-shape", NTRACE, SAMPLES, "--byte-order", "big", "--raw-offset-bytes", 64]


#: The library's view of each writer's command-line options.
FORMAT_OPTIONS = {
    "netcdf": {"variable": "amp"},
    "hdf5": {"variable": "science/amplitude"},
    "raw": {"raw_dtype": "float32", "raw_shape": (NTRACE, SAMPLES), "byte_order": "big", "raw_offset_bytes": 64},
}
WRITERS = {"netcdf": _write_netcdf, "hdf5": _write_hdf5, "geotiff": _write_geotiff, "png": _write_png, "raw": _write_raw}


@pytest.mark.parametrize("kind", list(WRITERS))
def test_every_format_reads_the_same_radargram(files, tmp_path, kind):
    path, extra = WRITERS[kind](files, tmp_path)
    fmt = ObservedFormat(values="amplitude", **FORMAT_OPTIONS.get(kind, {}))
    obs = load_observed(path, files["track"], DT, window_start_s=files["start"], fmt=fmt)
    amplitude = files["amplitude"].astype(np.float64)
    if kind == "png":  # 16-bit counts: amplitude × scale, rounded
        np.testing.assert_allclose(np.sqrt(obs.power), amplitude * PNG_SCALE / amplitude.max(), atol=0.5 + 1e-9)
    else:
        np.testing.assert_allclose(obs.power, amplitude**2, rtol=1e-6)
    res = run(base_args(files, tmp_path / "out", observed=path) + extra + ["--sim", files["sim"], "-q"])
    assert res.exit_code == 0, res.output


def test_window_start_per_trace_from_a_column_and_db_values(files, tmp_path):
    path = tmp_path / "obs_db.npy"
    np.save(path, 10 * np.log10(files["power"]))
    obs = load_observed(path, files["dir"] / "track_ws.csv", DT, window_start_column="ws", fmt=ObservedFormat(values="db"))
    np.testing.assert_allclose(obs.power, files["power"], rtol=1e-12)
    np.testing.assert_array_equal(obs.window_start_s, files["start"])


# --------------------------------------------------------------------------- bad input: one line, exit code, nothing written


def cli_args(f, out, **changes):
    """`compare` arguments of a good run, with options changed (None removes one); keys use _ for -."""
    opts = {
        "--observed": f["dir"] / "obs.npy", "--observed-track": f["track"], "--sample-interval-s": DT,
        "--window-start-s": repr(f["start"]), "--values": "amplitude", "--sim": f["sim"], "--out": out,
    }  # fmt: skip
    opts.update({"--" + k.replace("_", "-"): v for k, v in changes.items()})
    args = ["compare"]
    for name, value in opts.items():
        if value is not None:
            args += [name, *(value if isinstance(value, tuple) else (value,))]
    return [str(a) for a in args]


def _npy(d, name, array):
    np.save(d / name, array)
    return d / name


def _nan_trace(f, d):
    a = f["amplitude"].copy()
    a[5] = np.nan
    return {"observed": _npy(d, "nan.npy", a)}


def _short_track(f, d):
    lines = f["track"].read_text().splitlines()
    (d / "short.csv").write_text("\n".join(lines[:-1]) + "\n")
    return {"observed_track": d / "short.csv"}


def _raw_size(f, d):
    (d / "obs.bin").write_bytes(f["amplitude"].astype("<f4").tobytes())
    return {"observed": d / "obs.bin", "raw_dtype": "float32", "raw_shape": (NTRACE, SAMPLES + 10)}


def _missing_variable(f, d):
    xr.Dataset({"amp": (("trace", "sample"), f["amplitude"])}).to_netcdf(d / "v.nc", engine="h5netcdf")
    return {"observed": d / "v.nc", "variable": "amplitude"}


def _two_variables(f, d):
    a = f["amplitude"]
    xr.Dataset({"a": (("trace", "sample"), a), "b": (("trace", "sample"), a)}).to_netcdf(d / "two.nc", engine="h5netcdf")
    return {"observed": d / "two.nc"}


def _rgb_image(f, d):
    with rasterio.open(d / "rgb.tif", "w", driver="GTiff", width=NTRACE, height=SAMPLES, count=3, dtype="uint8",
                       transform=from_origin(100.0, 100.0, 1.0, 1.0)) as ds:
        ds.write(np.zeros((3, SAMPLES, NTRACE), dtype=np.uint8))
    return {"observed": d / "rgb.tif"}


def _negative_power(f, d):
    p = f["power"].copy()
    p[3, 7] = -1.0
    return {"observed": _npy(d, "neg.npy", p), "values": "power"}


def _bad_column_value(f, d):
    lines = (f["dir"] / "track_ws.csv").read_text().splitlines()
    lines[4] = lines[4].rsplit(",", 1)[0] + ",soon"
    (d / "ws.csv").write_text("\n".join(lines) + "\n")
    return {"observed_track": d / "ws.csv", "window_start_column": "ws", "window_start_s": None}


def _far_track(f, d):
    lines = f["track"].read_text().splitlines()
    moved = [lines[0]] + [",".join([f"{float(r.split(',')[0]) + 1.0:.9f}"] + r.split(",")[1:]) for r in lines[1:]]
    (d / "far.csv").write_text("\n".join(moved) + "\n")
    return {"observed_track": d / "far.csv"}


def _unknown_suffix(f, d):
    (d / "obs.xyz").write_bytes(b"1234")
    return {"observed": d / "obs.xyz"}


def _not_npy(f, d):
    (d / "junk.npy").write_text("not an array")
    return {"observed": d / "junk.npy"}


# case: (changed options, exit code, message)
BAD_CASES = {
    "trace without data": (_nan_trace, 1, "trace(s) 5 have no finite value"),
    "track shorter than traces": (
        _short_track, 1, f"{NTRACE} traces (array shape ({NTRACE}, {SAMPLES}), read as traces-samples), but the track"),
    "raw size vs shape": (
        _raw_size, 1, f"--raw-shape {NTRACE} {SAMPLES + 10} (traces × samples) of float32 (4 bytes each) needs"),
    "missing variable": (_missing_variable, 1, "no variable 'amplitude'; its variables are amp"),
    "ambiguous variable": (_two_variables, 1, "2 two-dimensional variables (a, b); name the one to compare with --variable"),
    "not 2-D": (lambda f, d: {"observed": _npy(d, "cube.npy", np.zeros((NTRACE, SAMPLES, 2)))}, 1,
                f"expected a 2-D array (traces × samples), got shape ({NTRACE}, {SAMPLES}, 2)"),
    "image on its side": (lambda f, d: {"observed": _npy(d, "t.npy", f["amplitude"].T)}, 1,
                          f"has {NTRACE} rows; expected one track row per trace; if it is stored samples-traces, "
                          "pass --axis-order samples-traces"),
    "multi-band image": (_rgb_image, 1, "3 bands; expected a single-band (greyscale) image"),
    "negative power": (_negative_power, 1, "power at trace 3, sample 7 = -1 is negative"),
    "missing window column": (lambda f, d: {"window_start_column": "start_s", "window_start_s": None}, 1,
                              "no column 'start_s' for the window start; the columns are lat, lon, alt, time"),
    "bad window value": (_bad_column_value, 1, "row 4 column 'ws' = 'soon': expected a delay in seconds"),
    "no trace matched": (_far_track, 1, "no observed trace has a simulated trace within"),
    "windows apart": (lambda f, d: {"window_start_s": "0.5"}, 1, "do not reach the simulated ones"),
    "unknown suffix": (_unknown_suffix, 1, "unknown suffix '.xyz'"),
    "unreadable npy": (_not_npy, 1, "not a readable .npy array"),
    "raw without shape": (lambda f, d: {"observed": d / "x.raw"}, 2, "needs --raw-dtype and --raw-shape TRACES SAMPLES"),
    "raw options on npy": (lambda f, d: {"raw_dtype": "int16"}, 2, "apply to raw binary files only"),
    "sim and dem": (lambda f, d: {"dem": f["dem"]}, 2, "give either --sim RUN_DIR/radargram.nc or --dem DEM"),
    "two window starts": (lambda f, d: {"window_start_column": "ws"}, 2, "exactly one of --window-start-s or --window-start-column"),
    "zero sample interval": (lambda f, d: {"sample_interval_s": "0"}, 2, "Invalid value for '--sample-interval-s'"),
    "old threshold option": (lambda f, d: {"threshold_db": "15"}, 2, "--threshold-db was replaced: echoes are now "
                             "tested against the predicted clutter and noise at a false-alarm probability; use --pfa"),
    "old explained option": (lambda f, d: {"explained_within_db": "6"}, 2, "use --model-tolerance-db"),
    "even integration": (lambda f, d: {"integration_traces": "4"}, 2, "4 is even; expected an odd number"),
    "pfa of one": (lambda f, d: {"pfa": "1"}, 2, "Invalid value for '--pfa'"),
    "list and observed": (lambda f, d: {"list": _track_list(f, d)}, 2, "with --list each row names its inputs; drop"),
    "list row without file": (lambda f, d: {"list": _track_list(f, d, observed="gone.npy"), "observed": None,
                                            "observed_track": None, "sample_interval_s": None, "window_start_s": None,
                                            "sim": None, "values": None}, 1,
                              "row 2: column 'observed' = 'gone.npy': no such file"),
    "list without column": (lambda f, d: {"list": _track_list(f, d, drop="sample_interval_s"), "observed": None,
                                          "observed_track": None, "sample_interval_s": None, "window_start_s": None,
                                          "sim": None, "values": None}, 1, "missing column(s) sample_interval_s"),
    "noisy simulation": (lambda f, d: {"sim": _noisy_sim(f, d)}, 1,
                         "contains receiver noise ([noise] table): the comparison needs the noise-free"),
}  # fmt: skip


def _track_list(f, d, observed=None, drop=None):
    """A list of two comparisons of the same files (the second observed file may be renamed)."""
    cols = {"name": None, "observed": None, "observed_track": str(f["track"]), "sample_interval_s": repr(DT),
            "sim": str(f["sim"]), "window_start_s": repr(f["start"]), "values": "amplitude"}  # fmt: skip
    if drop:
        cols.pop(drop)
    rows = [",".join(cols)]
    for name, obs in (("first", str(f["dir"] / "obs.npy")), ("second", observed or str(f["dir"] / "obs.npy"))):
        vals = {**cols, "name": name, "observed": obs}
        rows.append(",".join(vals[k] for k in cols))
    (d / "list.csv").write_text("\n".join(rows) + "\n")
    return d / "list.csv"


def _noisy_sim(f, d):
    import json

    with xr.open_dataset(f["sim"], engine="h5netcdf") as ds:
        ds = ds.load()
    cfg = json.loads(ds.attrs["cluttersim_config"])
    cfg["noise"] = {"noise_figure_db": 3.0, "seed": 1}
    ds.attrs["cluttersim_config"] = json.dumps(cfg)
    ds.to_netcdf(d / "noisy.nc", engine="h5netcdf")
    return d / "noisy.nc"


@pytest.mark.parametrize("case", list(BAD_CASES))
def test_bad_input_gives_one_line_exit_code_and_no_output(files, tmp_path, case):
    changes, code, message = BAD_CASES[case]
    out = tmp_path / "out"
    res = CliRunner().invoke(cli, cli_args(files, out, **changes(files, tmp_path)))
    assert res.exit_code == code, res.output
    assert message in res.output
    assert "Traceback" not in res.output
    error_lines = [line for line in res.output.splitlines() if line.startswith(("cluttersim: error", "Error"))]
    assert len(error_lines) == 1
    assert not out.exists() or not any(out.iterdir())


def test_observed_and_simulated_grids_may_differ_in_sample_interval(files, tmp_path):
    """Observed sampled twice as finely: averaging onto the simulated grid keeps the echoes."""
    fine = np.repeat(files["power"], 2, axis=1)  # each sample held over two half-intervals
    path = _npy(tmp_path, "fine.npy", fine)
    res = run(["compare", "--observed", path, "--observed-track", files["track"], "--sample-interval-s", DT / 2,
               "--window-start-s", repr(files["start"] - DT / 4), "--sim", files["sim"], "--out", tmp_path / "o"])  # fmt: skip
    assert res.exit_code == 0, res.output
    with xr.open_dataset(tmp_path / "o" / "comparison.nc", engine="h5netcdf") as ds:
        assert ds.attrs["delay_offset_samples"] == pytest.approx(7.3, abs=0.25)
        assert ds.attrs["gain_db"] == pytest.approx(23.0, abs=0.3)
    assert not math.isnan(float(res.output.split("delay offset:")[1].split()[0]))


def test_many_tracks_give_one_combined_table_geojson_and_map(files, tmp_path):
    """--list: one folder per row, and the candidates of all rows in one ranked table, GeoJSON and map."""
    import csv
    import json

    from matplotlib.image import imread

    out = tmp_path / "many"
    res = run(["compare", "--list", _track_list(files, tmp_path), "--out", out])
    assert res.exit_code == 0, res.output
    assert "== first" in res.output and "== second" in res.output
    for name in ("first", "second"):
        assert (out / name / "comparison.nc").exists() and (out / name / "candidates.geojson").exists()
    rows = list(csv.DictReader((out / "candidates.csv").open()))
    per_track = {name: list(csv.DictReader((out / name / "candidates.csv").open())) for name in ("first", "second")}
    assert len(rows) == sum(len(v) for v in per_track.values()) > 0
    assert {r["track"] for r in rows} == {"first", "second"}
    assert [int(r["rank"]) for r in rows] == list(range(1, len(rows) + 1))
    scores = [float(r["score"]) for r in rows]
    assert scores == sorted(scores, reverse=True)
    doc = json.loads((out / "candidates.geojson").read_text())
    assert {f["properties"]["track"] for f in doc["features"]} == {"first", "second"}
    assert imread(out / "candidates_map.png").shape[0] > 100
    again = run(["compare", "--list", tmp_path / "list.csv", "--out", out])
    assert again.exit_code == 2 and "already exists; pass --overwrite" in again.output


def test_a_given_tec_delays_the_simulation_before_the_alignment(files, tmp_path):
    """--tec-el-m2: the simulation is seen through the layer, later by 2 · 40.3 · TEC / (c f²) at the
    centre frequency (Davies, Ionospheric Radio), so the offset found shrinks by that many samples."""
    from cluttersim.physics.ionosphere import group_delay_two_way_s

    out = tmp_path / "cmp_tec"
    res = run(base_args(files, out) + ["--sim", files["sim"], "--tec-el-m2", "3e14"])
    assert res.exit_code == 0, res.output
    offset_line = next(line for line in res.output.splitlines() if line.startswith("delay offset:"))
    delay_samples = group_delay_two_way_s(3e14, files["radar"].radar.center_frequency_hz) / DT
    assert float(offset_line.split()[2]) == pytest.approx(7.3 - delay_samples, abs=0.5)
