"""The radargram data model (xarray) and its netCDF file.

A simulated radargram is an :class:`xarray.Dataset` with dimensions ``trace``
and ``sample``:

=====================  ===============  ====  ==============================================
variable               dims             units meaning
=====================  ===============  ====  ==============================================
``power``              trace, sample    W     received power at the range-compressed
                                              receiver's output referred to its input
                                              (``power_convention``; float32; NaN off the DEM)
``delay``              sample           s     delay of each sample after the window start
``window_start``       trace            s     absolute two-way delay of sample 0
``lat``, ``lon``       trace            deg   antenna geodetic position
``alt``                trace            m     antenna height above the reference surface
``nadir_delay``        trace            s     two-way delay to the DEM surface directly
                                              below the antenna (bilinear)
``earliest_echo_delay`` trace           s     two-way delay to the nearest front-facing
                                              facet edge (the first surface echo)
``on_dem``             trace            1     1 where the antenna's nadir is on the DEM
``time``               trace            s     trace time, when the track has one
=====================  ===============  ====  ==============================================

With the source record (the default) also:

=========================  ==============  ====  ===========================================
``source_lat``,            trace, sample   deg   position of the facet contributing most power
``source_lon``                                   to the sample (NaN: none)
``left_fraction``,         trace, sample   1     share of the sample's power from left / right
``right_fraction``                               of the track (the rest: the nadir strip)
``first_return_delay``     trace           s     absolute two-way delay of the first return
``first_return_lat/lon``   trace           deg   its source
``first_return_offnadir``  trace           m     its ground distance from nadir
=========================  ==============  ====  ===========================================

The ``power_convention`` attribute names the level convention
(:data:`cluttersim.physics.radar.POWER_CONVENTION`: a point target reads its
radar-equation power at its peak sample, a diffuse surface
Pt G² λ² σ0 A_τ / ((4π)³ R⁴) with A_τ the area within c τ_eff / 2, whatever
the sample interval). Files written before it existed have no such attribute:
:func:`open_radargram` rescales their ``power`` and ``noise_power`` by
τ_eff / Δt (:func:`to_current_convention`).

With a ``[noise]`` table, ``noise_power`` (scalar, W): the mean noise power
added to every sample, on the same scale (:mod:`cluttersim.physics.noise`). With a ``[subsurface]``
table, ``predicted_subsurface_delay`` (trace, s, absolute),
``predicted_subsurface_power`` and ``predicted_surface_power`` (trace, W)
(:mod:`cluttersim.physics.subsurface`).

With ``[[band]]`` tables in the radar TOML (several frequency bands in one
run) the file has a third dimension ``band`` (coordinate: the band names, with
``band_center_frequency`` and ``band_bandwidth`` in Hz): every variable in
:data:`BAND_VARIABLES` then has dimensions (band, trace[, sample]); the
per-trace geometry (window start, position, nadir delay...) is shared.
:func:`select_band` (and ``open_radargram(path, band=...)``) returns one band
as a single-band radargram with that band's radar in its attributes.

Global attributes hold the full radar and surface configuration (flattened as
``radar_<key>`` / ``surface_<key>`` and as JSON in ``cluttersim_config``), the
DEM file name, the body and the package version.
"""

from __future__ import annotations

import contextlib
import io
import json
import os
from pathlib import Path

import numpy as np
import xarray as xr

from ..errors import ClutterSimError
from .outputs import atomic_paths, check_new


def build_dataset(
    power_w,
    window_start_s,
    sample_interval_s,
    track,
    nadir_delay_s,
    earliest_echo_delay_s,
    on_dem,
    attrs: dict,
    extra: dict | None = None,
    body=None,
) -> xr.Dataset:
    """Assemble the radargram Dataset (see module docstring for the contract); ``body`` (a
    :class:`~cluttersim.physics.body.Body`) gives the along-track ``distance`` coordinate."""
    ntrace, nsample = power_w.shape
    trace_vars = {
        "window_start": (window_start_s, "s", "absolute two-way delay of sample 0"),
        "lat": (track.lat_deg, "degrees_north", "antenna geodetic latitude"),
        "lon": (track.lon_deg, "degrees_east", "antenna geodetic longitude"),
        "alt": (track.alt_m, "m", "antenna height above the body's reference surface"),
        "nadir_delay": (nadir_delay_s, "s", "two-way delay to the DEM surface directly below the antenna"),
        "earliest_echo_delay": (earliest_echo_delay_s, "s", "two-way delay to the nearest front-facing facet"),
        "on_dem": (np.asarray(on_dem, dtype=np.int8), "1", "1 where the nadir point lies on the DEM"),
    }
    if track.time_s is not None:
        trace_vars["time"] = (track.time_s, "s", "trace time")
    data_vars = {
        "power": (
            ("trace", "sample"),
            power_w.astype(np.float32),
            {"units": "W", "long_name": "received power at the compressed receiver output referred to its input"},
        )
    }
    for name, (values, units, long_name) in trace_vars.items():
        data_vars[name] = ("trace", np.asarray(values), {"units": units, "long_name": long_name})
    for name, (dims, values, units, long_name) in (extra or {}).items():
        data_vars[name] = (dims, values, {"units": units, "long_name": long_name})
    coords = {
        "trace": ("trace", np.arange(ntrace), {"long_name": "trace index along the track"}),
        "delay": (
            "sample",
            np.arange(nsample) * sample_interval_s,
            {"units": "s", "long_name": "delay after the trace's window start"},
        ),
    }
    ds = xr.Dataset(data_vars, coords=coords, attrs={"Conventions": "CF-1.10", **attrs})
    return with_trace_coordinates(ds, body)


#: Per-trace variables that are coordinates of ``trace``, with their CF standard names.
TRACE_COORDINATES = {
    "lat": "latitude",
    "lon": "longitude",
    "alt": "height_above_reference_ellipsoid",
    "time": "time",
    "distance": None,
}


def along_track_distance_m(body, lat_deg, lon_deg) -> np.ndarray:
    """Cumulative geodesic distance (m) along a track from its first trace, on ``body``'s
    ellipsoid (``pyproj.Geod.inv`` between consecutive traces)."""
    lat = np.asarray(lat_deg, dtype=np.float64)
    lon = np.asarray(lon_deg, dtype=np.float64)
    if lat.size < 2:
        return np.zeros(lat.size)
    _, _, step = body.geod().inv(lon[:-1], lat[:-1], lon[1:], lat[1:])
    return np.concatenate([[0.0], np.cumsum(step)])


def with_trace_coordinates(ds: xr.Dataset, body=None) -> xr.Dataset:
    """The radargram with the coordinates a scientist expects (idempotent; older files too).

    ``lat``, ``lon``, ``alt``, ``time`` and the along-track ``distance`` (m, geodesic from the
    first trace, on ``body`` or on the ellipsoid in the ``body_semi_*`` attributes) become
    coordinates of ``trace`` with CF ``standard_name``s, and ``delay`` (s) on ``sample`` gets a
    copy in µs, ``delay_us``, so that ``ds.power.plot(x="distance", y="delay_us", yincrease=False)``
    draws the radargram.
    """
    if body is None and "body_semi_major_m" in ds.attrs:
        from ..physics.body import Body

        body = Body(str(ds.attrs.get("body_name", "body")), float(ds.attrs["body_semi_major_m"]),
                    float(ds.attrs.get("body_semi_minor_m", ds.attrs["body_semi_major_m"])))  # fmt: skip
    if "distance" not in ds.variables and body is not None and "lat" in ds.variables and "lon" in ds.variables:
        ds = ds.assign_coords(distance=("trace", along_track_distance_m(body, ds["lat"].values, ds["lon"].values),
                                        {"units": "m", "long_name": "along-track distance (geodesic, from the first trace)"}))  # fmt: skip
    names = [n for n in TRACE_COORDINATES if n in ds.variables]
    ds = ds.set_coords(names)
    for name in names:
        standard = TRACE_COORDINATES[name]
        if standard:
            ds[name].attrs["standard_name"] = standard
        ds[name].attrs.setdefault("axis", {"lat": "Y", "lon": "X", "alt": "Z", "time": "T"}.get(name, ""))
        if not ds[name].attrs["axis"]:
            del ds[name].attrs["axis"]
    if "delay" in ds.variables:
        ds["delay"].attrs.setdefault("standard_name", "time")  # a duration; CF has no better name
        if "delay_us" not in ds.variables:
            ds = ds.assign_coords(delay_us=("sample", ds["delay"].values * 1e6,
                                            {"units": "us", "long_name": "delay after the trace's window start (µs)"}))  # fmt: skip
    return ds


#: Variables that differ between frequency bands (a ``band`` dimension in multi-band files).
BAND_VARIABLES = (
    "power", "source_lat", "source_lon", "left_fraction", "right_fraction", "first_return_delay", "first_return_lat",
    "first_return_lon", "first_return_offnadir", "nadir_strip_half_width", "noise_power", "predicted_subsurface_delay",
    "predicted_subsurface_power", "predicted_surface_power",
)  # fmt: skip


def stack_bands(datasets: list[xr.Dataset], config) -> xr.Dataset:
    """One multi-band radargram from the single-band radargrams of ``config.per_band()``."""
    names = config.band_names
    first = datasets[0]
    out = first.drop_vars([v for v in BAND_VARIABLES if v in first])
    for var in BAND_VARIABLES:
        if var in first:
            out[var] = xr.concat([ds[var] for ds in datasets], dim="band")
    radars = [cfg.radar for _, cfg in config.per_band()]
    out = out.assign_coords(
        band=("band", np.array(names, dtype=object), {"long_name": "frequency band"}),
        band_center_frequency=("band", [r.center_frequency_hz for r in radars], {"units": "Hz"}),
        band_bandwidth=("band", [r.bandwidth_hz for r in radars], {"units": "Hz"}),
    )
    config_attrs = [k for k in first.attrs if k == "cluttersim_config" or k.split("_", 1)[0] in config.to_dict()]
    out.attrs = {k: v for k, v in first.attrs.items() if k not in config_attrs}
    out.attrs.update(flatten_config_attrs(config))
    out["power"].attrs["long_name"] = "received power at the compressed receiver output referred to its input, per band"
    return out


def band_names(ds: xr.Dataset) -> list[str]:
    """The bands of a multi-band radargram (empty list for a single-band one)."""
    return [str(b) for b in ds["band"].values] if "band" in ds.dims else []


def select_band(ds: xr.Dataset, band: str | None = None, *, source="radargram") -> xr.Dataset:
    """One band of a radargram as a single-band radargram (the first band if ``band`` is None).

    The result's configuration attributes (``cluttersim_config``, ``radar_*``)
    are those of the band; ``cluttersim_config_all`` keeps the multi-band
    configuration and ``band`` the band's name. A single-band radargram is
    returned as it is when ``band`` is None.
    """
    from ..config import SimulationConfig

    names = band_names(ds)
    if not names:
        if band is not None:
            raise ClutterSimError(f"{source}: band {band!r} asked for, but the radargram has a single band")
        return ds
    if band is None:
        band = names[0]
    if band not in names:
        raise ClutterSimError(f"{source}: band {band!r}: expected one of {', '.join(names)}")
    one = ds.sel(band=band).drop_vars(["band", "band_center_frequency", "band_bandwidth"])
    full = SimulationConfig.from_dict(json.loads(ds.attrs["cluttersim_config"]))
    attrs = {k: v for k, v in ds.attrs.items() if k != "cluttersim_config"}
    attrs.update(flatten_config_attrs(full.for_band(band)))
    attrs["cluttersim_config_all"] = ds.attrs["cluttersim_config"]
    attrs["band"] = band
    one.attrs = attrs
    return one


def flatten_config_attrs(config) -> dict:
    """netCDF-safe attributes from a :class:`~cluttersim.config.SimulationConfig`
    (the ``[[band]]`` list is in the JSON only)."""
    d = config.to_dict()
    attrs = {"cluttersim_config": json.dumps(d)}
    for table, values in d.items():
        if not isinstance(values, dict):
            continue
        for key, value in values.items():
            if isinstance(value, bool):  # netCDF has no boolean attributes
                value = int(value)
            attrs[f"{table}_{key}"] = value if isinstance(value, (int, float, str)) else str(value)
    return attrs


def write_netcdf(ds: xr.Dataset, path, *, overwrite: bool = False) -> Path:
    """Write a radargram to netCDF4 (h5netcdf engine) atomically; returns the path."""
    path = Path(path)
    check_new([path], overwrite)
    with atomic_paths([path]) as (tmp,):
        write_netcdf_to(ds, tmp)
    return path


#: The (trace, sample) arrays written deflated (zlib) with the byte shuffle, lossless.
_DEFLATED = ("power", "source_lat", "source_lon", "left_fraction", "right_fraction")
#: Deflate level: 1 (noisy float32 values hardly compress further at higher levels: 2.5 % smaller
#: at zlib's level 4, for 20 % more time).
_DEFLATE_LEVEL = 1
#: Traces per HDF5 chunk of those arrays (a chunk per 256 traces: 2 MB at 2048 samples).
_CHUNK_TRACES = 256


def write_netcdf_to(ds: xr.Dataset, path) -> None:
    """Write without the overwrite/atomic checks (the caller handles them).

    The arrays of :data:`_DEFLATED` are stored in chunks of :data:`_CHUNK_TRACES`
    traces with the HDF5 shuffle and deflate filters. Large float32 ones are
    compressed on several threads (the compressor releases the GIL) and written as
    finished chunks (:func:`_write_deflated_chunks`): xarray first writes the
    file with all variables, attributes and filters, those arrays holding
    zeros, then each chunk is replaced by the same data HDF5 would have written.
    """
    names = [name for name in _DEFLATED if name in ds]
    parallel = [n for n in names if ds[n].dtype == np.float32 and ds[n].ndim >= 2 and ds[n].size >= 1 << 20]
    encoding = {}
    for name in names:
        enc = {"zlib": True, "complevel": _DEFLATE_LEVEL, "shuffle": True}
        if name in parallel:
            shape = ds[name].shape
            enc["chunksizes"] = (1,) * (len(shape) - 2) + (min(_CHUNK_TRACES, shape[-2]), shape[-1])
        encoding[name] = enc
    placeholder = ds.assign({n: ds[n].copy(data=np.zeros(ds[n].shape, dtype=np.float32)) for n in parallel})
    image = io.BytesIO()
    with _local_write_lock():
        placeholder.to_netcdf(image, engine="h5netcdf", encoding=encoding, format="NETCDF4")
    if parallel:
        image.seek(0)
        _write_deflated_chunks(image, {n: np.ascontiguousarray(ds[n].values) for n in parallel})
    write_file_image(image, path)


def save_netcdf(ds: xr.Dataset, path, **to_netcdf_kwargs) -> None:
    """``ds.to_netcdf(path, engine="h5netcdf")`` built in memory, then written by :func:`write_file_image`."""
    image = io.BytesIO()
    with _local_write_lock():
        ds.to_netcdf(image, engine="h5netcdf", **{"format": "NETCDF4", **to_netcdf_kwargs})
    write_file_image(image, path)


def _local_write_lock():
    """With a Dask distributed client in the process, xarray takes a cluster-wide lock named after
    the target, which an in-memory file has not: the image is written with a local lock instead."""
    import contextlib
    import sys

    if "dask" not in sys.modules:
        return contextlib.nullcontext()
    import dask

    return dask.config.set(scheduler="synchronous")


def write_file_image(image: io.BytesIO, path) -> None:
    """Write an HDF5 file built in memory to ``path`` with plain file I/O.

    HDF5 is never the one writing to disk: a write error there (a full disk) leaves
    its file object in a state that crashes the interpreter at exit, whereas an
    OSError from ``write`` is an ordinary exception (see
    :func:`cluttersim.io.outputs.atomic_paths`).
    """
    try:
        with open(path, "wb") as fh:
            fh.write(image.getbuffer())
            fh.flush()
            os.fsync(fh.fileno())
    except OSError as exc:
        if exc.filename is None:  # write() and fsync() errors do not name the file
            raise OSError(exc.errno, exc.strerror, str(path)) from None
        raise


def _zlib_compressor():
    """``compress(data, level)`` producing a zlib stream (RFC 1950, the format of HDF5's deflate
    filter, which any reader decodes): ISA-L's (``isal``; levels 0–3, about 7× faster than zlib's
    level 1 on these arrays, for a file of the same size), or else the standard library's."""
    try:
        from isal import isal_zlib
    except ImportError:  # pragma: no cover - isal is a dependency; a platform without its wheel
        import zlib

        return zlib.compress
    return lambda data, level: isal_zlib.compress(data, min(level, 3))


def _write_deflated_chunks(path, arrays: dict) -> None:  # path: a file name or a file object
    """Overwrite every chunk of the given (chunked, shuffle + deflate) datasets of an HDF5 file with
    ``arrays``, compressed in parallel: the HDF5 shuffle filter (byte k of every element together,
    for k = 0..itemsize−1, over the whole padded chunk) then a zlib stream at the dataset's level
    (:func:`_zlib_compressor`), as HDF5's own filters do. A dataset with any other filter pipeline
    is written the ordinary way."""
    import os
    from concurrent.futures import ThreadPoolExecutor
    from itertools import product

    import h5py

    compress = _zlib_compressor()
    threads = max(1, min(4, os.cpu_count() or 1))
    with h5py.File(path, "r+") as f, ThreadPoolExecutor(threads) as pool:
        for name, values in arrays.items():
            dset = f[name]
            plain = (dset.compression != "gzip" or not dset.shuffle or dset.chunks is None or dset.fletcher32
                     or dset.scaleoffset is not None or dset.shape != values.shape or dset.dtype != values.dtype)  # fmt: skip
            if plain:
                dset[...] = values
                continue
            chunks = dset.chunks
            level = int(dset.compression_opts)
            fill = dset.fillvalue
            item = values.dtype.itemsize

            def deflate(offset, values=values, chunks=chunks, level=level, fill=fill, item=item):
                part = values[tuple(slice(o, o + c) for o, c in zip(offset, chunks))]
                if part.shape != chunks:  # an edge chunk is stored whole, padded with the fill value
                    block = np.full(chunks, fill, dtype=values.dtype)
                    block[tuple(slice(0, n) for n in part.shape)] = part
                    part = block
                shuffled = np.ascontiguousarray(part).view(np.uint8).reshape(-1, item).T.tobytes()
                return offset, compress(shuffled, level)

            offsets = product(*(range(0, n, c) for n, c in zip(values.shape, chunks)))
            for offset, data in pool.map(lambda o: deflate(o), offsets):
                dset.id.write_direct_chunk(offset, data)


#: Radargrams with more (trace, sample) values than this open lazily by default (dask-backed chunks).
LAZY_VALUES = 50_000_000
#: Most traces a figure draws: larger radargrams are drawn from every k-th trace (:func:`thin_traces`).
PICTURE_TRACES = 4096


def _open(path, lazy):
    """The dataset of a netCDF file: loaded, or lazy (dask chunks of whole HDF5 chunks when dask is
    installed, else xarray's lazily indexed arrays: slicing reads only what it needs)."""
    if not lazy:
        with xr.open_dataset(path, engine="h5netcdf") as ds:
            return ds.load()
    try:
        import dask  # noqa: F401
    except ImportError:
        return xr.open_dataset(path, engine="h5netcdf")
    return xr.open_dataset(path, engine="h5netcdf", chunks={})


def open_radargram(path, band: str | None = None, *, lazy: bool | None = None) -> xr.Dataset:
    """Open a radargram written by cluttersim.

    A multi-band file gives one band (:func:`select_band`): ``band``, or the first.
    ``lazy``: True keeps the arrays on disk (dask-backed chunks: a 100,000 × 2,048
    radargram can be sliced, reduced and plotted without loading it; close the
    dataset when done); False loads everything; None (default) loads radargrams of
    up to :data:`LAZY_VALUES` values per (trace, sample) variable and opens larger
    ones lazily.
    """
    path = Path(path)
    if not path.exists():
        raise ClutterSimError(f"{path}: radargram file not found")
    try:
        if lazy is None:
            import h5py

            with h5py.File(path, "r") as f:
                size = f["power"].size if "power" in f else 0
            lazy = size > LAZY_VALUES
        ds = _open(path, lazy)
    except (OSError, ValueError) as exc:
        raise ClutterSimError(f"{path}: not a readable netCDF radargram ({exc})") from None
    if "power" not in ds or ds["power"].dims not in (("trace", "sample"), ("band", "trace", "sample")):
        raise ClutterSimError(f"{path}: expected a variable 'power' with dimensions (trace, sample)")
    return with_trace_coordinates(to_current_convention(select_band(ds, band, source=str(path)), source=str(path)))


def to_current_convention(ds: xr.Dataset, *, source="radargram") -> xr.Dataset:
    """A single-band radargram on the current ``power`` scale.

    Files with ``power_convention`` = :data:`~cluttersim.physics.radar.POWER_CONVENTION` are
    returned as they are. Files without the attribute were written with power per
    delay sample (the facet power spread over bins of Δt, convolved with a pulse
    kernel summing to 1): a diffuse echo of power density ρ per unit delay read ρ Δt
    there and reads ρ τ_eff now, and a point echo P read about P Δt/τ_eff at its peak
    and reads P now; both are τ_eff/Δt times the old value (exact for the diffuse
    echo, to the sub-sample scalloping of the old box-averaged kernel for a point).
    ``power`` and ``noise_power`` are multiplied by τ_eff/Δt (so their ratio, that
    file's own, is kept) and the attributes ``power_convention`` and
    ``power_convention_converted_from`` say so. Predicted specular powers are left
    as they were (they had no spherical divergence then). A file without the radar
    attributes (not written by cluttersim) is returned unchanged.
    """
    from ..physics.radar import LEGACY_POWER_CONVENTION, POWER_CONVENTION, effective_pulse_duration_s

    convention = ds.attrs.get("power_convention", LEGACY_POWER_CONVENTION)
    if convention == POWER_CONVENTION:
        return ds
    if convention != LEGACY_POWER_CONVENTION:
        raise ClutterSimError(f"{source}: power_convention = {convention!r}: expected {POWER_CONVENTION!r} or none")
    try:
        bandwidth = float(ds.attrs["radar_bandwidth_hz"])
        dt = float(ds.attrs["radar_sample_interval_s"])
        window = str(ds.attrs.get("radar_range_window", "hann"))
        factor = effective_pulse_duration_s(bandwidth, window) / dt
    except (KeyError, ValueError, TypeError):
        return ds  # not written by cluttersim (no radar attributes): nothing to convert; readers check the rest
    ds = ds.copy()
    for name in ("power", "noise_power"):
        if name in ds:
            attrs = dict(ds[name].attrs)
            ds[name] = (ds[name] * np.float32(factor) if ds[name].dtype == np.float32 else ds[name] * factor).astype(ds[name].dtype)
            ds[name].attrs = attrs
    ds.attrs["power_convention"] = POWER_CONVENTION
    ds.attrs["power_convention_converted_from"] = LEGACY_POWER_CONVENTION
    ds.attrs["power_convention_factor"] = factor
    return ds


@contextlib.contextmanager
def open_radargram_lazy(path, band: str | None = None):
    """:func:`open_radargram` with ``lazy=True`` as a context manager that closes the file."""
    ds = open_radargram(path, band, lazy=True)
    try:
        yield ds
    finally:
        ds.close()


def thin_traces(ds: xr.Dataset, max_traces: int = PICTURE_TRACES) -> xr.Dataset:
    """Every k-th trace of a radargram with more than ``max_traces`` traces (k the smallest
    that leaves at most ``max_traces``), for figures; attribute ``picture_trace_step`` = k.
    Lazily opened arrays are read only at the traces kept."""
    n = ds.sizes.get("trace", 0)
    if n <= max_traces:
        return ds
    step = -(-n // max_traces)
    out = ds.isel(trace=slice(0, None, step))
    out.attrs = {**ds.attrs, "picture_trace_step": step}
    return out
