"""The kernel passes over a prepared scene: diffuse power, coherent and specular fields.

Each function takes a :class:`cluttersim.scene.Scene` and a block of traces and returns the
binned echo (power, or complex field before compression) on the scene's delay grid;
:func:`_compress` and :func:`compress_coherent` apply the pulse. The physics is in
:mod:`cluttersim.kernels`; :func:`cluttersim.simulate.simulate` decides which passes a run makes.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np
from scipy.ndimage import convolve1d

from . import kernels
from .physics import physical_optics
from .physics.radar import (
    pulse_amplitude_response,
    pulse_power_kernel,
)

if TYPE_CHECKING:  # annotations only: scene imports this module's constants
    from .scene import Scene

#: Sub-bins per delay sample on which facet delay distributions are laid (their
#: corners are placed to 1/32 of a sample).
OVERSAMPLE = 32

#: Consecutive traces one thread computes together, reading each tile's facets once. The
#: tiles are swept in order of range, so only a narrow part of each trace's delay rows is
#: written at a time and larger blocks no longer spill the cache (medium scene, one thread:
#: 170, 184, 178 M facet-evaluations per CPU-second with 4, 8, 16).
TRACES_PER_BLOCK = 8

#: How the kernel spreads a facet's power over delay: kernels.SPREAD_TRAPEZOID (the model).
#: kernels.SPREAD_CENTRE (all of it in the bin of the facet's centre) exists for the benchmark
#: only, to bound what the spreading costs; it is not exposed as an option.
DELAY_SPREADING = kernels.SPREAD_TRAPEZOID


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
