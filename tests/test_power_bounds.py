"""Radar and surface numbers that could overflow a radargram are refused when read or before the
power kernel runs, with one line naming the keys (cluttersim.validate: check_sigma0_peak,
check_power_bound); each law's largest σ0 (scattering.sigma0_peak) checked against its formula
evaluated on a dense grid of incidences (the defining property: no incidence gives more)."""

import dataclasses

import numpy as np
import pytest
from scenes import flat_geographic

from cluttersim import kernels
from cluttersim.config import SurfaceConfig, default_config
from cluttersim.errors import ConfigError
from cluttersim.physics.scattering import sigma0, sigma0_peak
from cluttersim.simulate import simulate
from cluttersim.track import Track
from cluttersim.validate import MAX_SIGMA0

#: incidences 0..90° (the grid the peak is checked against), deg
INCIDENCE_DEG = np.linspace(0.0, 89.999, 400_001)


@pytest.mark.parametrize("law, params", [
    ("constant", {"sigma0": 0.3}), ("lambert", {"k": 0.2}), ("cosine", {"k": 0.5, "n": 0.0}),
    ("cosine", {"k": 0.5, "n": 7.0}), ("hagfors", {"C": 400.0, "rho": 0.08}), ("hagfors", {"C": 2.0, "rho": 0.1}),
    ("hagfors", {"C": 0.5, "rho": 0.1}), ("hagfors", {"C": 1e-3, "rho": 0.3}), ("gaussian", {"rms_slope_deg": 3.0, "rho": 0.08}),
    ("gaussian", {"rms_slope_deg": 40.0, "rho": 0.08}), ("gaussian", {"rms_slope_deg": 75.0, "rho": 0.5}),
])  # fmt: skip
def test_sigma0_peak_is_the_largest_value_of_the_law(law, params):
    peak, at_deg = sigma0_peak(law, params)
    grid = sigma0(law, INCIDENCE_DEG, **params)
    assert peak == pytest.approx(np.max(grid), rel=1e-6)
    assert sigma0(law, at_deg, **params) == pytest.approx(peak, rel=1e-9)


@pytest.mark.parametrize("law, params, words", [
    ("constant", {"sigma0": 1e300}, "[surface] sigma0 = 1e+300 (law 'constant')"),
    ("lambert", {"k": 2e6}, "[surface] k = 2000000.0 (law 'lambert')"),
    ("hagfors", {"C": 1e-20, "rho": 1.0}, "[surface] C = 1e-20, rho = 1.0 give σ0 = 5e+09 at 90° incidence"),
    ("gaussian", {"rms_slope_deg": 89.999, "rho": 1.0}, "[surface] rms_slope_deg = 89.999, rho = 1.0 give σ0 ="),
])  # fmt: skip
def test_a_law_beyond_the_sigma0_bound_is_refused_when_read(law, params, words):
    with pytest.raises(ConfigError) as exc:
        SurfaceConfig(law, params)
    msg = str(exc.value)
    assert words in msg and f"expected a backscatter coefficient of at most {MAX_SIGMA0:g} (60 dB)" in msg
    assert "\n" not in msg


def test_the_defaults_and_a_smooth_hagfors_surface_pass():
    for law in ("constant", "lambert", "cosine", "hagfors", "gaussian"):
        SurfaceConfig(law)
    SurfaceConfig("hagfors", {"C": 1e5, "rho": 1.0})  # σ0 = 5e4 (47 dB) at nadir: very smooth, accepted


def test_an_overflowing_combination_is_refused_before_any_power_kernel(tmp_path, monkeypatch):
    """1 GW, 100 dBi and σ0 = 1e6 (each within its own bound) 20 m above level ground, a recording
    window reaching ~12 km: the radar equation's bound, 1.13e28 W m² × 1e6 × ~5e8 m² × ~3 / (20 m)⁴,
    is ~1e38 W per sample, beyond float32's 3.4e38 / 10."""
    dem = flat_geographic(tmp_path / "flat.tif", 0.001, half_width_deg=0.2)
    cfg = default_config()
    cfg = dataclasses.replace(cfg, radar=dataclasses.replace(cfg.radar, transmit_power_w=1e9, antenna_gain_dbi=100.0,
                                                             samples=2048),
                              surface=SurfaceConfig("constant", {"sigma0": 1e6}))  # fmt: skip

    def must_not_run(*a, **k):
        raise AssertionError("a power kernel ran")

    monkeypatch.setattr(kernels, "accumulate_power", must_not_run)
    monkeypatch.setattr(kernels, "earliest_range", must_not_run)
    track = Track(np.array([0.0, 0.0001]), np.array([0.0, 0.0]), np.array([20.0, 20.0]), source="low pass")
    with pytest.raises(ConfigError) as exc:
        simulate(dem, track, cfg, max_memory_bytes=None)
    msg = str(exc.value)
    assert msg.startswith("[radar] transmit_power_w = 1e+09, antenna_gain_dbi = 100, center_frequency_hz = 2e+07 "
                          "with [surface] σ0 up to 1e+06 allow ")
    assert "expected at most 3.4e+37 W" in msg and "\n" not in msg
    # the same numbers 300 km up stay far below the bound: accepted (the check itself; no kernel run here)
    from cluttersim.validate import check_power_bound

    check_power_bound(cfg, 300e3, 1e12, 3.0)


def test_the_default_radar_is_far_below_the_bound():
    from cluttersim.validate import MAX_POWER_BOUND_W, check_power_bound

    cfg = default_config()
    check_power_bound(cfg, 1.0 * cfg.radar.wavelength_m, 1e14, 10.0)  # an antenna one wavelength above 1e14 m²
    assert MAX_POWER_BOUND_W < 3.4e38
