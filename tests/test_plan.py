"""`cluttersim plan` (invented scene): a target on a plain beside a single conical massif.

The scene (UTM, WGS 84, tests/scenes.py): a cone 1.5 km high, 6.15 km base radius (slopes of
13.7°), centred 10.4 km east of the target (its foot 4.3 km away), so that its west flank faces
a trace over the target at normal incidence at apparent depths within the window; flown at 25 km
with the built-in radar and a Gaussian antenna narrow along track (8°) and wide across (80°):
clutter ahead and behind is suppressed, clutter abeam is not. Known truths, from geometry alone:

* a facet's echo lies in the target's depth window (apparent depths 0–300 m, ε′ = 3.15) when its
  range R from a target trace satisfies R_nadir ≤ R ≤ R_nadir + 300 √ε′ (the window's two-way delay
  2 d √ε′ / c, common practice);
* the best heading must leave no massif cell (above 100 m) that is both in the window and inside
  the beam's along-track half-power two-way width (one-way gain exp(−4 ln2 θ²/B²), README [antenna];
  two-way ≥ 1/2 for |θ| ≤ B/√8, the usual 3 dB width, common practice); a
  heading along the massif's side (north–south, the massif abeam) has many.
"""

import dataclasses
import math

import numpy as np
import pyproj
import pytest
from scenes import UTM, UTM_X0_M, UTM_Y0_M, utm_grid, write_utm

from cluttersim import default_config
from cluttersim.physics.antenna import AntennaConfig
from cluttersim.errors import ConfigError
from cluttersim.analysis.plan import PlanConfig, PlanTarget, candidate_track, run_plan, search, target_height_m
from cluttersim.analysis.survey import Engine

ALT_M = 25e3
DEPTH_M = (50.0, 300.0)
BEAM_ALONG_DEG = 8.0
PERMITTIVITY = 3.15
_TO_GEO = pyproj.Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)


@pytest.fixture(scope="module")
def massif(tmp_path_factory):
    n, res = 240, 200.0
    east, north = utm_grid(n, res)
    r = np.hypot(east - (UTM_X0_M + 4400.0), north - UTM_Y0_M)
    elev = np.maximum(0.0, 1500.0 * (1.0 - r / 6150.0))
    path = write_utm(tmp_path_factory.mktemp("massif") / "massif.tif", elev, res)
    lon, lat = _TO_GEO.transform(UTM_X0_M - 6000.0, UTM_Y0_M)
    cfg = default_config()
    beam = AntennaConfig(pattern="gaussian", beamwidth_along_deg=BEAM_ALONG_DEG, beamwidth_across_deg=80.0)
    cfg = dataclasses.replace(cfg, radar=dataclasses.replace(cfg.radar, samples=256), antenna=beam)
    plan = PlanConfig(target=PlanTarget(lon, lat, radius_m=900.0), depth_m=DEPTH_M, altitudes_m=(ALT_M,),
                      track_length_m=2000.0, trace_spacing_m=500.0, coarse_step_deg=30.0, fine_step_deg=5.0,
                      permittivity=PERMITTIVITY)  # fmt: skip
    return path, cfg, plan, east, north, elev


@pytest.fixture(scope="module")
def searched(massif):
    path, cfg, plan, *_ = massif
    return search(path, plan, cfg, engine=Engine(workers=1))


@pytest.fixture(scope="module")
def brute(massif):
    path, cfg, plan, *_ = massif
    return search(path, plan, cfg, engine=Engine(workers=1), headings_only=np.arange(0.0, 180.0, plan.fine_step_deg))


def massif_cells_seen(path, plan, heading_deg, east, north, elev):
    """Massif cells (above 100 m: the massif itself, not its low skirt, whose echo does not stand out
    from the plain's) in the depth window and inside the Fresnel strip of some target trace."""
    from cluttersim.io.dem import DemSource
    from cluttersim.analysis.plan import Candidate

    src = DemSource.open(path)
    body = src.body
    tr = candidate_track(body, plan, Candidate(heading_deg, ALT_M, 0.0), target_height_m(src, plan.target))
    on = plan.target.on_target(body, tr.lon_deg, tr.lat_deg)
    m = elev > 100.0
    lon, lat = _TO_GEO.transform(east[m], north[m])
    cells = body.geodetic_to_ecef_m(np.asarray(lat), np.asarray(lon), elev[m])
    ant = body.geodetic_to_ecef_m(tr.lat_deg, tr.lon_deg, tr.alt_m)
    seen = 0
    for i in np.flatnonzero(on):
        along = ant[min(i + 1, len(tr) - 1)] - ant[max(i - 1, 0)]
        along /= np.linalg.norm(along)
        d = cells - ant[i]
        rng = np.linalg.norm(d, axis=1)
        theta_along = np.degrees(np.arcsin(np.clip(d @ along / rng, -1, 1)))
        r_nadir = tr.alt_m[i] - 0.0  # the plain under the target is at height 0
        root = math.sqrt(PERMITTIVITY)
        in_window = (rng >= r_nadir + DEPTH_M[0] * root) & (rng <= r_nadir + DEPTH_M[1] * root)
        kept = np.abs(theta_along) <= BEAM_ALONG_DEG / math.sqrt(8.0)  # two-way gain >= 1/2
        seen += int(np.sum(in_window & kept))
    return seen


def test_best_heading_leaves_the_massif_outside_the_window_worst_runs_along_it(massif, searched):
    path, cfg, plan, east, north, elev = massif
    rows = searched
    best, worst = rows[0], max((r for r in rows if math.isfinite(r.objective_db)), key=lambda r: r.objective_db)
    assert massif_cells_seen(path, plan, best.candidate.heading_deg, east, north, elev) == 0
    assert massif_cells_seen(path, plan, worst.candidate.heading_deg, east, north, elev) > 20
    # the worst runs along the massif's side: the massif abeam, heading within 15° of north–south
    h = worst.candidate.heading_deg % 180.0
    assert min(h, 180.0 - h) <= 15.0
    assert worst.objective_db > best.objective_db + 1.0


def test_search_finds_the_brute_force_best_within_its_step(massif, searched, brute):
    path, cfg, plan, *_ = massif
    found = searched
    assert len(found) < len(brute)  # coarse to fine evaluates fewer candidates
    best_brute = brute[0].objective_db
    # the searched best is as good as the sweep's best (same candidates score the same), and its heading
    # is one of the sweep's near-best headings, within the fine step
    assert found[0].objective_db <= best_brute + 1e-9
    near = [r.candidate.heading_deg for r in brute if r.objective_db <= found[0].objective_db + 0.05]
    assert min(abs(((found[0].candidate.heading_deg - h) + 90) % 180 - 90) for h in near) <= plan.fine_step_deg


def test_identical_results_across_engines(massif):
    path, cfg, plan, *_ = massif
    small = dataclasses.replace(plan, headings_deg=(0.0, 90.0), coarse_step_deg=90.0, fine_step_deg=90.0)
    ref = search(path, small, cfg, engine=Engine(workers=1))
    for engine in (Engine(workers=2), Engine(scheduler="local", workers=1)):
        other = search(path, small, cfg, engine=engine)
        assert [r.candidate for r in other] == [r.candidate for r in ref]
        assert [r.objective_db for r in other] == [r.objective_db for r in ref]


def test_plan_products(massif, tmp_path):
    import csv

    from cluttersim.track import Track

    path, cfg, plan, *_ = massif
    small = dataclasses.replace(plan, coarse_step_deg=90.0, fine_step_deg=90.0)
    result = run_plan(path, small, cfg, tmp_path / "plan", engine=Engine(workers=1))
    rows = list(csv.DictReader(open(result.paths["table"])))
    assert rows[0]["rank"] == "1" and float(rows[0]["objective_db"]) == pytest.approx(result.best.objective_db, abs=1e-3)
    objectives = [float(r["objective_db"]) for r in rows]
    assert objectives == sorted(objectives)
    best = Track.from_csv(result.paths["best_track"])  # ready for simulate
    assert len(best) == 5 and np.allclose(best.alt_m, ALT_M)
    for key in ("polar", "best_worst"):
        assert result.paths[key].stat().st_size > 10_000
    from cluttersim.errors import OutputExistsError

    with pytest.raises(OutputExistsError):
        run_plan(path, small, cfg, tmp_path / "plan", engine=Engine(workers=1))


def test_airborne_offsets_and_bad_geometry(massif):
    _, _, plan, *_ = massif
    with pytest.raises(ConfigError, match="airborne"):
        dataclasses.replace(plan, offsets_m=(0.0, 500.0))
    with pytest.raises(ConfigError, match="depth"):
        dataclasses.replace(plan, depth_m=(300.0, 100.0))
    with pytest.raises(ConfigError, match="fine-step-deg"):
        dataclasses.replace(plan, fine_step_deg=60.0)
    air = dataclasses.replace(plan, platform="airborne", altitudes_m=(3000.0,), offsets_m=(-400.0, 400.0))
    from cluttersim.physics.body import Body
    from cluttersim.analysis.plan import Candidate

    body = Body.from_crs(pyproj.CRS(UTM))
    tr = candidate_track(body, air, Candidate(0.0, 3000.0, 400.0), ground_m=10.0)
    np.testing.assert_allclose(tr.alt_m, 3010.0)  # level line 3 km above the ground at the target
    # the line's middle trace is 400 m to the right (east, for a northbound line) of the target
    _, _, dist = body.geod().inv(plan.target.lon_deg, plan.target.lat_deg, tr.lon_deg[2], tr.lat_deg[2])
    assert dist == pytest.approx(400.0, abs=0.01)
    az, _, _ = body.geod().inv(plan.target.lon_deg, plan.target.lat_deg, tr.lon_deg[2], tr.lat_deg[2])
    assert az == pytest.approx(90.0, abs=0.1)


def test_probability_under_dem_error(massif):
    """Known truths of the probability objective: with a negligible error (1 cm) it is 1 exactly when the
    error-free objective reaches the threshold and 0 otherwise; with a real error it lies in [0, 1] and
    its quoted error is the binomial one."""
    from cluttersim.analysis.dem_error import DemErrorConfig

    path, cfg, plan, *_ = massif
    tiny = DemErrorConfig(0.01, 2000.0, realisations=2, seed=0)
    small = dataclasses.replace(plan, headings_deg=(0.0, 90.0), coarse_step_deg=90.0, fine_step_deg=90.0)
    rows = search(path, small, cfg, engine=Engine(workers=1))
    by_heading = {r.candidate.heading_deg: r.objective_db for r in rows}
    mid = 0.5 * (by_heading[0.0] + by_heading[90.0])  # between the two candidates' objectives
    prows = search(path, dataclasses.replace(small, dem_error=tiny, threshold_db=mid), cfg, engine=Engine(workers=1))
    for r in prows:
        assert r.probability == (1.0 if by_heading[r.candidate.heading_deg] >= mid else 0.0)
    assert prows[0].probability == 0.0  # ranked by probability: the one below the threshold first
    real = DemErrorConfig(30.0, 1000.0, realisations=4, seed=1)
    prows = search(path, dataclasses.replace(small, dem_error=real, threshold_db=mid), cfg, engine=Engine(workers=1))
    for r in prows:
        assert 0.0 <= r.probability <= 1.0
        assert r.probability_se == pytest.approx(math.sqrt(r.probability * (1 - r.probability) / 4))


def _plan_command(dem_path, tmp_path) -> list[str]:
    """``cluttersim plan`` on the massif with a quick search (90° steps, 2 km tracks, one worker) and a
    256-sample radar with a Gaussian beam (written to ``tmp_path``); the target and --out to add."""
    radar = tmp_path / "radar.toml"
    radar.write_text('[radar]\nsamples = 256\n[antenna]\npattern = "gaussian"\nbeamwidth_along_deg = 8.0\n'
                     'beamwidth_across_deg = 80.0\n')  # fmt: skip
    return ["plan", "--dem", str(dem_path), "--depth-m", "50", "300", "--alt-m", "25000", "--radar", str(radar),
            "--coarse-step-deg", "90", "--fine-step-deg", "90", "--track-length-km", "2", "--workers", "1", "-q"]


def test_plan_command_and_bad_input(massif, tmp_path):
    from click.testing import CliRunner

    from cli.main import cli

    path, _, plan, *_ = massif
    poly = tmp_path / "target.csv"
    t = plan.target
    d = 0.005  # a small square around the target (~0.5 km)
    poly.write_text("lon,lat\n" + "".join(f"{t.lon_deg + a * d},{t.lat_deg + b * d}\n"
                                          for a, b in ((-1, -1), (1, -1), (1, 1), (-1, 1))))  # fmt: skip
    base = _plan_command(path, tmp_path)
    ok = CliRunner().invoke(cli, base + ["--target-polygon", str(poly), "--out", str(tmp_path / "p")])
    assert ok.exit_code == 0, ok.output
    assert {p.name for p in (tmp_path / "p").iterdir()} == {"plan.csv", "best_track.csv", "objective_polar.png",
                                                            "best_worst.png"}  # fmt: skip
    both = CliRunner().invoke(cli, base + ["--target-polygon", str(poly), "--target", "1", "2", "--out", str(tmp_path / "q")])
    assert both.exit_code == 2 and "either --target" in both.output
    bad = CliRunner().invoke(cli, [*base[:4], "300", "50", *base[6:], "--target-lat", str(t.lat_deg), "--target-lon",
                                   str(t.lon_deg), "--out", str(tmp_path / "r")])  # fmt: skip
    assert bad.exit_code == 1 and "depth 300.0 50.0" in bad.output and len(bad.output.strip().splitlines()) == 1
    off = CliRunner().invoke(cli, base + ["--target-lat", "0", "--target-lon", "0", "--out", str(tmp_path / "s")])
    assert off.exit_code == 1 and "not on the DEM" in off.output
    assert not (tmp_path / "q").exists() and not (tmp_path / "r").exists() and not (tmp_path / "s").exists()


def test_airborne_search_scores_every_altitude_and_offset(massif, tmp_path):
    """Airborne lines 3 km above the ground at the target, offsets ±300 m (within the 900 m target radius):
    every (altitude, offset) gets its headings scored, the lines cross the target, and the polar plot has
    one curve each."""
    path, cfg, plan, *_ = massif
    air = dataclasses.replace(plan, platform="airborne", altitudes_m=(3000.0,), offsets_m=(-300.0, 300.0),
                              headings_deg=(0.0, 90.0), coarse_step_deg=90.0, fine_step_deg=90.0)  # fmt: skip
    result = run_plan(path, air, cfg, tmp_path / "air", engine=Engine(workers=1))
    combos = {(r.candidate.heading_deg, r.candidate.offset_m) for r in result.rows}
    assert combos == {(0.0, -300.0), (0.0, 300.0), (90.0, -300.0), (90.0, 300.0)}
    assert all(r.target_traces >= 3 and math.isfinite(r.objective_db) for r in result.rows)
    from cluttersim.track import Track

    best = Track.from_csv(result.paths["best_track"])
    np.testing.assert_allclose(best.alt_m, 3000.0, atol=1e-6)  # the plain under the target is at 0 m


def test_plan_named_target_options_the_old_spelling_and_figure_options(massif, tmp_path):
    """--target-lat/--target-lon (named as the other commands' coordinates) plan the same tracks as the
    deprecated --target LON LAT, which still works with a deprecation message; the figures follow
    --figure-format (bytes, not just names) and --dpi (PNG size: 13 × 5.5 in for best_worst)."""
    from click.testing import CliRunner

    from cli.main import cli
    from figure_files import assert_all_in_format, png_size

    path, _, plan, *_ = massif
    t = plan.target
    base = _plan_command(path, tmp_path)
    named = CliRunner().invoke(cli, base + ["--target-lat", repr(t.lat_deg), "--target-lon", repr(t.lon_deg),
                                            "--figure-format", "svg", "--out", str(tmp_path / "named")])  # fmt: skip
    assert named.exit_code == 0, named.output
    assert "deprecated" not in named.output
    assert_all_in_format([tmp_path / "named" / f for f in ("objective_polar.svg", "best_worst.svg")], "svg")
    old = CliRunner().invoke(cli, base + ["--target", repr(t.lon_deg), repr(t.lat_deg), "--dpi", "50",
                                          "--out", str(tmp_path / "old")])  # fmt: skip
    assert old.exit_code == 0, old.output
    assert "--target LON LAT is deprecated" in old.output and "--target-lat --target-lon" in old.output
    assert (tmp_path / "named" / "plan.csv").read_text() == (tmp_path / "old" / "plan.csv").read_text()
    assert png_size(tmp_path / "old" / "best_worst.png") == (650, 275)
    both = CliRunner().invoke(cli, base + ["--target", "1", "2", "--target-lat", "2", "--out", str(tmp_path / "x")])
    assert both.exit_code == 2 and "not both" in both.output
    half = CliRunner().invoke(cli, base + ["--target-lat", "2", "--out", str(tmp_path / "y")])
    assert half.exit_code == 2 and "missing --target-lon" in half.output


def test_overwrite_in_another_figure_format_removes_the_old_figures(massif, tmp_path):
    """Re-run with --overwrite and --figure-format pdf, plan removes the PNG figures of the run before
    (as simulate does), saying so."""
    from cli_helpers import invoke
    from figure_files import assert_all_in_format

    path, _, plan, *_ = massif
    out = tmp_path / "p"
    base = _plan_command(path, tmp_path) + ["--target-lat", repr(plan.target.lat_deg), "--target-lon",
                                            repr(plan.target.lon_deg), "--out", out]  # fmt: skip
    assert invoke(*base).exit_code == 0
    assert_all_in_format([out / "objective_polar.png", out / "best_worst.png"], "png")
    res = invoke(*base, "--figure-format", "pdf", "--overwrite")
    assert res.exit_code == 0, res.output
    assert_all_in_format([out / "objective_polar.pdf", out / "best_worst.pdf"], "pdf")
    assert not list(out.glob("*.png")), sorted(p.name for p in out.iterdir())
    assert "removed best_worst.png, objective_polar.png" in res.output
