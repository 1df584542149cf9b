"""Compare a simulated clutter radargram with an observed one; list the echoes it leaves unexplained.

Steps (each in a module of its own, units in the names):

1. :func:`~cluttersim.analysis.compare_grid.match_traces` pairs each observed trace with
   the nearest simulated trace (in time when both tracks have it, else in
   position); pairs farther apart than a tolerance stay unmatched and are reported.
2. :func:`~cluttersim.analysis.compare_align.estimate_delay_offset` fits the shifted,
   scaled simulated surface echo (leading edge and peak only) to the observed
   samples: the timing offset with a jackknife uncertainty, and the power
   scale per trace (the gain).
3. :func:`~cluttersim.analysis.compare_detect.noise_floor` estimates the observed
   noise from the samples before the surface echo.
4. :func:`~cluttersim.analysis.compare_detect.detect_unexplained` tests every observed
   sample against the predicted clutter-plus-noise power under speckle
   statistics: the unexplained ones, at a false-alarm probability per sample,
   are the candidates, ranked by a score.
5. :mod:`cluttersim.analysis.compare_io` writes ``comparison.nc``, ``candidates.csv``,
   ``candidates.geojson`` and the figures; :func:`compare_many` runs a list of
   tracks into one table and map.

:func:`compare` runs steps 1–4 on loaded data; :func:`compare_to_dir` also
reads the inputs, simulates on the fly if asked, and writes the products
atomically.

Sign convention: a positive offset means the observed echoes were recorded
*later* than the simulated ones; the aligned observed power at absolute delay t
is the recorded power at t + offset.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import xarray as xr

from .compare_align import DelayOffset, estimate_delay_offset, fit_windows
from .compare_detect import (
    Detections, GainFit, NoiseFloor, SampleVerdicts, candidate_score, clutter_within_tolerance, continuity_fraction,
    detect_unexplained, gain_from_scales, noise_floor, sub_sample_peaks,
)  # fmt: skip
from .compare_grid import (
    TraceMatch, bandwidth_of, body_of, cubic_convolution, grid_edges_s, match_traces, resample_in_chunks,
    sample_interval_of, surface_window_samples,
)  # fmt: skip
from .compare_io import (
    CANDIDATE_COLUMNS, COMPARE_FILES, comparison_dataset, compare_many, format_summary, write_candidates_csv,
    with_figure_format, write_candidates_geojson, write_comparison,
)  # fmt: skip
from ..errors import ConfigError, ObservedDataError
from ..io.observed import ObservedRadargram
from ..io.outputs import check_new, locked_output
from ..physics.radar import apparent_depth_m

__all__ = [
    "CANDIDATE_COLUMNS", "COMPARE_FILES", "CompareSettings", "Comparison", "DelayOffset", "Detections", "GainFit",
    "NoiseFloor", "TraceMatch", "body_of", "compare", "compare_many", "compare_to_dir", "comparison_dataset",
    "format_summary", "match_traces", "noise_floor", "sim_cannot_serve", "write_candidates_csv",
    "write_candidates_geojson", "write_comparison",
]  # fmt: skip

#: Correlation of the surface echoes below which the comparison warns.
WEAK_CORRELATION = 0.5
#: Noise floor below this fraction of the observed surface peak counts as no noise at all (100 dB).
NOISE_FREE_FRACTION = 1e-10


@dataclass(frozen=True)
class CompareSettings:
    """Tolerances and test parameters of a comparison (units in the names).

    Attributes
    ----------
    match_tolerance_m : float or None
        Largest ground distance between an observed trace and its simulated
        partner; None: the median spacing of the simulated traces.
    max_offset_s : float or None
        Largest timing offset searched, either sign; None: half the simulated window.
    per_trace_offset : bool
        Fit an offset per trace (over a window of traces) instead of one for all.
    offset_window_traces : int
        Traces of the window each per-trace offset is fitted over.
    delay_tolerance_s : float or None
        Simulated power this close in delay can explain an echo; None: one
        range cell (1/B) plus three times the offset's uncertainty.
    pfa : float
        False-alarm probability per observed sample of the unexplained-echo test.
    looks : float
        Independent looks averaged in each observed sample (1: single look, exponential power).
    model_tolerance_db : float
        The simulated clutter may be this much too weak (DEM, scattering law), dB.
    integration_traces : int
        Neighbouring traces averaged by the test (odd; 1: each trace alone).
    permittivity : float
        Real relative permittivity ε′ for apparent depths.
    continuity_traces : int
        Neighbours on each side examined for the continuity of a candidate.
    """

    match_tolerance_m: float | None = None
    max_offset_s: float | None = None
    per_trace_offset: bool = False
    offset_window_traces: int = 51
    delay_tolerance_s: float | None = None
    pfa: float = 1e-6
    looks: float = 1.0
    model_tolerance_db: float = 3.0
    integration_traces: int = 15
    permittivity: float = 3.15
    continuity_traces: int = 2

    def __post_init__(self):
        for name in ("match_tolerance_m", "max_offset_s", "delay_tolerance_s"):
            value = getattr(self, name)
            if value is not None and not (math.isfinite(value) and value > 0):
                raise ConfigError(f"{name} = {value!r}: expected a positive number")
        if not (0.0 < self.pfa < 1.0):
            raise ConfigError(f"pfa = {self.pfa!r}: expected a probability between 0 and 1 (exclusive)")
        if not (math.isfinite(self.looks) and self.looks > 0):
            raise ConfigError(f"looks = {self.looks!r}: expected a positive number of looks")
        if not (math.isfinite(self.model_tolerance_db) and self.model_tolerance_db >= 0):
            raise ConfigError(f"model_tolerance_db = {self.model_tolerance_db!r}: expected a number of dB >= 0")
        if not (isinstance(self.integration_traces, int) and self.integration_traces >= 1
                and self.integration_traces % 2 == 1):  # fmt: skip
            raise ConfigError(f"integration_traces = {self.integration_traces!r}: expected an odd integer >= 1")
        if not self.permittivity >= 1.0:
            raise ConfigError(f"permittivity = {self.permittivity!r}: expected a real relative permittivity >= 1")
        if not (isinstance(self.offset_window_traces, int) and self.offset_window_traces >= 1):
            raise ConfigError(f"offset_window_traces = {self.offset_window_traces!r}: expected an integer >= 1")
        if not (isinstance(self.continuity_traces, int) and self.continuity_traces >= 1):
            raise ConfigError(f"continuity_traces = {self.continuity_traces!r}: expected an integer >= 1")


@dataclass
class Comparison:
    """Everything a comparison found; ``dataset`` is what ``comparison.nc`` holds."""

    dataset: xr.Dataset
    match: TraceMatch
    offset: DelayOffset
    gain: GainFit
    noise: NoiseFloor
    candidates: list[dict]
    settings: CompareSettings
    observed_source: str
    sim_source: str
    coverage: float = math.nan
    warnings: list[str] = field(default_factory=list)
    detections: Detections | None = None  # the test on the observed grid (matched traces × observed samples)

    @property
    def notes(self) -> list[str]:
        """The warnings (older name)."""
        return self.warnings


def sim_cannot_serve(sim_ds: xr.Dataset) -> str | None:
    """Why a simulated radargram cannot be the expectation a comparison needs, or None.

    The test compares observed power with the *expected* clutter power: a
    simulation that contains receiver noise (``[noise]``) or coherent speckle
    (``[processing] mode = "coherent"``) is one random draw, not the expectation.
    """
    try:
        cfg = json.loads(sim_ds.attrs.get("cluttersim_config_all") or sim_ds.attrs["cluttersim_config"])
    except (KeyError, ValueError, TypeError):
        return None
    reasons = []
    if cfg.get("noise"):
        reasons.append("receiver noise ([noise] table)")
    if str(cfg.get("processing", {}).get("mode", "incoherent")) == "coherent":
        reasons.append("coherent speckle ([processing] mode = \"coherent\")")
    if not reasons:
        return None
    return (
        f"the simulated radargram contains {' and '.join(reasons)}: the comparison needs the noise-free, incoherent "
        "expectation of the clutter; simulate without them, or give --dem to simulate it now"
    )


def compare(observed: ObservedRadargram, sim_ds: xr.Dataset, settings: CompareSettings | None = None, *,
            progress: bool = False, sim_source: str = "simulation") -> Comparison:  # fmt: skip
    """Align an observed radargram with a simulated one, fit the gain and test every sample for unexplained power.

    Parameters
    ----------
    observed : ObservedRadargram
        From :func:`cluttersim.io.observed.load_observed`.
    sim_ds : xarray.Dataset
        A cluttersim radargram over (about) the same track: the noise-free,
        incoherent expectation of the clutter (else :class:`ObservedDataError`,
        see :func:`sim_cannot_serve`).
    settings : CompareSettings, optional
    progress : bool
        Progress bar for long alignments.
    sim_source : str
        Name of the simulation for messages and attributes.

    Returns
    -------
    Comparison
        The matched traces, offset, gain, noise floor, ranked candidates, the
        warnings and the ``comparison.nc`` dataset (observed trace × simulated sample).
    """
    settings = settings or CompareSettings()
    why = sim_cannot_serve(sim_ds)
    if why:
        raise ObservedDataError(f"{sim_source}: {why}")
    body = body_of(sim_ds)
    match = match_traces(observed.track, sim_ds, body, settings.match_tolerance_m)
    rows_obs = np.flatnonzero(match.matched)
    if rows_obs.size == 0:
        nearest = float(np.nanmin(match.distance_m))
        hint = " (do the two tracks count time from the same epoch?)" if match.method == "time" else ""
        raise ObservedDataError(
            f"{observed.source}: no observed trace has a simulated trace within {match.tolerance_m:.1f} m "
            f"(matched by {match.method}; the closest pair is {nearest:.1f} m apart){hint}"
        )
    rows_sim = match.sim_index[rows_obs]
    dt = sample_interval_of(sim_ds)
    ns = sim_ds.sizes["sample"]
    bandwidth = bandwidth_of(sim_ds)
    cell = 1.0 / (bandwidth * dt) if bandwidth else 2.0  # samples per range cell (1/B)
    margin = int(math.ceil(2.0 * cell))
    max_off_s = settings.max_offset_s if settings.max_offset_s is not None else 0.5 * ns * dt
    max_lag = max(1, int(math.ceil(max_off_s / dt)))

    sim_ws = sim_ds["window_start"].values[rows_sim]
    sim_power = np.nan_to_num(np.asarray(sim_ds["power"].values[rows_sim], dtype=np.float64), nan=0.0)
    first, last = surface_window_samples(sim_ds, rows_sim, margin)
    windows = fit_windows(sim_power, first, last, cell, lead_samples=max_lag)
    pad_left = max(0, int(math.ceil(-np.min(windows.lead_start)))) + max_lag + 2
    pad_right = max_lag + margin + int(math.ceil(windows.taper)) + 2
    obs_power = observed.power[rows_obs]
    obs_ws = observed.window_start_s[rows_obs]
    dt_obs = observed.sample_interval_s
    m_obs = observed.n_samples

    obs_ext = resample_in_chunks(obs_power, obs_ws, dt_obs, grid_edges_s(sim_ws, dt, -pad_left, ns + pad_right))
    if not np.isfinite(obs_ext[:, pad_left - max_lag:pad_left + ns + max_lag]).any():
        obs_lo, obs_hi = np.min(obs_ws), np.max(obs_ws + m_obs * dt_obs)
        sim_lo, sim_hi = np.min(sim_ws), np.max(sim_ws + ns * dt)
        raise ObservedDataError(
            f"{observed.source}: the observed windows ({obs_lo * 1e6:.3f}–{obs_hi * 1e6:.3f} µs) do not reach the "
            f"simulated ones ({sim_lo * 1e6:.3f}–{sim_hi * 1e6:.3f} µs) within the largest offset searched "
            f"({max_off_s * 1e6:.3f} µs); check the window start and sample interval"
        )
    earliest = sim_ds["earliest_echo_delay"].values[rows_sim] if "earliest_echo_delay" in sim_ds else sim_ws
    zero_before = bool(np.all(~(earliest < sim_ws - 0.5 * dt)))  # nothing echoes before the windows start
    obs_x0 = (obs_ws - sim_ws) / dt
    obs_step = dt_obs / dt
    offset = estimate_delay_offset(
        obs_power, obs_x0, obs_step, obs_ext, pad_left, sim_power, windows, max_lag, dt, zero_before=zero_before,
        per_trace=settings.per_trace_offset, window_traces=settings.offset_window_traces, progress=progress,
    )  # fmt: skip
    gain = gain_from_scales(offset.surface_scale)
    g = 10.0 ** (gain.gain_db / 10.0)
    tau = offset.per_trace_samples

    # the simulated power at every observed sample's aligned delay (simulated sample coordinate x)
    x = obs_x0[:, None] + np.arange(m_obs)[None, :] * obs_step - tau[:, None]
    sim_at_obs = np.clip(cubic_convolution(sim_power, x, before=0.0 if zero_before else np.nan), 0.0, None)
    noise = noise_floor(obs_power, x < (first - margin)[:, None], predicted=g * sim_at_obs)
    sigma = np.nan_to_num(offset.per_trace_uncertainty_samples, nan=0.0)
    if settings.delay_tolerance_s is not None:
        tol_s = np.full(rows_obs.size, settings.delay_tolerance_s)
    else:
        tol_s = (cell + 3.0 * sigma) * dt
    tol_obs = int(math.ceil(float(np.max(tol_s)) / dt_obs - 1e-9))
    clutter = clutter_within_tolerance(g * sim_at_obs, tol_obs)
    nadir = np.asarray(sim_ds["nadir_delay"].values[rows_sim], dtype=np.float64)
    nadir = np.where(np.isfinite(nadir), nadir, sim_ws + windows.peak * dt)
    nadir_sample = (nadir + tau * dt - obs_ws) / dt_obs  # observed sample of each trace's nadir echo

    def shifts(i, j):
        return np.rint(nadir_sample[j] - nadir_sample[i]).astype(np.int64)

    peak_half = max(1, int(round(cell * dt / dt_obs)))
    det = detect_unexplained(
        obs_power, clutter, noise, pfa=settings.pfa, looks=settings.looks,
        model_tolerance_db=settings.model_tolerance_db, integration_traces=settings.integration_traces,
        shifts_fn=shifts, peak_half_width_samples=peak_half,
    )  # fmt: skip

    # onto the simulated grid: aligned observed power (bin means, for display) and the masks
    aligned = resample_in_chunks(obs_power, obs_ws, dt_obs, grid_edges_s(sim_ws, dt, 0, ns, tau * dt))
    on_grid = SimGridMasks.from_detections(det, x, ns)
    cont = continuity_fraction(on_grid.candidate, settings.continuity_traces, max(1, int(round(cell))))

    ti, ki = np.nonzero(det.candidate)
    frac = sub_sample_peaks(obs_power, ti, ki)
    abs_delay = obs_ws[ti] + (ki + frac) * dt_obs - tau[ti] * dt
    grid_sample = np.clip(np.rint(x[ti, ki]).astype(np.int64), 0, ns - 1)
    o = obs_power[ti, ki]
    with np.errstate(divide="ignore", invalid="ignore"):
        snr = 10.0 * np.log10(o / noise.power[ti])
        excess = 10.0 * np.log10(o / det.predicted[ti, ki])
        share = np.clip(1.0 - det.predicted[ti, ki] / o, 0.0, 1.0)
    continuity = cont[ti, grid_sample]
    score = candidate_score(share, continuity)
    depth = apparent_depth_m(abs_delay - nadir[ti], settings.permittivity)
    pval = det.p_value[ti, ki]
    order = np.lexsort((pval, -score))
    trace_idx = rows_obs[ti]
    candidates = []
    for rank, c in enumerate(order, start=1):
        candidates.append({
            "rank": rank, "trace": int(trace_idx[c]), "sample": int(ki[c]), "delay_us": float((ki[c] + frac[c]) * dt_obs * 1e6),
            "two_way_delay_us": float(abs_delay[c] * 1e6),
            "lat": float(observed.track.lat_deg[trace_idx[c]]), "lon": float(observed.track.lon_deg[trace_idx[c]]),
            "depth_m": float(depth[c]), "snr_db": float(snr[c]), "excess_db": float(excess[c]),
            "p_value": float(pval[c]), "unexplained_share": float(share[c]), "continuity": float(continuity[c]),
            "score": float(score[c]), "sim_trace": int(rows_sim[ti[c]]), "sim_delay_us": float((abs_delay[c] - sim_ws[ti[c]]) * 1e6),
            "grid_sample": int(grid_sample[c]),
        })  # fmt: skip
    _add_echo_sources(candidates, sim_ds)
    prob = None
    if "power_realisations" in sim_ds:  # a dem_error.nc: the share of DEM realisations explaining each sample
        from .dem_error import explained_probability

        def explained_by(real_power):
            s_at = np.clip(cubic_convolution(np.nan_to_num(np.asarray(real_power, dtype=np.float64)[rows_sim], nan=0.0),
                                             x, before=0.0 if zero_before else np.nan), 0.0, None)  # fmt: skip
            return detect_unexplained(
                obs_power, clutter_within_tolerance(g * s_at, tol_obs), noise, pfa=settings.pfa, looks=settings.looks,
                model_tolerance_db=settings.model_tolerance_db, integration_traces=settings.integration_traces,
                shifts_fn=shifts, peak_half_width_samples=peak_half,
            ).explained  # fmt: skip

        prob, _ = explained_probability(explained_by, sim_ds["power_realisations"].values, det.detected)
        for c, (t, k) in zip(candidates, zip(ti[order], ki[order])):
            c["explained_probability"] = float(prob[t, k])

    finite_obs = np.isfinite(obs_power).sum()
    tested = np.isfinite(det.p_value).sum()
    coverage = float(tested / finite_obs) if finite_obs else math.nan
    warnings = input_warnings(offset, noise, obs_power, max_off_s, settings)
    ds = comparison_dataset(
        observed, sim_ds, match, rows_obs, rows_sim, aligned, sim_power * g, on_grid, noise, offset, gain, settings,
        tol_s=float(np.median(tol_s)), sim_source=sim_source, warnings=warnings,
    )  # fmt: skip
    if prob is not None:  # on the simulated grid: the smallest share among the observed samples rounding there
        gi = np.rint(x).astype(np.int64)
        ok = (gi >= 0) & (gi < ns) & np.isfinite(prob)
        grid = np.full((rows_obs.size, ns), np.inf)
        np.minimum.at(grid, (np.broadcast_to(np.arange(rows_obs.size)[:, None], x.shape)[ok], gi[ok]), prob[ok])
        full = np.full((observed.n_traces, ns), np.nan, dtype=np.float32)
        full[rows_obs] = np.where(np.isfinite(grid), grid, np.nan)
        ds["explained_probability"] = (("trace", "sample"), full, {"units": "1", "long_name":
            "share of DEM realisations under which the observed power here is explained by surface clutter"})
    return Comparison(
        dataset=ds, match=match, offset=offset, gain=gain, noise=noise, candidates=candidates, settings=settings,
        observed_source=observed.source, sim_source=sim_source, coverage=coverage, warnings=warnings,
        detections=det,
    )  # fmt: skip


@dataclass(frozen=True)
class SimGridMasks(SampleVerdicts):
    """The test's outcome (:class:`~cluttersim.analysis.compare_detect.SampleVerdicts`) carried onto the
    simulated grid (matched traces × simulated samples).

    A simulated sample is *detected* / *unexplained* / a *candidate* when any
    observed sample whose aligned delay rounds to it is; ``p_value`` is the
    smallest p-value among them (NaN: no observed sample tested there).
    """

    @classmethod
    def from_detections(cls, det: Detections, x, ns: int) -> "SimGridMasks":
        n = x.shape[0]
        gi = np.rint(x).astype(np.int64)
        ok = (gi >= 0) & (gi < ns)
        rows = np.broadcast_to(np.arange(n)[:, None], x.shape)[ok]
        cols = gi[ok]
        out = []
        for mask in (det.detected, det.unexplained, det.candidate):
            grid = np.zeros((n, ns), dtype=bool)
            grid[rows[mask[ok]], cols[mask[ok]]] = True
            out.append(grid)
        p = np.full((n, ns), np.inf)
        pv = det.p_value[ok]
        fin = np.isfinite(pv)
        np.minimum.at(p, (rows[fin], cols[fin]), pv[fin])
        p[~np.isfinite(p)] = np.nan
        return cls(*out, p_value=p)


def _add_echo_sources(candidates: list[dict], sim_ds: xr.Dataset) -> None:
    """Add the simulated dominant facet (``source_lat``, ``source_lon``) at each candidate's delay, where recorded.

    That is the ground position whose clutter the simulation puts at the
    candidate's delay: where the candidate would come from if it were surface
    clutter the DEM misplaces. NaN where the simulation has no source record.
    """
    have = "source_lat" in sim_ds and "source_lon" in sim_ds
    lat = sim_ds["source_lat"].values if have else None
    lon = sim_ds["source_lon"].values if have else None
    for c in candidates:
        if have:
            c["source_lat"] = float(lat[c["sim_trace"], c["grid_sample"]])
            c["source_lon"] = float(lon[c["sim_trace"], c["grid_sample"]])
        else:
            c["source_lat"] = c["source_lon"] = math.nan


def input_warnings(offset: DelayOffset, noise: NoiseFloor, obs_power, max_off_s: float,
                   settings: CompareSettings) -> list[str]:  # fmt: skip
    """One line per way the inputs fall short of supporting the answer (recorded in ``comparison.nc``)."""
    out = []
    peak = float(np.nanmax(obs_power)) if np.isfinite(obs_power).any() else math.nan
    floor = float(np.median(noise.power))
    if not floor > NOISE_FREE_FRACTION * peak:
        level = f"{10 * math.log10(peak / floor):.0f} dB below the strongest sample" if floor > 0 else "zero"
        out.append(
            f"the observed data hold no noise (noise floor {level} once the simulated power before the surface is "
            "removed): the test's speckle and noise statistics do not apply, so its p-values and candidates are not "
            "meaningful; compare recorded data, or add noise to synthetic ones"
        )
    if offset.at_search_edge:
        out.append(
            f"the offset lies at the edge of the search range (±{max_off_s * 1e6:.3f} µs): the true offset may be "
            "larger; raise --max-offset-us"
        )
    if not offset.correlation >= WEAK_CORRELATION:
        out.append(
            f"weak surface correlation ({offset.correlation:.2f} < {WEAK_CORRELATION}): the observed surface echo "
            "does not look like the simulated one, so the offset and gain may be wrong (check the track, timing, "
            "DEM and radar)"
        )
    if not math.isfinite(offset.global_uncertainty_samples):
        out.append(f"the offset's uncertainty is unknown (only {offset.n_traces} usable trace(s))")
    if noise.source != "before surface":
        out.append(
            "noise floor from the deepest samples (no samples before the surface echo): deep echoes raise it, "
            "which hides candidates"
        )
    return out


@locked_output("out_dir")
def compare_to_dir(
    observed_path, observed_track, sample_interval_s: float, out_dir, *, sim=None, dem=None, config=None,
    body_radius_m=None, window_start_s=None, window_start_column=None, fmt=None, settings=None,
    overwrite: bool = False, progress: bool = False, band=None, max_memory_bytes="auto", tec_el_m2=None,
    figures=None,
) -> tuple[Comparison, dict[str, Path]]:  # fmt: skip
    """Read an observed radargram, compare it with a simulation and write the products into ``out_dir``.

    Give either ``sim`` (path of a simulated ``radargram.nc``) or ``dem`` (and
    optionally ``config``): the observed track is then simulated on the fly,
    on the observed sampling (sample interval and number of samples; the
    radar's window start, "auto" by default) as the noise-free, incoherent
    expectation (a ``[noise]`` table and the coherent mode are left out), and
    the simulation is written too, as ``out_dir/radargram.nc`` (usable by
    ``cluttersim sources``). ``band`` names the band of a multi-band radar
    (default: the first); ``max_memory_bytes`` bounds the on-the-fly
    simulation (:func:`~cluttersim.simulate.simulate`).
    ``tec_el_m2`` puts an ionospheric layer of that total electron content
    between the simulation and the observation: the on-the-fly simulation
    runs through it (``[ionosphere]``), a given ``sim`` is dispersed by
    :func:`cluttersim.physics.ionosphere.disperse_radargram`.

    Products (:data:`COMPARE_FILES`): ``comparison.nc``, ``candidates.csv``,
    ``candidates.geojson``, ``side_by_side.png``, ``overlay.png``,
    ``difference.png`` (``figures``, :class:`cluttersim.products.FigureOptions`: their resolution,
    format (png, pdf, svg: the suffix follows) and dynamic range). Existing ones are refused before any work unless
    ``overwrite``; all are written under temporary names and renamed together
    at the end.

    Returns
    -------
    (Comparison, dict of Path)
    """
    from ..io.observed import load_observed
    from ..io.radargram import open_radargram
    from ..products import remove_figures_in_other_formats

    if (sim is None) == (dem is None):
        raise ObservedDataError("give either a simulated radargram or a DEM to simulate from, not both")
    out_dir = Path(out_dir)
    paths = {k: out_dir / v for k, v in with_figure_format(COMPARE_FILES, figures.fmt if figures else "png").items()}
    if dem is not None:
        paths["simulation"] = out_dir / "radargram.nc"
    check_new(paths.values(), overwrite)
    from ..memory import check_observed_memory

    check_observed_memory(observed_path, max_memory_bytes, file_format=fmt.file_format if fmt else None,
                          raw_shape=fmt.raw_shape if fmt else None, variable=fmt.variable if fmt else None)  # fmt: skip
    observed = load_observed(observed_path, observed_track, sample_interval_s, window_start_s=window_start_s,
                             window_start_column=window_start_column, fmt=fmt)  # fmt: skip
    if sim is not None:
        sim_ds = open_radargram(sim, band=band)
        sim_source = str(sim)
        if tec_el_m2:
            from ..physics.ionosphere import disperse_radargram

            sim_ds = disperse_radargram(sim_ds, tec_el_m2)
            sim_source += f" through TEC {tec_el_m2:.3g} el/m²"
    else:
        sim_ds, sim_source = simulate_expectation(dem, observed, config, body_radius_m=body_radius_m, band=band,
                                                  progress=progress, max_memory_bytes=max_memory_bytes,
                                                  tec_el_m2=tec_el_m2)  # fmt: skip
    result = compare(observed, sim_ds, settings, progress=progress, sim_source=sim_source)
    write_comparison(result, paths, sim_ds=sim_ds if dem is not None else None, figures=figures)
    remove_figures_in_other_formats(paths.values(), overwrite)
    return result, paths


def simulate_expectation(dem, observed: ObservedRadargram, config=None, *, body_radius_m=None, band=None,
                         progress: bool = False, max_memory_bytes="auto",
                         tec_el_m2=None) -> tuple[xr.Dataset, str]:  # fmt: skip
    """Simulate the noise-free, incoherent clutter expectation of an observed track on its sampling.

    ``tec_el_m2``: through an ionospheric layer of that total electron content (``[ionosphere]``).
    ``dem``: a path or a :class:`cluttersim.io.dem.DemSource` (e.g. with a declared height unit,
    recorded in the result's attributes as ``simulate_to_dir`` does).
    """
    from ..config import default_config
    from ..simulate import simulate

    config = config or default_config()
    if config.bands:
        config = config.for_band(band or config.band_names[0])
    elif band is not None:
        raise ConfigError(f"band {band!r} asked for, but the radar has a single band (no [[band]] tables)")
    processing = config.processing
    if processing.mode == "coherent" or processing.presum_mode == "coherent":
        processing = replace(processing, mode="incoherent", presum_mode="incoherent")
    config = replace(config, noise=None, processing=processing,
                     radar=replace(config.radar, sample_interval_s=observed.sample_interval_s,
                                   samples=max(observed.n_samples, 2)))  # fmt: skip
    if tec_el_m2:
        from ..physics.ionosphere import IonosphereConfig

        config = replace(config, ionosphere=IonosphereConfig(tec_el_m2=float(tec_el_m2)))
    sim_ds = simulate(dem, observed.track, config, body_radius_m=body_radius_m, progress=progress,
                      max_memory_bytes=max_memory_bytes)  # fmt: skip
    from ..io.dem import DemSource

    if isinstance(dem, DemSource) and dem.height_scale_m != 1.0:  # a declared unit (--dem-height-unit), recorded
        from ..io.datums import HEIGHT_UNIT_ATTR  # so that `sources` and `report` read the DEM's heights as simulated

        sim_ds.attrs[HEIGHT_UNIT_ATTR] = dem.height_scale_m
    name = dem.path.name if isinstance(dem, DemSource) else Path(dem).name
    return sim_ds, f"simulated on the fly from {name}"
