"""cluttersim: simulate the surface-clutter echo of a radar sounder from a DEM and a track."""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("cluttersim")
except PackageNotFoundError:  # pragma: no cover - running from a source tree without install
    __version__ = "0.0.0+unknown"

from .body import Body  # noqa: E402
from .config import SimulationConfig, SurfaceConfig, default_config  # noqa: E402
from .dem import DemSource  # noqa: E402
from .errors import ClutterSimError, ConfigError, DemError, GeometryError, ObservedDataError, TrackError  # noqa: E402
from .radar import RadarConfig  # noqa: E402
from .radargram import open_radargram, write_netcdf  # noqa: E402
from .simulate import simulate  # noqa: E402
from .track import Track, great_circle_track  # noqa: E402

__all__ = [
    "Body",
    "ClutterSimError",
    "ConfigError",
    "DemError",
    "DemSource",
    "GeometryError",
    "ObservedDataError",
    "RadarConfig",
    "SimulationConfig",
    "SurfaceConfig",
    "Track",
    "TrackError",
    "default_config",
    "great_circle_track",
    "open_radargram",
    "simulate",
    "write_netcdf",
    "__version__",
]
