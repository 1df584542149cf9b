"""Products of a comparison: ``comparison.nc``, the candidate table (CSV, GeoJSON), figures, summary; many tracks at once.

Part of the comparison (:mod:`cluttersim.analysis.compare`). GeoJSON follows RFC 7946
([1]_): points as [longitude, latitude] in degrees, longitudes in −180…180.

References
----------
.. [1] Butler, H. et al. (2016). The GeoJSON Format. IETF RFC 7946.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np
import xarray as xr
from scipy import special

from ..errors import ObservedDataError
from ..io.outputs import atomic_paths, check_new

#: File names of a comparison directory.
COMPARE_FILES = {
    "comparison": "comparison.nc",
    "candidates": "candidates.csv",
    "geojson": "candidates.geojson",
    "side_by_side": "side_by_side.png",
    "overlay": "overlay.png",
    "difference": "difference.png",
}
#: File names of a many-track comparison directory (one subdirectory per track besides).
COMBINED_FILES = {"candidates": "candidates.csv", "geojson": "candidates.geojson", "map": "candidates_map.png"}
def with_figure_format(files: dict[str, str], fmt: str = "png") -> dict[str, str]:
    """File names (:data:`COMPARE_FILES`, :data:`COMBINED_FILES`) with the figures in format ``fmt``
    (png, pdf, svg; :func:`cluttersim.products.figure_name`)."""
    from ..products import figure_name

    return {k: figure_name(v, fmt) for k, v in files.items()}


#: Columns of ``candidates.csv``.
CANDIDATE_COLUMNS = (
    "rank", "trace", "sample", "delay_us", "two_way_delay_us", "lat", "lon", "depth_m", "snr_db", "excess_db",
    "p_value", "unexplained_share", "continuity", "score", "sim_trace", "sim_delay_us", "source_lat", "source_lon",
)  # fmt: skip
_FORMATS = {
    "delay_us": "{:.4f}", "two_way_delay_us": "{:.4f}", "lat": "{:.6f}", "lon": "{:.6f}", "depth_m": "{:.2f}",
    "snr_db": "{:.2f}", "excess_db": "{:.2f}", "p_value": "{:.3e}", "unexplained_share": "{:.3f}",
    "continuity": "{:.2f}", "score": "{:.3f}", "sim_delay_us": "{:.4f}", "source_lat": "{:.6f}", "source_lon": "{:.6f}",
    "explained_probability": "{:.3f}",
}  # fmt: skip
#: Columns of the track list of :func:`compare_many` (required, then optional).
LIST_REQUIRED = ("observed", "observed_track", "sample_interval_s")
LIST_OPTIONAL = ("name", "sim", "dem", "radar", "window_start_s", "window_start_column", "values")


def single_sample_threshold_db(pfa: float, looks: float) -> float:
    """Power over the noise mean (dB) that one L-look sample of noise exceeds with probability ``pfa``.

    The Gamma(L, 1/L) upper quantile (Goodman 1976); single look: 10 log10(−ln pfa).
    """
    return 10.0 * math.log10(float(special.gammainccinv(looks, pfa)) / looks)


def comparison_dataset(observed, sim_ds, match, rows_obs, rows_sim, aligned, sim_matched, masks, noise, offset, gain,
                       settings, *, tol_s, sim_source, warnings=()) -> xr.Dataset:  # fmt: skip
    """The ``comparison.nc`` Dataset: every observed trace × the simulated samples (NaN where unmatched)."""
    n = observed.n_traces
    ns = sim_ds.sizes["sample"]
    dt = float(sim_ds["delay"].values[1] - sim_ds["delay"].values[0])

    def per_sample(values, fill=np.nan, dtype=np.float32):
        out = np.full((n, ns), fill, dtype=dtype)
        out[rows_obs] = values
        return out

    def per_trace(values, fill=np.nan, dtype=np.float64):
        out = np.full(n, fill, dtype=dtype)
        out[rows_obs] = values
        return out

    offset_s = offset.per_trace_samples * dt
    data = {
        "observed_power": (("trace", "sample"), per_sample(aligned), {
            "units": "observed power unit", "long_name": "observed power, aligned (offset removed) and averaged "
            "over each sample of the simulated delay grid of the matched trace (for display; the test uses the "
            "observed samples themselves)"}),
        "simulated_power": (("trace", "sample"), per_sample(sim_matched), {
            "units": "observed power unit", "long_name": "simulated power times the fitted gain"}),
        "detected": (("trace", "sample"), per_sample(masks.detected, 0, np.int8), {
            "units": "1", "long_name": "1 where an observed sample here is improbable under noise alone (p < pfa)"}),
        "explained": (("trace", "sample"), per_sample(masks.explained, 0, np.int8), {
            "units": "1", "long_name": "1 where a detected echo is explained by clutter and noise (not unexplained)"}),
        "unexplained": (("trace", "sample"), per_sample(masks.unexplained, 0, np.int8), {
            "units": "1", "long_name": "1 where an observed sample here is improbable under the predicted clutter "
            "and noise (p < pfa)"}),
        "p_value": (("trace", "sample"), per_sample(masks.p_value), {
            "units": "1", "long_name": "smallest p-value of the observed samples here under clutter and noise "
            "(speckle statistics, integrated over integration_traces traces)"}),
        "window_start": ("trace", per_trace(sim_ds["window_start"].values[rows_sim]), {
            "units": "s", "long_name": "absolute two-way delay of sample 0 (the matched simulated trace's grid)"}),
        "nadir_delay": ("trace", per_trace(sim_ds["nadir_delay"].values[rows_sim]), {
            "units": "s", "long_name": "two-way delay to the DEM surface below the matched simulated trace"}),
        "observed_window_start": ("trace", observed.window_start_s, {
            "units": "s", "long_name": "absolute two-way delay of the observed sample 0, as recorded"}),
        "delay_offset": ("trace", per_trace(offset_s), {
            "units": "s", "long_name": "timing offset removed from the observed trace (observed later: positive)"}),
        "delay_offset_uncertainty": ("trace", per_trace(offset.per_trace_uncertainty_samples * dt), {
            "units": "s", "long_name": "standard error of delay_offset (jackknife over traces)"}),
        "noise_floor": ("trace", per_trace(noise.power), {
            "units": "observed power unit", "long_name": "observed noise floor (mean of pooled noise samples)"}),
        "gain_per_trace": ("trace", per_trace(gain.per_trace_db), {
            "units": "dB", "long_name": "10 log10 of the observed over simulated power fitted to the surface echo"}),
        "sim_trace": ("trace", match.sim_index.astype(np.int32), {
            "units": "1", "long_name": "index of the matched simulated trace (-1: none within match_tolerance_m)"}),
        "match_distance": ("trace", match.distance_m, {
            "units": "m", "long_name": "ground distance to the nearest usable simulated trace"}),
        "lat": ("trace", observed.track.lat_deg, {"units": "degrees_north", "long_name": "antenna latitude"}),
        "lon": ("trace", observed.track.lon_deg, {"units": "degrees_east", "long_name": "antenna longitude"}),
        "alt": ("trace", observed.track.alt_m, {"units": "m", "long_name": "antenna height"}),
    }  # fmt: skip
    if observed.track.time_s is not None:
        data["time"] = ("trace", observed.track.time_s, {"units": "s", "long_name": "trace time"})
    coords = {
        "trace": ("trace", np.arange(n), {"long_name": "observed trace index"}),
        "delay": ("sample", np.arange(ns) * dt, {"units": "s", "long_name": "delay after the trace's window start"}),
    }
    attrs = {
        "Conventions": "CF-1.10",
        "title": "cluttersim comparison of an observed radargram with a simulated one",
        "observed_file": observed.source,
        "observed_values": observed.values,
        "observed_sample_interval_s": observed.sample_interval_s,
        "simulation": sim_source,
        "match_method": match.method,
        "match_tolerance_m": match.tolerance_m,
        "delay_offset_s": offset.global_s,
        "delay_offset_uncertainty_s": _nan_safe(offset.global_uncertainty_s),
        "delay_offset_samples": offset.global_samples,
        "delay_offset_uncertainty_samples": _nan_safe(offset.global_uncertainty_samples),
        "per_trace_offset": int(settings.per_trace_offset),
        "surface_correlation": _nan_safe(offset.correlation),
        "gain_db": gain.gain_db,
        "gain_uncertainty_db": _nan_safe(gain.uncertainty_db),
        "noise_floor_source": noise.source,
        "pfa": settings.pfa,
        "looks": settings.looks,
        "model_tolerance_db": settings.model_tolerance_db,
        "integration_traces": settings.integration_traces,
        "threshold_db": single_sample_threshold_db(settings.pfa, settings.looks),
        "delay_tolerance_s": tol_s,
        "permittivity": settings.permittivity,
        "warning_count": len(warnings),
        "warnings": "\n".join(warnings),
    }
    return xr.Dataset(data, coords=coords, attrs=attrs)


def _nan_safe(value: float) -> float:
    return float(value) if math.isfinite(value) else float("nan")


# --------------------------------------------------------------------------- files

#: Largest dynamic range of the comparison's power figures by default, dB (its floor stops 5 dB
#: below the observed noise floor when that is higher: :func:`cluttersim.plots.comparison_layers`).
COMPARISON_DB_RANGE = 60.0



def write_comparison(result, paths: dict[str, Path], sim_ds=None, figures=None) -> None:
    """Write a comparison's products atomically to ``paths`` (keys of :data:`COMPARE_FILES`, and ``simulation``).

    ``figures`` (:class:`cluttersim.products.FigureOptions`): resolution and format of the figures,
    and ``db_range``, the largest dynamic range of the side-by-side and overlay figures' shared
    power scale (default :data:`COMPARISON_DB_RANGE`; the difference figure keeps its ±dB scale)."""
    from .. import plots
    from ..products import FigureOptions
    from ..io.radargram import save_netcdf, write_netcdf_to

    figures = figures or FigureOptions()
    save = {"dpi": figures.dpi, "fmt": figures.fmt}
    db_range = COMPARISON_DB_RANGE if figures.db_range is None else figures.db_range

    keys = list(paths)
    with atomic_paths([paths[k] for k in keys]) as temps:
        tmp = dict(zip(keys, temps))
        save_netcdf(
            result.dataset, tmp["comparison"],
            encoding={v: {"zlib": True, "complevel": 4, "shuffle": True}
                      for v in ("observed_power", "simulated_power", "detected", "explained", "unexplained", "p_value")},
        )  # fmt: skip
        write_candidates_csv(result.candidates, tmp["candidates"])
        if "geojson" in tmp:
            write_candidates_geojson(result.candidates, tmp["geojson"], source=result.observed_source)
        if "simulation" in tmp:
            write_netcdf_to(sim_ds, tmp["simulation"])
        ds = result.dataset
        perm = result.settings.permittivity
        cand = result.candidates
        plots.plot_comparison_side_by_side(ds, tmp["side_by_side"], permittivity=perm, dynamic_range_db=db_range,
                                           **save)  # fmt: skip
        plots.plot_comparison_overlay(ds, tmp["overlay"], candidates=cand, permittivity=perm, dynamic_range_db=db_range,
                                      **save)  # fmt: skip
        plots.plot_comparison_difference(ds, tmp["difference"], candidates=cand, permittivity=perm, **save)


def write_candidates_csv(candidates: list[dict], path, *, extra_columns=()) -> None:
    """Write the ranked candidates (columns ``extra_columns`` + :data:`CANDIDATE_COLUMNS`) to a CSV file."""
    columns = tuple(extra_columns) + CANDIDATE_COLUMNS
    if candidates and "explained_probability" in candidates[0]:  # compared with DEM realisations (dem_error.nc)
        columns += ("explained_probability",)
    with open(path, "w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh)
        writer.writerow(columns)
        for c in candidates:
            writer.writerow([_format(k, c.get(k, math.nan)) for k in columns])


def _format(key, value) -> str:
    if isinstance(value, float) and not math.isfinite(value):
        return ""
    return _FORMATS.get(key, "{}").format(value)


def _lon180(lon: float) -> float:
    return ((float(lon) + 180.0) % 360.0) - 180.0


def candidate_features(candidates: list[dict], extra_properties=None) -> list[dict]:
    """GeoJSON Features of the candidates: a point at the antenna's nadir and, where recorded, at the echo's source.

    Each feature's ``position`` property says which: ``"nadir"`` (the lat/lon of
    the antenna, below which a subsurface echo would lie) or
    ``"clutter_source"`` (the simulated facet that dominates the same delay:
    where the echo would come from were it surface clutter the DEM misplaces).
    The other properties are the CSV's columns (empty values as null).
    """
    feats = []
    for c in candidates:
        props = {k: (None if isinstance(c.get(k), float) and not math.isfinite(c[k]) else c.get(k)) for k in CANDIDATE_COLUMNS}
        props.update(extra_properties(c) if extra_properties else {})
        feats.append({"type": "Feature", "geometry": {"type": "Point", "coordinates": [_lon180(c["lon"]), c["lat"]]},
                      "properties": {"position": "nadir", **props}})  # fmt: skip
        if math.isfinite(c.get("source_lat", math.nan)) and math.isfinite(c.get("source_lon", math.nan)):
            feats.append({"type": "Feature",
                          "geometry": {"type": "Point", "coordinates": [_lon180(c["source_lon"]), c["source_lat"]]},
                          "properties": {"position": "clutter_source", **props}})  # fmt: skip
    return feats


def write_candidates_geojson(candidates: list[dict], path, *, source: str = "", extra_properties=None) -> None:
    """Write the candidates as a GeoJSON FeatureCollection (:func:`candidate_features`)."""
    doc = {"type": "FeatureCollection", "name": "cluttersim candidates",
           "description": f"unexplained echoes of {source}" if source else "unexplained echoes",
           "features": candidate_features(candidates, extra_properties)}  # fmt: skip
    Path(path).write_text(json.dumps(doc, allow_nan=False, indent=1), encoding="utf-8")


# --------------------------------------------------------------------------- summary


def format_summary(result, top: int = 5) -> str:
    """A short text summary: matching, offset ± uncertainty, gain, noise, the test, candidates and warnings."""
    m, o, g = result.match, result.offset, result.gain
    s = result.settings
    n = m.sim_index.size
    matched = int(m.matched.sum())
    lines = [
        f"traces: {matched} of {n} observed traces matched by {m.method} "
        f"(median distance {np.median(m.distance_m[m.matched]):.1f} m, tolerance {m.tolerance_m:.1f} m)",
    ]
    if matched < n:
        lines.append(f"  unmatched (no simulated trace within {m.tolerance_m:.1f} m): traces {_ranges(m.unmatched_traces)}")
    unc = f"{o.global_uncertainty_samples:.3f}" if math.isfinite(o.global_uncertainty_samples) else "n/a"
    unc_us = f"{o.global_uncertainty_s * 1e6:.5f}" if math.isfinite(o.global_uncertainty_s) else "n/a"
    lines.append(
        f"delay offset: {o.global_samples:+.3f} ± {unc} samples (of {o.interval_s * 1e9:g} ns) = "
        f"{o.global_s * 1e6:+.5f} ± {unc_us} µs "
        f"(observed later than simulated if positive; {o.n_traces} traces, surface correlation {o.correlation:.2f})"
    )
    if s.per_trace_offset:
        lo, hi = np.min(o.per_trace_samples), np.max(o.per_trace_samples)
        lines.append(
            f"  per-trace offset: {lo:+.2f} … {hi:+.2f} samples, ± {np.nanmedian(o.per_trace_uncertainty_samples):.2f} "
            f"samples each (median; {s.offset_window_traces} traces per fit)"
        )
    gunc = f"{g.uncertainty_db:.2f}" if math.isfinite(g.uncertainty_db) else "n/a"
    lines.append(
        f"gain: {g.gain_db:+.2f} ± {gunc} dB (observed/simulated power on the surface echo of {g.n_traces} traces, "
        f"trace-to-trace scatter {g.scatter_db:.2f} dB)"
    )
    if math.isfinite(result.coverage):
        lines.append(f"tested: {min(result.coverage, 1.0):.0%} of the matched observed samples lie where the simulation predicts")
    lines.append(
        f"noise floor: median {np.median(result.noise.db):.2f} dB (observed units, mean of {result.noise.source} samples)"
    )
    lines.append(
        f"test: false-alarm probability {s.pfa:g} per sample, {s.looks:g} look(s), {s.integration_traces} trace(s) "
        f"integrated, clutter may be {s.model_tolerance_db:g} dB stronger than simulated"
    )
    cands = result.candidates
    strong = sum(c["score"] >= 0.5 for c in cands)
    lines.append(f"candidates: {len(cands)} unexplained echoes, {strong} with score >= 0.5")
    if cands:
        lines.append(f"  {'rank':>4} {'trace':>6} {'sample':>6} {'delay_us':>9} {'depth_m':>8} {'lat':>11} {'lon':>11} "
                     f"{'snr_db':>6} {'p_value':>9} {'score':>5}")  # fmt: skip
        for c in cands[:top]:
            lines.append(
                f"  {c['rank']:>4} {c['trace']:>6} {c['sample']:>6} {c['delay_us']:>9.3f} {c['depth_m']:>8.1f} "
                f"{c['lat']:>11.5f} {c['lon']:>11.5f} {c['snr_db']:>6.1f} {c['p_value']:>9.2e} {c['score']:>5.2f}"
            )
    for w in result.warnings:
        lines.append(f"warning: {w}")
    return "\n".join(lines)


def _ranges(indices) -> str:
    """'0-3, 7, 9-10' for [0, 1, 2, 3, 7, 9, 10] (at most 8 runs listed)."""
    idx = np.asarray(indices)
    if idx.size == 0:
        return "none"
    breaks = np.flatnonzero(np.diff(idx) != 1)
    starts = np.concatenate([[idx[0]], idx[breaks + 1]])
    ends = np.concatenate([idx[breaks], [idx[-1]]])
    parts = [f"{a}" if a == b else f"{a}-{b}" for a, b in zip(starts, ends)]
    return ", ".join(parts[:8]) + (f", … ({len(parts) - 8} more runs)" if len(parts) > 8 else "")


# --------------------------------------------------------------------------- many tracks


def read_track_list(path) -> list[dict]:
    """Read the CSV list of :func:`compare_many`: one comparison per row, paths relative to the list's folder.

    Columns: ``observed``, ``observed_track``, ``sample_interval_s`` (required),
    one of ``sim`` / ``dem``, one of ``window_start_s`` / ``window_start_column``,
    and optionally ``name`` (the output subfolder; default ``track_<row>``),
    ``radar`` (with ``dem``) and ``values`` (``power``, ``amplitude`` or ``db``;
    default power). Every row is checked before any comparison runs.
    """
    from ..io.observed import VALUE_KINDS

    path = Path(path)
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            reader = csv.DictReader(fh)
            header = [h.strip() for h in (reader.fieldnames or [])]
            rows = [{(k or "").strip(): (v or "").strip() for k, v in r.items()} for r in reader]
    except OSError as exc:
        raise ObservedDataError(f"{path}: cannot read the track list ({exc.strerror or exc})") from None
    missing = [c for c in LIST_REQUIRED if c not in header]
    if missing:
        raise ObservedDataError(f"{path}: missing column(s) {', '.join(missing)}; expected {', '.join(LIST_REQUIRED)} "
                                f"and some of {', '.join(LIST_OPTIONAL)}")  # fmt: skip
    unknown = [c for c in header if c not in LIST_REQUIRED + LIST_OPTIONAL]
    if unknown:
        raise ObservedDataError(f"{path}: unknown column(s) {', '.join(unknown)}; expected {', '.join(LIST_REQUIRED)} "
                                f"and some of {', '.join(LIST_OPTIONAL)}")  # fmt: skip
    if not rows:
        raise ObservedDataError(f"{path}: no rows; expected one comparison per row")
    out, names = [], set()
    for i, r in enumerate(rows, start=1):
        where = f"{path} row {i}"
        job = {"name": r.get("name") or f"track_{i}"}
        if job["name"] in names or "/" in job["name"] or job["name"] in (".", ".."):
            raise ObservedDataError(f"{where}: name {job['name']!r} is repeated or not a plain folder name")
        names.add(job["name"])
        for col in ("observed", "observed_track", "sim", "dem", "radar"):
            if r.get(col):
                p = Path(r[col])
                p = p if p.is_absolute() else path.parent / p
                if not p.exists():
                    raise ObservedDataError(f"{where}: column '{col}' = {r[col]!r}: no such file ({p})")
                job[col] = p
        for col in ("observed", "observed_track"):
            if col not in job:
                raise ObservedDataError(f"{where}: column '{col}' is empty; expected a file path")
        if ("sim" in job) == ("dem" in job):
            raise ObservedDataError(f"{where}: expected exactly one of the columns 'sim' and 'dem' to be filled")
        try:
            job["sample_interval_s"] = float(r["sample_interval_s"])
            if not (math.isfinite(job["sample_interval_s"]) and job["sample_interval_s"] > 0):
                raise ValueError
        except ValueError:
            raise ObservedDataError(f"{where}: column 'sample_interval_s' = {r['sample_interval_s']!r}: "
                                    "expected a positive interval in seconds") from None  # fmt: skip
        ws, col = r.get("window_start_s", ""), r.get("window_start_column", "")
        if bool(ws) == bool(col):
            raise ObservedDataError(f"{where}: expected exactly one of the columns 'window_start_s' and "
                                    "'window_start_column' to be filled")  # fmt: skip
        if ws:
            try:
                job["window_start_s"] = float(ws)
            except ValueError:
                raise ObservedDataError(f"{where}: column 'window_start_s' = {ws!r}: expected a delay in seconds") from None
        else:
            job["window_start_column"] = col
        values = r.get("values") or "power"
        if values not in VALUE_KINDS:
            raise ObservedDataError(f"{where}: column 'values' = {values!r}: expected one of {', '.join(VALUE_KINDS)}")
        job["values"] = values
        out.append(job)
    return out


def compare_many(list_path, out_dir, *, settings=None, overwrite: bool = False, progress: bool = False,
                 max_memory_bytes="auto", on_result=None, tec_el_m2=None, figures=None):  # fmt: skip
    """Compare every track of a list (:func:`read_track_list`) and combine their candidates.

    Each row's products go to ``out_dir/<name>/`` (as :func:`~cluttersim.analysis.compare.compare_to_dir`);
    the combined ``candidates.csv`` and ``candidates.geojson`` (a ``track``
    column/property first, ranked by score over all tracks) and
    ``candidates_map.png`` (the tracks and their candidates) go to ``out_dir``.
    ``on_result(name, Comparison)`` is called after each track; ``tec_el_m2``
    applies to every row (see :func:`~cluttersim.analysis.compare.compare_to_dir`), and so do
    ``figures`` (:class:`cluttersim.products.FigureOptions`; the map too).

    Returns
    -------
    (list of (name, Comparison), dict of Path)
    """
    from .compare import compare_to_dir
    from ..config import SimulationConfig
    from ..io.observed import ObservedFormat
    from ..products import remove_figures_in_other_formats

    jobs = read_track_list(list_path)
    out_dir = Path(out_dir)
    fmt = figures.fmt if figures is not None else "png"
    combined = {k: out_dir / v for k, v in with_figure_format(COMBINED_FILES, fmt).items()}
    check_new(list(combined.values()) + [out_dir / j["name"] / f for j in jobs
                                         for f in with_figure_format(COMPARE_FILES, fmt).values()], overwrite)  # fmt: skip
    configs = {}
    for j in jobs:
        if "radar" in j and j["radar"] not in configs:
            configs[j["radar"]] = SimulationConfig.from_toml(j["radar"])
    results = []
    for j in jobs:
        try:
            result, _ = compare_to_dir(
                j["observed"], j["observed_track"], j["sample_interval_s"], out_dir / j["name"], sim=j.get("sim"),
                dem=j.get("dem"), config=configs.get(j.get("radar")), window_start_s=j.get("window_start_s"),
                window_start_column=j.get("window_start_column"), fmt=ObservedFormat(values=j["values"]),
                settings=settings, overwrite=overwrite, progress=progress, max_memory_bytes=max_memory_bytes,
                tec_el_m2=tec_el_m2, figures=figures,
            )  # fmt: skip
        except ObservedDataError as exc:
            raise ObservedDataError(f"track {j['name']!r} of {list_path}: {exc}") from None
        results.append((j["name"], result))
        if on_result:
            on_result(j["name"], result)
    rows = [{**c, "track": name} for name, r in results for c in r.candidates]
    rows.sort(key=lambda c: (-c["score"], c["p_value"]))
    for rank, c in enumerate(rows, start=1):
        c["track_rank"], c["rank"] = c["rank"], rank
    with atomic_paths(list(combined.values())) as (t_csv, t_json, t_png):
        write_candidates_csv(rows, t_csv, extra_columns=("track", "track_rank"))
        write_candidates_geojson(rows, t_json, source=str(list_path),
                                 extra_properties=lambda c: {"track": c["track"], "track_rank": c["track_rank"]})  # fmt: skip
        from ..plots import plot_candidate_map

        plot_candidate_map(results, t_png, dpi=figures.dpi if figures else None, fmt=fmt)
    remove_figures_in_other_formats(combined.values(), overwrite)
    return results, combined
