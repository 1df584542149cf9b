"""The built-in demo: an invented site, an orbital pass, the default radar.

The terrain is procedurally generated (``dem_examples/make_demo_dem.py``) on
a Mars-sized sphere; the pass flies north–south along the site's centre
meridian so that the craters and the mesa beside it return off-nadir clutter.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

from .config import default_config
from .dem import DemSource
from .errors import DemError
from .products import RUN_FILES, simulate_to_dir
from .outputs import atomic_paths, check_new
from .simulate import RunStats
from .track import great_circle_track

#: Where the demo DEM and its generator live in a source checkout.
DEMO_DIR = Path(__file__).resolve().parents[1] / "dem_examples"
DEMO_DEM = DEMO_DIR / "demo_site.tif"

#: The demo pass: from south to north along the centre meridian of the site.
DEMO_START_LAT_LON = (10.6, 41.0)
DEMO_END_LAT_LON = (13.4, 41.0)
DEMO_ALT_M = 300e3
DEMO_SPACING_M = 500.0
DEMO_SPEED_M_S = 3400.0


def demo_dem_path() -> Path:
    """The demo DEM, regenerated from its script if the GeoTIFF is missing."""
    if DEMO_DEM.exists():
        return DEMO_DEM
    script = DEMO_DIR / "make_demo_dem.py"
    if not script.exists():
        raise DemError(f"{DEMO_DEM}: demo DEM not found and no generator at {script}; run the demo from a source checkout")
    spec = importlib.util.spec_from_file_location("make_demo_dem", script)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return Path(module.make_demo_dem(DEMO_DEM))


def run_demo(out_dir="demo_output", *, overwrite: bool = False, progress: bool = True) -> tuple[dict[str, Path], RunStats]:
    """Run the demo scenario end to end; returns the product paths and run counters."""
    out_dir = Path(out_dir)
    track_csv = out_dir / "demo_track.csv"
    check_new([track_csv] + [out_dir / f for f in RUN_FILES.values()], overwrite)
    src = DemSource.open(demo_dem_path())
    track = great_circle_track(
        src.body, *DEMO_START_LAT_LON, *DEMO_END_LAT_LON, DEMO_ALT_M, DEMO_SPACING_M, speed_m_s=DEMO_SPEED_M_S
    )
    stats = RunStats()
    paths = simulate_to_dir(src, track, default_config(), out_dir, overwrite=True, progress=progress, stats=stats)
    with atomic_paths([track_csv]) as (tmp,):
        track.to_csv(tmp)
    return {**paths, "track": track_csv}, stats
