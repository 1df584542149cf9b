"""A tiny invented scene to learn the library with: a DEM with one hill and a low pass beside it.

Used by the examples in the docstrings of :mod:`cluttersim.api` (run by the tests), small
enough to simulate in about a second.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

#: The example body: a sphere of 1,000 km radius (an invented small world), as a pyproj CRS string.
EXAMPLE_CRS = "+proj=longlat +R=1000000 +no_defs +type=crs"


def example_scene(directory=".", *, traces: int = 40) -> tuple[Path, Path]:
    """Write ``example_dem.tif`` (a 240 × 240 grid of 0.005°, about 87 m, with one 400 m hill
    east of the centre) and ``example_track.csv`` (a south–north pass at 5 km altitude west of
    the hill, ``traces`` traces) into ``directory``; returns their paths ``(dem, track)``.

    Examples
    --------
    >>> import cluttersim
    >>> dem, track = cluttersim.example_scene("example")
    >>> dem.name, track.name
    ('example_dem.tif', 'example_track.csv')
    """
    import rasterio
    from rasterio.transform import from_origin

    from .track import Track

    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    n, res = 240, 0.005
    west, north = -0.6, 0.6
    y, x = np.mgrid[0:n, 0:n]
    lon = west + (x + 0.5) * res
    lat = north - (y + 0.5) * res
    hill = 400.0 * np.exp(-((lon - 0.12) ** 2 + lat**2) / (2 * 0.05**2))
    ripples = 8.0 * np.sin(lon * 90.0) * np.cos(lat * 70.0)
    elevation = (hill + ripples).astype("float32")
    dem = directory / "example_dem.tif"
    with rasterio.open(dem, "w", driver="GTiff", width=n, height=n, count=1, dtype="float32", crs=EXAMPLE_CRS,
                       transform=from_origin(west, north, res, res)) as out:  # fmt: skip
        out.write(elevation, 1)
    lats = np.linspace(-0.25, 0.25, traces)
    track = directory / "example_track.csv"
    Track(lats, np.full(traces, 0.0), np.full(traces, 5000.0), source="example").to_csv(track)
    return dem, track
