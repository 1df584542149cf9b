"""Orchestration of a clutter simulation: DEM window, facets, culling, kernels, pulse.

Data flow::

    DemSource ──(window around the track)──► DemWindow ──► Facets (tiled)
    Track ──► antenna positions ─┐                              │
    SimulationConfig ────────────┴──► kernels.earliest_range ──► window starts   (scene.prepare_scene)
                                      kernels.accumulate_power (chunks of traces, progress)
                                      ──► convolution with the compressed pulse  (signals: the passes)
                                      ──► noise, subsurface, source record ──► Dataset (here)

The scene (DEM window, facets, recording windows) is built by :mod:`cluttersim.scene`, the
kernel passes over it are in :mod:`cluttersim.signals`; the physics lives in
:mod:`cluttersim.kernels` (per facet), :mod:`cluttersim.physics.radar` and
:mod:`cluttersim.physics.scattering`. This module decides what to compute and assembles the
radargram.
"""

from __future__ import annotations

import dataclasses
import time
from dataclasses import dataclass

import numba
import numpy as np
import xarray as xr
from tqdm.auto import tqdm

from . import __version__, kernels, presum
from .config import SimulationConfig, default_config
from .io.dem import DemSource
from .errors import GeometryError, TrackError
from .physics.noise import add_complex_noise, add_noise_by_pulse
from .physics.antenna import trace_frames
from .analysis.attribution import first_return, right_unit_vectors, side_fractions
from .physics.radar import (
    POWER_CONVENTION,
    POWER_CONVENTION_TEXT,
    noise_bandwidth_factor,
    pulse_limited_radius_m,
)
from .io.radargram import build_dataset, flatten_config_attrs, stack_bands
from .physics.subsurface import subsurface_variables
from .scene import RunStats, Scene, prepare_scene, scene_for_band, warn_grazing_without_shadowing
from .signals import TRACES_PER_BLOCK, _compress, binned_power, coherent_signal, specular_power
from .track import Track, wrap_lon_like
from .validate import check_noise_power, check_run_arguments


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
