"""Ranging physics against handbook values."""

import numpy as np
import pytest

from cluttersim.constants import SPEED_OF_LIGHT_M_S
from cluttersim.physics.radar import (
    compressed_pulse_amplitude,
    effective_pulse_duration_s,
    pulse_amplitude_response,
    pulse_power_kernel,
    radar_equation_power_w,
    range_from_delay_m,
    range_resolution_m,
    two_way_delay_s,
    wavelength_m,
)

# SI Brochure, 9th ed. (BIPM 2019): c is exact.
C_SI_M_S = 299_792_458.0


def test_speed_of_light_is_the_si_value():
    assert SPEED_OF_LIGHT_M_S == C_SI_M_S


@pytest.mark.parametrize(
    "bandwidth_hz, expected_m",
    [
        (5e6, 30.0),  # common practice: c/(2B) with c ~ 3e8 m/s → 30 m
        (20e6, 7.5),  # common practice: → 7.5 m
    ],
)
def test_range_resolution_is_c_over_2b(bandwidth_hz, expected_m):
    # ~0.07 % apart because the handbook rounds c to 3e8 m/s
    assert range_resolution_m(bandwidth_hz) == pytest.approx(expected_m, rel=1e-3)
    assert range_resolution_m(bandwidth_hz) == pytest.approx(C_SI_M_S / (2 * bandwidth_hz), rel=1e-15)


def test_one_microsecond_two_way_is_about_150_m():
    # Light covers ~300 m in 1 µs, so 1 µs of two-way delay is ~150 m of range (common practice).
    assert range_from_delay_m(1e-6) == pytest.approx(149.896229, abs=1e-6)
    assert two_way_delay_s(149.896229) == pytest.approx(1e-6, rel=1e-9)


def test_wavelength_at_20_mhz_is_15_m():
    # λ = c/f: 20 MHz → 14.99 m (common practice).
    assert wavelength_m(20e6) == pytest.approx(14.9896229, rel=1e-9)


def test_radar_equation_scales_as_r_to_minus_4_and_lambda_squared():
    # Skolnik, Introduction to Radar Systems, 3rd ed., eq. 1.7: Pr = Pt G² λ² σ / ((4π)³ R⁴)
    p1 = radar_equation_power_w(10.0, 1.0, 15.0, 1.0, 1e5)
    assert p1 == pytest.approx(10.0 * 225.0 / ((4 * np.pi) ** 3 * 1e20), rel=1e-12)
    assert radar_equation_power_w(10.0, 1.0, 15.0, 1.0, 2e5) == pytest.approx(p1 / 16, rel=1e-12)


# Harris (1978), Proc. IEEE 66(1), Table 1: 3-dB bandwidth in bins of the rectangle,
# Hanning and Hamming windows. For the compressed pulse the roles of time and
# frequency swap, so the half-power width of |h(t)|² is this many times 1/B.
HARRIS_3DB_WIDTH = {"none": 0.89, "hann": 1.44, "hamming": 1.30}


@pytest.mark.parametrize("window", ["none", "hann", "hamming"])
def test_compressed_pulse_half_power_width_matches_harris(window):
    bandwidth = 10e6
    t = np.linspace(-2 / bandwidth, 2 / bandwidth, 400_001)
    p = compressed_pulse_amplitude(t, bandwidth, window) ** 2
    above = t[p >= 0.5]
    width_in_inverse_b = (above.max() - above.min()) * bandwidth
    assert width_in_inverse_b == pytest.approx(HARRIS_3DB_WIDTH[window], abs=0.01)


# Harris (1978), Proc. IEEE 66(1), Table 1: equivalent noise bandwidth in bins of the rectangle,
# Hanning and Hamming windows (1.00, 1.50, 1.36): for the compressed pulse it is B τ_eff,
# τ_eff = ∫|h|² dt / max|h|².
HARRIS_ENBW_BINS = {"none": 1.00, "hann": 1.50, "hamming": 1.36}


@pytest.mark.parametrize("window", ["none", "hann", "hamming"])
def test_effective_pulse_duration_is_harris_noise_bandwidth(window):
    assert effective_pulse_duration_s(10e6, window) * 10e6 == pytest.approx(HARRIS_ENBW_BINS[window], abs=0.005)
    # and equals a direct numerical ∫|h|² dt of the amplitude response (peak 1)
    t = np.linspace(-400e-6, 400e-6, 8_000_001)
    direct = np.trapezoid(compressed_pulse_amplitude(t, 10e6, window) ** 2, t)
    assert direct == pytest.approx(effective_pulse_duration_s(10e6, window), rel=2e-3)


# Previously the kernel summed to 1 (energy per sample). The shared level convention (README
# "Output") normalises it to a PEAK of 1 for a point target at the sample, and its sum × Δt is
# τ_eff for any Δt ≤ 1/B (Poisson summation: |h|² is band-limited to [−B, B]).
@pytest.mark.parametrize("window", ["none", "hann", "hamming"])
@pytest.mark.parametrize("dt", [100e-9, 75e-9, 37.5e-9, 12.5e-9])
def test_pulse_kernel_is_peak_normalised_and_sums_to_tau_eff(window, dt):
    offsets, weights = pulse_power_kernel(10e6, dt, window)
    assert weights.max() == pytest.approx(1.0, rel=1e-12)
    assert offsets[np.argmax(weights)] == 0
    np.testing.assert_allclose(weights, weights[::-1], rtol=1e-9)
    # truncation: the unweighted |sinc|² at ±64/B, Hamming (a pedestal: sidelobes ∝ 1/t) at ±16/B
    tol = {"none": 2e-3, "hamming": 2e-4, "hann": 1e-6}[window]
    assert weights.sum() * dt == pytest.approx(effective_pulse_duration_s(10e6, window), rel=tol)


def test_amplitude_response_is_the_peak_normalised_pulse():
    t = np.linspace(-3e-7, 3e-7, 61)
    h = pulse_amplitude_response(t, 10e6, "hann")
    np.testing.assert_allclose(h.real, compressed_pulse_amplitude(t, 10e6, "hann"), atol=1e-15)
    assert np.abs(h).max() == pytest.approx(1.0)
