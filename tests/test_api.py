"""The notebook-facing API: lazy exports, teaching docstrings whose examples run, the radargram's
coordinates, the radar template, named coordinate options, longitude conventions and messages that
say what was found."""

from __future__ import annotations

import dataclasses
import doctest
import subprocess
import sys
import tomllib

import numpy as np
import pytest
from click.testing import CliRunner

import cluttersim
from cli.main import cli


def run_examples(obj, directory, monkeypatch):
    """Run the Examples of a docstring (doctest) in ``directory``; fail on any failed example."""
    monkeypatch.chdir(directory)
    finder = doctest.DocTestFinder(recurse=False)
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    tests = finder.find(obj, obj.__name__, globs={})
    assert tests and tests[0].examples, f"{obj.__name__} has no example"
    for test in tests:
        runner.run(test)
    result = runner.summarize(verbose=False)
    assert result.failed == 0, f"{obj.__name__}: {result.failed} example(s) failed"


@pytest.mark.parametrize("name", ["simulate_to_dir", "echo_sources", "write_report", "compare_observed",
                                  "survey_region", "example_scene", "radar_template"])  # fmt: skip
def test_docstring_examples_run(name, tmp_path, monkeypatch):
    run_examples(getattr(cluttersim, name), tmp_path, monkeypatch)


def test_the_main_jobs_are_reachable_from_import_cluttersim_and_imported_lazily():
    code = ("import sys, cluttersim; heavy = [m for m in ('numba', 'matplotlib', 'xarray') if m in sys.modules]; "
            "print(heavy); import cluttersim.analysis.sources; print(callable(cluttersim.simulate), "
            "cluttersim.compare.__name__, cluttersim.survey.__name__, cluttersim.report.__name__, "
            "cluttersim.sources.__name__, callable(cluttersim.write_report))")  # fmt: skip
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.split("\n")
    assert out[0] == "[]"  # nothing heavy on import
    # cluttersim.simulate stays the function even after its module is imported
    # the attribute submodules resolve to their modules in the subpackages
    assert out[1] == "True cluttersim.analysis.compare cluttersim.analysis.survey cluttersim.report cluttersim.analysis.sources True"
    for name in ("compare_observed", "survey_region", "echo_sources", "write_report"):
        doc = getattr(cluttersim, name).__doc__
        assert "Examples" in doc and ">>>" in doc and ":func:`cluttersim." in doc  # names the function doing the work


def test_radargram_opens_with_coordinates_a_scientist_expects(tmp_path):
    dem, track = cluttersim.example_scene(tmp_path)
    paths = cluttersim.simulate_to_dir(dem, track, tmp_path / "run")
    ds = cluttersim.open_radargram(paths["radargram"])
    for name, standard in (("lat", "latitude"), ("lon", "longitude"), ("alt", "height_above_reference_ellipsoid")):
        assert name in ds.coords and ds[name].dims == ("trace",) and ds[name].attrs["standard_name"] == standard
    assert ds["delay"].dims == ("sample",) and ds["delay"].attrs["units"] == "s"
    np.testing.assert_allclose(ds["delay_us"].values, ds["delay"].values * 1e6)
    # along-track distance: geodesic on the body's sphere (pyproj.Geod, the reference library)
    import pyproj

    g = pyproj.Geod(a=1_000_000.0, b=1_000_000.0)  # the example body, a 1,000 km sphere
    _, _, d = g.inv(ds["lon"].values[:-1], ds["lat"].values[:-1], ds["lon"].values[1:], ds["lat"].values[1:])
    np.testing.assert_allclose(ds["distance"].values, np.concatenate([[0.0], np.cumsum(d)]), rtol=1e-9, atol=1e-6)
    import matplotlib

    matplotlib.use("Agg")
    artist = ds["power"].plot(x="distance", y="delay")  # just works
    assert artist.axes.get_xlabel().startswith("along-track distance")


def test_radar_template_parses_and_names_every_key(tmp_path):
    from cluttersim.physics.antenna import AntennaConfig
    from cluttersim.physics.aperture import ProcessingConfig
    from cluttersim.config import SimulationConfig
    from cluttersim.physics.noise import NoiseConfig
    from cluttersim.physics.radar import BAND_KEYS, RadarConfig
    from cluttersim.physics.scattering import LAWS
    from cluttersim.physics.subsurface import SubsurfaceConfig
    from cluttersim.template import template_keys

    for kind in ("orbital", "airborne"):
        res = CliRunner().invoke(cli, ["radar-template", f"--{kind}"])
        assert res.exit_code == 0, res.output
        path = tmp_path / f"{kind}.toml"
        path.write_text(res.output)
        config = SimulationConfig.from_toml(path)  # the active keys parse
        if kind == "orbital":
            assert config == cluttersim.default_config()  # the built-in radar's values
    keys = template_keys()
    from cluttersim.physics.ionosphere import IonosphereConfig

    tables = {"radar": RadarConfig, "noise": NoiseConfig, "subsurface": SubsurfaceConfig, "antenna": AntennaConfig,
              "processing": ProcessingConfig, "ionosphere": IonosphereConfig}  # fmt: skip
    # every table of the radar file has its section (a new table needs one too)
    assert {f.name for f in dataclasses.fields(SimulationConfig)} - {"bands"} <= set(keys) | {"surface"}
    for table, cls in tables.items():
        fields = {f.name for f in dataclasses.fields(cls)}
        assert fields <= keys[table], (table, fields - keys[table])  # a new key needs a line in the template
    assert {p for spec in LAWS.values() for p in spec.params} <= keys["surface"]
    assert set(BAND_KEYS) | {"name"} <= keys["band"]
    text = cluttersim.radar_template("orbital")
    for line in text.splitlines():  # every key line says its unit and meaning
        if "=" in line.split("#")[0 if not line.startswith("# ") else 1] and not line.startswith("# [") and "[" in line:
            assert "# [" in line, line
    assert tomllib.loads(text)["surface"]["law"] == "hagfors"


def test_named_coordinate_options_and_the_old_spellings(tmp_path):
    new = ["track", "--start-lat", "10", "--start-lon", "41", "--end-lat", "11", "--end-lon", "41", "--alt-m", "3e5",
           "--spacing-m", "5000", "--body-radius-m", "3389500", "--out", str(tmp_path / "a.csv")]  # fmt: skip
    res = CliRunner().invoke(cli, new)
    assert res.exit_code == 0 and "deprecated" not in res.output
    old = ["track", "--start", "10", "41", "--end", "11", "41", "--alt-m", "3e5", "--spacing-m", "5000",
           "--body-radius-m", "3389500", "--out", str(tmp_path / "b.csv")]  # fmt: skip
    res = CliRunner().invoke(cli, old)
    assert res.exit_code == 0 and "--start LAT LON is deprecated" in res.output and "--start-lat" in res.output
    assert (tmp_path / "a.csv").read_text() == (tmp_path / "b.csv").read_text()
    res = CliRunner().invoke(cli, old[:1] + ["--start-lat", "10"] + old[1:])
    assert res.exit_code == 2 and "not both" in res.output


def test_longitudes_come_back_in_the_convention_they_went_in(tmp_path):
    from cluttersim import Body, great_circle_track
    from cluttersim.track import wrap_lon_like

    body = Body.sphere(3_389_500.0)
    east = great_circle_track(body, 10.0, 236.0, 11.0, 236.5, 3e5, 20000.0)
    assert np.all(east.lon_deg > 180.0)  # 236 °E stays 236, not −124
    west = great_circle_track(body, 10.0, -124.0, 11.0, -123.5, 3e5, 20000.0)
    np.testing.assert_allclose(east.lon_deg, west.lon_deg + 360.0, atol=1e-9)
    np.testing.assert_allclose(wrap_lon_like([-124.0, 179.0], [236.0]), [236.0, 179.0])
    # a simulated run keeps the track's convention for the source record as for lon
    from cluttersim.examples import example_scene

    dem, _ = example_scene(tmp_path)
    track = cluttersim.Track(np.linspace(-0.2, 0.2, 12), np.full(12, 360.0 - 0.02), np.full(12, 5000.0))
    ds = cluttersim.simulate(dem, track)
    # 0..360 in, 0..360 out: ground west of the meridian reads 359.9x (not −0.0x), east of it 0.x
    src = ds["source_lon"].values
    src = src[np.isfinite(src)]
    assert np.all(ds["lon"].values > 180) and np.all((src >= 0) & (src < 360)) and np.any(src > 359.9)
    fr = ds["first_return_lon"].values
    fr = fr[np.isfinite(fr)]
    assert fr.size and np.all((fr >= 0) & (fr < 360))


@pytest.mark.parametrize("content, found", [
    ("lat;lon;alt\n1;2;3\n", "separated by ';'"),
    ("10,41,3000\n11,41,3000\n", "no header row"),
    ("latitude,longitude,height\n1,2,3\n", "'latitude', 'longitude', 'height'"),
])  # fmt: skip
def test_track_errors_say_what_was_found(tmp_path, content, found):
    from cluttersim import Track, TrackError

    p = tmp_path / "t.csv"
    p.write_text(content)
    with pytest.raises(TrackError, match="missing column") as err:
        Track.from_csv(p)
    assert found in str(err.value)


def test_geometry_errors_give_the_extents_and_the_unit_hint(tmp_path):
    from cluttersim import TrackError

    dem, _ = cluttersim.example_scene(tmp_path)
    off = cluttersim.Track(np.array([40.0, 40.1]), np.array([10.0, 10.0]), np.array([5000.0, 5000.0]))
    with pytest.raises(TrackError, match=r"DEM lon -0\.6000\.\.0\.6000, lat -0\.6000\.\.0\.6000; track lon 10\.0000"):
        cluttersim.simulate(dem, off)
    km = cluttersim.Track(np.array([0.0, 0.01]), np.array([0.12, 0.12]), np.array([5.0, 5.0]))  # over the 400 m hill
    with pytest.raises(TrackError, match="look like kilometres"):
        cluttersim.simulate(dem, km)


def test_survey_says_it_ignores_noise_and_subsurface():
    from cluttersim.physics.noise import NoiseConfig
    from cluttersim.analysis.survey import survey_sim_config

    config = dataclasses.replace(cluttersim.default_config(), noise=NoiseConfig(noise_figure_db=3.0))
    with pytest.warns(UserWarning, match=r"\[noise\] table\(s\) are ignored"):
        out = survey_sim_config(config)
    assert out.noise is None
