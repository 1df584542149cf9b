"""cluttersim: simulate the surface-clutter echo of a radar sounder from a DEM and a track.

The public names below are imported on first use (PEP 562), so ``import cluttersim`` and
``cluttersim --version`` do not load Numba and its compiled kernels, xarray, rasterio or
matplotlib until something needs them.
"""

import sys
import types
from importlib import import_module
from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("cluttersim")
except PackageNotFoundError:  # pragma: no cover - running from a source tree without install
    __version__ = "0.0.0+unknown"

#: Public name → the module that defines it.
_PUBLIC = {
    "Body": "body",
    "SimulationConfig": "config",
    "SurfaceConfig": "config",
    "default_config": "config",
    "DemSource": "dem",
    "ClutterSimError": "errors",
    "ConfigError": "errors",
    "DemError": "errors",
    "GeometryError": "errors",
    "ObservedDataError": "errors",
    "TrackError": "errors",
    "RadarConfig": "radar",
    "open_radargram": "radargram",
    "write_netcdf": "radargram",
    "simulate": "simulate",
    "Track": "track",
    "great_circle_track": "track",
}

__all__ = sorted(_PUBLIC) + ["__version__"]


def __getattr__(name):
    module = _PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module 'cluttersim' has no attribute {name!r}")
    value = getattr(import_module(f".{module}", __name__), name)
    types.ModuleType.__setattr__(sys.modules[__name__], name, value)
    return value


class _Package(types.ModuleType):
    """``cluttersim.simulate`` is the function, as it was when the package imported it eagerly:
    importing the submodule of the same name does not replace it."""

    def __setattr__(self, name, value):
        if name in _PUBLIC and isinstance(value, types.ModuleType) and _PUBLIC[name] == name:
            return
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package
