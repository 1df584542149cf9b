"""SEG-Y files, read with ``segyio`` (optional extra ``[segy]``).

Field numbers and meanings from SEG-Y rev 1 (SEG Technical Standards Committee,
*SEG Y rev 1 Data Exchange format*, 2002; Tables 1 and 2). Each trace is one
echo. From the trace headers: the coordinates (default ``SourceX`` = longitude,
``SourceY`` = latitude) multiplied by the coordinate scalar (bytes 71–72: a
negative value divides), in the unit of ``CoordinateUnits`` (bytes 89–90:
2 = arc seconds, 3 = decimal degrees; 1 = length is refused, the track then
needs a CSV); the antenna elevation (default ``ReceiverGroupElevation``) with
the elevation scalar (bytes 69–70); the window start from ``DelayRecordingTime``
(bytes 109–110, ms); the time of day from the year/day/hour/minute/second
fields when they increase. The sample interval comes from the binary header's
``Interval`` (bytes 3217–3218, µs), or the trace header's
``TRACE_SAMPLE_INTERVAL``.

Radar SEG-Y often stores times scaled (nanoseconds written where the standard
says µs or ms) because the integer fields cannot hold them: give the unit, e.g.
``--map sample_interval=Interval:ps --map window_start=DelayRecordingTime:ns``.
"""

from __future__ import annotations

import datetime as _dt
from pathlib import Path

import numpy as np

from ...errors import ObservedDataError
from . import Lookup

#: Header fields made available by name, with the unit SEG-Y rev 1 gives them.
_TIME_UNITS = {"DelayRecordingTime": "ms", "Interval": "us", "TRACE_SAMPLE_INTERVAL": "us", "LagTimeA": "ms"}
_ELEVATIONS = ("ReceiverGroupElevation", "SourceSurfaceElevation", "SourceDatumElevation", "ReceiverDatumElevation",
               "SourceDepth")  # fmt: skip
_COORDINATES = ("SourceX", "SourceY", "GroupX", "GroupY", "CDP_X", "CDP_Y")
_DATE = ("YearDataRecorded", "DayOfYear", "HourOfDay", "MinuteOfHour", "SecondOfMinute")


def _scaled(raw: np.ndarray, scalar: np.ndarray) -> np.ndarray:
    """SEG-Y rev 1 scalars: positive multiplies, negative divides by its magnitude, 0 means 1."""
    s = scalar.astype(np.float64)
    factor = np.where(s > 0, s, np.where(s < 0, 1.0 / np.abs(np.where(s == 0, 1, s)), 1.0))
    return raw.astype(np.float64) * factor


def read_segy(path, file_format: str, mapping: dict, *, geometry=None, axis_order=None):
    """The :class:`~cluttersim.io.readers.Lookup` and the (trace, sample) echoes of a SEG-Y file."""
    try:
        import segyio
    except ImportError:
        raise ObservedDataError(f"{path}: reading SEG-Y needs the optional package segyio: pip install 'cluttersim[segy]'") from None
    path = Path(path)
    if not path.exists():
        raise ObservedDataError(f"{path}: SEG-Y file not found")
    if geometry is not None:
        raise ObservedDataError(f"{path}: --geometry applies to PDS products; name SEG-Y header fields with --map")
    tf = segyio.TraceField
    fields = [n for n in dir(tf) if not n.startswith("_") and isinstance(getattr(tf, n), int)]

    def column(name):
        """One trace-header field of every trace (one pass over the file)."""
        with segyio.open(str(path), "r", ignore_geometry=True) as f:
            return np.asarray(f.attributes(getattr(tf, name))[:])

    used = set(_COORDINATES) | set(_ELEVATIONS) | set(_TIME_UNITS) | set(_DATE) | {
        "SourceGroupScalar", "CoordinateUnits", "ElevationScalar"} | {s.name for s in mapping.values()}  # fmt: skip
    try:
        with segyio.open(str(path), "r", ignore_geometry=True) as f:
            values = np.asarray(f.trace.raw[:], dtype=np.float64)
            header = {name: np.asarray(f.attributes(getattr(tf, name))[:]) for name in fields if name in used}
            binary = {name: f.bin[getattr(segyio.BinField, name)] for name in ("Interval", "Samples", "Format")}
    except (OSError, RuntimeError, ValueError) as exc:
        raise ObservedDataError(f"{path}: not a SEG-Y file segyio can read ({exc})") from None
    if values.ndim != 2 or values.shape[0] == 0:
        raise ObservedDataError(f"{path}: no traces")
    lookup = Lookup(str(path))
    coord_scalar = header["SourceGroupScalar"]
    units = header["CoordinateUnits"]
    coord_unit = None
    if np.all(units == 2):
        coord_unit = "arcsec"
    elif np.all(units == 3):
        coord_unit = "deg"
    elif np.any(units == 1) and not ({"lat", "lon"} <= set(mapping) and mapping["lat"].unit and mapping["lon"].unit):
        raise ObservedDataError(
            f"{path}: CoordinateUnits = 1 (lengths: projected coordinates); cluttersim needs longitude and latitude: "
            "give the track as a CSV (--observed-track)"
        )
    for name in _COORDINATES:
        lookup.add(name, _scaled(header[name], coord_scalar), coord_unit)
    for name in _ELEVATIONS:
        lookup.add(name, _scaled(header[name], header["ElevationScalar"]), "m")
    lookup.add("Interval", float(binary["Interval"]), _TIME_UNITS["Interval"])
    for name, unit in _TIME_UNITS.items():
        if name in header:
            lookup.add(name, header[name].astype(np.float64), unit)
    time = _time_of_day(header)
    if time is not None:
        lookup.add("time", time, "s")
    for name in fields:  # every other header field, raw, by its segyio name (read if asked for)
        if name in header:
            lookup.add(name, header[name].astype(np.float64), None)
        else:
            lookup.add(name, lambda name=name: column(name).astype(np.float64), None)
    if axis_order == "samples-traces":
        values = values.T
    return lookup, values


def _time_of_day(header: dict) -> np.ndarray | None:
    """Seconds since the first trace's year began, from the year/day/hour/minute/second fields
    (None when they are unset)."""
    year = header.get("YearDataRecorded")
    if year is None or not np.any(year > 0):
        return None
    days = header["DayOfYear"].astype(np.float64) - 1
    t = ((days * 24 + header["HourOfDay"]) * 60 + header["MinuteOfHour"]) * 60.0 + header["SecondOfMinute"]
    base = _dt.datetime(int(year[0]), 1, 1, tzinfo=_dt.timezone.utc)
    years = np.array([(_dt.datetime(int(y), 1, 1, tzinfo=_dt.timezone.utc) - base).total_seconds() for y in year])
    return years + t
