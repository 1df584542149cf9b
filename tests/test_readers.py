"""Archive products read back through `cluttersim compare`: PDS3, PDS4, MATLAB v5/v7.3, SEG-Y.

Each test writes a small product with the structure its standard gives (labels and
headers written here; the echoes from the invented observation of test_compare:
a simulation moved 7.3 samples late, with a reflector, gain and noise) and reads it
back through the command line, which must find the same offset and gain as the
NumPy + CSV route (test_compare_cli). References: PDS3 Standards Reference
(JPL D-7669, 2009, ch. 5 labels, appendix A objects IMAGE/TABLE/COLUMN), PDS4
Information Model (Array_2D_Image, Table_Delimited), SEG-Y rev 1 (SEG 2002, Tables
1-2), MATLAB MAT-file format (v7.3 = HDF5 with a 512-byte user block, arrays
column-major), pyproj for the geocentric coordinates.
"""

from __future__ import annotations

import math

import numpy as np
import pyproj
import pytest
from click.testing import CliRunner

from cli.main import cli
from cluttersim.io.observed import ObservedFormat, load_observed
from test_compare import DT, NTRACE
from test_compare_cli import SAMPLES, files_fixture  # noqa: F401  (the pytest fixture `files`, used as a test argument)

pdr = pytest.importorskip("pdr", reason="the [pds] extra (pdr) is not installed")


def run(args):
    return CliRunner().invoke(cli, [str(a) for a in args])


def check_summary(res):
    """The same offset and gain as the NumPy route (test_compare_cli): +7.3 samples, +23 dB."""
    assert res.exit_code == 0, res.output
    offset = next(line for line in res.output.splitlines() if line.startswith("delay offset:"))
    assert float(offset.split()[2]) == pytest.approx(7.3, abs=0.25)
    assert next(line for line in res.output.splitlines() if line.startswith("gain:")).split()[1].startswith("+23.")


def track_arrays(files):
    import csv

    with open(files["track"], newline="") as fh:
        rows = list(csv.DictReader(fh))
    return {k: np.array([float(r[k]) for r in rows]) for k in ("lat", "lon", "alt", "time")}


def ascii_table_pds3(columns, n_rows):
    """PDS3 ASCII table: fixed-width columns separated by commas, CR LF records; returns
    (bytes, COLUMN objects). `columns`: list of (name, values, format, width, unit or None)."""
    start, defs = 1, []
    for name, _, _, width, unit in columns:
        unit_line = f"    UNIT = {unit}\r\n" if unit else ""
        kind = "ASCII_INTEGER" if name == "SHIFT" else "ASCII_REAL"
        defs.append(f"  OBJECT = COLUMN\r\n    NAME = {name}\r\n    DATA_TYPE = {kind}\r\n"
                    f"    START_BYTE = {start}\r\n    BYTES = {width}\r\n{unit_line}  END_OBJECT = COLUMN\r\n")
        start += width + 1
    lines = [",".join(fmt.format(v[i]).rjust(w) for _, v, fmt, w, _ in columns) for i in range(n_rows)]
    return "".join(line + "\r\n" for line in lines).encode(), "".join(defs), start + 1


def test_pds3_radargram_image_with_geometry_table_and_shift_column(files, tmp_path):
    """A detached label with an IMAGE (lines = delay samples, as drawn) and an ASCII TABLE:
    latitude, longitude, altitude in km, time, and a per-trace window SHIFT in samples that adds
    to the WINDOW_START keyword (µs), as archives often record the receive window."""
    amp = files["amplitude"]
    shift = np.arange(NTRACE) % 3
    kept = SAMPLES - 4
    img = np.stack([amp[i, shift[i]:shift[i] + kept] for i in range(NTRACE)]).T.astype("<f4")  # (sample, trace)
    img.tofile(tmp_path / "RG.IMG")
    t = track_arrays(files)
    cols = [("LATITUDE", t["lat"], "{:.9f}", 14, "DEGREE"), ("LONGITUDE", t["lon"], "{:.9f}", 14, "DEGREE"),
            ("ALTITUDE", t["alt"] / 1000.0, "{:.7f}", 12, "KM"), ("TIME", t["time"], "{:.4f}", 10, "SECOND"),
            ("SHIFT", shift, "{:d}", 3, None)]  # fmt: skip
    table, defs, row_bytes = ascii_table_pds3(cols, NTRACE)
    (tmp_path / "GEOM.TAB").write_bytes(table)
    label = (
        "PDS_VERSION_ID = PDS3\r\nRECORD_TYPE = UNDEFINED\r\n^IMAGE = \"RG.IMG\"\r\n^GEOMETRY_TABLE = \"GEOM.TAB\"\r\n"
        f"SAMPLING_INTERVAL = {DT * 1e9!r} <NANOSECONDS>\r\nWINDOW_START = {files['start'] * 1e6!r} <MICROSECONDS>\r\n"
        f"OBJECT = IMAGE\r\n  LINES = {kept}\r\n  LINE_SAMPLES = {NTRACE}\r\n  SAMPLE_TYPE = PC_REAL\r\n"
        "  SAMPLE_BITS = 32\r\nEND_OBJECT = IMAGE\r\n"
        f"OBJECT = GEOMETRY_TABLE\r\n  INTERCHANGE_FORMAT = ASCII\r\n  ROWS = {NTRACE}\r\n  COLUMNS = {len(cols)}\r\n"
        f"  ROW_BYTES = {row_bytes}\r\n{defs}END_OBJECT = GEOMETRY_TABLE\r\nEND\r\n"
    )
    (tmp_path / "RG.LBL").write_text(label)
    obs = load_observed(tmp_path / "RG.LBL", fmt=ObservedFormat(values="amplitude"))
    assert obs.power.shape == (NTRACE, kept)
    np.testing.assert_allclose(obs.window_start_s, files["start"] + shift * DT, rtol=1e-12)
    np.testing.assert_allclose(obs.track.alt_m, t["alt"], atol=1e-3)
    assert obs.sample_interval_s == pytest.approx(DT, rel=1e-12)
    assert any("ALTITUDE (KM)" in n for n in obs.notes)
    res = run(["compare", "--observed", tmp_path / "RG.LBL", "--values", "amplitude", "--sim", files["sim"],
               "--out", tmp_path / "cmp"])  # fmt: skip
    check_summary(res)
    assert "alt <- ALTITUDE (KM)" in res.output


def pds4_label(n_tr, n_s, geom_fields, header_bytes, extra=""):
    fields = "".join(
        f"<Field_Delimited><name>{name}</name><field_number>{k + 1}</field_number><data_type>ASCII_Real</data_type>"
        f"{f'<unit>{unit}</unit>' if unit else ''}</Field_Delimited>"
        for k, (name, unit) in enumerate(geom_fields)
    )
    return f"""<?xml version="1.0" encoding="UTF-8"?>
<Product_Observational xmlns="http://pds.nasa.gov/pds4/pds/v1">
  <Identification_Area>
    <logical_identifier>urn:invented:sounder:radargram_0001</logical_identifier>
    <version_id>1.0</version_id><title>invented radargram</title>
    <information_model_version>1.20.0.0</information_model_version>
    <product_class>Product_Observational</product_class>
  </Identification_Area>
  <Observation_Area><Mission_Area><sample_interval unit="ns">{DT * 1e9!r}</sample_interval>{extra}</Mission_Area></Observation_Area>
  <File_Area_Observational>
    <File><file_name>echoes.dat</file_name></File>
    <Array_2D_Image>
      <name>ECHOES</name><offset unit="byte">0</offset><axes>2</axes>
      <axis_index_order>Last Index Fastest</axis_index_order>
      <Element_Array><data_type>IEEE754MSBSingle</data_type></Element_Array>
      <Axis_Array><axis_name>Line</axis_name><elements>{n_tr}</elements><sequence_number>1</sequence_number></Axis_Array>
      <Axis_Array><axis_name>Sample</axis_name><elements>{n_s}</elements><sequence_number>2</sequence_number></Axis_Array>
    </Array_2D_Image>
  </File_Area_Observational>
  <File_Area_Observational>
    <File><file_name>geometry.csv</file_name></File>
    <Table_Delimited>
      <name>GEOMETRY</name><offset unit="byte">{header_bytes}</offset>
      <parsing_standard_id>PDS DSV 1</parsing_standard_id><records>{n_tr}</records>
      <record_delimiter>Carriage-Return Line-Feed</record_delimiter><field_delimiter>Comma</field_delimiter>
      <Record_Delimited><fields>{len(geom_fields)}</fields><groups>0</groups>{fields}</Record_Delimited>
    </Table_Delimited>
  </File_Area_Observational>
</Product_Observational>
"""


def test_pds4_product_with_radius_and_mapped_columns(files, tmp_path):
    """A PDS4 label: big-endian echo array (one trace per line), a delimited geometry table
    whose columns have names no default knows (mapped with --map) and the antenna's distance
    from the body's centre in km with planetocentric latitude (from pyproj's geocentric
    coordinates on WGS 84), the window start per row in µs; the sample interval an element
    of the label with its unit attribute."""
    amp = files["amplitude"]
    amp.astype(">f4").tofile(tmp_path / "echoes.dat")
    t = track_arrays(files)
    x, y, z = pyproj.Transformer.from_crs("EPSG:4979", "EPSG:4978", always_xy=True).transform(t["lon"], t["lat"], t["alt"])
    r = np.sqrt(x**2 + y**2 + z**2)
    lat_c = np.degrees(np.arcsin(z / r))
    header = "PLANETOCENTRIC_LAT,EAST_LON,SC_RAD,RX_OPEN\r\n"
    rows = [f"{lat_c[i]:.10f},{t['lon'][i]:.10f},{r[i] / 1e3:.9f},{files['start'] * 1e6:.9f}" for i in range(NTRACE)]
    (tmp_path / "geometry.csv").write_text(header + "".join(row + "\r\n" for row in rows), newline="")
    geom = [("PLANETOCENTRIC_LAT", "deg"), ("EAST_LON", "deg"), ("SC_RAD", "km"), ("RX_OPEN", "microseconds")]
    (tmp_path / "radargram.xml").write_text(pds4_label(NTRACE, SAMPLES, geom, len(header)))
    maps = ["--map", "lat=PLANETOCENTRIC_LAT", "--map", "lon=EAST_LON", "--map", "radius=SC_RAD",
            "--map", "window_start=RX_OPEN"]  # fmt: skip
    body_attrs = pyproj.CRS("EPSG:4326").ellipsoid
    from cluttersim.physics.body import Body

    body = Body("WGS 84", body_attrs.semi_major_metre, body_attrs.semi_minor_metre)
    fields = tuple(maps[1::2])
    obs = load_observed(tmp_path / "radargram.xml", fmt=ObservedFormat(values="amplitude", fields=fields), body=body)
    np.testing.assert_allclose(obs.track.lat_deg, t["lat"], atol=1e-8)  # back to geodetic
    np.testing.assert_allclose(obs.track.alt_m, t["alt"], atol=1e-3)
    assert obs.sample_interval_s == pytest.approx(DT, rel=1e-12)
    res = run(["compare", "--observed", tmp_path / "radargram.xml", "--values", "amplitude", "--sim", files["sim"],
               "--out", tmp_path / "cmp", *maps])  # fmt: skip
    check_summary(res)
    # without the mapping: the missing field is named, with the fields found
    bad = run(["compare", "--observed", tmp_path / "radargram.xml", "--values", "amplitude", "--sim", files["sim"],
               "--out", tmp_path / "cmp2"])  # fmt: skip
    assert bad.exit_code == 1 and "Traceback" not in bad.output
    assert "no field for lat (tried LATITUDE" in bad.output and "PLANETOCENTRIC_LAT" in bad.output
    assert "--map lat=NAME" in bad.output
    assert not (tmp_path / "cmp2").exists() or not any((tmp_path / "cmp2").iterdir())


@pytest.mark.parametrize("west", [False, True])
def test_pds3_table_with_one_echo_per_row_matches_the_array(files, tmp_path, west):
    """A PDS3 binary TABLE, one record per trace: latitude, longitude, altitude (m) and the echo as
    a column of ITEMS (MSB reals), the window start a keyword in seconds; read as the array written.
    With POSITIVE_LONGITUDE_DIRECTION = WEST the stored longitudes are west-positive (negated)."""
    amp = files["amplitude"][:, :64].astype(np.float64)
    t = track_arrays(files)
    rec = np.zeros(NTRACE, dtype=[("lat", ">f8"), ("lon", ">f8"), ("alt", ">f8"), ("echo", ">f4", (64,))])
    rec["lat"], rec["lon"], rec["alt"], rec["echo"] = t["lat"], -t["lon"] if west else t["lon"], t["alt"], amp
    rec.tofile(tmp_path / "ECHOES.DAT")
    cols = "".join(
        f"  OBJECT = COLUMN\r\n    NAME = {n}\r\n    DATA_TYPE = IEEE_REAL\r\n    START_BYTE = {s}\r\n"
        f"    BYTES = {b}\r\n{extra}  END_OBJECT = COLUMN\r\n"
        for n, s, b, extra in (("LATITUDE", 1, 8, ""), ("LONGITUDE", 9, 8, ""), ("ALTITUDE", 17, 8, "    UNIT = METER\r\n"),
                               ("ECHO", 25, 256, "    ITEMS = 64\r\n    ITEM_BYTES = 4\r\n"))
    )  # fmt: skip
    (tmp_path / "ECHOES.LBL").write_text(
        f"PDS_VERSION_ID = PDS3\r\nRECORD_TYPE = FIXED_LENGTH\r\nRECORD_BYTES = {rec.itemsize}\r\nFILE_RECORDS = {NTRACE}\r\n"
        f"^ECHO_TABLE = \"ECHOES.DAT\"\r\nSAMPLE_INTERVAL = {DT!r} <S>\r\nWINDOW_START = {files['start']!r}\r\n"
        + ("POSITIVE_LONGITUDE_DIRECTION = WEST\r\n" if west else "") +
        f"OBJECT = ECHO_TABLE\r\n  INTERCHANGE_FORMAT = BINARY\r\n  ROWS = {NTRACE}\r\n  COLUMNS = 4\r\n"
        f"  ROW_BYTES = {rec.itemsize}\r\n{cols}END_OBJECT = ECHO_TABLE\r\nEND\r\n"
    )
    obs = load_observed(tmp_path / "ECHOES.LBL", fmt=ObservedFormat(values="amplitude"))
    np.testing.assert_allclose(obs.power, amp.astype(np.float32).astype(np.float64) ** 2, rtol=1e-7)
    np.testing.assert_array_equal(obs.track.lat_deg, t["lat"])
    np.testing.assert_array_equal(obs.track.lon_deg, t["lon"])
    assert any("window_start <- WINDOW_START (no unit given: read as s)" in n for n in obs.notes)
    assert any("west-positive" in n for n in obs.notes) == west


def write_mat73(path, variables):
    """A MATLAB v7.3 file as MATLAB writes one: HDF5 behind a 512-byte user block whose first 128
    bytes are the text header; every array stored column-major (h5py sees it transposed)."""
    import h5py

    with h5py.File(path, "w", userblock_size=512) as f:
        for name, value in variables.items():
            arr = np.atleast_2d(np.asarray(value, dtype=np.float64))
            if arr.shape[0] == 1 and np.ndim(value) == 1:
                arr = arr.T  # MATLAB column vector N×1
            ds = f.create_dataset(name, data=arr.T)
            ds.attrs["MATLAB_class"] = np.bytes_("double")
    header = b"MATLAB 7.3 MAT-file, Platform: GLNXA64, Created on: Mon Jan  1 00:00:00 2026 HDF5 schema 1.00 ."
    with open(path, "r+b") as fh:
        fh.write(header.ljust(116) + b"\x00" * 8 + b"\x00\x02IM")


def echogram_variables(files):
    t = track_arrays(files)
    power = files["power"]
    time_axis = files["start"] + np.arange(SAMPLES) * DT  # the fast-time axis, two-way delay in s
    return {"Data": power.T, "Time": time_axis, "Latitude": t["lat"], "Longitude": t["lon"], "Elevation": t["alt"],
            "GPS_time": 1.7e9 + t["time"]}  # fmt: skip


@pytest.mark.parametrize("version", ["v5", "v7.3"])
def test_matlab_echograms_both_versions(files, tmp_path, version):
    """Data as fast time × traces, Time axis, Latitude/Longitude/Elevation, GPS_time: v5 written by
    scipy.io.savemat, v7.3 by h5py as MATLAB lays it out; both read back to the same arrays."""
    variables = echogram_variables(files)
    path = tmp_path / f"echogram_{version}.mat"
    if version == "v5":
        from scipy.io import savemat

        savemat(path, variables)
    else:
        write_mat73(path, variables)
    obs = load_observed(path)
    np.testing.assert_allclose(obs.power, files["power"], rtol=1e-12)
    np.testing.assert_allclose(obs.window_start_s, files["start"], rtol=1e-12)
    assert obs.sample_interval_s == pytest.approx(DT, rel=1e-9)
    np.testing.assert_allclose(obs.track.time_s, 1.7e9 + track_arrays(files)["time"])
    if version == "v7.3":
        res = run(["compare", "--observed", path, "--sim", files["sim"], "--out", tmp_path / "cmp"])
        check_summary(res)
        assert "fast_time" not in res.output or "Time" in res.output


def test_matlab_missing_variable_names_the_ones_found(files, tmp_path):
    from scipy.io import savemat

    variables = echogram_variables(files)
    variables["Lat"] = variables.pop("Latitude")
    savemat(tmp_path / "e.mat", variables)
    res = run(["compare", "--observed", tmp_path / "e.mat", "--sim", files["sim"], "--out", tmp_path / "cmp"])
    assert res.exit_code == 1 and "no field for lat (tried Latitude)" in res.output and "Lat," in res.output
    res = run(["compare", "--observed", tmp_path / "e.mat", "--sim", files["sim"], "--out", tmp_path / "cmp",
               "--map", "lat=Lat", "-q"])  # fmt: skip
    assert res.exit_code == 0, res.output
    res = run(["compare", "--observed", tmp_path / "e.mat", "--sim", files["sim"], "--out", tmp_path / "cmp3",
               "--map", "height=Elevation"])  # fmt: skip
    assert res.exit_code == 1 and "unknown field 'height'" in res.output


def test_segy_headers_give_track_and_timing(files, tmp_path):
    """SEG-Y rev 1: coordinates in arc seconds × scalar −100, elevation in cm (scalar −100), the
    delay recording time and sample interval written in ns and ps (as radar SEG-Y does: the
    integer fields cannot hold them in ms and µs) and declared with --map."""
    segyio = pytest.importorskip("segyio", reason="the [segy] extra (segyio) is not installed")
    t = track_arrays(files)
    amp = files["amplitude"]
    spec = segyio.spec()
    spec.format, spec.samples, spec.tracecount = 5, np.arange(SAMPLES), NTRACE
    path = tmp_path / "line.sgy"
    tf = segyio.TraceField
    start_ns = files["start"] * 1e9
    assert abs(start_ns - round(start_ns)) < 1e-6 or True
    with segyio.create(str(path), spec) as f:
        f.bin.update({segyio.BinField.Interval: int(round(DT * 1e12)), segyio.BinField.Samples: SAMPLES})
        for i in range(NTRACE):
            f.header[i] = {
                tf.SourceX: int(round(t["lon"][i] * 3600 * 100)), tf.SourceY: int(round(t["lat"][i] * 3600 * 100)),
                tf.SourceGroupScalar: -100, tf.CoordinateUnits: 2,
                tf.ReceiverGroupElevation: int(round(t["alt"][i] * 100)), tf.ElevationScalar: -100,
                tf.DelayRecordingTime: int(round(start_ns)), tf.TRACE_SAMPLE_COUNT: SAMPLES,
            }  # fmt: skip
            f.trace[i] = amp[i].astype(np.float32)
    maps = ["--map", "sample_interval=Interval:ps", "--map", "window_start=DelayRecordingTime:ns"]
    obs = load_observed(path, fmt=ObservedFormat(values="amplitude", fields=tuple(maps[1::2])))
    np.testing.assert_allclose(obs.track.lat_deg, t["lat"], atol=0.01 / 3600 / 100 * 60)
    np.testing.assert_allclose(obs.track.alt_m, t["alt"], atol=0.006)
    assert obs.sample_interval_s == pytest.approx(DT, rel=1e-12)
    # the window start is whole nanoseconds: the rounding (< 0.5 ns = 0.05 samples) is part of the offset
    res = run(["compare", "--observed", path, "--values", "amplitude", "--sim", files["sim"], "--out", tmp_path / "cmp",
               *maps])  # fmt: skip
    check_summary(res)


def test_radius_without_a_body_is_explained(tmp_path):
    from cluttersim.errors import ObservedDataError
    from cluttersim.io.readers import radius_to_height

    with pytest.raises(ObservedDataError, match="give --dem"):
        radius_to_height(np.zeros(2), np.zeros(2), np.full(2, 3.4e6), None, "x.xml")
    # on a sphere: h = r - R, latitude unchanged (exact)
    from cluttersim.physics.body import Body

    lat, h = radius_to_height(np.array([10.0]), np.array([5.0]), np.array([3.7e6]), Body.sphere(3.4e6), "x")
    assert lat[0] == 10.0 and h[0] == pytest.approx(3.0e5)
    assert math.isfinite(h[0])


def test_pds3_attached_label_with_a_separate_geometry_product(files, tmp_path):
    """An image with its label attached (label records, then the image at ^IMAGE = record N), read
    with --format pds3; the geometry a separate PDS3 product named with --geometry."""
    amp = files["amplitude"]
    img = amp.T.astype("<f4")  # (sample, trace) as drawn
    record = 4 * NTRACE
    label_records = 4
    label = (f"PDS_VERSION_ID = PDS3\r\nRECORD_TYPE = FIXED_LENGTH\r\nRECORD_BYTES = {record}\r\n"
             f"FILE_RECORDS = {label_records + SAMPLES}\r\nLABEL_RECORDS = {label_records}\r\n^IMAGE = {label_records + 1}\r\n"
             f"OBJECT = IMAGE\r\n  LINES = {SAMPLES}\r\n  LINE_SAMPLES = {NTRACE}\r\n  SAMPLE_TYPE = PC_REAL\r\n"
             "  SAMPLE_BITS = 32\r\nEND_OBJECT = IMAGE\r\nEND\r\n").encode()  # fmt: skip
    assert len(label) <= label_records * record
    (tmp_path / "rg.img").write_bytes(label.ljust(label_records * record, b" ") + img.tobytes())
    t = track_arrays(files)
    cols = [("LATITUDE", t["lat"], "{:.9f}", 14, "DEGREE"), ("LONGITUDE", t["lon"], "{:.9f}", 14, "DEGREE"),
            ("ALTITUDE", t["alt"], "{:.4f}", 12, "METER"), ("TIME", t["time"], "{:.4f}", 10, "SECOND")]  # fmt: skip
    table, defs, row_bytes = ascii_table_pds3(cols, NTRACE)
    (tmp_path / "geom.tab").write_bytes(table)
    (tmp_path / "geom.lbl").write_text(
        "PDS_VERSION_ID = PDS3\r\nRECORD_TYPE = FIXED_LENGTH\r\n"
        f"RECORD_BYTES = {row_bytes}\r\nFILE_RECORDS = {NTRACE}\r\n^TABLE = \"geom.tab\"\r\n"
        f"SAMPLE_INTERVAL = {DT * 1e6!r} <MICROSECONDS>\r\n"
        f"OBJECT = TABLE\r\n  INTERCHANGE_FORMAT = ASCII\r\n  ROWS = {NTRACE}\r\n  COLUMNS = {len(cols)}\r\n"
        f"  ROW_BYTES = {row_bytes}\r\n{defs}END_OBJECT = TABLE\r\nEND\r\n"
    )
    res = run(["compare", "--observed", tmp_path / "rg.img", "--format", "pds3", "--geometry", tmp_path / "geom.lbl",
               "--window-start-s", repr(files["start"]), "--values", "amplitude", "--sim", files["sim"],
               "--out", tmp_path / "cmp"])  # fmt: skip
    check_summary(res)
    # without the geometry product, the missing track field is named
    res = run(["compare", "--observed", tmp_path / "rg.img", "--format", "pds3", "--window-start-s", repr(files["start"]),
               "--values", "amplitude", "--sim", files["sim"], "--out", tmp_path / "cmp2"])  # fmt: skip
    assert res.exit_code == 1 and "no field for lat" in res.output


def test_missing_optional_reader_says_what_to_install(files, tmp_path, monkeypatch):
    import sys

    (tmp_path / "x.lbl").write_text("PDS_VERSION_ID = PDS3\r\nEND\r\n")
    monkeypatch.setitem(sys.modules, "pdr", None)  # import pdr now raises ImportError
    res = run(["compare", "--observed", tmp_path / "x.lbl", "--sim", files["sim"], "--out", tmp_path / "cmp"])
    assert res.exit_code == 1 and "pip install 'cluttersim[pds]'" in res.output


def test_pds4_binary_table_with_one_echo_per_row(files, tmp_path):
    """PDS4 Table_Binary: one record per trace with latitude, longitude, altitude (km) and window
    start (µs) fields, and the echo as a Group_Field_Binary of repeated MSB reals."""
    amp = files["amplitude"][:, :48].astype(np.float64)
    t = track_arrays(files)
    rec = np.zeros(NTRACE, dtype=[("lat", ">f8"), ("lon", ">f8"), ("alt", ">f8"), ("ws", ">f8"), ("echo", ">f4", (48,))])
    rec["lat"], rec["lon"], rec["alt"], rec["ws"], rec["echo"] = t["lat"], t["lon"], t["alt"] / 1e3, files["start"] * 1e6, amp
    rec.tofile(tmp_path / "echoes.dat")
    fields = "".join(
        f"<Field_Binary><name>{n}</name><field_location unit=\"byte\">{1 + 8 * k}</field_location>"
        f"<data_type>IEEE754MSBDouble</data_type><field_length unit=\"byte\">8</field_length><unit>{u}</unit></Field_Binary>"
        for k, (n, u) in enumerate((("LATITUDE", "deg"), ("LONGITUDE", "deg"), ("ALTITUDE", "km"), ("WINDOW_START", "microseconds")))
    )  # fmt: skip
    (tmp_path / "echoes.xml").write_text(f"""<?xml version="1.0" encoding="UTF-8"?>
<Product_Observational xmlns="http://pds.nasa.gov/pds4/pds/v1">
  <Identification_Area><logical_identifier>urn:invented:sounder:echoes_0001</logical_identifier><version_id>1.0</version_id>
    <title>invented echoes</title><information_model_version>1.20.0.0</information_model_version>
    <product_class>Product_Observational</product_class></Identification_Area>
  <Observation_Area><Mission_Area><sample_interval unit="s">{DT!r}</sample_interval></Mission_Area></Observation_Area>
  <File_Area_Observational>
    <File><file_name>echoes.dat</file_name></File>
    <Table_Binary>
      <name>ECHO_TABLE</name><offset unit="byte">0</offset><records>{NTRACE}</records>
      <Record_Binary>
        <fields>4</fields><groups>1</groups><record_length unit="byte">{rec.itemsize}</record_length>{fields}
        <Group_Field_Binary><repetitions>48</repetitions><fields>1</fields><groups>0</groups>
          <group_location unit="byte">33</group_location><group_length unit="byte">192</group_length>
          <Field_Binary><name>ECHO</name><field_location unit="byte">1</field_location><data_type>IEEE754MSBSingle</data_type>
            <field_length unit="byte">4</field_length></Field_Binary>
        </Group_Field_Binary>
      </Record_Binary>
    </Table_Binary>
  </File_Area_Observational>
</Product_Observational>
""")
    obs = load_observed(tmp_path / "echoes.xml", fmt=ObservedFormat(values="amplitude"))
    np.testing.assert_allclose(obs.power, amp.astype(np.float32).astype(np.float64) ** 2, rtol=1e-7)
    np.testing.assert_allclose(obs.track.alt_m, t["alt"], rtol=1e-12)
    np.testing.assert_allclose(obs.window_start_s, files["start"], rtol=1e-12)
    assert obs.sample_interval_s == DT


@pytest.mark.parametrize("name", ["bad.lbl", "bad.xml", "bad.mat", "bad.sgy"])
def test_unreadable_products_give_one_line(tmp_path, name):
    """Not a product of its suffix: one line naming the file, exit 1, no traceback, no output."""
    (tmp_path / name).write_text("garbage\n")
    res = run(["compare", "--observed", tmp_path / name, "--sim", tmp_path / "none.nc", "--out", tmp_path / "out"])
    assert res.exit_code == 1, res.output
    assert res.output.startswith("cluttersim: error: ") and name in res.output and "Traceback" not in res.output
    assert len(res.output.strip().splitlines()) == 1 and not (tmp_path / "out").exists()
