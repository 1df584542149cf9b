"""Figures: radargrams (power, side of the track), comparisons with observed data and maps (track, echo sources).

Every ``plot_*`` function draws into the ``ax=`` you give it (e.g. from
``plt.subplots()`` in a notebook) and returns those axes, or makes its own
:class:`matplotlib.figure.Figure` with an explicit Agg canvas and returns it;
pyplot is never imported here, so this module changes no global matplotlib
state (backend, current figure). Saving is the caller's choice:
:func:`save_figure` (or the ``path`` argument) writes png, pdf or svg
atomically — to ``<name>.tmp`` next to the target, then :func:`os.replace`
onto it, so a reader never sees a half-written file. Colours come from
:mod:`cluttersim.palette`.

The figures live by concern in this package; every name is importable from
``cluttersim.plots`` (``plots.plot_radargram(ds, ax=ax)``):

* :mod:`~cluttersim.plots.style`: sizes, colours, :func:`power_db`, :func:`save_figure`;
* :mod:`~cluttersim.plots.radargram_views`: power and elevation radargrams, dB ranges, axes;
* :mod:`~cluttersim.plots.overlays`: the noise-floor mark and the predicted subsurface echo on a radargram;
* :mod:`~cluttersim.plots.sides`: the side-coloured radargram;
* :mod:`~cluttersim.plots.comparison`: observed against simulated;
* :mod:`~cluttersim.plots.maps`: track, echo-source and one-echo maps over shaded relief;
* :mod:`~cluttersim.plots.planning`: survey map, DEM-error spread, planning figures.
"""

from __future__ import annotations

from .style import (  # noqa: F401
    DPI,
    ECHO_CELL_COLOUR,
    ECHO_SOURCES_FIGSIZE_IN,
    _figure_for,
    FIGURE_FORMATS,
    _finish,
    FIRST_RETURN_COLOUR,
    _LABEL_BOX,
    _LEGEND_STYLE,
    _new_figure,
    NO_DATA_COLOUR,
    _note_below,
    OVERLAY_COLOUR,
    PNG_COMPRESS_LEVEL,
    power_db,
    RADARGRAM_CMAP,
    RADARGRAM_FIGSIZE_IN,
    _save_atomic,
    save_figure,
    SIDE_LEFT_COLOUR,
    SIDE_NADIR_COLOUR,
    SIDE_NO_DATA_COLOUR,
    SIDE_RIGHT_COLOUR,
    SOURCE_MAP_CMAP,
    TERRAIN_CMAP,
    TRACK_COLOUR,
    TRACK_MAP_FIGSIZE_IN,
    _write_png,
)
from .overlays import (  # noqa: F401
    draw_noise_floor,
    draw_predicted_subsurface,
    NOISE_FLOOR_COLOUR,
    noise_floor_db,
    _STROKE,
    SUBSURFACE_COLOUR,
)
from .radargram_views import (  # noqa: F401
    _add_depth_axis,
    add_distance_axis,
    along_track_km,
    auto_db_range,
    AUTO_DB_RANGE_BOUNDS,
    AUTO_DB_RANGE_MARGIN_DB,
    AUTO_DB_RANGE_PERCENTILE,
    _check_permittivity,
    _check_range,
    _db_limits,
    db_limits,
    depth_axis_functions,
    _draw_nadir_line,
    _draw_radargram_panel,
    elevation_layers,
    _label_radargram,
    nadir_reference_us,
    plot_band_radargrams,
    plot_elevation_radargram,
    plot_radargram,
    _radargram_extent,
    radargram_layers,
    RadargramLayers,
    TERRAIN_LINE_COLOUR,
    _trace_by_sample,
)
from .sides import (  # noqa: F401
    plot_side_radargram,
    _runs,
    SIDE_BRIGHTNESS_GAMMA,
    side_colours,
    _side_key,
    SIDE_NO_DATA_HATCH_COLOUR,
    SIDE_OVERLAY_COLOUR,
    _side_palette,
)
from .comparison import (  # noqa: F401
    CANDIDATE_MAP_FIGSIZE_IN,
    plot_candidate_map,
    CANDIDATE_COLOUR,
    comparison_difference_db,
    COMPARISON_FIGSIZE_IN,
    comparison_layers,
    _comparison_view,
    CONTOUR_COLOURS,
    DIFFERENCE_CMAP,
    DIFFERENCE_RANGE_DB,
    _draw_candidates,
    _no_data_handles,
    OVERLAY_BACKGROUND_CMAP,
    plot_comparison_difference,
    plot_comparison_overlay,
    plot_comparison_side_by_side,
    _sample_centres_us,
)
from .maps import (  # noqa: F401
    _draw_first_returns,
    _draw_relief,
    _draw_track,
    _frame_map,
    _grey_hillshade_rgba,
    _grey_map,
    _grid,
    _HILLSHADE_GREY_RANGE,
    hillshade_intensity,
    _HILLSHADE_MID_GREY,
    _image_extent,
    _LABEL_OFFSETS_PT,
    _LIGHT,
    _map_axes,
    _map_figsize,
    _map_x,
    _MAX_RANKS_LISTED,
    place_labels,
    plot_echo_sources,
    plot_source_map,
    plot_track_map,
    _relief_inputs,
    _shaded_relief_rgba,
    _share_marker_area_pt2,
    track_view,
)
from .planning import (  # noqa: F401
    BAND_CMAP,
    _image,
    plot_best_worst,
    plot_dem_error,
    plot_objective_polar,
    plot_survey_map,
    SURVEY_MAP_CMAP,
    SURVEY_TRACK_COLOUR,
    TARGET_COLOUR,
)
