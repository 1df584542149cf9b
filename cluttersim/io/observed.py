"""Observed radargrams: read a recorded sounder section from open, generic files.

An observed radargram is a 2-D array of echo values, one row per trace and one
column per delay sample, plus what the file itself rarely says and the analyst
states: the sample interval, the absolute two-way delay of sample 0 of each
trace (the window start, constant or per trace from a CSV column), what the
values are (amplitude, power or dB) and where each trace was recorded (a track
CSV with the columns of :class:`cluttersim.Track`).

Supported files (``file_format``, chosen from the suffix by default):

==========  =====================================  ==================================
format      suffixes                               array
==========  =====================================  ==================================
``netcdf``  .nc .nc4 .cdf .h5 .hdf5 .he5           the variable ``variable`` (a path
                                                   such as ``group/name`` in HDF5);
                                                   dims named ``trace`` and
                                                   ``sample`` set the axis order
``npy``     .npy                                   a 2-D NumPy array
``image``   .tif .tiff .png                        band 1 of a single-band raster;
                                                   by default rows are samples
                                                   (delay down) and columns traces,
                                                   as a radargram is drawn
``raw``     .bin .raw .dat                         headerless binary of ``raw_dtype``,
                                                   ``raw_shape`` and ``byte_order``
==========  =====================================  ==================================

Values become power: amplitude a → |a|², power p → p (must be ≥ 0),
dB v → 10^(v/10). Power is in the file's own (uncalibrated) unit; the comparison
fits the scale to the simulation. NaN (and a raster's nodata) is "no data".

Every inconsistency raises :class:`~cluttersim.errors.ObservedDataError` whose
message names the file, variable, column or value and what was expected.
"""

from __future__ import annotations

import csv
import math
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import ObservedDataError, TrackError
from .readers import ARCHIVE_SUFFIXES
from ..track import Track

#: File formats and the suffixes that select them (the archive formats, which carry their own
#: track and timing, are read by :mod:`cluttersim.io.readers`).
FORMAT_SUFFIXES = {
    "netcdf": (".nc", ".nc4", ".cdf", ".h5", ".hdf5", ".he5"),
    "npy": (".npy",),
    "image": (".tif", ".tiff", ".png"),
    "raw": (".bin", ".raw", ".dat"),
    **ARCHIVE_SUFFIXES,
}
#: What the stored values are.
VALUE_KINDS = ("amplitude", "power", "db")
#: Orders of the two axes of the stored array.
AXIS_ORDERS = ("traces-samples", "samples-traces")
#: Element types accepted for raw binary files (NumPy names).
RAW_DTYPES = (
    "int8", "uint8", "int16", "uint16", "int32", "uint32", "int64", "uint64",
    "float32", "float64", "complex64", "complex128",
)  # fmt: skip
#: Byte orders of raw binary files and their NumPy prefixes.
BYTE_ORDERS = {"little": "<", "big": ">"}


@dataclass(frozen=True)
class ObservedFormat:
    """How to read the array of an observed radargram file.

    Attributes
    ----------
    file_format : str or None
        One of :data:`FORMAT_SUFFIXES` (``netcdf``, ``npy``, ``image``, ``raw``);
        None chooses from the file suffix.
    values : str
        ``amplitude``, ``power`` or ``db`` (see the module docstring).
    variable : str or None
        netCDF/HDF5 variable (``group/name`` allowed); None: the only 2-D
        numeric variable of the file.
    axis_order : str or None
        ``traces-samples`` (rows are traces) or ``samples-traces``; None: from
        the dimension names (netCDF), ``samples-traces`` for images,
        ``traces-samples`` otherwise.
    raw_dtype : str or None
        Element type of a raw file, one of :data:`RAW_DTYPES`.
    raw_shape : (int, int) or None
        Size of a raw file as (traces, samples), whatever its axis order;
        the file is row-major in ``axis_order`` (default ``traces-samples``).
    byte_order : str
        ``little`` or ``big`` (raw files, multi-byte types).
    raw_offset_bytes : int
        Header bytes to skip at the start of a raw file.
    fields : tuple of str
        Archive formats: ``FIELD=NAME[:UNIT]`` overrides of the field mapping
        (:mod:`cluttersim.io.readers.fields`).
    geometry : str or None
        PDS: a second product (label) whose tables hold the geometry.
    """

    file_format: str | None = None
    values: str = "power"
    variable: str | None = None
    axis_order: str | None = None
    raw_dtype: str | None = None
    raw_shape: tuple[int, int] | None = None
    byte_order: str = "little"
    raw_offset_bytes: int = 0
    fields: tuple[str, ...] = ()
    geometry: str | None = None

    def __post_init__(self):
        if self.file_format is not None and self.file_format not in FORMAT_SUFFIXES:
            raise ObservedDataError(f"format {self.file_format!r}: expected one of {', '.join(FORMAT_SUFFIXES)}")
        if self.values not in VALUE_KINDS:
            raise ObservedDataError(f"values {self.values!r}: expected one of {', '.join(VALUE_KINDS)}")
        if self.axis_order is not None and self.axis_order not in AXIS_ORDERS:
            raise ObservedDataError(f"axis order {self.axis_order!r}: expected one of {', '.join(AXIS_ORDERS)}")
        if self.raw_dtype is not None and self.raw_dtype not in RAW_DTYPES:
            raise ObservedDataError(f"raw dtype {self.raw_dtype!r}: expected one of {', '.join(RAW_DTYPES)}")
        if self.byte_order not in BYTE_ORDERS:
            raise ObservedDataError(f"byte order {self.byte_order!r}: expected one of {', '.join(BYTE_ORDERS)}")
        if self.raw_shape is not None and (len(self.raw_shape) != 2 or min(self.raw_shape) < 1):
            raise ObservedDataError(f"raw shape {self.raw_shape!r}: expected two positive sizes (traces, samples)")
        if self.raw_offset_bytes < 0:
            raise ObservedDataError(f"raw offset {self.raw_offset_bytes} bytes: expected >= 0")


@dataclass(frozen=True)
class ObservedRadargram:
    """A recorded radargram as power on its own delay grid.

    Attributes
    ----------
    power : ndarray (trace, sample) of float64
        Echo power in the file's unit (see :func:`values_to_power`); NaN = no data.
    sample_interval_s : float
        Delay between samples, s.
    window_start_s : ndarray (trace,)
        Absolute two-way delay of sample 0 of each trace as recorded, s (it may
        carry a timing offset; the comparison estimates it).
    track : Track
        Antenna position (and time, if known) of each trace.
    source : str
        The file, for messages and product attributes.
    values : str
        What the file held (``amplitude``, ``power`` or ``db``).
    """

    power: np.ndarray
    sample_interval_s: float
    window_start_s: np.ndarray
    track: Track
    source: str
    values: str = "power"
    #: where an archive reader took each field from (``field <- NAME (unit)``), for the summary
    notes: tuple[str, ...] = ()

    @property
    def n_traces(self) -> int:
        return self.power.shape[0]

    @property
    def n_samples(self) -> int:
        return self.power.shape[1]


def load_observed(
    path,
    track=None,
    sample_interval_s: float | None = None,
    *,
    window_start_s: float | None = None,
    window_start_column: str | None = None,
    fmt: ObservedFormat | None = None,
    body=None,
) -> ObservedRadargram:
    """Read an observed radargram, its track and its timing, checking that they agree.

    Parameters
    ----------
    path : str, Path or ObservedRadargram
        The observed array (see the module docstring for the formats); an
        ObservedRadargram already read is returned as it is.
    track : str, Path or Track
        Track CSV (``lat``, ``lon``, ``alt``, optional ``time``), one row per trace.
        Optional for archive products (PDS3/PDS4, MATLAB, SEG-Y), which carry
        their track; given, it replaces theirs.
    sample_interval_s : float
        Delay between samples, s (positive); optional for archive products.
    window_start_s : float, optional
        Absolute two-way delay of sample 0, s, the same for every trace.
    window_start_column : str, optional
        Or: the column of the track CSV holding each trace's window start, s.
        Exactly one of the two is required, except for archive products.
    fmt : ObservedFormat, optional
        How to read the file; defaults read power, format from the suffix.
    body : Body, optional
        The body, for archive products that give the antenna's distance from
        its centre instead of a height.

    Returns
    -------
    ObservedRadargram

    Raises
    ------
    ObservedDataError
        For an unreadable file, a shape that disagrees with the declared sizes
        or the track length, a trace without any finite value, invalid values
        for their kind, or a bad sample interval or window start.
    TrackError
        For a bad track CSV.
    """
    if isinstance(path, ObservedRadargram):
        return path
    path = Path(path)
    fmt = fmt or ObservedFormat()
    archive = file_format_of(path, fmt) in ARCHIVE_SUFFIXES
    if sample_interval_s is not None or not archive:
        if not (isinstance(sample_interval_s, (int, float)) and math.isfinite(sample_interval_s) and sample_interval_s > 0):
            raise ObservedDataError(f"sample interval {sample_interval_s!r} s: expected a positive number of seconds")
    if window_start_s is not None and window_start_column is not None:
        raise ObservedDataError("give the observed window start either as a constant (s) or as a track CSV column, not both")
    if archive:
        return _load_archive(path, track, sample_interval_s, window_start_s, window_start_column, fmt, body)
    if window_start_s is None and window_start_column is None:
        raise ObservedDataError("give the observed window start either as a constant (s) or as a track CSV column")
    if track is None:
        raise ObservedDataError(f"{path}: this file carries no track; give the track CSV (--observed-track)")
    if not isinstance(track, Track):
        track_path = Path(track)
        track = Track.from_csv(track_path)
    else:
        track_path = None
    stored = read_observed_array(path, fmt)
    power = to_trace_sample(stored, path, fmt, len(track), track.source)
    power = values_to_power(power, fmt.values, str(path))
    _check_no_empty_trace(power, path)
    if window_start_column is not None:
        if track_path is None:
            raise ObservedDataError("window_start_column needs the track as a CSV path")
        start = read_csv_column(track_path, window_start_column)
    else:
        if not (math.isfinite(window_start_s) and window_start_s >= 0):
            raise ObservedDataError(f"window start {window_start_s!r} s: expected a delay >= 0 s")
        start = np.full(power.shape[0], float(window_start_s))
    return ObservedRadargram(
        power=power, sample_interval_s=float(sample_interval_s), window_start_s=start, track=track, source=str(path),
        values=fmt.values,
    )  # fmt: skip


def _check_no_empty_trace(power: np.ndarray, path) -> None:
    empty = np.flatnonzero(~np.isfinite(power).any(axis=1))
    if empty.size:
        listed = ", ".join(str(i) for i in empty[:5]) + (", ..." if empty.size > 5 else "")
        raise ObservedDataError(
            f"{path}: trace(s) {listed} have no finite value ({empty.size} of {power.shape[0]}); "
            "expected every trace to hold data (cut empty traces and their track rows)"
        )


def _load_archive(path: Path, track, sample_interval_s, window_start_s, window_start_column, fmt, body):
    """An archive product (PDS3/PDS4, MATLAB, SEG-Y): echoes, track and timing from the product,
    each replaceable by what the user gives (a track CSV, a sample interval, a window start)."""
    from .readers import read_product

    kind = file_format_of(path, fmt)
    if fmt.raw_dtype is not None or fmt.raw_shape is not None or fmt.raw_offset_bytes:
        raise ObservedDataError(f"{path}: --raw-* options apply to raw binary files only, not to format {kind!r}")
    if not path.exists():
        raise ObservedDataError(f"{path}: observed product not found")
    track_path = None
    if track is not None and not isinstance(track, Track):
        track_path = Path(track)
        track = Track.from_csv(track_path)
    content = read_product(
        path, kind, field_map=fmt.fields, geometry=fmt.geometry, axis_order=fmt.axis_order, body=body,
        sample_interval_s=sample_interval_s, track_given=track is not None,
        window_start_given=window_start_s is not None or window_start_column is not None,
    )  # fmt: skip
    power = values_to_power(content.values, fmt.values, str(path))
    n = power.shape[0]
    if track is None:
        track = Track(lat_deg=content.lat_deg, lon_deg=content.lon_deg, alt_m=content.alt_m, time_s=content.time_s,
                      source=f"{path} (its geometry)")  # fmt: skip
    elif len(track) != n:
        raise ObservedDataError(
            f"{path}: {n} traces, but the track {track.source} has {len(track)} rows; expected one track row per trace"
        )
    _check_no_empty_trace(power, path)
    if window_start_column is not None:
        if track_path is None:
            raise ObservedDataError("window_start_column needs the track as a CSV path")
        start = read_csv_column(track_path, window_start_column)
    elif window_start_s is not None:
        if not (math.isfinite(window_start_s) and window_start_s >= 0):
            raise ObservedDataError(f"window start {window_start_s!r} s: expected a delay >= 0 s")
        start = np.full(n, float(window_start_s))
    else:
        start = content.window_start_s
    return ObservedRadargram(power=power, sample_interval_s=float(content.sample_interval_s), window_start_s=start,
                             track=track, source=str(path), values=fmt.values, notes=content.notes)  # fmt: skip


def body_for_observed(sim=None, dem=None, body_radius_m=None):
    """The body of a comparison, for products that give radii: the sphere ``body_radius_m``,
    else the DEM's CRS, else the simulated radargram's attributes; None if none is known."""
    from ..physics.body import Body

    if body_radius_m is not None:
        return Body.sphere(body_radius_m)
    if dem is not None:
        from .dem import DemSource

        return DemSource.open(dem).body
    if sim is not None:
        import xarray as xr

        try:
            with xr.open_dataset(sim, engine="h5netcdf") as ds:
                a, b = ds.attrs.get("body_semi_major_m"), ds.attrs.get("body_semi_minor_m")
                name = str(ds.attrs.get("body_name", "body"))
        except (OSError, ValueError):
            return None
        if a is not None and b is not None:
            return Body(name=name, semi_major_m=float(a), semi_minor_m=float(b))
    return None


def file_format_of(path, fmt: ObservedFormat) -> str:
    """The format to read ``path`` with: ``fmt.file_format`` or the one its suffix selects."""
    if fmt.file_format is not None:
        return fmt.file_format
    suffix = Path(path).suffix.lower()
    for name, suffixes in FORMAT_SUFFIXES.items():
        if suffix in suffixes:
            return name
    known = " ".join(s for suffixes in FORMAT_SUFFIXES.values() for s in suffixes)
    raise ObservedDataError(f"{path}: unknown suffix {suffix!r}; expected one of {known}, or give --format")


def read_observed_array(path, fmt: ObservedFormat) -> "StoredArray":
    """Read the stored 2-D array of an observed radargram file (before orientation and units)."""
    path = Path(path)
    kind = file_format_of(path, fmt)
    if kind != "raw" and (fmt.raw_dtype is not None or fmt.raw_shape is not None or fmt.raw_offset_bytes):
        raise ObservedDataError(
            f"{path}: --raw-dtype, --raw-shape and --raw-offset-bytes apply to raw binary files only, not to format {kind!r}"
        )
    if not path.exists():
        raise ObservedDataError(f"{path}: observed radargram file not found")
    reader = {"netcdf": _read_netcdf, "npy": _read_npy, "image": _read_image, "raw": _read_raw}[kind]
    stored = reader(path, fmt)
    if stored.values.ndim != 2:
        raise ObservedDataError(f"{stored.name}: expected a 2-D array (traces × samples), got shape {stored.values.shape}")
    if min(stored.values.shape) < 1:
        raise ObservedDataError(f"{stored.name}: the array is empty (shape {stored.values.shape})")
    if not (np.issubdtype(stored.values.dtype, np.number) or stored.values.dtype == bool):
        raise ObservedDataError(f"{stored.name}: expected numbers, got values of type {stored.values.dtype}")
    return stored


@dataclass(frozen=True)
class StoredArray:
    """An array as stored in the file, with the axis order its metadata implies (if any)."""

    values: np.ndarray
    name: str
    axis_order: str | None = None


def to_trace_sample(stored: StoredArray, path, fmt: ObservedFormat, n_track: int, track_name: str) -> np.ndarray:
    """Orient a stored array as (trace, sample) and check its trace count against the track."""
    order = fmt.axis_order or stored.axis_order
    if order is None:
        order = "samples-traces" if file_format_of(path, fmt) == "image" else "traces-samples"
    values = stored.values if order == "traces-samples" else stored.values.T
    if values.shape[0] != n_track:
        other = "samples-traces" if order == "traces-samples" else "traces-samples"
        hint = f"; if it is stored {other}, pass --axis-order {other}" if values.shape[1] == n_track else ""
        raise ObservedDataError(
            f"{stored.name}: {values.shape[0]} traces (array shape {stored.values.shape}, read as {order}), "
            f"but the track {track_name} has {n_track} rows; expected one track row per trace{hint}"
        )
    return values


def values_to_power(values, kind: str, name: str = "observed") -> np.ndarray:
    """Convert stored values to power (float64, NaN kept).

    amplitude a → |a|²; power p → p (every finite p must be ≥ 0);
    dB v → 10^(v/10) (common practice: power in decibels is 10 log10 of the ratio).
    """
    v = np.asarray(values)
    if kind == "amplitude":
        return np.abs(v).astype(np.float64) ** 2
    if np.iscomplexobj(v):
        raise ObservedDataError(f"{name}: complex values can only be amplitudes; expected values 'amplitude'")
    v = v.astype(np.float64)
    if kind == "power":
        with np.errstate(invalid="ignore"):
            bad = np.argwhere(v < 0)
        if bad.size:
            t, s = bad[0]
            raise ObservedDataError(
                f"{name}: power at trace {t}, sample {s} = {v[t, s]:g} is negative; expected power >= 0 "
                "(--values amplitude for signed amplitudes, --values db for decibels)"
            )
        return v
    if kind == "db":
        with np.errstate(over="ignore"):
            return 10.0 ** (v / 10.0)
    raise ObservedDataError(f"values {kind!r}: expected one of {', '.join(VALUE_KINDS)}")


def read_csv_column(path, column: str) -> np.ndarray:
    """One numeric column of a CSV with a header (e.g. per-trace window starts in s); rows counted from 1."""
    path = Path(path)
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            reader = csv.reader(fh)
            header = next(reader, None) or []
            rows = list(reader)
    except FileNotFoundError:
        raise TrackError(f"{path}: track file not found") from None
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise TrackError(f"{path}: cannot read track CSV ({exc})") from None
    names = [h.strip().lower() for h in header]
    if column.strip().lower() not in names:
        raise ObservedDataError(
            f"{path}: no column {column!r} for the window start; the columns are {', '.join(h.strip() for h in header)}"
        )
    idx = names.index(column.strip().lower())
    out = np.empty(len(rows))
    for r, row in enumerate(rows):
        cell = row[idx].strip() if idx < len(row) else ""
        try:
            out[r] = float(cell)
        except ValueError:
            raise ObservedDataError(f"{path}: row {r + 1} column {column!r} = {cell!r}: expected a delay in seconds") from None
        if not (math.isfinite(out[r]) and out[r] >= 0):
            raise ObservedDataError(f"{path}: row {r + 1} column {column!r} = {cell!r}: expected a delay >= 0 s")
    return out


# --------------------------------------------------------------------------- readers


def _read_npy(path: Path, fmt: ObservedFormat) -> StoredArray:
    try:
        values = np.load(path, allow_pickle=False)
    except (OSError, ValueError) as exc:
        raise ObservedDataError(f"{path}: not a readable .npy array ({exc})") from None
    return StoredArray(np.asarray(values), str(path))


def _read_raw(path: Path, fmt: ObservedFormat) -> StoredArray:
    if fmt.raw_dtype is None or fmt.raw_shape is None:
        raise ObservedDataError(f"{path}: a raw binary file needs --raw-dtype and --raw-shape TRACES SAMPLES")
    dtype = np.dtype(fmt.raw_dtype).newbyteorder(BYTE_ORDERS[fmt.byte_order])
    traces, samples = (int(n) for n in fmt.raw_shape)
    order = fmt.axis_order or "traces-samples"
    rows, cols = (traces, samples) if order == "traces-samples" else (samples, traces)
    expected = fmt.raw_offset_bytes + traces * samples * dtype.itemsize
    size = path.stat().st_size
    if size != expected:
        header = f" + {fmt.raw_offset_bytes} header bytes" if fmt.raw_offset_bytes else ""
        raise ObservedDataError(
            f"{path}: {size} bytes, but --raw-shape {traces} {samples} (traces × samples) of {fmt.raw_dtype} "
            f"({dtype.itemsize} bytes each){header} needs {expected} bytes"
        )
    values = np.fromfile(path, dtype=dtype, count=rows * cols, offset=fmt.raw_offset_bytes).reshape(rows, cols)
    return StoredArray(values.astype(dtype.newbyteorder("=")), str(path), order)


def _read_image(path: Path, fmt: ObservedFormat) -> StoredArray:
    import rasterio
    from rasterio.errors import NotGeoreferencedWarning, RasterioIOError

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            with rasterio.open(path) as src:
                if src.count != 1:
                    raise ObservedDataError(
                        f"{path}: {src.count} bands; expected a single-band (greyscale) image of the radargram"
                    )
                values = src.read(1, masked=True)
    except RasterioIOError as exc:
        raise ObservedDataError(f"{path}: not an image GDAL can read ({exc})") from None
    data = np.asarray(values.data)
    if np.ma.is_masked(values):
        data = data.astype(np.float64)
        data[np.ma.getmaskarray(values)] = np.nan
    return StoredArray(data, str(path))


def _read_netcdf(path: Path, fmt: ObservedFormat) -> StoredArray:
    import xarray as xr

    with open(path, "rb") as fh:
        magic = fh.read(4)
    engine = "scipy" if magic[:3] == b"CDF" else "h5netcdf"
    group, _, name = (fmt.variable or "").rpartition("/")
    kwargs = {"engine": engine, "group": group or None}
    if engine == "h5netcdf":
        kwargs["phony_dims"] = "sort"
    try:
        with xr.open_dataset(path, **kwargs) as ds:
            two_d = [v for v in ds.data_vars if ds[v].ndim == 2]
            if not name:
                if len(two_d) != 1:
                    found = ", ".join(two_d) if two_d else "none"
                    raise ObservedDataError(
                        f"{path}: {len(two_d)} two-dimensional variables ({found}); name the one to compare with --variable"
                    )
                name = two_d[0]
            if name not in ds.variables:
                raise ObservedDataError(
                    f"{path}: no variable {fmt.variable!r}; its variables are {', '.join(map(str, ds.variables)) or 'none'}"
                )
            da = ds[name]
            values = np.asarray(da.values)
            dims = tuple(str(d) for d in da.dims)
    except ObservedDataError:
        raise
    except (OSError, ValueError, KeyError) as exc:
        raise ObservedDataError(f"{path}: not a readable netCDF/HDF5 file ({exc})") from None
    order = None
    if dims == ("trace", "sample"):
        order = "traces-samples"
    elif dims == ("sample", "trace"):
        order = "samples-traces"
    return StoredArray(values, f"{path}:{fmt.variable or name}", order)
