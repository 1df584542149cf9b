"""DEM-error Monte Carlo: how sure is "this echo is clutter"?

A DEM has vertical error (a stated RMS, often larger off the well-imaged strips) and
no relief below its cell size. This module simulates the same track over N
realisations of the DEM plus a spatially correlated Gaussian error field and reduces
them, per (trace, sample), to the mean and the 5/50/95 % quantiles of the simulated
power::

    prepare_scene (once: DEM window padded by 4 × RMS of range, facets, recording windows)
    per realisation k (seed [seed, k]):
        error field e_k (spectral synthesis on the window) ─► heights + e_k
        ─► ECEF grid (kernels.grid_to_ecef) ─► facets rebuilt in place (same tiles and cells;
           positions, normals, edges, areas and the tiles' culling bounds recomputed exactly)
        ─► simulate.binned_power (no source record) ─► pulse convolution ─► power_k
    mean, std and quantiles over k ─► Dataset (radargram layout: ``power`` is the mean)

The recording windows are those of the error-free run (so the products share its
sample grid and compare with it sample by sample).

Error field. A stationary Gaussian field of variance σ² and covariance
C(r) = σ² exp(−r²/L²) (the correlation falls to 1/e at the correlation length L),
made by spectral synthesis on a periodic grid padded by 3 L beyond the window:
white noise filtered by the square root of the power spectrum
S(k) ∝ exp(−|k|² L²/4), the Fourier transform of C (e.g. Rasmussen & Williams 2006,
*Gaussian Processes for Machine Learning*, §4.2, squared-exponential covariance),
scaled so the field's variance is exactly σ² on the grid. An optional map of RMS
(a raster on the DEM's grid) multiplies a unit-variance field cell by cell.

Sub-cell roughness. Relief below the cell size is modelled as an extra rms slope
s_sub added in quadrature to the scattering law's own (independent slope
populations: variances add, common practice): Hagfors' C = 1/s² becomes
1/(1/C + tan² s_sub); the geometric-optics law's tan s becomes √(tan² s + tan² s_sub).

The probability that an observed sample is explained by surface clutter
(:func:`explained_probability`) is the share of realisations under which the
comparison's test (:func:`cluttersim.analysis.compare.compare`) calls it explained.
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass

import numpy as np
import xarray as xr

from .. import kernels, memory, presum
from ..config import SimulationConfig, SurfaceConfig, default_config
from ..constants import SPEED_OF_LIGHT_M_S
from ..io.dem import DemSource, DemWindow
from ..errors import ConfigError, DemError, MemoryLimitError
from ..facets import _fill_holes, _lonlat_trig
from ..track import Track

#: Quantiles (fractions) reported per (trace, sample).
QUANTILES = (0.05, 0.50, 0.95)
#: The DEM window is widened by this many RMS of range (the largest raise expected).
MARGIN_RMS = 4.0
#: The periodic synthesis grid extends this many correlation lengths beyond the window.
PAD_CORRELATIONS = 3.0
_KEYS = ("rms_m", "correlation_m", "realisations", "seed", "subcell_rms_slope_deg", "rms_map")


@dataclass(frozen=True)
class DemErrorConfig:
    """The ``[dem_error]`` table (or ``simulate --dem-error RMS_M,CORR_M``).

    Attributes
    ----------
    rms_m : float
        RMS vertical error σ of the DEM, m (> 0).
    correlation_m : float
        Correlation length L of the error, m (≥ 0; 0: independent cells).
    realisations : int
        N, the number of DEM realisations (≥ 2; default 32).
    seed : int
        Realisation k uses the generator seeded with [seed, k]: the same seed gives the
        same products, and the first N realisations do not depend on N.
    subcell_rms_slope_deg : float
        Extra rms slope of relief below the cell size, degrees (0: none), fed to the
        scattering law (Hagfors or geometric optics only).
    rms_map : str, optional
        A raster on the DEM's grid (same size and geotransform) of the RMS per cell, m;
        it replaces ``rms_m`` where it is finite.
    """

    rms_m: float
    correlation_m: float
    realisations: int = 32
    seed: int = 0
    subcell_rms_slope_deg: float = 0.0
    rms_map: str | None = None

    def __post_init__(self):
        for name in ("rms_m", "correlation_m", "subcell_rms_slope_deg"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                raise ConfigError(f"[dem_error] {name} = {v!r}: expected a finite number")
        if not self.rms_m > 0:
            raise ConfigError(f"[dem_error] rms_m = {self.rms_m!r}: expected a positive RMS height error in metres")
        if self.correlation_m < 0:
            raise ConfigError(f"[dem_error] correlation_m = {self.correlation_m!r}: expected a length >= 0 m")
        if not 0 <= self.subcell_rms_slope_deg < 60:
            raise ConfigError(f"[dem_error] subcell_rms_slope_deg = {self.subcell_rms_slope_deg!r}: "
                              "expected an angle from 0 to 60 degrees")  # fmt: skip
        for name, low in (("realisations", 2), ("seed", 0)):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int) or v < low:
                raise ConfigError(f"[dem_error] {name} = {v!r}: expected an integer >= {low}")
        if self.rms_map is not None and not isinstance(self.rms_map, str):
            raise ConfigError(f"[dem_error] rms_map = {self.rms_map!r}: expected a raster path")

    @classmethod
    def from_dict(cls, data) -> "DemErrorConfig":
        """From a parsed ``[dem_error]`` table; unknown or missing keys are errors naming them."""
        if not isinstance(data, dict):
            raise ConfigError("[dem_error] must be a table")
        for key in data:
            if key not in _KEYS:
                raise ConfigError(f"[dem_error] unknown key {key!r}: expected {', '.join(_KEYS)}")
        for key in ("rms_m", "correlation_m"):
            if key not in data:
                raise ConfigError(f"[dem_error] missing {key}: expected rms_m and correlation_m (metres)")
        return cls(**data)

    @classmethod
    def from_toml(cls, path) -> "DemErrorConfig | None":
        """The ``[dem_error]`` table of a radar TOML file, or None when it has none."""
        import tomllib
        from pathlib import Path

        try:
            data = tomllib.loads(Path(path).read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
            raise ConfigError(f"{path}: cannot read ({exc})") from None
        if "dem_error" not in data:
            return None
        try:
            return cls.from_dict(data["dem_error"])
        except ConfigError as exc:
            raise ConfigError(f"{path}: {exc}") from None

    @classmethod
    def parse_option(cls, text: str, **kwargs) -> "DemErrorConfig":
        """From ``--dem-error RMS_M,CORR_M`` (and the other keys as keyword arguments)."""
        parts = str(text).split(",")
        try:
            rms, corr = (float(p) for p in parts)
        except ValueError:
            raise ConfigError(f"--dem-error {text!r}: expected RMS_M,CORR_M (two numbers in metres, e.g. 10,2000)") from None
        return cls(rms_m=rms, correlation_m=corr, **kwargs)

    def to_dict(self) -> dict:
        return {k: v for k, v in dataclasses.asdict(self).items() if v is not None}


# --------------------------------------------------------------------------- error fields


def correlated_field_m(shape, spacing_m, rms_m: float, correlation_m: float, rng: np.random.Generator) -> np.ndarray:
    """A Gaussian random field of RMS ``rms_m`` and covariance σ² exp(−r²/L²) on a grid.

    Spectral synthesis (see the module docstring): white noise on a periodic grid
    extending :data:`PAD_CORRELATIONS` × L beyond ``shape`` (capped at 3 × the grid plus
    64 cells per axis), filtered by √λ with λ(k) ∝ exp(−|k|² L²/4) and scaled so that
    mean(λ) = σ² (the field's variance on the periodic grid). L = 0 gives independent cells.

    Parameters
    ----------
    shape : (ny, nx)
    spacing_m : (dy, dx)
        Cell sizes in metres.
    rms_m, correlation_m : float
    rng : numpy.random.Generator

    References
    ----------
    Rasmussen, C. E. & Williams, C. K. I. (2006), *Gaussian Processes for Machine
    Learning*, MIT Press, §4.2 (squared-exponential covariance and its spectrum).
    """
    from scipy import fft

    ny, nx = shape
    dy, dx = spacing_m
    if correlation_m <= 0:
        return rms_m * rng.standard_normal(shape)
    my = fft.next_fast_len(ny + min(int(math.ceil(PAD_CORRELATIONS * correlation_m / dy)), 3 * ny + 64), real=True)
    mx = fft.next_fast_len(nx + min(int(math.ceil(PAD_CORRELATIONS * correlation_m / dx)), 3 * nx + 64), real=True)
    ky = 2.0 * math.pi * np.fft.fftfreq(my, dy)
    kx = 2.0 * math.pi * np.fft.rfftfreq(mx, dx)
    shape_k = np.exp(-0.25 * correlation_m**2 * (ky[:, None] ** 2 + kx[None, :] ** 2))
    # mean of λ over the full (not half) spectrum: the rfft half counts its interior columns twice
    weight = np.full(kx.size, 2.0)
    weight[0] = 1.0
    if mx % 2 == 0:
        weight[-1] = 1.0
    mean_shape = float((shape_k * weight[None, :]).sum()) / (my * mx)
    amp = np.sqrt(shape_k * (rms_m**2 / mean_shape))
    white = rng.standard_normal((my, mx))
    field = fft.irfft2(fft.rfft2(white) * amp, s=(my, mx))
    return field[:ny, :nx]


def cell_spacing_m(window: DemWindow) -> tuple[float, float]:
    """(dy, dx): the window's cell sizes in metres (geographic: on the body's mean radius at the
    window's central latitude; projected: the CRS's linear unit converted to metres)."""
    t = window.transform
    src = window.source
    if src.is_geographic:
        r = src.body.mean_radius_m
        lat_c = t.f + t.e * 0.5 * window.shape[0]
        dy = abs(t.e) * math.pi / 180.0 * r
        dx = abs(t.a) * math.pi / 180.0 * r * max(math.cos(math.radians(lat_c)), 1e-3)
        return dy, dx
    unit = 1.0
    try:
        unit = float(src.crs.axis_info[0].unit_conversion_factor or 1.0)
    except (AttributeError, IndexError):
        pass
    return abs(t.e) * unit, abs(t.a) * unit


def read_rms_map(path, window: DemWindow, body_radius_m=None) -> np.ndarray:
    """The RMS map (m) over a DEM window; it must share the DEM's size and geotransform."""
    src = window.source
    rms = DemSource.open(path, body_radius_m if src.crs is None else None)
    if (rms.width, rms.height) != (src.width, src.height) or not rms.transform.almost_equals(src.transform):
        raise DemError(
            f"{path}: [dem_error] rms_map has {rms.width}x{rms.height} cells with transform {tuple(rms.transform)[:6]}; "
            f"expected the DEM's grid ({src.width}x{src.height}, {tuple(src.transform)[:6]})"
        )
    values = rms.read(window.window).elevation_m
    bad = np.isfinite(values) & (values < 0)
    if bad.any():
        raise DemError(f"{path}: [dem_error] rms_map has negative values (e.g. {values[bad][0]:.3g}); expected RMS >= 0 m")
    return values


def roughened_surface(surface: SurfaceConfig, subcell_rms_slope_deg: float) -> SurfaceConfig:
    """The scattering law with sub-cell relief of rms slope s_sub added in quadrature (module docstring)."""
    if subcell_rms_slope_deg <= 0:
        return surface
    t2 = math.tan(math.radians(subcell_rms_slope_deg)) ** 2
    params = dict(surface.params)
    if surface.law == "hagfors":
        params["C"] = 1.0 / (1.0 / params["C"] + t2)
    elif surface.law == "gaussian":
        params["rms_slope_deg"] = math.degrees(math.atan(math.sqrt(math.tan(math.radians(params["rms_slope_deg"])) ** 2 + t2)))
    else:
        raise ConfigError(f"[dem_error] subcell_rms_slope_deg needs [surface] law 'hagfors' or 'gaussian', not {surface.law!r}")
    return SurfaceConfig(law=surface.law, params=params)


# --------------------------------------------------------------------------- realisations


@dataclass
class ErrorStats:
    """Timings of a Monte Carlo run (for benchmarks)."""

    seconds_scene: float = 0.0
    seconds_fields: float = 0.0
    seconds_facets: float = 0.0
    seconds_kernel: float = 0.0
    seconds_total: float = 0.0
    facet_evaluations: int = 0


class _Realiser:
    """The scene's fixed parts, and the facets of one realisation rebuilt in place."""

    def __init__(self, scene, error: DemErrorConfig, body_radius_m=None):
        self.scene = scene
        window = scene.window
        self.window = window
        elev = window.elevation_m
        self.valid = np.isfinite(elev)
        self.filled = _fill_holes(elev, self.valid)
        lon, lat = window.cell_lonlat()
        self.trig = _lonlat_trig(np.ascontiguousarray(lon, dtype=np.float64), np.ascontiguousarray(lat, dtype=np.float64))
        self.spacing = cell_spacing_m(window)
        self.error = error
        self.rms = None
        if error.rms_map is not None:
            rms = read_rms_map(error.rms_map, window, body_radius_m)
            self.rms = np.where(np.isfinite(rms), rms, error.rms_m)
        f = scene.facets
        self.facets = dataclasses.replace(
            f, rel_m=np.empty_like(f.rel_m), normal=np.empty_like(f.normal), e_col_m=np.empty_like(f.e_col_m),
            e_row_m=np.empty_like(f.e_row_m), area_m2=np.empty_like(f.area_m2), cell=np.empty_like(f.cell),
            tile_centre_m=np.empty_like(f.tile_centre_m), tile_radius_m=np.empty_like(f.tile_radius_m),
            tile_extent_m=np.empty_like(f.tile_extent_m), tile_slab=np.empty_like(f.tile_slab),
        )  # fmt: skip
        self.grid = np.empty(elev.shape + (3,))
        self.tile = _tile_cells(f)

    @property
    def max_rms_m(self) -> float:
        return float(self.error.rms_m if self.rms is None else np.max(self.rms, initial=self.error.rms_m))

    def field_m(self, k: int) -> np.ndarray:
        """The error field of realisation k (seeded with [seed, k])."""
        rng = np.random.default_rng([self.error.seed, k])
        if self.rms is None:
            return correlated_field_m(self.window.shape, self.spacing, self.error.rms_m, self.error.correlation_m, rng)
        return self.rms * correlated_field_m(self.window.shape, self.spacing, 1.0, self.error.correlation_m, rng)

    def scene_with(self, error_m: np.ndarray):
        """The scene over heights + ``error_m``: same tiles and cells, facets recomputed."""
        scene = self.scene
        body = scene.src.body
        f = self.facets
        heights = self.filled + error_m
        kernels.grid_to_ecef(*self.trig, heights, body.semi_major_m, body.eccentricity_sq, f.origin_m, self.grid)
        kernels.build_tiled_facets(
            self.grid, self.valid, *self.trig, self.tile, f.tile_offsets,
            f.rel_m, f.normal, f.e_col_m, f.e_row_m, f.area_m2, f.cell, f.tile_centre_m, f.tile_radius_m,
            f.tile_extent_m, f.origin_m, f.tile_slab,
        )  # fmt: skip
        elev = np.where(self.valid, heights, np.nan)
        window = dataclasses.replace(self.window, elevation_m=elev)
        return dataclasses.replace(scene, facets=f, window=window, _shadow_heights=None)


def _tile_cells(facets) -> int:
    """The tile side (cells) the facets were built with, from their tile count and grid shape."""
    from ..facets import TILE_CELLS

    ny, nx = facets.grid_shape
    ntile = facets.tile_offsets.size - 1
    for tile in (TILE_CELLS, *range(1, 257)):
        if (-(-ny // tile)) * (-(-nx // tile)) == ntile:
            return tile
    raise ValueError("cannot infer the facets' tile size")


def simulate_dem_error(
    dem, track, config: SimulationConfig | None, error: DemErrorConfig, *, body_radius_m: float | None = None,
    band: str | None = None, progress: bool = False, keep_realisations: bool = False, stats: ErrorStats | None = None,
    max_memory_bytes: int | str | None = "auto", sides: bool = False,
) -> xr.Dataset:  # fmt: skip
    """Simulate a track over N realisations of the DEM plus its error; per (trace, sample) statistics.

    Parameters
    ----------
    dem, track, config, body_radius_m :
        As for :func:`cluttersim.simulate.simulate` (incoherent mode; one band: ``band``,
        default the first; [noise] is not added: the products describe the clutter alone).
    error : DemErrorConfig
    keep_realisations : bool
        Also return every realisation's power as ``power_realisations``
        (realisation, trace, sample) and nadir delay as ``nadir_delay_realisations``.
    sides : bool
        With ``keep_realisations``, also each realisation's source-record side shares
        ``left_fraction_realisations`` and ``right_fraction_realisations`` (the kernel then runs
        with the source record, nadir strip = the pulse-limited footprint; no presumming).

    Returns
    -------
    xarray.Dataset
        The radargram layout (:func:`cluttersim.io.radargram.build_dataset`, on the error-free
        run's recording windows) with ``power`` the mean over realisations and
        ``power_q05``, ``power_q50``, ``power_q95``, ``power_std`` (W), ``power_nominal`` (the
        error-free DEM, with the sub-cell roughness if any), per trace ``nadir_delay_mean`` and ``nadir_delay_std`` over the
        realisations (s), and the error settings as attributes (``dem_error_*``).
    """
    from tqdm.auto import tqdm

    from ..physics.antenna import trace_frames
    from .attribution import right_unit_vectors
    from ..physics.radar import POWER_CONVENTION, POWER_CONVENTION_TEXT
    from ..io.radargram import build_dataset, flatten_config_attrs
    from ..simulate import _compress, binned_power, prepare_scene

    t_start = time.perf_counter()
    stats = stats if stats is not None else ErrorStats()
    config = config if config is not None else default_config()
    src = dem if isinstance(dem, DemSource) else DemSource.open(dem, body_radius_m)
    track = track if isinstance(track, Track) else Track.from_csv(track)
    if config.processing.mode == "coherent":
        raise ConfigError("[dem_error] needs [processing] mode = 'incoherent' (the Monte Carlo averages power)")
    if config.bands:
        config = config.for_band(band or config.band_names[0])
    config = dataclasses.replace(config, noise=None, subsurface=None,
                                 surface=roughened_surface(config.surface, error.subcell_rms_slope_deg))  # fmt: skip
    config = dataclasses.replace(config, processing=config.processing.with_track_speed(track, src.body))
    radar = config.radar
    n_out = presum.n_output_traces(len(track), config.processing.presum)
    need = (error.realisations + 6) * n_out * radar.samples * 4
    limit = memory.default_limit_bytes() if max_memory_bytes == "auto" else max_memory_bytes
    if isinstance(limit, str):
        limit = memory.parse_size(limit)
    if limit is not None and need > limit:
        raise MemoryLimitError(
            f"[dem_error] {error.realisations} realisations of {n_out} traces x {radar.samples} samples need about "
            f"{memory.format_bytes(need)}, more than the allowed {memory.format_bytes(limit)}; expected fewer "
            "realisations or traces, or a larger --max-memory"
        )

    t0 = time.perf_counter()
    rms_guess = error.rms_m
    scene = prepare_scene(src, track, config, max_memory_bytes=max_memory_bytes, sources=False,
                          range_margin_m=MARGIN_RMS * rms_guess)  # fmt: skip
    realiser = _Realiser(scene, error, body_radius_m)
    if realiser.max_rms_m > rms_guess * 1.0001:  # a map with larger values: read again with its margin
        scene = prepare_scene(src, track, config, max_memory_bytes=max_memory_bytes, sources=False,
                              range_margin_m=MARGIN_RMS * realiser.max_rms_m)  # fmt: skip
        realiser = _Realiser(scene, error, body_radius_m)
    stats.seconds_scene = time.perf_counter() - t0
    lead_m = 0.5 * SPEED_OF_LIGHT_M_S * float(np.nanmin(scene.earliest_delay_s - scene.start_s, initial=np.inf))
    if 3.0 * realiser.max_rms_m > lead_m:
        import warnings

        warnings.warn(
            f"[dem_error] 3 x RMS ({3 * realiser.max_rms_m:.0f} m) exceeds the {lead_m:.0f} m of range the recording "
            "window keeps before the earliest echo: raised terrain in some realisations echoes before the window "
            "and is lost (set [radar] window_start_s earlier)",
            stacklevel=2,
        )

    body = src.body
    idx, pad = scene.idx, scene.pad
    ant_on = np.ascontiguousarray(scene.ant_m[idx])
    dt = radar.sample_interval_s
    nbins = radar.samples + 2 * pad
    bin0 = scene.start_s - (pad + 0.5) * dt
    right_unit = right_unit_vectors(body, track)[idx]
    frames = trace_frames(right_unit, body.up_unit(track.lat_deg, track.lon_deg)[idx])
    ntr = len(track)
    chunk = 256
    sides = sides and keep_realisations
    if sides and config.processing.presum > 1:
        raise ConfigError("[dem_error] side shares per realisation need [processing] presum = 1")
    strip = None
    if sides:
        from ..physics.radar import pulse_limited_radius_m

        alt = np.nan_to_num(track.alt_m - scene.h_nadir_m)[idx]
        strip = pulse_limited_radius_m(alt, radar.bandwidth_hz, body.mean_radius_m) * np.ones(idx.size)
    side_out = {}

    def run(scene_k, k=None) -> np.ndarray:
        power = np.full((ntr, radar.samples), np.nan)
        t1 = time.perf_counter()
        for a in range(0, idx.size, chunk):
            b = min(a + chunk, idx.size)
            binned, _, n_eval = binned_power(scene_k, ant_on[a:b], bin0[a:b], nbins, right_unit[a:b] if sides else None,
                                             strip[a:b] if sides else None, sides, frames[a:b], idx[a:b])  # fmt: skip
            stats.facet_evaluations += n_eval
            total = _compress(binned[:, 0], scene.pulse_weights, pad, radar.samples)
            power[idx[a:b]] = total
            if sides and k is not None:
                from .attribution import side_fractions
                from ..kernels import SIDE_LEFT, SIDE_RIGHT

                left = _compress(binned[:, SIDE_LEFT], scene.pulse_weights, pad, radar.samples)
                right = _compress(binned[:, SIDE_RIGHT], scene.pulse_weights, pad, radar.samples)
                side_out["left"][k, idx[a:b]], side_out["right"][k, idx[a:b]] = side_fractions(left, right, total)
        stats.seconds_kernel += time.perf_counter() - t1
        return presum.group_mean(power, config.processing.presum).astype(np.float32)

    n = error.realisations
    if sides:
        side_out["left"] = np.full((n, ntr, radar.samples), np.nan, dtype=np.float32)
        side_out["right"] = np.full((n, ntr, radar.samples), np.nan, dtype=np.float32)
    nominal = run(scene)
    stack = np.empty((n, n_out, radar.samples), dtype=np.float32)
    nadir = np.empty((n, ntr))
    with tqdm(total=n, unit="realisation", delay=1.0, disable=not progress, desc="DEM realisations") as bar:
        for k in range(n):
            t1 = time.perf_counter()
            e = realiser.field_m(k)
            stats.seconds_fields += time.perf_counter() - t1
            t1 = time.perf_counter()
            scene_k = realiser.scene_with(e)
            stats.seconds_facets += time.perf_counter() - t1
            h = scene_k.window.bilinear_m(track.lon_deg, track.lat_deg)
            nadir[k] = 2.0 * (track.alt_m - h) / SPEED_OF_LIGHT_M_S
            stack[k] = run(scene_k, k)
            bar.update(1)

    mean, std, quant = power_statistics(stack)
    nadir_out = presum.group_mean(nadir.T, config.processing.presum)  # (trace, realisation)
    track_out = presum.presum_track(track, config.processing.presum)

    def per_trace(values_on):
        full = np.full(ntr, np.nan)
        full[idx] = values_on
        return presum.group_mean(full, config.processing.presum)

    extra = {
        "power_nominal": (("trace", "sample"), nominal, "W", "power over the DEM without error"),
        "power_std": (("trace", "sample"), std, "W", "standard deviation of the power over DEM realisations"),
        "nadir_delay_mean": ("trace", np.nanmean(nadir_out, axis=1), "s", "mean nadir delay over DEM realisations"),
        "nadir_delay_std": ("trace", np.nanstd(nadir_out, axis=1, ddof=1), "s",
                            "standard deviation of the nadir delay over DEM realisations"),
    }  # fmt: skip
    for q, values in zip(QUANTILES, quant):
        extra[f"power_q{round(100 * q):02d}"] = (("trace", "sample"), values, "W",
                                                  f"{round(100 * q)} % quantile of the power over DEM realisations")  # fmt: skip
    if keep_realisations:
        extra["power_realisations"] = (("realisation", "trace", "sample"), stack, "W", "power of each DEM realisation")
        extra["nadir_delay_realisations"] = (("realisation", "trace"), nadir_out.T, "s",
                                             "nadir delay of each DEM realisation")  # fmt: skip
        for side, values in side_out.items():
            extra[f"{side}_fraction_realisations"] = (("realisation", "trace", "sample"), values, "1",
                                                      f"share of the power from the {side} of the track, per realisation")  # fmt: skip
    attrs = {
        **flatten_config_attrs(config),
        "dem_file": src.path.name,
        "dem_path": str(src.path.resolve()),
        **body.to_attrs(),
        "title": "cluttersim DEM-error Monte Carlo (power: mean over realisations)",
        "power_convention": POWER_CONVENTION,  # the scale of simulate()'s power (cluttersim.io.radargram)
        "power_convention_text": POWER_CONVENTION_TEXT,
        **{f"dem_error_{k}": v for k, v in error.to_dict().items()},
        "dem_error_covariance": "rms_m^2 exp(-(r/correlation_m)^2)",
    }
    ds = build_dataset(mean, per_trace(scene.start_s), dt, track_out, presum.group_mean(scene.nadir_delay_s,
                       config.processing.presum), per_trace(scene.earliest_delay_s),
                       presum.group_mean(scene.on_dem.astype(np.float64), config.processing.presum) == 1.0, attrs, extra)  # fmt: skip
    ds["power"].attrs["long_name"] = "mean received echo power over DEM realisations"
    stats.seconds_total = time.perf_counter() - t_start
    return ds


def power_statistics(stack: np.ndarray, block: int = 64):
    """Mean, standard deviation (ddof 1) and :data:`QUANTILES` over axis 0 of (N, trace, sample),
    computed in blocks of traces (float32 results)."""
    n, ntr, ns = stack.shape
    mean = np.empty((ntr, ns), dtype=np.float32)
    std = np.empty((ntr, ns), dtype=np.float32)
    quant = np.empty((len(QUANTILES), ntr, ns), dtype=np.float32)
    for a in range(0, ntr, block):
        part = stack[:, a : a + block].astype(np.float64)
        mean[a : a + block] = part.mean(axis=0)
        std[a : a + block] = part.std(axis=0, ddof=1)
        quant[:, a : a + block] = np.quantile(part, QUANTILES, axis=0)
    return mean, std, quant


# --------------------------------------------------------------------------- comparison


def explained_probability(explained_by, realisations_w, detected) -> tuple[np.ndarray, np.ndarray]:
    """Per observed sample, the share p of DEM realisations that explain it, and its standard error.

    ``explained_by(power_w)`` is the comparison's rule applied with one realisation's simulated
    power (``realisations_w[k]``, (trace, sample) on the simulation's grid) in place of the
    simulation: a boolean array over the observed samples (the comparison,
    :func:`cluttersim.analysis.compare.compare`, aligns, scales and tests exactly as it does for the mean).
    p is the fraction of the N realisations under which a sample is explained, NaN where the
    sample is not ``detected`` (no echo above the noise). Its Monte Carlo standard error is the
    binomial √(p(1 − p)/N).
    """
    n = len(realisations_w)
    count = None
    for k in range(n):
        e = np.asarray(explained_by(realisations_w[k]), dtype=np.float64)
        count = e if count is None else count + e
    p = np.where(np.asarray(detected, bool), count / n, np.nan)
    return p, np.sqrt(p * (1.0 - p) / n)


# --------------------------------------------------------------------------- products

#: File names the DEM-error products add to a run directory.
DEM_ERROR_FILES = {"dem_error": "dem_error.nc", "dem_error_png": "dem_error.png"}


def dem_error_paths(out_dir, fmt: str = "png") -> dict:
    """Paths of the DEM-error products in ``out_dir``, the figure in format ``fmt`` (png, pdf, svg)."""
    from pathlib import Path

    from ..products import figure_name

    return {k: Path(out_dir) / figure_name(v, fmt) for k, v in DEM_ERROR_FILES.items()}


def write_dem_error(ds: xr.Dataset, paths: dict, figures=None) -> None:
    """Write ``dem_error.nc`` (the Dataset of :func:`simulate_dem_error`) and ``dem_error.png``
    (:func:`cluttersim.plots.plot_dem_error`; ``figures``,
    :class:`cluttersim.products.FigureOptions`: dpi, format, dynamic range [default 60 dB]) atomically."""
    from ..io.outputs import atomic_paths
    from ..plots.planning import plot_dem_error
    from ..io.radargram import write_netcdf_to

    with atomic_paths([paths["dem_error"], paths["dem_error_png"]]) as (nc, png):
        write_netcdf_to(ds, nc)
        dpi, fmt, db_range = (None, None, None) if figures is None else (figures.dpi, figures.fmt, figures.db_range)
        plot_dem_error(ds, png, dpi=dpi, fmt=fmt, **({"dynamic_range_db": db_range} if db_range is not None else {}))
