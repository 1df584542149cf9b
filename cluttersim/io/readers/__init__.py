"""Readers of archive products that carry the echoes, the track and the timing together.

One module per format: :mod:`.pds` (PDS3 and PDS4, through the optional ``pdr``
package: ``pip install 'cluttersim[pds]'``), :mod:`.matlab` (MATLAB v5 through
SciPy, v7.3 through h5py) and :mod:`.segy` (SEG-Y, through the optional
``segyio``: ``pip install 'cluttersim[segy]'``). Each offers a :class:`Lookup` of
the names its product holds; :func:`assemble` turns it into a
:class:`ProductContent` (the array as (trace, sample), the track and the
per-trace window start) using the field mapping of :mod:`.fields`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ...errors import ObservedDataError
from .fields import FIELD_KINDS, FieldSpec, candidates, missing_field, parse_field_map, shift_unit_is_time, unit_factor

#: Archive formats and the suffixes that select them.
ARCHIVE_SUFFIXES = {
    "pds3": (".lbl",),
    "pds4": (".xml",),
    "matlab": (".mat",),
    "segy": (".sgy", ".segy"),
}
#: Fields that must vary per trace (a label keyword cannot give them).
_PER_TRACE = ("lat", "lon", "alt", "radius", "time")
#: Which default names (:data:`.fields.DEFAULT_NAMES`) each format uses.
FAMILY = {"pds3": "pds", "pds4": "pds", "matlab": "matlab", "segy": "segy"}


@dataclass
class Lookup:
    """Named values of a product: name → (values, unit or None); matched without regard to case.

    ``values`` is a scalar (a label keyword: the same for every trace), a 1-D
    array (a column: one value per trace), or a callable returning one (read on
    first use).
    """

    source: str
    entries: dict = field(default_factory=dict)
    #: the product declares west-positive longitudes (PDS3 POSITIVE_LONGITUDE_DIRECTION = WEST,
    #: PDS4 longitude_direction "Positive West"): they are negated to east-positive
    west_longitudes: bool = False

    def add(self, name: str, values, unit=None) -> None:
        self.entries.setdefault(str(name), (values, unit))

    def get(self, name: str):
        key = name if name in self.entries else {k.lower(): k for k in self.entries}.get(name.lower())
        if key is None:
            return None
        values, unit = self.entries[key]
        if callable(values):  # read on first use (e.g. a SEG-Y header field: one pass over the file)
            values = values()
            self.entries[key] = (values, unit)
        return key, values, unit

    def names(self) -> list[str]:
        return list(self.entries)


@dataclass(frozen=True)
class ProductContent:
    """What an archive product gives: echoes as (trace, sample), track and timing (SI units)."""

    values: np.ndarray
    lat_deg: np.ndarray
    lon_deg: np.ndarray
    alt_m: np.ndarray
    time_s: np.ndarray | None
    sample_interval_s: float | None
    window_start_s: np.ndarray | None
    notes: tuple[str, ...]


def infer_axis_order(shape: tuple[int, int], per_trace_lengths, default: str) -> str:
    """The orientation of a 2-D echo array from the lengths of the product's per-trace vectors:
    ``traces-samples`` when only its first axis has such a length, ``samples-traces`` when only
    its second has, else ``default`` (the format's usual layout)."""
    a, b = shape
    if a in per_trace_lengths and b not in per_trace_lengths:
        return "traces-samples"
    if b in per_trace_lengths and a not in per_trace_lengths:
        return "samples-traces"
    return default


def format_for_suffix(suffix: str) -> str | None:
    for name, suffixes in ARCHIVE_SUFFIXES.items():
        if suffix.lower() in suffixes:
            return name
    return None


def read_product(path, file_format: str, *, field_map=(), geometry=None, axis_order=None, body=None,
                 sample_interval_s=None, window_start_given=False, track_given=False) -> ProductContent:  # fmt: skip
    """Read an archive product into a :class:`ProductContent`.

    Parameters
    ----------
    path : path of the product (a PDS label, a MATLAB or SEG-Y file)
    file_format : one of :data:`ARCHIVE_SUFFIXES`
    field_map : ``FIELD=NAME[:UNIT]`` strings (see :mod:`.fields`)
    geometry : optional second product (a PDS label) whose tables hold the geometry
    axis_order : ``traces-samples`` or ``samples-traces`` to override the array's orientation
    body : :class:`~cluttersim.physics.body.Body`, needed when the product gives radii
    sample_interval_s, window_start_given, track_given : what the user gives instead
        (those fields are then not required from the product)
    """
    mapping = parse_field_map(field_map)
    if file_format in ("pds3", "pds4"):
        from .pds import read_pds as reader
    elif file_format == "matlab":
        from .matlab import read_matlab as reader
    elif file_format == "segy":
        from .segy import read_segy as reader
    else:
        raise ObservedDataError(f"format {file_format!r}: expected one of {', '.join(ARCHIVE_SUFFIXES)}")
    lookup, values = reader(path, file_format, mapping, geometry=geometry, axis_order=axis_order)
    return assemble(lookup, values, FAMILY[file_format], mapping, body=body, sample_interval_s=sample_interval_s,
                    window_start_given=window_start_given, track_given=track_given)  # fmt: skip


def assemble(lookup: Lookup, values: np.ndarray, family: str, mapping: dict[str, FieldSpec], *, body=None,
             sample_interval_s=None, window_start_given=False, track_given=False) -> ProductContent:  # fmt: skip
    """Pick the fields out of ``lookup`` (see :mod:`.fields`), convert units, build track and timing."""
    n = values.shape[0]
    notes: list[str] = []

    def find(fld, required=True):
        names = candidates(fld, family, mapping)
        for name in names:
            hit = lookup.get(name)
            if hit is not None:
                key, vals, unit = hit
                user_unit = mapping[fld].unit if fld in mapping else None
                return key, vals, user_unit or unit, user_unit is None and unit is None
        if required:
            raise missing_field(lookup.source, fld, names, lookup.names())
        return None

    def per_trace(fld, hit, convert=True):
        key, vals, unit, defaulted = hit
        arr = np.asarray(vals, dtype=np.float64)
        if arr.ndim == 0 and fld in _PER_TRACE and n > 1:
            raise ObservedDataError(
                f"{lookup.source}: {key} ({fld}) is a single value; expected a column with one value per trace ({n}): "
                f"name it with --map {fld}=NAME"
            )
        if arr.ndim == 0:
            arr = np.full(n, float(arr))
        arr = arr.ravel()
        if arr.size != n:
            raise ObservedDataError(
                f"{lookup.source}: {key} ({fld}) has {arr.size} values; expected one per trace ({n}) or a single value"
            )
        factor = unit_factor(fld, unit, f"{lookup.source}: {key}") if convert else 1.0
        shown = unit if unit is not None else "no unit given: read as " + _default_unit(fld)
        notes.append(f"{fld} <- {key} ({shown})")
        return arr * factor

    lat = lon = alt = time = None
    if not track_given:
        lat = per_trace("lat", find("lat"))
        lon = per_trace("lon", find("lon"))
        if lookup.west_longitudes and not ("lon" in mapping and mapping["lon"].unit):  # a given unit decides
            lon = -lon
            notes.append("lon: the label declares west-positive longitudes; negated to east-positive")
        use_radius = "radius" in mapping and "alt" not in mapping
        hit_alt = None if use_radius else find("alt", required=False)
        if hit_alt is not None:
            alt = per_trace("alt", hit_alt)
        else:
            hit_r = find("radius", required=False)
            if hit_r is None:
                tried = candidates("alt", family, mapping) + candidates("radius", family, mapping)
                raise missing_field(lookup.source, "alt (or radius)", tried, lookup.names())
            radius = per_trace("radius", hit_r)
            lat, alt = radius_to_height(lat, lon, radius, body, lookup.source)
            notes.append("alt = distance from the body's centre - the reference surface (lat read as planetocentric)")
        hit_t = find("time", required=False)
        if hit_t is not None and np.ndim(hit_t[1]) == 0 and n > 1 and "time" not in mapping:
            notes.append(f"time <- {hit_t[0]} not used: a single value, not one per trace")
            hit_t = None
        if hit_t is not None:
            t = per_trace("time", hit_t)
            if np.all(np.diff(t) > 0):
                time = t
            else:
                notes.append(f"time <- {hit_t[0]} not used: its values do not increase strictly")
    dt = start = None
    hit_ft = find("fast_time", required=False)
    if hit_ft is not None:
        key, vals, unit, _ = hit_ft
        axis = np.asarray(vals, dtype=np.float64).ravel() * unit_factor("fast_time", unit, f"{lookup.source}: {key}")
        if axis.size != values.shape[1]:
            raise ObservedDataError(
                f"{lookup.source}: {key} (fast_time) has {axis.size} values; expected one per sample ({values.shape[1]})"
            )
        steps = np.diff(axis)
        if axis.size < 2 or not np.all(steps > 0) or np.ptp(steps) > 1e-3 * np.median(steps):
            raise ObservedDataError(f"{lookup.source}: {key} (fast_time): expected evenly spaced, increasing delays")
        dt = float(np.median(steps))
        start = np.full(values.shape[0], float(axis[0]))
        notes.append(f"sample_interval and window_start <- {key} ({unit or 'no unit given: read as s'})")
    if sample_interval_s is None:
        hit = find("sample_interval", required=dt is None)
        if hit is not None:
            vals = per_trace("sample_interval", hit)
            if np.ptp(vals) > 1e-9 * abs(vals[0]):
                raise ObservedDataError(f"{lookup.source}: {hit[0]} (sample_interval) varies between traces; expected one value")
            dt = float(vals[0])
        if not (dt is not None and np.isfinite(dt) and dt > 0):
            raise ObservedDataError(f"{lookup.source}: sample interval {dt!r} s: expected a positive delay")
    else:
        dt = float(sample_interval_s)
    if not window_start_given:
        hit = find("window_start", required=start is None)
        if hit is not None:
            start = per_trace("window_start", hit)
        shift = find("window_shift", required=False)
        if shift is not None:
            if shift_unit_is_time(shift[2]):  # a shift given as a delay
                start = start + per_trace("window_shift", shift, convert=False) * unit_factor(
                    "window_start", shift[2], f"{lookup.source}: {shift[0]}")
            else:
                start = start + per_trace("window_shift", shift) * dt
        bad = np.flatnonzero(~(np.isfinite(start) & (start >= 0)))
        if bad.size:
            raise ObservedDataError(
                f"{lookup.source}: window start of trace {bad[0]} = {start[bad[0]]!r} s: expected a delay >= 0 s"
            )
    return ProductContent(values=values, lat_deg=lat, lon_deg=lon, alt_m=alt, time_s=time, sample_interval_s=dt,
                          window_start_s=start, notes=tuple(notes))  # fmt: skip


def _default_unit(fld: str) -> str:
    return {"angle": "deg", "length": "m", "time": "s", "samples": "samples"}.get(FIELD_KINDS[fld], "-")


def radius_to_height(lat_c_deg, lon_deg, radius_m, body, source: str):
    """Planetocentric latitude and distance from the centre → geodetic latitude and height on ``body``.

    On a sphere the latitude is unchanged and h = r − R. On an ellipsoid the
    point's body-fixed coordinates r (cos φc cos λ, cos φc sin λ, sin φc) are
    converted to geodetic latitude and ellipsoidal height by PROJ (``geocent``
    → ``longlat`` on the same ellipsoid).
    """
    if body is None:
        raise ObservedDataError(
            f"{source}: the product gives the antenna's distance from the body's centre; its height needs the body: "
            "give --dem (its CRS) or --body-radius-m, or --map alt=NAME for a height column"
        )
    if body.semi_major_m == body.semi_minor_m:
        return np.asarray(lat_c_deg, dtype=np.float64), radius_m - body.semi_major_m
    import pyproj

    phi, lam = np.radians(lat_c_deg), np.radians(lon_deg)
    x, y, z = radius_m * np.cos(phi) * np.cos(lam), radius_m * np.cos(phi) * np.sin(lam), radius_m * np.sin(phi)
    ell = f"+a={body.semi_major_m!r} +b={body.semi_minor_m!r}"
    tr = pyproj.Transformer.from_crs(pyproj.CRS(f"+proj=geocent {ell} +units=m"), pyproj.CRS(f"+proj=longlat {ell}"),
                                     always_xy=True)  # fmt: skip
    _, lat, h = tr.transform(x, y, z)
    return np.asarray(lat), np.asarray(h)
