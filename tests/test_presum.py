"""Presumming ([processing] presum): incoherent and coherent sums of consecutive pulses."""

import math
import warnings

import numpy as np
import pytest

from cluttersim import SimulationConfig, SurfaceConfig, simulate
from cluttersim.physics.aperture import ProcessingConfig
from cluttersim.errors import ConfigError, TrackError
from cluttersim.physics.noise import NoiseConfig
from cluttersim.presum import group_mean, presum_track
from cluttersim.physics.radar import RadarConfig
from scenes import UTM_X0_M, UTM_Y0_M, utm_grid, utm_track, write_utm

C = 299_792_458.0  # SI definition
TARGET_EAST_M, TARGET_RADIUS_M, TARGET_CENTRE_Z_M = 700.0, 15.0, -5.0
ALT_M = 1000.0
# 60 MHz: λ = 4.997 m; 20 MHz bandwidth (7.5 m resolution)
RADAR = RadarConfig(center_frequency_hz=60e6, bandwidth_hz=20e6, sample_interval_s=10e-9, samples=128)
SURFACE = SurfaceConfig("hagfors", {"C": 1000.0, "rho": 0.1})


def target_scene(d):
    """One small spherical cap (a near-point target) 700 m east of the scene centre and nothing
    else: every other cell is nodata, so the cap's echo is alone in the radargram."""
    east, north = utm_grid(400, 5.0)
    r2 = (east - UTM_X0_M - TARGET_EAST_M) ** 2 + (north - UTM_Y0_M) ** 2
    z = np.sqrt(np.clip(TARGET_RADIUS_M**2 - r2, 0, None)) + TARGET_CENTRE_Z_M
    z = np.where(r2 < 25.0**2, np.clip(z, 0, None), -32768.0)
    return write_utm(d / "target.tif", z, 5.0)


def run(dem, track, **proc):
    noise = proc.pop("noise", None)
    cfg = SimulationConfig(radar=RADAR, surface=SURFACE, processing=ProcessingConfig(**proc), noise=noise)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the nodata around the target
        return simulate(dem, track, cfg, sources=False)


def test_presum_keys_are_checked():
    with pytest.raises(ConfigError, match=r"\[processing\] presum = 0: expected an integer number of pulses >= 1"):
        ProcessingConfig(presum=0)
    with pytest.raises(ConfigError, match="presum_mode = 'coherent' sums complex echoes: expected mode = 'coherent'"):
        ProcessingConfig(presum=4, presum_mode="coherent")
    with pytest.raises(ConfigError, match=r"presum_mode = 'both'"):
        ProcessingConfig(presum=4, presum_mode="both")


def test_group_mean_and_track_centres():
    p = np.arange(10.0)[:, None] * np.ones((1, 3))
    np.testing.assert_array_equal(group_mean(p, 3)[:, 0], [1.0, 4.0, 7.0])  # the 10th row is left over
    from cluttersim import Track

    t = Track(np.linspace(0, 0.9, 10), np.array([179.8, 179.9, -180.0, -179.9] * 2 + [-179.8, -179.7]), np.full(10, 5e3),
              np.arange(10.0))  # fmt: skip
    with pytest.warns(UserWarning, match="10 pulses are not a multiple of presum = 4; the last 2 are dropped"):
        out = presum_track(t, 4)
    np.testing.assert_allclose(out.lat_deg, [0.15, 0.55])
    np.testing.assert_allclose(out.lon_deg, [179.95, 179.95])  # across ±180°: the unwrapped mean, not 0°
    np.testing.assert_allclose(out.time_s, [1.5, 5.5])


@pytest.fixture(scope="module")
def target(tmp_path_factory):
    return target_scene(tmp_path_factory.mktemp("target"))


def test_coherent_presum_follows_the_array_factor_of_its_pulses(target):
    """N pulses d apart summed coherently weight an echo by |(1/N) Σ_j exp(−i 4π R_j / λ)|²
    (uniform linear array factor, two-way phase; common practice, e.g. Balanis 2005 §6.3):
    full power abeam, a null where the phase turns by 2π across the N pulses (y ≈ λR/2Nd ≈ 300 m).
    The cap's facets spread ±15 m along track, each with its own array factor shifted by its
    offset: the lobe is 300 m wide so that this smearing stays within the tolerance."""
    n, d = 10, 1.0
    along = np.arange(-600.0, 600.0 + d / 2, d)
    track = utm_track(np.full(along.size, UTM_X0_M), UTM_Y0_M + along, ALT_M)
    single = run(target, track, mode="coherent", random_phase=False)["power"].values.astype(float)
    summed = run(target, track, mode="coherent", random_phase=False, presum=n, presum_mode="coherent")
    energy = np.nansum(summed["power"].values.astype(float), axis=1)
    reference = group_mean(np.nansum(single, axis=1), n)  # mean single-pulse energy of each run of pulses
    ratio = energy / reference
    lam = C / 60e6
    dist = math.hypot(TARGET_EAST_M, ALT_M - TARGET_CENTRE_Z_M)
    r = np.sqrt(dist**2 + along**2) - TARGET_RADIUS_M  # range to the cap's nearest point
    predicted = np.abs(group_mean(np.exp(-4j * math.pi * r / lam), n)) ** 2
    y = group_mean(along, n)
    assert summed.sizes["trace"] == along.size // n
    np.testing.assert_allclose(summed["lat"].values, group_mean(track.lat_deg, n), atol=1e-12)
    abeam = np.argmin(np.abs(y))
    assert ratio[abeam] > 0.9
    np.testing.assert_allclose(ratio, predicted, atol=0.08)
    null_y = lam * dist / (2 * n * d)  # first null of the linearised array factor
    assert np.all(ratio[np.abs(np.abs(y) - null_y) < 12.0] < 0.08)


def test_presumming_noise_coherent_gain_and_incoherent_smoothing(target):
    """A hovering antenna (all pulses at one place) over the target, with receiver noise:
    coherent presumming keeps the echo and divides the noise power by N (coherent integration
    gain N, common practice); incoherent presumming keeps the mean noise power P_n and its
    standard deviation falls to P_n/√N (sum of N exponential powers: gamma law of shape N,
    Goodman 1976)."""
    n, pulses = 16, 16 * 40
    track = utm_track(np.full(pulses, UTM_X0_M), np.full(pulses, UTM_Y0_M), ALT_M)
    noise = NoiseConfig(noise_temperature_k=1.0, seed=3)  # a quiet receiver: the echo stands 44 dB above P_n/N
    p_n = noise.noise_power_w(RADAR.bandwidth_hz)
    clean = run(target, utm_track([UTM_X0_M], [UTM_Y0_M], ALT_M), mode="coherent", random_phase=False)
    echo = np.nanmax(clean["power"].values[0])
    peak = int(np.nanargmax(clean["power"].values[0]))
    quiet = slice(peak + 30, RADAR.samples)  # after the target's echo: noise only
    coh = run(target, track, mode="coherent", random_phase=False, presum=n, presum_mode="coherent", noise=noise)
    inc = run(target, track, mode="coherent", random_phase=False, presum=n, presum_mode="incoherent", noise=noise)
    coh_noise = coh["power"].values[:, quiet].astype(float)
    inc_noise = inc["power"].values[:, quiet].astype(float)
    # 40 traces × ~60 samples: σ(mean)/mean ≈ 1/√2400 = 2 % (coherent), 0.5 % (incoherent)
    assert coh_noise.mean() == pytest.approx(p_n / n, rel=0.08)
    assert inc_noise.mean() == pytest.approx(p_n, rel=0.03)
    assert inc_noise.std() / inc_noise.mean() == pytest.approx(1 / math.sqrt(n), rel=0.1)
    assert echo > 1e3 * p_n / n
    np.testing.assert_allclose(coh["power"].values[:, peak], echo, rtol=0.05)


def test_incoherent_presum_averages_the_pulses_power(target):
    along = np.arange(-40.0, 40.0, 4.0)
    track = utm_track(np.full(along.size, UTM_X0_M), UTM_Y0_M + along, ALT_M)
    # a fixed window: every pulse is recorded on the same delays with or without presumming
    fixed = RadarConfig(**{**RADAR.to_dict(), "window_start_s": 2 * 1180.0 / C})
    cfg = SimulationConfig(radar=fixed, surface=SURFACE)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        each = simulate(target, track, cfg)
        four = simulate(target, track, SimulationConfig(radar=fixed, surface=SURFACE,
                                                        processing=ProcessingConfig(presum=4)))  # fmt: skip
    np.testing.assert_allclose(four["power"].values, group_mean(each["power"].values.astype(float), 4), rtol=1e-5)
    # side fractions are of the summed power: f = Σ f_i P_i / Σ P_i over the pulses of each run
    p = np.nan_to_num(each["power"].values.astype(float))
    weighted = group_mean(np.nan_to_num(each["right_fraction"].values) * p, 4) / group_mean(p, 4)
    strong = four["power"].values > 1e-3 * np.nanmax(four["power"].values)
    np.testing.assert_allclose(four["right_fraction"].values[strong], weighted[strong], rtol=1e-5)
    assert np.all(four["left_fraction"].values[strong] == 0)  # the target is east of a northbound track


def test_fewer_pulses_than_presum_is_an_error(target):
    track = utm_track(np.full(3, UTM_X0_M), UTM_Y0_M + np.arange(3.0), ALT_M)
    with pytest.raises(TrackError, match="3 pulses, fewer than \\[processing\\] presum = 4"):
        run(target, track, presum=4)
