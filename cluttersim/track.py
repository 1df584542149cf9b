"""Tracks: antenna positions along the ground track, read from CSV or planned.

A track CSV has a header row and the columns ``lat`` and ``lon`` (degrees on
the DEM's body), ``alt`` (metres above the same reference surface as the DEM
heights) and optionally ``time`` (seconds). Other columns are ignored.
Messages count data rows from 1, after the header.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .physics.body import Body
from .errors import TrackError
from .validate import check_longitudes, check_trace_steps

REQUIRED_COLUMNS = ("lat", "lon", "alt")


@dataclass(frozen=True)
class Track:
    """Antenna positions, one per trace.

    Attributes
    ----------
    lat_deg, lon_deg : ndarray
        Geodetic latitude and longitude of the antenna, degrees.
    alt_m : ndarray
        Height above the body's reference surface, metres.
    time_s : ndarray or None
        Time of each trace, seconds (any epoch), if known.
    source : str
        Where the track came from (file name or description), for messages.
    """

    lat_deg: np.ndarray
    lon_deg: np.ndarray
    alt_m: np.ndarray
    time_s: np.ndarray | None = None
    source: str = "track"

    def __post_init__(self):
        n = len(self.lat_deg)
        if n == 0:
            raise TrackError(f"{self.source}: the track has no traces")
        for name, values in (("lat", self.lat_deg), ("lon", self.lon_deg), ("alt", self.alt_m)):
            if len(values) != n:
                raise TrackError(f"{self.source}: column {name!r} has {len(values)} values, expected {n}")
            bad = np.flatnonzero(~np.isfinite(values))
            if bad.size:
                raise TrackError(f"{self.source}: column {name!r} row {bad[0] + 1}: expected a finite number")
        bad = np.flatnonzero(np.abs(self.lat_deg) > 90)
        if bad.size:
            raise TrackError(f"{self.source}: column 'lat' row {bad[0] + 1} = {self.lat_deg[bad[0]]}: expected -90..90 degrees")
        check_longitudes(self.lon_deg, self.source)
        check_trace_steps(self.lat_deg, self.lon_deg, self.source)
        if self.time_s is not None:
            if len(self.time_s) != n:
                raise TrackError(f"{self.source}: column 'time' has {len(self.time_s)} values, expected {n}")
            steps = np.diff(self.time_s)
            bad = np.flatnonzero(~(steps > 0))
            if bad.size:
                raise TrackError(f"{self.source}: column 'time' row {bad[0] + 2}: expected times increasing strictly")

    def __len__(self) -> int:
        return len(self.lat_deg)

    @classmethod
    def from_csv(cls, path) -> "Track":
        """Read a track CSV (see module docstring)."""
        path = Path(path)
        names, rows = read_track_table(path)
        return cls.from_rows(names, rows, source=str(path))

    @classmethod
    def from_rows(cls, names: list[str], rows: list[list[str]], source: str, row_numbers=None) -> "Track":
        """A track from the parsed rows of a track table (see :func:`read_track_table`).

        ``row_numbers`` are the rows' data-row numbers in the file (from 1), for
        messages; by default 1, 2, ...
        """
        wanted = list(REQUIRED_COLUMNS) + (["time"] if "time" in names else [])
        cols = {c: np.empty(len(rows)) for c in wanted}
        for r, row in enumerate(rows):
            for c in wanted:
                idx = names.index(c)
                cell = row[idx].strip() if idx < len(row) else ""
                try:
                    cols[c][r] = float(cell)
                except ValueError:
                    number = r + 1 if row_numbers is None else row_numbers[r]
                    raise TrackError(f"{source}: row {number} column {c!r} = {cell!r}: expected a number") from None
        return cls(lat_deg=cols["lat"], lon_deg=cols["lon"], alt_m=cols["alt"], time_s=cols.get("time"), source=source)

    def to_csv(self, path) -> None:
        """Write the track as CSV (columns lat, lon, alt[, time]) to ``path``."""
        with open(path, "w", newline="", encoding="utf-8") as fh:
            writer = csv.writer(fh)
            writer.writerow(["lat", "lon", "alt"] + (["time"] if self.time_s is not None else []))
            for i in range(len(self)):
                row = [f"{self.lat_deg[i]:.9f}", f"{self.lon_deg[i]:.9f}", f"{self.alt_m[i]:.3f}"]
                if self.time_s is not None:
                    row.append(f"{self.time_s[i]:.6f}")
                writer.writerow(row)


@dataclass(frozen=True, kw_only=True)
class TrackOverDem:
    """A track over a DEM as a worker process or a Dask task receives it: small and picklable, the
    DEM travels as its path (never its pixels), the track as arrays. The fields every such job
    shares; :class:`cluttersim.analysis.survey.TrackJob`, :class:`cluttersim.analysis.segments.SegmentJob` and
    :class:`cluttersim.analysis.plan.PlanJob` extend it with their own (keyword-only here, so theirs
    keep their places)."""

    dem_path: str
    body_radius_m: float | None  # the sphere radius given for a DEM without CRS, else None
    lat_deg: np.ndarray
    lon_deg: np.ndarray
    alt_m: np.ndarray
    time_s: np.ndarray | None = None
    max_memory_bytes: int | str | None = "auto"  # as cluttersim.simulate.simulate takes it
    numba_threads: int | None = None  # the worker limits Numba's threads to this (results do not depend on it)
    key: str = ""  # the resume key of the job's output

    def track_name(self) -> str:
        """The name the track carries in messages (each job kind says which)."""
        return "track"

    def track(self) -> Track:
        return Track(self.lat_deg, self.lon_deg, self.alt_m, self.time_s, source=self.track_name())


def read_track_table(path, extra_columns: tuple[str, ...] = ()) -> tuple[list[str], list[list[str]]]:
    """The lower-cased header names and the data rows of a track CSV, checked to have the
    columns lat, lon, alt and ``extra_columns``."""
    path = Path(path)
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:  # -sig: a byte-order mark is not part of the header
            reader = csv.reader(fh)
            header = next(reader, None)
            rows = list(reader)
    except FileNotFoundError:
        raise TrackError(f"{path}: track file not found") from None
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise TrackError(f"{path}: cannot read track CSV ({exc})") from None
    expected = ", ".join(REQUIRED_COLUMNS + tuple(extra_columns))
    if not header:
        raise TrackError(f"{path}: empty file, expected a header with columns {expected}")
    names = [h.strip().lower() for h in header]
    missing = [c for c in REQUIRED_COLUMNS + tuple(extra_columns) if c not in names]
    if missing:
        raise TrackError(f"{path}: missing column(s) {', '.join(missing)}; {describe_header(path, header)}; "
                         f"expected a comma-separated header with {expected} (and optional time)")  # fmt: skip
    for number, row in enumerate(rows, start=1):
        if len(row) > len(names) and any(cell.strip() for cell in row[len(names):]):
            raise TrackError(
                f"{path}: row {number} has {len(row)} fields, the header {len(names)}: expected one value per column "
                "('.' as the decimal mark: a decimal comma splits numbers)"
            )
    return names, rows


def describe_header(path, header: list[str]) -> str:
    """What was found where a track header was expected, for messages: the columns read, the
    separator the file seems to use, and whether the first row looks like data (no header)."""
    import re

    shown = ", ".join(repr(h) for h in header[:8]) + (", ..." if len(header) > 8 else "")
    parts = [f"read {len(header)} column(s) with ',' as separator: {shown}"]
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            first = fh.readline()
    except (OSError, UnicodeDecodeError):
        first = ""
    counts = {sep: first.count(sep) for sep in (";", "\t", "|", " ")}
    if len(header) == 1:
        best = max(counts, key=counts.get)
        if counts[best] > 0:
            name = {"\t": "tab", " ": "space"}.get(best, repr(best))
            parts.append(f"the first line looks separated by {name} ({counts[best]} of them): save the file "
                         "with commas")  # fmt: skip
    numeric = [h for h in header if re.fullmatch(r"\s*[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?\s*", h)]
    if header and len(numeric) == len(header):
        parts.append("the first row holds only numbers: the file seems to have no header row (add 'lat,lon,alt')")
    return "; ".join(parts)


def lon_convention(lon_deg) -> str:
    """The longitude convention of some longitudes: "0..360" if any lies past 180° east, else
    "-180..180" (so 236 °E stays 236, and −124 stays −124)."""
    lon = np.asarray(lon_deg, dtype=np.float64)
    return "0..360" if np.any(lon[np.isfinite(lon)] > 180.0) else "-180..180"


def wrap_lon_like(lon_deg, reference_lon_deg) -> np.ndarray:
    """Longitudes in the convention of ``reference_lon_deg`` (:func:`lon_convention`): in
    [0, 360) for "0..360", in [−180, 180) otherwise; NaN stays NaN. Outputs derived from a track
    (source positions, first returns, planned tracks) come back in the convention it went in."""
    lon = np.asarray(lon_deg, dtype=np.float64)
    if lon_convention(reference_lon_deg) == "0..360":
        return lon % 360.0
    return (lon + 180.0) % 360.0 - 180.0


def great_circle_track(
    body: Body,
    start_lat_deg: float,
    start_lon_deg: float,
    end_lat_deg: float,
    end_lon_deg: float,
    alt_m: float,
    spacing_m: float,
    speed_m_s: float | None = None,
) -> Track:
    """A planned track along the geodesic (great circle on a sphere) between two points.

    Traces are ``spacing_m`` apart along the geodesic of the body's ellipsoid,
    starting at the first point; the last trace is the last one that fits
    before the end point. With ``speed_m_s``, a ``time`` column (s from the
    first trace) is added at that ground speed. Longitudes are returned in the
    convention of the points given (:func:`wrap_lon_like`).
    """
    for name, lat in (("start latitude", start_lat_deg), ("end latitude", end_lat_deg)):
        if not -90 <= lat <= 90:  # false for nan
            raise TrackError(f"{name} {lat}: expected -90..90 degrees")
    for name, lon in (("start longitude", start_lon_deg), ("end longitude", end_lon_deg)):
        if not (math.isfinite(lon) and abs(lon) <= 360):
            raise TrackError(f"{name} {lon}: expected -360..360 degrees")
    if not (math.isfinite(spacing_m) and spacing_m > 0):
        raise TrackError(f"trace spacing {spacing_m} m: expected a positive distance")
    if not math.isfinite(alt_m):
        raise TrackError(f"altitude {alt_m} m: expected a number")
    geod = body.geod()
    az, _, length = geod.inv(start_lon_deg, start_lat_deg, end_lon_deg, end_lat_deg)
    if length == 0:
        raise TrackError("start and end points coincide: expected two distinct points")
    n = int(math.floor(length / spacing_m + 1e-9)) + 1
    if n > 10_000_000:
        raise TrackError(f"trace spacing {spacing_m} m gives {n} traces: expected at most 10,000,000")
    dist = np.arange(n) * spacing_m
    lon, lat, _ = geod.fwd(np.full(n, start_lon_deg), np.full(n, start_lat_deg), np.full(n, az), dist)
    lon = wrap_lon_like(lon, [start_lon_deg, end_lon_deg])  # in the convention the points were given in
    time = dist / speed_m_s if speed_m_s else None
    return Track(
        lat_deg=np.asarray(lat), lon_deg=np.asarray(lon), alt_m=np.full(n, float(alt_m)), time_s=time, source="planned track"
    )
