"""The radargram data model (xarray) and its netCDF file.

A simulated radargram is an :class:`xarray.Dataset` with dimensions ``trace``
and ``sample``:

=====================  ===============  ====  ==============================================
variable               dims             units meaning
=====================  ===============  ====  ==============================================
``power``              trace, sample    W     received echo power per delay sample, no
                                              processing gain (float32; NaN off the DEM)
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

With a ``[noise]`` table, ``noise_power`` (scalar, W): the mean noise power
k T B F added to every sample (:mod:`cluttersim.noise`). With a ``[subsurface]``
table, ``predicted_subsurface_delay`` (trace, s, absolute),
``predicted_subsurface_power`` and ``predicted_surface_power`` (trace, W)
(:mod:`cluttersim.subsurface`).

Global attributes hold the full radar and surface configuration (flattened as
``radar_<key>`` / ``surface_<key>`` and as JSON in ``cluttersim_config``), the
DEM file name, the body and the package version.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import xarray as xr

from .errors import ClutterSimError
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
) -> xr.Dataset:
    """Assemble the radargram Dataset (see module docstring for the contract)."""
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
            {"units": "W", "long_name": "received echo power per delay sample (no processing gain)"},
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
    return ds


def flatten_config_attrs(config) -> dict:
    """netCDF-safe attributes from a :class:`~cluttersim.config.SimulationConfig`."""
    d = config.to_dict()
    attrs = {"cluttersim_config": json.dumps(d)}
    for table, values in d.items():
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


def write_netcdf_to(ds: xr.Dataset, path) -> None:
    """Write without the overwrite/atomic checks (the caller handles them)."""
    encoding = {
        name: {"zlib": True, "complevel": 4, "shuffle": True}
        for name in ("power", "source_lat", "source_lon", "left_fraction", "right_fraction")
        if name in ds
    }
    ds.to_netcdf(path, engine="h5netcdf", encoding=encoding, format="NETCDF4")


def open_radargram(path) -> xr.Dataset:
    """Load a radargram written by cluttersim into memory."""
    path = Path(path)
    if not path.exists():
        raise ClutterSimError(f"{path}: radargram file not found")
    try:
        with xr.open_dataset(path, engine="h5netcdf") as ds:
            ds = ds.load()
    except (OSError, ValueError) as exc:
        raise ClutterSimError(f"{path}: not a readable netCDF radargram ({exc})") from None
    if "power" not in ds or ds["power"].dims != ("trace", "sample"):
        raise ClutterSimError(f"{path}: expected a variable 'power' with dimensions (trace, sample)")
    return ds
