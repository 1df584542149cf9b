"""Radar TOML parsing: exact key names, defaults, and one clear error per mistake."""

import pytest

from cluttersim.config import SimulationConfig, default_config
from cluttersim.errors import ConfigError

FULL = """
[radar]
center_frequency_hz = 20e6
bandwidth_hz = 10e6
sample_interval_s = 37.5e-9
samples = 2048
window_start_s = "auto"
transmit_power_w = 10.0
antenna_gain_dbi = 0.0
range_window = "hann"
[surface]
law = "hagfors"
C = 250.0
rho = 0.1
"""


def write(tmp_path, text):
    p = tmp_path / "radar.toml"
    p.write_text(text)
    return p


def test_every_documented_key_is_read(tmp_path):
    cfg = SimulationConfig.from_toml(write(tmp_path, FULL))
    assert cfg.radar.samples == 2048 and cfg.radar.window_start_s == "auto"
    assert cfg.radar.center_frequency_hz == 20e6 and cfg.radar.range_window == "hann"
    assert cfg.surface.law == "hagfors" and cfg.surface.params == {"C": 250.0, "rho": 0.1}
    assert cfg.radar.wavelength_m == pytest.approx(14.9896229)


def test_numeric_window_start_and_other_laws(tmp_path):
    text = FULL.replace('"auto"', "2.1e-3").replace('law = "hagfors"\nC = 250.0\nrho = 0.1', 'law = "cosine"\nk = 0.2\nn = 3')
    cfg = SimulationConfig.from_toml(write(tmp_path, text))
    assert cfg.radar.window_start_s == 2.1e-3
    assert cfg.surface.kernel_params() == (0.2, 3.0)


def test_default_config_is_the_packaged_radar():
    cfg = default_config()
    assert cfg.radar.samples == 2048 and cfg.surface.law == "hagfors"


@pytest.mark.parametrize(
    "old, new, message",
    [
        ("samples = 2048", "samples = 2048\nsampels = 3", "[radar] unknown key 'sampels'"),
        ("[surface]", "[surfce]", "unknown table [surfce]"),
        ('law = "hagfors"', 'law = "fractal"', "[surface] law = 'fractal': expected one of"),
        ("C = 250.0", "C = 250.0\nn = 2", "[surface] unknown key 'n' for law 'hagfors'"),
        ("center_frequency_hz = 20e6", "center_frequency_hz = -20e6", "[radar] center_frequency_hz = -20000000.0: expected a positive"),
        ("bandwidth_hz = 10e6", "bandwidth_hz = 0", "[radar] bandwidth_hz = 0.0: expected a positive"),
        ("samples = 2048", "samples = 0", "[radar] samples = 0"),
        ("samples = 2048", 'samples = "many"', "[radar] samples = 'many': expected an integer"),
        ("samples = 2048", "samples = 20.5", "[radar] samples = 20.5: expected an integer"),
        ("transmit_power_w = 10.0", 'transmit_power_w = "10"', "[radar] transmit_power_w = '10': expected a number"),
        ('range_window = "hann"', 'range_window = "kaiser"', "[radar] range_window = 'kaiser': expected one of"),
        ('window_start_s = "auto"', 'window_start_s = "soon"', "[radar] window_start_s = 'soon'"),
        ('window_start_s = "auto"', "window_start_s = -1.0", "[radar] window_start_s = -1.0"),
        ("rho = 0.1", "rho = 1.5", "[surface] rho = 1.5: expected a reflectivity"),
        ("rho = 0.1", "rho = true", "[surface] rho = True: expected a finite number"),
    ],
)
def test_bad_values_name_the_key(tmp_path, old, new, message):
    assert old in FULL
    path = write(tmp_path, FULL.replace(old, new))
    with pytest.raises(ConfigError) as err:
        SimulationConfig.from_toml(path)
    assert message in str(err.value)
    assert str(path) in str(err.value)


def test_not_toml_and_missing_file(tmp_path):
    with pytest.raises(ConfigError, match="not valid TOML"):
        SimulationConfig.from_toml(write(tmp_path, "[radar\nsamples="))
    with pytest.raises(ConfigError, match="radar file not found"):
        SimulationConfig.from_toml(tmp_path / "nope.toml")
