"""The field mapping of archive products: which column or keyword holds what, in which unit.

A reader looks for each *field* (the table below) among the names a product
offers — table columns, label keywords, MATLAB variables or SEG-Y header
fields — first under the name the user gives (``--map FIELD=NAME[:UNIT]``), then
under the field's default names, matched without regard to case. A value's unit
comes from the user's ``:UNIT``, else from the product (a PDS3 ``UNIT`` or
``<units>``, a PDS4 ``unit`` attribute), else the field's default unit, which
the reader reports (nothing is converted silently).

=================  ==================================================  ===========
field              meaning                                             default unit
=================  ==================================================  ===========
``data``           the echo array (an array object, a table's vector   —
                   column, a MATLAB variable)
``lat``            antenna latitude (geodetic; planetocentric with     deg
                   ``radius``)
``lon``            antenna longitude, east-positive (``:deg_west`` for    deg
                   west-positive values; PDS labels that declare
                   west-positive longitudes are negated)
``alt``            antenna height above the body's reference surface   m
``radius``         or: antenna distance from the body's centre         m
``time``           time of each trace (any epoch)                      s
``sample_interval``  delay between samples (keyword, column or axis)   s
``window_start``   two-way delay of sample 0 (keyword: all traces;     s
                   column: per trace)
``window_shift``   per-trace shift of the window, added to             samples
                   ``window_start`` (× the sample interval)
``fast_time``      the two-way delay of every sample (an axis: gives   s
                   ``sample_interval`` and ``window_start``)
=================  ==================================================  ===========
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from ...errors import ObservedDataError

#: The fields of an observed product and their default unit kind.
FIELD_KINDS = {
    "data": None, "lat": "angle", "lon": "angle", "alt": "length", "radius": "length", "time": "time",
    "sample_interval": "time", "window_start": "time", "window_shift": "samples", "fast_time": "time",
}  # fmt: skip

#: Units by kind: name (lower case) → factor to the SI unit (deg for angles, samples for shifts).
UNITS = {
    "angle": {"deg": 1.0, "degree": 1.0, "degrees": 1.0, "deg_west": -1.0, "degrees_west": -1.0, "rad": 180.0 / math.pi, "radian": 180.0 / math.pi,
              "radians": 180.0 / math.pi, "arcsec": 1.0 / 3600.0},
    "length": {"m": 1.0, "meter": 1.0, "meters": 1.0, "metre": 1.0, "metres": 1.0, "km": 1e3, "kilometer": 1e3,
               "kilometers": 1e3, "kilometre": 1e3, "kilometres": 1e3, "ft": 0.3048, "feet": 0.3048, "foot": 0.3048},
    "time": {"s": 1.0, "sec": 1.0, "second": 1.0, "seconds": 1.0, "ms": 1e-3, "millisecond": 1e-3,
             "milliseconds": 1e-3, "us": 1e-6, "µs": 1e-6, "microsecond": 1e-6, "microseconds": 1e-6,
             "ns": 1e-9, "nanosecond": 1e-9, "nanoseconds": 1e-9, "ps": 1e-12, "picosecond": 1e-12,
             "picoseconds": 1e-12},
    "samples": {"samples": 1.0, "sample": 1.0},
}  # fmt: skip
# The international foot, 0.3048 m exactly (NIST SP 811, 2008, B.8).

#: Default names per format family (matched case-insensitively), most specific first.
DEFAULT_NAMES = {
    "pds": {
        "data": ("RADARGRAM", "ECHO", "ECHOES", "DATA", "IMAGE", "ARRAY"),
        "lat": ("LATITUDE", "LAT", "SPACECRAFT_LATITUDE", "SUB_SPACECRAFT_LATITUDE"),
        "lon": ("LONGITUDE", "LON", "EAST_LONGITUDE", "SPACECRAFT_LONGITUDE", "SUB_SPACECRAFT_LONGITUDE"),
        "alt": ("ALTITUDE", "ALT", "SPACECRAFT_ALTITUDE", "HEIGHT"),
        "radius": ("SPACECRAFT_RADIUS", "RADIUS", "RADIAL_DISTANCE"),
        "time": ("TIME", "EPHEMERIS_TIME", "ET"),
        "sample_interval": ("SAMPLE_INTERVAL", "SAMPLING_INTERVAL", "SAMPLE_PERIOD"),
        "window_start": ("WINDOW_START", "RECEIVE_WINDOW_START", "RX_WINDOW_START", "WINDOW_START_TIME",
                         "RECEIVE_WINDOW_OPENING_TIME"),
        "window_shift": ("WINDOW_SHIFT", "SAMPLE_SHIFT", "SHIFT"),
        "fast_time": ("FAST_TIME",),
    },
    # the usual layout of airborne ice-radar echograms in MATLAB files (from memory; common practice)
    "matlab": {
        "data": ("Data",), "lat": ("Latitude",), "lon": ("Longitude",), "alt": ("Elevation",),
        "radius": (), "time": ("GPS_time",), "sample_interval": (), "window_start": (), "window_shift": (),
        "fast_time": ("Time",),
    },
    # SEG-Y rev 1 trace and binary header fields, by their segyio names (SEG Technical Standards
    # Committee, SEG-Y rev 1 Data Exchange format, 2002, Tables 1 and 2)
    "segy": {
        "data": (), "lat": ("SourceY",), "lon": ("SourceX",), "alt": ("ReceiverGroupElevation",), "radius": (),
        "time": (), "sample_interval": ("Interval",), "window_start": ("DelayRecordingTime",), "window_shift": (),
        "fast_time": (),
    },
}  # fmt: skip


@dataclass(frozen=True)
class FieldSpec:
    """Where one field is read from: a name in the product and, if given, its unit."""

    name: str
    unit: str | None = None


def parse_field_map(items) -> dict[str, FieldSpec]:
    """``FIELD=NAME[:UNIT]`` strings (``--map``) → {field: FieldSpec}; unknown fields or units are errors."""
    out: dict[str, FieldSpec] = {}
    for item in items or ():
        if isinstance(item, (tuple, list)):
            item = "=".join(item)
        field, sep, spec = str(item).partition("=")
        field = field.strip().lower()
        if not sep or not spec.strip():
            raise ObservedDataError(f"--map {item!r}: expected FIELD=NAME or FIELD=NAME:UNIT")
        if field not in FIELD_KINDS:
            raise ObservedDataError(f"--map {item!r}: unknown field {field!r}; expected one of {', '.join(FIELD_KINDS)}")
        name, _, unit = spec.strip().partition(":")
        unit = unit.strip() or None
        if unit is not None:
            unit_factor(field, unit, f"--map {item!r}")
        out[field] = FieldSpec(name.strip(), unit)
    return out


def unit_factor(field: str, unit: str | None, where: str) -> float:
    """The factor from ``unit`` to the SI unit of ``field``'s kind (1 for no unit)."""
    kind = FIELD_KINDS[field]
    if unit is None or kind is None:
        return 1.0
    key = re.sub(r"[<>\s]", "", str(unit)).lower()
    if kind == "samples" and key in UNITS["time"]:
        return float("nan")  # a shift given as a delay: the caller adds it in seconds
    table = UNITS[kind]
    if key not in table:
        raise ObservedDataError(f"{where}: unit {unit!r} for {field}: expected one of {', '.join(sorted(set(table)))}")
    return table[key]


def shift_unit_is_time(unit: str | None) -> bool:
    """True when a ``window_shift`` unit is a delay (s, µs...) rather than samples."""
    return unit is not None and re.sub(r"[<>\s]", "", str(unit)).lower() in UNITS["time"]


def candidates(field: str, family: str, mapping: dict[str, FieldSpec]) -> tuple[str, ...]:
    """Names to try for ``field``: the user's, else the family's defaults."""
    if field in mapping:
        return (mapping[field].name,)
    return DEFAULT_NAMES[family].get(field, ())


def missing_field(source: str, field: str, tried, found) -> ObservedDataError:
    """The error for a field that is not in the product: names what was tried and what was found."""
    tried = ", ".join(tried) or "no default name"
    shown = sorted(found, key=str.lower)
    listed = ", ".join(shown[:60]) + (f", ... ({len(shown)} in all)" if len(shown) > 60 else "")
    return ObservedDataError(
        f"{source}: no field for {field} (tried {tried}); the fields found are {listed or 'none'}; "
        f"name the right one with --map {field}=NAME"
    )
