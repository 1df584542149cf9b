"""The project's exception hierarchy.

Every error a user can cause derives from :class:`ClutterSimError`. The command
line turns these into a single line and an exit code; library users can catch
them by the builtin they refine (``ValueError``, ``OSError``) as well.
"""


class ClutterSimError(Exception):
    """Raised for any problem cluttersim can explain to its user."""

    #: Exit code the command line uses for this class of error (1 = bad data).
    exit_code = 1


class ConfigError(ClutterSimError, ValueError):
    """Raised when a radar/surface configuration key or value is invalid."""


class DemError(ClutterSimError, ValueError):
    """Raised when a DEM cannot be read or is unusable (no CRS, all nodata...)."""


class TrackError(ClutterSimError, ValueError):
    """Raised when a track file or track geometry is invalid."""


class GeometryError(ClutterSimError, ValueError):
    """Raised when track, DEM and window cannot produce any surface echo."""


class ObservedDataError(ClutterSimError, ValueError):
    """Raised when an observed radargram, its track or its timing is unreadable or inconsistent."""


class OutputExistsError(ClutterSimError, FileExistsError):
    """Raised when an output exists and overwriting was not requested."""

    exit_code = 2


class MemoryLimitError(ClutterSimError, MemoryError):
    """Raised before reading when a run's estimated memory exceeds the allowed limit."""


class OutputError(ClutterSimError, OSError):
    """Raised when a product cannot be written (no space left, read-only file system, bad path)."""


class OutputLockedError(ClutterSimError, BlockingIOError):
    """Raised when another run holds the lock on an output directory."""

    exit_code = 2
