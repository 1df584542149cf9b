"""A thin ionospheric layer: group delay, dispersion of the compressed pulse, and its configuration."""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from cluttersim import SimulationConfig
from cluttersim.errors import ConfigError
from cluttersim.physics.ionosphere import K_IONO, IonosphereConfig, group_delay_two_way_s, phase_two_way_rad
from cluttersim.physics.radar import (
    compressed_pulse_amplitude,
    effective_pulse_duration_s,
    pulse_amplitude_response,
    pulse_power_kernel,
    window_weights,
)

C = 299_792_458.0


def test_refractive_constant_is_40_3():
    # n = 1 − 40.3 N / f² (Davies, Ionospheric Radio, 1990, ch. 1; from memory), from CODATA e, m_e, ε0
    assert K_IONO == pytest.approx(40.3, abs=0.01)


def test_group_delay_of_1e16_at_20_mhz_is_6_72_us():
    # 2 · 40.3 · TEC / (c f²) two-way (Davies 1990): 6.72 µs for 1e16 m⁻² at 20 MHz
    assert group_delay_two_way_s(1e16, 20e6) * 1e6 == pytest.approx(6.72, abs=0.005)
    # the transfer function's phase gives that group delay: −(1/2π) dΦ/df
    f, df = 20e6, 1.0
    dphi = phase_two_way_rad(1e16, f + df) - phase_two_way_rad(1e16, f - df)
    assert -dphi / (2 * df) / (2 * math.pi) == pytest.approx(group_delay_two_way_s(1e16, f), rel=1e-6)


def _quadratic_phase_response(t, tec, fc, bw, window):
    """Direct numerical evaluation (scipy quad) of ∫ w(ν) exp(i[Φ(fc) + Φ'(fc) ν + Φ''(fc) ν²/2])
    e^(i2πνt) dν / ∫ w dν, with Φ = 2π · 2 · 40.3 · TEC / (c f): the quadratic expansion of the phase."""
    a = 2 * math.pi * 2 * K_IONO * tec / C
    p0, p1, p2 = a / fc, -a / fc**2, 2 * a / fc**3
    norm = quad(lambda nu: window_weights(nu / bw, window), -bw / 2, bw / 2)[0]

    def part(fn):
        return quad(lambda nu: window_weights(nu / bw, window) * fn(p0 + p1 * nu + 0.5 * p2 * nu * nu + 2 * math.pi * nu * t),
                    -bw / 2, bw / 2, limit=400)[0]  # fmt: skip

    return complex(part(math.cos), part(math.sin)) / norm


@pytest.mark.parametrize("window", ["hann", "none"])
def test_dispersion_against_the_quadratic_phase(window):
    """TEC 8e15 at 20 MHz over a 3 MHz band: 3.8 rad of quadratic phase at the band's edges (the
    cubic term, which the direct evaluation leaves out, 0.3 rad: the tolerance). The pulse is
    delayed by the group delay at the centre, its peak lowered (0.85 Hann, 0.53 unweighted, in
    amplitude), and its energy kept (a phase-only layer; Parseval)."""
    tec, fc, bw = 8e15, 20e6, 3e6
    delay = group_delay_two_way_s(tec, fc)
    t = delay + np.linspace(-1.5, 1.5, 31) / bw
    ours = pulse_amplitude_response(t, bw, window, fc, IonosphereConfig(tec_el_m2=tec))
    direct = np.array([_quadratic_phase_response(ti, tec, fc, bw, window) for ti in t])
    np.testing.assert_allclose(np.abs(ours), np.abs(direct), atol=0.04)
    peak = np.abs(ours).max()
    assert peak == pytest.approx(np.abs(direct).max(), abs=0.02)
    assert peak < 0.9  # smeared: lower than the undisturbed peak of 1
    if window == "hann":  # (unweighted, the smeared top is flat and its maximum wanders)
        assert abs(t[np.argmax(np.abs(ours))] - delay) < 0.25 / bw
    # energy: ∫|h|² dt is τ_eff with and without the layer
    tt = np.linspace(delay - 40 / bw, delay + 40 / bw, 20001)
    energy = np.trapezoid(np.abs(pulse_amplitude_response(tt, bw, window, fc, IonosphereConfig(tec_el_m2=tec))) ** 2, tt)
    assert energy == pytest.approx(effective_pulse_duration_s(bw, window), rel=0.01 if window == "none" else 1e-3)


def test_power_kernel_through_the_layer_is_delayed_and_keeps_its_sum():
    layer = IonosphereConfig(tec_el_m2=1e15)
    dt = 37.5e-9
    off, w = pulse_power_kernel(10e6, dt, "hann", 20e6, layer)
    _, plain = pulse_power_kernel(10e6, dt, "hann")
    assert w.sum() == pytest.approx(plain.sum(), rel=1e-3)
    assert abs(off[np.argmax(w)] * dt - group_delay_two_way_s(1e15, 20e6)) < 2 * dt
    assert w.max() < 0.99
    # without the layer the response is the real, peak-normalised pulse
    t = np.linspace(-2e-7, 2e-7, 9)
    np.testing.assert_allclose(pulse_amplitude_response(t, 10e6, "hann", 20e6, IonosphereConfig()).real,
                               compressed_pulse_amplitude(t, 10e6, "hann"))  # fmt: skip


def test_absorption_lowers_the_echo():
    # κ ∝ ν TEC / ω²: a collisional layer removes power, exp(−4κ) two-way
    lossy = IonosphereConfig(tec_el_m2=1e15, collision_frequency_hz=1e5)
    _, w = pulse_power_kernel(10e6, 37.5e-9, "hann", 20e6, lossy)
    _, w0 = pulse_power_kernel(10e6, 37.5e-9, "hann", 20e6, IonosphereConfig(tec_el_m2=1e15))
    assert w.sum() < w0.sum()


def test_ionosphere_table():
    cfg = SimulationConfig.from_dict({"ionosphere": {"tec_el_m2": 5e15}})
    assert cfg.ionosphere.tec_el_m2 == 5e15
    assert cfg.to_dict()["ionosphere"]["tec_el_m2"] == 5e15
    with pytest.raises(ConfigError, match=r"\[ionosphere\] unknown key 'tec'"):
        SimulationConfig.from_dict({"ionosphere": {"tec": 1e16}})
    with pytest.raises(ConfigError, match="tec_el_m2 = -1.0"):
        SimulationConfig.from_dict({"ionosphere": {"tec_el_m2": -1.0}})
    with pytest.raises(ConfigError, match="1 TECU = 1e16"):
        SimulationConfig.from_dict({"radar": {"center_frequency_hz": 5e6, "bandwidth_hz": 4e6},
                                    "ionosphere": {"tec_el_m2": 1e18}})  # fmt: skip


def test_compare_correction_delays_and_smears_a_finished_simulation():
    """disperse_radargram (compare --tec-el-m2 on a given simulation): a point echo of the plain
    pulse moves later by the group delay at the centre frequency (Davies 1990), keeps its energy
    (phase-only layer) and loses peak."""
    import json

    import xarray as xr

    from cluttersim.physics.ionosphere import disperse_radargram

    cfg = SimulationConfig()  # 20 MHz, 10 MHz, 37.5 ns, Hann
    dt = cfg.radar.sample_interval_s
    off, plain = pulse_power_kernel(10e6, dt, "hann")
    power = np.zeros((2, 1024))
    power[:, 200 + off] = plain  # an echo at sample 200
    ds = xr.Dataset({"power": (("trace", "sample"), power.astype(np.float32))},
                    attrs={"cluttersim_config": json.dumps(cfg.to_dict())})  # fmt: skip
    out = disperse_radargram(ds, 1e15)
    p = out["power"].values[0].astype(float)
    shift_s = (np.argmax(p) - 200) * dt
    assert shift_s == pytest.approx(group_delay_two_way_s(1e15, 20e6), abs=3 * dt)
    assert p.sum() == pytest.approx(plain.sum(), rel=1e-3)
    assert p.max() < 0.9
    assert out.attrs["ionosphere_tec_el_m2"] == 1e15
