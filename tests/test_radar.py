"""Ranging physics against handbook values."""

import numpy as np
import pytest

from cluttersim.constants import SPEED_OF_LIGHT_M_S
from cluttersim.radar import (
    compressed_pulse_amplitude,
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


@pytest.mark.parametrize("window", ["none", "hann", "hamming"])
def test_pulse_kernel_preserves_energy_and_is_symmetric(window):
    offsets, weights = pulse_power_kernel(10e6, 37.5e-9, window)
    assert weights.sum() == pytest.approx(1.0, rel=1e-12)
    np.testing.assert_allclose(weights, weights[::-1], rtol=1e-9)
    assert offsets[np.argmax(weights)] == 0
