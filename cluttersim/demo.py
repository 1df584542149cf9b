"""The built-in demo: an invented site, an orbital pass, the default radar.

The terrain is procedurally generated (``dem_examples/make_demo_dem.py``) on
a Mars-sized sphere; the pass flies north–south along the site's centre
meridian so that the craters and the mesa beside it return off-nadir clutter.
"""

from __future__ import annotations

import dataclasses
import importlib.util
from pathlib import Path

from . import plots
from .physics.aperture import ProcessingConfig
from .config import default_config
from .physics.ionosphere import IonosphereConfig
from .physics.noise import NoiseConfig
from .physics.radar import BandConfig
from .io.dem import DemSource
from .errors import DemError
from .products import FigureOptions, figure_name, run_files, simulate_to_dir
from .report import REPORT_FILE, write_report
from .io.outputs import atomic_paths, check_new, locked_output
from .io.radargram import open_radargram
from .simulate import RunStats, simulate
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
#: Processed synthetic aperture of the demo's focused view (δ = λR/2L ≈ 750 m at 300 km, λ = 15 m).
DEMO_APERTURE_M = 3000.0
#: The demo's two-band view: a low band (deeper penetration, coarse: c/2B = 50 m) and a high band
#: (finer: 7.5 m) of an invented dual-band sounder, on the default radar's window.
DEMO_BANDS = (
    BandConfig("low", {"center_frequency_hz": 9e6, "bandwidth_hz": 3e6}),
    BandConfig("high", {"center_frequency_hz": 25e6, "bandwidth_hz": 20e6}),
)
#: The demo ground's specular reflection: ice-rich soil (ε′ = 3.15, Fresnel reflectivity 0.078) with
#: 0.3 m rms heights below the DEM's cells (coherent share −0.3 dB at nadir, 20 MHz). Over the smooth
#: plain (dem_examples/README.md) the nadir echo is then a mirror's; over rough ground it is not.
DEMO_PERMITTIVITY = 3.15
DEMO_RMS_HEIGHT_M = 0.3
#: The demo's instrument view: galactic sky noise (ITU-R P.372 median) on a 3 dB receiver, a 100 µs
#: chirp (range-compression gain τB = 1000, 30 dB), unfocused processing of 700 pulses/s (~440
#: pulses over √(λh) = 2.1 km: 26 dB) and a day-side ionosphere of 2e15 el/m² (invented: 1.3 µs of
#: delay at 20 MHz and 1.5 µs of dispersion across the band). First 26 µs of the window shown.
DEMO_SKY = NoiseConfig(noise_figure_db=3.0, sky_temperature_k="galactic", seed=1)
DEMO_INSTRUMENT = ProcessingConfig(pulse_length_s=100e-6, aperture="unfocused", prf_hz=700.0)
DEMO_TEC_EL_M2 = 2e15
DEMO_SKY_SAMPLES = 700
#: Samples shown in the two-band view (15 µs: the nadir echo and the nearest clutter, where the
#: resolution difference shows).
DEMO_BANDS_SAMPLES = 400


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


def demo_config():
    """The built-in radar over the demo's ground: its diffuse law plus specular reflection."""
    base = default_config()
    surface = dataclasses.replace(base.surface, permittivity=DEMO_PERMITTIVITY, rms_height_m=DEMO_RMS_HEIGHT_M)
    return dataclasses.replace(base, surface=surface)


@locked_output("out_dir")
def run_demo(out_dir="demo_output", *, overwrite: bool = False, progress: bool = True,
             figures: FigureOptions | None = None) -> tuple[dict[str, Path], RunStats]:  # fmt: skip
    """Run the demo scenario end to end; returns the product paths and run counters.

    ``figures`` (:class:`cluttersim.products.FigureOptions`): the figures' resolution, format
    (png, pdf, svg) and dynamic range (default: chosen from the main radargram's data), which
    every radargram figure of the demo shows."""
    figures = figures or FigureOptions()
    save = {"dpi": figures.dpi, "fmt": figures.fmt}
    out_dir = Path(out_dir)
    track_csv = out_dir / "demo_track.csv"
    focused_png, bands_png, sky_png = (out_dir / figure_name(f"radargram_{view}.png", figures.fmt)
                                       for view in ("focused", "bands", "sky_ionosphere"))  # fmt: skip
    report_html = out_dir / REPORT_FILE
    check_new([track_csv, focused_png, bands_png, sky_png, report_html]
              + [out_dir / f for f in run_files(fmt=figures.fmt).values()], overwrite)  # fmt: skip
    src = DemSource.open(demo_dem_path())
    track = great_circle_track(
        src.body, *DEMO_START_LAT_LON, *DEMO_END_LAT_LON, DEMO_ALT_M, DEMO_SPACING_M, speed_m_s=DEMO_SPEED_M_S
    )
    stats = RunStats()
    paths = simulate_to_dir(src, track, demo_config(), out_dir, overwrite=True, progress=progress, stats=stats,
                            figures=figures)  # fmt: skip
    # the same pass as focused data would show it: clutter ahead of and behind the spacecraft
    # suppressed by along-track processing, clutter beside the track kept
    focused_cfg = dataclasses.replace(
        demo_config(), processing=ProcessingConfig(aperture="focused", aperture_length_m=DEMO_APERTURE_M)
    )
    focused = simulate(src, track, focused_cfg, sources=False)
    # the same pass seen by two bands: the wide band resolves the clutter finely, the narrow one smears it
    bands_cfg = dataclasses.replace(demo_config(), bands=DEMO_BANDS)  # only the samples shown are simulated
    bands_cfg = dataclasses.replace(bands_cfg, radar=dataclasses.replace(bands_cfg.radar, samples=DEMO_BANDS_SAMPLES))
    bands = simulate(src, track, bands_cfg, sources=False)
    # the focused view on the raw view's dynamic range: colours are dB below each one's strongest (nadir)
    # echo, so an echo as far below the surface echo has the same colour in both (focusing's weights lower
    # every echo, the nadir one too: one absolute scale would show the focused view almost black)
    raw_lo, raw_hi = plots.db_limits(open_radargram(paths["radargram"]), dynamic_range_db=figures.db_range)
    # the same pass as the instrument records it: galactic noise floor, compression gain, ionosphere
    sky_cfg = dataclasses.replace(demo_config(), noise=DEMO_SKY, processing=DEMO_INSTRUMENT,
                                  ionosphere=IonosphereConfig(tec_el_m2=DEMO_TEC_EL_M2))  # fmt: skip
    sky_cfg = dataclasses.replace(sky_cfg, radar=dataclasses.replace(sky_cfg.radar, samples=DEMO_SKY_SAMPLES))
    sky = simulate(src, track, sky_cfg, sources=False)
    with atomic_paths([track_csv, focused_png, bands_png, sky_png]) as (tmp_csv, tmp_png, tmp_bands, tmp_sky):
        track.to_csv(tmp_csv)
        plots.plot_radargram(focused, tmp_png, permittivity=3.15, dynamic_range_db=raw_hi - raw_lo,
                             title=f"focused along track (aperture {DEMO_APERTURE_M / 1e3:g} km): clutter ahead/behind "
                                   f"suppressed\n(the {raw_hi - raw_lo:g} dB below the strongest echo shown in "
                                   f"radargram.{figures.fmt})", **save)  # fmt: skip
        plots.plot_band_radargrams(bands.isel(sample=slice(0, DEMO_BANDS_SAMPLES)), tmp_bands, permittivity=3.15,
                                   dynamic_range_db=figures.db_range,
                                   title="the same pass in two frequency bands (first 15 µs of the window)", **save)  # fmt: skip
        plots.plot_radargram(sky.isel(sample=slice(0, DEMO_SKY_SAMPLES)), tmp_sky, permittivity=3.15,
                             dynamic_range_db=figures.db_range,
                             title=f"galactic sky noise, processing gains, ionosphere {DEMO_TEC_EL_M2:.0e} el/m²", **save)  # fmt: skip
    # the page to point at echoes and see where they come from
    write_report(out_dir, report_html, permittivity=3.15, overwrite=True)
    return {**paths, "focused": focused_png, "bands": bands_png, "sky": sky_png, "track": track_csv,
            "report": report_html}, stats  # fmt: skip
