"""The library's front door: the main jobs as one call each, with examples that run.

Everything here is also reachable as ``cluttersim.<name>`` after ``import
cluttersim`` (imported lazily, so the command line starts fast). Each function
wraps the module that does the work, and says which one; read its
documentation for every option.

=========================  =====================================================
``simulate``                a radargram (xarray Dataset) of a track over a DEM
``simulate_to_dir``         the same, written with its figures into a directory
``echo_sources``            which ground echoes into a sample, or a depth window
``write_report``            one HTML page to point at echoes and see their sources
``compare_observed``        observed radargram vs simulated clutter: candidates
``survey_region``           a map of where clutter will swamp the subsurface
=========================  =====================================================
"""

from __future__ import annotations

from pathlib import Path


def simulate_to_dir(dem, track, out_dir, config=None, **options) -> dict:
    """Simulate a track over a DEM and write ``radargram.nc`` and its figures into ``out_dir``.

    Wraps :func:`cluttersim.products.simulate_to_dir` (options: ``overwrite``,
    ``sources``, ``permittivity``, ``figures=FigureOptions(dpi=, fmt=, db_range=)``...).

    Returns
    -------
    dict
        Product name → path (``radargram``, ``radargram_png``, ``sides_png``,
        ``elevation_png``, ``track_map``).

    Examples
    --------
    >>> import cluttersim
    >>> dem, track = cluttersim.example_scene("example")
    >>> paths = cluttersim.simulate_to_dir(dem, track, "example/run1")
    >>> sorted(p.name for p in paths.values())[:2]
    ['radargram.nc', 'radargram.png']
    >>> ds = cluttersim.open_radargram(paths["radargram"])
    >>> ax = ds.power.plot(x="distance", y="delay_us", yincrease=False, norm=None)  # doctest: +SKIP
    """
    from .products import simulate_to_dir as _run

    return _run(dem, track, config, out_dir, **options)


def echo_sources(run_dir, *, trace: int | None = None, delay_s: float | None = None, depth_m: float | None = None,
                 depth_window_m: tuple[float, float] | None = None, permittivity: float = 3.15, top: int = 10,
                 dem=None):  # fmt: skip
    """Ask a finished run where its echoes come from on the ground.

    Either one echo — ``trace`` and ``delay_s`` (after the trace's window start)
    or ``depth_m`` (apparent depth below the nadir surface): the ground cells
    behind it, ranked by their share of its power
    (:func:`cluttersim.analysis.sources.ask_echo`) — or, with ``depth_window_m=(min,
    max)``, the power each DEM cell sends into that band of apparent depth,
    summed over the track (:func:`cluttersim.analysis.sources.depth_window_map`).

    Returns
    -------
    EchoAnswer or SourceMap

    Examples
    --------
    >>> import cluttersim
    >>> dem, track = cluttersim.example_scene("example")
    >>> _ = cluttersim.simulate_to_dir(dem, track, "example/run2")
    >>> answer = cluttersim.echo_sources("example/run2", trace=20, depth_m=300.0)
    >>> answer.cells[0].rank, 0.0 < answer.cells[0].share <= 1.0
    (1, True)
    >>> smap = cluttersim.echo_sources("example/run2", depth_window_m=(100.0, 600.0))
    >>> smap.power_w.shape == smap.elevation_m.shape
    True
    """
    from .analysis.sources import ask_echo, depth_window_map, load_run

    run = load_run(run_dir, dem=dem)
    if depth_window_m is not None:
        return depth_window_map(run, depth_window_m[0], depth_window_m[1], permittivity=permittivity)
    if trace is None:
        raise ValueError("echo_sources: give trace (with delay_s or depth_m) or depth_window_m")
    return ask_echo(run, trace, delay_s=delay_s, depth_m=depth_m, permittivity=permittivity, top=top)


def write_report(run_dir, out_path=None, **options) -> Path:
    """Write a run's report: one self-contained HTML page (no network needed to open it).

    Point at the radargram to read an echo's delay, apparent depth, power, the
    shares of its power from left and right of the track and the nadir strip,
    and see on the map where it comes from (strongest cell, and each side's
    power-weighted centre). Wraps :func:`cluttersim.report.write_report`.

    Examples
    --------
    >>> import cluttersim
    >>> dem, track = cluttersim.example_scene("example")
    >>> _ = cluttersim.simulate_to_dir(dem, track, "example/run3")
    >>> cluttersim.write_report("example/run3").name
    'report.html'
    """
    from .report import write_report as _write

    return _write(run_dir, out_path, **options)


def compare_observed(observed, track, sample_interval_s: float, out_dir, **options):
    """Compare an observed radargram with the simulated surface clutter of its track.

    Aligns the two in delay, fits the gain, and lists the observed echoes that the
    simulated surface does not explain (subsurface candidates). ``observed`` is a
    file (netCDF/HDF5, .npy, image, raw binary) of one value per trace and sample;
    ``track`` its track CSV; give ``sim=`` a simulated ``radargram.nc`` or ``dem=``
    to simulate the track. Wraps :func:`cluttersim.analysis.compare.compare_to_dir`.

    Returns
    -------
    (Comparison, dict)
        The comparison and its products' paths.

    Examples
    --------
    A simulation compared with itself explains everything:

    >>> import numpy as np, cluttersim
    >>> dem, track = cluttersim.example_scene("example")
    >>> paths = cluttersim.simulate_to_dir(dem, track, "example/run4")
    >>> ds = cluttersim.open_radargram(paths["radargram"])
    >>> np.save("example/observed.npy", ds.power.values)      # stands for your data: (trace, sample)
    >>> rows = np.column_stack([ds.lat, ds.lon, ds.alt, ds.window_start])
    >>> np.savetxt("example/observed_track.csv", rows, delimiter=",", header="lat,lon,alt,window_start", comments="")
    >>> result, written = cluttersim.compare_observed("example/observed.npy", "example/observed_track.csv",
    ...     float(ds.delay[1]), "example/cmp", sim=paths["radargram"], window_start_column="window_start")
    >>> written["comparison"].name
    'comparison.nc'
    """
    from .analysis.compare import compare_to_dir

    return compare_to_dir(observed, track, sample_interval_s, out_dir, **options)


def survey_region(dem, region, out_dir, *, sim_config=None, engine=None, progress: bool = False, overwrite=False,
                  figures=None, **survey_options):  # fmt: skip
    """Map where over a region off-nadir clutter will hide the subsurface, before flying.

    ``region`` = (lon_min, lat_min, lon_max, lat_max) in degrees; the other
    options are those of :class:`cluttersim.analysis.survey.SurveyConfig` (``spacing_km``,
    ``heading_deg``, ``alt_m`` for generated tracks, or ``tracks_path``;
    ``max_depth_m``, ``permittivity``, ``threshold_db``...). Wraps
    :func:`cluttersim.analysis.survey.run_survey`; writes ``survey.csv``,
    ``clutter_map.tif`` and ``clutter_map.png`` into ``out_dir`` (``figures=FigureOptions(dpi=,
    fmt=, db_range=)`` for another resolution, pdf/svg or colour range).

    Examples
    --------
    >>> import cluttersim
    >>> dem, _ = cluttersim.example_scene("example")
    >>> summary = cluttersim.survey_region(dem, (-0.3, -0.2, 0.3, 0.2), "example/survey", spacing_km=5.0,
    ...                                    alt_m=5000.0, trace_spacing_m=500.0, workers=1)
    >>> summary.tracks, sorted(p.name for p in summary.paths.values())
    (3, ['clutter_map.png', 'clutter_map.tif', 'survey.csv'])
    """
    from .analysis.survey import Engine, SurveyConfig, run_survey

    workers = survey_options.pop("workers", None)
    engine = engine or Engine(workers=workers)
    config = SurveyConfig(region=tuple(region), **survey_options)
    return run_survey(dem, config, sim_config, out_dir, engine=engine, progress=progress, overwrite=overwrite,
                      figures=figures)
