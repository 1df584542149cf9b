"""`cluttersim survey`: clutter index, generated tracks, engines, resume and bad input (invented scenes).

The scene: an isolated conical massif (1 km high, 12 km base radius) on a level plain, on
the WGS 84 ellipsoid in UTM (tests/scenes.py), flown at 100 km. At that scale the Earth's
curvature moves a point 20 km off nadir by x²/2R ≈ 31 m, which makes its delay later than
the flat-plane value: the flat-plane reach below is an upper bound.
"""

import dataclasses
import math
import signal
import subprocess
import sys

import numpy as np
import pyproj
import pytest
import rasterio
from cli_helpers import CLUTTERSIM, interrupt_when, invoke, one_line, region_args
from scenes import UTM, UTM_X0_M, UTM_Y0_M, utm_grid, write_utm

from cluttersim import SurfaceConfig, default_config
from cluttersim.physics.body import Body
from cluttersim.constants import SPEED_OF_LIGHT_M_S
from cluttersim.analysis.survey import (
    Engine,
    SurveyConfig,
    clutter_index,
    generate_tracks,
    read_survey_tracks,
    read_track_result,
    run_survey,
)

ALT_M = 100e3
MASSIF_H_M = 1000.0
MASSIF_RADIUS_M = 12e3
MAX_DEPTH_M = 300.0
PERMITTIVITY = 3.15
#: Range resolution c/2B of the built-in radar (B = 10 MHz): 15 m (Skolnik 2001, ΔR = c/2B).
RANGE_RESOLUTION_M = 15.0

_TO_GEO = pyproj.Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
_TO_UTM = pyproj.Transformer.from_crs("EPSG:4326", UTM, always_xy=True)


def region_km(x0, y0, x1, y1):
    """The lon/lat box of an east/north box (km from the scene centre)."""
    lon0, lat0 = _TO_GEO.transform(UTM_X0_M + 1e3 * x0, UTM_Y0_M + 1e3 * y0)
    lon1, lat1 = _TO_GEO.transform(UTM_X0_M + 1e3 * x1, UTM_Y0_M + 1e3 * y1)
    return (lon0, lat0, lon1, lat1)


def radar_config(samples=320):
    cfg = default_config()
    return dataclasses.replace(cfg, radar=dataclasses.replace(cfg.radar, samples=samples),
                               surface=SurfaceConfig("hagfors", {"C": 400.0, "rho": 0.08}))  # fmt: skip


def distance_from_massif_m(lon, lat):
    e, n = _TO_UTM.transform(np.asarray(lon), np.asarray(lat))
    return np.hypot(np.asarray(e) - UTM_X0_M, np.asarray(n) - UTM_Y0_M)


def flat_plane_reach_m(delay_range_m):
    """Farthest nadir distance from the massif's axis at which any of its points can echo into the
    window: a point at height z, x off nadir, arrives √((h − z)² + x²) − h after the nadir echo of
    the plain (the flat-plane delay geometry √(h² + x²) − h for z = 0; common practice), so it is in
    the window while x ≤ √((h + Δr)² − (h − z)²); the cone's point at radius r adds r."""
    r = np.linspace(0.0, MASSIF_RADIUS_M, 2001)
    z = MASSIF_H_M * (1.0 - r / MASSIF_RADIUS_M)
    return float(np.max(r + np.sqrt((ALT_M + delay_range_m) ** 2 - (ALT_M - z) ** 2)))


@pytest.fixture(scope="module")
def massif(tmp_path_factory):
    d = tmp_path_factory.mktemp("massif")
    n, res = 200, 350.0
    east, north = utm_grid(n, res)
    r = np.hypot(east - UTM_X0_M, north - UTM_Y0_M)
    z = MASSIF_H_M * np.clip(1.0 - r / MASSIF_RADIUS_M, 0.0, None)
    return write_utm(d / "massif.tif", z, res)


@pytest.fixture(scope="module")
def survey_run(massif, tmp_path_factory):
    """Nine north-going tracks 6 km apart over the whole scene, run in this process."""
    out = tmp_path_factory.mktemp("survey") / "out"
    config = SurveyConfig(region=region_km(-27, -27, 27, 27), spacing_km=6.0, alt_m=ALT_M, trace_spacing_m=1400.0,
                          max_depth_m=MAX_DEPTH_M, permittivity=PERMITTIVITY, threshold_db=3.0)  # fmt: skip
    summary = run_survey(massif, config, radar_config(), out, engine=Engine(workers=1))
    return out, summary


# --------------------------------------------------------------------------- the clutter index


def test_clutter_index_by_hand():
    """Two traces worked by hand from the definitions (README, "Region survey")."""
    dt = 1e-7
    power = np.array([[0.1, 1.0, 0.5, 0.2, 0.4, 0.3], [0.0, 2.0, 0.1, 0.1, 0.1, 9.0]])
    side = np.array([[0.0, 0.1, 0.6, 0.5, 1.0, 1.0], [0.0, 0.0, 0.5, 0.5, 0.5, 1.0]])
    start = np.zeros(2)
    nadir = np.full(2, 1e-7)  # sample 1
    window = 3e-7  # samples 1..4 (sample 5 lies past the window)
    index, frac, depth, surface, truncated = clutter_index(power, side / 2, side / 2, start, nadir, dt, window, 1, -3.0, 1.0)
    # trace 0: nadir strip power near sample 1 (samples 0..2): max(0.1, 0.9, 0.2) = 0.9;
    # clutter in 1..4: 0.1, 0.3, 0.1, 0.4 -> I = 10 log10(0.4 / 0.9)
    assert index[0] == pytest.approx(10 * math.log10(0.4 / 0.9), abs=1e-12)
    # threshold 0.9 * 10^-0.3 = 0.451: no sample above -> F = 0
    assert frac[0] == 0.0
    # strongest clutter at sample 4: 3 samples after nadir, depth c * 3e-7 / 2 (ε′ = 1)
    assert depth[0] == pytest.approx(0.5 * SPEED_OF_LIGHT_M_S * 3e-7)
    assert surface[0] == pytest.approx(0.9)
    # trace 1: P_s = 2.0; clutter 0, .05, .05, .05 -> I = 10 log10(0.05 / 2); threshold 1.002: none
    assert index[1] == pytest.approx(10 * math.log10(0.025), abs=1e-12)
    assert truncated == 0
    # lower the threshold to -20 dB (0.02 for trace 1): samples 2..4 count, F = 0.3 / 2.3
    _, frac, _, _, _ = clutter_index(power, side / 2, side / 2, start, nadir, dt, window, 1, -20.0, 1.0)
    assert frac[1] == pytest.approx(0.3 / 2.3)


def test_clutter_index_flags_a_truncated_window_and_no_nadir():
    power = np.ones((2, 4))
    half = np.full((2, 4), 0.25)
    index, _, _, _, truncated = clutter_index(power, half, half, np.zeros(2), np.array([1e-7, np.nan]), 1e-7, 1e-6, 1, 0.0)
    assert truncated == 1
    assert np.isnan(index[1])


# --------------------------------------------------------------------------- generated tracks


def test_generated_tracks_are_parallel_spaced_and_inside_the_region():
    """Neighbouring tracks' closest distance equals the spacing (pyproj's geodesic distances on a
    sphere of Mars' radius, IAU 2015: 3 396 190 m), every trace lies in the region, headings agree."""
    body = Body.sphere(3_396_190.0)
    region = (10.0, -1.0, 11.0, 1.0)
    cfg = SurveyConfig(region=region, spacing_km=10.0, heading_deg=30.0, alt_m=2e5, trace_spacing_m=2000.0)
    tracks = generate_tracks(body, cfg)
    geod = body.geod()
    assert [t.track_id for t in tracks] == sorted(t.track_id for t in tracks)
    for st in tracks:
        t = st.track
        assert np.all((t.lon_deg >= 10.0) & (t.lon_deg <= 11.0) & (t.lat_deg >= -1.0) & (t.lat_deg <= 1.0))
        az, _, step = geod.inv(t.lon_deg[:-1], t.lat_deg[:-1], t.lon_deg[1:], t.lat_deg[1:])
        np.testing.assert_allclose(step, 2000.0, rtol=1e-9)
        assert np.all(np.abs(((az - 30.0) + 180.0) % 360.0 - 180.0) < 1.0)  # near-equator: heading kept within 1°
    for a, b in zip(tracks[:-1], tracks[1:]):
        if len(a.track) < 5 or len(b.track) < 5:
            continue
        mid = len(a.track) // 2
        _, _, d = geod.inv(np.full(len(b.track), a.track.lon_deg[mid]), np.full(len(b.track), a.track.lat_deg[mid]),
                           b.track.lon_deg, b.track.lat_deg)  # fmt: skip
        closest = float(np.min(d))
        assert closest == pytest.approx(10e3, abs=1e3)  # traces are 2 km apart along b: within half a step
    assert len(tracks) >= 8  # 111 km × 59 km box crossed at 30°: many 10 km-spaced tracks


def test_tracks_csv_grouped_by_track_id(tmp_path):
    p = tmp_path / "tracks.csv"
    p.write_text("track_id,lat,lon,alt\nB,0.0,0.0,1000\nA,0.0,1.0,1000\nB,0.1,0.0,1000\nA,0.1,1.0,1000\nA,0.2,1.0,1000\n")
    tracks = read_survey_tracks(p)
    assert [t.track_id for t in tracks] == ["B", "A"]
    assert list(tracks[1].track.lat_deg) == [0.0, 0.1, 0.2]
    # cut to a region: A (lon 1) lies outside and is skipped with a warning naming it
    with pytest.warns(UserWarning, match="skipped: A"):
        tracks = read_survey_tracks(p, region=(-0.5, -1.0, 0.5, 1.0))
    assert [t.track_id for t in tracks] == ["B"]
    with pytest.warns(UserWarning, match="skipped: B"):  # and here B; A loses its third trace (lat 0.2)
        tracks = read_survey_tracks(p, region=(0.5, -1.0, 1.5, 0.15))
    assert [t.track_id for t in tracks] == ["A"] and list(tracks[0].track.lat_deg) == [0.0, 0.1]


# --------------------------------------------------------------------------- the massif


def test_massif_flags_only_tracks_near_it_within_the_flat_plane_reach(survey_run):
    out, summary = survey_run
    assert summary.tracks == 9 and summary.computed == 9
    # the window reaches Δr = d √ε′ in range (apparent depth convention of radar.apparent_depth_m), plus
    # two range cells for the compressed pulse's main lobe
    reach_m = flat_plane_reach_m(MAX_DEPTH_M * math.sqrt(PERMITTIVITY) + 2 * RANGE_RESOLUTION_M)
    assert 22e3 < reach_m < 23e3  # 12 km + √(100.562² − 100²) km
    over, beside, beyond = 0, 0, 0
    for path in sorted((out / "tracks").glob("*.nc")):
        res = read_track_result(path)
        dist = distance_from_massif_m(res.lon_deg, res.lat_deg)
        flagged = res.index_db >= 3.0  # the index is relative to level ground: 3 dB above it
        assert np.all(dist[flagged] <= reach_m), (res.track_id, dist[flagged].max())
        if dist.min() < MASSIF_RADIUS_M - 1e3:  # flies over the massif
            over += 1
            assert np.nanmax(res.index_db) >= 5.0
        elif dist.min() > MASSIF_RADIUS_M + 1e3 and flagged.any():  # beside it: off-nadir clutter only
            beside += 1
        if dist.min() > reach_m:
            beyond += 1
            assert not flagged.any()
            # level plain: off-nadir echo just after the nadir echo, from the ring outside the pulse-limited
            # strip, is weaker than the nadir echo (a few dB: measured here −2.6 to −1.7 dB) — the level-ground
            # reference the survey computes for this geometry, so these traces read about 0 dB
            assert -6.0 < res.level_db < 0.0
            assert abs(np.nanmedian(res.index_db)) < 0.5, (res.track_id, np.nanmedian(res.index_db))
    assert over == 3 and beyond == 2 and beside >= 2


def test_map_is_bright_only_within_the_reach_and_nodata_between_tracks(survey_run):
    out, _ = survey_run
    reach_m = flat_plane_reach_m(MAX_DEPTH_M * math.sqrt(PERMITTIVITY) + 2 * RANGE_RESOLUTION_M)
    with rasterio.open(out / "clutter_map.tif") as ds:
        assert ds.count == 2 and ds.crs.to_epsg() == 32633
        index = ds.read(1)
        t = ds.transform
        assert abs(t.a - 3000.0) < 1e-6  # default cell: half the 6 km spacing
    rows, cols = np.indices(index.shape)
    x, y = t * (cols + 0.5, rows + 0.5)
    dist = np.hypot(x - UTM_X0_M, y - UTM_Y0_M)
    half_diagonal = 3000.0 / math.sqrt(2.0)
    bright = index >= 3.0
    assert bright.any()
    # a cell takes its nearest trace's value within that track's swath (the reach of its window): a bright
    # cell lies within the reach of the massif plus the swath
    swath_m = max(read_track_result(p).swath_m for p in (out / "tracks").glob("*.nc"))
    assert 5e3 < swath_m < 30e3
    assert np.all(dist[bright] <= reach_m + swath_m + half_diagonal)
    assert np.isnan(index).mean() < 0.1  # the swaths cover the region: no hairline tracks between nodata columns
    far = np.isfinite(index) & (dist > reach_m + swath_m + half_diagonal)
    assert far.any() and np.all(index[far] < 3.0)
    csv_rows = (out / "survey.csv").read_text().splitlines()
    assert csv_rows[0].startswith("track_id,traces,length_km,clutter_prone_fraction,median_index_db")
    assert len(csv_rows) == 1 + 9
    png = (out / "clutter_map.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"


# --------------------------------------------------------------------------- engines and resume


def _small(**kw):
    return SurveyConfig(region=region_km(-8, -12, 8, 12), spacing_km=6.0, alt_m=ALT_M, trace_spacing_m=1400.0,
                        max_depth_m=MAX_DEPTH_M, permittivity=PERMITTIVITY, **kw)  # fmt: skip


def _outputs(out):
    with rasterio.open(out / "clutter_map.tif") as ds:
        bands = ds.read()
    tracks = {p.name: read_track_result(p) for p in sorted((out / "tracks").glob("*.nc"))}
    return bands, tracks, (out / "survey.csv").read_bytes()


def _assert_identical(a, b):
    assert a[0].tobytes() == b[0].tobytes()
    assert a[1].keys() == b[1].keys()
    for name in a[1]:
        for field in ("index_db", "fraction", "depth_m", "surface_power_w", "lat_deg", "lon_deg"):
            assert getattr(a[1][name], field).tobytes() == getattr(b[1][name], field).tobytes(), (name, field)
    assert a[2] == b[2]


def test_local_processes_and_dask_give_bit_identical_results(massif, tmp_path):
    pytest.importorskip("distributed")
    runs = {}
    for name, engine in (("inprocess", Engine(workers=1)), ("local2", Engine(workers=2)),
                         ("dask", Engine(workers=2, scheduler="local"))):  # fmt: skip
        summary = run_survey(massif, _small(), radar_config(), tmp_path / name, engine=engine)
        assert summary.computed == 3
        runs[name] = _outputs(tmp_path / name)
    _assert_identical(runs["inprocess"], runs["local2"])
    _assert_identical(runs["inprocess"], runs["dask"])


def test_interrupted_survey_resumes_without_recomputing(massif, tmp_path):
    out = tmp_path / "out"
    finished = []

    def stop_after_first(result):
        finished.append(result.track_id)
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        run_survey(massif, _small(), radar_config(), out, engine=Engine(workers=1), on_track=stop_after_first)
    first = out / "tracks" / f"{finished[0]}.nc"
    before = first.stat()
    assert not (out / "survey.csv").exists()
    assert [p.name for p in (out / "tracks").iterdir()] == [first.name]
    summary = run_survey(massif, _small(), radar_config(), out, engine=Engine(workers=1))
    assert (summary.resumed, summary.computed) == (1, 2)
    after = first.stat()
    assert (after.st_ino, after.st_mtime_ns) == (before.st_ino, before.st_mtime_ns)
    full = tmp_path / "full"
    run_survey(massif, _small(), radar_config(), full, engine=Engine(workers=1))
    _assert_identical(_outputs(out), _outputs(full))
    # other arguments: the finished tracks are refused, not silently mixed in
    for p in out.glob("*.*"):
        p.unlink()
    res = _survey(["--dem", massif, *region_args(_small().region), "--spacing-km", 6, "--alt-m", ALT_M,
                   "--trace-spacing-m", 1400, "--max-depth-m", 250, "--out", out, "-q"])  # fmt: skip
    assert res.exit_code == 2, res.output
    assert "made by a survey with other arguments" in res.output


def test_sigint_stops_the_survey_and_a_restart_resumes(massif, tmp_path):
    """SIGINT to `cluttersim survey` with two worker processes once a track is written: exit 130, one
    line, no temporary file and no map; the same command again finishes only the other tracks."""
    out = tmp_path / "out"
    args = ["survey", "--dem", str(massif), *region_args(region_km(-27, -20, 27, 20)), "--spacing-km", "3",
            "--alt-m", str(ALT_M), "--trace-spacing-m", "700", "--max-depth-m", "300", "--workers", "2",
            "--out", str(out)]  # fmt: skip
    rc, text = interrupt_when(args, lambda: bool(list((out / "tracks").glob("*.nc"))), signal.SIGINT,
                              tmp_path / "stderr.txt", too_soon="the survey")  # fmt: skip
    assert rc == 130, text
    assert "Traceback" not in text and "Warning" not in text  # e.g. no leaked-semaphore warning from stopped workers
    lines = [ln for ln in text.splitlines() if ln.startswith("cluttersim:")]
    assert len(lines) == 1 and "interrupted" in lines[0] and "resume" in lines[0], text
    names = sorted(p.name for p in out.rglob("*") if p.is_file())
    assert not [n for n in names if ".partial-" in n], names
    assert not (out / "clutter_map.tif").exists() and not (out / "survey.csv").exists()
    kept = {p.name: p.stat().st_mtime_ns for p in (out / "tracks").glob("*.nc")}
    assert 1 <= len(kept) < 19
    done = subprocess.run([str(CLUTTERSIM), *args, "-q"], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert {p.name: p.stat().st_mtime_ns for p in (out / "tracks").glob("*.nc") if p.name in kept} == kept
    assert len(list((out / "tracks").glob("*.nc"))) == 19
    assert (out / "clutter_map.tif").exists()


# --------------------------------------------------------------------------- bad input


def _survey(args):
    return invoke("survey", *args)


@pytest.mark.parametrize(
    "extra, code, words",
    [
        ([*region_args((20, 40, 21, 41)), "--spacing-km", 5, "--alt-m", 1e5], 1, "is not inside the DEM"),
        ([*region_args(region_km(-5, -5, 5, 5)), "--spacing-km", 5, "--alt-m", 1e5, "--scheduler", "foo:8786"], 1,
         "expected 'local' or an address such as tcp://HOST:PORT"),
        ([*region_args(region_km(-5, -5, 5, 5))], 1, "give either --spacing-km"),
        ([*region_args(region_km(-5, -5, 5, 5)), "--spacing-km", 5], 1, "need alt-m"),
        ([*region_args(region_km(5, -5, -5, 5)), "--spacing-km", 5, "--alt-m", 1e5], 1, "expected LON_MIN < LON_MAX"),
        ([*region_args(region_km(-5, -5, 5, 5)), "--spacing-km", 5, "--alt-m", 1e5, "--max-depth-m", 20000], 1,
         "--max-depth-m 20000"),
        ([*region_args(region_km(-5, -5, 5, 5)), "--spacing-km", 5, "--alt-m", 1e5, "--scheduler", "tcp://h:1",
          "--workers", 2], 1, "give --workers only"),
        ([*region_args(region_km(-5, -5, 5, 5)), "--spacing-km", 0, "--alt-m", 1e5], 1, "spacing_km = 0.0"),
    ],
)
def test_bad_input_is_one_line_with_its_exit_code(massif, tmp_path, extra, code, words):
    res = _survey(["--dem", massif, *extra, "--out", tmp_path / "o", "-q"])
    (line,) = one_line(res, code)
    assert words in line and line.startswith("cluttersim: error: ")
    assert not (tmp_path / "o").exists()


def test_tracks_csv_without_track_id_is_refused(massif, tmp_path):
    p = tmp_path / "t.csv"
    p.write_text("lat,lon,alt\n0,15,100000\n")
    res = _survey(["--dem", massif, *region_args(region_km(-5, -5, 5, 5)), "--tracks", p, "--out", tmp_path / "o"])
    assert res.exit_code == 1
    assert res.output == (f"cluttersim: error: {p}: missing column(s) track_id; read 3 column(s) with ',' as separator: "
                          "'lat', 'lon', 'alt'; expected a comma-separated header with lat, lon, alt, track_id "
                          "(and optional time)\n")


def test_scheduler_without_dask_says_how_to_install_it(massif, tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import fails as if Dask were absent
    res = _survey(["--dem", massif, *region_args(region_km(-5, -5, 5, 5)), "--spacing-km", 5, "--alt-m", 1e5,
                   "--scheduler", "local", "--out", tmp_path / "o", "-q"])  # fmt: skip
    assert res.exit_code == 1, res.output
    assert "pip install 'cluttersim[dask]'" in res.output
    assert not (tmp_path / "o").exists()


def test_finished_survey_is_not_overwritten_without_the_flag(survey_run, massif):
    out, _ = survey_run
    before = (out / "survey.csv").stat().st_mtime_ns
    res = _survey(["--dem", massif, *region_args(region_km(-27, -27, 27, 27)), "--spacing-km", 6, "--alt-m", ALT_M,
                   "--out", out, "-q"])  # fmt: skip
    assert res.exit_code == 2
    assert "already exists; pass --overwrite" in res.output
    assert (out / "survey.csv").stat().st_mtime_ns == before


def test_a_multi_band_radar_is_surveyed_one_band_at_a_time():
    from cluttersim import SimulationConfig
    from cluttersim.errors import ConfigError
    from cluttersim.analysis.survey import survey_sim_config

    bands = SimulationConfig.from_dict({"band": [{"name": "low", "center_frequency_hz": 10e6, "bandwidth_hz": 5e6},
                                                 {"name": "high", "center_frequency_hz": 20e6, "bandwidth_hz": 10e6}]})  # fmt: skip
    assert survey_sim_config(bands).radar.bandwidth_hz == 5e6
    assert survey_sim_config(bands, "high").radar.center_frequency_hz == 20e6
    with pytest.raises(ConfigError, match="band 'mid': expected one of low, high"):
        survey_sim_config(bands, "mid")
    with pytest.raises(ConfigError, match="has a single band"):
        survey_sim_config(SimulationConfig(), "low")


def test_presum_in_the_radar_is_ignored_with_a_warning(massif, tmp_path):
    """A radar that presums pulses ([processing] presum = 2) is surveyed one pulse per trace, as without
    presum (the same survey.csv), with a warning saying so; it used to fail, the level-ground reference
    and the presummed radargram having different trace counts."""
    from cluttersim.analysis.survey import survey_sim_config

    cfg = radar_config()
    presummed = dataclasses.replace(cfg, processing=dataclasses.replace(cfg.processing, presum=2))
    with pytest.warns(UserWarning, match=r"presum = 2 is ignored"):
        assert survey_sim_config(presummed).processing.presum == 1
    with pytest.warns(UserWarning, match=r"presum = 2 is ignored"):
        run_survey(massif, _small(), presummed, tmp_path / "two", engine=Engine(workers=1))
    run_survey(massif, _small(), cfg, tmp_path / "one", engine=Engine(workers=1))
    assert (tmp_path / "two" / "survey.csv").read_bytes() == (tmp_path / "one" / "survey.csv").read_bytes()


def test_survey_on_a_scheduler_file_is_bit_identical(massif, tmp_path):
    """--scheduler-file: the survey's tracks as Dask tasks on the cluster named in the file (a real
    LocalCluster here), the same results as in this process."""
    distributed = pytest.importorskip("distributed")
    import logging

    from cluttersim.errors import ConfigError

    path = tmp_path / "scheduler.json"
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                                       silence_logs=logging.CRITICAL, scheduler_kwargs={"scheduler_file": str(path)})  # fmt: skip
    try:
        run_survey(massif, _small(), radar_config(), tmp_path / "file", engine=Engine(scheduler_file=str(path)))
    finally:
        cluster.close()
    run_survey(massif, _small(), radar_config(), tmp_path / "here", engine=Engine(workers=1))
    _assert_identical(_outputs(tmp_path / "here"), _outputs(tmp_path / "file"))
    with pytest.raises(ConfigError, match="either --scheduler or --scheduler-file"):
        Engine(scheduler="local", scheduler_file=str(path))


def _small_survey_command(massif) -> list[str]:
    """``cluttersim survey`` of :func:`_small`'s region on one worker, quiet; --out to add."""
    return ["survey", "--dem", str(massif), *region_args(_small().region), "--spacing-km", "6", "--alt-m", str(ALT_M),
            "--trace-spacing-m", "1400", "--max-depth-m", str(MAX_DEPTH_M), "--workers", "1", "-q"]


def test_survey_map_follows_the_figure_options(massif, tmp_path):
    """--figure-format svg writes clutter_map.svg (SVG bytes), --dpi sets the PNG's pixel size, and
    --db-range sets the map's colour span (a quarter below the threshold): a narrower span saturates
    more cells, so the two maps differ while the numbers (GeoTIFF, CSV) do not."""
    from figure_files import figure_format, png_size

    from cluttersim.analysis.survey import survey_map_range_db

    assert survey_map_range_db(None) == (6.0, 18.0)
    assert survey_map_range_db(8.0) == pytest.approx((2.0, 6.0))
    base = _small_survey_command(massif)
    runs = {"svg": ["--figure-format", "svg"], "a": ["--dpi", "50"], "b": ["--dpi", "50", "--db-range", "4"]}
    for name, extra in runs.items():
        res = invoke(*base, "--out", tmp_path / name, *extra)
        assert res.exit_code == 0, res.output
    assert figure_format(tmp_path / "svg" / "clutter_map.svg") == "svg"
    assert not (tmp_path / "svg" / "clutter_map.png").exists()
    w120, h120 = _png_size_of_default(massif, tmp_path)
    w50, h50 = png_size(tmp_path / "a" / "clutter_map.png")
    assert abs(w50 - w120 * 50 / 120) <= 2 and abs(h50 - h120 * 50 / 120) <= 2
    assert (tmp_path / "a" / "survey.csv").read_bytes() == (tmp_path / "b" / "survey.csv").read_bytes()
    assert (tmp_path / "a" / "clutter_map.png").read_bytes() != (tmp_path / "b" / "clutter_map.png").read_bytes()


def test_overwrite_in_another_figure_format_removes_the_old_map(massif, tmp_path):
    """Re-run with --overwrite and --figure-format pdf, the survey removes the PNG map of the run
    before (as simulate does), saying so: no figure of another run passes for this one's."""
    from figure_files import figure_format

    out = tmp_path / "s"
    base = _small_survey_command(massif) + ["--out", out]
    assert invoke(*base).exit_code == 0
    assert figure_format(out / "clutter_map.png") == "png"
    res = invoke(*base, "--figure-format", "pdf", "--overwrite")
    assert res.exit_code == 0, res.output
    assert figure_format(out / "clutter_map.pdf") == "pdf"
    assert not list(out.glob("*.png")), sorted(p.name for p in out.iterdir())
    assert "removed clutter_map.png" in res.output


def _png_size_of_default(massif, tmp_path):
    from figure_files import png_size

    out = tmp_path / "default"
    run_survey(massif, _small(), radar_config(320), out, engine=Engine(workers=1))
    return png_size(out / "clutter_map.png")
