"""Orchestration of a clutter simulation: DEM window, facets, culling, kernels, pulse.

Data flow::

    DemSource ──(window around the track)──► DemWindow ──► Facets (tiled)
    Track ──► antenna positions ─┐                              │
    SimulationConfig ────────────┴──► kernels.earliest_range ──► window starts
                                      kernels.accumulate_power (chunks of traces, progress)
                                      ──► convolution with the compressed pulse ──► Dataset

The physics lives in :mod:`cluttersim.kernels` (per facet), :mod:`cluttersim.physics.radar`
and :mod:`cluttersim.physics.scattering`; this module only decides what to compute.
"""

from __future__ import annotations

import dataclasses
import math
import time
import warnings
from dataclasses import dataclass

import numba
import numpy as np
import xarray as xr
from rasterio.windows import Window
from scipy.ndimage import convolve1d
from tqdm.auto import tqdm

from . import __version__, kernels, memory, presum
from .physics import physical_optics
from .config import SimulationConfig, default_config
from .constants import SPEED_OF_LIGHT_M_S
from .io.dem import DemSource, DemWindow, warn_holes
from .errors import GeometryError, TrackError
from .facets import Facets, build_facets
from .physics.noise import add_complex_noise, add_noise_by_pulse
from .physics.antenna import trace_frames
from .analysis.attribution import first_return, right_unit_vectors, side_fractions
from .physics.radar import (
    POWER_CONVENTION,
    POWER_CONVENTION_TEXT,
    noise_bandwidth_factor,
    pulse_amplitude_response,
    pulse_half_width_samples,
    pulse_limited_radius_m,
    pulse_power_kernel,
)
from .io.radargram import build_dataset, flatten_config_attrs, stack_bands
from .physics.subsurface import subsurface_variables
from .track import Track, wrap_lon_like
from .validate import check_far_field, check_noise_power, check_power_bound, check_run_arguments

#: Largest decimated grid (cells per side) used to estimate the terrain's height range.
_PREVIEW_CELLS = 1024
#: Sub-bins per delay sample on which facet delay distributions are laid (their
#: corners are placed to 1/32 of a sample).
OVERSAMPLE = 32
#: Highest antenna accepted, in body radii above the reference surface (a sanity bound:
#: beyond it the whole visible disc echoes at nearly one delay).
MAX_ALT_BODY_RADII = 100
#: Consecutive traces one thread computes together, reading each tile's facets once. The
#: tiles are swept in order of range, so only a narrow part of each trace's delay rows is
#: written at a time and larger blocks no longer spill the cache (medium scene, one thread:
#: 170, 184, 178 M facet-evaluations per CPU-second with 4, 8, 16).
TRACES_PER_BLOCK = 8
#: How the kernel spreads a facet's power over delay: kernels.SPREAD_TRAPEZOID (the model).
#: kernels.SPREAD_CENTRE (all of it in the bin of the facet's centre) exists for the benchmark
#: only, to bound what the spreading costs; it is not exposed as an option.
DELAY_SPREADING = kernels.SPREAD_TRAPEZOID


@dataclass
class RunStats:
    """Counters of one simulation, for progress reports and benchmarks."""

    facets: int = 0
    facet_evaluations: int = 0
    specular_evaluations: int = 0
    dem_window_shape: tuple[int, int] = (0, 0)
    seconds_facets: float = 0.0
    seconds_kernel: float = 0.0
    seconds_total: float = 0.0


def simulate(
    dem,
    track,
    config: SimulationConfig | None = None,
    *,
    body_radius_m: float | None = None,
    progress: bool = False,
    stats: RunStats | None = None,
    sources: bool = True,
    nadir_strip_m: float | None = None,
    first_return_db: float = -20.0,
    max_memory_bytes: int | str | None = "auto",
    segment_traces: int | str | None = "auto",
    first_pulse: int = 0,
    require_echo: bool = True,
    gain_height_m: float | None = None,
) -> xr.Dataset:
    """Simulate the surface-clutter radargram of a track over a DEM.

    Parameters
    ----------
    dem : path or DemSource
        Single-band elevation raster (metres above the CRS's reference surface).
    track : path or Track
        Antenna positions (CSV with lat, lon, alt[, time]).
    config : SimulationConfig, optional
        Radar and surface law; the built-in default radar if omitted.
    body_radius_m : float, optional
        Sphere radius for a DEM without CRS.
    progress : bool
        Show a progress bar (appears only if the run lasts more than a second).
    stats : RunStats, optional
        Filled in with counters and timings.
    sources : bool
        Keep the per-sample source record (``source_lat``, ``source_lon``,
        ``left_fraction``, ``right_fraction``) and the first return; off saves
        memory and 40 % of the run time (medium benchmark: 5.3 s instead of 9.1 s).
    nadir_strip_m : float, optional
        Half-width (m, cross-track) of the nadir strip; default the
        pulse-limited footprint radius of each trace.
    first_return_db : float
        Threshold, relative to the nadir echo's power, of the first return.
    max_memory_bytes : int, "auto" or None
        Refuse (:class:`~cluttersim.errors.MemoryLimitError`, before the DEM is
        read at full resolution) a run whose estimated memory
        (:func:`cluttersim.memory.estimate_memory_bytes`) exceeds this; "auto":
        80 % of the available memory; None: no check.
    segment_traces : int, "auto" or None
        Pulses per segment (:mod:`cluttersim.analysis.segments`): a long track is simulated in
        segments, each with its own DEM window, so memory is bounded by one segment.
        "auto": one piece when the whole track fits :data:`cluttersim.analysis.segments.SEGMENT_BUDGET_BYTES`,
        else segments of the size that reads the fewest DEM cells; None: one piece.
    first_pulse : int
        Index of this track's first pulse in a longer track it is a segment of (the
        per-pulse noise seeds, :func:`cluttersim.physics.noise.add_noise_by_pulse`).
    require_echo : bool
        Raise :class:`GeometryError` when no sample receives surface power (a segment
        of a longer track may have none).
    gain_height_m : float, optional
        The height above the nadir surface at which the aperture's integration gain is
        taken (default: this track's median; a segment gets its whole track's).

    Returns
    -------
    xarray.Dataset
        The radargram (see :mod:`cluttersim.io.radargram` for the variables). With
        ``config.noise``, seeded noise (:func:`cluttersim.physics.noise.add_noise`) is added
        to ``power`` after the source record is made; with ``config.subsurface``,
        the predicted interface echo (:func:`cluttersim.physics.subsurface.predict_subsurface`).
    """
    t_start = time.perf_counter()
    check_run_arguments(first_return_db=first_return_db, nadir_strip_m=nadir_strip_m)
    stats = stats if stats is not None else RunStats()
    config = config if config is not None else default_config()
    check_noise_power(config)
    radar = config.radar  # the window (samples, sample interval, start) is shared by every band
    src = dem if isinstance(dem, DemSource) else DemSource.open(dem, body_radius_m)
    track = track if isinstance(track, Track) else Track.from_csv(track)
    body = src.body
    config = dataclasses.replace(config, processing=config.processing.with_track_speed(track, body))
    proc = config.processing
    if len(track) < proc.presum:
        raise TrackError(f"{track.source}: {len(track)} pulses, fewer than [processing] presum = {proc.presum}")
    if segment_traces is not None:
        from .analysis import segments

        plan = segments.plan_segments(src, track, config, sources=sources, segment_traces=segment_traces,
                                      max_memory_bytes=max_memory_bytes)  # fmt: skip
        if len(plan) > 1:
            return segments.simulate_in_segments(
                src, track, config, plan, body_radius_m=body_radius_m, progress=progress, stats=stats,
                sources=sources, nadir_strip_m=nadir_strip_m, first_return_db=first_return_db,
                max_memory_bytes=max_memory_bytes,
            )  # fmt: skip
    scene = prepare_scene(src, track, config, stats, max_memory_bytes=max_memory_bytes, sources=sources)
    warn_grazing_without_shadowing(scene)
    idx, pad = scene.idx, scene.pad
    ant_on = np.ascontiguousarray(scene.ant_m[idx])
    dt = radar.sample_interval_s
    nbins = radar.samples + 2 * pad
    bin0 = scene.start_s - (pad + 0.5) * dt
    ntr = len(track)
    right_unit = right_unit_vectors(body, track)[idx]
    frames = trace_frames(right_unit, body.up_unit(track.lat_deg, track.lon_deg)[idx])

    coherent = proc.mode == "coherent"
    sources = sources and not coherent  # the source record is an incoherent-mode product
    coherent_presum = coherent and proc.presum > 1 and proc.presum_mode == "coherent"
    runs = [
        _BandRun.start(name, scene_for_band(scene, cfg), i, ntr, sources, coherent_presum, first_pulse)
        for i, (name, cfg) in enumerate(config.per_band())
    ]  # fmt: skip
    for run in runs:
        run.gain_height_m = gain_height_m
    for run in runs:
        strip = nadir_strip_m
        if strip is None:
            alt = np.nan_to_num(track.alt_m - scene.h_nadir_m)[idx]
            strip = pulse_limited_radius_m(alt, run.radar.bandwidth_hz, body.mean_radius_m)
        run.strip_m = np.broadcast_to(np.asarray(strip, dtype=np.float64), (idx.size,)).copy()
    groups = _kernel_groups(runs, coherent, sources, nadir_strip_m is None)
    chunk = max(4 * TRACES_PER_BLOCK * numba.get_num_threads(), min(256, idx.size // 50 or 1))
    t0 = time.perf_counter()
    with tqdm(total=idx.size, unit="trace", delay=1.0, disable=not progress, desc="simulating") as bar:
        for a in range(0, idx.size, chunk):
            b = min(a + chunk, idx.size)
            rows = idx[a:b]
            for group in groups:
                ref = group[0]
                if coherent:
                    signal, n_eval = coherent_signal(ref.scene, ant_on[a:b], bin0[a:b], nbins, frames[a:b], rows)
                    stats.facet_evaluations += n_eval
                    ref.add_coherent(rows, signal[:, pad : pad + radar.samples])
                    continue
                binned, best, n_eval = binned_power(ref.scene, ant_on[a:b], bin0[a:b], nbins, right_unit[a:b],
                                                    ref.strip_m[a:b], sources, frames[a:b], rows)  # fmt: skip
                stats.facet_evaluations += n_eval
                for run in group:
                    scaled = binned if run is ref else binned * (run.radar_constant / ref.radar_constant)
                    compressed = _compress(scaled[:, 0], run.scene.pulse_weights, pad, radar.samples)
                    specular = None
                    if run.scene.config.surface.specular:  # the coherent (physical-optics) reflection, as power
                        specular, n_spec = specular_power(run.scene, ant_on[a:b], bin0[a:b], nbins, frames[a:b], rows,
                                                          right_unit[a:b] if sources else None, run.strip_m[a:b])
                        specular = specular[..., pad : pad + radar.samples]
                        stats.specular_evaluations += n_spec
                        compressed = compressed + specular[:, 0]
                    run.power[rows] = compressed
                    if sources:
                        run.record.add(rows, scaled, best, compressed, run.scene.pulse_weights, pad, radar.samples,
                                       _compress, specular)  # fmt: skip
            bar.update(b - a)
    stats.seconds_kernel = time.perf_counter() - t0
    if require_echo and not any(run.has_echo() for run in runs):
        raise GeometryError(
            "no surface echo falls inside the recording window of any trace; check [radar] window_start_s and samples"
        )
    attrs = {
        "dem_file": src.path.name,
        "dem_path": str(src.path.resolve()),
        **body.to_attrs(),
        "cluttersim_version": __version__,
        "title": "cluttersim synthetic surface-clutter radargram",
        "facet_evaluations": stats.facet_evaluations,
    }
    if body_radius_m is not None:
        attrs["body_radius_given_m"] = float(body_radius_m)
    if sources:
        attrs["first_return_threshold_db"] = first_return_db
        attrs["nadir_strip"] = "pulse-limited footprint radius" if nadir_strip_m is None else f"{nadir_strip_m} m"
    datasets = [run.dataset(attrs, first_return_db) for run in runs]
    ds = datasets[0] if len(datasets) == 1 else stack_bands(datasets, config)
    stats.seconds_total = time.perf_counter() - t_start
    return ds


#: Shadowing matters when the recording window reaches ground seen this low above the horizontal
#: (deg): the range at the window's end exceeds h / sin(angle), h the median height above the nadir
#: terrain (airborne and low passes over relief; an orbiter's window rarely reaches that far out)...
GRAZING_ELEVATION_DEG = 15.0
#: ...and the terrain read spans more than this fraction of h in height (relief that can hide ground).
GRAZING_RELIEF_FRACTION = 0.05


def warn_grazing_without_shadowing(scene: "Scene") -> None:
    """Warn when ``[processing] shadowing`` is off and the geometry is grazing over relief (see
    :data:`GRAZING_ELEVATION_DEG`, :data:`GRAZING_RELIEF_FRACTION`): there terrain hidden behind
    ridges would still echo (about 20 % too much energy 20 km off-track at 5 km up)."""
    if scene.config.processing.shadowing or scene.idx.size == 0:
        return
    h = float(np.nanmedian((scene.track.alt_m - scene.h_nadir_m)[scene.idx]))
    end_m = 0.5 * SPEED_OF_LIGHT_M_S * float(np.nanmedian(scene.start_s + scene.config.radar.window_length_s))
    elev = scene.window.elevation_m
    relief = float(np.nanmax(elev) - np.nanmin(elev)) if np.isfinite(elev).any() else 0.0
    if h > 0 and end_m > h / math.sin(math.radians(GRAZING_ELEVATION_DEG)) and relief > GRAZING_RELIEF_FRACTION * h:
        warnings.warn(
            f"{scene.track.source}: the window reaches ground {end_m / 1e3:.1f} km away from {h / 1e3:.2f} km up "
            f"(below {GRAZING_ELEVATION_DEG:g}° elevation) with [processing] shadowing off: terrain hidden behind "
            "ridges still echoes; set shadowing = true",
            stacklevel=3,
        )


def _kernel_groups(runs, coherent: bool, sources: bool, strip_per_band: bool) -> list[list["_BandRun"]]:
    """Bands whose kernel output differs only by a constant factor share one kernel run.

    Before the pulse convolution the binned power of band b is the radar
    constant Pt G² λ² / (4π)³ times a sum that depends on the band only through
    the along-track aperture weight (λ enters δ = λR/2L and the Fresnel zone),
    the coherent phase, and the nadir strip of the source record (the
    pulse-limited radius depends on the bandwidth). Bands equal in those are
    run once and scaled.
    """
    if coherent:
        return [[run] for run in runs]
    groups: dict[tuple, list] = {}
    for run in runs:  # the antenna and the surface law are the same for every band
        key = (run.radar.wavelength_m if run.scene.config.processing.aperture != "none" else None,
               run.radar.bandwidth_hz if sources and strip_per_band else None)  # fmt: skip
        groups.setdefault(key, []).append(run)
    return list(groups.values())


@dataclass
class _BandRun:
    """One band's outputs while the traces are simulated (per pulse, before presumming)."""

    name: str | None
    scene: "Scene"
    index: int
    power: np.ndarray
    record: "SourceRecord | None"
    signal: np.ndarray | None
    rng: np.random.Generator | None
    strip_m: np.ndarray | None = None
    first_pulse: int = 0
    gain_height_m: float | None = None

    @classmethod
    def start(cls, name, scene, index, ntr, sources, coherent_presum, first_pulse=0) -> "_BandRun":
        cfg = scene.config
        samples = cfg.radar.samples
        rng = None
        if cfg.noise is not None:  # bands get independent noise; a single band keeps the table's seed alone
            rng = cfg.noise.rng() if name is None else np.random.default_rng([cfg.noise.seed, index])
        return cls(
            name=name, scene=scene, index=index,
            power=np.full((ntr, samples), np.nan, dtype=np.float32),
            record=SourceRecord.empty(ntr, samples) if sources else None,
            signal=np.full((ntr, samples), np.nan, dtype=np.complex64) if coherent_presum else None,
            rng=rng, first_pulse=first_pulse,
        )  # fmt: skip

    @property
    def radar(self):
        return self.scene.config.radar

    @property
    def radar_constant(self) -> float:
        return self.radar.radar_constant_w_m2()

    def has_echo(self) -> bool:
        """Whether any sample received surface power (before noise)."""
        values = self.power if self.signal is None else np.abs(self.signal)
        return bool(np.nanmax(values, initial=0.0) > 0)

    @property
    def noise_seed_words(self) -> tuple[int, ...]:
        """Seed of the per-pulse noise generators (with the pulse's index in the track)."""
        seed = self.scene.config.noise.seed
        return (seed,) if self.name is None else (seed, self.index)

    def noise_w(self) -> float | None:
        """Mean noise power per sample of one pulse on the ``power`` scale (W): the input noise
        (:meth:`NoiseConfig.noise_power_w`) times the range window's equivalent noise bandwidth
        B τ_eff, divided by the processing gains of ``[processing]`` (range compression τB and the
        aperture's integration gain), which the echo does not get (see :mod:`cluttersim.physics.noise`)."""
        noise = self.scene.config.noise
        if noise is None:
            return None
        return noise.noise_power_w(self.radar.bandwidth_hz, self.radar.center_frequency_hz) \
            * noise_bandwidth_factor(self.radar.range_window) / self.processing_gain()

    def processing_gain(self) -> float:
        """Range-compression gain τB times the aperture's integration gain at the track's median
        height above the nadir surface (:class:`~cluttersim.physics.aperture.ProcessingConfig`); 1 without
        ``pulse_length_s`` and ``prf_hz``."""
        proc = self.scene.config.processing
        gain = proc.range_compression_gain(self.radar.bandwidth_hz)
        if proc.prf_hz > 0 and proc.aperture != "none":
            h = self.gain_height_m
            if h is None:
                h = np.nanmedian(self.scene.track.alt_m - self.scene.h_nadir_m)
            gain *= proc.integration_gain(self.radar.wavelength_m, float(h))
        return gain

    def add_coherent(self, rows, signal) -> None:
        """Coherent mode: complex echoes of some pulses (receiver noise added as complex Gaussian)."""
        if self.rng is not None:
            signal = add_complex_noise(signal, self.noise_w(), self.rng)
        if self.signal is not None:
            self.signal[rows] = signal
        else:
            self.power[rows] = np.abs(signal) ** 2

    def dataset(self, attrs: dict, first_return_db: float) -> xr.Dataset:
        """Presum, add noise and assemble this band's radargram Dataset (with the band's own radar:
        its main lobe for the first return, its predicted interface echo, its configuration)."""
        scene = self.scene
        cfg = scene.config
        radar, proc = cfg.radar, cfg.processing
        n = proc.presum
        track, idx = scene.track, scene.idx
        ntr = len(track)

        def per_trace(values_on):
            full = np.full(ntr, np.nan)
            full[idx] = values_on
            return presum.group_mean(full, n)

        window_start = per_trace(scene.start_s)
        nadir_delay = presum.group_mean(scene.nadir_delay_s, n)
        earliest = per_trace(scene.earliest_delay_s)
        on_dem = presum.group_mean(scene.on_dem.astype(np.float64), n) == 1.0
        track_out = presum.presum_track(track, n)
        dt = radar.sample_interval_s
        clutter = presum.group_mean(self.power, n).astype(np.float32)
        extra = {}
        if self.record is not None:
            record = self.record
            if n > 1:
                left, right = presum.presum_sides(record.left, record.right, self.power, n)
                record = SourceRecord(left=left, right=right, facet=presum.presum_dominant(record.facet, self.power, n))
            mainlobe = radar.mainlobe_samples
            extra = record.to_variables(scene.facets, scene.window, scene.src.body, track_out, clutter, window_start,
                                        nadir_delay, dt, first_return_db, mainlobe)  # fmt: skip
            extra["nadir_strip_half_width"] = ("trace", per_trace(self.strip_m), "m",
                                               "cross-track half-width of the nadir strip")  # fmt: skip
        if self.signal is not None:  # coherent presumming: average the complex echoes, then detect
            power = (np.abs(presum.group_mean(self.signal, n)) ** 2).astype(np.float32)
        elif cfg.noise is not None and proc.mode != "coherent":  # after the source record: it is of the clutter alone
            noisy = add_noise_by_pulse(self.power, self.noise_w(), self.noise_seed_words, self.first_pulse)
            power = presum.group_mean(noisy, n).astype(np.float32)
        else:
            power = clutter
        if cfg.noise is not None:  # coherent presumming averages the pulses' noise down by n
            noise_out = self.noise_w() / (n if self.signal is not None else 1)
            extra["noise_power"] = ((), np.float64(noise_out), "W",
                                    "mean noise power per sample on the power scale, k T B F x B tau_eff / gains")  # fmt: skip
        if cfg.subsurface is not None:
            extra.update(subsurface_variables(cfg.subsurface, radar, nadir_delay, scene.src.body.mean_radius_m,
                                              cfg.antenna.nadir_pattern_gain()))  # fmt: skip
        attrs = {**attrs, "power_convention": POWER_CONVENTION, "power_convention_text": POWER_CONVENTION_TEXT}
        band_attrs = {**flatten_config_attrs(cfg), **attrs}
        return build_dataset(power, window_start, dt, track_out, nadir_delay, earliest, on_dem, band_attrs, extra,
                             body=scene.src.body)


# --------------------------------------------------------------------------- DEM window


@dataclass
class Scene:
    """Everything a track over a DEM needs before the per-facet kernels run.

    Arrays named ``*_s`` over the traces on the DEM (``idx``) hold their window
    start and earliest echo; ``ant_m`` holds every trace's antenna position
    relative to ``facets.origin_m``.
    """

    src: DemSource
    track: Track
    config: SimulationConfig
    window: DemWindow
    facets: Facets
    ant_m: np.ndarray
    on_dem: np.ndarray
    idx: np.ndarray
    h_nadir_m: np.ndarray
    nadir_delay_s: np.ndarray
    earliest_delay_s: np.ndarray
    start_s: np.ndarray
    pad: int
    pulse_weights: np.ndarray
    _shadow_heights: np.ndarray | None = None

    @property
    def shadow_heights_m(self) -> np.ndarray:
        """The DEM window's heights for the shadowing march (holes at the lowest height: they
        never block), float32, computed once."""
        if self._shadow_heights is None:
            elev = self.window.elevation_m
            self._shadow_heights = np.where(np.isfinite(elev), elev, np.nanmin(elev)).astype(np.float32)
        return self._shadow_heights


def prepare_scene(
    src: DemSource, track: Track, config: SimulationConfig, stats: RunStats | None = None, *,
    max_memory_bytes: int | str | None = "auto", sources: bool = True, range_margin_m: float = 0.0,
) -> Scene:  # fmt: skip
    """Read the DEM window a track needs, build its facets and each trace's recording window.

    ``range_margin_m`` widens the DEM window as if every window reached that much farther
    (the DEM-error Monte Carlo, :mod:`cluttersim.analysis.dem_error`, raises terrain by up to it).

    Raises :class:`TrackError` or :class:`GeometryError` for tracks off the DEM,
    below the terrain, or windows that cannot hold any surface echo, and
    :class:`~cluttersim.errors.MemoryLimitError` before the full-resolution read
    if the run would need more than ``max_memory_bytes`` (see :func:`simulate`).
    """
    stats = stats if stats is not None else RunStats()
    radar = config.radar
    body = src.body

    too_high = np.flatnonzero(track.alt_m > MAX_ALT_BODY_RADII * body.semi_major_m)
    if too_high.size:
        i = too_high[0]
        raise TrackError(
            f"{track.source}: row {i + 1} alt = {track.alt_m[i]:.6g} m: expected at most {MAX_ALT_BODY_RADII} body radii "
            f"({MAX_ALT_BODY_RADII * body.semi_major_m:.6g} m) above the reference surface"
        )
    rows, cols = src.lonlat_to_rowcol(track.lon_deg, track.lat_deg)
    on_dem = (rows >= -0.5) & (rows <= src.height - 0.5) & (cols >= -0.5) & (cols <= src.width - 0.5)
    if not on_dem.any():
        raise TrackError(f"{track.source}: no trace lies over the DEM {src.path.name}; {extents_text(src, track)}")
    if not on_dem.all():
        warnings.warn(
            f"{track.source}: {int((~on_dem).sum())} of {len(track)} traces are not over the DEM; they are filled with NaN",
            stacklevel=3,
        )

    # the widest compressed pulse (lowest bandwidth) sets the padding of every band
    band_configs = [cfg for _, cfg in config.per_band()]
    band_radars = [cfg.radar for cfg in band_configs]
    pad = max(pulse_half_width_samples(r.bandwidth_hz, r.sample_interval_s, r.range_window, r.center_frequency_hz,
                                       cfg.ionosphere) for r, cfg in zip(band_radars, band_configs))  # fmt: skip

    given = max_memory_bytes != "auto"
    limit = max_memory_bytes
    if not given:
        limit = memory.default_limit_bytes()
    elif isinstance(limit, str):
        limit = memory.parse_size(limit)

    def check(win):
        est = memory.estimate_memory_bytes(
            win.width * win.height, len(track) * len(band_radars), radar.samples, sources=sources,
            threads=numba.get_num_threads(),
            pad_samples=pad, oversample=OVERSAMPLE, traces_per_block=TRACES_PER_BLOCK,
        )  # fmt: skip
        memory.check_memory(est, limit, given=given)

    # the memory check comes before any preview of the DEM and before the pulse response is computed
    margin_samples = int(math.ceil(2.0 * range_margin_m / SPEED_OF_LIGHT_M_S / radar.sample_interval_s))
    window = read_track_window(src, track, on_dem, config, pad_samples=pad + margin_samples, before_full_read=check)
    band_pulses = [cfg.pulse_kernel() for cfg in band_configs]
    kernel_weights = band_pulses[0][1]
    warn_holes(window)
    t0 = time.perf_counter()
    facets = build_facets(window)
    stats.seconds_facets = time.perf_counter() - t0
    stats.facets = len(facets)
    stats.dem_window_shape = window.shape

    ant = body.geodetic_to_ecef_m(track.lat_deg, track.lon_deg, track.alt_m) - facets.origin_m
    h_nadir = window.bilinear_m(track.lon_deg, track.lat_deg)
    below = np.flatnonzero(on_dem & (track.alt_m <= h_nadir))
    if below.size:
        i = below[0]
        raise TrackError(
            f"{track.source}: row {i + 1} alt = {track.alt_m[i]:.1f} m is at or below the terrain "
            f"({h_nadir[i]:.1f} m); expected the antenna above the surface{altitude_unit_hint(track.alt_m, h_nadir)}"
        )
    check_far_field(track, h_nadir, config)
    # before any power kernel: radar and surface numbers that could overflow the radargram are refused
    nearest_m = float(np.nanmin(track.alt_m[on_dem]) - np.nanmax(window.elevation_m))
    check_power_bound(config, nearest_m, float(np.sum(facets.area_m2, dtype=np.float64)),
                      max(float(np.sum(w)) for _, w in band_pulses))  # fmt: skip
    nadir_delay = 2.0 * (track.alt_m - h_nadir) / SPEED_OF_LIGHT_M_S

    idx = np.flatnonzero(on_dem)
    ant_on = np.ascontiguousarray(ant[idx])
    earliest_m = np.empty(idx.size)
    # the earliest echo is no farther than the ground below the antenna (plus a facet's size)
    bound = np.nan_to_num((track.alt_m - h_nadir)[idx], nan=np.inf) + 2.0 * facets.tile_extent_m.max() + 1.0
    kernels.earliest_range(
        ant_on, bound, facets.tile_centre_m, facets.tile_radius_m, facets.tile_slab, facets.tile_offsets,
        facets.rel_m, facets.normal, facets.e_col_m, facets.e_row_m, earliest_m,
    )  # fmt: skip
    earliest_delay = 2.0 * earliest_m / SPEED_OF_LIGHT_M_S
    dt = radar.sample_interval_s
    if radar.window_start_s == "auto":
        start = earliest_delay - radar.auto_margin_samples * dt
    else:
        start = np.full(idx.size, float(radar.window_start_s))
        end = start + radar.window_length_s
        if np.all(end < earliest_delay):
            raise GeometryError(
                f"[radar] window_start_s = {radar.window_start_s!r}: the window ends at {end[0] * 1e6:.3f} µs, before "
                f"the earliest surface echo ({earliest_delay.min() * 1e6:.3f} µs); expected a window that contains it"
            )
    start = presum.shared_window_starts(start, idx, len(track), config.processing.presum)

    return Scene(
        src=src, track=track, config=config, window=window, facets=facets, ant_m=ant, on_dem=on_dem, idx=idx,
        h_nadir_m=h_nadir, nadir_delay_s=nadir_delay, earliest_delay_s=earliest_delay, start_s=start,
        pad=pad, pulse_weights=kernel_weights,
    )  # fmt: skip


def extents_text(src: DemSource, track: Track) -> str:
    """The DEM's and the track's extents in degrees, for a message when they do not meet."""
    t = src.transform
    x0, y1 = t.c, t.f
    x1, y0 = t.c + t.a * src.width, t.f + t.e * src.height
    if src.is_geographic:
        dem_text = f"DEM lon {min(x0, x1):.4f}..{max(x0, x1):.4f}, lat {min(y0, y1):.4f}..{max(y0, y1):.4f}"
    else:
        xs = np.array([x0, x1, x0, x1])
        ys = np.array([y0, y0, y1, y1])
        lon, lat = src.xy_to_lonlat(xs, ys)
        dem_text = (f"DEM x {min(x0, x1):.0f}..{max(x0, x1):.0f}, y {min(y0, y1):.0f}..{max(y0, y1):.0f} "
                    f"(about lon {np.nanmin(lon):.4f}..{np.nanmax(lon):.4f}, lat {np.nanmin(lat):.4f}..{np.nanmax(lat):.4f})")  # fmt: skip
    lat, lon = track.lat_deg, track.lon_deg
    hint = ""
    if src.is_geographic and np.nanmin(lat) >= min(x0, x1) - 1 and np.nanmax(lat) <= max(x0, x1) + 1 \
            and np.nanmin(lon) >= min(y0, y1) - 1 and np.nanmax(lon) <= max(y0, y1) + 1:  # fmt: skip
        hint = "; lat and lon look swapped"
    return (f"{dem_text}; track lon {np.nanmin(lon):.4f}..{np.nanmax(lon):.4f}, "
            f"lat {np.nanmin(lat):.4f}..{np.nanmax(lat):.4f}{hint}")  # fmt: skip


def altitude_unit_hint(alt_m, h_nadir_m) -> str:
    """"; the altitudes look like kilometres" when every altitude × 1000 would clear the terrain
    while the altitudes themselves are below it (a track written in km), else ""."""
    alt = np.asarray(alt_m, dtype=np.float64)
    h = np.asarray(h_nadir_m, dtype=np.float64)
    ok = np.isfinite(alt) & np.isfinite(h)
    if ok.any() and np.all(alt[ok] * 1000.0 > h[ok]) and np.nanmax(np.abs(alt[ok])) < 5000.0:
        return (f"; the altitudes ({np.nanmin(alt[ok]):g}..{np.nanmax(alt[ok]):g}) look like kilometres: "
                "the alt column is in metres")  # fmt: skip
    return ""


def scene_for_band(scene: Scene, band_config: SimulationConfig) -> Scene:
    """The scene with one band's single-band configuration and compressed pulse (the DEM
    window, facets, recording windows and padding are shared by all bands)."""
    _, weights = band_config.pulse_kernel()
    if scene.config.processing.shadowing:
        scene.shadow_heights_m  # computed once, shared by the bands
    return dataclasses.replace(scene, config=band_config, pulse_weights=weights)


def shadow_inputs(scene: Scene, traces):
    """Kernel inputs for line-of-sight shadowing of some traces (indices into the track):
    (window heights, facet cells, per trace (nadir row, nadir col in the window, Δy²/(2Rp),
    Δx²/(2Rp)) for the curved line of sight (:func:`cluttersim.kernels.hidden_from_antenna`),
    antenna heights, highest terrain); small dummies when ``[processing] shadowing`` is off."""
    n = len(traces)
    if not scene.config.processing.shadowing:
        return np.zeros((1, 1), np.float32), scene.facets.cell[:1], np.zeros((n, 4)), np.zeros(n), 0.0
    heights = scene.shadow_heights_m
    x, y = scene.src.lonlat_to_xy(scene.track.lon_deg[traces], scene.track.lat_deg[traces])
    col, row = ~scene.window.transform @ (np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
    # the curvature of the body under the line of sight: Δy²/(2Rp), Δx²/(2Rp) per row and column step
    rp = scene.src.body.mean_radius_m
    t = scene.window.transform
    if scene.src.is_geographic:
        lat = math.radians(float(np.nanmedian(scene.track.lat_deg[traces])))
        dy_m = rp * math.radians(abs(t.e))
        dx_m = rp * math.radians(abs(t.a)) * max(math.cos(lat), 1e-3)
    else:
        dy_m, dx_m = abs(t.e), abs(t.a)
    nadir_rc = np.column_stack([np.asarray(row) - 0.5, np.asarray(col) - 0.5, np.full(n, dy_m**2 / (2.0 * rp)),
                                np.full(n, dx_m**2 / (2.0 * rp))])  # fmt: skip
    return heights, scene.facets.cell, nadir_rc, scene.track.alt_m[traces].astype(np.float64), float(heights.max())


def binned_power(scene: Scene, ant_m, bin0_s, nbins: int, right_unit=None, strip_half_m=None, sources: bool = False,
                 frames=None, traces=None):  # fmt: skip
    """Run the compiled kernel for some traces: power per delay bin before the pulse convolution.

    ``ant_m`` (n, 3) are antenna positions relative to ``scene.facets.origin_m``
    and bin k of trace t covers [bin0_s[t] + k dt, bin0_s[t] + (k+1) dt).
    ``frames`` (n, 3, 3) are the traces' along/right/down frames
    (:func:`cluttersim.physics.antenna.trace_frames`), needed for antenna patterns and
    apertures; ``traces`` their indices in the track, needed for shadowing.
    Returns ``(binned, best_facet, evaluations)``: binned (n, 1 or 3, nbins) W —
    row 0 the total, rows 1 and 2 the left and right shares when ``sources``.
    """
    f = scene.facets
    config = scene.config
    n = len(ant_m)
    if frames is None:
        if config.antenna.pattern != "isotropic" or config.processing.aperture != "none":
            raise ValueError("binned_power: an antenna pattern or aperture needs the traces' frames")
        frames = np.zeros((n, 3, 3))
    if right_unit is None:
        right_unit = np.zeros((n, 3))
    if strip_half_m is None:
        strip_half_m = np.zeros(n)
    if traces is None and config.processing.shadowing:
        raise ValueError("binned_power: shadowing needs the traces' indices")
    shadow = shadow_inputs(scene, np.arange(n) if traces is None else np.asarray(traces))
    binned = np.zeros((n, 3 if sources else 1, nbins))
    best = np.full((n, nbins) if sources else (0, 0), -1, dtype=np.int32)
    p0, p1 = config.surface.kernel_params()
    n_eval = kernels.accumulate_power(
        np.ascontiguousarray(ant_m, dtype=np.float64), np.ascontiguousarray(right_unit, dtype=np.float64),
        np.ascontiguousarray(strip_half_m, dtype=np.float64), np.ascontiguousarray(bin0_s, dtype=np.float64),
        config.radar.sample_interval_s, OVERSAMPLE, TRACES_PER_BLOCK,
        f.tile_centre_m, f.tile_radius_m, f.tile_slab, f.tile_offsets, f.max_tile_facets, float(f.tile_extent_m.max(initial=0.0)),
        f.rel_m, f.normal, f.e_col_m, f.e_row_m, f.area_m2,
        config.surface.law_code, p0, p1, config.radar.radar_constant_w_m2(),
        np.ascontiguousarray(frames, dtype=np.float64), config.kernel_weighting(), *shadow, DELAY_SPREADING, binned, best,
    )  # fmt: skip
    return binned, best, n_eval


#: Grid points per sample on which coherent mode lays its complex impulses.
COHERENT_OVERSAMPLE = 8


def pulse_amplitude_grid(radar, oversample: int, ionosphere=None) -> np.ndarray:
    """Compressed-pulse complex amplitude h sampled every dt/oversample, peak-normalised (max|h| = 1
    without an ionosphere; :func:`cluttersim.physics.radar.pulse_amplitude_response`): a complex field
    deposited in a bin and convolved with it reads its power at its peak sample (the ``power``
    convention), and random-phase facets average to the incoherent mode's power."""
    offsets, _ = pulse_power_kernel(radar.bandwidth_hz, radar.sample_interval_s, radar.range_window,
                                    radar.center_frequency_hz, ionosphere)  # fmt: skip
    half = int(offsets[-1])
    j = np.arange(-half * oversample, half * oversample + 1)
    return pulse_amplitude_response(j * radar.sample_interval_s / oversample, radar.bandwidth_hz, radar.range_window,
                                    radar.center_frequency_hz, ionosphere)  # fmt: skip


def compress_coherent(re, im, radar, oversample: int, nbins: int, ionosphere=None) -> np.ndarray:
    """Range-compress complex impulse rows (n, nbins·oversample): the complex echo
    (impulses ⊛ g)(t_k) at the sample centres, (n, nbins)."""
    from scipy.signal import fftconvolve

    g = pulse_amplitude_grid(radar, oversample, ionosphere)
    signal = fftconvolve(re + 1j * im, g[None, :], mode="same", axes=1)
    return signal[:, oversample // 2 :: oversample][:, :nbins]


def detect_coherent(re, im, radar, oversample: int, nbins: int, ionosphere=None) -> np.ndarray:
    """Power per sample (n, nbins) of range-compressed complex impulse rows: |compress_coherent|²."""
    return np.abs(compress_coherent(re, im, radar, oversample, nbins, ionosphere)) ** 2


def coherent_signal(scene: Scene, ant_m, bin0_s, nbins: int, frames, traces):
    """Coherent mode for some traces: the complex echo per (padded) sample, whose squared
    modulus is the power, and the number of facet evaluations.

    With ``random_phase`` the facets are diffuse scatterers (σ0 law) with a random phase each
    (:func:`cluttersim.kernels.accumulate_complex`), plus the specular field when the surface
    has a ``permittivity``. Without it every facet is a smooth reflector: its physical-optics
    field (:func:`specular_signal`), with Γ from ``permittivity`` or else −√ρ from the law's
    ``rho``, and no σ0 term; a deterministic sum of σ0 point scatterers would depend on the
    DEM's cell size.
    """
    f = scene.facets
    config = scene.config
    radar, proc = config.radar, config.processing
    if not proc.random_phase:
        signal, n_eval = specular_signal(scene, ant_m, bin0_s, nbins, frames, traces,
                                         reflection_coefficient=config.surface.reflection_coefficient(True))  # fmt: skip
        return signal[:, 0], n_eval
    k = COHERENT_OVERSAMPLE
    n = len(ant_m)
    re = np.zeros((n, nbins * k + 2))
    im = np.zeros((n, nbins * k + 2))
    p0, p1 = config.surface.kernel_params()
    n_eval = kernels.accumulate_complex(
        np.ascontiguousarray(ant_m, dtype=np.float64), np.ascontiguousarray(bin0_s, dtype=np.float64),
        radar.sample_interval_s, k, f.tile_centre_m, f.tile_radius_m, f.tile_offsets, f.rel_m, f.normal, f.area_m2,
        config.surface.law_code, p0, p1, radar.radar_constant_w_m2(), np.ascontiguousarray(frames, dtype=np.float64),
        config.kernel_weighting(), *shadow_inputs(scene, traces), 4.0 * math.pi / radar.wavelength_m,
        proc.random_phase, proc.seed, re, im,
    )  # fmt: skip
    signal = compress_coherent(re, im, radar, k, nbins, config.ionosphere)
    if config.surface.specular:
        specular, n_spec = specular_signal(scene, ant_m, bin0_s, nbins, frames, traces)
        signal, n_eval = signal + specular[:, 0], n_eval + n_spec
    return signal, n_eval


#: Delay cells per sample of the specular term's grid (odd: one cell is centred on each sample).
SPECULAR_CELLS_PER_SAMPLE = 9
#: Traces per call of the specular kernel (its grid, 3 sides × 9 cells × samples of complex128 per
#: trace, is ~1 MB per trace at 2048 samples).
SPECULAR_TRACES_PER_CALL = 16


def specular_signal(scene: Scene, ant_m, bin0_s, nbins: int, frames, traces, right_unit=None, strip_half_m=None,
                    reflection_coefficient=None):  # fmt: skip
    """The specular (physical-optics) echo of some traces, range-compressed: complex (n, nside, nbins)
    at the (padded) sample centres, and the number of (sub-)facet evaluations.

    ``kernels.accumulate_specular`` deposits every facet's field on a grid of
    :data:`SPECULAR_CELLS_PER_SAMPLE` cells per sample; the cells are convolved with the
    compressed pulse's amplitude response h, normalised to max |h| = 1 (a point target, or
    a mirror, reads its radar-equation power at its peak sample), through the ionosphere if
    any (:func:`cluttersim.physics.radar.pulse_amplitude_response`). With ``right_unit``
    (n, 3) and ``strip_half_m`` (n,) the rows are the nadir strip, left and right sides
    (:data:`cluttersim.kernels.SIDE_NADIR`...), else one row. Γ is the surface's
    (``[surface] permittivity``) unless ``reflection_coefficient`` is given.
    """
    from scipy.signal import fftconvolve

    config = scene.config
    radar, surface = config.radar, config.surface
    f = scene.facets
    n = len(ant_m)
    k = SPECULAR_CELLS_PER_SAMPLE
    gamma = surface.reflection_coefficient() if reflection_coefficient is None else reflection_coefficient
    nside = 1 if right_unit is None else 3
    if right_unit is None:
        right_unit, strip_half_m = np.zeros((n, 3)), np.zeros(n)
    traces = np.arange(n) if traces is None else np.asarray(traces)
    amp = physical_optics.field_constant(radar.transmit_power_w, radar.gain_linear, radar.wavelength_m, gamma)
    offsets, _ = config.pulse_kernel()
    half = int(offsets[-1]) * k
    h = pulse_amplitude_response(np.arange(-half, half + 1) * radar.sample_interval_s / k, radar.bandwidth_hz,
                                 radar.range_window, radar.center_frequency_hz, config.ionosphere)  # fmt: skip
    signal = np.empty((n, nside, nbins), dtype=np.complex128)
    n_eval = 0
    for a in range(0, n, SPECULAR_TRACES_PER_CALL):  # the fine grid is 9× a trace: a few traces at a time
        b = min(a + SPECULAR_TRACES_PER_CALL, n)
        cells = np.zeros((b - a, nside, nbins * k), dtype=np.complex128)
        n_eval += kernels.accumulate_specular(
            np.ascontiguousarray(ant_m[a:b], dtype=np.float64), np.ascontiguousarray(right_unit[a:b], dtype=np.float64),
            np.ascontiguousarray(strip_half_m[a:b], dtype=np.float64), np.ascontiguousarray(bin0_s[a:b], dtype=np.float64),
            radar.sample_interval_s, k, f.tile_centre_m, f.tile_radius_m, f.tile_slab, f.tile_offsets, f.rel_m, f.normal, f.e_col_m,
            f.e_row_m, f.area_m2, 2.0 * math.pi / radar.wavelength_m, complex(amp), float(surface.rms_height_m or 0.0),
            1.0 / scene.src.body.mean_radius_m, np.ascontiguousarray(frames[a:b], dtype=np.float64),
            config.kernel_weighting(), *shadow_inputs(scene, traces[a:b]), float(f.tile_extent_m.max(initial=0.0)), cells,
        )  # fmt: skip
        signal[a:b] = fftconvolve(cells, h[None, None, :], mode="same", axes=2)[:, :, (k - 1) // 2 :: k][:, :, :nbins]
    return signal, n_eval


def specular_power(scene: Scene, ant_m, bin0_s, nbins: int, frames, traces, right_unit=None, strip_half_m=None):
    """Detected specular power (n, 1 or 3, nbins), W: row 0 the total |Σ sides|²; with
    ``right_unit`` rows 1 and 2 are its left and right shares (each side's own detected power
    |S_side|² as a share of Σ_side |S_side|², times the total). Returns (power, evaluations)."""
    signal, n_eval = specular_signal(scene, ant_m, bin0_s, nbins, frames, traces, right_unit, strip_half_m)
    total = np.abs(signal.sum(axis=1)) ** 2
    if signal.shape[1] == 1:
        return total[:, None, :], n_eval
    side = np.abs(signal) ** 2
    norm = side.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(norm > 0, total / norm, 0.0)
    out = np.stack([total, side[:, kernels.SIDE_LEFT] * share, side[:, kernels.SIDE_RIGHT] * share], axis=1)
    return out, n_eval


def _compress(binned, weights, pad, samples):
    """Convolve binned power with the compressed-pulse power response and crop to the window."""
    if weights.shape[0] % 2 == 0 or binned.ndim != 2:
        return convolve1d(binned, weights, axis=-1, mode="constant")[..., pad : pad + samples]
    out = np.empty((binned.shape[0], samples))
    kernels.convolve_rows(np.ascontiguousarray(binned, dtype=np.float64), np.asarray(weights, dtype=np.float64), pad, out)
    return out


@dataclass
class SourceRecord:
    """The per-sample source record while traces are being simulated (bounded: float32/int32)."""

    left: np.ndarray
    right: np.ndarray
    facet: np.ndarray

    @classmethod
    def empty(cls, ntrace: int, nsamples: int) -> "SourceRecord":
        return cls(
            left=np.full((ntrace, nsamples), np.nan, dtype=np.float32),
            right=np.full((ntrace, nsamples), np.nan, dtype=np.float32),
            facet=np.full((ntrace, nsamples), -1, dtype=np.int32),
        )

    def add(self, rows, binned, best, total, weights, pad, samples, compress, specular=None) -> None:
        """``specular`` (n, 3, samples): the specular power (total, left, right; :func:`specular_power`),
        already in ``total``; its left and right shares join the diffuse ones."""
        left = compress(binned[:, kernels.SIDE_LEFT], weights, pad, samples)
        right = compress(binned[:, kernels.SIDE_RIGHT], weights, pad, samples)
        if specular is not None:
            left = left + specular[:, 1]
            right = right + specular[:, 2]
        self.left[rows], self.right[rows] = side_fractions(left, right, total)
        facet = np.empty((len(rows), samples), dtype=np.int32)
        kernels.dominant_source(np.ascontiguousarray(binned[:, 0]), best, weights, pad, samples, facet)
        self.facet[rows] = facet

    def to_variables(self, facets, window, body, track, power, window_start, nadir_delay, dt, threshold_db, mainlobe):
        """The Dataset variables of the source record and the first return."""
        src_lat = np.empty(self.facet.shape, dtype=np.float32)
        src_lon = np.empty(self.facet.shape, dtype=np.float32)
        if window.source.is_geographic:
            lon_of_col, lat_of_row = window.lonlat_axes()
            lon_of_col = wrap_lon_like(lon_of_col, track.lon_deg)  # the track's convention (windows run past ±180°)
            kernels.cell_lonlat_of_facets(self.facet, facets.cell, window.shape[1], lon_of_col, lat_of_row, src_lon, src_lat)
        else:
            lon, lat = window.lonlat_of_cells(facets.cell[np.maximum(self.facet, 0)])
            none = self.facet < 0
            src_lat[...] = np.where(none, np.nan, lat)
            src_lon[...] = np.where(none, np.nan, wrap_lon_like(lon, track.lon_deg))
        fr_delay, fr_sample = first_return(power, window_start, nadir_delay, dt, threshold_db, mainlobe)
        has = fr_sample >= 0
        rows = np.flatnonzero(has)
        fr_lat = np.full(len(track), np.nan)
        fr_lon = np.full(len(track), np.nan)
        fr_lat[rows] = src_lat[rows, fr_sample[rows]]
        fr_lon[rows] = src_lon[rows, fr_sample[rows]]
        fr_dist = np.full(len(track), np.nan)
        ok = np.isfinite(fr_lat)
        if ok.any():
            _, _, fr_dist[ok] = body.geod().inv(track.lon_deg[ok], track.lat_deg[ok], fr_lon[ok], fr_lat[ok])
        return {
            "source_lat": (("trace", "sample"), src_lat, "degrees_north", "latitude of the facet contributing most power"),
            "source_lon": (("trace", "sample"), src_lon, "degrees_east", "longitude of the facet contributing most power"),
            "left_fraction": (("trace", "sample"), self.left, "1", "share of the sample's power from left of the track"),
            "right_fraction": (("trace", "sample"), self.right, "1", "share of the sample's power from right of the track"),
            "first_return_delay": ("trace", fr_delay, "s", "absolute two-way delay of the first return"),
            "first_return_lat": ("trace", fr_lat, "degrees_north", "latitude of the first return's source"),
            "first_return_lon": ("trace", fr_lon, "degrees_east", "longitude of the first return's source"),
            "first_return_offnadir": ("trace", fr_dist, "m", "ground distance of the first return's source from nadir"),
        }


def ground_radius_m(body, alt_m, max_range_m, h_min_m: float, h_max_m: float) -> np.ndarray:
    """Largest ground distance (m) from nadir at which terrain can reach ``max_range_m``.

    On a sphere of radius Rp, a point at height h and central angle γ from the
    antenna (height H) is at range R² = (Rp+H)² + (Rp+h)² − 2(Rp+H)(Rp+h)cos γ
    (law of cosines). The bound uses the highest terrain (nearest possible)
    and is capped by the horizon over which a peak of height ``h_max_m`` can
    still be seen from above a surface at ``h_min_m``. A 2 % margin covers the
    ellipsoid's departure from the sphere.
    """
    rp = body.semi_major_m
    ra = rp + np.asarray(alt_m, dtype=np.float64)
    rh = rp + h_max_m
    cos_g = (ra**2 + rh**2 - np.asarray(max_range_m) ** 2) / (2.0 * ra * rh)
    g_range = np.arccos(np.clip(cos_g, -1.0, 1.0))
    rl = rp + h_min_m
    g_horizon = np.arccos(np.clip(rl / ra, -1.0, 1.0)) + np.arccos(np.clip(rl / rh, -1.0, 1.0))
    return 1.02 * rp * np.minimum(g_range, g_horizon)


def _max_range_m(track: Track, config: SimulationConfig, h_min_m: float, pad_samples: int) -> np.ndarray:
    """Upper bound of the range each trace's window can reach."""
    radar = config.radar
    extra = (pad_samples + 1) * radar.sample_interval_s
    if radar.window_start_s == "auto":
        # the earliest echo is never later than the nadir echo, which is at most alt - h_min away
        end_s = 2.0 * (track.alt_m - h_min_m) / SPEED_OF_LIGHT_M_S + radar.window_length_s + extra
    else:
        end_s = np.full(len(track), radar.window_start_s + radar.window_length_s + extra)
    return 0.5 * SPEED_OF_LIGHT_M_S * end_s


def _window_for_radius(src: DemSource, track: Track, on_dem, radius_m: np.ndarray):
    """DEM window holding every point within ``radius_m`` of the track's on-DEM traces.

    Rings of 72 points at the radius around (a subsample of) the traces are
    mapped to DEM rows and columns; the window is their bounding box plus 2
    pixels. For geographic DEMs the ring longitudes are taken relative to their
    trace (so a ring across the DEM's west or east edge extends past that edge
    instead of wrapping to the other side), and:

    * a ring that encloses a pole covers every longitude: the window then spans
      the DEM's full width and reaches the pole's row;
    * on a DEM that spans 360° of longitude (:attr:`DemSource.wraps_longitude`),
      the window may run past the grid's west or east edge (e.g. across the
      antimeridian of a −180..180 DEM): :meth:`DemSource.read` joins the two
      pieces into one block. If it would be wider than the DEM, it is the full width.

    Projected DEMs (polar stereographic, equirectangular...) are plain x/y grids:
    the box of the rings' projected points. A projected grid that itself wraps
    around the body (a global equirectangular DEM) is not joined across its edge.
    """
    body = src.body
    if np.max(radius_m) > 0.5 * math.pi * body.semi_minor_m:
        return src.window_around([0, src.height - 1], [0, src.width - 1], pad=0)
    idx = np.flatnonzero(on_dem)
    step = max(1, idx.size // 400)
    lat_on = track.lat_deg[idx]
    pos = np.unique(np.concatenate([np.arange(0, idx.size, step), [idx.size - 1, np.argmax(lat_on), np.argmin(lat_on)]]))
    keep = idx[pos]
    az = np.linspace(0.0, 360.0, 72, endpoint=False)
    geod = body.geod()
    lon0 = np.repeat(track.lon_deg[keep], az.size)
    lat0 = np.repeat(track.lat_deg[keep], az.size)
    lon, lat, _ = geod.fwd(lon0, lat0, np.tile(az, keep.size), np.repeat(radius_m[keep], az.size))
    if not src.is_geographic:
        rows, cols = src.lonlat_to_rowcol(np.concatenate([lon, track.lon_deg[idx]]), np.concatenate([lat, lat_on]))
        return src.window_around(rows, cols, pad=2)

    # geographic: longitudes continuous along the track, rings relative to their trace
    x_on, _ = src.lonlat_to_xy(track.lon_deg[idx], lat_on)
    if src.wraps_longitude:
        x_on = np.unwrap(x_on, period=360.0)
    dlon = (lon - lon0 + 180.0) % 360.0 - 180.0
    x = np.concatenate([np.repeat(x_on[pos], az.size) + dlon, x_on])
    y = np.concatenate([lat, lat_on])
    r_keep = radius_m[keep]
    n = keep.size
    _, _, to_north = geod.inv(track.lon_deg[keep], track.lat_deg[keep], track.lon_deg[keep], np.full(n, 90.0))
    _, _, to_south = geod.inv(track.lon_deg[keep], track.lat_deg[keep], track.lon_deg[keep], np.full(n, -90.0))
    pole = False
    for pole_lat, dist in ((90.0, to_north), (-90.0, to_south)):
        if np.any(dist < r_keep):
            x, y, pole = np.append(x, x_on[0]), np.append(y, pole_lat), True
    col, row = ~src.transform @ (x, np.clip(y, -90.0, 90.0))
    rows, cols = np.asarray(row) - 0.5, np.asarray(col) - 0.5
    if pole:
        cols = np.append(cols, [0.0, src.width - 1.0])
    if not src.wraps_longitude:
        return src.window_around(rows, cols, pad=2)
    pad = 2
    c_lo = int(math.floor(np.nanmin(cols))) - pad
    c_hi = int(math.ceil(np.nanmax(cols))) + pad + 1
    r0 = max(int(math.floor(np.nanmin(rows))) - pad, 0)
    r1 = min(int(math.ceil(np.nanmax(rows))) + pad + 1, src.height)
    if r1 <= r0:
        return None
    if c_hi - c_lo >= src.width:
        return Window(0, r0, src.width, r1 - r0)
    shift = (c_lo // src.width) * src.width  # put the west edge on the grid; the east may run past it
    return Window(c_lo - shift, r0, c_hi - c_lo, r1 - r0)


def read_track_window(
    src: DemSource, track: Track, on_dem, config: SimulationConfig, pad_samples: int = 0, before_full_read=None
) -> DemWindow:
    """Read the part of the DEM whose echoes can fall inside any trace's window.

    The needed ground radius depends on the terrain's height range, which is
    not known before reading: it is estimated on decimated reads until stable,
    then the full-resolution window is read (and widened if its true height
    range asks for more). ``before_full_read(window)``, if given, is called
    before every full-resolution read (the memory check).
    """
    h_lo = h_hi = 0.0
    window = None
    for _ in range(8):
        radius = ground_radius_m(src.body, track.alt_m, _max_range_m(track, config, h_lo, pad_samples), h_lo, h_hi)
        new = _window_for_radius(src, track, on_dem, radius)
        if new is None:
            raise TrackError(f"{track.source}: the track's footprint does not overlap the DEM {src.path.name}")
        if window is not None and new == window:
            break
        window = new
        if before_full_read is not None:  # the window only grows: refuse at once one that is already too big
            before_full_read(window)
        shape = (min(window.height, _PREVIEW_CELLS), min(window.width, _PREVIEW_CELLS))
        preview = src.read(window, out_shape=shape).elevation_m
        if np.isnan(preview).all():
            continue
        lo, hi = float(np.nanmin(preview)), float(np.nanmax(preview))
        margin = 0.05 * (hi - lo)
        h_lo, h_hi = min(h_lo, lo - margin), max(h_hi, hi + margin)
    for _ in range(4):
        if before_full_read is not None:
            before_full_read(window)
        full = src.read(window)
        if np.isnan(full.elevation_m).all():
            return full  # build_facets reports the all-nodata window
        lo, hi = float(np.nanmin(full.elevation_m)), float(np.nanmax(full.elevation_m))
        if lo >= h_lo and hi <= h_hi:
            return full
        h_lo, h_hi = min(h_lo, lo), max(h_hi, hi)
        radius = ground_radius_m(src.body, track.alt_m, _max_range_m(track, config, h_lo, pad_samples), h_lo, h_hi)
        new = _window_for_radius(src, track, on_dem, radius)
        if new == window:
            return full
        window = new
    if before_full_read is not None:
        before_full_read(window)
    return src.read(window)
