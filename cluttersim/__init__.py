"""cluttersim: simulate the surface-clutter echo of a radar sounder from a DEM and a track.

Start with :mod:`cluttersim.api` (``help(cluttersim.api)``): ``simulate``,
``simulate_to_dir``, ``echo_sources``, ``write_report``, ``compare_observed`` and
``survey_region``, each with an example. The modules ``compare``, ``survey``,
``sources``, ``report``, ``plots`` and ``palette`` are reachable as attributes
(``cluttersim.plots.plot_radargram(ds, ax=ax)``); everything is imported on
first use, so ``import cluttersim`` stays fast.
"""

import sys
import types
from importlib import import_module
from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("cluttersim")
except PackageNotFoundError:  # pragma: no cover - running from a source tree without install
    __version__ = "0.0.0+unknown"

#: Public name → module that defines it (imported on first access).
_EXPORTS = {
    "Body": "physics.body",
    "SimulationConfig": "config", "SurfaceConfig": "config", "default_config": "config",
    "DemSource": "io.dem",
    "ClutterSimError": "errors", "ConfigError": "errors", "DemError": "errors", "GeometryError": "errors",
    "ObservedDataError": "errors", "TrackError": "errors",
    "RadarConfig": "physics.radar",
    "open_radargram": "io.radargram", "write_netcdf": "io.radargram",
    "simulate": "simulate",
    "Track": "track", "great_circle_track": "track",
    "simulate_to_dir": "api", "echo_sources": "api", "write_report": "api", "compare_observed": "api",
    "survey_region": "api",
    "example_scene": "examples",
    "FigureOptions": "products",
    "radar_template": "template",
}  # fmt: skip
#: Submodules reachable as attributes of the package → their module (``cluttersim.compare`` is
#: :mod:`cluttersim.analysis.compare`).
_SUBMODULES = {
    "api": "api", "compare": "analysis.compare", "survey": "analysis.survey", "sources": "analysis.sources",
    "report": "report", "plots": "plots", "palette": "palette", "examples": "examples", "template": "template",
    "products": "products",
}  # fmt: skip

__all__ = sorted(_EXPORTS) + ["__version__"]


def __getattr__(name):
    if name in _EXPORTS:
        value = getattr(import_module(f".{_EXPORTS[name]}", __name__), name)
        globals()[name] = value
        return value
    if name in _SUBMODULES:
        return import_module(f".{_SUBMODULES[name]}", __name__)
    raise AttributeError(f"module 'cluttersim' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_EXPORTS) | set(_SUBMODULES))


class _Package(types.ModuleType):
    """The package module: ``cluttersim.simulate`` stays the function when the submodule of the
    same name is imported (the import system would otherwise set the attribute to the module)."""

    def __setattr__(self, name, value):
        if isinstance(value, types.ModuleType) and _EXPORTS.get(name) == name:
            return  # the module stays reachable in sys.modules and by `from cluttersim.<name> import ...`
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package
